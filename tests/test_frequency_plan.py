"""Frequency planning of a converter (`spurplan if-windows`, analyses/frequency_plan.py).

The reference is the mixer product rule: an upconverting mixer driven by ``f_LO`` and
``f_IF`` puts products at ``|m f_LO + n f_IF|`` (common practice, no source), and with
the LO tuned to the output channel ``f_RF`` the LO is ``f_RF - f_IF`` (upper sideband,
low-side LO) or ``f_RF + f_IF`` (lower sideband, high-side LO) (common practice, no
source).  The windows below are enumerated by hand in the comments from that rule; a
brute-force loop over every candidate, channel and product (written here, independent
of the module's vectorised search) checks the cases too large to write out.
"""

from __future__ import annotations

import math
import re
import shlex
from pathlib import Path

import numpy as np
import pytest

from spurplan.analyses import frequency_plan as fp
from spurplan.analyses.frequency_plan import plan_if
from spurplan.errors import LineupError, SweepError
from spurplan.io.lineup_file import from_dict, load
from spurplan.notices import PLANNING_NOTICE
from tests.helpers import as_json, assert_one_error_line, invoke, run_in_process, write

MHZ = 1e6
ROOT = Path(__file__).resolve().parents[1]
CHANNELS = np.array([430.0, 435.0, 440.0]) * MHZ


def _lineup(sideband="upper", lo="285 MHz", if_freq="150 MHz", bands=(), stages_after=(), bandwidth=None):
    """A mixer lineup (invented); ``bands`` as (name, start, stop) protected bands of the mask."""
    carrier = {"freq": if_freq, "power": "-10 dBm"}
    if bandwidth:
        carrier["bandwidth"] = bandwidth
    doc = {
        "lineup": {"name": "planner test (invented)"},
        "carrier": [carrier],
        "stage": [
            {
                "kind": "mixer",
                "name": "mixer",
                "lo": {"freq": lo, "power": "+7 dBm"},
                "conversion_loss": "7 dB",
                "sideband": sideband,
            },
            *stages_after,
        ],
        "analysis": {"max_order": 5},
    }
    if bands:
        doc["mask"] = {
            "band": [
                {"name": n, "start": a, "stop": b, "limit": "-70 dBm", "rbw": "1 MHz"} for n, a, b in bands
            ]
        }
    return from_dict(doc, name="plan-test.toml")


def _windows_mhz(plan):
    return [(w.start_hz / MHZ, w.stop_hz / MHZ) for w in plan.windows]


def _bad_set(if_mhz, bad_ranges):
    """Candidates (MHz) inside any of the closed ranges (MHz), as a boolean mask."""
    f = np.asarray(if_mhz)
    out = np.zeros(f.shape, dtype=bool)
    for lo, hi in bad_ranges:
        out |= (f >= lo - 1e-9) & (f <= hi + 1e-9)
    return out


