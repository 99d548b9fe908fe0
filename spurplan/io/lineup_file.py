"""Loading and validating a lineup file (TOML, read with :mod:`tomllib`).

This is the boundary: everything is parsed and checked here, so that the engine
only ever sees well-formed, unit-converted values.  Every problem is one
:class:`~spurplan.errors.LineupError` whose text names the file, the stage (name
and position), the field, the value and what was expected.

File layout (key names are the interface: extend, don't rename)::

    [lineup]      name, impedance
    [[carrier]]   freq, power, bandwidth, phase, modulation (see spurplan.io.modulation_files)
    [[stage]]     kind, name, and the keys of that kind (see spurplan.model.stages)
    [analysis]    max_order, combine, beyond_data, linear_sections, strict, raster,
                  raster_tolerance
    [mask]        use, files, antenna_gain, spurious_boundary, [[mask.rule]], [[mask.band]]
                  (see spurplan.io.mask_files)
    [report]      drive = {start, stop, step}, tune = {start, stop, step}
    [[corner]]    name, shift = {"stage.figure" = "..."}   (and per stage: tolerance = {...})
    [[mode]]      operating modes, each the rest of the file with overrides: read by
                  spurplan.io.modes, which loads every mode's document here
"""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path
from typing import cast

from spurplan.errors import LineupError, SweepError
from spurplan.fields import CARRIER_FREQ, CARRIER_POWER, Fields, Within, read_toml
from spurplan.io.channels import sweep_points
from spurplan.io.mask_files import read_mask
from spurplan.io.modulation_files import read_modulation
from spurplan.io.tolerances import read_corners, read_tolerance
from spurplan.io.touchstone import read_touchstone
from spurplan.model.ladders import BEYOND_POLICIES
from spurplan.model.lineup import (
    COMBINE_MODES,
    LINEAR_SECTIONS,
    MAX_ORDER_LIMIT,
    Analysis,
    Carrier,
    Combine,
    Lineup,
    ReportSpec,
    reference_carrier_index,
)
from spurplan.model.modulation import multisine
from spurplan.model.stages import KINDS, LoadContext
from spurplan.model.tolerances import Tolerance, Tolerances
from spurplan.model.tone_lattice import RASTER_TOLERANCE_HZ, lattice_for, raster_steps_hz
from spurplan.model.torus_grid import MAX_GRID_POINTS
from spurplan.units import (
    format_freq,
    parse_angle_rad,
    parse_freq_hz,
    parse_gain_db,
    parse_impedance_ohm,
    parse_power_dbm,
)

TOP_LEVEL_KEYS = ("lineup", "carrier", "stage", "analysis", "mask", "report", "corner")
# Physical-sense ranges of the keys read here (README, "Plausible values").  System
# impedances of RF lineups are 50 or 75 ohm, balanced lines a few hundred ohm; below
# 1 ohm or above 10 kohm the value is a slip (a missing "k", a stray "m").
IMPEDANCE = Within("a system impedance", 1.0, 1e4, "ohm")
# A carrier's occupied band must lie above 0 Hz: bandwidth < 2 x frequency (checked
# against the carrier); the bounds themselves are common practice, no source.
BANDWIDTH = Within("an occupied bandwidth", 1.0, 1e11, "Hz")
# Carriers on a channel raster cost the engine by the raster's span, not their number
# (spurplan.model.tone_lattice); carriers off any raster by (grid)^carriers, which the
# grid check below bounds.  This bounds the work of listing them.
MAX_CARRIERS = 256
# A stated raster: between 1 Hz and 1 GHz (common practice, no source: channel rasters
# run from a few Hz on HF to tens of MHz); a tolerance below half of it.
RASTER = Within("a channel raster", 1.0, 1e9, "Hz")
# Transmitter lineups have a handful of stages; 200 is far beyond any, and keeps a run's
# per-stage arrays (stage, batch, product) and the attribution bounded before any work.
MAX_STAGES = 200


