"""Parsers and conversions of spurplan.units.

Where a test checks a number, the comment says where the number comes from.
"""

from __future__ import annotations

import contextlib
import itertools
import math

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from spurplan.errors import LineupError, SpurplanError, UnitError
from spurplan.io.mask_files import parse_limit
from spurplan.units import (
    dbm_to_vpeak,
    dbm_to_w,
    format_freq,
    parse_angle_rad,
    parse_dbc,
    parse_dbc_at,
    parse_dbi,
    parse_freq_hz,
    parse_gain_db,
    parse_impedance_ohm,
    parse_power_dbm,
    ratio_db,
    vpeak_to_dbm,
    w_to_dbm,
)

# When a hypothesis test fails, its pytest plugin imports libcst, which triggers a
# DeprecationWarning from mypy_extensions; with filterwarnings=error that turns the
# failure report into an INTERNALERROR that stops the run.  Ignore that one warning.
pytestmark = pytest.mark.filterwarnings("ignore:mypy_extensions.TypedDict is deprecated:DeprecationWarning")


def _rejection(parse, text, match=None) -> str:
    """The UnitError ``parse(text)`` raises (its message matching ``match``); the message
    must quote ``text``.  Returns the message."""
    with pytest.raises(UnitError, match=match) as info:
        parse(text)
    message = str(info.value)
    assert repr(text) in message
    return message


# --- frequencies ----------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("text", "hz"),
    [
        # SI prefixes (arithmetic): k = 1e3, M = 1e6, G = 1e9.
        ("10 Hz", 10.0),
        ("2.5 kHz", 2.5e3),
        ("455 MHz", 455e6),
        ("455.0125 MHz", 455.0125e6),
        ("1.2 GHz", 1.2e9),
        ("+455 MHz", 455e6),
        (".5 GHz", 0.5e9),
        ("1e3 kHz", 1e6),
        ("455MHz", 455e6),
        ("  455 MHz  ", 455e6),
        ("0 Hz", 0.0),
    ],
)
def test_parse_freq_hz(text, hz):
    assert parse_freq_hz(text) == pytest.approx(hz, rel=1e-15)


@pytest.mark.parametrize(
    "text",
    [
        "455",  # no unit
        "455 dBm",  # a power unit
        "455 m",  # a length
        "-455 MHz",  # negative
        "nan MHz",
        "inf MHz",
        "1e999 MHz",  # overflows float() to inf
        "",
        "MHz",
        "455 MHz 3",
        "0x1C7 MHz",
        "1_000 MHz",
    ],
)
def test_parse_freq_hz_rejects(text):
    message = _rejection(parse_freq_hz, text)
    assert "MHz" in message and "GHz" in message  # says which unit is expected


@pytest.mark.parametrize("value", [455, 455.0, True, None, ["455 MHz"], {"v": "455 MHz"}])
def test_parse_freq_hz_rejects_non_strings(value):
    # A TOML number (or anything but a string) carries no unit.
    with pytest.raises(UnitError, match="MHz"):
        parse_freq_hz(value)


def test_bare_number_message_says_unit_is_missing():
    with pytest.raises(UnitError, match="no unit"):
        parse_freq_hz(455)
    with pytest.raises(UnitError, match="unit is missing"):
        parse_freq_hz("455")


def test_negative_frequency_message():
    with pytest.raises(UnitError, match="not negative"):
        parse_freq_hz("-1 MHz")


@pytest.mark.parametrize("text", ["1e308 GHz", "1e300 THz"])
def test_parse_freq_hz_rejects_overflow_to_infinity(text):
    # 1e308 * 1e9 is beyond the largest float64 (about 1.8e308, IEEE 754): the number is
    # finite as written but the frequency in Hz is not.  Expected: a UnitError, not inf.
    with pytest.raises(UnitError):
        value = parse_freq_hz(text)
        assert math.isfinite(value)  # reached only when no error was raised


