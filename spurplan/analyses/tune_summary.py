"""A tuning sweep summed up per product and rule or protected band.

A sweep over a tuning range lists, channel by channel, every product that fails or lands
in a protected band (:attr:`spurplan.analyses.sweep.TuneSweep.rows`): thousands of rows
for a band of channels, most of them one product crossing one band with a wide margin.
What a designer signs is shorter: for each product and the rule (or protected band) that
judges it, the channels where it fails or lands there, and the channel where its margin
is least.  :func:`tune_summary` builds that, one entry per product, rule and band, worst
first; the front ends only format it.

The channels are the swept values as given (the strongest carrier's frequency, or with a
mixer the first mixer's LO: :attr:`TuneSweep.variable`).  A run is a stretch of
consecutive channels (in the order they were swept) where the entry's product is listed;
its first and last channels are channels of the sweep.  Where a product fails, the edges
of its failing stretch are those the sweep refined by bisection
(:attr:`TuneSweep.failing`, to :data:`spurplan.analyses.sweep.FREQ_TOL_HZ`), where they
belong to that stretch's ends.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:  # annotations only
    from spurplan.analyses.sweep import TuneSweep
    from spurplan.model.masks import Mask

ENTRY_KEYS = (
    "label",
    "rule",
    "band",
    "rule_is_band",
    "pass",
    "channels",
    "failing_channels",
    "runs",
    "failing_ranges",
    "worst_channel_hz",
    "worst_freq_hz",
    "worst_margin_db",
)


def band_rule_labels(mask: Mask | None) -> set[str]:
    """Labels of the rules that are a protected band's own limit.

    Parameters
    ----------
    mask : Mask or None
        The lineup's mask (``None``: no rules).

    Returns
    -------
    set of str
        :attr:`spurplan.model.masks.Rule.label` of every rule held by a band; a row
        judged by one of them needs only the band's name to say what judges it.
    """
    if mask is None:
        return set()
    return {r.label for b in mask.bands for r in b.rules}


def row_channels(sweep: TuneSweep) -> np.ndarray:
    """Index into ``sweep.carrier_hz`` of the channel of each row of ``sweep.rows``.

    Parameters
    ----------
    sweep : TuneSweep
        A tuning sweep.

    Returns
    -------
    ndarray of int, shape (R,)
        The sweep's own record when it has one; else rebuilt from the rows, which the
        sweep lists channel by channel in sweep order (two equal channels next to each
        other then count as one).
    """
    stored = getattr(sweep, "row_channel", None)
    if stored is not None:
        return np.asarray(stored, dtype=int)
    out = np.empty(len(sweep.rows["carrier_hz"]), dtype=int)
    i = 0
    for r, value in enumerate(sweep.rows["carrier_hz"]):
        while sweep.carrier_hz[i] != value:
            i += 1
        out[r] = i
    return out


def _runs(idx: np.ndarray) -> list[tuple[int, int]]:
    """Stretches of consecutive channel indices in sorted ``idx``: (first, last) pairs."""
    if idx.size == 0:
        return []
    breaks = np.nonzero(np.diff(idx) > 1)[0]
    starts = np.concatenate([[idx[0]], idx[breaks + 1]])
    stops = np.concatenate([idx[breaks], [idx[-1]]])
    return [(int(a), int(b)) for a, b in zip(starts, stops, strict=True)]


def _refined(edge_hz: float, channel_hz: float, neighbour_hz: float | None) -> float:
    """``edge_hz`` when it lies between ``channel_hz`` (included) and its outer neighbour
    (excluded), i.e. when the sweep refined this end; else the channel itself."""
    if neighbour_hz is None or neighbour_hz == channel_hz:
        return edge_hz if edge_hz == channel_hz else channel_hz
    t = (edge_hz - channel_hz) / (neighbour_hz - channel_hz)
    return edge_hz if 0.0 <= t < 1.0 else channel_hz


def tune_summary(sweep: TuneSweep) -> list[dict]:
    """One entry per product, rule and protected band of a tuning sweep, worst first.

    Parameters
    ----------
    sweep : TuneSweep
        What :func:`spurplan.analyses.sweep.tune_sweep` found.

    Returns
    -------
    list of dict
        Sorted by worst margin (lowest first), then product label.  Each entry holds
        (frequencies in Hz, margins in dB):

        - ``label``: the product; ``rule``: the rule with the least margin where it is
          listed (its :attr:`~spurplan.model.masks.Rule.label`); ``band``: the protected
          band(s) it lands in, or None; ``rule_is_band``: the rule is that band's own limit;
        - ``pass``: no channel fails; ``channels``, ``failing_channels``: how many
          channels list it, and how many of those fail;
        - ``runs``: the stretches of consecutive channels where it is listed, each
          ``{"first_hz", "last_hz", "channels", "failing_channels"}`` (channels of the sweep);
        - ``failing_ranges``: the stretches where it fails, ``{"start_hz", "stop_hz",
          "channels"}``, with the sweep's refined edges where they belong to the ends;
        - ``worst_channel_hz``, ``worst_freq_hz``, ``worst_margin_db``: the channel where
          its margin is least, the product's frequency there and that margin.
    """
    rows = sweep.rows
    own = band_rule_labels(sweep.lineup.mask)
    channel = row_channels(sweep)
    x = np.asarray(sweep.carrier_hz, dtype=float)
    groups: dict[tuple, list[int]] = {}
    for r, key in enumerate(zip(rows["label"], rows["rule"], rows["band"], strict=True)):
        groups.setdefault(key, []).append(r)
    entries = []
    for (label, rule, band), members in groups.items():
        margins = np.array(
            [np.nan if rows["margin_db"][r] is None else rows["margin_db"][r] for r in members]
        )
        fails = np.array([rows["pass"][r] is False for r in members])
        chans = channel[members]
        idx = np.unique(chans)
        bad = np.unique(chans[fails])
        runs = []
        for a, b in _runs(idx):
            inside = (idx >= a) & (idx <= b)
            runs.append(
                {
                    "first_hz": float(x[a]),
                    "last_hz": float(x[b]),
                    "channels": int(inside.sum()),
                    "failing_channels": int(np.sum((bad >= a) & (bad <= b))),
                }
            )
        failing_ranges = [
            _failing_range(sweep, label, rule, x, a, b) | {"channels": b - a + 1} for a, b in _runs(bad)
        ]
        if np.isfinite(margins).any():
            w = int(np.nanargmin(margins))
            worst_margin = float(margins[w])
        else:
            w, worst_margin = 0, None
        entries.append(
            {
                "label": label,
                "rule": rule,
                "band": band,
                "rule_is_band": rule in own and band is not None,
                "pass": not fails.any(),
                "channels": int(idx.size),
                "failing_channels": int(bad.size),
                "runs": runs,
                "failing_ranges": failing_ranges,
                "worst_channel_hz": float(x[chans[w]]),
                "worst_freq_hz": float(rows["freq_hz"][members[w]]),
                "worst_margin_db": worst_margin,
            }
        )
    entries.sort(key=lambda e: (np.inf if e["worst_margin_db"] is None else e["worst_margin_db"], e["label"]))
    return entries


def _failing_range(sweep: TuneSweep, label: str, rule, x: np.ndarray, a: int, b: int) -> dict:
    """The failing stretch of channels ``a..b`` with the sweep's refined edges where they
    belong to its ends (a stretch that ends where the product leaves a band keeps the
    channel there: the sweep refines where a product starts to fail, not band edges)."""
    start, stop = float(x[a]), float(x[b])
    for r in sweep.failing:
        if r["label"] != label or r["rule"] != rule:
            continue
        lo, hi = sorted((r["start_hz"], r["stop_hz"]))
        if hi < min(x[a], x[b]) or lo > max(x[a], x[b]):
            continue
        start = _refined(r["start_hz"], float(x[a]), float(x[a - 1]) if a > 0 else None)
        stop = _refined(r["stop_hz"], float(x[b]), float(x[b + 1]) if b + 1 < len(x) else None)
        break
    return {"start_hz": start, "stop_hz": stop}
