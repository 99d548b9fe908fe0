"""Amplifier stage: datasheet figures -> memoryless transfer model.

Polynomial ``y = a1 x + a2 x^2 + ...`` in peak volts across the system impedance R
(design notes section 4; Razavi, RF Microelectronics 2e, ch. 2, from memory):

* ``a1 = 10^(G/20)``;
* two-tone IP3: ``A_IIP3^2 = (4/3) |a1/a3|``; IP2: ``A_IIP2 = |a1/a2|``;
* harmonic intercept of order n (input amplitude): ``A^(n-1) = 2^(n-1) |a1/a_n|``,
  output-referred ``OHIPn = IHIPn + G``;
* datasheet "Hn = X dBc @ Pout" gives ``OHIPn = Pout + |X|/(n-1)``.

Signs: odd coefficients are negative (compressive) unless ``cubic = "expansive"``,
even coefficients positive; worst-case combining does not depend on them.

With ``psat`` (or ``p1db``) the polynomial sits behind a smooth input limiter
(:class:`~spurplan.nonlinear.SoftLimitedPolynomial`) whose expansion keeps every
figure above: ``psat`` is the fundamental output power under hard drive, reached by
rails at ``+/- (pi/4) sqrt(2 R Psat)`` (the fundamental of a square wave of
amplitude V is ``4V/pi``; Fourier series, standard tables); ``p1db`` alone sets the
rails so that the model compresses 1 dB at that output power.  Where the
polynomial's own turning point comes first, it sets the rail, and a note says so.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace

import numpy as np

from ..engine import apply_memoryless
from ..fields import Fields
from ..filters import SParameterTable
from ..nonlinear import Polynomial, SoftLimitedPolynomial
from ..spectrum import mixing_vectors
from ..units import dbm_to_vpeak, parse_dbc_at, parse_gain_db, parse_power_dbm, vpeak_to_dbm
from .base import LoadContext, flat_response

MAX_HARMONIC = 9
# Two figures for the same coefficient may differ this much (datasheet rounding).
CONSISTENCY_DB = 0.5
_HIP_OFFSET_DB = {3: 10 * math.log10(3.0), 2: 20 * math.log10(2.0)}  # HIP - IP (dB)


@dataclass(frozen=True)
class AmplifierFigures:
    """Datasheet figures of one amplifier, all output-referred, in dB / dBm.

    Attributes
    ----------
    gain_db : float
    oip3_dbm, oip2_dbm : float or None
    ohip_dbm : dict of int -> float
        Output harmonic intercepts by order (2 .. 9).
    p1db_dbm, psat_dbm : float or None
        Output 1 dB compression point and saturated output power.
    expansive : bool
        Odd-order coefficients positive (gain expansion) instead of negative.
    """

    gain_db: float
    oip3_dbm: float | None = None
    oip2_dbm: float | None = None
    ohip_dbm: dict[int, float] = field(default_factory=dict)
    p1db_dbm: float | None = None
    psat_dbm: float | None = None
    expansive: bool = False

    @property
    def iip3_dbm(self) -> float | None:
        return None if self.oip3_dbm is None else self.oip3_dbm - self.gain_db


def polynomial_from_figures(fig: AmplifierFigures, r_ohm: float) -> Polynomial:
    """Polynomial coefficients (V^(1-n)) from datasheet figures (module docstring).

    The figures may be arrays (one value per Monte Carlo sample); the coefficients
    are then arrays too.
    """
    a1 = 10.0 ** (np.asarray(fig.gain_db, dtype=float) / 20.0)
    coeffs = {1: a1}
    odd_sign = 1.0 if fig.expansive else -1.0
    for n, ohip in fig.ohip_dbm.items():
        a_ihip = dbm_to_vpeak(ohip - fig.gain_db, r_ohm)
        sign = odd_sign if n % 2 else 1.0
        coeffs[n] = sign * 2.0 ** (n - 1) * a1 / a_ihip ** (n - 1)
    # Two-tone intercepts take precedence over harmonic ones (the loader has
    # checked that they agree).
    if fig.oip2_dbm is not None:
        coeffs[2] = a1 / dbm_to_vpeak(fig.oip2_dbm - fig.gain_db, r_ohm)
    if fig.oip3_dbm is not None:
        a_iip3 = dbm_to_vpeak(fig.oip3_dbm - fig.gain_db, r_ohm)
        coeffs[3] = odd_sign * (4.0 / 3.0) * a1 / a_iip3**2
    degree = max(coeffs)
    return Polynomial(tuple(coeffs.get(n, 0.0) for n in range(1, degree + 1)))


def _solve_increasing(func, target: float, lo: float, hi: float) -> float:
    """x in [lo, hi] with func(x) = target for an increasing func (bisection)."""
    for _ in range(200):
        mid = 0.5 * (lo + hi)
        if func(mid) < target:
            lo = mid
        else:
            hi = mid
        if hi - lo <= 1e-13 * max(abs(hi), 1e-30):
            break
    return 0.5 * (lo + hi)


def _clip_levels(poly: Polynomial, rail_v: float) -> tuple[float, float, list[str]]:
    """Input levels at which each side of ``poly`` reaches +/- ``rail_v`` (V)."""
    turn_neg, turn_pos = poly.turning_points()
    notes = []
    levels = []
    for side, turn in ((1.0, turn_pos), (-1.0, -turn_neg)):

        def out(x, side=side):
            return side * float(poly(side * x))

        if math.isfinite(turn) and out(turn) <= rail_v:
            levels.append(turn)
            notes.append(
                f"on the {'positive' if side > 0 else 'negative'} swing the intercept "
                f"polynomial turns over at {out(turn):.3g} V peak output, below the "
                f"{rail_v:.3g} V rail that the saturation figure asks for; the model "
                "saturates there"
            )
            continue
        hi = turn if math.isfinite(turn) else rail_v / abs(poly.gain)
        while not math.isfinite(turn) and out(hi) < rail_v:
            hi *= 2.0
        levels.append(_solve_increasing(out, rail_v, 0.0, hi))
    return -levels[1], levels[0], notes


def _smoothness(poly: Polynomial) -> int:
    """Limiter smoothness s: the composite keeps coefficients up to degree 2s."""
    return max(2, math.ceil(poly.degree / 2))


def output_p1db_dbm(transfer, r_ohm: float) -> float | None:
    """Output 1 dB compression point (dBm) of a model, from a single-tone sweep.

    Returns ``None`` when the model does not compress by 1 dB (linear or
    expansive).
    """
    if transfer.degree == 1:
        return None
    mix = mixing_vectors(1, 3)
    scale = _model_scale_v(transfer)
    amps = np.geomspace(scale * 1e-3, scale * 30.0, 600)
    x = np.zeros((amps.size, len(mix)), dtype=complex)
    x[:, 0] = amps
    y1 = np.abs(apply_memoryless(x, mix, transfer).spectrum[:, 0])
    gain_db = 20.0 * np.log10(y1 / (abs(transfer.gain) * amps))
    below = np.nonzero(gain_db <= -1.0)[0]
    if below.size == 0 or below[0] == 0:
        return None
    i = below[0]
    frac = (-1.0 - gain_db[i - 1]) / (gain_db[i] - gain_db[i - 1])
    out_db = vpeak_to_dbm(y1[[i - 1, i]], r_ohm)
    return float(out_db[0] + frac * (out_db[1] - out_db[0]))


def _model_scale_v(transfer) -> float:
    """A voltage near where the model's nonlinearity becomes strong (V, input)."""
    if isinstance(transfer, SoftLimitedPolynomial):
        return min(transfer.clip_pos_v, -transfer.clip_neg_v)
    turn_neg, turn_pos = transfer.turning_points()
    finite = [abs(t) for t in (turn_neg, turn_pos) if math.isfinite(t)]
    return min(finite) if finite else transfer._scale_v()


