"""Reading rule sets and band lists (``bands/*.toml``, users' files, ``[mask]``).

File format (one rule set or band list per file)::

    [ruleset]
    name = "itu-sm329-cat-a"            # how lineups refer to it in [mask] use
    title = "..."
    source = "document, section, edition"
    examine = { start = "9 kHz", stop = "40 GHz", harmonic = 10 }   # optional
    limits_from = "us-fcc-15.209"        # band lists: rules that hold in each band

    [[rule]]
    name = "..."
    start = "30 MHz"
    stop = "1 GHz"                       # optional: no upper end
    limit = "-36 dBm" | "-60 dBc" | "54 dBuV/m @ 3 m" | "2400/F uV/m @ 300 m"
    # or: attenuation = "43 dB", cap = "70 dB"
    # or, near the carriers: domain = "out-of-band" with limit = "-30 dBc" | "-20 dBm", or
    # offsets = [["12.5 kHz", "-25 dBc"], ["25 kHz", "-35 dBc"]] (dBc against the offset
    # from the nearest carrier's centre, linear in dB between breakpoints); start optional
    rbw = "100 kHz"                      # optional: compare whole product power
    floor = "-20 dBm"; ceiling = "-16 dBm"          # optional, relative limits
    when_carrier = { start = "30 MHz", stop = "225 MHz" }
    when_power = { above = "25 W" } | { at_most = "25 W" }
    status = "published text" | "secondary source" | "derived" | "from memory"
    source = "..."                       # optional: defaults to the set's

    [[band]]
    name = "..."; start = "..."; stop = "..."; status = "..."
    limit = "..."; rbw = "..."           # optional: the band's own limit

    [[adjacent_channel]]                 # adjacent-channel power ratio (ACPR)
    name = "..."
    channel_bandwidth = "16 kHz"         # bandwidth of each adjacent channel
    offsets = ["25 kHz", "50 kHz"]       # channel centre from the carrier's centre; both sides
    limit = "-60 dBc"                    # channel power less the carrier's power; and/or
    absolute_limit = "-36 dBm"           # the channel power itself (both stated: both hold)
    carrier_bandwidth = "16 kHz"         # optional: the carrier's own channel (default: the
                                         # carrier's bandwidth, else channel_bandwidth)
    status = "..."; source = "..."       # as [[rule]]

The lineup's ``[mask]`` table takes ``use`` (names of shipped sets, or tables
``{ name = "...", limit = "...", rbw = "..." }`` that give a band list a limit),
``files`` (paths of users' own files, relative to the lineup), ``antenna_gain``,
``spurious_boundary``, and inline ``[[mask.rule]]`` / ``[[mask.band]]`` /
``[[mask.adjacent_channel]]`` tables.
"""

from __future__ import annotations

import itertools
import math
import re
from dataclasses import replace
from pathlib import Path

from spurplan.errors import LineupError, UnitError
from spurplan.fields import CARRIER_POWER, Fields, Within, _did_you_mean, existing_file, read_toml
from spurplan.io.resources import data_dir
from spurplan.model.masks import (
    DOMAINS,
    STATUSES,
    AdjacentChannelRule,
    Band,
    Examined,
    Mask,
    Rule,
    RuleKind,
    RuleSet,
    bandwidth_text,
)
from spurplan.units import (
    check_value_length,
    parse_dbc,
    parse_dbi,
    parse_freq_hz,
    parse_gain_db,
    parse_power_dbm,
    unit_hint,
)

LIMIT_FORMS = "a limit such as '-36 dBm', '-60 dBc', '54 dBuV/m @ 3 m' or '2400/F uV/m @ 300 m'"
_FIELD_UNITS = ("dBuV/m", "uV/m", "mV/m")
# Units case-exact as SI writes them ("mV/m", not "MV/m" megavolt per metre; distance in "m");
# the loose pattern only finds near misses to name them.
_FIELD_FORM = (
    r"^\s*(?P<k>[+-]?\d+(?:\.\d*)?(?:[eE][+-]?\d+)?)\s*(?P<per>/\s*[Ff]\s*)?(?P<unit>{units})\s*@\s*"
    r"(?P<d>\d+(?:\.\d*)?)\s*(?P<dunit>{metre})\s*$"
)
_FIELD = re.compile(_FIELD_FORM.format(units="dBuV/m|uV/m|mV/m", metre="m"))
_FIELD_LOOSE = re.compile(_FIELD_FORM.format(units="dBuV/m|uV/m|mV/m", metre="m"), re.IGNORECASE)

