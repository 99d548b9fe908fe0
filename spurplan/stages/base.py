"""What every stage kind provides, and what the loader hands it."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Protocol

import numpy as np


@dataclass(frozen=True)
class LoadContext:
    """Lineup-wide settings a stage needs while it is built from its table.

    Attributes
    ----------
    r_ohm : float
        System impedance (ohm) for power <-> voltage.
    base_dir : Path
        Folder of the lineup file; relative paths inside it start here.
    beyond_data : str
        What data-based responses do outside their frequency range
        (:data:`spurplan.filters.BEYOND_POLICIES`).
    ref_freq_hz : float
        Frequency of the reference carrier (the strongest; of equal powers the higher
        frequency, :func:`spurplan.lineup.reference_carrier_index`): where amplifier
        figures are referred.
    """

    r_ohm: float
    base_dir: Path
    beyond_data: str = "error"
    ref_freq_hz: float = 0.0


class Stage(Protocol):
    """The interface the engine relies on."""

    name: str

    @property
    def transfer(self):
        """Memoryless model (``None`` for a linear stage)."""

    def response(self, freq_hz: np.ndarray) -> np.ndarray:
        """Small-signal complex response at ``freq_hz`` (>= 0, Hz)."""


def flat_response(gain_db: float):
    """A frequency-independent response of ``gain_db`` (voltage ratio, in dB)."""
    value = 10.0 ** (gain_db / 20.0)

    def response(freq_hz):
        return np.full(np.shape(freq_hz), value, dtype=complex)

    return response
