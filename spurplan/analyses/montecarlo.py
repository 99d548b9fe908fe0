"""Monte Carlo yield over part tolerances and corners, in process or on a Dask cluster.

Tolerances are written per stage in the lineup::

    [[stage]]
    ...
    tolerance = { gain = "0.5 dB", oip3 = { uniform = "2 dB" }, psat = "0.3 dB" }
    # filters: tolerance = { cutoff = "2 %", q_inductor = "10 %", elements = "3 %" }

A bare value is the standard deviation of a normal distribution; ``{ uniform = X }``
spreads uniformly within +/- X.  Level figures move in dB (amplifier ``gain``,
``oip3``, ``oip2``, ``psat``, ``p1db``, ``ohip2`` .. ``ohip9``; attenuator ``loss``;
mixer ``conversion_gain``); filter figures move in per cent (``cutoff`` or
``center``: the whole response in frequency; ``q_inductor``, ``q_capacitor``;
``elements``: every L and C on its own).  Named corners shift figures together::

    [[corner]]
    name = "hot"
    shift = { "pa.gain" = "-1.5 dB", "pa.oip3" = "-2 dB", "harmonic low-pass.cutoff" = "-1 %" }

A sample passes when it meets the mask at every corner (the nominal one if none
are given) and at every channel asked for.  Samples are drawn batch by batch from
``numpy.random.default_rng([seed, batch])``: the seed belongs to the batch, not to
the process that evaluates it, so the result is the same in process and on any
number of Dask workers.  Each batch is one pass of the vectorised engine.

Yield is reported with the Wilson score interval (95 %) for a binomial proportion
(Wilson 1927; see also Agresti and Coull 1998; from memory).
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np

from spurplan.analyses.check import evaluate
from spurplan.engine.products import labels, mixing_vectors, product_freqs_hz
from spurplan.engine.result import Result
from spurplan.engine.torus import propagate
from spurplan.errors import LineupError, UnitError, YieldError  # YieldError: re-exported (lives in errors.py)
from spurplan.fields import Fields, _did_you_mean
from spurplan.model.ladders import ladder_s21
from spurplan.model.stages import Amplifier, Attenuator, Filter, Mixer
from spurplan.model.stages.amplifier import sampled_model
from spurplan.units import parse_gain_db

if TYPE_CHECKING:  # annotations only (lineup_file imports this module's readers)
    from spurplan.model.lineup import Lineup

DB_FIGURES = {
    Amplifier: ("gain", "oip3", "oip2", "psat", "p1db", *(f"ohip{n}" for n in range(2, 10))),
    Attenuator: ("loss",),
    Mixer: ("conversion_gain",),
}
PERCENT_FIGURES = ("cutoff", "center", "q_inductor", "q_capacitor", "elements")
BATCH_SAMPLES = 2000
Z_95 = 1.959963984540054  # two-sided 95 % normal quantile (standard tables)

# Limits checked before a yield run starts (README, "Limits").  One evaluated point is
# one sample at one channel and one corner: a pass of the engine over the lineup.  A
# one-amplifier lineup evaluates about 6 x 10^4 points a second in one process
# (measured), so 10^8 points is half an hour of the smallest work, the most one run may
# ask for; larger lineups are held by the grid budget (sweep.MAX_WORK_GRID_POINTS).
MAX_SAMPLES = 10_000_000
MAX_YIELD_POINTS = 100_000_000
MAX_WORKERS = 256
# numpy seeds are non-negative integers (numpy.random.SeedSequence); one of 64 bits is
# more entropy than a yield run can use, and prints as a number in JSON.
MAX_SEED = 2**64 - 1
# How long a --scheduler address may take to connect and answer as a dask scheduler.
SCHEDULER_TIMEOUT_S = 3.0
# tcp://HOST:PORT or tls://HOST:PORT (dask.distributed's address form), or HOST:PORT;
# a host is a name, an IPv4 address or a bracketed IPv6 address.  The host cannot hold
# ":", so the split is unambiguous and the match linear.
_SCHEDULER_ADDRESS = re.compile(
    r"(?:(?:tcp|tls)://)?(\[[0-9A-Fa-f:.]+\]|[A-Za-z0-9][A-Za-z0-9.-]{0,252}):([0-9]{1,5})"
)


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
        raise YieldError(f"--samples {samples!r}: expected a whole number from 1 to {MAX_SAMPLES}")
    if not 1 <= samples <= MAX_SAMPLES:
        raise YieldError(f"--samples {samples}: expected a whole number from 1 to {MAX_SAMPLES}")
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or not 0 <= seed <= MAX_SEED:
        shown = (
            f"{seed}" if isinstance(seed, (int, np.integer)) and abs(int(seed)) < 10**30 else f"{seed!r}"[:40]
        )
        raise YieldError(
            f"--seed {shown}: expected a whole number from 0 to 2^64 - 1 (numpy seeds are non-negative)"
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


def check_scheduler_address(address) -> str:
    """``address`` as a dask scheduler address (``tcp://HOST:PORT``), or a YieldError."""
    expected = "expected a dask scheduler address such as tcp://127.0.0.1:8786"
    if not isinstance(address, str):
        raise YieldError(f"--scheduler {address!r}: {expected}")
    text = address.strip()
    shown = repr(text[:60] + ("..." if len(text) > 60 else ""))
    m = _SCHEDULER_ADDRESS.fullmatch(text) if len(text) <= 300 else None
    if m is None:
        raise YieldError(f"--scheduler {shown}: {expected}")
    if not 1 <= int(m.group(2)) <= 65535:
        raise YieldError(f"--scheduler {shown}: {expected} (a port from 1 to 65535)")
    return text if "://" in text else f"tcp://{text}"


@dataclass(frozen=True)
class Tolerance:
    """One figure of one stage: ``kind`` "normal" (value = sigma) or "uniform" (+/- value).

    ``value`` is in dB for level figures and a fraction (0.02 = 2 %) for filter figures.
    """

    stage: int
    figure: str
    kind: str
    value: float


@dataclass(frozen=True)
class Corner:
    name: str
    shifts: tuple[tuple[int, str, float], ...] = ()


@dataclass(frozen=True)
class Tolerances:
    """Everything the lineup says about spread: per-figure distributions and corners."""

    items: tuple[Tolerance, ...] = ()
    corners: tuple[Corner, ...] = field(default=())


def _figures_of(stage) -> tuple[tuple[str, ...], bool]:
    for kind, names in DB_FIGURES.items():
        if isinstance(stage, kind):
            return names, False
    if isinstance(stage, Filter) and stage.prototype is not None:
        return PERCENT_FIGURES, True
    return (), False


def _amount(text, f: Fields, key: str, percent: bool) -> float:
    if percent:
        if isinstance(text, str) and text.strip().endswith("%"):
            try:
                value = float(text.strip()[:-1])
            except ValueError:
                value = math.nan
            if math.isfinite(value) and abs(value) < 100:
                return value / 100.0
        raise f.error(key, f"{text!r}: expected a relative amount in %, e.g. '2 %'")

    try:
        return parse_gain_db(text)
    except UnitError as exc:
        raise f.error(key, str(exc)) from None


def read_tolerance(raw, file: str, where: str, index: int, stage) -> tuple[Tolerance, ...]:
    """A stage's ``tolerance = {...}`` table.

    Parameters
    ----------
    raw : dict
        The parsed table: figure name to an amount, ``{ normal = ... }`` or
        ``{ uniform = ... }``.
    file : str
        The lineup file's name, for messages.
    where : str
        The stage, for messages (``"stage 2 'pa'"``).
    index : int
        Position of the stage in the lineup (from 0).
    stage : Stage
        The stage, which says what figures can spread.

    Returns
    -------
    tuple of Tolerance
        One per figure: in dB for level figures, a fraction (from "2 %") for filter
        figures; a bare amount is a normal sigma.

    Raises
    ------
    LineupError
        A figure that cannot spread, a malformed amount or a negative one.
    """
    names, percent = _figures_of(stage)
    f = Fields(raw, file, f"{where} tolerance")
    out = []
    for key in list(raw):
        if key not in names:
            f.raw(key)
            allowed = ", ".join(names) or "none (this stage has no figures that spread)"

            raise f.error(key, f"cannot spread{_did_you_mean(key, names)}: expected one of {allowed}")
        value = raw[key]
        kind = "normal"
        if isinstance(value, dict):
            sub = Fields(value, file, f"{where} tolerance {key}")
            kinds = [k for k in ("normal", "uniform") if k in value]
            if len(kinds) != 1 or len(value) != 1:
                raise sub.error(None, f"{value!r}: expected {{ normal = ... }} or {{ uniform = ... }}")
            kind = kinds[0]
            value = value[kind]
        amount = _amount(value, f, key, percent)
        if amount < 0:
            raise f.error(key, f"{raw[key]!r}: expected a spread >= 0")
        f.raw(key)
        out.append(Tolerance(stage=index, figure=key, kind=kind, value=amount))
    f.finish()
    return tuple(out)


def read_corners(raw, file: str, stages) -> tuple[Corner, ...]:
    """The lineup's ``[[corner]]`` tables.

    Parameters
    ----------
    raw : list of dict
        The parsed ``[[corner]]`` tables.
    file : str
        The lineup file's name, for messages.
    stages : sequence of Stage
        The lineup's stages, which ``"stage.figure"`` keys name.

    Returns
    -------
    tuple of Corner
        Each with its shifts ``(stage index, figure, amount)``, the amount in dB or as
        a fraction as :func:`read_tolerance`.

    Raises
    ------
    LineupError
        Not an array of tables, or a shift naming an unknown stage or figure or with
        a malformed amount.
    """
    if not isinstance(raw, list):
        raise LineupError("'corner' must be an array of tables ([[corner]])", file=file)
    names = {s.name: i for i, s in enumerate(stages)}
    out = []
    for c, table in enumerate(raw, start=1):
        f = Fields(table, file, f"corner {c}")
        name = f.text("name") or f"corner {c}"
        shifts = []
        raw_shift = f.raw("shift", {})
        if not isinstance(raw_shift, dict):
            raise f.error("shift", f'{raw_shift!r}: expected a table {{ "stage.figure" = "-1 dB" }}')
        for key, text in raw_shift.items():
            stage_name, _, figure = key.rpartition(".")
            if stage_name not in names:
                raise f.error("shift", f"{key!r}: expected 'stage.figure' naming a stage of the lineup")
            i = names[stage_name]
            allowed, percent = _figures_of(stages[i])
            if figure not in allowed:
                raise f.error(
                    "shift", f"{key!r}: {figure!r} cannot shift; expected one of {', '.join(allowed)}"
                )
            shifts.append((i, figure, _amount(text, f, "shift", percent)))
        f.finish()
        out.append(Corner(name=name, shifts=tuple(shifts)))
    return tuple(out)


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


def sampled_stages(lineup, deltas: dict, corner: Corner | None, n: int) -> list:
    """The lineup's stages with every sample's figures (per-sample model parameters).

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

    Returns
    -------
    list
        One stage per lineup stage, with (n,) figures ((n, N) for ``elements``) where a
        delta or shift applies.
    """
    shift = {(i, fig): v for i, fig, v in (corner.shifts if corner else ())}
    out = []
    for i, stage in enumerate(lineup.stages):
        d = {}
        names, _ = _figures_of(stage)
        for fig in names:
            value = deltas.get((i, fig), 0.0) + shift.get((i, fig), 0.0)
            if np.ndim(value) or value:
                d[fig] = np.broadcast_to(value, (n,) if fig != "elements" else np.shape(value) or (n,))
        out.append(_sampled(stage, d, n, lineup.r_ohm))
    return out


@dataclass(frozen=True)
class _Sampled:
    """A stage seen by the engine with per-sample parameters."""

    name: str
    transfer: object
    response_fn: object
    data_range_hz: object = None

    def response(self, freq_hz):
        return self.response_fn(freq_hz)


@dataclass(frozen=True)
class _SampledAmplifier(_Sampled):
    """An amplifier with per-sample model and harmonic-zone weights."""

    amplifier: Amplifier | None = None
    weights_db: dict | None = None

    def generated_weight(self, freq_hz, ref_hz=None):
        return self.amplifier.generated_weight(freq_hz, ref_hz, self.weights_db)


def _sampled(stage, d: dict, n: int, r_ohm: float):
    if not d:
        return stage
    if isinstance(stage, Amplifier):
        transfer, weights = sampled_model(stage, d, r_ohm)
        gain = 10 ** (d.get("gain", 0.0) / 20)

        def amp_response(f):
            return stage.response(f) * np.reshape(gain, (-1, 1))

        return _SampledAmplifier(stage.name, transfer, amp_response, stage.data_range_hz, stage, weights)
    if isinstance(stage, Attenuator):
        k = 10 ** (-d["loss"] / 20)
        return _Sampled(stage.name, None, lambda f: stage.response(f) * np.reshape(k, (-1, 1)))
    if isinstance(stage, Mixer):
        return _Sampled(stage.name, stage.transfer.scaled(d["conversion_gain"]), stage.response)
    proto = stage.prototype
    scale = 1.0 + d.get("cutoff", 0.0) + d.get("center", 0.0)
    q_scale = (1.0 + d.get("q_inductor", 0.0), 1.0 + d.get("q_capacitor", 0.0))
    parts = d.get("elements")
    if parts is not None:
        parts = 1.0 + np.asarray(parts)[:, : proto.order]

    def filter_response(f):
        return ladder_s21(
            proto, f, stage.r_ohm, scale=np.broadcast_to(scale, (n,)), q_scale=q_scale, part_scale=parts
        )

    return _Sampled(stage.name, None, filter_response)


def evaluate_batch(
    lineup, tolerances: Tolerances, seed: int, batch: int, n: int, channels_hz=None, combine=None
) -> dict:
    """Draw and evaluate batch ``batch`` of ``n`` samples; a plain dict of arrays (picklable).

    Returns ``worst_margin_db`` (n,), the label and rule of each sample's worst product,
    and ``passed`` (n,).  Every corner and channel is one more copy of the batch through
    the same engine pass.

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
        and ``rule`` lists of str (n), ``passed`` ndarray of bool (n,).
    """
    deltas = draw(tolerances, n, seed, batch)
    corners = tolerances.corners or (None,)
    tones = np.atleast_2d(
        lineup.tone_freqs_hz if channels_hz is None else _channel_tones(lineup, channels_hz)
    )
    worst = np.full(n, np.inf)
    labels = np.full(n, "", dtype=object)
    rules = np.full(n, "", dtype=object)
    mix = mixing_vectors(lineup.n_tones, lineup.analysis.max_order)
    for corner in corners:
        stages = sampled_stages(lineup, deltas, corner, n)
        for t in tones:
            x_in = lineup.input_phasors(mix, np.zeros(n))
            freqs = product_freqs_hz(mix, np.broadcast_to(t, (n, len(t))))
            tone_b = np.broadcast_to(t, (n, len(t)))
            prop = propagate(stages, x_in, mix, freqs, lineup.stage_reference_hz(tone_b))
            result = Result(
                lineup=lineup,
                mix=mix,
                freqs_hz=freqs,
                propagation=prop,
                tone_freqs_hz=np.broadcast_to(t, (n, len(t))),
            )
            levels = result.levels(None, combine)
            ev = evaluate(lineup, result, levels)
            w = ev.worst_margin_db
            slot = ev.worst_slot
            names = _slot_names(result, levels, slot)
            rule = [
                ""
                if ev.rule[b, slot[b]] < 0
                else f"{ev.rules[ev.rule[b, slot[b]]][0].origin}: {ev.rules[ev.rule[b, slot[b]]][0].name}"
                for b in range(n)
            ]
            better = w < worst
            worst = np.where(better, w, worst)
            labels = np.where(better, names, labels)
            rules = np.where(better, np.asarray(rule, dtype=object), rules)
    return {"worst_margin_db": worst, "label": labels.tolist(), "rule": rules.tolist(), "passed": worst >= 0}


def _slot_names(result, levels, slot: np.ndarray) -> np.ndarray:

    plus, minus = labels(result.mix, result.lineup.tone_names)
    rows = np.arange(len(slot))
    rep = levels.rep[rows, slot]
    sign = levels.sign[rows, slot]
    return np.array([plus[r] if s > 0 else minus[r] for r, s in zip(rep, sign, strict=True)], dtype=object)


def _channel_tones(lineup, channels_hz) -> np.ndarray:
    """Base-tone frequencies for each channel (the tuning rule of spurplan.analyses.sweep)."""
    base = lineup.tone_freqs_hz
    if lineup.mixers:
        shift, ref = np.eye(len(base))[0], base[0]
    else:
        shift, ref = np.ones(len(base)), base[len(lineup.mixers) + lineup.reference_carrier_index]
    return base[None, :] + (np.asarray(channels_hz, dtype=float)[:, None] - ref) * shift[None, :]


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
    """What :func:`run_yield` found."""

    lineup: Lineup
    samples: int
    seed: int
    passed: int
    worst_margin_db: np.ndarray
    causes: list
    where: str

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

    def plot(self, size_px=(1000, 600)):
        """Histogram of the samples' worst margins; returns a matplotlib Figure."""
        # the one upward door: presentation, imported on use
        from spurplan.output.plots import yield_figure

        return yield_figure(self, size_px)


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
        Samples passed, each sample's worst margin (dB) and the failing products by count.

    Raises
    ------
    YieldError
        An argument out of range or more work than one run may do.
    LineupError
        The lineup has no mask.
    OutOfDataRange
        The nominal run puts a product outside a stage's data under the default
        beyond-data policy.
    """
    from spurplan.analyses.sweep import work_refusal

    tolerances = lineup.tolerances
    n_channels = 1 if channels_hz is None else int(np.size(channels_hz))
    points = check_yield_request(samples, seed, n_channels, len(tolerances.corners))
    if why := work_refusal(lineup, points, "evaluated points"):
        raise YieldError(why)
    if scheduler is not None and workers is not None:
        raise YieldError("--scheduler and --workers: expected one of them, not both")
    if scheduler is not None:
        scheduler = check_scheduler_address(scheduler)
    if workers is not None and (
        isinstance(workers, bool)
        or not isinstance(workers, (int, np.integer))
        or not 1 <= workers <= MAX_WORKERS
    ):
        raise YieldError(f"--workers {workers!r}: expected a whole number from 1 to {MAX_WORKERS}")
    if lineup.mask is None:
        raise LineupError("no emission limits: expected a [mask] table", file=str(lineup.source))
    # The nominal run first: it applies the lineup's beyond-data policy (an error by
    # default) that the sampled runs, which go straight to the engine, do not.
    lineup.run()
    sizes = [min(batch_samples, samples - s) for s in range(0, samples, batch_samples)]
    jobs = [(lineup, tolerances, seed, b, size, channels_hz, combine) for b, size in enumerate(sizes)]
    if scheduler is not None or workers is not None:
        parts, where = _on_dask(jobs, scheduler, workers, progress)
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
    counts: dict = {}
    for i in np.nonzero(failing)[0]:
        counts[(labels[i], rules[i])] = counts.get((labels[i], rules[i]), 0) + 1
    causes = [
        {"label": k[0], "rule": k[1], "samples": v, "fraction": v / samples}
        for k, v in sorted(counts.items(), key=lambda kv: (-kv[1], kv[0]))
    ]
    return YieldResult(
        lineup=lineup,
        samples=samples,
        seed=seed,
        passed=int((~failing).sum()),
        worst_margin_db=worst,
        causes=causes,
        where=where,
    )


def _batch_job(job):
    return evaluate_batch(*job)


def _on_dask(jobs, scheduler, workers, progress):
    """Evaluate the batches on a dask.distributed cluster (optional dependency).

    A ``scheduler`` is first asked who it is, within :data:`SCHEDULER_TIMEOUT_S`
    (:func:`_probe_scheduler`): an address where nothing listens, or something that is
    no scheduler, is one line rather than a long wait.  A local cluster's workers
    ignore SIGINT, so that Ctrl-C reaches only this process, which closes the cluster
    (in ``finally``) with dask's logging silenced: one "interrupted" line, no worker
    tracebacks.
    """
    try:
        import dask
        from dask.distributed import Client, LocalCluster
    except ImportError:
        raise LineupError(
            "dask.distributed is not installed: expected pip install 'spurplan[dask]' for --scheduler/--workers"
        ) from None
    cluster = client = None
    with _quiet_dask_logs():
        try:
            if scheduler is not None:
                _probe_scheduler(scheduler)
                try:
                    client = Client(scheduler, timeout=SCHEDULER_TIMEOUT_S)
                except Exception as exc:  # any failure of the network boundary
                    raise YieldError(_cannot_use(scheduler, exc)) from None
                where = f"dask scheduler {scheduler}"
            else:
                # Dask's workers trim freed memory back to the OS from 64 kB up by default;
                # the engine allocates and frees grids of megabytes per batch, and the
                # trimming halved its speed (measured with tests/benchmarks/yield.py).
                trim = {"distributed.nanny.pre-spawn-environ.MALLOC_TRIM_THRESHOLD_": str(1 << 30)}
                with dask.config.set(trim):
                    cluster = _local_cluster(
                        LocalCluster,
                        workers,
                        threads_per_worker=1,
                        processes=True,
                        host="127.0.0.1",
                        dashboard_address=None,
                        silence_logs=_SILENT,
                    )
                client = Client(cluster)
                where = f"local dask cluster, {workers} workers"
            futures = client.map(_batch_job, jobs, pure=False)
            parts = []
            for fut, job in zip(futures, jobs, strict=True):
                parts.append(fut.result())
                if progress:
                    progress(job[4])
        except KeyboardInterrupt:
            _close_now(client, cluster)
            client = cluster = None
            raise
        finally:
            if client is not None:
                client.close()
            if cluster is not None:
                cluster.close()
    return parts, where


# After Ctrl-C the cluster gets this long (s) to close; workers still busy with a batch
# are then terminated, so that the interrupt ends the run within seconds.
_INTERRUPT_CLOSE_S = 2.0


def _close_now(client, cluster) -> None:
    """Close ``client`` and ``cluster`` after an interrupt, without waiting for work in flight.

    Parameters
    ----------
    client : dask.distributed.Client or None
    cluster : dask.distributed.LocalCluster or None
        Only a local cluster's worker processes are children of this process; they are
        terminated (SIGTERM, then SIGKILL) if they outlive the short close.
    """
    import contextlib
    import multiprocessing

    with contextlib.suppress(Exception):
        if client is not None:
            client.close(timeout=_INTERRUPT_CLOSE_S)
    with contextlib.suppress(Exception):
        if cluster is not None:
            cluster.close(timeout=_INTERRUPT_CLOSE_S)
    if cluster is not None:
        for child in multiprocessing.active_children():
            child.terminate()
            child.join(1.0)
            if child.is_alive():
                child.kill()


# Above CRITICAL: no dask log record reaches stderr while spurplan runs a cluster.
_SILENT = 100


def _quiet_dask_logs():
    """A context in which the loggers of dask.distributed print nothing (restored after)."""
    import contextlib
    import logging

    @contextlib.contextmanager
    def quiet():
        loggers = [logging.getLogger(name) for name in ("distributed", "dask", "tornado", "asyncio")]
        levels = [lg.level for lg in loggers]
        for lg in loggers:
            lg.setLevel(_SILENT)
        try:
            yield
        finally:
            for lg, level in zip(loggers, levels, strict=True):
                lg.setLevel(level)

    return quiet()


def _local_cluster(factory, workers: int, **options):
    """Start a local cluster whose worker processes ignore SIGINT; returns it.

    A terminal's Ctrl-C goes to the whole process group; each worker would print its
    own KeyboardInterrupt traceback.  An ignored signal stays ignored across fork and
    exec (POSIX, execve), and Python installs its KeyboardInterrupt handler only where
    SIGINT is at its default (signal module documentation), so SIGINT is ignored here
    until the worker processes exist, then restored: this process alone is
    interrupted, and closes the cluster.  The cluster starts in a helper thread so
    that the main thread can restore the handler as soon as the workers are spawned
    (a second or more before they are ready) and Ctrl-C during the start still works.
    Outside the main thread (no signal handlers there) the cluster starts as it is.
    """
    import multiprocessing
    import signal
    import threading

    if threading.current_thread() is not threading.main_thread():
        return factory(n_workers=workers, **options)
    box: dict = {}

    def start():
        try:
            box["cluster"] = factory(n_workers=workers, **options)
        except BaseException as exc:  # handed to the main thread
            box["error"] = exc

    previous = signal.signal(signal.SIGINT, signal.SIG_IGN)
    thread = threading.Thread(target=start, name="spurplan local cluster", daemon=True)
    try:
        thread.start()
        while thread.is_alive():
            # A process is listed once it is forked, so it holds the ignored disposition.
            if previous is not None and len(multiprocessing.active_children()) >= workers:
                signal.signal(signal.SIGINT, previous)
                previous = None
            thread.join(0.02)
    except KeyboardInterrupt:
        # Let the start finish (a second Ctrl-C stops waiting), then close what it made.
        try:
            thread.join()
        finally:
            if "cluster" in box:
                box["cluster"].close()
        raise
    finally:
        if previous is not None:
            signal.signal(signal.SIGINT, previous)
    if "error" in box:
        raise box["error"]
    return box["cluster"]


def _probe_scheduler(address: str, timeout_s: float = SCHEDULER_TIMEOUT_S) -> None:
    """Connect to ``address`` and ask its identity, all within ``timeout_s``; a YieldError otherwise.

    dask.distributed's own client waits 30 s for an address where nothing listens and
    without end for a peer that accepts and stays silent; its reader takes a length
    from whatever bytes arrive.  So the address is asked first, with one deadline for
    the connection and the answer together (``identity`` is a handler every
    dask.distributed server has; a scheduler answers with ``type`` "Scheduler").
    """
    import asyncio

    from distributed.comm import connect

    async def identity():
        comm = await connect(address, timeout=timeout_s)
        try:
            await comm.write({"op": "identity", "reply": True})
            return await comm.read()
        finally:
            comm.abort()

    try:
        reply = asyncio.run(asyncio.wait_for(identity(), timeout_s))
    except TimeoutError:
        raise YieldError(
            f"--scheduler {address}: no dask scheduler answered within {timeout_s:g} s: "
            "expected the address of a running scheduler"
        ) from None
    except Exception as exc:  # anything the peer sends or does is data, not a crash
        raise YieldError(_cannot_use(address, exc)) from None
    if not (isinstance(reply, dict) and reply.get("type") == "Scheduler"):
        raise YieldError(
            f"--scheduler {address}: answered, but not as a dask scheduler: expected the address of a running scheduler"
        )


def _cannot_use(address: str, exc: Exception) -> str:
    """The one-line message for a scheduler address that failed with ``exc``."""
    what = (
        "cannot connect" if isinstance(exc, OSError) and "connect" in str(exc).lower() else "no usable answer"
    )
    return (
        f"--scheduler {address}: {what} ({exc.__class__.__name__}): expected the address of a running "
        f"dask scheduler (waited at most {SCHEDULER_TIMEOUT_S:g} s)"
    )
