"""Command line: parse, call the library, format.  Nothing else lives here.

Only click is imported at module level so that ``spurplan --help`` starts fast;
numpy and the rest load when a command runs.
"""

from __future__ import annotations

import sys

import click

from spurplan import __version__
from spurplan.notices import PLANNING_NOTICE, POWER_NOTICE
from spurplan.output.tables import (
    BANDS_TABLE,
    BUDGET_TABLE,
    CHECK_TABLE,
    DRIVE_TABLE,
    ELEMENT_TABLE,
    NEEDED_TABLE,
    PRODUCT_TABLE,
    RESPONSE_TABLE,
    RULES_TABLE,
    SPUR_TABLE,
    TUNE_TABLE,
    check_display,
    element_display,
    mhz,
    product_display,
    spur_display,
    tune_display,
)

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
            return super().main(*args, standalone_mode=False, **kwargs)
        except click.exceptions.Exit as exc:
            sys.exit(exc.exit_code)
        except _Interrupted:
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
            shown = exc.shown(getattr(exc, "options", None))
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


def _machine_output(fmt: str, summary: dict, rows_key: str, rows: dict) -> bool:
    """Print JSON or CSV for ``--format json|csv``; False when the caller prints a table."""
    from spurplan.output.formatting import to_csv, to_json

    if fmt == "json":
        click.echo(to_json(summary, rows_key, rows), nl=False)
    elif fmt == "csv":
        click.echo(to_csv(rows), nl=False)
    else:
        return False
    return True


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


def _load(path):
    from spurplan.io.lineup_file import load
    from spurplan.io.resources import example_path

    return load(path if path is not None else example_path())


def _warn_model(lineup) -> None:
    """The lineup's model notes and, where figures are missing, the incomplete-model warning:
    every command that reports a result prints them, so that no answer rests silently on a
    figure nobody gave."""
    from spurplan.analyses.check import model_gaps

    for note in lineup.notes:
        click.echo(f"spurplan: note: {note}", err=True)
    missing = lineup.missing_figures()
    if missing:
        click.echo(
            f"spurplan: warning: model incomplete, {model_gaps(missing, ())}: the products those figures "
            "describe are left out (compression: the stage stays linear). Give the figures, or run "
            "check with --strict to treat this as a failure.",
            err=True,
        )


def _warn(result) -> None:
    _warn_model(result.lineup)
    problems = (
        (
            result.extrapolated_stages,
            "polynomial model driven past where it holds (1 dB gain deviation)",
            "model_extrapolated. Add p1db or psat for a saturating model",
        ),
        (result.unconverged_stages, "model did not converge on the largest grid", "not_converged"),
    )
    for stages, what, flag in problems:
        if stages:
            click.echo(
                f"spurplan: warning: {what} in {', '.join(stages)}; rows are flagged {flag}.", err=True
            )


@main.command(epilog=EPILOG)
@_lineup_arg
@click.option("--stage", default=None, help="Report at this stage's output instead of the lineup output.")
@_format_option
@_combine_option
def spectrum(lineup, stage, fmt, combine):
    """Print every product (harmonics, intermodulation) at a node of LINEUP."""
    from spurplan.output.formatting import text_table

    result = _load(lineup).run()
    if stage is not None:
        result.node_index(stage)
    rows = result.product_rows(stage, combine)
    summary = result.summary(stage, combine)
    _warn(result)
    if not _machine_output(fmt, summary, "products", rows):
        shown = product_display(rows)
        click.echo(f"{summary['lineup']}: products at {summary['node']} (combine = {summary['combine']})")
        click.echo(text_table(shown, PRODUCT_TABLE), nl=False)
        click.echo(PLANNING_NOTICE)


@main.command(epilog=EPILOG)
@_lineup_arg
@_format_option
def budget(lineup, fmt):
    """Print the cascade budget of LINEUP: levels, gains, cascaded IP3, P1dB headroom."""
    from spurplan.analyses.budget import budget_rows
    from spurplan.output.formatting import text_table, to_csv, to_json
    from spurplan.output.provenance import provenance

    result = _load(lineup).run()
    rows = budget_rows(result)
    _warn(result)
    if fmt == "json":
        summary = {"lineup": result.lineup.name, **provenance(result.lineup)}
        click.echo(to_json(summary, "stages", rows), nl=False)
    elif fmt == "csv":
        click.echo(to_csv(rows), nl=False)
    else:
        click.echo(f"{result.lineup.name}: cascade budget (strongest carrier)")
        click.echo(text_table(rows, BUDGET_TABLE), nl=False)
        click.echo(PLANNING_NOTICE)


