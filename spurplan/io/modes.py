"""Reading a lineup file's operating modes (``[[mode]]`` tables).

A file may describe several modes of one transmitter (two bands, two power levels).
The file without its ``[[mode]]`` tables is the base; each mode is the base with the
mode's overrides merged in, as a TOML document, and that document is loaded with
:func:`spurplan.io.lineup_file.from_dict`: every mode is validated exactly as a file
holding it would be, and its errors name the mode (``file.toml: mode 'UHF band':
stage 3 'band filter': field 'prototype': ...``).

Mode table (key names are the interface: extend, don't rename)::

    [[mode]]
    name = "UHF band"                  # required, unique, one line; "all" is reserved
    drive = "+3 dBm"                   # the strongest carrier's input power: every
                                       # carrier moves by the same dB
    [[mode.carrier]]                   # replaces all of the base's carriers
    [mode.report]                      # merged into [report], key by key
    [mode.analysis]                    # merged into [analysis], key by key
    [mode.mask]                        # replaces [mask] whole
    [mode.stage."band filter"]         # merged into that stage's table, key by key;
                                       # with kind = ..., replaces the table (name kept)

"Merged key by key": a key the mode gives replaces the base's; a table inside merges the
same way (``prototype = { cutoff = "520 MHz" }`` changes the cutoff alone); arrays and
values replace.  The stages (their order and names) are the base's: a mode changes a
stage, it does not add or remove one (a bypassed stage is an ``attenuator`` of
``loss = "0 dB"``).  Carriers are replaced before the drive moves them.

A file without ``[[mode]]`` tables has one mode, unnamed (``Mode.name`` is ``None``):
it loads exactly as before.
"""

from __future__ import annotations

import copy
import difflib
from dataclasses import replace
from pathlib import Path

from spurplan.errors import LineupError, SpurplanError
from spurplan.fields import CARRIER_POWER, Fields, read_toml
from spurplan.io.lineup_file import from_dict
from spurplan.model.lineup import Carrier, Lineup, reference_carrier_index
from spurplan.model.modes import Mode
from spurplan.units import parse_freq_hz, parse_power_dbm

# A radio has a handful of bands and power levels; 64 modes is far beyond any and bounds
# the work of loading them (each loads as a whole lineup; common practice, no source).
MAX_MODES = 64
# The word that selects every mode (the command line's default).
ALL = "all"
MODE_KEYS = ("name", "carrier", "drive", "report", "analysis", "mask", "stage")


def load_modes(path: str | Path, mode=None) -> tuple[Mode, ...]:
    """Read a lineup file and build each selected mode's lineup.

    Parameters
    ----------
    path : str or Path
        The lineup file.
    mode : str or sequence of str, optional
        The modes to build, by name, in any order (they come back in file order);
        ``None``, an empty sequence or ``"all"`` among them: every mode.

    Returns
    -------
    tuple of Mode
        One per selected mode; for a file without ``[[mode]]`` tables, its one unnamed
        mode.

    Raises
    ------
    LineupError
        On any problem, one line naming the file, the mode, the table and the field.
    """
    path = Path(path)
    doc = read_toml(path, "a lineup file")
    return modes_from_dict(doc, name=str(path), base_dir=path.parent, source=path, mode=mode)


def load_mode(path: str | Path, mode: str | None = None) -> Lineup:
    """One mode's lineup from a file (what :func:`spurplan.load` returns).

    Parameters
    ----------
    path : str or Path
        The lineup file.
    mode : str, optional
        The mode's name; may be left out for a file with one mode or none.

    Returns
    -------
    Lineup

    Raises
    ------
    LineupError
        On any problem; when the file has several modes and none is named.
    """
    path = Path(path)
    doc = read_toml(path, "a lineup file")
    if mode is None and isinstance(doc.get("mode"), list) and len(doc["mode"]) > 1:
        names = ", ".join(repr(t.get("name")) for t in doc["mode"] if isinstance(t, dict))
        raise LineupError(
            f"the file has {len(doc['mode'])} modes ({names}): expected one of them named in {{@mode}} "
            "(or all of them: spurplan.load_modes)",
            file=str(path),
        )
    return modes_from_dict(doc, name=str(path), base_dir=path.parent, source=path, mode=mode)[0].lineup


