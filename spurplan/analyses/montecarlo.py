"""Monte Carlo yield over part tolerances and corners, in process or on a Dask cluster.

Tolerances are written per stage in the lineup::

    [[stage]]
    ...
    tolerance = { gain = "0.5 dB", oip3 = { uniform = "2 dB" }, psat = "0.3 dB" }
    # filters: tolerance = { cutoff = "2 %", q_inductor = "10 %", elements = "3 %" }

A bare value (or ``{ normal = X }``) is the standard deviation of a normal
distribution centred on the stated figure, not a limit (draws are not truncated);
``{ uniform = X }`` is a limit: uniform within +/- X (:func:`draw`).  Every figure of
every stage draws on its own (no correlation).  Level figures move in dB (amplifier
``gain``, ``oip3``, ``oip2``, ``psat``, ``p1db``, ``ohip2`` .. ``ohip9``, and ``h2`` ..
``h9`` in dBc at their stated output power, for the harmonics the stage states;
attenuator ``loss``; mixer ``conversion_gain``); filter figures move in per cent of
the stated value (``cutoff`` or ``center``: the whole response in frequency;
``q_inductor``, ``q_capacitor``; ``elements``: every L and C on its own).  Named
corners shift figures together::

    [[corner]]
    name = "hot"
    shift = { "pa.gain" = "-1.5 dB", "pa.oip3" = "-2 dB", "harmonic low-pass.cutoff" = "-1 %" }

A sample passes when it meets the mask at every corner (the nominal one if none
are given) and at every channel asked for.  The same question is also answered per
corner (over every channel) and per channel (over every corner), each with its Wilson
interval and its leading cause, so that a yield lost at one corner or one end of the
band says where.  Samples are drawn batch by batch from
``numpy.random.default_rng([seed, batch])``: the seed belongs to the batch, not to
the process that evaluates it, so the result is the same in process and on any
number of Dask workers.  Each batch is one pass of the vectorised engine.

Yield is reported with the Wilson score interval (95 %) for a binomial proportion
(Wilson 1927; see also Agresti and Coull 1998; from memory).
"""

from __future__ import annotations

import math
from collections import Counter
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from spurplan.analyses.check import evaluate
from spurplan.analyses.cluster import (  # re-exported: check_scheduler_address is the yield's
    MAX_WORKERS,
    check_scheduler_address,
    map_on_dask,
)
from spurplan.engine.run import run
from spurplan.errors import LineupError, YieldError  # YieldError: re-exported (lives in errors.py)
from spurplan.model.figure_tables import refuse_beyond, tabled_stages
from spurplan.model.products import labels
from spurplan.model.tolerances import Corner, Tolerances

if TYPE_CHECKING:  # annotations only (the yield takes a loaded lineup)
    from spurplan.model.lineup import Lineup

BATCH_SAMPLES = 2000
Z_95 = 1.959963984540054  # two-sided 95 % normal quantile (standard tables)

# Limits checked before a yield run starts (README, "Limits").  One evaluated point is
# one sample at one channel and one corner: a pass of the engine over the lineup.  A
# one-amplifier lineup evaluates about 6 x 10^4 points a second in one process
# (measured), so 10^8 points is half an hour of the smallest work, the most one run may
# ask for; larger lineups are held by the grid budget (sweep.MAX_WORK_GRID_POINTS).
MAX_SAMPLES = 10_000_000
MAX_YIELD_POINTS = 100_000_000
# numpy seeds are non-negative integers (numpy.random.SeedSequence); one of 64 bits is
# more entropy than a yield run can use, and prints as a number in JSON.
MAX_SEED = 2**64 - 1