def build_transfer(fig: AmplifierFigures, r_ohm: float) -> tuple[object, list[str]]:
    """The memoryless model for ``fig`` and notes about how it was chosen."""
    poly = polynomial_from_figures(fig, r_ohm)
    if fig.psat_dbm is None and fig.p1db_dbm is None:
        return poly, []
    s = _smoothness(poly)
    if fig.psat_dbm is not None:
        rail = (math.pi / 4.0) * float(dbm_to_vpeak(fig.psat_dbm, r_ohm))
        neg, pos, notes = _clip_levels(poly, rail)
        return SoftLimitedPolynomial(poly, neg, pos, s), notes

    target = fig.p1db_dbm

    def model(rail_v):
        neg, pos, _ = _clip_levels(poly, rail_v)
        return SoftLimitedPolynomial(poly, neg, pos, s)

    # The model's P1dB rises with the rail; bracket it, then bisect in log(rail).
    rail_hi = float(dbm_to_vpeak(target, r_ohm)) * 100.0
    best = output_p1db_dbm(model(rail_hi), r_ohm)
    if best is None or best < target:
        note = (
            f"p1db {target:+.1f} dBm is above what the other figures allow "
            f"({best:+.1f} dBm): the model compresses earlier"
            if best is not None
            else f"p1db {target:+.1f} dBm could not be fitted"
        )
        return model(rail_hi), [note]
    lo, hi = math.log(rail_hi) - 12.0, math.log(rail_hi)
    for _ in range(40):
        mid = 0.5 * (lo + hi)
        p1 = output_p1db_dbm(model(math.exp(mid)), r_ohm)
        if p1 is None or p1 > target:
            hi = mid
        else:
            lo = mid
        if hi - lo < 1e-4:
            break
    return model(math.exp(0.5 * (lo + hi))), []


