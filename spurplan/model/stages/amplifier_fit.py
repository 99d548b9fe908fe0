"""Fitting an amplifier's whole model to its datasheet figures at their stated points.

A datasheet line ``h2 = "-27 dBc @ +40 dBm"`` is a measurement at that output power,
often near compression; ``p1db`` and ``psat`` are two separate facts about the knee
and the rail.  This module fits the model of :mod:`spurplan.model.stages.amplifier` so
that each stated figure holds where it was stated, and reports every figure the
model cannot meet, with the size of the miss.

The model has two parts (see the README, "How amplifiers are modelled"):

1. a memoryless transfer fitted to the in-band figures: gain, OIP3, OIP2 (small
   signal) and P1dB, Psat (large signal);
2. one weight per harmonic zone ``n >= 2`` (the output network's effect near
   ``n f0``), applied to what the stage generates there and fitted so that each
   stated ``hN`` holds at its output power.  A zone without a stated figure keeps
   weight 1 (0 dB): the memoryless relations (HIP3 = IP3 + 4.77 dB, HIP2 = IP2 +
   6.02 dB) then hold.

Single-tone harmonics are read from one period of the transfer's output sampled at
:data:`ONE_TONE_POINTS` points (DFT of a periodic sequence: exact up to aliasing of
harmonics above half that count, far below any figure for these smooth models;
Oppenheim and Schafer, Discrete-Time Signal Processing, from memory).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np

from spurplan.model.nonlinear import Polynomial, Saturating
from spurplan.units import dbm_to_vpeak, format_freq, vpeak_to_dbm

ONE_TONE_POINTS = 512
# Knee sharpness range searched for P1dB.  s > 1 keeps the cubic term exact; the
# default with one compression figure is 2, a moderate knee (typical of solid-state
# amplifiers in Rapp 1991; from memory).
SMOOTHNESS_RANGE = (2.0, 40.0)
DEFAULT_SMOOTHNESS = 2.0
# Lowest inner exponent q (the inner function's own compression) searched for P1dB.
INNER_EXPONENT_MIN = 0.02
# Figures are honoured to these tolerances (dB); a larger miss is reported.
HARMONIC_TOL_DB = 0.3
COMPRESSION_TOL_DB = 0.2
# Where a small-signal figure (OHIPn) is read: this far below the knee (dB).
SMALL_SIGNAL_BACKOFF_DB = 40.0


@dataclass(frozen=True)
class FigureCheck:
    """One stated figure beside what the fitted model gives at the same point.

    Attributes
    ----------
    figure : str
        The lineup key (``"p1db"``, ``"psat"``, ``"h3"`` ...).
    stated : float
        The datasheet value (dBm for p1db/psat, dBc for hN).
    model : float or None
        What the model gives there (same unit); ``None`` where the model cannot
        reach the point at all.
    unit : str
    at_dbm : float or None
        Output power of the stated point (hN).
    freq_hz : float or None
        For a figure stated in a table against frequency, the table frequency (Hz) where
        the model of the channels there (the per-channel model of a tuning sweep or a
        yield, :mod:`spurplan.model.figure_tables`) was read; ``None`` for the loaded
        stage's own fit.
    """

    figure: str
    stated: float
    model: float | None
    unit: str
    at_dbm: float | None = None
    freq_hz: float | None = None

    @property
    def miss_db(self) -> float | None:
        return None if self.model is None else self.model - self.stated

    @property
    def met(self) -> bool:
        if self.model is None:
            return False
        if self.figure.startswith("oip"):
            # Read at the datasheet test level: a model whose intermodulation is higher
            # than stated (pessimistic) is accepted further than one that is lower.
            return -INTERCEPT_PESSIMISTIC_TOL_DB <= self.model - self.stated <= INTERCEPT_TOL_DB
        tol = HARMONIC_TOL_DB if self.figure.startswith("h") else COMPRESSION_TOL_DB
        return abs(self.model - self.stated) <= tol

    def describe(self) -> str:
        at = f" @ {self.at_dbm:+.2f} dBm" if self.at_dbm is not None else ""
        if self.freq_hz is not None:
            at += f" at {format_freq(self.freq_hz)} (the model tune and yield use there)"
        if self.model is None:
            return f"{self.figure} {self.stated:+.2f} {self.unit}{at}: the model cannot reach this point"
        return (
            f"{self.figure} {self.stated:+.2f} {self.unit}{at}: the model gives {self.model:+.2f} "
            f"{self.unit} (misses by {self.miss_db:+.2f} dB)"
        )


def one_tone(transfer, amps_v, n_max: int, points: int = ONE_TONE_POINTS) -> np.ndarray:
    """Output harmonic phasors (V) for cosine inputs of peak ``amps_v``.

    Parameters
    ----------
    transfer : callable
        A model from :mod:`spurplan.model.nonlinear` (V in, V out); with per-sample
        parameters (B,), ``amps_v`` holds one amplitude per sample.
    amps_v : float or array_like
        Input cosine peak amplitudes (V).
    n_max : int
        Highest harmonic returned.
    points : int, optional
        Samples of the period (default :data:`ONE_TONE_POINTS`).

    Returns
    -------
    ndarray, complex, shape (len(amps_v), n_max + 1)
        Column n is the n-th harmonic (column 0 the DC value).
    """
    amps_v = np.atleast_1d(np.asarray(amps_v, dtype=float))
    theta = 2.0 * np.pi * np.arange(points) / points
    with np.errstate(over="ignore", invalid="ignore"):
        y = transfer(amps_v[:, None] * np.cos(theta)[None, :])
    spec = np.fft.rfft(y, axis=1) / points
    spec[:, 1:] *= 2.0
    return spec[:, : n_max + 1]


def knee_scale_v(transfer) -> float:
    """An input voltage near where the model's nonlinearity becomes strong (V)."""
    if isinstance(transfer, Saturating):
        a1 = float(transfer.a1)
        scales = [float(transfer.rail_v) / a1] if math.isfinite(float(transfer.rail_v)) else []
        if float(transfer.gamma) > 0:
            scales.append(1.0 / math.sqrt(float(transfer.gamma)))
        return min(scales) if scales else 1.0
    if isinstance(transfer, Polynomial):
        turn_neg, turn_pos = transfer.turning_points()
        finite = [abs(t) for t in (turn_neg, turn_pos) if math.isfinite(t)]
        scale = min(finite) if finite else transfer._scale_v()
        return scale if math.isfinite(scale) else 1.0
    return 1.0