def check_yield_request(samples, seed, n_channels: int, n_corners: int) -> int:
    """Refuse a run before it starts; returns the number of points it evaluates.

    Parameters
    ----------
    samples : int
        Monte Carlo samples, 1 to :data:`MAX_SAMPLES`.
    seed : int
        0 to :data:`MAX_SEED` (numpy seeds are non-negative).
    n_channels, n_corners : int
        Channels and corners each sample is evaluated at (1 for none given).

    Returns
    -------
    int
        samples x channels x corners, the number of evaluated points.

    Raises
    ------
    YieldError
        When samples x channels x corners exceeds :data:`MAX_YIELD_POINTS`, or an
        argument is out of range.
    """
    if isinstance(samples, bool) or not isinstance(samples, (int, np.integer)):
        raise YieldError(f"{{@samples}} {samples!r}: expected a whole number from 1 to {MAX_SAMPLES}")
    if not 1 <= samples <= MAX_SAMPLES:
        raise YieldError(f"{{@samples}} {samples}: expected a whole number from 1 to {MAX_SAMPLES}")
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or not 0 <= seed <= MAX_SEED:
        shown = (
            f"{seed}" if isinstance(seed, (int, np.integer)) and abs(int(seed)) < 10**30 else f"{seed!r}"[:40]
        )
        raise YieldError(
            f"{{@seed}} {shown}: expected a whole number from 0 to 2^64 - 1 (numpy seeds are non-negative)"
        )
    channels, corners = max(1, n_channels), max(1, n_corners)
    points = int(samples) * channels * corners
    if points > MAX_YIELD_POINTS:
        raise YieldError(
            f"{samples} samples x {channels} channel{'s' * (channels > 1)} x {corners} "
            f"corner{'s' * (corners > 1)} = {points:.3g} "
            f"evaluated points: expected at most {MAX_YIELD_POINTS:.0e}, spurplan's budget for one yield run "
            "(use fewer samples or channels)"
        )
    return points


def draw(tolerances: Tolerances, n: int, seed: int, batch: int) -> dict:
    """Deltas per (stage, figure) for ``n`` samples of batch ``batch``; (n,) arrays.

    ``elements`` draws 64 columns, (n, 64), of which a ladder of order N uses the first N.

    Parameters
    ----------
    tolerances : Tolerances
        The distributions (sigma or half-width in dB, or as a fraction).
    n : int
        Samples in the batch.
    seed : int
        Seed of the run (>= 0).
    batch : int
        Batch index; each (seed, batch) pair has its own numpy generator, so a batch
        draws the same on any worker.

    Returns
    -------
    dict
        ``(stage index, figure)`` to the deltas, (n,) or (n, 64) for ``elements``; in the
        figure's unit (dB or fraction).
    """
    rng = np.random.default_rng([seed, batch])
    out = {}
    for t in tolerances.items:
        width = t.value
        shape = (n, 64) if t.figure == "elements" else (n,)
        if t.kind == "normal":
            out[(t.stage, t.figure)] = rng.normal(0.0, width, shape)
        else:
            out[(t.stage, t.figure)] = rng.uniform(-width, width, shape)
    return out


def sampled_stages(lineup, deltas: dict, corner: Corner | None, n: int, tones_hz=None) -> list:
    """The lineup's stages with every sample's figures (per-sample model parameters).

    With ``tones_hz`` (one channel), stages with figure tables against frequency take
    the figures at that channel as well: the change of each tabled figure from the
    loaded one (:meth:`channel_deltas`) is added to every sample's delta.

    Parameters
    ----------
    lineup : Lineup
        The nominal lineup.
    deltas : dict
        ``(stage index, figure)`` to (n,) deltas, as :func:`draw` returns (dB or fraction).
    corner : Corner or None
        A corner whose shifts are added to every sample; ``None`` for none.
    n : int
        Samples in the batch.
    tones_hz : ndarray (K,), optional
        Base-tone frequencies of one channel (Hz); ``None`` for the lineup's own.

    Returns
    -------
    list
        One stage per lineup stage, with (n,) figures ((n, N) for ``elements``) where a
        delta or shift applies.
    """
    shift = {(i, fig): v for i, fig, v in (corner.shifts if corner else ())}
    ref = None if tones_hz is None else lineup.stage_reference_hz(np.atleast_2d(tones_hz))
    out = []
    for i, stage in enumerate(lineup.stages):
        d = {}
        for fig in stage.spread_figures():
            value = deltas.get((i, fig), 0.0) + shift.get((i, fig), 0.0)
            if np.ndim(value) or value:
                d[fig] = np.broadcast_to(value, (n,) if fig != "elements" else np.shape(value) or (n,))
        if ref is not None and getattr(stage, "figure_tables", None):
            channel = {k: float(v[0]) for k, v in stage.channel_deltas(ref[i]).items() if v[0] != 0.0}
            if channel:
                for fig, change in channel.items():
                    d[fig] = np.broadcast_to(d.get(fig, 0.0) + change, (n,))
                out.append(stage.sampled(d, n, lineup.r_ohm, ref_hz=np.full(n, ref[i][0])))
                continue
        # A stage with nothing moved is its nominal self.
        out.append(stage.sampled(d, n, lineup.r_ohm) if d else stage)
    return out


