"""Editing a lineup file as a TOML document: one stage inserted, everything else kept.

``remedy --write`` puts its filter into the user's own file.  Text patterns cannot do
that safely (a ``[stage.tolerance]`` sub-table, a quoted ``[["stage"]]`` header or an
inline array ``stage = [{...}]`` each defeats them), and :mod:`tomllib` reads but cannot
write.  So the file is parsed with tomlkit, a style-preserving TOML library (comments,
order, quoting and layout survive a round trip; tomlkit documentation,
https://tomlkit.readthedocs.io), the new table is inserted into the ``stage`` array as
a table, and the result is checked against what :mod:`tomllib` reads before anything
is written:

- the source reads the same with tomlkit as with tomllib, and tomlkit writes it back
  byte for byte (otherwise its layout could not be kept, and the edit is refused);
- the new text, read by tomllib, is the source's document with exactly one more stage,
  at the stated position (and, for a file written to another folder, its relative data
  paths rewritten so that they name the same files).

Relative data paths (a stage's ``touchstone``, the ``[mask]`` ``files``) are found in
the parsed values, so the spelling of a key (quoted, escaped, dotted) does not matter.
A byte-order mark and CRLF line endings are kept.
"""

from __future__ import annotations

import copy
import os
import re
import stat
from dataclasses import dataclass
from pathlib import Path, PurePath

from spurplan.errors import LineupError

BOM = b"\xef\xbb\xbf"
# The file was loaded a moment ago; this only keeps a file swapped in since from being
# read without limit (a lineup is a few kilobytes).
MAX_LINEUP_BYTES = 16 << 20


@dataclass(frozen=True)
class EditedLineup:
    """A lineup file with one stage inserted, not yet written.

    Attributes
    ----------
    data : bytes
        The new file (byte-order mark and line endings as the source had them).
    doc : dict
        What :func:`tomllib.loads` reads from ``data``.
    moved : tuple of (str, str)
        Relative data paths rewritten for the target's folder: ``(as written, new)``.
    """

    data: bytes
    doc: dict
    moved: tuple[tuple[str, str], ...]


def insert_stage(source: str | Path, target: str | Path, position: int, snippet: str) -> EditedLineup:
    """The lineup file ``source`` with the ``[[stage]]`` table of ``snippet`` inserted.

    Parameters
    ----------
    source : str or Path
        The lineup file as the user wrote it.
    target : str or Path
        Where the result will be written (may be ``source``): relative data paths are
        rewritten for its folder.
    position : int
        Number of stages before the new one.
    snippet : str
        TOML text holding one ``[[stage]]`` table.

    Returns
    -------
    EditedLineup
        The new file's bytes, its parsed document and the data paths rewritten.

    Raises
    ------
    LineupError
        With a one-line message when the file cannot be edited without changing
        anything but the one stage (nothing is written).
    """
    import tomllib

    import tomlkit
    from tomlkit.exceptions import TOMLKitError

    source, target = Path(source), Path(target)
    text, bom, original, doc, before = _parse(source)
    ids: dict = {}
    marked = _marked(doc, ids) if before != text else ""
    stages = original.get("stage", [])
    if not isinstance(stages, list) or not 0 <= position <= len(stages):
        raise _refusal(source, f"no place for a stage after {position} stages: expected a lineup with stages")

    moves = _moves(original, source, target)
    expected = copy.deepcopy(original)
    for where, _, new in moves:
        _set(expected, where, new)
        _set_styled(doc, where, new)
    expected.setdefault("stage", []).insert(position, tomllib.loads(snippet)["stage"][0])
    try:
        _insert(doc, position, snippet)
        out = tomlkit.dumps(doc) if before == text else _transplant(text, marked, _marked(doc, ids))
    except (TOMLKitError, ValueError) as exc:
        raise _refusal(source, f"the TOML editor cannot insert the stage ({exc}): nothing written") from None
    if "\n" in text and text.count("\r\n") == text.count("\n"):
        out = re.sub(r"(?<!\r)\n", "\r\n", out)  # a CRLF file stays CRLF, new lines too
    try:
        written = tomllib.loads(out)
    except tomllib.TOMLDecodeError as exc:
        raise _refusal(source, f"the edited text would not be valid TOML ({exc}): nothing written") from None
    if written != expected:
        raise _refusal(source, "the edited file would differ from the lineup plus one stage: nothing written")
    data = (BOM if bom else b"") + out.encode("utf-8")
    return EditedLineup(data=data, doc=written, moved=tuple((old, new) for _, old, new in moves))


