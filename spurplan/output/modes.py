"""A command run over several operating modes: headings, one document, one file per mode.

Each mode's output is the single-mode command's own (its text, its
:class:`~spurplan.output.documents.Document`); this module puts them together.  In text,
each under a heading with the mode's name, then the line over all modes
(:mod:`spurplan.output.verdicts`).  As JSON, one document::

    {"summary": {"modes": [...], "status": ..., "verdict": ..., "mode_status": [...],
                 "spurplan_version": ..., "lineup_file": ..., "lineup_sha256": ..., "notice": ...},
     "modes": [{"mode": NAME, "summary": {...}, ROWS_KEY: [...]}, ...]}

each entry of ``"modes"`` being exactly what the command prints for that mode alone.  As
CSV, every mode's rows with the mode's name in a first column, ``mode``.
"""

from __future__ import annotations

import json
import re
from dataclasses import dataclass
from pathlib import Path

from spurplan import __version__
from spurplan.notices import PLANNING_NOTICE
from spurplan.output.formatting import to_csv
from spurplan.output.provenance import file_sha256


def mode_heading(label: str, index: int, count: int) -> str:
    """The heading above one mode's text: ``"=== mode 'UHF band' (2 of 2) ==="`` and a newline.

    Parameters
    ----------
    label : str
        The mode's label (:attr:`spurplan.model.modes.Mode.label`).
    index, count : int
        Its position among the modes run (1-based), and how many there are.

    Returns
    -------
    str
    """
    return f"=== {label} ({index} of {count}) ===\n"


def mode_marker(label: str, index: int, count: int) -> str:
    """The stderr line before one mode's notes and warnings: ``"spurplan: note: mode 'UHF band' (2 of 2):"``.

    A note like the others (:func:`spurplan.output.terminal.note_lines`), so that stderr
    holds notes, warnings and at most one error line.

    Parameters
    ----------
    label : str
        The mode's label (:attr:`spurplan.model.modes.Mode.label`).
    index, count : int
        Its position among the modes run (1-based), and how many there are.

    Returns
    -------
    str
        One line, without a line break.
    """
    return f"spurplan: note: {label} ({index} of {count}):"


@dataclass(frozen=True)
class ModesDocument:
    """Every mode's document under one summary (module docstring).

    Attributes
    ----------
    summary : dict
        The line over all modes and its data, and the file's provenance.
    documents : list of (str, Document)
        Each mode's name and its single-mode document, in file order.
    """

    summary: dict
    documents: list

    def json(self) -> str:
        """The JSON text (indented, ASCII only, ending in a newline)."""
        modes = [{"mode": name, **json.loads(doc.json())} for name, doc in self.documents]
        return json.dumps({"summary": self.summary, "modes": modes}, indent=2, ensure_ascii=True) + "\n"

    def csv(self) -> str:
        """Every mode's rows, the mode's name first (:func:`spurplan.output.formatting.to_csv`)."""
        columns: list[str] = []
        for _, doc in self.documents:
            columns += [c for c in doc.rows if c not in columns]
        rows: dict[str, list] = {"mode": [], **{c: [] for c in columns}}
        for name, doc in self.documents:
            n = max((len(v) for v in doc.rows.values()), default=0)
            rows["mode"] += [name] * n
            for c in columns:
                rows[c] += list(doc.rows.get(c, [None] * n))
        return to_csv(rows)


def modes_document(modes, documents, status: str | None, verdict: str, lines) -> ModesDocument:
    """The document of a run over several modes.

    Parameters
    ----------
    modes : sequence of Mode
        The modes run, in file order.
    documents : sequence of Document
        Each mode's document, in the same order.
    status : str or None
        The status over all modes (the worst mode's), ``None`` for a question without a
        verdict (a spectrum, a budget).
    verdict : str
        The line over all modes (empty for none).
    lines : sequence of str
        Each mode's own verdict line (may be empty strings).

    Returns
    -------
    ModesDocument
    """
    source = modes[0].lineup.source
    summary = {
        "lineup": modes[0].lineup.name,
        "modes": [m.name for m in modes],
        "status": status,
        "verdict": verdict,
        "mode_status": [{"mode": m.name, "verdict": line} for m, line in zip(modes, lines, strict=True)],
        "spurplan_version": __version__,
        "lineup_file": None if source is None else str(source),
        "lineup_sha256": file_sha256(source),
        "notice": PLANNING_NOTICE,
    }
    return ModesDocument(summary, [(m.name, d) for m, d in zip(modes, documents, strict=True)])


def mode_path(path, index: int, name: str | None, count: int) -> Path:
    """The file one mode's figure goes to when a run covers ``count`` modes.

    One mode: ``path`` itself.  Several: ``NAME.INDEX-SLUG.SUFFIX`` beside it
    (``spectrum.png`` -> ``spectrum.2-uhf-band.png``), the slug the mode's name in lower-case
    letters and digits (at most 40), so that no name from a file can reach another folder.

    Parameters
    ----------
    path : str or Path
        The file the option names.
    index : int
        The mode's position among those run (1-based).
    name : str or None
        The mode's name.
    count : int
        The modes run.

    Returns
    -------
    Path
    """
    path = Path(path)
    if count == 1:
        return path
    slug = "-".join(re.findall(r"[a-z0-9]+", (name or "").lower()))[:40].strip("-")
    return path.with_name(f"{path.stem}.{index}{'-' + slug if slug else ''}{path.suffix}")
