"""What ``spurplan filter`` shows: a filter's parts and its response at the products.

Either a filter stage of a lineup (the response at every product present at the
filter's input) or a prototype given on its own (the response at the harmonics of
a carrier, if one is given).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from spurplan.errors import LineupError, UnitError
from spurplan.fields import Fields
from spurplan.model.stages.filter import Filter, assumed_notes, read_prototype
from spurplan.units import parse_freq_hz, parse_impedance_ohm

if TYPE_CHECKING:  # annotations only
    from spurplan.model.lineup import Lineup

# Points of a Touchstone file written for a synthesized ladder.
TOUCHSTONE_POINTS = 1001
# Harmonics of a --carrier shown for a prototype on its own.
PROTOTYPE_HARMONICS = 10


@dataclass(frozen=True)
class FilterView:
    """A filter with the product frequencies it is asked about.

    Attributes
    ----------
    stage : Filter
        The filter (a lineup's stage, or a prototype on its own).
    response : dict of str -> list
        Its response at the products: ``freq_hz, label, also, order, level_in_dbm,
        s21_db, s21_deg, beyond_data`` (Hz, dBm, dB, degrees).
    notes : tuple of str
    lineup : Lineup or None
        The lineup of a stage; ``None`` for a prototype on its own.
    combine : {"worst", "power", "phase"} or None
        How the stage contributions to each input level were combined (a lineup's
        stage); ``None`` for a prototype on its own.
    """

    stage: Filter
    response: dict[str, list]
    notes: tuple[str, ...]
    lineup: Lineup | None = None
    combine: str | None = None

    @property
    def rows(self) -> dict[str, list]:
        """:attr:`response`: one row per product the filter is asked about."""
        return self.response

    @property
    def elements(self) -> dict[str, list]:
        return self.stage.elements()

    def plot(self):
        """|S21| against frequency with the products marked; returns a matplotlib Figure."""
        # the one upward door: presentation, imported on use
        from spurplan.output.plots import filter_response

        return filter_response(self.stage, self.response)

    def network(self):
        """The filter as a scikit-rf 2-port on its data grid, or a dense grid for a ladder.

        Returns
        -------
        skrf.Network
            :data:`TOUCHSTONE_POINTS` points up to 1.15 times the highest product or three
            times the passband edge for a ladder (Hz); a table's own frequencies otherwise.
        """
        table, proto = self.stage.table, self.stage.prototype
        if table is not None:
            f = table.freq_hz
        else:
            # A Filter holds exactly one of a table and a prototype (stages/filter.py).
            assert proto is not None
            top = max(self.response["freq_hz"], default=0.0)
            edge = proto.edge_hz + (proto.bandwidth_hz or 0.0)
            stop = 1.15 * max(top, 3.0 * edge)
            f = np.linspace(stop / TOUCHSTONE_POINTS, stop, TOUCHSTONE_POINTS)
        return self.stage.network(f)


def stage_view(lineup, name: str, combine: str | None = None) -> FilterView:
    """The view of filter stage ``name`` of ``lineup`` at its input products.

    Parameters
    ----------
    lineup : Lineup
        The lineup, run once at its nominal drive.
    name : str
        Name of the filter stage.
    combine : {"worst", "power", "phase"} or None
        How the stage contributions to a product at the filter's input combine;
        ``None`` uses the lineup's ``[analysis] combine``, as the check does.

    Returns
    -------
    FilterView
        The stage with :meth:`spurplan.engine.result.Result.stage_response` at its input
        (frequencies in Hz, levels in dBm, S21 in dB and degrees): products at one
        frequency merged into one row, their level combined as ``combine`` says.

    Raises
    ------
    LineupError
        When no stage has that name or it is not a filter.
    """
    stage = lineup.stage_of_kind(name, Filter)
    result = lineup.run()
    mode = combine or lineup.analysis.combine
    return FilterView(
        stage=stage,
        response=result.stage_response(name, combine=mode),
        notes=tuple(getattr(stage, "notes", ())),
        lineup=lineup,
        combine=mode,
    )


def prototype_view(spec: dict, impedance: str, carrier: str | None) -> FilterView:
    """A prototype given as strings (command line), optionally at a carrier's harmonics.

    Parameters
    ----------
    spec : dict
        The prototype table as a lineup file would give it (``family``, ``order``,
        ``cutoff`` or ``center`` and ``bandwidth`` ... as strings with units).
    impedance : str
        System impedance with its unit, e.g. ``"50 ohm"``.
    carrier : str or None
        Carrier frequency with its unit, e.g. ``"455 MHz"``; the response is then listed at
        its first :data:`PROTOTYPE_HARMONICS` harmonics.

    Returns
    -------
    FilterView

    Raises
    ------
    LineupError
        Naming the command line as the file, for a value that cannot be read.
    """
    where = "command line"
    try:
        r_ohm = parse_impedance_ohm(impedance)
        f0 = None if carrier is None else parse_freq_hz(carrier)
    except UnitError as exc:
        raise LineupError(str(exc), file=where) from None
    proto = read_prototype(Fields({"prototype": spec}, where, "filter"))
    notes = assumed_notes(spec)
    stage = Filter(name="prototype", r_ohm=r_ohm, prototype=proto, notes=notes)
    response: dict[str, list] = {
        k: []
        for k in ("freq_hz", "label", "also", "order", "level_in_dbm", "s21_db", "s21_deg", "beyond_data")
    }
    if f0:
        f = f0 * np.arange(1, PROTOTYPE_HARMONICS + 1)
        h = stage.response(f)
        response["freq_hz"] = [float(v) for v in f]
        response["label"] = ["f1" if n == 1 else f"{n}f1" for n in range(1, PROTOTYPE_HARMONICS + 1)]
        response["also"] = [""] * PROTOTYPE_HARMONICS
        response["order"] = list(range(1, PROTOTYPE_HARMONICS + 1))
        response["level_in_dbm"] = [None] * PROTOTYPE_HARMONICS
        with np.errstate(divide="ignore"):
            response["s21_db"] = [float(v) for v in 20 * np.log10(np.abs(h))]
        response["s21_deg"] = [float(v) for v in np.degrees(np.angle(h))]
        response["beyond_data"] = [False] * PROTOTYPE_HARMONICS
    return FilterView(stage=stage, response=response, notes=notes)
