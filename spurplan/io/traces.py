"""Measured spectra: spectrum-analyser traces read as data, with located errors.

Two text layouts are read (README, "Measured traces"):

* **CSV** (comma, semicolon or tab separated).  Before the data, any number of header
  lines: our own ``# key = value`` lines (``# rbw = 100 kHz``, ``# detector = peak``,
  ``# reference_level = 20 dBm``; ``:`` may stand for ``=``), and ``key,value`` rows as
  instruments commonly export them (``RBW,100 kHz`` or ``RBW,100000,Hz`` or
  ``RBW (Hz),100000``).  Then one row of column names and the data rows.  The units of a
  column are in its name (``Frequency (MHz)``, ``Level [dBm]``, ``freq_hz``), in its
  cells (``455.2 MHz``), or in a ``# freq_unit = MHz`` / ``# level_unit = dBm`` line.
  Which columns hold the frequency and the level is found from their names
  (``freq``/``frequency``; ``level``/``amplitude``/``power``/``trace``), or given by a
  column mapping (``{"freq": "Frequency", "level": "Amplitude"}``).
* **Two-column text**, Touchstone-like: whitespace-separated frequency and level, ``!``
  comments (``! rbw = 100 kHz`` is a header line there), and an option line
  ``# MHz`` (optionally ``# MHz dBm``) giving the frequency unit.  The level is dBm.

The resolution bandwidth, detector and reference level may also be given by the caller
(the command line's options).  When the file states one too and they differ, that is an
error: a measurement whose RBW is stated twice, differently, is a doubtful number, and
the comparison's conversions depend on it (the file or the option must be corrected).

Everything a reading refuses is a :class:`~spurplan.errors.LineupError` naming the file,
the line (and column), the value and what was expected.  Files are read only through
:func:`spurplan.fields.read_text_file` (regular files, bounded size).
"""

from __future__ import annotations

import csv
import difflib
import math
import re
from dataclasses import dataclass

import numpy as np

from spurplan.errors import LineupError, UnitError
from spurplan.fields import read_text_file
from spurplan.units import MAX_FREQ_HZ, POWER_RANGE_DBM, parse_freq_hz, parse_power_dbm

# A trace of 1,000,001 points with 40 characters a line is 40 MB; analysers export at
# most some 100,000 points (common practice, no source), so 64 MiB and a million points
# leave room without letting a runaway file take the machine.
MAX_TRACE_BYTES = 64 << 20
MAX_POINTS = 1_000_000
# The floor estimate and the peak search need some points beside each peak.
MIN_POINTS = 11

DETECTORS = ("peak", "rms", "average", "sample", "negative-peak")
_DETECTOR_SPELLINGS = {
    "peak": "peak",
    "positive peak": "peak",
    "pos peak": "peak",
    "max peak": "peak",
    "maxpeak": "peak",
    "posPeak": "peak",
    "rms": "rms",
    "power average": "rms",
    "rms average": "rms",
    "average": "average",
    "avg": "average",
    "log average": "average",
    "video average": "average",
    "voltage average": "average",
    "sample": "sample",
    "samp": "sample",
    "negative peak": "negative-peak",
    "negative-peak": "negative-peak",
    "neg peak": "negative-peak",
    "min peak": "negative-peak",
    "minpeak": "negative-peak",
}
_DETECTOR_EXPECTED = "a detector: " + ", ".join(DETECTORS)

# Header keys, by their normalised spelling (lower case, no spaces, "_" or "-").
_KEYS = {
    "rbw": "rbw",
    "resolutionbandwidth": "rbw",
    "resbw": "rbw",
    "resbandwidth": "rbw",
    "detector": "detector",
    "det": "detector",
    "referencelevel": "reference_level",
    "reflevel": "reference_level",
    "reflvl": "reference_level",
    "frequnit": "freq_unit",
    "frequencyunit": "freq_unit",
    "levelunit": "level_unit",
    "amplitudeunit": "level_unit",
}
_OWN_KEYS = ("rbw", "detector", "reference_level", "freq_unit", "level_unit")