# Physical-sense ranges of limits (README, "Plausible values"; common practice, no
# source).  Published spurious limits lie between about -100 dBm and +20 dBm, relative
# ones between -100 and -20 dBc, field strengths between 20 and 100 dBuV/m.  The
# ranges are wider than that; beyond them a value is a slip, and a relative limit at
# or above the carrier, or an absolute one above +80 dBm (100 kW), limits nothing.
ABSOLUTE_LIMIT = Within("an absolute limit", -200.0, 80.0, "dBm")
RELATIVE_LIMIT = Within("a relative limit", -200.0, 0.0, "dBc", "a limit above the carrier is no limit")
FIELD_LIMIT = Within("a field-strength limit", -60.0, 160.0, "dBuV/m")
# K of a "K/F uV/m" form is the limit at F = 1 kHz, where the published forms are highest.
FIELD_NUMERATOR = Within("the numerator of a K/F field-strength limit", -60.0, 200.0, "dBuV/m")
DISTANCE = Within("a measurement distance", 0.1, 1e5, "m")
# Attenuation coefficients and caps of published rules run from 40 to 80 dB; 100 dB is
# the ratio parser's ceiling.
ATTENUATION = Within("an attenuation", 0.0, 100.0, "dB")
CAP = Within("an attenuation cap", 0.0, 100.0, "dB")
RBW = Within("a reference bandwidth", 1.0, 100e6, "Hz")
ANTENNA_GAIN = Within("an antenna gain", -50.0, 80.0, "dBi")


def shipped_names() -> list[str]:
    """Names of the rule sets and band lists installed with spurplan."""
    return sorted(p.stem for p in data_dir("bands").glob("*.toml"))


def shipped_path(name: str, where: Fields | None = None, key: str = "use") -> Path:
    """The installed file of a shipped rule set or band list.

    Parameters
    ----------
    name : str
        The set's name (its file name without ``.toml``).
    where : Fields or None, optional
        The table that names it, to locate the error; ``None`` for an unlocated one.
    key : str, optional
        The key in ``where`` that holds the name.

    Returns
    -------
    pathlib.Path
        ``bands/<name>.toml`` in spurplan's data folder.

    Raises
    ------
    LineupError
        No shipped set has that name (with a did-you-mean and the list of names).
    """
    names = shipped_names()
    if name not in names:
        msg = f"{name!r}: no such shipped rule set or band list{_did_you_mean(name, names)}; expected one of {', '.join(names)}"
        if where is None:
            raise LineupError(msg)
        raise where.error(key, msg)
    return data_dir("bands") / f"{name}.toml"


def load_ruleset(path: str | Path, resolve=None) -> RuleSet:
    """Read one rule set or band list file.

    ``resolve(name)`` returns another set for ``limits_from`` (default: shipped sets).

    Parameters
    ----------
    path : str or pathlib.Path
        The rule set or band list file (TOML).
    resolve : callable, optional
        ``resolve(name) -> RuleSet`` for the set named by ``limits_from``; ``None``
        loads the shipped set of that name.

    Returns
    -------
    RuleSet
        Its rules and bands; a band without a limit of its own takes the delegated
        rules, clipped to the band.

    Raises
    ------
    LineupError
        One line naming the file, table and field of the first problem.
    """
    path = Path(path)
    file = str(path)
    doc = read_toml(path, "a rule set file")
    top = Fields(doc, file, "")
    for key in ("ruleset", "rule", "band", "adjacent_channel"):
        top.raw(key)
    top.finish()
    head = Fields(doc.get("ruleset", {}), file, "[ruleset]")
    name = head.text("name", default=path.stem)
    title = head.text("title", default=name)
    source = head.text("source", default="")
    if not source:
        raise head.error("source", "is required: expected the document, section and edition")
    notes = head.text("notes", default="")
    examined = _examined(head)
    limits_from = head.text("limits_from")
    head.finish()
    rules = tuple(
        read_rule(Fields(t, file, f"rule {i}"), origin=name, default_source=source)
        for i, t in enumerate(_tables(doc, "rule", file), start=1)
    )
    delegated: tuple[Rule, ...] = ()
    if limits_from:
        other = (
            resolve(limits_from) if resolve else load_ruleset(shipped_path(limits_from, head, "limits_from"))
        )
        delegated = other.rules
    bands = tuple(
        read_band(Fields(t, file, f"band {i}"), origin=name, default_source=source, delegated=delegated)
        for i, t in enumerate(_tables(doc, "band", file), start=1)
    )
    adjacent = tuple(
        read_adjacent_channel(Fields(t, file, f"adjacent_channel {i}"), origin=name, default_source=source)
        for i, t in enumerate(_tables(doc, "adjacent_channel", file), start=1)
    )
    return RuleSet(
        name=name,
        title=title,
        source=source,
        rules=rules,
        bands=bands,
        examined=examined,
        notes=notes,
        adjacent_channels=adjacent,
    )


