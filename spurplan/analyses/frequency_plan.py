"""Frequency planning of a converter: the IF choices that keep every mixer product out.

A transmitter that upconverts a fixed IF tunes its LO with the channel, so each IF
choice moves every mixer product ``|m f_LO + n f_IF|`` (``m >= 0``, ``m + |n|`` up to
the chosen order, the wanted product excepted) across the band as the LO follows the
output channel.  :func:`plan_if` tries IF candidates ``start, start + step, ... <=
stop`` and finds, over every output channel, the products that land in a *forbidden
band*:

* the **output passband**: the band the wanted output occupies over the tuning range,
  ``[lowest channel - B/2, highest channel + B/2]`` with ``B`` the reference carrier's
  stated bandwidth (0 for CW), widened to the 3 dB passband of the first filter after
  the mixer when the lineup has one (the frequencies around the tuned band where its
  ``|S21|`` stays within 3 dB of its best in the tuned band, as
  :mod:`spurplan.analyses.spur_chart` marks a passband).  A product there reaches the
  output as strongly as the wanted one: no fixed filter after the mixer removes it.
* every **protected band** of the lineup's mask (when asked for).

Each band may be widened by a guard on both sides; band edges count as inside.  The
LO follows the output channel ``f_RF`` by the mixer's wanted sideband (common
practice, no source): upper, ``f_RF = f_LO + f_IF`` so ``f_LO = f_RF - f_IF``; lower
with the LO above the IF, ``f_RF = f_LO - f_IF`` so ``f_LO = f_RF + f_IF``; lower with
the LO below it (as the lineup states LO and IF), ``f_RF = f_IF - f_LO`` so ``f_LO =
f_IF - f_RF``.  Either way ``x = m f_LO + n f_IF`` is linear in ``f_IF`` at a fixed
channel, and the product sits at ``|x|``; it is judged on ``x`` against the bands and
their mirror images ``[-hi, -lo]``.

A *spur-free window* is a run of consecutive candidates at none of which any product
lands in a forbidden band on any channel and between none of which any product
crosses one: because ``x`` is linear in ``f_IF``, a product that sits in the same gap
between bands at two neighbouring candidates stays in it in between, and one in
different gaps has crossed a band (the intermediate value theorem).  So every IF from
a window's first to its last candidate is spur-free on every channel, and its
clearance (the distance of the closest product from the nearest band edge) is smallest
at a candidate, since the distance to a gap's edges is concave along a segment.  The
window's true edges lie within one step outside its first and last candidates.

Windows are ranked widest first (``rank="width"``) or by their largest clearance
(``rank="clearance"``); each names the IF in it with the largest clearance (the IF to
choose), the closest product there and its distance, the LO range it implies, and
the products that end the window on either side.

The plan judges frequencies only: it says nothing of levels (a product outside every
band may still fail the mask; run the check or a tuning sweep at the chosen IF), and
only of this mixer's products of its one reference carrier (not of amplifier
harmonics, of intermodulation between several carriers, or of products above the
order).  The work is numpy over candidates x channels x products in blocks of at most
:data:`BLOCK_ELEMENTS`, bounded by :data:`MAX_PLAN_ELEMENTS` before it starts.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from typing import TYPE_CHECKING

import numpy as np

from spurplan.analyses.spur_chart import PASSBAND_DB
from spurplan.errors import LineupError, SweepError
from spurplan.fields import CARRIER_FREQ, Within
from spurplan.io.channels import sweep_points
from spurplan.model.stages import Filter
from spurplan.model.stages.mixer import MAX_SPUR_ORDER, spur_label
from spurplan.units import format_freq, ratio_db

if TYPE_CHECKING:  # annotations only
    from spurplan.model.lineup import Lineup

# IF candidates x channels x products one plan may ask for.  numpy got through about
# 3 x 10^7 of them a second here (5 x 10^8 in 16 s on two shared cores: 41,001
# candidates x 101 channels x 239 products), so the budget is about ten seconds.
MAX_PLAN_ELEMENTS = 3 * 10**8
# Elements of one evaluated block: about ten float64 arrays of this size are alive at once.
BLOCK_ELEMENTS = 2**19
RANKS = ("width", "clearance")
PASSBAND_NAME = "output passband"
GUARD = Within("a guard band", 0.0, 1e12, "Hz")
IF_CANDIDATE = replace(CARRIER_FREQ, what="an IF candidate")
# The LO a plan may ask for: a radio frequency, as the mixer's own lo.freq.
LO_FLOOR_HZ = CARRIER_FREQ.lo
# Passband edge search: probes a factor 1.001 apart outward from the tuned band, then
# bisection to 1 Hz.
_PROBE_RATIO = 1.001
_EDGE_TOL_HZ = 1.0


@dataclass(frozen=True)
class Approach:
    """A product of the mixer near (or in) a forbidden band at one IF and channel.

    Attributes
    ----------
    if_hz, channel_hz, lo_hz : float
        The IF candidate, the output channel and the LO there (Hz).
    m, n : int
        LO and IF orders; the product is at ``|m f_LO + n f_IF|``.
    label : str
        ``"2LO-IF"`` style.
    freq_hz : float
        The product's frequency (Hz).
    band : str
        The forbidden band it is in or nearest to (:data:`PASSBAND_NAME` or protected
        band names, joined where bands overlap).
    distance_hz : float
        Distance from the band's nearest edge (Hz); 0 inside it.
    side : {"in", "below", "above", "crosses"}
        Where the product is relative to that band; ``"crosses"``: it passes through the
        band between this IF and the next candidate above it.
    """

    if_hz: float
    channel_hz: float
    lo_hz: float
    m: int
    n: int
    label: str
    freq_hz: float
    band: str
    distance_hz: float
    side: str


@dataclass(frozen=True)
class IfWindow:
    """A run of spur-free IF candidates (every IF from ``start_hz`` to ``stop_hz`` is spur-free).

    Attributes
    ----------
    start_hz, stop_hz : float
        First and last spur-free candidate (Hz).
    points : int
        Candidates in the window.
    best_if_hz : float
        The candidate with the largest clearance (Hz).
    clearance_hz : float
        Distance of the closest product from the nearest forbidden band at ``best_if_hz``,
        over every channel (Hz).
    closest : Approach
        That product.
    lo_range_hz : (float, float)
        Lowest and highest LO over the channels at ``best_if_hz`` (Hz).
    below, above : Approach or None
        What ends the window: a product landing at the candidate next below (above) it,
        or crossing a band in between; ``None`` at the end of the candidate range.
    """

    start_hz: float
    stop_hz: float
    points: int
    best_if_hz: float
    clearance_hz: float
    closest: Approach
    lo_range_hz: tuple[float, float]
    below: Approach | None
    above: Approach | None

    @property
    def width_hz(self) -> float:
        """``stop_hz - start_hz`` (Hz): 0 for a window of one candidate."""
        return self.stop_hz - self.start_hz


@dataclass(frozen=True)
class IfPlan:
    """What :func:`plan_if` found.

    Attributes
    ----------
    lineup : Lineup
    mixer : str
        The mixer planned.
    injection : {"upper", "lower-lo-above", "lower-lo-below"}
        How the LO follows the channel (module docstring); :attr:`lo_rule` says it in words.
    order : int
        Largest ``m + |n|`` judged.
    guard_hz : float
        Widening of every band on each side (Hz).
    if_hz : ndarray
        The IF candidates (Hz), increasing.
    if_step_hz : float
    channels_hz : ndarray
        Output channels (Hz), increasing.
    channel_source : str
        Where the channels come from, in words.
    passband_hz : (float, float)
        The output passband before the guard (Hz).
    passband_source : str
        How it was found, in words.
    bands : tuple of (str, float, float)
        Every forbidden band judged (name, start Hz, stop Hz), before the guard; the
        output passband first.
    protected_bands : bool
        Whether the mask's protected bands were judged.
    spur_free : ndarray of bool
        Per candidate: no product lands in a band on any channel.
    clearance_hz : ndarray
        Per candidate: distance of the closest product from the nearest band (Hz; 0
        where one lands).
    windows : tuple of IfWindow
        The best windows, best first (at most ``max_windows``).
    window_count : int
        All windows found.
    rank : {"width", "clearance"}
    lineup_if_hz : float
        The IF the lineup states (the reference carrier at the mixer's input).
    lineup_if_rank : int or None
        1-based rank of the window holding the lineup's IF, or None.
    notes : tuple of str
        What the plan assumed or could not know.
    """

    lineup: Lineup
    mixer: str
    injection: str
    order: int
    guard_hz: float
    if_hz: np.ndarray
    if_step_hz: float
    channels_hz: np.ndarray
    channel_source: str
    passband_hz: tuple[float, float]
    passband_source: str
    bands: tuple[tuple[str, float, float], ...]
    protected_bands: bool
    spur_free: np.ndarray
    clearance_hz: np.ndarray
    windows: tuple[IfWindow, ...]
    window_count: int
    rank: str
    lineup_if_hz: float
    lineup_if_rank: int | None
    notes: tuple[str, ...] = field(default=())

    @property
    def found(self) -> bool:
        """At least one spur-free window."""
        return self.window_count > 0

    @property
    def lo_rule(self) -> str:
        """How the LO follows the channel, in words."""
        return LO_RULES[self.injection]

    @property
    def rows(self) -> dict[str, list]:
        """One row per listed window, best first (Hz), for tables, CSV and JSON."""
        cols: dict[str, list] = {c: [] for c in WINDOW_COLUMNS}
        for rank, w in enumerate(self.windows, start=1):
            cols["rank"].append(rank)
            cols["start_hz"].append(w.start_hz)
            cols["stop_hz"].append(w.stop_hz)
            cols["width_hz"].append(w.width_hz)
            cols["points"].append(w.points)
            cols["best_if_hz"].append(w.best_if_hz)
            cols["clearance_hz"].append(w.clearance_hz)
            cols["lo_min_hz"].append(w.lo_range_hz[0])
            cols["lo_max_hz"].append(w.lo_range_hz[1])
            for key, a in (("closest", w.closest), ("below", w.below), ("above", w.above)):
                cols[f"{key}_label"].append(None if a is None else a.label)
                cols[f"{key}_freq_hz"].append(None if a is None else a.freq_hz)
                cols[f"{key}_band"].append(None if a is None else a.band)
                cols[f"{key}_side"].append(None if a is None else a.side)
                cols[f"{key}_channel_hz"].append(None if a is None else a.channel_hz)
            cols["closest_distance_hz"].append(w.closest.distance_hz)
        return cols


LO_RULES = {
    "upper": "upper sideband, RF = LO + IF, so LO = RF - IF",
    "lower-lo-above": "lower sideband with the LO above the IF, RF = LO - IF, so LO = RF + IF",
    "lower-lo-below": "lower sideband with the LO below the IF, RF = IF - LO, so LO = IF - RF",
}
# (s_rf, s_if) of f_LO = s_rf f_RF + s_if f_IF for each injection.
_LO_SIGNS = {"upper": (1, -1), "lower-lo-above": (1, 1), "lower-lo-below": (-1, 1)}

WINDOW_COLUMNS = (
    "rank",
    "start_hz",
    "stop_hz",
    "width_hz",
    "points",
    "best_if_hz",
    "clearance_hz",
    "lo_min_hz",
    "lo_max_hz",
    "closest_label",
    "closest_freq_hz",
    "closest_band",
    "closest_side",
    "closest_channel_hz",
    "closest_distance_hz",
    "below_label",
    "below_freq_hz",
    "below_band",
    "below_side",
    "below_channel_hz",
    "above_label",
    "above_freq_hz",
    "above_band",
    "above_side",
    "above_channel_hz",
)


def mixer_products(order: int, wanted: tuple[int, int]) -> np.ndarray:
    """Every ``(m, n)`` with ``m >= 0``, ``1 <= m + |n| <= order`` but the wanted one.

    One of each ``{(m, n), (-m, -n)}`` pair (the same frequency): ``m > 0``, or ``m = 0``
    and ``n > 0``.  Sorted by order ``m + |n|``, then ``m``, then ``n``, so that the first
    of a set is of the lowest order.

    Parameters
    ----------
    order : int
        Largest ``m + |n|``.
    wanted : (int, int)
        The wanted product, left out: ``(1, 1)`` upper sideband, ``(1, -1)`` lower.

    Returns
    -------
    ndarray of int, shape (P, 2)
        Columns ``m`` and ``n``.
    """
    out = [
        (m, n)
        for m in range(order + 1)
        for n in range(-order, order + 1)
        if 1 <= m + abs(n) <= order and (m > 0 or n > 0) and (m, n) != wanted
    ]
    out.sort(key=lambda mn: (mn[0] + abs(mn[1]), mn[0], mn[1]))
    return np.array(out, dtype=np.int64).reshape(-1, 2)


def _renamed(exc: SweepError, prefix: str) -> SweepError:
    """``exc`` with its arguments ``{@start}`` ... named ``{@<prefix>start}`` ..."""
    text = exc.args[0] if exc.args else str(exc)
    for name in ("start", "stop", "step"):
        text = text.replace(f"{{@{name}}}", f"{{@{prefix}{name}}}")
    return SweepError(text)


def _merged(bands: list[tuple[str, float, float]]) -> tuple[np.ndarray, np.ndarray, list[str]]:
    """Disjoint sorted intervals on the signed axis ``x`` from bands on ``|x|``.

    Each band ``[lo, hi]`` and its mirror ``[-hi, -lo]``; overlapping or touching
    intervals are joined, their names with ", ".

    Returns
    -------
    (ndarray, ndarray, list of str)
        Starts, stops (Hz, increasing) and names.
    """
    spans = [(lo, hi, name) for name, lo, hi in bands] + [(-hi, -lo, name) for name, lo, hi in bands]
    spans.sort(key=lambda s: (s[0], s[1]))
    starts: list[float] = []
    stops: list[float] = []
    names: list[list[str]] = []
    for lo, hi, name in spans:
        if starts and lo <= stops[-1]:
            stops[-1] = max(stops[-1], hi)
            if name not in names[-1]:
                names[-1].append(name)
        else:
            starts.append(lo)
            stops.append(hi)
            names.append([name])
    return np.array(starts), np.array(stops), [", ".join(n) for n in names]


@dataclass(frozen=True)
class _Scan:
    """Per candidate: landing, clearance with its argmin, the lowest-order landing and
    crossing, each with its channel; ``brk[i]`` a product crosses a band between
    candidates ``i`` and ``i + 1``."""

    bad: np.ndarray
    clearance_hz: np.ndarray
    near_c: np.ndarray
    near_p: np.ndarray
    land_p: np.ndarray
    land_c: np.ndarray
    brk: np.ndarray
    cross_p: np.ndarray
    cross_c: np.ndarray


def _first_hit(hit: np.ndarray, c0: int) -> tuple[np.ndarray, np.ndarray]:
    """Lowest product index and its first channel (offset ``c0``) of ``hit`` (I, C, P);
    ``P`` (none) where nothing is hit."""
    n_p = hit.shape[2]
    any_c = np.any(hit, axis=1)  # (I, P)
    has = np.any(any_c, axis=1)
    p = np.where(has, np.argmax(any_c, axis=1), n_p)
    col = np.take_along_axis(hit, np.minimum(p, n_p - 1)[:, None, None], axis=2)[:, :, 0]  # (I, C)
    return p, np.argmax(col, axis=1) + c0


def _scan(if_hz, channels_hz, signs, mn, starts, stops) -> _Scan:
    """Every candidate x channel x product against the forbidden intervals, in blocks."""
    n_if, n_ch, n_p = len(if_hz), len(channels_hz), len(mn)
    s_rf, s_if = signs
    m = mn[:, 0].astype(float)
    n = mn[:, 1].astype(float)
    # x = m f_LO + n f_IF with f_LO = s_rf f_RF + s_if f_IF: coefficients of f_RF and f_IF.
    k_rf, k_if = m * s_rf, m * s_if + n
    a_pad = np.append(starts, np.inf)  # the next interval's start above gap g
    b_pad = np.insert(stops, 0, -np.inf)  # the previous interval's stop below gap g
    bad = np.zeros(n_if, dtype=bool)
    clear = np.full(n_if, np.inf)
    near_c = np.zeros(n_if, dtype=np.int64)
    near_p = np.zeros(n_if, dtype=np.int64)
    land_p = np.full(n_if, n_p, dtype=np.int64)
    land_c = np.zeros(n_if, dtype=np.int64)
    brk = np.zeros(max(n_if - 1, 0), dtype=bool)
    cross_p = np.full(max(n_if - 1, 0), n_p, dtype=np.int64)
    cross_c = np.zeros(max(n_if - 1, 0), dtype=np.int64)
    ch_chunk = max(1, min(n_ch, BLOCK_ELEMENTS // (2 * n_p)))
    for c0 in range(0, n_ch, ch_chunk):
        rf = channels_hz[c0 : c0 + ch_chunk]
        if_chunk = max(1, BLOCK_ELEMENTS // (len(rf) * n_p) - 1)
        for s in range(0, n_if, if_chunk):
            e = min(n_if, s + if_chunk + 1)  # one candidate of overlap for the pairs
            f_if = if_hz[s:e]
            x = k_rf * rf[None, :, None] + k_if * f_if[:, None, None]  # (I, C, P)
            gap = np.searchsorted(stops, x, side="left")  # intervals wholly below x
            inside = np.searchsorted(starts, x, side="right") > gap
            dist = np.where(inside, 0.0, np.minimum(x - b_pad[gap], a_pad[gap] - x))
            flat = dist.reshape(len(f_if), -1)
            arg = np.argmin(flat, axis=1)
            best = flat[np.arange(len(f_if)), arg]
            better = best < clear[s:e]
            clear[s:e] = np.where(better, best, clear[s:e])
            near_c[s:e] = np.where(better, arg // n_p + c0, near_c[s:e])
            near_p[s:e] = np.where(better, arg % n_p, near_p[s:e])
            bad[s:e] |= inside.any(axis=(1, 2))
            p, c = _first_hit(inside, c0)
            lower = p < land_p[s:e]
            land_p[s:e] = np.where(lower, p, land_p[s:e])
            land_c[s:e] = np.where(lower, c, land_c[s:e])
            if e - s > 1:
                moved = gap[1:] != gap[:-1]  # (I - 1, C, P): a band crossed in between
                brk[s : e - 1] |= moved.any(axis=(1, 2))
                p, c = _first_hit(moved, c0)
                lower = p < cross_p[s : e - 1]
                cross_p[s : e - 1] = np.where(lower, p, cross_p[s : e - 1])
                cross_c[s : e - 1] = np.where(lower, c, cross_c[s : e - 1])
    return _Scan(bad, clear, near_c, near_p, land_p, land_c, brk, cross_p, cross_c)


def _edge(response_db, inside_hz: float, outside_hz: float, threshold_db: float) -> float:
    """Bisection to :data:`_EDGE_TOL_HZ` between a frequency in the passband and one below
    ``threshold_db``; returns the last one found in it."""
    good, bad = inside_hz, outside_hz
    while abs(bad - good) > _EDGE_TOL_HZ:
        mid = 0.5 * (good + bad)
        if response_db(np.array([mid]))[0] >= threshold_db:
            good = mid
        else:
            bad = mid
    return good


def filter_passband(
    flt: Filter, tuned_hz: tuple[float, float], top_hz: float
) -> tuple[float, float, list[str]]:
    """The 3 dB passband of ``flt`` around the tuned band (module docstring).

    Parameters
    ----------
    flt : Filter
        The first filter after the mixer.
    tuned_hz : (float, float)
        The tuned output band (Hz).
    top_hz : float
        Highest frequency any judged product can reach (Hz): the search stops there.

    Returns
    -------
    (float, float, list of str)
        Lower and upper edge (Hz; 0 and ``top_hz`` where the filter passes everything up
        to there) and notes.
    """
    lo_t, hi_t = tuned_hz
    data = flt.data_range_hz
    notes: list[str] = []

    def response_db(f):
        f = np.asarray(f, dtype=float)
        known = np.ones(f.shape, dtype=bool) if data is None else (f >= data[0]) & (f <= data[1])
        out = np.full(f.shape, np.inf)  # beyond its data the filter is taken as passing
        if known.any():
            out[known] = ratio_db(flt.response(f[known]))
        return out

    tuned = np.unique(np.concatenate([np.linspace(lo_t, hi_t, 201), [lo_t, hi_t]]))
    in_tuned = response_db(tuned)
    known = np.isfinite(in_tuned)
    if not known.any():
        notes.append(f"the tuned band lies outside the data of '{flt.name}': taken as passing everything")
        return 0.0, top_hz, notes
    threshold = float(np.max(in_tuned[known])) - PASSBAND_DB
    if in_tuned.min() < threshold:
        notes.append(
            f"'{flt.name}' is more than {PASSBAND_DB:g} dB below its best inside the tuned band "
            f"({format_freq(lo_t)} to {format_freq(hi_t)}): the wanted output loses it there"
        )
    # Upward: probes from the tuned band's top to the highest product.
    hi_edge = max(hi_t, top_hz)
    if top_hz > hi_t:
        count = math.ceil(math.log(top_hz / hi_t) / math.log(_PROBE_RATIO)) + 1
        probes = np.minimum(hi_t * _PROBE_RATIO ** np.arange(1, count + 1), top_hz)
        out = np.flatnonzero(response_db(probes) < threshold)
        if out.size:
            k = int(out[0])
            hi_edge = _edge(response_db, float(probes[k - 1]) if k else hi_t, float(probes[k]), threshold)
    # Downward: probes to 1 kHz (the lowest radio frequency a lineup states), then 0 Hz.
    lo_edge = 0.0
    if lo_t > LO_FLOOR_HZ:
        count = math.ceil(math.log(lo_t / LO_FLOOR_HZ) / math.log(_PROBE_RATIO)) + 1
        probes = np.maximum(lo_t / _PROBE_RATIO ** np.arange(1, count + 1), LO_FLOOR_HZ)
        out = np.flatnonzero(response_db(probes) < threshold)
        if out.size:
            k = int(out[0])
            lo_edge = _edge(response_db, float(probes[k - 1]) if k else lo_t, float(probes[k]), threshold)
    if data is not None and (lo_edge < data[0] or hi_edge > data[1]):
        notes.append(
            f"beyond its data ({format_freq(data[0])} to {format_freq(data[1])}) '{flt.name}' is taken "
            "as passing everything"
        )
    return min(lo_edge, lo_t), max(hi_edge, hi_t), notes


def _channels(lineup, channels_hz, k: int) -> tuple[np.ndarray, str]:
    """The output channels (Hz, increasing) and where they come from."""
    out_vec = lineup.carrier_vectors()[k].astype(float)
    if channels_hz is not None:
        ch = np.unique(np.asarray(channels_hz, dtype=float).reshape(-1))
        if ch.size == 0:
            raise SweepError("{@channels_hz}: expected at least one output channel")
        for value in (ch[0], ch[-1]):
            if not np.isfinite(value) or value not in CARRIER_FREQ:
                raise SweepError(f"{{@channels_hz}} {value:g} Hz: {CARRIER_FREQ.expected()}")
        return ch, "as given"
    tune = None if lineup.report is None else lineup.report.tune
    if tune is not None:
        points = sweep_points(tune[0], tune[1], tune[2], "channel", "Hz")
        tones = lineup.tuned_tones_hz(points)
        ch = np.unique(np.abs(tones @ out_vec))
        swept = "the LO" if lineup.mixers else "the carrier"
        return ch, (
            f"[report] tune ({swept} from {format_freq(tune[0])} to {format_freq(tune[1])} in "
            f"{format_freq(tune[2])} steps, at the lineup's IF)"
        )
    rf = float(abs(lineup.tone_freqs_hz @ out_vec))
    return np.array([rf]), "the lineup's one channel (no tuning range stated)"


def plan_if(
    lineup: Lineup,
    if_start_hz: float,
    if_stop_hz: float,
    if_step_hz: float,
    order: int = 7,
    channels_hz=None,
    guard_hz: float = 0.0,
    protected_bands: bool = True,
    rank: str = "width",
    max_windows: int = 20,
) -> IfPlan:
    """Spur-free IF windows of the lineup's mixer over its tuning range (module docstring).

    Parameters
    ----------
    lineup : Lineup
        A lineup with one mixer; its reference carrier is the IF.
    if_start_hz, if_stop_hz, if_step_hz : float
        IF candidates ``start, start + step, ... <= stop`` (Hz).
    order : int
        Largest ``m + |n|`` judged, 1 to 15.
    channels_hz : array_like, optional
        The output channels (Hz); default the lineup's ``[report] tune`` (its LO points
        at the lineup's IF, as :func:`spurplan.analyses.sweep.tune_sweep` tunes), else
        its one output channel.
    guard_hz : float
        Every forbidden band widened by this on both sides (Hz).
    protected_bands : bool
        Judge the mask's protected bands too (default); False: the output passband only.
    rank : {"width", "clearance"}
        Windows widest first, or largest clearance first.
    max_windows : int
        How many windows to describe (all are counted).

    Returns
    -------
    IfPlan

    Raises
    ------
    LineupError
        The lineup has no mixer, or more than one.
    SweepError
        An empty or implausible candidate range, a step <= 0, an order outside 1 to 15,
        candidates that put the LO at or below 1 kHz, or more work than
        :data:`MAX_PLAN_ELEMENTS`.
    """
    where = None if lineup.source is None else str(lineup.source)
    mixers = lineup.mixers
    if len(mixers) != 1:
        found = "none" if not mixers else ", ".join(f"'{m.name}'" for m in mixers)
        raise LineupError(
            f"mixer stages: {found}: expected exactly one mixer (the plan chooses the IF of one conversion)",
            file=where,
        )
    mixer = mixers[0]
    index = lineup.stages.index(mixer)
    if (
        isinstance(order, bool)
        or not isinstance(order, (int, np.integer))
        or not 1 <= order <= MAX_SPUR_ORDER
    ):
        raise SweepError(f"{{@order}} {order!r}: expected an order m + |n| from 1 to {MAX_SPUR_ORDER}")
    if rank not in RANKS:
        raise SweepError(f"{{@rank}} {rank!r}: expected one of {', '.join(RANKS)}")
    if isinstance(max_windows, bool) or not isinstance(max_windows, (int, np.integer)) or max_windows < 1:
        raise SweepError(f"{{@max_windows}} {max_windows!r}: expected a whole number of windows >= 1")
    if not (math.isfinite(guard_hz) and guard_hz in GUARD):
        raise SweepError(f"{{@guard_hz}} {guard_hz:g} Hz: {GUARD.expected()}")
    for name, value in (("if_start", if_start_hz), ("if_stop", if_stop_hz)):
        if math.isfinite(value) and value not in IF_CANDIDATE:
            raise SweepError(f"{{@{name}}} {value:g} Hz: {IF_CANDIDATE.expected()}")
    try:
        if_hz = sweep_points(if_start_hz, if_stop_hz, if_step_hz, "IF candidate", "Hz")
    except SweepError as exc:
        raise _renamed(exc, "if_") from None

    k = lineup.reference_carrier_index
    lineup_if = float(abs(lineup.tone_freqs_hz @ lineup.carrier_vectors(index)[k].astype(float)))
    if mixer.sideband == "upper":
        injection = "upper"
    else:
        injection = "lower-lo-above" if mixer.lo_freq_hz > lineup_if else "lower-lo-below"
    channels, channel_source = _channels(lineup, channels_hz, k)
    s_rf, s_if = _LO_SIGNS[injection]

    # The LO must stay a radio frequency on every channel: LO is linear in IF and RF, so
    # its extremes are at the corners.
    corners = s_rf * channels[[0, -1], None] + s_if * if_hz[None, [0, -1]]
    if corners.min() < LO_FLOOR_HZ or corners.max() > CARRIER_FREQ.hi:
        if injection == "upper":
            arg, limit, bound = "if_stop", channels[0] - LO_FLOOR_HZ, "up to"
        elif injection == "lower-lo-below":
            arg, limit, bound = "if_start", channels[-1] + LO_FLOOR_HZ, "from"
        else:
            arg, limit, bound = "if_stop", CARRIER_FREQ.hi - channels[-1], "up to"
        value = if_stop_hz if arg == "if_stop" else if_start_hz
        raise SweepError(
            f"{{@{arg}}} {format_freq(value)} puts the LO outside {format_freq(LO_FLOOR_HZ)} to "
            f"{format_freq(CARRIER_FREQ.hi)} on a channel ({LO_RULES[injection]}, channels "
            f"{format_freq(channels[0])} to {format_freq(channels[-1])}): expected IF candidates "
            f"{bound} {format_freq(limit)}"
        )

    mn = mixer_products(order, mixer.wanted)
    work = len(if_hz) * len(channels) * len(mn)
    if work > MAX_PLAN_ELEMENTS:
        raise SweepError(
            f"{len(if_hz)} IF candidates x {len(channels)} channels x {len(mn)} products to order {order} = "
            f"{work:.3g}: expected at most {MAX_PLAN_ELEMENTS:.0e} (use a larger {{@if_step}}, fewer "
            "channels or a lower {@order})"
        )

    notes: list[str] = []
    carrier = lineup.carriers[k]
    half_bw = 0.5 * (carrier.bandwidth_hz or 0.0)
    tuned = (float(channels[0] - half_bw), float(channels[-1] + half_bw))
    after = [s for s in lineup.stages[index + 1 :] if isinstance(s, Filter)]
    lo_max = float(corners.max())
    top_hz = order * max(lo_max, float(if_hz[-1]))
    if after:
        lo_p, hi_p, more = filter_passband(after[0], tuned, top_hz)
        notes += more
        passband = (lo_p, hi_p)
        passband_source = (
            f"the tuned output band widened to the {PASSBAND_DB:g} dB passband of '{after[0].name}', "
            "the first filter after the mixer"
        )
    else:
        passband = tuned
        passband_source = "the tuned output band (no filter after the mixer)"
    if half_bw:
        passband_source += f"; channels {format_freq(2 * half_bw)} wide"
    bands = [(PASSBAND_NAME, passband[0], passband[1])]
    mask = lineup.mask
    if protected_bands and mask is not None:
        bands += [(b.name, b.start_hz, b.stop_hz) for b in mask.bands]
    widened = [(name, max(lo - guard_hz, 0.0), hi + guard_hz) for name, lo, hi in bands]
    starts, stops, names = _merged(widened)

    scan = _scan(if_hz, channels, (s_rf, s_if), mn, starts, stops)
    good = ~scan.bad
    link = good[:-1] & good[1:] & ~scan.brk
    idx = np.arange(len(if_hz))
    first = good & np.concatenate([[True], ~link])
    last = good & np.concatenate([~link, [True]])
    w_start, w_stop = idx[first], idx[last]
    count = len(w_start)

    # Per window: its largest clearance and the first candidate that has it.
    if count:
        seg = np.cumsum(first) - 1  # window number of each candidate (valid where good)
        clear_w = np.maximum.reduceat(np.where(good, scan.clearance_hz, -np.inf), w_start)
        at_best = good & (scan.clearance_hz == clear_w[np.clip(seg, 0, count - 1)])
        best = np.minimum.reduceat(np.where(at_best, idx, len(idx)), w_start)
        width = if_hz[w_stop] - if_hz[w_start]
        keys = (idx[w_start], -clear_w, -width) if rank == "width" else (idx[w_start], -width, -clear_w)
        order_w = np.lexsort(keys)
    else:
        best = order_w = np.zeros(0, dtype=np.int64)

    def approach(i: int, c: int, p: int, side: str | None = None) -> Approach:
        f_if, rf = float(if_hz[i]), float(channels[c])
        lo = s_rf * rf + s_if * f_if
        m_p, n_p = int(mn[p, 0]), int(mn[p, 1])
        x = m_p * lo + n_p * f_if
        f = abs(x)
        j = int(np.argmin(np.minimum(np.abs(starts - x), np.abs(stops - x))))
        inside = np.flatnonzero((starts <= x) & (x <= stops))
        if inside.size:
            j, dist, where_ = int(inside[0]), 0.0, "in"
        else:
            dist = float(min(abs(starts[j] - x), abs(stops[j] - x)))
            # On the signed axis a mirrored band is below x when x is above it; say it for |x|.
            centre = 0.5 * (abs(starts[j]) + abs(stops[j]))
            where_ = "below" if f < centre else "above"
        return Approach(f_if, rf, lo, m_p, n_p, spur_label(m_p, n_p), f, names[j], dist, side or where_)

    windows = []
    for w in order_w[:max_windows]:
        a, b, bi = int(w_start[w]), int(w_stop[w]), int(best[w])
        closest = approach(bi, int(scan.near_c[bi]), int(scan.near_p[bi]))
        los = s_rf * channels + s_if * if_hz[bi]
        below = None
        if a > 0:
            if scan.bad[a - 1]:
                below = approach(a - 1, int(scan.land_c[a - 1]), int(scan.land_p[a - 1]))
            else:
                below = approach(a - 1, int(scan.cross_c[a - 1]), int(scan.cross_p[a - 1]), "crosses")
        above = None
        if b < len(if_hz) - 1:
            if scan.bad[b + 1]:
                above = approach(b + 1, int(scan.land_c[b + 1]), int(scan.land_p[b + 1]))
            else:
                above = approach(b, int(scan.cross_c[b]), int(scan.cross_p[b]), "crosses")
        windows.append(
            IfWindow(
                start_hz=float(if_hz[a]),
                stop_hz=float(if_hz[b]),
                points=b - a + 1,
                best_if_hz=float(if_hz[bi]),
                clearance_hz=float(scan.clearance_hz[bi]),
                closest=closest,
                lo_range_hz=(float(los.min()), float(los.max())),
                below=below,
                above=above,
            )
        )
    lineup_rank = None
    holds = np.flatnonzero((if_hz[w_start] <= lineup_if) & (lineup_if <= if_hz[w_stop]))
    if holds.size:
        lineup_rank = int(np.flatnonzero(order_w == holds[0])[0]) + 1

    if len(lineup.carriers) > 1:
        notes.append(
            f"the IF is the reference carrier ({format_freq(lineup_if)}); products between the "
            f"{len(lineup.carriers)} carriers are not judged"
        )
    if protected_bands and (mask is None or not mask.bands):
        notes.append("the mask names no protected band: the output passband alone is judged")
    if len(channels) == 1 and channels_hz is None:
        notes.append(
            "one channel only: state a tuning range ([report] tune, or the output channels) to plan the band"
        )
    return IfPlan(
        lineup=lineup,
        mixer=mixer.name,
        injection=injection,
        order=order,
        guard_hz=float(guard_hz),
        if_hz=if_hz,
        if_step_hz=float(if_step_hz),
        channels_hz=channels,
        channel_source=channel_source,
        passband_hz=(float(passband[0]), float(passband[1])),
        passband_source=passband_source,
        bands=tuple((name, float(lo), float(hi)) for name, lo, hi in bands),
        protected_bands=bool(protected_bands and mask is not None),
        spur_free=good,
        clearance_hz=np.where(good, scan.clearance_hz, 0.0),
        windows=tuple(windows),
        window_count=int(count),
        rank=rank,
        lineup_if_hz=lineup_if,
        lineup_if_rank=lineup_rank,
        notes=tuple(notes),
    )
