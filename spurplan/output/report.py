"""Design-review report: one self-contained HTML file (or Markdown with figures beside it).

Contents, in order: verdict and provenance; the lineup (carriers, stages); the
cascade budget; the check with every product, its limit and margin, and the level below
which products are not listed; the output spectrum against the mask; the drive sweep
(highest compliant drive and what limits it) and the tuning sweep (per product and rule
or protected band: where it fails or lands in a band, its worst channel and margin)
where the lineup's ``[report]`` table asks for them (and a line saying how to ask where
it does not); every filter stage with its element values and Q (or the data file it
is); the Monte Carlo yield when the lineup states tolerances or corners; the assumptions
behind the numbers (model choices, combining mode, beyond-data policy, bandwidth
approximation, the rule sets and their sources); and the cautions.  Figures are embedded as PNG data, styles are inline, and nothing
refers outside the file, so it opens offline and prints to PDF.

The output is deterministic: the same lineup gives the same bytes, apart from the
one line that records when the report was made.
"""

from __future__ import annotations

import base64
import html
import io
import re
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path
from typing import TYPE_CHECKING

from spurplan.analyses.budget import budget_rows
from spurplan.analyses.check import check, figure_check_rows
from spurplan.engine.result import REPORT_FLOOR_DBC
from spurplan.notices import PLANNING_NOTICE, POWER_NOTICE, power_notice
from spurplan.output.files import check_folder, check_target, write_atomic, write_with_folder
from spurplan.output.provenance import provenance
from spurplan.output.tables import (
    BUDGET_TABLE,
    CAUSE_TABLE,
    CHECK_TABLE,
    ELEMENT_TABLE,
    check_display,
    element_display,
    tune_summary_display,
    tune_summary_table,
)
from spurplan.output.verdicts import (
    drive_verdict,
    model_caveat,
    tune_verdict,
    unsettled_caveat,
    yield_verdict,
)

if TYPE_CHECKING:  # annotations only
    from spurplan.io.traces import MeasuredTrace

FIGURE_DPI = 100
# Monte Carlo samples of the report's yield section: enough for a yield to a few per cent
# (the 95 % Wilson interval is about +-3 % wide at 50 %, narrower near 0 or 100 %), quick
# enough for a report; the yield command takes as many as asked for.  Seed fixed: the
# same lineup gives the same report.
REPORT_YIELD_SAMPLES = 1000
REPORT_YIELD_SEED = 0

CARRIER_TABLE = [
    ("name", "carrier", None),
    ("freq_mhz", "freq (MHz)", ".6f"),
    ("power_dbm", "input (dBm)", ".2f"),
    ("bandwidth_khz", "bandwidth (kHz)", ".4g"),
]
STAGE_TABLE = [
    ("position", "#", "d"),
    ("name", "stage", None),
    ("kind", "kind", None),
    ("figures", "figures", None),
]
LIMITING_TABLE = [
    ("max_in_dbm", "highest compliant input (dBm)", ".3f"),
    ("max_out_dbm", "output there (dBm)", ".3f"),
    ("label", "limiting product", None),
    ("freq_mhz", "freq (MHz)", ".6f"),
    ("rule", "rule", None),
    ("band", "protected band", None),
    ("stage", "largest from", None),
]
FIGURE_CHECK_TABLE = [
    ("stage", "stage", None),
    ("figure", "figure", None),
    ("stated_text", "stated", None),
    ("model_text", "model", None),
    ("miss_db", "miss (dB)", ".2f"),
    ("met_text", "met", None),
]
MISSING_TABLE = [
    ("stage", "stage", None),
    ("figure", "figure not given", None),
]
RULESET_TABLE = [
    ("name", "rule set", None),
    ("title", "title", None),
    ("source", "source", None),
    ("status", "status of values", None),
]


@dataclass(frozen=True)
class Section:
    """A titled part of the report: paragraphs, tables and figures in order."""

    title: str
    parts: list = field(default_factory=list)