# The small case: output channels 430, 435 and 440 MHz (no bandwidth, no filter after the
# mixer, so the output passband is 430-440 MHz), IF candidates 100-250 MHz in 1 MHz steps,
# order 3, upper sideband: LO = RF - IF, so a product is at |m RF + (n - m) IF|.
#
# The m x n chart to order 3 (m >= 0, m + |n| <= 3, the wanted LO+IF left out), and the
# IFs that put each product in [430, 440] MHz on some channel:
#   IF      (0,1)  IF                      100..250: never in 430-440
#   LO      (1,0)  RF - IF                 180..340: never
#   2IF     (0,2)  2 IF                    in for IF 215..220
#   LO-IF   (1,-1) |RF - 2 IF|             in only for IF <= 5 or >= 430: never here
#   2LO     (2,0)  2 (RF - IF)             RF 430: IF 210..215; 435: 215..220; 440: 220..225
#   3IF     (0,3)  3 IF                    IF 143.33..146.67: candidates 144..146
#   LO+2IF  (1,2)  RF + IF                 >= 530: never
#   LO-2IF  (1,-2) |RF - 3 IF|             in for IF >= 286.67 only: never here
#   2LO+IF  (2,1)  2 RF - IF               in for IF >= 420 only: never here
#   2LO-IF  (2,-1) 2 RF - 3 IF             RF 430: IF 140..143.33; 435: 143.33..146.67;
#                                          440: 146.67..150  -> candidates 140..150
#   3LO     (3,0)  3 (RF - IF)             in for IF >= 283.33 only: never here
# Candidates that land: 140..150 and 210..225 (the edges 140, 150, 210 and 225 put a
# product exactly on a passband edge: 2*430 - 3*140 = 440, 2*440 - 3*150 = 430,
# 2*(430 - 210) = 440, 2*(440 - 225) = 430, and edges count as inside).
# Spur-free windows: 100..139 (39 MHz wide), 151..209 (58 MHz), 226..250 (24 MHz).
HAND_BAD = [(140, 150), (210, 225)]
HAND_WINDOWS = [(100.0, 139.0), (151.0, 209.0), (226.0, 250.0)]


def _small_plan(**kw):
    return plan_if(_lineup(), 100 * MHZ, 250 * MHZ, 1 * MHZ, order=3, channels_hz=CHANNELS, **kw)


def test_windows_match_the_hand_enumerated_chart():
    plan = _small_plan()
    f_mhz = plan.if_hz / MHZ
    assert np.array_equal(f_mhz, np.arange(100, 251))
    # The candidates that land, from the chart above (common practice, no source).
    assert np.array_equal(~plan.spur_free, _bad_set(f_mhz, HAND_BAD))
    # Widest first: 58, 39, 24 MHz (hand enumeration above).
    assert _windows_mhz(plan) == [HAND_WINDOWS[1], HAND_WINDOWS[0], HAND_WINDOWS[2]]
    assert [w.width_hz / MHZ for w in plan.windows] == [58.0, 39.0, 24.0]
    assert [w.points for w in plan.windows] == [59, 40, 25]
    assert plan.window_count == 3 and plan.found
    assert plan.passband_hz == (430 * MHZ, 440 * MHZ)
    # What ends each window: 2LO-IF lands at IF 150 (2*440 - 450 = 430) and IF 140
    # (860 - 420 = 440); 2LO lands at 210 (2*220 = 440) and 225 (2*215 = 430); the
    # lowest-order product landing is named (2IF at 215..220 is order 2, but 210 and 225
    # are hit by 2LO alone).
    w151, w100, w226 = plan.windows
    assert (w151.below.label, w151.below.side, w151.below.if_hz) == ("2LO-IF", "in", 150 * MHZ)
    assert (w151.above.label, w151.above.if_hz) == ("2LO", 210 * MHZ)
    assert w100.below is None and w100.above.label == "2LO-IF"
    assert w226.below.label == "2LO" and w226.above is None


