"""Reading a Touchstone file as data before scikit-rf reads it.

scikit-rf 2.2 reads some broken files without a word (measured; see the project's
scikit-rf notes): an exact zero or ``-inf`` dB becomes ``S = 0``, a Touchstone 2.0
``[Number of Frequencies]`` that does not match the data, a missing ``[Network
Data]`` or ``[Two-Port Data Order]``, rows after ``[End]``, data before the option
line, a second option line and an ``R`` without a value are all accepted.  So the
file is read here first, by the layout of the Touchstone File Format Specification
(version 1.1 and version 2.0, IBIS Open Forum; from memory), and anything that a
reader would have to guess at is refused with the line, the frequency and the value.

What is refused, beyond what does not parse at all:

* an option line that is not ``# [unit] [S] [DB|MA|RI] [R n]`` (units Hz, kHz, MHz,
  GHz; parameters other than S), more than one, or one after the data;
* a value count that is not whole frequency points (``1 + 2 N^2`` values for N
  ports; 1- and 2-port files one point per line), NaN or infinite values, negative
  frequencies, frequencies that do not strictly increase, negative MA magnitudes;
* a forward transmission (S21, or S12 with ``input_port = 2``) of exactly zero: no
  instrument measures that, and in dB it is ``-inf``, which no interpolation can
  carry (values above zero but below :data:`~spurplan.model.ladders.S_FLOOR_DB` are held
  at that floor by the lookup, with a note);
* in version 2.0 files: a ``[Version]`` other than 2.0 or 2.1, unknown or repeated
  keywords, ``[Number of Ports]`` other than 2 (or other than the file name's),
  a missing ``[Two-Port Data Order]``, ``[Number of Frequencies]`` or ``[Network
  Data]``, a point count that differs from ``[Number of Frequencies]`` (or noise rows
  from ``[Number of Noise Frequencies]``), mixed-mode data, data outside the data
  sections, a missing ``[End]`` (a truncated file) and anything after it.

Two-port version 1 files may end with noise parameters (rows of 5 values whose first
frequency is not above the last network frequency); they are counted, not read.
"""

from __future__ import annotations

import re
import warnings
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np

from spurplan.errors import LineupError, TouchstoneFault  # TouchstoneFault re-exported (lives in errors.py)
from spurplan.fields import existing_file, read_text_file
from spurplan.model.ladders import S_FLOOR_DB, SMatrixTable, SParameterTable

if TYPE_CHECKING:
    from spurplan.fields import Fields
    from spurplan.model.stages.base import LoadContext

UNITS_HZ = {"hz": 1.0, "khz": 1e3, "mhz": 1e6, "ghz": 1e9}
FORMATS = ("ma", "db", "ri")
PARAMETERS = ("s", "y", "z", "h", "g")
# Values on one noise-parameter row: frequency, NFmin (dB), |Gamma_opt|, angle, Rn/R.
NOISE_VALUES = 5
VERSIONS_2 = ("2.0", "2.1")
KEYWORDS_2 = (
    "version",
    "number of ports",
    "two-port data order",
    "number of frequencies",
    "number of noise frequencies",
    "reference",
    "matrix format",
    "mixed-mode order",
    "begin information",
    "end information",
    "network data",
    "noise data",
    "end",
)


@dataclass(frozen=True)
class Layout:
    """What the pre-check read: the network data points and how to name their values.

    Attributes
    ----------
    freq_hz : ndarray (n,)
        Frequencies of the network data points, Hz, strictly increasing.
    forward_db : ndarray (n,) or None
        ``20 log10 |S_forward|`` in dB at each point (S21, or S12 with input port 2);
        ``None`` for files that are not 2-ports.
    forward : str
        ``"S21"`` or ``"S12"``.
    lines : tuple of int
        The line where each point starts (1-based).
    unit : str
        The option line's frequency unit, for messages (``"GHz"`` by default).
    s : ndarray (n, 2, 2) complex or None
        The S-matrix as the file gives it (``[f, out, in]``), for 2-port files.
    """

    freq_hz: np.ndarray
    forward_db: np.ndarray | None
    forward: str
    lines: tuple[int, ...]
    unit: str
    s: np.ndarray | None = None

    def zero_fault(self) -> str | None:
        """The message for a forward transmission of exactly zero (``None`` when there is none).

        Checked after the file's layout, ports and impedance, so that a file that is
        wrong as a whole says so first.
        """
        if self.forward_db is None or not np.any(np.isneginf(self.forward_db)):
            return None
        k = int(np.argmax(np.isneginf(self.forward_db)))
        at = self.freq_hz[k] / UNITS_HZ[self.unit.lower()]
        return (
            f"|{self.forward}| = 0 at line {self.lines[k]} ({at:g} {self.unit}): expected a magnitude "
            "above 0 (no instrument measures an exact zero; give the measured floor, e.g. 1e-5 for -100 dB)"
        )


