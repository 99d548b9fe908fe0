"""Filter networks: synthesized LC ladders (numpy ABCD, or scikit-rf) and Touchstone lookups.

Synthesized ladders
-------------------
Low-pass prototype g-values (Matthaei, Young and Jones 1964, section 4.05; Pozar,
Microwave Engineering, section on filter prototypes; from memory):

* Butterworth: ``g_k = 2 sin((2k - 1) pi / (2N))``, ``g_(N+1) = 1``;
* Chebyshev, ripple ``L_Ar`` dB: ``beta = ln(coth(L_Ar / 17.37))``,
  ``gamma = sinh(beta / (2N))``, ``a_k = sin((2k - 1) pi / (2N))``,
  ``b_k = gamma^2 + sin^2(k pi / N)``, ``g_1 = 2 a_1 / gamma``,
  ``g_k = 4 a_(k-1) a_k / (b_(k-1) g_(k-1))``; ``g_(N+1) = 1`` for odd N.  Even-order
  Chebyshev ladders need unequal terminations, so only odd orders are offered.

Scaling to the system impedance R0 and the edge frequency (same sources): low-pass
series ``L = g R0 / wc`` and shunt ``C = g / (R0 wc)``; high-pass series
``C = 1 / (g R0 wc)`` and shunt ``L = R0 / (g wc)``; band-pass with ``w0`` the
geometric centre and ``D = BW / f0``: series arm ``L = g R0 / (w0 D)`` with
``C = D / (g R0 w0)``, shunt arm ``L = D R0 / (g w0)`` in parallel with
``C = g / (D R0 w0)``.

Finite unloaded Q adds a series resistance ``w L / Q_L`` to every inductor and
``1 / (w C Q_C)`` to every capacitor (common practice, no source), so passband loss
is realistic.  The engine evaluates the ladder with numpy ABCD matrices
(:func:`ladder_s21`, vectorised over frequencies and Monte Carlo samples); the same
circuit built from ``skrf.media.DefinedGammaZ0`` elements (a series impedance and its
shunt form) and cascaded with ``**`` (:func:`ladder_network`) gives the full S-matrix
for linear sections and Touchstone export, and is held equal to it by the tests.
Both evaluate at the frequencies asked for: nothing is interpolated.

Stopband floor
--------------
A discrete LC filter leaks around its ladder (coupling between parts and across the
layout, parts beyond self-resonance, a shared ground return), so its rejection stops
growing at some floor, while the ideal ladder falls without limit (-150 dB at the
10th harmonic).  :func:`apply_floor` models the leakage as a second path of
amplitude ``a = 10^(floor/20)`` that adds **in phase** with the ladder::

    S21 = (1 - a) S21_ladder + a u,    u = S21_ladder / |S21_ladder|

so ``|S21| = a + (1 - a) |S21_ladder|``, with the ladder's phase.  Why this form: the
leakage's phase on a real board is unknown, and the in-phase sum is the least
rejection any phase gives, the choice one can sign (as ``combine = "worst"`` is for
products); it makes no null that a layout cannot be relied on to produce; it is
smooth in frequency (no kink for sweeps and bisections) and keeps the ladder's phase,
so the response stays a proper complex function.  The weight ``1 - a`` on the ladder
keeps ``|S21| = 1`` where the ladder passes everything, so the network stays
passive and the passband changes by ``20 log10(1 + a (1 - |S21|) / |S21|)``, under
0.004 dB for a floor of -60 dB anywhere within 3 dB of the passband; deep in the
stopband ``|S21| -> a``, the floor exactly, and ``|S21|`` is never below it.  In the
full S-matrix (:func:`apply_floor_s`) S21 and S12 get the same floor, and the
magnitudes of S11 and S22 shrink so that ``|S11|^2 + |S21|^2`` (and
``|S22|^2 + |S12|^2``) keep the ladder's value, phases unchanged: the leaked power
is taken from the reflected wave, the power the parts dissipate is the ladder's, a
lossless ladder stays lossless (S unitary: for these symmetric ladders S11 and S21
stay in quadrature) and the network stays passive.

Defaults (applied where a lineup file leaves the keys out, ``stages.filter``):
:data:`DEFAULT_Q_INDUCTOR`, :data:`DEFAULT_Q_CAPACITOR` and :data:`DEFAULT_FLOOR_DB`.
A :class:`Prototype` built in code is what it says: ``None`` is lossless, no floor.

Touchstone data
---------------
``S21`` between data points is interpolated piecewise-linearly in **dB against
frequency** and in **unwrapped phase against frequency** (``numpy.interp`` on cached
arrays).  Why: on a stopband skirt, where the rejection falls like ``log f``, a
chord in dB against f lies above the true curve, so the estimate errs towards less
rejection (conservative); interpolating Re/Im cuts the chord of the phase rotation
and loses dB in the passband, and scikit-rf's rational fit is wild on sparse data
(see the project's scikit-rf notes).  Outside the data nothing is known: see
:data:`BEYOND_POLICIES`.

Between two points the value lies between their dB values (a linear interpolant
never leaves the interval of its end values; any numerical analysis text), so it is
never below the lower neighbour, and no table value is below :data:`S_FLOOR_DB`.
Where a chord in dB is not conservative: across a null (a notch), where
``|S21|`` grows like ``|f - f0|`` and its dB curve lies above the chord, a coarse
grid reads more rejection beside the null than the part has; such files need
points close to the null.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Literal

import numpy as np

Family = Literal["butterworth", "chebyshev"]
Response = Literal["lowpass", "highpass", "bandpass"]
FAMILIES: tuple[str, ...] = ("butterworth", "chebyshev")
RESPONSES: tuple[str, ...] = ("lowpass", "highpass", "bandpass")
MAX_FILTER_ORDER = 15
# What a Touchstone-based response does outside its data: raise (default), hold the
# edge value, or assume no rejection (0 dB).
BEYOND_POLICIES: tuple[str, ...] = ("error", "hold", "no_rejection")
# Defaults for a synthesized filter whose lineup table leaves the keys out: unloaded
# Q of discrete UHF chip inductors and capacitors, and the level below which a discrete
# LC filter on a board does not reject (parasitic coupling, part self-resonance, ground
# return). Common practice for discrete LC filters, no source.
DEFAULT_Q_INDUCTOR = 100.0
DEFAULT_Q_CAPACITOR = 500.0
DEFAULT_FLOOR_DB = -80.0
# A floor within 20 dB of the passband would reshape the passband itself: not a filter.
# Below -300 dB it is no floor (the ratio range of the lineup files).
FLOOR_RANGE_DB = (-300.0, -20.0)
# The lowest |S| (dB) a data table holds.  Below it no instrument measures (vector
# network analysers reach some 120 to 150 dB of dynamic range; common practice, no
# source), so a lower value in a file is held here: the lookup then reads less
# rejection than the file states, never more, and a dB chord from it to a neighbour
# cannot start from a number that is an artefact (-400 dB from an exact zero put 2f1
# 27 dB under its limit beside a notch).  Exact zeros of the forward transmission are
# refused before this (stages.touchstone).
S_FLOOR_DB = -200.0
# Frequencies below this (Hz) are evaluated here: 0 Hz would make capacitors open.
_MIN_EVAL_HZ = 1.0
_OPEN_CONDUCTANCE_S = 1e-15


def butterworth_g(order: int) -> np.ndarray:
    """Butterworth low-pass prototype values ``g_1 .. g_(N+1)``."""
    k = np.arange(1, order + 1)
    return np.append(2.0 * np.sin((2 * k - 1) * np.pi / (2 * order)), 1.0)


def chebyshev_g(order: int, ripple_db: float) -> np.ndarray:
    """Chebyshev low-pass prototype values ``g_1 .. g_(N+1)`` (module docstring).

    Parameters
    ----------
    order : int
        Filter order N (number of reactive elements).
    ripple_db : float
        Passband ripple (dB, > 0).

    Returns
    -------
    ndarray, shape (N + 1,)
        Normalised element values; ``g_(N+1)`` is the load (1 for odd N).
    """
    # 17.37 in the handbook formula is 40 / ln(10); the exact value is used.
    beta = math.log(1.0 / math.tanh(ripple_db * math.log(10.0) / 40.0))
    gamma = math.sinh(beta / (2 * order))
    a = [math.sin((2 * k - 1) * math.pi / (2 * order)) for k in range(1, order + 1)]
    b = [gamma**2 + math.sin(k * math.pi / order) ** 2 for k in range(1, order + 1)]
    g = [2.0 * a[0] / gamma]
    for k in range(2, order + 1):
        g.append(4.0 * a[k - 2] * a[k - 1] / (b[k - 2] * g[-1]))
    g.append(1.0 if order % 2 else 1.0 / math.tanh(beta / 4.0) ** 2)
    return np.array(g)


@dataclass(frozen=True)
class Prototype:
    """A synthesized filter specification.

    Attributes
    ----------
    family, response : str
    order : int
    edge_hz : float
        Cutoff (low/high-pass: the -3 dB point for Butterworth, the ripple edge for
        Chebyshev); for band-pass the geometric centre frequency.
    bandwidth_hz : float or None
        Band-pass bandwidth between the edges (Hz).
    ripple_db : float or None
        Chebyshev passband ripple (dB).
    q_inductor, q_capacitor : float or None
        Unloaded Q of the parts; ``None`` for lossless.
    first : {"shunt", "series"}
        Whether the ladder starts with a shunt or a series arm.
    floor_db : float or None
        Stopband floor (dB, negative): ``|S21|`` never falls below it (module
        docstring); ``None`` for the ideal ladder.
    """

    family: Family
    response: Response
    order: int
    edge_hz: float
    bandwidth_hz: float | None = None
    ripple_db: float | None = None
    q_inductor: float | None = None
    q_capacitor: float | None = None
    first: Literal["shunt", "series"] = "shunt"
    floor_db: float | None = None

    def g_values(self) -> np.ndarray:
        if self.family == "butterworth":
            return butterworth_g(self.order)
        # The loader refuses a Chebyshev prototype without a ripple (stages/filter.py).
        assert self.ripple_db is not None
        return chebyshev_g(self.order, self.ripple_db)


@dataclass(frozen=True)
class Element:
    """One arm of a ladder: ``branch`` is "series" or "shunt"; values in H and F.

    ``l_h`` and ``c_f`` are both set for a band-pass resonator (series arm: L and C
    in series; shunt arm: L and C in parallel).
    """

    position: int
    branch: str
    g: float
    l_h: float | None
    c_f: float | None

    @property
    def part(self) -> str:
        if self.l_h is not None and self.c_f is not None:
            return "L+C in series" if self.branch == "series" else "L||C"
        return "L" if self.l_h is not None else "C"


def ladder_elements(proto: Prototype, r_ohm: float) -> list[Element]:
    """Element values of the ladder (module docstring for the formulas).

    Parameters
    ----------
    proto : Prototype
        The filter; edge or centre frequency in Hz.
    r_ohm : float
        Source and load termination (ohm).

    Returns
    -------
    list of Element
        The N arms in order from the source, L in H and C in F.
    """
    g = proto.g_values()[: proto.order]
    out = []
    for k, gk in enumerate(g, start=1):
        series = (k % 2 == 1) == (proto.first == "series")
        branch = "series" if series else "shunt"
        if proto.response == "lowpass":
            wc = 2 * math.pi * proto.edge_hz
            l_h, c_f = (gk * r_ohm / wc, None) if series else (None, gk / (r_ohm * wc))
        elif proto.response == "highpass":
            wc = 2 * math.pi * proto.edge_hz
            l_h, c_f = (None, 1.0 / (gk * r_ohm * wc)) if series else (r_ohm / (gk * wc), None)
        else:
            # The loader refuses a band-pass prototype without a bandwidth (stages/filter.py).
            assert proto.bandwidth_hz is not None
            w0 = 2 * math.pi * proto.edge_hz
            frac = proto.bandwidth_hz / proto.edge_hz
            if series:
                l_h, c_f = gk * r_ohm / (w0 * frac), frac / (gk * r_ohm * w0)
            else:
                l_h, c_f = frac * r_ohm / (gk * w0), gk / (frac * r_ohm * w0)
        out.append(Element(position=k, branch=branch, g=float(gk), l_h=l_h, c_f=c_f))
    return out


def parts_text(q_inductor: float | None, q_capacitor: float | None, floor_db: float | None) -> str:
    """Unloaded Qs and stopband floor in words: "Q_L 100, Q_C 500, stopband floor -80 dB".

    Parameters
    ----------
    q_inductor, q_capacitor : float or None
        Unloaded Q of the inductors and capacitors (dimensionless); ``None`` for lossless.
    floor_db : float or None
        Stopband floor (dB, negative); ``None`` for the ideal ladder.

    Returns
    -------
    str
        One line for reports.
    """

    def q(value) -> str:
        return "lossless" if value is None else f"{value:g}"

    floor = "none (ideal ladder)" if floor_db is None else f"{floor_db:g} dB"
    return f"Q_L {q(q_inductor)}, Q_C {q(q_capacitor)}, stopband floor {floor}"


def describe_parts(proto: Prototype) -> str:
    """:func:`parts_text` of a prototype."""
    return parts_text(proto.q_inductor, proto.q_capacitor, proto.floor_db)


def floor_amplitude(floor_db: float | None) -> float:
    """Leakage amplitude ``a = 10^(floor/20)`` (0 for no floor)."""
    return 0.0 if floor_db is None else 10.0 ** (floor_db / 20.0)


def max_rejection_db(floor_db: float | None) -> float:
    """The most rejection a filter with this floor gives anywhere (dB, >= 0; inf for none).

    ``|S21| >= a`` under :func:`apply_floor`, so at most ``-floor_db``.
    """
    return math.inf if floor_db is None else -float(floor_db)


def _floored(s: np.ndarray, a: float) -> np.ndarray:
    mag = np.abs(s)
    with np.errstate(invalid="ignore", divide="ignore"):
        unit = np.where(mag > 0, s / np.where(mag > 0, mag, 1.0), 1.0 + 0j)
    return unit * (a + (1.0 - a) * mag)


def apply_floor(s21: np.ndarray, floor_db: float | None) -> np.ndarray:
    """S21 with the stopband floor: ``(1 - a) S21 + a S21/|S21|`` (module docstring).

    Parameters
    ----------
    s21 : complex ndarray, any shape
        The ladder's transmission.
    floor_db : float or None
        Floor (dB); ``None`` returns ``s21`` unchanged.

    Returns
    -------
    complex ndarray, same shape as ``s21``
        The floored transmission, ``|S21| >= 10^(floor_db/20)``, phases kept.
    """
    if floor_db is None:
        return s21
    return _floored(np.asarray(s21, dtype=complex), floor_amplitude(floor_db))


def apply_floor_s(s: np.ndarray, floor_db: float | None) -> np.ndarray:
    """Full S-matrices ``(..., 2, 2)`` with the stopband floor (module docstring).

    S21 and S12 as :func:`apply_floor`; ``|S11|`` and ``|S22|`` reduced so that each
    column's power ``|S11|^2 + |S21|^2`` (``|S12|^2 + |S22|^2``) is the ladder's,
    phases kept, never below 0.

    Parameters
    ----------
    s : complex ndarray, shape (..., 2, 2)
        The ladder's S-matrices.
    floor_db : float or None
        Floor (dB, negative); ``None`` returns ``s`` unchanged.

    Returns
    -------
    complex ndarray, shape (..., 2, 2)
        The floored S-matrices.
    """
    if floor_db is None:
        return s
    a = floor_amplitude(floor_db)
    s = np.asarray(s, dtype=complex)
    out = np.empty_like(s)
    for through, refl in (((1, 0), (0, 0)), ((0, 1), (1, 1))):
        t = s[..., through[0], through[1]]
        r = s[..., refl[0], refl[1]]
        t_new = _floored(t, a)
        r_mag = np.abs(r)
        r_new_mag = np.sqrt(np.maximum(r_mag**2 - (np.abs(t_new) ** 2 - np.abs(t) ** 2), 0.0))
        with np.errstate(invalid="ignore", divide="ignore"):
            r_new = np.where(r_mag > 0, r * (r_new_mag / np.where(r_mag > 0, r_mag, 1.0)), 0j)
        out[..., through[0], through[1]] = t_new
        out[..., refl[0], refl[1]] = r_new
    return out


def _arm_impedance(
    branch: str,
    l_h: float | np.ndarray | None,
    c_f: float | np.ndarray | None,
    w: np.ndarray,
    q_inductor: float | np.ndarray | None,
    q_capacitor: float | np.ndarray | None,
) -> np.ndarray:
    """Impedance (ohm) of one arm at angular frequencies ``w`` (rad/s), with finite Q.

    Parameters
    ----------
    branch : {"series", "shunt"}
        How the arm's L and C combine when both are set (module docstring).
    l_h, c_f : float, ndarray or None
        The arm's inductance (H) and capacitance (F); arrays (B, 1) when Monte Carlo
        gives every sample its own parts (:func:`ladder_s21`).
    w : ndarray
        Angular frequencies (rad/s).
    q_inductor, q_capacitor : float, ndarray or None
        Unloaded Qs (arrays (B, 1) for Monte Carlo); ``None`` for lossless parts.
    """
    z_l: np.ndarray | None = None
    z_c: np.ndarray | None = None
    if l_h is not None:
        r = 0.0 if q_inductor is None else w * l_h / q_inductor
        z_l = r + 1j * w * l_h
    if c_f is not None:
        r = 0.0 if q_capacitor is None else 1.0 / (w * c_f * q_capacitor)
        z_c = r + 1.0 / (1j * w * c_f)
    if z_l is None:
        # Every arm of ladder_elements() has an L, a C or both.
        assert z_c is not None
        return z_c
    if z_c is None:
        return z_l
    if branch == "series":
        return z_l + z_c
    # A lossless parallel resonator is an open circuit at resonance, where the two
    # admittances cancel exactly; a conductance far below any real part (1e-15 S)
    # keeps the impedance finite there without changing the response elsewhere.
    return 1.0 / (1.0 / z_l + 1.0 / z_c + _OPEN_CONDUCTANCE_S)


def ladder_s21(
    proto: Prototype, freq_hz: np.ndarray, r_ohm: float, scale=None, q_scale=(1.0, 1.0), part_scale=None
) -> np.ndarray:
    """S21 of the ladder by ABCD matrices, for arrays of frequencies and of part values.

    The same circuit as :func:`ladder_network`, vectorised so that every Monte Carlo
    sample can have its own parts: ``scale`` (B,) moves the whole response in
    frequency (every L and C divided by it), ``q_scale`` multiplies the unloaded Qs,
    and ``part_scale`` (B, N) multiplies each element's L and C.  ``freq_hz`` is
    (B, P).  ABCD of a series arm Z is [[1, Z], [0, 1]], of a shunt arm [[1, 0],
    [1/Z, 1]], and ``S21 = 2 / (A + B/R0 + C R0 + D)`` between R0 terminations (Pozar,
    Microwave Engineering, ABCD parameters; from memory).  The prototype's stopband
    floor is applied last (:func:`apply_floor`).

    Parameters
    ----------
    proto : Prototype
        The filter.
    freq_hz : ndarray, shape (B, P) or (P,)
        Frequencies (Hz); values below a small positive minimum are raised to it.
    r_ohm : float
        Source and load termination R0 (ohm).
    scale : ndarray, shape (B,), optional
        Frequency scale of each sample (dimensionless); ``None`` for 1.
    q_scale : tuple of (float or ndarray (B,)), optional
        Multipliers of the inductors' and capacitors' unloaded Q.
    part_scale : ndarray, shape (B, N), optional
        Multiplier of each element's L and C; ``None`` for 1.

    Returns
    -------
    complex ndarray, shape (B, P) or (P,)
        S21 (linear, complex) between R0 terminations, broadcast over the inputs.
    """
    f = np.maximum(np.asarray(freq_hz, dtype=float), _MIN_EVAL_HZ)
    w = 2 * math.pi * f
    k = 1.0 if scale is None else np.reshape(scale, (-1, 1))
    q_l = None if proto.q_inductor is None else proto.q_inductor * np.reshape(q_scale[0], (-1, 1))
    q_c = None if proto.q_capacitor is None else proto.q_capacitor * np.reshape(q_scale[1], (-1, 1))
    a, b, c, d = (
        np.ones(f.shape, complex),
        np.zeros(f.shape, complex),
        np.zeros(f.shape, complex),
        np.ones(f.shape, complex),
    )
    for i, el in enumerate(ladder_elements(proto, r_ohm)):
        p = 1.0 if part_scale is None else np.reshape(np.asarray(part_scale)[:, i], (-1, 1))
        l_h = None if el.l_h is None else el.l_h * p / k
        c_f = None if el.c_f is None else el.c_f * p / k
        z = _arm_impedance(el.branch, l_h, c_f, w, q_l, q_c)
        if el.branch == "series":
            a, b, c, d = a, a * z + b, c, c * z + d
        else:
            y = 1.0 / z
            a, b, c, d = a + b * y, b, c + d * y, d
    return apply_floor(2.0 / (a + b / r_ohm + c * r_ohm + d), proto.floor_db)


def ladder_network(proto: Prototype, freq_hz: np.ndarray, r_ohm: float):
    """The ladder as a 2-port ``skrf.Network`` at ``freq_hz`` (strictly increasing, Hz).

    With the prototype's stopband floor applied to the S-matrix (:func:`apply_floor_s`).

    Parameters
    ----------
    proto : Prototype
        The filter.
    freq_hz : ndarray, shape (P,)
        Strictly increasing frequencies (Hz).
    r_ohm : float
        Port impedance and termination (ohm).
    """
    import skrf
    from skrf.media import DefinedGammaZ0

    freq_hz = np.maximum(np.asarray(freq_hz, dtype=float), _MIN_EVAL_HZ)
    frequency = skrf.Frequency.from_f(freq_hz, unit="Hz")
    med = DefinedGammaZ0(frequency=frequency, z0=r_ohm)
    w = 2 * math.pi * freq_hz
    net = None
    for el in ladder_elements(proto, r_ohm):
        arm = med.resistor(_arm_impedance(el.branch, el.l_h, el.c_f, w, proto.q_inductor, proto.q_capacitor))
        if el.branch == "shunt":
            arm = med.shunt(arm ** med.short())
        net = arm if net is None else net**arm
    # A prototype has order >= 1 (the loader's range), so the loop ran at least once.
    assert net is not None
    if proto.floor_db is not None:
        net.s = apply_floor_s(net.s, proto.floor_db)
    net.name = f"{proto.family} {proto.response} N={proto.order}"
    return net


@dataclass(frozen=True)
class SParameterTable:
    """Cached S21 of a 2-port on its data grid, with the lookup the engine uses.

    Attributes
    ----------
    freq_hz : ndarray (n,)
        Strictly increasing data frequencies.
    s21_db, s21_phase_rad : ndarray (n,)
        ``20 log10|S21|`` and unwrapped phase.
    beyond : str
        One of :data:`BEYOND_POLICIES`.
    """

    freq_hz: np.ndarray
    s21_db: np.ndarray
    s21_phase_rad: np.ndarray
    beyond: str = "error"

    @classmethod
    def from_s21(cls, freq_hz, s21, beyond: str = "error") -> SParameterTable:
        """The table of ``s21`` (complex, at ``freq_hz`` in Hz), held at :data:`S_FLOOR_DB` from below.

        An exact zero (a perfect match in S11, say) would make the dB table -inf; any
        value under the floor is held at it, so that the table never shows more
        rejection than the floor.

        Parameters
        ----------
        freq_hz : array_like, shape (n,)
            Strictly increasing data frequencies (Hz).
        s21 : array_like, complex, shape (n,)
            S21 (linear) at ``freq_hz``.
        beyond : str, optional
            What the lookup does outside the data range, one of :data:`BEYOND_POLICIES`.

        Returns
        -------
        SParameterTable
            ``|S21|`` in dB (held at :data:`S_FLOOR_DB` from below) and unwrapped phase (rad).
        """
        s21 = np.asarray(s21, dtype=complex)
        with np.errstate(divide="ignore"):
            db = np.maximum(20.0 * np.log10(np.abs(s21)), S_FLOOR_DB)
        return cls(np.asarray(freq_hz, dtype=float), db, np.unwrap(np.angle(s21)), beyond)

    @property
    def data_range_hz(self) -> tuple[float, float]:
        return float(self.freq_hz[0]), float(self.freq_hz[-1])

    def __call__(self, freq_hz) -> np.ndarray:
        """Complex S21 at ``freq_hz`` (>= 0, any shape), by the module's interpolation."""
        f = np.asarray(freq_hz, dtype=float)
        db = np.interp(f, self.freq_hz, self.s21_db)
        ph = np.interp(f, self.freq_hz, self.s21_phase_rad)
        h = 10.0 ** (db / 20.0) * np.exp(1j * ph)
        if self.beyond == "no_rejection":
            lo, hi = self.data_range_hz
            h = np.where((f < lo) | (f > hi), 1.0 + 0j, h)
        return h


@dataclass(frozen=True)
class SMatrixTable:
    """All four S-parameters of a file, interpolated like S21 (for linear sections)."""

    freq_hz: np.ndarray
    s: np.ndarray
    beyond: str

    def __call__(self, freq_hz) -> np.ndarray:
        f = np.asarray(freq_hz, dtype=float)
        out = np.empty((*f.shape, 2, 2), dtype=complex)
        for i in range(2):
            for j in range(2):
                out[..., i, j] = SParameterTable.from_s21(self.freq_hz, self.s[:, i, j], self.beyond)(f)
        if self.beyond == "no_rejection":
            outside = (f < self.freq_hz[0]) | (f > self.freq_hz[-1])
            out[outside] = np.array([[0, 1], [1, 0]], dtype=complex)
        return out
