"""Command line: parse, call the library, print.  Nothing else lives here: the texts,
tables and documents it prints are built in the output wing (:mod:`spurplan.output`).

Only click is imported at module level so that ``spurplan --help`` starts fast;
numpy and the rest load when a command runs.
"""

from __future__ import annotations

import sys
from typing import Any, NamedTuple

import click

from spurplan import __version__
from spurplan.notices import PLANNING_NOTICE, POWER_NOTICE

EPILOG = f"{PLANNING_NOTICE} {POWER_NOTICE}"
FORMATS = ("table", "csv", "json")
COMBINES = ("worst", "power", "phase")


class _Group(click.Group):
    """Maps every input error to one line on stderr and exit status 2."""

    def main(self, *args, **kwargs):
        from spurplan.output.escaping import terminal_streams

        # Everything printed (tables, verdicts, notes, errors) passes the terminal escaping
        # here, once: names from users' files cannot act on the terminal or hide text.
        with terminal_streams():
            return self._main(*args, **kwargs)

    def _main(self, *args, **kwargs):
        from spurplan.errors import SpurplanError

        try:
            return super().main(*args, standalone_mode=False, **kwargs)  # type: ignore[call-overload]
        except click.exceptions.Exit as exc:
            sys.exit(exc.exit_code)
        except _Interrupted:
            import signal

            # Already ending on the interrupt: a later SIGINT (the terminal's, or one a
            # library's thread raises while the cluster shuts down) must not turn the exit
            # into a death by signal.  Only in the command-line process (arguments from
            # sys.argv): a caller that passes its own (click's test runner) goes on.
            if not args and kwargs.get("args") is None:
                signal.signal(signal.SIGINT, signal.SIG_IGN)
            click.echo("spurplan: interrupted", err=True)
            sys.exit(130)  # 128 + SIGINT, as shells report it (common practice, no source)
        except click.exceptions.Abort:
            click.echo("spurplan: aborted", err=True)
            sys.exit(130)
        except click.UsageError as exc:
            hint = f" (see '{exc.ctx.command_path} --help')" if exc.ctx else ""
            click.echo(f"spurplan: error: {exc.format_message()}{hint}", err=True)
            sys.exit(2)
        except click.ClickException as exc:
            click.echo(f"spurplan: error: {exc.format_message()}", err=True)
            sys.exit(2)
        except SpurplanError as exc:
            # One line, whatever the message holds (a name with a line break, say); the
            # library's argument names shown as this command's options.
            shown = exc.shown(exc.options)
            click.echo("spurplan: error: " + " ".join(shown.split()), err=True)
            sys.exit(2)

    def invoke(self, ctx):
        # Ctrl-C in a command: click would print an empty line and "Aborted!"; spurplan
        # prints one line (in _main) and exits 130.
        from spurplan.errors import SpurplanError

        try:
            return super().invoke(ctx)
        except KeyboardInterrupt:
            raise _Interrupted() from None
        except SpurplanError as exc:
            exc.options = _options_of(self.commands.get(ctx.invoked_subcommand or ""))
            raise


# Library parameters named in errors -> the command's own parameter, where they differ.
_OPTION_ALIASES = {
    "remedy": {"path": "write_file", "margin_db": "margin", "at": "at_stage"},
    "report": {"path": "out_file"},
    "fit": {"path": "write_file", "harmonic_at_dbm": "h_at"},
    "if-windows": {"start": "rf_start", "stop": "rf_stop", "step": "rf_step"},
    "compare": {"rbw_hz": "rbw", "reference_level_dbm": "reference_level", "tolerance_hz": "tolerance"},
    "check": {"rbw_hz": "rbw", "reference_level_dbm": "reference_level"},
}


def _options_of(command) -> dict[str, str]:
    """Library parameter name -> this command's option (``"step"`` -> ``"--step"``)."""
    if command is None:
        return {}
    options = {p.name: p.opts[0] for p in command.params if isinstance(p, click.Option) and p.name}
    aliases = _OPTION_ALIASES.get(command.name or "", {})
    return {**options, **{lib: options[opt] for lib, opt in aliases.items() if opt in options}}


class _Interrupted(Exception):
    """A command was interrupted (SIGINT); not a KeyboardInterrupt, so click passes it on."""


@click.group(cls=_Group, epilog=EPILOG)
@click.version_option(__version__, prog_name="spurplan")
def main():
    """Plan the spurious emissions of a transmitter lineup.

    Computes every harmonic and intermodulation product at every stage of a
    lineup (amplifiers, pads, ...) with an exact multi-tone engine, and reports
    levels, dBc and which stage makes each product.  With no LINEUP, commands use
    a bundled example.
    """


def _machine_output(fmt: str, doc) -> bool:
    """Print a :class:`~spurplan.output.documents.Document` for ``--format json|csv``;
    False when the caller prints a table."""
    if fmt == "json":
        click.echo(doc.json(), nl=False)
    elif fmt == "csv":
        click.echo(doc.csv(), nl=False)
    else:
        return False
    return True


# The stderr line naming the mode whose notes follow, printed before its first note only
# (a mode without notes prints none).
_pending_marker: list[str] = []


def _echo_lines(lines, err: bool = False) -> None:
    for line in lines:
        if err and _pending_marker:
            click.echo(_pending_marker.pop(), err=True)
        click.echo(line, err=err)


def _mark_mode(marker: str) -> None:
    """Make ``marker`` the line printed before the next note on stderr (replacing any unused)."""
    _pending_marker[:] = [marker]


def _lineup_arg(f):
    return click.argument("lineup", required=False, type=click.Path(dir_okay=False))(f)


class _OutputFile(click.Path):
    """An output file, refused before any work when it is no file to write (outputs.check_target)."""

    def __init__(self):
        super().__init__(dir_okay=False)

    def convert(self, value, param, ctx):
        from spurplan.output.files import OutputError, check_target

        value = super().convert(value, param, ctx)
        try:
            check_target(value)
        except OutputError as exc:
            self.fail(str(exc), param, ctx)
        return value


def _format_option(f):
    return click.option("--format", "fmt", type=click.Choice(FORMATS), default="table", show_default=True)(f)


def _combine_option(f):
    return click.option(
        "--combine", type=click.Choice(COMBINES), default=None, help="Override [analysis] combine."
    )(f)


