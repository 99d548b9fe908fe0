"""What every stage kind provides, and what the loader hands it."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any, Protocol

import numpy as np

if TYPE_CHECKING:  # annotations only: the stage modules import this one
    from spurplan.fields import Fields
    from spurplan.model.nonlinear import Clipper, Polynomial, Saturating
    from spurplan.model.stages.mixer import MixerModel


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
        (:data:`spurplan.model.ladders.BEYOND_POLICIES`).
    ref_freq_hz : float
        Frequency of the reference carrier (the strongest; of equal powers the higher
        frequency, :func:`spurplan.model.lineup.reference_carrier_index`): where amplifier
        figures are referred.
    touchstone_reader : callable or None
        ``reader(fields, context) -> (S21 table, S lookup, notes)``: reads the file a
        stage's ``touchstone`` key names.  The input wing passes
        :func:`spurplan.io.touchstone.read_touchstone`; stage kinds stay free of file
        reading (the model wing imports no reader).
    """

    r_ohm: float
    base_dir: Path
    beyond_data: str = "error"
    ref_freq_hz: float = 0.0
    touchstone_reader: Callable[[Fields, LoadContext], Any] | None = None

    def read_touchstone(self, fields: Fields):
        """The Touchstone file of a stage's table, read by :attr:`touchstone_reader`.

        Parameters
        ----------
        fields : Fields
            Reader of the stage's table (``touchstone``, ``input_port``, ``kind``).

        Returns
        -------
        tuple
            ``(SParameterTable, SMatrixTable, list of str)``: the S21 lookup, the full
            2-port lookup and notes to show.
        """
        if self.touchstone_reader is None:
            raise fields.error("touchstone", "no Touchstone reader in this context: load the lineup file")
        return self.touchstone_reader(fields, self)


class Stage(Protocol):
    """The interface the engine relies on (read-only members: stages are frozen)."""

    @property
    def name(self) -> str:
        """The stage's name in the lineup file."""
        ...

    @property
    def transfer(self) -> Polynomial | Saturating | Clipper | MixerModel | None:
        """Memoryless model, a converter's model (``convert``), or ``None`` for a linear stage."""
        ...

    @property
    def data_range_hz(self) -> tuple[float, float] | None:
        """``(start, stop)`` (Hz) where a data file defines the response, or ``None``."""
        ...

    def response(self, freq_hz: np.ndarray) -> np.ndarray:
        """Small-signal complex response at ``freq_hz`` (>= 0, Hz)."""
        ...


class LinearStage(Stage, Protocol):
    """A linear stage that can be cascaded with full S-parameters (:mod:`spurplan.engine.sections`)."""

    def s_matrix(self, freq_hz: np.ndarray) -> np.ndarray:
        """Full 2x2 S-matrix at ``freq_hz`` (Hz, any shape), shape ``freq_hz.shape + (2, 2)``."""
        ...


class StageKind(Protocol):
    """What :data:`spurplan.model.stages.KINDS` holds: a stage class built from its lineup table."""

    def from_fields(self, fields: Fields, context: LoadContext) -> Stage:
        """The stage read from its table (the class's ``from_fields`` classmethod).

        Parameters
        ----------
        fields : Fields
            Reader of the stage's lineup table, which locates its errors.
        context : LoadContext
            Lineup-wide settings: system impedance (ohm), the lineup file's folder, the policy
            beyond data ranges, the reference carrier's frequency (Hz).

        Returns
        -------
        Stage
        """
        ...


def flat_response(gain_db: float):
    """A frequency-independent response of ``gain_db`` (voltage ratio, in dB)."""
    value = 10.0 ** (gain_db / 20.0)

    def response(freq_hz):
        return np.full(np.shape(freq_hz), value, dtype=complex)

    return response
