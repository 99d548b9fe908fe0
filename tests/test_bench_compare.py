"""A measured trace beside the plan: the RBW conversion of a noise floor, peak matching on
a trace with a known set of spurs, and the trace judged against the mask."""

from __future__ import annotations

import math

import numpy as np
import pytest
from helpers import as_json, run_in_process, write

from spurplan.analyses.bench_compare import check_trace, compare, level_in_rbw_dbm, predictions
from spurplan.analyses.check import check
from spurplan.io.lineup_file import from_dict
from spurplan.io.traces import make_trace
from spurplan.notices import PLANNING_NOTICE


def _lineup(mask_start="30 MHz", mask_stop="1 GHz"):
    # Invented: one amplifier at 100 MHz, +10 dBm out; a -36 dBm / 100 kHz spurious limit.
    doc = {
        "lineup": {"name": "bench test (invented)"},
        "carrier": [{"freq": "100 MHz", "power": "-10 dBm"}],
        "stage": [
            {
                "kind": "amplifier",
                "name": "pa",
                "gain": "20 dB",
                "oip3": "+30 dBm",
                "oip2": "+40 dBm",
                "noise_figure": "5 dB",
            }
        ],
        "analysis": {"max_order": 4},
        "mask": {"rule": [{"start": mask_start, "stop": mask_stop, "limit": "-36 dBm", "rbw": "100 kHz"}]},
    }
    return from_dict(doc, name="bench-test.toml")


def _flat(f, level_dbm, rbw_hz, detector="peak", spurs=()):
    """A flat trace at ``level_dbm`` with single-point spurs ``(freq_hz, level_dbm)``."""
    level = np.full(f.shape, float(level_dbm))
    for fs, ls in spurs:
        i = int(np.argmin(np.abs(f - fs)))
        level[i] = ls
    return make_trace(f, level, rbw_hz, detector, None, "synthetic (invented)")


# --- RBW conversion of a noise floor ----------------------------------------------------------