def evaluate_batch(
    lineup, tolerances: Tolerances, seed: int, batch: int, n: int, channels_hz=None, combine=None
) -> dict:
    """Draw and evaluate batch ``batch`` of ``n`` samples; a plain dict of arrays (picklable).

    Returns ``worst_margin_db`` (n,), the label and rule of each sample's worst product,
    and ``passed`` (n,), over every corner and channel; and the same tallied per corner
    (worst over its channels) and per channel (worst over the corners).  Every corner
    and channel is one more copy of the batch through the same engine pass.

    Parameters
    ----------
    lineup : Lineup
        Must have a mask.
    tolerances : Tolerances
        What spreads, and the corners.
    seed : int
        Seed of the run (>= 0).
    batch : int
        Batch index (selects the generator with ``seed``).
    n : int
        Samples in the batch.
    channels_hz : ndarray, shape (C,), optional
        Swept frequencies (Hz) to evaluate every sample at (as
        :func:`spurplan.analyses.sweep.tune_sweep`); ``None`` for the lineup's own tones.
    combine : str, optional
        Override of the analysis combining mode.

    Returns
    -------
    dict
        ``worst_margin_db`` ndarray (n,) in dB over every corner and channel, ``label``
        and ``rule`` lists of str (n), ``passed`` ndarray of bool (n,), ``unsettled``
        ndarray of bool (n,): a sample whose levels did not settle at some corner or
        channel; ``by_corner`` and ``by_channel``, one tally per corner (in the lineup's
        order; one for the nominal when none are given) and per channel (one for the
        lineup's own tones when none are given): ``failed`` (int) and ``causes``, a dict
        ``(label, rule)`` to the number of samples whose worst product there it is.
    """
    deltas = draw(tolerances, n, seed, batch)
    corners = tolerances.corners or (None,)
    tones = np.atleast_2d(lineup.tone_freqs_hz if channels_hz is None else lineup.tuned_tones_hz(channels_hz))
    # Each corner's sampled stages once: the channels loop inside, so that a channel's
    # tally is complete (every corner seen) before the next one, and only the corners'
    # worst margins, never one per channel and sample, are held.
    # With figure tables against frequency every channel has stages of its own.
    per_channel = bool(tabled_stages(lineup.stages))
    stages_of = [None if per_channel else sampled_stages(lineup, deltas, corner, n) for corner in corners]
    worst = _Worst(n)
    at_corner = [_Worst(n) for _ in corners]
    unsettled = np.zeros(n, dtype=bool)
    by_channel = []
    for t in tones:
        at_channel = _Worst(n)
        for c, stages in enumerate(stages_of):
            if stages is None:
                stages = sampled_stages(lineup, deltas, corners[c], n, tones_hz=t)
            result = run(lineup, tone_freqs_hz=np.broadcast_to(t, (n, len(t))), stages=stages)
            levels = result.levels(None, combine)
            ev = evaluate(lineup, result, levels)
            unsettled |= ~result.propagation.converged.all(axis=0)
            slot = ev.worst_slot
            names = _slot_names(result, levels, slot)
            rule = np.asarray(
                ["" if ev.rule[b, slot[b]] < 0 else ev.rules[ev.rule[b, slot[b]]][0].label for b in range(n)],
                dtype=object,
            )
            at_channel.update(ev.worst_margin_db, names, rule)
            at_corner[c].update(ev.worst_margin_db, names, rule)
        by_channel.append(at_channel.tally())
        worst.update(at_channel.margin_db, at_channel.label, at_channel.rule)
    return {
        "worst_margin_db": worst.margin_db,
        "label": worst.label.tolist(),
        "rule": worst.rule.tolist(),
        "passed": worst.margin_db >= 0,
        "unsettled": unsettled,
        "by_corner": [w.tally() for w in at_corner],
        "by_channel": by_channel,
    }


