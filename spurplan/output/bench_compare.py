"""A measured trace beside the plan, as people and programs read it: the match table,
the rules judged on the trace, their verdict lines (:mod:`spurplan.output.verdicts`),
and the JSON/CSV document.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from spurplan.notices import PLANNING_NOTICE, power_notice
from spurplan.output.documents import Document
from spurplan.output.formatting import text_table
from spurplan.output.verdicts import bench_verdict, trace_mask_verdict

if TYPE_CHECKING:  # annotations only
    from spurplan.analyses.bench_compare import BenchComparison

MATCH_COLUMNS = [
    "status",
    "label",
    "kind",
    "freq_hz",
    "measured_freq_hz",
    "predicted_dbm",
    "measured_dbm",
    "difference_db",
    "floor_dbm",
    "stage",
]

MATCH_TABLE = [
    ("status", "status", None),
    ("label", "product", None),
    ("freq_mhz", "freq (MHz)", ".6f"),
    ("measured_freq_mhz", "measured at (MHz)", ".6f"),
    ("predicted_dbm", "predicted (dBm)", ".2f"),
    ("measured_dbm", "measured (dBm)", ".2f"),
    ("difference_db", "difference (dB)", "+.2f"),
    ("floor_dbm", "floor (dBm)", ".2f"),
    ("stage", "largest from", None),
]

TRACE_RULE_COLUMNS = [
    "rule",
    "rbw_hz",
    "resolved",
    "points",
    "freq_hz",
    "level_dbm",
    "limit_dbm",
    "margin_db",
    "status",
    "reason",
]

TRACE_RULE_TABLE = [
    ("rule", "rule", None),
    ("rbw_khz", "RBW (kHz)", ".6g"),
    ("points", "points", "d"),
    ("freq_mhz", "worst at (MHz)", ".6f"),
    ("level_dbm", "level in RBW (dBm)", ".2f"),
    ("limit_dbm", "limit (dBm)", ".2f"),
    ("margin_db", "margin (dB)", "+.2f"),
    ("status", "status", None),
]


def match_rows(comparison: BenchComparison) -> dict[str, list]:
    """One row per matched product, predicted product not seen, and unmatched peak.

    Parameters
    ----------
    comparison : BenchComparison
        What :func:`spurplan.analyses.bench_compare.compare` found.

    Returns
    -------
    dict of str -> list
        :data:`MATCH_COLUMNS` (Hz, dBm, dB); ``status`` is ``seen``, ``not seen``
        (predicted above the floor, no peak), ``below threshold`` (above the floor by
        less than the threshold, no peak) or ``unmatched peak``; in frequency order.
    """
    rows: list[tuple] = []
    for m in comparison.matches:
        p = m.prediction
        rows.append(
            (
                "seen",
                p.label,
                p.kind,
                p.freq_hz,
                m.peak.freq_hz,
                p.level_dbm,
                m.peak.level_dbm,
                m.difference_db,
                m.peak.floor_dbm,
                p.stage,
            )
        )
    for n in comparison.not_seen:
        p = n.prediction
        status = "not seen" if n.detectable else "below threshold"
        rows.append((status, p.label, p.kind, p.freq_hz, None, p.level_dbm, None, None, n.floor_dbm, p.stage))
    for k in comparison.unmatched:
        rows.append(
            ("unmatched peak", None, None, None, k.freq_hz, None, k.level_dbm, None, k.floor_dbm, None)
        )
    rows.sort(key=lambda r: r[3] if r[3] is not None else r[4])
    return {c: [r[i] for r in rows] for i, c in enumerate(MATCH_COLUMNS)}


def trace_rule_rows(comparison: BenchComparison) -> dict[str, list]:
    """One row per rule judged on the trace (:data:`TRACE_RULE_COLUMNS`), least margin first.

    Parameters
    ----------
    comparison : BenchComparison
        What :func:`spurplan.analyses.bench_compare.compare` found.

    Returns
    -------
    dict of str -> list
        Empty lists when the lineup has no mask.
    """
    rules = comparison.mask.rules if comparison.mask is not None else ()
    return {c: [getattr(r, c) for r in rules] for c in TRACE_RULE_COLUMNS}


def _mhz(values):
    return [None if v is None else v / 1e6 for v in values]


def match_display(comparison: BenchComparison) -> dict[str, list]:
    """:func:`match_rows` with the frequencies in MHz, for :data:`MATCH_TABLE`."""
    rows = match_rows(comparison)
    return {**rows, "freq_mhz": _mhz(rows["freq_hz"]), "measured_freq_mhz": _mhz(rows["measured_freq_hz"])}


def trace_rule_display(comparison: BenchComparison) -> dict[str, list]:
    """:func:`trace_rule_rows` with RBW in kHz and frequencies in MHz, for :data:`TRACE_RULE_TABLE`."""
    rules = trace_rule_rows(comparison)
    return {
        **rules,
        "rbw_khz": [None if v is None else v / 1e3 for v in rules["rbw_hz"]],
        "freq_mhz": _mhz(rules["freq_hz"]),
    }


def compare_text(comparison: BenchComparison) -> str:
    """The terminal text of a comparison: the match table, the rules on the trace, the lines.

    Parameters
    ----------
    comparison : BenchComparison
        What :func:`spurplan.analyses.bench_compare.compare` found.

    Returns
    -------
    str
        Heading, tables (MHz, dBm, dB), the verdict lines and the planning notice.
    """
    t = comparison.trace
    shown = match_display(comparison)
    rbw = (t.rbw_hz or 0.0) / 1e3  # compare() refuses a trace without one
    head = (
        f"{comparison.lineup_name}: measured trace {t.source} (RBW {rbw:.6g} kHz, detector "
        f"{t.detector or 'not stated'}) against the plan; peaks {comparison.threshold_db:g} dB above the floor, "
        f"matched within {comparison.tolerance_hz / 1e3:.6g} kHz\n"
    )
    text = head + text_table(shown, MATCH_TABLE)
    lines = [bench_verdict(comparison)]
    if comparison.mask is not None:
        text += "\nthe trace against the mask (each rule in its own reference bandwidth)\n"
        text += text_table(trace_rule_display(comparison), TRACE_RULE_TABLE)
        lines.append(trace_mask_verdict(comparison.mask))
    carrier = comparison.carrier_dbm
    notice = power_notice(carrier) if carrier is not None else ""
    return text + "".join(f"{line}\n" for line in [*lines, PLANNING_NOTICE, *filter(None, [notice])])


def compare_notes(comparison: BenchComparison) -> list[str]:
    """The comparison's notes and those of its mask check.

    Parameters
    ----------
    comparison : BenchComparison
        What :func:`spurplan.analyses.bench_compare.compare` found.

    Returns
    -------
    list of str
    """
    notes = list(comparison.notes)
    if comparison.outside_span:
        notes.append(f"{comparison.outside_span} predicted products lie outside the trace's span")
    if comparison.below_floor:
        notes.append(f"{comparison.below_floor} predicted products within the span lie below the floor")
    if comparison.mask is not None:
        notes += list(comparison.mask.notes)
    return notes


def compare_document(comparison: BenchComparison, provenance: dict | None = None) -> Document:
    """The comparison as JSON/CSV: a summary, and the match rows under ``"products"``.

    Parameters
    ----------
    comparison : BenchComparison
        What :func:`spurplan.analyses.bench_compare.compare` found.
    provenance : dict, optional
        The lineup's provenance (:func:`spurplan.output.provenance.provenance`).

    Returns
    -------
    Document
        Summary: lineup, trace (file, RBW Hz, detector, reference level dBm, span Hz,
        points), threshold (dB), tolerance (Hz), counts, the verdict lines, the rules on
        the trace (:data:`TRACE_RULE_COLUMNS`) and their status, notes, provenance and
        the planning notice; rows :data:`MATCH_COLUMNS`.
    """
    t = comparison.trace
    mask = comparison.mask
    carrier = comparison.carrier_dbm
    summary = {
        "lineup": comparison.lineup_name,
        "trace": {
            "file": t.source,
            "rbw_hz": t.rbw_hz,
            "detector": t.detector,
            "reference_level_dbm": t.reference_level_dbm,
            "span_hz": list(t.span_hz),
            "points": int(t.freq_hz.size),
        },
        "threshold_db": comparison.threshold_db,
        "tolerance_hz": comparison.tolerance_hz,
        "peaks": len(comparison.peaks),
        "matched": len(comparison.matches),
        "not_seen": sum(1 for n in comparison.not_seen if n.detectable),
        "below_threshold": sum(1 for n in comparison.not_seen if not n.detectable),
        "unmatched_peaks": len(comparison.unmatched),
        "below_floor": comparison.below_floor,
        "outside_span": comparison.outside_span,
        "verdict": bench_verdict(comparison),
        "mask": None
        if mask is None
        else {
            "status": mask.status,
            "verdict": trace_mask_verdict(mask),
            "carrier_dbm": mask.carrier_dbm,
            "uncovered": list(mask.uncovered),
            "unjudged_points": mask.unjudged_points,
            "rules": [{c: getattr(r, c) for c in TRACE_RULE_COLUMNS} for r in mask.rules],
        },
        "notes": compare_notes(comparison),
        **(provenance or {}),
        "notice": PLANNING_NOTICE,
        **({"power_notice": power_notice(carrier)} if carrier is not None and power_notice(carrier) else {}),
    }
    return Document(summary, "products", match_rows(comparison))
