"""Quantities with units: parsing of lineup strings and power/voltage conversions.

Lineup files write every physical value as a string with its unit ("455.0125 MHz",
"-8 dBm", "16 dB", "-28 dBc @ +20 dBm", "50 ohm").  The parsers here return plain
floats in one fixed unit each, named in the function (``parse_freq_hz`` returns Hz,
``parse_power_dbm`` returns dBm).  A value without its unit is an error that says
which unit is expected: in a compliance tool a bare number is a guess.

Voltages are peak amplitudes of a sinusoid across the system impedance, so that
``P = V_peak**2 / (2 R)`` (common practice, no source).

Unit symbols are read case-exactly, as SI writes them (BIPM, The International System of
Units, 9th edition 2019, table of SI prefixes: "M" mega 1e6, "m" milli 1e-3, "k" kilo;
from memory): "MHz" is megahertz and "mHz" millihertz, "mW" milliwatt and "MW" megawatt.
A spelling with the right letters in the wrong case ("mhz", "DBM", "Kohm") is a
:class:`~spurplan.errors.UnitError` with a did-you-mean, never a guess.  Two legal SI
spellings are refused because in a lineup they are far likelier one shifted key than
meant: "mHz" (millihertz; no radio carrier) and "MW" (megawatt, 90 dB above "mW").
Impedances take the SI symbol (Greek capital omega or the ohm sign) or the unit's
name, "ohm"/"ohms", also capitalised ("Ohm", as in German and on many datasheets),
with "k" for kilo ("kohm", "kOhm", "k\u03a9").
"""

from __future__ import annotations

import math
import re

import numpy as np

from spurplan.errors import UnitError
from spurplan.fields import _did_you_mean

# Matched against the stripped text with fullmatch.  Every quantifier here has one way to
# match a given text (the digits before a point, the spaces before the unit, the unit to
# the end), so the time is linear in the length: the earlier form, with a lazy unit and
# trailing spaces both able to take the same run of spaces, backtracked quadratically
# (20 s for 64,000 characters).
_NUMBER = r"[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?"
_QUANTITY = re.compile(rf"({_NUMBER})\s*([^\s\d+-].*)?", re.DOTALL)
# The longest value string read ("-28 dBc @ +20 dBm" is 17 characters); a longer one is
# refused before any pattern sees it.
MAX_VALUE_CHARS = 200

# Accepted spellings, case-exact (SI symbols; BIPM SI Brochure, 9th edition 2019).
_FREQ_SCALE = {"Hz": 1.0, "kHz": 1e3, "MHz": 1e6, "GHz": 1e9, "THz": 1e12}
_POWER_OFFSET_DB = {"dBm": 0.0, "dBW": 30.0}
_POWER_SCALE_W = {"W": 1.0, "mW": 1e-3, "uW": 1e-6, "\u00b5W": 1e-6, "\u03bcW": 1e-6, "kW": 1e3}
_OHM_SPELLINGS = ("ohm", "Ohm", "ohms", "Ohms", "\u03a9", "\u2126")  # Greek capital omega, ohm sign
_IMPEDANCE_SCALE = {u: 1.0 for u in _OHM_SPELLINGS} | {"k" + u: 1e3 for u in _OHM_SPELLINGS}
_ANGLE_SCALE = {"deg": math.pi / 180.0, "\u00b0": math.pi / 180.0, "rad": 1.0}

# Legal SI spellings refused on purpose, with the unit they are most likely a slip for.
_REFUSED = {
    "mHz": ("mHz is millihertz, not a radio frequency", "MHz"),
    "MW": ("MW is megawatt, 90 dB above mW: one shifted key apart, so spurplan does not guess", "mW"),
}

# Plausible ranges: values outside are typing mistakes (or overflow float64 once
# converted), not transmitters.
MAX_FREQ_HZ = 1e12
POWER_RANGE_DBM = (-300.0, 100.0)
GAIN_RANGE_DB = (-300.0, 100.0)
IMPEDANCE_RANGE_OHM = (1e-3, 1e6)

