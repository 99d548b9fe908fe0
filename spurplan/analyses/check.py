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

Adjacent-channel (ACPR) rules add one row per rule, carrier, offset and side: the
power in that channel (the products in it plus the output noise integrated over it,
:func:`channel_power_dbm`) against the rule's dBc limit (relative to that carrier's
own power) and absolute limit, the more stringent deciding.  A channel that overlaps
another carrier's own channel is occupied and not judged (a note says so).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from spurplan.errors import LineupError
from spurplan.model.masks import bandwidth_text
from spurplan.model.products import label

if TYPE_CHECKING:
    from spurplan.engine.result import Result
    from spurplan.engine.spectra import (
        LineSpectrum,
    )  # annotations only; the check runs on a Result it is handed

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
    noise_not_judged : tuple of str
        Where the output noise could not be judged (a rule without a reference
        bandwidth, frequencies beyond a stage's data): the status is then INCOMPLETE.
    acpr : tuple of dict
        One entry per judged adjacent channel (rule, carrier, offset, side), the keys of
        :data:`ACPR_KEYS` (Hz, dBm, dBc, dB); each is also a row of ``rows`` (domain
        :data:`ACPR_DOMAIN`).
    acpr_not_judged : tuple of str
        Adjacent channels an ACPR rule asks for but the check cannot judge (a channel
        that overlaps its own carrier's, a modulated carrier whose own spectral regrowth
        the model leaves out): the status is then INCOMPLETE.
    spectrum : LineSpectrum or None
        With modulated carriers, the output's line spectrum the rows were judged on.
    not_converged : tuple of str
        Stages whose levels did not settle (a grid at its limit, or products kept beyond
        ``max_order`` still moving them): the status is then at best UNCERTAIN.
    """

    result: Result
    rows: dict
    passed: bool
    worst: int | None
    carrier_dbm: float
    notes: tuple[str, ...]
    noise_not_judged: tuple[str, ...] = ()
    acpr: tuple[dict, ...] = ()
    spectrum: LineSpectrum | None = None
    not_converged: tuple[str, ...] = ()
    acpr_not_judged: tuple[str, ...] = ()

    @property
    def worst_margin_db(self) -> float | None:
        return None if self.worst is None else self.rows["margin_db"][self.worst]

    @property
    def missing_figures(self) -> tuple[tuple[str, str], ...]:
        """``(stage, figure)`` the model lacks (:meth:`Lineup.missing_figures`)."""
        return self.result.lineup.missing_figures()

    @property
    def figures_missed(self) -> tuple:
        """``(stage, FigureCheck)`` of stated figures the model does not meet.

        The check runs the loaded stages, fitted at the lineup's own channel: the checks
        of the per-channel models that tuning sweeps and yield use at a figure table's
        other frequencies (``FigureCheck.freq_hz``) are theirs, not the check's (they are
        listed among the figure checks all the same).
        """
        return tuple((s, c) for s, c in self.result.lineup.figures_missed() if c.freq_hz is None)

    @property
    def complete(self) -> bool:
        return not self.missing_figures

    @property
    def unjudged_rows(self) -> list[int]:
        """Rows in the out-of-band domain that no rule judges (the spurious limits do not
        apply there, and the mask has no rule for it): they keep the verdict from PASS."""
        return [
            i
            for i, (domain, ok) in enumerate(zip(self.rows["domain"], self.rows["pass"], strict=True))
            if domain == "out-of-band" and ok is None
        ]

    @property
    def status(self) -> str:
        """``PASS``, ``FAIL``, ``INCOMPLETE`` (the computed products pass, but figures
        are missing) or ``UNCERTAIN`` (they pass, but the model misses a stated figure).

        Only a complete model that meets every stated figure can PASS: a missing or
        doubtful number never turns into one.
        """
        if not self.passed:
            return "FAIL"
        if self.missing_figures or self.unjudged_rows or self.noise_not_judged or self.acpr_not_judged:
            return "INCOMPLETE"
        if self.figures_missed or self.not_converged:
            return "UNCERTAIN"
        return "PASS"

    @property
    def verdict(self) -> str:
        """One line: the status, the worst margin, which product, rule, band and stage,
        and what the model does not know."""
        if self.worst is None:
            core = "no product falls under the mask"
        else:
            w = {
                c: self.rows[c][self.worst]
                for c in ("margin_db", "label", "freq_hz", "rule", "band", "stage")
            }
            core = (
                f"worst margin {w['margin_db']:+.2f} dB: {w['label']} at {w['freq_hz'] / 1e6:.6f} MHz "
                f"under {w['rule']}"
                + (f" (in {w['band']})" if w["band"] else "")
                + f", largest from {w['stage']}"
            )
        status = self.status
        if status == "PASS" and self.worst is None:
            return f"NO RULE APPLIES: {core}"
        gaps = model_gaps(self.missing_figures, self.figures_missed)
        if self.missing_figures:
            core += " (products that are modelled)"
        unjudged = self.unjudged_rows
        if unjudged:
            top = max(unjudged, key=lambda i: self.rows["level_dbm"][i])
            not_judged = (
                f"{len(unjudged)} product{'s' * (len(unjudged) > 1)} in the out-of-band domain not judged "
                f"(no out-of-band rule; strongest {self.rows['label'][top]} at {self.rows['dbc'][top]:+.2f} dBc)"
            )
            gaps = f"{not_judged}; {gaps}" if gaps else not_judged
        if self.noise_not_judged:
            noise = "noise not judged " + "; ".join(self.noise_not_judged)
            gaps = f"{noise}; {gaps}" if gaps else noise
        if self.acpr_not_judged:
            acpr = "ACPR not judged: " + "; ".join(self.acpr_not_judged)
            gaps = f"{acpr}; {gaps}" if gaps else acpr
        if self.not_converged:
            unsettled = (
                f"levels not settled at {', '.join(repr(s) for s in self.not_converged)} (the model needs "
                "more products or a finer grid than spurplan allows there: a lower max_order or drive)"
            )
            gaps = f"{unsettled}; {gaps}" if gaps else unsettled
        return f"{status}, {core}" + (f"; {gaps}" if gaps else "")

    def strict_failure(self, strict: bool | None = None) -> bool:
        """Whether the check fails under strict mode (``--strict`` or ``[analysis] strict``):
        a violated mask, an incomplete model, or a stated figure the model misses."""
        strict = self.result.lineup.analysis.strict if strict is None else strict
        return not self.passed or (strict and self.status != "PASS")

    @property
    def n_failing(self) -> int:
        """Products that fail their rule."""
        return sum(1 for p in self.rows["pass"] if p is False)

    @property
    def n_checked(self) -> int:
        """Products a rule applies to."""
        return sum(1 for p in self.rows["pass"] if p is not None)

    def limit_line_dbm(self, freq_hz: np.ndarray) -> np.ndarray:
        """The most stringent limit (dBm) at ``freq_hz``, as :func:`limit_line` gives it.

        Parameters
        ----------
        freq_hz : ndarray
            Frequencies (Hz), any shape.

        Returns
        -------
        ndarray, same shape as ``freq_hz``
            The limit (dBm, each in its own RBW), NaN where no rule covers the frequency.
        """
        return limit_line(self, freq_hz)

    def _repr_html_(self) -> str:
        """Jupyter: the verdict, then the product table with failing rows marked."""
        # the one upward door: presentation, imported on use
        from spurplan.output.documents import check_html

        return check_html(self)

    def plot(self, size_px=(1200, 700)):
        """The output spectrum against the mask; returns a matplotlib Figure."""
        # the one upward door: presentation, imported on use
        from spurplan.output.plots import check_figure

        return check_figure(self, size_px)

    def table(self):
        """The rows as a pandas DataFrame."""
        import pandas as pd

        return pd.DataFrame(self.rows, columns=CHECK_COLUMNS)


def model_gaps(missing, missed) -> str:
    """What the model does not know, in words: missing figures by stage, then misses.

    Parameters
    ----------
    missing : iterable of (str, str)
        ``(stage name, figure)`` pairs of figures a stage does not give.
    missed : iterable of (str, FigureCheck)
        ``(stage name, check)`` pairs where the model misses a stated figure.

    Returns
    -------
    str
        ``"not modelled: ...; model misses: ..."``, empty when there is nothing to say.
    """
    parts = []
    by_stage: dict[str, list[str]] = {}
    for stage, what in missing:
        by_stage.setdefault(stage, []).append(what)
    if by_stage:
        parts.append(
            "not modelled: "
            + "; ".join(f"stage '{st}' has no {', no '.join(whats)}" for st, whats in by_stage.items())
        )
    if missed:
        parts.append("model misses: " + "; ".join(f"stage '{st}' {c.describe()}" for st, c in missed))
    return "; ".join(parts)


def figure_check_rows(lineup) -> list[dict]:
    """Every stated large-signal figure beside the model's value, as plain rows."""
    return [
        {
            "stage": stage,
            "figure": c.figure,
            "stated": c.stated,
            "at_dbm": c.at_dbm,
            "model": c.model,
            "unit": c.unit,
            "miss_db": c.miss_db,
            "met": c.met,
            "freq_hz": c.freq_hz,
        }
        for stage, c in lineup.figure_checks()
    ]


