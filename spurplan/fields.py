"""Typed, unit-checked reading of one TOML table, with errors that say where.

:class:`Fields` wraps one table of a lineup file (a ``[[stage]]``, ``[[carrier]]``,
``[analysis]`` ...).  Each getter parses one key with the parser of
:mod:`spurplan.units`, and any failure becomes a :class:`~spurplan.errors.LineupError`
naming the file, the table (stage name and position), the field, the value and what
was expected.  :meth:`Fields.finish` rejects keys nobody asked for, with a
did-you-mean, so a misspelt ``oip3`` cannot silently vanish.
"""

from __future__ import annotations

import difflib
import math
import os
import stat
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any, overload

from spurplan.errors import LineupError, UnitError

_KINDS = (
    (stat.S_ISDIR, "a folder"),
    (stat.S_ISCHR, "a character device"),
    (stat.S_ISBLK, "a block device"),
    (stat.S_ISFIFO, "a named pipe (FIFO)"),
    (stat.S_ISSOCK, "a socket"),
    (stat.S_ISLNK, "a symbolic link"),
)


def file_kind(mode: int) -> str:
    """What a ``st_mode`` is, in words for messages ("a named pipe (FIFO)", "a folder" ...).

    Readers (here) and writers (:mod:`spurplan.output.files`) name what they refuse alike.
    """
    return next((name for test, name in _KINDS if test(mode)), "not a regular file")


# Limits on what spurplan reads (README, "Limits").  The largest shipped rule file is
# 8 kB; 1 MiB is over a hundred times that and parses in about a second even when it
# is one long array (tomllib, measured), so a TOML file above it is refused before it
# is read.  Lineup and rule files nest at most five levels (a stage's tolerance of one
# figure, "{ uniform = ... }"); 32 levels leave room without letting a deeply nested
# document reach the parser's recursion limit or the readers behind it.
MAX_TOML_BYTES = 1 << 20
MAX_TOML_DEPTH = 32
# A channel file of 200,000 channels (spurplan.io.channels.MAX_POINTS) with a comment on each
# line fits in 8 MiB.
MAX_CHANNEL_FILE_BYTES = 8 << 20


def read_text_file(path, what: str, max_bytes: int) -> str:
    """The UTF-8 text of a regular file of at most ``max_bytes`` bytes.

    Every input file goes through here, so that what is read is data with limits:

    * only a regular file (a symbolic link is followed) is opened.  A folder, device
      (``/dev/zero``, ``/dev/urandom``), named pipe or socket is refused from
      :func:`os.stat`, without a read that could block or never end; the file is then
      opened with ``O_NONBLOCK`` and checked again with :func:`os.fstat`, so that one
      swapped in between cannot block either (``O_NONBLOCK`` does not change reads of
      a regular file: open(2), POSIX);
    * at most ``max_bytes + 1`` bytes are read, whatever the file claims to hold;
    * the bytes must be UTF-8 (a byte-order mark is dropped) without NUL characters,
      which no text format spurplan reads contains.

    Parameters
    ----------
    path : str or os.PathLike
        The file to read.
    what : str
        What the file was expected to be, for the message (e.g. "a lineup file (TOML)").
    max_bytes : int
        Largest size accepted (bytes); a larger file is refused.

    Returns
    -------
    str
        The decoded text, without a byte-order mark.

    Raises
    ------
    LineupError
        One line naming the file, what is wrong and ``what`` was expected
        (e.g. "a lineup file (TOML)").
    """
    data = read_file_bytes(path, what, max_bytes)
    name = str(path)

    def refuse(message: str) -> LineupError:
        return LineupError(f"{message}: expected {what}", file=name)

    nul = data.find(b"\x00")
    if nul >= 0:
        raise refuse(f"holds a NUL byte at byte {nul} (binary data, not text)")
    try:
        return data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise refuse(f"is not UTF-8 text (byte 0x{data[exc.start]:02x} at byte {exc.start})") from None


