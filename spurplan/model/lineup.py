"""The lineup: carriers, an ordered chain of stages, and analysis settings.

:class:`Lineup` is the one object a user holds; :meth:`Lineup.run` hands it to the
engine and returns a :class:`~spurplan.engine.result.Result`.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Literal

import numpy as np

from spurplan.errors import LineupError
from spurplan.model.products import (
    default_tone_names,
    product_index,
    tone_index,
)
from spurplan.model.tone_lattice import RASTER_TOLERANCE_HZ, ToneLattice, lattice_for
from spurplan.units import dbm_to_vpeak

if TYPE_CHECKING:  # annotations only
    from spurplan.model.masks import Mask
    from spurplan.model.modulation import Modulation
    from spurplan.model.stages.amplifier_fit import FigureCheck
    from spurplan.model.stages.base import StageDefaults
    from spurplan.model.tolerances import Tolerances

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
    modulation : spurplan.model.modulation.Modulation or None
        How the carrier is modulated (run as a multisine in its bandwidth); ``None``: the
        carrier is a CW tone for the nonlinearities (the bandwidth then only spreads its
        products for the mask, an approximation).
    """

    freq_hz: float
    power_dbm: float
    bandwidth_hz: float | None = None
    phase_rad: float = 0.0
    modulation: Modulation | None = None


def reference_carrier_index(carriers) -> int:
    """Position of the reference carrier among ``carriers``: the strongest, whatever the order.

    The reference carrier is the one drive sweeps move, amplifier figures are referred
    to, cascade budgets follow and rule conditions (``when_carrier``) test.  It is the
    carrier of highest input power; equal powers go to the higher frequency, so that the
    answer does not depend on the order in which the carriers are listed.  Only carriers
    equal in both are told apart by position, and being identical they give the same
    frequency and power whichever is taken.  (``numpy.argmax`` alone would take the first
    listed of equal powers.)

    Parameters
    ----------
    carriers : sequence of Carrier
        Non-empty.

    Returns
    -------
    int
        Index into ``carriers``.
    """
    # max() keeps the first of equal keys, the stated last resort.
    return max(range(len(carriers)), key=lambda k: (carriers[k].power_dbm, carriers[k].freq_hz))


LINEAR_SECTIONS: tuple[str, ...] = ("matched", "cascade")


@dataclass(frozen=True)
class Analysis:
    """Analysis settings.

    Attributes
    ----------
    max_order : int
        Highest product order kept.
    combine : {"worst", "power", "phase"}
        How stage contributions add at a node.
    beyond_data : {"error", "hold", "no_rejection"}
        What a Touchstone-based response does outside its data range.
    linear_sections : {"matched", "cascade"}
        ``matched`` multiplies each stage's S21 (stages assumed matched);
        ``cascade`` joins consecutive linear stages with their full S-parameters.
    strict : bool
        An incomplete model (missing figures) or a stated figure the model misses
        fails the check (exit status 1) instead of qualifying its verdict.
    raster_hz : float or None
        The carriers' channel raster (Hz) as stated; ``None`` finds the coarsest one they
        share (:mod:`spurplan.model.tone_lattice`).
    raster_tolerance_hz : float
        How far (Hz) a carrier may sit from the raster and still be on it.
    """

    max_order: int = DEFAULT_MAX_ORDER
    combine: Combine = "worst"
    beyond_data: str = "error"
    linear_sections: str = "matched"
    strict: bool = False
    raster_hz: float | None = None
    raster_tolerance_hz: float = RASTER_TOLERANCE_HZ