def _parse(source: Path):
    """Read ``source`` with tomllib and with tomlkit; refuse unless both agree and tomlkit's
    rendering keeps the layout.  Returns (text, had a BOM, tomllib document, tomlkit
    document, tomlkit's rendering)."""
    import tomllib

    import tomlkit
    from tomlkit.exceptions import TOMLKitError

    text, bom = _read(source)
    by_hand = "run remedy without {@path} and paste its snippet by hand"
    try:
        original = tomllib.loads(text)
        doc = tomlkit.parse(text)
        same = doc.unwrap() == original
        before = tomlkit.dumps(doc)
    except (tomllib.TOMLDecodeError, TOMLKitError, RecursionError, ValueError) as exc:
        raise _refusal(source, f"cannot be edited as TOML ({exc.__class__.__name__}): {by_hand}") from None
    if not same:
        raise _refusal(source, f"the TOML editor reads it differently from tomllib: {by_hand}")
    if before != text and not _aligned(text, before):
        raise _refusal(
            source,
            f"its layout cannot be kept by the TOML editor (tables of one array split by other tables?): {by_hand}",
        )
    return text, bom, original, doc, before


def _read(source: Path) -> tuple[str, bool]:
    """The source's text (without a byte-order mark) and whether it had one."""
    try:
        with open(source, "rb") as handle:
            if not stat.S_ISREG(os.fstat(handle.fileno()).st_mode):
                raise _refusal(source, "is no longer a regular file: expected the lineup file as loaded")
            raw = handle.read(MAX_LINEUP_BYTES + 1)
        if len(raw) > MAX_LINEUP_BYTES:
            raise _refusal(
                source, f"is larger than {MAX_LINEUP_BYTES} bytes: expected the lineup file as loaded"
            )
        bom = raw.startswith(BOM)
        return raw[len(BOM) :].decode("utf-8") if bom else raw.decode("utf-8"), bom
    except (OSError, UnicodeDecodeError) as exc:
        raise _refusal(
            source, f"cannot be read again ({exc.__class__.__name__}): expected the file as loaded"
        ) from None


def _refusal(source: Path, message: str) -> LineupError:
    return LineupError(message, file=str(source), field="{@path}")


def _aligned(text: str, render: str) -> bool:
    """Whether tomlkit's ``render`` of ``text`` differs from it only in the spelling of
    table headers that name the same table.

    tomlkit writes every table of an array with the first one's header, so a file that
    mixes ``[[stage]]`` and ``[["stage"]]`` does not come back byte for byte.
    """
    import tomllib

    a, b = text.split("\n"), render.split("\n")
    if len(a) != len(b):
        return False
    for x, y in zip(a, b, strict=True):
        if x == y:
            continue
        if not (x.lstrip().startswith("[") and y.lstrip().startswith("[")):
            return False
        try:
            if tomllib.loads(x.rstrip("\r")) != tomllib.loads(y.rstrip("\r")):
                return False
        except tomllib.TOMLDecodeError:
            return False
    return True


def _transplant(text: str, before: str, after: str) -> str:
    """``text`` with the edit that turned tomlkit's rendering ``before`` into ``after``.

    ``before`` and ``after`` are renderings in which every header of an array of tables
    carries a unique mark (:func:`_marked`), so that the line diff between them cannot
    confuse one ``[[stage]]`` header with another.  The lines the edit kept are taken
    from ``text`` (:func:`_aligned`: they correspond one to one), so that the user's own
    spelling of every header stays; inserted or changed lines come from ``after``
    with the marks removed.
    """
    import difflib

    a, b, c = text.split("\n"), before.split("\n"), after.split("\n")
    out: list[str] = []
    for tag, i1, i2, j1, j2 in difflib.SequenceMatcher(None, b, c, autojunk=False).get_opcodes():
        out.extend(a[i1:i2] if tag == "equal" else (_MARK.sub("", line) for line in c[j1:j2]))
    return "\n".join(out)


