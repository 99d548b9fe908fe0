"""Stage kinds of a lineup, one module each.

A stage is a small frozen dataclass that answers everything the rest of the package
asks of it (the protocol :class:`~spurplan.model.stages.base.Stage`):

* ``name`` (str) and ``kind``: the ``kind`` key of the lineup file that makes it;
* ``response(freq_hz) -> complex ndarray``: the small-signal response (S21 or
  voltage gain) at non-negative frequencies in Hz;
* ``transfer``: a memoryless model from :mod:`spurplan.model.nonlinear`, a converter's
  model (with ``convert``), or ``None`` for a linear stage; ``grid_degree``, the degree
  the engine's grid must resolve;
* ``conversion``: LO, wanted sideband and conversion gain of a frequency converter
  (:class:`~spurplan.model.stages.base.Conversion`), ``None`` for any other stage;
* ``generated_weight``: ``(freq_hz, ref_hz) -> weight`` on what the stage generates, or
  ``None``;
* ``data_range_hz``: ``(start, stop)`` where a data file defines the response, or
  ``None`` where it is known at every frequency; ``data_file``, that file's name;
* ``s_matrix(freq_hz)``: the full 2x2 S-matrix, for linear stages (used when linear
  sections are cascaded with their mismatches);
* ``notes``, ``checks`` (stated figures beside the model's), ``missing_figures()``,
  ``describe_figures()`` (the report's one line), ``cascade_figures(r_ohm)`` (what the
  budget shows);
* ``spread_figures()`` (figures Monte Carlo may move, to their unit) and
  ``sampled(deltas, n, r_ohm)``: the stage as the engine sees it with every sample's
  figures;
* ``from_fields(fields, context)``: build it from one ``[[stage]]`` table.

:class:`~spurplan.model.stages.base.StageDefaults` answers for what a kind does not
have (no notes, checks, conversion or spread), so a kind derives from it and states
only its own.  ``KINDS`` maps the ``kind`` key of a lineup file to the class.  To add
a kind, write its module here and add it to ``KINDS`` (see DEVELOPERS.md): nothing
else in the package needs to know it.
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
