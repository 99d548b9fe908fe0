"""Reading a lineup's spreads: each stage's ``tolerance`` table and the ``[[corner]]`` tables.

An amount is a level in dB (``"0.5 dB"``) or, for figures the stage kind spreads
relatively, a percentage (``"2 %"``).  A bare amount, or ``{ normal = ... }``, is the
standard deviation of a normal distribution (not a limit; draws are not truncated);
``{ uniform = ... }`` is a limit: the half-width of a uniform distribution.  No other
form is read.  The stage kind says which figures spread and in which unit
(``Stage.spread_figures``).
"""

from __future__ import annotations

import math

from spurplan.errors import LineupError, UnitError
from spurplan.fields import Fields, _did_you_mean
from spurplan.model.stages.base import PERCENT
from spurplan.model.tolerances import Corner, Tolerance
from spurplan.units import parse_gain_db


def _amount(text, f: Fields, key: str, percent: bool) -> float:
    if percent:
        if isinstance(text, str) and text.strip().endswith("%"):
            try:
                value = float(text.strip()[:-1])
            except ValueError:
                value = math.nan
            if math.isfinite(value) and abs(value) < 100:
                return value / 100.0
        raise f.error(key, f"{text!r}: expected a relative amount in %, e.g. '2 %'")

    try:
        return parse_gain_db(text)
    except UnitError as exc:
        raise f.error(key, str(exc)) from None


def read_tolerance(raw, file: str, where: str, index: int, stage) -> tuple[Tolerance, ...]:
    """A stage's ``tolerance = {...}`` table.

    Parameters
    ----------
    raw : dict
        The parsed table: figure name to an amount, ``{ normal = ... }`` or
        ``{ uniform = ... }``.
    file : str
        The lineup file's name, for messages.
    where : str
        The stage, for messages (``"stage 2 'pa'"``).
    index : int
        Position of the stage in the lineup (from 0).
    stage : Stage
        The stage, which says what figures can spread.

    Returns
    -------
    tuple of Tolerance
        One per figure: in dB for level figures, a fraction (from "2 %") for filter
        figures; a bare amount is a normal sigma.

    Raises
    ------
    LineupError
        A figure that cannot spread, a malformed amount or a negative one.
    """
    units = stage.spread_figures()
    names = tuple(units)
    f = Fields(raw, file, f"{where} tolerance")
    out = []
    for key in list(raw):
        if key not in names:
            f.raw(key)
            allowed = ", ".join(names) or "none (this stage has no figures that spread)"

            raise f.error(key, f"cannot spread{_did_you_mean(key, names)}: expected one of {allowed}")
        if why := stage.spread_refusal(key):
            f.raw(key)
            raise f.error(key, f"cannot spread: {why}")
        value = raw[key]
        kind = "normal"
        if isinstance(value, dict):
            sub = Fields(value, file, f"{where} tolerance {key}")
            kinds = [k for k in ("normal", "uniform") if k in value]
            if len(kinds) != 1 or len(value) != 1:
                raise sub.error(None, f"{value!r}: expected {{ normal = ... }} or {{ uniform = ... }}")
            kind = kinds[0]
            value = value[kind]
        amount = _amount(value, f, key, units[key] == PERCENT)
        if amount < 0:
            raise f.error(key, f"{raw[key]!r}: expected a spread >= 0")
        f.raw(key)
        out.append(Tolerance(stage=index, figure=key, kind=kind, value=amount))
    f.finish()
    return tuple(out)


def read_corners(raw, file: str, stages) -> tuple[Corner, ...]:
    """The lineup's ``[[corner]]`` tables.

    Parameters
    ----------
    raw : list of dict
        The parsed ``[[corner]]`` tables.
    file : str
        The lineup file's name, for messages.
    stages : sequence of Stage
        The lineup's stages, which ``"stage.figure"`` keys name.

    Returns
    -------
    tuple of Corner
        Each with its shifts ``(stage index, figure, amount)``, the amount in dB or as
        a fraction as :func:`read_tolerance`.

    Raises
    ------
    LineupError
        Not an array of tables, or a shift naming an unknown stage or figure or with
        a malformed amount.
    """
    if not isinstance(raw, list):
        raise LineupError("'corner' must be an array of tables ([[corner]])", file=file)
    names = {s.name: i for i, s in enumerate(stages)}
    out = []
    for c, table in enumerate(raw, start=1):
        f = Fields(table, file, f"corner {c}")
        name = f.text("name") or f"corner {c}"
        shifts = []
        raw_shift = f.raw("shift", {})
        if not isinstance(raw_shift, dict):
            raise f.error("shift", f'{raw_shift!r}: expected a table {{ "stage.figure" = "-1 dB" }}')
        for key, text in raw_shift.items():
            stage_name, _, figure = key.rpartition(".")
            if stage_name not in names:
                raise f.error("shift", f"{key!r}: expected 'stage.figure' naming a stage of the lineup")
            i = names[stage_name]
            units = stages[i].spread_figures()
            if figure not in units:
                raise f.error(
                    "shift", f"{key!r}: {figure!r} cannot shift; expected one of {', '.join(units)}"
                )
            if why := stages[i].spread_refusal(figure):
                raise f.error("shift", f"{key!r}: {figure!r} cannot shift: {why}")
            shifts.append((i, figure, _amount(text, f, "shift", units[figure] == PERCENT)))
        f.finish()
        out.append(Corner(name=name, shifts=tuple(shifts)))
    return tuple(out)