_FREQ_UNITS = {"hz": "Hz", "khz": "kHz", "mhz": "MHz", "ghz": "GHz"}
_FREQ_SCALE = {"Hz": 1.0, "kHz": 1e3, "MHz": 1e6, "GHz": 1e9}
_LEVEL_UNITS = ("dBm",)
_FREQ_NAMES = ("freq", "frequency", "f", "x")
_LEVEL_NAMES = ("level", "amplitude", "ampl", "power", "trace", "magnitude", "mag", "y")
# A unit written in a column name: "Frequency (MHz)", "Level [dBm]", "freq_hz", "level dBm".
_NAME_UNIT = re.compile(r"^(.*?)[\s_]*(?:[(\[]\s*([A-Za-z]+)\s*[)\]]|[\s_]([A-Za-z]+))?\s*$")
_OPTION_LINE = re.compile(r"^#\s*([A-Za-z]+)(?:\s+([A-Za-z]+))?\s*$")
_NUMBER = re.compile(r"^[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?$")
_CELL = re.compile(r"^([+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?)\s*([A-Za-z]+)?$")


@dataclass(frozen=True)
class MeasuredTrace:
    """A spectrum-analyser trace: frequencies and levels, and how it was measured.

    Attributes
    ----------
    freq_hz : ndarray, (N,)
        Frequencies (Hz), strictly increasing, finite (read-only array).
    level_dbm : ndarray, (N,)
        Levels (dBm) in the resolution bandwidth ``rbw_hz`` (read-only array).
    rbw_hz : float or None
        Resolution bandwidth (Hz); None when neither the file nor the caller states it.
    detector : str or None
        One of :data:`DETECTORS`, None when not stated.
    reference_level_dbm : float or None
        The analyser's reference level (dBm), None when not stated; recorded, not used in
        the arithmetic (a level above it may have overloaded the analyser: a note says so).
    source : str
        The file it was read from (or a description for a trace built in code).
    """

    freq_hz: np.ndarray
    level_dbm: np.ndarray
    rbw_hz: float | None
    detector: str | None
    reference_level_dbm: float | None
    source: str

    def __post_init__(self) -> None:
        for name in ("freq_hz", "level_dbm"):
            arr = np.array(getattr(self, name), dtype=float)
            arr.setflags(write=False)
            object.__setattr__(self, name, arr)

    @property
    def span_hz(self) -> tuple[float, float]:
        """First and last frequency (Hz)."""
        return float(self.freq_hz[0]), float(self.freq_hz[-1])

    @property
    def step_hz(self) -> float:
        """Largest spacing between neighbouring points (Hz)."""
        return float(np.max(np.diff(self.freq_hz)))


def make_trace(
    freq_hz,
    level_dbm,
    rbw_hz: float | None,
    detector: str | None = None,
    reference_level_dbm: float | None = None,
    source: str = "trace",
) -> MeasuredTrace:
    """A :class:`MeasuredTrace` from arrays, validated as a file's data is.

    Parameters
    ----------
    freq_hz : array_like, (N,)
        Frequencies (Hz), strictly increasing.
    level_dbm : array_like, (N,)
        Levels (dBm) in ``rbw_hz``.
    rbw_hz : float or None
        Resolution bandwidth (Hz).
    detector : str, optional
        One of :data:`DETECTORS` (or a common spelling of one).
    reference_level_dbm : float, optional
        Reference level (dBm).
    source : str, optional
        What the trace is, for messages.

    Returns
    -------
    MeasuredTrace

    Raises
    ------
    LineupError
        Unsorted, duplicate or non-finite values, too few or too many points, a value
        out of range.
    """
    freq = np.asarray(freq_hz, dtype=float).ravel()
    level = np.asarray(level_dbm, dtype=float).ravel()
    if freq.shape != level.shape:
        raise LineupError(
            f"{freq.size} frequencies but {level.size} levels: expected one level each", file=source
        )
    lines = np.arange(1, freq.size + 1)
    _check_points(freq, level, lines, source, "point", ("frequency", "level"))
    det = None if detector is None else _detector(detector, source, None)
    if rbw_hz is not None:
        _check_rbw(rbw_hz, source)
    return MeasuredTrace(freq, level, rbw_hz, det, reference_level_dbm, source)