def test_closest_product_and_its_distance_by_hand():
    plan = _small_plan(rank="clearance")
    # Window 226..250 (hand): the products nearest the passband are 2LO = 2 (RF - IF),
    # below it by 430 - 2 (440 - IF) = 2 IF - 450 at the 440 MHz channel, and 3LO =
    # 3 (RF - IF), above it by 3 (430 - IF) - 440 = 850 - 3 IF at 430 MHz; every other
    # product is further (2IF: 2 IF - 440 >= 12 and growing; 3LO-... see the chart).
    # min(2 IF - 450, 850 - 3 IF) grows up to IF 260, so the best candidate is 250:
    # 2LO at 2 (440 - 250) = 380 MHz, 50 MHz below the passband.
    w = next(w for w in plan.windows if w.start_hz == 226 * MHZ)
    assert w.best_if_hz == 250 * MHZ
    assert w.clearance_hz == pytest.approx(50 * MHZ, abs=1e-3)
    assert (w.closest.label, w.closest.side, w.closest.band) == ("2LO", "below", fp.PASSBAND_NAME)
    assert w.closest.freq_hz == pytest.approx(380 * MHZ, abs=1e-3)
    assert w.closest.channel_hz == 440 * MHZ and w.closest.lo_hz == 190 * MHZ
    # LO over the channels at IF 250: 430 - 250 .. 440 - 250.
    assert w.lo_range_hz == (180 * MHZ, 190 * MHZ)
    # Window 151..209 (hand): 2LO-IF is 430 - (2*440 - 3 IF) = 3 IF - 450 below, 2LO is
    # 2 (430 - IF) - 440 = 420 - 2 IF above; equal at IF 174: 72 MHz (both products).
    w = next(w for w in plan.windows if w.start_hz == 151 * MHZ)
    assert w.best_if_hz == 174 * MHZ
    assert w.clearance_hz == pytest.approx(72 * MHZ, abs=1e-3)
    assert w.closest.label in ("2LO-IF", "2LO")
    # Window 100..139 (hand): 2LO-IF is 2*430 - 3 IF - 440 = 420 - 3 IF above; LO is
    # 430 - (440 - IF) = IF - 10 below (and LO+2IF = RF + IF as far above at 430 MHz):
    # min(420 - 3 IF, IF - 10) is largest at IF 107: min(99, 97) = 97 MHz.
    w = next(w for w in plan.windows if w.start_hz == 100 * MHZ)
    assert w.best_if_hz == 107 * MHZ
    assert w.clearance_hz == pytest.approx(97 * MHZ, abs=1e-3)
    assert w.closest.label in ("LO", "LO+2IF")
    # Largest clearance first: 97, 72, 50 MHz.
    assert [round(w.clearance_hz / MHZ, 6) for w in plan.windows] == [97.0, 72.0, 50.0]


def test_protected_band_excludes_a_window():
    # IF 130..160 MHz, same channels and order.  Without bands (from the chart above):
    # 140..150 land, windows 130..139 and 151..160.  A protected band 809.5-867.5 MHz is
    # reached by 3LO = 3 (RF - IF) for every IF of 151..160 (RF 430: 3 (279..270) =
    # 837..810 MHz) and by nothing for IF 130..139: there 3LO >= 3 (430 - 139) = 873 MHz
    # and every other product to order 3 stays below 2 RF - IF <= 750 MHz (hand).
    lu = _lineup(bands=[("test band", "809.5 MHz", "867.5 MHz")])
    free = plan_if(lu, 130 * MHZ, 160 * MHZ, 1 * MHZ, order=3, channels_hz=CHANNELS, protected_bands=False)
    assert sorted(_windows_mhz(free)) == [(130.0, 139.0), (151.0, 160.0)]
    banded = plan_if(lu, 130 * MHZ, 160 * MHZ, 1 * MHZ, order=3, channels_hz=CHANNELS)
    assert _windows_mhz(banded) == [(130.0, 139.0)]
    assert banded.protected_bands and banded.bands[1] == ("test band", 809.5 * MHZ, 867.5 * MHZ)
    # 3LO at IF 151 on the 430 MHz channel: 3 * 279 = 837 MHz, inside the band.
    ends = banded.windows[0].above
    assert (ends.label, ends.band, ends.side) == ("2LO-IF", fp.PASSBAND_NAME, "in")


