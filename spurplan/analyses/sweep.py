"""Sweeps: drive level and tuning range, each one batch through the engine.

A drive sweep offsets every carrier's input power together (the strongest carrier's
input power is the sweep variable); a tuning sweep moves every carrier together (the
strongest carrier's frequency is the variable, spacings kept).  Both evaluate the mask
for all points at once; only the edges the answer needs (the highest compliant drive,
the channel where a product starts to fail) are refined point by point, by bisection.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import TYPE_CHECKING

import numpy as np

from spurplan.analyses.check import bands_at, check, evaluate, require_mask
from spurplan.analyses.cluster import map_on_dask
from spurplan.errors import SweepError  # re-exported (lives in errors.py)
from spurplan.fields import CARRIER_FREQ, CARRIER_POWER
from spurplan.io.channels import sweep_points
from spurplan.model.figure_tables import refuse_beyond, tabled_stages
from spurplan.model.products import labels

if TYPE_CHECKING:  # annotations only (the sweeps take a loaded lineup)
    from spurplan.model.lineup import Lineup

# Points evaluated per engine batch: bounds memory, and paces a progress bar.
CHUNK_POINTS = 2000
# Drive is refined to this (dB); a tuning edge to this (Hz).
DRIVE_TOL_DB = 1e-3
FREQ_TOL_HZ = 1.0
# The most engine work one sweep or yield run may ask for, in grid points: its points
# times the alias-free grid of one point (lineup_file.grid_points).  The engine gets
# through about 10^7 grid points a second on one laptop core (measured with a
# three-tone lineup), so 10^10 is about a quarter of an hour (README, "Limits").
MAX_WORK_GRID_POINTS = 10**10


def work_refusal(lineup, n_points: int, what: str) -> str | None:
    """Why evaluating ``n_points`` points of ``lineup`` is beyond :data:`MAX_WORK_GRID_POINTS`, or None.

    Parameters
    ----------
    lineup : Lineup
        The lineup to be evaluated.
    n_points : int
        Number of evaluations (drive points, channels ...).
    what : str
        Names the points in the message ("drive points", "channels", "evaluated points").

    Returns
    -------
    str or None
        The refusal message, or None when ``n_points`` times the engine grid points of
        one evaluation is within the budget.
    """
    from spurplan.io.lineup_file import grid_points

    per_point, _ = grid_points(lineup.stages, lineup.tone_lattice, lineup.analysis.max_order)
    total = int(n_points) * per_point
    if total <= MAX_WORK_GRID_POINTS:
        return None
    return (
        f"{n_points} {what} x {per_point} engine grid points each ({lineup.n_tones} tones to order "
        f"{lineup.analysis.max_order}) = {total:.3g}: expected at most {MAX_WORK_GRID_POINTS:.0e} grid points, "
        "spurplan's work budget for one run (use fewer points or a lower max_order)"
    )


def check_within(value: float, within, option: str, unit: str) -> None:
    """Raise a :class:`SweepError` naming ``option`` unless ``value`` is ``within``
    (a :class:`~spurplan.fields.Within`, in the unit the option was read in).

    Parameters
    ----------
    value : float
        The option's value, in ``unit``.
    within : Within
        The plausible range, in the same unit.
    option : str
        The argument, as the library names it (``"start"``); shown as ``{@start}``
        (:meth:`spurplan.errors.SpurplanError.shown`).
    unit : str
        The unit shown in the message (dBm, Hz ...).

    Raises
    ------
    SweepError
        ``value`` is outside the range.
    """
    if value not in within:
        raise SweepError(f"{{@{option}}} {value:g} {unit}: {within.expected()}")


def _drive_range(start_dbm: float, stop_dbm: float, target_output: bool) -> None:
    """Both ends of a drive sweep within the carrier power range (input or output)."""
    which = "output" if target_output else "input"
    within = replace(CARRIER_POWER, what=f"a carrier {which} power")
    check_within(start_dbm, within, "start", "dBm")
    check_within(stop_dbm, within, "stop", "dBm")


def _batched(function, lineup, points: np.ndarray, combine, progress, scheduler=None, workers=None):
    """Evaluate ``function(lineup, points[chunk], combine)`` chunk by chunk, in process or on
    a Dask cluster (``scheduler`` or ``workers``, as the yield's); concatenate the arrays it
    returns.  The chunks and their arithmetic are the same either way, so are the results."""
    starts = range(0, len(points), CHUNK_POINTS)
    jobs = [(lineup, points[s : s + CHUNK_POINTS], combine) for s in starts]
    if scheduler is not None or workers is not None:
        parts, _ = map_on_dask(function, jobs, scheduler, workers, progress, size_of=lambda job: len(job[1]))
    else:
        parts = []
        for job in jobs:
            parts.append(function(*job))
            if progress is not None:
                progress(len(job[1]))
    return [np.concatenate(p) for p in zip(*parts, strict=True)]


def _drive_chunk(lineup, chunk: np.ndarray, combine):
    """One chunk of a drive sweep: slot frequencies and levels, limits, margins, worst margin,
    reference-carrier output and the extrapolation flag, per drive offset (dB)."""
    result, levels, ev, out = _drive_eval(lineup, chunk, combine)
    return (
        levels.freq_hz,
        levels.level_dbm,
        ev.limit_dbm,
        ev.margin_db,
        ev.worst_margin_db,
        out,
        result.propagation.extrapolated.any(axis=0),
        ~result.propagation.converged.all(axis=0),
    )


def _tune_chunk(lineup, chunk: np.ndarray, combine):
    """One chunk of a tuning sweep: slot frequencies, margins, rules, representatives, signs
    and the worst margin, per swept frequency (Hz)."""
    result = lineup.run(tone_freqs_hz=lineup.tuned_tones_hz(chunk))
    levels = result.levels(None, combine)
    ev = evaluate(lineup, result, levels)
    unsettled = ~result.propagation.converged.all(axis=0)
    return levels.freq_hz, ev.margin_db, ev.rule, levels.rep, levels.sign, ev.worst_margin_db, unsettled


def _drive_eval(lineup, offsets_db: np.ndarray, combine):
    result = lineup.run(drive_offset_db=offsets_db)
    levels = result.levels(None, combine)
    ev = evaluate(lineup, result, levels)
    k = lineup.reference_carrier_index
    out = result.carrier_levels_dbm_batch()[:, k]
    return result, levels, ev, out


@dataclass(frozen=True)
class DriveSweep:
    """Products and margins against drive.

    Attributes
    ----------
    input_dbm, output_dbm : ndarray (B,)
        Strongest carrier at the lineup input and output (modelled).
    level_dbm, margin_db : ndarray (B, G)
        Slot levels and margins (NaN where no rule applies).
    labels : list of str
        Label of each slot (slots are the same products at every drive).
    worst_margin_db : ndarray (B,)
    max_compliant_input_dbm, max_compliant_output_dbm : float or None
        The highest drive up to which the mask is met (refined to 0.001 dB).
    limiting : dict or None
        The product and rule that set it.
    status : str
        "limited", "compliant throughout", "fails throughout" or "fails at the lowest
        drive" (some higher drive passes, but no stretch from the low end does).
    target_output : bool
        Whether the swept drive was the carrier's output power (else its input power).
    """

    lineup: Lineup
    input_dbm: np.ndarray
    output_dbm: np.ndarray
    freq_hz: np.ndarray
    level_dbm: np.ndarray
    limit_dbm: np.ndarray
    margin_db: np.ndarray
    labels: list
    worst_margin_db: np.ndarray
    max_compliant_input_dbm: float | None
    max_compliant_output_dbm: float | None
    limiting: dict | None
    status: str
    extrapolated: np.ndarray
    target_output: bool = False
    unsettled: np.ndarray | None = None

    @property
    def unsettled_signed(self) -> int:
        """Points within the compliant range whose levels did not settle (at most UNCERTAIN)."""
        if self.unsettled is None or self.max_compliant_input_dbm is None:
            return 0
        return int(np.sum(self.unsettled & (self.input_dbm <= self.max_compliant_input_dbm + 1e-9)))

    @property
    def rows(self) -> dict[str, list]:
        """One row per drive point: levels, worst margin and the product that sets it.

        An attribute, as :attr:`TuneSweep.rows` is (built afresh on each access).
        """
        masked = np.where(np.isnan(self.margin_db), np.inf, self.margin_db)
        worst_slot = np.argmin(masked, axis=1)
        checked = np.isfinite(self.worst_margin_db)
        return {
            "input_dbm": self.input_dbm.tolist(),
            "output_dbm": [None if not np.isfinite(v) else float(v) for v in self.output_dbm],
            "worst_margin_db": [
                float(w) if ok else None for w, ok in zip(self.worst_margin_db, checked, strict=True)
            ],
            "worst_label": [
                self.labels[g] if ok else None for g, ok in zip(worst_slot, checked, strict=True)
            ],
            "pass": [
                bool(w >= 0) if ok else None for w, ok in zip(self.worst_margin_db, checked, strict=True)
            ],
            "model_extrapolated": self.extrapolated.tolist(),
        }

    def _repr_html_(self) -> str:
        """Jupyter: the status and verdict data, then one row per drive point."""
        # the one upward door: presentation, imported on use
        from spurplan.output.documents import drive_html

        return drive_html(self)

    def plot(self, size_px=(1200, 700)):
        """Products and limits against drive; returns a matplotlib Figure."""
        # the one upward door: presentation, imported on use
        from spurplan.output.plots import drive_figure

        return drive_figure(self, size_px)

    def table(self):
        """:attr:`rows` as a pandas DataFrame."""
        import pandas as pd

        return pd.DataFrame(self.rows)


def drive_sweep(
    lineup,
    start_dbm: float,
    stop_dbm: float,
    step_db: float,
    *,
    target_output: bool = False,
    combine=None,
    progress=None,
    scheduler: str | None = None,
    workers: int | None = None,
) -> DriveSweep:
    """Sweep the drive; find the highest compliant drive.

    Parameters
    ----------
    lineup : Lineup
        Must have a mask.
    start_dbm, stop_dbm, step_db : float
        Input power of the strongest carrier (dBm), or with ``target_output`` its
        output power: the inputs are then found by inverting the modelled transfer.
        The step is in dB.
    target_output : bool, optional
        Sweep the output power of the reference carrier instead of its input power.
    combine : str, optional
        Override of the analysis combining mode.
    progress : callable, optional
        Called with the number of points evaluated after each chunk.
    scheduler : str or None, optional
        Run the chunks on this dask.distributed scheduler (identical results).
    workers : int or None, optional
        Run the chunks on a local Dask cluster of this many workers (identical results).

    Returns
    -------
    DriveSweep
        Levels (dBm) and margins (dB) at every drive, shape (B, G), and the highest
        compliant input and output drive (dBm), refined to 0.001 dB.

    Raises
    ------
    LineupError
        The lineup has no mask.
    SweepError
        A bad range, too many points, or more work than one run may do.
    """
    require_mask(lineup)
    k = lineup.reference_carrier_index
    nominal = lineup.carriers[k].power_dbm
    _drive_range(start_dbm, stop_dbm, target_output)
    points = sweep_points(start_dbm, stop_dbm, step_db, "drive", "dBm", "dB")
    if why := work_refusal(lineup, len(points), "drive points"):
        raise SweepError(why)
    offsets = points - nominal
    if target_output:
        offsets = _inputs_for_outputs(lineup, points, combine)
    valid = np.isfinite(offsets)
    run_offsets = np.where(valid, offsets, 0.0)

    freq, level, limit, margin, worst, out, extrap, unsettled = _batched(
        _drive_chunk, lineup, run_offsets, combine, progress, scheduler, workers
    )
    worst = np.where(valid, worst, np.nan)
    labels = _slot_labels(lineup, run_offsets[:1], combine)
    inputs = nominal + offsets
    ok = worst >= 0
    status, x_in, x_out, limiting = "compliant throughout", None, None, None
    if valid.any() and not ok[valid][0]:
        # The lowest drive already fails: there is no compliant stretch from the low end to
        # sign, even where a higher drive passes (a power-dependent rule, say).
        status = "fails throughout" if not ok[valid].any() else "fails at the lowest drive"
    first_bad = np.nonzero(valid & ~ok)[0]
    if status != "fails at the lowest drive" and first_bad.size and first_bad[0] > 0 and ok[first_bad[0] - 1]:
        status = "limited"
        lo, hi = offsets[first_bad[0] - 1], offsets[first_bad[0]]
        edge, _ = _bisect(lambda x: _worst_at(lineup, x, combine) >= 0, lo, hi, DRIVE_TOL_DB)
        x_in = nominal + edge
        x_out, limiting = _limiting(lineup, edge, min(edge + DRIVE_TOL_DB, hi), combine)
    elif status == "compliant throughout" and valid.any():
        last = np.nonzero(valid)[0][-1]
        x_in, x_out = float(inputs[last]), float(out[last])
    return DriveSweep(
        lineup=lineup,
        input_dbm=inputs,
        output_dbm=np.where(valid, out, np.nan),
        freq_hz=freq,
        level_dbm=level,
        limit_dbm=limit,
        margin_db=margin,
        labels=labels,
        worst_margin_db=worst,
        max_compliant_input_dbm=x_in,
        max_compliant_output_dbm=x_out,
        limiting=limiting,
        status=status,
        extrapolated=extrap,
        unsettled=np.asarray(unsettled, dtype=bool),
        target_output=target_output,
    )


def _slot_labels(lineup, offsets, combine) -> list[str]:
    result = lineup.run(drive_offset_db=offsets)
    return result.slot_labels(result.levels(None, combine, rows=slice(0, 1)), 0)


def _worst_at(lineup, offset_db: float, combine) -> float:
    _result, _, ev, _ = _drive_eval(lineup, np.array([offset_db]), combine)
    return float(ev.worst_margin_db[0])


def _limiting(lineup, ok_offset: float, bad_offset: float, combine) -> tuple[float, dict]:
    """Output power at the compliant edge, and the product that fails just above it."""
    _result, _, _, out = _drive_eval(lineup, np.array([ok_offset]), combine)

    bad = check(lineup, lineup.run(drive_offset_db=np.array([bad_offset])), combine)
    worst = {c: bad.rows[c][bad.worst] for c in ("label", "freq_hz", "rule", "band", "margin_db", "stage")}
    return float(out[0]), worst


def _bisect(good, good_x: float, bad_x: float, tol: float) -> tuple[float, float]:
    """The edge between ``good_x`` (``good`` holds) and ``bad_x`` (it does not), to ``tol``.

    Either may be the larger.  Returns the last good and the first bad point found; the
    drive search keeps the good side (a drive that passes), the channel search the bad
    one (where a product starts to fail).
    """
    while abs(bad_x - good_x) > tol:
        mid = 0.5 * (good_x + bad_x)
        if good(mid):
            good_x = mid
        else:
            bad_x = mid
    return good_x, bad_x


# Input offsets around the nominal drive searched for a target output (dB).
_TARGET_SEARCH_DB = (-60.0, 40.0)


def _inputs_for_outputs(lineup, targets_dbm: np.ndarray, combine) -> np.ndarray:
    """Input offsets (dB) that give each target output power.

    A target the model cannot reach (above saturation, or below the output at the
    lowest input searched) is a :class:`SweepError` naming the reachable range: a
    point that was never evaluated must not read as meeting the mask.
    """
    k = lineup.reference_carrier_index
    grid = np.arange(*_TARGET_SEARCH_DB, 0.02)  # input offsets around the nominal drive (dB)
    result = lineup.run(drive_offset_db=grid)
    out = result.carrier_levels_dbm_batch()[:, k]
    # The usable part of the transfer is where the output still rises with drive.
    rising = np.concatenate([[True], np.diff(out) > 0])
    stop = np.argmin(rising) if not rising.all() else len(out)
    g, o = grid[:stop], out[:stop]
    inside = (targets_dbm >= o[0]) & (targets_dbm <= o[-1])
    if not inside.all():
        bad = float(targets_dbm[~inside][-1] if targets_dbm[-1] > o[-1] else targets_dbm[~inside][0])
        option = "{@stop}" if bad > o[-1] else "{@start}"
        why = (
            "the output saturates there"
            if bad > o[-1]
            else f"the lowest input searched, {-_TARGET_SEARCH_DB[0]:g} dB below the nominal drive"
        )
        raise SweepError(
            f"{option} {bad:+g} dBm ({{@target_output}}) is unreachable: the modelled output of the strongest "
            f"carrier runs from {o[0]:+.2f} to {o[-1]:+.2f} dBm ({why}); expected target outputs in that range"
        )
    return np.interp(targets_dbm, o, g)


@dataclass(frozen=True)
class TuneSweep:
    """Products and margins against carrier frequency.

    Attributes
    ----------
    carrier_hz : ndarray (B,)
        Strongest carrier frequency of each channel.
    rows : dict of lists
        For each channel, the products that fail or land in a protected band:
        ``carrier_hz, freq_hz, label, band, rule, margin_db, pass``.
    failing : list of dict
        Contiguous channel ranges where a product fails, with the edges refined
        by bisection: ``start_hz, stop_hz, label, rule, band, worst_margin_db``.
    row_channel : ndarray of int (R,) or None
        Index into ``carrier_hz`` of the channel of each row.
    """

    lineup: Lineup
    carrier_hz: np.ndarray
    freq_hz: np.ndarray
    margin_db: np.ndarray
    labels: list
    worst_margin_db: np.ndarray
    rows: dict
    failing: list
    unsettled: np.ndarray | None = None
    row_channel: np.ndarray | None = None

    @property
    def summary(self) -> list[dict]:
        """Per product and rule or protected band: the channels where it fails or lands in
        a band and its worst channel and margin, worst first
        (:func:`spurplan.analyses.tune_summary.tune_summary`; built afresh on each access)."""
        from spurplan.analyses.tune_summary import tune_summary

        return tune_summary(self)

    def _repr_html_(self) -> str:
        """Jupyter: how many ranges fail, then the rows that fail or land in a band."""
        # the one upward door: presentation, imported on use
        from spurplan.output.documents import tune_html

        return tune_html(self)

    def plot(self, size_px=(1200, 700)):
        """Product frequency against carrier frequency; returns a matplotlib Figure."""
        # the one upward door: presentation, imported on use
        from spurplan.output.plots import tune_figure

        return tune_figure(self, size_px)

    def table(self):
        """:attr:`rows` as a pandas DataFrame."""
        import pandas as pd

        return pd.DataFrame(self.rows)

    @property
    def variable(self) -> str:
        """What was swept: "LO" (first mixer's LO) or "carrier"."""
        return "LO" if self.lineup.mixers else "carrier"

    @property
    def passed(self) -> bool:
        """Whether every channel meets the mask (no failing range)."""
        return not self.failing

    @property
    def least_margin(self) -> dict | None:
        """The least margin over every channel and judged product, and where it is.

        Returns
        -------
        dict or None
            ``channel_hz`` (the swept value), ``freq_hz`` and ``label`` of the product,
            ``margin_db``; ``None`` when no product was judged on any channel.
        """
        margin = np.where(np.isfinite(self.margin_db), self.margin_db, np.inf)
        if margin.size == 0 or not np.isfinite(margin).any():
            return None
        i, g = np.unravel_index(int(np.argmin(margin)), margin.shape)
        return {
            "channel_hz": float(self.carrier_hz[i]),
            "freq_hz": float(self.freq_hz[i, g]),
            "label": str(self.labels[i][g]),
            "margin_db": float(margin[i, g]),
        }


def tune_sweep(
    lineup,
    carrier_hz: np.ndarray,
    *,
    combine=None,
    refine: bool = True,
    progress=None,
    scheduler: str | None = None,
    workers: int | None = None,
) -> TuneSweep:
    """Sweep the tuning at fixed drive.

    Without a mixer the swept frequency is the strongest carrier's (every carrier moves
    with it); with mixers it is the first mixer's LO (IF and other LOs fixed), which is
    how an upconverting transmitter tunes.  ``carrier_hz`` holds the swept frequency.

    Parameters
    ----------
    lineup : Lineup
        Must have a mask.
    carrier_hz : ndarray, shape (B,)
        The swept frequency of each channel (Hz).
    combine : str, optional
        Override of the analysis combining mode.
    refine : bool, optional
        Refine the edges of failing channel ranges by bisection.
    progress : callable, optional
        Called with the number of channels evaluated after each chunk.
    scheduler : str or None, optional
        Run the chunks on this dask.distributed scheduler (identical results).
    workers : int or None, optional
        Run the chunks on a local Dask cluster of this many workers (identical results).

    Returns
    -------
    TuneSweep
        Margins (dB) of every product slot per channel, shape (B, G), the rows that
        fail or land in a protected band, and the failing ranges (Hz).

    Raises
    ------
    LineupError
        The lineup has no mask.
    SweepError
        No channels, a tone at or below 0 Hz, a channel out of range, or more work than
        one run may do.
    LineupError
        Under the default beyond-data policy, a channel that puts the reference carrier
        outside a stage's figure table (naming the file, stage and key).
    """
    mask = require_mask(lineup)
    carrier_hz = np.asarray(carrier_hz, dtype=float)
    if carrier_hz.size == 0:
        raise SweepError("no channels: expected at least one carrier frequency")
    tones_for = lineup.tuned_tones_hz
    if np.any(tones_for(carrier_hz) <= 0):
        raise SweepError("a channel puts a tone at or below 0 Hz: expected positive frequencies")

    _check_channels(lineup, carrier_hz, tones_for(carrier_hz))
    # Figure tables against frequency: a channel beyond one is refused before any work.
    if tabled_stages(lineup.stages):
        refuse_beyond(lineup, lineup.stage_reference_hz(tones_for(carrier_hz)))
    if why := work_refusal(lineup, carrier_hz.size, "channels"):
        raise SweepError(why)

    freq, margin, rule, rep, sign, worst, unsettled = _batched(
        _tune_chunk, lineup, carrier_hz, combine, progress, scheduler, workers
    )
    result0 = lineup.run(tone_freqs_hz=tones_for(carrier_hz[:1]))
    plus, minus = labels(result0.mix, lineup.tone_names)
    label = np.where(sign > 0, np.asarray(plus, dtype=object)[rep], np.asarray(minus, dtype=object)[rep])
    rules = evaluate(lineup, result0, result0.levels(None, combine)).rules

    rows: dict[str, list] = {
        c: [] for c in ("carrier_hz", "freq_hz", "label", "band", "rule", "margin_db", "pass")
    }
    failing_mask = np.where(np.isnan(margin), False, margin < 0)
    in_band = np.zeros(freq.shape, dtype=bool)
    for b in mask.bands:
        in_band |= (freq >= b.start_hz) & (freq <= b.stop_hz)
    interesting = (failing_mask | (in_band & (rule >= 0))) & np.isfinite(freq)
    row_channel = np.nonzero(interesting)[0]
    for i, g in zip(*np.nonzero(interesting), strict=True):
        j = int(rule[i, g])
        rows["carrier_hz"].append(float(carrier_hz[i]))
        rows["freq_hz"].append(float(freq[i, g]))
        rows["label"].append(str(label[i, g]))
        rows["band"].append(bands_at(mask, float(freq[i, g])))
        rows["rule"].append(None if j < 0 else rules[j][0].label)
        rows["margin_db"].append(None if j < 0 else float(margin[i, g]))
        rows["pass"].append(None if j < 0 else bool(margin[i, g] >= 0))
    failing = _failing_ranges(
        lineup, carrier_hz, label, failing_mask, margin, rows, tones_for, combine, refine
    )
    return TuneSweep(
        lineup=lineup,
        carrier_hz=carrier_hz,
        freq_hz=freq,
        margin_db=margin,
        labels=label.tolist(),
        worst_margin_db=worst,
        rows=rows,
        failing=failing,
        unsettled=np.asarray(unsettled, dtype=bool),
        row_channel=row_channel,
    )


def _check_channels(lineup, carrier_hz: np.ndarray, tones_hz: np.ndarray) -> None:
    """Every tone, and every carrier after every mixer, within the carrier range, per channel.

    A lower-sideband mixer tuned through its IF puts the wanted product at 0 Hz for one
    channel: refused as the lineup loader refuses it, never checked against no rule.
    """
    from spurplan.units import format_freq

    what = "LO" if lineup.mixers else "carrier"
    checks = [("a tone", tones_hz)]
    for node, stage in enumerate(lineup.stages, start=1):
        if stage.conversion is not None:
            wanted = np.abs(tones_hz @ lineup.carrier_vectors(node).T.astype(float))
            checks.append((f"the wanted product of '{stage.name}'", wanted))
    for name, freqs in checks:
        out = (freqs < CARRIER_FREQ.lo) | (freqs > CARRIER_FREQ.hi)
        if out.any():
            i, j = np.argwhere(out)[0]
            within = replace(CARRIER_FREQ, what="channels that keep it")
            raise SweepError(
                f"the {what} at {format_freq(carrier_hz[i])} puts {name} at {format_freq(freqs[i, j])}: "
                f"{within.expected()}"
            )


def _failing_ranges(
    lineup, carrier_hz, label, failing_mask, margin, rows, tones_for, combine, refine
) -> list[dict]:
    """Contiguous runs of channels where one product fails under one rule, edges refined."""
    out = []
    keys = sorted(
        {(rows["label"][i], rows["rule"][i]) for i in range(len(rows["label"])) if rows["pass"][i] is False}
    )
    for name, rule in keys:
        hits = [
            i
            for i in range(len(rows["label"]))
            if rows["label"][i] == name and rows["rule"][i] == rule and rows["pass"][i] is False
        ]
        bad = np.isin(carrier_hz, [rows["carrier_hz"][i] for i in hits])
        idx = np.nonzero(bad)[0]
        breaks = np.nonzero(np.diff(idx) > 1)[0]
        starts = np.concatenate([[idx[0]], idx[breaks + 1]])
        stops = np.concatenate([idx[breaks], [idx[-1]]])
        for a, b in zip(starts, stops, strict=True):
            lo_hz, hi_hz = float(carrier_hz[a]), float(carrier_hz[b])
            if refine and a > 0:
                lo_hz = _bisect_edge(lineup, name, rule, float(carrier_hz[a - 1]), lo_hz, tones_for, combine)
            if refine and b + 1 < len(carrier_hz):
                hi_hz = _bisect_edge(lineup, name, rule, float(carrier_hz[b + 1]), hi_hz, tones_for, combine)
            inside = [
                i for i in hits if float(carrier_hz[a]) <= rows["carrier_hz"][i] <= float(carrier_hz[b])
            ]
            worst_i = min(inside, key=lambda i: rows["margin_db"][i])
            out.append(
                {
                    "start_hz": lo_hz,
                    "stop_hz": hi_hz,
                    "label": name,
                    "rule": rule,
                    "band": rows["band"][worst_i],
                    "worst_margin_db": rows["margin_db"][worst_i],
                }
            )
    return sorted(out, key=lambda r: (r["start_hz"], r["label"]))


def _fails_at(lineup, name: str, rule_name: str, f_hz: float, tones_for, combine) -> bool:
    """Whether product ``name`` fails under the rule called ``rule_name`` with the carrier at ``f_hz``."""
    result = lineup.run(tone_freqs_hz=tones_for(np.array([f_hz])))
    levels = result.levels(None, combine)
    ev = evaluate(lineup, result, levels)
    names = result.slot_labels(levels, 0)
    for g, n in enumerate(names):
        j = int(ev.rule[0, g])
        if n == name and j >= 0 and ev.margin_db[0, g] < 0:
            rule = ev.rules[j][0]
            if rule.label == rule_name:
                return True
    return False


def _bisect_edge(lineup, name, rule, good_hz: float, bad_hz: float, tones_for, combine) -> float:
    """The frequency between a passing and a failing channel where ``name`` starts to fail."""
    _, edge_hz = _bisect(
        lambda f: not _fails_at(lineup, name, rule, f, tones_for, combine), good_hz, bad_hz, FREQ_TOL_HZ
    )
    return edge_hz