@main.command("filter", epilog=EPILOG)
@_lineup_arg
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
def filter_cmd(
    lineup,
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
):
    """Show a filter: element values and its response at the product frequencies.

    Either a filter stage of LINEUP (--stage NAME), or a prototype given on the
    command line (--family, --order, --cutoff ...).
    """
    from spurplan.analyses.filter_view import prototype_view, stage_view
    from spurplan.output.formatting import text_table, to_json

    if family is not None:
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
    else:
        if stage is None:
            raise click.UsageError(
                "give --stage NAME (a filter stage of LINEUP) or a prototype (--family ...)"
            )
        view = stage_view(_load(lineup), stage)
    if plot_file:
        view.save_plot(plot_file)
    if ts_file:
        view.save_touchstone(ts_file)
    if fmt == "json":
        click.echo(to_json(view.summary(), "products", view.response), nl=False)
        return
    if fmt == "csv":
        from spurplan.output.formatting import to_csv

        click.echo(to_csv(view.response), nl=False)
        return
    click.echo(view.title)
    if view.elements["position"]:
        click.echo(text_table(view.element_display(), ELEMENT_TABLE), nl=False)
    if view.response["freq_hz"]:
        click.echo("")
        click.echo(text_table(view.response_display(), RESPONSE_TABLE), nl=False)
    for note in view.notes:
        click.echo(f"spurplan: note: {note}", err=True)
    click.echo(PLANNING_NOTICE)


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
@_format_option
@_combine_option
@_plot_option("Draw the spectrum against the mask (PNG/SVG/PDF).")
@_plot_size_option
@click.option(
    "--strict",
    is_flag=True,
    help="Exit 1 also when the model is incomplete (a stage lacks a figure) or misses a stated figure.",
)
def check(lineup, fmt, combine, plot_file, plot_size, strict):
    """Check every product at the output of LINEUP against its [mask].

    The verdict is PASS, FAIL, INCOMPLETE (the modelled products pass but a stage
    lacks a figure, so some products are not modelled) or UNCERTAIN (they pass but
    the model misses a stated figure).  Exit status: 0 the mask is met, 1 it is
    violated (with --strict or [analysis] strict = true: also INCOMPLETE and
    UNCERTAIN), 2 bad input.
    """
    from spurplan.analyses.check import check as run_check
    from spurplan.output.formatting import text_table

    size = _size(plot_size)
    outcome = run_check(_load(lineup), combine=combine)
    _warn(outcome.result)
    for note in outcome.notes:
        click.echo(f"spurplan: note: {note}", err=True)
    if plot_file:
        from spurplan.output.plots import save_check_plot

        save_check_plot(outcome, plot_file, size)
    rows = outcome.rows
    if not _machine_output(fmt, outcome.summary(), "products", rows):
        click.echo(f"{outcome.result.lineup.name}: products at the output against the mask")
        click.echo(text_table(check_display(rows), CHECK_TABLE), nl=False)
        summary = outcome.summary()
        tail = (
            f"; {summary['failing']} of {summary['checked']} checked products fail"
            if outcome.worst is not None
            else ""
        )
        click.echo(f"VERDICT: {outcome.verdict}{tail}")
        click.echo(PLANNING_NOTICE)
    sys.exit(1 if outcome.strict_failure(True if strict else None) else 0)