def _plot_option(help_text: str):
    return click.option("--plot", "plot_file", type=_OutputFile(), help=help_text)


def _plot_size_option(f):
    return click.option(
        "--plot-size", default="1200x700", show_default=True, help="Figure size in pixels, WIDTHxHEIGHT."
    )(f)


def _mode_option(f):
    return click.option(
        "--mode",
        "mode",
        multiple=True,
        metavar="NAME",
        help='Run this mode of LINEUP (a [[mode]] name; repeatable); "all", the default, runs every mode.',
    )(f)


def _load_modes(path, mode):
    """The selected modes of the lineup file (or of the bundled example)."""
    from spurplan.io.modes import load_modes
    from spurplan.io.resources import example_path

    return load_modes(path if path is not None else example_path(), mode or None)


class _Shown(NamedTuple):
    """One mode's output: what the single-mode command prints, and its verdict."""

    doc: Any  # the Document printed for --format json|csv
    text: str  # the --format table text
    code: int = 0  # its exit status
    status: str | None = None  # PASS / UNCERTAIN / INCOMPLETE / FAIL, None without a verdict
    line: str = ""  # its verdict in one line, for the list under the line over all modes


def _over_modes(modes, fmt: str, run, title: str | None = None, overall=None) -> int:
    """Run ``run(mode, index)`` for every mode and print; returns the exit status.

    One mode prints exactly as the command always has.  Several print each mode under a
    heading with its name, then (for a command with a verdict, ``title``) the line over
    all modes: the worst mode's status, FAIL if any fails; the exit status is the worst
    mode's.  ``overall(shown)`` may give that line instead (the yield's).
    """
    from spurplan.model.modes import worst_status
    from spurplan.output.modes import mode_heading, mode_marker, modes_document
    from spurplan.output.verdicts import mode_line, modes_verdict

    n = len(modes)
    shown = []
    for i, m in enumerate(modes, start=1):
        if n > 1:
            _mark_mode(mode_marker(m.label, i, n))
        shown.append(run(m, i))
    _pending_marker.clear()
    if n == 1:
        if not _machine_output(fmt, shown[0].doc):
            click.echo(shown[0].text, nl=False)
        return shown[0].code
    status = None
    if overall is not None:
        verdict = overall(shown)
    elif title is not None:
        entries = [(m.label, s.status) for m, s in zip(modes, shown, strict=True)]
        verdict = modes_verdict(title, entries)
        status = worst_status(s for _, s in entries)
    else:
        verdict = ""
    lines = [s.line for s in shown]
    doc = modes_document(modes, [s.doc for s in shown], status, verdict, lines)
    if not _machine_output(fmt, doc):
        for i, (m, s) in enumerate(zip(modes, shown, strict=True), start=1):
            click.echo(mode_heading(m.label, i, n) + s.text, nl=False)
        if verdict:
            click.echo(verdict)
            _echo_lines(mode_line(m.label, s.line) for m, s in zip(modes, shown, strict=True) if s.line)
            click.echo(PLANNING_NOTICE)
    return max(s.code for s in shown)


def _mode_files(path, modes, option: str = "--plot"):
    """The file each mode's figure goes to (``None`` for none), each refused before any work."""
    if not path:
        return [None] * len(modes)
    from spurplan.output.files import OutputError, check_target
    from spurplan.output.modes import mode_path

    out = []
    for i, m in enumerate(modes, start=1):
        target = mode_path(path, i, m.name, len(modes))
        try:
            check_target(target)
        except OutputError as exc:
            raise click.BadParameter(str(exc), param_hint=option) from None
        out.append(str(target))
    return out


def _warn_model(lineup) -> None:
    """The lineup's model notes and warnings on stderr (:func:`spurplan.output.terminal.model_warnings`)."""
    from spurplan.output.terminal import model_warnings

    _echo_lines(model_warnings(lineup), err=True)


def _warn(result) -> None:
    """:func:`_warn_model`, then the stages driven past their model (stderr)."""
    from spurplan.output.terminal import run_warnings

    _echo_lines(run_warnings(result), err=True)


@main.command(epilog=EPILOG)
@_lineup_arg
@_mode_option
@click.option("--stage", default=None, help="Report at this stage's output instead of the lineup output.")
@_format_option
@_combine_option
def spectrum(lineup, mode, stage, fmt, combine):
    """Print every product (harmonics, intermodulation) at a node of LINEUP."""
    from spurplan.engine.spectra import is_modulated
    from spurplan.output.documents import products_document
    from spurplan.output.terminal import products_text

    def run(m, _):
        loaded = m.lineup
        if stage is not None:
            loaded.stage_index(stage)
        if is_modulated(loaded):
            from spurplan.analyses.spectrum_view import node_spectrum
            from spurplan.output.documents import spectrum_document
            from spurplan.output.terminal import spectrum_text

            spec, cw = node_spectrum(loaded, stage, combine)
            doc = spectrum_document(spec, loaded, cw, stage, combine)
            _warn(cw)
            return _Shown(doc, spectrum_text(doc))
        result = loaded.run()
        doc = products_document(result, stage, combine)
        _warn(result)
        return _Shown(doc, products_text(result, doc.rows, stage, combine))

    _over_modes(_load_modes(lineup, mode), fmt, run)


@main.command(epilog=EPILOG)
@_lineup_arg
@_mode_option
@_format_option
def budget(lineup, mode, fmt):
    """Print the cascade budget of LINEUP: levels, gains, cascaded IP3, P1dB headroom."""
    from spurplan.output.documents import budget_document
    from spurplan.output.terminal import budget_text

    def run(m, _):
        result = m.lineup.run()
        doc = budget_document(result)
        _warn(result)
        return _Shown(doc, budget_text(result, doc.rows))

    _over_modes(_load_modes(lineup, mode), fmt, run)


