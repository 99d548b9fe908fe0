"""Wideband noise at the lineup output: the Friis cascade at every frequency.

The source is a matched termination at the reference temperature T0 = 290 K (noise
density k T0).  Each stage multiplies the noise at its input by its small-signal power
gain and adds its own, ``k T0 (F - 1)`` referred to its input (Friis 1944, from
memory)::

    N_out(f) = G(f) (N_in(f_in) + k T0 (F(f) - 1))

with ``F`` the noise figure an amplifier or mixer states, and for a passive stage
(pad, filter, no nonlinear model) at T0 its loss, ``F = 1 / G(f)``, so a matched passive
stage passes k T0 on unchanged.  Gains are small-signal: compression of the carrier
does not remove noise (a saturated stage is at least as noisy as the model says).  A
mixer moves noise in frequency: the noise at output frequency ``f`` comes from its IF
port at ``|f - LO|`` (the wanted sideband's image of ``f``), times its conversion gain;
its stated noise figure is taken as single-sideband, which already counts the image
band's noise (common practice, no source).
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

import numpy as np

from spurplan.engine.torus import response_at

if TYPE_CHECKING:
    from spurplan.model.lineup import Lineup

BOLTZMANN_J_PER_K = 1.380649e-23  # exact (SI 2019)
T0_K = 290.0  # the reference temperature of noise figures (IEEE definition; from memory)
KT0_DBM_HZ = 10.0 * math.log10(BOLTZMANN_J_PER_K * T0_K * 1e3)


def unknown_noise_stages(lineup: Lineup) -> list[str]:
    """Names of active stages (amplifiers, mixers) that state no noise figure.

    Parameters
    ----------
    lineup : Lineup
        The lineup.

    Returns
    -------
    list of str
        Stage names; empty when the output noise is known.
    """
    return [
        s.name
        for s in lineup.stages
        if (s.transfer is not None or s.conversion is not None)
        and s.cascade_figures(lineup.r_ohm).noise_figure_db is None
    ]


def output_noise_dbm_hz(lineup: Lineup, freq_hz, tone_freqs_hz=None) -> np.ndarray:
    """Noise density (dBm/Hz) at the lineup output at ``freq_hz``.

    Parameters
    ----------
    lineup : Lineup
        Every active stage must state a noise figure (:func:`unknown_noise_stages`).
    freq_hz : array_like
        Output frequencies (Hz, > 0), any shape.
    tone_freqs_hz : array_like, optional
        Base-tone frequencies (Hz), LOs first (:attr:`Lineup.tone_freqs_hz`); default the
        lineup's own.  Only the LOs are read.

    Returns
    -------
    ndarray
        Noise density (dBm/Hz), the shape of ``freq_hz``.

    Raises
    ------
    ValueError
        An active stage states no noise figure.
    """
    missing = unknown_noise_stages(lineup)
    if missing:
        raise ValueError(f"no noise figure for {', '.join(repr(m) for m in missing)}")
    tones = np.asarray(lineup.tone_freqs_hz if tone_freqs_hz is None else tone_freqs_hz, dtype=float)
    f_out = np.asarray(freq_hz, dtype=float)
    stages = lineup.stages
    # The frequency at every node that maps to f_out at the output, walking back.
    node_freqs = [f_out]
    lo_index = sum(1 for s in stages if s.conversion is not None)
    for stage in reversed(stages):
        f = node_freqs[0]
        if stage.conversion is not None:
            lo_index -= 1
            f = np.abs(f - tones[lo_index])
        node_freqs.insert(0, f)
    kt0 = 10.0 ** (KT0_DBM_HZ / 10.0)  # mW/Hz
    noise = np.full(f_out.shape, kt0)
    for k, stage in enumerate(stages):
        f_next = node_freqs[k + 1]
        if stage.conversion is not None:
            gain = np.full(f_out.shape, 10.0 ** (stage.conversion.gain_db / 10.0))
        else:
            gain = (
                np.abs(np.reshape(response_at(stage.response, np.reshape(f_next, (1, -1))), f_out.shape)) ** 2
            )
        # The stated figure itself where the stage holds one (cascade_figures() would also
        # fit P1dB, for nothing here).
        nf_db = getattr(stage, "noise_figure_db", None)
        if nf_db is None:
            nf_db = stage.cascade_figures(lineup.r_ohm).noise_figure_db
        if stage.transfer is None and stage.conversion is None:
            factor = 1.0 / np.maximum(np.minimum(gain, 1.0), 1e-300)
        else:
            assert nf_db is not None  # unknown_noise_stages() found none missing
            factor = np.full(f_out.shape, 10.0 ** (nf_db / 10.0))
        noise = gain * (noise + kt0 * (factor - 1.0))
    with np.errstate(divide="ignore"):
        return 10.0 * np.log10(noise)