def read_trace(
    path,
    *,
    rbw_hz: float | None = None,
    detector: str | None = None,
    reference_level_dbm: float | None = None,
    columns: dict[str, str] | None = None,
    require_rbw: bool = True,
) -> MeasuredTrace:
    """Read a trace file (CSV or Touchstone-like two-column text).

    Parameters
    ----------
    path : str or os.PathLike
        The file.
    rbw_hz : float, optional
        Resolution bandwidth (Hz), if the file does not state it; a file that states a
        different one is an error.
    detector : str, optional
        The detector (:data:`DETECTORS`), likewise.
    reference_level_dbm : float, optional
        Reference level (dBm), likewise.
    columns : dict of str to str, optional
        ``{"freq": NAME, "level": NAME}``: the CSV columns to read, by their names in the
        file (without the unit, case-insensitive).  Either key may be left out.
    require_rbw : bool, optional
        Refuse a trace whose RBW neither the file nor ``rbw_hz`` states (the comparison
        and the mask check need it).

    Returns
    -------
    MeasuredTrace

    Raises
    ------
    LineupError
        One line naming the file, the line (and column), the value and what was expected.
    """
    name = str(path)
    text = read_text_file(path, "a spectrum-analyser trace (CSV or two-column text)", MAX_TRACE_BYTES)
    lines = text.splitlines()
    if columns is not None:
        bad = sorted(set(columns) - {"freq", "level"})
        if bad:
            raise LineupError(f"{bad[0]!r}: expected the keys freq and level in {{@columns}}", file=name)
    if _is_two_column(lines):
        if columns:
            raise LineupError(
                "a two-column text trace has no column names: {@columns} applies to CSV traces", file=name
            )
        header, freq, level, _ = _read_two_column(lines, name)
    else:
        header, freq, level, _ = _read_csv(lines, name, columns or {})
    stated = {
        "rbw": (header.get("rbw"), rbw_hz, "{@rbw_hz}"),
        "detector": (
            header.get("detector"),
            None if detector is None else _detector(detector, name, None),
            "{@detector}",
        ),
        "reference_level": (header.get("reference_level"), reference_level_dbm, "{@reference_level_dbm}"),
    }
    chosen: dict[str, object] = {}
    for key, (in_file, given, option) in stated.items():
        if in_file is not None and given is not None and not _same(in_file[0], given):
            raise LineupError(
                f"the file states {key} {_show(key, in_file[0])} (line {in_file[1]}) but {option} gives "
                f"{_show(key, given)}: expected one value (correct the file's header or leave {option} out)",
                file=name,
            )
        chosen[key] = in_file[0] if in_file is not None else given
    rbw = chosen["rbw"]
    if rbw is None and require_rbw:
        raise LineupError(
            "no resolution bandwidth: expected a header line such as '# rbw = 100 kHz' or {@rbw_hz} "
            "(levels in different bandwidths cannot be compared)",
            file=name,
        )
    if rbw is not None:
        _check_rbw(float(rbw), name)  # type: ignore[arg-type]
    return MeasuredTrace(
        freq,
        level,
        None if rbw is None else float(rbw),  # type: ignore[arg-type]
        chosen["detector"],  # type: ignore[arg-type]
        None if chosen["reference_level"] is None else float(chosen["reference_level"]),  # type: ignore[arg-type]
        name,
    )


def parse_columns(text: str) -> dict[str, str]:
    """A column mapping written ``freq=Frequency,level=Amplitude``.

    Parameters
    ----------
    text : str
        ``key=NAME`` pairs separated by commas; keys ``freq`` and ``level``.

    Returns
    -------
    dict of str to str

    Raises
    ------
    LineupError
        A pair without ``=``, an unknown or repeated key, an empty name.
    """
    out: dict[str, str] = {}
    for part in text.split(","):
        key, sep, value = part.partition("=")
        key, value = key.strip(), value.strip()
        if not sep or key not in ("freq", "level") or not value or key in out:
            raise LineupError(
                f"{{@columns}} {text!r}: expected freq=NAME,level=NAME (each key once), not {part.strip()!r}"
            )
        out[key] = value
    return out


# --- the two layouts --------------------------------------------------------------------------


def _is_two_column(lines: list[str]) -> bool:
    """Touchstone-like: an option line ``# MHz``, ``!`` comments, or whitespace-only data."""
    for raw in lines:
        line = raw.strip()
        if not line:
            continue
        if line.startswith("!"):
            return True
        if line.startswith("#"):
            m = _OPTION_LINE.match(line)
            if m and m.group(1).lower() in _FREQ_UNITS:
                return True
            continue
        # The first data or header row: no separator, two numbers.
        return not any(sep in line for sep in ",;\t") and all(_NUMBER.match(t) for t in line.split())
    return False


