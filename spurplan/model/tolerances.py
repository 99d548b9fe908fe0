"""What a lineup says about spread: per-figure distributions and corners.

Read from a stage's ``tolerance`` table and the lineup's ``[[corner]]`` tables
(:mod:`spurplan.io.tolerances`); the yield (:mod:`spurplan.analyses.montecarlo`) draws
its samples from them, and each stage kind makes its sampled copy
(``Stage.sampled``).  Which figures of a stage can spread, and in which unit, the
stage kind says itself (``Stage.spread_figures``).
"""

from __future__ import annotations

from dataclasses import dataclass, field


@dataclass(frozen=True)
class Tolerance:
    """One figure of one stage: ``kind`` "normal" (value = sigma) or "uniform" (+/- value).

    ``value`` is in dB for level figures and a fraction (0.02 = 2 %) for filter figures.
    """

    stage: int
    figure: str
    kind: str
    value: float


@dataclass(frozen=True)
class Corner:
    """A named corner: fixed shifts ``(stage index, figure, amount)`` added to every sample.

    Amounts are in the figure's unit as :class:`Tolerance` values (dB, or a fraction).
    """

    name: str
    shifts: tuple[tuple[int, str, float], ...] = ()


@dataclass(frozen=True)
class Tolerances:
    """Everything the lineup says about spread: per-figure distributions and corners."""

    items: tuple[Tolerance, ...] = ()
    corners: tuple[Corner, ...] = field(default=())
