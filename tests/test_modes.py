"""Operating modes (``[[mode]]``): merging, the verdict over all modes, and bad mode tables.

Lineups written here are invented for these tests.  Expected numbers are worked by hand
(each names its source); a mode is also compared with the same lineup written out in full
as a file of its own, which is how the README defines a mode.
"""

from __future__ import annotations

import numpy as np
import pytest
from helpers import as_json, assert_one_error_line, invoke, run_in_process, write

from spurplan.io.lineup_file import load
from spurplan.io.modes import load_modes
from spurplan.io.resources import example_path
from spurplan.model.modes import worst_status

# Hand calculation.  One polynomial amplifier (no compression figure: the model is the
# cubic a1 x + a2 x^2 + a3 x^3), gain 20 dB, OHIP3 = +40 dBm, OHIP2 = +80 dBm.  The
# n-th harmonic read on the extrapolated small-signal lines rises n dB per dB, so
# P_Hn = n P_out - (n - 1) OHIPn, with P_out the small-signal output (intercept-point
# definition: Pozar, Microwave Engineering 4e, 10.3; Razavi, RF Microelectronics 2e,
# 2.2; from memory).
#   "low power":  -10 dBm in, +10 dBm out: H3 = 3 (10) - 2 (40) = -50 dBm; against
#                 -36 dBm the margin is +14 dB (passes).  H2 = 2 (10) - 80 = -60 dBm.
#   "high power": drive 0 dBm, +20 dBm out: H3 = 3 (20) - 2 (40) = -20 dBm; margin
#                 -36 - (-20) = -16 dB (fails).  H2 = 40 - 80 = -40 dBm, +4 dB (passes).
# No figure sets compression, so each mode alone is at best INCOMPLETE (README: a
# missing figure never reads as a PASS); the first meets the mask (exit 0 alone).
TWO_MODES = """
[lineup]
name = "two-mode hand case (invented)"

[[carrier]]
freq = "100 MHz"
power = "-10 dBm"

[[stage]]
kind = "amplifier"
name = "amp"
gain = "20 dB"
ohip3 = "+40 dBm"
ohip2 = "+80 dBm"
noise_figure = "3 dB"

[[mask.rule]]
name = "inline -36 dBm"
start = "150 MHz"
stop = "1 GHz"
limit = "-36 dBm"
rbw = "100 kHz"

[analysis]
max_order = 3
combine = "worst"

[[mode]]
name = "low power"

[[mode]]
name = "high power"
drive = "0 dBm"
"""

# Three stages; the mode "UHF" changes the filter's cutoff only.
SWITCHED = """
[lineup]
name = "switched filter (invented)"

[[carrier]]
freq = "160 MHz"
power = "-10 dBm"

[[stage]]
kind = "amplifier"
name = "amp"
gain = "20 dB"
oip3 = "+40 dBm"
ohip2 = "+70 dBm"

[[stage]]
kind = "filter"
name = "band filter"
prototype = { family = "chebyshev", response = "lowpass", order = 5, cutoff = "200 MHz", ripple = "0.1 dB" }

[[stage]]
kind = "attenuator"
name = "pad"
loss = "1 dB"

[analysis]
max_order = 5

[[mode]]
name = "VHF"

[[mode]]
name = "UHF"
[[mode.carrier]]
freq = "450 MHz"
power = "-10 dBm"
[mode.stage."band filter"]
prototype = { cutoff = "520 MHz" }
"""


def _text_of_mode(base: str, mode_tables: str) -> str:
    return base.split("[[mode]]")[0] + mode_tables


@pytest.fixture
def two(tmp_path):
    return write(tmp_path, "two.toml", TWO_MODES)


def _worst(summary):
    return summary["worst_margin_db"], summary["worst"]["label"]


