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
    ``y = a1 x + a2 x^2 + ... + aD x^D`` (design notes section 4; Razavi, RF
    Microelectronics 2e, ch. 2).
SoftLimitedPolynomial
    The polynomial fed through a smooth input limiter that stops at the polynomial's
    turning points or at the input that reaches the saturated output rail.  The
    limiter is ``c(x) = x / (1 + (x / x_c)^(2s))^(1/(2s))`` (the Rapp form, used
    here on instantaneous voltage), whose expansion ``x - x^(2s+1) / (2s x_c^(2s))``
    leaves every coefficient up to degree ``2s`` of ``p(c(x))`` equal to the
    polynomial's: the datasheet intercepts hold at small signal, while ``p(c(x))``
    is monotone and bounded.
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
    against samples ``x`` of shape (B, ...)."""
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
class SoftLimitedPolynomial:
    """Polynomial behind a smooth input limiter: saturates, keeps small-signal terms.

    Parameters
    ----------
    poly : Polynomial
        Small-signal model; its coefficients up to degree ``2 * smoothness`` are kept
        exactly in the expansion of the composite.
    clip_neg_v, clip_pos_v : float
        Input limiting levels (V): ``clip_neg_v < 0 < clip_pos_v``.
    smoothness : int
        ``s`` in the limiter ``x / (1 + (x/x_c)^(2s))^(1/(2s))``; larger is a harder
        knee.
    """

    poly: Polynomial
    clip_neg_v: float
    clip_pos_v: float
    smoothness: int

    degree = None

    @property
    def gain(self):
        return self.poly.gain

    @property
    def batched(self) -> bool:
        return self.poly.batched or bool(np.ndim(self.clip_neg_v) or np.ndim(self.clip_pos_v))

    def take(self, rows) -> SoftLimitedPolynomial:
        if not self.batched:
            return self
        return SoftLimitedPolynomial(
            self.poly.take(rows), _take(self.clip_neg_v, rows), _take(self.clip_pos_v, rows), self.smoothness
        )

    @property
    def valid_peak_v(self) -> tuple[float, float]:
        return -math.inf, math.inf

    def limit_input(self, x):
        """The smooth input limiter ``c(x)``, applied with each side's own level."""
        x = np.asarray(x, dtype=float)
        xc = np.where(x >= 0.0, per_sample(self.clip_pos_v, x), -per_sample(self.clip_neg_v, x))
        two_s = 2 * self.smoothness
        return x / (1.0 + (x / xc) ** two_s) ** (1.0 / two_s)

    def __call__(self, x):
        return self.poly(self.limit_input(x))


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