@main.command("filter", epilog=EPILOG)
@_lineup_arg
@_mode_option
@click.option("--stage", default=None, help="The filter stage of LINEUP to show.")
@click.option(
    "--family", type=click.Choice(["butterworth", "chebyshev"]), help="Prototype instead of a lineup stage."
)
@click.option("--response", "resp", type=click.Choice(["lowpass", "highpass", "bandpass"]), default="lowpass")
@click.option("--order", type=int, help="Prototype order.")
@click.option("--cutoff", help="Prototype cutoff, e.g. '520 MHz'.")
@click.option("--center", help="Band-pass centre, e.g. '450 MHz'.")
@click.option("--bandwidth", help="Band-pass bandwidth, e.g. '40 MHz'.")
@click.option("--ripple", help="Chebyshev ripple, e.g. '0.1 dB'.")
@click.option("--q-inductor", type=float, help="Unloaded Q of the inductors.")
@click.option("--q-capacitor", type=float, help="Unloaded Q of the capacitors.")
@click.option("--impedance", default="50 ohm", show_default=True, help="System impedance for a prototype.")
@click.option("--carrier", help="With a prototype: show the response at the harmonics of this frequency.")
@click.option("--plot", "plot_file", type=_OutputFile(), help="Draw |S21| to this PNG/SVG/PDF file.")
@click.option("--touchstone", "ts_file", type=_OutputFile(), help="Write the network to this .s2p file.")
@_format_option
@_combine_option
def filter_cmd(
    lineup,
    mode,
    stage,
    family,
    resp,
    order,
    cutoff,
    center,
    bandwidth,
    ripple,
    q_inductor,
    q_capacitor,
    impedance,
    carrier,
    plot_file,
    ts_file,
    fmt,
    combine,
):
    """Show a filter: element values and its response at the product frequencies.

    Either a filter stage of LINEUP (--stage NAME), or a prototype given on the
    command line (--family, --order, --cutoff ...).
    """
    from spurplan.analyses.filter_view import prototype_view, stage_view
    from spurplan.output.documents import filter_document
    from spurplan.output.terminal import filter_text, note_lines

    if family is not None:
        if combine is not None:
            raise click.UsageError(
                "--combine applies to a lineup's filter stage (--stage NAME), not a prototype"
            )
        spec = {
            "family": family,
            "response": resp,
            "order": order,
            "cutoff": cutoff,
            "center": center,
            "bandwidth": bandwidth,
            "ripple": ripple,
            "q_inductor": q_inductor,
            "q_capacitor": q_capacitor,
        }
        if carrier is not None:
            from spurplan.fields import CARRIER_FREQ

            _parse("freq", carrier, "--carrier", CARRIER_FREQ)  # "0 Hz" would show nothing
        view = prototype_view({k: v for k, v in spec.items() if v is not None}, impedance, carrier)
        _show_filter(view, plot_file, ts_file, fmt)
        return
    if stage is None:
        raise click.UsageError("give --stage NAME (a filter stage of LINEUP) or a prototype (--family ...)")
    modes = _load_modes(lineup, mode)
    plots, networks = _mode_files(plot_file, modes), _mode_files(ts_file, modes, "--touchstone")

    def run(m, i):
        view = stage_view(m.lineup, stage, combine)
        _show_filter(view, plots[i - 1], networks[i - 1], None)
        _echo_lines(note_lines(view.notes), err=True)
        return _Shown(filter_document(view), filter_text(view) + PLANNING_NOTICE + "\n")

    _over_modes(modes, fmt, run)


def _show_filter(view, plot_file, ts_file, fmt) -> None:
    """A filter's figure and network files; its text or document when ``fmt`` is given."""
    from spurplan.output.documents import filter_document
    from spurplan.output.terminal import filter_text, note_lines

    if plot_file:
        from spurplan.output.plots import save_filter_plot

        save_filter_plot(view, plot_file)
    if ts_file:
        from spurplan.output.files import save_touchstone

        save_touchstone(view, ts_file)
    if fmt is None:
        return
    if fmt != "table":
        _machine_output(fmt, filter_document(view))
        return
    click.echo(filter_text(view), nl=False)
    _echo_lines(note_lines(view.notes), err=True)
    click.echo(PLANNING_NOTICE)


def _trace_options(f):
    """The options that say how a trace was measured, where its file does not."""
    f = click.option(
        "--columns",
        help="The trace's CSV columns by name, e.g. 'freq=Frequency,level=Amplitude'.",
    )(f)
    f = click.option(
        "--reference-level", "reference_level", help="The analyser's reference level, e.g. '20 dBm'."
    )(f)
    f = click.option("--detector", help="The trace's detector: peak, rms, average, sample or negative-peak.")(
        f
    )
    return click.option(
        "--rbw", help="The trace's resolution bandwidth, e.g. '100 kHz' (if its file does not say)."
    )(f)


def _read_trace(path, rbw, detector, reference_level, columns):
    """The trace file read with the options' RBW, detector, reference level and columns."""
    from spurplan.fields import Within
    from spurplan.io.traces import parse_columns, read_trace

    return read_trace(
        path,
        rbw_hz=None
        if rbw is None
        else _parse("freq", rbw, "--rbw", Within("a resolution bandwidth", 1.0, 1e9, "Hz")),
        detector=detector,
        reference_level_dbm=None
        if reference_level is None
        else _parse("power", reference_level, "--reference-level"),
        columns=None if columns is None else parse_columns(columns),
    )


def _size(text: str) -> tuple[int, int]:
    try:
        w, h = (int(v) for v in text.lower().split("x"))
    except ValueError:
        raise click.BadParameter(
            f"{text!r}: expected WIDTHxHEIGHT in pixels, e.g. 1200x700", param_hint="--plot-size"
        ) from None
    if not (200 <= w <= 8000 and 200 <= h <= 8000):
        raise click.BadParameter(f"{text!r}: expected 200 to 8000 pixels each way", param_hint="--plot-size")
    return w, h