@dataclass(frozen=True)
class Report:
    """Everything the report shows, computed once; rendered to HTML or Markdown."""

    title: str
    verdict: str
    provenance: dict
    sections: list
    status: str = ""  # the check's status (PASS, UNCERTAIN, INCOMPLETE, FAIL)

    def to_html(self, made_at: str) -> str:
        body = [
            f"<h1>{_e(self.title)}</h1>",
            f'<p class="verdict {self.verdict.split(",")[0].split()[0].lower()}">{_e(self.verdict)}</p>',
        ]
        body.append(f'<p class="made">Report made {_e(made_at)}</p>')
        body.append(_provenance_html(self.provenance))
        for sec in self.sections:
            body.append(f"<h2>{_e(sec.title)}</h2>")
            for kind, value in sec.parts:
                if kind == "text":
                    body.append(f"<p>{_e(value)}</p>")
                elif kind == "caution":
                    body.append(f'<p class="caution">{_e(value)}</p>')
                elif kind == "code":
                    body.append(f"<pre>{_e(value)}</pre>")
                elif kind == "table":
                    body.append(value[0])
                elif kind == "figure":
                    png, alt = value
                    data = base64.b64encode(png).decode("ascii")
                    body.append(
                        f'<figure><img alt="{_e(alt)}" src="data:image/png;base64,{data}"><figcaption>{_e(alt)}</figcaption></figure>'
                    )
        return (
            '<!DOCTYPE html>\n<html lang="en"><head><meta charset="utf-8">'
            f"<title>{_e(self.title)}</title><style>{_CSS}</style></head><body>\n"
            + "\n".join(body)
            + "\n</body></html>\n"
        )

    def to_markdown(self, made_at: str, figure_dir: str) -> tuple[str, dict[str, bytes]]:
        """Markdown text and the figure files it refers to (name -> PNG bytes).

        Every text is literal (:func:`spurplan.output.escaping.markdown`): names and sources
        from users' files cannot add HTML, links, images or table cells; the only
        markup is the report's own, and the only images are its figures, by relative
        percent-encoded paths.

        Parameters
        ----------
        made_at : str
            When the report was made, as printed (e.g. ``"2026-01-31 12:00:00 UTC"``).
        figure_dir : str
            Name of the folder beside the report that holds the figures, as linked.

        Returns
        -------
        tuple of (str, dict of str to bytes)
            The Markdown text and the figures by file name.
        """
        from urllib.parse import quote

        from spurplan.output.escaping import markdown as md

        lines = [f"# {md(self.title)}", "", f"**{md(self.verdict)}**", "", f"Report made {md(made_at)}", ""]
        lines += [f"- {md(k)}: {md(v)}" for k, v in _flat(self.provenance).items()] + [""]
        figures: dict[str, bytes] = {}
        for sec in self.sections:
            lines += [f"## {md(sec.title)}", ""]
            for kind, value in sec.parts:
                if kind in ("text", "caution"):
                    lines += [("> " if kind == "caution" else "") + md(value), ""]
                elif kind == "code":
                    # An indented block: every line indented, so no text can end it early.
                    lines += ["    " + line for line in value.splitlines()] + [""]
                elif kind == "table":
                    lines += [value[1], ""]  # formatting.markdown_table escapes every cell
                elif kind == "figure":
                    png, alt = value
                    name = f"figure-{len(figures) + 1}.png"
                    figures[name] = png
                    lines += [f"![{md(alt)}]({quote(f'{figure_dir}/{name}')})", ""]
        return "\n".join(lines), figures


def _e(text) -> str:
    return html.escape(str(text))


def _flat(prov: dict) -> dict:
    out = {k: v for k, v in prov.items() if k not in ("analysis", "notice")}
    out.update({f"analysis {k}": v for k, v in prov.get("analysis", {}).items()})
    return out


def _provenance_html(prov: dict) -> str:
    rows = "".join(f"<tr><th>{_e(k)}</th><td>{_e(v)}</td></tr>" for k, v in _flat(prov).items())
    return f'<table class="prov">{rows}</table>'


def _table(columns: dict, spec, row_class=None):
    from spurplan.output.formatting import html_table, markdown_table

    return ("table", (html_table(columns, spec, row_class), markdown_table(columns, spec)))