def _tables(doc, key, file):
    value = doc.get(key, [])
    if not isinstance(value, list):
        raise LineupError(f"'{key}' must be an array of tables ([[{key}]])", file=file)
    return value


def _examined(head: Fields) -> Examined:
    raw = head.raw("examine")
    if raw is None:
        return Examined()
    sub = Fields(raw, head.file, "[ruleset] examine")
    start = sub.quantity("start", parse_freq_hz) or 0.0
    stop = sub.quantity("stop", parse_freq_hz)
    harmonic = sub.integer("harmonic", default=0, low=1, high=100) or None
    sub.finish()
    if stop is not None and not stop > start:
        raise sub.error("stop", f"{sub.raw('stop')!r}: expected a stop frequency above start {start:g} Hz")
    return Examined(start_hz=start, stop_hz=math.inf if stop is None else stop, harmonic=harmonic)


def parse_limit(text) -> tuple[str, float, float | None, bool]:
    """Read a limit string: returns ``(kind, value, distance_m, per_khz)``.

    ``"100 uV/m @ 3 m"`` becomes ``("field", 40.0, 3.0, False)`` (dBuV/m = 20 log10(uV/m));
    ``"2400/F uV/m @ 300 m"`` becomes ``("field", 67.6, 300.0, True)``: 20 log10(2400), to
    be divided by F in kHz.
    """
    if not isinstance(text, str):
        raise UnitError(text, LIMIT_FORMS)
    check_value_length(text, LIMIT_FORMS)
    m = _FIELD.match(text)
    if m is None and (loose := _FIELD_LOOSE.match(text)):
        hint = unit_hint(loose["unit"], _FIELD_UNITS) or unit_hint(loose["dunit"], ("m",))
        raise UnitError(text, LIMIT_FORMS, hint=hint)
    if m:
        k, unit, distance = float(m["k"]), m["unit"], float(m["d"])
        if not (math.isfinite(k) and math.isfinite(distance)) or abs(k) > 1e9:
            raise UnitError(text, f"{LIMIT_FORMS} (finite, plausible numbers)")
        if distance <= 0:
            raise UnitError(text, f"{LIMIT_FORMS} (a distance > 0 m)")
        per = m["per"] is not None
        if unit == "dBuV/m":
            if per:
                raise UnitError(text, LIMIT_FORMS)
            return "field", k, distance, False
        uv = k * (1e3 if unit == "mV/m" else 1.0)
        if uv <= 0:
            raise UnitError(text, f"{LIMIT_FORMS} (a field strength > 0)")
        return "field", 20.0 * math.log10(uv), distance, per
    # Routing only: the parsers below read the unit case-exactly and name a near miss.
    folded = text.strip().casefold()
    if "v/m" in folded:
        raise UnitError(text, f"{LIMIT_FORMS} (a field strength needs '@ <distance> m')")
    parse, kind = (parse_dbc, "relative") if folded.endswith("dbc") else (parse_power_dbm, "absolute")
    try:
        return kind, parse(text), None, False
    except UnitError as exc:
        raise UnitError(text, LIMIT_FORMS, hint=exc.hint) from None


