"""Brute-force time-domain reference for the spectral engine (a test oracle).

Written independently of :mod:`spurplan`: it samples the physical waveform on a
common time grid, applies each stage sample by sample, and reads every product from
one long FFT.  Nothing here knows about mixing vectors.

* The carriers ``x(t) = sum_k A_k cos(2 pi f_k t + phi_k)`` must sit exactly on FFT
  bins: ``f_k = n_k df`` with integer ``n_k``.  The record is one period ``1/df``
  sampled at ``fs = L df``, so each tone completes a whole number of cycles and there
  is no leakage and no window (DFT of a periodic sequence; any signal-processing
  text, e.g. Oppenheim and Schafer, Discrete-Time Signal Processing, from memory).
* A stage is either a memoryless transfer ``T(x)`` (peak volts in, peak volts out)
  or a flat linear gain given as a number in dB.
* After every stage the DC bin is zeroed (the stages are AC-coupled): subtracting
  the record mean is exactly that, since the DC bin of the DFT is the sum of the
  samples.
* Peak amplitude of a real tone on bin ``b`` (``0 < b < L/2``) is ``2 |X_b| / L``
  with ``X = rfft(x)``; power is ``A^2 / (2 R)`` (common practice, no source).

Aliasing: sampling is exact when every component of every intermediate signal lies
below ``fs / 2``.  For polynomial stages of degrees ``D_1 .. D_S`` the highest
component is ``(D_1 ... D_S) max(n_k)`` bins, so ``L > 2 D_1 ... D_S max(n_k)`` makes
the reference exact (:func:`exact_length`).  Other transfers have components of
every order; the caller must oversample until the compared bins stop changing.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class Tone:
    """One carrier: frequency (Hz), power (dBm), phase (rad)."""

    freq_hz: float
    power_dbm: float
    phase_rad: float = 0.0


@dataclass(frozen=True)
class Spectrum:
    """One-sided spectrum of the output record.

    Attributes
    ----------
    df_hz : float
        Bin spacing (Hz).
    level_dbm : ndarray
        Power (dBm) on bins 0 .. L/2 - 1 (bin 0 is -inf after DC removal).
    """

    df_hz: float
    level_dbm: np.ndarray

    def bin_of(self, freq_hz: float) -> int:
        """The bin a frequency sits on (it must sit exactly on one)."""
        b = round(freq_hz / self.df_hz)
        if abs(b * self.df_hz - freq_hz) > 1e-9 * max(freq_hz, self.df_hz):
            raise ValueError(f"{freq_hz} Hz is not on the {self.df_hz} Hz grid")
        if not 0 <= b < len(self.level_dbm):
            raise ValueError(f"{freq_hz} Hz is beyond the record's Nyquist frequency")
        return b

    def at(self, freq_hz: float) -> float:
        """Level (dBm) at ``freq_hz``."""
        return float(self.level_dbm[self.bin_of(freq_hz)])


Stage = Callable[[np.ndarray], np.ndarray] | float


def dbm_to_vpeak(level_dbm: float, r_ohm: float) -> float:
    """Peak volts of a sinusoid of this power: ``V = sqrt(2 R P)`` (common practice, no source)."""
    return math.sqrt(2.0 * r_ohm * 10.0 ** ((level_dbm - 30.0) / 10.0))


def exact_length(bins: Sequence[int], total_degree: int) -> int:
    """Smallest even record length that holds every polynomial product below Nyquist."""
    top = total_degree * max(bins)
    return 2 * top + 2


def simulate(
    tones: Sequence[Tone], stages: Sequence[Stage], *, df_hz: float, length: int, r_ohm: float = 50.0
) -> Spectrum:
    """Run the carriers through the stages on a record of ``length`` samples.

    Parameters
    ----------
    tones : sequence of Tone
        Each ``freq_hz`` must be an integer multiple of ``df_hz``.
    stages : sequence
        Each a callable ``T(x)`` on peak-volt samples, a number (a flat gain in dB), or
        a :class:`Linear` response applied bin by bin.
    df_hz : float
        Bin spacing: the record is ``1 / df_hz`` long.
    length : int
        Samples in the record (even); the sample rate is ``length * df_hz``.
    r_ohm : float
        System impedance.
    """
    if length % 2:
        raise ValueError("use an even record length")
    j = np.arange(length, dtype=np.int64)
    x = np.zeros(length)
    for tone in tones:
        n = round(tone.freq_hz / df_hz)
        if n < 1 or abs(n * df_hz - tone.freq_hz) > 1e-9 * tone.freq_hz:
            raise ValueError(f"tone {tone.freq_hz} Hz is not on the {df_hz} Hz grid")
        if 2 * n >= length:
            raise ValueError(f"tone {tone.freq_hz} Hz is beyond Nyquist for length {length}")
        # Reduce the phase index modulo the record in integers: cos of a small,
        # exact argument instead of a large one.
        theta = 2.0 * np.pi * ((n * j) % length) / length
        x += dbm_to_vpeak(tone.power_dbm, r_ohm) * np.cos(theta + tone.phase_rad)
    for stage in stages:
        x = _apply(stage, x, df_hz)
        x = x - x.mean()
    spec = np.fft.rfft(x)[: length // 2]
    amp = 2.0 * np.abs(spec) / length
    with np.errstate(divide="ignore"):
        level = 10.0 * np.log10(amp**2 / (2.0 * r_ohm)) + 30.0
    return Spectrum(df_hz=df_hz, level_dbm=level)


@dataclass(frozen=True)
class Linear:
    """A linear stage given by its complex response ``h(f_hz)`` at f >= 0.

    Applied exactly in the frequency domain of the record: every bin k is
    multiplied by ``h(k df)`` (the record is periodic, so this is the steady state).
    """

    h: Callable[[np.ndarray], np.ndarray]


@dataclass(frozen=True)
class Mixing:
    """A frequency converter: ``y = Re sum c exp(j m w_LO t) w^n`` on the record.

    ``z`` is the analytic signal of the input (positive-frequency bins doubled, the
    negative ones removed: exact on a periodic record); ``conj(w)^|n|`` for n < 0.
    ``terms`` are ``(m, n, c)``; the LO sits on bin ``lo_bin`` with phase 0.

    ``w = z`` without ``knee_v``; with it, every sample of ``z`` is scaled by the
    Rapp-form envelope limiter ``(1 + (|z| / knee_v)^(2 s))^(-1 / (2 s))`` (Rapp 1991;
    from memory), ``s = smoothness``.  The limited envelope has products of every
    order: the record must be long enough for the compared bins to stop changing.
    """

    terms: tuple
    lo_bin: int
    knee_v: float | None = None
    smoothness: int = 1


@dataclass(frozen=True)
class Generating:
    """A nonlinear stage whose generated part is weighted by frequency, bin by bin.

    ``Y(f) = H(f) X(f) + W(f) (T[x](f) - a1 X(f))``: what passes through sees ``H``
    (default the flat ``a1``), what the stage generates (its output beyond the linear
    passage) sees ``W``.  Exact on a periodic record when ``T(x)`` has no component
    above Nyquist.
    """

    transfer: Callable[[np.ndarray], np.ndarray]
    gain_v: float
    weight: Callable[[np.ndarray], np.ndarray]
    h: Callable[[np.ndarray], np.ndarray] | None = None


def zone_weight(weights_db: dict, ref_hz: float) -> Callable[[np.ndarray], np.ndarray]:
    """``W(f)``: ``weights_db[n]`` dB at ``n ref_hz``, 0 dB at every other multiple of
    ``ref_hz`` (and at 0 Hz), linear in dB against frequency between them, 0 dB above
    the highest multiple that carries a weight."""
    top = max(weights_db, default=1) + 1
    knots_hz = ref_hz * np.arange(top + 1)
    knots_db = np.array([weights_db.get(n, 0.0) for n in range(top + 1)], dtype=float)

    def weight(f_hz: np.ndarray) -> np.ndarray:
        return 10.0 ** (np.interp(f_hz, knots_hz, knots_db, right=0.0) / 20.0)

    return weight


def _analytic(x: np.ndarray) -> np.ndarray:
    spec = np.fft.fft(x)
    n = len(x)
    h = np.zeros(n)
    h[0] = 1.0
    h[1 : n // 2] = 2.0
    h[n // 2] = 1.0
    return np.fft.ifft(spec * h)


def _apply(stage, x: np.ndarray, df_hz: float) -> np.ndarray:
    """One stage on the samples: a transfer callable, a flat gain in dB, Linear or Mixing."""
    if isinstance(stage, Mixing):
        n = len(x)
        z = _analytic(x)
        if stage.knee_v is not None:
            s2 = 2 * stage.smoothness
            z = z / (1.0 + (np.abs(z) / stage.knee_v) ** s2) ** (1.0 / s2)
        lo = np.exp(2j * np.pi * ((stage.lo_bin * np.arange(n, dtype=np.int64)) % n) / n)
        y = np.zeros(n)
        for m, k, c in stage.terms:
            base = np.ones(n) if k == 0 else (z**k if k > 0 else np.conj(z) ** (-k))
            y += np.real(c * lo**m * base)
        return y
    if isinstance(stage, Generating):
        spec_x = np.fft.rfft(x)
        spec_t = np.fft.rfft(np.asarray(stage.transfer(x), dtype=float))
        f = np.arange(len(spec_x)) * df_hz
        h = stage.gain_v if stage.h is None else stage.h(f)
        y = h * spec_x + stage.weight(f) * (spec_t - stage.gain_v * spec_x)
        return np.fft.irfft(y, n=len(x))
    if isinstance(stage, Linear):
        spec = np.fft.rfft(x)
        f = np.arange(len(spec)) * df_hz
        f[0] = df_hz  # DC is removed after every stage anyway
        return np.fft.irfft(spec * stage.h(f), n=len(x))
    if callable(stage):
        return np.asarray(stage(x), dtype=float)
    return x * 10.0 ** (float(stage) / 20.0)