def _fault(message: str) -> TouchstoneFault:
    return TouchstoneFault(message)


@dataclass
class _Option:
    unit: str = "ghz"
    form: str = "ma"
    line: int = 0


def _parse_option(body: str, n: int) -> _Option:
    """The option line ``# [unit] [parameter] [format] [R n]`` (defaults GHz S MA R 50)."""
    words = body[1:].split()
    seen: dict[str, str] = {}
    opt = _Option(line=n)
    i = 0
    while i < len(words):
        word = words[i]
        low = word.lower()
        if low in UNITS_HZ:
            kind = "frequency unit"
        elif low in FORMATS:
            kind = "format"
        elif low in PARAMETERS:
            kind = "parameter"
        elif low == "r":
            kind = "reference"
            value = words[i + 1] if i + 1 < len(words) else None
            try:
                ohm = float(value) if value is not None else float("nan")
            except ValueError:
                ohm = float("nan")
            if not (np.isfinite(ohm) and ohm > 0):
                raise _fault(
                    f"option line (line {n}): 'R' needs a reference impedance in ohm after it, got "
                    f"{(value or 'nothing')[:40]!r}"
                )
            i += 1
        else:
            raise _fault(
                f"option line (line {n}): {word[:40]!r} is not a frequency unit (Hz, kHz, MHz, GHz), "
                "parameter (S), format (DB, MA, RI) or 'R n': expected e.g. '# MHz S MA R 50'"
            )
        if kind in seen:
            raise _fault(f"option line (line {n}): two {kind}s ({seen[kind]!r} and {word[:40]!r})")
        seen[kind] = word
        if kind == "frequency unit":
            opt.unit = low
        elif kind == "format":
            opt.form = low
        elif kind == "parameter" and low != "s":
            raise _fault(
                f"option line (line {n}): {word!r} parameters: expected S-parameters ('S'); "
                "convert other parameter sets to S first"
            )
        i += 1
    return opt


def _numbers(body: str, n: int) -> list[float]:
    values = []
    for token in body.split():
        try:
            values.append(float(token))
        except ValueError:
            raise _fault(f"line {n}: {token[:40]!r} is not a number") from None
    return values


def _count(arg: str, keyword: str, n: int, low: int) -> int:
    """A whole number ``>= low`` given after a version 2.0 keyword."""
    try:
        value = int(arg.split()[0]) if len(arg.split()) == 1 else None
    except ValueError:
        value = None
    if value is None or value < low:
        raise _fault(f"line {n}: [{keyword}] {arg[:40]!r}: expected a whole number of at least {low}")
    return value


