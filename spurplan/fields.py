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
from collections.abc import Callable
from typing import Any

from .errors import LineupError, UnitError


def read_toml(path, what: str) -> dict:
    """Parse a TOML file; any problem is a one-line LineupError naming the file.

    ``what`` names the kind of file for the message, e.g. "a lineup file".
    """
    import tomllib
    from pathlib import Path

    name = str(path)
    try:
        # utf-8-sig: a byte-order mark (some Windows editors write one) is not TOML.
        text = Path(path).read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        raise LineupError(f"file not found: expected {what} (TOML)", file=name) from None
    except (OSError, UnicodeDecodeError, ValueError) as exc:
        raise LineupError(
            f"cannot read ({exc.__class__.__name__}): expected a UTF-8 TOML file", file=name
        ) from None
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise LineupError(f"not valid TOML: {exc}{_line_context(text, str(exc))}", file=name) from None


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


def existing_file(base_dir, rel: str, fields: Fields, key: str):
    """``base_dir / rel`` as an existing file, or a located error (bad names included)."""
    from pathlib import Path

    try:
        path = (Path(base_dir) / rel).resolve()
        ok = path.is_file()
    except (OSError, ValueError) as exc:
        raise fields.error(key, f"{rel[:200]!r}: not a usable file name ({exc.__class__.__name__})") from None
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
        """A LineupError located at this table and ``field``."""
        return LineupError(message, file=self.file, stage=self.where, field=field)

    def has(self, key: str) -> bool:
        return key in self.table

    def raw(self, key: str, default: Any = None) -> Any:
        self._seen.add(key)
        return self.table.get(key, default)

    def quantity(self, key: str, parse: Callable[[object], Any], *, required: bool = False):
        """Parse ``key`` with a :mod:`spurplan.units` parser; ``None`` when absent."""
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
            return parse(self.table[key])
        except UnitError as exc:
            raise self.error(key, str(exc)) from None

    def text(self, key: str, *, default: str | None = None, choices: tuple[str, ...] = ()) -> str | None:
        """A string field, optionally one of ``choices``."""
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
        """An integer field within ``[low, high]``."""
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
        if not low <= value <= high:
            raise self.error(key, f"{value!r}: expected a whole number from {low} to {high}")
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
