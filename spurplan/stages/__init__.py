"""Stage kinds of a lineup, one module each.

A stage is a small frozen dataclass with

* ``name`` (str),
* ``response(freq_hz) -> complex ndarray``: the small-signal response (S21 or
  voltage gain) at non-negative frequencies in Hz,
* ``transfer``: a memoryless model from :mod:`spurplan.nonlinear`, or ``None`` for a
  linear stage,
* ``from_fields(fields, context)``: build it from one ``[[stage]]`` table.

``KINDS`` maps the ``kind`` key of a lineup file to the class.  To add a kind, write
its module here and add it to ``KINDS`` (see DEVELOPERS.md).
"""

from __future__ import annotations

from .amplifier import Amplifier
from .attenuator import Attenuator
from .base import LoadContext, Stage

KINDS: dict[str, type] = {
    "amplifier": Amplifier,
    "attenuator": Attenuator,
}

__all__ = ["KINDS", "Amplifier", "Attenuator", "LoadContext", "Stage"]
