"""Stage kinds of a lineup, one module each.

A stage is a small frozen dataclass with

* ``name`` (str),
* ``response(freq_hz) -> complex ndarray``: the small-signal response (S21 or
  voltage gain) at non-negative frequencies in Hz,
* ``transfer``: a memoryless model from :mod:`spurplan.model.nonlinear`, or ``None`` for a
  linear stage,
* ``data_range_hz``: ``(start, stop)`` where a data file defines the response, or
  ``None`` where it is known at every frequency,
* ``s_matrix(freq_hz)``: the full 2x2 S-matrix, for linear stages (used when linear
  sections are cascaded with their mismatches),
* ``from_fields(fields, context)``: build it from one ``[[stage]]`` table.

``KINDS`` maps the ``kind`` key of a lineup file to the class.  To add a kind, write
its module here and add it to ``KINDS`` (see DEVELOPERS.md).
"""

from __future__ import annotations

from spurplan.model.stages.amplifier import Amplifier
from spurplan.model.stages.attenuator import Attenuator
from spurplan.model.stages.base import LoadContext, Stage, StageKind
from spurplan.model.stages.filter import Filter
from spurplan.model.stages.mixer import Mixer

KINDS: dict[str, StageKind] = {
    "amplifier": Amplifier,
    "attenuator": Attenuator,
    "filter": Filter,
    "mixer": Mixer,
}

__all__ = ["KINDS", "Amplifier", "Attenuator", "Filter", "LoadContext", "Mixer", "Stage"]
