"""Bench sweeps: measured levels of one stage against its drive, read from CSV.

A bench sweep is what an engineer logs while stepping a signal generator: one row per
drive point, one column per measured level.  The file's own format (README, "Fitting
figures from bench sweeps"):

* ``#`` lines before the column header are comments; those of the form
  ``# key = value`` with a key below are header lines:

  - ``stage``: the stage measured (a name of the lineup);
  - ``freq``: the tone of a one-tone sweep (``"455 MHz"``);
  - ``f1`` and ``f2``, or ``freq`` and ``spacing``: the tones of a two-tone sweep
    (``f1 = freq - spacing / 2``, ``f2 = freq + spacing / 2``);
  - ``drive``: which column is the drive, ``pin_dbm`` or ``pout_dbm``;

* then a header row of column names and one row per point, comma separated.

Columns (our names; a mapping renames a file's own names to these):

* the drive, ``pin_dbm`` (input power) or ``pout_dbm`` (output power); with both, the
  drive is ``pin_dbm`` and ``pout_dbm`` is the measured fundamental, unless
  ``# drive = pout_dbm`` says otherwise (then ``pin_dbm`` may not be a column);
* ``hN_dbm`` or ``hN_dbc`` (N = 2 .. 9): harmonic N, absolute or relative to the
  fundamental at the output (one-tone sweeps);
* ``im3_dbm`` / ``im3_dbc``: the higher of the third-order products 2 f1 - f2 and
  2 f2 - f1; ``im3_low_*`` and ``im3_high_*`` each of them; ``im2_*``: the difference
  product f2 - f1; ``im2_sum_*``: f1 + f2 (two-tone sweeps).

In a two-tone sweep every power is per tone (the two tones equal): ``pin_dbm`` is
each tone's input power, ``pout_dbm`` each tone's output power, and dBc is relative
to one tone's output (the usual convention for OIP3 = Pout + delta_IM3 / 2; Razavi,
RF Microelectronics 2e, ch. 2, from memory).

Cells are numbers, optionally followed by the column's own unit (``-12.5 dBm``); an
empty cell is a level that was not measured at that point (below the analyser's
floor, say).  Everything else is a one-line error naming the file, the line, the
column, the value and what was expected: no drive column, drive values that do not
increase, NaN or infinity, a cell in another unit than its column (mixed units), a
figure in two units (``h2_dbm`` and ``h2_dbc``).  The file is read through
:func:`spurplan.fields.read_text_file` (a regular UTF-8 file, bounded size).
"""

from __future__ import annotations

import csv
import difflib
import math
import re
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from spurplan.errors import LineupError, UnitError
from spurplan.fields import CARRIER_FREQ, read_text_file
from spurplan.units import parse_freq_hz

# A bench log of a few hundred points is a few tens of kilobytes; 4 MiB bounds the read.
MAX_SWEEP_BYTES = 4 << 20
# Each fit evaluation runs the whole sweep as one engine batch: bounded before any work.
MAX_SWEEP_POINTS = 10_000
HEADER_KEYS = ("stage", "freq", "f1", "f2", "spacing", "drive")
DRIVE_COLUMNS = ("pin_dbm", "pout_dbm")
HARMONIC_ORDERS = tuple(range(2, 10))
TWO_TONE_QUANTITIES = ("im3", "im3_low", "im3_high", "im2", "im2_sum")
ONE_TONE_QUANTITIES = tuple(f"h{n}" for n in HARMONIC_ORDERS)
# Measured levels: absolute (dBm) within what the unit parser takes and an analyser
# shows; relative (dBc) up to +20 dB above the carrier (a product never exceeds it by
# more on a bench; common practice, no source).
LEVEL_DBM_RANGE = (-300.0, 100.0)
LEVEL_DBC_RANGE = (-300.0, 20.0)
_CELL = re.compile(r"\s*([^\s]+?)\s*(dBm|dBc)?\s*")


@dataclass(frozen=True, eq=False)
class SweepColumn:
    """One column of measured levels.

    Attributes
    ----------
    quantity : str
        What was measured: ``"pout"`` (the fundamental, per tone), ``"h2"`` .. ``"h9"``,
        ``"im3"``, ``"im3_low"``, ``"im3_high"``, ``"im2"``, ``"im2_sum"``.
    unit : {"dBm", "dBc"}
        Absolute, or relative to the fundamental (per tone) at the output.
    header : str
        The column's name in the file (before any mapping).
    level : ndarray (points,)
        The readings (dBm or dBc); NaN where the cell was empty (not measured).
    """

    quantity: str
    unit: str
    header: str
    level: np.ndarray

    @property
    def name(self) -> str:
        """Our column name, e.g. ``"h2_dbc"``."""
        return f"{self.quantity}_{self.unit.lower()}"

    @property
    def measured(self) -> int:
        """Number of points with a reading."""
        return int(np.count_nonzero(np.isfinite(self.level)))