def read_rule(f: Fields, origin: str, default_source: str, status_required: bool = True) -> Rule:
    """One ``[[rule]]`` table (a rule file's, or ``[[mask.rule]]`` of a lineup).

    Parameters
    ----------
    f : Fields
        The table.
    origin : str
        Name of the set the rule belongs to (``"lineup"`` for a lineup's own rules).
    default_source : str
        The source cited when the rule gives none (the set's ``source``).
    status_required : bool, optional
        Whether ``status`` must be given; when not, an absent one is ``"user"``.

    Returns
    -------
    Rule
        Frequencies in Hz (an absent ``stop`` is infinite), limits in dBm, dBc, dB or
        dBuV/m as their kind says, ``rbw`` in Hz.

    Raises
    ------
    LineupError
        A missing, unknown, malformed or implausible key.
    """
    name = f.text("name", default=f.where)
    domain = f.text("domain", default="spurious", choices=DOMAINS)
    oob = domain == "out-of-band"
    # An out-of-band rule follows the carriers wherever they are: its range may be open.
    start = f.quantity("start", parse_freq_hz, required=not oob)
    start = 0.0 if start is None else start
    stop = f.quantity("stop", parse_freq_hz)
    stop = math.inf if stop is None else stop
    if stop <= start:
        raise f.error("stop", f"{f.raw('stop')!r}: expected a stop frequency above start {f.raw('start')!r}")
    has_limit, has_att, has_offsets = f.has("limit"), f.has("attenuation"), f.has("offsets")
    if has_limit + has_att + has_offsets != 1:
        raise f.error("limit", "expected exactly one of 'limit', 'attenuation' or 'offsets'")
    cap = distance = None
    per_khz = of_bandwidth = False
    offsets: tuple[tuple[float, float], ...] = ()
    if has_offsets:
        if not oob:
            raise f.error("offsets", 'apply to out-of-band rules only: expected domain = "out-of-band"')
        offsets, of_bandwidth = _offsets(f)
        kind: RuleKind = "relative"
        value = offsets[0][1]
    elif has_limit:
        kind, value, distance, per_khz = read_limit(f)
    else:
        kind, value = "attenuation", f.quantity("attenuation", parse_gain_db)
    f.raw("limit"), f.raw("attenuation"), f.raw("offsets")
    if oob and kind not in ("absolute", "relative"):
        raise f.error("limit", "an out-of-band rule takes a limit in dBm or dBc, or 'offsets'")
    cap = f.quantity("cap", parse_gain_db)
    if cap is not None and kind != "attenuation":
        raise f.error("cap", "applies to 'attenuation' rules only")
    rbw = _rbw(f)
    floor = f.quantity("floor", parse_power_dbm, within=ABSOLUTE_LIMIT)
    ceiling = f.quantity("ceiling", parse_power_dbm, within=ABSOLUTE_LIMIT)
    if (floor is not None or ceiling is not None) and kind != "relative":
        raise f.error("floor", "'floor' and 'ceiling' apply to relative (dBc) limits only")
    if floor is not None and ceiling is not None and floor > ceiling:
        raise f.error(
            "floor", f"{f.raw('floor')!r}: expected a floor at or below the ceiling {f.raw('ceiling')!r}"
        )
    if kind == "attenuation" and value <= 0:
        raise f.error("attenuation", f"{f.raw('attenuation')!r}: expected an attenuation > 0 dB")
    if kind == "attenuation":
        f.require_within("attenuation", value, ATTENUATION)
    if cap is not None and cap <= 0:
        raise f.error("cap", f"{f.raw('cap')!r}: expected a cap > 0 dB")
    if cap is not None:
        f.require_within("cap", cap, CAP)
    when_carrier = _range(f, "when_carrier", ("start", "stop"), parse_freq_hz)
    when_power = _range(f, "when_power", ("above", "at_most"), parse_power_dbm, CARRIER_POWER)
    status = _status(f, required=status_required)
    source = f.text("source", default=default_source) or default_source
    f.finish()
    return Rule(
        name=name,
        start_hz=start,
        stop_hz=stop,
        kind=kind,
        value=value,
        rbw_hz=rbw,
        cap_db=cap,
        distance_m=distance,
        per_khz=per_khz,
        floor_dbm=floor,
        ceiling_dbm=ceiling,
        when_carrier_hz=when_carrier,
        when_power_dbm=when_power,
        source=source,
        status=status,
        origin=origin,
        domain=domain,
        offsets=offsets,
        offsets_of_bandwidth=of_bandwidth,
    )


# Breakpoint offsets of an out-of-band rule lie within the out-of-band domain of some
# carrier: 250 % of a necessary bandwidth, which the carrier range bounds (common
# practice, no source).
OFFSET = Within("an offset from the carrier", 0.0, 1e11, "Hz")
# In per cent of the necessary bandwidth the domain ends at the spurious boundary (250 %
# by default); 1000 % leaves room for a wider boundary.
OFFSET_PERCENT = Within("an offset from the carrier", 0.0, 1000.0, "%")
MAX_OFFSETS = 64


def _offset(text: str) -> tuple[float, bool]:
    """An offset in Hz (``"12.5 kHz"``), or a fraction of the bandwidth (``"50 %"``)."""
    stripped = text.strip()
    if stripped.endswith("%"):
        try:
            percent = float(stripped[:-1])
        except ValueError:
            raise UnitError(
                text, "an offset such as '12.5 kHz' or '50 %' (of the necessary bandwidth)"
            ) from None
        return percent, True
    return parse_freq_hz(text), False


