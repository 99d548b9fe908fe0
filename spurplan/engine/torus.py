"""The spectral engine: exact multi-tone propagation on the K-torus.

The signal at any node is ``x(theta) = sum_m Re(X_m exp(j m . theta))`` over the
canonical mixing vectors ``m`` (see :mod:`spurplan.model.products`); ``X_m`` is the complex
peak phasor in volts.  Treating the K tone phases as independent coordinates
(multi-dimensional frequency mapping, as in the harmonic-balance literature) makes a
memoryless nonlinearity a pointwise map on a K-dimensional grid, and a K-dimensional
FFT returns the new ``X_m``:

* For a polynomial of degree D acting on products that reach index M per axis, a
  grid of ``N >= D M + M_keep + 1`` points per axis keeps every retained index
  (``|m_k| <= M_keep``) free of aliases, so the result is exact whatever the tone
  spacing (100 MHz and 100.0125 MHz cost the same as 100 and 200 MHz).
* Other models are oversampled; the grid doubles until every kept coefficient
  agrees with the previous grid to ``rtol`` (plus a floor far below any mask).
* A linear stage multiplies ``X_m`` by ``H(m . f)``, with ``conj(H(|m . f|))`` for
  negative ``m . f`` (the response of a real system).

Everything is vectorised over a leading batch axis: arrays are ``(batch, product)``.
Inter-stage coupling is AC: products that land on 0 Hz are removed after each stage
(common practice, no source: RF stages are DC-blocked).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from spurplan.model.torus_grid import (  # re-exported: the engine's grid rules
    CONVERGENCE_FLOOR,
    CONVERGENCE_RTOL,
    MAX_GRID_POINTS,
    alias_free_shape,
    fft_module,
    torus_coefficients,
)

# A product above this (V peak; +220 dBm into 50 ohm) is no stage's output: a polynomial
# model driven far past where its figures hold.  Refused, before the next stage raises it
# to a power that overflows (a node's levels square it).
ABSURD_PEAK_V = 1e9
# The largest array (points) evaluated at once; batches are chunked to respect it.
_CHUNK_POINTS = 2**22


@dataclass(frozen=True)
class MemorylessResult:
    """Output of :func:`apply_memoryless`.

    Attributes
    ----------
    spectrum : ndarray, complex, shape (B, P)
        Output peak phasors (V) of the canonical products.
    peak_neg_v, peak_pos_v : ndarray, shape (B,)
        Most negative / most positive input sample on the grid (V).
    converged : ndarray of bool, shape (B,)
        False where an oversampled model did not settle within the largest grid.
    grid : tuple of int
        Points on each axis of the final grid.
    """

    spectrum: np.ndarray
    peak_neg_v: np.ndarray
    peak_pos_v: np.ndarray
    converged: np.ndarray
    grid: tuple[int, ...]


def _torus_eval(x_phasors: np.ndarray, mix: np.ndarray, transfer, shape: tuple[int, ...]):
    """Apply ``transfer`` on a grid of ``shape`` (points per axis); return output phasors,
    input peaks and the largest magnitude in the grid's outer band."""
    batch, _ = x_phasors.shape
    k = mix.shape[1]
    axes = tuple(range(1, k + 1))
    # The half spectrum (last axis 0 .. N/2) of the real signal, for a real inverse FFT:
    # each product at +m where its last index is >= 0, its conjugate at -m where it is <= 0
    # (both on the plane of last index 0, which makes that plane Hermitian).
    half = (*shape[:-1], shape[-1] // 2 + 1)
    grid = np.zeros((batch, *half), dtype=complex)
    last = mix[:, -1]
    up, down = last >= 0, last <= 0
    pos: tuple[slice | np.ndarray, ...] = (
        slice(None),
        *(mix[up, i] % shape[i] for i in range(k - 1)),
        mix[up, -1],
    )
    neg: tuple[slice | np.ndarray, ...] = (
        slice(None),
        *((-mix[down, i]) % shape[i] for i in range(k - 1)),
        -mix[down, -1],
    )
    grid[pos] += 0.5 * x_phasors[:, up]
    grid[neg] += 0.5 * np.conj(x_phasors[:, down])
    samples = fft_module(batch * math.prod(shape)).irfftn(grid, s=shape, axes=axes, norm="forward")
    flat = samples.reshape(batch, -1)
    # Absurd figures can overflow the model; propagate() turns that into an error.
    with np.errstate(over="ignore", invalid="ignore"):
        out = transfer(samples)
    if transfer.degree is not None:
        # A polynomial on its alias-free grid has no aliases to estimate.
        return torus_coefficients(out, mix), flat.min(axis=1), flat.max(axis=1), np.zeros(batch)
    phasors, edge = torus_coefficients(out, mix, tail=True)
    return phasors, flat.min(axis=1), flat.max(axis=1), edge


def apply_memoryless(
    x_phasors: np.ndarray,
    mix: np.ndarray,
    transfer,
    *,
    rtol: float = CONVERGENCE_RTOL,
) -> MemorylessResult:
    """Pass a multi-tone spectrum through a memoryless transfer.

    Parameters
    ----------
    x_phasors : ndarray, complex, shape (B, P)
        Input peak phasors (V) of the canonical products ``mix``.
    mix : ndarray of int, shape (P, K)
        Canonical mixing vectors; the output is truncated to the same set.
    transfer : callable
        A model from :mod:`spurplan.model.nonlinear` (``degree`` attribute: int for a
        polynomial, ``None`` otherwise).
    rtol : float
        Relative agreement required between successive grids for non-polynomial
        models.

    Returns
    -------
    MemorylessResult
    """
    x_phasors = np.atleast_2d(np.asarray(x_phasors, dtype=complex))
    batch = x_phasors.shape[0]
    active = np.any(x_phasors != 0, axis=0)
    degree = transfer.degree
    # Per axis: a raster's step axis spreads much further than its zone axis.
    if degree is not None:
        n = alias_free_shape(degree, mix, active)
    else:
        # A model of every order: start from the smallest grid that reads the kept
        # products apart (2 M + 1 per axis, at least 32) and let the alias estimate and
        # the doubling below decide how fine it must be.
        n = tuple(max(v, 32) for v in alias_free_shape(1, mix, np.zeros(len(mix), dtype=bool)))

    y, lo, hi, edge = _eval_chunked(x_phasors, mix, transfer, n, np.arange(batch))
    converged = np.full(batch, degree is not None) | _resolved(y, edge)
    grid_used = n
    # Oversampled models: double the grid for the batch elements that have not settled
    # yet.  An element has settled when two grids agree, or when its grid's outer band
    # holds nothing above the floor: the aliases that reach a kept product lie farther out
    # than that band, where the coefficients of a smooth model have decayed further still
    # (spectral convergence; common practice in spectral methods, no source).
    todo = np.nonzero(~converged)[0]
    while todo.size and math.prod(n) * 2 ** len(n) <= MAX_GRID_POINTS:
        n = tuple(2 * v for v in n)
        y2, lo2, hi2, edge2 = _eval_chunked(x_phasors[todo], mix, transfer, n, todo)
        scale = np.abs(y2).max(axis=1, keepdims=True)
        tol = rtol * np.abs(y2) + CONVERGENCE_FLOOR * scale
        ok = np.all(np.abs(y2 - y[todo]) <= tol, axis=1) | _resolved(y2, edge2)
        y[todo], lo[todo], hi[todo] = y2, lo2, hi2
        converged[todo] = ok
        todo = todo[~ok]
        grid_used = n
    return MemorylessResult(spectrum=y, peak_neg_v=lo, peak_pos_v=hi, converged=converged, grid=grid_used)


def _resolved(y: np.ndarray, edge: np.ndarray) -> np.ndarray:
    """Batch elements whose grid's outer band is below the floor of their strongest product."""
    return edge <= CONVERGENCE_FLOOR * np.abs(y).max(axis=1)


def _eval_chunked(x_phasors: np.ndarray, mix: np.ndarray, transfer, n: tuple[int, ...], rows: np.ndarray):
    """:func:`_torus_eval` over batch chunks that keep each array below ``_CHUNK_POINTS``.

    ``rows`` are the batch elements ``x_phasors`` holds (a model with per-sample
    parameters is cut to the same rows).
    """
    chunk = max(1, _CHUNK_POINTS // math.prod(n))
    take = getattr(transfer, "take", None)
    parts = [
        _torus_eval(x_phasors[s : s + chunk], mix, take(rows[s : s + chunk]) if take else transfer, n)
        for s in range(0, len(x_phasors), chunk)
    ]
    return tuple(np.concatenate(arrays) for arrays in zip(*parts, strict=True))


def response_at(response, freqs_hz: np.ndarray) -> np.ndarray:
    """Evaluate a linear response at signed product frequencies.

    ``response(f)`` is called with ``f >= 0`` only; negative frequencies take the
    complex conjugate, as for any real-valued system.

    Parameters
    ----------
    response : callable
        ``response(freq_hz) -> complex`` for frequencies >= 0 (Hz), dimensionless.
    freqs_hz : array_like
        Signed product frequencies (Hz), any shape.

    Returns
    -------
    ndarray, complex
        The response, the shape of ``freqs_hz``.
    """
    freqs_hz = np.asarray(freqs_hz, dtype=float)
    h = np.asarray(response(np.abs(freqs_hz)), dtype=complex)
    h = np.broadcast_to(h, freqs_hz.shape)
    return np.where(freqs_hz < 0, np.conj(h), h)


@dataclass(frozen=True)
class Propagation:
    """Everything the engine computed for a chain of stages.

    Shapes use S stages, B batch elements, P canonical products.

    Attributes
    ----------
    nodes : ndarray, complex, (S + 1, B, P)
        Phasors (V) at the input (node 0) and after each stage.
    added : ndarray, complex, (S, B, P)
        What each stage added beyond the linear passage of its input (V).
    response : ndarray, complex, (S, B, P)
        Each stage's small-signal response at each product frequency.
    extrapolated : ndarray of bool, (S, B)
        The stage's model was driven beyond where it holds.
    converged : ndarray of bool, (S, B)
    beyond : ndarray of bool, (S, B, P)
        A product present at the stage (above -200 dB of the strongest) lies outside
        the frequency range of the stage's data file.
    """

    nodes: np.ndarray
    added: np.ndarray
    response: np.ndarray
    extrapolated: np.ndarray
    converged: np.ndarray
    beyond: np.ndarray

    def contributions(self, node: int, rows=slice(None)) -> np.ndarray:
        """Per-source phasors at ``node``, carried linearly from where they arose.

        Parameters
        ----------
        node : int
            Node index: 0 is the input, k the output of stage k.
        rows : slice or index array
            Batch elements to return (default all).

        Returns
        -------
        ndarray, complex, shape (node + 1, B, P)
            Row 0 is the input's linear passage; row k (1-based) is stage k's added
            part times the responses of stages k+1 .. node.  The rows sum to
            ``nodes[node]`` exactly.
        """
        first = self.nodes[0, rows]
        out = np.empty((node + 1, *first.shape), dtype=complex)
        # From the node back to the input: ``tail`` is the product of the responses of
        # stages src+1 .. node, grown by one stage per source, so the work is linear in
        # the number of stages (carrying each source forward on its own was quadratic).
        tail = np.ones(first.shape, dtype=complex)
        for src in range(node, 0, -1):
            out[src] = self.added[src - 1, rows] * tail
            tail = tail * self.response[src - 1, rows]
        out[0] = first * tail
        return out


def at_zero_hz(mix: np.ndarray, freqs_hz: np.ndarray, axes_hz: np.ndarray | None = None) -> np.ndarray:
    """Products that sit at 0 Hz, (B, P): ``m . f`` zero to within rounding.

    The tolerance scales with ``sum |m_k f_k|`` (the size of the terms that cancel), so a
    1 Hz beat of two 100 MHz carriers is a product, and ``2 f1 - f2`` with ``f2 = 2 f1``
    is DC.

    Parameters
    ----------
    mix : ndarray of int, shape (P, K)
        Canonical mixing vectors (lattice coordinates).
    freqs_hz : ndarray, shape (B, P)
        Signed product frequencies (Hz).
    axes_hz : ndarray, shape (B, K), optional
        The axis frequencies (Hz); default read from the unit mixing vectors, which must
        then be among ``mix``.

    Returns
    -------
    ndarray of bool, shape (B, P)
    """
    freqs_hz = np.asarray(freqs_hz, dtype=float)
    if axes_hz is None:
        k = mix.shape[1]
        cols = [int(np.nonzero((mix == np.eye(k, dtype=mix.dtype)[i]).all(axis=1))[0][0]) for i in range(k)]
        axes_hz = freqs_hz[..., cols]
    terms = np.abs(np.asarray(axes_hz, dtype=float)) @ np.abs(mix).T.astype(float)
    return np.abs(freqs_hz) <= 1e-12 * terms


def propagate(
    stages,
    x_in: np.ndarray,
    mix: np.ndarray,
    freqs_hz: np.ndarray,
    ref_hz: np.ndarray | None = None,
    axes_hz: np.ndarray | None = None,
) -> Propagation:
    """Run a spectrum through a chain of stages.

    A memoryless stage's output is ``y = H(f) x + W(f) (T(x) - a1 x)``: what passes
    through sees the small-signal response ``H``, what the stage generates (its
    output beyond the linear passage ``a1 x``) sees ``W``, the stage's
    ``generated_weight`` (harmonic-zone weights and pass band), or ``H / a1`` for a
    stage without one, which is ``H(f) T(x) / a1``.

    Parameters
    ----------
    stages : sequence of Stage
        Each with ``response(freq_hz) -> complex`` and ``transfer`` (a model or
        ``None`` for a linear stage); optionally ``generated_weight(freq_hz, ref_hz)``.
    x_in : ndarray, complex, (B, P)
        Input phasors (V).
    mix : ndarray of int, (P, K)
        Canonical mixing vectors.
    freqs_hz : ndarray, (B, P)
        Signed product frequencies (Hz).
    ref_hz : ndarray (S, B), optional
        The reference carrier's frequency at each stage's input (Hz), where harmonic
        zones are centred; default each stage's own.
    axes_hz : ndarray (B, K), optional
        Frequencies (Hz) of the axes ``mix`` counts in; default read from its unit vectors.

    Returns
    -------
    Propagation
        Node phasors (V), what each stage added, responses and flags.
    """
    dc = at_zero_hz(mix, freqs_hz, axes_hz)
    x = np.where(dc, 0.0, x_in)
    nodes, added, resp, extrap, conv, beyond = [x], [], [], [], [], []
    for i, stage in enumerate(stages):
        h = response_at(stage.response, freqs_hz)
        if not np.all(np.isfinite(h)):
            b, p = np.argwhere(~np.isfinite(h))[0]
            from spurplan.errors import LineupError

            raise LineupError(
                f"the response is not a finite number at {abs(freqs_hz[b, p]):.6g} Hz: expected a usable S21",
                stage=f"stage {stage.name!r}",
            )
        transfer = stage.transfer
        if transfer is None:
            y = h * x
            extrap.append(np.zeros(len(x), dtype=bool))
            conv.append(np.ones(len(x), dtype=bool))
        elif stage.conversion is not None:
            # A frequency converter (mixer): it makes a new spectrum from its input and
            # its own LO, with no linear passage (h = 0).
            y = transfer.convert(x, mix, freqs_hz)
            extrap.append(np.zeros(len(x), dtype=bool))
            conv.append(np.ones(len(x), dtype=bool))
        else:
            res = apply_memoryless(x, mix, transfer)
            a1 = np.reshape(transfer.gain, (-1, 1))
            weight_of = stage.generated_weight
            if weight_of is None:
                y = res.spectrum * (h / a1)
            else:
                ref = None if ref_hz is None else ref_hz[i]
                w = response_at(lambda f, weight_of=weight_of, ref=ref: weight_of(f, ref), freqs_hz)
                y = h * x + w * (res.spectrum - a1 * x)
            lo, hi = transfer.valid_peak_v
            extrap.append((res.peak_neg_v < lo) | (res.peak_pos_v > hi))
            conv.append(res.converged)
        y = np.where(dc, 0.0, y)
        if not np.all(np.isfinite(y)):
            from spurplan.errors import LineupError

            raise LineupError(
                "the model's output is not a finite number at this drive: expected figures and drive "
                "that a real stage could have",
                stage=f"stage {stage.name!r}",
            )
        if np.any(np.abs(y) > ABSURD_PEAK_V):
            from spurplan.errors import LineupError

            raise LineupError(
                f"the model's output exceeds {ABSURD_PEAK_V:.0e} V peak at this drive (a polynomial "
                "with no compression figure grows without bound): expected figures and drive that a "
                "real stage could have, e.g. state p1db or psat",
                stage=f"stage {stage.name!r}",
            )
        beyond.append(_beyond_data(stage.data_range_hz, freqs_hz, x, y))
        added.append(y - h * x)
        resp.append(h)
        nodes.append(y)
        x = y
    empty = np.zeros((0, *x.shape))
    return Propagation(
        nodes=np.stack(nodes),
        added=np.stack(added) if added else empty.astype(complex),
        response=np.stack(resp) if resp else empty.astype(complex),
        extrapolated=np.stack(extrap) if extrap else np.zeros((0, len(x)), bool),
        converged=np.stack(conv) if conv else np.zeros((0, len(x)), bool),
        beyond=np.stack(beyond) if beyond else empty.astype(bool),
    )


# Products weaker than this (amplitude ratio to the strongest, -200 dB) do not make
# a data-range problem: they are below any report.
_PRESENT = 1e-10


def _beyond_data(data_range_hz, freqs_hz, x, y) -> np.ndarray:
    """Where a product present at a stage falls outside its data range, (B, P)."""
    if data_range_hz is None:
        return np.zeros(x.shape, dtype=bool)
    lo, hi = data_range_hz
    f = np.abs(freqs_hz)
    ref = np.maximum(np.abs(x).max(axis=1, keepdims=True), np.abs(y).max(axis=1, keepdims=True))
    present = (np.abs(x) > _PRESENT * ref) | (np.abs(y) > _PRESENT * ref)
    return ((f < lo) | (f > hi)) & present