# --- powers ---------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("text", "dbm"),
    [
        ("-8 dBm", -8.0),
        ("+20 dBm", 20.0),
        ("0 dBm", 0.0),
        ("-8dBm", -8.0),
        # dBW = dBm - 30 (definition; arithmetic).
        ("+33 dBW", 63.0),
        ("-30 dBW", 0.0),
        # 10 log10(P / 1 mW) (definition): 1 W = 30 dBm, 1 mW = 0 dBm, 100 uW = -10 dBm.
        ("1 W", 30.0),
        ("5 W", 10 * math.log10(5000.0)),
        ("1 mW", 0.0),
        ("100 uW", -10.0),
        ("10 \u00b5W", -20.0),  # micro sign
        ("1 kW", 60.0),
    ],
)
def test_parse_power_dbm(text, dbm):
    assert parse_power_dbm(text) == pytest.approx(dbm, abs=1e-12)


@pytest.mark.parametrize(
    "text",
    ["-8", "-8 dB", "-8 dBc", "455 MHz", "0 W", "-2 W", "-1 mW", "nan dBm", "inf dBm", "dBm", "1 V"],
)
def test_parse_power_dbm_rejects(text):
    message = _rejection(parse_power_dbm, text)
    assert "dBm" in message and "W" in message


def test_linear_power_must_be_positive_message():
    with pytest.raises(UnitError, match="> 0"):
        parse_power_dbm("0 W")


def test_parse_power_dbm_rejects_overflow_to_infinity():
    # 1e308 kW = 1e311 W: beyond float64 (IEEE 754).  Expected: a UnitError, not +inf dBm.
    with pytest.raises(UnitError):
        value = parse_power_dbm("1e308 kW")
        assert math.isfinite(value)


# --- gains and harmonic figures -------------------------------------------------------------------


@pytest.mark.parametrize(("text", "db"), [("16 dB", 16.0), ("-3 dB", -3.0), ("0 dB", 0.0), ("3.5dB", 3.5)])
def test_parse_gain_db(text, db):
    assert parse_gain_db(text) == db


@pytest.mark.parametrize("text", ["16", "16 dBm", "16 dBc", "16 x", "nan dB"])
def test_parse_gain_db_rejects(text):
    _rejection(parse_gain_db, text, match="dB")


def test_parse_gain_db_bare_number():
    with pytest.raises(UnitError, match="no unit"):
        parse_gain_db(16)


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("-28 dBc @ +20 dBm", (-28.0, 20.0)),
        ("-28dBc@20dBm", (-28.0, 20.0)),
        ("-60 dBc @ +37 dBm", (-60.0, 37.0)),
        # 1 W = 30 dBm (definition of dBm; arithmetic).
        ("-40 dBc @ 1 W", (-40.0, 30.0)),
    ],
)
def test_parse_dbc_at(text, expected):
    assert parse_dbc_at(text) == pytest.approx(expected, abs=1e-12)


@pytest.mark.parametrize(
    "text",
    [
        "+28 dBc @ +20 dBm",  # a harmonic above the carrier
        "0 dBc @ +20 dBm",
        "-28 dBc",  # no output power
        "-28 dB @ +20 dBm",  # dB, not dBc
        "-28 dBc @ 20",  # output power without a unit
        "-28 dBc @ 20 MHz",
        "@",
        "junk @ +20 dBm",
        "",
    ],
)
def test_parse_dbc_at_rejects(text):
    _rejection(parse_dbc_at, text, match="dBc")


def test_parse_dbc_at_positive_message():
    with pytest.raises(UnitError, match="< 0 dBc"):
        parse_dbc_at("+28 dBc @ +20 dBm")


# --- impedances and angles ------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("text", "ohm"),
    [
        ("50 ohm", 50.0),
        ("75 ohms", 75.0),
        ("50 Ohm", 50.0),
        ("50 \u03a9", 50.0),  # Greek capital omega
        ("50 \u2126", 50.0),  # ohm sign
        ("1 kohm", 1000.0),
    ],
)
def test_parse_impedance_ohm(text, ohm):
    assert parse_impedance_ohm(text) == ohm


@pytest.mark.parametrize("text", ["50", "0 ohm", "-50 ohm", "50 V", "50 dB"])
def test_parse_impedance_ohm_rejects(text):
    _rejection(parse_impedance_ohm, text, match="ohm")