def _offsets(f: Fields) -> tuple[tuple[tuple[float, float], ...], bool]:
    """``offsets = [["12.5 kHz", "-25 dBc"], ...]`` (or ``"50 %"`` offsets): at least two,
    offsets increasing, all in Hz or all in per cent of the necessary bandwidth."""
    raw = f.raw("offsets")
    shape = (
        'expected a list of [offset, limit] pairs such as [["12.5 kHz", "-25 dBc"], ["25 kHz", "-35 dBc"]]'
    )
    if not isinstance(raw, list) or not 2 <= len(raw) <= MAX_OFFSETS:
        raise f.error("offsets", f"{str(raw)[:120]}: {shape} (2 to {MAX_OFFSETS} of them)")
    out: list[tuple[float, float]] = []
    kinds: list[bool] = []
    for pair in raw:
        if not isinstance(pair, list) or len(pair) != 2 or not all(isinstance(x, str) for x in pair):
            raise f.error("offsets", f"{str(pair)[:120]}: {shape}")
        try:
            (offset, percent), dbc = _offset(pair[0]), parse_dbc(pair[1])
        except UnitError as exc:
            raise f.error("offsets", str(exc)) from None
        if out and percent != kinds[0]:
            raise f.error("offsets", f"{pair[0]!r}: expected every offset in Hz or every one in %, not both")
        kinds.append(percent)
        within = OFFSET_PERCENT if percent else OFFSET
        if not (math.isfinite(offset) and offset in within):
            raise f.error("offsets", f"{pair[0]!r}: {within.expected()}")
        if dbc not in RELATIVE_LIMIT:
            raise f.error("offsets", f"{pair[1]!r}: {RELATIVE_LIMIT.expected()}")
        value = offset / 100.0 if percent else offset
        if out and value <= out[-1][0]:
            raise f.error("offsets", f"{pair[0]!r}: expected offsets that increase")
        out.append((value, dbc))
    return tuple(out), kinds[0]


def read_limit(f: Fields, *, required: bool = False):
    """``limit`` of a rule, band or ``[mask] use`` entry, within the range of its kind.

    Parameters
    ----------
    f : Fields
        The table holding ``limit``.
    required : bool, optional
        Raise a located error when ``limit`` is absent.

    Returns
    -------
    tuple or None
        ``(kind, value, distance_m, per_khz)`` as :func:`parse_limit` (value in dBm,
        dBc or dBuV/m by kind, distance in m), or ``None`` when the key is absent and not
        ``required``.

    Raises
    ------
    LineupError
        The limit does not parse or its value (or distance) is outside the plausible
        range of its kind.
    """
    parsed = f.quantity("limit", parse_limit, required=required)
    if parsed is None:
        return None
    kind, value, distance, per_khz = parsed
    # parse_limit() returns one of these three kinds.
    if kind == "field":
        within = FIELD_NUMERATOR if per_khz else FIELD_LIMIT
        f.require_within("limit", distance, DISTANCE)
    else:
        within = ABSOLUTE_LIMIT if kind == "absolute" else RELATIVE_LIMIT
    f.require_within("limit", value, within)
    return parsed


def _rbw(f: Fields) -> float | None:
    """``rbw`` (Hz) within :data:`RBW`, or ``None``."""
    rbw = f.quantity("rbw", parse_freq_hz)
    if rbw is not None and rbw <= 0:
        raise f.error("rbw", f"{f.raw('rbw')!r}: expected a reference bandwidth > 0 Hz")
    if rbw is not None:
        f.require_within("rbw", rbw, RBW)
    return rbw


def _range(f: Fields, key: str, ends: tuple[str, str], parse, within: Within | None = None):
    raw = f.raw(key)
    if raw is None:
        return None
    sub = Fields(raw, f.file, f"{f.where} {key}")
    lo = sub.quantity(ends[0], parse, within=within)
    hi = sub.quantity(ends[1], parse, within=within)
    sub.finish()
    if lo is None and hi is None:
        raise f.error(key, f"expected '{ends[0]}' and/or '{ends[1]}'")
    if lo is not None and hi is not None and lo >= hi:
        raise f.error(key, f"{raw!r}: expected '{ends[0]}' below '{ends[1]}'")
    return (-math.inf if lo is None else lo, math.inf if hi is None else hi)


def _status(f: Fields, required: bool) -> str:
    status = f.text("status", choices=STATUSES)
    if status is None:
        if required:
            raise f.error("status", f"is required: expected one of {', '.join(STATUSES[:4])}")
        return "user"
    return status