def _read_two_column(lines: list[str], name: str):
    header: dict[str, tuple[object, int]] = {}
    unit = None
    freqs: list[float] = []
    levels: list[float] = []
    rows: list[int] = []
    for n, raw in enumerate(lines, start=1):
        line = raw.split("!", 1)[0].strip()
        comment = raw.strip()[1:] if raw.strip().startswith("!") else ""
        if comment and ("=" in comment or ":" in comment):
            _header_line(comment, n, name, header, strict=False)
        if not line:
            continue
        if line.startswith("#"):
            m = _OPTION_LINE.match(line)
            if not m or m.group(1).lower() not in _FREQ_UNITS:
                raise LineupError(
                    f"{line!r}: expected an option line giving the frequency unit, e.g. '# MHz' or '# MHz dBm'",
                    file=name,
                    stage=f"line {n}",
                )
            if unit is not None:
                raise LineupError("a second option line: expected one", file=name, stage=f"line {n}")
            if m.group(2) is not None and m.group(2) != "dBm":
                raise LineupError(
                    f"level unit {m.group(2)!r}: expected dBm",
                    file=name,
                    stage=f"line {n}",
                    field="option line",
                )
            unit = _FREQ_UNITS[m.group(1).lower()]
            continue
        cells = line.split()
        if len(cells) != 2:
            raise LineupError(
                f"{line!r}: expected two values, frequency and level (dBm)", file=name, stage=f"line {n}"
            )
        freqs.append(_number(cells[0], name, n, "frequency"))
        levels.append(_number(cells[1], name, n, "level"))
        rows.append(n)
    if unit is None:
        raise LineupError(
            "no frequency unit: expected an option line such as '# MHz' before the data", file=name
        )
    freq = np.array(freqs, dtype=float) * _FREQ_SCALE[unit]
    level = np.array(levels, dtype=float)
    _check_points(freq, level, np.array(rows, dtype=int), name, "line", ("frequency", "level"))
    return header, freq, level, rows[0] if rows else 0


def _dialect(line: str) -> str:
    for sep in (",", ";", "\t"):
        if sep in line:
            return sep
    return ","


def _read_csv(lines: list[str], name: str, columns: dict[str, str]):
    header: dict[str, tuple[object, int]] = {}
    start = None
    for n, raw in enumerate(lines, start=1):
        line = raw.strip()
        if not line:
            continue
        if line.startswith("#"):
            _header_line(line[1:], n, name, header, strict=True)
            continue
        cells = [c.strip() for c in next(csv.reader([line], delimiter=_dialect(line)))]
        while cells and not cells[-1]:
            cells.pop()  # a trailing separator, as some exports write
        if _is_data_row(cells):
            raise LineupError(
                f"data before any column names ({line[:60]!r}): expected a row naming the columns, "
                "e.g. 'Frequency (MHz),Level (dBm)'",
                file=name,
                stage=f"line {n}",
            )
        if len(cells) >= 2 and _looks_like_names(cells, n, lines):
            start = n
            break
        # A "key,value[,unit]" preamble row, as instruments write before the data.
        if len(cells) >= 2:
            base, inline = _split_name(cells[0])
            key = _key(base)
            if key in _KEYS:
                value = cells[1]
                if len(cells) >= 3 and cells[2] and not _has_unit(value):
                    value = f"{value} {cells[2]}"
                elif inline and not _has_unit(value) and _KEYS[key] != "detector":
                    value = f"{value} {inline}"
                _store(header, _KEYS[key], value, n, name)
    if start is None:
        raise LineupError(
            "no column names and data: expected a row naming the columns (e.g. 'Frequency (MHz),Level (dBm)') "
            "followed by data rows",
            file=name,
        )
    sep = _dialect(lines[start - 1])
    names = [c.strip() for c in next(csv.reader([lines[start - 1].strip()], delimiter=sep))]
    while names and not names[-1]:
        names.pop()
    parsed = [_split_name(c) for c in names]
    fi = _pick(parsed, names, columns.get("freq"), _FREQ_NAMES, "frequency", "freq", name, start)
    li = _pick(parsed, names, columns.get("level"), _LEVEL_NAMES, "level", "level", name, start, exclude=fi)
    units = {
        "freq": _column_unit(parsed[fi][1], header.get("freq_unit"), "frequency", names[fi], name, start),
        "level": _column_unit(parsed[li][1], header.get("level_unit"), "level", names[li], name, start),
    }
    freqs: list[float] = []
    levels: list[float] = []
    rows: list[int] = []
    seen: dict[str, tuple[str, int]] = {}
    for n in range(start + 1, len(lines) + 1):
        line = lines[n - 1].strip()
        if not line or line.startswith("#"):
            continue
        cells = [c.strip() for c in next(csv.reader([line], delimiter=sep))]
        while len(cells) > len(names) and not cells[-1]:
            cells.pop()
        if len(cells) <= max(fi, li):
            raise LineupError(
                f"{len(cells)} value(s): expected {len(names)} (columns {', '.join(names)})",
                file=name,
                stage=f"line {n}",
            )
        for idx, key, into in ((fi, "freq", freqs), (li, "level", levels)):
            number, unit = _cell(cells[idx], name, n, names[idx])
            into.append(_scaled(number, unit, units[key], key, seen, name, n, names[idx]))
        rows.append(n)
    freq = np.array(freqs, dtype=float)
    level = np.array(levels, dtype=float)
    _check_points(freq, level, np.array(rows, dtype=int), name, "line", (names[fi], names[li]))
    return header, freq, level, start + 1


