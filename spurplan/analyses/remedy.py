"""Remedy: the rejection a failing lineup still needs, and the filter that supplies it.

A transmitter is certified on every channel it tunes to (and in every mode), so one
filter must serve them all.  The remedy works on *cases* (:class:`RemedyCase`: a lineup
and its channels, the swept frequency as :func:`spurplan.analyses.sweep.tune_sweep`
takes it: the reference carrier, or with a mixer the first LO).  A lineup alone is one
case over its ``[report] tune`` range, or over the one channel it is written for.

1. Every case is swept over its channels without a filter: the rejection still needed is
   the margin target less each product's margin, per product and channel; the table keeps
   each product's largest need, where it is and where the product lies over the channels.
2. The passband must clear every carrier, at the filter's place, on every channel of
   every case: its edges sit at least ``edge_factor`` beyond the lowest and the highest
   (a low-pass cuts off at ``edge_factor`` times the highest carrier, a high-pass at the
   lowest divided by it, a band-pass spans both when products lie above and below), and a
   Butterworth edge moves further out until its loss at the carriers is at most
   ``max_loss_db``.
3. A :class:`PerfectFilter` with that passband (nothing outside it) bounds what any
   candidate can do.  When even it misses the target on some channel, no filter at this
   place helps, and :attr:`Remedy.advice` says why and what would: a later nonlinear stage
   regenerates the product (and a filter after it would do), or the product lies inside
   the passband (the frequency plan); then the stage whose intercept would have to rise,
   by how much (the slope of the product's order), and the drive back-off that meets the
   target on every channel (re-checked by a tuning sweep).  These also follow any other
   failure to find a filter.
4. Orders rise from 1; at each order a Chebyshev (0.1 dB ripple, odd orders) and a
   Butterworth ladder are tried.  A candidate whose rejection at each short product, added
   to its margin now, cannot reach the target is set aside unrun (:func:`_screen_bound`, an
   upper bound that holds where every stage after the filter is linear).  The others are
   checked on every case: the full check of the lineup as written and a tuning sweep over
   all its channels; the lowest order that meets the target everywhere wins (the larger
   margin if both families do).  A candidate that fails any channel is never proposed.

The filter is built from the lineup snippet that is printed, so what is checked on every
channel is exactly what the user pastes.

The proposed filter is a real one: its parts have finite unloaded Q and it has a
stopband floor (by default those of :mod:`spurplan.model.ladders`: Q_L 100, Q_C 500, floor
-80 dB; common practice, no source), written into the snippet, so that the re-check
includes the dissipation loss at the carrier and the rejection the floor caps.  A
product that needs more rejection than the floor allows (:func:`spurplan.model.ladders.
max_rejection_db`) cannot be fixed by one filter: the search is not run and the
reason says so.

``--write`` (:func:`fixed_lineup`, written by :func:`spurplan.output.remedy_file.write_fixed`)
edits the user's file as a TOML document (:mod:`spurplan.io.lineup_edit`), re-reads the
result with the project's loader and writes it only when it is the lineup that was
re-checked, numbers included.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from spurplan.analyses.check import CheckResult, bands_at, check, evaluate
from spurplan.analyses.sweep import CHUNK_POINTS, DRIVE_TOL_DB, TuneSweep, tune_sweep
from spurplan.errors import LineupError, SpurplanError
from spurplan.fields import Fields, Within
from spurplan.io.channels import sweep_points
from spurplan.model.ladders import (
    DEFAULT_FLOOR_DB,
    DEFAULT_Q_CAPACITOR,
    DEFAULT_Q_INDUCTOR,
    MAX_FILTER_ORDER,
    max_rejection_db,
)
from spurplan.model.stages import Amplifier, LoadContext
from spurplan.model.stages.base import StageDefaults
from spurplan.model.stages.filter import Filter

if TYPE_CHECKING:  # annotations only
    from spurplan.model.lineup import Lineup

EDGE_FACTOR = 1.1
# Passband loss at a carrier the edge placement allows (dB): heat in the filter and
# lost output power, which an engineer would not accept beyond a few tenths of a dB.
MAX_PASSBAND_LOSS_DB = 0.3
# The margin every product must keep (README, "Plausible values").  A negative target
# would accept products above their limit and call the lineup fixed; beyond 60 dB no
# planning margin is meant (common practice, no source).
MARGIN_TARGET = Within(
    "a margin target", 0.0, 60.0, "dB", "a negative target accepts products above their limit"
)
FAMILIES_TRIED = (("chebyshev", "0.1 dB"), ("butterworth", None))
STAGE_NAME = "remedy filter"


@dataclass(frozen=True)
class RemedyCase:
    """One way the transmitter runs that the filter must serve: a lineup and its channels.

    Attributes
    ----------
    lineup : Lineup
        With a mask.
    channels_hz : ndarray or None
        The swept frequency of each channel (Hz), as :func:`spurplan.analyses.sweep.tune_sweep`
        takes it: the reference carrier's, or with a mixer the first LO's.  ``None``: the
        lineup's ``[report] tune`` range, or the lineup as written when it has none
        (:func:`case_channels`).
    name : str
        What the case is called in the output ("" for a lineup's only case).
    """

    lineup: Lineup
    channels_hz: np.ndarray | None = None
    name: str = ""


def case_channels(case: RemedyCase) -> tuple[np.ndarray, str]:
    """The channels a case is designed over (Hz) and where they came from.

    Parameters
    ----------
    case : RemedyCase

    Returns
    -------
    channels_hz : ndarray
        The swept frequency of each channel (Hz; reference carrier, or first LO).
    origin : {"given", "report", "written"}
        Stated with the case, the lineup's ``[report] tune`` range, or the one channel of
        the lineup as written.
    """
    lu = case.lineup
    if case.channels_hz is not None:
        return np.atleast_1d(np.asarray(case.channels_hz, dtype=float)), "given"
    if lu.report is not None and lu.report.tune is not None:
        start, stop, step = lu.report.tune
        return sweep_points(start, stop, step, "channel", "Hz"), "report"
    swept = lu.tone_freqs_hz[0] if lu.mixers else lu.carriers[lu.reference_carrier_index].freq_hz
    return np.array([float(swept)]), "written"


@dataclass(frozen=True)
class Remedy:
    """What :func:`remedy` found.

    Attributes
    ----------
    needed : dict of lists
        Products short of the margin target, one row per case and product, at the channel
        where it is shortest: ``freq_hz, label, margin_db, rejection_needed_db, rule, band,
        channel_hz`` (the swept frequency there), ``freq_low_hz, freq_high_hz`` (where the
        product lies over the channels that are short), ``case``.
    after : str or None
        Stage after which the filter goes (``None``: at the lineup input).
    position : int
        Number of stages before the filter.
    snippet : str or None
        The ``[[stage]]`` table to paste.
    filter : Filter or None
    outcome : CheckResult or None
        The check of the lineup with the filter in place.
    tried : list of dict
        Every candidate: family, order, response, ``worst_margin_db`` (over every case and
        channel) and ``screened``: True when the candidate was set aside without a run
        because even its full rejection at each product could not reach the target
        (``worst_margin_db`` is then the most it could give, an upper bound).
    reason : str
        Why nothing was proposed, when the reason is a sentence of its own (else see
        :attr:`advice`; :func:`spurplan.output.verdicts.remedy_reason`).
    parts : dict
        The parts assumed for every candidate: ``q_inductor``, ``q_capacitor``
        (``None``: lossless) and ``floor_db`` (``None``: no floor).
    cases : tuple of RemedyCase
        What the filter was designed for (the first is :attr:`lineup`).
    channels : tuple of (ndarray, str)
        Each case's channels (Hz) and where they came from (:func:`case_channels`).
    recheck : tuple of TuneSweep
        Each case re-checked on every channel with the filter in place (the lineup built
        from :attr:`snippet`), when a filter was found.
    advice : tuple of dict
        When no filter is found: what would help instead, each a ``kind``
        ("regenerated", "plan", "intercept", "backoff") with its numbers (dBm, dB, Hz);
        the sentences are :func:`spurplan.output.verdicts.advice_sentence`.
    """

    lineup: Lineup
    before: CheckResult
    margin_target_db: float
    needed: dict
    after: str | None
    position: int
    snippet: str | None
    filter: Filter | None
    outcome: CheckResult | None
    tried: list
    reason: str = ""
    parts: dict | None = None
    cases: tuple = ()
    channels: tuple = ()
    recheck: tuple = ()
    advice: tuple = ()

    @property
    def found(self) -> bool:
        return self.snippet is not None

    @property
    def rows(self) -> dict[str, list]:
        """:attr:`needed`: the products short of the margin target, one row each."""
        return self.needed


def rejection_needed(outcome: CheckResult, margin_db: float) -> dict[str, list]:
    """Products whose margin is below ``margin_db``, and how much more rejection each needs.

    Parameters
    ----------
    outcome : CheckResult
        A compliance check, with ``margin_db`` per product row (dB; ``None`` where no rule
        applies).
    margin_db : float
        Margin target (dB).

    Returns
    -------
    dict of str to list
        ``freq_hz`` (Hz), ``label``, ``margin_db`` (dB), ``rejection_needed_db`` (dB: the
        target minus the margin), ``rule`` and ``band`` of each product short of the target.
    """
    rows = outcome.rows
    out: dict[str, list] = {
        c: [] for c in ("freq_hz", "label", "margin_db", "rejection_needed_db", "rule", "band")
    }
    for i, m in enumerate(rows["margin_db"]):
        if m is not None and m < margin_db:
            out["freq_hz"].append(rows["freq_hz"][i])
            out["label"].append(rows["label"][i])
            out["margin_db"].append(m)
            out["rejection_needed_db"].append(margin_db - m)
            out["rule"].append(rows["rule"][i])
            out["band"].append(rows["band"][i])
    return out


# Needs within this of each other (dB) count as equal: the row shows the product nearest
# the carriers among them, the hardest for a filter (common practice, no source).
TIE_DB = 0.01
NEEDED_COLUMNS = (
    "freq_hz",
    "label",
    "margin_db",
    "rejection_needed_db",
    "rule",
    "band",
    "channel_hz",
    "freq_low_hz",
    "freq_high_hz",
    "case",
)


@dataclass(frozen=True)
class _Scan:
    """One case over its channels, as :func:`remedy` reads it (arrays (B, G) from a tuning sweep)."""

    case: RemedyCase
    channels_hz: np.ndarray
    position: int
    sweep: TuneSweep

    @property
    def lineup(self):
        return self.case.lineup


def remedy(
    lineup,
    at: str | None = None,
    margin_db: float = 3.0,
    edge_factor: float = EDGE_FACTOR,
    max_loss_db: float = MAX_PASSBAND_LOSS_DB,
    q_inductor: float | None = DEFAULT_Q_INDUCTOR,
    q_capacitor: float | None = DEFAULT_Q_CAPACITOR,
    floor_db: float | None = DEFAULT_FLOOR_DB,
    *,
    channels_hz=None,
) -> Remedy:
    """Find the lowest-order synthesized filter that meets ``margin_db`` on every channel.

    One filter serves every case (a lineup and its channels: a tuning range, an operating
    mode): its passband clears every carrier at its place on every channel of every case,
    and each candidate is checked on all of them (:func:`spurplan.analyses.sweep.tune_sweep`
    on the lineup built from the snippet, and the full check of each lineup as written).
    When no filter at that place can help, :attr:`Remedy.advice` says what would.

    Parameters
    ----------
    lineup : Lineup or sequence of RemedyCase
        With a mask; a Lineup is one case over ``channels_hz``.
    at : str, optional
        Insert the filter after this stage (default: after the last amplifier).
    margin_db : float
        Margin target (dB) every checked product must meet.
    edge_factor : float
        Passband edge beyond the carriers (see the module docstring).
    max_loss_db : float
        Largest loss of the ideal ladder at a carrier that the edge placement allows
        (the re-check includes the real filter's dissipation loss as well).
    q_inductor, q_capacitor : float or None
        Unloaded Q of the proposed filter's parts (``None``: lossless).
    floor_db : float or None
        The proposed filter's stopband floor (dB; ``None``: the ideal ladder).
    channels_hz : array_like, optional
        With a Lineup: the swept frequency of each channel (Hz: reference carrier, or the
        first LO with a mixer); default its ``[report] tune`` range, or the lineup as
        written (:func:`case_channels`).

    Returns
    -------
    Remedy
        The filter found (or why none was, and what would help), its table to paste and
        the re-checks.
    """
    if margin_db not in MARGIN_TARGET:
        raise LineupError(f"{margin_db:g} dB: {MARGIN_TARGET.expected()}", field="{@margin_db}")
    if isinstance(lineup, RemedyCase):
        cases: tuple[RemedyCase, ...] = (lineup,)
    elif isinstance(lineup, (list, tuple)):
        cases = tuple(lineup)
        if not cases or not all(isinstance(c, RemedyCase) for c in cases):
            raise LineupError("expected a lineup or a non-empty sequence of RemedyCase", field="{@lineup}")
        if channels_hz is not None:
            raise LineupError(
                "give the channels with each RemedyCase, not beside them", field="{@channels_hz}"
            )
    else:
        cases = (RemedyCase(lineup, channels_hz),)
    first = cases[0].lineup
    checks = [check(c.lineup) for c in cases]  # each lineup as written: noise and ACPR too
    before = checks[0]
    channels = tuple(case_channels(c) for c in cases)
    scans = [
        _Scan(c, ch, _position(c.lineup, at), tune_sweep(c.lineup, ch, refine=False))
        for c, (ch, _) in zip(cases, channels, strict=True)
    ]
    needed = _needed(scans, checks, margin_db)
    position = scans[0].position
    after = first.stages[position - 1].name if position else None

    def result(**kw) -> Remedy:
        base: dict[str, Any] = dict(
            lineup=first,
            before=before,
            margin_target_db=margin_db,
            needed=needed,
            after=after,
            position=position,
            snippet=None,
            filter=None,
            outcome=None,
            tried=[],
            parts={"q_inductor": q_inductor, "q_capacitor": q_capacitor, "floor_db": floor_db},
            cases=cases,
            channels=channels,
        )
        return Remedy(**{**base, **kw})

    if not needed["freq_hz"]:
        doubtful = next((c for c in checks if c.status != "PASS"), None)
        if doubtful is not None:
            # A filter cannot fix what the check could not judge: say so, not "meets".
            return result(
                reason=f"every product the check judged has {margin_db:g} dB margin, but the check is "
                f"{doubtful.status}: {doubtful.verdict.split(': ', 1)[-1]}"
            )
        return result(reason=f"the lineup already meets the mask with {margin_db:g} dB margin")

    # The passband every channel needs, at the filter's place: one filter serves them all.
    lo, hi = _carrier_span(scans, node=None)
    pass_lo, pass_hi = _carrier_span(scans, node="position")
    freqs = [f for s in scans for f in _short_freqs(s, margin_db)]
    freqs += [f for c in checks for f in rejection_needed(c, margin_db)["freq_hz"]]
    above = [f for f in freqs if f > hi]
    below = [f for f in freqs if f < lo]

    # A perfect filter here, with the passband every candidate keeps (edge_factor beyond the
    # carriers of every channel) and nothing outside it, bounds what any candidate can do:
    # when even it misses the target, no search can succeed.
    keep_lo, keep_hi = pass_lo / edge_factor, pass_hi * edge_factor
    perfect = _with_perfect(scans, keep_lo, keep_hi)
    if perfect["worst_margin_db"] < margin_db:
        regen_advice = _perfect_advice(perfect, scans, margin_db, keep_lo, keep_hi)
        for a in regen_advice:
            a.setdefault("carriers_low_hz", pass_lo)
            a.setdefault("carriers_high_hz", pass_hi)
        source = (perfect["scan"], perfect["check"], perfect["row"], perfect["channel_hz"])
        regen_advice += _general_advice(scans, margin_db, source if perfect["check"] is not None else None)
        return result(advice=tuple(regen_advice))

    kind = "bandpass" if above and below else ("lowpass" if above else "highpass")
    most = max_rejection_db(floor_db)
    beyond = [i for i, r in enumerate(needed["rejection_needed_db"]) if r > most]
    if beyond:
        i = max(beyond, key=lambda k: needed["rejection_needed_db"][k])
        return result(
            reason=(
                f"{needed['label'][i]} at {needed['freq_hz'][i] / 1e6:.6g} MHz needs "
                f"{needed['rejection_needed_db'][i]:.1f} dB more rejection, more than one filter with a "
                f"{floor_db:g} dB stopband floor gives ({most:.1f} dB at most): lower the product at its source, "
                "or use more than one filter, each in its own screened section"
            ),
            advice=tuple(_general_advice(scans, margin_db)),
        )
    parts = _parts_keys(q_inductor, q_capacitor, floor_db)
    name = _free_name(first)

    tried = []
    for order in range(1, MAX_FILTER_ORDER + 1):
        found = []
        for family, ripple in FAMILIES_TRIED:
            if family == "chebyshev" and order % 2 == 0:
                continue
            shape = _shape(kind, family, order, pass_lo, pass_hi, edge_factor, max_loss_db)
            rip = f', ripple = "{ripple}"' if ripple else ""
            snippet = (
                f'[[stage]]\nkind = "filter"\nname = "{name}"\n'
                f'prototype = {{ family = "{family}", {shape}, order = {order}{rip}, {parts} }}\n'
            )
            flt = _filter_from_snippet(snippet, first)
            entry = {"family": family, "order": order, "response": kind}
            bound = _screen_bound(scans, flt, margin_db)
            if bound is not None and bound < margin_db:
                tried.append({**entry, "worst_margin_db": bound, "screened": True})
                continue
            worst, outcome, sweeps = _verify(scans, flt)
            tried.append({**entry, "worst_margin_db": worst, "screened": False})
            if worst is not None and worst >= margin_db:
                found.append((worst, snippet, flt, outcome, sweeps))
        if found:
            worst, snippet, flt, outcome, sweeps = max(found, key=lambda t: t[0])
            return result(snippet=snippet, filter=flt, outcome=outcome, tried=tried, recheck=sweeps)
    nearest = min(freqs, key=lambda f: min(abs(f - lo), abs(f - hi)))
    gap = min(abs(nearest - lo), abs(nearest - hi)) / hi
    reason = f"no {kind} filter up to order {MAX_FILTER_ORDER} meets the target"
    advice: list[dict] = []
    if gap < edge_factor - 1:
        label = _label_near(scans, before, nearest)
        reason += (
            f": {label} at {nearest / 1e6:.6g} MHz lies within {100 * gap:.2g} % of the carrier, too close for a "
            "filter to separate; change the frequency plan (with a mixer, the LO side: see spurplan spurs)"
        )
    advice += _general_advice(scans, margin_db)
    return result(tried=tried, reason=reason, advice=tuple(advice))


def _short_freqs(scan: _Scan, margin_db: float) -> np.ndarray:
    m = scan.sweep.margin_db
    short = np.isfinite(m) & (m < margin_db)
    return scan.sweep.freq_hz[short]


def _needed(scans: list[_Scan], checks: list[CheckResult], margin_db: float) -> dict[str, list]:
    """The rejection still needed, per case, product and rule, where it is largest.

    Each case's own check (its lineup as written: noise and ACPR rows too) and every
    channel of its tuning sweep; a row is one product under one rule (2f1 under
    the general limit and, on the channels that put it there, under a protected band's)
    at the channel where it is shortest, with the range of frequencies it covers on the
    channels where it is short under that rule.
    """
    out: dict[str, list] = {c: [] for c in NEEDED_COLUMNS}
    where: dict[tuple, int] = {}
    c_lo, c_hi = _carrier_span(scans, node=None)

    def gap(f_hz):
        """How far (Hz) a product lies from the carriers: of two equal needs, the nearer is
        the harder for a filter, and the one shown."""
        return np.maximum(np.maximum(c_lo - f_hz, f_hz - c_hi), 0.0)

    def add(row: dict) -> None:
        key = (row["case"], row["label"], row["rule"])
        if key not in where:
            where[key] = len(out["freq_hz"])
            for c in NEEDED_COLUMNS:
                out[c].append(row[c])
            return
        i = where[key]
        lo = min(out["freq_low_hz"][i], row["freq_low_hz"])
        hi = max(out["freq_high_hz"][i], row["freq_high_hz"])
        m, was = row["margin_db"], out["margin_db"][i]
        if m < was - TIE_DB or (m <= was + TIE_DB and gap(row["freq_hz"]) < gap(out["freq_hz"][i])):
            for c in NEEDED_COLUMNS:
                out[c][i] = row[c]
        out["freq_low_hz"][i], out["freq_high_hz"][i] = lo, hi

    for scan, outcome in zip(scans, checks, strict=True):
        own = rejection_needed(outcome, margin_db)
        for i, f in enumerate(own["freq_hz"]):
            add(
                dict(
                    freq_hz=f,
                    label=own["label"][i],
                    margin_db=own["margin_db"][i],
                    rejection_needed_db=own["rejection_needed_db"][i],
                    rule=own["rule"][i],
                    band=own["band"][i],
                    channel_hz=_written_channel(scan.lineup),
                    freq_low_hz=f,
                    freq_high_hz=f,
                    case=scan.case.name,
                )
            )
    for scan in scans:
        sw = scan.sweep
        m = sw.margin_db
        short = np.isfinite(m) & (m < margin_db)
        if not short.any():
            continue
        rule_index, rule_names = _slot_rules(scan.lineup, scan.channels_hz)
        labels = np.asarray(sw.labels, dtype=object)
        mask = scan.lineup.mask
        pairs = sorted({(str(a), int(j)) for a, j in zip(labels[short], rule_index[short], strict=True)})
        for label, j in pairs:
            sel = short & (labels == label) & (rule_index == j)
            worst = np.min(np.where(sel, m, np.inf))
            near = sel & (m <= worst + TIE_DB)
            b, g = np.unravel_index(np.argmin(np.where(near, gap(sw.freq_hz), np.inf)), m.shape)
            f_sel = sw.freq_hz[sel]
            f_hz = float(sw.freq_hz[b, g])
            add(
                dict(
                    freq_hz=f_hz,
                    label=label,
                    margin_db=float(m[b, g]),
                    rejection_needed_db=margin_db - float(m[b, g]),
                    rule=rule_names[j] if j >= 0 else None,
                    band=bands_at(mask, f_hz),
                    channel_hz=float(scan.channels_hz[b]),
                    freq_low_hz=float(f_sel.min()),
                    freq_high_hz=float(f_sel.max()),
                    case=scan.case.name,
                )
            )
    order = sorted(range(len(out["freq_hz"])), key=lambda i: out["margin_db"][i])
    return {c: [out[c][i] for i in order] for c in NEEDED_COLUMNS}


def _slot_rules(lu, channels_hz: np.ndarray) -> tuple[np.ndarray, list[str]]:
    """The rule that holds for every product slot on every channel, (B, G), and the rules'
    names (index -1: none): the same runs and slots as the tuning sweep's, chunk by chunk."""
    parts, names = [], []
    for s in range(0, len(channels_hz), CHUNK_POINTS):
        result = lu.run(tone_freqs_hz=lu.tuned_tones_hz(channels_hz[s : s + CHUNK_POINTS]))
        ev = evaluate(lu, result, result.levels(None))
        parts.append(ev.rule)
        names = [r[0].label for r in ev.rules]
    return np.concatenate(parts), names


def _written_channel(lu) -> float:
    """The swept frequency (Hz) of the lineup as written: the first LO, or the reference carrier."""
    return float(lu.tone_freqs_hz[0] if lu.mixers else lu.carriers[lu.reference_carrier_index].freq_hz)


def _check_at(lu, channel_hz: float) -> CheckResult:
    """The full check (rows with attribution) with the lineup tuned to one channel."""
    return check(lu, lu.run(tone_freqs_hz=lu.tuned_tones_hz(np.array([channel_hz]))))


def _label_near(scans: list[_Scan], before: CheckResult, freq_hz: float) -> str:
    """The label of the short product closest to ``freq_hz`` (Hz)."""
    rows = before.rows
    best, label = np.inf, "a product"
    for i, f in enumerate(rows["freq_hz"]):
        if abs(f - freq_hz) < best:
            best, label = abs(f - freq_hz), rows["label"][i]
    for s in scans:
        d = np.abs(s.sweep.freq_hz - freq_hz)
        d = np.where(np.isfinite(d), d, np.inf)
        b, g = np.unravel_index(np.argmin(d), d.shape)
        if d[b, g] < best:
            best, label = d[b, g], s.sweep.labels[b][g]
    return label


def _carrier_span(scans: list[_Scan], node) -> tuple[float, float]:
    """Lowest and highest carrier (Hz) over every channel of every case: at the output
    (``node`` None) or at the filter's place (``node`` "position")."""
    lows, highs = [], []
    for s in scans:
        lu = s.lineup
        vec = lu.carrier_vectors(s.position if node == "position" else None)
        freqs = np.abs(lu.tuned_tones_hz(s.channels_hz) @ vec.T.astype(float))
        lows.append(freqs.min())
        highs.append(freqs.max())
    return float(min(lows)), float(max(highs))


def _inserted(lu, position: int, stage):
    return replace(lu, stages=(*lu.stages[:position], stage, *lu.stages[position:]))


def _verify(scans: list[_Scan], flt: Filter):
    """Worst margin (dB) of the lineups with ``flt`` in place: the full check of each as
    written and a tuning sweep over its channels; the first case's check, the sweeps."""
    worst, first_outcome, sweeps = np.inf, None, []
    for s in scans:
        fixed = _inserted(s.lineup, s.position, flt)
        outcome = check(fixed)
        sweep = tune_sweep(fixed, s.channels_hz, refine=False)
        sweeps.append(sweep)
        if first_outcome is None:
            first_outcome = outcome
        if outcome.worst_margin_db is None:
            return None, first_outcome, tuple(sweeps)
        worst = min(worst, outcome.worst_margin_db, float(np.min(sweep.worst_margin_db)))
    return float(worst), first_outcome, tuple(sweeps)


def _screen_bound(scans: list[_Scan], flt: Filter, margin_db: float) -> float | None:
    """The most worst margin (dB) ``flt`` could give over every channel, or None when no bound holds.

    Where every stage after the filter is linear, a product's level at the output falls
    by the filter's rejection at its frequency, ``-20 log10 |S21(f)|``, and by no more
    (a relative limit also falls with the carrier's loss): its margin is at most its margin
    now plus that rejection.  The worst over the products short of the target bounds the
    candidate's worst margin from above, so a candidate whose bound misses the target
    cannot pass and is not run.  With a nonlinear stage after the filter (which
    regenerates products) no such bound holds: every candidate is run.
    """
    bound = np.inf
    for s in scans:
        if any(st.transfer is not None for st in s.lineup.stages[s.position :]):
            return None
        m = s.sweep.margin_db
        short = np.isfinite(m) & (m < margin_db)
        if not short.any():
            continue
        f = s.sweep.freq_hz[short]
        with np.errstate(divide="ignore"):
            rejection_db = -20 * np.log10(np.abs(flt.response(f)))
        bound = min(bound, float(np.min(m[short] + rejection_db)))
    return bound


# --- when no filter at the chosen place can help -------------------------------------------------

# |S21| of the perfect filter outside its passband: far below any product the engine keeps
# (it drops products 200 dB below the strongest).
PERFECT_STOP_DB = -300.0
# The back-off search: how far below the written drive it looks (dB), its coarse step (dB)
# and the tolerance of the edge (dB, as the drive sweep's).
BACKOFF_RANGE_DB = 40.0
BACKOFF_STEP_DB = 0.5
# Channels carried in the back-off search besides those it finds failing (the worst ones).
BACKOFF_CHANNELS = 8


@dataclass(frozen=True)
class PerfectFilter(StageDefaults):
    """A filter that passes ``pass_lo_hz .. pass_hi_hz`` unchanged and nothing else.

    Not a part anyone can build: the bound on what any filter at one place of a lineup
    can do.  If the lineup misses its mask even with it, no filter there helps.

    Attributes
    ----------
    name : str
    pass_lo_hz, pass_hi_hz : float
        The passband (Hz), edges included; |S21| is 1 inside and
        :data:`PERFECT_STOP_DB` outside, lossless (|S11|^2 + |S21|^2 = 1).
    """

    name: str
    pass_lo_hz: float
    pass_hi_hz: float

    kind = "filter"
    transfer = None
    data_range_hz = None

    def response(self, freq_hz: np.ndarray) -> np.ndarray:
        """S21 at ``freq_hz`` (Hz, any shape): 1 in the passband, :data:`PERFECT_STOP_DB` outside."""
        f = np.asarray(freq_hz, dtype=float)
        inside = (f >= self.pass_lo_hz * (1 - 1e-12)) & (f <= self.pass_hi_hz * (1 + 1e-12))
        return np.where(inside, 1.0 + 0j, 10 ** (PERFECT_STOP_DB / 20) + 0j)

    def s_matrix(self, freq_hz: np.ndarray) -> np.ndarray:
        """Full 2x2 S-matrix at ``freq_hz`` (Hz, any shape): reciprocal, symmetric, lossless."""
        s21 = self.response(freq_hz)
        s11 = np.sqrt(np.clip(1 - np.abs(s21) ** 2, 0, 1)) + 0j
        return np.stack([np.stack([s11, s21], -1), np.stack([s21, s11], -1)], -2)

    def describe_figures(self) -> str:
        """Its passband, in MHz."""
        return f"perfect filter, {self.pass_lo_hz / 1e6:g} - {self.pass_hi_hz / 1e6:g} MHz"


def _with_perfect(scans: list[_Scan], lo_hz: float, hi_hz: float, positions=None) -> dict:
    """Every case on every channel with a :class:`PerfectFilter` passing ``lo_hz .. hi_hz``
    at the filter's place (or at ``positions``): the worst margin (dB), the scan and channel
    where it is, and that channel's check row of the worst product."""
    perfect = PerfectFilter("perfect filter", lo_hz, hi_hz)
    worst: dict = {"worst_margin_db": np.inf, "scan": None, "channel_hz": None, "row": None, "check": None}
    for k, s in enumerate(scans):
        pos = s.position if positions is None else positions[k]
        lu = _inserted(s.lineup, pos, perfect)
        sweep = tune_sweep(lu, s.channels_hz, refine=False)
        b = int(np.argmin(sweep.worst_margin_db))
        if sweep.worst_margin_db[b] < worst["worst_margin_db"]:
            worst.update(
                worst_margin_db=float(sweep.worst_margin_db[b]),
                scan=s,
                channel_hz=float(s.channels_hz[b]),
                lineup=lu,
                position=pos,
            )
    if worst["scan"] is not None and np.isfinite(worst["worst_margin_db"]):
        outcome = _check_at(worst["lineup"], worst["channel_hz"])
        worst["check"] = outcome
        worst["row"] = _worst_product_row(outcome)
    return worst


def _perfect_advice(
    perfect: dict, scans: list[_Scan], margin_db: float, lo_hz: float, hi_hz: float
) -> list[dict]:
    """Why a perfect filter at the chosen place is not enough: a later stage regenerates
    the product (and whether a perfect filter after the last nonlinear stage would do), or
    the product lies in the passband every channel needs."""
    outcome, i = perfect["check"], perfect["row"]
    if outcome is None or i is None:
        return []
    rows, scan = outcome.rows, perfect["scan"]
    lu = perfect["lineup"]
    names = [st.name for st in lu.stages]
    maker = rows["stage"][i]
    made_after = maker in names and names.index(maker) > perfect["position"]
    base = {
        "case": scan.case.name,
        "label": rows["label"][i],
        "freq_hz": rows["freq_hz"][i],
        "level_dbm": rows["level_dbm"][i],
        "limit_dbm": rows["limit_dbm"][i],
        "margin_db": rows["margin_db"][i],
        "channel_hz": perfect["channel_hz"],
        "swept": "LO" if scan.lineup.mixers else "carrier",
    }
    if made_after:
        last = max(k for k, st in enumerate(scan.lineup.stages) if st.transfer is not None)
        positions = [
            max([k + 1 for k, st in enumerate(s.lineup.stages) if st.transfer is not None] or [s.position])
            for s in scans
        ]
        there = _with_perfect(scans, lo_hz, hi_hz, positions)
        return [
            {
                "kind": "regenerated",
                **base,
                "stage": maker,
                "at": scan.lineup.stages[scan.position - 1].name if scan.position else None,
                "move_after": scan.lineup.stages[last].name,
                "moved_worst_margin_db": there["worst_margin_db"],
                "moved_helps": bool(there["worst_margin_db"] >= margin_db),
            }
        ]
    return [{"kind": "plan", **base, "pass_low_hz": lo_hz, "pass_high_hz": hi_hz}]


def _general_advice(scans: list[_Scan], margin_db: float, source=None) -> list[dict]:
    """A stage with a higher intercept for the worst product, and the back-off that meets
    the target on every channel of each case.  ``source``: ``(scan, check, row, channel)``
    of the product to attribute (default the worst product of the lineups as they are)."""
    out = []
    intercept = _intercept_advice(scans, margin_db, source)
    if intercept is not None:
        out.append(intercept)
    for s in scans:
        backoff = _backoff_advice(s, margin_db)
        if backoff is not None:
            out.append(backoff)
    return out


def _worst_product_row(outcome: CheckResult) -> int | None:
    """The check row of the product (not noise, not ACPR: those have no order) of least margin."""
    rows = outcome.rows
    picks = [i for i, m in enumerate(rows["margin_db"]) if m is not None and rows["order"][i] is not None]
    return min(picks, key=lambda i: rows["margin_db"][i]) if picks else None


def _intercept_advice(scans: list[_Scan], margin_db: float, source=None) -> dict | None:
    """How far the intercept of the stage that makes the worst product would have to rise.

    A product of order n at a fixed output power falls by (n - 1) dB for each dB its
    stage's order-n intercept rises (P_n = n P_out - (n - 1) OIP_n, the intercept's
    definition; Pozar, Microwave Engineering, 4th ed., section 10.3, from memory), so a
    need of r dB asks ``r / (n - 1)`` dB more intercept, or for a harmonic its dBc figure
    at its stated power ``r`` dB lower.  The product and its maker are read from the check
    at its worst channel (attribution: the stage that contributes most).
    """
    if source is None:
        worst = min(scans, key=lambda s: float(np.min(s.sweep.worst_margin_db)))
        channel = float(worst.channels_hz[int(np.argmin(worst.sweep.worst_margin_db))])
        outcome = _check_at(worst.lineup, channel)
        source = (worst, outcome, _worst_product_row(outcome), channel)
    scan, outcome, row, channel = source
    if row is None or outcome.rows["margin_db"][row] is None or outcome.rows["margin_db"][row] >= margin_db:
        return None
    rows = outcome.rows
    maker, order, mix = rows["stage"][row], rows["order"][row], rows["mix"][row]
    stage = next((st for st in scan.lineup.stages if st.name == maker), None)
    if not isinstance(stage, Amplifier) or order is None or order < 2:
        return None
    need = margin_db - rows["margin_db"][row]
    n_lo = len(scan.lineup.mixers)
    harmonic = sum(1 for v in mix[n_lo:] if v) == 1 and not any(mix[:n_lo])
    return {
        "kind": "intercept",
        "case": scan.case.name,
        "stage": maker,
        "label": rows["label"][row],
        "freq_hz": rows["freq_hz"][row],
        "order": int(order),
        "harmonic": harmonic,
        "need_db": need,
        "intercept_rise_db": need / (order - 1),
        "channel_hz": channel,
        "swept": "LO" if scan.lineup.mixers else "carrier",
    }


def _worst_over(lu, channels_hz: np.ndarray, offsets_db: np.ndarray) -> np.ndarray:
    """Worst margin (dB) over ``channels_hz`` at each drive offset (dB), one batch each chunk."""
    out = np.full(len(offsets_db), np.inf)
    per = max(1, CHUNK_POINTS // max(1, len(channels_hz)))
    tones = lu.tuned_tones_hz(channels_hz)
    for s in range(0, len(offsets_db), per):
        offs = np.asarray(offsets_db[s : s + per], dtype=float)
        d, k = len(offs), len(channels_hz)
        result = lu.run(drive_offset_db=np.repeat(offs, k), tone_freqs_hz=np.tile(tones, (d, 1)))
        ev = evaluate(lu, result, result.levels(None))
        out[s : s + d] = ev.worst_margin_db.reshape(d, k).min(axis=1)
    return out


def _backoff_advice(scan: _Scan, margin_db: float) -> dict | None:
    """The highest drive, below the written one, up to which every channel meets the target.

    The top of the first passing stretch from :data:`BACKOFF_RANGE_DB` below the written
    drive (the drive sweep's reading: what one signs), on a :data:`BACKOFF_STEP_DB` grid
    refined by bisection to the drive sweep's tolerance; every carrier moves together.
    It is searched on the worst channels only, then confirmed by a tuning sweep of the
    lineup with its carriers at that drive on every channel; a channel that fails joins
    the search, which runs again.  None when the products already meet the target at the
    written drive (what fails then is no product: noise, ACPR).
    """
    lu, channels = scan.lineup, scan.channels_hz
    k = lu.reference_carrier_index
    nominal = lu.carriers[k].power_dbm
    base = {
        "kind": "backoff",
        "case": scan.case.name,
        "written_input_dbm": nominal,
        "margin_target_db": margin_db,
        "input_dbm": None,
        "range_db": BACKOFF_RANGE_DB,
    }
    if float(np.min(scan.sweep.worst_margin_db)) >= margin_db:
        return None
    carried = np.unique(channels[np.argsort(scan.sweep.worst_margin_db)[:BACKOFF_CHANNELS]])
    grid = np.arange(-BACKOFF_RANGE_DB, 0.0 + 1e-9, BACKOFF_STEP_DB)
    for _ in range(4):
        ok = _worst_over(lu, carried, grid) >= margin_db
        bad = np.nonzero(~ok)[0]
        if not ok[0]:
            return base
        if not bad.size:  # the carried channels pass at the written drive: carry more
            edge = 0.0
        else:
            good_x, bad_x = grid[bad[0] - 1], grid[bad[0]]
            while bad_x - good_x > DRIVE_TOL_DB:
                mid = 0.5 * (good_x + bad_x)
                if _worst_over(lu, carried, np.array([mid]))[0] >= margin_db:
                    good_x = mid
                else:
                    bad_x = mid
            edge = float(good_x)
        backed = replace(lu, carriers=tuple(replace(c, power_dbm=c.power_dbm + edge) for c in lu.carriers))
        sweep = tune_sweep(backed, channels, refine=False)
        short = sweep.worst_margin_db < margin_db
        if not short.any():
            out_dbm = float(lu.run(drive_offset_db=np.array([edge])).carrier_levels_dbm_batch()[0, k])
            unsettled = 0 if sweep.unsettled is None else int(sweep.unsettled.sum())
            return {
                **base,
                "input_dbm": nominal + edge,
                "offset_db": edge,
                "output_dbm": out_dbm,
                "worst_margin_db": float(np.min(sweep.worst_margin_db)),
                "channels": len(channels),
                "unsettled_channels": unsettled,
            }
        worst_first = channels[short][np.argsort(sweep.worst_margin_db[short])]
        carried = np.unique(np.concatenate([carried, worst_first[:BACKOFF_CHANNELS]]))
    return base


def _shape(
    kind: str, family: str, order: int, lo: float, hi: float, edge_factor: float, max_loss_db: float
) -> str:
    """Prototype keys placing the passband edge(s) for the carriers lo .. hi (Hz).

    At least ``edge_factor`` beyond the carriers; a Butterworth edge moves further out
    until its loss at the outermost carrier is at most ``max_loss_db``:
    ``10 log10(1 + W^(2N)) <= L`` with W the carrier's normalised frequency
    (Butterworth magnitude, Matthaei, Young and Jones 1964 section 4.03; from memory).
    A Chebyshev's passband loss is its ripple, below the cap.
    """
    w_max = (10 ** (max_loss_db / 10) - 1) ** (1 / (2 * order)) if family == "butterworth" else 1.0
    if kind == "lowpass":
        return f'response = "lowpass", cutoff = "{_mhz(max(hi * edge_factor, hi / w_max))}"'
    if kind == "highpass":
        return f'response = "highpass", cutoff = "{_mhz(min(lo / edge_factor, lo * w_max))}"'
    f1, f2 = lo / edge_factor, hi * edge_factor
    f0 = (f1 * f2) ** 0.5
    # Band-pass: W = (f/f0 - f0/f) / D; widen D until |W| at the carriers is <= w_max.
    span = max(hi / f0 - f0 / hi, f0 / lo - lo / f0)
    frac = max((f2 - f1) / f0, span / w_max)
    return f'response = "bandpass", center = "{_mhz(f0)}", bandwidth = "{_mhz(frac * f0)}"'


def _parts_keys(q_inductor: float | None, q_capacitor: float | None, floor_db: float | None) -> str:
    """The prototype keys for the parts' Q and the floor, as the snippet writes them."""

    def q(value) -> str:
        return '"lossless"' if value is None else f"{value:.12g}"

    floor = '"none"' if floor_db is None else f'"{floor_db:.12g} dB"'
    return f"q_inductor = {q(q_inductor)}, q_capacitor = {q(q_capacitor)}, floor = {floor}"


def _mhz(hz: float) -> str:
    return f"{hz / 1e6:.6g} MHz"


def _position(lineup, at: str | None) -> int:
    if at is not None:
        return lineup.stage_index(at, argument="at")
    amps = [i for i, s in enumerate(lineup.stages, start=1) if isinstance(s, Amplifier)]
    return amps[-1] if amps else len(lineup.stages)


def _free_name(lineup) -> str:
    """``STAGE_NAME``, numbered when the lineup has a stage of that name already (a lineup
    remedied before): stage names must be unique, or the written file would not load."""
    used = {s.name for s in lineup.stages}
    name, k = STAGE_NAME, 1
    while name in used:
        k += 1
        name = f"{STAGE_NAME} {k}"
    return name


def _filter_from_snippet(snippet: str, lineup) -> Filter:
    import tomllib

    table = tomllib.loads(snippet)["stage"][0]
    context = LoadContext(r_ohm=lineup.r_ohm, base_dir=lineup.source.parent if lineup.source else Path("."))
    f = Fields(table, "remedy", f"stage {table['name']!r}")
    f.raw("kind")
    return Filter.from_fields(f, context)


def fixed_lineup(lineup, found: Remedy, path):
    """The lineup file with the remedy's filter inserted, checked, ready to be written.

    The file is edited as a TOML document (:func:`spurplan.io.lineup_edit.insert_stage`):
    the filter's table goes into the ``stage`` array at ``found.position``, everything
    else stays as the user wrote it.  The new document is read back with the project's
    own loader and must be the lineup that was checked: the same stages in the same
    order, the same filter, and the same re-check numbers (so the numbers remedy prints
    are the written file's).  Relative data paths are rewritten for the folder of
    ``path``.  Any mismatch is a one-line :class:`~spurplan.errors.LineupError`.
    Nothing is written here (:func:`spurplan.output.remedy_file.write_fixed` writes it).

    Parameters
    ----------
    lineup : Lineup
        The lineup that was checked, loaded from a file.
    found : Remedy
        What :func:`remedy` found; it must hold a filter.
    path : str or Path
        The file it is meant for (may be the lineup's own file).

    Returns
    -------
    EditedLineup
        The edited document and its bytes (``data``); ``moved`` lists the rewritten data
        paths.
    """
    from spurplan.io.lineup_edit import insert_stage
    from spurplan.io.lineup_file import from_dict

    target = Path(path)
    if found.snippet is None:  # found.found, spelled so that the type narrows
        raise LineupError("no filter was found: nothing to write", file=str(target), field="{@path}")
    if lineup.source is None:
        raise LineupError(
            "the lineup was not read from a file: expected a lineup file to edit",
            file=str(target),
            field="{@path}",
        )
    folder = target.parent if str(target.parent) else Path(".")
    if not folder.is_dir():  # before re-reading: data paths would be looked for there
        raise LineupError(
            f"the folder {folder} does not exist: expected an existing folder",
            file=str(target),
            field="{@path}",
        )
    edited = insert_stage(lineup.source, target, found.position, found.snippet)
    try:
        if "mode" in edited.doc:
            # A file with modes: the filter goes into the base's stages, which every mode
            # shares, so every mode of the written file must be a case that was checked.
            from spurplan.io.modes import modes_from_dict

            modes = modes_from_dict(edited.doc, name=str(target), base_dir=target.parent, source=target)
            written_by_name = {m.label: m.lineup for m in modes}
        else:
            written_by_name = {
                "": from_dict(edited.doc, name=str(target), base_dir=target.parent, source=target)
            }
        cases = found.cases or (RemedyCase(found.lineup),)
        names = [c.name for c in cases]
        unchecked = [n for n in written_by_name if n not in names]
        if unchecked or len(written_by_name) != len(cases):
            raise LineupError(
                f"the filter goes into the stages every mode shares, and {', '.join(unchecked) or 'some mode'} "
                "was not among the cases it was designed for: expected every mode of the file (run remedy over "
                "all modes), nothing written",
                file=str(target),
                field="{@path}",
            )
        for k, case in enumerate(cases):
            written = written_by_name[case.name]
            _same_as_checked(written, check(written), found, target, k)
    except SpurplanError as exc:
        if isinstance(exc, LineupError) and "nothing written" in str(exc):
            raise
        raise LineupError(
            f"the lineup with the filter would not load ({exc}): nothing written",
            file=str(target),
            field="{@path}",
        ) from None
    return edited


def _same_as_checked(written, outcome: CheckResult, found: Remedy, target: Path, case: int = 0) -> None:
    """Refuse unless ``written`` (the file to be written, as loaded) is what remedy checked
    for its ``case``-th case (the check's numbers for the first, the tuning re-check for all)."""
    pos = found.position
    flt, expected = found.filter, found.outcome
    # The caller refused a Remedy that found nothing, and remedy() sets the snippet, the
    # filter and the outcome together when it finds one.
    assert flt is not None and expected is not None
    checked = (*found.lineup.stages[:pos], flt, *found.lineup.stages[pos:])

    def stages(lu_stages) -> list:
        return [(s.name, s.kind) for s in lu_stages]

    def refuse(what: str) -> LineupError:
        return LineupError(f"{what}: nothing written", file=str(target), field="{@path}")

    if stages(written.stages) != stages(checked):
        names = ", ".join(f"{n!r}" for n, _ in stages(written.stages))
        raise refuse(f"the file would hold the stages {names}, not the lineup that was checked")
    if getattr(written.stages[pos], "prototype", None) != flt.prototype:
        raise refuse(f"stage {pos + 1} would not be the filter that was checked")
    if case == 0 and not _same_numbers(outcome, expected):
        raise refuse(
            f"the file re-checks to a worst margin of {outcome.worst_margin_db} dB, not the "
            f"{expected.worst_margin_db} dB of the lineup that was checked"
        )
    if len(found.recheck) > case:
        # And on every channel it was designed for, as tune sweeps the written file.
        was = found.recheck[case]
        now = tune_sweep(written, was.carrier_hz, refine=False)
        if not np.allclose(now.worst_margin_db, was.worst_margin_db, rtol=0, atol=1e-9, equal_nan=True):
            raise refuse(
                f"the file re-checks on its channels to a worst margin of {float(np.min(now.worst_margin_db))} dB, "
                f"not the {float(np.min(was.worst_margin_db))} dB of the lineup that was checked"
            )


def _same_numbers(a: CheckResult, b: CheckResult, tol_db: float = 1e-9) -> bool:
    """The same verdict and margins (dB) row by row, and the same carrier level."""

    def close(x, y) -> bool:
        return (x is None and y is None) or (x is not None and y is not None and abs(x - y) <= tol_db)

    ra, rb = a.rows["margin_db"], b.rows["margin_db"]
    return (
        a.passed == b.passed
        and close(a.worst_margin_db, b.worst_margin_db)
        and close(a.carrier_dbm, b.carrier_dbm)
        and a.rows["label"] == b.rows["label"]
        and len(ra) == len(rb)
        and all(close(x, y) for x, y in zip(ra, rb, strict=True))
    )
