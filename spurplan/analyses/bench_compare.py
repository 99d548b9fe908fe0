"""A measured spectrum beside the plan: its floor, its peaks, the products they match,
and the trace judged against the mask directly.

**Noise floor.**  A running median of the trace's levels (dB) over a window of
:data:`FLOOR_WINDOW_RBW` resolution bandwidths (at least :data:`FLOOR_MIN_POINTS`
points; ``scipy.ndimage.median_filter``).  A median ignores whatever occupies less than
half of its window, so peaks a few RBW wide do not lift it, and it follows a sloping
floor.  It is the floor as displayed (the median of log-detected noise sits below its
mean power), which is what a threshold over the floor is read against.

**Peaks.**  Local maxima at least ``threshold_db`` above the floor there; of several
within one RBW only the highest is kept (an analyser cannot tell them apart).

**Matching.**  Every product the plan predicts at the output (the check's rows, the
levels the check uses: a CW product's whole power, a modulated lineup's lines in the
trace's RBW, :meth:`~spurplan.engine.spectra.LineSpectrum.in_rbw_dbm`) and every
carrier (CW lineups) is paired with the nearest peak within ``tolerance_hz`` (default
:data:`TOLERANCE_RBW` RBW), nearest pairs first, each peak at most once.  The
difference is measured minus predicted; the stage is the check's "largest from".

**The mask on the trace.**  Each point's level is carried from the trace's RBW to each
rule's reference bandwidth by :func:`level_in_rbw_dbm`: the power of the points within
the rule's RBW around it, ``10 log10(mean of their powers x RBW_rule / RBW_trace)``,
never below the point's own level.  For noise-like content (a flat density) this is
``level + 10 log10(RBW_rule / RBW_trace)`` (common practice, no source); a CW line is
counted once at its own power, not scaled (a line reads its whole power in any RBW
wider than itself).  The stated RBW is taken as the noise bandwidth: an analyser's 3 dB
RBW is a little narrower than its noise bandwidth (a Gaussian filter's is 1.06 times
wider; from memory), so the sum reads a line up to about 0.3 dB high, the conservative
side.  A trace whose RBW is wider than a rule's cannot resolve that rule's limit:
its levels are kept as read (an upper bound on what the narrower RBW would show), a
point above the limit fails (a line would fail in any RBW), and a pass is at best
UNCERTAIN.  Points at the carriers themselves (within their bandwidth, plus the match
tolerance) are not judged, as the check does not judge carriers.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from spurplan.errors import LineupError

if TYPE_CHECKING:  # annotations only
    from spurplan.io.traces import MeasuredTrace

DEFAULT_THRESHOLD_DB = 10.0
TOLERANCE_RBW = 3.0
FLOOR_WINDOW_RBW = 50.0
FLOOR_MIN_POINTS = 31
# A log-averaged (video-averaged in dB) or sample-detected noise floor reads about
# 2.51 dB below its power (10 log10(e) x Euler's gamma; common practice, from memory).
LOG_AVERAGE_BIAS_DB = 2.51
# Detectors whose reading of noise is its power or above it (peak, rms): no correction.
SOUND_DETECTORS = ("peak", "rms")


@dataclass(frozen=True)
class Peak:
    """A peak of the trace.

    Attributes
    ----------
    freq_hz : float
    level_dbm : float
        The line's level (dBm in the trace's RBW), read at the vertex between the
        trace's points (:func:`_vertex`).
    floor_dbm : float
        The noise floor there (dBm in the trace's RBW).
    """

    freq_hz: float
    level_dbm: float
    floor_dbm: float

    @property
    def above_floor_db(self) -> float:
        """How far the peak stands above the floor (dB)."""
        return self.level_dbm - self.floor_dbm


@dataclass(frozen=True)
class Prediction:
    """A product (or carrier) the plan puts at the output.

    Attributes
    ----------
    label : str
        The product's label (``"2f1-f2"``, ``"3f1 zone"``) or the carrier's.
    kind : str
        ``"product"`` or ``"carrier"``.
    freq_hz : float
    level_dbm : float
        Predicted level in the trace's RBW (dBm).
    stage : str
        The stage the model says makes most of it (the check's "largest from").
    """

    label: str
    kind: str
    freq_hz: float
    level_dbm: float
    stage: str


@dataclass(frozen=True)
class Match:
    """A predicted product and the peak that matches it."""

    prediction: Prediction
    peak: Peak

    @property
    def difference_db(self) -> float:
        """Measured minus predicted (dB)."""
        return self.peak.level_dbm - self.prediction.level_dbm

    @property
    def offset_hz(self) -> float:
        """Measured minus predicted frequency (Hz)."""
        return self.peak.freq_hz - self.prediction.freq_hz


@dataclass(frozen=True)
class NotSeen:
    """A predicted product above the trace's floor that no peak matches.

    Attributes
    ----------
    prediction : Prediction
    floor_dbm : float
        The floor at its frequency (dBm in the trace's RBW).
    detectable : bool
        Predicted at least the threshold above the floor: it should have been a peak.
    """

    prediction: Prediction
    floor_dbm: float
    detectable: bool

    @property
    def above_floor_db(self) -> float:
        """Predicted level above the floor (dB)."""
        return self.prediction.level_dbm - self.floor_dbm


@dataclass(frozen=True)
class RuleOnTrace:
    """One rule judged on the trace's points.

    Attributes
    ----------
    rule : str
        The rule's label.
    rbw_hz : float or None
        The rule's reference bandwidth (Hz).
    resolved : bool
        The trace's RBW is at most the rule's (its levels could be carried to it).
    points : int
        Trace points the rule covers (carriers excepted).
    freq_hz, level_dbm, limit_dbm, margin_db : float
        The point of least margin: its frequency (Hz), level in the rule's RBW (dBm),
        limit (dBm) and margin (dB).
    status : str
        ``PASS``, ``FAIL`` or ``UNCERTAIN`` (a pass the measurement cannot vouch for).
    reason : str
        Why it is UNCERTAIN ("" otherwise).
    """

    rule: str
    rbw_hz: float | None
    resolved: bool
    points: int
    freq_hz: float
    level_dbm: float
    limit_dbm: float
    margin_db: float
    status: str
    reason: str = ""


@dataclass(frozen=True)
class TraceMaskCheck:
    """The measured trace against the lineup's mask.

    Attributes
    ----------
    rules : tuple of RuleOnTrace
        Every rule that covers a point of the trace, least margin first.
    status : str
        ``FAIL`` (a point fails a rule), ``INCOMPLETE`` (the trace does not cover a
        rule's whole range, or points in the out-of-band domain no rule judges),
        ``UNCERTAIN`` (a pass the measurement cannot vouch for) or ``PASS``.
    carrier_dbm : float
        The carrier power relative limits were read with (dBm): the lower limit of the
        modelled and the measured carrier power decides.
    uncovered : tuple of str
        Rules whose range reaches beyond the trace's span, with that range.
    unjudged_points : int
        Points in the out-of-band domain no rule judges.
    notes : tuple of str
    """

    rules: tuple[RuleOnTrace, ...]
    status: str
    carrier_dbm: float
    uncovered: tuple[str, ...]
    unjudged_points: int
    notes: tuple[str, ...]

    @property
    def worst(self) -> RuleOnTrace | None:
        """The rule of least margin (None when no rule covers the trace)."""
        return self.rules[0] if self.rules else None


@dataclass(frozen=True)
class BenchComparison:
    """A trace beside the plan (:func:`compare`).

    Attributes
    ----------
    lineup_name : str
    trace : MeasuredTrace
    threshold_db : float
        Peaks stand at least this far above the floor (dB).
    tolerance_hz : float
        Largest frequency difference of a match (Hz).
    floor_dbm : ndarray, (N,)
        The noise floor at every trace point (dBm in the trace's RBW).
    peaks : tuple of Peak
        Every peak found, ascending in frequency.
    matches : tuple of Match
        Predicted products with the peak that matches each, ascending in frequency.
    unmatched : tuple of Peak
        Peaks that match no prediction.
    not_seen : tuple of NotSeen
        Predicted products within the span, above the floor, that no peak matches.
    below_floor : int
        Predicted products within the span below the floor (not listed).
    outside_span : int
        Predicted products outside the trace's span.
    mask : TraceMaskCheck or None
        The trace against the mask (None when the lineup has none).
    notes : tuple of str
    carrier_dbm : float or None
        The modelled total carrier power at the output (dBm), for the RF-safety notice.
    """

    lineup_name: str
    trace: MeasuredTrace
    threshold_db: float
    tolerance_hz: float
    floor_dbm: np.ndarray
    peaks: tuple[Peak, ...]
    matches: tuple[Match, ...]
    unmatched: tuple[Peak, ...]
    not_seen: tuple[NotSeen, ...]
    below_floor: int
    outside_span: int
    mask: TraceMaskCheck | None
    notes: tuple[str, ...]
    carrier_dbm: float | None = None

    @property
    def largest_difference(self) -> Match | None:
        """The matched product whose measured level differs most from the plan."""
        return max(self.matches, key=lambda m: abs(m.difference_db), default=None)


# --- the trace's own features ------------------------------------------------------------------


def noise_floor_dbm(trace) -> np.ndarray:
    """The trace's noise floor: a running median of its levels (dB).

    Parameters
    ----------
    trace : MeasuredTrace
        With a resolution bandwidth.

    Returns
    -------
    ndarray, (N,)
        dBm in the trace's RBW, at each point.  The window is :data:`FLOOR_WINDOW_RBW`
        RBW wide in points of the median spacing, at least :data:`FLOOR_MIN_POINTS`
        and at most the trace (odd).
    """
    from scipy.ndimage import median_filter

    level = np.asarray(trace.level_dbm, dtype=float)
    step = float(np.median(np.diff(trace.freq_hz)))
    width = max(FLOOR_MIN_POINTS, math.ceil(FLOOR_WINDOW_RBW * _rbw(trace) / step))
    width = min(width, level.size)
    width -= 1 - width % 2
    return median_filter(level, size=width, mode="nearest")


def find_peaks(trace, floor_dbm: np.ndarray, threshold_db: float = DEFAULT_THRESHOLD_DB) -> tuple[Peak, ...]:
    """Local maxima at least ``threshold_db`` above the floor, one per resolution bandwidth.

    Parameters
    ----------
    trace : MeasuredTrace
    floor_dbm : ndarray, (N,)
        The floor at each point (:func:`noise_floor_dbm`).
    threshold_db : float, optional
        How far above the floor a peak must stand (dB).

    Returns
    -------
    tuple of Peak
        Ascending in frequency; of peaks closer than one RBW, the highest.
    """
    f, level = trace.freq_hz, trace.level_dbm
    left = np.r_[-np.inf, level[:-1]]
    right = np.r_[level[1:], -np.inf]
    cand = np.nonzero((level >= left) & (level >= right) & (level >= floor_dbm + threshold_db))[0]
    rbw = _rbw(trace)
    kept: list[int] = []
    kept_f = np.empty(0)
    for i in cand[np.argsort(-level[cand], kind="stable")]:
        # Within one RBW of a higher peak: the same line as the analyser shows it.
        if kept_f.size and np.min(np.abs(kept_f - f[i])) < rbw:
            continue
        kept.append(int(i))
        kept_f = np.append(kept_f, f[i])
    kept.sort()
    return tuple(Peak(*_vertex(f, level, i, rbw), float(floor_dbm[i])) for i in kept)


# A Gaussian RBW filter falls 10 log10(e) 4 ln 2 (df / RBW)^2 = 12.04 (df / RBW)^2 dB at df
# from its centre (3 dB at half the RBW; common practice, no source).
GAUSSIAN_FALL_DB = 12.04


def _vertex(f: np.ndarray, level: np.ndarray, i: int, rbw_hz: float) -> tuple[float, float]:
    """A peak's frequency (Hz) and level (dBm) read between the trace's points.

    A line seen through a Gaussian RBW filter is a parabola in dB against frequency, so the
    vertex of the parabola through the highest point and its two neighbours gives the
    line's own frequency and level, where the highest point alone under-reads it by up to
    the filter's fall at half the point spacing (0.75 dB at half an RBW; common practice,
    no source).  The vertex never reads below the highest point and stays within half a
    spacing of it.  At the trace's ends, where the three points do not bend down, or
    where a neighbour falls further than the filter can at its distance (a point-like
    spike, or a line whose flank is the floor), the point is kept as read.
    """
    if i == 0 or i == len(level) - 1:
        return float(f[i]), float(level[i])
    a, b, c = level[i - 1], level[i], level[i + 1]
    h_lo, h_hi = f[i] - f[i - 1], f[i + 1] - f[i]
    bend = a - 2 * b + c
    steepest = GAUSSIAN_FALL_DB * (1.5 * h_hi / rbw_hz) ** 2  # a neighbour at most 1.5 spacings off
    if (
        not (bend < 0 and np.isfinite(bend))
        or not np.isclose(h_lo, h_hi, rtol=1e-6)
        or max(b - a, b - c) > steepest
    ):
        return float(f[i]), float(level[i])
    delta = float(np.clip(0.5 * (a - c) / bend, -0.5, 0.5))
    return float(f[i] + delta * h_hi), float(b - 0.25 * (a - c) * delta)


def level_in_rbw_dbm(trace, rbw_hz: float, exclude: np.ndarray | None = None) -> tuple[np.ndarray, bool]:
    """Each point's level carried from the trace's RBW to ``rbw_hz``.

    For ``rbw_hz`` at least the trace's: the power within ``rbw_hz`` around each point,
    ``10 log10(mean(P_i) x rbw_hz / RBW_trace)`` over the points within ``rbw_hz / 2``
    (``P_i`` in mW), and never below the point's own level.  A flat noise floor reads
    ``level + 10 log10(rbw_hz / RBW_trace)`` (common practice, no source); a CW line is
    counted once (its whole power).  For a narrower ``rbw_hz`` the levels are kept as
    read: the power in a narrower window is at most that in the wider one.

    Parameters
    ----------
    trace : MeasuredTrace
        With a resolution bandwidth.
    rbw_hz : float
        The bandwidth to read the levels in (Hz).
    exclude : ndarray of bool, (N,), optional
        Points left out of every window (the carriers: a spurious limit is read beside
        a carrier, not on it); the mean is over the points kept.

    Returns
    -------
    (ndarray, bool)
        The levels (dBm in ``rbw_hz``), and whether the trace resolves ``rbw_hz``
        (its RBW is at most ``rbw_hz``).
    """
    own = _rbw(trace)
    level = np.asarray(trace.level_dbm, dtype=float)
    if rbw_hz < own * (1 - 1e-9):
        return level.copy(), False
    f = trace.freq_hz
    lo = np.searchsorted(f, f - rbw_hz / 2, side="left")
    hi = np.searchsorted(f, f + rbw_hz / 2, side="right")
    keep = np.ones(f.shape, dtype=bool) if exclude is None else ~np.asarray(exclude, dtype=bool)
    mw = np.where(keep, 10 ** (level / 10), 0.0)
    cum = np.concatenate(([0.0], np.cumsum(mw)))
    count = np.concatenate(([0], np.cumsum(keep)))
    total = cum[hi] - cum[lo]
    # The running sum loses what is below its rounding (a floor window after a strong
    # carrier): those windows are summed again on their own.
    doubt = np.nonzero(total < 1e-5 * cum[hi])[0]
    if doubt.size:
        padded = np.append(mw, 0.0)
        total[doubt] = np.add.reduceat(padded, np.column_stack([lo[doubt], hi[doubt]]).ravel())[::2]
    n = np.maximum(count[hi] - count[lo], 1)
    with np.errstate(divide="ignore"):
        window = 10 * np.log10(total / n * (rbw_hz / own))
    return np.maximum(window, level), True


def trace_in_limit_rbw(outcome, trace) -> np.ndarray:
    """The trace in the reference bandwidth of the limit line at each of its points.

    What ``check --plot`` draws beside the predicted spectrum, which it shows in the
    same bandwidth (:func:`spurplan.analyses.check.limit_line_rbw`).

    Parameters
    ----------
    outcome : CheckResult
        The check whose limit line sets the bandwidth.
    trace : MeasuredTrace
        With a resolution bandwidth.

    Returns
    -------
    ndarray, (N,)
        dBm; the trace as read where no rule with an RBW covers a point.
    """
    from spurplan.analyses.check import limit_line_rbw

    _, rbw = limit_line_rbw(outcome, trace.freq_hz)
    out = np.asarray(trace.level_dbm, dtype=float).copy()
    for r in np.unique(rbw[np.isfinite(rbw)]):
        converted, _ = level_in_rbw_dbm(trace, float(r))
        out = np.where(rbw == r, converted, out)
    return out


# --- the comparison ----------------------------------------------------------------------------


def predictions(lineup, rbw_hz: float, outcome=None, combine: str | None = None) -> list[Prediction]:
    """The products (and, for CW carriers, the carriers) the plan puts at the output.

    Parameters
    ----------
    lineup : Lineup
    rbw_hz : float
        The trace's resolution bandwidth (Hz): a modulated lineup's lines are read in it.
    outcome : CheckResult, optional
        The lineup's check (the rows and levels it judged); without one (a lineup without
        a mask) the CW product table at the output.
    combine : str, optional
        Override of the analysis combining mode.

    Returns
    -------
    list of Prediction

    Raises
    ------
    LineupError
        A modulated lineup without a mask (its levels come from the check's spectrum).
    """
    from spurplan.analyses.check import ACPR_DOMAIN, NOISE_LABEL

    out: list[Prediction] = []
    if outcome is None:
        from spurplan.engine.spectra import is_modulated

        if is_modulated(lineup):
            raise LineupError(
                "a modulated lineup is compared through its check: expected a [mask]",
                file=None if lineup.source is None else str(lineup.source),
            )
        rows = lineup.run().product_rows(None, combine)
        for i, kind in enumerate(rows["kind"]):
            out.append(
                Prediction(rows["label"][i], kind, rows["freq_hz"][i], rows["level_dbm"][i], rows["stage"][i])
            )
        return out
    rows = outcome.rows
    spec = outcome.spectrum
    in_rbw = None if spec is None else spec.in_rbw_dbm(rbw_hz)
    for i, label in enumerate(rows["label"]):
        if label == NOISE_LABEL or rows["domain"][i] == ACPR_DOMAIN:
            continue
        f = rows["freq_hz"][i]
        level = rows["level_dbm"][i]
        if in_rbw is not None:
            # The cluster's line the row names, read in the trace's RBW.
            level = float(in_rbw[int(np.argmin(np.abs(spec.freq_hz - f)))])
        out.append(Prediction(label, "product", f, level, rows["stage"][i]))
    if spec is None:
        carriers = outcome.result.product_rows(None, combine)
        for i, kind in enumerate(carriers["kind"]):
            if kind == "carrier":
                out.append(
                    Prediction(
                        carriers["label"][i],
                        "carrier",
                        carriers["freq_hz"][i],
                        carriers["level_dbm"][i],
                        carriers["stage"][i],
                    )
                )
    return sorted(out, key=lambda p: p.freq_hz)


def compare(
    lineup,
    trace,
    *,
    threshold_db: float = DEFAULT_THRESHOLD_DB,
    tolerance_hz: float | None = None,
    combine: str | None = None,
    outcome=None,
) -> BenchComparison:
    """Compare a measured trace with the lineup's predicted output spectrum.

    Parameters
    ----------
    lineup : Lineup
        The plan.
    trace : MeasuredTrace
        The measurement at the lineup's output, with a resolution bandwidth.
    threshold_db : float, optional
        How far above the trace's noise floor a peak must stand (dB).
    tolerance_hz : float, optional
        Largest frequency difference of a match (Hz); default :data:`TOLERANCE_RBW`
        times the trace's RBW.
    combine : str, optional
        Override of the analysis combining mode.
    outcome : CheckResult, optional
        The lineup's check, to reuse (else it is run when the lineup has a mask).

    Returns
    -------
    BenchComparison

    Raises
    ------
    LineupError
        The trace has no RBW, or an argument is out of range.
    """
    rbw = _rbw(trace)
    if not (math.isfinite(threshold_db) and 0 < threshold_db <= 100):
        raise LineupError(f"{{@threshold_db}} {threshold_db!r} dB: expected above 0 dB and at most 100 dB")
    tol = TOLERANCE_RBW * rbw if tolerance_hz is None else float(tolerance_hz)
    if not (math.isfinite(tol) and tol > 0):
        raise LineupError(f"{{@tolerance_hz}} {tolerance_hz!r} Hz: expected a frequency above 0 Hz")
    has_mask = lineup.mask is not None and bool(
        lineup.mask.rules or lineup.mask.bands or lineup.mask.adjacent_channels
    )
    if outcome is None and has_mask:
        from spurplan.analyses.check import check

        outcome = check(lineup, combine=combine)
    preds = predictions(lineup, rbw, outcome, combine)
    floor = noise_floor_dbm(trace)
    peaks = find_peaks(trace, floor, threshold_db)
    f0, f1 = trace.span_hz
    inside = [p for p in preds if f0 - tol <= p.freq_hz <= f1 + tol]
    pf = np.array([p.freq_hz for p in inside])
    kf = np.array([k.freq_hz for k in peaks])
    matched_pred: dict[int, int] = {}
    if pf.size and kf.size:
        dist = np.abs(pf[:, None] - kf[None, :])
        order = np.argsort(dist, axis=None, kind="stable")
        used_peaks: set[int] = set()
        for flat in order:
            i, j = divmod(int(flat), kf.size)
            if dist[i, j] > tol:
                break
            if i in matched_pred or j in used_peaks:
                continue
            matched_pred[i] = j
            used_peaks.add(j)
    matches = tuple(Match(inside[i], peaks[j]) for i, j in sorted(matched_pred.items()))
    taken = set(matched_pred.values())
    unmatched = tuple(k for j, k in enumerate(peaks) if j not in taken)
    floor_at = np.interp(pf, trace.freq_hz, floor) if pf.size else np.empty(0)
    not_seen, below = [], 0
    for i, p in enumerate(inside):
        if i in matched_pred or p.kind != "product":
            continue
        if p.level_dbm >= floor_at[i]:
            not_seen.append(NotSeen(p, float(floor_at[i]), p.level_dbm >= floor_at[i] + threshold_db))
        else:
            below += 1
    notes = _trace_notes(trace, rbw)
    if outcome is not None and outcome.spectrum is not None:
        notes.append(
            "modulated carriers: the carriers themselves are not compared (their level in the RBW "
            "depends on the shape of their spectrum); products are their lines in the trace's RBW"
        )
    mask = None
    if outcome is not None:
        measured = [m.peak.level_dbm for m in matches if m.prediction.kind == "carrier"]
        n_carriers = sum(1 for p in preds if p.kind == "carrier")
        carrier = _total_dbm(measured) if measured and len(measured) == n_carriers else None
        mask = check_trace(outcome, trace, tol, carrier)
    return BenchComparison(
        lineup_name=lineup.name,
        trace=trace,
        threshold_db=float(threshold_db),
        tolerance_hz=tol,
        floor_dbm=floor,
        peaks=peaks,
        matches=matches,
        unmatched=unmatched,
        not_seen=tuple(not_seen),
        below_floor=below,
        outside_span=len(preds) - len(inside),
        mask=mask,
        notes=tuple(notes),
        carrier_dbm=outcome.carrier_dbm
        if outcome is not None
        else _total_dbm([p.level_dbm for p in preds if p.kind == "carrier"]),
    )


def check_trace(
    outcome, trace, tolerance_hz: float, measured_carrier_dbm: float | None = None
) -> TraceMaskCheck:
    """The measured trace against the lineup's mask, rule by rule (module docstring).

    Parameters
    ----------
    outcome : CheckResult
        The lineup's check (rules that hold, the carriers at the output, the modelled
        carrier power).
    trace : MeasuredTrace
        With a resolution bandwidth.
    tolerance_hz : float
        How far beyond a carrier's own bandwidth its points are the carrier (Hz).
    measured_carrier_dbm : float, optional
        The carriers' total power read from the trace (dBm); relative limits take the
        stricter of the limits read with it and with the modelled power.

    Returns
    -------
    TraceMaskCheck
    """
    from spurplan.analyses.check import rule_limits_at

    lineup = outcome.result.lineup
    mask = lineup.mask
    f = trace.freq_hz
    carriers_hz = outcome.result.carrier_freqs_hz()[0]
    own = np.zeros(f.shape, dtype=bool)
    near = np.zeros(f.shape, dtype=bool)
    for k, c in enumerate(lineup.carriers):
        half = (c.bandwidth_hz or 0.0) / 2
        own |= np.abs(f - carriers_hz[k]) <= half + tolerance_hz
        if c.bandwidth_hz:
            near |= np.abs(f - carriers_hz[k]) < mask.spurious_boundary * c.bandwidth_hz
    powers = [outcome.carrier_dbm] + ([] if measured_carrier_dbm is None else [measured_carrier_dbm])
    rules: dict[int, list] = {}
    for p in powers:
        for rule, covers, limit in rule_limits_at(outcome, f, p, by_domain=True):
            entry = rules.setdefault(
                id(rule), [rule, np.zeros(f.shape, dtype=bool), np.full(f.shape, np.inf)]
            )
            entry[1] = entry[1] | covers
            entry[2] = np.where(covers, np.minimum(entry[2], limit), entry[2])
    det = trace.detector
    rows: list[RuleOnTrace] = []
    judged_oob = np.zeros(f.shape, dtype=bool)
    for rule, covers, limit in rules.values():
        take = covers & ~own
        if not take.any():
            continue
        if rule.domain == "out-of-band":
            judged_oob |= take
        if rule.rbw_hz is None:
            level, resolved = np.asarray(trace.level_dbm, dtype=float), False
        else:
            level, resolved = level_in_rbw_dbm(trace, rule.rbw_hz, exclude=own)
        margin = np.where(take, limit - level, np.inf)
        w = int(np.argmin(margin))
        worst = float(margin[w])
        # A failing point fails whatever the doubt (a doubtful reading errs low, or is an
        # upper bound that a line meets in any RBW); a pass is only as good as the reading.
        reason = _doubt(rule, resolved, trace, det, worst)
        status = "FAIL" if worst < 0 else ("UNCERTAIN" if reason else "PASS")
        rows.append(
            RuleOnTrace(
                rule.label,
                rule.rbw_hz,
                resolved,
                int(take.sum()),
                float(f[w]),
                float(level[w]),
                float(limit[w]),
                worst,
                status,
                reason,
            )
        )
    rows.sort(key=lambda r: r.margin_db)
    unjudged = int((near & ~own & ~judged_oob).sum())
    uncovered = tuple(_uncovered(outcome, trace, powers))
    notes = [
        f"points within {tolerance_hz / 1e3:.6g} kHz of a carrier (beyond its bandwidth) are the carrier, not judged"
    ]
    if measured_carrier_dbm is not None:
        notes.append(
            f"relative limits read with the stricter of the modelled ({outcome.carrier_dbm:+.2f} dBm) and the "
            f"measured ({measured_carrier_dbm:+.2f} dBm) carrier power"
        )
    else:
        notes.append(
            f"relative limits read with the modelled carrier power ({outcome.carrier_dbm:+.2f} dBm): "
            "the trace does not show every carrier"
        )
    if any(r.status == "FAIL" for r in rows):
        status = "FAIL"
    elif uncovered or unjudged:
        status = "INCOMPLETE"
    elif not rows or any(r.status == "UNCERTAIN" for r in rows):
        status = "UNCERTAIN" if rows else "INCOMPLETE"
    else:
        status = "PASS"
    return TraceMaskCheck(tuple(rows), status, min(powers), uncovered, unjudged, tuple(notes))


def _doubt(rule, resolved: bool, trace, det: str | None, margin_db: float) -> str:
    """Why a pass on the trace is not one the measurement vouches for ("" if it is)."""
    if rule.rbw_hz is None:
        return "the rule states no reference bandwidth: the trace shows power in its RBW, not a product's whole power"
    if not resolved:
        return (
            f"the trace's RBW ({_rbw(trace) / 1e3:.6g} kHz) is wider than the rule's ({rule.rbw_hz / 1e3:.6g} kHz): "
            "the measurement cannot resolve the limit (its levels are an upper bound)"
        )
    if trace.step_hz > _rbw(trace) * (1 + 1e-9):
        return (
            f"the trace's points are up to {trace.step_hz / 1e3:.6g} kHz apart, wider than its RBW: "
            "a line between points is not seen"
        )
    if det is None:
        return "the detector is not stated (an average or sample detector reads noise low)"
    if det == "negative-peak":
        return "a negative-peak detector reads below the signal"
    if det not in SOUND_DETECTORS and margin_db < LOG_AVERAGE_BIAS_DB:
        return (
            f"the {det} detector may read noise up to {LOG_AVERAGE_BIAS_DB:.2f} dB low, more than the margin"
        )
    return ""


def _uncovered(outcome, trace, powers) -> list[str]:
    """Rules (that hold) whose range reaches beyond the trace's span."""
    from spurplan.analyses.check import highest_output_carrier_hz, output_carrier_hz

    mask = outcome.result.lineup.mask
    f0, f1 = trace.span_hz
    f_carrier = output_carrier_hz(outcome.result)
    f_highest = highest_output_carrier_hz(outcome.result)
    out = []
    pairs = [(r, ex) for r, ex in mask.rules] + [(r, None) for b in mask.bands for r in b.rules]
    for rule, ex in pairs:
        if rule.domain == "out-of-band" or not any(rule.holds_for(f_carrier, p) for p in powers):
            continue
        lo, hi = rule.start_hz, rule.stop_hz
        if ex is not None:
            lo, hi = max(lo, ex.start_hz), min(hi, float(ex.upper_hz(f_highest)))
        if lo > hi:
            continue
        if lo < f0 or hi > f1:
            out.append(f"{rule.label} covers {lo / 1e6:.6g} to {hi / 1e6:.6g} MHz")
    return out


def _trace_notes(trace, rbw: float) -> list[str]:
    notes = []
    if trace.reference_level_dbm is not None and float(np.max(trace.level_dbm)) > trace.reference_level_dbm:
        notes.append(
            f"the trace reaches {float(np.max(trace.level_dbm)):+.2f} dBm, above its reference level "
            f"{trace.reference_level_dbm:+.2f} dBm: the analyser may have been overloaded (its own "
            "distortion then reads as the lineup's)"
        )
    if trace.step_hz > rbw * (1 + 1e-9):
        notes.append(
            f"the trace's points are up to {trace.step_hz / 1e3:.6g} kHz apart, wider than its RBW "
            f"({rbw / 1e3:.6g} kHz): a line between points is not seen"
        )
    notes.append(
        "products below the trace's floor cannot be seen; a floor set by the analyser's own noise says "
        "nothing about them"
    )
    return notes


def _total_dbm(levels_dbm) -> float | None:
    """Total power (dBm) of levels (dBm); None for none."""
    if not len(levels_dbm):
        return None
    return float(10 * np.log10(np.sum(10 ** (np.asarray(levels_dbm, dtype=float) / 10))))


def _rbw(trace) -> float:
    if trace.rbw_hz is None:
        raise LineupError(
            "the trace states no resolution bandwidth: expected '# rbw = ...' in the file or {@rbw_hz}",
            file=trace.source,
        )
    return float(trace.rbw_hz)