class _Worst:
    """Each sample's worst margin so far (dB) with the product and rule that set it."""

    def __init__(self, n: int):
        self.margin_db = np.full(n, np.inf)
        self.label = np.full(n, "", dtype=object)
        self.rule = np.full(n, "", dtype=object)

    def update(self, margin_db: np.ndarray, label: np.ndarray, rule: np.ndarray) -> None:
        # Strictly worse only: of equal margins the first seen keeps its name.
        better = margin_db < self.margin_db
        self.margin_db = np.where(better, margin_db, self.margin_db)
        self.label = np.where(better, label, self.label)
        self.rule = np.where(better, rule, self.rule)

    def tally(self) -> dict:
        """``failed`` (samples with a negative worst margin) and ``causes`` among them."""
        failing = self.margin_db < 0
        causes = Counter(zip(self.label[failing].tolist(), self.rule[failing].tolist(), strict=True))
        return {"failed": int(failing.sum()), "causes": dict(causes)}


def _slot_names(result, levels, slot: np.ndarray) -> np.ndarray:

    plus, minus = labels(result.mix, result.lineup.tone_names)
    rows = np.arange(len(slot))
    rep = levels.rep[rows, slot]
    sign = levels.sign[rows, slot]
    return np.array([plus[r] if s > 0 else minus[r] for r, s in zip(rep, sign, strict=True)], dtype=object)


def wilson_interval(passed: int, n: int, z: float = Z_95) -> tuple[float, float]:
    """Wilson score interval for a binomial proportion (Wilson 1927; from memory).

    Parameters
    ----------
    passed : int
        Successes.
    n : int
        Trials; 0 gives (0, 1).
    z : float, optional
        Standard normal quantile of the confidence level (default: 95 %).

    Returns
    -------
    tuple of float
        Lower and upper bound of the proportion, within [0, 1].
    """
    if n == 0:
        return 0.0, 1.0
    p = passed / n
    denom = 1 + z * z / n
    centre = (p + z * z / (2 * n)) / denom
    half = z * math.sqrt(p * (1 - p) / n + z * z / (4 * n * n)) / denom
    return max(0.0, centre - half), min(1.0, centre + half)


@dataclass(frozen=True)
class YieldResult:
    """What :func:`run_yield` found.

    Attributes
    ----------
    lineup : Lineup
    samples, seed, passed : int
    worst_margin_db : ndarray (samples,)
        Each sample's worst margin (dB) over every corner and channel.
    causes : list of dict
        The worst product of each failing sample, by count: ``label``, ``rule``,
        ``samples``, ``fraction``.
    where : str
        Where the batches ran.
    unsettled_passing : int
        Passing samples whose levels did not settle somewhere.
    by_corner, by_channel : tuple of dict
        The same question asked per corner (a sample fails there when its worst product
        over every channel fails at that corner) and per channel (over every corner), in
        the lineup's corner order and the channels' order (:func:`breakdown_row`); one
        ``"nominal"`` corner when the lineup gives none, no channel rows when no channels
        were asked for.
    """

    lineup: Lineup
    samples: int
    seed: int
    passed: int
    worst_margin_db: np.ndarray
    causes: list
    where: str
    unsettled_passing: int = 0
    by_corner: tuple = ()
    by_channel: tuple = ()

    @property
    def yield_fraction(self) -> float:
        return self.passed / self.samples

    @property
    def interval(self) -> tuple[float, float]:
        return wilson_interval(self.passed, self.samples)

    @property
    def rows(self) -> dict[str, list]:
        """:attr:`causes` as columns: ``label``, ``rule``, ``samples`` and ``fraction``."""
        return {c: [r[c] for r in self.causes] for c in ("label", "rule", "samples", "fraction")}

    @property
    def corner_rows(self) -> dict[str, list]:
        """:attr:`by_corner` as columns (keys of :func:`breakdown_row`, ``corner`` first)."""
        return _columns(self.by_corner, "corner")

    @property
    def channel_rows(self) -> dict[str, list]:
        """:attr:`by_channel` as columns (keys of :func:`breakdown_row`, ``channel_hz`` first)."""
        return _columns(self.by_channel, "channel_hz")

    def plot(self, size_px=(1000, 600)):
        """Histogram of the samples' worst margins; returns a matplotlib Figure."""
        # the one upward door: presentation, imported on use
        from spurplan.output.plots import yield_figure

        return yield_figure(self, size_px)


