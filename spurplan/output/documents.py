"""The machine-readable document of every result: its summary beside its rows.

A :class:`Document` is what ``--format json`` and ``--format csv`` print: the summary
(headline figures, verdict data and, for every result of a lineup, the provenance of
:mod:`spurplan.output.provenance`) and the rows under their key.  One function per
result type builds it, so that the library's results hold data only and every front
end writes the same document.  The notebook views (HTML) of the results live here too.
"""

from __future__ import annotations

import html
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from spurplan.analyses.check import ACPR_DOMAIN, NOISE_LABEL
from spurplan.notices import PLANNING_NOTICE, power_notice
from spurplan.output.formatting import html_table, to_csv, to_json
from spurplan.output.provenance import provenance
from spurplan.output.tables import (
    CHECK_TABLE,
    DRIVE_TABLE,
    PRODUCT_TABLE,
    check_display,
    drive_display,
    product_display,
    tune_display,
    tune_summary_display,
    tune_summary_table,
    tune_table,
)
from spurplan.output.verdicts import drive_verdict, if_plan_verdict, model_caveat

if TYPE_CHECKING:  # annotations only
    from spurplan.analyses.check import CheckResult
    from spurplan.analyses.filter_view import FilterView
    from spurplan.analyses.frequency_plan import IfPlan
    from spurplan.analyses.montecarlo import YieldResult
    from spurplan.analyses.remedy import Remedy
    from spurplan.analyses.spur_chart import SpurChart
    from spurplan.analyses.sweep import DriveSweep, TuneSweep
    from spurplan.engine.result import Result


@dataclass(frozen=True)
class Document:
    """A summary and its rows, as JSON or CSV.

    Attributes
    ----------
    summary : dict
        Headline figures, verdict data and provenance, written as given.
    rows_key : str
        Key of the row list in JSON (``"products"``, ``"points"`` ...).
    rows : dict of str -> list
        Data by column name.
    """

    summary: dict
    rows_key: str
    rows: dict

    def json(self) -> str:
        """``{"summary": ..., rows_key: [...]}`` (:func:`spurplan.output.formatting.to_json`)."""
        return to_json(self.summary, self.rows_key, self.rows)

    def csv(self) -> str:
        """The rows as CSV (:func:`spurplan.output.formatting.to_csv`)."""
        return to_csv(self.rows)


def products_document(result: Result, stage: str | None = None, combine: str | None = None) -> Document:
    """The products at a node: headline figures, flags and provenance, then every row.

    Parameters
    ----------
    result : Result
        A run of a lineup (batch element 0 is reported).
    stage : str or None
        Stage whose output to report; ``None`` for the lineup output.
    combine : {"worst", "power", "phase"} or None
        ``None`` uses the lineup's analysis setting.

    Returns
    -------
    Document
        Summary: lineup name, node, combining mode, carrier levels (dBm), product count,
        the strongest product (Hz, dBm, dBc), flagged stages, notes and provenance; rows
        under ``"products"`` (:meth:`~spurplan.engine.result.Result.product_rows`, with the
        output noise density at each product's frequency, ``noise_dbm_hz``).
    """
    rows = result.product_rows(stage, combine)
    products = [i for i, kind in enumerate(rows["kind"]) if kind == "product"]
    worst = max(products, key=lambda i: rows["level_dbm"][i]) if products else None
    lineup = result.lineup
    # The continuous part beside the discrete products: the output noise density at each
    # product's frequency (dBm/Hz; None at an inner node or where a stage lacks a figure).
    from spurplan.engine.noise import output_noise_dbm_hz, unknown_noise_stages

    noise = None
    if stage is None and not unknown_noise_stages(lineup) and rows["freq_hz"]:
        freqs = np.maximum(np.asarray(rows["freq_hz"], dtype=float), 1.0)
        noise = np.asarray(output_noise_dbm_hz(lineup, freqs, result.tone_freqs_hz[0])).tolist()
    rows = {**rows, "noise_dbm_hz": noise if noise is not None else [None] * len(rows["freq_hz"])}
    summary = {
        "lineup": lineup.name,
        "node": stage or "output",
        "combine": combine or lineup.analysis.combine,
        "carrier_dbm": [float(v) for v in result.carrier_levels_dbm(stage, 0)],
        "n_products": len(products),
        "strongest": None
        if worst is None
        else {c: rows[c][worst] for c in ("label", "freq_hz", "level_dbm", "dbc", "stage")},
        "model_extrapolated": result.extrapolated_stages,
        "not_converged": result.unconverged_stages,
        "notes": list(lineup.notes),
        **provenance(lineup),
    }
    return Document(summary, "products", rows)