@main.command(epilog=EPILOG)
@_lineup_arg
@_mode_option
@_format_option
@_combine_option
@_plot_option("Draw the spectrum against the mask (PNG/SVG/PDF).")
@_plot_size_option
@click.option(
    "--strict",
    is_flag=True,
    help="Exit 1 also when the model is incomplete (a stage lacks a figure) or misses a stated figure.",
)
@click.option(
    "--trace",
    "trace_file",
    type=click.Path(dir_okay=False),
    help="Draw this measured trace (CSV or two-column text) beside the prediction in --plot.",
)
@_trace_options
def check(
    lineup,
    mode,
    fmt,
    combine,
    plot_file,
    plot_size,
    strict,
    trace_file,
    rbw,
    detector,
    reference_level,
    columns,
):
    """Check every product at the output of LINEUP against its [mask].

    The verdict is PASS, FAIL, INCOMPLETE (the modelled products pass but a stage
    lacks a figure, so some products are not modelled) or UNCERTAIN (they pass but
    the model misses a stated figure, or its levels did not settle).  Exit status: 0 the mask is met, 1 it is
    violated (with --strict or [analysis] strict = true: also INCOMPLETE and
    UNCERTAIN), 2 bad input.  Over several modes the verdict is the worst mode's and
    so is the exit status.
    """
    from spurplan.analyses.check import check as run_check
    from spurplan.output.documents import check_document
    from spurplan.output.terminal import check_text, note_lines
    from spurplan.output.verdicts import check_verdict

    size = _size(plot_size)
    if trace_file is not None and plot_file is None:
        raise click.UsageError("--trace draws the measured trace into the figure: give --plot FILE as well")
    trace = _read_trace(trace_file, rbw, detector, reference_level, columns) if trace_file else None
    modes = _load_modes(lineup, mode)
    plots = _mode_files(plot_file, modes)

    def run(m, i):
        outcome = run_check(m.lineup, combine=combine)
        _warn(outcome.result)
        _echo_lines(note_lines(outcome.notes), err=True)
        if plots[i - 1]:
            from spurplan.output.plots import save_check_plot

            save_check_plot(outcome, plots[i - 1], size, trace)
        code = 1 if outcome.strict_failure(True if strict else None) else 0
        line = check_verdict(outcome)
        return _Shown(check_document(outcome), check_text(outcome), code, outcome.status, line)

    sys.exit(_over_modes(modes, fmt, run, "VERDICT"))


@main.command(epilog=EPILOG)
@click.argument("lineup", type=click.Path(dir_okay=False))
@click.argument("trace_file", metavar="TRACE", type=click.Path(dir_okay=False))
@_mode_option
@_trace_options
@click.option(
    "--threshold",
    default="10 dB",
    show_default=True,
    help="How far above the trace's noise floor a peak must stand.",
)
@click.option("--tolerance", help="Largest frequency difference of a match, e.g. '50 kHz' (default: 3 RBW).")
@_format_option
@_combine_option
@_plot_option("Draw the trace beside the predicted spectrum and the mask (PNG/SVG/PDF).")
@_plot_size_option
def compare(
    lineup,
    trace_file,
    mode,
    rbw,
    detector,
    reference_level,
    columns,
    threshold,
    tolerance,
    fmt,
    combine,
    plot_file,
    plot_size,
):
    """Compare a measured spectrum TRACE at the output of LINEUP with the plan.

    Finds the trace's peaks (THRESHOLD above its noise floor), matches them to the
    predicted products by frequency, and prints predicted, measured, difference and
    the stage the model says makes each; peaks no product explains and predicted
    products above the floor that were not seen are listed too.  With a [mask], the
    trace itself is judged against every rule in the rule's reference bandwidth.
    Exit status: 0, or 1 when the trace fails the mask; 2 bad input.
    """
    from spurplan.analyses.bench_compare import compare as run_compare
    from spurplan.fields import Within
    from spurplan.output.bench_compare import compare_document, compare_notes, compare_text
    from spurplan.output.provenance import provenance
    from spurplan.output.terminal import note_lines

    size = _size(plot_size)
    threshold_db = _parse(
        "db", threshold, "--threshold", Within("a threshold over the floor", 0.1, 100.0, "dB")
    )
    tolerance_hz = (
        None
        if tolerance is None
        else _parse("freq", tolerance, "--tolerance", Within("a tolerance", 1.0, 1e9, "Hz"))
    )
    # The trace first: a malformed one is refused before the lineup's models are fitted.
    trace = _read_trace(trace_file, rbw, detector, reference_level, columns)
    modes = _load_modes(lineup, mode)
    if len(modes) > 1:
        names = ", ".join(repr(m.name) for m in modes)
        raise click.UsageError(f"a trace is measured in one mode: give --mode NAME (one of {names})")
    loaded = modes[0].lineup
    found = run_compare(loaded, trace, threshold_db=threshold_db, tolerance_hz=tolerance_hz, combine=combine)
    _warn_model(loaded)
    _echo_lines(note_lines(compare_notes(found)), err=True)
    if plot_file:
        from spurplan.analyses.check import check as run_check
        from spurplan.output.plots import save_check_plot

        save_check_plot(run_check(loaded, combine=combine), plot_file, size, trace)
    if not _machine_output(fmt, compare_document(found, provenance(loaded))):
        click.echo(compare_text(found), nl=False)
    sys.exit(1 if found.mask is not None and found.mask.status == "FAIL" else 0)


@main.command(epilog=EPILOG)
@click.argument("name", required=False)
@_format_option
def bands(name, fmt):
    """List the shipped rule sets and band lists, or show NAME with its sources."""
    from spurplan.analyses.bands_view import band_rows, catalogue_rows
    from spurplan.output.documents import bands_document
    from spurplan.output.terminal import catalogue_text, ruleset_text

    if name is None:
        rows, summary = catalogue_rows(), dict[str, object]()
    else:
        rows, summary = band_rows(name)
    if not _machine_output(fmt, bands_document(rows, summary)):
        click.echo(catalogue_text(rows) if name is None else ruleset_text(rows, summary), nl=False)


_scheduler_option = click.option(
    "--scheduler", help="Address of a running dask.distributed scheduler, e.g. tcp://127.0.0.1:8786."
)
_workers_option = click.option(
    "--workers", type=click.IntRange(1, 256), help="Start a local Dask cluster with this many workers."
)


def _cluster_choice(scheduler, workers):
    """The checked scheduler address (or None); --scheduler and --workers exclude each other."""
    from spurplan.analyses.cluster import check_scheduler_address

    if scheduler is not None and workers is not None:
        raise click.UsageError("give either --scheduler or --workers")
    if scheduler is not None:
        scheduler = check_scheduler_address(scheduler)  # '' is an error, not "in process"
    return scheduler


def _progress(total: int, label: str):
    """A progress bar on a terminal (stderr), nothing when piped."""
    import contextlib

    if total < 4 * 2000 or not sys.stderr.isatty():
        return contextlib.nullcontext(None)
    from spurplan.output.escaping import raw_stream

    # The bar's own carriage returns and cursor codes go to the real stream.
    return click.progressbar(length=total, label=label, file=raw_stream(sys.stderr))


