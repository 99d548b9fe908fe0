"""Remedy: the rejection a failing lineup still needs, and the filter that supplies it.

The search inserts a synthesized filter at one place of the lineup (default: after
the last amplifier) and re-runs the whole check with it, so that the filter's true
response at every product, its passband loss at the carrier (which moves relative
limits) and any products regenerated after it are all accounted for.  Orders rise
from 1; at each order a Chebyshev (0.1 dB ripple, odd orders) and a Butterworth
ladder are tried, and the lowest order that meets the mask with the margin target
wins (the larger margin if both do).

The passband edge sits at least ``edge_factor`` beyond the carriers (a low-pass cuts
off at ``edge_factor`` times the highest carrier, a high-pass at the lowest carrier
divided by it, a band-pass spans both when products lie above and below), and a
Butterworth edge moves further out until its loss at the carriers is at most
``max_loss_db``.
The filter is built from the lineup snippet that is printed, so what is checked is
exactly what the user pastes.

The proposed filter is a real one: its parts have finite unloaded Q and it has a
stopband floor (by default those of :mod:`spurplan.model.ladders`: Q_L 100, Q_C 500, floor
-80 dB; common practice, no source), written into the snippet, so that the re-check
includes the dissipation loss at the carrier and the rejection the floor caps.  A
product that needs more rejection than the floor allows (:func:`spurplan.model.ladders.
max_rejection_db`) cannot be fixed by one filter: the search is not run and the
reason says so.

``--write`` (:func:`fixed_lineup`, written by :func:`spurplan.output.remedy_file.write_fixed`)
edits the user's file as a TOML document (:mod:`spurplan.io.lineup_edit`), re-reads the
result with the project's loader and writes it only when it is the lineup that was
re-checked, numbers included.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from pathlib import Path
from typing import TYPE_CHECKING

from spurplan.analyses.check import CheckResult, check
from spurplan.errors import LineupError, SpurplanError
from spurplan.fields import Fields, Within
from spurplan.model.ladders import (
    DEFAULT_FLOOR_DB,
    DEFAULT_Q_CAPACITOR,
    DEFAULT_Q_INDUCTOR,
    MAX_FILTER_ORDER,
    max_rejection_db,
)
from spurplan.model.stages import Amplifier, LoadContext
from spurplan.model.stages.filter import Filter

if TYPE_CHECKING:  # annotations only
    from spurplan.model.lineup import Lineup

EDGE_FACTOR = 1.1
# Passband loss at a carrier the edge placement allows (dB): heat in the filter and
# lost output power, which an engineer would not accept beyond a few tenths of a dB.
MAX_PASSBAND_LOSS_DB = 0.3
# The margin every product must keep (README, "Plausible values").  A negative target
# would accept products above their limit and call the lineup fixed; beyond 60 dB no
# planning margin is meant (common practice, no source).
MARGIN_TARGET = Within(
    "a margin target", 0.0, 60.0, "dB", "a negative target accepts products above their limit"
)
FAMILIES_TRIED = (("chebyshev", "0.1 dB"), ("butterworth", None))
STAGE_NAME = "remedy filter"


@dataclass(frozen=True)
class Remedy:
    """What :func:`remedy` found.

    Attributes
    ----------
    needed : dict of lists
        Products short of the margin target: ``freq_hz, label, margin_db,
        rejection_needed_db, rule``.
    after : str or None
        Stage after which the filter goes (``None``: at the lineup input).
    position : int
        Number of stages before the filter.
    snippet : str or None
        The ``[[stage]]`` table to paste.
    filter : Filter or None
    outcome : CheckResult or None
        The check of the lineup with the filter in place.
    tried : list of dict
        Every candidate: family, order, worst margin.
    reason : str
        Why nothing was proposed, when nothing was.
    parts : dict
        The parts assumed for every candidate: ``q_inductor``, ``q_capacitor``
        (``None``: lossless) and ``floor_db`` (``None``: no floor).
    """

    lineup: Lineup
    before: CheckResult
    margin_target_db: float
    needed: dict
    after: str | None
    position: int
    snippet: str | None
    filter: Filter | None
    outcome: CheckResult | None
    tried: list
    reason: str = ""
    parts: dict | None = None

    @property
    def found(self) -> bool:
        return self.snippet is not None

    @property
    def rows(self) -> dict[str, list]:
        """:attr:`needed`: the products short of the margin target, one row each."""
        return self.needed


def rejection_needed(outcome: CheckResult, margin_db: float) -> dict[str, list]:
    """Products whose margin is below ``margin_db``, and how much more rejection each needs.

    Parameters
    ----------
    outcome : CheckResult
        A compliance check, with ``margin_db`` per product row (dB; ``None`` where no rule
        applies).
    margin_db : float
        Margin target (dB).

    Returns
    -------
    dict of str to list
        ``freq_hz`` (Hz), ``label``, ``margin_db`` (dB), ``rejection_needed_db`` (dB: the
        target minus the margin), ``rule`` and ``band`` of each product short of the target.
    """
    rows = outcome.rows
    out: dict[str, list] = {
        c: [] for c in ("freq_hz", "label", "margin_db", "rejection_needed_db", "rule", "band")
    }
    for i, m in enumerate(rows["margin_db"]):
        if m is not None and m < margin_db:
            out["freq_hz"].append(rows["freq_hz"][i])
            out["label"].append(rows["label"][i])
            out["margin_db"].append(m)
            out["rejection_needed_db"].append(margin_db - m)
            out["rule"].append(rows["rule"][i])
            out["band"].append(rows["band"][i])
    return out


def remedy(
    lineup,
    at: str | None = None,
    margin_db: float = 3.0,
    edge_factor: float = EDGE_FACTOR,
    max_loss_db: float = MAX_PASSBAND_LOSS_DB,
    q_inductor: float | None = DEFAULT_Q_INDUCTOR,
    q_capacitor: float | None = DEFAULT_Q_CAPACITOR,
    floor_db: float | None = DEFAULT_FLOOR_DB,
) -> Remedy:
    """Find the lowest-order synthesized filter that makes ``lineup`` pass with ``margin_db``.

    Parameters
    ----------
    lineup : Lineup
        With a mask.
    at : str, optional
        Insert the filter after this stage (default: after the last amplifier).
    margin_db : float
        Margin target (dB) every checked product must meet.
    edge_factor : float
        Passband edge beyond the carriers (see the module docstring).
    max_loss_db : float
        Largest loss of the ideal ladder at a carrier that the edge placement allows
        (the re-check includes the real filter's dissipation loss as well).
    q_inductor, q_capacitor : float or None
        Unloaded Q of the proposed filter's parts (``None``: lossless).
    floor_db : float or None
        The proposed filter's stopband floor (dB; ``None``: the ideal ladder).

    Returns
    -------
    Remedy
        The filter found (or why none was), its table to paste and the re-check.
    """
    if margin_db not in MARGIN_TARGET:
        raise LineupError(f"{margin_db:g} dB: {MARGIN_TARGET.expected()}", field="{@margin_db}")
    before = check(lineup)
    needed = rejection_needed(before, margin_db)
    position = _position(lineup, at)
    after = lineup.stages[position - 1].name if position else None

    def result(**kw) -> Remedy:
        base = dict(
            lineup=lineup,
            before=before,
            margin_target_db=margin_db,
            needed=needed,
            after=after,
            position=position,
            snippet=None,
            filter=None,
            outcome=None,
            tried=[],
            parts={"q_inductor": q_inductor, "q_capacitor": q_capacitor, "floor_db": floor_db},
        )
        return Remedy(**{**base, **kw})

    if not needed["freq_hz"]:
        if before.status != "PASS":
            # A filter cannot fix what the check could not judge: say so, not "meets".
            return result(
                reason=f"every product the check judged has {margin_db:g} dB margin, but the check is "
                f"{before.status}: {before.verdict.split(': ', 1)[-1]}"
            )
        return result(reason=f"the lineup already meets the mask with {margin_db:g} dB margin")
    carriers = list(before.result.carrier_freqs_hz()[0])
    lo, hi = min(carriers), max(carriers)
    above = [f for f in needed["freq_hz"] if f > hi]
    below = [f for f in needed["freq_hz"] if f < lo]
    if len(above) + len(below) < len(needed["freq_hz"]):
        return result(reason="some failing products lie between the carriers: no filter can remove them")
    kind = "bandpass" if above and below else ("lowpass" if above else "highpass")
    most = max_rejection_db(floor_db)
    beyond = [i for i, r in enumerate(needed["rejection_needed_db"]) if r > most]
    if beyond:
        i = max(beyond, key=lambda k: needed["rejection_needed_db"][k])
        return result(
            reason=(
                f"{needed['label'][i]} at {needed['freq_hz'][i] / 1e6:.6g} MHz needs "
                f"{needed['rejection_needed_db'][i]:.1f} dB more rejection, more than one filter with a "
                f"{floor_db:g} dB stopband floor gives ({most:.1f} dB at most): lower the product at its source, "
                "or use more than one filter, each in its own screened section"
            )
        )
    parts = _parts_keys(q_inductor, q_capacitor, floor_db)
    name = _free_name(lineup)

    tried = []
    for order in range(1, MAX_FILTER_ORDER + 1):
        found = []
        for family, ripple in FAMILIES_TRIED:
            if family == "chebyshev" and order % 2 == 0:
                continue
            shape = _shape(kind, family, order, lo, hi, edge_factor, max_loss_db)
            rip = f', ripple = "{ripple}"' if ripple else ""
            snippet = (
                f'[[stage]]\nkind = "filter"\nname = "{name}"\n'
                f'prototype = {{ family = "{family}", {shape}, order = {order}{rip}, {parts} }}\n'
            )
            flt = _filter_from_snippet(snippet, lineup)
            fixed = replace(lineup, stages=(*lineup.stages[:position], flt, *lineup.stages[position:]))
            outcome = check(fixed)
            worst = outcome.worst_margin_db
            tried.append({"family": family, "order": order, "response": kind, "worst_margin_db": worst})
            if worst is not None and worst >= margin_db:
                found.append((worst, snippet, flt, outcome))
        if found:
            worst, snippet, flt, outcome = max(found, key=lambda t: t[0])
            return result(snippet=snippet, filter=flt, outcome=outcome, tried=tried)
    nearest = min(needed["freq_hz"], key=lambda f: min(abs(f - lo), abs(f - hi)))
    gap = min(abs(nearest - lo), abs(nearest - hi)) / hi
    reason = f"no {kind} filter up to order {MAX_FILTER_ORDER} meets the target"
    if gap < edge_factor - 1:
        label = needed["label"][needed["freq_hz"].index(nearest)]
        reason += (
            f": {label} at {nearest / 1e6:.6g} MHz lies within {100 * gap:.2g} % of the carrier, too close for a "
            "filter to separate; change the frequency plan (with a mixer, the LO side: see spurplan spurs)"
        )
    return result(tried=tried, reason=reason)


def _shape(
    kind: str, family: str, order: int, lo: float, hi: float, edge_factor: float, max_loss_db: float
) -> str:
    """Prototype keys placing the passband edge(s) for the carriers lo .. hi (Hz).

    At least ``edge_factor`` beyond the carriers; a Butterworth edge moves further out
    until its loss at the outermost carrier is at most ``max_loss_db``:
    ``10 log10(1 + W^(2N)) <= L`` with W the carrier's normalised frequency
    (Butterworth magnitude, Matthaei, Young and Jones 1964 section 4.03; from memory).
    A Chebyshev's passband loss is its ripple, below the cap.
    """
    w_max = (10 ** (max_loss_db / 10) - 1) ** (1 / (2 * order)) if family == "butterworth" else 1.0
    if kind == "lowpass":
        return f'response = "lowpass", cutoff = "{_mhz(max(hi * edge_factor, hi / w_max))}"'
    if kind == "highpass":
        return f'response = "highpass", cutoff = "{_mhz(min(lo / edge_factor, lo * w_max))}"'
    f1, f2 = lo / edge_factor, hi * edge_factor
    f0 = (f1 * f2) ** 0.5
    # Band-pass: W = (f/f0 - f0/f) / D; widen D until |W| at the carriers is <= w_max.
    span = max(hi / f0 - f0 / hi, f0 / lo - lo / f0)
    frac = max((f2 - f1) / f0, span / w_max)
    return f'response = "bandpass", center = "{_mhz(f0)}", bandwidth = "{_mhz(frac * f0)}"'


def _parts_keys(q_inductor: float | None, q_capacitor: float | None, floor_db: float | None) -> str:
    """The prototype keys for the parts' Q and the floor, as the snippet writes them."""

    def q(value) -> str:
        return '"lossless"' if value is None else f"{value:.12g}"

    floor = '"none"' if floor_db is None else f'"{floor_db:.12g} dB"'
    return f"q_inductor = {q(q_inductor)}, q_capacitor = {q(q_capacitor)}, floor = {floor}"


def _mhz(hz: float) -> str:
    return f"{hz / 1e6:.6g} MHz"


def _position(lineup, at: str | None) -> int:
    if at is not None:
        return lineup.stage_index(at, argument="at")
    amps = [i for i, s in enumerate(lineup.stages, start=1) if isinstance(s, Amplifier)]
    return amps[-1] if amps else len(lineup.stages)


def _free_name(lineup) -> str:
    """``STAGE_NAME``, numbered when the lineup has a stage of that name already (a lineup
    remedied before): stage names must be unique, or the written file would not load."""
    used = {s.name for s in lineup.stages}
    name, k = STAGE_NAME, 1
    while name in used:
        k += 1
        name = f"{STAGE_NAME} {k}"
    return name


def _filter_from_snippet(snippet: str, lineup) -> Filter:
    import tomllib

    table = tomllib.loads(snippet)["stage"][0]
    context = LoadContext(r_ohm=lineup.r_ohm, base_dir=lineup.source.parent if lineup.source else Path("."))
    f = Fields(table, "remedy", f"stage {table['name']!r}")
    f.raw("kind")
    return Filter.from_fields(f, context)


def fixed_lineup(lineup, found: Remedy, path):
    """The lineup file with the remedy's filter inserted, checked, ready to be written.

    The file is edited as a TOML document (:func:`spurplan.io.lineup_edit.insert_stage`):
    the filter's table goes into the ``stage`` array at ``found.position``, everything
    else stays as the user wrote it.  The new document is read back with the project's
    own loader and must be the lineup that was checked: the same stages in the same
    order, the same filter, and the same re-check numbers (so the numbers remedy prints
    are the written file's).  Relative data paths are rewritten for the folder of
    ``path``.  Any mismatch is a one-line :class:`~spurplan.errors.LineupError`.
    Nothing is written here (:func:`spurplan.output.remedy_file.write_fixed` writes it).

    Parameters
    ----------
    lineup : Lineup
        The lineup that was checked, loaded from a file.
    found : Remedy
        What :func:`remedy` found; it must hold a filter.
    path : str or Path
        The file it is meant for (may be the lineup's own file).

    Returns
    -------
    EditedLineup
        The edited document and its bytes (``data``); ``moved`` lists the rewritten data
        paths.
    """
    from spurplan.io.lineup_edit import insert_stage
    from spurplan.io.lineup_file import from_dict

    target = Path(path)
    if found.snippet is None:  # found.found, spelled so that the type narrows
        raise LineupError("no filter was found: nothing to write", file=str(target), field="{@path}")
    if lineup.source is None:
        raise LineupError(
            "the lineup was not read from a file: expected a lineup file to edit",
            file=str(target),
            field="{@path}",
        )
    folder = target.parent if str(target.parent) else Path(".")
    if not folder.is_dir():  # before re-reading: data paths would be looked for there
        raise LineupError(
            f"the folder {folder} does not exist: expected an existing folder",
            file=str(target),
            field="{@path}",
        )
    edited = insert_stage(lineup.source, target, found.position, found.snippet)
    try:
        written = from_dict(edited.doc, name=str(target), base_dir=target.parent, source=target)
        outcome = check(written)
    except SpurplanError as exc:
        raise LineupError(
            f"the lineup with the filter would not load ({exc}): nothing written",
            file=str(target),
            field="{@path}",
        ) from None
    _same_as_checked(written, outcome, found, target)
    return edited


def _same_as_checked(written, outcome: CheckResult, found: Remedy, target: Path) -> None:
    """Refuse unless ``written`` (the file to be written, as loaded) is what remedy checked."""
    pos = found.position
    flt, expected = found.filter, found.outcome
    # The caller refused a Remedy that found nothing, and remedy() sets the snippet, the
    # filter and the outcome together when it finds one.
    assert flt is not None and expected is not None
    checked = (*found.lineup.stages[:pos], flt, *found.lineup.stages[pos:])

    def stages(lu_stages) -> list:
        return [(s.name, s.kind) for s in lu_stages]

    def refuse(what: str) -> LineupError:
        return LineupError(f"{what}: nothing written", file=str(target), field="{@path}")

    if stages(written.stages) != stages(checked):
        names = ", ".join(f"{n!r}" for n, _ in stages(written.stages))
        raise refuse(f"the file would hold the stages {names}, not the lineup that was checked")
    if getattr(written.stages[pos], "prototype", None) != flt.prototype:
        raise refuse(f"stage {pos + 1} would not be the filter that was checked")
    if not _same_numbers(outcome, expected):
        raise refuse(
            f"the file re-checks to a worst margin of {outcome.worst_margin_db} dB, not the "
            f"{expected.worst_margin_db} dB of the lineup that was checked"
        )


def _same_numbers(a: CheckResult, b: CheckResult, tol_db: float = 1e-9) -> bool:
    """The same verdict and margins (dB) row by row, and the same carrier level."""

    def close(x, y) -> bool:
        return (x is None and y is None) or (x is not None and y is not None and abs(x - y) <= tol_db)

    ra, rb = a.rows["margin_db"], b.rows["margin_db"]
    return (
        a.passed == b.passed
        and close(a.worst_margin_db, b.worst_margin_db)
        and close(a.carrier_dbm, b.carrier_dbm)
        and a.rows["label"] == b.rows["label"]
        and len(ra) == len(rb)
        and all(close(x, y) for x, y in zip(ra, rb, strict=True))
    )