def spectrum_document(spec, lineup, result, stage: str | None = None, combine: str | None = None) -> Document:
    """The line spectrum of a modulated lineup at a node: how the carriers were modelled,
    the raster, then every line (:func:`spurplan.analyses.spectrum_view.line_rows`) under
    ``"lines"``, its density in dBm/Hz beside the output noise density.

    Parameters
    ----------
    spec : LineSpectrum
    lineup : Lineup
    result : Result
        The lineup's CW run.
    stage : str or None
    combine : str or None

    Returns
    -------
    Document
    """
    from spurplan.analyses.spectrum_view import cluster_rows, line_rows

    clusters = cluster_rows(spec, lineup, result)
    summary = {
        "lineup": lineup.name,
        "node": stage or "output",
        "combine": combine or lineup.analysis.combine,
        "modulation": [None if c.modulation is None else c.modulation.describe() for c in lineup.carriers],
        "raster_hz": spec.step_hz,
        "realizations": spec.realizations,
        "n_lines": len(spec.freq_hz),
        "clusters": [
            dict(zip(clusters, values, strict=True)) for values in zip(*clusters.values(), strict=True)
        ],
        "notes": list(lineup.notes),
        **provenance(lineup),
    }
    return Document(summary, "lines", line_rows(spec, lineup, result, stage))


def budget_document(result: Result) -> Document:
    """The cascade budget: the lineup's name and provenance, then one row per stage.

    Parameters
    ----------
    result : Result
        A run of a lineup.

    Returns
    -------
    Document
        Rows under ``"stages"``: :func:`spurplan.analyses.budget.budget_rows` (levels in
        dBm, gains in dB).
    """
    from spurplan.analyses.budget import budget_rows

    rows = budget_rows(result)
    return Document({"lineup": result.lineup.name, **provenance(result.lineup)}, "stages", rows)


def check_summary(outcome: CheckResult) -> dict:
    """The headline of a compliance check: verdict, worst product, coverage, provenance.

    Parameters
    ----------
    outcome : CheckResult
        What :func:`spurplan.analyses.check.check` found.

    Returns
    -------
    dict
        Status, pass, completeness and the figures the model lacks or misses, the worst
        margin (dB) and its row, counts, the total carrier power (dBm), the rule sets,
        notes, extrapolated stages, provenance and the planning notice.
    """
    from spurplan.analyses.check import CHECK_COLUMNS, figure_check_rows

    lineup = outcome.result.lineup
    mask = lineup.mask
    assert mask is not None  # check() made this result, and it refuses a lineup without one
    rows = outcome.rows
    worst = None if outcome.worst is None else {c: rows[c][outcome.worst] for c in CHECK_COLUMNS}
    return {
        "lineup": lineup.name,
        "status": outcome.status,
        "pass": outcome.passed,
        "complete": outcome.complete,
        "unjudged_out_of_band": len(outcome.unjudged_rows),
        "noise_not_judged": list(outcome.noise_not_judged),
        "not_converged": list(outcome.not_converged),
        "acpr_not_judged": list(outcome.acpr_not_judged),
        "missing_figures": [{"stage": st, "figure": what} for st, what in outcome.missing_figures],
        "figures_met": not outcome.figures_missed,
        "figure_checks": figure_check_rows(lineup),
        "worst_margin_db": outcome.worst_margin_db,
        "worst": worst,
        "failing": outcome.n_failing,
        "checked": outcome.n_checked,
        "carrier_total_dbm": outcome.carrier_dbm,
        "rule_sets": [{"name": s.name, "title": s.title, "source": s.source} for s in mask.sets],
        "notes": list(outcome.notes) + list(lineup.notes),
        "model_extrapolated": outcome.result.extrapolated_stages,
        **provenance(lineup),
        "notice": PLANNING_NOTICE,
        **({"power_notice": power_notice(outcome.carrier_dbm)} if power_notice(outcome.carrier_dbm) else {}),
    }