FREQ_UNITS = "a frequency with its unit (Hz, kHz, MHz, GHz or THz), e.g. '455 MHz'"
POWER_UNITS = "a power with its unit (dBm, dBW, W, mW, uW or kW), e.g. '-8 dBm'"
GAIN_UNITS = "a ratio in dB, e.g. '16 dB'"
DBC_UNITS = "a level relative to the carrier in dBc, e.g. '-40 dBc'"
DBI_UNITS = "an antenna gain in dBi, e.g. '2.15 dBi'"
DBC_AT_UNITS = "a level in dBc at an output power, e.g. '-28 dBc @ +20 dBm'"
IMPEDANCE_UNITS = "an impedance in ohm, Ohm, \u03a9 or kohm, e.g. '50 ohm'"
ANGLE_UNITS = "an angle in deg or rad, e.g. '90 deg'"


def _split(text: object, expected: str) -> tuple[float, str]:
    """Split ``"<number> <unit>"`` into a finite float and the unit string (may be '')."""
    if isinstance(text, bool) or not isinstance(text, (str, int, float)):
        raise UnitError(text, expected)
    if not isinstance(text, str):
        # A TOML number: legal syntax, but it carries no unit.
        raise UnitError(text, f"{expected} (a bare number has no unit)")
    check_value_length(text, expected)
    match = _QUANTITY.fullmatch(text.strip())
    if match is None:
        if text.strip().lower().lstrip("+-").startswith(("nan", "inf")):
            raise UnitError(text, f"{expected} (a finite number)")
        raise UnitError(text, expected)
    value = float(match.group(1))
    if not math.isfinite(value):
        raise UnitError(text, f"{expected} (a finite number)")
    return value, (match.group(2) or "").strip()


def check_value_length(text: str, expected: str) -> None:
    """Refuse a value string longer than :data:`MAX_VALUE_CHARS`, quoting only its start.

    Parameters
    ----------
    text : str
        The value string as read.
    expected : str
        What the field expects, for the error message (e.g. ``"a frequency"``).

    Raises
    ------
    UnitError
        When ``text`` has more than :data:`MAX_VALUE_CHARS` characters.
    """
    if len(text) > MAX_VALUE_CHARS:
        raise UnitError(
            f"{text[:40]}...",
            f"{expected} (a value of at most {MAX_VALUE_CHARS} characters, not {len(text)})",
        )


def _require_unit(text: object, unit: str, expected: str) -> None:
    if not unit:
        raise UnitError(text, f"{expected} (the unit is missing)")


def unit_hint(unit: str, accepted) -> str:
    """A did-you-mean for a unit that is one of ``accepted`` but for letter case.

    Returns ``" (did you mean 'MHz'?)"`` for ``"mhz"``, a note and the likely unit for
    the refused SI spellings (``"mHz"``, ``"MW"``), and ``""`` otherwise (an accepted
    unit included).  Only case is forgiven in the suggestion: units one letter apart
    ("rad", "grad") differ in meaning.

    Parameters
    ----------
    unit : str
        The unit as written.
    accepted : collection of str
        The units the field accepts (a dict's keys will do).

    Returns
    -------
    str
        The hint, starting with a space, or ``""``.
    """
    if unit in accepted:
        return ""
    note, likely = _REFUSED.get(unit, ("", ""))
    if likely in accepted:
        return f" ({note}; did you mean '{likely}'?)"
    return _did_you_mean(unit, accepted, fold_case=True)


def _scale(text: object, unit: str, table: dict[str, float], expected: str) -> float:
    """``table[unit]``, or a UnitError quoting ``text`` with a did-you-mean."""
    scale = table.get(unit)
    if scale is None:
        raise UnitError(text, expected, hint=unit_hint(unit, table))
    return scale


def parse_freq_hz(text: object) -> float:
    """Read a frequency such as ``"455.0125 MHz"``; returns Hz (>= 0)."""
    value, unit = _split(text, FREQ_UNITS)
    _require_unit(text, unit, FREQ_UNITS)
    scale = _scale(text, unit, _FREQ_SCALE, FREQ_UNITS)
    if value < 0:
        raise UnitError(text, f"{FREQ_UNITS} (not negative)")
    hz = value * scale
    if not hz <= MAX_FREQ_HZ:
        raise UnitError(text, f"{FREQ_UNITS} (at most {MAX_FREQ_HZ / 1e9:g} GHz)")
    return hz


