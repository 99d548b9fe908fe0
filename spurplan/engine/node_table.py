"""Products at a node, merged by physical frequency and combined, for a whole batch.

The engine keeps one phasor per mixing vector and per stage contribution; a report
wants one level per physical frequency.  :func:`node_levels` does that for every
batch element at once (drive points, channels): products whose frequencies coincide
(harmonically related tones) are merged, and the stage contributions are combined
phase-true, worst case (magnitudes add) or as a power sum.  Carriers are always as
modelled.

All arrays are ``(batch, slot)``: slot ``g`` of row ``b`` is the g-th distinct
frequency of that row in ascending order; ``valid`` marks the slots in use.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from spurplan.model.products import orders, tone_index
from spurplan.units import vpeak_to_dbm

# Frequencies closer than this (Hz) are one physical frequency.
SAME_FREQ_HZ = 1e-3


@dataclass(frozen=True)
class NodeLevels:
    """Merged, combined products of a node for every batch element.

    Attributes
    ----------
    freq_hz, level_dbm : ndarray (B, G)
    valid, is_carrier, beyond : ndarray of bool (B, G)
    rep : ndarray of int (B, G)
        Canonical product index of each slot's representative: its strongest member,
        ties to the lowest order, then the lowest index (as ``node_levels`` picks it).
    sign : ndarray of int (B, G)
        +1 or -1: the representative's mixing vector times this has positive frequency.
    members : ndarray of int (B, G)
        How many mixing vectors share the slot.
    top_source : ndarray of int (B, G)
        Largest contributor: 0 is the input, k is stage k.
    group : ndarray of int (B, P)
        Slot of each canonical product.
    carrier_ref_dbm : ndarray (B,)
        Strongest carrier slot (the dBc reference).
    """

    freq_hz: np.ndarray
    level_dbm: np.ndarray
    valid: np.ndarray
    is_carrier: np.ndarray
    beyond: np.ndarray
    rep: np.ndarray
    sign: np.ndarray
    members: np.ndarray
    top_source: np.ndarray
    group: np.ndarray
    carrier_ref_dbm: np.ndarray

    @property
    def carrier_total_dbm(self) -> np.ndarray:
        """Total power of the carrier slots (dBm), per batch element."""
        mw = np.where(self.is_carrier & self.valid, 10.0 ** (self.level_dbm / 10.0), 0.0).sum(axis=1)
        with np.errstate(divide="ignore"):
            return 10.0 * np.log10(mw)


def node_levels(result, node: int, combine: str, rows=slice(None), carrier_columns=None) -> NodeLevels:
    """Merge and combine the products at ``node`` of a run, for the batch ``rows``.

    ``carrier_columns`` are the product indices of the carriers at the node (after a
    mixer, the wanted products); default the base tones.

    Parameters
    ----------
    result : Result
        A run of the lineup.
    node : int
        Node index: 0 is the lineup input, k the output of stage k.
    combine : {"phase", "worst", "power"}
        How the stage contributions to one frequency combine: phase-true, magnitudes added
        (worst case), or as a power sum (any other value is taken as the power sum).
    rows : slice or index array
        The batch elements to evaluate.
    carrier_columns : sequence of int, optional
        Canonical product indices of the carriers at the node; default the base tones.

    Returns
    -------
    NodeLevels
        Levels in dBm and frequencies in Hz, ``(B, G)`` per selected batch element.
    """
    prop = result.propagation
    mix = result.mix
    f = result.freqs_hz[rows]
    batch, n_prod = f.shape
    contrib = prop.contributions(node, rows)
    # Physical phasors at +|f|: a product at negative m . f is the conjugate.
    contrib = np.where(f[None] < 0, np.conj(contrib), contrib)
    freq = np.abs(f)

    keys = np.round(freq / SAME_FREQ_HZ).astype(np.int64)
    order = np.argsort(keys, axis=1, kind="stable")
    sorted_keys = np.take_along_axis(keys, order, axis=1)
    new = np.ones(sorted_keys.shape, dtype=bool)
    new[:, 1:] = sorted_keys[:, 1:] != sorted_keys[:, :-1]
    group = np.empty_like(order)
    np.put_along_axis(group, order, np.cumsum(new, axis=1) - 1, axis=1)
    flat = (group + n_prod * np.arange(batch)[:, None]).ravel()
    size = batch * n_prod

    def per_slot(weights) -> np.ndarray:
        return np.bincount(flat, weights=np.ravel(weights), minlength=size).reshape(batch, n_prod)

    members = per_slot(np.ones(f.shape)).astype(int)
    coherent = np.stack([per_slot(c.real) + 1j * per_slot(c.imag) for c in contrib])
    modelled = np.abs(coherent.sum(axis=0))
    if combine == "phase":
        level = modelled
    elif combine == "worst":
        level = per_slot(np.abs(contrib).sum(axis=0))
    else:
        level = np.sqrt(per_slot((np.abs(contrib) ** 2).sum(axis=0)))
    carrier = tone_index(mix) >= 0
    if carrier_columns is not None:
        carrier = np.zeros(n_prod, dtype=bool)
        carrier[list(carrier_columns)] = True
    tones = np.broadcast_to(carrier, f.shape)
    is_carrier = per_slot(tones) > 0
    level = np.where(is_carrier, modelled, level)
    strength = np.abs(coherent)
    strength[0] = np.where(is_carrier, strength[0], -1.0)
    top_source = np.argmax(strength, axis=0)
    beyond = per_slot(prop.beyond[:node, rows].any(axis=0)) > 0

    # Representative: the strongest member of each slot (products that coincide are
    # named after the one that matters), then the lowest order, then the lowest index.
    order_of = np.broadcast_to(orders(mix), f.shape).ravel()
    strength_of = np.round(-20 * np.log10(np.abs(contrib.sum(axis=0)).ravel() + 1e-300), 6)
    by_slot = np.lexsort((np.tile(np.arange(n_prod), batch), order_of, strength_of, flat))
    first = by_slot[np.unique(flat[by_slot], return_index=True)[1]]
    rep = np.zeros(size, dtype=int)
    rep[flat[first]] = first % n_prod
    rep = rep.reshape(batch, n_prod)
    slot_freq = np.take_along_axis(freq, rep, axis=1)
    sign = np.where(np.take_along_axis(f, rep, axis=1) >= 0, 1, -1)

    valid = members > 0
    with np.errstate(divide="ignore"):
        level_dbm = np.where(valid, vpeak_to_dbm(level, result.lineup.r_ohm), -np.inf)
    ref = np.where(is_carrier & valid, level_dbm, -np.inf).max(axis=1)
    return NodeLevels(
        freq_hz=slot_freq,
        level_dbm=level_dbm,
        valid=valid,
        is_carrier=is_carrier & valid,
        beyond=beyond,
        rep=rep,
        sign=sign,
        members=members,
        top_source=top_source,
        group=group,
        carrier_ref_dbm=ref,
    )