def sampled_transfer(amp: Amplifier, deltas: dict, r_ohm: float):
    """The amplifier's model with its figures moved per Monte Carlo sample.

    Parameters
    ----------
    deltas : dict of str -> ndarray (B,)
        Shifts in dB of ``gain``, ``oip3``, ``oip2``, ``psat``, ``p1db`` and ``ohip2``
        .. ``ohip9`` (output-referred intercepts, dBm).

    With ``psat`` the clip levels follow each sample's rail exactly.  With only
    ``p1db`` the nominal fit's input clip levels move by the sample's P1dB shift less
    its gain shift (an approximation: refitting every sample would be slow).
    """
    from dataclasses import replace as _replace

    fig = amp.figures
    batch = len(next(iter(deltas.values())))
    zero = np.zeros(batch)

    def moved(value, key):
        return None if value is None else value + deltas.get(key, zero)

    sample = _replace(
        fig,
        gain_db=fig.gain_db + deltas.get("gain", zero),
        oip3_dbm=moved(fig.oip3_dbm, "oip3"),
        oip2_dbm=moved(fig.oip2_dbm, "oip2"),
        ohip_dbm={n: v + deltas.get(f"ohip{n}", zero) for n, v in fig.ohip_dbm.items()},
    )
    poly = polynomial_from_figures(sample, r_ohm)
    nominal = amp.transfer
    if not isinstance(nominal, SoftLimitedPolynomial):
        return poly
    if fig.psat_dbm is not None:
        rail = (math.pi / 4.0) * dbm_to_vpeak(fig.psat_dbm + deltas.get("psat", zero), r_ohm)
        neg, pos = _clip_levels_batched(poly, rail)
        return SoftLimitedPolynomial(poly, neg, pos, nominal.smoothness)
    shift = 10 ** ((deltas.get("p1db", zero) - deltas.get("gain", zero)) / 20)
    return SoftLimitedPolynomial(
        poly, nominal.clip_neg_v * shift, nominal.clip_pos_v * shift, nominal.smoothness
    )