# NUL cannot occur in a TOML document (TOML 1.0, "Comment": control characters other
# than tab are not permitted; from memory), so a mark cannot clash with the user's text.
_MARK = re.compile("\x00[0-9]+\x00")


def _marked(doc, ids: dict) -> str:
    """tomlkit's rendering of ``doc`` with a unique mark after each array-of-tables header.

    ``ids`` maps ``id(table)`` to its mark number and is shared between the renderings
    that are compared, so that one table has one mark in both.
    """
    import tomlkit

    tables = list(_aot_tables(doc.body))
    saved = [t.trivia.comment for t in tables]
    try:
        for t in tables:
            t.trivia.comment += f"\x00{ids.setdefault(id(t), len(ids))}\x00"
        return tomlkit.dumps(doc)
    finally:
        for t, comment in zip(tables, saved, strict=True):
            t.trivia.comment = comment


def _aot_tables(body):
    """Every table of an array of tables in a tomlkit container body, nested ones too."""
    from tomlkit.items import AoT, Table

    for _, item in body:
        if isinstance(item, AoT):
            for t in item.body:
                yield t
                yield from _aot_tables(t.value.body)
        elif isinstance(item, Table):
            yield from _aot_tables(item.value.body)


# --- data paths ------------------------------------------------------------------------------------


def data_paths(doc: dict) -> list[tuple[tuple, str]]:
    """``(location, path)`` of every data file a parsed lineup names.

    The locations are key paths into ``doc``: ``("stage", i, "touchstone")`` and
    ``("mask", "files", j)`` (the only keys that name files; :mod:`spurplan.model.stages.
    filter` and :mod:`spurplan.io.mask_files` read them relative to the lineup's folder).
    """
    out: list[tuple[tuple, str]] = []
    stages = doc.get("stage", [])
    for i, table in enumerate(stages if isinstance(stages, list) else []):
        if isinstance(table, dict) and isinstance(table.get("touchstone"), str):
            out.append((("stage", i, "touchstone"), table["touchstone"]))
    mask = doc.get("mask")
    files = mask.get("files") if isinstance(mask, dict) else None
    for j, rel in enumerate(files if isinstance(files, list) else []):
        if isinstance(rel, str):
            out.append((("mask", "files", j), rel))
    return out


def _moves(doc: dict, source: Path, target: Path) -> list[tuple[tuple, str, str]]:
    """Relative data paths rewritten for ``target``'s folder: ``(location, old, new)``.

    A path that would no longer name the same file, or a target that is one of the data
    files, is refused.
    """
    here = source.parent.resolve()
    there = target.parent.resolve()
    written = target.resolve()
    moves = []
    for where, rel in data_paths(doc):
        try:
            file = (source.parent / rel).resolve()
        except (OSError, ValueError):
            raise _refusal(source, f"{rel[:200]!r}: not a usable file name") from None
        if file == written:
            raise _refusal(
                target, f"{rel[:200]!r} is a data file the lineup reads: expected another file name"
            )
        if PurePath(rel).is_absolute() or here == there:
            continue
        try:
            new = PurePath(os.path.relpath(file, there)).as_posix()
        except ValueError:  # another drive (Windows): only an absolute path reaches it
            new = str(file)
        if (target.parent / new).resolve() != file:
            raise _refusal(
                target, f"{rel[:200]!r} cannot be named from {there}: expected {{@path}} to a file in {here}"
            )
        moves.append((where, rel, new))
    return moves


def _set(doc, where: tuple, value) -> None:
    for key in where[:-1]:
        doc = doc[key]
    doc[where[-1]] = value