def read_band(
    f: Fields, origin: str, default_source: str, delegated=(), status_required: bool = True, limit=None
) -> Band:
    """One ``[[band]]`` table; its rules are its own limit, else the delegated rules.

    Parameters
    ----------
    f : Fields
        The table.
    origin : str
        Name of the set the band belongs to.
    default_source : str
        The source cited when the band gives none.
    delegated : tuple of Rule, optional
        The rules of the ``limits_from`` set; those overlapping the band are clipped to
        it when the band has no limit of its own.
    status_required : bool, optional
        Whether ``status`` must be given; when not, an absent one is ``"user"``.
    limit : tuple or None, optional
        A limit ``(kind, value, distance_m, per_khz, rbw_hz)`` to use when the table
        gives none (units as :func:`read_limit`, ``rbw_hz`` in Hz or ``None``).

    Returns
    -------
    Band
        Start and stop in Hz (an absent ``stop`` is infinite) and its rules.

    Raises
    ------
    LineupError
        A missing, unknown, malformed or implausible key.
    """
    name = f.text("name")
    if not name:
        raise f.error("name", "is required: expected the band's name")
    start = f.quantity("start", parse_freq_hz, required=True)
    stop = f.quantity("stop", parse_freq_hz)
    stop = math.inf if stop is None else stop
    if stop <= start:
        raise f.error("stop", f"{f.raw('stop')!r}: expected a stop frequency above start {f.raw('start')!r}")
    status = _status(f, required=status_required)
    source = f.text("source", default=default_source) or default_source
    own = limit
    if f.has("limit"):
        kind, value, distance, per_khz = read_limit(f)
        rbw = _rbw(f)
        own = (kind, value, distance, per_khz, rbw)
    elif f.has("rbw"):
        raise f.error("rbw", "applies together with a 'limit': expected both or neither")
    f.raw("limit"), f.raw("rbw")
    f.finish()
    rules: tuple[Rule, ...] = ()
    if own is not None:
        kind, value, distance, per_khz, rbw = own
        rules = (
            Rule(
                name=f"{name} (protected)",
                start_hz=start,
                stop_hz=stop,
                kind=kind,
                value=value,
                rbw_hz=rbw,
                distance_m=distance,
                per_khz=per_khz,
                source=source,
                status=status,
                origin=origin,
            ),
        )
    elif delegated:
        rules = tuple(
            _clip(r, start, stop, name) for r in delegated if r.start_hz <= stop and r.stop_hz >= start
        )
    return Band(
        name=name, start_hz=start, stop_hz=stop, rules=rules, source=source, status=status, origin=origin
    )


# Channel bandwidths of ACPR limits run from a few kHz (land mobile) to some 100 MHz
# (wideband cellular carriers); 1 Hz to 10 GHz is where a value stops being a slip
# (common practice, no source).
CHANNEL_BANDWIDTH = Within("a channel bandwidth", 1.0, 10e9, "Hz")
# Adjacent and alternate channels, and a few beyond: a handful of offsets per rule.
MAX_CHANNEL_OFFSETS = 16


def read_adjacent_channel(
    f: Fields, origin: str, default_source: str, status_required: bool = True
) -> AdjacentChannelRule:
    """One ``[[adjacent_channel]]`` table (a rule file's, or ``[[mask.adjacent_channel]]``).

    Parameters
    ----------
    f : Fields
        The table.
    origin : str
        Name of the set the rule belongs to (``"lineup"`` for a lineup's own rules).
    default_source : str
        The source cited when the rule gives none (the set's ``source``).
    status_required : bool, optional
        Whether ``status`` must be given; when not, an absent one is ``"user"``.

    Returns
    -------
    AdjacentChannelRule
        Bandwidths and offsets in Hz, ``limit`` in dBc, ``absolute_limit`` in dBm.

    Raises
    ------
    LineupError
        A missing, unknown, malformed or implausible key; offsets that do not increase, or
        a channel that reaches the carrier's centre (or its own channel, when
        ``carrier_bandwidth`` is stated).
    """
    name = f.text("name", default=f.where)
    channel = f.quantity("channel_bandwidth", parse_freq_hz, required=True)
    if channel <= 0:
        raise f.error(
            "channel_bandwidth", f"{f.raw('channel_bandwidth')!r}: expected a channel bandwidth > 0 Hz"
        )
    f.require_within("channel_bandwidth", channel, CHANNEL_BANDWIDTH)
    main = f.quantity("carrier_bandwidth", parse_freq_hz)
    if main is not None and main <= 0:
        raise f.error(
            "carrier_bandwidth", f"{f.raw('carrier_bandwidth')!r}: expected a carrier bandwidth > 0 Hz"
        )
    if main is not None:
        f.require_within("carrier_bandwidth", main, replace(CHANNEL_BANDWIDTH, what="a carrier bandwidth"))
    offsets = _channel_offsets(f, channel, main)
    limit = f.quantity("limit", parse_dbc, within=RELATIVE_LIMIT)
    absolute = f.quantity("absolute_limit", parse_power_dbm, within=ABSOLUTE_LIMIT)
    if limit is None and absolute is None:
        raise f.error(
            "limit",
            "is required: expected a limit such as '-60 dBc' and/or an absolute_limit such as '-36 dBm'",
        )
    status = _status(f, required=status_required)
    source = f.text("source", default=default_source) or default_source
    f.finish()
    return AdjacentChannelRule(
        name=name,
        channel_bandwidth_hz=channel,
        offsets_hz=offsets,
        limit_dbc=limit,
        absolute_limit_dbm=absolute,
        carrier_bandwidth_hz=main,
        source=source,
        status=status,
        origin=origin,
    )


