"""The engine's axes: an integer basis for the lineup's tones (LOs and carriers).

Every product of the base tones sits at ``m . f`` for an integer vector ``m``.  When
carriers share a channel raster, ``f_k = f_0 + s_k delta``, products of different
carriers land on the same frequencies (``f_1 + f_3 = 2 f_2``) and only the lattice
point ``(a, b) = sum_k m_k (1, s_k)`` matters: the product sits at ``a f_0 + b delta``.
The engine then runs on two axes (the raster's centre and its step) whatever the
number of carriers, and every product that lands on one frequency is one value.

Tones that share no useful raster keep an axis each (the LOs always do: a mixer reads
its LO's axis), as the engine always treated them.  The torus is exact for any tone
frequencies, commensurate or not, because a memoryless stage acts pointwise on it
(multi-dimensional frequency mapping, as in the harmonic-balance literature); the
basis only decides how many axes the grid needs and which products are one.

A lattice point's *order* is the least ``sum |m_k|`` of the tone combinations that
reach it, and its *representative* is one such combination (over the lineup's tones,
LOs first): what tables label it by (``"2f3-f1"``).
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass, field

import numpy as np

# Carrier frequencies that fit a raster to this (Hz) are on it, when no tolerance is stated:
# far below any filter's resolution, far above the rounding of a frequency read from text.
RASTER_TOLERANCE_HZ = 1e-3


@dataclass(frozen=True)
class ProductSet:
    """The products of a lattice up to an order.

    Attributes
    ----------
    coords : ndarray of int, (P, R)
        Lattice coordinates over the engine's R axes; one of each ``+-`` pair.
    mix : ndarray of int, (P, K)
        A representative tone combination of each product (over the K tones, LOs first),
        of least order; its first nonzero entry is positive.
    orders : ndarray of int, (P,)
        Least order ``sum |m_k|`` that reaches each point.

    Rows are sorted by order, then by ``mix`` lexicographically descending, so that the
    tones come first and the rows of a lower order are a prefix of any wider set.
    """

    coords: np.ndarray
    mix: np.ndarray
    orders: np.ndarray


@dataclass(frozen=True)
class ToneLattice:
    """An integer basis for the lineup's tones.

    Attributes
    ----------
    coords : ndarray of int, (K, R)
        Tone k is ``coords[k] . axes_hz``.
    groups : tuple of tuple of int
        Tones that share axes, in axis order: a single tone has one axis of its own; a
        raster group (carriers) has two, its centre and its step.
    raster_hz : float or None
        The carriers' raster step (Hz), when they share one.
    """

    coords: np.ndarray
    groups: tuple[tuple[int, ...], ...]
    raster_hz: float | None = None
    _cache: dict = field(default_factory=dict, compare=False, hash=False, repr=False)

    @property
    def n_axes(self) -> int:
        return self.coords.shape[1]

    def axes_hz(self, tones_hz: np.ndarray) -> np.ndarray:
        """Axis frequencies (B, R) for tone frequencies (B, K) on this lattice.

        Parameters
        ----------
        tones_hz : ndarray, shape (B, K) or (K,)
            Tone frequencies (Hz), LOs first.

        Returns
        -------
        ndarray, shape (B, R)
            Axis frequencies (Hz) with ``axes @ coords.T`` equal to the tones.

        Raises
        ------
        ValueError
            When the tones do not fit the lattice (a raster group moved apart).
        """
        tones = np.atleast_2d(np.asarray(tones_hz, dtype=float))
        a = self.coords.astype(float)
        axes = tones @ np.linalg.pinv(a.T)
        miss = np.abs(axes @ a.T - tones)
        allowed = 2 * RASTER_TOLERANCE_HZ + 1e-9 * np.abs(tones)
        if self.raster_hz is not None and np.any(miss > np.maximum(allowed, 1e-6 * self.raster_hz)):
            raise ValueError("the tones do not fit the lineup's raster")
        return axes

    def grid_points(self, degree: int, order: int) -> int:
        """Points of the alias-free grid of one evaluation with products up to ``order``.

        Parameters
        ----------
        degree : int
            Polynomial degree of the stage (an assumed degree for other models).
        order : int
            Highest least order kept.

        Returns
        -------
        int
            The product over the axes of ``alias_free_grid(degree, m, m)``, ``m`` the
            largest coordinate a product reaches on that axis: ``order`` times the largest
            of any tone there (the tone taken ``order`` times), known without listing them.
        """
        from spurplan.model.torus_grid import alias_free_grid

        reach = order * np.abs(self.coords).max(axis=0)
        return math.prod(alias_free_grid(degree, int(m), int(m)) for m in reach)

    def products(self, order: int) -> ProductSet:
        """Every product up to ``order`` (cached per order).

        Parameters
        ----------
        order : int
            Highest least order kept.

        Returns
        -------
        ProductSet
        """
        hit = self._cache.get(order)
        if hit is None:
            hit = _products(self, order)
            self._cache[order] = hit
        return hit


def find_raster(freqs_hz, tolerance_hz: float = RASTER_TOLERANCE_HZ) -> tuple[float, np.ndarray] | None:
    """The coarsest raster the frequencies fit, and each one's step from the lowest.

    The step is the greatest common divisor of the differences, found by Euclid's
    algorithm with remainders within ``tolerance_hz`` taken as zero (Knuth, TAOCP vol. 2,
    4.5.2, from memory).

    Parameters
    ----------
    freqs_hz : sequence of float
        At least two distinct frequencies (Hz).
    tolerance_hz : float
        How far (Hz) a frequency may sit from the raster.

    Returns
    -------
    (step_hz, steps) or None
        The raster step (Hz) and the integer steps (K,) of each frequency above the
        lowest; ``None`` when the only common step is within the tolerance itself.
    """
    f = np.asarray(freqs_hz, dtype=float)
    diffs = np.sort(f - f.min())[1:]
    step = 0.0
    for d in diffs:
        step = _approx_gcd(step, float(d), tolerance_hz)
    if step <= 4 * tolerance_hz:
        return None
    steps = np.rint((f - f.min()) / step).astype(np.int64)
    # Refine the step on the widest span, then hold every frequency to the tolerance.
    top = int(np.argmax(steps))
    if steps[top] > 0:
        step = float((f[top] - f.min()) / steps[top])
    if np.any(np.abs(f - f.min() - steps * step) > tolerance_hz):
        return None
    return step, steps


def _approx_gcd(a: float, b: float, tol: float) -> float:
    a, b = max(a, b), min(a, b)
    while b > tol:
        r = math.fmod(a, b)
        if b - r <= tol:
            r = 0.0
        a, b = b, r
    return a


def raster_steps_hz(freqs_hz, raster_hz: float, tolerance_hz: float) -> np.ndarray | None:
    """Steps of a stated raster from the lowest frequency, or ``None`` where one is off it.

    Parameters
    ----------
    freqs_hz : sequence of float
        Carrier frequencies (Hz).
    raster_hz : float
        The stated raster step (Hz).
    tolerance_hz : float
        How far (Hz) a frequency may sit from the raster.

    Returns
    -------
    ndarray of int or None
    """
    f = np.asarray(freqs_hz, dtype=float)
    steps = np.rint((f - f.min()) / raster_hz).astype(np.int64)
    if np.any(np.abs(f - f.min() - steps * raster_hz) > tolerance_hz):
        return None
    return steps


def build_lattice(
    n_lo: int, steps: np.ndarray | None, n_carriers: int, raster_hz: float | None = None
) -> ToneLattice:
    """The lattice of ``n_lo`` LOs (an axis each) and the carriers.

    Parameters
    ----------
    n_lo : int
        LOs, the first tones.
    steps : ndarray of int or None
        The carriers' raster steps above the lowest (:func:`find_raster`), or ``None`` for
        an axis per carrier.
    n_carriers : int
        Carriers, after the LOs.
    raster_hz : float, optional
        The raster step (Hz), kept for the record.

    Returns
    -------
    ToneLattice
    """
    k = n_lo + n_carriers
    groups: list[tuple[int, ...]] = [(i,) for i in range(n_lo)]
    if steps is None or n_carriers < 2:
        coords = np.eye(k, dtype=np.int64)
        groups += [(n_lo + i,) for i in range(n_carriers)]
        return ToneLattice(coords=coords, groups=tuple(groups))
    # Centre the steps: products then spread as little as possible along the step axis.
    centred = np.asarray(steps, dtype=np.int64) - int(np.max(steps)) // 2
    coords = np.zeros((k, n_lo + 2), dtype=np.int64)
    coords[np.arange(n_lo), np.arange(n_lo)] = 1
    coords[n_lo:, n_lo] = 1
    coords[n_lo:, n_lo + 1] = centred
    groups.append(tuple(range(n_lo, k)))
    return ToneLattice(coords=coords, groups=tuple(groups), raster_hz=raster_hz)


def _products(lattice: ToneLattice, order: int) -> ProductSet:
    """Enumerate the products: each group's points, joined under the order budget."""
    acc_coords = np.zeros((1, 0), dtype=np.int64)
    acc_rep = np.zeros((1, 0), dtype=np.int64)
    acc_ord = np.zeros(1, dtype=np.int64)
    for group in lattice.groups:
        if len(group) == 1:
            c = np.arange(-order, order + 1, dtype=np.int64)
            g_coords, g_rep, g_ord = c[:, None], c[:, None], np.abs(c)
        else:
            steps = lattice.coords[list(group), -1]
            g_coords, g_rep, g_ord = _raster_points(steps, order)
        parts = []
        for e in np.unique(acc_ord):
            left = np.nonzero(acc_ord == e)[0]
            right = np.nonzero(g_ord <= order - e)[0]
            li, ri = np.repeat(left, len(right)), np.tile(right, len(left))
            parts.append(
                (
                    np.hstack([acc_coords[li], g_coords[ri]]),
                    np.hstack([acc_rep[li], g_rep[ri]]),
                    acc_ord[li] + g_ord[ri],
                )
            )
        acc_coords = np.concatenate([p[0] for p in parts])
        acc_rep = np.concatenate([p[1] for p in parts])
        acc_ord = np.concatenate([p[2] for p in parts])
    nonzero = acc_ord > 0
    coords, rep, ords = acc_coords[nonzero], acc_rep[nonzero], acc_ord[nonzero]
    # One of each +- pair: the point whose first nonzero coordinate is positive ...
    keep = _first_nonzero(coords) > 0
    coords, rep, ords = coords[keep], rep[keep], ords[keep]
    # ... named by a combination whose first nonzero entry is positive (the sign of the
    # point goes with it), as the trade writes 2f1-f2 rather than -2f1+f2.
    flip = np.where(_first_nonzero(rep) < 0, -1, 1)[:, None]
    coords, rep = coords * flip, rep * flip
    keys = [-rep[:, i] for i in range(rep.shape[1] - 1, -1, -1)] + [ords]
    ranked = np.lexsort(keys)
    out = ProductSet(coords=coords[ranked], mix=rep[ranked], orders=ords[ranked])
    for a in (out.coords, out.mix, out.orders):
        a.flags.writeable = False  # shared through the cache
    return out


