"""Running a lineup: every product at every stage, for a batch of drives or tunings.

:func:`run` is what :meth:`spurplan.model.lineup.Lineup.run` calls: it builds the
mixing vectors and input phasors the lineup describes, propagates them through the
stages (:func:`spurplan.engine.torus.propagate`, with linear sections cascaded first
when the analysis asks), applies the policy beyond data ranges, and returns the
:class:`~spurplan.engine.result.Result`.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

from spurplan.engine.result import Result
from spurplan.engine.sections import with_sections
from spurplan.engine.torus import Propagation, propagate
from spurplan.errors import OutOfDataRange
from spurplan.model.products import label, mixing_vectors, product_freqs_hz

if TYPE_CHECKING:
    from spurplan.model.lineup import Lineup


def run(lineup: Lineup, drive_offset_db=0.0, tone_freqs_hz=None, *, stages=None) -> Result:
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
        copies.  They are propagated as given (no linear-section cascade), and the
        beyond-data policy is left to the nominal run, which
        :func:`spurplan.analyses.montecarlo.run_yield` makes first.

    Returns
    -------
    Result
        Products at every node, for every batch element.

    Raises
    ------
    OutOfDataRange
        With the default policy, when a product falls outside a stage's data range.
    """
    mix = mixing_vectors(lineup.n_tones, lineup.analysis.max_order)
    if tone_freqs_hz is None:
        tone_freqs_hz = lineup.tone_freqs_hz
    tones = np.atleast_2d(np.asarray(tone_freqs_hz, dtype=float))
    offset = np.atleast_1d(np.asarray(drive_offset_db, dtype=float))
    batch = max(len(tones), len(offset))
    tones = np.broadcast_to(tones, (batch, lineup.n_tones))
    x_in = lineup.input_phasors(mix, np.broadcast_to(offset, (batch,)))
    freqs = product_freqs_hz(mix, tones)
    nominal = stages is None
    if nominal:
        stages = lineup.stages
        if lineup.analysis.linear_sections == "cascade":
            stages = with_sections(stages, lineup.r_ohm)
    prop = propagate(stages, x_in, mix, freqs, lineup.stage_reference_hz(tones))
    if nominal and lineup.analysis.beyond_data == "error":
        _raise_beyond_data(lineup, prop, mix, freqs)
    return Result(lineup=lineup, mix=mix, freqs_hz=freqs, propagation=prop, tone_freqs_hz=tones)


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