@pytest.mark.parametrize(
    ("text", "rad"),
    [
        # 180 deg = pi rad (definition).
        ("90 deg", math.pi / 2),
        ("180\u00b0", math.pi),
        ("-45 deg", -math.pi / 4),
        ("1 rad", 1.0),
        ("0 deg", 0.0),
    ],
)
def test_parse_angle_rad(text, rad):
    assert parse_angle_rad(text) == pytest.approx(rad, abs=1e-15)


@pytest.mark.parametrize("text", ["90", "90 grad", "90 dB"])
def test_parse_angle_rad_rejects(text):
    with pytest.raises(UnitError, match="deg") as info:
        parse_angle_rad(text)
    assert "rad" in str(info.value)


def test_unit_error_is_a_value_error_and_a_spurplan_error():
    with pytest.raises(ValueError):
        parse_freq_hz("455")
    with pytest.raises(SpurplanError):
        parse_freq_hz("455")
    with pytest.raises(UnitError) as info:
        parse_power_dbm("-8 dB")
    assert info.value.value == "-8 dB"
    assert "dBm" in info.value.expected


# --- letter case: unit symbols are case-exact -------------------------------------------------
#
# Source for every case below: BIPM, The International System of Units (SI Brochure), 9th
# edition 2019 (from memory): its table of SI prefixes ("T" tera 1e12, "G" giga 1e9, "M" mega
# 1e6, "k" kilo 1e3, "m" milli 1e-3, "u"/"µ" micro 1e-6; "K" is the kelvin, not a prefix) and
# its rule that prefix and unit symbols are case-exact and that a unit named after a person has
# a capital symbol (Hz after Hertz, W after Watt, the bel's B after Bell, Ω after Ohm).  The
# spellings spurplan accepts besides the SI symbols ("ohm", "Ohm", "ohms", "kohm" ...) are its
# documented choice (spurplan/units.py module docstring), not SI.

SI = "SI Brochure, 9th edition 2019, table of SI prefixes (BIPM; from memory)"


@pytest.mark.parametrize(
    ("parse", "text", "meant"),
    [
        (parse_freq_hz, "162.5 mHz", "MHz"),  # SI: "m" milli 1e-3, not "M" mega 1e6
        (parse_freq_hz, "455 mhz", "MHz"),  # SI: "M" mega; Hz has a capital H (Hertz)
        (parse_freq_hz, "455 MHZ", "MHz"),  # SI: the symbol Hz, z lower-case
        (parse_freq_hz, "455 Mhz", "MHz"),  # SI: capital H (Hertz)
        (parse_freq_hz, "12.5 KHz", "kHz"),  # SI: "k" kilo lower-case ("K" is the kelvin)
        (parse_freq_hz, "12.5 khz", "kHz"),  # SI: capital H (Hertz)
        (parse_freq_hz, "2.4 ghz", "GHz"),  # SI: "G" giga
        (parse_freq_hz, "10 hz", "Hz"),  # SI: capital H (Hertz)
        (parse_freq_hz, "1 thz", "THz"),  # SI: "T" tera
        (parse_power_dbm, "-8 dbm", "dBm"),  # SI: the bel's B is capital (Bell); "m" milliwatt
        (parse_power_dbm, "-8 DBM", "dBm"),  # SI: "d" deci and "m" milli lower-case
        (parse_power_dbm, "-8 Dbm", "dBm"),  # SI: "d" deci lower-case
        (parse_power_dbm, "+33 dbw", "dBW"),  # SI: W capital (Watt)
        (parse_power_dbm, "2 mw", "mW"),  # SI: W capital (Watt)
        (parse_power_dbm, "2 Mw", "mW"),  # SI: W capital; M would be mega
        (parse_power_dbm, "2 w", "W"),  # SI: W capital (Watt)
        (parse_power_dbm, "5 KW", "kW"),  # SI: "k" kilo lower-case
        (parse_power_dbm, "100 UW", "uW"),  # SI: micro lower-case (µ, written u in ASCII)
        (parse_gain_db, "3 db", "dB"),  # SI: the bel's B is capital (Bell)
        (parse_gain_db, "3 DB", "dB"),  # SI: "d" deci lower-case
        (parse_dbc, "-40 DBC", "dBc"),  # SI: "d" deci lower-case; c (carrier), trade usage
        (parse_dbi, "2.15 DBI", "dBi"),  # SI: "d" deci lower-case; i (isotropic), trade usage
        (parse_dbc_at, "-28 DBC @ +20 dBm", "dBc"),  # SI: "d" deci lower-case
        (parse_dbc_at, "-28 dBc @ +20 dbm", "dBm"),  # SI: the bel's B capital
        (parse_impedance_ohm, "1 Kohm", "kohm"),  # SI: "k" kilo lower-case
        (parse_impedance_ohm, "50 OHM", "ohm"),  # the name "ohm" (or "Ohm"), not shouted
        (parse_impedance_ohm, "50 \u03c9", "\u03a9"),  # SI: capital omega; lower-case is not the ohm
        (parse_angle_rad, "90 DEG", "deg"),  # SI: "rad"; degree written "deg" here, lower-case
        (parse_angle_rad, "1 RAD", "rad"),  # SI: the radian's symbol rad, lower-case
    ],
)
def test_wrong_case_is_refused_with_did_you_mean(parse, text, meant):
    message = _rejection(parse, text)
    assert f"did you mean '{meant}'?" in message, SI
    assert ": expected " in message