def read_file_bytes(path, what: str, max_bytes: int) -> bytes:
    """The bytes of a regular file of at most ``max_bytes`` bytes (binary data: ``.npy``).

    The same limits as :func:`read_text_file` (only a regular file is opened, without a
    read that could block; at most ``max_bytes + 1`` bytes are read), without decoding.

    Parameters
    ----------
    path : str or os.PathLike
        The file to read.
    what : str
        What the file was expected to be, for the message.
    max_bytes : int
        Largest size accepted (bytes).

    Returns
    -------
    bytes

    Raises
    ------
    LineupError
        One line naming the file, what is wrong and what was expected.
    """
    name = str(path)

    def refuse(message: str) -> LineupError:
        return LineupError(f"{message}: expected {what}", file=name)

    try:
        st = os.stat(path)
    except FileNotFoundError:
        raise refuse("file not found") from None
    except (OSError, ValueError) as exc:
        raise refuse(f"cannot read ({exc.__class__.__name__})") from None
    if not stat.S_ISREG(st.st_mode):
        raise refuse(f"is {file_kind(st.st_mode)}, not a regular file") from None
    if st.st_size > max_bytes:
        raise LineupError(
            f"is {_bytes(st.st_size)}: expected {what} of at most {_bytes(max_bytes)}", file=name
        )
    flags = (
        os.O_RDONLY | getattr(os, "O_NONBLOCK", 0) | getattr(os, "O_NOCTTY", 0) | getattr(os, "O_BINARY", 0)
    )
    try:
        fd = os.open(path, flags)
    except (OSError, ValueError) as exc:
        raise refuse(f"cannot read ({exc.__class__.__name__})") from None
    with os.fdopen(fd, "rb") as handle:
        try:
            mode = os.fstat(handle.fileno()).st_mode
            if not stat.S_ISREG(mode):
                raise refuse(f"is {file_kind(mode)}, not a regular file")
            data = handle.read(max_bytes + 1)
        except OSError as exc:
            raise refuse(f"cannot read ({exc.__class__.__name__})") from None
    if len(data) > max_bytes:
        raise LineupError(f"is larger than {_bytes(max_bytes)}: expected {what} of at most that", file=name)
    return data


def _bytes(n: int) -> str:
    """``1 MiB``, ``8 MiB``, ``1.5 MiB``, ``300 bytes``."""
    return f"{n / 2**20:.4g} MiB" if n >= 2**20 else f"{n} bytes"


def read_toml(path, what: str) -> dict:
    """Parse a TOML file; any problem is a one-line LineupError naming the file.

    ``what`` names the kind of file for the message, e.g. "a lineup file".  The file is
    read by :func:`read_text_file` (a regular file of at most :data:`MAX_TOML_BYTES`);
    a document nested deeper than :data:`MAX_TOML_DEPTH` is refused.

    Parameters
    ----------
    path : str or os.PathLike
        The TOML file.
    what : str
        The kind of file, for the message.

    Returns
    -------
    dict
        The parsed document.

    Raises
    ------
    LineupError
        The file cannot be read, is not valid TOML or nests too deeply.
    """
    import tomllib

    name = str(path)
    text = read_text_file(path, f"{what} (TOML, UTF-8)", MAX_TOML_BYTES)
    deep = f"nested deeper than {MAX_TOML_DEPTH} levels: expected {what} (TOML)"
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise LineupError(f"not valid TOML: {exc}{_line_context(text, str(exc))}", file=name) from None
    except RecursionError:
        # tomllib parses nested arrays and inline tables recursively.
        raise LineupError(deep, file=name) from None
    if _depth_exceeds(doc, MAX_TOML_DEPTH):
        raise LineupError(deep, file=name)
    return doc


def _depth_exceeds(doc, limit: int) -> bool:
    """Whether tables and arrays in ``doc`` nest deeper than ``limit`` (walked without recursion)."""
    todo = [(doc, 1)]
    while todo:
        value, depth = todo.pop()
        if depth > limit:
            return True
        children = value.values() if isinstance(value, dict) else value
        todo.extend((v, depth + 1) for v in children if isinstance(v, (dict, list)))
    return False