def _parse(kind, text, option, within=None):
    """``text`` read as a ``kind`` quantity, within ``within`` (a ``fields.Within``) if given."""
    from spurplan.errors import UnitError
    from spurplan.units import parse_freq_hz, parse_gain_db, parse_power_dbm

    parse = {"power": parse_power_dbm, "freq": parse_freq_hz, "db": parse_gain_db}[kind]
    try:
        value = parse(text)
    except UnitError as exc:
        raise click.BadParameter(str(exc), param_hint=option) from None
    if within is not None and value not in within:
        raise click.BadParameter(f"{text!r}: {within.expected()}", param_hint=option)
    return value


@main.command(epilog=EPILOG)
@_lineup_arg
@_mode_option
@click.option("--start", required=True, help="First drive, e.g. '-20 dBm' (input of the strongest carrier).")
@click.option("--stop", required=True, help="Last drive, e.g. '+10 dBm'.")
@click.option("--step", required=True, help="Drive step, e.g. '0.5 dB'.")
@click.option("--target-output", is_flag=True, help="Start/stop are the carrier's output power instead.")
@_format_option
@_combine_option
@click.option("--plot", "plot_file", type=_OutputFile(), help="Draw products and limits against drive.")
@_plot_size_option
@_scheduler_option
@_workers_option
def drive(
    lineup, mode, start, stop, step, target_output, fmt, combine, plot_file, plot_size, scheduler, workers
):
    """Sweep the drive of LINEUP: products against drive and the highest compliant drive.

    Over several modes each mode is swept, and the line over all modes says whether
    each mode's own drive (its strongest carrier's input power) is within its
    compliant range: FAIL if any is above it.
    """
    from spurplan.analyses.modes import drive_standing
    from spurplan.analyses.sweep import drive_sweep
    from spurplan.io.channels import sweep_points
    from spurplan.output.documents import drive_document
    from spurplan.output.terminal import drive_text
    from spurplan.output.verdicts import drive_mode_line

    lo, hi = _parse("power", start, "--start"), _parse("power", stop, "--stop")
    dstep = _parse("db", step, "--step")
    size = _size(plot_size)
    scheduler = _cluster_choice(scheduler, workers)
    modes = _load_modes(lineup, mode)
    plots = _mode_files(plot_file, modes)
    n = len(sweep_points(lo, hi, dstep, "drive", "dBm", "dB"))

    def run(m, i):
        lu = m.lineup
        with _progress(n, "drive sweep") as bar:
            sw = drive_sweep(
                lu,
                lo,
                hi,
                dstep,
                target_output=target_output,
                combine=combine,
                progress=None if bar is None else bar.update,
                scheduler=scheduler,
                workers=workers,
            )
        _warn_model(lu)
        if plots[i - 1]:
            from spurplan.output.plots import save_drive_plot

            save_drive_plot(sw, plots[i - 1], size)
        standing = drive_standing(sw)
        return _Shown(drive_document(sw), drive_text(sw), 0, standing.status, drive_mode_line(standing))

    # Exit 0 whatever the drive found, as for one mode: the sweep is an answer, not a check.
    sys.exit(_over_modes(modes, fmt, run, "DRIVE"))


def _channel_choice(start, stop, step, channel_file):
    """Channels (Hz) from --channels FILE or --start/--stop/--step; None when neither is given
    (as ``tune`` reads them; ``remedy`` then designs over the lineup's [report] tune range)."""
    from spurplan.io.channels import read_channels, sweep_points

    if channel_file:
        if start or stop or step:
            raise click.UsageError("give either --channels FILE or --start/--stop/--step")
        return read_channels(channel_file)
    if not (start or stop or step):
        return None
    if not (start and stop and step):
        raise click.UsageError("give --start, --stop and --step (or --channels FILE)")
    lo, hi = _parse("freq", start, "--start"), _parse("freq", stop, "--stop")
    return sweep_points(lo, hi, _parse("freq", step, "--step"), "channel", "Hz")


@main.command(epilog=EPILOG)
@_lineup_arg
@_mode_option
@click.option("--start", help="First carrier frequency, e.g. '460 MHz'.")
@click.option("--stop", help="Last carrier frequency, e.g. '470 MHz'.")
@click.option("--step", help="Channel step, e.g. '12.5 kHz'.")
@click.option(
    "--channels",
    "channel_file",
    type=click.Path(dir_okay=False),
    help="A file of carrier frequencies, one per line with unit.",
)
@click.option(
    "--per-channel",
    is_flag=True,
    help="Also list every channel's products that fail or land in a protected band (table format).",
)
@_format_option
@_combine_option
@_plot_option("Draw product frequency against carrier frequency (LO frequency with a mixer).")
@_plot_size_option
@_scheduler_option
@_workers_option
def tune(
    lineup,
    mode,
    start,
    stop,
    step,
    channel_file,
    per_channel,
    fmt,
    combine,
    plot_file,
    plot_size,
    scheduler,
    workers,
):
    """Sweep the carrier (with a mixer, the first LO) over a tuning range: per product and rule
    or protected band, where it fails or lands in a band and its worst channel.

    Without --start/--stop/--step or --channels, each mode is swept over its own
    [report] tune range.  Exit status: 0 every channel meets the mask (in every mode
    run), 1 a channel fails, 2 bad input.
    """
    from spurplan.analyses.modes import tune_status
    from spurplan.analyses.sweep import tune_sweep
    from spurplan.io.channels import sweep_points
    from spurplan.output.documents import tune_document
    from spurplan.output.terminal import tune_text
    from spurplan.output.verdicts import tune_mode_line

    size = _size(plot_size)
    freqs = _channel_choice(start, stop, step, channel_file)
    scheduler = _cluster_choice(scheduler, workers)
    modes = _load_modes(lineup, mode)
    if freqs is None and not all(m.lineup.report is not None and m.lineup.report.tune for m in modes):
        raise click.UsageError(
            "give --start, --stop and --step (or --channels FILE), or a [report] tune range in every mode run"
        )
    plots = _mode_files(plot_file, modes)

    def run(m, i):
        lu = m.lineup
        channels = freqs
        if channels is None:
            assert lu.report is not None and lu.report.tune is not None  # refused above otherwise
            t_start, t_stop, t_step = lu.report.tune
            channels = sweep_points(t_start, t_stop, t_step, "channel", "Hz")
        with _progress(len(channels), "tuning sweep") as bar:
            sw = tune_sweep(
                lu,
                channels,
                combine=combine,
                progress=None if bar is None else bar.update,
                scheduler=scheduler,
                workers=workers,
            )
        _warn_model(lu)
        if plots[i - 1]:
            from spurplan.output.plots import save_tune_plot

            save_tune_plot(sw, plots[i - 1], size)
        status = tune_status(sw)
        return _Shown(
            tune_document(sw),
            tune_text(sw, per_channel),
            0 if sw.passed else 1,
            status,
            tune_mode_line(sw, status),
        )

    sys.exit(_over_modes(modes, fmt, run, "TUNING RANGE"))