@main.command(epilog=EPILOG)
@click.argument("name", required=False)
@_format_option
def bands(name, fmt):
    """List the shipped rule sets and band lists, or show NAME with its sources."""
    from spurplan.analyses.bands_view import band_rows, catalogue_rows, describe
    from spurplan.output.formatting import text_table

    if name is None:
        rows = catalogue_rows()
        table, title, summary = (
            BANDS_TABLE,
            "Shipped rule sets and band lists (use them in [mask] use = [...])",
            {},
        )
    else:
        rows, summary = band_rows(name)
        table, title = RULES_TABLE, describe(summary)
    if not _machine_output(fmt, summary, "entries", rows):
        click.echo(title)
        click.echo(text_table(rows, table), nl=False)
        click.echo(PLANNING_NOTICE)


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
@click.option("--start", required=True, help="First drive, e.g. '-20 dBm' (input of the strongest carrier).")
@click.option("--stop", required=True, help="Last drive, e.g. '+10 dBm'.")
@click.option("--step", required=True, help="Drive step, e.g. '0.5 dB'.")
@click.option("--target-output", is_flag=True, help="Start/stop are the carrier's output power instead.")
@_format_option
@_combine_option
@click.option("--plot", "plot_file", type=_OutputFile(), help="Draw products and limits against drive.")
@_plot_size_option
def drive(lineup, start, stop, step, target_output, fmt, combine, plot_file, plot_size):
    """Sweep the drive of LINEUP: products against drive and the highest compliant drive."""
    from spurplan.analyses.sweep import drive_sweep
    from spurplan.io.channels import sweep_points
    from spurplan.output.formatting import text_table
    from spurplan.output.provenance import provenance

    lo, hi = _parse("power", start, "--start"), _parse("power", stop, "--stop")
    dstep = _parse("db", step, "--step")
    size = _size(plot_size)
    lu = _load(lineup)
    n = len(sweep_points(lo, hi, dstep, "drive", "dBm", "dB"))
    with _progress(n, "drive sweep") as bar:
        sw = drive_sweep(
            lu,
            lo,
            hi,
            dstep,
            target_output=target_output,
            combine=combine,
            progress=None if bar is None else bar.update,
        )
    _warn_model(lu)
    if plot_file:
        from spurplan.output.plots import save_drive_plot

        save_drive_plot(sw, plot_file, size)
    rows = sw.rows
    summary = {**sw.summary(), **provenance(lu)}
    if not _machine_output(fmt, summary, "points", rows):
        shown = dict(rows)
        shown["verdict"] = ["FAIL" if p is False else ("pass" if p else "-") for p in rows["pass"]]
        click.echo(
            f"{lu.name}: drive sweep ({'output' if target_output else 'input'} of the strongest carrier)"
        )
        click.echo(text_table(shown, DRIVE_TABLE), nl=False)
        if sw.status == "limited":
            lim = sw.limiting
            click.echo(
                f"HIGHEST COMPLIANT DRIVE: input {sw.max_compliant_input_dbm:+.2f} dBm, output "
                f"{sw.max_compliant_output_dbm:+.2f} dBm; above it {lim['label']} at {lim['freq_hz'] / 1e6:.6f} MHz "
                f"fails {lim['rule']}" + (f" (in {lim['band']})" if lim["band"] else "")
            )
        elif sw.status == "fails throughout":
            click.echo("HIGHEST COMPLIANT DRIVE: none in the range (the mask is violated at every drive)")
        elif sw.status == "fails at the lowest drive":
            click.echo(
                "HIGHEST COMPLIANT DRIVE: none from the bottom of the range (the mask is violated at the "
                f"lowest drive, {sw.input_dbm[0]:+.2f} dBm in; some higher drives pass, which is no compliant "
                "range to sign)"
            )
        else:
            click.echo(
                f"HIGHEST COMPLIANT DRIVE: the mask is met over the whole range (up to {sw.max_compliant_input_dbm:+.2f} dBm in)"
            )
        click.echo(PLANNING_NOTICE)


@main.command(epilog=EPILOG)
@_lineup_arg
@click.option("--start", help="First carrier frequency, e.g. '460 MHz'.")
@click.option("--stop", help="Last carrier frequency, e.g. '470 MHz'.")
@click.option("--step", help="Channel step, e.g. '12.5 kHz'.")
@click.option(
    "--channels",
    "channel_file",
    type=click.Path(dir_okay=False),
    help="A file of carrier frequencies, one per line with unit.",
)
@_format_option
@_combine_option
@_plot_option("Draw product frequency against carrier frequency.")
@_plot_size_option
def tune(lineup, start, stop, step, channel_file, fmt, combine, plot_file, plot_size):
    """Sweep the carrier over a tuning range: which products fail or land in protected bands."""
    from spurplan.analyses.sweep import tune_sweep
    from spurplan.io.channels import read_channels, sweep_points
    from spurplan.output.formatting import text_table
    from spurplan.output.provenance import provenance

    size = _size(plot_size)
    if channel_file:
        if start or stop or step:
            raise click.UsageError("give either --channels FILE or --start/--stop/--step")
        freqs = read_channels(channel_file)
    else:
        if not (start and stop and step):
            raise click.UsageError("give --start, --stop and --step (or --channels FILE)")
        lo, hi = _parse("freq", start, "--start"), _parse("freq", stop, "--stop")
        freqs = sweep_points(lo, hi, _parse("freq", step, "--step"), "channel", "Hz")
    lu = _load(lineup)
    with _progress(len(freqs), "tuning sweep") as bar:
        sw = tune_sweep(lu, freqs, combine=combine, progress=None if bar is None else bar.update)
    _warn_model(lu)
    if plot_file:
        from spurplan.output.plots import save_tune_plot

        save_tune_plot(sw, plot_file, size)
    summary = {**sw.summary(), **provenance(lu)}
    rows = sw.rows
    if not _machine_output(fmt, summary, "rows", rows):
        shown = tune_display(rows)
        click.echo(f"{lu.name}: {len(freqs)} channels, products that fail or land in a protected band")
        click.echo(text_table(shown, TUNE_TABLE), nl=False)
        if not sw.failing:
            click.echo("TUNING RANGE: every channel meets the mask")
        for r in sw.failing:
            click.echo(
                f"FAILS from {r['start_hz'] / 1e6:.6f} to {r['stop_hz'] / 1e6:.6f} MHz: {r['label']} under {r['rule']}"
                + (f" (in {r['band']})" if r["band"] else "")
                + f", worst margin {r['worst_margin_db']:+.2f} dB"
            )
        click.echo(PLANNING_NOTICE)
    sys.exit(1 if sw.failing else 0)