def _figure_png(fig) -> bytes:
    buf = io.BytesIO()
    # No software or date metadata: the same figure gives the same bytes.
    fig.savefig(buf, format="png", dpi=FIGURE_DPI, metadata={"Software": None})
    from spurplan.output.plots import close

    close(fig)
    return buf.getvalue()


@dataclass(frozen=True)
class BenchSession:
    """What the bench brought back, for the report's "Bench against plan" section.

    Attributes
    ----------
    trace : MeasuredTrace or None
        A spectrum-analyser trace of the output (:func:`spurplan.io.traces.read_trace`).
    threshold_db : float
        Peaks stand this far above the trace's floor (dB).
    tolerance_hz : float or None
        Largest frequency difference of a match (Hz; ``None``: the default, 3 RBW).
    fits : tuple
        Stage figures fitted from bench sweeps (:mod:`spurplan.analyses.figure_fit`).
    """

    trace: MeasuredTrace | None = None
    threshold_db: float = 10.0
    tolerance_hz: float | None = None
    fits: tuple = ()


def build_report(lineup, bench: BenchSession | None = None) -> Report:
    """Compute everything the report shows for ``lineup``, and the bench session beside the plan.

    Parameters
    ----------
    lineup : Lineup
        With a mask.
    bench : BenchSession, optional
        What the bench brought back (a "Bench against plan" section when given).

    Returns
    -------
    Report
    """
    from spurplan.output.plots import check_figure, drive_figure, tune_figure

    outcome = check(lineup)
    prov = provenance(lineup)
    verdict = outcome.verdict
    sections = [_lineup_section(lineup), _budget_section(outcome.result)]
    rows = outcome.rows
    failing = [p is False for p in rows["pass"]]
    check_sec = Section("Products at the antenna port against the mask")
    check_sec.parts.append(
        (
            "text",
            f"{sum(failing)} of {sum(p is not None for p in rows['pass'])} checked products fail. "
            "Rows are sorted by margin; failing rows are marked FAIL. " + listing_floor_text(outcome),
        )
    )
    check_sec.parts.append(_table(check_display(rows), CHECK_TABLE, lambda i: "fail" if failing[i] else None))
    check_sec.parts.append(
        (
            "figure",
            (
                _figure_png(check_figure(outcome)),
                "Output spectrum against the most stringent limit; protected bands shaded.",
            ),
        )
    )
    sections.append(check_sec)
    spec = lineup.report
    if spec is not None and spec.drive is not None:
        sections.append(_drive_section(lineup, spec.drive, drive_figure))
    else:
        sections.append(
            _not_asked("Drive sweep", "drive", '{ start = "-20 dBm", stop = "+6 dBm", step = "0.25 dB" }')
        )
    if spec is not None and spec.tune is not None:
        sections.append(_tune_section(lineup, spec.tune, tune_figure))
    else:
        sections.append(
            _not_asked("Tuning sweep", "tune", '{ start = "440 MHz", stop = "470 MHz", step = "12.5 kHz" }')
        )
    filters = _filter_section(lineup)
    if filters is not None:
        sections.append(filters)
    if has_tolerances(lineup):
        sections.append(_yield_section(lineup))
    if bench is not None:
        sections.append(_bench_section(lineup, outcome, bench))
    sections.append(_assumptions_section(lineup))
    sections.append(_cautions_section(outcome))
    return Report(
        title=f"{lineup.name}: spurious-emission review",
        verdict=verdict,
        provenance=prov,
        sections=sections,
        status=outcome.status,
    )