# --- header lines ------------------------------------------------------------------------------


def _key(text: str) -> str:
    return re.sub(r"[\s_\-.]", "", text).lower()


def _header_line(text: str, n: int, name: str, header: dict, strict: bool) -> None:
    """``key = value`` (or ``key: value``); free comments (no ``=``/``:``) are skipped."""
    m = re.match(r"^\s*([A-Za-z][\w .\-]*?)\s*[=:]\s*(.*?)\s*$", text)
    if not m:
        return
    key, value = _key(m.group(1)), m.group(2)
    if key in _KEYS:
        _store(header, _KEYS[key], value, n, name)
        return
    near = difflib.get_close_matches(m.group(1).strip().lower(), _OWN_KEYS, n=1, cutoff=0.6)
    if strict and near:
        raise LineupError(
            f"header key {m.group(1).strip()!r} (did you mean {near[0]!r}?): expected one of "
            + ", ".join(_OWN_KEYS),
            file=name,
            stage=f"line {n}",
        )


def _store(header: dict, key: str, value: str, n: int, name: str) -> None:
    where = {"file": name, "stage": f"line {n}", "field": key}
    try:
        if key == "rbw":
            parsed: object = parse_freq_hz(value)
        elif key == "reference_level":
            parsed = parse_power_dbm(value)
        elif key == "detector":
            parsed = _detector(value, name, n)
        elif key == "freq_unit":
            if value.lower() not in _FREQ_UNITS:
                raise UnitError(value, "a frequency unit: Hz, kHz, MHz or GHz")
            parsed = _FREQ_UNITS[value.lower()]
        else:
            if value != "dBm":
                raise UnitError(value, "the level unit dBm")
            parsed = value
    except UnitError as exc:
        raise LineupError(str(exc), **where) from None
    if key in header and not _same(header[key][0], parsed):
        raise LineupError(
            f"{value!r}: expected one {key} (line {header[key][1]} states {_show(key, header[key][0])})",
            **where,
        )
    header.setdefault(key, (parsed, n))


def _detector(value: str, name: str, n: int | None) -> str:
    det = _DETECTOR_SPELLINGS.get(value.strip()) or _DETECTOR_SPELLINGS.get(" ".join(value.lower().split()))
    if det is None:
        raise LineupError(
            f"{value!r}: expected {_DETECTOR_EXPECTED}",
            file=name,
            stage=None if n is None else f"line {n}",
            field="detector",
        )
    return det


def _same(a: object, b: object) -> bool:
    if isinstance(a, float) and isinstance(b, (int, float)):
        return math.isclose(a, float(b), rel_tol=1e-9, abs_tol=1e-12)
    return a == b


def _show(key: str, value: object) -> str:
    if key == "rbw":
        return f"{float(value):.6g} Hz"  # type: ignore[arg-type]
    if key == "reference_level":
        return f"{float(value):+.2f} dBm"  # type: ignore[arg-type]
    return repr(value)


def _check_rbw(rbw_hz: float, name: str) -> None:
    if not (math.isfinite(rbw_hz) and 0 < rbw_hz <= 1e9):
        raise LineupError(
            f"rbw {rbw_hz!r} Hz: expected a resolution bandwidth above 0 Hz and at most 1 GHz", file=name
        )