def _gain_db(transfer, amp_v: np.ndarray) -> np.ndarray:
    y1 = np.abs(one_tone(transfer, amp_v, 1)[:, 1])
    with np.errstate(divide="ignore"):
        return 20.0 * np.log10(y1 / (abs(float(transfer.gain)) * amp_v))


def _bisect(func, lo: float, hi: float, iterations: int = 60, ftol: float = 0.0) -> float:
    """A root of ``func`` in [lo, hi] (``func(lo)`` and ``func(hi)`` of opposite signs);
    stops early where ``|func| <= ftol``."""
    f_lo = func(lo)
    for _ in range(iterations):
        mid = 0.5 * (lo + hi)
        f_mid = func(mid)
        if abs(f_mid) <= ftol:
            return mid
        if (f_mid < 0) == (f_lo < 0):
            lo, f_lo = mid, f_mid
        else:
            hi = mid
        if hi - lo <= 1e-12 * max(abs(hi), 1e-300):
            break
    return 0.5 * (lo + hi)


def model_p1db_dbm(transfer, r_ohm: float) -> float | None:
    """Output power (dBm) where the single-tone gain is 1 dB below small signal.

    Returns ``None`` when the model never compresses by 1 dB (linear, or expanding
    without bound).  The first crossing from low drive is taken (an expansive model
    may rise before it falls).

    Parameters
    ----------
    transfer : callable
        A model from :mod:`spurplan.model.nonlinear` (V in, V out).
    r_ohm : float
        System impedance (ohm).

    Returns
    -------
    float or None
        Output P1dB (dBm).
    """
    if transfer.degree == 1:
        return None
    scale = knee_scale_v(transfer)
    amps = np.geomspace(scale * 1e-3, scale * 1e3, 61)
    gain = _gain_db(transfer, amps)
    below = np.nonzero(gain <= -1.0)[0]
    if below.size == 0 or below[0] == 0:
        return None
    i = below[0]
    lo, hi = math.log(amps[i - 1]), math.log(amps[i])
    x = math.exp(
        _bisect(lambda t: float(_gain_db(transfer, np.array([math.exp(t)]))[0]) + 1.0, lo, hi, 40, 1e-6)
    )
    return float(vpeak_to_dbm(np.abs(one_tone(transfer, x, 1)[0, 1]), r_ohm))


