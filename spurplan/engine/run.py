"""Running a lineup: every product at every stage, for a batch of drives or tunings.

:func:`run` is what :meth:`spurplan.model.lineup.Lineup.run` calls: it builds the
mixing vectors and input phasors the lineup describes, propagates them through the
stages (:func:`spurplan.engine.torus.propagate`, with linear sections cascaded first
when the analysis asks), applies the policy beyond data ranges, and returns the
:class:`~spurplan.engine.result.Result`.
"""

from __future__ import annotations

from dataclasses import replace
from typing import TYPE_CHECKING

import numpy as np

from spurplan.engine.result import Result
from spurplan.engine.sections import with_sections
from spurplan.engine.torus import Propagation, propagate
from spurplan.errors import OutOfDataRange
from spurplan.model.figure_tables import channel_stages
from spurplan.model.products import label
from spurplan.model.torus_grid import MAX_GRID_POINTS

if TYPE_CHECKING:
    from spurplan.model.lineup import Lineup

# Products above the analysis order are carried through the stages as well: a later
# stage mixes them back onto reported ones (an order-9 product of the driver and two
# carriers make an order-7 product of the PA).  The kept order grows in these steps
# until no reported level moves by more than SETTLE_DB, up to MAX_EXTRA_ORDER.
EXTRA_ORDER_STEP = 2
MAX_EXTRA_ORDER = 12
SETTLE_DB = 0.01
# Below this amplitude ratio to a node's strongest product (-200 dB, the report floor)
# a level only needs to settle to that absolute size.
SETTLE_FLOOR = 1e-10


def run(
    lineup: Lineup, drive_offset_db=0.0, tone_freqs_hz=None, *, stages=None, carrier_phasors_v=None
) -> Result:
    """Compute every product at every stage of ``lineup``.

    Parameters
    ----------
    lineup : Lineup
        The lineup to run.
    drive_offset_db : float or ndarray (B,)
        Added to every carrier's input power (dB); an array makes a batch.
    tone_freqs_hz : ndarray (B, K) or (K,), optional
        Base-tone frequencies (Hz) per batch element (a tuning sweep), in the order of
        :attr:`Lineup.tone_freqs_hz` (LOs, then carriers); default the lineup's own.
    stages : sequence of stages, optional
        Stages to propagate instead of the lineup's own: a Monte Carlo batch's per-sample
        copies (with figure tables, the caller moves them to the channel as well:
        :func:`spurplan.analyses.montecarlo.sampled_stages`).  Without, stages with
        figure tables against frequency are moved to each row's channel
        (:func:`spurplan.model.figure_tables.channel_stages`).  They are propagated as given (no linear-section cascade), and the
        beyond-data policy is left to the nominal run, which
        :func:`spurplan.analyses.montecarlo.run_yield` makes first.
    carrier_phasors_v : ndarray, complex, (B, K_c), optional
        Each carrier's complex peak amplitude (V) per batch element, instead of its stated
        power and phase: the realizations of a multisine (:mod:`spurplan.engine.spectra`).

    Returns
    -------
    Result
        Products at every node, for every batch element.

    Raises
    ------
    OutOfDataRange
        With the default policy, when a product falls outside a stage's data range.
    LineupError
        With the default policy, when a row's channel puts the reference carrier outside
        a stage's figure table.
    """
    lattice = lineup.tone_lattice
    order = lineup.analysis.max_order
    if tone_freqs_hz is None:
        tone_freqs_hz = lineup.tone_freqs_hz
    tones = np.atleast_2d(np.asarray(tone_freqs_hz, dtype=float))
    offset = np.atleast_1d(np.asarray(drive_offset_db, dtype=float))
    batch = max(len(tones), len(offset), 0 if carrier_phasors_v is None else len(carrier_phasors_v))
    tones = np.broadcast_to(tones, (batch, lineup.n_tones))
    offset = np.broadcast_to(offset, (batch,))
    axes = lattice.axes_hz(tones)
    nominal = stages is None
    # Stages whose parameters differ per batch row run whole (no row is cut away).
    per_row = not nominal
    if nominal:
        stages = lineup.stages
        if lineup.analysis.linear_sections == "cascade":
            stages = with_sections(stages, lineup.r_ohm)
        # Figures stated against frequency move with each row's channel
        # (spurplan.model.figure_tables); None where nothing moves: the loaded stages.
        moved = channel_stages(lineup, tones, stages)
        if moved is not None:
            stages, per_row = moved, True
    ref = lineup.stage_reference_hz(tones)
    nonlinear = [i for i, s in enumerate(stages) if s.transfer is not None]
    # One nonlinear stage sees the carriers only: its products up to the order are exact
    # without any kept beyond it.
    extras = list(range(0, MAX_EXTRA_ORDER + 1, EXTRA_ORDER_STEP)) if len(nonlinear) > 1 else [0]
    degree = max((d for s in stages if (d := getattr(s, "grid_degree", None)) is not None), default=1)
    if carrier_phasors_v is not None:
        carrier_phasors_v = np.broadcast_to(
            np.atleast_2d(np.asarray(carrier_phasors_v, dtype=complex)), (batch, len(lineup.carriers))
        )
    unsettled = np.zeros(batch, dtype=bool)
    rows = np.arange(batch)
    prop: Propagation | None = None
    previous = None
    for step, extra in enumerate(extras):
        if step and lattice.grid_points(degree, order + extra) > MAX_GRID_POINTS:
            # No wider set fits the grid budget: what has not settled stays flagged.
            unsettled[rows] |= step == 1
            break
        products = lattice.products(order + extra)
        n_report = int(np.searchsorted(products.orders, order, side="right"))
        # Each product's frequency from its tones: exactly what the tones give (a product at
        # 7 x 100 + 2 x 130 MHz is at 960 MHz, not a rounding either side of a rule's edge).
        freqs = tones[rows] @ products.mix.T.astype(float)
        phasors = None if carrier_phasors_v is None else carrier_phasors_v[rows]
        x_in = lineup.input_phasors(products.mix, offset[rows], phasors)
        part = _cut(propagate(stages, x_in, products.coords, freqs, ref[:, rows], axes[rows]), n_report)
        prop = part if prop is None else _merge(prop, part, rows)
        if previous is not None:
            ok = _settled(previous, part.nodes)
            unsettled[rows] = ~ok
            if ok.all():
                break
            if not per_row:
                # Only what has not settled is carried further (the lineup's stages are the
                # same for every row; a Monte Carlo batch's, or a sweep's with figure
                # tables, are per row, and run whole).
                rows, part_nodes = rows[~ok], part.nodes[:, ~ok]
            else:
                part_nodes = part.nodes
            previous = part_nodes
        else:
            previous = part.nodes
    assert prop is not None  # the first pass always runs
    if unsettled.any():
        # The kept order reached its limit before every reported level settled: the levels
        # are flagged as not converged (the check then qualifies its verdict).
        converged = prop.converged.copy()
        converged[nonlinear] &= ~unsettled[None, :]
        prop = replace(prop, converged=converged)
    products = lattice.products(order)
    n_report = len(products.orders)
    mix = products.mix[:n_report]
    freqs = tones @ mix.T.astype(float)
    if nominal and lineup.analysis.beyond_data == "error":
        _raise_beyond_data(lineup, prop, mix, freqs)
    return Result(lineup=lineup, mix=mix, freqs_hz=freqs, propagation=prop, tone_freqs_hz=tones)


