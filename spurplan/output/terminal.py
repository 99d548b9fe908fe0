"""What the terminal shows of every result: heading, table, verdict lines, notice.

Each ``*_text`` function returns the whole text a command prints on stdout for
``--format table`` (every line ends in a newline), so that the command line only
prints it; the lines for stderr (model notes and warnings) are here too.  Tables are
:func:`spurplan.output.formatting.text_table` with the layouts of
:mod:`spurplan.output.tables`; verdict sentences come from :mod:`spurplan.output.verdicts`.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from spurplan.notices import PLANNING_NOTICE, power_notice
from spurplan.output.formatting import text_table
from spurplan.output.tables import (
    BANDS_TABLE,
    BUDGET_TABLE,
    CAUSE_TABLE,
    CHANNEL_TABLE,
    CHECK_TABLE,
    CORNER_TABLE,
    DRIVE_TABLE,
    ELEMENT_TABLE,
    IF_WINDOW_TABLE,
    NEEDED_TABLE,
    PRODUCT_TABLE,
    RESPONSE_TABLE,
    RULES_TABLE,
    SPUR_TABLE,
    breakdown_display,
    check_display,
    drive_display,
    element_display,
    filter_response_display,
    if_window_display,
    needed_display,
    product_display,
    spur_display,
    tune_display,
    tune_table,
)
from spurplan.output.verdicts import (
    channels_recheck_verdict,
    check_verdict,
    drive_verdict,
    if_plan_verdict,
    passband_verdict,
    recheck_verdict,
    remedy_advice,
    remedy_reason,
    tune_verdict,
    yield_verdict,
)

if TYPE_CHECKING:  # annotations only
    from spurplan.analyses.check import CheckResult
    from spurplan.analyses.filter_view import FilterView
    from spurplan.analyses.frequency_plan import IfPlan
    from spurplan.analyses.montecarlo import YieldResult
    from spurplan.analyses.remedy import Remedy
    from spurplan.analyses.spur_chart import SpurChart
    from spurplan.analyses.sweep import DriveSweep, TuneSweep
    from spurplan.engine.result import Result
    from spurplan.io.lineup_edit import EditedLineup
    from spurplan.model.lineup import Lineup

CATALOGUE_TITLE = "Shipped rule sets and band lists (use them in [mask] use = [...])"


def _lines(*lines: str) -> str:
    return "".join(f"{line}\n" for line in lines)


def note_lines(notes) -> list[str]:
    """``spurplan: note: ...`` for each note (stderr).

    Parameters
    ----------
    notes : iterable of str
        The notes.

    Returns
    -------
    list of str
        One line each, without line breaks.
    """
    return [f"spurplan: note: {note}" for note in notes]


def model_warnings(lineup: Lineup) -> list[str]:
    """The lineup's model notes and, where figures are missing, the incomplete-model warning.

    Every command that reports a result prints them (stderr), so that no answer rests
    silently on a figure nobody gave.

    Parameters
    ----------
    lineup : Lineup
        The loaded lineup.

    Returns
    -------
    list of str
        One line each, without line breaks.
    """
    from spurplan.analyses.check import model_gaps

    lines = note_lines(lineup.notes)
    missing = lineup.missing_figures()
    if missing:
        lines.append(
            f"spurplan: warning: model incomplete, {model_gaps(missing, ())}: the products those figures "
            "describe are left out (compression: the stage stays linear). Give the figures, or run "
            "check with --strict to treat this as a failure."
        )
    return lines


def run_warnings(result: Result) -> list[str]:
    """:func:`model_warnings`, then the stages whose model was driven past where it holds.

    Parameters
    ----------
    result : Result
        A run of the lineup (batch element 0).

    Returns
    -------
    list of str
        One line each, without line breaks.
    """
    lines = model_warnings(result.lineup)
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
            lines.append(f"spurplan: warning: {what} in {', '.join(stages)}; rows are flagged {flag}.")
    return lines


def products_text(result: Result, rows: dict, stage: str | None = None, combine: str | None = None) -> str:
    """``spurplan spectrum``: every product at a node.

    Parameters
    ----------
    result : Result
        A run of a lineup (batch element 0).
    rows : dict of str -> list
        :meth:`~spurplan.engine.result.Result.product_rows` of that node.
    stage : str or None
        Stage whose output is shown; ``None`` for the lineup output.
    combine : {"worst", "power", "phase"} or None
        The combining mode of the rows; ``None``: the lineup's analysis setting.

    Returns
    -------
    str
        Heading, table (MHz, dBm, dBc) and the planning notice.
    """
    lineup = result.lineup
    node, mode = stage or "output", combine or lineup.analysis.combine
    return (
        _lines(f"{lineup.name}: products at {node} (combine = {mode})")
        + text_table(product_display(rows), PRODUCT_TABLE)
        + _lines(PLANNING_NOTICE)
    )


def spectrum_text(doc) -> str:
    """``spurplan spectrum`` of a modulated lineup: one line per cluster of its spectrum.

    Parameters
    ----------
    doc : Document
        :func:`spurplan.output.documents.spectrum_document`.

    Returns
    -------
    str
        Heading, how the carriers were modelled, the cluster table (MHz, dBm, dBm/Hz) and
        the planning notice.
    """
    s = doc.summary
    modelled = "; ".join(m for m in s["modulation"] if m)
    rows = {
        "start": [c["start_hz"] / 1e6 for c in s["clusters"]],
        "stop": [c["stop_hz"] / 1e6 for c in s["clusters"]],
        "part": [c["label"] for c in s["clusters"]],
        "power": [c["level_dbm"] for c in s["clusters"]],
        "peak": [c["peak_psd_dbm_hz"] for c in s["clusters"]],
        "stage": [c["stage"] for c in s["clusters"]],
    }
    spec = [
        ("start", "from (MHz)", ".6f"),
        ("stop", "to (MHz)", ".6f"),
        ("part", "part", None),
        ("power", "power (dBm)", ".2f"),
        ("peak", "peak density (dBm/Hz)", ".2f"),
        ("stage", "largest from", None),
    ]
    return (
        _lines(f"{s['lineup']}: spectrum at {s['node']} (combine = {s['combine']})")
        + _lines(
            f"modulated carriers as multisines: {modelled}; {s['n_lines']} lines on a {s['raster_hz']:.6g} Hz "
            "raster (--format csv lists every line with its density and the output noise density)"
        )
        + text_table(rows, spec)
        + _lines(PLANNING_NOTICE)
    )


def budget_text(result: Result, rows: dict) -> str:
    """``spurplan budget``: the cascade budget.

    Parameters
    ----------
    result : Result
        The run the budget was read from.
    rows : dict of str -> list
        :func:`spurplan.analyses.budget.budget_rows` of that run.

    Returns
    -------
    str
        Heading, table (dBm, dB) and the planning notice.
    """
    return (
        _lines(f"{result.lineup.name}: cascade budget (strongest carrier)")
        + text_table(rows, BUDGET_TABLE)
        + _lines(PLANNING_NOTICE)
    )


def filter_heading(view: FilterView) -> str:
    """What a filter view shows: a lineup's filter stage, or a prototype on its own.

    Parameters
    ----------
    view : FilterView
        The view.

    Returns
    -------
    str
        One line.
    """
    from spurplan.model.ladders import describe_parts

    stage, proto = view.stage, view.stage.prototype
    if view.lineup is not None:
        what = stage.source
        if not what:
            assert proto is not None  # a filter without a data file is a synthesized ladder
            what = f"synthesized ladder; {describe_parts(proto)}"
        return (
            f"{view.lineup.name}: filter '{stage.name}' ({what}) at the products reaching it "
            f"(combine = {view.combine})"
        )
    assert proto is not None  # a view without a lineup is of a prototype (filter_view.prototype_view)
    return (
        f"{proto.family} {proto.response}, order {proto.order}, {stage.r_ohm:g} ohm; {describe_parts(proto)}"
    )


def filter_text(view: FilterView) -> str:
    """``spurplan filter``: the heading, the element values and the response at the products.

    Parameters
    ----------
    view : FilterView
        The view.

    Returns
    -------
    str
        Heading and tables (nH, pF; MHz, dBm, dB, degrees); no notice (the command
        prints the view's notes first).
    """
    text = _lines(filter_heading(view))
    if view.elements["position"]:
        text += text_table(element_display(view.elements), ELEMENT_TABLE)
    if view.rows["freq_hz"]:
        text += _lines("") + text_table(filter_response_display(view), RESPONSE_TABLE)
    return text


def check_text(outcome: CheckResult) -> str:
    """``spurplan check``: every product against the mask, then the verdict.

    Parameters
    ----------
    outcome : CheckResult
        What :func:`spurplan.analyses.check.check` found.

    Returns
    -------
    str
        Heading, table (MHz, dBm, dB), the ``VERDICT:`` line and the planning notice.
    """
    return (
        _lines(f"{outcome.result.lineup.name}: products at the output against the mask")
        + text_table(check_display(outcome.rows), CHECK_TABLE)
        + _lines(check_verdict(outcome), PLANNING_NOTICE, *filter(None, [power_notice(outcome.carrier_dbm)]))
    )


def catalogue_text(rows: dict) -> str:
    """``spurplan bands``: the shipped rule sets and band lists.

    Parameters
    ----------
    rows : dict of str -> list
        :func:`spurplan.analyses.bands_view.catalogue_rows`.

    Returns
    -------
    str
        Heading, table and the planning notice.
    """
    return _lines(CATALOGUE_TITLE) + text_table(rows, BANDS_TABLE) + _lines(PLANNING_NOTICE)


def ruleset_text(rows: dict, summary: dict) -> str:
    """``spurplan bands NAME``: one rule set or band list with its source.

    Parameters
    ----------
    rows : dict of str -> list
        Its entries (:func:`spurplan.analyses.bands_view.band_rows`; MHz).
    summary : dict
        Its name, title, source and notes.

    Returns
    -------
    str
        Name and title, source, notes, the table and the planning notice.
    """
    title = f"{summary['name']}: {summary['title']}\nsource: {summary['source']}"
    if summary.get("notes"):
        title += f"\nnotes: {summary['notes']}"
    return _lines(title) + text_table(rows, RULES_TABLE) + _lines(PLANNING_NOTICE)


def drive_text(sweep: DriveSweep) -> str:
    """``spurplan drive``: worst margin at every drive, then the highest compliant drive.

    Parameters
    ----------
    sweep : DriveSweep
        What :func:`spurplan.analyses.sweep.drive_sweep` found (dBm, dB).

    Returns
    -------
    str
        Heading, table, the ``HIGHEST COMPLIANT DRIVE:`` line and the planning notice.
    """
    which = "output" if sweep.target_output else "input"
    return (
        _lines(f"{sweep.lineup.name}: drive sweep ({which} of the strongest carrier)")
        + text_table(drive_display(sweep.rows), DRIVE_TABLE)
        + _lines(drive_verdict(sweep, "terminal"), PLANNING_NOTICE)
    )


# The per-channel table of a tuning sweep is kept to this width (characters): the
# rule-or-band column is shortened to fit, its full text is in the summary above it.
TUNE_TABLE_WIDTH = 120


def _fit_last_column(columns: dict, spec: list, width: int) -> dict:
    """Shorten the cells of ``spec``'s last column (ending them in "...") so that the
    table is at most ``width`` characters wide; at least 24 characters are kept."""
    key = spec[-1][0]
    if not columns.get(key):
        return columns
    others = text_table(columns, spec[:-1]).splitlines()
    room = max(24, width - max(len(line.rstrip()) for line in others) - 2)
    shown = dict(columns)
    shown[key] = [c if len(c) <= room else c[: room - 3] + "..." for c in columns[key]]
    return shown


def tune_text(sweep: TuneSweep, per_channel: bool = False) -> str:
    """``spurplan tune``: per product and rule or band, where it fails or lands and its worst
    channel; the per-channel rows on request; then the verdict.

    Parameters
    ----------
    sweep : TuneSweep
        What :func:`spurplan.analyses.sweep.tune_sweep` found (MHz, dB).
    per_channel : bool, optional
        Add the table of every channel's products that fail or land in a protected band
        (``--per-channel``), at most :data:`TUNE_TABLE_WIDTH` characters wide.

    Returns
    -------
    str
        Heading, one summary line per product and rule or band (worst first), the table
        when asked for, the ``TUNING RANGE:`` line and the planning notice.
    """
    from spurplan.analyses.tune_summary import band_rule_labels
    from spurplan.output.verdicts import tune_entry_line

    var = sweep.variable
    x = sweep.carrier_hz
    text = _lines(
        f"{sweep.lineup.name}: tuning sweep over {len(x)} channels, the {var} from "
        f"{x.min() / 1e6:.6f} to {x.max() / 1e6:.6f} MHz"
    )
    entries = sweep.summary
    if entries:
        text += _lines(
            "Products that fail or land in a protected band, per product and rule or band (worst first):",
            *(f"  {tune_entry_line(e, var)}" for e in entries),
        )
    else:
        text += _lines("No product fails or lands in a protected band on any channel.")
    if per_channel and entries:
        spec = tune_table(var)
        cols = tune_display(sweep.rows, band_rule_labels(sweep.lineup.mask))
        text += _lines("", "Per channel:") + text_table(_fit_last_column(cols, spec, TUNE_TABLE_WIDTH), spec)
    text += _lines(*tune_verdict(sweep))
    if entries and not per_channel:
        text += _lines(f"({len(sweep.rows['label'])} per-channel rows: --per-channel lists them)")
    return text + _lines(PLANNING_NOTICE)


def remedy_text(found: Remedy, written: EditedLineup | None = None, path=None) -> str:
    """``spurplan remedy``: the rejection still needed, the filter to insert and the re-check.

    Parameters
    ----------
    found : Remedy
        What :func:`spurplan.analyses.remedy.remedy` found.
    written : EditedLineup, optional
        What ``--write`` wrote (its rewritten data paths are listed).
    path : str or path-like, optional
        The file it was written to.

    Returns
    -------
    str
        Heading, the parts assumed, then either why nothing is needed, or the table of
        rejection needed (MHz, dB) and either why no filter was found or where the
        filter goes, its snippet, its elements and the re-check; the planning notice.
    """
    from spurplan.model.ladders import parts_text

    assert found.parts is not None  # remedy() always records the parts it assumed
    text = _lines(
        f"{found.lineup.name}: remedy for a {found.margin_target_db:g} dB margin",
        f"Filter parts assumed: {parts_text(**found.parts)} (set with --q-inductor, --q-capacitor, --floor)",
        *remedy_span_lines(found),
    )
    if not found.needed["freq_hz"]:
        return text + _lines(f"Nothing to do: {found.reason}.", PLANNING_NOTICE)
    text += text_table(needed_display(found.needed), NEEDED_TABLE)
    if not found.found:
        helps = remedy_advice(found)
        text += _lines(f"NO FILTER FOUND: {remedy_reason(found)}.")
        if helps:
            text += _lines("What would help instead:", *(f"- {s}." for s in helps))
        return text + _lines(PLANNING_NOTICE)
    assert found.filter is not None  # remedy() sets the filter with the snippet
    where = f"after stage '{found.after}'" if found.after else "at the lineup input"
    text += _lines("", f"Insert {where}:", str(found.snippet))
    text += text_table(element_display(found.filter.elements()), ELEMENT_TABLE)
    text += _lines(recheck_verdict(found), *channels_recheck_verdict(found))
    if written is not None:
        moved = "; ".join(f"{old!r} -> {new!r}" for old, new in written.moved)
        text += _lines(
            f"wrote {path}" + (f" (data paths rewritten for its folder: {moved})" if moved else "")
        )
    return text + _lines(PLANNING_NOTICE)


# Where a remedy's channels came from (analyses.remedy.case_channels), as the terminal says it.
_CHANNEL_ORIGINS = {
    "given": "from --start/--stop/--step or --channels",
    "report": "the lineup's [report] tune range",
    "written": "the lineup as written; no tuning range given",
}


def remedy_span_lines(found: Remedy) -> list[str]:
    """Which channels the remedy designed over, one line per case (MHz).

    Parameters
    ----------
    found : Remedy

    Returns
    -------
    list of str
    """
    lines = []
    for case, (ch, origin) in zip(found.cases, found.channels, strict=True):
        what = "LO" if case.lineup.mixers else "carrier"
        pre = f"[{case.name}] " if case.name else ""
        span = (
            f"{what} {ch.min() / 1e6:.6g} MHz"
            if len(ch) == 1
            else (f"{what} {ch.min() / 1e6:.6g} to {ch.max() / 1e6:.6g} MHz")
        )
        lines.append(
            f"{pre}Designed for {len(ch)} channel{'s' * (len(ch) > 1)}: {span} ({_CHANNEL_ORIGINS[origin]})"
        )
    return lines


def spurs_text(chart: SpurChart, rows: dict | None = None) -> str:
    """``spurplan spurs``: a mixer's m x n chart and what lands in the next filter's passband.

    Parameters
    ----------
    chart : SpurChart
        What :func:`spurplan.analyses.spur_chart.spur_chart` found.
    rows : dict of str -> list, optional
        The rows to list (default every row of the chart).

    Returns
    -------
    str
        Heading (LO in MHz), table (MHz, dBc), the ``IN THE PASSBAND:`` line and the
        planning notice.
    """
    m = chart.mixer
    return (
        _lines(
            f"{chart.lineup.name}: mixer '{m.name}', LO {m.lo_freq_hz / 1e6:.6g} MHz, {m.sideband} sideband wanted; "
            f"passband of '{chart.filter_name or 'no filter after the mixer'}'"
        )
        + text_table(spur_display(chart.rows if rows is None else rows), SPUR_TABLE)
        + _lines(passband_verdict(chart), PLANNING_NOTICE)
    )


def if_windows_text(plan: IfPlan) -> str:
    """``spurplan if-windows``: the forbidden bands, the spur-free IF windows best first, the verdict.

    Parameters
    ----------
    plan : IfPlan
        What :func:`spurplan.analyses.frequency_plan.plan_if` found.

    Returns
    -------
    str
        Heading (channels, bands, candidates), the table of windows (MHz), the
        ``SPUR-FREE IF:`` lines, the notes and the planning notice.
    """
    ch, f = plan.channels_hz, plan.if_hz
    protected = plan.bands[1:]
    text = _lines(
        f"{plan.lineup.name}: IF windows of mixer '{plan.mixer}', products |m LO + n IF| to order "
        f"{plan.order} ({plan.lo_rule})",
        f"Output channels: {len(ch)}, {ch[0] / 1e6:.6f} to {ch[-1] / 1e6:.6f} MHz ({plan.channel_source})",
        f"Output passband: {plan.passband_hz[0] / 1e6:.6f} to {plan.passband_hz[1] / 1e6:.6f} MHz "
        f"({plan.passband_source})",
        "Protected bands: "
        + (
            f"{len(protected)} from the mask"
            if protected
            else ("none in the mask" if plan.protected_bands else "not judged (--passband-only)")
        )
        + (f"; every band widened by {plan.guard_hz / 1e6:g} MHz each side" if plan.guard_hz else ""),
        f"IF candidates: {len(f)}, {f[0] / 1e6:.6f} to {f[-1] / 1e6:.6f} MHz in {plan.if_step_hz / 1e6:g} MHz "
        f"steps; {int(plan.spur_free.sum())} spur-free, in {plan.window_count} window(s)"
        + (f", the best {len(plan.windows)} listed" if len(plan.windows) < plan.window_count else ""),
    )
    if plan.windows:
        text += text_table(if_window_display(plan.rows), IF_WINDOW_TABLE)
    return text + _lines(*if_plan_verdict(plan), *(f"Note: {n}" for n in plan.notes), PLANNING_NOTICE)


def yield_text(res: YieldResult) -> str:
    """``spurplan yield``: the yield with its interval, then what fails the rest.

    Parameters
    ----------
    res : YieldResult
        What :func:`spurplan.analyses.montecarlo.run_yield` found.

    Returns
    -------
    str
        Heading, the ``YIELD:`` line (per cent), the table of causes, the yield per corner
        (when the lineup has corners) and per channel (when channels were asked for; the
        channels where some sample fails, MHz), and the planning notice.
    """
    text = _lines(
        f"{res.lineup.name}: Monte Carlo yield, {res.samples} samples, seed {res.seed}, {res.where}",
        yield_verdict(res),
    )
    if res.causes:
        text += _lines("What fails the rest (worst product of each failing sample):")
        text += text_table(res.rows, CAUSE_TABLE)
    if res.lineup.tolerances is not None and res.lineup.tolerances.corners:
        text += _lines(
            "",
            "By corner (a sample fails at a corner when its worst product there, over every channel, fails):",
        )
        text += text_table(breakdown_display(res.corner_rows), CORNER_TABLE)
    if res.by_channel:
        tuned = "the first mixer's LO" if res.lineup.mixers else "the reference carrier"
        cols = res.channel_rows
        failing = [i for i, f in enumerate(cols["failed"]) if f]
        text += _lines(
            "",
            f"By channel ({tuned} at each; a sample fails at a channel when its worst product there, "
            "over every corner, fails):",
        )
        if failing:
            text += text_table(
                breakdown_display({k: [v[i] for i in failing] for k, v in cols.items()}), CHANNEL_TABLE
            )
        passing = len(cols["failed"]) - len(failing)
        if passing:
            text += _lines(
                f"{passing} of {len(cols['failed'])} channels: every sample passes "
                f"({'not listed; ' if failing else ''}every channel is in --format json)"
            )
    return text + _lines(PLANNING_NOTICE)


def remedy_modes_hint(count: int) -> str:
    """What to try when one filter cannot serve every mode: a switched filter, one per mode.

    Parameters
    ----------
    count : int
        The modes the filter was designed for.

    Returns
    -------
    str
        One line.
    """
    return (
        f"No one filter serves all {count} modes: a switched filter may (run remedy with --mode NAME for "
        "each mode, put the filter stage in the base file and give each mode its own with a "
        "[mode.stage.NAME] override)."
    )
