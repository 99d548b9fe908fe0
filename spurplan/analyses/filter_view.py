"""What ``spurplan filter`` shows: a filter's parts and its response at the products.

Either a filter stage of a lineup (the response at every product present at the
filter's input) or a prototype given on its own (the response at the harmonics of
a carrier, if one is given).
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from spurplan.errors import LineupError, UnitError
from spurplan.fields import Fields
from spurplan.model.ladders import describe_parts
from spurplan.model.stages.filter import Filter, assumed_notes, read_prototype
from spurplan.output import escaping
from spurplan.output.files import save_figure, write_atomic
from spurplan.output.provenance import provenance
from spurplan.output.tables import element_display, mhz
from spurplan.units import parse_freq_hz, parse_impedance_ohm

if TYPE_CHECKING:  # annotations only
    from spurplan.model.lineup import Lineup

# Points of a Touchstone file written for a synthesized ladder.
TOUCHSTONE_POINTS = 1001
# Harmonics of a --carrier shown for a prototype on its own.
PROTOTYPE_HARMONICS = 10


@dataclass(frozen=True)
class FilterView:
    """A filter with the product frequencies it is asked about."""

    title: str
    stage: Filter
    response: dict[str, list]
    notes: tuple[str, ...]
    lineup: Lineup | None = None

    @property
    def elements(self) -> dict[str, list]:
        return self.stage.elements()

    def element_display(self) -> dict[str, list]:
        return element_display(self.elements)

    def response_display(self) -> dict[str, list]:
        """The response rows for a terminal; FLOOR marks rows where the stopband floor,
        not the ladder, sets |S21|."""
        cols = dict(self.response)
        cols["freq_mhz"] = mhz(cols["freq_hz"])
        floor = self.stage.ideal_below_floor(np.asarray(cols["freq_hz"], dtype=float))
        cols["flags"] = [
            " ".join(w for w, on in (("BEYOND-DATA", b), ("FLOOR", bool(fl))) if on)
            for b, fl in zip(cols["beyond_data"], floor, strict=True)
        ]
        return cols

    def summary(self) -> dict:
        proto = self.stage.prototype
        out = {
            "stage": self.stage.name,
            "source": self.stage.source,
            "prototype": None
            if proto is None
            else {k: getattr(proto, k) for k in proto.__dataclass_fields__},
            "parts": None if proto is None else describe_parts(proto),
            "elements": self.elements,
            "notes": list(self.notes),
        }
        if self.lineup is not None:
            out.update(provenance(self.lineup))
        return out

    def save_plot(self, path: str | Path) -> Path:
        from spurplan.output.plots import filter_response

        fig = filter_response(self.stage, self.response)
        try:
            return save_figure(fig, path)
        finally:
            import matplotlib.pyplot as plt

            plt.close(fig)

    def save_touchstone(self, path: str | Path) -> Path:
        """Write the network as a 2-port Touchstone file (its data grid, or a dense one)."""
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
        net = self.stage.network(f)
        net.frequency.unit = "MHz"
        text = net.write_touchstone(return_string=True, skrf_comment=False)
        # A comment is one line: a name's line breaks or control characters must not end it.
        name = " ".join(escaping.terminal(self.stage.name).split())
        header = f"! {name}: written by spurplan (planning estimate, not a measurement)\n"
        return write_atomic(path, header + text)


def stage_view(lineup, name: str) -> FilterView:
    """The view of filter stage ``name`` of ``lineup`` at its input products.

    Parameters
    ----------
    lineup : Lineup
        The lineup, run once at its nominal drive.
    name : str
        Name of the filter stage.

    Returns
    -------
    FilterView
        The stage with :meth:`spurplan.engine.result.Result.stage_response` at its input
        (frequencies in Hz, levels in dBm, S21 in dB and degrees).

    Raises
    ------
    LineupError
        When no stage has that name or it is not a filter.
    """
    stage = lineup.stage_of_kind(name, Filter)
    result = lineup.run()
    what = stage.source or f"synthesized ladder; {describe_parts(stage.prototype)}"
    return FilterView(
        title=f"{lineup.name}: filter '{name}' ({what}) at the products reaching it",
        stage=stage,
        response=result.stage_response(name),
        notes=tuple(getattr(stage, "notes", ())),
        lineup=lineup,
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
        k: [] for k in ("freq_hz", "label", "order", "level_in_dbm", "s21_db", "s21_deg", "beyond_data")
    }
    if f0:
        f = f0 * np.arange(1, PROTOTYPE_HARMONICS + 1)
        h = stage.response(f)
        response["freq_hz"] = [float(v) for v in f]
        response["label"] = ["f1" if n == 1 else f"{n}f1" for n in range(1, PROTOTYPE_HARMONICS + 1)]
        response["order"] = list(range(1, PROTOTYPE_HARMONICS + 1))
        response["level_in_dbm"] = [None] * PROTOTYPE_HARMONICS
        with np.errstate(divide="ignore"):
            response["s21_db"] = [float(v) for v in 20 * np.log10(np.abs(h))]
        response["s21_deg"] = [float(v) for v in np.degrees(np.angle(h))]
        response["beyond_data"] = [False] * PROTOTYPE_HARMONICS
    title = f"{proto.family} {proto.response}, order {proto.order}, {r_ohm:g} ohm; {describe_parts(proto)}"
    return FilterView(title=title, stage=stage, response=response, notes=notes)
