"""The lineup: carriers, an ordered chain of stages, and analysis settings.

:class:`Lineup` is the one object a user holds; :meth:`Lineup.run` hands it to the
engine and returns a :class:`~spurplan.result.Result`.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Literal

import numpy as np

from . import engine
from .errors import LineupError
from .spectrum import default_tone_names, mixing_vectors, product_freqs_hz
from .units import dbm_to_vpeak

Combine = Literal["worst", "power", "phase"]
COMBINE_MODES: tuple[str, ...] = ("worst", "power", "phase")
DEFAULT_MAX_ORDER = 10
MAX_ORDER_LIMIT = 30


@dataclass(frozen=True)
class Carrier:
    """One carrier at the lineup input.

    Attributes
    ----------
    freq_hz : float
    power_dbm : float
        Mean power of the (unmodulated) carrier at the lineup input.
    bandwidth_hz : float or None
        Occupied bandwidth; ``None`` for CW.
    phase_rad : float
    """

    freq_hz: float
    power_dbm: float
    bandwidth_hz: float | None = None
    phase_rad: float = 0.0


@dataclass(frozen=True)
class Analysis:
    """Analysis settings: highest product order and how contributions combine."""

    max_order: int = DEFAULT_MAX_ORDER
    combine: Combine = "worst"


@dataclass(frozen=True)
class Lineup:
    """A transmitter lineup.

    Attributes
    ----------
    name : str
    carriers : tuple of Carrier
    stages : tuple of Stage
        In signal order, input first.
    analysis : Analysis
    r_ohm : float
        System impedance (ohm).
    source : Path or None
        The file it was loaded from.
    """

    name: str
    carriers: tuple[Carrier, ...]
    stages: tuple
    analysis: Analysis = Analysis()
    r_ohm: float = 50.0
    source: Path | None = None
    notes: tuple[str, ...] = field(default=())

    @property
    def tone_names(self) -> list[str]:
        return default_tone_names(len(self.carriers))

    def stage_index(self, name: str) -> int:
        """1-based position of the stage called ``name`` (node number)."""
        for i, stage in enumerate(self.stages, start=1):
            if stage.name == name:
                return i
        known = ", ".join(s.name for s in self.stages)
        raise LineupError(f"no stage named {name!r}: expected one of {known}")

    def input_phasors(self, mix: np.ndarray, drive_offset_db=0.0) -> np.ndarray:
        """Input peak phasors (V), shape (B, P), for carrier powers offset by ``drive_offset_db``.

        ``drive_offset_db`` may be an array (B,): a drive sweep in one batch.
        """
        offset = np.atleast_1d(np.asarray(drive_offset_db, dtype=float))
        x = np.zeros((offset.size, len(mix)), dtype=complex)
        for k, c in enumerate(self.carriers):
            col = int(np.nonzero((mix == np.eye(len(self.carriers), dtype=int)[k]).all(axis=1))[0][0])
            amp = dbm_to_vpeak(c.power_dbm + offset, self.r_ohm)
            x[:, col] = amp * np.exp(1j * c.phase_rad)
        return x

    def run(self, drive_offset_db=0.0):
        """Compute every product at every stage.

        Parameters
        ----------
        drive_offset_db : float or ndarray (B,)
            Added to every carrier's input power (dB); an array makes a batch.

        Returns
        -------
        Result
        """
        from .result import Result

        mix = mixing_vectors(len(self.carriers), self.analysis.max_order)
        tones = np.array([[c.freq_hz for c in self.carriers]])
        x_in = self.input_phasors(mix, drive_offset_db)
        freqs = np.broadcast_to(product_freqs_hz(mix, tones), x_in.shape)
        prop = engine.propagate(self.stages, x_in, mix, freqs)
        return Result(lineup=self, mix=mix, freqs_hz=freqs, propagation=prop)