def _set_styled(doc, where: tuple, value: str) -> None:
    """Set a string in a tomlkit document, literal ('...') where the old one was."""
    import tomlkit
    from tomlkit.items import StringType

    holder = doc
    for key in where[:-1]:
        holder = holder[key]
    old = holder[where[-1]]
    literal = getattr(old, "type", None) == StringType.SLL and "'" not in value
    holder[where[-1]] = tomlkit.string(value, literal=literal)


# --- inserting the table --------------------------------------------------------------------------


def _insert(doc, position: int, snippet: str) -> None:
    """Insert the stage of ``snippet`` as stage ``position`` of ``doc``, laid out like its neighbours."""
    import tomlkit
    from tomlkit.items import AoT, Array

    table = tomlkit.parse(snippet)["stage"][0]
    if "stage" not in doc:
        stages = tomlkit.aot()
        stages.append(table)
        doc.append("stage", stages)
        return
    stages = doc["stage"]
    if isinstance(stages, Array):  # stage = [{...}, {...}]: an inline table among inline tables
        # The snippet's lines are one "key = value" each; joined, they are the same table
        # inline, spaced as the snippet's own inline prototype is.
        lines = [line for line in snippet.splitlines()[1:] if line.strip()]
        stages.insert(position, tomlkit.parse("t = { " + ", ".join(lines) + " }")["t"])
        return
    if not isinstance(stages, AoT):
        raise ValueError(f"'stage' is a {type(stages).__name__}, not an array of tables")
    # New lines are written as "\n"; insert_stage turns them into CRLF in a CRLF file.
    follows = position < len(stages) or _followed(doc, "stage")
    if position > 0:
        _indent_like(table, stages[position - 1])
        moved = _detach_trailing(stages[position - 1], follows)
    else:
        moved = []
    body = table.value.body
    if follows and (not moved or not _blank(moved[0][1])):
        body.append((None, tomlkit.ws("\n")))
    body.extend(moved)
    stages.insert(position, table)


def _indent_like(table, neighbour) -> None:
    """Indent ``table``'s header and keys as ``neighbour``'s (a file with indented tables)."""
    table.trivia.indent = neighbour.trivia.indent.rsplit("\n", 1)[-1]
    keyed = [item for key, item in neighbour.value.body if key is not None and hasattr(item, "trivia")]
    if keyed:
        for key, item in table.value.body:
            if key is not None:
                item.trivia.indent = keyed[0].trivia.indent


def _detach_trailing(table, follows: bool) -> list:
    """Take the comments and blank lines that end ``table`` but belong to what follows.

    tomlkit keeps the lines between a table's last key and the next header inside the
    table (in its last sub-table, if it has one).  Comments directly under the last key
    stay with it; from the first blank line on, the lines go after the new table, so
    that a comment written above the next header stays above it.  Without a blank line,
    comments touching the next header go with it (``follows``), and stay where nothing
    follows.  A blank line is left in their place, before the new header.
    """
    import tomlkit
    from tomlkit.items import Comment, Table, Whitespace

    container = table.value
    while container.body and isinstance(container.body[-1][1], Table):
        container = container.body[-1][1].value
    body = container.body
    start = len(body)
    while start and body[start - 1][0] is None and isinstance(body[start - 1][1], (Whitespace, Comment)):
        start -= 1
    run = body[start:]
    split = next((j for j, (_, item) in enumerate(run) if _blank(item)), 0 if follows else len(run))
    moved = run[split:]
    del body[start + split :]
    if body and not table.as_string().endswith("\n"):  # a file that ends without a line break
        trivia = getattr(body[-1][1], "trivia", None)
        if trivia is not None:
            trivia.trail += "\n"
    body.append((None, tomlkit.ws("\n")))
    return moved


def _blank(item) -> bool:
    from tomlkit.items import Whitespace

    return isinstance(item, Whitespace)


def _followed(doc, key: str) -> bool:
    """Whether anything but blank lines follows the top-level item ``key`` in ``doc``."""
    body = doc.body
    last = max(i for i, (k, _) in enumerate(body) if k is not None and k.key == key)
    return any(item.as_string().strip() for _, item in body[last + 1 :])