def test_a_product_that_jumps_a_narrow_band_between_candidates_splits_the_window():
    # One channel, 435 MHz (passband 435-435 MHz), IF 147..160 in 1 MHz steps, order 3:
    # no product lands on the passband point (hand, as the chart above with RF = 435).
    # A protected band 450.2-450.8 MHz: 3IF is 450 MHz at IF 150 and 453 MHz at 151, so it
    # passes through the band between the two candidates (a product linear in IF takes
    # every value in between: intermediate value theorem) though it lands at neither;
    # nothing else is near 450 MHz (2LO-IF = 870 - 3 IF <= 429, 2LO >= 550).
    lu = _lineup(bands=[("narrow", "450.2 MHz", "450.8 MHz")])
    plan = plan_if(lu, 147 * MHZ, 160 * MHZ, 1 * MHZ, order=3, channels_hz=[435 * MHZ])
    assert plan.spur_free.all()
    assert sorted(_windows_mhz(plan)) == [(147.0, 150.0), (151.0, 160.0)]
    low = next(w for w in plan.windows if w.start_hz == 147 * MHZ)
    assert (low.above.label, low.above.side, low.above.band) == ("3IF", "crosses", "narrow")


def test_lower_sideband_with_a_high_side_lo_follows_lo_equals_rf_plus_if():
    # Lower sideband, LO above the IF: LO = RF + IF, a product at |m RF + (m + n) IF|
    # (common practice, no source).  To order 3 with channels 430/435/440 and IF 100..250:
    #   2IF in for IF 215..220; 3IF for 143.33..146.67 (144..146); LO-2IF = RF - IF,
    #   LO = RF + IF, LO+IF = RF + 2 IF, 2LO ... all beyond 430-440 here (hand).
    # Windows 100..143, 147..214, 221..250.  (The upper-sideband rule would give
    # 100..139, 151..209, 226..250 instead: the rule is what is tested.)
    lu = _lineup(sideband="lower", lo="585 MHz")
    plan = plan_if(lu, 100 * MHZ, 250 * MHZ, 1 * MHZ, order=3, channels_hz=CHANNELS)
    assert plan.injection == "lower-lo-above"
    assert sorted(_windows_mhz(plan)) == [(100.0, 143.0), (147.0, 214.0), (221.0, 250.0)]


def test_lower_sideband_with_a_low_side_lo_follows_lo_equals_if_minus_rf():
    # Lower sideband, LO below the IF (the lineup: IF 500 MHz, LO 65 MHz, output 435 MHz):
    # RF = IF - LO, so LO = IF - RF (common practice, no source).  Order 2, IF 450..700:
    #   IF, 2IF: above 440; LO = IF - RF: 10..270; LO+IF = 2 IF - RF >= 460;
    #   2LO = 2 (IF - RF): in for IF - RF in 215..220, i.e. RF 430: 645..650,
    #   435: 650..655, 440: 655..660 -> candidates 645..660 land (hand).
    lu = _lineup(sideband="lower", lo="65 MHz", if_freq="500 MHz")
    plan = plan_if(lu, 450 * MHZ, 700 * MHZ, 1 * MHZ, order=2, channels_hz=CHANNELS)
    assert plan.injection == "lower-lo-below"
    assert _windows_mhz(plan) == [(450.0, 644.0), (661.0, 700.0)]


def _brute_force(plan, lineup_bands, order, wanted):
    """Spur-free mask by plain loops over candidates, channels and (m, n) (independent)."""
    s_rf, s_if = {"upper": (1, -1), "lower-lo-above": (1, 1), "lower-lo-below": (-1, 1)}[plan.injection]
    free = []
    for f_if in plan.if_hz:
        ok = True
        for rf in plan.channels_hz:
            lo = s_rf * rf + s_if * f_if
            for m in range(order + 1):
                for n in range(-order, order + 1):
                    if m + abs(n) == 0 or m + abs(n) > order or (m == 0 and n < 0) or (m, n) == wanted:
                        continue
                    f = abs(m * lo + n * f_if)
                    if any(a <= f <= b for a, b in lineup_bands):
                        ok = False
        free.append(ok)
    return np.array(free)


