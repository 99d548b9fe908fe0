"""What every stage kind provides, and what the loader hands it.

:class:`Stage` is everything the rest of the package asks of a stage: the engine
(``transfer``, ``response``, ``generated_weight``, ``conversion``), the loader
(``kind``, ``conversion``, ``grid_degree``, ``notes``), the check and the budget
(``checks``, ``missing_figures``, ``cascade_figures``), the report
(``describe_figures``) and Monte Carlo (``spread_figures``, ``sampled``).
:class:`StageDefaults` gives a kind the answers of a stage that has none of these
(no notes, no checks, no figures that spread, no conversion), so that a kind states
only what it has.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any, ClassVar, Protocol

import numpy as np

if TYPE_CHECKING:  # annotations only: the stage modules import this one
    from spurplan.fields import Fields
    from spurplan.model.nonlinear import Clipper, Polynomial, Saturating
    from spurplan.model.stages.amplifier_fit import FigureCheck
    from spurplan.model.stages.mixer import MixerModel

# Degree assumed for a model that is not a polynomial when the grid is sized before a
# run (the engine refines that grid until it settles; lineup_file.grid_points).
NONPOLYNOMIAL_DEGREE = 8
# Units of the figures a stage lets spread in Monte Carlo: a level moves in dB, a
# filter figure by a relative amount (written "2 %", held as the fraction 0.02).
DB = "dB"
PERCENT = "%"


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

    @property
    def kind(self) -> str:
        """The ``kind`` key of the lineup file that makes this stage (``"amplifier"`` ...)."""
        ...

    @property
    def conversion(self) -> Conversion | None:
        """The frequency conversion (LO, wanted sideband, conversion gain); ``None`` for a
        stage that keeps frequencies.  A converting stage's ``transfer`` has ``convert``,
        its ``response`` is 0 (no linear passage), and it has ``with_lo_index(index)``: the
        same stage told which base tone is its LO (the loader numbers them in order)."""
        ...

    @property
    def generated_weight(self) -> Callable | None:
        """``generated_weight(freq_hz, ref_hz)``, the weight on what the stage generates, or
        ``None``: what it generates then sees the response over the small-signal gain."""
        ...

    @property
    def notes(self) -> tuple[str, ...]:
        """How the model was built, and what it assumed, for the terminal and reports."""
        ...

    @property
    def checks(self) -> tuple[FigureCheck, ...]:
        """Every stated large-signal figure beside what the model gives at its point."""
        ...

    @property
    def grid_degree(self) -> int | None:
        """The model degree the engine's grid must resolve; ``None`` for a linear stage."""
        ...

    @property
    def data_file(self) -> str | None:
        """The data file behind ``data_range_hz`` as the lineup names it, for errors."""
        ...

    def missing_figures(self) -> tuple[str, ...]:
        """Figure classes the stage will produce but no figure states (short phrases)."""
        ...

    def describe_figures(self) -> str:
        """The stage's stated figures in one line, for the report's lineup table."""
        ...

    def cascade_figures(self, r_ohm: float) -> CascadeFigures:
        """What the cascade budget shows of the stage beyond its gain (``r_ohm``: system
        impedance, ohm)."""
        ...

    def spread_figures(self) -> dict[str, str]:
        """Figures a tolerance or a corner may move, to their unit (:data:`DB` or :data:`PERCENT`)."""
        ...

    def spread_refusal(self, figure: str) -> str | None:
        """Why ``figure``, one of :meth:`spread_figures`, cannot spread on this stage (e.g. a
        figure the stage does not state, which a spread would leave unmoved), for the
        loader's one-line error; ``None`` when it can."""
        ...

    def sampled(self, deltas: dict[str, np.ndarray], n: int, r_ohm: float) -> Stage:
        """The stage as the engine sees it with every sample's figures moved.

        Parameters
        ----------
        deltas : dict of str -> ndarray
            Shift of each figure of :meth:`spread_figures` per sample, (n,) (``elements``
            (n, 64)), in the figure's unit (dB, or a fraction for "%").
        n : int
            Samples in the batch.
        r_ohm : float
            System impedance (ohm).

        Returns
        -------
        Stage
            A stage whose model parameters are arrays over the batch.
        """
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


@dataclass(frozen=True)
class Conversion:
    """What a frequency-converting stage does to the carrier.

    Attributes
    ----------
    lo_freq_hz : float
        LO frequency (Hz); the LO is one more base tone of the engine.
    sideband : {"upper", "lower"}
        The wanted product: ``LO + IF`` or ``LO - IF``.
    gain_db : float
        Small-signal conversion gain (dB): a converter has no linear passage to read a
        gain from.
    """

    lo_freq_hz: float
    sideband: str
    gain_db: float

    def wanted_hz(self, freq_hz: float) -> float:
        """Frequency (Hz) of the wanted product of a carrier at ``freq_hz`` (Hz)."""
        lo = self.lo_freq_hz
        return lo + freq_hz if self.sideband == "upper" else abs(lo - freq_hz)


