"""Quantities with units: parsing of lineup strings and power/voltage conversions.

Lineup files write every physical value as a string with its unit ("455.0125 MHz",
"-8 dBm", "16 dB", "-28 dBc @ +20 dBm", "50 ohm").  The parsers here return plain
floats in one fixed unit each, named in the function (``parse_freq_hz`` returns Hz,
``parse_power_dbm`` returns dBm).  A value without its unit is an error that says
which unit is expected: in a compliance tool a bare number is a guess.

Voltages are peak amplitudes of a sinusoid across the system impedance, so that
``P = V_peak**2 / (2 R)`` (common practice, no source).
"""

from __future__ import annotations

import math
import re

import numpy as np

from .errors import UnitError

_NUMBER = r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?"
_QUANTITY = re.compile(rf"^\s*({_NUMBER})\s*([^\s\d+-].*?)?\s*$")

_FREQ_SCALE = {"hz": 1.0, "khz": 1e3, "mhz": 1e6, "ghz": 1e9, "thz": 1e12}
_IMPEDANCE_SCALE = {"ohm": 1.0, "ohms": 1.0, "\u03c9": 1.0, "\u2126": 1.0, "kohm": 1e3}
_ANGLE_SCALE = {"deg": math.pi / 180.0, "\u00b0": math.pi / 180.0, "rad": 1.0}
_DISTANCE_SCALE = {"m": 1.0, "km": 1e3, "cm": 1e-2}

# Plausible ranges: values outside are typing mistakes (or overflow float64 once
# converted), not transmitters.
MAX_FREQ_HZ = 1e12
POWER_RANGE_DBM = (-300.0, 100.0)
GAIN_RANGE_DB = (-300.0, 100.0)
IMPEDANCE_RANGE_OHM = (1e-3, 1e6)

FREQ_UNITS = "a frequency with its unit (Hz, kHz, MHz or GHz), e.g. '455 MHz'"
POWER_UNITS = "a power with its unit (dBm, dBW, W, mW or uW), e.g. '-8 dBm'"
GAIN_UNITS = "a ratio in dB, e.g. '16 dB'"
DBC_AT_UNITS = "a level in dBc at an output power, e.g. '-28 dBc @ +20 dBm'"
IMPEDANCE_UNITS = "an impedance in ohm, e.g. '50 ohm'"
ANGLE_UNITS = "an angle in deg or rad, e.g. '90 deg'"


def _split(text: object, expected: str) -> tuple[float, str]:
    """Split ``"<number> <unit>"`` into a finite float and the unit string (may be '')."""
    if isinstance(text, bool) or not isinstance(text, (str, int, float)):
        raise UnitError(text, expected)
    if not isinstance(text, str):
        # A TOML number: legal syntax, but it carries no unit.
        raise UnitError(text, f"{expected} (a bare number has no unit)")
    match = _QUANTITY.match(text)
    if match is None:
        if text.strip().lower().lstrip("+-").startswith(("nan", "inf")):
            raise UnitError(text, f"{expected} (a finite number)")
        raise UnitError(text, expected)
    value = float(match.group(1))
    if not math.isfinite(value):
        raise UnitError(text, f"{expected} (a finite number)")
    return value, (match.group(2) or "").strip()


def _require_unit(text: object, unit: str, expected: str) -> None:
    if not unit:
        raise UnitError(text, f"{expected} (the unit is missing)")


def parse_freq_hz(text: object) -> float:
    """Read a frequency such as ``"455.0125 MHz"``; returns Hz (>= 0)."""
    value, unit = _split(text, FREQ_UNITS)
    _require_unit(text, unit, FREQ_UNITS)
    scale = _FREQ_SCALE.get(unit.lower())
    if scale is None:
        raise UnitError(text, FREQ_UNITS)
    if value < 0:
        raise UnitError(text, f"{FREQ_UNITS} (not negative)")
    hz = value * scale
    if not hz <= MAX_FREQ_HZ:
        raise UnitError(text, f"{FREQ_UNITS} (at most {MAX_FREQ_HZ / 1e9:g} GHz)")
    return hz


def parse_power_dbm(text: object) -> float:
    """Read a power such as ``"-8 dBm"``, ``"2 W"`` or ``"+33 dBW"``; returns dBm."""
    value, unit = _split(text, POWER_UNITS)
    _require_unit(text, unit, POWER_UNITS)
    key = unit.replace("\u00b5", "u").replace("\u03bc", "u").lower()
    if key in ("dbm", "dbw"):
        dbm = value + (30.0 if key == "dbw" else 0.0)
    else:
        watts = {"w": 1.0, "mw": 1e-3, "uw": 1e-6, "kw": 1e3}.get(key)
        if watts is None or value <= 0:
            raise UnitError(text, POWER_UNITS + (" (a linear power must be > 0)" if watts else ""))
        dbm = float(w_to_dbm(value * watts))
    lo, hi = POWER_RANGE_DBM
    if not lo <= dbm <= hi:
        raise UnitError(text, f"{POWER_UNITS} (from {lo:g} to {hi:+g} dBm)")
    return dbm


def parse_gain_db(text: object) -> float:
    """Read a ratio in dB such as ``"16 dB"`` or ``"-3 dB"``; returns dB."""
    value, unit = _split(text, GAIN_UNITS)
    _require_unit(text, unit, GAIN_UNITS)
    if unit.lower() != "db":
        raise UnitError(text, GAIN_UNITS)
    lo, hi = GAIN_RANGE_DB
    if not lo <= value <= hi:
        raise UnitError(text, f"{GAIN_UNITS} (from {lo:g} to {hi:+g} dB)")
    return value


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
    left, right = text.split("@", 1)
    try:
        value, unit = _split(left, DBC_AT_UNITS)
    except UnitError:
        raise UnitError(text, DBC_AT_UNITS) from None
    if unit.lower() != "dbc":
        raise UnitError(text, DBC_AT_UNITS)
    if value < GAIN_RANGE_DB[0]:
        raise UnitError(text, f"{DBC_AT_UNITS} (above {GAIN_RANGE_DB[0]:g} dBc)")
    if value >= 0:
        raise UnitError(text, f"{DBC_AT_UNITS} (a level below the carrier, < 0 dBc)")
    try:
        at_dbm = parse_power_dbm(right)
    except UnitError:
        raise UnitError(text, DBC_AT_UNITS) from None
    return value, at_dbm


def parse_impedance_ohm(text: object) -> float:
    """Read an impedance such as ``"50 ohm"``; returns ohm (> 0)."""
    value, unit = _split(text, IMPEDANCE_UNITS)
    _require_unit(text, unit, IMPEDANCE_UNITS)
    scale = _IMPEDANCE_SCALE.get(unit.lower())
    if scale is None or value <= 0:
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
    scale = _ANGLE_SCALE.get(unit.lower())
    if scale is None:
        raise UnitError(text, ANGLE_UNITS)
    return value * scale


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
    """
    return np.sqrt(2.0 * r_ohm * dbm_to_w(level_dbm))


def vpeak_to_dbm(v_peak, r_ohm: float = 50.0):
    """Power in dBm of a sinusoid of peak amplitude ``v_peak`` (V) across ``r_ohm``."""
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
