"""Writing the lineup file with the remedy's filter inserted (``spurplan remedy --write``).

The edit and every check of it are the analysis's
(:func:`spurplan.analyses.remedy.fixed_lineup`); here the checked bytes are written,
atomically (:func:`spurplan.output.files.write_atomic`), so that over the input itself
the input is intact on any failure.
"""

from __future__ import annotations

from pathlib import Path

from spurplan.analyses.remedy import Remedy, fixed_lineup
from spurplan.output.files import write_atomic


def write_fixed(lineup, found: Remedy, path):
    """Write the lineup file with the remedy's filter inserted (atomically).

    The file is edited as a TOML document: the filter's table goes into the ``stage``
    array at ``found.position``, everything else stays as the user wrote it.  Before
    anything is written the new document is read back with the project's own loader and
    must be the lineup that was checked (:func:`spurplan.analyses.remedy.fixed_lineup`).
    Relative data paths are rewritten when the file goes to another folder.  Any
    mismatch is a one-line :class:`~spurplan.errors.LineupError` and nothing is written.

    Parameters
    ----------
    lineup : Lineup
        The lineup that was checked, loaded from a file.
    found : Remedy
        What :func:`spurplan.analyses.remedy.remedy` found; it must hold a filter.
    path : str or Path
        The file to write (may be the lineup's own file).

    Returns
    -------
    EditedLineup
        What was written (``moved`` lists the rewritten data paths).
    """
    edited = fixed_lineup(lineup, found, path)
    write_atomic(Path(path), edited.data)
    return edited