# --- replacing keys of one stage ------------------------------------------------------------------


def replace_stage_keys(
    source: str | Path, target: str | Path, position: int, values: dict[str, str | None]
) -> EditedLineup:
    """The lineup file ``source`` with keys of one stage set to new strings, or removed.

    ``spurplan fit --write`` puts fitted figures into the user's own file: each key of
    ``values`` is set (kept where it stands, with its comment, when the stage has it;
    added after the stage's last key otherwise) or, for ``None``, removed.  Everything
    else is kept and checked as for :func:`insert_stage`: the new text, read by tomllib,
    must be the source's document with exactly these keys of that stage changed (and
    relative data paths rewritten for another folder).

    Parameters
    ----------
    source : str or Path
        The lineup file as the user wrote it.
    target : str or Path
        Where the result will be written (may be ``source``).
    position : int
        The stage's index in the ``stage`` array (0-based).
    values : dict of str -> str or None
        Key -> new string value (``"+40.02 dBm"``), or ``None`` to remove the key.

    Returns
    -------
    EditedLineup

    Raises
    ------
    LineupError
        With a one-line message when the file cannot be edited without changing anything
        but those keys (nothing is written).
    """
    import tomllib

    import tomlkit
    from tomlkit.exceptions import TOMLKitError

    source, target = Path(source), Path(target)
    text, bom, original, doc, before = _parse(source)
    ids: dict = {}
    marked = _marked(doc, ids) if before != text else ""
    stages = original.get("stage", [])
    if (
        not isinstance(stages, list)
        or not 0 <= position < len(stages)
        or not isinstance(stages[position], dict)
    ):
        raise _refusal(source, f"no stage at position {position + 1}: expected the stage that was fitted")
    moves = _moves(original, source, target)
    expected = copy.deepcopy(original)
    for where, _, new in moves:
        _set(expected, where, new)
        _set_styled(doc, where, new)
    for key, value in values.items():
        if value is None:
            expected["stage"][position].pop(key, None)
        else:
            expected["stage"][position][key] = value
    try:
        table = doc["stage"][position]
        for key, value in values.items():
            if value is None:
                if key in table:
                    del table[key]
            elif key in table:
                table[key] = value
            else:
                _add_key(table, key, value)
        out = tomlkit.dumps(doc) if before == text else _transplant(text, marked, _marked(doc, ids))
    except (TOMLKitError, ValueError, KeyError) as exc:
        raise _refusal(
            source, f"the TOML editor cannot change the stage's keys ({exc}): nothing written"
        ) from None
    if "\n" in text and text.count("\r\n") == text.count("\n"):
        out = re.sub(r"(?<!\r)\n", "\r\n", out)
    try:
        written = tomllib.loads(out)
    except tomllib.TOMLDecodeError as exc:
        raise _refusal(source, f"the edited text would not be valid TOML ({exc}): nothing written") from None
    if written != expected:
        raise _refusal(
            source, "the edited file would differ from the lineup with the new figures: nothing written"
        )
    data = (BOM if bom else b"") + out.encode("utf-8")
    return EditedLineup(data=data, doc=written, moved=tuple((old, new) for _, old, new in moves))


def _add_key(table, key: str, value: str) -> None:
    """Add ``key = value`` after the table's last plain key (before its sub-tables and the
    comments and blank lines that end it), indented like its other keys."""
    import tomlkit
    from tomlkit.items import InlineTable

    if isinstance(table, InlineTable):
        table[key] = value
        return
    keyed = [(k, it) for k, it in table.value.body if k is not None and not _is_table(it)]
    item = tomlkit.item(value)
    if not keyed:
        table[key] = item
        return
    last_key, last = keyed[-1]
    if hasattr(last, "trivia"):
        item.trivia.indent = last.trivia.indent
    table.value._insert_after(last_key, key, item)


def _is_table(item) -> bool:
    from tomlkit.items import AoT, Table

    return isinstance(item, (Table, AoT))