def parse_power_dbm(text: object) -> float:
    """Read a power such as ``"-8 dBm"``, ``"2 W"`` or ``"+33 dBW"``; returns dBm.

    dBm = 10 log10(P / 1 mW) and dBW = dBm - 30 (definitions).  ``"2 MW"`` (megawatt)
    is refused, never read as mW.
    """
    value, unit = _split(text, POWER_UNITS)
    _require_unit(text, unit, POWER_UNITS)
    lo, hi = POWER_RANGE_DBM
    in_range = f"{POWER_UNITS} (from {lo:g} to {hi:+g} dBm)"
    if unit in _POWER_OFFSET_DB:
        dbm = value + _POWER_OFFSET_DB[unit]
    else:
        if unit == "MW" and value > 0:
            _refuse_megawatt(text, value, in_range)
        # Every power unit is offered for the did-you-mean ("dbm" -> "dBm").
        watts = _scale(text, unit, _POWER_OFFSET_DB | _POWER_SCALE_W, POWER_UNITS)
        if value <= 0:
            raise UnitError(text, f"{POWER_UNITS} (a linear power must be > 0)")
        dbm = float(w_to_dbm(value * watts))
    if not lo <= dbm <= hi:
        raise UnitError(text, in_range)
    return dbm


def _refuse_megawatt(text: object, value: float, in_range: str) -> None:
    """Refuse ``value`` MW, showing both readings: 1 MW = +90 dBm, 1 mW = 0 dBm (definition)."""
    mega_dbm = float(w_to_dbm(value * 1e6))
    milli_dbm = float(w_to_dbm(value * 1e-3))
    if not mega_dbm <= POWER_RANGE_DBM[1]:
        raise UnitError(text, in_range, hint=" (MW is megawatt; did you mean 'mW'?)")
    raise UnitError(
        text,
        POWER_UNITS,
        hint=f" (MW is megawatt: {value:g} MW would be {mega_dbm:+.1f} dBm, {value:g} mW {milli_dbm:+.1f} dBm;"
        " one shifted key apart, so spurplan does not guess; give megawatts in kW or dBW;"
        " did you mean 'mW'?)",
    )


def _level_db(text: object, symbol: str, expected: str) -> float:
    """A level in the dB unit ``symbol`` ("dB", "dBc", "dBi"), within the ratio range."""
    value, unit = _split(text, expected)
    _require_unit(text, unit, expected)
    _scale(text, unit, {symbol: 1.0}, expected)
    lo, hi = GAIN_RANGE_DB
    if not lo <= value <= hi:
        raise UnitError(text, f"{expected} (from {lo:g} to {hi:+g} {symbol})")
    return value


def parse_gain_db(text: object) -> float:
    """Read a ratio in dB such as ``"16 dB"`` or ``"-3 dB"``; returns dB."""
    return _level_db(text, "dB", GAIN_UNITS)


def parse_dbc(text: object) -> float:
    """Read a level relative to the carrier such as ``"-40 dBc"``; returns dB (any sign)."""
    return _level_db(text, "dBc", DBC_UNITS)


def parse_dbi(text: object) -> float:
    """Read an antenna gain such as ``"2.15 dBi"`` (dB over isotropic); returns dB."""
    return _level_db(text, "dBi", DBI_UNITS)


def parse_dbc_at(text: object) -> tuple[float, float]:
    """Read a datasheet harmonic figure such as ``"-28 dBc @ +20 dBm"``.

    Returns
    -------
    (level_dbc, at_output_dbm) : tuple of float
        The level relative to the carrier (dBc, negative) and the carrier output
        power at which it was specified (dBm).
    """
    if not isinstance(text, str) or "@" not in text:
        raise UnitError(text, DBC_AT_UNITS)
    check_value_length(text, DBC_AT_UNITS)
    left, right = text.split("@", 1)
    try:
        value, unit = _split(left, DBC_AT_UNITS)
    except UnitError:
        raise UnitError(text, DBC_AT_UNITS) from None
    _scale(text, unit, {"dBc": 1.0}, DBC_AT_UNITS)
    if value < GAIN_RANGE_DB[0]:
        raise UnitError(text, f"{DBC_AT_UNITS} (above {GAIN_RANGE_DB[0]:g} dBc)")
    if value >= 0:
        raise UnitError(text, f"{DBC_AT_UNITS} (a level below the carrier, < 0 dBc)")
    try:
        at_dbm = parse_power_dbm(right)
    except UnitError as exc:
        # The message quotes the whole figure; keep the power's did-you-mean ("+20 dbm").
        raise UnitError(text, DBC_AT_UNITS, hint=exc.hint) from None
    return value, at_dbm