BREAKDOWN_KEYS = (
    "samples",
    "failed",
    "yield",
    "interval_95",
    "leading_label",
    "leading_rule",
    "leading_samples",
)


def breakdown_row(samples: int, tally: dict) -> dict:
    """One corner's or channel's yield, its Wilson interval and its leading cause.

    Parameters
    ----------
    samples : int
        Samples evaluated there (every sample of the run).
    tally : dict
        ``failed`` and ``causes`` (``(label, rule)`` to a count), summed over the batches.

    Returns
    -------
    dict
        :data:`BREAKDOWN_KEYS`: ``yield`` the passing fraction, ``interval_95`` its 95 %
        Wilson interval ``[low, high]``, ``leading_label`` and ``leading_rule`` the
        product and rule that are the worst of most failing samples there (ties to the
        first in label, then rule order; ``""`` when none fails) and ``leading_samples``
        how many samples that is.
    """
    failed = int(tally["failed"])
    lo, hi = wilson_interval(samples - failed, samples)
    causes = tally["causes"]
    lead = min(causes, key=lambda k: (-causes[k], k)) if causes else ("", "")
    return {
        "samples": samples,
        "failed": failed,
        "yield": (samples - failed) / samples,
        "interval_95": [lo, hi],
        "leading_label": lead[0],
        "leading_rule": lead[1],
        "leading_samples": int(causes.get(lead, 0)),
    }


def _merged_tallies(parts: list, key: str) -> list[dict]:
    """The batches' tallies under ``key`` summed position by position."""
    failed = [0] * len(parts[0][key])
    causes: list[Counter] = [Counter() for _ in failed]
    for part in parts:
        for i, tally in enumerate(part[key]):
            failed[i] += tally["failed"]
            causes[i].update(tally["causes"])
    return [{"failed": f, "causes": dict(c)} for f, c in zip(failed, causes, strict=True)]


def _columns(rows, first: str) -> dict[str, list]:
    keys = (first, *BREAKDOWN_KEYS)
    return {k: [r[k] for r in rows] for k in keys}


