"""Plain-text tables, CSV and JSON from column dicts (no pandas on the CLI path).

Every command that reports rows offers the same three forms with the same columns
(the output contract: exit status 0 pass, 1 mask violated, 2 bad input).  Free text in cells is escaped for each medium by
:mod:`spurplan.output.escaping`: terminal-safe in text tables, formulas neutralised in CSV,
literal in Markdown; JSON escapes everything non-printable itself.
"""

from __future__ import annotations

import csv
import io
import json
import math

from spurplan.output.escaping import csv_cell, markdown, terminal


def _cell(value, fmt: str | None) -> str:
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return "-"
    if isinstance(value, float) and math.isinf(value):
        return "inf" if value > 0 else "-inf"
    if fmt and isinstance(value, (int, float)) and not isinstance(value, bool):
        text = format(value, fmt)
        # A value that rounds to zero reads "0.00", not "-0.00".
        return text[1:] if text.startswith("-") and not any(ch in "123456789" for ch in text) else text
    if isinstance(value, bool):
        return "yes" if value else ""
    if isinstance(value, list):
        return " ".join(str(v) for v in value)
    return str(value)


def text_table(columns: dict[str, list], spec: list[tuple[str, str, str | None]]) -> str:
    """Align columns for a terminal.

    Parameters
    ----------
    columns : dict of str -> list
        Data by column name.
    spec : list of (column, header, format)
        Which columns to show, their headers (with units) and number formats.

    Cells are escaped with :func:`spurplan.output.escaping.terminal` before the widths are
    measured, so a name with control characters can neither act on the terminal nor
    break the alignment.

    Returns
    -------
    str
        The header line, a rule and one line per row, each ending in a newline.
    """
    header = [terminal(h) for _, h, _ in spec]
    n = len(next(iter(columns.values()), []))
    body = [[terminal(_cell(columns[c][i], fmt)) for c, _, fmt in spec] for i in range(n)]
    widths = [max(len(h), *(len(r[j]) for r in body)) if body else len(h) for j, h in enumerate(header)]
    numeric = [all(_is_number(r[j]) for r in body) if body else False for j in range(len(header))]

    def line(cells):
        return "  ".join(
            c.rjust(w) if num else c.ljust(w) for c, w, num in zip(cells, widths, numeric, strict=True)
        )

    rule = "  ".join("-" * w for w in widths)
    return "\n".join([line(header), rule] + [line(r) for r in body]).rstrip() + "\n"


def _is_number(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return text in ("-", "inf", "-inf")
    return True


def to_csv(columns: dict[str, list]) -> str:
    """CSV with a header row; lists (mixing vectors) are written space-separated.

    Numbers are written as numbers; a text cell that a spreadsheet would take for a
    formula is neutralised (:func:`spurplan.output.escaping.csv_cell`).
    """
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    names = list(columns)
    writer.writerow([csv_cell(c) for c in names])
    n = len(next(iter(columns.values()), []))
    for i in range(n):
        writer.writerow([_csv_cell(columns[c][i]) for c in names])
    return buf.getvalue()


def _csv_cell(value):
    if isinstance(value, list):
        return csv_cell(" ".join(str(v) for v in value))
    if value is None:
        return ""
    return csv_cell(value)


def rows_of(columns: dict[str, list]) -> list[dict]:
    """Column dict -> list of row dicts."""
    names = list(columns)
    n = len(next(iter(columns.values()), []))
    return [{c: columns[c][i] for c in names} for i in range(n)]


def to_json(summary: dict, rows_key: str, columns: dict[str, list]) -> str:
    """``{"summary": ..., rows_key: [...]}`` with infinities written as null.

    ``ensure_ascii`` writes every control, format (bidi) and non-ASCII character of a
    name as a ``\\uXXXX`` escape, so the JSON text itself holds printable ASCII only.

    Parameters
    ----------
    summary : dict
        The run's summary (notices, provenance, verdict ...), written as given.
    rows_key : str
        Key of the row list, e.g. ``"products"``.
    columns : dict of str -> list
        Data by column name, turned into one object per row.

    Returns
    -------
    str
        The JSON text, indented, ending in a newline.
    """
    doc = {"summary": summary, rows_key: rows_of(columns)}
    return json.dumps(_finite(doc), indent=2, ensure_ascii=True) + "\n"


def _finite(value):
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, dict):
        return {k: _finite(v) for k, v in value.items()}
    if isinstance(value, list):
        return [_finite(v) for v in value]
    return value


def html_table(columns: dict[str, list], spec: list[tuple[str, str, str | None]], row_class=None) -> str:
    """An HTML ``<table>`` of the same columns as :func:`text_table` (values escaped).

    ``row_class(i)`` may return a CSS class for row i (for example "fail").

    Parameters
    ----------
    columns : dict of str -> list
        Data by column name.
    spec : list of (column, header, format)
        Which columns to show, their headers (with units) and number formats.
    row_class : callable, optional
        ``row_class(i)`` gives a CSS class for row i, or ``None`` for none.

    Returns
    -------
    str
    """
    import html

    head = "".join(f"<th>{html.escape(h)}</th>" for _, h, _ in spec)
    n = len(next(iter(columns.values()), []))
    body = []
    for i in range(n):
        cls = row_class(i) if row_class else None
        attr = f' class="{cls}"' if cls else ""
        cells = "".join(f"<td>{html.escape(_cell(columns[c][i], fmt))}</td>" for c, _, fmt in spec)
        body.append(f"<tr{attr}>{cells}</tr>")
    return f"<table><thead><tr>{head}</tr></thead><tbody>{''.join(body)}</tbody></table>"


def markdown_table(columns: dict[str, list], spec: list[tuple[str, str, str | None]]) -> str:
    """A Markdown pipe table of the same columns as :func:`text_table`.

    Every cell is literal text (:func:`spurplan.output.escaping.markdown`): no markup, link,
    image or ``|`` from a name reaches the table's structure.

    Parameters
    ----------
    columns : dict of str -> list
        Data by column name.
    spec : list of (column, header, format)
        Which columns to show, their headers (with units) and number formats.

    Returns
    -------
    str
        The table's lines, each ending in a newline.
    """
    header = [markdown(h) for _, h, _ in spec]
    n = len(next(iter(columns.values()), []))
    lines = ["| " + " | ".join(header) + " |", "|" + "|".join("---" for _ in header) + "|"]
    for i in range(n):
        cells = [markdown(_cell(columns[c][i], fmt)) for c, _, fmt in spec]
        lines.append("| " + " | ".join(cells) + " |")
    return "\n".join(lines) + "\n"