@main.command(epilog=EPILOG)
@_lineup_arg
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
@click.option("--format", "fmt", type=click.Choice(("table", "json")), default="table", show_default=True)
def remedy(lineup, at_stage, margin, write_file, q_inductor, q_capacitor, floor, fmt):
    """Find the lowest-order synthesized filter that makes LINEUP pass, and re-check with it.

    The filter has parts of finite Q and a stopband floor (--q-inductor,
    --q-capacitor, --floor), written into the snippet it prints.

    Exit status: 0 when the lineup passes with the filter (or already did), 1 when no
    filter up to the highest order is enough, 2 bad input.
    """
    from spurplan.analyses.remedy import MARGIN_TARGET, write_fixed
    from spurplan.analyses.remedy import remedy as find_remedy
    from spurplan.model.ladders import parts_text
    from spurplan.model.stages.filter import parse_floor_db, parse_q
    from spurplan.output.formatting import text_table, to_json

    target = _parse("db", margin, "--margin", MARGIN_TARGET)
    parts = {}
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
    lu = _load(lineup)
    found = find_remedy(lu, at=at_stage, margin_db=target, **parts)
    # Written before anything is printed: a refusal is one error line and nothing else.
    edited = write_fixed(lu, found, write_file) if write_file and found.found else None
    _warn_model(lu)
    if fmt == "json":
        click.echo(to_json(found.summary(), "needed", found.needed), nl=False)
        sys.exit(0 if found.found or not found.needed["freq_hz"] else 1)
    click.echo(f"{lu.name}: remedy for a {target:g} dB margin")
    click.echo(
        f"Filter parts assumed: {parts_text(**found.parts)} (set with --q-inductor, --q-capacitor, --floor)"
    )
    if not found.needed["freq_hz"]:
        click.echo(f"Nothing to do: {found.reason}.")
        click.echo(PLANNING_NOTICE)
        return
    shown = dict(found.needed)
    shown["freq_mhz"] = mhz(shown["freq_hz"])
    click.echo(text_table(shown, NEEDED_TABLE), nl=False)
    if not found.found:
        click.echo(f"NO FILTER FOUND: {found.reason}.")
        click.echo(PLANNING_NOTICE)
        sys.exit(1)
    out = found.outcome
    click.echo("")
    where = f"after stage '{found.after}'" if found.after else "at the lineup input"
    click.echo(f"Insert {where}:")
    click.echo(found.snippet)
    click.echo(text_table(element_display(found.filter.elements()), ELEMENT_TABLE), nl=False)
    word = "PASS" if out.passed else "FAIL"
    worst = out.rows
    i = out.worst
    click.echo(
        f"RE-CHECKED WITH THE FILTER: {word}, worst margin {out.worst_margin_db:+.2f} dB ({worst['label'][i]} at "
        f"{worst['freq_hz'][i] / 1e6:.6f} MHz); carrier at the output {out.carrier_dbm:+.2f} dBm "
        f"(was {found.before.carrier_dbm:+.2f} dBm)"
    )
    if edited is not None:
        moved = "; ".join(f"{old!r} -> {new!r}" for old, new in edited.moved)
        click.echo(
            f"wrote {write_file}" + (f" (data paths rewritten for its folder: {moved})" if moved else "")
        )
    click.echo(PLANNING_NOTICE)


@main.command(epilog=EPILOG)
@_lineup_arg
@click.option(
    "-o",
    "--output",
    "out_file",
    required=True,
    type=_OutputFile(),
    help="FILE.html (self-contained) or FILE.md (figures beside it).",
)
def report(lineup, out_file):
    """Write a design-review report of LINEUP: budget, check, figures, assumptions, cautions.

    Sweeps are added where the lineup's [report] table asks for them.
    """
    from spurplan.output.report import write_report

    lu = _load(lineup)
    path = write_report(lu, out_file)
    _warn(lu.run())
    click.echo(f"wrote {path}")
    click.echo(PLANNING_NOTICE)