def _turning_points_batched(coeffs: list, degree: int) -> tuple[np.ndarray, np.ndarray]:
    """Nearest roots of dy/dx on each side of 0, per sample: closed form up to a cubic."""
    batch = len(coeffs[0])
    neg, pos = np.full(batch, -np.inf), np.full(batch, np.inf)
    if degree == 1:
        return neg, pos
    a1, a2 = coeffs[0], coeffs[1]
    a3 = coeffs[2] if degree >= 3 else np.zeros(batch)
    if degree <= 3:
        # dy/dx = a1 + 2 a2 x + 3 a3 x^2 = 0 (quadratic formula; linear where a3 = 0).
        with np.errstate(divide="ignore", invalid="ignore"):
            disc = 4 * a2**2 - 12 * a3 * a1
            sq = np.sqrt(np.where(disc >= 0, disc, np.nan))
            quad = np.stack([(-2 * a2 + sq) / (6 * a3), (-2 * a2 - sq) / (6 * a3)])
            lin = np.broadcast_to(-a1 / (2 * a2), (2, batch))
            roots = np.where(a3 != 0, quad, np.where(np.arange(2)[:, None] == 0, lin, np.nan))
        pos = np.where(roots > 0, roots, np.inf).min(axis=0)
        neg = np.where(roots < 0, roots, -np.inf).max(axis=0)
        return neg, pos
    for b in range(batch):
        neg[b], pos[b] = Polynomial(tuple(float(c[b]) for c in coeffs)).turning_points()
    return neg, pos


