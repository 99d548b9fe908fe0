"""Filter stage: a linear 2-port from a Touchstone file or a synthesized prototype.

Keys::

    kind = "filter"
    touchstone = "lpf.s2p"      # path relative to the lineup file, or
    input_port = 1              # which port faces the signal source (1 or 2)
    prototype = { family = "butterworth" | "chebyshev",
                  response = "lowpass" | "highpass" | "bandpass",
                  order = 7, cutoff = "520 MHz"          # low/high-pass
                  # center = "450 MHz", bandwidth = "40 MHz"  for band-pass
                  ripple = "0.1 dB",                      # Chebyshev
                  q_inductor = 80, q_capacitor = 400,      # unloaded Q, or "lossless"
                  floor = "-80 dB",                        # stopband floor, or "none"
                  first = "shunt" | "series" }             # ladder orientation

Left out, ``q_inductor``, ``q_capacitor`` and ``floor`` take the defaults of
:mod:`spurplan.model.ladders` (Q_L 100, Q_C 500, floor -80 dB: discrete UHF parts, common
practice, no source), and the stage's notes say which were assumed.  ``"lossless"``
and ``"none"`` ask for the ideal ladder explicitly.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from typing import Literal, cast

import numpy as np

from spurplan.errors import UnitError
from spurplan.fields import Fields
from spurplan.model.ladders import (
    DEFAULT_FLOOR_DB,
    DEFAULT_Q_CAPACITOR,
    DEFAULT_Q_INDUCTOR,
    FAMILIES,
    FLOOR_RANGE_DB,
    MAX_FILTER_ORDER,
    RESPONSES,
    Family,
    Prototype,
    Response,
    SMatrixTable,
    SParameterTable,
    describe_parts,
    floor_amplitude,
    ladder_elements,
    ladder_network,
    ladder_s21,
)
from spurplan.model.stages.base import PERCENT, LoadContext, SampledStage, StageDefaults
from spurplan.units import parse_freq_hz, parse_gain_db

# Below this (Hz) a filter edge or bandwidth is a typing mistake, and its element
# values overflow.
MIN_EDGE_HZ = 1.0
# Unloaded Q of real inductors and capacitors lies well inside this.
Q_RANGE = (0.5, 1e12)
# Figures of a synthesized ladder a tolerance or corner may move, by a relative amount:
# the whole response in frequency (cutoff or center), the unloaded Q of each part type,
# every element on its own.
SPREAD_FIGURES = ("cutoff", "center", "q_inductor", "q_capacitor", "elements")


_CACHED_FREQUENCY_SETS = 4
_CACHED_BYTES = 64 * 2**20


@dataclass(frozen=True)
class Filter(StageDefaults):
    """A linear filter stage.

    Exactly one of ``prototype`` (synthesized ladder) and ``table`` (Touchstone S21
    on its data grid) is set.
    """

    name: str
    r_ohm: float
    prototype: Prototype | None = None
    table: SParameterTable | None = None
    s_table: SMatrixTable | None = None
    source: str | None = None
    notes: tuple[str, ...] = ()
    _cache: dict = field(default_factory=dict, compare=False, repr=False)

    kind = "filter"
    transfer = None

    @property
    def data_file(self) -> str | None:
        """The Touchstone file as the lineup names it (``None`` for a prototype)."""
        return self.source

    def describe_figures(self) -> str:
        """The prototype (family, response, order, edges, ripple, parts) or the Touchstone file."""
        if self.prototype is not None:
            p = self.prototype
            edge = (
                f"centre {p.edge_hz / 1e6:g} MHz, bandwidth {p.bandwidth_hz / 1e6:g} MHz"
                if p.bandwidth_hz
                else f"cutoff {p.edge_hz / 1e6:g} MHz"
            )
            rip = f", ripple {p.ripple_db:g} dB" if p.ripple_db else ""
            return f"{p.family} {p.response}, order {p.order}, {edge}{rip}; {describe_parts(p)}"
        return f"Touchstone {self.source}"

    def spread_figures(self) -> dict[str, str]:
        """A synthesized ladder's figures, each by a relative amount; none for Touchstone data."""
        return dict.fromkeys(SPREAD_FIGURES, PERCENT) if self.prototype is not None else {}

    def sampled(self, deltas: dict[str, np.ndarray], n: int, r_ohm: float) -> SampledStage:
        """The ladder with every sample's edge, part Q and element values (:func:`ladder_s21`).

        Parameters
        ----------
        deltas : dict of str -> ndarray
            Relative shifts (fractions) of :data:`SPREAD_FIGURES`, (n,); ``elements`` (n, 64),
            of which a ladder of order N uses the first N columns.
        n : int
            Samples in the batch.
        r_ohm : float
            System impedance (ohm); the filter's own is used.

        Returns
        -------
        SampledStage
        """
        proto = self.prototype
        assert proto is not None  # only a synthesized ladder has figures that spread
        scale = 1.0 + deltas.get("cutoff", 0.0) + deltas.get("center", 0.0)
        q_scale = (1.0 + deltas.get("q_inductor", 0.0), 1.0 + deltas.get("q_capacitor", 0.0))
        parts = deltas.get("elements")
        if parts is not None:
            parts = 1.0 + np.asarray(parts)[:, : proto.order]

        def filter_response(f):
            return ladder_s21(
                proto, f, self.r_ohm, scale=np.broadcast_to(scale, (n,)), q_scale=q_scale, part_scale=parts
            )

        return SampledStage(self.name, None, filter_response)

    @property
    def data_range_hz(self) -> tuple[float, float] | None:
        """Frequency range (Hz) where the response is known; ``None`` for a prototype."""
        return None if self.table is None else self.table.data_range_hz

    def response(self, freq_hz: np.ndarray) -> np.ndarray:
        """Complex S21 at ``freq_hz`` (>= 0, any shape)."""
        if self.table is not None:
            return self.table(freq_hz)
        # The ABCD product in numpy (Pozar, from memory; ladders.ladder_s21), the same
        # circuit as the scikit-rf network that s_matrix() builds, without its per-call
        # network objects: the hot path of noise and sweeps.
        assert self.prototype is not None  # exactly one of table and prototype is set
        f = np.asarray(freq_hz, dtype=float)
        return ladder_s21(self.prototype, f.reshape(-1), self.r_ohm).reshape(f.shape)

    def s_matrix(self, freq_hz: np.ndarray) -> np.ndarray:
        """Full 2x2 S-matrix at ``freq_hz`` (any shape), shape ``freq_hz.shape + (2, 2)``."""
        f = np.asarray(freq_hz, dtype=float)
        # Ladders are evaluated from 1 Hz up (0 Hz would open every capacitor); clamp
        # first so that the frequencies handed to scikit-rf stay strictly increasing.
        uniq, inverse = np.unique(
            np.maximum(f, 1.0) if self.prototype is not None else f, return_inverse=True
        )
        key = uniq.tobytes()
        s = self._cache.get(key)
        if s is None:
            if self.prototype is not None:
                s = ladder_network(self.prototype, uniq, self.r_ohm).s
            else:
                # Exactly one of prototype and table is set, and a table always comes
                # with its S lookup (the Touchstone reader returns both).
                assert self.s_table is not None
                s = self.s_table(uniq)
            # A few frequency sets, not one: a run evaluates its reported products and the
            # wider set it carries to see them settle (spurplan.engine.run), in turn.
            # Bounded in count and in bytes (a sweep's sets are large).
            self._cache[key] = s
            while len(self._cache) > 1 and (
                len(self._cache) > _CACHED_FREQUENCY_SETS
                or sum(v.nbytes for v in self._cache.values()) > _CACHED_BYTES
            ):
                self._cache.pop(next(iter(self._cache)))
        return s[inverse.reshape(f.shape)]

    def network(self, freq_hz: np.ndarray):
        """The filter as an ``skrf.Network`` at ``freq_hz`` (strictly increasing, Hz)."""
        import skrf

        freq_hz = np.asarray(freq_hz, dtype=float)
        return skrf.Network(
            frequency=skrf.Frequency.from_f(freq_hz, unit="Hz"),
            s=self.s_matrix(freq_hz),
            z0=self.r_ohm,
            name=self.name,
        )

    def elements(self) -> dict[str, list]:
        """Element values of a synthesized ladder as columns (empty for Touchstone).

        ``q_l`` and ``q_c`` are the unloaded Q of the arm's inductor and capacitor (a
        number, ``"lossless"``, or ``None`` where the arm has no such part).
        """
        keys = ("position", "branch", "part", "g", "l_h", "c_f", "q_l", "q_c")
        cols: dict[str, list] = {k: [] for k in keys}
        if self.prototype is None:
            return cols
        p = self.prototype

        def q(value, present):
            if not present:
                return None
            return "lossless" if value is None else value

        for el in ladder_elements(p, self.r_ohm):
            cols["position"].append(el.position)
            cols["branch"].append(el.branch)
            cols["part"].append(el.part)
            cols["g"].append(el.g)
            cols["l_h"].append(el.l_h)
            cols["c_f"].append(el.c_f)
            cols["q_l"].append(q(p.q_inductor, el.l_h is not None))
            cols["q_c"].append(q(p.q_capacitor, el.c_f is not None))
        return cols

    def ideal_below_floor(self, freq_hz: np.ndarray) -> np.ndarray:
        """True where the ladder alone rejects more than the floor (the floor sets |S21|).

        All False for a Touchstone filter or a prototype without a floor.
        """
        f = np.asarray(freq_hz, dtype=float)
        p = self.prototype
        if p is None or p.floor_db is None:
            return np.zeros(f.shape, dtype=bool)
        # ladder_s21 broadcasts over a batch axis; a plain array keeps its own shape.
        ideal = np.reshape(ladder_s21(replace(p, floor_db=None), f, self.r_ohm), f.shape)
        return np.abs(ideal) < floor_amplitude(p.floor_db)

    @classmethod
    def from_fields(cls, fields: Fields, context: LoadContext) -> Filter:
        """The filter stage read from its lineup table.

        Parameters
        ----------
        fields : Fields
            Reader of the stage's lineup table, which locates its errors.
        context : LoadContext
            Lineup-wide settings: system impedance (ohm), the lineup file's folder, the policy
            beyond data ranges, the reference carrier's frequency (Hz).

        Returns
        -------
        Filter

        Raises
        ------
        LineupError
            Naming the file, stage and field of a missing or unacceptable value.
        """
        name = fields.raw("name")
        has_ts, has_proto = fields.has("touchstone"), fields.has("prototype")
        if has_ts == has_proto:
            raise fields.error("touchstone", "expected exactly one of 'touchstone' or 'prototype'")
        if has_proto:
            fields.raw("touchstone")
            fields.raw("input_port")
            proto = read_prototype(fields)
            return cls(
                name=name,
                r_ohm=context.r_ohm,
                prototype=proto,
                notes=assumed_notes(fields.raw("prototype")),
            )
        fields.raw("prototype")
        table, s_table, notes = context.read_touchstone(fields)
        return cls(
            name=name,
            r_ohm=context.r_ohm,
            table=table,
            s_table=s_table,
            source=str(fields.raw("touchstone")),
            notes=tuple(notes),
        )