@pytest.mark.parametrize("block", [None, pytest.param(64, marks=pytest.mark.slow)])
def test_vectorised_search_equals_brute_force_loops(monkeypatch, block):
    # Several bands, 21 channels, order 5; the brute force loops over everything (this
    # file).  With a tiny block the search runs in many chunks of candidates and
    # channels, whose seams must not change the answer.
    if block is not None:
        monkeypatch.setattr(fp, "BLOCK_ELEMENTS", block)
    bands = [("a", "610 MHz", "622 MHz"), ("b", "1164 MHz", "1215 MHz"), ("c", "95 MHz", "96 MHz")]
    lu = _lineup(bands=bands, bandwidth="200 kHz")
    channels = np.arange(430, 440.01, 0.5) * MHZ
    plan = plan_if(lu, 40 * MHZ, 120 * MHZ, 0.5 * MHZ, order=5, channels_hz=channels)
    edges = [(plan.passband_hz[0], plan.passband_hz[1])] + [
        (a * MHZ, b * MHZ) for a, b in ((610, 622), (1164, 1215), (95, 96))
    ]
    # The passband with the 200 kHz channels: 430 - 0.1 to 440 + 0.1 MHz (definition).
    assert plan.passband_hz == pytest.approx((429.9 * MHZ, 440.1 * MHZ))
    expected = _brute_force(plan, edges, 5, (1, 1))
    assert np.array_equal(plan.spur_free, expected)
    # Every listed window is a run of brute-force spur-free candidates.
    for w in plan.windows:
        inside = (plan.if_hz >= w.start_hz) & (plan.if_hz <= w.stop_hz)
        assert expected[inside].all() and inside.sum() == w.points


def test_guard_widens_every_band():
    # A guard g widens the passband to [430 - g, 440 + g] MHz.  The candidates next to
    # the windows of the small case and the guard that makes them land (hand, chart above):
    #   IF 139: 2LO-IF = 2*430 - 3*139 = 443 (g >= 3);  IF 138: 446 (g >= 6)
    #   IF 151: 2LO-IF = 2*440 - 3*151 = 427 (g >= 3);  IF 152: 424 (g >= 6)
    #   IF 209: 2LO = 2 (430 - 209) = 442 (g >= 2);      IF 208: 444 (g >= 4)
    #   IF 226: 2LO = 2 (440 - 226) = 428 (g >= 2);      IF 227: 426 (g >= 4)
    # so a 1 MHz guard changes nothing and a 3.5 MHz guard gives 100..138, 152..208,
    # 227..250 (every other product is 50 MHz or more away in these windows).
    plan = _small_plan(guard_hz=3.5 * MHZ)
    assert sorted(_windows_mhz(plan)) == [(100.0, 138.0), (152.0, 208.0), (227.0, 250.0)]
    assert sorted(_windows_mhz(_small_plan(guard_hz=1 * MHZ))) == sorted(HAND_WINDOWS)
    # The clearance is measured from the widened band: at IF 250 2LO is 380 MHz, 50 MHz
    # below 430 and 46.5 MHz below 426.5 (hand).
    w = next(w for w in plan.windows if w.start_hz == 227 * MHZ)
    assert w.clearance_hz == pytest.approx(46.5 * MHZ, abs=1e-3)


def test_filter_passband_edges_match_the_butterworth_closed_form():
    # A lossless Butterworth band-pass, order 3, geometric centre f0 = 435 MHz, bandwidth
    # 20 MHz: |S21|^2 = 1 / (1 + W^(2N)), W = (f/f0 - f0/f) / (B/f0) (the low-pass to
    # band-pass mapping; Pozar, Microwave Engineering, 4th ed., 8.5, from memory).  Its
    # best in the tuned band (the channels straddle f0) is 0 dB; 3 dB down means
    # W = (10^0.3 - 1)^(1/6), f = f0 (u + sqrt(u^2 + 1)) with u = +-W B / (2 f0).
    bpf = {
        "kind": "filter",
        "name": "bpf",
        "prototype": {
            "family": "butterworth",
            "response": "bandpass",
            "order": 3,
            "center": "435 MHz",
            "bandwidth": "20 MHz",
            "q_inductor": "lossless",
            "q_capacitor": "lossless",
            "floor": "none",
        },
    }
    lu = _lineup(stages_after=[bpf])
    plan = plan_if(lu, 100 * MHZ, 120 * MHZ, 1 * MHZ, order=3, channels_hz=CHANNELS)
    w = (10**0.3 - 1) ** (1 / 6)
    f0, b = 435 * MHZ, 20 * MHZ
    lo = f0 * (-w * b / (2 * f0) + math.sqrt((w * b / (2 * f0)) ** 2 + 1))
    hi = f0 * (w * b / (2 * f0) + math.sqrt((w * b / (2 * f0)) ** 2 + 1))
    assert plan.passband_hz[0] == pytest.approx(lo, abs=2.0)
    assert plan.passband_hz[1] == pytest.approx(hi, abs=2.0)
    assert "bpf" in plan.passband_source