DOMAINS = ("spurious", "out-of-band", "no rule")


@dataclass(frozen=True)
class MaskEvaluation:
    """The mask applied to every product slot of a batch (arrays ``(B, G)``).

    Attributes
    ----------
    margin_db, limit_dbm, level_in_rbw_dbm, bandwidth_hz : ndarray (B, G)
        NaN where no rule applies.
    rule : ndarray of int (B, G)
        Index into ``rules`` of the rule that holds, -1 where none does.
    domain : ndarray of int (B, G)
        Index into :data:`DOMAINS`; carriers and unused slots are -1.
    rules : list of (Rule, Examined or None)
    carrier_dbm : ndarray (B,)
        Total mean carrier power at the output.
    """

    margin_db: np.ndarray
    limit_dbm: np.ndarray
    level_in_rbw_dbm: np.ndarray
    bandwidth_hz: np.ndarray
    rule: np.ndarray
    domain: np.ndarray
    rules: list
    carrier_dbm: np.ndarray

    @property
    def worst_margin_db(self) -> np.ndarray:
        """Least margin per batch element (inf where nothing is checked)."""
        return np.where(self.rule >= 0, self.margin_db, np.inf).min(axis=1)

    @property
    def worst_slot(self) -> np.ndarray:
        return np.argmin(np.where(self.rule >= 0, self.margin_db, np.inf), axis=1)

    @property
    def passed(self) -> np.ndarray:
        return self.worst_margin_db >= 0


def require_mask(lineup):
    """The lineup's mask, or a one-line error when it has none."""
    mask = lineup.mask
    if mask is None or not (mask.rules or mask.bands or mask.adjacent_channels):
        raise LineupError(
            "no emission limits: expected a [mask] table with use = [...], [[mask.rule]] "
            "or [[mask.adjacent_channel]]",
            file=None if lineup.source is None else str(lineup.source),
        )
    return mask


