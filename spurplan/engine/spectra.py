"""Spectra of modulated carriers: every line of their multisines, averaged over realizations.

A carrier with a ``modulation`` (:mod:`spurplan.model.modulation`) is run as its
multisine: the lineup's carriers are replaced by the tones of every carrier's multisine
(a CW carrier stays one tone), the realizations are one batch of the engine, and the mean
power of every line at a node, divided by the raster step, is the power spectral density.
Regrowth around the carriers and the spread of every harmonic zone come out of the same
engine as the discrete products of CW carriers.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import TYPE_CHECKING

import numpy as np

from spurplan.model.lineup import Carrier
from spurplan.model.modulation import multisine
from spurplan.model.products import label
from spurplan.units import dbm_to_vpeak

if TYPE_CHECKING:
    from spurplan.engine.result import Result
    from spurplan.model.lineup import Lineup

# Lines weaker than this below the strongest carrier line (dB) are engine rounding.
LINE_FLOOR_DBC = -200.0


@dataclass(frozen=True)
class Expansion:
    """A lineup with its carriers replaced by their multisines' tones.

    Attributes
    ----------
    lineup : Lineup
        The same stages and mask, one CW carrier per tone.
    owner : ndarray of int, (K_t,)
        The original carrier of each tone.
    phasors_v : ndarray, complex, (R, K_t)
        Every tone's complex peak amplitude (V) in every realization.
    step_hz : float
        The finest raster of the modulated carriers (Hz): lines are read as a density on it.
    """

    lineup: Lineup
    owner: np.ndarray
    phasors_v: np.ndarray
    step_hz: float


def is_modulated(lineup: Lineup) -> bool:
    """Whether any carrier has a modulation (and the lineup must be run as multisines)."""
    return any(c.modulation is not None for c in lineup.carriers)


def expand(lineup: Lineup) -> Expansion:
    """The lineup's carriers as the tones of their multisines.

    Parameters
    ----------
    lineup : Lineup
        With at least one modulated carrier.

    Returns
    -------
    Expansion
    """
    tones: list[Carrier] = []
    owner: list[int] = []
    columns: list[np.ndarray] = []
    steps: list[float] = []
    for k, c in enumerate(lineup.carriers):
        amp_v = dbm_to_vpeak(c.power_dbm, lineup.r_ohm)
        if c.modulation is None:
            tones.append(replace(c, bandwidth_hz=None))
            owner.append(k)
            columns.append(np.full((1, 1), amp_v * np.exp(1j * c.phase_rad)))
            continue
        ms = multisine(c.modulation, c.bandwidth_hz or 0.0)
        steps.append(ms.step_hz)
        for f_hz, u in zip(c.freq_hz + ms.offsets_hz(), ms.phasors.T, strict=True):
            power = float(np.mean(np.abs(u) ** 2))
            tones.append(
                Carrier(freq_hz=float(f_hz), power_dbm=c.power_dbm + 10 * np.log10(max(power, 1e-30)))
            )
            owner.append(k)
            columns.append((amp_v * u * np.exp(1j * c.phase_rad))[:, None])
    realizations = max(len(col) for col in columns)
    phasors = np.hstack(
        [np.broadcast_to(col, (realizations, 1)) if len(col) == 1 else col for col in columns]
    )
    return Expansion(
        lineup=replace(lineup, carriers=tuple(tones)),
        owner=np.asarray(owner, dtype=np.int64),
        phasors_v=phasors,
        step_hz=min(steps),
    )


@dataclass(frozen=True)
class LineSpectrum:
    """Mean power of every line at a node of a modulated lineup.

    Attributes
    ----------
    freq_hz : ndarray, (G,)
        Line frequencies (Hz), ascending.
    power_dbm : ndarray, (G,)
        Mean power of each line over the realizations (dBm).
    is_carrier : ndarray of bool, (G,)
        The line holds a tone of a carrier (the wanted signal and in-band distortion).
    step_hz : float
        The lines' raster (Hz): the density is ``power / step``.
    mix : ndarray of int, (G, K)
        Each line's product over the lineup's own tones (LOs, then the carriers): the
        representative combination with every multisine tone read as its carrier.
    top_source : ndarray of int, (G,)
        Largest contributor to each line (0 the input, k stage k), in the first realization.
    realizations : int
    beyond : ndarray of bool, (G,)
        The line fell outside a data-based stage's data on its way (in any realization).
    """

    freq_hz: np.ndarray
    power_dbm: np.ndarray
    is_carrier: np.ndarray
    step_hz: float
    mix: np.ndarray
    top_source: np.ndarray
    realizations: int
    beyond: np.ndarray

    @property
    def psd_dbm_hz(self) -> np.ndarray:
        """Power spectral density at each line (dBm/Hz): its power over the raster step."""
        return self.power_dbm - 10 * np.log10(self.step_hz)

    def band_power_dbm(self, start_hz: float, stop_hz: float, carriers: bool = False) -> float:
        """Total power of the lines in ``[start_hz, stop_hz]`` (dBm); carrier lines only
        with ``carriers``.

        Parameters
        ----------
        start_hz, stop_hz : float
            The band (Hz).
        carriers : bool
            Count the carrier lines (the wanted signal) as well.

        Returns
        -------
        float
            dBm; ``-inf`` for an empty band.
        """
        take = (self.freq_hz >= start_hz) & (self.freq_hz <= stop_hz) & (carriers | ~self.is_carrier)
        mw = np.sum(10 ** (self.power_dbm[take] / 10))
        with np.errstate(divide="ignore"):
            return float(10 * np.log10(mw))

    def in_rbw_dbm(self, rbw_hz: float) -> np.ndarray:
        """Power of the unwanted lines in a window of ``rbw_hz`` centred on each line (dBm), (G,).

        A window wider than the raster sums the lines it holds; a narrower one takes the
        density times its width (the multisine samples a continuous spectrum).

        Parameters
        ----------
        rbw_hz : float
            The reference bandwidth (Hz).

        Returns
        -------
        ndarray, (G,)
            dBm (carrier lines: their own level).
        """
        if rbw_hz <= self.step_hz:
            return self.power_dbm + 10 * np.log10(rbw_hz / self.step_hz)
        mw = np.where(self.is_carrier, 0.0, 10 ** (self.power_dbm / 10))
        cum = np.concatenate([[0.0], np.cumsum(mw)])
        lo = np.searchsorted(self.freq_hz, self.freq_hz - rbw_hz / 2, side="left")
        hi = np.searchsorted(self.freq_hz, self.freq_hz + rbw_hz / 2, side="right")
        with np.errstate(divide="ignore"):
            return 10 * np.log10(np.maximum(cum[hi] - cum[lo], 0.0))

    def labels(self, tone_names: list[str]) -> list[str]:
        """Each line's product label over the lineup's tones (``"3f1"``, ``"2f1-f2"``)."""
        return [label(m, tone_names) for m in self.mix]


def line_spectrum(lineup: Lineup, stage: str | None = None, combine: str | None = None) -> LineSpectrum:
    """The mean line spectrum of a modulated lineup at a node.

    Parameters
    ----------
    lineup : Lineup
        With at least one modulated carrier.
    stage : str or None
        Stage whose output to read; ``None`` for the lineup output.
    combine : str or None
        How stage contributions add within a realization (:class:`Lineup` analysis
        setting by default); realizations add as powers.

    Returns
    -------
    LineSpectrum
    """
    ex = expand(lineup)
    result = ex.lineup.run(carrier_phasors_v=ex.phasors_v)
    return spectrum_of(result, ex, stage, combine)


def spectrum_of(
    result: Result, ex: Expansion, stage: str | None = None, combine: str | None = None
) -> LineSpectrum:
    """:func:`line_spectrum` from a run of the expansion (its batch: the realizations).

    Parameters
    ----------
    result : Result
        ``ex.lineup.run(carrier_phasors_v=ex.phasors_v)``.
    ex : Expansion
    stage : str or None
    combine : str or None

    Returns
    -------
    LineSpectrum
    """
    lv = result.levels(stage, combine)
    # Every realization has the same products, so slot g is one frequency in every row.
    mw = np.where(lv.valid, 10 ** (lv.level_dbm / 10), 0.0).mean(axis=0)
    valid = lv.valid[0]
    with np.errstate(divide="ignore"):
        power = 10 * np.log10(mw)
    ref = np.max(np.where(lv.is_carrier[0] & valid, power, -np.inf))
    keep = np.nonzero(valid & (power - ref > LINE_FLOOR_DBC))[0]
    n_lo = len(ex.lineup.mixers)
    k = len(result.lineup.carriers)
    # A line's product over the original tones: each multisine tone counts as its carrier.
    fold = np.zeros((n_lo + k, n_lo + int(ex.owner.max()) + 1), dtype=np.int64)
    fold[np.arange(n_lo), np.arange(n_lo)] = 1
    fold[n_lo + np.arange(k), n_lo + ex.owner] = 1
    reps = result.mix[lv.rep[0, keep]] * lv.sign[0, keep][:, None]
    return LineSpectrum(
        freq_hz=lv.freq_hz[0, keep],
        power_dbm=power[keep],
        is_carrier=lv.is_carrier[0, keep],
        step_hz=ex.step_hz,
        mix=reps @ fold,
        top_source=lv.top_source[0, keep],
        realizations=len(ex.phasors_v),
        beyond=lv.beyond.any(axis=0)[keep],
    )