def test_a_two_mode_lineup_whose_second_mode_fails_fails_as_a_whole(two):
    # Each mode alone: the first meets the mask (exit 0), the second violates it (exit 1).
    low = as_json(invoke("check", two, "--mode", "low power", "--format", "json", expect=0).stdout)
    high = as_json(invoke("check", two, "--mode", "high power", "--format", "json", expect=1).stdout)
    assert low["summary"]["mode"] == "low power" and high["summary"]["mode"] == "high power"
    # The hand calculation above: H3 margins +14 dB and -16 dB.
    assert _worst(low["summary"]) == (pytest.approx(14.0, abs=0.01), "3f1")
    assert _worst(high["summary"]) == (pytest.approx(-16.0, abs=0.01), "3f1")
    levels = {p["label"]: p["level_dbm"] for p in high["products"]}
    assert levels["3f1"] == pytest.approx(-20.0, abs=0.01)
    assert levels["2f1"] == pytest.approx(-40.0, abs=0.01)
    # Both (the default): FAIL over all modes, exit status 1, each mode's document kept.
    both = as_json(invoke("check", two, "--format", "json", expect=1).stdout)
    assert both["summary"]["status"] == "FAIL"
    assert both["summary"]["modes"] == ["low power", "high power"]
    assert [m["mode"] for m in both["modes"]] == ["low power", "high power"]
    assert both["modes"][0]["summary"]["status"] == "INCOMPLETE"  # no compression figure
    assert both["modes"][1]["summary"]["status"] == "FAIL"
    assert both["modes"][1]["summary"]["worst_margin_db"] == pytest.approx(-16.0, abs=0.01)
    assert "1 of 2 modes fail: mode 'high power'" in both["summary"]["verdict"]
    # The same as text: each mode under its heading, then the line over both.
    text = invoke("check", two, "--mode", "all", expect=1).stdout
    assert text.index("=== mode 'low power' (1 of 2) ===") < text.index("=== mode 'high power' (2 of 2) ===")
    assert "VERDICT OVER ALL 2 MODES: FAIL (1 of 2 modes fail: mode 'high power')" in text


def test_modes_that_all_meet_the_mask_stay_incomplete_over_all(tmp_path):
    # Both modes at the low drive: each meets the mask but lacks a compression figure, so
    # the design is INCOMPLETE, not PASS (README: a missing figure is never a PASS), and
    # exits 0 as one such mode does (1 with --strict).
    path = write(tmp_path, "both_low.toml", TWO_MODES.replace('drive = "0 dBm"', 'drive = "-10 dBm"'))
    doc = as_json(invoke("check", path, "--format", "json", expect=0).stdout)
    assert doc["summary"]["status"] == "INCOMPLETE"
    invoke("check", path, "--strict", expect=1)


def test_the_worst_mode_sets_the_status():
    # The ranking the issue states: FAIL if any mode fails, else INCOMPLETE or UNCERTAIN
    # if any is, else PASS (INCOMPLETE before UNCERTAIN, as the check ranks them).
    assert worst_status(["PASS", "FAIL", "INCOMPLETE"]) == "FAIL"
    assert worst_status(["PASS", "UNCERTAIN", "INCOMPLETE"]) == "INCOMPLETE"
    assert worst_status(["UNCERTAIN", "PASS"]) == "UNCERTAIN"
    assert worst_status(["PASS", "PASS"]) == "PASS"
    with pytest.raises(ValueError):
        worst_status([])


def test_a_modes_drive_shifts_every_carrier(tmp_path):
    # Two carriers, the strongest -10 dBm (0.1 mW written in mW: 10 log10(0.1) = -10 dBm,
    # definition); drive "+2 dBm" moves both by +12 dB: +2 dBm and -16 + 12 = -4 dBm
    # (arithmetic).
    text = TWO_MODES.replace(
        '[[carrier]]\nfreq = "100 MHz"\npower = "-10 dBm"\n',
        '[[carrier]]\nfreq = "100 MHz"\npower = "0.1 mW"\n\n[[carrier]]\nfreq = "100.2 MHz"\npower = "-16 dBm"\n',
    ).replace('drive = "0 dBm"', 'drive = "+2 dBm"')
    modes = load_modes(write(tmp_path, "drive.toml", text))
    low, high = (tuple(c.power_dbm for c in m.lineup.carriers) for m in modes)
    assert low == pytest.approx((-10.0, -16.0), abs=1e-9)
    assert high == pytest.approx((2.0, -4.0), abs=1e-9)
    assert [c.freq_hz for c in modes[1].lineup.carriers] == [100e6, 100.2e6]
    assert modes[1].overrides == ("drive +2.00 dBm",)