def _bench_section(lineup, outcome, bench: BenchSession) -> Section:
    """The measured trace beside the plan (overlay, match table, the trace against the
    mask) and the fitted figures beside the stated ones."""
    from spurplan.output.bench_compare import (
        MATCH_TABLE,
        TRACE_RULE_TABLE,
        match_display,
        trace_rule_display,
    )
    from spurplan.output.plots import check_figure
    from spurplan.output.verdicts import bench_verdict, trace_mask_verdict

    sec = Section("Bench against plan")
    if bench.trace is not None:
        from spurplan.analyses.bench_compare import compare

        found = compare(
            lineup,
            bench.trace,
            threshold_db=bench.threshold_db,
            tolerance_hz=bench.tolerance_hz,
            outcome=outcome,
        )
        t = bench.trace
        sec.parts.append(
            (
                "text",
                f"Measured trace {t.source} (RBW {(t.rbw_hz or 0.0) / 1e3:.6g} kHz, detector "
                f"{t.detector or 'not stated'}); peaks {found.threshold_db:g} dB above its floor, matched to the "
                f"predicted products within {found.tolerance_hz / 1e3:.6g} kHz. "
                + bench_verdict(found, "report"),
            )
        )
        sec.parts.append(
            (
                "figure",
                (
                    _figure_png(check_figure(outcome, trace=t)),
                    "The measured trace (in the limit line's RBW) beside the predicted products and the mask.",
                ),
            )
        )
        sec.parts.append(_table(match_display(found), MATCH_TABLE))
        if found.mask is not None:
            sec.parts.append(("text", trace_mask_verdict(found.mask, "report")))
            sec.parts.append(_table(trace_rule_display(found), TRACE_RULE_TABLE))
    sec.parts.extend(_fit_parts(lineup, bench.fits))
    return sec


def _fit_parts(lineup, fits) -> list:
    """Each fit's figures beside the lineup's, its verdict line and its table to paste."""
    from spurplan.output.figure_fit import BESIDE_TABLE, beside_stated_rows, fit_snippet, verdict_line

    parts: list = []
    for fit in fits:
        files = ", ".join(str(s.path) for s in fit.sweeps)
        parts.append(
            (
                "text",
                f"Stage '{fit.stage}' fitted to the bench sweep(s) {files}, with the engine's own amplifier model, "
                f"by least squares in dB: {verdict_line(fit)}",
            )
        )
        parts.append(_table(beside_stated_rows(fit, lineup), BESIDE_TABLE))
        parts.append(("text", "The fitted figures as a [[stage]] table (uncertainties as comments):"))
        parts.append(("code", fit_snippet(fit)))
    return parts


def build_modes_report(modes) -> Report:
    """One report over several operating modes: each mode's sections under its name.

    The verdict is the one over all modes (the worst mode's status,
    :func:`spurplan.output.verdicts.modes_verdict`), each mode's own verdict the first
    section; then every mode's report (:func:`build_report`) with its section titles
    led by the mode's name, and what the mode overrides in the base file.

    Parameters
    ----------
    modes : sequence of Mode
        The modes, in file order, each with a mask.

    Returns
    -------
    Report
    """
    from spurplan.model.modes import worst_status
    from spurplan.output.verdicts import modes_verdict

    reports = [build_report(m.lineup) for m in modes]
    verdict = modes_verdict("VERDICT", [(m.label, r.status) for m, r in zip(modes, reports, strict=True)])
    summary = Section("Verdict in each mode")
    for m, r in zip(modes, reports, strict=True):
        summary.parts.append(("text", f"{m.label}: {r.verdict}"))
    sections = [summary]
    for m, r in zip(modes, reports, strict=True):
        changes = ", ".join(m.overrides) if m.overrides else "nothing (the base file as it stands)"
        first = Section(
            f"{m.label}: what the mode changes", [("text", f"Overrides of the base file: {changes}.")]
        )
        sections.append(first)
        sections += [Section(f"{m.label}: {sec.title}", sec.parts) for sec in r.sections]
    head = reports[0]
    return Report(
        title=head.title,
        verdict=verdict,
        provenance={**head.provenance, "mode": ", ".join(str(m.name) for m in modes)},
        sections=sections,
        status=worst_status(r.status for r in reports),
    )


def _lineup_section(lineup) -> Section:
    sec = Section("Lineup")
    carriers = {
        "name": [f"f{k + 1}" for k in range(len(lineup.carriers))],
        "freq_mhz": [c.freq_hz / 1e6 for c in lineup.carriers],
        "power_dbm": [c.power_dbm for c in lineup.carriers],
        "bandwidth_khz": [None if c.bandwidth_hz is None else c.bandwidth_hz / 1e3 for c in lineup.carriers],
    }
    sec.parts.append(_table(carriers, CARRIER_TABLE))
    stages: dict[str, list] = {"position": [], "name": [], "kind": [], "figures": []}
    for i, s in enumerate(lineup.stages, start=1):
        stages["position"].append(i)
        stages["name"].append(s.name)
        stages["kind"].append(s.kind)
        stages["figures"].append(s.describe_figures())
    sec.parts.append(_table(stages, STAGE_TABLE))
    return sec