def _channel_offsets(f: Fields, channel_hz: float, main_hz: float | None) -> tuple[float, ...]:
    """``offsets = ["25 kHz", "50 kHz"]``: 1 to :data:`MAX_CHANNEL_OFFSETS` offsets in Hz,
    increasing, each far enough out that its channel stays clear of the carrier's centre
    (and of the carrier's own channel of ``main_hz``, when stated)."""
    raw = f.raw("offsets")
    shape = 'expected a list of channel offsets such as ["25 kHz", "50 kHz"]'
    if raw is None:
        raise f.error("offsets", f"is required: {shape}")
    if not isinstance(raw, list) or not 1 <= len(raw) <= MAX_CHANNEL_OFFSETS:
        raise f.error("offsets", f"{str(raw)[:120]}: {shape} (1 to {MAX_CHANNEL_OFFSETS} of them)")
    # The channel [o - B/2, o + B/2] must not reach the carrier's own channel [-W/2, W/2]
    # (W: carrier_bandwidth, or 0 when the carrier's is not known yet): o >= (B + W) / 2.
    clear = (channel_hz + (main_hz or 0.0)) / 2.0
    out: list[float] = []
    for item in raw:
        try:
            offset = parse_freq_hz(item)
        except UnitError as exc:
            raise f.error("offsets", str(exc)) from None
        if offset not in OFFSET:
            raise f.error("offsets", f"{item!r}: {OFFSET.expected()}")
        if main_hz is None and not offset > clear:
            raise f.error(
                "offsets",
                f"{item!r}: expected an offset above half the channel bandwidth ({bandwidth_text(clear)}), "
                "so that the channel does not reach the carrier's centre",
            )
        if main_hz is not None and offset < clear:
            raise f.error(
                "offsets",
                f"{item!r}: expected an offset of at least (channel_bandwidth + carrier_bandwidth) / 2 "
                f"= {bandwidth_text(clear)}, so that the channel does not overlap the carrier's own",
            )
        if out and offset <= out[-1]:
            raise f.error("offsets", f"{item!r}: expected offsets that increase")
        out.append(offset)
    return tuple(out)


def _clip(rule: Rule, start: float, stop: float, band: str) -> Rule:
    return replace(
        rule,
        start_hz=max(rule.start_hz, start),
        stop_hz=min(rule.stop_hz, stop),
        name=f"{rule.name} in {band}",
    )


def read_mask(table, file: str, base_dir: Path) -> Mask:
    """The lineup's ``[mask]`` table.

    Parameters
    ----------
    table : dict
        The parsed ``[mask]`` table.
    file : str
        The lineup file's name, for messages.
    base_dir : pathlib.Path
        Folder that the names in ``files`` are relative to.

    Returns
    -------
    Mask
        The rule sets in order (``use``, then ``files``, then the inline rules and
        bands), the antenna gain as (frequency Hz, gain dBi) pairs, and the spurious boundary (in
        necessary bandwidths).

    Raises
    ------
    LineupError
        A bad entry, or field-strength limits without an ``antenna_gain``.
    """
    f = Fields(table, file, "[mask]")
    sets: list[RuleSet] = []
    uses = f.raw("use", [])
    if not isinstance(uses, list):
        raise f.error("use", f"{uses!r}: expected a list of rule-set names")
    for i, entry in enumerate(uses, start=1):
        sets.append(_use(entry, f, i))
    files = f.raw("files", [])
    if not isinstance(files, list) or not all(isinstance(p, str) for p in files):
        raise f.error("files", f"{files!r}: expected a list of file names")
    for rel in files:
        sets.append(load_ruleset(existing_file(base_dir, rel, f, "files")))
    # Rules before bands: a file with errors in both reports the rule's first.
    inline_rules = tuple(
        read_rule(
            Fields(t, file, f"[[mask.rule]] {i}"),
            origin="lineup",
            default_source="lineup file",
            status_required=False,
        )
        for i, t in enumerate(_list(f, "rule"), start=1)
    )
    inline_bands = tuple(
        read_band(
            Fields(t, file, f"[[mask.band]] {i}"),
            origin="lineup",
            default_source="lineup file",
            status_required=False,
        )
        for i, t in enumerate(_list(f, "band"), start=1)
    )
    inline_adjacent = tuple(
        read_adjacent_channel(
            Fields(t, file, f"[[mask.adjacent_channel]] {i}"),
            origin="lineup",
            default_source="lineup file",
            status_required=False,
        )
        for i, t in enumerate(_list(f, "adjacent_channel"), start=1)
    )
    if inline_rules or inline_bands or inline_adjacent:
        sets.append(
            RuleSet(
                name="lineup",
                title="rules in the lineup file",
                source=file,
                rules=inline_rules,
                bands=inline_bands,
                adjacent_channels=inline_adjacent,
            )
        )
    gain = _antenna_gain(f)
    boundary = f.raw("spurious_boundary", 2.5)
    if isinstance(boundary, bool) or not isinstance(boundary, (int, float)) or not 0 <= boundary <= 100:
        raise f.error(
            "spurious_boundary", f"{boundary!r}: expected a number of necessary bandwidths from 0 to 100"
        )
    f.finish()
    mask = Mask(sets=tuple(sets), antenna_gain=gain, spurious_boundary=float(boundary))
    if mask.needs_antenna_gain and not gain:
        names = sorted({r.origin for s in sets for r in s.rules if r.kind == "field"})
        raise f.error(
            "antenna_gain",
            f"is required: {', '.join(names) or 'a band list'} gives field-strength limits (expected e.g. '2.15 dBi')",
        )
    return mask