@dataclass
class _Reader:
    """The state of one pass over the file."""

    ports: int
    version: int = 0  # 0 until the first line with content tells: 1 or 2
    option: _Option | None = None
    keywords: dict = field(default_factory=dict)  # version 2.0 keywords (lower case) -> argument
    section: str = ""  # the version 2.0 keyword whose data the lines are
    ended: bool = False
    values: list = field(default_factory=list)  # network data values, in file order
    value_lines: list = field(default_factory=list)  # the line of each value
    line_starts: set = field(default_factory=set)  # indices of values that start a line
    noise_rows: int = 0
    in_noise_v1: bool = False
    last_network_freq: float | None = None

    @property
    def per_point(self) -> int:
        return 1 + 2 * self.ports * self.ports

    def line(self, n: int, body: str) -> None:
        if self.ended:
            raise _fault(f"line {n}: {body[:40]!r} after [End]: expected nothing but comments")
        if self.section == "begin information":
            if body.lower().replace(" ", "").startswith("[endinformation]"):
                self.section = ""
            return
        if self.version == 0:
            self.version = 2 if body.lower().replace(" ", "").startswith("[version]") else 1
        if body.startswith("["):
            self.keyword(n, body)
        elif body.startswith("#"):
            if self.option is not None:
                raise _fault(f"line {n}: a second option line (the first is line {self.option.line})")
            if self.values:
                raise _fault(f"line {n}: the option line comes after data: expected it before the data")
            if self.version == 2 and self.section in ("network data", "noise data"):
                raise _fault(f"line {n}: the option line is inside [{self.section.title()}]")
            self.option = _parse_option(body, n)
        else:
            self.data(n, _numbers(body, n))

    def keyword(self, n: int, body: str) -> None:
        if "]" not in body:
            raise _fault(f"line {n}: {body[:40]!r} opens a keyword without closing it (expected '[...]')")
        name, _, arg = body[1:].partition("]")
        key, arg = " ".join(name.lower().split()), arg.strip()
        if self.version != 2:
            raise _fault(
                f"line {n}: keyword [{name[:40]}] in a file that does not start with [Version]: "
                "expected a Touchstone 1 file without keywords, or a 2.0 file starting with [Version] 2.0"
            )
        if key not in KEYWORDS_2:
            raise _fault(f"line {n}: unknown keyword [{name[:40]}] (Touchstone 2.0 keywords expected)")
        if key in self.keywords and key != "end information":
            raise _fault(f"line {n}: [{name[:40]}] appears twice")
        self.keywords[key] = arg
        self.section = key
        if key == "version" and arg not in VERSIONS_2:
            raise _fault(f"line {n}: [Version] {arg[:40]!r}: expected 2.0 or 2.1")
        elif key == "number of ports":
            count = _count(arg, "Number of Ports", n, 1)
            if count != 2:
                raise _fault(f"line {n}: [Number of Ports] {count}: the file has {count} port(s), expected 2")
            if count != self.ports:
                raise _fault(f"line {n}: [Number of Ports] {count} in a file named for {self.ports} port(s)")
        elif key == "two-port data order" and arg not in ("12_21", "21_12"):
            raise _fault(f"line {n}: [Two-Port Data Order] {arg[:40]!r}: expected 12_21 or 21_12")
        elif key in ("number of frequencies", "number of noise frequencies"):
            self.keywords[key] = _count(arg, name.strip(), n, 1)
        elif key == "matrix format" and arg.lower() != "full":
            # scikit-rf 2.2 fills a 2-port Upper matrix with 21_12 order from memory it
            # never wrote (measured: values of 1e+180); Full is what every tool writes.
            raise _fault(
                f"line {n}: [Matrix Format] {arg[:40]!r}: expected Full (Upper and Lower are not read)"
            )
        elif key == "mixed-mode order":
            raise _fault(
                f"line {n}: mixed-mode data ([Mixed-Mode Order]): expected single-ended S-parameters"
            )
        elif key == "reference" and arg:
            self.data(n, _numbers(arg, n))
        elif key == "network data":
            self.start_network(n)
        elif key == "noise data" and "network data" not in self.keywords:
            raise _fault(f"line {n}: [Noise Data] before [Network Data]")
        elif key == "end":
            self.ended = True

    def start_network(self, n: int) -> None:
        if self.option is None:
            self.option = _Option()
        for key, title in (
            ("number of ports", "Number of Ports"),
            ("number of frequencies", "Number of Frequencies"),
        ):
            if key not in self.keywords:
                raise _fault(f"line {n}: [Network Data] without [{title}] before it")
        if self.ports == 2 and "two-port data order" not in self.keywords:
            raise _fault(
                f"line {n}: a 2-port file without [Two-Port Data Order]: expected 12_21 or 21_12 "
                "(S21 and S12 cannot be told apart without it)"
            )

    def data(self, n: int, values: list[float]) -> None:
        if self.version == 2:
            if self.section == "network data":
                self.network(n, values)
            elif self.section == "noise data":
                if len(values) != NOISE_VALUES:
                    raise _fault(
                        f"line {n} holds {len(values)} values: expected {NOISE_VALUES} noise parameters"
                    )
                self.noise_rows += 1
            elif self.section == "reference":
                if len(self.keywords.get("_reference", [])) + len(values) > self.ports:
                    raise _fault(f"line {n}: more [Reference] values than ports")
                self.keywords.setdefault("_reference", []).extend(values)
            else:
                raise _fault(f"line {n}: data outside [Network Data]: expected [Network Data] before it")
            return
        if self.option is None:
            raise _fault(f"line {n}: data before the option line: expected '# unit S format R n' first")
        per_point = self.per_point
        if self.ports > 2:  # whole points over several lines
            self.network(n, values)
            return
        noise_starts = (
            self.ports == 2
            and len(values) == NOISE_VALUES
            and self.last_network_freq is not None
            and values[0] <= self.last_network_freq
        )
        if self.in_noise_v1 or noise_starts:
            self.in_noise_v1 = True
            if len(values) != NOISE_VALUES:
                raise _fault(f"line {n} holds {len(values)} values: expected {NOISE_VALUES} noise parameters")
            self.noise_rows += 1
            return
        if len(values) != per_point:
            raise _fault(
                f"line {n} holds {len(values)} values: expected {per_point} for a {self.ports}-port file"
            )
        self.network(n, values)
        self.last_network_freq = values[0]

    def network(self, n: int, values: list[float]) -> None:
        if values:
            self.line_starts.add(len(self.values))
        self.values.extend(values)
        self.value_lines.extend([n] * len(values))

    def finish(self) -> None:
        if self.version == 2:
            if "network data" not in self.keywords:
                raise _fault("no [Network Data]: expected the data after a [Network Data] keyword")
            if not self.ended:
                raise _fault("no [End] after the data: the file is truncated or not Touchstone 2.0")
            declared = self.keywords["number of frequencies"]
            held = len(self.values) / self.per_point
            if held != declared:
                raise _fault(
                    f"[Number of Frequencies] {declared} but [Network Data] holds {held:g} points "
                    f"({len(self.values)} values, {self.per_point} per point)"
                )
            noise = self.keywords.get("number of noise frequencies")
            if (noise or 0) != self.noise_rows or (noise and "noise data" not in self.keywords):
                raise _fault(
                    f"[Number of Noise Frequencies] {noise or 0} but [Noise Data] holds {self.noise_rows} rows"
                )
        if not self.values:
            raise _fault("no data, expected rows of frequency and S-parameters")
        if len(self.values) % self.per_point:
            raise _fault(
                f"{len(self.values)} values: expected whole frequency points of {self.per_point} "
                f"for a {self.ports}-port file"
            )
        # Every point starts on a new line (both versions of the specification); one
        # that starts mid-line means a line before it holds too few or too many values.
        for start in range(0, len(self.values), self.per_point):
            if start not in self.line_starts:
                raise _fault(
                    f"line {self.value_lines[start]}: a frequency point starts in the middle of the line: "
                    f"a line before it holds too few or too many values ({self.per_point} per point expected)"
                )

    def columns(self) -> list[str]:
        """Names of the values after the frequency in one point, e.g. ``["S11", "S21", ...]``."""
        n = self.ports
        if n == 2:
            # Version 1 2-ports are 11 21 12 22 (the specification's exception); 2.0 says.
            order = self.keywords.get("two-port data order", "21_12")
            return ["S11", *(("S21", "S12") if order == "21_12" else ("S12", "S21")), "S22"]
        return [f"S{i}{j}" for i in range(1, n + 1) for j in range(1, n + 1)]