def test_millihertz_message_quotes_the_value_and_offers_megahertz():
    # SI: "m" milli 1e-3, "M" mega 1e6 (SI Brochure 9th ed., prefixes table; from memory).
    message = _rejection(parse_freq_hz, "162.5 mHz")
    assert message.startswith("'162.5 mHz': expected a frequency with its unit")
    assert "millihertz" in message
    assert message.endswith("did you mean 'MHz'?)")


def test_megawatt_is_refused_never_read_as_milliwatt():
    # SI: "M" mega 1e6, "m" milli 1e-3 (SI Brochure 9th ed., prefixes table; from memory).
    # dBm = 10 log10(P / 1 mW) (definition): 2 MW = 2e9 mW is +93.0 dBm, 2 mW is +3.0 dBm.
    message = _rejection(parse_power_dbm, "2 MW")
    assert "megawatt" in message and "did you mean 'mW'?" in message
    assert "+93.0 dBm" in message and "+3.0 dBm" in message
    # 20 MW is +103.0 dBm, beyond the plausible +100 dBm (DEVELOPERS.md input ranges): the
    # range message.
    message = _rejection(parse_power_dbm, "20 MW")
    assert "+100 dBm" in message and "did you mean 'mW'?" in message
    # The notes belong to their quantity: a frequency parser does not offer mW, nor a power
    # parser MHz.
    assert "did you mean" not in _rejection(parse_freq_hz, "2 MW")
    assert "did you mean" not in _rejection(parse_power_dbm, "162.5 mHz")


def test_wrong_case_limits_and_field_strengths_are_refused():
    # SI: "m" milli vs "M" mega, the bel's B capital, metre "m" lower-case (SI Brochure 9th
    # ed.; from memory).  "MV/m" (megavolt per metre) must not be read as mV/m.
    for text, meant in [
        ("-60 DBC", "dBc"),
        ("-36 dbm", "dBm"),
        ("54 dbuv/m @ 3 m", "dBuV/m"),
        ("100 UV/m @ 3 m", "uV/m"),
        ("1 MV/m @ 3 m", "mV/m"),
        ("54 dBuV/m @ 3 M", "m"),
    ]:
        assert f"did you mean '{meant}'?" in _rejection(parse_limit, text), text
    # 20 log10(1000 uV/m) = 60 dBuV/m (definition of dBuV/m): 1 mV/m still reads.
    assert parse_limit("1 mV/m @ 3 m") == ("field", pytest.approx(60.0, abs=1e-12), 3.0, False)
    assert parse_limit("-60 dBc") == ("relative", -60.0, None, False)