@dataclass(frozen=True, eq=False)
class BenchSweep:
    """A bench sweep of one stage as read (see the module docstring for the format).

    Attributes
    ----------
    path : str
        The file it was read from.
    stage : str or None
        The stage named by its ``# stage`` header line.
    tones_hz : tuple of float
        ``(f,)`` for a one-tone sweep, ``(f1, f2)`` for a two-tone sweep (Hz).
    drive : {"pin_dbm", "pout_dbm"}
        The drive column: input or output power (per tone).
    drive_dbm : ndarray (points,)
        The drive values, strictly increasing (dBm).
    columns : tuple of SweepColumn
        The measured levels.
    lines : tuple of int
        The file line of each point, for messages and the residual table.
    ignored : tuple of str
        Columns of the file that are none of ours (left aside, named in a note).
    """

    path: str
    stage: str | None
    tones_hz: tuple[float, ...]
    drive: str
    drive_dbm: np.ndarray
    columns: tuple[SweepColumn, ...]
    lines: tuple[int, ...]
    ignored: tuple[str, ...] = ()

    @property
    def two_tone(self) -> bool:
        return len(self.tones_hz) == 2

    def column(self, quantity: str) -> SweepColumn | None:
        """The column measuring ``quantity`` (``"h2"``, ``"pout"`` ...), or ``None``."""
        return next((c for c in self.columns if c.quantity == quantity), None)


def _known_names() -> tuple[str, ...]:
    quantities = ("pout", *ONE_TONE_QUANTITIES, *TWO_TONE_QUANTITIES)
    return ("pin_dbm", *(f"{q}_{u}" for q in quantities for u in ("dbm", "dbc")))


KNOWN_COLUMNS = _known_names()


def read_sweep(path, columns: Mapping[str, str] | None = None) -> BenchSweep:
    """Read a bench sweep CSV file (module docstring), checked at the boundary.

    Parameters
    ----------
    path : str or os.PathLike
        The CSV file.
    columns : mapping of str to str, optional
        The file's column names to ours (``{"Pin": "pin_dbm", "2nd": "h2_dbc"}``), for
        files whose columns are named otherwise; a name not in it is read as ours.

    Returns
    -------
    BenchSweep

    Raises
    ------
    LineupError
        One line naming the file (and line, column, value) and what was expected.
    """
    name = str(path)
    mapping = dict(columns or {})
    for theirs, mapped in mapping.items():
        if mapped not in KNOWN_COLUMNS:
            raise LineupError(
                f"column mapping {theirs!r}={mapped!r}: expected one of our column names ({_names_hint(mapped)})",
                file=name,
                field="{@columns}",
            )
    text = read_text_file(path, "a bench sweep (CSV with a header row)", MAX_SWEEP_BYTES)
    lines = text.splitlines()
    header: dict[str, tuple[str, int]] = {}
    first = None
    for n, line in enumerate(lines, start=1):
        stripped = line.strip()
        if not stripped:
            continue
        if stripped.startswith("#"):
            _header_line(stripped[1:], n, name, header)
            continue
        first = n
        break
    if first is None:
        raise LineupError("no header row of column names: expected e.g. 'pin_dbm,pout_dbm,h2_dbm'", file=name)
    names = [c.strip() for c in next(csv.reader([lines[first - 1]]))]
    ours = [mapping.get(c, c) for c in names]
    tones = _tones(header, name)
    drive = _drive(header, ours, name, first)
    used, ignored = _columns_used(ours, names, drive, tones, name, first)
    rows: list[list[str]] = []
    row_lines: list[int] = []
    for n in range(first + 1, len(lines) + 1):
        line = lines[n - 1]
        if not line.strip() or line.lstrip().startswith("#"):
            continue
        cells = next(csv.reader([line]))
        if len(cells) != len(names):
            raise LineupError(
                f"{len(cells)} cells: expected {len(names)}, one per column of the header row",
                file=f"{name}:{n}",
            )
        rows.append(cells)
        row_lines.append(n)
        if len(rows) > MAX_SWEEP_POINTS:
            raise LineupError(
                f"more than {MAX_SWEEP_POINTS} points: expected at most {MAX_SWEEP_POINTS}", file=name
            )
    if not rows:
        raise LineupError("no data rows under the header row: expected one row per drive point", file=name)
    values: dict[str, np.ndarray] = {}
    for j, col in used.items():
        values[col] = np.array(
            [
                _cell(rows[i][j], col, names[j], f"{name}:{row_lines[i]}", col == drive)
                for i in range(len(rows))
            ]
        )
    drive_dbm = values[drive]
    steps = np.diff(drive_dbm)
    if np.any(steps <= 0):
        i = int(np.nonzero(steps <= 0)[0][0])
        what = "repeats" if steps[i] == 0 else "is below"
        raise LineupError(
            f"column {names[_index(used, drive)]!r}: {drive_dbm[i + 1]:g} dBm {what} the previous point's "
            f"{drive_dbm[i]:g} dBm: expected drive values that increase from row to row",
            file=f"{name}:{row_lines[i + 1]}",
        )
    measured = tuple(
        SweepColumn(
            quantity=col.rsplit("_", 1)[0],
            unit="dBm" if col.endswith("_dbm") else "dBc",
            header=names[j],
            level=values[col],
        )
        for j, col in used.items()
        if col != drive
    )
    stage = header.get("stage", (None, 0))[0]
    return BenchSweep(
        path=name,
        stage=stage,
        tones_hz=tones,
        drive=drive,
        drive_dbm=drive_dbm,
        columns=measured,
        lines=tuple(row_lines),
        ignored=tuple(ignored),
    )