def parse_impedance_ohm(text: object) -> float:
    """Read an impedance such as ``"50 ohm"``, ``"50 Ohm"`` or ``"1 k\u03a9"``; returns ohm (> 0)."""
    value, unit = _split(text, IMPEDANCE_UNITS)
    _require_unit(text, unit, IMPEDANCE_UNITS)
    scale = _scale(text, unit, _IMPEDANCE_SCALE, IMPEDANCE_UNITS)
    if value <= 0:
        raise UnitError(text, f"{IMPEDANCE_UNITS} (> 0)")
    ohm = value * scale
    if not IMPEDANCE_RANGE_OHM[0] <= ohm <= IMPEDANCE_RANGE_OHM[1]:
        raise UnitError(
            text, f"{IMPEDANCE_UNITS} (from {IMPEDANCE_RANGE_OHM[0]:g} to {IMPEDANCE_RANGE_OHM[1]:g} ohm)"
        )
    return ohm


def parse_angle_rad(text: object) -> float:
    """Read an angle such as ``"90 deg"``; returns radians."""
    value, unit = _split(text, ANGLE_UNITS)
    _require_unit(text, unit, ANGLE_UNITS)
    return value * _scale(text, unit, _ANGLE_SCALE, ANGLE_UNITS)


def dbm_to_w(level_dbm):
    """Power in W from dBm: ``P = 10**((dBm - 30) / 10)``."""
    return 10.0 ** ((np.asarray(level_dbm, dtype=float) - 30.0) / 10.0)


def w_to_dbm(power_w):
    """Power in dBm from W; zero power gives ``-inf`` without a warning."""
    with np.errstate(divide="ignore"):
        return 10.0 * np.log10(np.asarray(power_w, dtype=float)) + 30.0


def dbm_to_vpeak(level_dbm, r_ohm: float = 50.0):
    """Peak voltage (V) of a sinusoid of power ``level_dbm`` across ``r_ohm``.

    ``V = sqrt(2 R P)`` (common practice, no source).

    Parameters
    ----------
    level_dbm : float or array_like
        Power (dBm).
    r_ohm : float
        Resistance the power is delivered into (ohm).

    Returns
    -------
    ndarray
        Peak voltage (V), the shape of ``level_dbm``.
    """
    return np.sqrt(2.0 * r_ohm * dbm_to_w(level_dbm))


def vpeak_to_dbm(v_peak, r_ohm: float = 50.0):
    """Power in dBm of a sinusoid of peak amplitude ``v_peak`` (V) across ``r_ohm``.

    Parameters
    ----------
    v_peak : float, complex or array_like
        Peak amplitude (V); a complex phasor counts by its magnitude.
    r_ohm : float
        Resistance across which it is measured (ohm).

    Returns
    -------
    ndarray
        Power (dBm); zero amplitude gives ``-inf``.
    """
    v = np.abs(np.asarray(v_peak))
    return w_to_dbm(v * v / (2.0 * r_ohm))


def ratio_db(amplitude_ratio):
    """20 log10 of an amplitude ratio; zero gives ``-inf`` without a warning."""
    with np.errstate(divide="ignore"):
        return 20.0 * np.log10(np.abs(np.asarray(amplitude_ratio)))


def format_freq(freq_hz: float) -> str:
    """Human frequency with an engineering unit, e.g. ``1.3650 GHz``."""
    f = abs(float(freq_hz))
    for scale, unit in ((1e9, "GHz"), (1e6, "MHz"), (1e3, "kHz")):
        if f >= scale:
            return f"{freq_hz / scale:.6g} {unit}"
    return f"{freq_hz:.6g} Hz"