@dataclass(frozen=True)
class ReportSpec:
    """What the design-review report adds beyond the check (``[report]`` in the lineup).

    Attributes
    ----------
    drive : (start_dbm, stop_dbm, step_db) or None
        A drive sweep of the reference (strongest) carrier's input power.
    tune : (start_hz, stop_hz, step_hz) or None
        A tuning sweep of the reference (strongest) carrier's frequency.
    """

    drive: tuple[float, float, float] | None = None
    tune: tuple[float, float, float] | None = None


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
    notes : tuple of str
        How models were fitted, for the terminal and reports.
    mask : spurplan.model.masks.Mask or None
        The emission limits the lineup is checked against.
    report : ReportSpec or None
        The sweeps the design-review report adds.
    tolerances : spurplan.model.tolerances.Tolerances or None
        Part tolerances and corners, for the yield.
    mode : str or None
        The operating mode this lineup is (``[[mode]] name``, :mod:`spurplan.model.modes`);
        ``None`` for a file without modes.
    """

    name: str
    carriers: tuple[Carrier, ...]
    stages: tuple
    analysis: Analysis = Analysis()
    r_ohm: float = 50.0
    source: Path | None = None
    notes: tuple[str, ...] = field(default=())
    mask: Mask | None = None
    report: ReportSpec | None = None
    tolerances: Tolerances | None = None
    mode: str | None = None

    @property
    def mixers(self) -> list:
        """Mixer stages in signal order; mixer i owns base tone i (its LO)."""
        return [s for s in self.stages if s.conversion is not None]

    @property
    def reference_carrier_index(self) -> int:
        """Position of the reference carrier in :attr:`carriers` (:func:`reference_carrier_index`)."""
        return reference_carrier_index(self.carriers)

    @property
    def n_tones(self) -> int:
        """Base tones of the engine: every mixer's LO, then the carriers."""
        return len(self.mixers) + len(self.carriers)

    @property
    def tone_lattice(self) -> ToneLattice:
        """The engine's axes for this lineup's tones (:func:`spurplan.model.tone_lattice.lattice_for`)."""
        return lattice_for(
            len(self.mixers),
            tuple(c.freq_hz for c in self.carriers),
            self.analysis.raster_hz,
            self.analysis.raster_tolerance_hz,
            self.analysis.max_order,
        )

    @property
    def tone_freqs_hz(self) -> np.ndarray:
        return np.array([m.conversion.lo_freq_hz for m in self.mixers] + [c.freq_hz for c in self.carriers])

    @property
    def tone_names(self) -> list[str]:
        n_lo = len(self.mixers)
        if not n_lo:
            return default_tone_names(len(self.carriers))
        los = ["LO"] if n_lo == 1 else [f"LO{i + 1}" for i in range(n_lo)]
        ifs = ["IF"] if len(self.carriers) == 1 else [f"IF{k + 1}" for k in range(len(self.carriers))]
        return los + ifs

    def tuned_tones_hz(self, tuned_hz) -> np.ndarray:
        """Base-tone frequencies (Hz) with the lineup tuned to each of ``tuned_hz``.

        The tuning rule: with mixers, the first LO moves to each frequency (an
        upconverting transmitter tunes its LO; the IF stays); without, every carrier
        moves together so that the reference carrier lands on it (their spacing stays).

        Parameters
        ----------
        tuned_hz : array_like, shape (B,)
            The swept frequency (Hz): the first LO's, or the reference carrier's.

        Returns
        -------
        ndarray, shape (B, K)
            Base-tone frequencies (Hz) in the order of :attr:`tone_freqs_hz`.
        """
        base = self.tone_freqs_hz
        if self.mixers:
            shift, ref = np.eye(len(base))[0], base[0]
        else:
            shift, ref = np.ones(len(base)), base[self.reference_carrier_index]
        return base[None, :] + (np.asarray(tuned_hz, dtype=float)[:, None] - ref) * shift[None, :]

    def carrier_vectors(self, node: int | None = None) -> np.ndarray:
        """Mixing vectors (K_c, K) of the carriers at the output of stage ``node``.

        At the input they are unit vectors; every mixer passed maps a carrier v to
        its wanted product, ``LO + v`` (upper sideband) or ``LO - v`` (lower).
        """
        node = len(self.stages) if node is None else node
        n_lo = len(self.mixers)
        vecs = np.zeros((len(self.carriers), self.n_tones), dtype=np.int64)
        vecs[np.arange(len(self.carriers)), n_lo + np.arange(len(self.carriers))] = 1
        lo_i = 0
        for stage in self.stages[:node]:
            if stage.conversion is None:
                continue
            lo = np.zeros(self.n_tones, dtype=np.int64)
            lo[lo_i] = 1
            vecs = lo + vecs if stage.conversion.sideband == "upper" else lo - vecs
            lo_i += 1
        return vecs

    def missing_figures(self) -> tuple[tuple[str, str], ...]:
        """``(stage name, figure)`` for every figure class a stage will produce but no
        figure states: the model leaves those products out (or, for compression, runs
        linear), so results that rely on them are incomplete."""
        return tuple((s.name, what) for s in self.stages for what in s.missing_figures())

    def figure_checks(self) -> tuple[tuple[str, FigureCheck], ...]:
        """``(stage name, FigureCheck)`` for every stated large-signal figure: the datasheet
        value beside what the fitted model gives at the same point."""
        return tuple((s.name, c) for s in self.stages for c in s.checks)

    def figures_missed(self) -> tuple[tuple[str, FigureCheck], ...]:
        """The :meth:`figure_checks` whose figure the model does not meet."""
        return tuple((name, c) for name, c in self.figure_checks() if not c.met)

    def stage_reference_hz(self, tones: np.ndarray) -> np.ndarray:
        """Frequency (Hz) of the reference carrier at each stage's input, (S, B).

        ``tones`` are base-tone frequencies (B, K); mixers move the carrier to their
        wanted product.
        """
        k = self.reference_carrier_index
        vecs = [self.carrier_vectors(i)[k].astype(float) for i in range(len(self.stages))]
        return np.stack([np.abs(tones @ v) for v in vecs]) if vecs else np.zeros((0, len(tones)))

    def stage_index(self, name: str, argument: str = "stage") -> int:
        """1-based position of the stage called ``name`` (node number); ``argument`` names
        the parameter that gave it, for the error.

        Parameters
        ----------
        name : str
            The stage's name as in the lineup file.
        argument : str
            The parameter that gave the name (``"stage"``), the error's field (shown as
            the command line's option there: :meth:`spurplan.errors.SpurplanError.shown`).

        Returns
        -------
        int
            1-based stage position, which is also the node number of the stage's output.

        Raises
        ------
        LineupError
            When no stage has that name.
        """
        for i, stage in enumerate(self.stages, start=1):
            if stage.name == name:
                return i
        known = ", ".join(repr(s.name) for s in self.stages)
        raise LineupError(
            f"no stage named {name!r}: expected one of {known}",
            file=None if self.source is None else str(self.source),
            field=f"{{@{argument}}}",
        )

    def stage_of_kind(self, name: str, kind: type[StageDefaults], argument: str = "stage"):
        """The stage called ``name``, which must be a ``kind`` (one-line error otherwise).

        Parameters
        ----------
        name : str
            The stage's name as in the lineup file.
        kind : type
            The stage class required (e.g. ``Mixer``); its ``kind`` names it in the error.
        argument : str
            The parameter that gave the name (``"stage"``), the error's field (shown as
            the command line's option there: :meth:`spurplan.errors.SpurplanError.shown`).

        Returns
        -------
        stage
            The stage, an instance of ``kind``.

        Raises
        ------
        LineupError
            When no stage has that name or it is of another kind.
        """
        stage = self.stages[self.stage_index(name, argument) - 1]
        if not isinstance(stage, kind):
            have, want = stage.kind, kind.kind
            raise LineupError(
                f"{name!r} is {'an' if have[0] in 'aeiou' else 'a'} {have} stage: expected a {want} stage",
                file=None if self.source is None else str(self.source),
                field=f"{{@{argument}}}",
            )
        return stage

    def input_phasors(self, mix: np.ndarray, drive_offset_db=0.0, carrier_phasors_v=None) -> np.ndarray:
        """Input peak phasors (V), shape (B, P), for carrier powers offset by ``drive_offset_db``.

        ``drive_offset_db`` may be an array (B,): a drive sweep in one batch.

        Parameters
        ----------
        mix : ndarray of int, shape (P, K)
            Canonical mixing vectors; the carriers are placed at their base-tone rows.
        drive_offset_db : float or ndarray, shape (B,)
            Added to every carrier's power (dB).
        carrier_phasors_v : ndarray, complex, shape (B, K_c), optional
            Each carrier's complex peak amplitude (V) per batch element, instead of its
            stated power and phase (realizations of a multisine); the offset still applies.

        Returns
        -------
        ndarray, complex, shape (B, P)
            Peak phasors (V) across the system impedance; zero except at the carriers.
        """
        offset = np.atleast_1d(np.asarray(drive_offset_db, dtype=float))
        n_lo = len(self.mixers)
        # The carriers' rows: the unit vectors of tones n_lo .. (one scan, not one per carrier).
        unit = tone_index(mix)
        cols = np.full(len(self.carriers), -1, dtype=np.int64)
        hit = np.nonzero(unit >= n_lo)[0]
        cols[unit[hit] - n_lo] = hit
        if np.any(cols < 0):
            k = int(np.nonzero(cols < 0)[0][0])
            cols[k] = product_index(mix, self.carrier_vectors(0)[k])  # raises: beyond the order
        if carrier_phasors_v is None:
            amp = np.array([dbm_to_vpeak(c.power_dbm, self.r_ohm) for c in self.carriers])
            phasors = (amp * np.exp(1j * np.array([c.phase_rad for c in self.carriers])))[None, :]
        else:
            phasors = np.atleast_2d(np.asarray(carrier_phasors_v, dtype=complex))
        batch = max(offset.size, len(phasors))
        x = np.zeros((batch, len(mix)), dtype=complex)
        x[:, cols] = (
            phasors * (10 ** (offset / 20))[:, None] if offset.size > 1 else phasors * 10 ** (offset[0] / 20)
        )
        return x

    def run(self, drive_offset_db=0.0, tone_freqs_hz=None, carrier_phasors_v=None):
        """Compute every product at every stage.

        Parameters
        ----------
        drive_offset_db : float or ndarray (B,)
            Added to every carrier's input power (dB); an array makes a batch.
        tone_freqs_hz : ndarray (B, K) or (K,), optional
            Base-tone frequencies per batch element (a tuning sweep), in the order of
            :attr:`tone_freqs_hz` (LOs, then carriers); default the lineup's own.
        carrier_phasors_v : ndarray, complex (B, K_c), optional
            Each carrier's complex peak amplitude (V) per batch element, instead of its
            stated power and phase.

        Returns
        -------
        Result
        """
        # the other upward door: computing, imported on use (the model describes, the
        # engine computes: spurplan.engine.run; the model stays below it)
        from spurplan.engine.run import run

        return run(self, drive_offset_db, tone_freqs_hz, carrier_phasors_v=carrier_phasors_v)