def test_mixer_products_are_the_chart_without_the_wanted_one():
    # To order 2 the chart holds IF, LO, 2IF, LO-IF, LO+IF, 2LO (m >= 0; m = 0 with n > 0);
    # the wanted LO+IF is left out, lowest order first (hand).
    got = [tuple(int(v) for v in r) for r in fp.mixer_products(2, (1, 1))]
    assert got == [(0, 1), (1, 0), (0, 2), (1, -1), (2, 0)]
    # Order 15: (N + 1)^2 - N - 1 = 240 vectors of order 1..15 with m >= 0 and the n < 0
    # half of m = 0 dropped (count: sum over m of 2 (N - m) + 1, minus N for m = 0, minus
    # the zero vector), less the wanted one: 239.
    assert len(fp.mixer_products(15, (1, -1))) == 239


def test_no_mixer_and_two_mixers_are_refused():
    pad = {"kind": "attenuator", "name": "pad", "loss": "3 dB"}
    mixer2 = {
        "kind": "mixer",
        "name": "second",
        "lo": {"freq": "1 GHz", "power": "+7 dBm"},
        "conversion_loss": "7 dB",
    }
    for stages, needle in (([pad], "none"), ([mixer2], "'mixer', 'second'")):
        lu = (
            _lineup(stages_after=stages)
            if stages[0] is mixer2
            else from_dict(
                {
                    "lineup": {"name": "no mixer (invented)"},
                    "carrier": [{"freq": "435 MHz", "power": "0 dBm"}],
                    "stage": stages,
                },
                name="pad.toml",
            )
        )
        with pytest.raises(LineupError, match="expected exactly one mixer") as caught:
            plan_if(lu, 100 * MHZ, 200 * MHZ, 1 * MHZ)
        assert needle in str(caught.value)


CHANNELS_100 = np.arange(430, 440, 0.1) * MHZ


@pytest.mark.parametrize(
    ("args", "kw", "needle"),
    [
        ((100 * MHZ, 200 * MHZ, 0.0), {}, "if_step 0 Hz: expected a step > 0"),
        ((200 * MHZ, 100 * MHZ, 1 * MHZ), {}, "expected stop >= start"),
        ((100 * MHZ, 200 * MHZ, 1 * MHZ), {"order": 0}, "expected an order"),
        ((100 * MHZ, 200 * MHZ, 1 * MHZ), {"order": 16}, "expected an order"),
        ((100 * MHZ, 200 * MHZ, 1 * MHZ), {"rank": "best"}, "expected one of width, clearance"),
        ((100 * MHZ, 500 * MHZ, 1 * MHZ), {}, "expected IF candidates up to 429.999 MHz"),
        ((100 * MHZ, 200 * MHZ, 1 * MHZ), {"channels_hz": []}, "expected at least one output channel"),
        ((0.0, 200 * MHZ, 1 * MHZ), {}, "if_start 0 Hz: expected an IF candidate from 1 kHz"),
        ((1 * MHZ, 400 * MHZ, 1.0), {}, "expected at most 200000"),
        ((1 * MHZ, 400 * MHZ, 2e3), {"order": 15, "channels_hz": CHANNELS_100}, "expected at most 3e+08"),
        ((100 * MHZ, 200 * MHZ, 1 * MHZ), {"guard_hz": -1.0}, "expected a guard band"),
    ],
)
def test_bad_arguments_are_one_line_errors(args, kw, needle):
    with pytest.raises(SweepError) as caught:
        plan_if(_lineup(), *args, **{"channels_hz": CHANNELS, **kw})
    assert needle in str(caught.value)
    assert "\n" not in str(caught.value)