@main.command(epilog=EPILOG)
@_lineup_arg
@_mode_option
@click.option(
    "--at",
    "at_stage",
    default=None,
    help="Insert the filter after this stage (default: after the last amplifier).",
)
@click.option(
    "--margin", "margin", default="3 dB", show_default=True, help="Margin target every product must meet."
)
@click.option(
    "--write",
    "write_file",
    type=_OutputFile(),
    help="Write the lineup with the filter inserted to this file.",
)
@click.option(
    "--q-inductor",
    "q_inductor",
    help='Unloaded Q of the proposed filter\'s inductors, or "lossless"  [default: 100, common practice, no source]',
)
@click.option(
    "--q-capacitor",
    "q_capacitor",
    help='Unloaded Q of its capacitors, or "lossless"  [default: 500, the same]',
)
@click.option(
    "--floor",
    "floor",
    help='Its stopband floor (leakage past the ladder), or "none" for the ideal ladder  [default: -80 dB, the same]',
)
@click.option("--start", help="First channel, e.g. '150 MHz' (default: the lineup's [report] tune range).")
@click.option("--stop", help="Last channel, e.g. '174 MHz'.")
@click.option("--step", help="Channel step, e.g. '12.5 kHz'.")
@click.option(
    "--channels",
    "channel_file",
    type=click.Path(dir_okay=False),
    help="A file of channels, one frequency per line with unit.",
)
@click.option("--format", "fmt", type=click.Choice(("table", "json")), default="table", show_default=True)
def remedy(
    lineup,
    mode,
    at_stage,
    margin,
    write_file,
    q_inductor,
    q_capacitor,
    floor,
    start,
    stop,
    step,
    channel_file,
    fmt,
):
    """Find the lowest-order synthesized filter that makes LINEUP pass on every channel of every mode.

    The channels are those `tune` would sweep (the carrier, or with a mixer the LO):
    --start/--stop/--step or --channels, else the lineup's [report] tune range, else the
    lineup as written. The filter has parts of finite Q and a stopband floor
    (--q-inductor, --q-capacitor, --floor), written into the snippet it prints; it is
    re-checked on every channel. When no filter helps, it says what would.

    Exit status: 0 when the lineup passes with the filter (or already did), 1 when no
    filter up to the highest order is enough, 2 bad input.
    """
    from spurplan.analyses.remedy import MARGIN_TARGET
    from spurplan.analyses.remedy import remedy as find_remedy
    from spurplan.model.stages.filter import parse_floor_db, parse_q
    from spurplan.output.documents import remedy_document
    from spurplan.output.remedy_file import write_fixed
    from spurplan.output.terminal import remedy_modes_hint, remedy_text

    target = _parse("db", margin, "--margin", MARGIN_TARGET)
    parts: dict[str, Any] = {}
    for key, text, option in (
        ("q_inductor", q_inductor, "--q-inductor"),
        ("q_capacitor", q_capacitor, "--q-capacitor"),
    ):
        if text is None:
            continue  # the library's default
        try:
            value = float(text)
        except ValueError:
            value = text.strip()  # "lossless", or a word parse_q names in its message
        try:
            parts[key] = parse_q(value)
        except ValueError as exc:
            expected = str(exc).split(": ", 1)[-1]  # name the value as typed, not as read
            raise click.BadParameter(f"{text!r}: {expected}", param_hint=option) from None
    try:
        if floor is not None:
            parts["floor_db"] = parse_floor_db(floor.strip())
    except ValueError as exc:
        raise click.BadParameter(str(exc), param_hint="--floor") from None
    from spurplan.analyses.remedy import RemedyCase

    freqs = _channel_choice(start, stop, step, channel_file)
    modes = _load_modes(lineup, mode)
    lu = modes[0].lineup
    # One filter for every mode run: it goes into the stages the modes share.
    subject = lu if modes[0].name is None else [RemedyCase(m.lineup, freqs, m.label) for m in modes]
    found = find_remedy(subject, at=at_stage, margin_db=target, channels_hz=freqs, **parts)
    # Written before anything is printed: a refusal is one error line and nothing else.
    edited = write_fixed(lu, found, write_file) if write_file and found.found else None
    for m in modes:
        _warn_model(m.lineup)
    if fmt == "json":
        click.echo(remedy_document(found).json(), nl=False)
    else:
        click.echo(remedy_text(found, edited, write_file), nl=False)
        if len(modes) > 1 and found.needed["freq_hz"] and not found.found:
            click.echo(remedy_modes_hint(len(modes)))
    # Exit 1 only when products fall short and no filter is enough.
    sys.exit(1 if found.needed["freq_hz"] and not found.found else 0)