def _line_context(text: str, message: str) -> str:
    """The offending line of a TOML error, quoted, so the message shows the key."""
    import re

    m = re.search(r"line (\d+)", message)
    if not m:
        return ""
    lines = text.splitlines()
    n = int(m.group(1))
    if not 1 <= n <= len(lines):
        return ""
    line = lines[n - 1].strip()
    return f": {line[:120]!r}" if line else ""


@dataclass(frozen=True)
class Within:
    """The physical-sense range of one quantity; a value outside is an input error.

    The unit parsers of :mod:`spurplan.units` only keep numbers finite and inside what
    float64 and the engine survive (-300 to +100 dBm, ...).  What makes sense depends on
    what the number means: a saturated power of -300 dBm or a spur 25 dB above the
    wanted product parses, and then turns into a PASS.  Each reader states the range of
    the key it reads once, as a ``Within`` passed to :meth:`Fields.quantity` (or to
    :meth:`Fields.require_within` for a value it derives), so the message and the check
    cannot drift apart.  The ranges are listed in the README ("Plausible values").

    Attributes
    ----------
    what : str
        The quantity with its article, for the message: ``"a saturated power"``.
    lo, hi : float
        Inclusive bounds, in the unit the parser returns (dBm, dB, dBc, dBi, Hz, m).
    unit : str
        The unit shown in the message.
    why : str
        Why the range stops where it does, when that is not self-evident; shown in
        parentheses after it.
    """

    what: str
    lo: float
    hi: float
    unit: str
    why: str = ""

    def __contains__(self, value) -> bool:
        return bool(self.lo <= value <= self.hi)

    def expected(self) -> str:
        """``"expected a saturated power from -50 to +90 dBm"`` (and the reason)."""
        why = f" ({self.why})" if self.why else ""
        lo, hi = _show(self.lo, self.unit), _show(self.hi, self.unit)
        if lo.endswith(f" {self.unit}") and hi.endswith(f" {self.unit}"):
            lo = lo.removesuffix(f" {self.unit}")  # "from -50 to +90 dBm", "from 1 kHz to 1 THz"
        return f"expected {self.what} from {lo} to {hi}{why}"


def _show(value: float, unit: str) -> str:
    """A bound as the message writes it: levels in dB with their sign, Hz with a prefix."""
    if unit in ("Hz", "ohm"):
        for scale, prefix in ((1e12, "T"), (1e9, "G"), (1e6, "M"), (1e3, "k")):
            if abs(value) >= scale:
                return f"{value / scale:g} {prefix}{unit}"
        return f"{value:g} {unit}"
    if unit.startswith("dB") and value != 0:
        return f"{value:+g} {unit}"
    return f"{value:g} {unit}"


# Ranges that more than one reader applies (carriers in a lineup, sweep options,
# channel files).  A carrier below 1 kHz is not a radio transmission (the lowest
# allocated band starts at 8.3 kHz, ITU Radio Regulations Article 5; from memory);
# +90 dBm is 1 MW, beyond any transmitter this tool plans, and -150 dBm is below
# thermal noise in any bandwidth an emission occupies (kT = -174 dBm/Hz at 290 K).
CARRIER_FREQ = Within("a carrier frequency", 1e3, 1e12, "Hz", "a radio frequency, not DC")
CARRIER_POWER = Within("a carrier power", -150.0, 90.0, "dBm")
# Noise figures of amplifiers and mixers lie between a fraction of a dB (a cooled LNA) and
# about 30 dB (a passive mixer with a lossy front end); common practice, no source.
NOISE_FIGURE = Within("a noise figure", 0.0, 40.0, "dB")