def _first_nonzero(rows: np.ndarray) -> np.ndarray:
    """The first nonzero entry of each row (0 for an all-zero row)."""
    nz = rows != 0
    first = np.argmax(nz, axis=1)
    return np.where(nz.any(axis=1), rows[np.arange(len(rows)), first], 0)


@functools.lru_cache(maxsize=64)
def _raster_points_cached(steps: tuple[int, ...], order: int):
    steps_a = np.asarray(steps, dtype=np.int64)
    n = len(steps_a)
    span = int(np.abs(steps_a).max()) * order
    shape = (2 * order + 1, 2 * span + 1)
    least = np.full(shape, -1, dtype=np.int64)
    move_of = np.full(shape, -1, dtype=np.int64)
    least[order, span] = 0
    frontier = np.zeros(shape, dtype=bool)
    frontier[order, span] = True
    moves = [(1, int(s)) for s in steps_a] + [(-1, -int(s)) for s in steps_a]
    # Breadth-first over the orders: a cell first reached at order o has least order o;
    # the move that reached it leads back along a least-order combination.
    for o in range(1, order + 1):
        reached = np.zeros(shape, dtype=bool)
        via = np.full(shape, -1, dtype=np.int64)
        for j, (da, db) in enumerate(moves):
            dst = _shifted(frontier, da, db)
            new = dst & (least < 0) & ~reached
            via[new] = j
            reached |= new
        least[reached] = o
        move_of[reached] = via[reached]
        frontier = reached
    ia, ib = np.nonzero(least >= 0)
    ords = least[ia, ib]
    rep = np.zeros((len(ia), n), dtype=np.int64)
    ca, cb = ia.copy(), ib.copy()
    for _ in range(order):
        via_move = move_of[ca, cb]
        live = via_move >= 0
        if not live.any():
            break
        tone = np.where(via_move >= n, via_move - n, via_move)
        sign = np.where(via_move >= n, -1, 1)
        rows = np.nonzero(live)[0]
        rep[rows, tone[live]] += sign[live]
        ca[live] -= sign[live]
        cb[live] -= sign[live] * steps_a[tone[live]]
    coords = np.stack([ia - order, ib - span], axis=1).astype(np.int64)
    return coords, rep, ords