def test_white_noise_floor_converts_by_10_log10_of_the_bandwidth_ratio():
    # White Gaussian noise (numpy) of variance s^2 volts across 50 ohm, sampled at fs:
    # its one-sided density is D = (s^2 / R) / (fs / 2) W/Hz (Parseval; common practice, no
    # source).  An N-point rectangular-window periodogram bin, averaged over K segments,
    # reads D x fs/N: the trace's RBW is its bin's noise bandwidth fs/N.  In a 100 kHz
    # RBW the floor must read D + 10 log10(100 kHz), i.e. the trace's level +
    # 10 log10(RBW2 / RBW1) (common practice, no source), within the average's scatter.
    rng = np.random.default_rng(17)
    fs, n, k, r_ohm, sigma_v = 2e6, 2000, 64, 50.0, 1e-4
    x = rng.normal(0.0, sigma_v, (k, n))
    spectrum = np.fft.rfft(x, axis=1)
    p_w = (2 * np.abs(spectrum) ** 2 / (n**2 * r_ohm)).mean(axis=0)[1:-1]  # one-sided, DC and fs/2 left out
    f = np.arange(1, n // 2) * fs / n
    rbw1 = fs / n  # 1 kHz
    trace = make_trace(f, 10 * np.log10(p_w * 1e3), rbw1, "rms")
    density_dbm_hz = 10 * math.log10(sigma_v**2 / r_ohm / (fs / 2) * 1e3)
    assert np.median(trace.level_dbm) == pytest.approx(density_dbm_hz + 10 * math.log10(rbw1), abs=0.3)
    converted, resolved = level_in_rbw_dbm(trace, 100e3)
    inner = (f > 100e3) & (f < fs / 2 - 100e3)
    assert resolved
    # 100 bins x 64 segments averaged: the scatter is about 4.34 / sqrt(6400) = 0.05 dB.
    assert np.mean(converted[inner]) == pytest.approx(density_dbm_hz + 10 * math.log10(100e3), abs=0.1)
    assert np.max(np.abs(converted[inner] - (density_dbm_hz + 50.0))) < 0.3


def test_flat_floor_converts_exactly_and_a_narrower_rule_keeps_the_reading():
    # A flat -100 dBm in 10 kHz reads -100 + 10 log10(100 kHz / 10 kHz) = -90 dBm in 100 kHz
    # (arithmetic); in 1 kHz the trace cannot resolve the rule: the reading is kept (an
    # upper bound: a narrower window holds less power).
    f = np.arange(0, 201) * 10e3 + 50e6
    trace = _flat(f, -100.0, 10e3)
    wide, resolved = level_in_rbw_dbm(trace, 100e3)
    assert resolved and np.allclose(wide, -90.0, atol=1e-9)
    narrow, resolved = level_in_rbw_dbm(trace, 1e3)
    assert not resolved and np.allclose(narrow, -100.0)


def test_cw_line_is_not_scaled_by_the_bandwidth_ratio():
    # A CW line seen through a Gaussian 10 kHz (3 dB) RBW filter, sampled every 500 Hz: in a
    # 100 kHz RBW it reads its own power, not +10 dB.  The sum over the filter's shape
    # gives the line times ENBW / RBW_3dB = 1.0645 for a Gaussian (from memory): +0.27 dB
    # at most, the conservative side.
    f = np.arange(-100e3, 100e3 + 1, 500.0) + 200e6
    rbw = 10e3
    shape_db = -3.0103 * (2 * (f - 200e6) / rbw) ** 2  # Gaussian: -3 dB at +-RBW/2 (definition)
    level = 10 * np.log10(10 ** (-30.0 / 10) * 10 ** (shape_db / 10) + 10 ** (-130.0 / 10))
    trace = make_trace(f, level, rbw, "peak")
    converted, _ = level_in_rbw_dbm(trace, 100e3)
    at_line = converted[np.argmin(np.abs(f - 200e6))]
    assert -30.0 <= at_line <= -30.0 + 10 * math.log10(1.0645) + 0.01


# --- peaks matched to a lineup's products -------------------------------------------------------


def test_peaks_match_the_predicted_products_with_their_known_offsets():
    # The lineup's own predictions place the spurs (positions and levels are the plan's);
    # the trace offsets each by a known amount, moves one by 10 kHz (within the 3 RBW
    # tolerance), leaves 2f1 out and adds a spur at 250 MHz that no product explains.
    lineup = _lineup()
    outcome = check(lineup)
    preds = {p.label: p for p in predictions(lineup, 10e3, outcome)}
    assert {"f1", "2f1", "3f1"} <= set(preds)
    offsets_db = {"f1": +0.5, "3f1": -2.0}
    f = np.arange(50e6, 450e6 + 1, 10e3)
    rng = np.random.default_rng(3)
    level = -110.0 + rng.normal(0.0, 0.3, f.size)
    spurs = {label: (preds[label].freq_hz, preds[label].level_dbm + d) for label, d in offsets_db.items()}
    spurs["3f1"] = (spurs["3f1"][0] + 10e3, spurs["3f1"][1])
    for fs, ls in [*spurs.values(), (250e6, -60.0)]:
        level[int(np.argmin(np.abs(f - fs)))] = ls
    assert preds["3f1"].level_dbm + offsets_db["3f1"] > -110.0 + 10.0  # the placed 3f1 stands out
    found = compare(lineup, make_trace(f, level, 10e3, "peak", None, "synthetic (invented)"), outcome=outcome)
    got = {m.prediction.label: m for m in found.matches}
    assert set(got) == set(offsets_db)
    for label, d in offsets_db.items():
        assert got[label].difference_db == pytest.approx(d, abs=1e-9)  # placed by hand above
    assert got["3f1"].offset_hz == pytest.approx(10e3)
    assert got["3f1"].prediction.stage == "pa"
    assert [round(k.freq_hz) for k in found.unmatched] == [250_000_000]
    assert [n.prediction.label for n in found.not_seen] == ["2f1"]
    assert found.not_seen[0].detectable


def test_a_spur_beyond_the_tolerance_is_not_matched():
    # 2f1 moved 50 kHz: beyond a tolerance of 3 x 10 kHz, it is an unmatched peak and 2f1
    # is not seen (arithmetic).
    lineup = _lineup()
    outcome = check(lineup)
    preds = {p.label: p for p in predictions(lineup, 10e3, outcome)}
    f = np.arange(150e6, 250e6 + 1, 10e3)
    trace = _flat(f, -110.0, 10e3, spurs=[(preds["2f1"].freq_hz + 50e3, preds["2f1"].level_dbm)])
    found = compare(lineup, trace, outcome=outcome)
    assert not found.matches
    assert [round(k.freq_hz) for k in found.unmatched] == [round(preds["2f1"].freq_hz + 50e3)]
    assert [n.prediction.label for n in found.not_seen] == ["2f1"]


# --- the trace against the mask ----------------------------------------------------------------


def test_a_point_above_a_dbm_limit_fails_by_the_hand_computed_margin():
    # One point at -30 dBm in a 10 kHz RBW (points 10 kHz apart) on a -100 dBm floor; the
    # rule is -36 dBm in 100 kHz.  In 100 kHz the window holds 11 points: mean power x 10 =
    # (1e-3 + 10 x 1e-10) / 11 x 10 mW = -30.41 dBm, below the point's own -30 dBm, so
    # the line reads -30 dBm and fails by -36 - (-30) = -6.00 dB (arithmetic).
    lineup = _lineup("50 MHz", "450 MHz")
    outcome = check(lineup)
    f = np.arange(50e6, 450e6 + 1, 10e3)
    trace = _flat(f, -100.0, 10e3, spurs=[(100e6, 10.0), (200e6, -30.0)])
    mask = check_trace(outcome, trace, 30e3)
    assert mask.status == "FAIL"
    assert mask.worst.margin_db == pytest.approx(-6.0, abs=1e-9)
    assert mask.worst.freq_hz == pytest.approx(200e6)
    assert mask.worst.level_dbm == pytest.approx(-30.0, abs=1e-9)


def test_a_floor_below_the_limit_passes_with_the_converted_margin():
    # -80 dBm in 10 kHz is -70 dBm in 100 kHz: margin -36 - (-70) = +34 dB (arithmetic); the
    # carrier at 100 MHz (+10 dBm) is the carrier, not judged; peak detector, trace over
    # the rule's whole range: PASS.  The same trace without a stated detector is UNCERTAIN.
    lineup = _lineup("50 MHz", "450 MHz")
    outcome = check(lineup)
    f = np.arange(50e6, 450e6 + 1, 10e3)
    mask = check_trace(outcome, _flat(f, -80.0, 10e3, spurs=[(100e6, 10.0)]), 30e3)
    assert mask.status == "PASS"
    assert mask.worst.margin_db == pytest.approx(34.0, abs=1e-9)
    unknown = check_trace(outcome, _flat(f, -80.0, 10e3, detector=None, spurs=[(100e6, 10.0)]), 30e3)
    assert unknown.status == "UNCERTAIN" and "detector is not stated" in unknown.worst.reason


def test_a_trace_wider_than_the_rules_rbw_never_passes():
    # A 300 kHz RBW against a 100 kHz rule cannot resolve the limit: a floor 10 dB under it
    # is at best UNCERTAIN, a point above it fails (a line reads the same in any wider RBW).
    lineup = _lineup("50 MHz", "450 MHz")
    outcome = check(lineup)
    f = np.arange(50e6, 450.3e6, 300e3)
    quiet = check_trace(outcome, _flat(f, -46.0, 300e3, spurs=[(100e6, 10.0)]), 900e3)
    assert quiet.status == "UNCERTAIN" and not quiet.worst.resolved
    assert "wider than the rule's" in quiet.worst.reason
    loud = check_trace(outcome, _flat(f, -46.0, 300e3, spurs=[(100e6, 10.0), (200.1e6, -35.0)]), 900e3)
    assert loud.status == "FAIL" and loud.worst.margin_db == pytest.approx(-1.0, abs=1e-9)


def test_a_trace_that_does_not_span_the_rule_is_incomplete():
    lineup = _lineup()  # the rule covers 30 MHz to 1 GHz
    outcome = check(lineup)
    f = np.arange(50e6, 450e6 + 1, 10e3)
    mask = check_trace(outcome, _flat(f, -80.0, 10e3, spurs=[(100e6, 10.0)]), 30e3)
    assert mask.status == "INCOMPLETE" and "30 to 1000 MHz" in mask.uncovered[0]


# --- the command line ---------------------------------------------------------------------------

LINEUP = """# Invented scenario for the compare tests.
[lineup]
name = "bench cli (invented)"
[[carrier]]
freq = "100 MHz"
power = "-10 dBm"
[[stage]]
kind = "amplifier"
name = "pa"
gain = "20 dB"
oip3 = "+30 dBm"
oip2 = "+40 dBm"
noise_figure = "5 dB"
[analysis]
max_order = 3
[mask]
[[mask.rule]]
start = "50 MHz"
stop = "450 MHz"
limit = "-36 dBm"
rbw = "100 kHz"
"""


def _trace_file(tmp_path, spur_dbm):
    f = np.arange(50e6, 450e6 + 1, 100e3)
    level = np.full(f.shape, -100.0)
    level[np.argmin(np.abs(f - 100e6))] = 10.0
    level[np.argmin(np.abs(f - 200e6))] = spur_dbm
    text = "# invented synthetic trace\n# rbw = 100 kHz\n# detector = peak\nFrequency (MHz),Level (dBm)\n"
    text += "".join(f"{a / 1e6:.6f},{b:.2f}\n" for a, b in zip(f, level, strict=True))
    return write(tmp_path, "trace.csv", text)


@pytest.mark.slow
def test_compare_cli_table_json_and_exit_status(tmp_path):
    lineup = write(tmp_path, "lineup.toml", LINEUP)
    code, out, err, detail, _ = run_in_process(["compare", str(lineup), str(_trace_file(tmp_path, -30.0))])
    assert code == 1, err + detail  # the trace fails the mask: -30 dBm against -36 dBm
    assert "TRACE AGAINST MASK: FAIL, least margin -6.00 dB" in out
    assert "BENCH AGAINST PLAN:" in out and PLANNING_NOTICE in out
    code, out, err, detail, _ = run_in_process(
        ["compare", str(lineup), str(_trace_file(tmp_path, -50.0)), "--format", "json"]
    )
    assert code == 0, err + detail
    doc = as_json(out)
    assert doc["summary"]["notice"] == PLANNING_NOTICE
    assert doc["summary"]["mask"]["status"] == "PASS"
    seen = [r for r in doc["products"] if r["status"] == "seen"]
    assert {r["label"] for r in seen} >= {"f1", "2f1"}


@pytest.mark.slow
def test_check_plot_draws_the_trace_in_the_limit_lines_rbw(tmp_path):
    from spurplan.io.traces import read_trace
    from spurplan.output.plots import check_figure, close

    lineup = write(tmp_path, "lineup.toml", LINEUP)
    trace_path = _trace_file(tmp_path, -50.0)
    code, _, err, detail, _ = run_in_process(
        ["check", str(lineup), "--trace", str(trace_path), "--plot", str(tmp_path / "p.png")]
    )
    assert code in (0, 1) and (tmp_path / "p.png").stat().st_size > 0, err + detail
    from spurplan.io.lineup_file import load

    outcome = check(load(lineup))
    fig = check_figure(outcome, trace=read_trace(trace_path))
    line = next(ln for ln in fig.axes[0].get_lines() if ln.get_gid() == "measured-trace")
    y = np.asarray(line.get_ydata())
    # The floor, -100 dBm in the trace's 100 kHz RBW, is -100 dBm in the rule's 100 kHz.
    assert np.median(y) == pytest.approx(-100.0, abs=1e-9)
    close(fig)
    code, _, err, _, _ = run_in_process(["check", str(lineup), "--trace", str(trace_path)])
    assert code == 2 and "--plot" in err


def test_compare_on_a_file_with_modes_needs_one_mode(tmp_path):
    from helpers import invoke

    from spurplan.io.resources import example_path

    # A trace is measured in one operating mode: over several the command asks which.
    trace = tmp_path / "t.csv"
    rows = "\n".join(f"{100 + 0.01 * i:.2f},-90" for i in range(200))
    trace.write_text(f"# rbw = 100 kHz\n# detector = peak\nfreq_mhz,level_dbm\n{rows}\n")
    r = invoke("compare", example_path("two_band_radio.toml"), trace, expect=2)
    assert "--mode" in r.stderr and len(r.stderr.strip().splitlines()) == 1


def test_a_line_between_points_is_read_at_its_own_level_and_frequency():
    from spurplan.analyses.bench_compare import find_peaks

    # A -40 dBm line at 100.0123 MHz seen through a Gaussian RBW filter (3 dB wide at the
    # 100 kHz RBW: a parabola in dB, -12.04 (df/RBW)^2 dB; common practice, no source) on
    # points 50 kHz apart.  The highest point (100.000 MHz, 12.3 kHz off) under-reads it by
    # 12.04 x 0.123^2 = 0.18 dB; the vertex through the three highest points is exact.
    f = np.arange(99e6, 101e6 + 1, 50e3)
    line = -40.0 - 10 * math.log10(math.e) * 4 * math.log(2) * ((f - 100.0123e6) / 100e3) ** 2
    level = 10 * np.log10(10 ** (line / 10) + 10 ** (-120 / 10))
    trace = make_trace(f, level, 100e3, "peak", None, "synthetic (invented)")
    (peak,) = find_peaks(trace, np.full(f.size, -120.0), 10.0)
    assert float(np.max(level)) == pytest.approx(-40.0 - 12.04 * 0.123**2, abs=0.01)
    assert peak.level_dbm == pytest.approx(-40.0, abs=1e-6)
    assert peak.freq_hz == pytest.approx(100.0123e6, abs=1.0)