def _budget_section(result) -> Section:
    sec = Section("Cascade budget (strongest carrier)")
    sec.parts.append(_table(budget_rows(result), BUDGET_TABLE))
    return sec


def _drive_section(lineup, drive, drive_figure) -> Section:
    from spurplan.analyses.sweep import drive_sweep

    start, stop, step = drive
    sw = drive_sweep(lineup, start, stop, step)
    sec = Section(f"Drive sweep, {start:+g} to {stop:+g} dBm input in {step:g} dB steps")
    sec.parts.append(("text", drive_verdict(sw, "report")))
    if sw.limiting is not None:
        lim = sw.limiting
        cols = {
            "max_in_dbm": [sw.max_compliant_input_dbm],
            "max_out_dbm": [sw.max_compliant_output_dbm],
            "label": [lim["label"]],
            "freq_mhz": [lim["freq_hz"] / 1e6],
            "rule": [lim["rule"]],
            "band": [lim["band"]],
            "stage": [lim["stage"]],
        }
        sec.parts.append(
            (
                "text",
                "What limits it: the product that fails first above the highest compliant drive "
                "(refined to 0.001 dB) and the rule that judges it.",
            )
        )
        sec.parts.append(_table(cols, LIMITING_TABLE))
    sec.parts.append(
        (
            "text",
            _SWEEP_JUDGES
            + model_caveat(lineup, channels=False)
            + unsettled_caveat(sw.unsettled_signed, len(sw.input_dbm), "drive points")
            + ".",
        )
    )
    sec.parts.append(
        (
            "figure",
            (_figure_png(drive_figure(sw)), "Products (solid) and their limits (dashed) against drive."),
        )
    )
    return sec


def _tune_section(lineup, tune, tune_figure) -> Section:
    from spurplan.analyses.sweep import tune_sweep
    from spurplan.io.channels import sweep_points

    start, stop, step = tune
    sw = tune_sweep(lineup, sweep_points(start, stop, step, "channel", "Hz"))
    var = sw.variable
    sec = Section(
        f"Tuning sweep, the {var} from {start / 1e6:g} to {stop / 1e6:g} MHz in {step / 1e3:g} kHz steps"
    )
    sec.parts.append(("text", tune_verdict(sw, "report")[0]))
    entries = sw.summary
    if entries:
        bands = sorted({e["band"] for e in entries if e["band"] is not None})
        sec.parts.append(
            (
                "text",
                f"Per product and rule or protected band, worst first: the {var} values (MHz) at which "
                "it is listed (it fails or lands in a protected band; channel counts in brackets), "
                "those at which it fails (edges refined to 1 Hz where a product starts to fail), and "
                f"the channel where its margin is least. {len(entries)} entries; "
                + (
                    f"products land in {len(bands)} protected band(s): {'; '.join(bands)}."
                    if bands
                    else "no product lands in a protected band."
                ),
            )
        )
        failing = [not e["pass"] for e in entries]
        sec.parts.append(
            _table(
                tune_summary_display(entries),
                tune_summary_table(var),
                lambda i: "fail" if failing[i] else None,
            )
        )
    else:
        sec.parts.append(("text", "No product fails or lands in a protected band on any channel."))
    unsettled = 0 if sw.unsettled is None else int(sw.unsettled.sum())
    sec.parts.append(
        (
            "text",
            _SWEEP_JUDGES
            + model_caveat(lineup)
            + unsettled_caveat(unsettled, len(sw.carrier_hz), "channels")
            + ".",
        )
    )
    sec.parts.append(
        (
            "figure",
            (
                _figure_png(tune_figure(sw)),
                f"Product frequency against {var} frequency, each product its own line; failures in red.",
            ),
        )
    )
    return sec