def run_yield(
    lineup,
    samples: int,
    seed: int = 0,
    channels_hz=None,
    scheduler: str | None = None,
    workers: int | None = None,
    batch_samples: int = BATCH_SAMPLES,
    combine=None,
    progress=None,
) -> YieldResult:
    """Monte Carlo yield of ``lineup`` over its tolerances (see the module docstring).

    Parameters
    ----------
    lineup : Lineup
        Must have a mask; its tolerances and corners say what spreads.
    samples : int
        Monte Carlo samples, 1 to :data:`MAX_SAMPLES`.
    seed : int, optional
        Seed, 0 to :data:`MAX_SEED`; the same seed gives the same samples.
    channels_hz : ndarray, shape (C,), optional
        Swept frequencies (Hz): a sample passes only when it passes at every channel.
    scheduler : str, optional
        Address of a running ``dask.distributed`` scheduler.
    workers : int, optional
        Start a local Dask cluster with this many worker processes.
    batch_samples : int, optional
        Samples per batch (one engine pass, one job for Dask).
    combine : str, optional
        Override of the analysis combining mode.
    progress : callable, optional
        Called with the number of samples done after each batch.

    Returns
    -------
    YieldResult
        Samples passed, each sample's worst margin (dB) and the failing products by count;
        the same per corner and per channel, each with its Wilson interval and leading cause.

    Raises
    ------
    YieldError
        An argument out of range or more work than one run may do.
    LineupError
        The lineup has no mask.
    OutOfDataRange
        The nominal run puts a product outside a stage's data under the default
        beyond-data policy.
    LineupError
        Under the default beyond-data policy, a channel puts the reference carrier
        outside a stage's figure table.
    """
    from spurplan.analyses.sweep import work_refusal

    tolerances = lineup.tolerances
    n_channels = 1 if channels_hz is None else int(np.size(channels_hz))
    points = check_yield_request(samples, seed, n_channels, len(tolerances.corners))
    if why := work_refusal(lineup, points, "evaluated points"):
        raise YieldError(why)
    if scheduler is not None and workers is not None:
        raise YieldError("{@scheduler} and {@workers}: expected one of them, not both")
    if scheduler is not None:
        scheduler = check_scheduler_address(scheduler)
    if workers is not None and (
        isinstance(workers, bool)
        or not isinstance(workers, (int, np.integer))
        or not 1 <= workers <= MAX_WORKERS
    ):
        raise YieldError(f"{{@workers}} {workers!r}: expected a whole number from 1 to {MAX_WORKERS}")
    if lineup.mask is None:
        raise LineupError("no emission limits: expected a [mask] table", file=str(lineup.source))
    # The nominal run first: it applies the lineup's beyond-data policy (an error by
    # default) that the sampled runs, which go straight to the engine, do not; the
    # channels' reference carriers against the stages' figure tables likewise.
    lineup.run()
    if channels_hz is not None and tabled_stages(lineup.stages):
        tuned = lineup.tuned_tones_hz(np.atleast_1d(np.asarray(channels_hz, dtype=float)))
        refuse_beyond(lineup, lineup.stage_reference_hz(tuned))
    sizes = [min(batch_samples, samples - s) for s in range(0, samples, batch_samples)]
    jobs = [(lineup, tolerances, seed, b, size, channels_hz, combine) for b, size in enumerate(sizes)]
    if scheduler is not None or workers is not None:
        parts, where = map_on_dask(
            evaluate_batch, jobs, scheduler, workers, progress, size_of=lambda job: job[4]
        )
    else:
        parts, where = [], "in process"
        for job in jobs:
            parts.append(evaluate_batch(*job))
            if progress:
                progress(job[4])
    worst = np.concatenate([p["worst_margin_db"] for p in parts])
    labels = [x for p in parts for x in p["label"]]
    rules = [x for p in parts for x in p["rule"]]
    failing = worst < 0
    unsettled = np.concatenate([p["unsettled"] for p in parts])
    counts: dict = {}
    for i in np.nonzero(failing)[0]:
        counts[(labels[i], rules[i])] = counts.get((labels[i], rules[i]), 0) + 1
    causes = [
        {"label": k[0], "rule": k[1], "samples": v, "fraction": v / samples}
        for k, v in sorted(counts.items(), key=lambda kv: (-kv[1], kv[0]))
    ]
    names = [c.name for c in tolerances.corners] or ["nominal"]
    by_corner = tuple(
        {"corner": name, **breakdown_row(samples, t)}
        for name, t in zip(names, _merged_tallies(parts, "by_corner"), strict=True)
    )
    by_channel: tuple[dict, ...] = ()
    if channels_hz is not None:
        by_channel = tuple(
            {"channel_hz": float(f), **breakdown_row(samples, t)}
            for f, t in zip(np.ravel(channels_hz), _merged_tallies(parts, "by_channel"), strict=True)
        )
    return YieldResult(
        lineup=lineup,
        samples=samples,
        seed=seed,
        passed=int((~failing).sum()),
        worst_margin_db=worst,
        causes=causes,
        where=where,
        unsettled_passing=int((unsettled & ~failing).sum()),
        by_corner=by_corner,
        by_channel=by_channel,
    )