def read_prototype(fields: Fields) -> Prototype:
    """Parse a ``prototype = {...}`` inline table."""
    raw = fields.raw("prototype")
    sub = Fields(raw, fields.file, f"{fields.where} prototype")
    family = sub.text("family", choices=FAMILIES)
    response = sub.text("response", default="lowpass", choices=RESPONSES)
    if family is None:
        raise sub.error("family", f"is required: expected one of {', '.join(FAMILIES)}")
    order = sub.integer("order", default=0, low=1, high=MAX_FILTER_ORDER)
    if order == 0:
        raise sub.error("order", f"is required: expected a whole number from 1 to {MAX_FILTER_ORDER}")
    ripple = sub.quantity("ripple", parse_gain_db)
    if family == "chebyshev":
        if ripple is None or ripple <= 0 or ripple > 3:
            raise sub.error("ripple", f"{sub.raw('ripple')!r}: expected a passband ripple from 0 to 3 dB")
        if order % 2 == 0:
            raise sub.error(
                "order", f"{order}: expected an odd order (even Chebyshev ladders need unequal terminations)"
            )
    elif ripple is not None:
        raise sub.error("ripple", f"{sub.raw('ripple')!r}: a Butterworth filter has no ripple")
    cutoff = sub.quantity("cutoff", parse_freq_hz)
    center = sub.quantity("center", parse_freq_hz)
    bandwidth = sub.quantity("bandwidth", parse_freq_hz)
    if response == "bandpass":
        if center is None or bandwidth is None or cutoff is not None:
            raise sub.error("center", "expected 'center' and 'bandwidth' (and no 'cutoff') for a band-pass")
        if not 0 < bandwidth < 2 * center:
            raise sub.error("bandwidth", f"{sub.raw('bandwidth')!r}: expected 0 < bandwidth < 2 x center")
        edge = center
    else:
        if cutoff is None or center is not None or bandwidth is not None:
            raise sub.error("cutoff", f"expected 'cutoff' (and no 'center' or 'bandwidth') for a {response}")
        edge = cutoff
    if edge < MIN_EDGE_HZ or (bandwidth is not None and bandwidth < MIN_EDGE_HZ):
        raise sub.error(
            "cutoff" if response != "bandpass" else "center",
            f"expected an edge and bandwidth of at least {MIN_EDGE_HZ:g} Hz",
        )
    q_l = _optional(sub, "q_inductor", parse_q, DEFAULT_Q_INDUCTOR)
    q_c = _optional(sub, "q_capacitor", parse_q, DEFAULT_Q_CAPACITOR)
    floor = _optional(sub, "floor", parse_floor_db, DEFAULT_FLOOR_DB)
    first = sub.text("first", default="shunt", choices=("shunt", "series"))
    sub.finish()
    return Prototype(
        # Both were checked against FAMILIES and RESPONSES (the Literal's values) by text().
        family=cast(Family, family),
        response=cast(Response, response),
        order=order,
        edge_hz=edge,
        bandwidth_hz=bandwidth,
        ripple_db=ripple,
        q_inductor=q_l,
        q_capacitor=q_c,
        first=cast(Literal["shunt", "series"], first),  # checked against these choices
        floor_db=floor,
    )