def check_text(text: str, ports: int, input_port: int = 1) -> Layout:
    """Pre-check the text of a Touchstone file of ``ports`` ports (from its name).

    Parameters
    ----------
    text : str
        The whole file.
    ports : int
        The port count the file name gives (``.s2p``: 2).
    input_port : {1, 2}
        The port facing the source: the forward transmission is S21 (1) or S12 (2).

    Returns
    -------
    Layout
        The network data as read (frequencies in Hz, forward transmission in dB).

    Raises
    ------
    TouchstoneFault
        With a one-line message naming the line (and frequency) and the value.
    """
    reader = _Reader(ports)
    for n, line in enumerate(text.splitlines(), start=1):
        body = line.split("!", 1)[0].strip()
        if body:
            reader.line(n, body)
    reader.finish()
    option = reader.option or _Option()
    unit = {"hz": "Hz", "khz": "kHz", "mhz": "MHz", "ghz": "GHz"}[option.unit]
    per_point = reader.per_point
    data = np.array(reader.values, dtype=float).reshape(-1, per_point)
    lines = tuple(reader.value_lines[::per_point])
    with np.errstate(over="ignore"):
        freq = data[:, 0] * UNITS_HZ[option.unit]
    for k in range(len(freq)):
        if not (np.isfinite(freq[k]) and freq[k] >= 0):
            raise _fault(
                f"line {lines[k]}: frequency {data[k, 0]:g} {unit}: expected finite frequencies >= 0"
            )
        if k and not freq[k] > freq[k - 1]:
            raise _fault(
                f"line {lines[k]}: frequency {data[k, 0]:g} {unit} after {data[k - 1, 0]:g} {unit}: "
                "expected strictly increasing frequencies"
            )
    names = reader.columns()
    pairs = data[:, 1:].reshape(len(freq), len(names), 2)

    def where(k: int) -> str:
        return f"line {lines[k]} ({data[k, 0]:g} {unit})"

    bad = ~np.isfinite(pairs)
    if bad.any():
        k, c, part = (int(i[0]) for i in np.nonzero(bad))
        value = "NaN" if np.isnan(pairs[k, c, part]) else f"{pairs[k, c, part]:g}"
        raise _fault(f"{names[c]} value {value} at {where(k)}: expected finite numbers, not NaN or infinity")
    if option.form == "ma" and np.any(pairs[..., 0] < 0):
        k, c = (int(i[0]) for i in np.nonzero(pairs[..., 0] < 0))
        raise _fault(
            f"negative magnitude {names[c]} {pairs[k, c, 0]:g} at {where(k)} in MA data, "
            "expected magnitudes >= 0 (is the file RI?)"
        )
    forward = "S21" if input_port == 1 else "S12"
    if ports != 2:
        return Layout(freq, None, forward, lines, unit)
    col = names.index(forward)
    a, b = pairs[:, col, 0], pairs[:, col, 1]
    with np.errstate(divide="ignore", over="ignore"):
        if option.form == "db":
            fwd_db = a.copy()
        else:
            # An exact zero becomes -inf here; Layout.zero_fault names it.
            mag = np.abs(a) if option.form == "ma" else np.hypot(a, b)
            fwd_db = 20.0 * np.log10(mag)
    return Layout(freq, fwd_db, forward, lines, unit, _complex(pairs, names, option.form))