def modes_from_dict(
    doc: dict,
    *,
    name: str = "<lineup>",
    base_dir: Path = Path("."),
    source: Path | None = None,
    mode=None,
) -> tuple[Mode, ...]:
    """Validate an already-parsed lineup document's modes (same rules as :func:`load_modes`).

    Parameters
    ----------
    doc : dict
        The parsed TOML document.
    name : str
        File name for messages.
    base_dir : Path
        Folder that relative paths in the document start from.
    source : Path, optional
        The file the document came from, kept on each lineup.
    mode : str or sequence of str, optional
        The modes to build (:func:`load_modes`).

    Returns
    -------
    tuple of Mode

    Raises
    ------
    LineupError
        On any problem, with a one-line message naming file, mode, table and field.
    """
    wanted = _wanted(mode)
    if "mode" not in doc:
        if wanted:
            raise LineupError(
                f"no mode named {sorted(wanted)[0]!r}: the file has no [[mode]] tables (one mode, the file "
                f"itself): expected {ALL!r} or no {{@mode}}",
                file=name,
            )
        return (Mode(None, from_dict(doc, name=name, base_dir=base_dir, source=source)),)
    tables = doc["mode"]
    if not isinstance(tables, list) or not tables or not all(isinstance(t, dict) for t in tables):
        raise LineupError(
            f"'mode' must be a non-empty array of tables ([[mode]]), got {repr(tables)[:200]}",
            file=name,
            field="mode",
        )
    if len(tables) > MAX_MODES:
        raise LineupError(f"{len(tables)} [[mode]] tables: expected at most {MAX_MODES}", file=name)
    base = {k: v for k, v in doc.items() if k != "mode"}
    stages = base.get("stage", [])
    # A malformed base ([stage] for [[stage]]) is the loader's to name; no stage to override.
    stage_names = [
        t["name"]
        for t in (stages if isinstance(stages, list) else [])
        if isinstance(t, dict) and isinstance(t.get("name"), str)
    ]
    read = [_read_mode(t, name, i, stage_names) for i, t in enumerate(tables, start=1)]
    seen: dict[str, int] = {}
    for i, (mode_name, _) in enumerate(read, start=1):
        if mode_name in seen:
            raise LineupError(
                f"{mode_name!r} is also mode {seen[mode_name]}'s name: expected unique mode names",
                file=name,
                stage=f"mode {i}",
                field="name",
            )
        seen[mode_name] = i
    unknown = sorted(wanted - set(seen))
    if unknown:
        known = ", ".join(repr(n) for n in seen)
        hint = difflib.get_close_matches(unknown[0], list(seen), n=1, cutoff=0.6)
        raise LineupError(
            f"no mode named {unknown[0]!r}: expected one of {known} or {ALL!r}"
            + (f" (did you mean {hint[0]!r}?)" if hint else ""),
            file=name,
            field="{@mode}",
        )
    # The base's own name, as from_dict would give it, stands in for a missing one: the
    # file part of a mode's messages carries the mode, not the title.
    default_title = " ".join(Path(name).stem.split()) or "lineup"
    out = []
    for mode_name, table in read:
        if wanted and mode_name not in wanted:
            continue
        merged, overrides = _merged(base, table, name, mode_name, default_title)
        lineup = from_dict(merged, name=f"{name}: mode {mode_name!r}", base_dir=base_dir, source=source)
        out.append(Mode(mode_name, replace(lineup, mode=mode_name), overrides))
    return tuple(out)


def _wanted(mode) -> set[str]:
    """The names asked for; empty for every mode."""
    if mode is None:
        return set()
    names = {mode} if isinstance(mode, str) else set(mode)
    return set() if ALL in names else names