def check_document(outcome: CheckResult) -> Document:
    """:func:`check_summary` and the checked products under ``"products"``; the output
    noise judged under each rule (one row per rule, where it leaves the least margin)
    under the summary's ``"noise"``, and every adjacent channel an ACPR rule judges
    (:data:`spurplan.analyses.check.ACPR_KEYS`) under its ``"acpr"``.

    Parameters
    ----------
    outcome : CheckResult
        What :func:`spurplan.analyses.check.check` found.

    Returns
    -------
    Document
    """
    rows = outcome.rows
    noise = [i for i, label in enumerate(rows["label"]) if label == NOISE_LABEL]
    acpr = {i for i, domain in enumerate(rows["domain"]) if domain == ACPR_DOMAIN}
    skip = set(noise) | acpr
    products = {c: [v for i, v in enumerate(col) if i not in skip] for c, col in rows.items()}
    summary = check_summary(outcome)
    summary["noise"] = [{c: rows[c][i] for c in rows if c not in ("order", "mix")} for i in noise]
    summary["acpr"] = [dict(entry) for entry in outcome.acpr]
    spec = outcome.spectrum
    if spec is not None:
        # The judged spectrum itself: every line's frequency (Hz) and density (dBm/Hz).
        summary["spectrum"] = {
            "raster_hz": spec.step_hz,
            "realizations": spec.realizations,
            "freq_hz": spec.freq_hz.tolist(),
            "psd_dbm_hz": spec.psd_dbm_hz.tolist(),
            "kind": ["carrier" if c else "product" for c in spec.is_carrier],
        }
    return Document(summary, "products", products)


def drive_summary(sweep: DriveSweep) -> dict:
    """The verdict of a drive sweep: status, highest compliant drive and what limits it.

    Parameters
    ----------
    sweep : DriveSweep
        What :func:`spurplan.analyses.sweep.drive_sweep` found.

    Returns
    -------
    dict
        Lineup name, status, highest compliant input and output drive (dBm) and the
        limiting product, without provenance.
    """
    return {
        "lineup": sweep.lineup.name,
        "status": sweep.status,
        "model_gaps": model_caveat(sweep.lineup, channels=False).lstrip("; "),
        "unsettled_points": sweep.unsettled_signed,
        "max_compliant_input_dbm": sweep.max_compliant_input_dbm,
        "max_compliant_output_dbm": sweep.max_compliant_output_dbm,
        "limiting": sweep.limiting,
    }


def drive_document(sweep: DriveSweep) -> Document:
    """:func:`drive_summary` with provenance, and one row per drive point under ``"points"``.

    Parameters
    ----------
    sweep : DriveSweep
        What :func:`spurplan.analyses.sweep.drive_sweep` found.

    Returns
    -------
    Document
    """
    return Document({**drive_summary(sweep), **provenance(sweep.lineup)}, "points", sweep.rows)