@main.command(epilog=EPILOG)
@_lineup_arg
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
def spurs(lineup, stage, max_order, show_all, fmt, plot_file, lo_start, lo_stop, plot_size):
    """Print the m x n spur chart of a mixer stage, marking products in the next filter's passband."""
    from spurplan.analyses.spur_chart import spur_chart
    from spurplan.output.formatting import text_table

    size = _size(plot_size)
    lu = _load(lineup)
    chart = spur_chart(lu, stage, max_order)
    rows = chart.rows
    if not show_all:
        keep = [
            i
            for i, (t, v) in enumerate(zip(rows["table_dbc"], rows["model_dbm"], strict=True))
            if t is not None or v is not None
        ]
        rows = {c: [vals[i] for i in keep] for c, vals in rows.items()}
    if plot_file:
        from spurplan.model.stages.mixer import LO_FREQ
        from spurplan.output.plots import save_spur_plot
        from spurplan.units import format_freq

        lo = chart.mixer.lo_freq_hz
        span = (
            _parse("freq", lo_start, "--lo-start", LO_FREQ) if lo_start else 0.8 * lo,
            _parse("freq", lo_stop, "--lo-stop", LO_FREQ) if lo_stop else 1.2 * lo,
        )
        if not span[0] < span[1]:
            raise click.BadParameter(
                f"LO range {format_freq(span[0])} to {format_freq(span[1])}: expected --lo-start below "
                f"--lo-stop (defaults: the LO {format_freq(lo)} -20 % and +20 %)",
                param_hint="--lo-start/--lo-stop",
            )
        save_spur_plot(chart, span, plot_file, size)
    if not _machine_output(fmt, chart.summary(), "products", rows):
        m = chart.mixer
        click.echo(
            f"{lu.name}: mixer '{m.name}', LO {m.lo_freq_hz / 1e6:.6g} MHz, {m.sideband} sideband wanted; "
            f"passband of '{chart.filter_name or 'no filter after the mixer'}'"
        )
        click.echo(text_table(spur_display(rows), SPUR_TABLE), nl=False)
        hits = chart.summary()["in_passband"]
        click.echo("IN THE PASSBAND: " + (", ".join(hits) if hits else "no product besides the wanted one"))
        click.echo(PLANNING_NOTICE)


CAUSE_TABLE = [
    ("label", "product", None),
    ("rule", "rule", None),
    ("samples", "failing samples", "d"),
    ("fraction", "fraction", ".4f"),
]


@main.command("yield", epilog=EPILOG)
@_lineup_arg
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
@click.option(
    "--scheduler", help="Address of a running dask.distributed scheduler, e.g. tcp://127.0.0.1:8786."
)
@click.option(
    "--workers", type=click.IntRange(1, 256), help="Start a local Dask cluster with this many workers."
)
@click.option("--format", "fmt", type=click.Choice(("table", "json")), default="table", show_default=True)
@click.option("--plot", "plot_file", type=_OutputFile(), help="Draw the histogram of worst margins.")
def yield_cmd(lineup, samples, seed, channel_file, scheduler, workers, fmt, plot_file):
    """Monte Carlo yield of LINEUP over its part tolerances and corners."""
    from spurplan.analyses.montecarlo import check_scheduler_address, run_yield
    from spurplan.io.channels import read_channels
    from spurplan.output.formatting import text_table, to_json

    if scheduler is not None and workers is not None:
        raise click.UsageError("give either --scheduler or --workers")
    if scheduler is not None:
        scheduler = check_scheduler_address(scheduler)  # '' is an error, not "in process"
    lu = _load(lineup)
    channels = read_channels(channel_file) if channel_file else None
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
    if plot_file:
        from spurplan.output.plots import save_yield_plot

        save_yield_plot(res, plot_file)
    causes = {c: [r[c] for r in res.causes] for c in ("label", "rule", "samples", "fraction")}
    if fmt == "json":
        click.echo(to_json(res.summary(), "causes", causes), nl=False)
        return
    lo, hi = res.interval
    click.echo(f"{lu.name}: Monte Carlo yield, {samples} samples, seed {seed}, {res.where}")
    click.echo(
        f"YIELD: {100 * res.yield_fraction:.3f} % ({res.passed} of {samples} pass); 95 % Wilson interval {100 * lo:.3f} - {100 * hi:.3f} %"
    )
    if res.causes:
        click.echo("What fails the rest (worst product of each failing sample):")
        click.echo(text_table(causes, CAUSE_TABLE), nl=False)
    click.echo(PLANNING_NOTICE)


if __name__ == "__main__":  # pragma: no cover
    main()