# --- columns and cells ------------------------------------------------------------------------


def _split_name(text: str) -> tuple[str, str | None]:
    """A column name and the unit written in it (``"Frequency (MHz)"`` -> ``("frequency", "MHz")``).

    Whatever stands in parentheses or brackets is the unit; a last word after a space
    or ``_`` only when it is one ("freq_hz", not "Trace 1" or "level A").
    """
    m = _NAME_UNIT.match(text)
    if m is None:
        return text.strip().lower(), None
    base, bracketed, suffix = m.group(1), m.group(2), m.group(3)
    if bracketed is not None:
        return base.strip().lower(), bracketed
    if suffix is not None and (suffix.lower() in _FREQ_UNITS or suffix.lower() == "dbm"):
        return base.strip().lower(), suffix
    return text.strip().lower(), None


def _is_value_cell(text: str) -> bool:
    return bool(_CELL.match(text.strip())) or text.strip().lower().lstrip("+-") in ("nan", "inf", "infinity")


def _has_unit(text: str) -> bool:
    m = _CELL.match(text.strip())
    return m is None or m.group(2) is not None


def _is_data_row(cells: list[str]) -> bool:
    filled = [c for c in cells if c]
    return len(filled) >= 2 and all(_is_value_cell(c) for c in filled)


def _looks_like_names(cells: list[str], n: int, lines: list[str]) -> bool:
    """A row of column names: no cell is a number, and the next non-empty row is data."""
    if any(_is_value_cell(c) for c in cells if c):
        return False
    for later in lines[n:]:
        s = later.strip()
        if s and not s.startswith("#"):
            return _is_data_row([c.strip() for c in next(csv.reader([s], delimiter=_dialect(s)))])
    return False


def _pick(parsed, names, wanted, known, what, key, file, line, exclude=None) -> int:
    bases = [b for b, _ in parsed]
    if wanted is not None:
        w = _split_name(wanted)[0]
        hits = [
            i for i, b in enumerate(bases) if b == w or names[i].strip().lower() == wanted.strip().lower()
        ]
        if not hits:
            raise LineupError(
                f"{{@columns}} names {key} column {wanted!r}: expected one of the file's columns "
                + ", ".join(repr(c) for c in names),
                file=file,
                stage=f"line {line}",
            )
        return hits[0]
    hits = [
        i
        for i, b in enumerate(bases)
        if i != exclude and (b in known or any(b.startswith(k) for k in known if len(k) > 2))
    ]
    if len(hits) == 1:
        return hits[0]
    if len(hits) > 1:
        raise LineupError(
            f"{len(hits)} {what} columns ({', '.join(repr(names[i]) for i in hits)}): expected one, or "
            f"{{@columns}} naming it ({key}=NAME)",
            file=file,
            stage=f"line {line}",
        )
    if exclude is not None and len(names) == 2:
        return 1 - exclude  # the other of two columns is the level
    raise LineupError(
        f"no {what} column among {', '.join(repr(c) for c in names)}: expected one named "
        f"{' or '.join(known[:2])}, or {{@columns}} naming it ({key}=NAME)",
        file=file,
        stage=f"line {line}",
    )


def _column_unit(in_name, in_header, what, column, file, line):
    """The unit a column's name or the header states (None: the cells must carry it).

    In a column name the unit's case is not read ("freq_mhz" is MHz: no trace is in
    millihertz), except that "mHz" written so is refused as SI millihertz.
    """
    unit = None
    if in_name is not None:
        if what == "frequency":
            unit = None if in_name == "mHz" else _FREQ_UNITS.get(in_name.lower())
            expected = "Hz, kHz, MHz or GHz"
        else:
            unit = "dBm" if in_name.lower() == "dbm" else None
            expected = "dBm"
        if unit is None:
            raise LineupError(
                f"unit {in_name!r} in the column name: expected {expected}",
                file=file,
                stage=f"line {line}",
                field=column,
            )
    header_unit = None if in_header is None else in_header[0]
    if unit is not None and header_unit is not None and unit != header_unit:
        raise LineupError(
            f"unit {unit} in the column name but {header_unit} in the header (line {in_header[1]}): expected one",
            file=file,
            stage=f"line {line}",
            field=column,
        )
    return unit or header_unit


