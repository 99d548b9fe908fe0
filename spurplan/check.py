"""The compliance check: every product at the output against the mask.

For each product at the lineup output this finds the rules that apply (frequency
range, the rule set's examined range, carrier conditions), reads the product's level
in each rule's reference bandwidth, and keeps the most stringent rule: the one that
leaves the least margin.  Products inside a protected band are also held to the
band's own rules and carry the band's name.  Products within the spurious boundary
of a carrier with a stated bandwidth are in the out-of-band domain and are listed
but not judged against spurious limits.

The mean carrier power P used by relative and attenuation rules is the total of the
carrier rows at the output (all carriers, as modelled).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .errors import LineupError
from .notices import PLANNING_NOTICE

CHECK_COLUMNS = [
    "freq_hz",
    "level_dbm",
    "level_in_rbw_dbm",
    "bandwidth_hz",
    "limit_dbm",
    "margin_db",
    "pass",
    "rule",
    "limit_form",
    "rbw_hz",
    "rule_source",
    "band",
    "domain",
    "stage",
    "order",
    "mix",
    "label",
    "dbc",
    "beyond_data",
    "model_extrapolated",
]


@dataclass(frozen=True)
class CheckResult:
    """Outcome of :func:`check`.

    Attributes
    ----------
    rows : dict of str -> list
        ``CHECK_COLUMNS``, one entry per product (carriers excluded), sorted by margin
        (failing first; products no rule covers last).
    passed : bool
    worst : int or None
        Index of the row with the least margin.
    carrier_dbm : float
        Total mean carrier power at the output (dBm).
    notes : list of str
    """

    result: object
    rows: dict
    passed: bool
    worst: int | None
    carrier_dbm: float
    notes: tuple[str, ...]

    @property
    def worst_margin_db(self) -> float | None:
        return None if self.worst is None else self.rows["margin_db"][self.worst]

    def summary(self) -> dict:
        from .provenance import provenance

        lineup = self.result.lineup
        worst = None if self.worst is None else {c: self.rows[c][self.worst] for c in CHECK_COLUMNS}
        failing = sum(1 for p in self.rows["pass"] if p is False)
        return {
            "lineup": lineup.name,
            "pass": self.passed,
            "worst_margin_db": self.worst_margin_db,
            "worst": worst,
            "failing": failing,
            "checked": sum(1 for p in self.rows["pass"] if p is not None),
            "carrier_total_dbm": self.carrier_dbm,
            "rule_sets": [{"name": s.name, "title": s.title, "source": s.source} for s in lineup.mask.sets],
            "notes": list(self.notes) + list(lineup.notes),
            "model_extrapolated": self.result.extrapolated_stages,
            **provenance(lineup),
            "notice": PLANNING_NOTICE,
        }

    def table(self):
        """The rows as a pandas DataFrame."""
        import pandas as pd

        return pd.DataFrame(self.rows, columns=CHECK_COLUMNS)


def check(lineup, result=None, combine: str | None = None, batch: int = 0) -> CheckResult:
    """Check the lineup's output products against its ``[mask]``.

    Parameters
    ----------
    lineup : Lineup
        Must have a mask.
    result : Result, optional
        A run to reuse (else the lineup is run).
    combine : str, optional
        Override of the analysis combining mode.
    """
    mask = lineup.mask
    if mask is None or not (mask.rules or mask.bands):
        raise LineupError(
            "no emission limits: expected a [mask] table with use = [...] or [[mask.rule]]",
            file=None if lineup.source is None else str(lineup.source),
        )
    result = result if result is not None else lineup.run()
    rows = result.product_rows(None, combine, batch)
    carrier_idx = [i for i, k in enumerate(rows["kind"]) if k == "carrier"]
    levels = np.array(rows["level_dbm"])
    total_mw = np.sum(10 ** (levels[carrier_idx] / 10))
    p_dbm = float(10 * np.log10(total_mw))
    strongest = max(lineup.carriers, key=lambda c: c.power_dbm)
    f_carrier = strongest.freq_hz

    prod = [i for i, k in enumerate(rows["kind"]) if k == "product"]
    freq = np.array([rows["freq_hz"][i] for i in prod], dtype=float)
    level = levels[prod] if prod else np.zeros(0)
    mix = np.array([rows["mix"][i] for i in prod], dtype=float).reshape(len(prod), len(lineup.carriers))
    bw_k = np.array([c.bandwidth_hz or 0.0 for c in lineup.carriers])
    bandwidth = np.abs(mix) @ bw_k

    domain = np.full(len(prod), "spurious", dtype=object)
    for c in lineup.carriers:
        if c.bandwidth_hz:
            near = np.abs(freq - c.freq_hz) < mask.spurious_boundary * c.bandwidth_hz
            domain[near] = "out-of-band"

    candidates = _candidates(mask, f_carrier, p_dbm)
    gain = mask.antenna_gain_dbi(freq)
    best_margin = np.full(len(prod), np.inf)
    best_rule = np.full(len(prod), -1)
    best_limit = np.full(len(prod), np.nan)
    best_level = np.full(len(prod), np.nan)
    for j, (rule, ex) in enumerate(candidates):
        covers = _covers(rule, ex, freq, f_carrier) & (domain == "spurious")
        if not covers.any():
            continue
        in_rbw = level.copy()
        if rule.rbw_hz is not None:
            wide = bandwidth > rule.rbw_hz
            in_rbw[wide] -= 10 * np.log10(bandwidth[wide] / rule.rbw_hz)
        limit = rule.limit_dbm(freq, p_dbm, gain)
        margin = limit - in_rbw
        better = covers & (margin < best_margin)
        best_margin[better] = margin[better]
        best_rule[better] = j
        best_limit[better] = limit[better]
        best_level[better] = in_rbw[better]

    bands_of = [", ".join(b.name for b in mask.bands if b.start_hz <= f <= b.stop_hz) for f in freq]
    checked = best_rule >= 0
    out = {c: [] for c in CHECK_COLUMNS}
    order = sorted(range(len(prod)), key=lambda i: (not checked[i], best_margin[i], freq[i]))
    for i in order:
        src = prod[i]
        rule = candidates[best_rule[i]][0] if checked[i] else None
        out["freq_hz"].append(float(freq[i]))
        out["level_dbm"].append(float(level[i]))
        out["level_in_rbw_dbm"].append(float(best_level[i]) if checked[i] else None)
        out["bandwidth_hz"].append(float(bandwidth[i]))
        out["limit_dbm"].append(float(best_limit[i]) if checked[i] else None)
        out["margin_db"].append(float(best_margin[i]) if checked[i] else None)
        out["pass"].append(bool(best_margin[i] >= 0) if checked[i] else None)
        out["rule"].append(f"{rule.origin}: {rule.name}" if rule else None)
        out["limit_form"].append(rule.describe if rule else None)
        out["rbw_hz"].append(rule.rbw_hz if rule else None)
        out["rule_source"].append(f"{rule.source} [{rule.status}]" if rule else None)
        out["band"].append(bands_of[i] or None)
        out["domain"].append(domain[i] if domain[i] != "spurious" or checked[i] else "no rule")
        for key in ("stage", "order", "mix", "label", "dbc", "beyond_data", "model_extrapolated"):
            out[key].append(rows[key][src])
    margins = [m for m in out["margin_db"] if m is not None]
    worst = int(np.argmin([m if m is not None else math.inf for m in out["margin_db"]])) if margins else None
    passed = all(m >= 0 for m in margins)
    return CheckResult(
        result=result,
        rows=out,
        passed=passed,
        worst=worst,
        carrier_dbm=p_dbm,
        notes=tuple(_coverage_notes(lineup, mask, f_carrier)),
    )


def _candidates(mask, f_carrier: float, p_dbm: float):
    """(rule, examined range or None) pairs that hold for this carrier."""
    pairs = [(r, ex) for r, ex in mask.rules] + [(r, None) for b in mask.bands for r in b.rules]
    return [(r, ex) for r, ex in pairs if r.holds_for(f_carrier, p_dbm)]


def _covers(rule, examined, freq: np.ndarray, f_carrier: float) -> np.ndarray:
    lo, hi = rule.start_hz, rule.stop_hz
    if examined is not None:
        lo, hi = max(lo, examined.start_hz), min(hi, examined.upper_hz(f_carrier))
    return (freq >= lo) & (freq <= hi)


def limit_line(outcome: CheckResult, freq_hz: np.ndarray) -> np.ndarray:
    """Most stringent conducted limit (dBm, each in its own RBW) at ``freq_hz``; NaN where none."""
    lineup = outcome.result.lineup
    f_carrier = max(lineup.carriers, key=lambda c: c.power_dbm).freq_hz
    freq_hz = np.asarray(freq_hz, dtype=float)
    gain = lineup.mask.antenna_gain_dbi(freq_hz)
    line = np.full(freq_hz.shape, np.inf)
    for rule, ex in _candidates(lineup.mask, f_carrier, outcome.carrier_dbm):
        covers = _covers(rule, ex, freq_hz, f_carrier)
        line = np.where(covers, np.minimum(line, rule.limit_dbm(freq_hz, outcome.carrier_dbm, gain)), line)
    return np.where(np.isinf(line), np.nan, line)


def _coverage_notes(lineup, mask, f_carrier: float) -> list[str]:
    """Warn where the analysis order does not reach a rule set's examined range."""
    notes = []
    reach = lineup.analysis.max_order * max(c.freq_hz for c in lineup.carriers)
    for s in mask.sets:
        top = s.examined.upper_hz(f_carrier)
        if s.rules and math.isfinite(top) and top > reach * (1 + 1e-9):
            notes.append(
                f"{s.name} examines up to {top / 1e6:.6g} MHz but products are computed only to order "
                f"{lineup.analysis.max_order} ({reach / 1e6:.6g} MHz): raise [analysis] max_order"
            )
    return notes
