"""Operating modes: one lineup file, several ways the transmitter runs.

A radio that transmits in two bands, or at two power levels, is one design with one
certification: each mode is the lineup as it runs in that band or at that power (its
carriers, drive, mask and switched stages).  A :class:`Mode` is the mode's name beside
its lineup, fully built and validated; reading the ``[[mode]]`` tables of a file is the
input wing's (:mod:`spurplan.io.modes`).

Verdicts over modes rank as :data:`STATUS_RANK`: a design passes only when every mode
does, so the worst mode's status is the design's (:func:`worst_status`).
"""

from __future__ import annotations

from dataclasses import dataclass

from spurplan.model.lineup import Lineup

# PASS < UNCERTAIN < INCOMPLETE < FAIL: a violated mask in any mode fails the design; a
# mode whose model lacks a figure (INCOMPLETE) says less than one whose model misses a
# stated figure by some dB (UNCERTAIN), as the check itself ranks them
# (spurplan.analyses.check.CheckResult.status: missing figures before missed ones).
STATUS_RANK = {"PASS": 0, "UNCERTAIN": 1, "INCOMPLETE": 2, "FAIL": 3}


@dataclass(frozen=True)
class Mode:
    """One operating mode of a lineup file.

    Attributes
    ----------
    name : str or None
        The mode's ``name``; ``None`` for a file without ``[[mode]]`` tables (its one
        mode is the file itself).
    lineup : Lineup
        The lineup in this mode (its ``mode`` attribute is ``name``).
    overrides : tuple of str
        What the mode changes in the base file, for reports: ``"carriers"``,
        ``"drive +3.00 dBm"``, ``"mask"``, ``"report"``, ``"analysis"``,
        ``"stage 'band filter'"``.
    """

    name: str | None
    lineup: Lineup
    overrides: tuple[str, ...] = ()

    @property
    def label(self) -> str:
        """``"mode 'UHF band'"``, or ``"the lineup"`` for a file without modes."""
        return "the lineup" if self.name is None else f"mode {self.name!r}"


def worst_status(statuses) -> str:
    """The status of a design from its modes' statuses: the worst of them.

    FAIL if any mode fails; else INCOMPLETE if any is, else UNCERTAIN if any is; else
    PASS (:data:`STATUS_RANK`).

    Parameters
    ----------
    statuses : iterable of str
        ``"PASS"``, ``"UNCERTAIN"``, ``"INCOMPLETE"`` or ``"FAIL"``, one per mode; at
        least one.

    Returns
    -------
    str
        The worst one.

    Raises
    ------
    ValueError
        For an empty iterable or an unknown status.
    """
    statuses = list(statuses)
    if not statuses:
        raise ValueError("no statuses: expected one per mode")
    unknown = [s for s in statuses if s not in STATUS_RANK]
    if unknown:
        raise ValueError(f"status {unknown[0]!r}: expected one of {', '.join(STATUS_RANK)}")
    return max(statuses, key=STATUS_RANK.__getitem__)