def evaluate(lineup, result, levels, in_rbw_dbm=None) -> MaskEvaluation:
    """Apply the lineup's mask to node levels of a run (every batch element at once).

    Parameters
    ----------
    lineup : Lineup
    result : Result
        The run (its tone frequencies per batch element follow a tuning sweep).
    levels : NodeLevels
        Output-node levels of that run (:meth:`Result.levels`), shape (B, G).
    in_rbw_dbm : callable, optional
        ``in_rbw_dbm(rbw_hz) -> (B, G)``: each slot's level in a reference bandwidth, for
        slots that are lines of a spectrum (:class:`spurplan.engine.spectra.LineSpectrum`);
        default the product's whole power (a product of carriers without a modulation is
        taken as CW for the mask: conservative where it is in fact spread).

    Returns
    -------
    MaskEvaluation
        Margin (dB), limit (dBm), level in the rule's RBW (dBm), bandwidth (Hz), rule
        and domain of every slot, arrays (B, G).

    Raises
    ------
    LineupError
        The lineup has no mask.
    """
    mask = require_mask(lineup)
    freq, level = levels.freq_hz, levels.level_dbm
    product = levels.valid & ~levels.is_carrier
    p_dbm = levels.carrier_total_dbm
    carriers_hz = result.carrier_freqs_hz()
    # Rule conditions (when_carrier) test the reference carrier; the examined range
    # follows the highest carrier at the output, per batch element (47 CFR 2.1057(a)(1):
    # up to the 10th harmonic of the highest fundamental frequency; from memory).
    f_carrier = carriers_hz[:, lineup.reference_carrier_index]
    f_highest = carriers_hz.max(axis=1)
    # Occupied bandwidth per base tone: the carriers' own, none for an LO.
    n_lo = len(lineup.mixers)
    bw_k = np.array([0.0] * n_lo + [c.bandwidth_hz or 0.0 for c in lineup.carriers])
    bandwidth = np.abs(result.mix[levels.rep]).astype(float) @ bw_k

    domain = np.where(product, 0, -1)
    # Offset of each product from the nearest carrier with a stated bandwidth (what an
    # out-of-band rule's breakpoints are read against).
    offset_hz, offset_bw = _offsets(lineup, freq, carriers_hz)
    for k, c in enumerate(lineup.carriers):
        if c.bandwidth_hz:
            near = np.abs(freq - carriers_hz[:, k : k + 1]) < mask.spurious_boundary * c.bandwidth_hz
            domain = np.where(product & near, 1, domain)
    spurious = domain == 0
    out_of_band = domain == 1

    rules = [(r, ex) for r, ex in mask.rules] + [(r, None) for b in mask.bands for r in b.rules]
    gain = mask.antenna_gain_dbi(freq)
    best_margin = np.full(freq.shape, np.inf)
    best_rule = np.full(freq.shape, -1)
    best_limit = np.full(freq.shape, np.nan)
    best_level = np.full(freq.shape, np.nan)
    for j, (rule, ex) in enumerate(rules):
        holds = np.asarray(rule.holds_for(f_carrier, p_dbm))[:, None]
        offset = offset_bw if rule.offsets_of_bandwidth else offset_hz
        in_domain = out_of_band & rule.covers_offset(offset) if rule.domain == "out-of-band" else spurious
        covers = holds & in_domain & _covers(rule, ex, freq, f_highest[:, None])
        if not covers.any():
            continue
        in_rbw = level
        if rule.rbw_hz is not None and in_rbw_dbm is not None:
            in_rbw = in_rbw_dbm(rule.rbw_hz)
        # Otherwise a product is judged with its whole power in the RBW, however wide its
        # carriers: spreading it evenly over sum |m_k| B_k read the spectral peak 3 to 5 dB
        # low.  Its true spectrum is what a carrier's modulation gives (the branch above).
        if rule.offsets:
            limit = rule.offset_limit_dbm(np.where(np.isfinite(offset), offset, 0.0), p_dbm[:, None])
        else:
            limit = rule.limit_dbm(freq, p_dbm[:, None], gain)
        margin = limit - in_rbw
        better = covers & (margin < best_margin)
        best_margin = np.where(better, margin, best_margin)
        best_rule = np.where(better, j, best_rule)
        best_limit = np.where(better, limit, best_limit)
        best_level = np.where(better, in_rbw, best_level)
    domain = np.where(spurious & (best_rule < 0), 2, domain)
    return MaskEvaluation(
        margin_db=np.where(best_rule >= 0, best_margin, np.nan),
        limit_dbm=best_limit,
        level_in_rbw_dbm=best_level,
        bandwidth_hz=bandwidth,
        rule=best_rule,
        domain=domain,
        rules=rules,
        carrier_dbm=p_dbm,
    )


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
    batch : int
        Batch element of ``result`` to report.

    Returns
    -------
    CheckResult
        One row per product above the report floor (level dBm, limit dBm, margin dB
        ...), worst margin first, and the coverage notes.

    Raises
    ------
    LineupError
        The lineup has no mask.
    """
    mask = require_mask(lineup)
    result = result if result is not None else lineup.run()
    from spurplan.engine.spectra import is_modulated

    if is_modulated(lineup):
        return _check_spectrum(lineup, mask, result, combine)
    rows = result.product_rows(None, combine, batch)
    sel = slice(batch, batch + 1)
    levels = result.levels(None, combine, rows=sel)
    ev = evaluate(lineup, _Rows(result, sel), levels)
    # product_rows lists the slots above the report floor in frequency order; find them.
    slot_of = {round(f / 1e-3): g for g, f in enumerate(levels.freq_hz[0]) if levels.valid[0, g]}
    out: dict[str, list] = {c: [] for c in CHECK_COLUMNS}
    picks = []
    for i, kind in enumerate(rows["kind"]):
        if kind == "product":
            g = slot_of[round(rows["freq_hz"][i] / 1e-3)]
            picks.append((i, g))
    picks.sort(
        key=lambda t: (
            ev.rule[0, t[1]] < 0,
            np.nan_to_num(ev.margin_db[0, t[1]], nan=np.inf),
            rows["freq_hz"][t[0]],
        )
    )
    for i, g in picks:
        j = int(ev.rule[0, g])
        rule = ev.rules[j][0] if j >= 0 else None
        f = rows["freq_hz"][i]
        out["freq_hz"].append(f)
        out["level_dbm"].append(rows["level_dbm"][i])
        out["level_in_rbw_dbm"].append(float(ev.level_in_rbw_dbm[0, g]) if rule else None)
        out["bandwidth_hz"].append(float(ev.bandwidth_hz[0, g]))
        out["limit_dbm"].append(float(ev.limit_dbm[0, g]) if rule else None)
        out["margin_db"].append(float(ev.margin_db[0, g]) if rule else None)
        out["pass"].append(bool(ev.margin_db[0, g] >= 0) if rule else None)
        out["rule"].append(rule.label if rule else None)
        out["limit_form"].append(rule.describe if rule else None)
        out["rbw_hz"].append(rule.rbw_hz if rule else None)
        out["rule_source"].append(f"{rule.source} [{rule.status}]" if rule else None)
        out["band"].append(bands_at(mask, f))
        out["domain"].append(DOMAINS[int(ev.domain[0, g])])
        for key in ("stage", "order", "mix", "label", "dbc", "beyond_data", "model_extrapolated"):
            out[key].append(rows[key][i])
    return _finish(out, lineup, mask, result, ev, levels, ev.bandwidth_hz[0], batch)


def _finish(
    out, lineup, mask, result, ev, levels, spread_hz, batch, carriers_dbm=None, spectrum=None, unsettled=None
) -> CheckResult:
    """Add the noise and ACPR rows to the product rows ``out`` and make the CheckResult.

    ``spectrum`` (a modulated lineup's line spectrum) means ``levels`` are its lines,
    regrowth included; ``carriers_dbm`` then are the carriers' powers read from it, and
    ``unsettled`` the stages whose spectrum did not settle (default: the run's own).
    """
    f_highest = highest_output_carrier_hz(result, batch)
    carrier_dbm = float(ev.carrier_dbm[0])
    noise_not_judged = _add_noise_rows(out, lineup, mask, result, batch, carrier_dbm, f_highest, ev.rules)
    acpr = _add_acpr_rows(
        out, lineup, mask, result, levels, spread_hz, batch, carriers_dbm, spectrum is not None
    )
    margins = [m for m in out["margin_db"] if m is not None]
    worst = int(np.argmin([m if m is not None else math.inf for m in out["margin_db"]])) if margins else None
    notes = _coverage_notes(lineup, mask, f_highest) + acpr.notes
    if spectrum is not None:
        notes.append(_spectrum_note(lineup, spectrum))
    return CheckResult(
        result=result,
        rows=out,
        passed=all(m >= 0 for m in margins),
        worst=worst,
        carrier_dbm=carrier_dbm,
        notes=tuple(notes),
        noise_not_judged=tuple(noise_not_judged + acpr.noise_not_judged),
        acpr=tuple(acpr.entries),
        acpr_not_judged=tuple(acpr.not_judged),
        spectrum=spectrum,
        not_converged=tuple(_unsettled(result, batch) if unsettled is None else unsettled),
    )


def _unsettled(result, batch: int) -> list[str]:
    """Stages of a run whose levels did not settle at batch element ``batch``."""
    flags = ~result.propagation.converged[:, batch]
    return [s.name for s, bad in zip(result.lineup.stages, flags, strict=True) if bad]


# Frequencies per rule at which the output noise is read (log-spaced over the range the
# rule covers, ends included): enough to find the least rejection of a filter's stopband
# within a few tenths of a dB for the ladders spurplan builds (common practice, no source).
NOISE_POINTS_PER_RULE = 2001
NOISE_LABEL = "noise"


def _add_noise_rows(out, lineup, mask, result, batch, carrier_dbm, f_highest, rules) -> list[str]:
    """One row per rule with a reference bandwidth: the output noise (Friis cascade) in that
    bandwidth where it leaves the least margin, in the spurious domain the rule covers.

    Rows are inserted into ``out`` in margin order.  Returns what is not judged, each a
    phrase (a rule without a reference bandwidth, frequencies beyond a stage's data):
    they keep the check from PASS.  Without a noise figure for every active stage nothing
    is judged (the stage's missing figure already makes the check INCOMPLETE).
    """
    from spurplan.engine.noise import output_noise_dbm_hz, unknown_noise_stages

    if unknown_noise_stages(lineup):
        return []
    tones = np.asarray(result.tone_freqs_hz)[batch]
    carriers_hz = result.carrier_freqs_hz()[batch]
    readable = _noise_readable(lineup)
    lo_ok, hi_ok, data_stages = readable.lo_hz, readable.hi_hz, readable.data_stages
    not_judged = list(readable.not_judged)
    reach = (lineup.analysis.max_order + 1) * float(np.max(tones))
    skipped = []
    clipped = []
    added = []
    gain = mask.antenna_gain_dbi
    for rule, ex in rules:
        if rule.rbw_hz is None or rule.domain != "spurious":
            if rule.rbw_hz is None and rule.domain == "spurious":
                skipped.append(rule.label)
            continue
        if not rule.holds_for(float(carriers_hz[lineup.reference_carrier_index]), carrier_dbm):
            continue
        lo, hi = rule.start_hz, rule.stop_hz
        if ex is not None:
            lo, hi = max(lo, ex.start_hz), min(hi, float(ex.upper_hz(f_highest)))
        if not math.isfinite(hi):  # noise does not stop at the products' order; an open
            hi = reach  # range is read up to where the products are computed
        if lo < lo_ok or hi > hi_ok:
            clipped.append(rule.label)
        lo, hi = max(lo, lo_ok, 1.0), min(hi, hi_ok)
        if not hi > lo:
            continue
        f = np.unique(np.concatenate([np.geomspace(lo, hi, NOISE_POINTS_PER_RULE), [lo, hi]]))
        # Noise next to a carrier is the carrier's own (its out-of-band domain, or one
        # reference bandwidth either side of a CW carrier): not spurious.
        keep = np.ones(f.shape, dtype=bool)
        for k, c in enumerate(lineup.carriers):
            half = mask.spurious_boundary * c.bandwidth_hz if c.bandwidth_hz else rule.rbw_hz
            keep &= np.abs(f - carriers_hz[k]) >= half
        f = f[keep]
        if f.size == 0:
            continue
        density = output_noise_dbm_hz(lineup, f, tones)
        in_rbw = density + 10.0 * math.log10(rule.rbw_hz)
        limit = rule.limit_dbm(f, carrier_dbm, gain(f))
        margin = limit - in_rbw
        g = int(np.argmin(margin))
        added.append(
            {
                "freq_hz": float(f[g]),
                "level_dbm": float(in_rbw[g]),
                "level_in_rbw_dbm": float(in_rbw[g]),
                "bandwidth_hz": float(rule.rbw_hz),
                "limit_dbm": float(limit[g]),
                "margin_db": float(margin[g]),
                "pass": bool(margin[g] >= 0),
                "rule": rule.label,
                "limit_form": rule.describe,
                "rbw_hz": rule.rbw_hz,
                "rule_source": f"{rule.source} [{rule.status}]",
                "band": bands_at(mask, float(f[g])),
                "domain": "spurious",
                "stage": "the chain (noise)",
                "order": None,
                "mix": None,
                "label": NOISE_LABEL,
                "dbc": float(in_rbw[g] - carrier_dbm),
                "beyond_data": False,
                "model_extrapolated": False,
            }
        )

    def listed(labels: list[str]) -> str:
        return ", ".join(labels[:3]) + (", ..." if len(labels) > 3 else "")

    if skipped:
        not_judged.append(f"under rules without a reference bandwidth ({listed(skipped)})")
    if clipped:
        not_judged.append(
            f"outside {lo_ok:.6g} to {hi_ok:.6g} Hz, the data of stage {', '.join(data_stages)}, "
            f"under {listed(clipped)}"
        )
    _merge_rows(out, added)
    return not_judged


def _merge_rows(out: dict, added: list[dict]) -> None:
    """Insert ``added`` rows (dicts of :data:`CHECK_COLUMNS`) into ``out`` in margin order
    (failing first, rows no rule judges last, then by frequency)."""
    if not added:
        return
    rows = [{c: out[c][i] for c in CHECK_COLUMNS} for i in range(len(out["freq_hz"]))] + added
    rows.sort(
        key=lambda r: (
            r["margin_db"] is None,
            math.inf if r["margin_db"] is None else r["margin_db"],
            r["freq_hz"],
        )
    )
    for c in CHECK_COLUMNS:
        out[c][:] = [r[c] for r in rows]


@dataclass(frozen=True)
class _NoiseReadable:
    """Output frequencies (Hz) where the noise can be read, and what bounds them."""

    lo_hz: float
    hi_hz: float
    data_stages: tuple[str, ...]
    not_judged: tuple[str, ...]


def _noise_readable(lineup) -> _NoiseReadable:
    """Where data-based stages after the last mixer (at output frequencies) are defined
    bounds the noise that can be read: beyond their data the response is not known."""
    last_mixer = max((i for i, st in enumerate(lineup.stages) if st.conversion is not None), default=-1)
    lo_ok, hi_ok = 0.0, math.inf
    data_stages = []
    not_judged = []
    for i, stage in enumerate(lineup.stages):
        if stage.data_range_hz is None:
            continue
        if i > last_mixer:
            data_stages.append(repr(stage.name))
            lo_ok, hi_ok = max(lo_ok, stage.data_range_hz[0]), min(hi_ok, stage.data_range_hz[1])
        else:
            # Before a mixer the frequencies noise comes from are not checked against the
            # data: the response there may be the data held beyond its ends.
            not_judged.append(f"through stage '{stage.name}' before a mixer (its data may be held)")
    return _NoiseReadable(lo_ok, hi_ok, tuple(data_stages), tuple(not_judged))


ACPR_DOMAIN = "adjacent channel"
# What the summary's "acpr" list holds for each judged channel (Hz, dBm, dBc, dB).
ACPR_KEYS = (
    "rule",
    "limit_form",
    "rule_source",
    "carrier",
    "carrier_hz",
    "carrier_dbm",
    "carrier_bandwidth_hz",
    "side",
    "offset_hz",
    "channel_start_hz",
    "channel_stop_hz",
    "channel_bandwidth_hz",
    "channel_dbm",
    "products_dbm",
    "noise_dbm",
    "acpr_dbc",
    "limit_dbc",
    "absolute_limit_dbm",
    "limit_dbm",
    "margin_db",
    "pass",
    "stage",
    "band",
)
# Points at which the output noise density is read across one channel (uniform, ends
# included, trapezoid rule).  Within a channel the density changes only on a filter's
# skirt, smoothly on the scale of a channel; 129 points (128 steps) integrate such a
# slope to far below 0.01 dB (common practice, no source).
CHANNEL_NOISE_POINTS = 129


@dataclass(frozen=True)
class ChannelPower:
    """The power in each of M channels (:func:`channel_power_dbm`), arrays of shape (M,).

    Attributes
    ----------
    products_dbm : ndarray
        The discrete products' share (dBm; ``-inf`` where none falls in the channel).
    noise_dbm : ndarray
        The output noise integrated over the channel (dBm; NaN where it is not included).
    total_dbm : ndarray
        Their sum (dBm).
    largest : ndarray of int
        Index of the product that adds most to the channel, -1 where none does.
    largest_dbm : ndarray
        What it adds (dBm; ``-inf`` where none does).
    """

    products_dbm: np.ndarray
    noise_dbm: np.ndarray
    total_dbm: np.ndarray
    largest: np.ndarray
    largest_dbm: np.ndarray


def channel_power_dbm(
    start_hz, stop_hz, freq_hz, level_dbm, spread_hz, noise_dbm_hz=None, noise_in=None
) -> ChannelPower:
    """Power (dBm) in each channel ``[start_hz, stop_hz]``: the discrete products in it plus
    the output noise integrated over it.

    This is the one place where the spectrum becomes channel power.  A product whose
    spread ``B`` is above 0 (the check's ``sum |m_k| B_k`` approximation, see
    :mod:`spurplan.model.masks`) is taken as flat over ``[f - B/2, f + B/2]`` and counts by
    the fraction of that span inside the channel; a CW product (``B = 0``) counts whole
    when it lies in the channel, edges included (the reading that finds more power).
    The noise density is integrated by the trapezoid rule on
    :data:`CHANNEL_NOISE_POINTS` points of each channel.  A power-spectral-density model
    of the products (for example the spectral regrowth of a modulated carrier) plugs in
    here: integrate its density over the channel in place of the flat fraction.

    Parameters
    ----------
    start_hz, stop_hz : array_like, shape (M,)
        Channel edges (Hz), ``start_hz < stop_hz``.
    freq_hz, level_dbm, spread_hz : array_like, shape (G,)
        The products: centre frequency (Hz), whole power (dBm) and spread (Hz, 0 for CW).
    noise_dbm_hz : callable or None, optional
        ``noise_dbm_hz(freq_hz) -> density`` (dBm/Hz, the shape of its argument), or
        ``None`` to leave the noise out.
    noise_in : array_like of bool, shape (M,), optional
        The channels whose noise is integrated (default all, with ``noise_dbm_hz``); the
        density is read only there.

    Returns
    -------
    ChannelPower
        Per channel: the products' share, the noise and their total (dBm), and the
        largest contributor.
    """
    start = np.asarray(start_hz, dtype=float)[:, None]
    stop = np.asarray(stop_hz, dtype=float)[:, None]
    f = np.asarray(freq_hz, dtype=float)[None, :]
    spread = np.asarray(spread_hz, dtype=float)[None, :]
    overlap = np.clip(np.minimum(f + spread / 2, stop) - np.maximum(f - spread / 2, start), 0.0, None)
    inside = (f >= start) & (f <= stop)
    fraction = np.where(spread > 0, overlap / np.where(spread > 0, spread, 1.0), inside.astype(float))
    share_mw = fraction * 10.0 ** (np.asarray(level_dbm, dtype=float)[None, :] / 10.0)
    products_mw = share_mw.sum(axis=1)
    if share_mw.shape[1]:
        largest = np.argmax(share_mw, axis=1)
        largest_mw = share_mw[np.arange(share_mw.shape[0]), largest]
        largest = np.where(largest_mw > 0, largest, -1)
    else:
        largest = np.full(share_mw.shape[0], -1)
        largest_mw = np.zeros(share_mw.shape[0])
    noise_mw = np.full(products_mw.shape, np.nan)
    total_mw = products_mw.copy()
    read = np.zeros(products_mw.shape, dtype=bool)
    if noise_dbm_hz is not None:
        read = (
            np.ones(products_mw.shape, dtype=bool) if noise_in is None else np.asarray(noise_in, dtype=bool)
        )
    if read.any():
        grid = (start + (stop - start) * np.linspace(0.0, 1.0, CHANNEL_NOISE_POINTS)[None, :])[read]
        density = 10.0 ** (np.asarray(noise_dbm_hz(grid), dtype=float) / 10.0)
        noise_mw[read] = (0.5 * (density[:, 1:] + density[:, :-1]) * np.diff(grid, axis=1)).sum(axis=1)
        total_mw[read] += noise_mw[read]
    with np.errstate(divide="ignore"):
        return ChannelPower(
            products_dbm=10.0 * np.log10(products_mw),
            noise_dbm=10.0 * np.log10(noise_mw),
            total_dbm=10.0 * np.log10(total_mw),
            largest=largest,
            largest_dbm=10.0 * np.log10(largest_mw),
        )


@dataclass(frozen=True)
class _AcprOutcome:
    entries: list[dict]
    notes: list[str]
    noise_not_judged: list[str]
    not_judged: list[str]


def _carrier_names(lineup) -> list[str]:
    """``f1``, ``f2`` ... as product labels name the carriers; after a mixer, where labels
    name the IF, ``carrier 1`` ..."""
    if lineup.mixers:
        return [f"carrier {k + 1}" for k in range(len(lineup.carriers))]
    return lineup.tone_names


def _listed(items: list[str], most: int = 3) -> str:
    return ", ".join(items[:most]) + (", ..." if len(items) > most else "")


def _add_acpr_rows(
    out, lineup, mask, result, levels, spread_hz, batch, carriers_dbm=None, regrowth_modelled: bool = False
) -> _AcprOutcome:
    """One row per adjacent-channel rule, output carrier, offset and side: the channel's
    power (:func:`channel_power_dbm`) against the rule; rows go into ``out`` in margin order.

    ``levels`` are the output levels of the checked batch element (one row), ``spread_hz``
    each slot's spread (Hz).  A channel that overlaps another carrier's own channel is
    occupied and skipped (a note); one that overlaps its own carrier's channel cannot be
    judged as the rule states it, and neither can a carrier's own spectral regrowth where
    the model does not make it (a bandwidth without a ``modulation``): both keep the check
    from PASS.  ``carriers_dbm`` overrides the carriers' output powers (a modulated
    lineup's, from its spectrum); ``regrowth_modelled`` says the levels are a spectrum's
    lines, regrowth included.  Without a
    noise figure for every active stage, or beyond a data-based stage's data, a channel's
    power is its products' alone, and the noise in it is not judged.
    """
    from spurplan.engine.noise import output_noise_dbm_hz, unknown_noise_stages

    outcome = _AcprOutcome([], [], [], [])
    if not mask.adjacent_channels:
        return outcome
    carriers_hz = result.carrier_freqs_hz()[batch]
    if carriers_dbm is None:
        carriers_dbm = result.carrier_levels_dbm(None, batch)
    stated = [c.bandwidth_hz for c in lineup.carriers]
    names = _carrier_names(lineup)
    slots = levels.valid[0] & ~levels.is_carrier[0]
    freq, level, spread = levels.freq_hz[0, slots], levels.level_dbm[0, slots], np.asarray(spread_hz)[slots]
    top, beyond = levels.top_source[0, slots], levels.beyond[0, slots]
    sources = result.source_names()
    extrapolated = bool(result.propagation.extrapolated[: len(lineup.stages), batch].any())
    unknown = unknown_noise_stages(lineup)
    readable = _noise_readable(lineup)
    tones = np.asarray(result.tone_freqs_hz)[batch]

    def noise(f):
        return output_noise_dbm_hz(lineup, f, tones)

    channels = []  # (rule, carrier index, signed offset, start, stop)
    beyond_noise = []
    for rule in mask.adjacent_channels:
        # Each carrier's own span: its channel under the rule, or its stated spectrum where wider.
        span = [max(rule.main_bandwidth_hz(b), b or 0.0) / 2.0 for b in stated]
        occupied, own = [], []
        for k, fc in enumerate(carriers_hz):
            for signed, start, stop in zip(*rule.channels_hz(float(fc)), strict=True):
                where = f"{'+' if signed > 0 else '-'}{bandwidth_text(abs(signed))} of {names[k]}"
                if abs(signed) - rule.channel_bandwidth_hz / 2.0 < span[k]:
                    own.append(where)
                    continue
                busy = [
                    names[j]
                    for j, fj in enumerate(carriers_hz)
                    if j != k and start < fj + span[j] and stop > fj - span[j]
                ]
                if busy:
                    occupied.append(f"{where} (in {', '.join(busy)}'s channel)")
                    continue
                if start <= 0.0:
                    occupied.append(f"{where} (below 0 Hz)")
                    continue
                channels.append((rule, k, float(signed), float(start), float(stop)))
                if not unknown and not (start >= readable.lo_hz and stop <= readable.hi_hz):
                    beyond_noise.append(rule.label)
        if occupied:
            outcome.notes.append(
                f"ACPR under {rule.label}: {len(occupied)} channel{'s' * (len(occupied) > 1)} occupied, "
                f"not judged: {_listed(occupied)}"
            )
        if own:
            outcome.not_judged.append(
                f"under {rule.label} the channel at {_listed(own)} overlaps its carrier's own channel"
            )
    if not channels:
        return outcome
    if unknown:
        outcome.noise_not_judged.append(
            f"in the adjacent channels (no noise figure for {_listed([repr(u) for u in unknown])}: "
            "ACPR of the products alone)"
        )
    if beyond_noise:
        outcome.noise_not_judged.append(
            f"in the adjacent channels under {_listed(sorted(set(beyond_noise)))}: outside "
            f"{readable.lo_hz:.6g} to {readable.hi_hz:.6g} Hz, the data of stage "
            f"{', '.join(readable.data_stages)} (ACPR of the products alone there)"
        )
    with_noise = np.array(
        [not unknown and s >= readable.lo_hz and e <= readable.hi_hz for _, _, _, s, e in channels],
        dtype=bool,
    )
    starts = np.array([c[3] for c in channels])
    stops = np.array([c[4] for c in channels])
    part = channel_power_dbm(starts, stops, freq, level, spread, noise, noise_in=with_noise)
    added = []
    for i, (rule, k, signed, start, stop) in enumerate(channels):
        noisy = bool(with_noise[i])
        channel_dbm = float(part.total_dbm[i])
        carrier_dbm = float(carriers_dbm[k])
        limit = float(rule.channel_limit_dbm(carrier_dbm))
        margin = limit - channel_dbm
        g = int(part.largest[i])
        noise_dbm = float(part.noise_dbm[i]) if noisy else None
        stage: str | None
        if noise_dbm is not None and (g < 0 or noise_dbm > float(part.largest_dbm[i])):
            stage = "the chain (noise)"
        else:
            stage = sources[int(top[g])] if g >= 0 else None
        centre = 0.5 * (start + stop)
        side = "upper" if signed > 0 else "lower"
        contributing = (freq + spread / 2 >= start) & (freq - spread / 2 <= stop)
        entry = {
            "rule": rule.label,
            "limit_form": rule.describe,
            "rule_source": f"{rule.source} [{rule.status}]",
            "carrier": names[k],
            "carrier_hz": float(carriers_hz[k]),
            "carrier_dbm": carrier_dbm,
            "carrier_bandwidth_hz": rule.main_bandwidth_hz(stated[k]),
            "side": side,
            "offset_hz": signed,
            "channel_start_hz": start,
            "channel_stop_hz": stop,
            "channel_bandwidth_hz": rule.channel_bandwidth_hz,
            "channel_dbm": channel_dbm,
            "products_dbm": float(part.products_dbm[i]),
            "noise_dbm": noise_dbm,
            "acpr_dbc": channel_dbm - carrier_dbm,
            "limit_dbc": rule.limit_dbc,
            "absolute_limit_dbm": rule.absolute_limit_dbm,
            "limit_dbm": limit,
            "margin_db": margin,
            "pass": bool(margin >= 0),
            "stage": stage,
            "band": bands_at(mask, centre),
        }
        outcome.entries.append(entry)
        added.append(
            {
                "freq_hz": centre,
                "level_dbm": channel_dbm,
                "level_in_rbw_dbm": channel_dbm,
                "bandwidth_hz": rule.channel_bandwidth_hz,
                "limit_dbm": limit,
                "margin_db": margin,
                "pass": entry["pass"],
                "rule": rule.label,
                "limit_form": rule.describe,
                "rbw_hz": rule.channel_bandwidth_hz,
                "rule_source": entry["rule_source"],
                "band": entry["band"],
                "domain": ACPR_DOMAIN,
                "stage": stage,
                "order": None,
                "mix": None,
                "label": f"ACPR {names[k]} {'+' if signed > 0 else '-'}{bandwidth_text(abs(signed))}",
                "dbc": entry["acpr_dbc"],
                "beyond_data": bool((beyond & contributing).any()),
                "model_extrapolated": extrapolated,
            }
        )
    # The model makes no intermodulation within one carrier's bandwidth (2f1 - f1 is f1):
    # the spectral regrowth that sets a modulated carrier's ACPR is missing, so a channel
    # beside one can fail but not be shown to pass.
    nonlinear = any(st.transfer is not None or st.conversion is not None for st in lineup.stages)
    modulated = sorted(
        {names[k] for _, k, *_ in channels if stated[k] and lineup.carriers[k].modulation is None}
    )
    if nonlinear and modulated and not regrowth_modelled:
        outcome.not_judged.append(
            f"the spectral regrowth of {_listed(modulated)} (a modulated carrier's own intermodulation "
            "is not modelled: products and noise only)"
        )
    outcome.entries.sort(key=lambda e: (e["margin_db"], e["carrier_hz"] + e["offset_hz"]))
    _merge_rows(out, added)
    return outcome


@dataclass(frozen=True)
class _Rows:
    """A view of a run restricted to some batch rows (what :func:`evaluate` reads)."""

    result: Result
    rows: slice

    def carrier_freqs_hz(self):
        return self.result.carrier_freqs_hz()[self.rows]

    @property
    def mix(self):
        return self.result.mix


class _SpectrumRows:
    """What :func:`evaluate` reads of a modulated lineup's spectrum: the carriers' output
    frequencies, and no spread of the lines (each is a line of the density)."""

    def __init__(self, result, n_lines: int):
        self.result = result
        self.mix = np.zeros((n_lines, result.mix.shape[1]), dtype=np.int64)

    def carrier_freqs_hz(self):
        return self.result.carrier_freqs_hz()[:1]


def _spectrum_levels(spec):
    """A :class:`~spurplan.engine.node_table.NodeLevels` (one row) of a spectrum's lines."""
    from spurplan.engine.node_table import NodeLevels

    n = len(spec.freq_hz)
    carrier = spec.is_carrier[None, :]
    ref = np.max(np.where(spec.is_carrier, spec.power_dbm, -np.inf))
    return NodeLevels(
        freq_hz=spec.freq_hz[None, :],
        level_dbm=spec.power_dbm[None, :],
        valid=np.ones((1, n), dtype=bool),
        is_carrier=carrier,
        beyond=spec.beyond[None, :],
        rep=np.arange(n)[None, :],
        sign=np.ones((1, n), dtype=int),
        members=np.ones((1, n), dtype=int),
        top_source=spec.top_source[None, :],
        group=np.arange(n)[None, :],
        carrier_ref_dbm=np.array([ref]),
    )


def _check_spectrum(lineup, mask, result, combine) -> CheckResult:
    """The check of a lineup with modulated carriers: every line of the output spectrum
    (:func:`spurplan.engine.spectra.line_spectrum`) is judged in each rule's reference
    bandwidth, and the table holds one row per cluster of lines and domain (a harmonic
    zone, the regrowth on one side of a carrier, an intermodulation band) at its least
    margin.  ``result`` is the lineup's CW run (carrier frequencies, budget, figures)."""
    from spurplan.engine.spectra import expand, spectrum_of

    ex = expand(lineup)
    spec_result = ex.lineup.run(carrier_phasors_v=ex.phasors_v)
    spec = spectrum_of(spec_result, ex, None, combine)
    levels = _spectrum_levels(spec)
    ev = evaluate(
        lineup, _SpectrumRows(result, len(spec.freq_hz)), levels, lambda rbw: spec.in_rbw_dbm(rbw)[None, :]
    )
    names = lineup.tone_names
    sources = result.source_names()
    extrapolated = bool(spec_result.propagation.extrapolated.any())
    ref = float(levels.carrier_ref_dbm[0])
    unwanted = np.nonzero(~spec.is_carrier)[0]
    gap = max([c.bandwidth_hz or 0.0 for c in lineup.carriers] + [2 * spec.step_hz])
    f = spec.freq_hz[unwanted]
    cluster = np.cumsum(np.r_[True, np.diff(f) > gap]) - 1 if len(f) else np.zeros(0, dtype=int)
    domain = ev.domain[0, unwanted]
    out: dict[str, list] = {c: [] for c in CHECK_COLUMNS}
    added = []
    for c in np.unique(cluster):
        for d in np.unique(domain[cluster == c]):
            members = unwanted[(cluster == c) & (domain == d)]
            judged = members[ev.rule[0, members] >= 0]
            strongest = members[np.argmax(spec.power_dbm[members])]
            g = judged[np.argmin(ev.margin_db[0, judged])] if judged.size else strongest
            j = int(ev.rule[0, g])
            rule = ev.rules[j][0] if j >= 0 else None
            with np.errstate(divide="ignore"):
                total = float(10 * np.log10(np.sum(10 ** (spec.power_dbm[members] / 10))))
            mix = spec.mix[strongest]
            added.append(
                {
                    "freq_hz": float(spec.freq_hz[g]),
                    "level_dbm": total,
                    "level_in_rbw_dbm": float(ev.level_in_rbw_dbm[0, g]) if rule else None,
                    "bandwidth_hz": float(
                        spec.freq_hz[members].max() - spec.freq_hz[members].min() + spec.step_hz
                    ),
                    "limit_dbm": float(ev.limit_dbm[0, g]) if rule else None,
                    "margin_db": float(ev.margin_db[0, g]) if rule else None,
                    "pass": bool(ev.margin_db[0, g] >= 0) if rule else None,
                    "rule": rule.label if rule else None,
                    "limit_form": rule.describe if rule else None,
                    "rbw_hz": rule.rbw_hz if rule else None,
                    "rule_source": f"{rule.source} [{rule.status}]" if rule else None,
                    "band": bands_at(mask, float(spec.freq_hz[g])),
                    "domain": DOMAINS[int(d)],
                    "stage": sources[int(spec.top_source[strongest])],
                    "order": int(np.abs(mix).sum()),
                    "mix": mix.tolist(),
                    "label": cluster_label(mix, names, float(spec.freq_hz[g]), result),
                    "dbc": total - ref,
                    "beyond_data": bool(spec.beyond[members].any()),
                    "model_extrapolated": extrapolated,
                }
            )
    added.sort(
        key=lambda r: (
            r["margin_db"] is None,
            r["margin_db"] if r["margin_db"] is not None else 0.0,
            r["freq_hz"],
        )
    )
    _merge_rows(out, added)
    owners = np.argmax(np.abs(spec.mix[:, len(lineup.mixers) :]), axis=1)
    carriers_dbm = np.array([_carrier_power_dbm(spec, owners, k) for k in range(len(lineup.carriers))])
    # The spectrum's realizations are its run's batch: a stage is unsettled if any one is.
    flags = ~spec_result.propagation.converged.all(axis=1)
    unsettled = [s.name for s, bad in zip(lineup.stages, flags, strict=True) if bad]
    unsettled += [n for n in _unsettled(result, 0) if n not in unsettled]
    return _finish(
        out, lineup, mask, result, ev, levels, np.zeros(len(spec.freq_hz)), 0, carriers_dbm, spec, unsettled
    )


def cluster_label(mix: np.ndarray, names: list[str], freq_hz: float, result) -> str:
    """A cluster's name: the product its strongest line belongs to, with the multisines'
    tones read as their carriers (``2f1 zone``, ``f1-f2 zone``), the spectral regrowth of
    a carrier (``f1 regrowth above``) or the band of its tones' differences.

    Parameters
    ----------
    mix : ndarray of int, (K,)
        The strongest line's product over the lineup's tones.
    names : list of str
        The tones' names.
    freq_hz : float
        The line's frequency (Hz): which side of its carrier regrowth lies.
    result : Result
        The lineup's CW run (carrier vectors and frequencies).

    Returns
    -------
    str
    """
    if not np.any(mix):
        return "difference band"
    carriers = result.lineup.carrier_vectors()
    for k, v in enumerate(carriers):
        if np.array_equal(mix, v) or np.array_equal(mix, -v):
            centre = float(result.carrier_freqs_hz()[0, k])
            side = "above" if freq_hz > centre else "below"
            return f"{label(mix, names)} regrowth {side}"
    return f"{label(mix, names)} zone"


def _carrier_power_dbm(spec, owners: np.ndarray, k: int) -> float:
    """Output power (dBm) of carrier ``k``: its lines, in-band distortion included."""
    take = spec.is_carrier & (owners == k)
    with np.errstate(divide="ignore"):
        return float(10 * np.log10(np.sum(10 ** (spec.power_dbm[take] / 10))))


def _spectrum_note(lineup, spec) -> str:
    """How the modulated carriers were modelled, for the notes."""
    parts = [
        f"{name}: {c.modulation.describe()}"
        for name, c in zip(_carrier_names(lineup), lineup.carriers, strict=True)
        if c.modulation is not None
    ]
    return (
        f"modulated carriers run as multisines ({'; '.join(parts)}); the spectrum is judged line by line "
        f"(density on a {spec.step_hz:.6g} Hz raster), one row per cluster of lines"
    )


def output_carrier_hz(result, batch: int = 0) -> float:
    """Frequency (Hz) of the reference carrier at the lineup output (after mixers, its wanted
    product); see :func:`spurplan.model.lineup.reference_carrier_index`.  What rule conditions test.

    Parameters
    ----------
    result : Result
        A run of the lineup.
    batch : int, optional
        Batch element of ``result``.

    Returns
    -------
    float
        The frequency (Hz).
    """
    return float(result.carrier_freqs_hz()[batch, result.lineup.reference_carrier_index])


def highest_output_carrier_hz(result, batch: int = 0) -> float:
    """Highest carrier frequency (Hz) at the lineup output: what examined ranges follow
    (47 CFR 2.1057(a)(1), the 10th harmonic of the highest fundamental; from memory).

    Parameters
    ----------
    result : Result
        A run of the lineup.
    batch : int, optional
        Batch element of ``result``.

    Returns
    -------
    float
        The frequency (Hz).
    """
    return float(result.carrier_freqs_hz()[batch].max())


def bands_at(mask, freq_hz: float) -> str | None:
    """Names of the protected bands that contain ``freq_hz``, or None.

    Parameters
    ----------
    mask : Mask
        The lineup's mask.
    freq_hz : float
        Frequency (Hz); band edges count as inside.

    Returns
    -------
    str or None
        The names joined by ", ", or None when no band contains it.
    """
    names = [b.name for b in mask.bands if b.start_hz <= freq_hz <= b.stop_hz]
    return ", ".join(names) or None


def _covers(rule, examined, freq: np.ndarray, f_highest) -> np.ndarray:
    """Where ``rule`` covers ``freq``: its own range, cut to the examined range of its set
    for the highest output carrier ``f_highest`` (Hz)."""
    lo, hi = rule.start_hz, rule.stop_hz
    if examined is not None:
        lo, hi = max(lo, examined.start_hz), np.minimum(hi, examined.upper_hz(f_highest))
    return (freq >= lo) & (freq <= hi)


def limit_line(outcome: CheckResult, freq_hz: np.ndarray) -> np.ndarray:
    """Most stringent conducted limit (dBm, each in its own RBW) at ``freq_hz``; NaN where none.

    See :func:`limit_line_rbw`, which also gives each point's reference bandwidth.

    Parameters
    ----------
    outcome : CheckResult
        A check of batch element 0 of a run.
    freq_hz : ndarray
        Frequencies (Hz), any shape.

    Returns
    -------
    ndarray, same shape as ``freq_hz``
        The lowest limit of the rules covering each frequency (dBm), NaN where none does.
    """
    return limit_line_rbw(outcome, freq_hz)[0]


def limit_line_rbw(outcome: CheckResult, freq_hz: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Most stringent conducted limit (dBm) at ``freq_hz`` and the reference bandwidth (Hz)
    of the rule that sets it; NaN where no rule covers a frequency (or it states no RBW).

    Parameters
    ----------
    outcome : CheckResult
        A check of batch element 0 of a run; its carrier power (dBm) and carrier
        frequencies select the rules that hold.
    freq_hz : ndarray
        Frequencies (Hz), any shape.

    Returns
    -------
    (ndarray, ndarray), each the shape of ``freq_hz``
        The lowest limit of the rules covering each frequency (dBm) and that rule's RBW (Hz).
    """
    freq_hz = np.asarray(freq_hz, dtype=float)
    line = np.full(freq_hz.shape, np.inf)
    rbw = np.full(freq_hz.shape, np.nan)
    for rule, covers, limit in rule_limits_at(outcome, freq_hz):
        tighter = covers & (limit < line)
        rbw = np.where(tighter, np.nan if rule.rbw_hz is None else rule.rbw_hz, rbw)
        line = np.where(tighter, limit, line)
    return np.where(np.isinf(line), np.nan, line), rbw


def rule_limits_at(
    outcome: CheckResult, freq_hz: np.ndarray, carrier_dbm: float | None = None, by_domain: bool = False
) -> list:
    """Every rule of the mask that holds, where it covers ``freq_hz`` and its limit there.

    What :func:`limit_line_rbw` takes the most stringent of, rule by rule (a measured
    trace is judged against each rule in that rule's own reference bandwidth).

    Parameters
    ----------
    outcome : CheckResult
        A check of batch element 0 of a run; its carrier frequencies select the rules
        that hold and place the out-of-band domain.
    freq_hz : ndarray
        Frequencies (Hz), any shape.
    carrier_dbm : float, optional
        Total carrier power (dBm) for relative limits and power conditions; default the
        check's own (:attr:`CheckResult.carrier_dbm`).
    by_domain : bool, optional
        Spurious rules stop at the out-of-band domain, as :func:`evaluate` judges
        products; by default they cover it too (the limit line drawn through it).

    Returns
    -------
    list of (Rule, ndarray of bool, ndarray)
        Each rule that holds, where it covers each frequency, and its limit (dBm in its
        own reference bandwidth), arrays the shape of ``freq_hz``.
    """
    mask = outcome.result.lineup.mask
    assert mask is not None  # check() made the outcome, and it refuses a lineup without one
    p_dbm = outcome.carrier_dbm if carrier_dbm is None else carrier_dbm
    f_carrier = output_carrier_hz(outcome.result)
    f_highest = highest_output_carrier_hz(outcome.result)
    freq_hz = np.asarray(freq_hz, dtype=float)
    gain = mask.antenna_gain_dbi(freq_hz)
    pairs = [(r, ex) for r, ex in mask.rules] + [(r, None) for b in mask.bands for r in b.rules]
    # The out-of-band domain around each carrier with a stated bandwidth, and the offset
    # from the nearest one (as evaluate() reads them).
    lineup = outcome.result.lineup
    carriers_hz = outcome.result.carrier_freqs_hz()[:1]
    offset_hz, offset_bw = (a[0] for a in _offsets(lineup, freq_hz.reshape(1, -1), carriers_hz))
    offset_hz, offset_bw = offset_hz.reshape(freq_hz.shape), offset_bw.reshape(freq_hz.shape)
    near = np.zeros(freq_hz.shape, dtype=bool)
    for k, c in enumerate(lineup.carriers):
        if c.bandwidth_hz:
            near |= np.abs(freq_hz - carriers_hz[0, k]) < mask.spurious_boundary * c.bandwidth_hz
    out = []
    for rule, ex in pairs:
        if not rule.holds_for(f_carrier, p_dbm):
            continue
        covers = _covers(rule, ex, freq_hz, f_highest)
        offset = offset_bw if rule.offsets_of_bandwidth else offset_hz
        if rule.domain == "out-of-band":
            covers = covers & near & rule.covers_offset(offset)
        elif by_domain:
            covers = covers & ~near
        if rule.offsets:
            limit = rule.offset_limit_dbm(np.where(near, offset, 0.0), p_dbm)
        else:
            limit = rule.limit_dbm(freq_hz, p_dbm, gain)
        out.append((rule, np.broadcast_to(covers, freq_hz.shape), np.broadcast_to(limit, freq_hz.shape)))
    return out


def continuous_in_rbw_dbm(outcome: CheckResult, freq_hz: np.ndarray) -> dict[str, np.ndarray]:
    """The continuous parts of the output in the limit line's reference bandwidth (dBm).

    ``"noise"``: the output noise density (:func:`spurplan.engine.noise.output_noise_dbm_hz`)
    plus ``10 log10(RBW)``, where every active stage states a noise figure; ``"spectrum"``
    (modulated carriers): the unwanted lines of the output spectrum within ``RBW / 2`` of
    each frequency, as the check reads them.  NaN where no rule with an RBW covers a point.

    Parameters
    ----------
    outcome : CheckResult
    freq_hz : ndarray, (F,)
        Frequencies (Hz).

    Returns
    -------
    dict of str to ndarray (F,)
    """
    from spurplan.engine.noise import output_noise_dbm_hz, unknown_noise_stages

    freq_hz = np.asarray(freq_hz, dtype=float)
    _, rbw = limit_line_rbw(outcome, freq_hz)
    lineup = outcome.result.lineup
    out: dict[str, np.ndarray] = {}
    if not unknown_noise_stages(lineup):
        density = output_noise_dbm_hz(lineup, np.maximum(freq_hz, 1.0), outcome.result.tone_freqs_hz[0])
        with np.errstate(invalid="ignore"):
            out["noise"] = density + 10 * np.log10(rbw)
    spec = outcome.spectrum
    if spec is not None:
        mw = np.where(spec.is_carrier, 0.0, 10 ** (spec.power_dbm / 10))
        cum = np.concatenate([[0.0], np.cumsum(mw)])
        half = np.where(np.isfinite(rbw), rbw / 2, 0.0)
        lo = np.searchsorted(spec.freq_hz, freq_hz - half, side="left")
        hi = np.searchsorted(spec.freq_hz, freq_hz + half, side="right")
        with np.errstate(divide="ignore", invalid="ignore"):
            level = 10 * np.log10(np.maximum(cum[hi] - cum[lo], 0.0))
            # A window narrower than the lines' raster reads the density times its width.
            narrow = 10 * np.log10(np.interp(freq_hz, spec.freq_hz, mw) * rbw / spec.step_hz)
        out["spectrum"] = np.where(np.isfinite(rbw), np.where(rbw < spec.step_hz, narrow, level), np.nan)
    return out


def _offsets(lineup, freq: np.ndarray, carriers_hz: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Offset of each product from the nearest carrier with a stated bandwidth: in Hz,
    and as a fraction of that carrier's bandwidth (``inf`` where no carrier has one).

    ``freq`` is (B, G), ``carriers_hz`` (B, C) at the output; both results are (B, G).
    """
    offset_hz = np.full(freq.shape, np.inf)
    offset_bw = np.full(freq.shape, np.inf)
    for k, c in enumerate(lineup.carriers):
        if c.bandwidth_hz:
            distance = np.abs(freq - carriers_hz[:, k : k + 1])
            closer = distance < offset_hz
            offset_hz = np.where(closer, distance, offset_hz)
            offset_bw = np.where(closer, distance / c.bandwidth_hz, offset_bw)
    return offset_hz, offset_bw


def _coverage_notes(lineup, mask, f_highest: float) -> list[str]:
    """Warn where the analysis order does not reach a rule set's examined range (which
    follows the highest output carrier, ``f_highest`` in Hz)."""
    notes = []
    reach = lineup.analysis.max_order * float(np.max(lineup.tone_freqs_hz))
    for s in mask.sets:
        top = s.examined.upper_hz(f_highest)
        if s.rules and math.isfinite(top) and top > reach * (1 + 1e-9):
            notes.append(
                f"{s.name} examines up to {top / 1e6:.6g} MHz but products are computed only to order "
                f"{lineup.analysis.max_order} ({reach / 1e6:.6g} MHz): raise [analysis] max_order"
            )
    return notes
