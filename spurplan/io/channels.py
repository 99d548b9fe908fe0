"""The points a sweep visits: start, stop and step, or a channel file.

Read here, at the input boundary, with the limits that bound a sweep's work before it
starts (:data:`MAX_POINTS`); used by the drive and tuning sweeps
(:mod:`spurplan.analyses.sweep`), the yield's channels and a lineup's ``[report]``
sweeps.
"""

from __future__ import annotations

import math

import numpy as np

from spurplan.errors import LineupError, SweepError, UnitError
from spurplan.fields import CARRIER_FREQ, MAX_CHANNEL_FILE_BYTES, read_text_file
from spurplan.units import parse_freq_hz

MAX_POINTS = 200_000


def sweep_points(
    start: float, stop: float, step: float, what: str, unit: str, step_unit: str | None = None
) -> np.ndarray:
    """``start, start + step, ... <= stop``; errors name the argument and the value.

    Parameters
    ----------
    start, stop : float
        First point and upper end, in ``unit`` (dBm for drive, Hz for tuning).
    step : float
        Spacing (> 0), in ``step_unit`` (dB for drive, Hz for tuning).
    what : str
        What the points are, for messages ("drive", "channel" ...).
    unit : str
        Unit of ``start`` and ``stop`` in messages.
    step_unit : str or None, optional
        Unit of ``step`` in messages; ``None`` for ``unit``.

    Returns
    -------
    ndarray, shape (n,)
        The points (unit of ``start``); ``stop`` is included when it lies on the grid
        (to a relative 1e-12).

    Raises
    ------
    SweepError
        A non-finite value, a step <= 0, stop below start, or more than
        :data:`MAX_POINTS` points.
    """
    step_unit = step_unit or unit
    if not (math.isfinite(start) and math.isfinite(stop) and math.isfinite(step)):
        raise SweepError(f"{{@start}}/{{@stop}}/{{@step}}: expected finite {what}s")
    if step <= 0:
        raise SweepError(f"{{@step}} {step:g} {step_unit}: expected a step > 0")
    if stop < start:
        raise SweepError(
            f"{{@stop}} {stop:g} {unit} is below {{@start}} {start:g} {unit}: expected stop >= start"
        )
    count = (stop - start) / step
    if not count < MAX_POINTS:
        shown = f"{count:.3g}" if math.isfinite(count) else "too many"
        raise SweepError(
            f"{{@step}} {step:g} {step_unit} makes {shown} {what} points: expected at most {MAX_POINTS} "
            "(use a larger {@step})"
        )
    n = math.floor(count * (1 + 1e-12)) + 1
    return start + step * np.arange(n)


def read_channels(path) -> np.ndarray:
    """Carrier frequencies from a file: one per line with its unit; '#' starts a comment.

    The file is read as data with limits (:func:`spurplan.fields.read_text_file`: a
    regular UTF-8 file of at most :data:`~spurplan.fields.MAX_CHANNEL_FILE_BYTES`), and
    reading stops at the first channel beyond :data:`MAX_POINTS`.
    """
    text_all = read_text_file(path, "a text file of frequencies, one per line", MAX_CHANNEL_FILE_BYTES)
    out = []
    for n, line in enumerate(text_all.splitlines(), start=1):
        text = line.split("#", 1)[0].strip()
        if not text:
            continue
        try:
            value = parse_freq_hz(text)
        except UnitError as exc:
            raise LineupError(str(exc), file=f"{path}:{n}") from None
        if value <= 0:
            raise LineupError(f"{text!r}: expected a carrier frequency > 0 Hz", file=f"{path}:{n}")
        if value not in CARRIER_FREQ:
            raise LineupError(f"{text!r}: {CARRIER_FREQ.expected()}", file=f"{path}:{n}")
        out.append(value)
        if len(out) > MAX_POINTS:
            raise LineupError(
                f"more than {MAX_POINTS} channels: expected at most {MAX_POINTS}", file=str(path)
            )
    if not out:
        raise LineupError("no frequencies: expected one per line, e.g. '462.5625 MHz'", file=str(path))
    return np.array(out)
