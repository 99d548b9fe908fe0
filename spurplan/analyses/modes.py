"""Verdicts over a lineup's operating modes.

A transmitter is certified in every mode it runs in, so a design passes only when every
mode does (:func:`spurplan.model.modes.worst_status`).  Each question has its own
standing per mode, in the check's words (PASS, UNCERTAIN, INCOMPLETE, FAIL):

* the check: :attr:`CheckResult.status <spurplan.analyses.check.CheckResult.status>`;
* a tuning sweep (:func:`tune_status`): FAIL where a channel fails, else what the model
  does not know;
* a drive sweep (:func:`drive_standing`): whether the mode's own drive (its strongest
  carrier's input power) lies within its compliant range;
* a yield: a unit passes only if it passes in every mode; where every mode drew the same
  units (:func:`joint_yield`) that fraction is counted, else the lowest mode's yield
  (:func:`lowest_yield`) bounds it from above.

The words are :mod:`spurplan.output.verdicts`'s.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from spurplan.model.modes import worst_status


def model_status(lineup, unsettled: int = 0) -> str:
    """What a sweep's or yield's model leaves open, as a status.

    The same reading as :func:`spurplan.output.verdicts.model_caveat`: a missing figure
    or a modulated carrier swept as CW is INCOMPLETE; a stated figure the model misses,
    or levels that did not settle, UNCERTAIN.

    Parameters
    ----------
    lineup : Lineup
        The lineup the result was computed from.
    unsettled : int
        Points counted as compliant whose levels did not settle.

    Returns
    -------
    str
        ``"INCOMPLETE"``, ``"UNCERTAIN"`` or ``"PASS"``.
    """
    if lineup.missing_figures() or any(c.modulation is not None for c in lineup.carriers):
        return "INCOMPLETE"
    if lineup.figures_missed() or unsettled:
        return "UNCERTAIN"
    return "PASS"


def tune_status(sweep) -> str:
    """A tuning sweep's standing: FAIL when any channel fails, else :func:`model_status`.

    Parameters
    ----------
    sweep : TuneSweep
        What :func:`spurplan.analyses.sweep.tune_sweep` found.

    Returns
    -------
    str
    """
    if not sweep.passed:
        return "FAIL"
    unsettled = 0 if sweep.unsettled is None else int(sweep.unsettled.sum())
    return model_status(sweep.lineup, unsettled)


@dataclass(frozen=True)
class DriveStanding:
    """A mode's own drive against the compliant range its drive sweep found.

    Attributes
    ----------
    status : str
        FAIL: the mode's drive is within or above the sweep and above its highest
        compliant drive (or no drive from the bottom of the sweep is compliant);
        UNCERTAIN: the mode's drive lies below the sweep, or above a sweep compliant
        throughout (nothing was computed there), or the model leaves it open
        (:func:`model_status`, INCOMPLETE too); else PASS.
    drive_dbm : float
        The mode's drive: its strongest carrier's input power (dBm).
    limit_dbm : float or None
        The highest compliant input drive (dBm), ``None`` for none (also for a sweep of
        the output power: the input that gives it).
    reason : str
        ``"no compliant drive"``, ``"above"``, ``"outside the sweep"``, ``"model"`` or
        ``"within"``.
    headroom_db : float or None
        ``limit_dbm - drive_dbm`` (dB) where both are known.
    """

    status: str
    drive_dbm: float
    limit_dbm: float | None
    reason: str
    headroom_db: float | None


def drive_standing(sweep) -> DriveStanding:
    """Whether a mode's own drive is within the compliant range its sweep found.

    Parameters
    ----------
    sweep : DriveSweep
        What :func:`spurplan.analyses.sweep.drive_sweep` found for the mode's lineup.

    Returns
    -------
    DriveStanding
    """
    import numpy as np

    lineup = sweep.lineup
    # Input-referred throughout: a sweep of the output power has its compliant input too.
    drive = lineup.carriers[lineup.reference_carrier_index].power_dbm
    limit = sweep.max_compliant_input_dbm
    swept = sweep.input_dbm[np.isfinite(sweep.input_dbm)]
    low, high = (float(swept.min()), float(swept.max())) if swept.size else (np.inf, -np.inf)
    headroom = None if limit is None else limit - drive
    unsettled = model_status(lineup, sweep.unsettled_signed)
    open_status = worst_status(["UNCERTAIN", unsettled])
    # The compliant range is the first passing stretch from the bottom of the sweep (what
    # one signs, DEVELOPERS.md): a drive below the sweep is not known; one above the top
    # of that stretch is not signed, whether or not a drive beyond it was swept.
    if drive < low:
        return DriveStanding(open_status, drive, limit, "outside the sweep", headroom)
    if sweep.status in ("fails throughout", "fails at the lowest drive"):
        return DriveStanding("FAIL", drive, None, "no compliant drive", None)
    if limit is not None and drive > limit:
        return DriveStanding("FAIL", drive, limit, "above", headroom)
    if drive > high:
        return DriveStanding(open_status, drive, limit, "outside the sweep", headroom)
    if unsettled != "PASS":
        return DriveStanding(unsettled, drive, limit, "model", headroom)
    return DriveStanding("PASS", drive, limit, "within", headroom)


def lowest_yield(results) -> int:
    """Position of the mode with the lowest yield among ``results``.

    A built unit passes only if it passes in every mode; the samples of different modes
    are not the same units, so the design's yield is not computed, but it cannot exceed
    the lowest mode's (the fraction passing all modes is at most the fraction passing
    any one of them).

    Parameters
    ----------
    results : sequence of YieldResult
        One per mode; at least one.

    Returns
    -------
    int
        Index into ``results``; ties to the first.
    """
    return min(range(len(results)), key=lambda i: results[i].yield_fraction)


def joint_yield(results) -> tuple[int, int] | None:
    """Units passing in every mode, when every mode drew the same units; else ``None``.

    A Monte Carlo sample is a built unit: its parts' deviations come from the run's seed
    and the lineup's tolerances alone (:func:`spurplan.analyses.montecarlo.draw`: one
    generator per seed and batch, one draw per tolerance in file order).  Modes with
    equal tolerances and corners, run with the same seed and sample count, therefore
    evaluate the same units, and a unit passes the design when its worst margin passes
    in every mode.  Where a mode changes a tolerance (a stage override with its own
    ``tolerance``), the samples are other units and only :func:`lowest_yield`'s bound
    holds.

    Parameters
    ----------
    results : sequence of YieldResult
        One per mode; at least one.

    Returns
    -------
    tuple of (int, int) or None
        Units that pass in every mode, and the number of units.
    """
    first = results[0]
    same = all(
        r.samples == first.samples
        and r.seed == first.seed
        and r.lineup.tolerances == first.lineup.tolerances
        and len(r.lineup.stages) == len(first.lineup.stages)
        for r in results
    )
    if not same:
        return None
    worst = np.min(np.stack([np.asarray(r.worst_margin_db, dtype=float) for r in results]), axis=0)
    return int(np.sum(worst >= 0)), int(first.samples)