def rail_for_psat_v(model: Saturating, psat_dbm, r_ohm: float) -> np.ndarray:
    """The rail ``V_r`` (V) that gives ``psat_dbm`` (dBm, per sample) in closed form.

    The nominal fit and every Monte Carlo sample set their rail with this one function.

    The saturated fundamental is ``(4/pi) R(v_inf)`` with ``v_inf`` the inner function's
    limit (``Saturating``'s docstring), so ``R(v_inf) = (pi/4) V_psat``.  An inner limit
    ``v_inf = inf`` gives ``V_r`` itself; a finite one inverts the Rapp form
    ``R(v) = v (1 + (v/V_r)^(2s))^(-1/(2s))``: ``V_r = v_inf ((v_inf/R)^(2s) - 1)^(-1/(2s))``
    (``nan`` where Psat lies above the inner limit, which no rail reaches).

    Parameters
    ----------
    model : Saturating
        The model whose rail is sought (its other parameters may be arrays over samples).
    psat_dbm : float or ndarray
        Saturated output power (dBm), per sample.
    r_ohm : float
        System impedance (ohm).

    Returns
    -------
    ndarray
        The rail (V peak), ``nan`` where out of reach.
    """
    level = (math.pi / 4.0) * dbm_to_vpeak(psat_dbm, r_ohm)
    a1 = np.asarray(model.a1, dtype=float)
    gamma = np.asarray(model.gamma, dtype=float)
    bounded = (gamma > 0) & (model.inner_exponent == 0.5) & np.all(np.asarray(model.a3_exp) == 0)
    v_inf = np.where(bounded, a1 / np.sqrt(np.where(gamma > 0, gamma, 1.0)), 1.0)
    two_s = 2.0 * model.smoothness
    with np.errstate(divide="ignore", invalid="ignore"):
        inverted = v_inf / ((v_inf / level) ** two_s - 1.0) ** (1.0 / two_s)
    return np.where(bounded, inverted, level)


def model_psat_dbm(transfer, r_ohm: float) -> float | None:
    """Saturated output power (dBm): the fundamental under unbounded drive.

    For :class:`~spurplan.model.nonlinear.Saturating` the two-level limit (its docstring);
    for a polynomial the highest fundamental before it turns over; ``None`` where the
    output grows without bound.

    Parameters
    ----------
    transfer : callable
        A model from :mod:`spurplan.model.nonlinear` (V in, V out).
    r_ohm : float
        System impedance (ohm).

    Returns
    -------
    float or None
        Saturated output power (dBm).
    """
    if isinstance(transfer, Saturating):
        lo, hi = transfer.saturated_levels_v()
        span = float(hi - lo)
        return float(vpeak_to_dbm(2.0 / math.pi * span, r_ohm)) if math.isfinite(span) else None
    if transfer.degree == 1:
        return None
    scale = knee_scale_v(transfer)
    amps = np.geomspace(scale * 1e-3, scale * 10.0, 400)
    y1 = np.abs(one_tone(transfer, amps, 1)[:, 1])
    peak = int(np.argmax(y1))
    return float(vpeak_to_dbm(y1[peak], r_ohm)) if peak < len(amps) - 1 else None