# Words that ask for the ideal: a lossless part, no stopband floor.
LOSSLESS = "lossless"
NO_FLOOR = "none"


def parse_q(value: object) -> float | None:
    """An unloaded Q: a number within :data:`Q_RANGE`, or "lossless" (``None``).

    Raises
    ------
    ValueError
        With the message to show after the field name.
    """
    if value == LOSSLESS:
        return None
    lo, hi = Q_RANGE
    if (
        isinstance(value, bool)
        or not isinstance(value, (int, float))
        or not (math.isfinite(value) and lo <= value <= hi)
    ):
        raise ValueError(
            f'{value!r}: expected an unloaded Q, a number from {lo:g} to {hi:g}, or "{LOSSLESS}"'
        )
    return float(value)


def parse_floor_db(value: object) -> float | None:
    """A stopband floor: a level in dB within :data:`~spurplan.model.ladders.FLOOR_RANGE_DB`, or "none".

    Raises
    ------
    ValueError
        With the message to show after the field name.
    """
    if value == NO_FLOOR:
        return None
    lo, hi = FLOOR_RANGE_DB
    expected = f'{value!r}: expected a stopband floor from {lo:g} dB to {hi:g} dB (such as "-80 dB"), or "{NO_FLOOR}"'
    try:
        floor = parse_gain_db(value)
    except UnitError:
        raise ValueError(expected) from None
    if not lo <= floor <= hi:
        raise ValueError(expected)
    return floor


def _optional(sub: Fields, key: str, parse, default: float) -> float | None:
    """``parse(value)`` of ``key``, ``default`` when it is absent, a located error otherwise."""
    if not sub.has(key):
        sub.raw(key)
        return default
    try:
        return parse(sub.raw(key))
    except ValueError as exc:
        raise sub.error(key, str(exc)) from None


def assumed_notes(spec: object) -> tuple[str, ...]:
    """A note naming the defaults a prototype table relied on (none when it states all)."""
    if not isinstance(spec, dict):
        return ()
    assumed = []
    if "q_inductor" not in spec:
        assumed.append(f"Q_L {DEFAULT_Q_INDUCTOR:g}")
    if "q_capacitor" not in spec:
        assumed.append(f"Q_C {DEFAULT_Q_CAPACITOR:g}")
    if "floor" not in spec:
        assumed.append(f"stopband floor {DEFAULT_FLOOR_DB:g} dB")
    if not assumed:
        return ()
    return (f"assumed {', '.join(assumed)} (defaults for discrete LC parts: common practice, no source)",)