def test_a_stage_override_changes_exactly_that_stage(tmp_path):
    modes = load_modes(write(tmp_path, "switched.toml", SWITCHED))
    vhf, uhf = (m.lineup for m in modes)
    # The UHF mode is the file written out in full with cutoff 520 MHz (README, Lineup
    # files: a mode is the base with its overrides merged in).
    full = SWITCHED.split("[[mode]]")[0].replace('freq = "160 MHz"', 'freq = "450 MHz"')
    full = full.replace('cutoff = "200 MHz"', 'cutoff = "520 MHz"')
    written = load(write(tmp_path, "uhf_written.toml", full))
    base = load(write(tmp_path, "base.toml", SWITCHED.split("[[mode]]")[0]))
    freqs = np.array([100e6, 160e6, 300e6, 450e6, 900e6, 1350e6])
    assert [s.name for s in uhf.stages] == ["amp", "band filter", "pad"]
    for i, name in enumerate(("amp", "band filter", "pad")):
        same = np.allclose(uhf.stages[i].response(freqs), base.stages[i].response(freqs))
        assert same is (name != "band filter"), name
        assert np.allclose(uhf.stages[i].response(freqs), written.stages[i].response(freqs))
        assert uhf.stages[i].describe_figures() == written.stages[i].describe_figures()
        assert vhf.stages[i].describe_figures() == base.stages[i].describe_figures()
    # Only the cutoff moved: 200 MHz -> 520 MHz; the order and ripple are the base's.
    assert base.stages[1].prototype.edge_hz == 200e6
    assert uhf.stages[1].prototype == written.stages[1].prototype
    assert uhf.stages[1].prototype.order == 5
    assert modes[1].overrides == ("carriers", "stage 'band filter'")
    assert (vhf.mode, uhf.mode) == ("VHF", "UHF")


def test_a_file_without_modes_is_one_unnamed_mode():
    (only,) = load_modes(example_path())
    assert only.name is None and only.lineup.mode is None
    plain = load(example_path())
    assert [s.name for s in only.lineup.stages] == [s.name for s in plain.stages]
    # Its JSON is as it always was: no "mode" key, a single document.
    doc = as_json(invoke("check", "--format", "json").stdout)
    assert "mode" not in doc["summary"] and "modes" not in doc


@pytest.mark.parametrize(
    ("replace", "needles"),
    [
        # An override of a stage the lineup does not have, with a did-you-mean.
        (
            ('drive = "0 dBm"', 'drive = "0 dBm"\n[mode.stage.ampp]\ngain = "10 dB"'),
            ("mode 2 'high power'", "field 'stage'", "'ampp'", "did you mean 'amp'"),
        ),
        # Two modes of one name.
        (('name = "high power"', 'name = "low power"'), ("mode 2", "field 'name'", "'low power'", "unique")),
        # A key a mode table does not know.
        (
            ('drive = "0 dBm"', 'drvie = "0 dBm"'),
            ("mode 2 'high power'", "field 'drvie'", "did you mean 'drive'"),
        ),
        # A key the stage does not know, reached through the mode's merged lineup.
        (
            ('drive = "0 dBm"', '[mode.stage.amp]\ngian = "10 dB"'),
            ("mode 'high power'", "stage 1 'amp'", "field 'gian'", "unknown key"),
        ),
        # A value the stage refuses, located in the mode.
        (
            ('drive = "0 dBm"', '[mode.stage.amp]\ngain = "20 dBm"'),
            ("mode 'high power'", "stage 1 'amp'", "field 'gain'", "'20 dBm'"),
        ),
        # A drive beyond a carrier's plausible power.
        (('drive = "0 dBm"', 'drive = "+120 dBm"'), ("mode 2 'high power'", "field 'drive'")),
        # "all" selects every mode on the command line.
        (('name = "high power"', 'name = "all"'), ("mode 2 'all'", "field 'name'", "reserved")),
    ],
)
def test_bad_mode_tables_are_one_line_errors(tmp_path, replace, needles):
    path = write(tmp_path, "bad.toml", TWO_MODES.replace(*replace))
    code, out, err, detail, _ = run_in_process(["check", str(path)])
    assert_one_error_line(code, out, err, needles, names=path, detail=detail)