def input_for_output_v(transfer, out_dbm: float, r_ohm: float) -> float | None:
    """Input peak (V) at which the fundamental output reaches ``out_dbm``.

    Searched from low drive up to where the fundamental stops rising; ``None`` when
    it never gets there.

    Parameters
    ----------
    transfer : callable
        A model from :mod:`spurplan.model.nonlinear` (V in, V out).
    out_dbm : float
        Target fundamental output power (dBm).
    r_ohm : float
        System impedance (ohm).

    Returns
    -------
    float or None
        Input peak amplitude (V).
    """
    target = float(dbm_to_vpeak(out_dbm, r_ohm))
    scale = knee_scale_v(transfer)
    amps = np.geomspace(scale * 1e-6, scale * 1e4, 101)
    y1 = np.abs(one_tone(transfer, amps, 1)[:, 1])
    rising = np.nonzero(np.diff(y1) <= 0)[0]
    stop = rising[0] + 1 if rising.size else len(amps)
    above = np.nonzero(y1[:stop] >= target)[0]
    if above.size == 0:
        return None
    i = above[0]
    if i == 0:
        return target / abs(float(transfer.gain))

    def miss(t):
        return float(np.abs(one_tone(transfer, np.array([math.exp(t)]), 1)[0, 1])) - target

    return math.exp(_bisect(miss, math.log(amps[i - 1]), math.log(amps[i]), 50, 1e-9 * target))


def harmonic_dbc(transfer, amp_v: float, n: int) -> float:
    """Level of harmonic ``n`` relative to the fundamental (dBc) at input peak ``amp_v``.

    Parameters
    ----------
    transfer : callable
        A model from :mod:`spurplan.model.nonlinear` (V in, V out).
    amp_v : float
        Input cosine peak amplitude (V).
    n : int
        Harmonic number (>= 2).

    Returns
    -------
    float
        Harmonic n over the fundamental (dBc); ``-inf`` where the harmonic is zero.
    """
    spec = one_tone(transfer, np.array([amp_v]), n)[0]
    with np.errstate(divide="ignore"):
        return float(20.0 * np.log10(abs(spec[n]) / abs(spec[1])))


# Two-tone intercepts are read with each tone this far below the model's P1dB (dB), a
# usual datasheet test condition (common practice, no source).
OIP3_BACKOFF_DB = 10.0
INTERCEPT_TOL_DB = 0.5
INTERCEPT_PESSIMISTIC_TOL_DB = 1.0
_TWO_TONE_POINTS = 1024
_TWO_TONE_BINS = (40, 41)


def two_tone_oip3_dbm(transfer, out_per_tone_dbm: float, r_ohm: float) -> tuple[float, float]:
    """Apparent OIP3 (dBm) from two equal tones: ``P + (P - P_IM3) / 2`` (definition of
    the intercept; Razavi, RF Microelectronics 2e, ch. 2, from memory).

    The tones sit on bins 40 and 41 of one period (so IM3 ``2 f1 - f2`` is bin 39);
    their input is set for ``out_per_tone_dbm`` at small-signal gain.  Returns the
    apparent OIP3 and the output per tone actually reached (dBm).

    Parameters
    ----------
    transfer : callable
        A model from :mod:`spurplan.model.nonlinear` (V in, V out).
    out_per_tone_dbm : float
        Output power per tone aimed at, at small-signal gain (dBm).
    r_ohm : float
        System impedance (ohm).

    Returns
    -------
    tuple of (float, float)
        Apparent OIP3 (dBm) and the output per tone reached (dBm).
    """
    a = float(dbm_to_vpeak(out_per_tone_dbm, r_ohm)) / abs(float(transfer.gain))
    k1, k2 = _TWO_TONE_BINS
    n = np.arange(_TWO_TONE_POINTS)
    x = a * (np.cos(2 * np.pi * k1 * n / _TWO_TONE_POINTS) + np.cos(2 * np.pi * k2 * n / _TWO_TONE_POINTS))
    spec = np.abs(np.fft.rfft(transfer(x))) * 2.0 / _TWO_TONE_POINTS
    p_out = float(vpeak_to_dbm(spec[k1], r_ohm))
    p_im3 = float(vpeak_to_dbm(spec[2 * k1 - k2], r_ohm))
    return p_out + (p_out - p_im3) / 2.0, p_out


def _implied_oip3_dbm(base: Saturating, r_ohm: float) -> float | None:
    """The small-signal OIP3 (dBm) of the model's cubic term (``A^2 = (4/3) |a1/a3|``)."""
    a1 = float(base.a1)
    a3 = abs(float(base.a3_exp)) + a1 * float(base.gamma) / 2.0
    if a3 == 0:
        return None
    return float(vpeak_to_dbm(a1 * math.sqrt(4.0 / 3.0 * a1 / a3), r_ohm))