@main.command("fit", epilog=EPILOG)
@click.argument("sweeps", nargs=-1, required=True, type=click.Path(dir_okay=False))
@click.option(
    "--stage", default=None, help="The stage measured (default: the sweeps' '# stage' header line)."
)
@click.option(
    "--lineup",
    "lineup_file",
    type=click.Path(dir_okay=False),
    help="A lineup with that amplifier stage: its other figures are held, and start the fit.",
)
@click.option(
    "--figures",
    default=None,
    help="Figures to fit, e.g. gain,oip3,h2,h3,p1db,psat (default: what the sweeps measure).",
)
@click.option(
    "--column",
    "columns",
    multiple=True,
    metavar="THEIRS=OURS",
    help="Read the file's column THEIRS as our OURS, e.g. 'Pin (dBm)=pin_dbm' (repeatable).",
)
@click.option(
    "--h-at", "h_at", default=None, help="Output power the fitted hN are stated at, e.g. '+20 dBm'."
)
@click.option(
    "--write",
    "write_file",
    type=_OutputFile(),
    help="Write the lineup with the stage's fitted figures to this file.",
)
@click.option("--format", "fmt", type=click.Choice(("table", "json")), default="table", show_default=True)
def fit_cmd(sweeps, stage, lineup_file, figures, columns, h_at, write_file, fmt):
    """Fit an amplifier stage's figures to bench sweeps (CSV files of levels against drive).

    The figures (gain, oip3, oip2, h2..h9, p1db, psat) are fitted by least squares in dB
    with the model the engine uses, each with its uncertainty; a figure the sweeps do not
    determine is said to be poorly determined, never given as known. Prints the
    [[stage]] table to paste and the residuals; --write puts the figures into the lineup.

    Exit status: 0 every figure determined, 1 a figure poorly determined or the fit not
    converged, 2 bad input.
    """
    from spurplan.analyses.figure_fit import fit_figures
    from spurplan.io.bench_sweeps import read_sweep
    from spurplan.output.figure_fit import fit_document, fit_text
    from spurplan.output.fit_file import write_fitted

    if write_file and not lineup_file:
        raise click.UsageError("--write needs --lineup (the file whose stage gets the fitted figures)")
    mapping = {}
    for item in columns:
        theirs, sep, ours = item.rpartition("=")
        if not sep or not theirs.strip() or not ours.strip():
            raise click.BadParameter(
                f"{item!r}: expected THEIRS=OURS, e.g. 'Pin (dBm)=pin_dbm'", param_hint="--column"
            )
        mapping[theirs.strip()] = ours.strip()
    at_dbm = None if h_at is None else _parse("power", h_at, "--h-at")
    names = None if figures is None else tuple(f.strip() for f in figures.split(",") if f.strip())
    read = [read_sweep(path, mapping) for path in sweeps]
    lu = _load_modes(lineup_file, None)[0].lineup if lineup_file else None
    found = fit_figures(read, stage=stage, lineup=lu, figures=names, harmonic_at_dbm=at_dbm)
    # Written before anything is printed: a refusal is one error line and nothing else.
    edited = write_fitted(found, lu, write_file) if write_file else None
    if lu is not None:
        _warn_model(lu)
    if fmt == "json":
        click.echo(fit_document(found, lu).json(), nl=False)
    else:
        click.echo(fit_text(found, edited, write_file), nl=False)
    sys.exit(0 if found.status == "FITTED" else 1)


@main.command(epilog=EPILOG)
@_lineup_arg
@_mode_option
@click.option(
    "-o",
    "--output",
    "out_file",
    required=True,
    type=_OutputFile(),
    help="FILE.html (self-contained) or FILE.md (figures beside it).",
)
@click.option(
    "--trace", "trace_file", type=click.Path(dir_okay=False), help="Add a measured trace of the output."
)
@_trace_options
@click.option(
    "--fit",
    "fit_files",
    multiple=True,
    type=click.Path(dir_okay=False),
    help="Add figures fitted from this bench sweep of a stage (repeatable; its # stage line names the stage).",
)
def report(lineup, mode, out_file, trace_file, rbw, detector, reference_level, columns, fit_files):
    """Write a design-review report of LINEUP: budget, check, figures, assumptions, cautions.

    Sweeps are added where the lineup's [report] table asks for them.  Over several
    modes, one report with each mode's sections and the verdict over all of them.
    With --trace, a "Bench against plan" section sets the measured spectrum beside the
    prediction (one mode: give --mode NAME for a file with several).
    """
    from spurplan.output.modes import mode_marker
    from spurplan.output.report import BenchSession, write_report

    trace = None if trace_file is None else _read_trace(trace_file, rbw, detector, reference_level, columns)
    modes = _load_modes(lineup, mode)
    bench = None
    if trace is not None or fit_files:
        if len(modes) > 1:
            names = ", ".join(repr(m.name) for m in modes)
            raise click.UsageError(
                f"a bench session is measured in one mode: give --mode NAME (one of {names})"
            )
        from spurplan.analyses.figure_fit import fit_figures
        from spurplan.io.bench_sweeps import read_sweep

        sweeps = [read_sweep(path) for path in fit_files]
        fits = tuple(fit_figures([sw], lineup=modes[0].lineup) for sw in sweeps)
        bench = BenchSession(trace=trace, fits=fits)
    path = write_report(modes[0].lineup if len(modes) == 1 else modes, out_file, bench=bench)
    for i, m in enumerate(modes, start=1):
        if len(modes) > 1:
            _mark_mode(mode_marker(m.label, i, len(modes)))
        _warn(m.lineup.run())
    _pending_marker.clear()
    click.echo(f"wrote {path}")
    click.echo(PLANNING_NOTICE)


@main.command(epilog=EPILOG)
@_lineup_arg
@_mode_option
@click.option("--stage", required=True, help="The mixer stage.")
@click.option(
    "--max-order", default=7, show_default=True, type=click.IntRange(1, 15), help="Highest m + |n| shown."
)
@click.option("--all", "show_all", is_flag=True, help="Also list products the model puts at no level.")
@_format_option
@_plot_option("Draw product frequency against LO frequency.")
@click.option("--lo-start", help="LO range for the plot, e.g. '1.1 GHz' (default: LO -20 %).")
@click.option("--lo-stop", help="LO range for the plot (default: LO +20 %).")
@_plot_size_option
def spurs(lineup, mode, stage, max_order, show_all, fmt, plot_file, lo_start, lo_stop, plot_size):
    """Print the m x n spur chart of a mixer stage, marking products in the next filter's passband."""
    from spurplan.analyses.spur_chart import LO_SPAN, spur_chart
    from spurplan.output.documents import spur_document
    from spurplan.output.terminal import spurs_text

    size = _size(plot_size)
    modes = _load_modes(lineup, mode)
    plots = _mode_files(plot_file, modes)

    def run(m, i):
        chart = spur_chart(m.lineup, stage, max_order)
        rows = chart.rows if show_all else chart.rows_with_levels
        if plots[i - 1]:
            from spurplan.model.stages.mixer import LO_FREQ
            from spurplan.output.plots import save_spur_plot
            from spurplan.units import format_freq

            lo = chart.mixer.lo_freq_hz
            span = (
                _parse("freq", lo_start, "--lo-start", LO_FREQ) if lo_start else LO_SPAN[0] * lo,
                _parse("freq", lo_stop, "--lo-stop", LO_FREQ) if lo_stop else LO_SPAN[1] * lo,
            )
            if not span[0] < span[1]:
                raise click.BadParameter(
                    f"LO range {format_freq(span[0])} to {format_freq(span[1])}: expected --lo-start below "
                    f"--lo-stop (defaults: the LO {format_freq(lo)} -20 % and +20 %)",
                    param_hint="--lo-start/--lo-stop",
                )
            save_spur_plot(chart, span, plots[i - 1], size)
        return _Shown(spur_document(chart, rows), spurs_text(chart, rows))

    _over_modes(modes, fmt, run)


