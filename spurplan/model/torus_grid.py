"""The torus grid: a multi-tone signal sampled with one axis per base tone.

A periodic signal of K incommensurate tones, ``x(theta) = sum_m Re(X_m exp(j m . theta))``,
is sampled on a K-dimensional grid of N points per axis (multi-dimensional frequency
mapping, as in the harmonic-balance literature); its product phasors ``X_m`` are read
back by a K-dimensional FFT.  These are the grid rules shared by the engine
(:mod:`spurplan.engine.torus`) and by stage models that evaluate themselves on the grid
(a mixer's conversion, :mod:`spurplan.model.stages.mixer`): grid sizes that keep
products free of aliases, the analytic signal and the coefficients read back, and the
convergence rule for oversampled models.
"""

from __future__ import annotations

import numpy as np

# Transforms of at least this many points use scipy.fft, whose real transforms are up to
# twice as fast as numpy.fft's on large grids; smaller ones (a check, a short sweep) use
# numpy.fft and spare every command scipy.fft's import (about 0.15 s, measured).
LARGE_FFT_POINTS = 1 << 21
# Largest grid (points per batch element) the adaptive search may reach.
MAX_GRID_POINTS = 2**22
CONVERGENCE_RTOL = 1e-4
# Coefficients this far below the strongest one (amplitude ratio, -220 dB) only need
# absolute accuracy: a product at -150 dBc is then still right to 0.001 dB.
CONVERGENCE_FLOOR = 1e-11


def torus_coefficients(samples: np.ndarray, mix: np.ndarray, tail: bool = False):
    """Peak phasors (B, P) of the canonical products in real torus samples (B, N_1, ..., N_K).

    Parameters
    ----------
    samples : ndarray, real, shape (B, N_1, ..., N_K)
        The signal (V) sampled on a K-dimensional torus grid, one axis per base tone (or
        lattice axis, :mod:`spurplan.model.tone_lattice`).
    mix : ndarray of int, shape (P, K)
        Canonical mixing vectors to read.

    tail : bool
        Also return, per batch element, an estimate (V peak) of the largest alias that
        reaches a kept product (:func:`_alias_estimate`).

    Returns
    -------
    ndarray, complex, shape (B, P)
        Peak phasor (V) of each product: twice the forward-normalised DFT coefficient.
    ndarray, shape (B,)
        With ``tail``: the alias estimate.
    """
    k = mix.shape[1]
    sizes = samples.shape[1:]
    out = fft_module(samples.size).rfftn(samples, axes=tuple(range(1, k + 1)), norm="forward")
    # rfftn keeps last-axis indices 0 .. n//2: read m directly where its last entry
    # is >= 0, else read -m and conjugate.
    direct = mix[:, -1] >= 0
    src = np.where(direct[:, None], mix, -mix)
    idx = (*tuple(src[:, i] % sizes[i] for i in range(k - 1)), src[:, -1])
    coeff = out[(slice(None), *idx)]
    phasors = 2.0 * np.where(direct[None, :], coeff, np.conj(coeff))
    if not tail:
        return phasors
    return phasors, _alias_estimate(out, sizes, np.abs(mix).max(axis=0))


def torus_analytic(x_phasors: np.ndarray, mix: np.ndarray, freqs_hz: np.ndarray, n) -> np.ndarray:
    """Analytic signal on the torus: ``sum X_m exp(j m . theta)`` over positive frequencies.

    Each product enters once, at its positive frequency (the conjugate phasor at
    ``-m`` where ``m . f < 0``), so the real part is the signal and the imaginary part
    its Hilbert transform.  Returns complex samples (B, N, ..., N).

    Parameters
    ----------
    x_phasors : ndarray, complex, shape (B, P)
        Peak phasors (V) of the canonical products ``mix``.
    mix : ndarray of int, shape (P, K)
        Canonical mixing vectors.
    freqs_hz : ndarray, shape (B, P)
        Signed product frequencies (Hz); only their signs are used.
    n : int or tuple of int
        Grid points per torus axis (one number for every axis, or one per axis).

    Returns
    -------
    ndarray, complex, shape (B, N_1, ..., N_K)
        The analytic signal (V) on the grid.
    """
    batch = x_phasors.shape[0]
    k = mix.shape[1]
    sizes = grid_shape(n, k)
    grid = np.zeros((batch, *sizes), dtype=complex)
    positive = freqs_hz >= 0
    for sign, take in ((1, positive), (-1, ~positive)):
        vals = np.where(take, x_phasors if sign > 0 else np.conj(x_phasors), 0.0)
        idx: tuple[slice | np.ndarray, ...] = (
            slice(None),
            *((sign * mix[:, i]) % sizes[i] for i in range(k)),
        )
        grid[idx] += vals
    return fft_module(grid.size).ifftn(grid, axes=tuple(range(1, k + 1)), norm="forward")