def _raster_points(steps: np.ndarray, order: int):
    """Lattice points ``sum m_k (1, s_k)`` of least order <= ``order``, the origin included.

    Returns ``(coords (P, 2), rep (P, n), orders (P,))``.
    """
    return _raster_points_cached(tuple(int(s) for s in steps), order)


def _shifted(a: np.ndarray, da: int, db: int) -> np.ndarray:
    """``a`` moved by ``(da, db)`` cells, zero-filled: ``out[i + da, j + db] = a[i, j]``."""
    out = np.zeros_like(a)
    na, nb = a.shape
    src_a = slice(max(0, -da), na - max(0, da))
    dst_a = slice(max(0, da), na - max(0, -da))
    src_b = slice(max(0, -db), nb - max(0, db))
    dst_b = slice(max(0, db), nb - max(0, -db))
    out[dst_a, dst_b] = a[src_a, src_b]
    return out


@functools.lru_cache(maxsize=64)
def lattice_for(
    n_lo: int,
    carrier_freqs_hz: tuple[float, ...],
    raster_hz: float | None,
    tolerance_hz: float,
    order: int,
) -> ToneLattice:
    """The lattice the engine runs a lineup on (cached).

    Carriers on a stated raster share it; otherwise the coarsest raster they share is
    used where its grid is no larger than an axis per carrier (for two carriers the two
    are the same grid: any two tones share a raster, their spacing).

    Parameters
    ----------
    n_lo : int
        LOs, the first tones (an axis each).
    carrier_freqs_hz : tuple of float
        Carrier frequencies (Hz).
    raster_hz : float or None
        A stated raster step (Hz).
    tolerance_hz : float
        How far (Hz) a carrier may sit from the raster.
    order : int
        The analysis order, which weighs the two grids.

    Returns
    -------
    ToneLattice

    Raises
    ------
    ValueError
        When a carrier is off a stated raster (the lineup loader says so first, on one line).
    """
    n = len(carrier_freqs_hz)
    if n < 2:
        return build_lattice(n_lo, None, n)
    if raster_hz is not None:
        steps = raster_steps_hz(carrier_freqs_hz, raster_hz, tolerance_hz)
        if steps is None:
            raise ValueError("a carrier is off the stated raster")
        return build_lattice(n_lo, steps, n, raster_hz)
    found = find_raster(carrier_freqs_hz, tolerance_hz)
    if found is None:
        return build_lattice(n_lo, None, n)
    step, steps = found
    # Points per axis of a cubic's alias-free grid, the yardstick (common practice for a
    # first nonlinearity; the engine sizes its grids itself).
    zone = 4 * order + 1
    along = 4 * order * ((int(steps.max()) + 1) // 2) + 1
    if zone * along > zone**n:
        return build_lattice(n_lo, None, n)
    return build_lattice(n_lo, steps, n, step)
