"""Memoryless transfer models ``y = T(x)`` in peak volts across the system impedance.

Each model is a small frozen object with

* ``__call__(x)``: the instantaneous output voltage for input samples ``x`` (V),
  any array shape;
* ``degree``: the polynomial degree when the model *is* a polynomial (the engine then
  computes exactly with an alias-free grid), or ``None`` (the engine oversamples and
  tests convergence);
* ``gain``: the small-signal voltage gain ``dT/dx`` at 0, used for the "linear
  passage" in per-stage attribution;
* ``valid_peak_v``: (negative, positive) input peaks beyond which the model is an
  extrapolation (``-inf, inf`` where it holds everywhere).

Models
------
Polynomial
    ``y = a1 x + a2 x^2 + ... + aD x^D`` (Razavi, RF Microelectronics 2e, ch. 2).
Saturating
    The datasheet's small-signal terms in a monotone, bounded inner function, behind
    a smooth output rail with its own knee: gain and intercepts hold at small
    signal, Psat and P1dB are two separate parameters.
Clipper
    A hard limiter ``clip(g x, v_lo, v_hi)``; with ``v_lo = 0`` and ``v_hi = inf``
    it is a half-wave rectifier.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass

import numpy as np

# Instantaneous gain may drift this far from the small-signal gain before the
# polynomial is treated as extrapolated (1 dB, the usual compression criterion).
_VALID_GAIN_DEVIATION_DB = 1.0


def per_sample(value, x):
    """Broadcast a parameter that is a scalar or one value per batch element (B,)
    against samples ``x`` of shape (B, ...).

    Parameters
    ----------
    value : float or ndarray, shape (B,)
        The parameter (in its own unit, e.g. V^(1-n) for a polynomial coefficient).
    x : ndarray, shape (B, ...)
        Samples the parameter is applied to (V).

    Returns
    -------
    float or ndarray
        ``value`` unchanged if scalar, else reshaped to ``(B, 1, ...)`` to broadcast with ``x``.
    """
    if np.ndim(value) == 0:
        return value
    return np.reshape(value, (-1,) + (1,) * (np.ndim(x) - 1))


def _take(value, rows):
    return value if np.ndim(value) == 0 else np.asarray(value)[rows]


@dataclass(frozen=True)
class Polynomial:
    """``y = sum_n a_n x^n`` for n = 1 .. D, in volts.

    Parameters
    ----------
    coeffs : tuple of float, or of ndarray (B,)
        ``(a1, a2, ..., aD)``; ``a_n`` in V^(1-n).  Arrays give every batch element its
        own coefficients (Monte Carlo samples); the samples passed in then lead with
        that batch axis.
    """

    coeffs: tuple

    @property
    def degree(self) -> int:
        nz = [n for n, a in enumerate(self.coeffs, start=1) if np.any(np.asarray(a) != 0.0)]
        return max(nz) if nz else 1

    @property
    def gain(self):
        return self.coeffs[0]

    @property
    def batched(self) -> bool:
        return any(np.ndim(a) for a in self.coeffs)

    def take(self, rows) -> Polynomial:
        """The model of the batch elements ``rows`` (itself when not batched)."""
        return Polynomial(tuple(_take(a, rows) for a in self.coeffs)) if self.batched else self

    def __call__(self, x):
        x = np.asarray(x)
        y = np.zeros_like(x, dtype=float)
        for a in reversed(self.coeffs):
            y = (y + per_sample(a, x)) * x
        return y

    def turning_points(self) -> tuple[float, float]:
        """Nearest input voltages on each side of 0 where ``dy/dx = 0``.

        Returns ``(x_neg, x_pos)`` with ``-inf`` / ``inf`` where there is none.
        """
        if self.degree == 1:
            return -math.inf, math.inf
        # np.roots wants the highest power first: derivative coefficients n a_n.
        deriv = [n * a for n, a in enumerate(self.coeffs, start=1)][: self.degree]
        roots = np.roots(deriv[::-1])
        real = roots[np.abs(roots.imag) <= 1e-9 * np.maximum(1.0, np.abs(roots))].real
        pos = real[real > 0]
        neg = real[real < 0]
        return (float(neg.max()) if neg.size else -math.inf, float(pos.min()) if pos.size else math.inf)

    @functools.cached_property
    def valid_peak_v(self) -> tuple[float, float]:
        """Input peaks (V) where the instantaneous gain ``y/x`` leaves a1 by 1 dB.

        Not computed for batched (sampled) coefficients: ``(-inf, inf)``.
        """
        if self.degree == 1 or self.batched:
            return -math.inf, math.inf
        lo, hi = self.turning_points()
        # Search each side on a log grid up to the turning point (or far out).
        out = []
        for side, stop in ((-1.0, -lo), (1.0, hi)):
            reach = stop if math.isfinite(stop) else self._scale_v() * 1e3
            grid = np.geomspace(reach * 1e-6, reach, 4000) * side
            with np.errstate(divide="ignore", invalid="ignore"):
                dev = 20.0 * np.log10(np.abs(self(grid) / (self.gain * grid)))
            bad = np.nonzero(np.abs(dev) > _VALID_GAIN_DEVIATION_DB)[0]
            out.append(abs(grid[bad[0]]) if bad.size else reach)
        return -out[0], out[1]

    def _scale_v(self) -> float:
        """Voltage at which the largest nonlinear term equals the linear one."""
        a1 = abs(self.gain)
        scales = [
            (a1 / abs(a)) ** (1.0 / (n - 1)) for n, a in enumerate(self.coeffs, start=1) if n > 1 and a != 0.0
        ]
        return min(scales) if scales else math.inf


@dataclass(frozen=True)
class Saturating:
    """A saturating amplifier model whose small-signal terms are the datasheet's.

    ``y = R(u(x)) + e(x)`` in volts, with

    * the odd inner function ``u(x) = a1 x (1 + gamma x^2 / (2q))^(-q) + a3_exp x^3``:
      its Taylor series begins ``a1 x + a3 x^3``, so gain and IP3 hold at small signal
      (``gamma = -2 a3 / a1`` for a compressive cubic, 0 otherwise; ``a3_exp`` is the
      cubic when it is expansive).  Unlike the bare polynomial it never turns over: it
      is monotone for ``0 < q <= 1/2`` (``q = 1/2`` saturates at ``a1 / sqrt(gamma)``,
      a smaller ``q`` compresses later and grows without bound, so that the rail alone
      saturates it);
    * the output rail ``R(v) = v / (1 + |v / V_r|^(2s))^(1/(2s))`` (the Rapp form,
      Rapp 1991, used here on instantaneous voltage; from memory), whose expansion
      ``v - |v|^(2s+1) / (2s V_r^(2s))`` leaves every term below degree ``2s + 1``
      alone.  ``V_r`` sets the saturated power and ``s`` the sharpness of the knee,
      so Psat and P1dB are two separate parameters;
    * the even part ``e(x) = sum_n a_n x^n / (1 + gamma_even x^2)^((n - p_n)/2)`` with
      ``p_2 = 1`` and ``p_n = n - 1`` above: ``a_n x^n`` at small signal (IP2 holds),
      growing like ``|x|^p_n`` under hard drive.  It sits after the rail, which would
      otherwise clip the asymmetry away and null the even harmonics near saturation;
      and its asymptote is chosen so that the sign of each even harmonic never
      changes with drive (the Fourier coefficients of ``|cos|^p`` at ``n`` have the sign
      of ``1 / Gamma(p/2 - n/2 + 1)``; Gradshteyn and Ryzhik 3.631, from memory): even
      harmonics rise monotonically, then keep rising slowly in saturation (the
      conservative side).

    Hard drive turns ``u`` into a two-level wave at ``u(+inf)`` and ``u(-inf)``, so the
    saturated fundamental is ``(2/pi) (R(u(+inf)) - R(u(-inf)))`` (Fourier series of
    a square wave; standard tables) and the odd harmonics tend to ``1/n`` of it.

    Parameters
    ----------
    a1 : float or ndarray (B,)
        Small-signal voltage gain.
    gamma : float or ndarray (B,)
        Inner saturation (1/V^2); 0 for none.
    a3_exp : float or ndarray (B,)
        Expansive cubic coefficient (V^-2), 0 when compressive.
    even : tuple of (int, float or ndarray)
        Even orders ``n`` and their small-signal coefficients ``a_n`` (V^(1-n)).
    gamma_even : float or ndarray (B,)
        Saturation of the even terms (1/V^2).
    rail_v : float or ndarray (B,)
        ``V_r`` (V, peak); ``inf`` for no rail.
    smoothness : float
        ``s`` (> 1 keeps the cubic term exact).
    inner_exponent : float
        ``q`` in (0, 1/2].
    """

    a1: float | np.ndarray
    gamma: float | np.ndarray = 0.0
    a3_exp: float | np.ndarray = 0.0
    even: tuple[tuple[int, float | np.ndarray], ...] = ()
    gamma_even: float | np.ndarray = 0.0
    rail_v: float | np.ndarray = math.inf
    smoothness: float = 2.0
    inner_exponent: float = 0.5

    degree = None

    @property
    def gain(self):
        return self.a1

    @property
    def batched(self) -> bool:
        values = [self.a1, self.gamma, self.a3_exp, self.gamma_even, self.rail_v] + [a for _, a in self.even]
        return any(np.ndim(v) for v in values)

    def take(self, rows) -> Saturating:
        """The model of the batch elements ``rows`` (itself when not batched)."""
        if not self.batched:
            return self
        return Saturating(
            a1=_take(self.a1, rows),
            gamma=_take(self.gamma, rows),
            a3_exp=_take(self.a3_exp, rows),
            even=tuple((n, _take(a, rows)) for n, a in self.even),
            gamma_even=_take(self.gamma_even, rows),
            rail_v=_take(self.rail_v, rows),
            smoothness=self.smoothness,
            inner_exponent=self.inner_exponent,
        )

    @property
    def valid_peak_v(self) -> tuple[float, float]:
        return -math.inf, math.inf

    def inner(self, x):
        """``u(x)`` (V): the odd small-signal terms, made monotone."""
        x = np.asarray(x, dtype=float)
        x2 = x * x
        q = self.inner_exponent
        g = per_sample(self.gamma, x) * x2
        if q == 0.5:
            u = per_sample(self.a1, x) * x / np.sqrt(1.0 + g)
        else:
            u = per_sample(self.a1, x) * x * np.exp(-q * np.log1p(g / (2.0 * q)))
        if np.any(np.asarray(self.a3_exp) != 0):
            u = u + per_sample(self.a3_exp, x) * x2 * x
        return u

    def even_part(self, x):
        """``e(x)`` (V): the even small-signal terms with a sign-keeping asymptote."""
        x = np.asarray(x, dtype=float)
        x2 = x * x
        out = np.zeros_like(x)
        if not self.even:
            return out
        log_denom = np.log1p(per_sample(self.gamma_even, x) * x2)
        for n, a in self.even:
            p = 1 if n == 2 else n - 1
            out = out + per_sample(a, x) * x2 ** (n // 2) * np.exp(-0.5 * (n - p) * log_denom)
        return out

    def rail(self, v):
        """``R(v)`` (V): the output rail."""
        if np.all(np.isinf(np.asarray(self.rail_v))):
            return v
        ratio = np.abs(v) / per_sample(self.rail_v, v)
        two_s = 2.0 * self.smoothness
        if two_s == int(two_s) and 2 <= two_s <= 16:
            # An integer power and one log1p/exp pair, in place (the fitted knees are whole
            # numbers); far beyond the rail (ratio > 1e30, where the power would overflow)
            # the output is the rail itself, v / ratio, to double precision.
            n = int(two_s)
            power = np.array(ratio * ratio, dtype=float)
            if n & (n - 1) == 0:  # a power of two: squarings only
                for _ in range(n.bit_length() - 2):
                    power *= power
            else:
                power = np.array(ratio**n, dtype=float)
            with np.errstate(over="ignore", divide="ignore", invalid="ignore"):
                np.log1p(power, out=power)
                power *= -1.0 / two_s
                np.exp(power, out=power)
                power *= v
                if np.max(ratio, initial=0.0) > 1e30:
                    power = np.where(ratio > 1e30, v / ratio, power)
            return power if power.ndim else power[()]
        # exp/log instead of a float power of a signed array (numpy's fast path);
        # logaddexp(0, t) = log(1 + e^t) without overflow, and ratio = 0 gives exactly v.
        with np.errstate(divide="ignore"):
            return v * np.exp(-np.logaddexp(0.0, two_s * np.log(ratio)) / two_s)

    def saturated_levels_v(self) -> tuple[np.ndarray, np.ndarray]:
        """``(R(u(-inf)), R(u(+inf)))`` (V): the two levels of the odd part under hard
        drive (the even part adds no fundamental)."""
        a1 = np.asarray(self.a1, dtype=float)
        gamma = np.asarray(self.gamma, dtype=float)
        with np.errstate(divide="ignore"):
            odd = np.where(gamma > 0, a1 / np.sqrt(np.where(gamma > 0, gamma, 1.0)), np.inf)
        odd = np.where((np.asarray(self.a3_exp) != 0) | (self.inner_exponent < 0.5), np.inf, odd)
        rail = np.asarray(self.rail_v, dtype=float)
        hi = np.where(np.isinf(odd), rail, self.rail(np.where(np.isinf(odd), 0.0, odd)))
        return -hi, hi

    def __call__(self, x):
        x = np.asarray(x, dtype=float)
        simple = (
            self.inner_exponent == 0.5
            and not np.any(np.asarray(self.a3_exp) != 0)
            and len(self.even) == 1
            and self.even[0][0] == 2
            and np.array_equal(np.asarray(self.gamma_even), np.asarray(self.gamma))
        )
        if not simple:
            return self.rail(self.inner(x)) + self.even_part(x)
        # The common fit (one even term, the inner and even parts sharing their knee): the
        # same sums as inner() and even_part(), with x^2 and sqrt(1 + gamma x^2) shared.
        x2 = x * x
        root = per_sample(self.gamma, x) * x2
        root += 1.0
        np.sqrt(root, out=root)
        u = per_sample(self.a1, x) * x
        u /= root
        x2 *= per_sample(self.even[0][1], x)
        x2 /= root
        out = self.rail(u)
        out += x2
        return out


@dataclass(frozen=True)
class Clipper:
    """Hard limiter ``y = clip(gain x, v_lo, v_hi)`` (V); unequal rails allowed.

    ``Clipper(1.0, 0.0, inf)`` is an ideal half-wave rectifier.
    """

    gain: float
    v_lo: float
    v_hi: float

    degree = None

    @property
    def valid_peak_v(self) -> tuple[float, float]:
        return -math.inf, math.inf

    def __call__(self, x):
        return np.clip(self.gain * np.asarray(x, dtype=float), self.v_lo, self.v_hi)