def load(path: str | Path) -> Lineup:
    """Read and validate a lineup file.

    Parameters
    ----------
    path : str or Path

    Returns
    -------
    Lineup

    Raises
    ------
    LineupError
        On any problem, with a one-line message.
    """
    path = Path(path)
    name = str(path)
    doc = read_toml(path, "a lineup file")
    return from_dict(doc, name=name, base_dir=path.parent, source=path)


def from_dict(
    doc: dict, *, name: str = "<lineup>", base_dir: Path = Path("."), source: Path | None = None
) -> Lineup:
    """Validate an already-parsed lineup document (same rules as :func:`load`).

    Parameters
    ----------
    doc : dict
        The parsed TOML document.
    name : str
        File name for messages.
    base_dir : Path
        Folder that relative paths in the document start from.
    source : Path, optional
        The file the document came from, kept on the lineup.

    Returns
    -------
    Lineup

    Raises
    ------
    LineupError
        On any problem, with a one-line message naming file, stage and field.
    """
    if isinstance(doc, dict) and "mode" in doc:
        # Each mode is a lineup of its own: spurplan.io.modes merges and loads them.
        raise LineupError(
            "the file has [[mode]] tables: expected one mode's document (read the modes with "
            "spurplan.io.modes.load_modes)",
            file=name,
            field="mode",
        )
    top = Fields(doc, name, "")
    for key in TOP_LEVEL_KEYS:
        top.raw(key)
    top.finish()

    head = Fields(_table(doc, "lineup", name), name, "[lineup]")
    # The file's own name stands in for a missing one, on one line like every name.
    title = head.text("name", default=" ".join(Path(name).stem.split()) or "lineup")
    r_ohm = head.quantity("impedance", parse_impedance_ohm, within=IMPEDANCE) or 50.0
    head.finish()

    carriers = tuple(
        _carrier(t, name, i, base_dir) for i, t in enumerate(_array(doc, "carrier", name), start=1)
    )
    if not carriers:
        raise LineupError("no [[carrier]] table: expected at least one carrier", file=name)
    if len(carriers) > MAX_CARRIERS:
        raise LineupError(f"{len(carriers)} carriers: expected at most {MAX_CARRIERS}", file=name)

    analysis = _analysis(_table(doc, "analysis", name), name)
    _check_raster(carriers, analysis, name)
    reference = carriers[reference_carrier_index(carriers)]
    context = LoadContext(
        r_ohm=r_ohm,
        base_dir=base_dir,
        beyond_data=analysis.beyond_data,
        ref_freq_hz=reference.freq_hz,
        touchstone_reader=read_touchstone,
    )
    stages = []
    spreads: list[Tolerance] = []
    seen_names: set[str] = set()
    # Every carrier's frequency at the current stage input (mixers move them).
    carried_hz = [c.freq_hz for c in carriers]
    stage_tables = _array(doc, "stage", name)
    if len(stage_tables) > MAX_STAGES:
        raise LineupError(f"{len(stage_tables)} [[stage]] tables: expected at most {MAX_STAGES}", file=name)
    for i, table in enumerate(stage_tables, start=1):
        stage = _stage(table, name, i, context)
        if stage.conversion is not None:
            carried_hz = _converted(stage, carried_hz, name, i)
            # Past a mixer the carrier is its wanted product: later stages' figures are
            # referred there.
            context = replace(context, ref_freq_hz=stage.conversion.wanted_hz(context.ref_freq_hz))
        if isinstance(table, dict) and "tolerance" in table:
            where = f"stage {i} {stage.name!r}"
            if not isinstance(table["tolerance"], dict):
                raise LineupError(
                    f"{table['tolerance']!r}: expected a table", file=name, stage=where, field="tolerance"
                )
            spreads.extend(read_tolerance(table["tolerance"], name, where, i - 1, stage))
        if stage.name in seen_names:
            raise LineupError(
                f"{stage.name!r} is used twice: expected unique stage names",
                file=name,
                stage=f"stage {i}",
                field="name",
            )
        seen_names.add(stage.name)
        stages.append(stage)
    lo_index = 0
    for i, stage in enumerate(stages):
        if stage.conversion is not None:
            stages[i] = stage.with_lo_index(lo_index)
            lo_index += 1
    _check_size(stages, carriers, lo_index, analysis, name)
    if analysis.linear_sections == "cascade":
        _check_cascade_tables(stages, name)
    notes = tuple(f"stage '{s.name}': {n}" for s in stages for n in s.notes)
    mask = read_mask(doc["mask"], name, base_dir) if "mask" in doc else None
    corners = read_corners(doc["corner"], name, stages) if "corner" in doc else ()
    tolerances = Tolerances(items=tuple(spreads), corners=corners)
    report = _report(_table(doc, "report", name), name) if "report" in doc else None
    return Lineup(
        name=title,
        carriers=carriers,
        stages=tuple(stages),
        analysis=analysis,
        r_ohm=r_ohm,
        source=source,
        notes=notes,
        mask=mask,
        report=report,
        tolerances=tolerances,
    )