@dataclass(frozen=True)
class CascadeFigures:
    """What the cascade budget shows of one stage (``None``: the stage has no such figure).

    Attributes
    ----------
    oip3_dbm : float or None
        Stated output IP3 (dBm), for the cascaded intercept.
    p1db_stated_dbm : float or None
        Stated output P1dB (dBm).
    p1db_model_dbm : float or None
        The model's own output P1dB (dBm): what headroom is measured from.
    psat_model_dbm : float or None
        The model's saturated output power (dBm).
    noise_figure_db : float or None
        Stated noise figure (dB) of an active stage; ``None`` where none is stated (a
        passive stage's is its loss, which the budget takes from its gain).
    """

    oip3_dbm: float | None = None
    p1db_stated_dbm: float | None = None
    p1db_model_dbm: float | None = None
    psat_model_dbm: float | None = None
    noise_figure_db: float | None = None


class StageDefaults:
    """The answers of :class:`Stage` for a kind that has none of them: a base for stage kinds.

    No conversion, no weight on what the stage generates, no notes, no figure checks,
    no missing figures, nothing that spreads in Monte Carlo, no data file; a kind
    overrides what it has.  (Plain class attributes, not dataclass fields, so that a
    frozen dataclass kind may declare any of them as its own field.)
    """

    kind: ClassVar[str] = ""
    generated_weight: Callable | None = None
    notes: tuple[str, ...] = ()
    checks: tuple[FigureCheck, ...] = ()
    # Figures stated against frequency (spurplan.model.figure_tables.StageTables); a kind
    # with tables gives ``channel_deltas(ref_hz)`` and ``sampled(..., ref_hz=...)``.
    figure_tables: Any = None

    @property
    def conversion(self) -> Conversion | None:
        """None: the stage keeps frequencies."""
        return None

    @property
    def data_file(self) -> str | None:
        """None: no data file."""
        return None

    @property
    def grid_degree(self) -> int | None:
        """The transfer's polynomial degree, :data:`NONPOLYNOMIAL_DEGREE` for another model,
        ``None`` for a linear stage."""
        transfer = getattr(self, "transfer", None)
        if transfer is None:
            return None
        return transfer.degree or NONPOLYNOMIAL_DEGREE

    def missing_figures(self) -> tuple[str, ...]:
        """None missing."""
        return ()

    def describe_figures(self) -> str:
        """Nothing stated."""
        return ""

    def cascade_figures(self, r_ohm: float) -> CascadeFigures:
        """No intercept or compression figure (``r_ohm``: system impedance, ohm)."""
        return CascadeFigures()

    def spread_figures(self) -> dict[str, str]:
        """Nothing spreads."""
        return {}

    def spread_refusal(self, figure: str) -> str | None:
        """Every figure of :meth:`spread_figures` can spread (``figure``: the name asked for)."""
        return None

    def sampled(self, deltas: dict[str, np.ndarray], n: int, r_ohm: float):
        """The stage itself: with nothing that spreads, every sample is the nominal.

        Parameters
        ----------
        deltas : dict of str -> ndarray
            Ignored (empty for a kind without figures that spread).
        n : int
            Samples in the batch.
        r_ohm : float
            System impedance (ohm).

        Returns
        -------
        Stage
        """
        return self


@dataclass(frozen=True)
class SampledStage(StageDefaults):
    """A stage seen by the engine with per-sample parameters (Monte Carlo).

    Attributes
    ----------
    name : str
    transfer : model or None
        The per-sample model (parameters are arrays over the batch), or ``None``.
    response_fn : callable
        ``response_fn(freq_hz)``: the per-sample small-signal response, (B, P).
    data_range_hz : (float, float) or None
    generated_weight : callable or None
        ``generated_weight(freq_hz, ref_hz)`` with the per-sample weights, or ``None``.
    conversion : Conversion or None
        The nominal stage's conversion (a sampled converter still converts).
    """

    name: str
    transfer: Polynomial | Saturating | Clipper | MixerModel | None
    response_fn: Callable
    data_range_hz: tuple[float, float] | None = None
    generated_weight: Callable | None = None
    conversion: Conversion | None = None

    def response(self, freq_hz: np.ndarray) -> np.ndarray:
        """The per-sample small-signal response at ``freq_hz`` (Hz)."""
        return self.response_fn(freq_hz)


def flat_response(gain_db: float):
    """A frequency-independent response of ``gain_db`` (voltage ratio, in dB)."""
    value = 10.0 ** (gain_db / 20.0)

    def response(freq_hz):
        return np.full(np.shape(freq_hz), value, dtype=complex)

    return response