def _list(f: Fields, key: str) -> list:
    value = f.raw(key, [])
    if not isinstance(value, list):
        raise f.error(key, f"expected an array of tables ([[mask.{key}]])")
    return value


def _use(entry, f: Fields, index: int) -> RuleSet:
    if isinstance(entry, str):
        return load_ruleset(shipped_path(entry, f))
    if not isinstance(entry, dict):
        raise f.error("use", f"{entry!r}: expected a rule-set name or a table {{ name = ..., limit = ... }}")
    label = entry.get("name") if isinstance(entry.get("name"), str) else None
    sub = Fields(entry, f.file, f"[mask] use {index}" + (f" {label!r}" if label else ""))
    name = sub.text("name")
    if not name:
        raise sub.error("name", "is required: expected a shipped band list's name")
    kind, value, distance, per_khz = read_limit(sub, required=True)
    rbw = _rbw(sub)
    sub.finish()
    base = load_ruleset(shipped_path(name, f))
    if not base.bands:
        raise sub.error(
            "limit", f"{name!r} is a rule set with limits of its own: a limit applies to band lists only"
        )
    limit = (kind, value, distance, per_khz, rbw)
    bands = tuple(_with_limit(b, limit) for b in base.bands)
    return replace(base, bands=bands)


def _with_limit(band: Band, limit) -> Band:
    kind, value, distance, per_khz, rbw = limit
    rule = Rule(
        name=f"{band.name} (protected)",
        start_hz=band.start_hz,
        stop_hz=band.stop_hz,
        kind=kind,
        value=value,
        rbw_hz=rbw,
        distance_m=distance,
        per_khz=per_khz,
        source="limit given in the lineup's [mask] use",
        status="user",
        origin="lineup",
    )
    return replace(band, rules=(rule,))


def _antenna_gain(f: Fields) -> tuple[tuple[float, float], ...]:
    raw = f.raw("antenna_gain")
    if raw is None:
        return ()
    if isinstance(raw, str):
        return ((0.0, _dbi(raw, f)),)
    if not isinstance(raw, list) or not raw:
        raise f.error("antenna_gain", f"{raw!r}: expected '2.15 dBi' or a table [['100 MHz', '0 dBi'], ...]")
    points = []
    for item in raw:
        if not (isinstance(item, list) and len(item) == 2):
            raise f.error("antenna_gain", f"{item!r}: expected a [frequency, gain] pair")
        try:
            points.append((parse_freq_hz(item[0]), _dbi(item[1], f)))
        except UnitError as exc:
            raise f.error("antenna_gain", str(exc)) from None
    points.sort()
    if any(b[0] <= a[0] for a, b in itertools.pairwise(points)):
        raise f.error("antenna_gain", "expected strictly increasing frequencies")
    return tuple(points)


def _dbi(text, f: Fields) -> float:
    try:
        gain = parse_dbi(text)
    except UnitError as exc:
        raise f.error(
            "antenna_gain", f"{text!r}: expected a gain in dBi, e.g. '2.15 dBi'{exc.hint}"
        ) from None
    if gain not in ANTENNA_GAIN:
        raise f.error("antenna_gain", f"{text!r}: {ANTENNA_GAIN.expected()}")
    return gain