def _table(doc: dict, key: str, file: str) -> dict:
    value = doc.get(key, {})
    if not isinstance(value, dict):
        raise LineupError(f"[{key}] must be a table, got {value!r}", file=file)
    return value


def _array(doc: dict, key: str, file: str) -> list:
    value = doc.get(key, [])
    if not isinstance(value, list):
        raise LineupError(f"'{key}' must be an array of tables ([[{key}]]), got {value!r}", file=file)
    return value


def _carrier(table, file: str, index: int, base_dir: Path = Path(".")) -> Carrier:
    f = Fields(table, file, f"carrier {index}")
    freq = f.quantity("freq", parse_freq_hz, required=True)
    if freq <= 0:
        raise f.error("freq", f"{f.raw('freq')!r}: expected a frequency > 0 Hz")
    f.require_within("freq", freq, CARRIER_FREQ)
    power = f.quantity("power", parse_power_dbm, required=True, within=CARRIER_POWER)
    bandwidth = f.quantity("bandwidth", parse_freq_hz)
    if bandwidth is not None and bandwidth <= 0:
        raise f.error("bandwidth", f"{f.raw('bandwidth')!r}: expected a bandwidth > 0 Hz")
    if bandwidth is not None:
        f.require_within("bandwidth", bandwidth, BANDWIDTH)
    modulation = None
    if f.has("modulation"):
        modulation, bandwidth = read_modulation(f.raw("modulation"), f, bandwidth, base_dir)
    if bandwidth is not None and not bandwidth < 2 * freq:
        raise f.error(
            "bandwidth",
            f"{f.raw('bandwidth')!r} with the carrier at {f.raw('freq')!r}: expected a bandwidth below "
            "2 x the carrier frequency (the occupied band must lie above 0 Hz)",
        )
    phase = f.quantity("phase", parse_angle_rad) or 0.0
    f.finish()
    return Carrier(
        freq_hz=freq, power_dbm=power, bandwidth_hz=bandwidth, phase_rad=phase, modulation=modulation
    )


def _analysis(table, file: str) -> Analysis:
    f = Fields(table, file, "[analysis]")
    max_order = f.integer("max_order", default=Analysis.max_order, low=1, high=MAX_ORDER_LIMIT)
    combine = f.text("combine", default="worst", choices=COMBINE_MODES)
    beyond = f.text("beyond_data", default="error", choices=BEYOND_POLICIES)
    sections = f.text("linear_sections", default="matched", choices=LINEAR_SECTIONS)
    strict = f.raw("strict", False)
    if not isinstance(strict, bool):
        raise f.error("strict", f"{strict!r}: expected true or false")
    raster = f.quantity("raster", parse_freq_hz, within=RASTER)
    tolerance = f.quantity("raster_tolerance", parse_freq_hz)
    if tolerance is not None and not 0 < tolerance < (raster or 2e9) / 2:
        half = "half the raster" if raster else "1 GHz"
        raise f.error(
            "raster_tolerance", f"{f.raw('raster_tolerance')!r}: expected more than 0 Hz and below {half}"
        )
    f.finish()
    return Analysis(
        max_order=max_order,
        combine=cast(Combine, combine),  # one of COMBINE_MODES, the Literal's values (text() checked)
        beyond_data=beyond,
        linear_sections=sections,
        strict=strict,
        raster_hz=raster,
        raster_tolerance_hz=RASTER_TOLERANCE_HZ if tolerance is None else tolerance,
    )