def tune_document(sweep: TuneSweep) -> Document:
    """The verdict of a tuning sweep with provenance, and its rows under ``"rows"``.

    Parameters
    ----------
    sweep : TuneSweep
        What :func:`spurplan.analyses.sweep.tune_sweep` found.

    Returns
    -------
    Document
        Summary: lineup name, what was swept (``"carrier"``, or ``"LO"`` with a mixer: the
        rows' ``carrier_hz`` holds it), the channel count, pass, the failing ranges (Hz),
        ``by_product`` (:attr:`TuneSweep.summary`: per product and rule or band, where it
        fails or lands and its worst channel and margin), then provenance.
    """
    summary = {
        "lineup": sweep.lineup.name,
        "model_gaps": model_caveat(sweep.lineup).lstrip("; "),
        "unsettled_channels": 0 if sweep.unsettled is None else int(sweep.unsettled.sum()),
        "swept": sweep.variable,
        "channels": len(sweep.carrier_hz),
        "pass": sweep.passed,
        "failing_ranges": sweep.failing,
        "by_product": sweep.summary,
    }
    return Document({**summary, **provenance(sweep.lineup)}, "rows", sweep.rows)


def remedy_document(found: Remedy) -> Document:
    """What the remedy found, with provenance, and the rejection needed under ``"needed"``.

    Parameters
    ----------
    found : Remedy
        What :func:`spurplan.analyses.remedy.remedy` found.

    Returns
    -------
    Document
        Summary: the margin target (dB), whether a filter was found and why not, where
        it goes, its snippet and parts, the check before (and after) it, every candidate
        tried and the filter's elements.
    """
    from spurplan.output.verdicts import advice_sentence, remedy_reason

    out = {
        "lineup": found.lineup.name,
        "margin_target_db": found.margin_target_db,
        "found": found.found,
        "reason": remedy_reason(found),
        "insert_after": found.after,
        "snippet": found.snippet,
        "parts": found.parts,
        "before": {"pass": found.before.passed, "worst_margin_db": found.before.worst_margin_db},
        "tried": found.tried,
        "channels": [
            {
                "case": case.name,
                "swept": "LO" if case.lineup.mixers else "carrier",
                "count": len(ch),
                "first_hz": float(ch.min()),
                "last_hz": float(ch.max()),
                "from": origin,
            }
            for case, (ch, origin) in zip(found.cases, found.channels, strict=True)
        ],
        "advice": [
            {**a, "text": advice_sentence(a, {c.name: c.lineup for c in found.cases}.get(a.get("case", "")))}
            for a in found.advice
        ],
    }
    # remedy() sets filter and outcome together, with the snippet, when it finds a filter.
    if found.filter is not None and found.outcome is not None:
        out["after"] = {"pass": found.outcome.passed, "worst_margin_db": found.outcome.worst_margin_db}
        out["elements"] = found.filter.elements()
        out["recheck"] = [
            _channel_recheck(case, sweep, found.margin_target_db)
            for case, sweep in zip(found.cases, found.recheck, strict=True)
        ]
    return Document({**out, **provenance(found.lineup)}, "needed", found.needed)


def _channel_recheck(case, sweep, target_db: float) -> dict:
    """One case of the remedy re-checked on every channel: count, whether it meets the mask
    and the margin target (dB), the worst margin (dB) and its channel (Hz)."""
    import numpy as np

    b = int(np.argmin(sweep.worst_margin_db))
    worst = float(sweep.worst_margin_db[b])
    return {
        "case": case.name,
        "channels": len(sweep.carrier_hz),
        "pass": bool(sweep.passed),
        "meets_target": bool(worst >= target_db),
        "model_gaps": model_caveat(case.lineup).lstrip("; "),
        "worst_margin_db": worst if np.isfinite(worst) else None,
        "worst_channel_hz": float(sweep.carrier_hz[b]),
    }