def _cell(text: str, file: str, n: int, column: str) -> tuple[float, str | None]:
    m = _CELL.match(text)
    if m is None:
        low = text.lower().lstrip("+-")
        why = "a finite number" if low.startswith(("nan", "inf")) else "a number"
        raise LineupError(f"{text!r}: expected {why}", file=file, stage=f"line {n}", field=column)
    value = float(m.group(1))
    if not math.isfinite(value):
        raise LineupError(f"{text!r}: expected a finite number", file=file, stage=f"line {n}", field=column)
    return value, m.group(2)


def _number(text: str, file: str, n: int, what: str) -> float:
    value, unit = _cell(text, file, n, what)
    if unit is not None:
        raise LineupError(
            f"{text!r}: expected a plain number (the option line gives the unit)",
            file=file,
            stage=f"line {n}",
            field=what,
        )
    return value


def _scaled(value, unit, column_unit, key, seen, file, n, column) -> float:
    """A cell's value in Hz or dBm; every cell of a column in one unit."""
    if unit is not None:
        if key == "freq" and unit not in _FREQ_SCALE:
            raise LineupError(
                f"{value:g} {unit}: expected a frequency in Hz, kHz, MHz or GHz",
                file=file,
                stage=f"line {n}",
                field=column,
            )
        if key == "level" and unit != "dBm":
            raise LineupError(
                f"{value:g} {unit}: expected a level in dBm", file=file, stage=f"line {n}", field=column
            )
        if column_unit is not None and unit != column_unit:
            raise LineupError(
                f"{value:g} {unit}: expected {column_unit}, the column's unit (mixed units in one column)",
                file=file,
                stage=f"line {n}",
                field=column,
            )
        first = seen.setdefault(key, (unit, n))
        if first[0] != unit:
            raise LineupError(
                f"{value:g} {unit}: expected {first[0]} as on line {first[1]} (mixed units in one column)",
                file=file,
                stage=f"line {n}",
                field=column,
            )
        use = unit
    else:
        if column_unit is None:
            expected = (
                "a unit: in the column name ('Frequency (MHz)'), a '# freq_unit = MHz' line, or the cells"
                if key == "freq"
                else "a unit: in the column name ('Level (dBm)'), a '# level_unit = dBm' line, or the cells"
            )
            raise LineupError(
                f"{value:g} without a unit: expected {expected}", file=file, stage=f"line {n}", field=column
            )
        if key in seen:
            raise LineupError(
                f"{value:g} without a unit: expected {seen[key][0]} as on line {seen[key][1]} (mixed units in one column)",
                file=file,
                stage=f"line {n}",
                field=column,
            )
        use = column_unit
    return value * _FREQ_SCALE[use] if key == "freq" else value


def _check_points(freq, level, lines, file, unit_word, names) -> None:
    """Finite values in range, strictly increasing frequencies, enough and not too many points."""
    n = freq.size
    if n < MIN_POINTS:
        raise LineupError(
            f"{n} point(s): expected at least {MIN_POINTS} (a noise floor and peaks need points around them)",
            file=file,
        )
    if n > MAX_POINTS:
        raise LineupError(f"{n} points: expected at most {MAX_POINTS}", file=file)

    def where(i: int) -> str:
        return f"{unit_word} {int(lines[i])}"

    for arr, column, lo, hi, unit in (
        (freq, names[0], 0.0, MAX_FREQ_HZ, "Hz"),
        (level, names[1], POWER_RANGE_DBM[0], POWER_RANGE_DBM[1], "dBm"),
    ):
        bad = np.nonzero(~np.isfinite(arr))[0]
        if bad.size:
            raise LineupError(
                f"{arr[bad[0]]!r}: expected a finite number", file=file, stage=where(bad[0]), field=column
            )
        out = np.nonzero((arr < lo) | (arr > hi))[0]
        if out.size:
            raise LineupError(
                f"{arr[out[0]]:.6g} {unit}: expected {lo:g} to {hi:g} {unit}",
                file=file,
                stage=where(out[0]),
                field=column,
            )
    step = np.diff(freq)
    bad = np.nonzero(step <= 0)[0]
    if bad.size:
        i = int(bad[0]) + 1
        what = "a duplicate frequency" if step[bad[0]] == 0 else "frequencies out of order"
        raise LineupError(
            f"{freq[i]:.9g} Hz after {freq[i - 1]:.9g} Hz ({what}): expected strictly increasing frequencies",
            file=file,
            stage=where(i),
            field=names[0],
        )
