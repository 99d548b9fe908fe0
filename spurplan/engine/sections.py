"""Linear sections: consecutive linear stages cascaded with their full S-parameters.

By default the lineup multiplies each stage's S21 (every stage matched to the
system impedance).  With ``[analysis] linear_sections = "cascade"`` each run of
consecutive linear stages (filters, pads) is joined with scikit-rf's ``**``, so
that the mismatch between, say, two filters is part of the answer.  Each stage of
a section then reports, at its output, the section so far terminated in the system
impedance: its response is ``S21(stages i..j) / S21(stages i..j-1)``, and the
product of the responses along the section is the cascade's S21 exactly.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:  # annotations only
    from spurplan.model.stages.base import LinearStage


def _network(s: np.ndarray, freq_hz: np.ndarray, r_ohm: float):
    import skrf

    return skrf.Network(frequency=skrf.Frequency.from_f(freq_hz, unit="Hz"), s=s, z0=r_ohm)


def cascade_s21(stages, freq_hz: np.ndarray, r_ohm: float) -> np.ndarray:
    """S21 of ``stages`` cascaded with ``**`` at strictly increasing ``freq_hz`` (Hz).

    Parameters
    ----------
    stages : sequence of LinearStage
        The stages of the section, in signal order (at least one), each with ``s_matrix``.
    freq_hz : ndarray, shape (F,)
        Strictly increasing frequencies (Hz).
    r_ohm : float
        System impedance (ohm), the reference impedance of every port.

    Returns
    -------
    ndarray, complex, shape (F,)
        S21 of the cascade.
    """
    net = None
    for stage in stages:
        part = _network(stage.s_matrix(freq_hz), freq_hz, r_ohm)
        net = part if net is None else net**part
    # Both callers (SectionStage.response) pass at least one stage.
    assert net is not None
    return net.s[:, 1, 0]


@dataclass(frozen=True)
class SectionStage:
    """A linear stage seen through the cascade of the section it ends."""

    stage: LinearStage
    before: tuple[LinearStage, ...]
    r_ohm: float

    transfer = None

    @property
    def name(self) -> str:
        return self.stage.name

    @property
    def data_range_hz(self):
        return self.stage.data_range_hz

    def response(self, freq_hz: np.ndarray) -> np.ndarray:
        f = np.asarray(freq_hz, dtype=float)
        uniq, inverse = np.unique(np.maximum(f, 1.0), return_inverse=True)
        now = cascade_s21((*self.before, self.stage), uniq, self.r_ohm)
        if self.before:
            now = now / cascade_s21(self.before, uniq, self.r_ohm)
        return now[inverse.reshape(f.shape)]


def with_sections(stages, r_ohm: float) -> list:
    """Replace each linear stage by its :class:`SectionStage` view (others unchanged).

    Parameters
    ----------
    stages : sequence of stage
        The lineup's stages in signal order; a stage whose ``transfer`` is ``None`` is linear.
    r_ohm : float
        System impedance (ohm).

    Returns
    -------
    list
        The stages, each linear one wrapped with the linear stages before it in its run.
    """
    out: list = []
    run: list = []
    for stage in stages:
        if stage.transfer is not None:
            out.append(stage)
            run = []
            continue
        out.append(SectionStage(stage, tuple(run), r_ohm))
        run.append(stage)
    return out