def test_wrong_case_in_a_mixer_spur_table_and_antenna_gain_is_a_located_error():
    from spurplan.io.lineup_file import from_dict

    mixer = {"kind": "mixer", "name": "mixer", "lo": {"freq": "1.6 GHz", "power": "+7 dBm"}}
    doc = {
        "carrier": [{"freq": "70 MHz", "power": "-10 dBm"}],
        "stage": [
            {**mixer, "conversion_loss": "6 dB", "spur_drive": "-10 dBm", "spurs": {"2LO-IF": "-40 DBC"}}
        ],
    }
    with pytest.raises(LineupError) as info:
        from_dict(doc, name="case-test.toml")
    message = str(info.value)  # SI: "d" deci lower-case (SI Brochure 9th ed.; from memory)
    assert "field 'spurs'" in message and "'-40 DBC'" in message and "did you mean 'dBc'?" in message

    doc = {
        "carrier": [{"freq": "70 MHz", "power": "-10 dBm"}],
        "stage": [{"kind": "attenuator", "name": "pad", "loss": "3 dB"}],
        "mask": {"use": ["us-fcc-15.209"], "antenna_gain": "2.15 DBI"},
    }
    with pytest.raises(LineupError) as info:
        from_dict(doc, name="case-test.toml")
    assert "'2.15 DBI'" in str(info.value) and "did you mean 'dBi'?" in str(info.value)


def test_wrong_case_on_the_command_line_is_one_error_line():
    from helpers import assert_one_error_line, run_in_process

    # SI: the bel's B is capital (SI Brochure 9th ed.; from memory).
    code, out, err, detail, _ = run_in_process(
        ["drive", "examples/uhf_telemetry.toml", "--start", "-20 dbm", "--stop", "+10 dBm", "--step", "1 dB"]
    )
    assert_one_error_line(code, out, err, ("--start", "'-20 dbm'", "did you mean 'dBm'?"), detail=detail)


def _casings(symbol: str) -> set[str]:
    """Every upper/lower-case spelling of ``symbol`` (2**letters of them)."""
    return {"".join(c) for c in itertools.product(*[{ch.lower(), ch.upper()} for ch in symbol])}


# (parser, {symbol: value of "1 <symbol>"}, casings accepted besides the symbols).  Values:
# SI prefixes (SI Brochure 9th ed., from memory); 10 log10(P / 1 mW) (definition of dBm);
# 180 deg = pi rad (definition).
_SYMBOLS = [
    (parse_freq_hz, {"Hz": 1.0, "kHz": 1e3, "MHz": 1e6, "GHz": 1e9, "THz": 1e12}, {}),
    (parse_power_dbm, {"dBm": 1.0, "dBW": 31.0, "W": 30.0, "mW": 0.0, "uW": -30.0, "kW": 60.0}, {}),
    (parse_gain_db, {"dB": 1.0}, {}),
    (parse_dbc, {"dBc": 1.0}, {}),
    (parse_angle_rad, {"deg": math.pi / 180, "rad": 1.0}, {}),
    # "ohm" is the unit's name; capitalised "Ohm" is accepted too (documented choice).
    (parse_impedance_ohm, {"ohm": 1.0, "ohms": 1.0, "kohm": 1e3}, {"Ohm": 1.0, "Ohms": 1.0, "kOhm": 1e3}),
]


@pytest.mark.parametrize(("parse", "symbols", "also"), _SYMBOLS)
def test_only_the_si_casing_of_a_unit_reads(parse, symbols, also):
    # Of all 2**n casings of a symbol, only the SI one (and the documented extras) reads,
    # to the SI value; every other casing is refused naming the SI symbol (SI Brochure,
    # 9th edition 2019: symbols are case-exact; from memory).
    for symbol, value in symbols.items():
        for casing in _casings(symbol):
            text = f"1 {casing}"
            if casing == symbol or casing in also:
                want = value if casing == symbol else also[casing]
                assert parse(text) == pytest.approx(want, rel=1e-15, abs=1e-15), text
            else:
                assert "did you mean '" in _rejection(parse, text), text