def alias_free_grid(degree: int, m_in: int, m_keep: int) -> int:
    """Smallest fast FFT length that keeps the kept products free of aliases.

    Parameters
    ----------
    degree : int
        Polynomial degree D of the transfer (an assumed degree for other models).
    m_in : int
        Largest ``|m_k|`` of any mixing vector present at the input.
    m_keep : int
        Largest ``|m_k|`` of the mixing vectors kept at the output.

    Returns
    -------
    int
        Grid points per torus axis, at least ``max(D m_in + m_keep + 1, 2 m_keep + 1)``.
    """
    # D m_in + m_keep + 1 keeps kept indices alias-free; 2 m_keep + 1 keeps +m and -m
    # apart, so every kept index can be read from the half-spectrum of rfftn.
    return next_fast_len(max(degree * m_in + m_keep + 1, 2 * m_keep + 1))


def grid_shape(n, k: int) -> tuple[int, ...]:
    """Points per axis of a K-axis grid.

    Parameters
    ----------
    n : int or sequence of int
        One size for every axis, or one per axis.
    k : int
        Number of axes.

    Returns
    -------
    tuple of int
        ``n`` itself when it is a sequence, else ``(n,) * k``.
    """
    return tuple(int(v) for v in n) if isinstance(n, tuple | list | np.ndarray) else (int(n),) * k


def alias_free_shape(degree: int, mix: np.ndarray, active: np.ndarray | None = None) -> tuple[int, ...]:
    """Per-axis :func:`alias_free_grid` for products ``mix`` (P, K), ``active`` ones at the input.

    Parameters
    ----------
    degree : int
        Polynomial degree D of the transfer (an assumed degree for other models).
    mix : ndarray of int, shape (P, K)
        The products kept at the output (lattice coordinates).
    active : ndarray of bool, shape (P,), optional
        The products present at the input; default all.

    Returns
    -------
    tuple of int
        Grid points on each axis: an axis where products spread far (a raster's step
        axis) gets more points than one where they do not.
    """
    keep = np.abs(mix).max(axis=0)
    m_in = np.abs(mix[active]).max(axis=0) if active is not None and active.any() else keep
    return tuple(
        alias_free_grid(degree, max(int(i), 1), max(int(o), 1)) for i, o in zip(m_in, keep, strict=True)
    )


def _alias_estimate(out: np.ndarray, sizes, keep: np.ndarray) -> np.ndarray:
    """Estimate (V peak, (B,)) of the largest alias on a kept product, from a grid's spectrum.

    On an axis of ``N`` points a kept index ``m`` (``|m| <= M``) receives the images of
    ``m +- N``, at least ``N - M`` from the origin.  The coefficients are read in two bands
    of the computed spectrum, around ``N/4`` (largest ``c1``) and just below ``N/2``
    (``c2``); a geometric decay ``r = c2 / c1`` per ``N/4`` carried on to ``N - M`` gives
    the estimate ``c2 r^((N/2 - M) / (N/4))``.  Where the coefficients do not decay
    (``r >= 1``) the estimate is ``c2`` itself; the largest over the axes is returned.
    (Tail extrapolation of a spectral series; common practice in spectral methods, no source.)
    """
    k = len(sizes)
    estimate = np.zeros(len(out))
    flat = np.abs(out).reshape(len(out), -1)
    for axis, n in enumerate(sizes):
        if n < 16:
            estimate = np.maximum(estimate, flat.max(axis=1))
            continue
        j = np.arange(out.shape[1 + axis])
        dist = j if axis == k - 1 else np.minimum(j, n - j)
        width = max(2, n // 16)
        shape = [1] * k
        shape[axis] = len(j)
        bands = []
        for lo, hi in ((n // 4 - width, n // 4 + width), (n // 2 - width, n // 2)):
            sel = np.broadcast_to(((dist >= lo) & (dist <= hi)).reshape(shape), out.shape[1:]).ravel()
            bands.append(2.0 * flat[:, sel].max(axis=1))
        c1, c2 = bands
        with np.errstate(divide="ignore", invalid="ignore"):
            r = np.where(c1 > 0, c2 / c1, 0.0)
        steps = max(n / 2 - int(keep[axis]), 0.0) / (n / 4)
        estimate = np.maximum(estimate, np.where(r < 1, c2 * r**steps, c2))
    return estimate


def fft_module(points: int):
    """``numpy.fft``, or ``scipy.fft`` for a transform of at least :data:`LARGE_FFT_POINTS`
    (imported then: the same functions and normalisations, rfftn, irfftn, ifftn).

    Parameters
    ----------
    points : int
        Points in the array to transform (batch included).

    Returns
    -------
    module
    """
    if points >= LARGE_FFT_POINTS:
        import scipy.fft

        return scipy.fft
    return np.fft


def next_fast_len(n: int) -> int:
    """The smallest ``2^a 3^b 5^c >= n``: a length the FFTs do fast (any length works).

    Parameters
    ----------
    n : int

    Returns
    -------
    int
    """
    best = 1 << max(int(n) - 1, 0).bit_length()
    p5 = 1
    while p5 < best:
        p35 = p5
        while p35 < best:
            # The smallest power of two that lifts p35 to n or beyond.
            q = p35
            while q < n:
                q *= 2
            best = min(best, q)
            p35 *= 3
        p5 *= 5
    return best