def _names_hint(name: str) -> str:
    close = difflib.get_close_matches(name, KNOWN_COLUMNS, n=1)
    return f"did you mean {close[0]!r}?" if close else "pin_dbm, pout_dbm, hN_dbm or hN_dbc, im3_dbm ..."


def _index(used: dict[int, str], col: str) -> int:
    return next(j for j, c in used.items() if c == col)


def _header_line(body: str, n: int, name: str, header: dict) -> None:
    """A ``# key = value`` header line into ``header``; other comments are left alone."""
    key, sep, value = body.partition("=")
    key, value = key.strip(), value.strip()
    if not sep or not re.fullmatch(r"[A-Za-z_][A-Za-z0-9_]*", key):
        return  # free text
    if key not in HEADER_KEYS:
        close = difflib.get_close_matches(key, HEADER_KEYS, n=1, cutoff=0.75)
        if close:
            raise LineupError(
                f"header line {key!r}: expected one of {', '.join(HEADER_KEYS)} (did you mean {close[0]!r}?)",
                file=f"{name}:{n}",
            )
        return
    if key in header:
        raise LineupError(
            f"header line {key!r} given twice (also on line {header[key][1]}): expected it once",
            file=f"{name}:{n}",
        )
    if not value:
        raise LineupError(f"header line {key!r} has no value: expected '# {key} = ...'", file=f"{name}:{n}")
    header[key] = (value, n)


def _freq(header: dict, key: str, name: str) -> float | None:
    if key not in header:
        return None
    value, n = header[key]
    try:
        f = parse_freq_hz(value)
    except UnitError as exc:
        raise LineupError(f"header line {key!r}: {exc}", file=f"{name}:{n}") from None
    if f not in CARRIER_FREQ and key != "spacing":
        raise LineupError(f"header line {key!r}: {value!r}: {CARRIER_FREQ.expected()}", file=f"{name}:{n}")
    if f <= 0:
        raise LineupError(f"header line {key!r}: {value!r}: expected a frequency > 0 Hz", file=f"{name}:{n}")
    return f


def _tones(header: dict, name: str) -> tuple[float, ...]:
    """``(f,)`` or ``(f1, f2)`` from the header lines (Hz)."""
    freq, f1, f2, spacing = (_freq(header, k, name) for k in ("freq", "f1", "f2", "spacing"))
    if f1 is not None or f2 is not None:
        if f1 is None or f2 is None or freq is not None or spacing is not None:
            raise LineupError(
                "two-tone header lines: expected both '# f1 =' and '# f2 =' (and neither '# freq' nor "
                "'# spacing'), or '# freq =' and '# spacing ='",
                file=name,
            )
        if not f1 < f2:
            raise LineupError(
                f"header lines f1 {f1:.9g} Hz and f2 {f2:.9g} Hz: expected f1 < f2",
                file=f"{name}:{header['f2'][1]}",
            )
        return (f1, f2)
    if freq is None:
        raise LineupError(
            "no '# freq = ...' header line: expected the tone's frequency (a one-tone sweep), or "
            "'# f1 =' and '# f2 =' (a two-tone sweep)",
            file=name,
        )
    if spacing is None:
        return (freq,)
    if not spacing < 2 * freq:
        raise LineupError(
            f"header line 'spacing' {spacing:.9g} Hz: expected less than twice freq ({2 * freq:.9g} Hz)",
            file=f"{name}:{header['spacing'][1]}",
        )
    return (freq - spacing / 2, freq + spacing / 2)