@pytest.mark.parametrize(
    ("extra", "needle"),
    [
        (["--if-stop", "200 MHz", "--if-step", "0 Hz"], "--if-step 0 Hz: expected a step > 0"),
        (["--if-stop", "50 MHz", "--if-step", "1 MHz"], "--if-stop 5e+07 Hz is below --if-start 1e+08 Hz"),
        (["--if-stop", "500 MHz", "--if-step", "1 MHz"], "--if-stop 500 MHz puts the LO outside"),
        (
            ["--if-stop", "200 MHz", "--if-step", "1 MHz", "--rf-start", "430 MHz"],
            "give --rf-start, --rf-stop",
        ),
        (
            [
                "--if-stop",
                "200 MHz",
                "--if-step",
                "1 MHz",
                "--rf-start",
                "440 MHz",
                "--rf-stop",
                "430 MHz",
                "--rf-step",
                "1 MHz",
            ],
            "--rf-stop 4.3e+08 Hz is below --rf-start 4.4e+08 Hz",
        ),
        (["--if-stop", "200 MHz", "--if-step", "1 MHz", "--guard", "-1 MHz"], "--guard"),
        (["--if-stop", "200 MHz", "--if-step", "1 MHz", "--order", "0"], "--order"),
    ],
)
def test_cli_bad_input_is_one_line_and_exit_2(extra, needle):
    path = ROOT / "examples" / "converter_planned_if.toml"
    code, out, err, detail, _ = run_in_process(["if-windows", str(path), "--if-start", "100 MHz", *extra])
    assert_one_error_line(code, out, err, [needle], detail=detail, notes_ok=True)


@pytest.mark.slow
def test_cli_lineup_without_mixer_is_one_line_and_exit_2():
    code, out, err, detail, _ = run_in_process(
        [
            "if-windows",
            str(ROOT / "examples" / "uhf_telemetry.toml"),
            "--if-start",
            "50 MHz",
            "--if-stop",
            "60 MHz",
            "--if-step",
            "1 MHz",
        ]
    )
    assert_one_error_line(code, out, err, ["uhf_telemetry.toml", "expected exactly one mixer"], detail=detail)


def _example_command():
    """The if-windows command written in the example's comments, as arguments."""
    text = (ROOT / "examples" / "converter_planned_if.toml").read_text("utf-8")
    line = next(ln for ln in text.splitlines() if "spurplan if-windows" in ln)
    args = shlex.split(line.lstrip("# ").strip())
    assert args[:3] == ["spurplan", "if-windows", "examples/converter_planned_if.toml"]
    return [args[1], str(ROOT / args[2]), *args[3:]]