def _cut(prop: Propagation, n: int) -> Propagation:
    """The propagation's first ``n`` products (the reported ones)."""
    return replace(
        prop,
        nodes=prop.nodes[..., :n],
        added=prop.added[..., :n],
        response=prop.response[..., :n],
        beyond=prop.beyond[..., :n],
    )


def _merge(prop: Propagation, part: Propagation, rows: np.ndarray) -> Propagation:
    """``prop`` with the batch rows ``rows`` replaced by ``part`` (a finer pass over them)."""
    if len(rows) == prop.nodes.shape[1]:
        return part

    def put(whole, new, axis=1):
        out = whole.copy()
        out[(slice(None),) * axis + (rows,)] = new
        return out

    return Propagation(
        nodes=put(prop.nodes, part.nodes),
        added=put(prop.added, part.added),
        response=put(prop.response, part.response),
        extrapolated=put(prop.extrapolated, part.extrapolated),
        converged=put(prop.converged, part.converged),
        beyond=put(prop.beyond, part.beyond),
    )


def _settled(before: np.ndarray, after: np.ndarray) -> np.ndarray:
    """Batch elements (B,) whose node phasors (S + 1, B, P) agree to SETTLE_DB."""
    a, b = np.abs(before), np.abs(after)
    scale = b.max(axis=2, keepdims=True)
    ok = np.abs(a - b) <= (10 ** (SETTLE_DB / 20) - 1) * b + SETTLE_FLOOR * scale
    return ok.all(axis=(0, 2))


def _raise_beyond_data(lineup: Lineup, prop: Propagation, mix: np.ndarray, freqs: np.ndarray) -> None:
    """The default policy: a product outside a stage's data range is an error."""
    hits = np.argwhere(prop.beyond)
    if hits.size == 0:
        return
    # Report the lowest-order product of the first stage concerned.
    first_stage = hits[:, 0].min()
    hits = hits[hits[:, 0] == first_stage]
    order = np.abs(mix[hits[:, 2]]).sum(axis=1)
    s, b, p = hits[np.argmin(order)]
    f = float(freqs[b, p])
    stage = lineup.stages[s]
    lo, hi = stage.data_range_hz
    raise OutOfDataRange(
        stage=stage.name,
        freq_hz=abs(f),
        data_start_hz=lo,
        data_stop_hz=hi,
        product=label(mix[p] * (1 if f >= 0 else -1), lineup.tone_names),
        hint='set [analysis] beyond_data = "hold" or "no_rejection" to proceed, or extend the data',
        file=None if lineup.source is None else str(lineup.source),
        data_file=stage.data_file,
    )