# Drive and tuning sweeps judge the discrete products (verdicts.PRODUCTS_ONLY, as a sentence).
_SWEEP_JUDGES = "The sweep judges the products only (the check above judges the noise and ACPR)"


def _not_asked(title: str, key: str, example: str) -> Section:
    sec = Section(title)
    sec.parts.append(
        ("text", f"Not asked for: add {key} = {example} to the lineup's [report] table to include it.")
    )
    return sec


def listing_floor_dbm(outcome) -> float:
    """The level (dBm) below which the check lists no product.

    Parameters
    ----------
    outcome : CheckResult
        What :func:`spurplan.analyses.check.check` found.

    Returns
    -------
    float
        :data:`spurplan.engine.result.REPORT_FLOOR_DBC` below the strongest carrier at the
        output (the carrier row, or with modulated carriers the strongest carrier line, in
        dBm): below it the engine's float64 transforms give rounding, not products.
    """
    import numpy as np

    spec = outcome.spectrum
    if spec is not None:
        power = spec.psd_dbm_hz + 10 * np.log10(spec.step_hz)
        ref = float(np.max(power[spec.is_carrier]))
    else:
        levels = outcome.result.levels(None, None, rows=slice(0, 1))
        ref = float(levels.carrier_ref_dbm[0])
    return ref + REPORT_FLOOR_DBC


def listing_floor_text(outcome) -> str:
    """The sentence that says which products the check leaves out, and at what level.

    Parameters
    ----------
    outcome : CheckResult
        What :func:`spurplan.analyses.check.check` found.

    Returns
    -------
    str
        One sentence (dBm, dB): the listing floor and the order above which products are
        not computed.
    """
    lineup = outcome.result.lineup
    return (
        f"Products below {listing_floor_dbm(outcome):+.2f} dBm ({-REPORT_FLOOR_DBC:g} dB below the strongest "
        "carrier at the output, where the engine's arithmetic gives rounding, not products) are not listed, "
        f"and products above order {lineup.analysis.max_order} are not computed."
    )


def has_tolerances(lineup) -> bool:
    """Whether the lineup states part tolerances or corners (the report then has a yield).

    Parameters
    ----------
    lineup : Lineup

    Returns
    -------
    bool
    """
    tol = lineup.tolerances
    return bool(tol.items or tol.corners)


def _filter_section(lineup) -> Section | None:
    filters = [s for s in lineup.stages if s.kind == "filter"]
    if not filters:
        return None
    sec = Section("Filters")
    for stage in filters:
        if stage.prototype is None:
            t = stage.table
            sec.parts.append(
                (
                    "text",
                    f"'{stage.name}': measured or simulated data, not a synthesized ladder: Touchstone file "
                    f"{stage.data_file}, {t.freq_hz.size} points from {t.freq_hz[0] / 1e6:g} to "
                    f"{t.freq_hz[-1] / 1e6:g} MHz; no element values or Q (the data hold the parts' losses).",
                )
            )
            continue
        sec.parts.append(
            (
                "text",
                f"'{stage.name}': {stage.describe_figures()}; terminated in {stage.r_ohm:g} ohm. Element values "
                "of the ladder (g: the normalized prototype values; Q_L, Q_C: the unloaded Q of each arm's "
                "inductor and capacitor):",
            )
        )
        sec.parts.append(_table(element_display(stage.elements()), ELEMENT_TABLE))
    return sec


def _yield_section(lineup) -> Section:
    from spurplan.analyses.montecarlo import run_yield

    res = run_yield(lineup, REPORT_YIELD_SAMPLES, seed=REPORT_YIELD_SEED)
    sec = Section(f"Yield over the stated tolerances, {res.samples} Monte Carlo samples")
    sec.parts.append(
        (
            "text",
            f"{res.samples} samples (seed {res.seed}), each at every corner, at the lineup's own carriers "
            "(the tuning range is not swept here; the yield command takes channels and more samples). "
            + yield_verdict(res).removeprefix("YIELD: ")
            + ".",
        )
    )
    if res.causes:
        sec.parts.append(("text", "What fails the rest (worst product of each failing sample):"))
        sec.parts.append(_table(res.rows, CAUSE_TABLE))
    return sec