def yield_document(res: YieldResult) -> Document:
    """The yield, its interval and causes with provenance; the causes under ``"causes"``.

    The summary also holds ``"by_corner"`` and ``"by_channel"``: per corner and per channel
    (:func:`spurplan.analyses.montecarlo.breakdown_row`) the samples, failures, yield, its
    Wilson interval and the leading cause there.

    Parameters
    ----------
    res : YieldResult
        What :func:`spurplan.analyses.montecarlo.run_yield` found.

    Returns
    -------
    Document
    """
    lo, hi = res.interval
    summary = {
        "lineup": res.lineup.name,
        "model_gaps": model_caveat(res.lineup, channels=bool(res.by_channel)).lstrip("; "),
        "unsettled_passing_samples": res.unsettled_passing,
        "samples": res.samples,
        "seed": res.seed,
        "passed": res.passed,
        "yield": res.yield_fraction,
        "interval_95": [lo, hi],
        "interval_method": "Wilson score",
        "causes": res.causes,
        "by_corner": list(res.by_corner),
        "by_channel": list(res.by_channel),
        "channel_tunes": "first mixer's LO" if res.lineup.mixers else "reference carrier",
        "ran_on": res.where,
        **provenance(res.lineup),
    }
    return Document(summary, "causes", res.rows)


def spur_document(chart: SpurChart, rows: dict | None = None) -> Document:
    """A mixer's chart: the mixer, its LO, the following filter and what lands in its passband.

    Parameters
    ----------
    chart : SpurChart
        What :func:`spurplan.analyses.spur_chart.spur_chart` found.
    rows : dict of str -> list, optional
        The rows to list (default every row of the chart); the summary always covers
        the whole chart.

    Returns
    -------
    Document
        Rows under ``"products"``.
    """
    summary = {
        "lineup": chart.lineup.name,
        "mixer": chart.mixer.name,
        "lo_hz": chart.mixer.lo_freq_hz,
        "sideband": chart.mixer.sideband,
        "following_filter": chart.filter_name,
        "in_passband": chart.in_passband,
        **provenance(chart.lineup),
    }
    return Document(summary, "products", chart.rows if rows is None else rows)


def if_plan_document(plan: IfPlan) -> Document:
    """An IF plan: candidates, channels, forbidden bands, verdict and provenance; windows under ``"windows"``.

    Parameters
    ----------
    plan : IfPlan
        What :func:`spurplan.analyses.frequency_plan.plan_if` found.

    Returns
    -------
    Document
        Rows (Hz) best first under ``"windows"``.
    """
    ch, f = plan.channels_hz, plan.if_hz
    summary = {
        "lineup": plan.lineup.name,
        "mixer": plan.mixer,
        "injection": plan.injection,
        "lo_rule": plan.lo_rule,
        "order": plan.order,
        "rank": plan.rank,
        "guard_hz": plan.guard_hz,
        "if_candidates": {
            "start_hz": float(f[0]),
            "stop_hz": float(f[-1]),
            "step_hz": plan.if_step_hz,
            "count": len(f),
            "spur_free": int(plan.spur_free.sum()),
        },
        "channels": {
            "first_hz": float(ch[0]),
            "last_hz": float(ch[-1]),
            "count": len(ch),
            "source": plan.channel_source,
        },
        "passband": {
            "start_hz": plan.passband_hz[0],
            "stop_hz": plan.passband_hz[1],
            "source": plan.passband_source,
        },
        "protected_bands_judged": plan.protected_bands,
        "bands": [{"name": n, "start_hz": lo, "stop_hz": hi} for n, lo, hi in plan.bands],
        "window_count": plan.window_count,
        "found": plan.found,
        "lineup_if_hz": plan.lineup_if_hz,
        "lineup_if_rank": plan.lineup_if_rank,
        "verdict": if_plan_verdict(plan),
        "notes": list(plan.notes),
        **provenance(plan.lineup),
    }
    return Document(summary, "windows", plan.rows)