def _complex(pairs: np.ndarray, names: list[str], form: str) -> np.ndarray:
    """The 2x2 S-matrices ``[f, out, in]`` from value pairs (RI, MA or DB with degrees)."""
    a, b = pairs[..., 0], pairs[..., 1]
    with np.errstate(over="ignore", under="ignore"):
        if form == "ri":
            values = a + 1j * b
        else:
            mag = a if form == "ma" else 10.0 ** (a / 20.0)
            values = mag * np.exp(1j * np.deg2rad(b))
    s = np.empty((len(pairs), 2, 2), dtype=complex)
    for c, name in enumerate(names):
        s[:, int(name[1]) - 1, int(name[2]) - 1] = values[:, c]
    return s


# |S21| above this (dB) in a filter file is not a passive filter.
_PASSIVE_SLACK_DB = 0.5


def read_touchstone(fields: Fields, context: LoadContext):
    """Read a 2-port Touchstone file for a stage; returns (S21 table, S lookup, notes).

    Parameters
    ----------
    fields : Fields
        Reader of the stage's table: ``touchstone`` (file name, relative to the lineup's
        folder), ``input_port`` (1 or 2) and ``kind``.
    context : LoadContext
        Gives the lineup's folder, the system impedance (ohm) the file must be referred
        to, and the policy beyond the file's frequency range.

    Returns
    -------
    tuple of (SParameterTable, S-matrix table, list of str)
        The S21 lookup, the full 2-port S lookup (frequencies in Hz), and notes to show
        (scikit-rf's warnings, noise floor, gain above a passive filter's).

    Raises
    ------
    LineupError
        Naming the file and field when the file is missing, unreadable, not a 2-port, at
        another impedance, or holds non-finite or unordered data.
    """
    rel = fields.raw("touchstone")
    if not isinstance(rel, str) or not rel.strip():
        raise fields.error("touchstone", f"{rel!r}: expected a file name such as 'filter.s2p'")
    port = fields.raw("input_port", 1)
    if port not in (1, 2) or isinstance(port, bool):
        raise fields.error("input_port", f"{port!r}: expected 1 or 2")
    path = existing_file(context.base_dir, rel, fields, "touchstone")
    layout = _precheck_touchstone(path, rel, fields, port)
    import skrf

    notes = []
    try:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            net = skrf.Network(str(path))
    except Exception as exc:  # skrf raises many kinds on corrupt files
        first = str(exc).splitlines()[0] if str(exc) else exc.__class__.__name__
        raise fields.error("touchstone", f"{rel!r}: cannot be read as Touchstone ({first})") from None
    notes += [f"{rel}: {w.message}" for w in caught]
    if net.nports != 2:
        raise fields.error("touchstone", f"{rel!r} has {net.nports} port(s): expected a 2-port file (.s2p)")
    z0 = np.asarray(net.z0)
    if not np.allclose(z0, context.r_ohm, rtol=1e-6, atol=0):
        raise fields.error(
            "touchstone",
            f"{rel!r} is referred to {np.unique(np.round(z0.real, 6))} ohm: expected {context.r_ohm:g} ohm "
            "(the lineup impedance)",
        )
    f = net.f
    s = net.s
    if len(f) < 2 or not np.all(np.diff(f) > 0):
        raise fields.error("touchstone", f"{rel!r}: expected at least 2 strictly increasing frequencies")
    if not np.all(np.isfinite(s)):
        raise fields.error("touchstone", f"{rel!r}: contains NaN or infinite S-parameters")
    differs = _same_as_read(layout, f, s)
    if differs is not None:
        raise fields.error("touchstone", f"{rel[:200]!r}: cannot be read as Touchstone: {differs}")
    zero = layout.zero_fault()
    if zero is not None:
        raise fields.error("touchstone", f"{rel[:200]!r}: cannot be read as Touchstone: {zero}")
    notes += _floor_note(rel, layout)
    if port == 2:
        s = s[:, ::-1, ::-1]
    s21 = s[:, 1, 0]
    with np.errstate(divide="ignore"):
        peak = float(np.max(20 * np.log10(np.abs(s21))))
    if peak > _PASSIVE_SLACK_DB and fields.raw("kind") == "filter":
        notes.append(f"{rel}: |S21| reaches {peak:+.2f} dB, more than a passive filter can")
    beyond = context.beyond_data
    return SParameterTable.from_s21(f, s21, beyond), SMatrixTable(f, s, beyond), notes