@pytest.mark.slow
def test_example_if_lies_in_the_planners_first_window():
    # The example states that its IF was taken from the planner's best window; its own
    # command (in its comments) must list a window holding that IF first.
    args = _example_command()
    opts = dict(zip(args[2::2], args[3::2], strict=True))
    lu = load(ROOT / "examples" / "converter_planned_if.toml")
    from spurplan.units import parse_freq_hz

    plan = plan_if(
        lu,
        parse_freq_hz(opts["--if-start"]),
        parse_freq_hz(opts["--if-stop"]),
        parse_freq_hz(opts["--if-step"]),
        order=int(opts["--order"]),
    )
    first = plan.windows[0]
    assert first.start_hz <= plan.lineup_if_hz <= first.stop_hz
    assert plan.lineup_if_rank == 1
    # The tuning range is the file's [report] tune: LO 256..266 MHz at IF 174 MHz, i.e.
    # the output 430..440 MHz (upper sideband: RF = LO + IF).
    assert plan.channels_hz[0] == pytest.approx(430 * MHZ) and plan.channels_hz[-1] == pytest.approx(
        440 * MHZ
    )
    # The example says so in its first lines.
    head = (ROOT / "examples" / "converter_planned_if.toml").read_text("utf-8").splitlines()[0]
    assert "invented" in head.lower()


@pytest.mark.slow
def test_cli_table_json_and_csv_carry_the_windows_and_the_notice():
    args = _example_command()
    table = invoke(*args)
    assert "SPUR-FREE IF:" in table.stdout and "lies in window 1" in table.stdout
    assert PLANNING_NOTICE in table.stdout
    doc = as_json(invoke(*args, "--format", "json").stdout)
    assert doc["summary"]["notice"] == PLANNING_NOTICE
    assert doc["summary"]["lineup_if_rank"] == 1 and doc["summary"]["found"] is True
    first = doc["windows"][0]
    assert first["start_hz"] <= doc["summary"]["lineup_if_hz"] <= first["stop_hz"]
    csv = invoke(*args, "--format", "csv").stdout
    assert csv.splitlines()[0].startswith("rank,start_hz,stop_hz,width_hz")
    assert len(csv.splitlines()) == 1 + len(doc["windows"])


def test_cli_exits_1_when_no_window_is_found(tmp_path):
    # Order 3 over IF 140..150 MHz only: every candidate lands (hand chart above, with
    # the example's channels and band-pass the passband only grows).
    args = _example_command()
    i = args.index("--if-start")
    args[i + 1 : i + 2] = ["140 MHz"]
    args[args.index("--if-stop") + 1] = "150 MHz"
    args[args.index("--order") + 1] = "3"
    result = invoke(*args, "--passband-only", expect=1)
    assert "NO SPUR-FREE IF" in result.stdout and PLANNING_NOTICE in result.stdout


OPEN_BAND = """# Invented test lineup: a band with no stop is open upward (mask files).
[lineup]
name = "open band (invented)"

[[carrier]]
freq = "150 MHz"
power = "-10 dBm"

[[stage]]
kind = "mixer"
name = "mixer"
lo = { freq = "285 MHz", power = "+7 dBm" }
conversion_loss = "7 dB"

[[mask.band]]
name = "open"
start = "2 GHz"
limit = "-70 dBm"
rbw = "1 MHz"
"""


def test_json_writes_an_open_band_as_null(tmp_path):
    # An open band's stop is infinite; JSON has no infinity (RFC 8259, section 6; from
    # memory), so it is written as null, and 3LO = 3 (RF - IF) <= 990 MHz never reaches it.
    path = write(tmp_path, "open.toml", OPEN_BAND)
    out = invoke(
        "if-windows",
        path,
        "--if-start",
        "100 MHz",
        "--if-stop",
        "130 MHz",
        "--if-step",
        "1 MHz",
        "--rf-start",
        "430 MHz",
        "--rf-stop",
        "440 MHz",
        "--rf-step",
        "5 MHz",
        "--order",
        "3",
        "--format",
        "json",
    ).stdout
    parsed = as_json(out)
    assert parsed["summary"]["bands"][1] == {"name": "open", "start_hz": 2e9, "stop_hz": None}
    # 100..130 MHz: below the 140..150 landing of the small case, one window (hand).
    assert [(w["start_hz"], w["stop_hz"]) for w in parsed["windows"]] == [(100e6, 130e6)]


def test_readme_documents_the_command():
    text = (ROOT / "README.md").read_text("utf-8")
    assert re.search(r"spurplan if-windows", text)