def test_an_unknown_mode_on_the_command_line_is_a_one_line_error(two, tmp_path):
    code, out, err, detail, _ = run_in_process(["check", str(two), "--mode", "high powr"])
    assert_one_error_line(
        code, out, err, ("no mode named 'high powr'", "--mode", "did you mean 'high power'")
    )
    plain = write(tmp_path, "plain.toml", TWO_MODES.split("[[mode]]")[0])
    code, out, err, detail, _ = run_in_process(["budget", str(plain), "--mode", "low power"])
    assert_one_error_line(code, out, err, ("no [[mode]] tables", "--mode"), detail=detail)


def test_the_library_load_names_the_mode_it_needs(two):
    from spurplan import LineupError
    from spurplan import load as public_load

    with pytest.raises(LineupError, match="2 modes"):
        public_load(two)
    assert public_load(two, mode="high power").carriers[0].power_dbm == pytest.approx(0.0)


def test_drive_over_modes_judges_each_modes_own_drive(two):
    # H3 reaches -36 dBm where 3 P_out - 2 (40) = -36, P_out = 44/3 = +14.667 dBm, i.e.
    # P_in = -5.333 dBm (hand calculation above; one amplifier, so the same limit in both
    # modes).  The high-power mode at 0 dBm is 5.33 dB above it: the design fails.  The
    # low-power mode at -10 dBm is 4.67 dB below it.
    doc = as_json(
        invoke(
            "drive", two, "--start", "-20 dBm", "--stop", "+4 dBm", "--step", "0.5 dB", "--format", "json"
        ).stdout
    )
    assert doc["summary"]["status"] == "FAIL"
    limits = [m["summary"]["max_compliant_input_dbm"] for m in doc["modes"]]
    assert limits == [pytest.approx(-16 / 3, abs=0.01)] * 2
    low, high = (s["verdict"] for s in doc["summary"]["mode_status"])
    assert low.startswith("INCOMPLETE") and "4.67 dB below" in low  # no compression figure
    assert high.startswith("FAIL") and "5.33 dB above" in high


def test_tune_sweeps_each_mode_over_its_own_report_range(tmp_path):
    # Each mode's [report] tune range is swept when no range is given.
    text = (
        SWITCHED.replace(
            '[[mode]]\nname = "VHF"\n',
            '[[mode]]\nname = "VHF"\n[mode.report]\ntune = { start = "150 MHz", stop = "170 MHz", step = "5 MHz" }\n',
        )
        + '[mode.report]\ntune = { start = "440 MHz", stop = "460 MHz", step = "10 MHz" }\n'
    )
    text = text.replace("[analysis]", '[mask]\nuse = ["itu-sm329-cat-a"]\n\n[analysis]')
    doc = as_json(invoke("tune", write(tmp_path, "t.toml", text), "--format", "json", expect=None).stdout)
    assert [m["summary"]["channels"] for m in doc["modes"]] == [5, 3]  # (170-150)/5 + 1, (460-440)/10 + 1


