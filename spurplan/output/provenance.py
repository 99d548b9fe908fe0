"""Provenance recorded in every machine-readable output: version, input hash, settings."""

from __future__ import annotations

import hashlib

from spurplan import __version__
from spurplan.notices import PLANNING_NOTICE


def file_sha256(path) -> str | None:
    """SHA-256 of a file's bytes, or ``None`` when there is no file."""
    if path is None:
        return None
    return hashlib.sha256(path.read_bytes()).hexdigest()


def provenance(lineup) -> dict:
    """Version of spurplan, the lineup file and its hash, the mode (for a file with
    ``[[mode]]`` tables) and the analysis settings."""
    # "mode" only where the file has modes: outputs of other files stay as they were.
    mode = {} if getattr(lineup, "mode", None) is None else {"mode": lineup.mode}
    return {
        "spurplan_version": __version__,
        "lineup_file": None if lineup.source is None else str(lineup.source),
        "lineup_sha256": file_sha256(lineup.source),
        **mode,
        "analysis": {"max_order": lineup.analysis.max_order, "combine": lineup.analysis.combine},
        "notice": PLANNING_NOTICE,
    }