# A Touchstone file larger than this is not a filter measurement (a 2-port at 100,000
# points is about 10 MB): refused before scikit-rf reads it.
TOUCHSTONE_MAX_BYTES = 32 * 1024 * 1024


def _precheck_touchstone(path, rel: str, fields: Fields, input_port: int = 1) -> Layout:
    """Read the file as data first (:mod:`spurplan.io.touchstone`); a located error otherwise.

    Returns what was read, so that scikit-rf's reading can be compared with it.
    """

    def bad(message: str):
        return fields.error("touchstone", f"{rel[:200]!r}: cannot be read as Touchstone: {message}")

    try:
        text = read_text_file(path, "a Touchstone text file", TOUCHSTONE_MAX_BYTES)
    except LineupError as exc:
        raise bad(exc.message) from None
    m = re.search(r"\.s(\d+)p$", str(path).lower())
    if m is None:
        raise bad("expected a file name ending in .s2p")
    try:
        return check_text(text, int(m.group(1)), input_port)
    except TouchstoneFault as exc:
        raise bad(str(exc)) from None


def _same_as_read(layout: Layout, f: np.ndarray, s: np.ndarray) -> str | None:
    """Where scikit-rf's reading differs from the pre-check's (``None``: it agrees).

    Points, frequencies and every S-parameter (``s``: ``(n, 2, 2)`` as read, before
    any port swap) must agree to 1e-9 relative (values under 1e-12, -240 dB, count
    as equal), so that a silent misreading (a data order mixed up, rows skipped or
    added, memory never written) is an error, not a number.
    """
    if len(f) != len(layout.freq_hz):
        return f"scikit-rf read {len(f)} points where the file holds {len(layout.freq_hz)}"
    off = ~np.isclose(f, layout.freq_hz, rtol=1e-9, atol=0)
    if off.any():
        k = int(np.argmax(off))
        return f"scikit-rf read {f[k]:g} Hz at line {layout.lines[k]}, where the file gives {layout.freq_hz[k]:g} Hz"
    if layout.s is None:
        return None
    off = ~np.isclose(s, layout.s, rtol=1e-9, atol=1e-12)
    if off.any():
        k, i, j = (int(x[0]) for x in np.nonzero(off))
        return (
            f"scikit-rf read S{i + 1}{j + 1} = {s[k, i, j]:.6g} at line {layout.lines[k]}, "
            f"where the file gives {layout.s[k, i, j]:.6g}"
        )
    return None


def _floor_note(rel: str, layout: Layout) -> list[str]:
    """A note for forward transmission below :data:`S_FLOOR_DB` (held there by the lookup)."""
    if layout.forward_db is None:
        return []
    low = layout.forward_db < S_FLOOR_DB
    if not low.any():
        return []
    k = int(np.argmin(layout.forward_db))
    return [
        f"{rel}: |{layout.forward}| below {S_FLOOR_DB:g} dB at {int(low.sum())} point(s) (lowest "
        f"{layout.forward_db[k]:.4g} dB at line {layout.lines[k]}): held at {S_FLOOR_DB:g} dB, "
        "less rejection than the file states, never more"
    ]
