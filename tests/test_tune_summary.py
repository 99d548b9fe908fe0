"""The tuning sweep's summary per product and rule or band, its wording and its figure."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from click.testing import CliRunner

import spurplan
from spurplan.analyses.sweep import tune_sweep
from spurplan.cli import main
from spurplan.io.lineup_file import from_dict
from spurplan.io.resources import example_path

# An invented PA: +10 dBm out of a 20 dB amplifier whose 3rd harmonic is stated at
# -100 dBc at that output, then a lossless 5th-order Butterworth low-pass at 893 MHz.  The
# mask is one protected band, RR 5.340 1400-1427 MHz, held to -110 dBm in 1 MHz.
FC_HZ = 893e6
LIMIT_DBM = -110.0
H3_DBM = 10.0 - 100.0  # the 3rd harmonic at the amplifier output (stated figure)
BAND = (1400e6, 1427e6)


def _pa_lowpass_lineup():
    doc = {
        "lineup": {"name": "harmonic into a protected band (invented)"},
        "carrier": [{"freq": "470 MHz", "power": "-10 dBm"}],
        "stage": [
            {"kind": "amplifier", "name": "pa", "gain": "20 dB", "h3": "-100 dBc @ +10 dBm"},
            {
                "kind": "filter",
                "name": "lpf",
                "prototype": {
                    "family": "butterworth",
                    "order": 5,
                    "cutoff": "893 MHz",
                    "q_inductor": "lossless",
                    "q_capacitor": "lossless",
                    "floor": "none",
                },
            },
        ],
        "mask": {"use": [{"name": "itu-rr-5.340", "limit": "-110 dBm", "rbw": "1 MHz"}]},
        "analysis": {"max_order": 5},
    }
    return from_dict(doc, name="band-entry.toml")


def _butterworth_loss_db(f_hz):
    # Doubly terminated Butterworth: |S21|^2 = 1 / (1 + (f/fc)^(2n)) (Zverev, Handbook of
    # Filter Synthesis, ch. 1; from memory).
    return 10 * math.log10(1 + (f_hz / FC_HZ) ** 10)


@pytest.fixture(scope="module")
def band_sweep():
    # 464 to 478 MHz in 100 kHz steps: 3 f crosses both edges of the band.
    return tune_sweep(_pa_lowpass_lineup(), np.round(np.arange(464e6, 478e6 + 1, 100e3)))


def test_summary_of_a_third_harmonic_crossing_a_protected_band(band_sweep):
    entries = [e for e in band_sweep.summary if e["label"] == "3f1"]
    assert len(entries) == 1
    e = entries[0]
    assert "1400-1427" in e["band"] and e["rule_is_band"]
    # First and last channels in the band, by hand: 3 f = 1400 MHz at f = 466.667 MHz, so
    # the first 100 kHz channel at or above it is 466.7 MHz; 3 f = 1427 MHz at 475.667 MHz,
    # the last channel at or below it 475.6 MHz (n f = band edge; common practice, no source).
    first = math.ceil((BAND[0] / 3 - 464e6) / 100e3) * 100e3 + 464e6
    last = math.floor((BAND[1] / 3 - 464e6) / 100e3) * 100e3 + 464e6
    assert (first, last) == (466.7e6, 475.6e6)
    assert len(e["runs"]) == 1
    assert e["runs"][0]["first_hz"] == pytest.approx(first)
    assert e["runs"][0]["last_hz"] == pytest.approx(last)
    assert e["channels"] == round((last - first) / 100e3) + 1 == 90
    # The low-pass rejects the harmonic least at the lowest channel in the band: the worst
    # channel is 466.7 MHz (product 1400.1 MHz), margin = limit - (H3 - loss), by hand.
    assert e["worst_channel_hz"] == pytest.approx(first)
    assert e["worst_freq_hz"] == pytest.approx(3 * first)
    hand = LIMIT_DBM - (H3_DBM - _butterworth_loss_db(3 * first))
    assert hand == pytest.approx(-0.42, abs=0.01)  # fails by 0.42 dB (arithmetic)
    # 0.005 dB: the cubic that makes h3 compresses the carrier by about 3e-4 dB, moving
    # the harmonic by 3 times that (Razavi, RF Microelectronics 2e, 2.2; from memory).
    assert e["worst_margin_db"] == pytest.approx(hand, abs=0.005)
    # It fails until the loss reaches 20 dB: 3 f = fc 99^(1/10), f = 470.97 MHz (solving
    # the Butterworth loss for 20 dB: 471.296 MHz; arithmetic).  The sweep refines that edge to 1 Hz; a
    # 0.005 dB tolerance on the levels moves it by at most 0.005 / (100 / ln 10 / f) Hz.
    # It fails from where it enters the band, 1400/3 MHz, refined to 1 Hz as well.
    edge = FC_HZ * 99**0.1 / 3
    slack = 0.005 / (100 / math.log(10) / edge)
    assert not e["pass"] and len(e["failing_ranges"]) == 1
    assert e["failing_ranges"][0]["start_hz"] == pytest.approx(BAND[0] / 3, abs=2.0)
    assert e["failing_ranges"][0]["stop_hz"] == pytest.approx(edge, abs=slack)
    n_fail = math.floor((edge - first) / 100e3) + 1  # channels 466.7 ... 471.2 MHz
    assert e["failing_channels"] == n_fail == 46
    # The summary is the sweep's own rows, grouped: every row of 3f1 is counted once.
    assert e["channels"] == sum(1 for lab in band_sweep.rows["label"] if lab == "3f1")


def test_summary_line_and_verdict_say_carrier_without_a_mixer(band_sweep):
    from spurplan.output.terminal import tune_text

    text = tune_text(band_sweep)
    line = next(t for t in text.splitlines() if "3f1" in t and "FAIL" in t)
    # One line: the band named once (not as the rule and again as the band).
    assert line.count("1400-1427") == 1
    assert "FAILS with the carrier from 466.666667 to 471.2" in line
    assert "lands there with the carrier from 466.700000 to 475.600000 MHz (90 channels)" in line
    assert "worst -0.42 dB with the carrier at 466.700000 MHz" in line
    assert "TUNING RANGE: FAILS on 46 of 141 channels" in text
    assert "Per channel" not in text
    table = tune_text(band_sweep, per_channel=True)
    lines = table.splitlines()
    head = next(i for i, t in enumerate(lines) if t.startswith("Per channel"))
    assert lines[head + 1].lstrip().startswith("carrier (MHz)")
    rows = lines[head + 3 : head + 3 + len(band_sweep.rows["label"])]
    # The per-channel table stays under 120 characters (the tool's own width rule).
    assert max(len(t) for t in lines[head + 1 : head + 3 + len(rows)]) <= 120
    assert len(rows) == 90 and all("1400-1427" in t for t in rows)


@pytest.mark.slow
def test_with_a_mixer_the_swept_value_is_called_the_lo(tmp_path):
    # The low-side example fails 2LO-IF in the output band-pass; its sweep moves the LO.
    path = str(example_path("upconverter_low_side.toml"))
    args = ["tune", path, "--start", "586 MHz", "--stop", "610 MHz", "--step", "2 MHz"]
    out = CliRunner().invoke(main, [*args, "--per-channel"])
    assert out.exit_code == 1, out.output
    text = out.stdout
    assert "the LO from 586.000000 to 610.000000 MHz" in text.splitlines()[0]
    assert "FAILS with the LO from" in text
    assert "carrier" not in text.replace("carrier for", "")
    assert any(t.lstrip().startswith("LO (MHz)") for t in text.splitlines())
    doc = json.loads(CliRunner().invoke(main, [*args, "--format", "json"]).stdout)
    assert doc["summary"]["swept"] == "LO"
    worst = doc["summary"]["by_product"][0]
    assert worst["label"] == "2LO-IF" and worst["worst_margin_db"] < 0
    # 2LO-IF = 2 f_LO - 295 MHz (arithmetic): its frequency at the worst LO.
    assert worst["worst_freq_hz"] == pytest.approx(2 * worst["worst_channel_hz"] - 295e6)


@pytest.mark.slow
def test_tuning_figure_draws_no_line_through_two_products():
    import matplotlib.lines

    from spurplan.output.plots import close, tune_figure

    low = spurplan.load(example_path("upconverter_low_side.toml"))
    sweep = tune_sweep(low, np.arange(570e6, 610e6 + 1, 1e6))
    labels = np.asarray(sweep.labels, dtype=object)
    # The case can catch a joined trace: some slot holds different products on different
    # channels (products are merged by frequency, so slots reorder as the LO moves).
    assert any(len(set(labels[:, g])) > 1 for g in range(labels.shape[1]))
    fig = tune_figure(sweep)
    x_mhz = sweep.carrier_hz / 1e6
    traces = [ln for ln in fig.axes[0].get_lines() if str(ln.get_gid()).startswith("product:")]
    assert traces and all(isinstance(ln, matplotlib.lines.Line2D) for ln in traces)
    for ln in traces:
        label = ln.get_gid().removeprefix("product:")
        xs, ys = ln.get_xdata(), ln.get_ydata()
        idx = [int(np.argmin(np.abs(x_mhz - x))) for x in xs]
        # Consecutive channels, and at every point that same product at that frequency.
        assert np.all(np.diff(idx) == 1)
        for i, y in zip(idx, ys, strict=True):
            same = [g for g in range(labels.shape[1]) if labels[i, g] == label]
            assert any(abs(sweep.freq_hz[i, g] / 1e6 - y) < 1e-6 for g in same), (label, x_mhz[i], y)
    close(fig)


def test_passing_sweep_states_its_least_margin_and_where():
    from dataclasses import replace

    from spurplan.io.mask_files import read_mask
    from spurplan.output.verdicts import tune_verdict

    # The same chain with the band held to -90 dBm: the 3rd harmonic (-90 dBm before the
    # filter) then passes on every channel by the filter's loss at 3 f, least where 3 f
    # is lowest in the band: the first channel at or above 1400/3 MHz, 466.7 MHz (n f = band
    # edge; common practice, no source).  Margin = limit - (H3 - loss) = loss(1400.1 MHz).
    lu = _pa_lowpass_lineup()
    lu = replace(
        lu,
        mask=read_mask(
            {"use": [{"name": "itu-rr-5.340", "limit": "-90 dBm", "rbw": "1 MHz"}]}, "t.toml", "."
        ),
    )
    sweep = tune_sweep(lu, np.round(np.arange(464e6, 478e6 + 1, 100e3)))
    assert sweep.passed
    least = sweep.least_margin
    hand = -90.0 - (H3_DBM - _butterworth_loss_db(3 * 466.7e6))
    assert least["channel_hz"] == pytest.approx(466.7e6)
    assert least["label"] == "3f1"
    assert least["margin_db"] == pytest.approx(hand, abs=0.005)
    line = tune_verdict(sweep)[0]
    assert f"least margin {hand:+.2f} dB (3f1 at 1400.100 MHz) with the carrier at 466.700000 MHz" in line
    assert f"least margin {hand:+.2f} dB" in tune_verdict(sweep, "report")[0]