def existing_file(base_dir, rel: str, fields: Fields, key: str):
    """``base_dir / rel`` as an existing file, or a located error (bad names included).

    Parameters
    ----------
    base_dir : str or os.PathLike
        Folder that ``rel`` is relative to (the folder of the file that names it).
    rel : str
        The file name as written in the table.
    fields : Fields
        The table the name was read from, to locate the error.
    key : str
        The key that holds the name, to locate the error.

    Returns
    -------
    pathlib.Path
        The resolved path of an existing regular file.

    Raises
    ------
    LineupError
        The name is unusable, names something other than a regular file, or nothing.
    """
    from pathlib import Path

    try:
        path = (Path(base_dir) / rel).resolve()
        ok = path.is_file()
        mode = None if ok or not path.exists() else path.stat().st_mode
    except (OSError, ValueError) as exc:
        raise fields.error(key, f"{rel[:200]!r}: not a usable file name ({exc.__class__.__name__})") from None
    if mode is not None:
        raise fields.error(key, f"{rel[:200]!r}: is {file_kind(mode)}: expected a regular file")
    if not ok:
        raise fields.error(key, f"{rel[:200]!r}: file not found (looked for {str(path)[:300]})")
    return path


class Fields:
    """Reader for one table.

    Parameters
    ----------
    table : dict
        The parsed TOML table.
    file : str
        File name, for messages.
    where : str
        The table, for messages, e.g. ``"stage 2 'pa'"``.
    """

    def __init__(self, table: dict[str, Any], file: str, where: str):
        if not isinstance(table, dict):
            raise LineupError(f"expected a table, got {table!r}", file=file, stage=where)
        self.table = table
        self.file = file
        self.where = where
        self._seen: set[str] = set()

    def error(self, field: str | None, message: str) -> LineupError:
        """A LineupError located at this table and ``field``.

        Parameters
        ----------
        field : str or None
            The key the error is about; ``None`` for the table as a whole.
        message : str
            What is wrong (the value and what was expected).

        Returns
        -------
        LineupError
            The error, to be raised by the caller.
        """
        return LineupError(message, file=self.file, stage=self.where, field=field)

    def has(self, key: str) -> bool:
        return key in self.table

    def raw(self, key: str, default: Any = None) -> Any:
        """The value of ``key`` as parsed from TOML, unchecked; marks the key as read.

        Parameters
        ----------
        key : str
            The key to read.
        default : object, optional
            Returned when the key is absent.

        Returns
        -------
        object
            The TOML value, or ``default``.
        """
        self._seen.add(key)
        return self.table.get(key, default)

    def quantity(
        self,
        key: str,
        parse: Callable[[object], Any],
        *,
        required: bool = False,
        within: Within | tuple[Within | None, ...] | None = None,
    ):
        """Parse ``key`` with a :mod:`spurplan.units` parser; ``None`` when absent.

        ``within`` is the key's physical-sense range (:class:`Within`); for a parser that
        returns a tuple (``"-28 dBc @ +20 dBm"``), one range (or ``None``) per element.

        Parameters
        ----------
        key : str
            The key to read.
        parse : callable
            Parser from :mod:`spurplan.units`; returns the value in its base unit (Hz,
            dBm, dB ...) and raises :class:`~spurplan.errors.UnitError` on bad input.
        required : bool, optional
            Raise a located error (with a did-you-mean) when the key is absent.
        within : Within or tuple of (Within or None), optional
            Plausible range of the parsed value, in the parser's unit; ``None`` for none.

        Returns
        -------
        object or None
            What ``parse`` returns, or ``None`` when the key is absent and not required.

        Raises
        ------
        LineupError
            The value does not parse, is outside ``within``, or is required and absent.
        """
        self._seen.add(key)
        if key not in self.table:
            if required:
                close = difflib.get_close_matches(
                    key, [k for k in self.table if isinstance(k, str)], n=1, cutoff=0.6
                )
                hint = f" (is '{close[0]}' a misspelling of it?)" if close else ""
                raise self.error(key, f"is required{hint}")
            return None
        try:
            value = parse(self.table[key])
        except UnitError as exc:
            raise self.error(key, str(exc)) from None
        if isinstance(within, Within):
            self.require_within(key, value, within)
        elif within is not None:
            for part, rng in zip(value, within, strict=True):
                if rng is not None:
                    self.require_within(key, part, rng)
        return value

    def require_within(self, key: str, value: float, within: Within) -> None:
        """Raise a located error quoting ``key`` as written unless ``value`` is ``within``.

        Parameters
        ----------
        key : str
            The key the value was read or derived from.
        value : float
            The value, in the unit of ``within`` (dBm, dB, Hz ...).
        within : Within
            The plausible range (bounds inclusive).

        Raises
        ------
        LineupError
            ``value`` is outside the range.
        """
        if value not in within:
            raise self.error(key, f"{self.table.get(key, value)!r}: {within.expected()}")

    @overload
    def text(self, key: str, *, default: str, choices: tuple[str, ...] = ()) -> str: ...
    @overload
    def text(self, key: str, *, default: None = None, choices: tuple[str, ...] = ()) -> str | None: ...

    def text(self, key: str, *, default: str | None = None, choices: tuple[str, ...] = ()) -> str | None:
        """A string field, optionally one of ``choices``.

        Parameters
        ----------
        key : str
            The key to read.
        default : str or None, optional
            Returned when the key is absent.
        choices : tuple of str, optional
            The allowed values; empty allows any one-line string.

        Returns
        -------
        str or None
            The string, or ``default``.

        Raises
        ------
        LineupError
            The value is not a string, holds a line break, tab or NUL, or is not one of
            ``choices``.
        """
        self._seen.add(key)
        if key not in self.table:
            return default
        value = self.table[key]
        if not isinstance(value, str):
            raise self.error(key, f"{value!r}: expected a string")
        if any(ch in value for ch in "\n\r\t\x00"):
            raise self.error(key, f"{value!r}: expected text on one line (no line breaks or tabs)")
        if choices and value not in choices:
            hint = _did_you_mean(value, choices)
            raise self.error(key, f"{value!r}: expected one of {', '.join(choices)}{hint}")
        return value

    def integer(self, key: str, *, default: int, low: int, high: int) -> int:
        """An integer field within ``[low, high]``.

        Parameters
        ----------
        key : str
            The key to read.
        default : int
            Returned when the key is absent (not checked against the bounds).
        low, high : int
            Inclusive bounds.  A float with an integral value is accepted.

        Returns
        -------
        int
            The value, or ``default``.

        Raises
        ------
        LineupError
            The value is not a whole number (booleans included) or is outside the bounds.
        """
        self._seen.add(key)
        if key not in self.table:
            return default
        value = self.table[key]
        expected = f"expected a whole number from {low} to {high}"
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise self.error(key, f"{value!r}: {expected}")
        if not (math.isfinite(value) and low <= value <= high):
            shown = f"{value:.6g}" if isinstance(value, float) or abs(value) > 10**9 else repr(value)
            raise self.error(key, f"{shown}: {expected}")
        if isinstance(value, float):
            if not value.is_integer():
                raise self.error(key, f"{value!r}: {expected}")
            value = int(value)
        return value

    def finish(self) -> None:
        """Raise on the first key that no getter asked for."""
        for key in self.table:
            if key not in self._seen:
                hint = _did_you_mean(key, sorted(self._seen))
                raise self.error(key, f"unknown key{hint}")


def _did_you_mean(word: str, options, *, fold_case: bool = False) -> str:
    """``" (did you mean 'X'?)"`` for the option closest to ``word``, or ``""``.

    With ``fold_case`` only an option that differs from ``word`` in letter case alone is
    offered (unit symbols, where "mhz" is "MHz" mistyped but "grad" is not "rad").
    """
    if fold_case:
        folded: dict[str, str] = {}
        for option in options:
            folded.setdefault(option.casefold(), option)
        close = [folded[word.casefold()]] if word.casefold() in folded else []
    else:
        close = difflib.get_close_matches(word, list(options), n=1, cutoff=0.6)
    return f" (did you mean '{close[0]}'?)" if close else ""