def oip3_check(transfer, oip3_dbm: float, r_ohm: float) -> FigureCheck:
    """The stated OIP3 beside the model's, read with each tone :data:`OIP3_BACKOFF_DB`
    below the model's P1dB (or its Psat without one).

    Parameters
    ----------
    transfer : callable
        A model from :mod:`spurplan.model.nonlinear` (V in, V out).
    oip3_dbm : float
        The stated OIP3 (dBm).
    r_ohm : float
        System impedance (ohm).

    Returns
    -------
    FigureCheck
        Stated and apparent OIP3 (dBm), with the output per tone (dBm) it was read at.
    """
    top = model_p1db_dbm(transfer, r_ohm) or model_psat_dbm(transfer, r_ohm) or oip3_dbm - 10.0
    apparent, at = two_tone_oip3_dbm(transfer, top - OIP3_BACKOFF_DB, r_ohm)
    return FigureCheck("oip3", oip3_dbm, apparent, "dBm", at)


def _sharpest_needed(models, target_dbm: float | None, r_ohm: float):
    """The first of ``models`` (softest knee first) whose two-tone OIP3 at the datasheet
    test level is within half the tolerance of ``target_dbm``, else the closest."""
    best, best_miss = None, math.inf
    for model in models:
        if model is None:
            continue
        if target_dbm is None:
            return model
        miss_db = oip3_check(model, target_dbm, r_ohm).miss_db
        assert miss_db is not None  # oip3_check always has a model value (a two-tone reading)
        miss = abs(miss_db)
        if miss <= INTERCEPT_TOL_DB / 2:
            return model
        if miss < best_miss:
            best, best_miss = model, miss
    return best


_KNEE_LADDER = (2.0, 3.0, 4.0, 6.0, 8.0, 12.0, 16.0, 24.0, 40.0)


@dataclass(frozen=True)
class CompressionFit:
    """The rail, knee and inner saturation that honour Psat and P1dB."""

    transfer: Saturating
    checks: tuple[FigureCheck, ...]