def filter_document(view: FilterView) -> Document:
    """A filter's prototype, parts, elements and notes; its response under ``"products"``.

    Parameters
    ----------
    view : FilterView
        A stage of a lineup (with provenance) or a prototype on its own.

    Returns
    -------
    Document
    """
    from spurplan.model.ladders import describe_parts

    proto = view.stage.prototype
    out = {
        "stage": view.stage.name,
        "source": view.stage.source,
        "prototype": None if proto is None else {k: getattr(proto, k) for k in proto.__dataclass_fields__},
        "parts": None if proto is None else describe_parts(proto),
        "elements": view.elements,
        "notes": list(view.notes),
    }
    if view.lineup is not None:
        out["combine"] = view.combine
        out.update(provenance(view.lineup))
    return Document(out, "products", view.rows)


def bands_document(rows: dict, summary: dict) -> Document:
    """The shipped rule sets and band lists, or the entries of one, under ``"entries"``.

    Parameters
    ----------
    rows : dict of str -> list
        :func:`spurplan.analyses.bands_view.catalogue_rows` or the rows of
        :func:`~spurplan.analyses.bands_view.band_rows`.
    summary : dict
        Empty for the catalogue; the set's name, title, source and notes otherwise.

    Returns
    -------
    Document
    """
    return Document(summary, "entries", rows)


def check_html(outcome: CheckResult) -> str:
    """The notebook view of a check: the lineup, the verdict, the table with failing rows marked.

    Parameters
    ----------
    outcome : CheckResult
        What :func:`spurplan.analyses.check.check` found.

    Returns
    -------
    str
        HTML (every name escaped).
    """
    failing = [p is False for p in outcome.rows["pass"]]
    table = html_table(check_display(outcome.rows), CHECK_TABLE, lambda i: "fail" if failing[i] else None)
    style = "<style>tr.fail td {background: #fde2e2; font-weight: bold}</style>"
    name = outcome.result.lineup.name
    return f"{style}<p><b>{html.escape(name)}</b></p><p><b>{html.escape(outcome.verdict)}</b></p>{table}"


def products_html(result: Result) -> str:
    """The products at the lineup output as an HTML table, under the lineup's name.

    Parameters
    ----------
    result : Result
        A run of a lineup.

    Returns
    -------
    str
        HTML (every name escaped).
    """
    rows = result.product_rows()
    name = html.escape(str(result.lineup.name))
    head = f"<p><b>{name}</b>: products at the output (combine = {result.lineup.analysis.combine})</p>"
    return head + html_table(product_display(rows), PRODUCT_TABLE)


def drive_html(sweep: DriveSweep) -> str:
    """A drive sweep as HTML: its status and verdict data, then one row per drive point.

    Parameters
    ----------
    sweep : DriveSweep
        What :func:`spurplan.analyses.sweep.drive_sweep` found.

    Returns
    -------
    str
        HTML.
    """
    name, verdict = html.escape(sweep.lineup.name), html.escape(drive_verdict(sweep, style="report"))
    return f"<p><b>{name}</b></p><p><b>{html.escape(sweep.status)}</b>: {verdict}</p>" + html_table(
        drive_display(sweep.rows), DRIVE_TABLE
    )


def tune_html(sweep: TuneSweep) -> str:
    """A tuning sweep as HTML: how many ranges fail, the summary per product and rule or band,
    then the rows that fail or land in a band.

    Parameters
    ----------
    sweep : TuneSweep
        What :func:`spurplan.analyses.sweep.tune_sweep` found.

    Returns
    -------
    str
        HTML.
    """
    from spurplan.analyses.tune_summary import band_rule_labels

    head = "every channel passes" if not sweep.failing else f"{len(sweep.failing)} failing range(s)"
    var = sweep.variable
    summary = html_table(tune_summary_display(sweep.summary), tune_summary_table(var))
    rows = html_table(tune_display(sweep.rows, band_rule_labels(sweep.lineup.mask)), tune_table(var))
    return f"<p><b>{head}</b></p>{summary}<p>Per channel:</p>{rows}"
