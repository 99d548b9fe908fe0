"""Modulated carriers as dense multisines: many tones on a fine raster inside the bandwidth.

A memoryless stage driven by a modulated carrier makes products of every tone of its
spectrum with every other: spectral regrowth around the carrier and harmonic zones
wider than the carrier.  spurplan represents a carrier with a ``modulation`` as a
*multisine*: ``n`` tones on a raster ``delta`` inside its bandwidth, with amplitudes and
phases that give the signal the statistics the modulation describes, and runs the same
engine on them (the tones share the raster, so they cost the engine two axes,
:mod:`spurplan.model.tone_lattice`).  Several *realizations* (phase sets from a seed) are
averaged into a power spectral density.

Kinds
-----
``gaussian``
    Noise-like envelope (OFDM, multi-carrier): equal amplitudes, independent uniform
    phases.  For many tones the envelope is complex Gaussian (central limit theorem), whose
    moments are ``E|z|^(2n) = n! sigma^(2n)`` (from memory): the n-th zone carries
    ``10 log10(n!)`` dB more power than a CW carrier of equal mean power.
``constant-envelope``
    FM, FSK, GMSK-like: a carrier frequency-modulated by a sine whose Carson bandwidth
    ``2 (beta + 1) f_m`` is the stated bandwidth (Carson 1922, from memory); its lines are
    ``J_k(beta)`` (Jacobi-Anger expansion; scipy.special.jv).  The envelope is constant, so
    a memoryless stage treats it as CW; the spectrum's shape is a sine-FM's, not a given
    modem's.
``par``
    A stated peak-to-average power ratio (peak envelope power over mean power, dB): equal
    amplitudes, phases set so that the envelope's peak meets it (random phases pulled
    towards alignment to raise it, clipped and refiltered to lower it).
``iq``
    A record of complex baseband samples at a stated sample rate, taken as one period:
    its DFT bins are the tones (exactly as recorded, one realization).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

MODULATION_KINDS = ("gaussian", "constant-envelope", "par", "iq")
DEFAULT_TONES = 64
DEFAULT_REALIZATIONS = 16
DEFAULT_SEED = 1
MAX_TONES = 1024
MAX_REALIZATIONS = 256
# A recorded bin this far below the strongest (power, -120 dB) is no tone.
IQ_FLOOR_DB = -120.0
# Envelope samples per tone when the peak-to-average ratio is measured or shaped.
_OVERSAMPLE = 16
# The stated peak-to-average ratio is met to this (dB).
PAR_TOLERANCE_DB = 0.1


@dataclass(frozen=True)
class Modulation:
    """How a carrier is modulated.

    Attributes
    ----------
    kind : str
        One of :data:`MODULATION_KINDS`.
    tones : int
        Tones of the multisine (``iq``: the record's significant DFT bins, set on loading).
    realizations : int
        Phase sets averaged (``constant-envelope`` and ``iq``: 1).
    seed : int
        Seed of the phases.
    par_db : float or None
        ``par``: the peak-to-average power ratio (dB).
    iq_bins : ndarray of int or None
        ``iq``: DFT bin of each tone (signed, from the record's centre).
    iq_phasors : ndarray, complex, or None
        ``iq``: each tone's complex amplitude, normalised to unit mean power.
    iq_rate_hz : float or None
        ``iq``: the record's sample rate (Hz).
    iq_length : int or None
        ``iq``: samples in the record.
    source : str or None
        ``iq``: the file the record came from.
    """

    kind: str
    tones: int = DEFAULT_TONES
    realizations: int = DEFAULT_REALIZATIONS
    seed: int = DEFAULT_SEED
    par_db: float | None = None
    iq_bins: np.ndarray | None = field(default=None, compare=False, repr=False)
    iq_phasors: np.ndarray | None = field(default=None, compare=False, repr=False)
    iq_rate_hz: float | None = None
    iq_length: int | None = None
    source: str | None = None

    def describe(self) -> str:
        """One line for notes and reports: what the multisine is."""
        if self.kind == "iq" and self.iq_rate_hz and self.iq_length:
            return f"I/Q record {self.source or ''}: {self.tones} DFT bins of {self.iq_rate_hz / self.iq_length:g} Hz"
        what = {"gaussian": "noise-like", "constant-envelope": "constant envelope", "par": "stated PAR"}[
            self.kind
        ]
        par = f" {self.par_db:g} dB" if self.par_db is not None else ""
        return f"{what}{par}: {self.tones} tones x {self.realizations} realizations (seed {self.seed})"


@dataclass(frozen=True)
class Multisine:
    """A carrier's tones: offsets on a raster and complex amplitudes per realization.

    Attributes
    ----------
    steps : ndarray of int, (N,)
        Each tone's offset from the carrier's centre in raster steps (``offset = steps *
        step_hz``; with an even count of tones the centre lies half a step off, see
        ``centre_offset_hz``).
    step_hz : float
        The raster (Hz).
    centre_offset_hz : float
        Where step 0 lies relative to the carrier's centre frequency (Hz).
    phasors : ndarray, complex, (R, N)
        Complex amplitude of every tone in every realization, with ``sum |u|^2 = 1`` in
        each: times the carrier's peak voltage, the tones carry its mean power.
    """

    steps: np.ndarray
    step_hz: float
    centre_offset_hz: float
    phasors: np.ndarray

    @property
    def realizations(self) -> int:
        return self.phasors.shape[0]

    def offsets_hz(self) -> np.ndarray:
        """Tone offsets from the carrier's centre (Hz), (N,)."""
        return self.centre_offset_hz + self.steps * self.step_hz

    def envelope_par_db(self) -> np.ndarray:
        """Peak envelope power over mean power of each realization (dB), (R,)."""
        return _par_db(self.steps, self.phasors)


def multisine(modulation: Modulation, bandwidth_hz: float) -> Multisine:
    """The multisine of a modulated carrier of occupied bandwidth ``bandwidth_hz``.

    Parameters
    ----------
    modulation : Modulation
    bandwidth_hz : float
        The carrier's occupied bandwidth (Hz); ``iq`` records set their own raster.

    Returns
    -------
    Multisine
    """
    rng = np.random.default_rng(modulation.seed)
    n = modulation.tones
    if modulation.kind == "iq":
        assert modulation.iq_bins is not None and modulation.iq_phasors is not None
        assert modulation.iq_rate_hz is not None and modulation.iq_length is not None
        step = modulation.iq_rate_hz / modulation.iq_length
        return Multisine(np.asarray(modulation.iq_bins), step, 0.0, modulation.iq_phasors[None, :])
    if modulation.kind == "constant-envelope":
        return _sine_fm(n, bandwidth_hz)
    # Equal amplitudes on n tones spanning the bandwidth: a flat spectrum, each tone the
    # centre of a step of width B / n.
    step = bandwidth_hz / n
    steps = np.arange(n, dtype=np.int64) - n // 2
    centre = 0.0 if n % 2 else step / 2
    amp = 1.0 / math.sqrt(n)
    theta = rng.uniform(0.0, 2.0 * np.pi, size=(modulation.realizations, n))
    phasors = amp * np.exp(1j * theta)
    if modulation.kind == "par":
        assert modulation.par_db is not None
        phasors = np.stack([_shape_par(steps, row, modulation.par_db) for row in phasors])
    return Multisine(steps, step, centre, phasors)


def par_range_db(tones: int) -> tuple[float, float]:
    """Peak-to-average ratios (dB) a flat multisine of ``tones`` tones can be given.

    From about 2 dB (clipped and refiltered phases; near Schroeder's, from memory) to
    ``10 log10(N)`` (all phases aligned: the envelope peaks at ``N`` times its mean power,
    arithmetic).

    Parameters
    ----------
    tones : int

    Returns
    -------
    (float, float)
        Lowest and highest (dB).
    """
    return (3.0, 10.0 * math.log10(tones) - 0.5)


def _par_db(steps: np.ndarray, phasors: np.ndarray) -> np.ndarray:
    """Envelope PAR (dB) of each row of ``phasors`` (R, N) on the raster ``steps``."""
    span = int(steps.max() - steps.min()) + 1
    length = _OVERSAMPLE * max(span, 8)
    grid = np.zeros((phasors.shape[0], length), dtype=complex)
    grid[:, (steps - steps.min()) % length] = phasors
    env = np.abs(np.fft.ifft(grid, axis=1, norm="forward")) ** 2
    return 10.0 * np.log10(env.max(axis=1) / env.mean(axis=1))


def _shape_par(steps: np.ndarray, row: np.ndarray, par_db: float) -> np.ndarray:
    """Phases of one realization set so that the envelope's PAR is ``par_db``."""
    amp = np.abs(row)
    start = _par_db(steps, row[None])[0]
    if start < par_db:
        # Pull the random phases towards alignment (PAR rises to 10 log10 N): bisection on
        # the pull, the PAR growing with it (monotone in practice, checked below).
        lo, hi = 0.0, 1.0
        theta = np.angle(row)
        for _ in range(60):
            mid = 0.5 * (lo + hi)
            got = _par_db(steps, (amp * np.exp(1j * theta * (1 - mid)))[None])[0]
            lo, hi = (mid, hi) if got < par_db else (lo, mid)
        out = amp * np.exp(1j * theta * (1 - 0.5 * (lo + hi)))
    else:
        # Clip the envelope at the target and keep only the tones' phases (clipping and
        # filtering, a common crest-factor reduction; common practice, no source).
        span = int(steps.max() - steps.min()) + 1
        length = _OVERSAMPLE * max(span, 8)
        idx = (steps - steps.min()) % length
        out = row.copy()
        for _ in range(400):
            grid = np.zeros(length, dtype=complex)
            grid[idx] = out
            z = np.fft.ifft(grid, norm="forward")
            mean = np.mean(np.abs(z) ** 2)
            limit = math.sqrt(mean * 10 ** (par_db / 10))
            mag = np.abs(z)
            z = np.where(mag > limit, z * limit / np.maximum(mag, 1e-300), z)
            out = amp * np.exp(1j * np.angle(np.fft.fft(z, norm="forward")[idx]))
            if abs(_par_db(steps, out[None])[0] - par_db) <= PAR_TOLERANCE_DB / 2:
                break
    return out


def _sine_fm(n: int, bandwidth_hz: float) -> Multisine:
    """A sine-FM carrier of Carson bandwidth ``bandwidth_hz`` on ``n`` lines (odd count)."""
    from scipy.special import jv

    half = n // 2
    # Lines beyond |k| = beta + 1 fall off faster than exponentially; keep ~ 3 beta^(1/3) + 8
    # more so that the envelope is constant to about 1e-9 (Abramowitz and Stegun 9.3.1,
    # from memory: J_k(beta) ~ (e beta / 2k)^k / sqrt(2 pi k) for k >> beta).
    beta = 1.0
    for b in np.linspace(half, 0.1, 2000):
        if b + 8 + 3 * b ** (1 / 3) <= half:
            beta = float(b)
            break
    f_m = bandwidth_hz / (2 * (beta + 1))
    steps = np.arange(-half, half + 1, dtype=np.int64)
    phasors = jv(steps, beta).astype(complex)
    phasors /= np.sqrt(np.sum(np.abs(phasors) ** 2))
    return Multisine(steps, f_m, 0.0, phasors[None, :])