def fit_compression(
    base: Saturating,
    p1db_dbm: float | None,
    psat_dbm: float | None,
    has_cubic: bool,
    r_ohm: float,
    oip3_dbm: float | None = None,
) -> CompressionFit:
    """Choose the free parameters of ``base`` so that P1dB and Psat hold.

    Free parameters: the rail ``V_r`` (for Psat) and, for P1dB, the knee
    sharpness ``s`` when the cubic is known, or the inner saturation ``gamma`` when
    no third-order figure fixes it (the cubic then follows from the knee).  When the
    sharpest knee still compresses too early, the inner exponent ``q`` is lowered, but
    with a stated ``oip3_dbm`` only as far as the two-tone intercept at the datasheet
    test level stays within 0.8 of its tolerance (:func:`oip3_check`): a P1dB miss is
    reported rather than intermodulation read optimistically.  With one compression
    figure the knee is the softest of :data:`_KNEE_LADDER` that keeps that intercept.

    Parameters
    ----------
    base : Saturating
        The model with its small-signal terms set (:func:`spurplan.model.stages.amplifier.saturating_base`).
    p1db_dbm : float or None
        Stated output P1dB (dBm).
    psat_dbm : float or None
        Stated saturated output power (dBm).
    has_cubic : bool
        Whether a third-order figure (OIP3) fixes the cubic term.
    r_ohm : float
        System impedance (ohm).
    oip3_dbm : float, optional
        Stated OIP3 (dBm), which the knee may not spoil.

    Returns
    -------
    CompressionFit
        The fitted model and the check of each compression figure.
    """

    a1 = float(base.a1)

    def with_rail_for_psat(model: Saturating) -> Saturating | None:
        """``model`` with the rail that gives ``psat_dbm``; None if out of reach."""
        assert psat_dbm is not None  # called only in the branches where Psat is stated
        rail = float(rail_for_psat_v(model, psat_dbm, r_ohm))
        return replace(model, rail_v=rail) if math.isfinite(rail) and rail > 0 else None

    checks = []
    model = replace(base, smoothness=DEFAULT_SMOOTHNESS)
    if psat_dbm is not None and p1db_dbm is not None:
        if has_cubic:
            lo_s, hi_s = SMOOTHNESS_RANGE
            lo_q = INNER_EXPONENT_MIN

            def build(t):
                # One path through (s, q): t in [0, 1] sharpens the knee at q = 1/2,
                # t in [1, 2] then lowers q (later inner compression); P1dB rises along it.
                if t <= 1.0:
                    s, q = lo_s * (hi_s / lo_s) ** t, 0.5
                else:
                    s, q = hi_s, 0.5 * (lo_q / 0.5) ** (t - 1.0)
                return with_rail_for_psat(replace(model, smoothness=s, inner_exponent=q))

            grid = (0.0, 2.0)
            fitted = _fit_p1db(build, grid, p1db_dbm, r_ohm)
            target = oip3_dbm
            if fitted is not None and fitted.inner_exponent < 0.5 and target is not None:
                # A lower q cancels part of the intermodulation at the test level: go no
                # further along the path than the intercept allows (P1dB then misses, and
                # says so, rather than the intercept reading optimistic).
                def excess(t, target: float = target):
                    miss_db = oip3_check(build(t), target, r_ohm).miss_db
                    assert miss_db is not None  # oip3_check always has a model value
                    return miss_db - 0.8 * INTERCEPT_TOL_DB

                t_fit = 1.0 + math.log(fitted.inner_exponent / 0.5) / math.log(lo_q / 0.5)
                if excess(t_fit) > 0:
                    fitted = build(_bisect(excess, 1.0, t_fit, 30, 1e-3)) if excess(1.0) < 0 else build(1.0)
            model = fitted or build(grid[1]) or model
        else:
            # No third-order figure: the knee's own cubic (s = 1) is kept, so the model
            # never loses its small-signal intermodulation; the inner saturation lowers P1dB.
            model = replace(model, smoothness=1.0)

            def build(log_g):
                return with_rail_for_psat(replace(model, gamma=math.exp(log_g)))

            # gamma from far below the knee (no inner saturation) to far above it.
            v0 = float(dbm_to_vpeak(psat_dbm, r_ohm)) / a1
            grid = (math.log(1e-4 / v0**2), math.log(1e2 / v0**2))
            model = _fit_p1db(build, grid, p1db_dbm, r_ohm) or build(grid[1]) or model
    elif psat_dbm is not None:
        if has_cubic:
            # The knee is free: the softest one whose intermodulation at the datasheet
            # test level still follows the stated intercept.
            target = _implied_oip3_dbm(model, r_ohm)
            ladder = (with_rail_for_psat(replace(model, smoothness=k)) for k in _KNEE_LADDER)
            model = _sharpest_needed(ladder, target, r_ohm) or model
        else:
            model = with_rail_for_psat(replace(model, smoothness=1.0)) or model
    elif p1db_dbm is not None:
        v0 = float(dbm_to_vpeak(p1db_dbm, r_ohm))
        if not has_cubic:
            # The knee's own cubic (s = 1) sets the intermodulation.
            model = replace(model, smoothness=1.0)
        elif (model_p1db_dbm(model, r_ohm) or math.inf) < p1db_dbm + 0.5:
            # The inner function alone compresses before P1dB: let it compress later
            # (lower q) until it reaches 0.5 dB past P1dB unrailed; the rail then sets P1dB.
            def reach(t):
                q = 0.5 * (INNER_EXPONENT_MIN / 0.5) ** t
                return (model_p1db_dbm(replace(model, inner_exponent=q), r_ohm) or math.inf) - p1db_dbm - 0.5

            t = _bisect(reach, 0.0, 1.0, 40, 1e-3) if reach(1.0) > 0 else 1.0
            model = replace(model, inner_exponent=0.5 * (INNER_EXPONENT_MIN / 0.5) ** t)

        grid = (math.log(v0) - 10.0, math.log(v0) + 10.0)

        def fitted(knee: Saturating) -> Saturating:
            def build(log_rail):
                return replace(knee, rail_v=math.exp(log_rail))

            return _fit_p1db(build, grid, p1db_dbm, r_ohm) or build(grid[1])

        if has_cubic:
            target = _implied_oip3_dbm(model, r_ohm)
            model = _sharpest_needed(
                (fitted(replace(model, smoothness=k)) for k in _KNEE_LADDER), target, r_ohm
            )
        else:
            model = fitted(model)
    if p1db_dbm is not None:
        checks.append(FigureCheck("p1db", p1db_dbm, model_p1db_dbm(model, r_ohm), "dBm"))
    if psat_dbm is not None:
        checks.append(FigureCheck("psat", psat_dbm, model_psat_dbm(model, r_ohm), "dBm"))
    return CompressionFit(transfer=model, checks=tuple(checks))