def _figure_value(value: float, unit: str, at_dbm: float | None) -> str:
    return f"{value:+.2f} {unit}" + (f" @ {at_dbm:+.2f} dBm" if at_dbm is not None else "")


def _assumptions_section(lineup) -> Section:
    a = lineup.analysis
    sec = Section("Assumptions behind the numbers")
    texts = [
        f"Products up to order {a.max_order} of the {len(lineup.carriers)} carrier(s), computed with the "
        "multi-tone torus engine: exact for polynomial models, converged to 1e-4 for saturating ones; "
        "products above the order are dropped after each stage.",
        f"Stage contributions combine as '{a.combine}' "
        + {
            "worst": "(magnitudes add: interconnect phases are unknown, the conservative choice).",
            "power": "(powers add: uncorrelated phases).",
            "phase": "(as modelled, phase-true: the interconnect phases of the model are taken as real).",
        }[a.combine],
        "Amplifier figures set a memoryless model in peak volts whose small-signal terms are the "
        "datasheet's (IIP3 from A^2 = (4/3)|a1/a3|, IIP2 from A = |a1/a2|); with psat or p1db it "
        "saturates through an output rail whose level and knee are fitted so that both figures hold. "
        "Each harmonic zone carries a weight on what the stage generates there, fitted so that every "
        "stated hN holds at its output power; zones without a figure follow the memoryless relations "
        "(HIP3 = IP3 + 4.77 dB, HIP2 = IP2 + 6.02 dB). A polynomial-only stage driven past a 1 dB gain "
        "deviation is flagged.",
        "A figure that a stage does not state is not invented: the products it describes are left out "
        "(no 2nd-order figure: no even-order products from that stage; no compression figure: the stage "
        "stays linear; a mixer without LO isolation: no LO leakage). Such a lineup is INCOMPLETE, never "
        "PASS.",
        f"Linear stages: '{a.linear_sections}' ("
        + (
            "each stage matched, S21 multiplied"
            if a.linear_sections == "matched"
            else "consecutive linear stages cascaded with full S-parameters"
        )
        + f"); outside a Touchstone file's data the policy is '{a.beyond_data}'.",
        "A product of carriers with occupied bandwidths B_k is taken to spread over sum |m_k| B_k "
        "(an approximation; carriers without a bandwidth are CW) and reads 10 log10(B/RBW) lower in a "
        "narrower reference bandwidth. Relative limits use the total mean carrier power at the output.",
    ]
    if lineup.mask is not None:
        texts.append(
            f"Products within {lineup.mask.spurious_boundary:g} necessary bandwidths of a carrier "
            "with a stated bandwidth are in the out-of-band domain and are not judged here."
        )
    sec.parts.extend(("text", t) for t in texts)
    sec.parts.extend(("text", f"Model note: {n}") for n in lineup.notes)
    missing = lineup.missing_figures()
    if missing:
        sec.parts.append(("text", "Figures not given, so the products they describe are not modelled:"))
        sec.parts.append(
            _table({"stage": [m[0] for m in missing], "figure": [m[1] for m in missing]}, MISSING_TABLE)
        )
    rows = figure_check_rows(lineup)
    if rows:
        sec.parts.append(
            ("text", "Stated large-signal figures beside what the fitted model gives at the same point:")
        )
        shown = {c: [r[c] for r in rows] for c in ("stage", "figure", "miss_db")}
        shown["stated_text"] = [_figure_value(r["stated"], r["unit"], r["at_dbm"]) for r in rows]
        shown["model_text"] = [
            "not reached" if r["model"] is None else _figure_value(r["model"], r["unit"], r["at_dbm"])
            for r in rows
        ]
        shown["met_text"] = ["yes" if r["met"] else "NO" for r in rows]
        sec.parts.append(_table(shown, FIGURE_CHECK_TABLE))
    if lineup.mask is not None:
        sets = lineup.mask.sets
        cols = {
            "name": [s.name for s in sets],
            "title": [s.title for s in sets],
            "source": [s.source for s in sets],
            "status": [
                ", ".join(sorted({e.status for e in (*s.rules, *s.bands, *s.adjacent_channels)}))
                for s in sets
            ],
        }
        sec.parts.append(("text", "Rule sets and band lists used, with their sources:"))
        sec.parts.append(_table(cols, RULESET_TABLE))
    return sec