def _check_raster(carriers, analysis: Analysis, file: str) -> None:
    """Carriers are distinct, and on the stated raster within its tolerance."""
    seen: dict[float, int] = {}
    for i, c in enumerate(carriers, start=1):
        if c.freq_hz in seen:
            raise LineupError(
                f"{format_freq(c.freq_hz)} is also carrier {seen[c.freq_hz]}'s frequency: expected "
                "distinct carrier frequencies (state one carrier with the power of both)",
                file=file,
                stage=f"carrier {i}",
                field="freq",
            )
        seen[c.freq_hz] = i
    raster, tol = analysis.raster_hz, analysis.raster_tolerance_hz
    if raster is None or len(carriers) < 2:
        return
    freqs = [c.freq_hz for c in carriers]
    if raster_steps_hz(freqs, raster, tol) is not None:
        return
    low = min(freqs)
    for i, f in enumerate(freqs, start=1):
        off = (f - low) - round((f - low) / raster) * raster
        if abs(off) > tol:
            raise LineupError(
                f"{f:.12g} Hz is {abs(off):.6g} Hz off the {format_freq(raster)} raster through the "
                f"lowest carrier ({low:.12g} Hz): expected within raster_tolerance "
                f"({tol:.6g} Hz); move the carrier or widen the tolerance",
                file=file,
                stage=f"carrier {i}",
                field="freq",
            )


def _report(table, file: str) -> ReportSpec:
    """``[report]``: optional sweeps, ``drive = {start, stop, step}``, ``tune = {start, stop, step}``."""
    f = Fields(table, file, "[report]")
    out = {}
    for key, parse, unit, what in (
        ("drive", parse_power_dbm, "dBm", "drive"),
        ("tune", parse_freq_hz, "Hz", "channel"),
    ):
        raw = f.raw(key)
        if raw is None:
            continue
        sub = Fields(raw, file, f"[report] {key}")
        within = CARRIER_POWER if key == "drive" else CARRIER_FREQ
        start = sub.quantity("start", parse, required=True, within=within)
        stop = sub.quantity("stop", parse, required=True, within=within)
        step = sub.quantity("step", parse_gain_db if key == "drive" else parse_freq_hz, required=True)
        sub.finish()
        try:
            sweep_points(start, stop, step, what, unit, "dB" if key == "drive" else unit)
        except SweepError as exc:
            raise f.error(key, str(exc)) from None
        out[key] = (start, stop, step)
    f.finish()
    return ReportSpec(**out)


def _stage(table, file: str, index: int, context: LoadContext):
    if not isinstance(table, dict):
        raise LineupError(f"expected a table, got {table!r}", file=file, stage=f"stage {index}")
    raw_name = table.get("name")
    where = f"stage {index} {raw_name!r}" if isinstance(raw_name, str) else f"stage {index}"
    f = Fields(table, file, where)
    f.raw("tolerance")  # read by the Monte Carlo layer (spurplan.analyses.montecarlo)
    kind = f.text("kind", choices=tuple(KINDS))
    if kind is None:
        raise f.error("kind", f"is required: expected one of {', '.join(KINDS)}")
    name = f.text("name")
    if not name or not name.strip():
        raise f.error("name", "is required: expected a non-empty string")
    stage = KINDS[kind].from_fields(f, context)
    f.finish()
    return stage


def _check_cascade_tables(stages, file: str) -> None:
    """A linear stage with a figure table cannot join a cascaded section: its loss per
    channel would change its neighbours' reflections, which the per-channel model
    (spurplan.model.figure_tables) does not cascade."""
    for i, stage in enumerate(stages, start=1):
        tables = getattr(stage, "figure_tables", None)
        if stage.transfer is None and tables:
            raise LineupError(
                'is a table against frequency with [analysis] linear_sections = "cascade": expected one '
                'value, or linear_sections = "matched"',
                file=file,
                stage=f"stage {i} {stage.name!r}",
                field=tables.tables[0].key,
            )