def _fit_p1db(build, grid: tuple[float, float], p1db_dbm: float, r_ohm: float):
    """Bisect the parameter (log scale, over ``grid``) whose model gives ``p1db_dbm``.

    Returns the model, the end of the range nearest to the target when the range
    does not reach it, or None when no model in the range can be built.
    """

    def point(t):
        m = build(t)
        return t, m, (None if m is None else model_p1db_dbm(m, r_ohm))

    ends = [point(t) for t in grid]
    usable = [e for e in ends if e[2] is not None]
    if not usable:
        return None
    if len(usable) == 1:
        # Part of the range cannot be built (Psat out of reach there): move the other end
        # to the edge of the part that can, so that a P1dB inside it is still found.
        good, bad = usable[0][0], next(e[0] for e in ends if e[2] is None)
        for _ in range(30):
            mid = 0.5 * (good + bad)
            if point(mid)[2] is None:
                bad = mid
            else:
                good = mid
        edge = point(good)
        if edge[0] != usable[0][0]:
            usable = sorted([usable[0], edge], key=lambda e: e[0])
    if len(usable) == 1 or (usable[0][2] - p1db_dbm) * (usable[1][2] - p1db_dbm) > 0:
        return min(usable, key=lambda e: abs(e[2] - p1db_dbm))[1]

    def miss(t):
        m = build(t)
        p = None if m is None else model_p1db_dbm(m, r_ohm)
        return (usable[1][2] - p1db_dbm) if p is None else p - p1db_dbm

    return build(_bisect(miss, usable[0][0], usable[1][0], 40, 1e-4))


def fit_zone_weights(
    transfer, points: dict[int, tuple[float, float]], r_ohm: float
) -> tuple[dict[int, float], list[FigureCheck]]:
    """Zone weights (dB) that put each harmonic at its stated level.

    Parameters
    ----------
    transfer : callable
        The fitted model from :mod:`spurplan.model.nonlinear` (V in, V out).
    points : dict of n -> (level_dbc, at_output_dbm)
        The stated point of each harmonic figure (dBc, at an output power in dBm).
    r_ohm : float
        System impedance (ohm).

    Returns
    -------
    weights_db : dict of n -> dB
        Added to what the stage generates in zone n.
    checks : list of FigureCheck
        One per figure, with ``model`` None where the model cannot reach the point
        (the weight is then fitted at the highest output the model reaches).
    """
    weights, checks = {}, []
    for n, (dbc, at_dbm) in sorted(points.items()):
        amp = input_for_output_v(transfer, at_dbm, r_ohm)
        reached = amp is not None
        if amp is None:
            # Beyond what the model reaches: fit the weight at its saturated output,
            # and report the figure as not met.
            top = model_psat_dbm(transfer, r_ohm)
            amp = None if top is None else input_for_output_v(transfer, top - 0.01, r_ohm)
        model_dbc = -math.inf if amp is None else harmonic_dbc(transfer, amp, n)
        if not math.isfinite(model_dbc) or model_dbc < -250.0:
            # The model makes nothing in this zone to weight.
            checks.append(FigureCheck(f"h{n}", dbc, None, "dBc", at_dbm))
            continue
        weights[n] = dbc - model_dbc
        checks.append(FigureCheck(f"h{n}", dbc, dbc if reached else None, "dBc", at_dbm))
    return weights, checks