def test_the_two_band_example_runs_in_both_bands():
    path = example_path().parent / "two_band_radio.toml"
    assert "invented" in path.read_text(encoding="utf-8").splitlines()[0].lower()
    modes = load_modes(path)
    assert [m.name for m in modes] == ["VHF band", "UHF band"]
    vhf, uhf = (m.lineup for m in modes)
    # The switched low-pass: 190 MHz in the VHF band, 520 MHz in the UHF band, as written.
    assert (vhf.stages[-1].prototype.edge_hz, uhf.stages[-1].prototype.edge_hz) == (190e6, 520e6)
    assert uhf.carriers[0].power_dbm == pytest.approx(0.0)  # the mode's drive, not its -8 dBm
    invoke("check", path, expect=(0, 1))


def test_notes_of_each_mode_follow_its_marker_and_a_mode_without_notes_prints_none(tmp_path):
    from helpers import invoke

    from spurplan.io.resources import example_path

    # The two-band example: no mode has notes for tune, so stderr holds no marker at all.
    r = invoke("tune", example_path("two_band_radio.toml"), expect=0)
    assert "note: mode" not in r.stderr


def test_yield_over_modes_counts_the_same_units_in_every_mode(tmp_path):
    import json

    from helpers import invoke

    # One amplifier (pure polynomial: gain 20 dB, OIP3 +30 dBm, OIP2 +40 dBm, +10 dBm out).
    # The harmonics of a polynomial sit below the two-tone products of the same order:
    # HD3 = IM3 - 20 log10(3) and HD2 = IM2 - 20 log10(2) (a3 A^3/4 against 3 a3 A^3/4, a2 A^2/2
    # against a2 A^2; Razavi, RF Microelectronics 2e, 2.2, from memory), so
    # H3 = 3 Pout - 2 OIP3 - 9.542 = -39.542 dBm and H2 = 2 Pout - OIP2 - 6.021 = -26.021 dBm.
    # OIP3 and OIP2 spread uniformly by +-1 dB, independently (README "Tolerances and
    # corners").  Mode A holds H3 (300 MHz) to -39.542 dBm: a unit passes when its OIP3
    # shift d3 >= 0, probability 1/2.  Mode B holds H2 (200 MHz) to -26.521 dBm: it passes
    # when d2 >= 0.5, probability 1/4.  The same units in
    # both modes pass both with probability 1/2 x 1/4 = 1/8 (independent draws), not the
    # lowest mode's 1/4.
    text = """# invented test lineup
[[carrier]]
freq = "100 MHz"
power = "-10 dBm"
[[stage]]
kind = "amplifier"
name = "amp"
gain = "20 dB"
oip3 = "+30 dBm"
oip2 = "+40 dBm"
tolerance = { oip3 = { uniform = "1 dB" }, oip2 = { uniform = "1 dB" } }
[[mode]]
name = "A"
[[mode.mask.band]]
name = "third"
start = "290 MHz"
stop = "310 MHz"
limit = "-39.542 dBm"
rbw = "1 MHz"
[[mode]]
name = "B"
[[mode.mask.band]]
name = "second"
start = "190 MHz"
stop = "210 MHz"
limit = "-26.521 dBm"
rbw = "1 MHz"
"""
    path = tmp_path / "two.toml"
    path.write_text(text)
    n = 20000
    doc = json.loads(invoke("yield", path, "--samples", n, "--format", "json").stdout)
    fractions = [m["summary"]["yield"] for m in doc["modes"]]
    sigma = lambda p: (p * (1 - p) / n) ** 0.5  # noqa: E731  binomial standard error
    # 0.01: the cubic compresses the carrier by a few thousandths of a dB at the limit.
    assert abs(fractions[0] - 0.5) < 4 * sigma(0.5) + 0.01
    assert abs(fractions[1] - 0.25) < 4 * sigma(0.25) + 0.01
    verdict = doc["summary"]["verdict"]
    joint = float(verdict.split("MODES: ")[1].split(" %")[0]) / 100
    assert abs(joint - 0.125) < 4 * sigma(0.125) + 0.01
    assert "the same units in each" in verdict
    # The amplifier states no compression or noise figure: the line over all modes says so,
    # as each mode's own does (a doubtful number is never shown bare).
    assert "INCOMPLETE" in verdict and "no compression" in verdict