@main.command("if-windows", epilog=EPILOG)
@_lineup_arg
@_mode_option
@click.option("--if-start", required=True, help="Lowest IF candidate, e.g. '50 MHz'.")
@click.option("--if-stop", required=True, help="Highest IF candidate, e.g. '100 MHz'.")
@click.option("--if-step", required=True, help="Step between IF candidates, e.g. '250 kHz'.")
@click.option(
    "--order", default=7, show_default=True, type=click.IntRange(1, 15), help="Highest m + |n| judged."
)
@click.option("--rf-start", help="First output channel (default: [report] tune, else the lineup's channel).")
@click.option("--rf-stop", help="Last output channel.")
@click.option("--rf-step", help="Output channel step.")
@click.option("--guard", default="0 Hz", show_default=True, help="Widen every band by this on each side.")
@click.option("--passband-only", is_flag=True, help="Judge the output passband only, not protected bands.")
@click.option("--rank", type=click.Choice(("width", "clearance")), default="width", show_default=True)
@click.option("--windows", "max_windows", type=click.IntRange(1, 10_000), default=20, show_default=True)
@_format_option
def if_windows(
    lineup,
    mode,
    if_start,
    if_stop,
    if_step,
    order,
    rf_start,
    rf_stop,
    rf_step,
    guard,
    passband_only,
    rank,
    max_windows,
    fmt,
):
    """Search IF choices of a converter: the IF windows whose mixer products stay out of the
    output passband and the protected bands on every channel."""
    from spurplan.analyses.frequency_plan import plan_if
    from spurplan.io.channels import sweep_points
    from spurplan.output.documents import if_plan_document
    from spurplan.output.terminal import if_windows_text

    lo, hi = _parse("freq", if_start, "--if-start"), _parse("freq", if_stop, "--if-stop")
    step = _parse("freq", if_step, "--if-step")
    guard_hz = _parse("freq", guard, "--guard")
    channels = None
    if rf_start or rf_stop or rf_step:
        if not (rf_start and rf_stop and rf_step):
            raise click.UsageError("give --rf-start, --rf-stop and --rf-step together")
        channels = sweep_points(
            _parse("freq", rf_start, "--rf-start"),
            _parse("freq", rf_stop, "--rf-stop"),
            _parse("freq", rf_step, "--rf-step"),
            "output channel",
            "Hz",
        )
    modes = _load_modes(lineup, mode)

    def run(m, i):
        lu = m.lineup
        plan = plan_if(
            lu,
            lo,
            hi,
            step,
            order=order,
            channels_hz=channels,
            guard_hz=guard_hz,
            protected_bands=not passband_only,
            rank=rank,
            max_windows=max_windows,
        )
        _warn_model(lu)
        return _Shown(if_plan_document(plan), if_windows_text(plan), 0 if plan.found else 1)

    sys.exit(_over_modes(modes, fmt, run))


@main.command("yield", epilog=EPILOG)
@_lineup_arg
@_mode_option
@click.option("--samples", type=click.IntRange(1, 10_000_000), default=10_000, show_default=True)
@click.option(
    "--seed",
    type=click.IntRange(0, 2**64 - 1),
    default=0,
    show_default=True,
    help="Same seed, same samples, wherever they run (0 to 2^64 - 1; numpy seeds are non-negative).",
)
@click.option(
    "--channels",
    "channel_file",
    type=click.Path(dir_okay=False),
    help="Also evaluate at these channels (one frequency per line).",
)
@_scheduler_option
@_workers_option
@click.option("--format", "fmt", type=click.Choice(("table", "json")), default="table", show_default=True)
@click.option("--plot", "plot_file", type=_OutputFile(), help="Draw the histogram of worst margins.")
def yield_cmd(lineup, mode, samples, seed, channel_file, scheduler, workers, fmt, plot_file):
    """Monte Carlo yield of LINEUP over its part tolerances and corners.

    Over several modes each mode's yield is computed with the same seed; the line over
    all modes counts the units passing in every mode (the same units where the modes'
    tolerances agree), else gives the lowest mode's, an upper bound.
    """
    from spurplan.analyses.montecarlo import run_yield
    from spurplan.io.channels import read_channels
    from spurplan.output.documents import yield_document
    from spurplan.output.terminal import yield_text
    from spurplan.output.verdicts import yield_modes_verdict, yield_verdict

    scheduler = _cluster_choice(scheduler, workers)
    modes = _load_modes(lineup, mode)
    plots = _mode_files(plot_file, modes)
    channels = read_channels(channel_file) if channel_file else None
    results = []

    def run(m, i):
        lu = m.lineup
        with _progress(samples, "yield") as bar:
            res = run_yield(
                lu,
                samples,
                seed=seed,
                channels_hz=channels,
                scheduler=scheduler,
                workers=workers,
                progress=None if bar is None else bar.update,
            )
        _warn_model(lu)
        if plots[i - 1]:
            from spurplan.output.plots import save_yield_plot

            save_yield_plot(res, plots[i - 1])
        results.append(res)
        return _Shown(yield_document(res), yield_text(res), line=yield_verdict(res))

    def overall(_):
        return yield_modes_verdict([m.label for m in modes], results)

    _over_modes(modes, "json" if fmt == "json" else "table", run, overall=overall)


if __name__ == "__main__":  # pragma: no cover
    main()