def _drive(header: dict, ours: list[str], name: str, line: int) -> str:
    """The drive column: declared by ``# drive``, else ``pin_dbm``, else ``pout_dbm``."""
    if "drive" in header:
        value, n = header["drive"]
        if value not in DRIVE_COLUMNS:
            raise LineupError(
                f"header line 'drive' {value!r}: expected pin_dbm or pout_dbm", file=f"{name}:{n}"
            )
        if value not in ours:
            raise LineupError(
                f"header line 'drive' names {value!r}, which is not a column: expected it in the header row",
                file=f"{name}:{n}",
            )
        if value == "pout_dbm" and "pin_dbm" in ours:
            raise LineupError(
                "header line 'drive' is pout_dbm but pin_dbm is a column too: expected the input power as the "
                "drive ('# drive = pin_dbm'), with pout_dbm the measured fundamental",
                file=f"{name}:{n}",
            )
        return value
    for col in DRIVE_COLUMNS:
        if col in ours:
            return col
    raise LineupError(
        "no drive column: expected pin_dbm (input power) or pout_dbm (output power) in the header row "
        "(or a column mapping to one of them)",
        file=f"{name}:{line}",
    )


def _columns_used(ours, names, drive: str, tones, name: str, line: int):
    """Column index -> our name for the columns read; the others' names (ignored)."""
    used: dict[int, str] = {}
    ignored: list[str] = []
    seen: dict[str, str] = {}
    where = f"{name}:{line}"
    for j, col in enumerate(ours):
        if col not in KNOWN_COLUMNS:
            close = difflib.get_close_matches(col.lower(), KNOWN_COLUMNS, n=1, cutoff=0.8)
            if close:
                raise LineupError(
                    f"column {names[j]!r}: expected one of our column names (did you mean {close[0]!r}?), "
                    "or a column mapping",
                    file=where,
                )
            ignored.append(names[j])
            continue
        if col in used.values():
            raise LineupError(f"column {col!r} appears twice: expected each column once", file=where)
        quantity, _unit = col.rsplit("_", 1)
        if quantity in seen and col != "pin_dbm":
            raise LineupError(
                f"columns {seen[quantity]!r} and {names[j]!r} give {quantity} in two units (mixed units): "
                "expected one of dBm and dBc",
                file=where,
            )
        seen[quantity] = names[j]
        if quantity in TWO_TONE_QUANTITIES and len(tones) == 1:
            raise LineupError(
                f"column {names[j]!r} is a two-tone product but the header gives one tone: expected "
                "'# f1 =' and '# f2 =' (or '# spacing =') header lines",
                file=where,
            )
        if quantity in ONE_TONE_QUANTITIES and len(tones) == 2:
            raise LineupError(
                f"column {names[j]!r} is a harmonic but the header gives two tones: expected harmonics in "
                "a one-tone sweep of their own",
                file=where,
            )
        if col == "pout_dbc":
            raise LineupError(
                f"column {names[j]!r}: the fundamental relative to itself: expected pout_dbm", file=where
            )
        used[j] = col
    if len(used) < 2:
        raise LineupError(
            f"only the drive column {drive!r}: expected measured levels beside it (pout_dbm, hN_dbm, im3_dbm ...)",
            file=where,
        )
    return used, ignored


def _cell(text: str, col: str, header: str, where: str, is_drive: bool) -> float:
    """One cell as a finite number in its column's unit; NaN for an empty level cell."""
    unit = "dBm" if col.endswith("_dbm") else "dBc"
    if not text.strip():
        if is_drive:
            raise LineupError(
                f"column {header!r} is empty: expected a drive value (dBm) on every row", file=where
            )
        return math.nan
    m = _CELL.fullmatch(text)
    number, given = (m.group(1), m.group(2)) if m else (text.strip(), None)
    if given is not None and given != unit:
        raise LineupError(
            f"column {header!r}: {text.strip()!r} is in {given} but the column is in {unit} (mixed units): "
            f"expected {unit}",
            file=where,
        )
    try:
        value = float(number)
    except ValueError:
        value = None
    if value is None or not math.isfinite(value):
        raise LineupError(
            f"column {header!r}: {text.strip()[:60]!r}: expected a finite number (a level in {unit})",
            file=where,
        )
    lo, hi = LEVEL_DBM_RANGE if unit == "dBm" else LEVEL_DBC_RANGE
    if not lo <= value <= hi:
        raise LineupError(
            f"column {header!r}: {value:g} {unit}: expected a level from {lo:g} to {hi:+g} {unit}", file=where
        )
    return value