def _cautions_section(outcome) -> Section:
    sec = Section("Cautions")
    sec.parts.append(("caution", PLANNING_NOTICE))
    sec.parts.append(
        (
            "caution",
            "Values marked 'from memory' in the rule sets have not been checked against the "
            "published text; check them against the edition that applies before relying on them.",
        )
    )
    sec.parts.append(("caution", power_notice(outcome.carrier_dbm) or POWER_NOTICE))
    return sec


def write_report(lineup, path, now: datetime | None = None, bench: BenchSession | None = None) -> Path:
    """Build the report and write it atomically: ``.html`` self-contained, ``.md`` with figures beside it.

    Parameters
    ----------
    lineup : Lineup or sequence of Mode
        The lineup to report on (with a mask for the compliance sections), or several
        modes of one file (:func:`build_modes_report`).
    path : str or Path
        The report file; its suffix (``.html``, ``.htm`` or ``.md``) chooses the format.
    now : datetime, optional
        The time printed as made (default the current time, UTC).
    bench : BenchSession, optional
        A bench session to set beside the plan (one lineup only).

    Returns
    -------
    Path
        The file written.

    Raises
    ------
    LineupError
        For an unknown suffix (field ``path``), before anything is built.
    OutputError
        For a target (or, for Markdown, a figure folder) that cannot be written, also
        before anything is built.
    """
    from spurplan.errors import LineupError

    # Every refusal of the target comes before the (slow) build, and nothing is written then.
    path = check_target(path)
    suffix = path.suffix.lower()
    if suffix not in (".html", ".htm", ".md"):
        raise LineupError(
            f"{path}: unknown report format {suffix or '(none)'!r}: expected .html or .md", field="{@path}"
        )
    folder = f"{path.stem}_files"
    if suffix == ".md":
        check_folder(path.parent / folder, MARKDOWN_FIGURE)
    made_at = (now or datetime.now(UTC)).strftime("%Y-%m-%d %H:%M:%S UTC")
    report = build_report(lineup, bench) if hasattr(lineup, "stages") else build_modes_report(lineup)
    if suffix in (".html", ".htm"):
        return write_atomic(path, report.to_html(made_at))
    text, figures = report.to_markdown(made_at, folder)
    # The figures folder and the text as one unit: figures first, then the text, an
    # earlier folder replaced only when it holds nothing but earlier figures.
    return write_with_folder(path, text, folder, figures, MARKDOWN_FIGURE)


# Names of the figure files a Markdown report writes beside it (Report.to_markdown).
MARKDOWN_FIGURE = re.compile(r"figure-\d+\.png")


_CSS = """
body { font-family: sans-serif; max-width: 1250px; margin: 1.5em auto; color: #111; line-height: 1.35; }
h1 { font-size: 1.5em; } h2 { font-size: 1.2em; margin-top: 1.6em; border-bottom: 1px solid #999; }
table { border-collapse: collapse; font-size: 0.8em; margin: 0.6em 0; }
th, td { border: 1px solid #bbb; padding: 2px 6px; text-align: left; vertical-align: top; }
thead th { background: #eee; }
tr.fail td { background: #fde2e2; font-weight: bold; }
p.verdict { font-size: 1.15em; font-weight: bold; padding: 0.5em; border: 2px solid #333; }
p.verdict.fail { border-color: #b00; } p.verdict.pass { border-color: #070; }
p.verdict.incomplete, p.verdict.uncertain { border-color: #b60; }
p.caution { border-left: 4px solid #c60; padding-left: 0.6em; }
p.made { color: #555; font-size: 0.85em; }
table.prov th { background: #f4f4f4; width: 14em; }
figure { margin: 0.6em 0; } figure img { max-width: 100%; }
@media print { body { max-width: none; margin: 0; } h2 { break-after: avoid; } figure, table { break-inside: avoid; } }
"""