def _read_mode(table: dict, file: str, index: int, stage_names: list[str]) -> tuple[str, dict]:
    """A ``[[mode]]`` table's name and its checked overrides (values still as in TOML)."""
    raw_name = table.get("name")
    where = f"mode {index} {raw_name!r}" if isinstance(raw_name, str) else f"mode {index}"
    f = Fields(table, file, where)
    mode_name = f.text("name")
    if mode_name is None or not mode_name.strip():
        raise f.error("name", "is required: expected a non-empty string")
    if len(mode_name) > 200:
        raise f.error("name", f"{mode_name[:40]!r}...: expected a name of at most 200 characters")
    if mode_name.strip().casefold() == ALL:
        raise f.error("name", f"{mode_name!r} is reserved (it selects every mode): expected another name")
    carriers = f.raw("carrier")
    if carriers is not None and not isinstance(carriers, list):
        raise f.error("carrier", f"{carriers!r}: expected an array of tables ([[mode.carrier]])")
    drive = f.quantity("drive", parse_power_dbm, within=CARRIER_POWER)
    for key in ("report", "analysis", "mask"):
        value = f.raw(key)
        if value is not None and not isinstance(value, dict):
            raise f.error(key, f"{value!r}: expected a table ([mode.{key}])")
    stages = f.raw("stage")
    if stages is not None:
        if not isinstance(stages, dict):
            raise f.error("stage", f'{stages!r}: expected tables by stage name ([mode.stage."NAME"])')
        for stage, over in stages.items():
            if stage not in stage_names:
                known = ", ".join(repr(n) for n in stage_names)
                hint = difflib.get_close_matches(stage, stage_names, n=1, cutoff=0.6)
                raise f.error(
                    "stage",
                    f"no stage named {stage!r} in the lineup: expected one of {known}"
                    + (f" (did you mean {hint[0]!r}?)" if hint else ""),
                )
            if not isinstance(over, dict):
                raise f.error("stage", f"{stage!r}: {over!r}: expected a table of the stage's keys")
            if "name" in over:
                raise f.error(
                    "stage", f"{stage!r}: a mode cannot rename a stage: expected no 'name' in the override"
                )
    f.finish()
    checked = {k: table[k] for k in MODE_KEYS if k in table and k != "name"}
    if drive is not None:
        checked["drive"] = drive
    return mode_name, checked


def _merged(
    base: dict, over: dict, file: str, mode_name: str, default_title: str
) -> tuple[dict, tuple[str, ...]]:
    """The mode's whole document, and what it overrides (:attr:`Mode.overrides`)."""
    doc = copy.deepcopy(base)
    overrides: list[str] = []
    head = doc.get("lineup", {})
    if isinstance(head, dict) and "name" not in head:
        doc["lineup"] = {**head, "name": default_title}
    if "carrier" in over:
        doc["carrier"] = copy.deepcopy(over["carrier"])
        overrides.append("carriers")
    if "drive" in over:
        doc["carrier"] = _driven(doc.get("carrier"), over["drive"])
        overrides.append(f"drive {over['drive']:+.2f} dBm")
    for key in ("report", "analysis"):
        if key in over:
            doc[key] = _merge(doc.get(key, {}), over[key])
            overrides.append(key)
    if "mask" in over:
        doc["mask"] = copy.deepcopy(over["mask"])
        overrides.append("mask")
    for stage, keys in over.get("stage", {}).items():
        tables = doc["stage"]
        k = next(i for i, t in enumerate(tables) if isinstance(t, dict) and t.get("name") == stage)
        if "kind" in keys:
            # Another kind (or another form of filter): the stage is the override alone.
            tables[k] = {"name": stage, **copy.deepcopy(keys)}
        else:
            tables[k] = _merge(tables[k], keys)
        overrides.append(f"stage {stage!r}")
    return doc, tuple(overrides)


def _merge(base, over):
    """``over`` merged into ``base``: tables key by key, anything else replaced."""
    if not (isinstance(base, dict) and isinstance(over, dict)):
        return copy.deepcopy(over)
    out = dict(base)
    for key, value in over.items():
        out[key] = _merge(base[key], value) if key in base else copy.deepcopy(value)
    return out


def _driven(carriers, drive_dbm: float):
    """The carriers with every power moved so that the strongest is at ``drive_dbm``.

    The strongest is the reference carrier (:func:`spurplan.model.lineup.reference_carrier_index`:
    highest power, ties to the higher frequency).  Carriers that do not read are left as
    they are: the loader then names the one at fault.
    """
    if not isinstance(carriers, list) or not carriers or not all(isinstance(c, dict) for c in carriers):
        return carriers
    try:
        read = [
            Carrier(freq_hz=parse_freq_hz(c.get("freq")), power_dbm=parse_power_dbm(c.get("power")))
            for c in carriers
        ]
    except SpurplanError:
        return carriers
    shift_db = drive_dbm - read[reference_carrier_index(read)].power_dbm
    # Written with 12 decimals (1e-12 dB, far below any figure's precision) in dBm, which
    # the loader reads and bounds as it would a power the user wrote.
    return [{**c, "power": f"{r.power_dbm + shift_db:.12f} dBm"} for c, r in zip(carriers, read, strict=True)]