def _converted(mixer, freqs_hz: list[float], file: str, index: int) -> list[float]:
    """Each carrier's wanted product at the output of ``mixer`` (a converting stage); refused when one lands near 0 Hz.

    A lower-sideband mixer whose LO equals the IF puts the wanted product at DC: no
    transmission, no limit applies, and dBc against it has no meaning.  Such a product
    (or one below :data:`~spurplan.fields.CARRIER_FREQ`'s lower end) is an input error.
    """
    conv = mixer.conversion
    lo = conv.lo_freq_hz
    out = [conv.wanted_hz(f) for f in freqs_hz]
    wanted = replace(CARRIER_FREQ, what="a wanted product")
    for k, (f_in, f_out) in enumerate(zip(freqs_hz, out, strict=True), start=1):
        if f_out not in wanted:
            raise LineupError(
                f"LO {format_freq(lo)} with the {conv.sideband} sideband puts carrier {k} ({format_freq(f_in)} "
                f"at the mixer input) at {format_freq(f_out)}: {wanted.expected()}",
                file=file,
                stage=f"stage {index} {mixer.name!r}",
                field="sideband" if conv.sideband == "lower" else "lo",
            )
    return out


def grid_points(stages, lattice, max_order: int) -> tuple[int, int]:
    """Points of the engine's alias-free grid for one batch element, and the degree that sets it.

    A lower bound on the work of one evaluation: non-polynomial models start there and
    refine (DEVELOPERS.md, "Torus engine").  Sweeps and yield runs multiply it by their
    points to bound their work before they start.

    Parameters
    ----------
    stages : sequence of stage
        The lineup's stages; linear ones (``grid_degree`` None) add nothing.
    lattice : spurplan.model.tone_lattice.ToneLattice
        The engine's axes for the lineup's tones (:attr:`Lineup.tone_lattice`).
    max_order : int
        The analysis order: the products kept.

    Returns
    -------
    tuple of (int, int)
        Grid points (the product of the points on each axis) and the largest model degree
        (each stage's ``grid_degree``: 8 assumed for a non-polynomial model; ``m + |n|`` of
        a mixer's terms).
    """
    degree = max((s.grid_degree for s in stages if s.grid_degree is not None), default=1)
    return lattice.grid_points(degree, max_order), degree


def _check_size(stages, carriers, n_lo: int, analysis: Analysis, file: str) -> None:
    m = analysis.max_order
    lattice = lattice_for(
        n_lo, tuple(c.freq_hz for c in carriers), analysis.raster_hz, analysis.raster_tolerance_hz, m
    )
    points, degree = grid_points(stages, lattice, m)
    if points <= MAX_GRID_POINTS and any(c.modulation is not None for c in carriers):
        # Modulated carriers run as their multisines' tones: the grid of those.
        tones = [
            float(f)
            for c in carriers
            for f in (
                [c.freq_hz]
                if c.modulation is None
                else c.freq_hz + multisine(c.modulation, c.bandwidth_hz or 0.0).offsets_hz()
            )
        ]
        lattice = lattice_for(n_lo, tuple(tones), None, analysis.raster_tolerance_hz, m)
        points = grid_points(stages, lattice, m)[0]
        if points > MAX_GRID_POINTS:
            raise LineupError(
                f"{m}: the modulated carriers run as {len(tones)} tones, which need {points:.3g} grid points "
                f"(at most {MAX_GRID_POINTS:.3g}) to order {m}: expected fewer tones (modulation tones), a lower "
                "max_order, or carriers closer together",
                file=file,
                stage="[analysis]",
                field="max_order",
            )
    if points > MAX_GRID_POINTS:
        shared = "on a raster" if lattice.raster_hz else "on no common raster"
        raise LineupError(
            f"{m}: {len(carriers)} carriers {shared} and {n_lo} LOs to order {m} with degree-{degree} "
            f"stages need {points:.3g} grid points (at most {MAX_GRID_POINTS:.3g}); expected a lower "
            "max_order, fewer carriers, or carriers on a common channel raster ([analysis] raster)",
            file=file,
            stage="[analysis]",
            field="max_order",
        )