def _clip_levels_batched(poly: Polynomial, rail_v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Per-sample :func:`_clip_levels`: input levels where each side reaches +/- ``rail_v``."""
    batch = len(rail_v)
    coeffs = [np.broadcast_to(np.asarray(a, dtype=float), (batch,)) for a in poly.coeffs]
    turn_neg, turn_pos = _turning_points_batched(coeffs, poly.degree)
    levels = []
    for side, turn in ((1.0, turn_pos), (-1.0, -turn_neg)):

        def out(x, side=side):
            y = np.zeros_like(x)
            for c in reversed(coeffs):
                y = (y + c) * (side * x)
            return side * y

        capped = np.isfinite(turn) & (out(np.where(np.isfinite(turn), turn, 0.0)) <= rail_v)
        hi = np.where(np.isfinite(turn), turn, rail_v / np.abs(coeffs[0]))
        for _ in range(60):  # grow the bracket where the polynomial has no turning point
            short = ~np.isfinite(turn) & (out(hi) < rail_v)
            if not short.any():
                break
            hi = np.where(short, 2 * hi, hi)
        lo = np.zeros(batch)
        for _ in range(100):
            mid = 0.5 * (lo + hi)
            below = out(mid) < rail_v
            lo, hi = np.where(below, mid, lo), np.where(below, hi, mid)
        levels.append(np.where(capped, turn, 0.5 * (lo + hi)))
    return -levels[1], levels[0]


@dataclass(frozen=True)
class Amplifier:
    """An amplifier stage: flat gain and a memoryless nonlinearity.

    Attributes
    ----------
    name : str
    figures : AmplifierFigures
    transfer : Polynomial or SoftLimitedPolynomial
    notes : tuple of str
        How the model was fitted, for the terminal and reports.
    """

    name: str
    figures: AmplifierFigures
    transfer: object
    notes: tuple[str, ...] = ()
    shape: SParameterTable | None = None
    ref_freq_hz: float = 0.0

    @property
    def gain_db(self) -> float:
        return self.figures.gain_db

    @property
    def data_range_hz(self) -> tuple[float, float] | None:
        return None if self.shape is None else self.shape.data_range_hz

    def response(self, freq_hz: np.ndarray) -> np.ndarray:
        """Small-signal gain: the ``gain`` figure, shaped by S21(f) / S21(f_ref) when a
        Touchstone file is given (the figures hold at ``f_ref``, the strongest carrier)."""
        flat = flat_response(self.figures.gain_db)(freq_hz)
        if self.shape is None:
            return flat
        return flat * self.shape(freq_hz) / self.shape(np.array(self.ref_freq_hz))

    @classmethod
    def from_figures(cls, name: str, figures: AmplifierFigures, r_ohm: float = 50.0) -> Amplifier:
        """Build the model from figures already checked for consistency."""
        transfer, notes = build_transfer(figures, r_ohm)
        return cls(name=name, figures=figures, transfer=transfer, notes=tuple(notes))

    @classmethod
    def from_fields(cls, fields: Fields, context: LoadContext) -> Amplifier:
        amp = cls.from_figures(fields.raw("name"), read_figures(fields), context.r_ohm)
        fields.raw("input_port")
        fields.raw("touchstone")
        if not fields.has("touchstone"):
            return amp
        from .filter import read_touchstone

        table, _, notes = read_touchstone(fields, context)
        lo, hi = table.data_range_hz
        if not lo <= context.ref_freq_hz <= hi:
            raise fields.error(
                "touchstone",
                f"{fields.raw('touchstone')!r} covers {lo:.6g} to {hi:.6g} Hz: expected it to include "
                f"the carrier at {context.ref_freq_hz:.6g} Hz, where the figures are referred",
            )
        return replace(amp, shape=table, ref_freq_hz=context.ref_freq_hz, notes=amp.notes + tuple(notes))


def _pair(fields: Fields, out_key: str, in_key: str, gain_db: float) -> float | None:
    """An intercept given output-referred, input-referred or both (must agree)."""
    out = fields.quantity(out_key, parse_power_dbm)
    inp = fields.quantity(in_key, parse_power_dbm)
    if out is not None and inp is not None and abs(out - (inp + gain_db)) > CONSISTENCY_DB:
        raise fields.error(
            in_key,
            f"{fields.raw(in_key)!r} disagrees with {out_key} {fields.raw(out_key)!r} and "
            f"gain {gain_db:+.2f} dB: expected {in_key} = {out_key} - gain = {out - gain_db:+.2f} dBm",
        )
    if out is not None:
        return out
    return None if inp is None else inp + gain_db


def read_figures(fields: Fields) -> AmplifierFigures:
    """Parse and cross-check the amplifier keys of one ``[[stage]]`` table."""
    gain = fields.quantity("gain", parse_gain_db, required=True)
    oip3 = _pair(fields, "oip3", "iip3", gain)
    oip2 = _pair(fields, "oip2", "iip2", gain)
    ohip: dict[int, float] = {}
    for n in range(2, MAX_HARMONIC + 1):
        from_ohip = fields.quantity(f"ohip{n}", parse_power_dbm)
        from_h = fields.quantity(f"h{n}", parse_dbc_at)
        if from_h is not None:
            dbc, at_dbm = from_h
            from_h = at_dbm + abs(dbc) / (n - 1)
        if from_ohip is not None and from_h is not None and abs(from_ohip - from_h) > CONSISTENCY_DB:
            raise fields.error(
                f"h{n}",
                f"{fields.raw(f'h{n}')!r} implies OHIP{n} {from_h:+.2f} dBm but ohip{n} is "
                f"{fields.raw(f'ohip{n}')!r}: expected figures that agree within {CONSISTENCY_DB} dB",
            )
        value = from_ohip if from_ohip is not None else from_h
        if value is not None:
            ohip[n] = value
    for n, ip in ((3, oip3), (2, oip2)):
        if ip is not None and n in ohip and abs(ohip[n] - (ip + _HIP_OFFSET_DB[n])) > CONSISTENCY_DB:
            key = f"h{n}" if fields.has(f"h{n}") else f"ohip{n}"
            raise fields.error(
                key,
                f"{fields.raw(key)!r} implies OHIP{n} {ohip[n]:+.2f} dBm, but oip{n} {ip:+.2f} dBm "
                f"implies OHIP{n} = OIP{n} + {_HIP_OFFSET_DB[n]:.2f} dB = "
                f"{ip + _HIP_OFFSET_DB[n]:+.2f} dBm: expected figures that agree",
            )
    p1db = fields.quantity("p1db", parse_power_dbm)
    psat = fields.quantity("psat", parse_power_dbm)
    if p1db is not None and psat is not None and p1db > psat:
        raise fields.error("p1db", f"{fields.raw('p1db')!r}: expected p1db <= psat {fields.raw('psat')!r}")
    cubic = fields.text("cubic", default="compressive", choices=("compressive", "expansive"))
    return AmplifierFigures(
        gain_db=gain,
        oip3_dbm=oip3,
        oip2_dbm=oip2,
        ohip_dbm=ohip,
        p1db_dbm=p1db,
        psat_dbm=psat,
        expansive=cubic == "expansive",
    )