@pytest.mark.parametrize(
    ("parse", "text", "value"),
    [
        # SI prefixes (SI Brochure 9th ed., from memory); 10 log10(P / 1 mW) (definition).
        (parse_freq_hz, "162.5 MHz", 162.5e6),
        (parse_freq_hz, "12.5 kHz", 12.5e3),
        (parse_freq_hz, "0.5 THz", 0.5e12),
        (parse_power_dbm, "2 mW", 10 * math.log10(2.0)),
        (parse_power_dbm, "2 kW", 10 * math.log10(2e6)),
        (parse_power_dbm, "2 W", 10 * math.log10(2e3)),
        (parse_power_dbm, "1 \u03bcW", -30.0),  # Greek small mu
        (parse_power_dbm, "1 \u00b5W", -30.0),  # micro sign
        (parse_dbc, "-40 dBc", -40.0),
        (parse_dbi, "2.15 dBi", 2.15),
        (parse_impedance_ohm, "50 Ohms", 50.0),
        (parse_impedance_ohm, "1 kOhm", 1e3),
        (parse_impedance_ohm, "1 k\u03a9", 1e3),  # kilo, Greek capital omega
        (parse_impedance_ohm, "1 k\u2126", 1e3),  # kilo, ohm sign
    ],
)
def test_correct_spellings_read_their_si_values(parse, text, value):
    assert parse(text) == pytest.approx(value, rel=1e-15)


# --- conversions ----------------------------------------------------------------------------------


def test_zero_dbm_is_one_milliwatt():
    # Definition of dBm: 10 log10(P / 1 mW).
    assert dbm_to_w(0.0) == pytest.approx(1e-3, rel=1e-15)
    assert w_to_dbm(1e-3) == pytest.approx(0.0, abs=1e-12)


def test_one_watt_is_30_dbm():
    # Definition of dBm (arithmetic).
    assert w_to_dbm(1.0) == pytest.approx(30.0, abs=1e-12)
    assert dbm_to_w(30.0) == pytest.approx(1.0, rel=1e-15)
    assert dbm_to_w(-30.0) == pytest.approx(1e-6, rel=1e-15)


def test_zero_watts_is_minus_infinity_without_warning():
    # filterwarnings=error would turn a numpy divide warning into a failure here.
    assert w_to_dbm(0.0) == -math.inf
    assert ratio_db(0.0) == -math.inf


def test_zero_dbm_across_50_ohm_is_0_31623_v_peak():
    # V_peak = sqrt(2 R P) for a sinusoid (common practice, no source):
    # sqrt(2 * 50 * 1e-3) = sqrt(0.1) = 0.316228 V.
    assert float(dbm_to_vpeak(0.0, 50.0)) == pytest.approx(0.31623, abs=5e-6)
    assert float(dbm_to_vpeak(0.0, 50.0)) == pytest.approx(math.sqrt(0.1), rel=1e-14)
    assert float(vpeak_to_dbm(math.sqrt(0.1), 50.0)) == pytest.approx(0.0, abs=1e-12)


def test_vpeak_other_impedance_and_power():
    # V_peak = sqrt(2 R P) (common practice, no source): 30 dBm = 1 W across 75 ohm
    # gives sqrt(150) V; the default impedance is 50 ohm.
    assert float(dbm_to_vpeak(30.0, 75.0)) == pytest.approx(math.sqrt(150.0), rel=1e-14)
    assert float(dbm_to_vpeak(30.0)) == pytest.approx(10.0, rel=1e-14)


def test_vpeak_to_dbm_uses_magnitude_of_complex_phasor():
    # |3 + 4j| = 5 (arithmetic); 5 V peak across 50 ohm is 25 / 100 W = 0.25 W.
    assert float(vpeak_to_dbm(3 + 4j, 50.0)) == pytest.approx(10 * math.log10(250.0), abs=1e-12)


def test_conversions_work_elementwise():
    levels = np.array([-30.0, 0.0, 30.0])
    np.testing.assert_allclose(dbm_to_w(levels), [1e-6, 1e-3, 1.0], rtol=1e-14)


def test_ratio_db():
    # 20 log10 of an amplitude ratio (definition of dB for voltages).
    assert float(ratio_db(10.0)) == pytest.approx(20.0, abs=1e-12)
    assert float(ratio_db(-0.1)) == pytest.approx(-20.0, abs=1e-12)


