"""Products of K base tones: mixing vectors, their frequencies, orders and labels.

A product is a mixing vector ``m`` in Z^K; with base tones at ``f_k`` it sits at
``m . f`` (folded to ``|m . f|``) and has order ``sum |m_k|``.  A real signal holds
``m`` and ``-m`` as one physical product, so the engine keeps one representative per
pair: the *canonical* one, whose first nonzero entry is positive.  That choice does
not depend on the tone frequencies, so a tuning sweep can move the tones without
re-indexing anything.

Array conventions used throughout spurplan: product arrays are ``(batch, product)``;
mixing-vector arrays are ``(product, tone)``.
"""

from __future__ import annotations

import functools
import itertools

import numpy as np


@functools.lru_cache(maxsize=32)
def mixing_vectors(n_tones: int, max_order: int) -> np.ndarray:
    """All canonical mixing vectors of order 1 to ``max_order``.

    Parameters
    ----------
    n_tones : int
        Number of base tones K.
    max_order : int
        Highest order ``sum |m_k|`` kept.

    Returns
    -------
    ndarray of int, shape (P, K)
        Sorted by order, then lexicographically descending, so that the base tones
        come first (``[1, 0]``, ``[0, 1]``, ...).  Read-only (cached).
    """
    rows = []
    for m in itertools.product(range(-max_order, max_order + 1), repeat=n_tones):
        order = sum(abs(v) for v in m)
        if 1 <= order <= max_order and _first_nonzero(m) > 0:
            rows.append(m)
    mix = np.array(rows, dtype=np.int64).reshape(-1, n_tones)
    keys = [(-int(np.abs(r).sum()), *r.tolist()) for r in mix]
    ranked = sorted(range(len(rows)), key=lambda i: keys[i], reverse=True)
    mix = mix[ranked]
    mix.flags.writeable = False  # shared by every caller through the cache
    return mix


def _first_nonzero(m) -> int:
    for v in m:
        if v:
            return v
    return 0


def orders(mix: np.ndarray) -> np.ndarray:
    """Order ``sum |m_k|`` of each mixing vector; shape (P,)."""
    return np.abs(mix).sum(axis=-1)


def product_freqs_hz(mix: np.ndarray, tone_freqs_hz: np.ndarray) -> np.ndarray:
    """Signed product frequencies ``m . f`` in Hz.

    Parameters
    ----------
    mix : ndarray of int, shape (P, K)
    tone_freqs_hz : ndarray, shape (B, K) or (K,)
        Base-tone frequencies in Hz, per batch element.

    Returns
    -------
    ndarray, shape (B, P) (or (P,) for 1-D input)
    """
    return np.asarray(tone_freqs_hz, dtype=float) @ mix.T.astype(float)


def product_index(mix: np.ndarray, vector) -> int:
    """Row of ``mix`` holding ``vector`` or its negative (the canonical representative).

    Parameters
    ----------
    mix : ndarray of int, shape (P, K)
        Canonical mixing vectors.
    vector : sequence of int, length K
        The mixing vector to find, either sign.

    Returns
    -------
    int
        Its row in ``mix``.

    Raises
    ------
    ValueError
        When neither ``vector`` nor its negative is in ``mix`` (beyond the analysis order).
    """
    v = np.asarray(vector)
    hit = np.nonzero((mix == v).all(axis=1) | (mix == -v).all(axis=1))[0]
    if hit.size == 0:
        raise ValueError(f"mixing vector {v.tolist()} is beyond the analysis order")
    return int(hit[0])


def tone_index(mix: np.ndarray) -> np.ndarray:
    """Index of the base tone each product *is*, or -1 for true products; shape (P,)."""
    out = np.full(len(mix), -1, dtype=np.int64)
    unit = (orders(mix) == 1) & (mix.max(axis=1) == 1)
    out[unit] = np.argmax(mix[unit], axis=1)
    return out


def label(m, tone_names: list[str]) -> str:
    """Readable name of a mixing vector, e.g. ``"2f1-f2"``, ``"3f1"``, ``"LO+3f1"``.

    Positive terms come first (in tone order), so ``[-1, 2]`` reads ``"2f2-f1"``.  The
    sign is chosen by the caller (pass the vector whose frequency is positive).

    Parameters
    ----------
    m : sequence of int, length K
        The mixing vector (one integer coefficient per tone).
    tone_names : list of str, length K
        Names of the tones, e.g. ``["f1", "f2"]`` or ``["LO", "f1"]``.

    Returns
    -------
    str
        The label; ``"DC"`` for the all-zero vector.
    """
    terms = []
    for coeff, name in zip(m, tone_names, strict=True):
        coeff = int(coeff)
        if coeff:
            terms.append((coeff < 0, ("" if abs(coeff) == 1 else str(abs(coeff))) + name))
    if not terms:
        return "DC"
    terms.sort(key=lambda t: t[0])
    text = ""
    for i, (negative, term) in enumerate(terms):
        text += ("-" if negative else ("+" if i else "")) + term
    return text


@functools.lru_cache(maxsize=32)
def _labels_cached(
    mix_bytes: bytes, shape: tuple[int, int], names: tuple[str, ...]
) -> tuple[tuple[str, ...], tuple[str, ...]]:
    mix = np.frombuffer(mix_bytes, dtype=np.int64).reshape(shape)
    return tuple(label(m, list(names)) for m in mix), tuple(label(-m, list(names)) for m in mix)


def labels(mix: np.ndarray, tone_names: list[str]) -> tuple[tuple[str, ...], tuple[str, ...]]:
    """Labels of every mixing vector as given and negated (cached): ``(plus, minus)``.

    Parameters
    ----------
    mix : ndarray of int, shape (P, K)
        Mixing vectors.
    tone_names : list of str, length K
        Names of the tones.

    Returns
    -------
    tuple of (tuple of str, tuple of str)
        ``(plus, minus)``: the label of each row of ``mix`` and of its negative, P each.
    """
    mix = np.ascontiguousarray(mix, dtype=np.int64)
    return _labels_cached(mix.tobytes(), mix.shape, tuple(tone_names))


def default_tone_names(n_tones: int) -> list[str]:
    """``["f1", "f2", ...]``: the trade's names for carrier tones."""
    return [f"f{k + 1}" for k in range(n_tones)]