@pytest.mark.parametrize(
    ("hz", "text"),
    [(1.365e9, "1.365 GHz"), (455.125e6, "455.125 MHz"), (2500.0, "2.5 kHz"), (10.0, "10 Hz")],
)
def test_format_freq(hz, text):
    # Six significant digits with an SI prefix (arithmetic).
    assert format_freq(hz) == text


# --- properties (hypothesis) ----------------------------------------------------------------------

_LEVELS = st.floats(min_value=-250.0, max_value=150.0, allow_nan=False)
_OHMS = st.floats(min_value=1e-3, max_value=1e6, allow_nan=False)


@given(level=_LEVELS, r_ohm=_OHMS)
def test_dbm_vpeak_round_trip(level, r_ohm):
    # V = sqrt(2 R P) and its inverse (common practice, no source).
    back = float(vpeak_to_dbm(dbm_to_vpeak(level, r_ohm), r_ohm))
    assert back == pytest.approx(level, abs=1e-9)


@given(level=_LEVELS, r_ohm=_OHMS)
def test_vpeak_matches_independent_formula(level, r_ohm):
    # sqrt(2 R 10^((dBm - 30) / 10)) written out with the standard library.
    expected = math.sqrt(2.0 * r_ohm * 10.0 ** ((level - 30.0) / 10.0))
    assert float(dbm_to_vpeak(level, r_ohm)) == pytest.approx(expected, rel=1e-12)


@given(level=_LEVELS)
def test_dbm_watt_round_trip(level):
    assert float(w_to_dbm(dbm_to_w(level))) == pytest.approx(level, abs=1e-9)


@given(value=st.floats(min_value=-250.0, max_value=70.0, allow_nan=False))
def test_parse_power_dbm_reads_back_its_text(value):
    # repr() of a float reads back exactly (Python float repr guarantee).  The range
    # stays inside any plausible power limit, in dBm and in dBW.
    assert parse_power_dbm(f"{value!r} dBm") == value
    assert parse_power_dbm(f"{value!r} dBW") == pytest.approx(value + 30.0, abs=1e-9)


@given(watts=st.floats(min_value=1e-12, max_value=1e6, allow_nan=False))
def test_parse_power_watts_matches_log_formula(watts):
    # dBm = 10 log10(P / 1 mW) (definition), with math.log10.
    assert parse_power_dbm(f"{watts!r} W") == pytest.approx(10 * math.log10(watts) + 30.0, abs=1e-9)


@given(mhz=st.floats(min_value=0.0, max_value=1e5, allow_nan=False))
def test_parse_freq_reads_back_its_text(mhz):
    assert parse_freq_hz(f"{mhz!r} MHz") == pytest.approx(mhz * 1e6, rel=1e-15)


@given(
    value=st.floats(allow_nan=False, allow_infinity=False),
    unit=st.sampled_from(["Hz", "kHz", "MHz", "GHz"]),
)
def test_parse_freq_is_finite_or_unit_error(value, unit):
    # Any finite number with a frequency unit either gives a finite, non-negative Hz
    # value or a UnitError; never inf and never another exception.
    try:
        hz = parse_freq_hz(f"{value!r} {unit}")
    except UnitError:
        return
    assert math.isfinite(hz) and hz >= 0


@given(
    value=st.floats(allow_nan=False, allow_infinity=False),
    unit=st.sampled_from(["dBm", "dBW", "W", "mW", "uW", "kW"]),
)
def test_parse_power_is_finite_or_unit_error(value, unit):
    try:
        dbm = parse_power_dbm(f"{value!r} {unit}")
    except UnitError:
        return
    assert math.isfinite(dbm)


@given(text=st.text(max_size=30))
def test_parsers_raise_only_unit_error_on_arbitrary_text(text):
    # Robustness: arbitrary text either parses or raises UnitError (never a crash).
    for parse in (
        parse_freq_hz,
        parse_power_dbm,
        parse_gain_db,
        parse_dbc_at,
        parse_impedance_ohm,
        parse_angle_rad,
    ):
        with contextlib.suppress(UnitError):
            parse(text)
