"""Realistic synthesized filters: the stopband floor, default finite Q, and remedy with both.

The lineups are invented for these tests.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.signal as ss
import skrf
from helpers import as_json, assert_one_error_line, invoke, run_in_process, write
from skrf.media import DefinedGammaZ0

# 150 MHz at +36 dBm out of a PA whose harmonics fail itu-sm329-cat-a (invented).
from test_sweeps import _failing_lineup_text

import spurplan
from spurplan.analyses.check import check
from spurplan.analyses.remedy import remedy
from spurplan.io.lineup_file import from_dict
from spurplan.model.ladders import Prototype, chebyshev_g, ladder_s21
from spurplan.output.remedy_file import write_fixed

R0 = 50.0
LOSSLESS = {"q_inductor": "lossless", "q_capacitor": "lossless"}
# The stated defaults for discrete UHF parts (common practice, no source).
Q_L, Q_C, FLOOR_DB = 100.0, 500.0, -80.0
# Chebyshev 0.1 dB low-pass prototype values, N = 7 and N = 5 (Matthaei, Young and
# Jones 1964, Table 4.05-2(a); from memory).
G7 = [1.1812, 1.4228, 2.0967, 1.5734, 2.0967, 1.4228, 1.1812]
G5 = [1.1468, 1.3712, 1.9750, 1.3712, 1.1468]
LPF = {"family": "chebyshev", "order": 7, "cutoff": "520 MHz", "ripple": "0.1 dB"}


def _stage(proto: dict):
    doc = {
        "carrier": [{"freq": "455 MHz", "power": "0 dBm"}],
        "stage": [{"kind": "filter", "name": "lpf", "prototype": proto}],
    }
    return from_dict(doc, name="floor-test.toml").stages[0]


def _cheby1(freq_hz, order=7, ripple_db=0.1, fc_hz=520e6):
    """The ideal analog Chebyshev response from scipy.signal (independent library)."""
    _, h = ss.freqs(
        *ss.cheby1(order, ripple_db, 2 * np.pi * fc_hz, analog=True), 2 * np.pi * np.asarray(freq_hz)
    )
    return h


def _db(h):
    return 20 * np.log10(np.abs(h))


# --- the floor ------------------------------------------------------------------------------------


@pytest.mark.parametrize("floor", [None, "-80 dB"])
def test_floor_caps_rejection_at_the_tenth_harmonic(floor):
    # 7th-order 0.1 dB Chebyshev low-pass at 520 MHz, at 10 x 455 MHz = 4550 MHz
    # (arithmetic): the ideal ladder (scipy.signal.cheby1, analog) rejects far more
    # than 80 dB; the filter with the -80 dB floor (given, or the default) gives the
    # floor within 0.5 dB.
    f = np.array([4550e6])
    ideal = _db(_cheby1(f))[0]
    assert ideal < -140.0
    proto = {**LPF, **LOSSLESS} if floor is None else {**LPF, **LOSSLESS, "floor": floor}
    got = _db(_stage(proto).response(f))[0]
    assert got == pytest.approx(-80.0, abs=0.5)
    # The ideal ladder, asked for with floor = "none", is scipy's to 0.01 dB.
    none = _db(_stage({**LPF, **LOSSLESS, "floor": "none"}).response(f))[0]
    assert none == pytest.approx(ideal, abs=0.01)


@pytest.mark.parametrize("floor_db", [-60.0, -80.0])
def test_floor_leaves_the_passband_of_the_ideal_ladder_unchanged(floor_db):
    # 40 frequencies across the passband (to the 520 MHz ripple edge): within 0.01 dB
    # of scipy.signal.cheby1 (analog), the ideal response, for floors of -60 and -80 dB.
    f = np.linspace(1e6, 520e6, 40)
    got = _db(_stage({**LPF, **LOSSLESS, "floor": f"{floor_db:g} dB"}).response(f))
    np.testing.assert_allclose(got, _db(_cheby1(f)), atol=0.01)


def test_floored_response_is_the_documented_in_phase_sum_and_never_below_the_floor():
    # S21 = (1 - a) H + a H/|H| with a = 10^(floor/20) (the documented model, applied
    # here to scipy.signal.cheby1's H, an independent library), complex, to 1e-9
    # relative; the Monte Carlo path (ladder_s21) gives the same; |S21| >= a over a
    # sweep to 20 GHz.
    a = 10 ** (-70 / 20)
    f = np.geomspace(1e6, 20e9, 400)
    h = _cheby1(f)
    want = (1 - a) * h + a * h / np.abs(h)
    stage = _stage({**LPF, **LOSSLESS, "floor": "-70 dB"})
    np.testing.assert_allclose(stage.response(f), want, rtol=1e-9, atol=0)
    mc = ladder_s21(stage.prototype, f[None, :], R0)[0]
    np.testing.assert_allclose(mc, want, rtol=1e-9, atol=0)
    assert np.all(np.abs(stage.response(f)) >= a * (1 - 1e-12))


def test_floored_s_matrix_of_a_lossless_ladder_stays_unitary_reciprocal_and_consistent():
    # A lossless network has a unitary S-matrix, S^H S = I, and a reciprocal one
    # S12 = S21 (Pozar, Microwave Engineering, section on scattering matrices; from
    # memory); the floored ladder must keep both, and its S21 is the stage response.
    f = np.geomspace(10e6, 10e9, 60)
    stage = _stage({**LPF, **LOSSLESS, "floor": "-60 dB"})
    s = stage.s_matrix(f)
    eye = np.einsum("fji,fjk->fik", s.conj(), s)
    np.testing.assert_allclose(eye, np.broadcast_to(np.eye(2), eye.shape), atol=1e-9)
    np.testing.assert_allclose(s[:, 0, 1], s[:, 1, 0], rtol=1e-12)
    np.testing.assert_allclose(s[:, 1, 0], stage.response(f), rtol=1e-12)
    # With lossy parts: passive (I - S^H S positive semi-definite).
    lossy = _stage({**LPF, "floor": "-60 dB"}).s_matrix(f)
    gap = np.eye(2) - np.einsum("fji,fjk->fik", lossy.conj(), lossy)
    assert np.linalg.eigvalsh(gap).min() > -1e-12


def test_cascaded_sections_of_floored_filters_equal_scikit_rf_cascade():
    # Two floored filters with linear_sections = "cascade": the carrier level equals
    # S21 of scikit-rf's (a ** b) of their full S-matrices (independent library).
    lpf = {**LPF, "cutoff": "500 MHz", "floor": "-60 dB"}
    hpf = {
        "family": "butterworth",
        "response": "highpass",
        "order": 3,
        "cutoff": "300 MHz",
        "floor": "-70 dB",
    }
    doc = {
        "carrier": [{"freq": "420 MHz", "power": "0 dBm"}],
        "stage": [
            {"kind": "filter", "name": "a", "prototype": lpf},
            {"kind": "filter", "name": "b", "prototype": hpf},
        ],
        "analysis": {"linear_sections": "cascade"},
    }
    lu = from_dict(doc, name="c.toml")
    f = np.array([420e6])
    ref = (lu.stages[0].network(f) ** lu.stages[1].network(f)).s[0, 1, 0]
    assert lu.run().carrier_levels_dbm()[0] == pytest.approx(float(_db(ref)), abs=1e-9)


# --- finite Q -------------------------------------------------------------------------------------


@pytest.mark.parametrize("bandwidth_mhz", [40.0, 90.0])
def test_default_q_midband_loss_matches_cohn(bandwidth_mhz):
    # Cohn's dissipation loss of a coupled-resonator band-pass at midband,
    # dL0 = 4.343 sum(g_k) / (w Qu) dB, w the fractional bandwidth, with each
    # resonator's 1/Qu = 1/Q_L + 1/Q_C (S. B. Cohn, "Dissipation loss in
    # multiple-coupled-resonator filters", Proc. IRE 47 (1959); from memory), for the
    # default parts Q_L = 100, Q_C = 500.  Within 2 % (the formula is first order in 1/Q).
    proto = {
        "family": "chebyshev",
        "response": "bandpass",
        "order": 5,
        "center": "450 MHz",
        "bandwidth": f"{bandwidth_mhz:g} MHz",
        "ripple": "0.1 dB",
        "floor": "none",
    }
    loss = -_db(_stage(proto).response(np.array([450e6])))[0]
    cohn = 4.343 * sum(G5) * (1 / Q_L + 1 / Q_C) / (bandwidth_mhz / 450.0)
    assert loss == pytest.approx(cohn, rel=0.02)


def test_default_q_lowpass_loss_at_low_frequency():
    # At w' = f/fc << 1 each low-pass element dissipates g_k w' / Q_k of the
    # normalised line, so dL = 4.343 w' sum(g_k / Q_k) dB (the first-order dissipation
    # sum of Cohn 1959 at the low-pass frequency; from memory); shunt-first 7th order:
    # capacitors g1, g3, g5, g7, inductors g2, g4, g6.  At w' = 0.02, within 1 %, the
    # loss over the ideal ladder's (scipy.signal.cheby1, analog).
    f = np.array([0.02 * 520e6])
    lossy = _db(_stage({**LPF, "floor": "none"}).response(f))[0]
    extra = float(_db(_cheby1(f))[0] - lossy)
    want = 4.343 * 0.02 * (sum(G7[0::2]) / Q_C + sum(G7[1::2]) / Q_L)
    assert extra == pytest.approx(want, rel=0.01)


def test_default_q_ladder_equals_a_scikit_rf_ladder_with_resistive_parts():
    # The same circuit built independently from scikit-rf lumped elements: 5th-order
    # Chebyshev low-pass at 200 MHz, shunt first, L = g R0 / wc and C = g / (R0 wc)
    # (Pozar, Microwave Engineering, filter scaling; from memory), each inductor in
    # series with w L / Q_L and each capacitor with 1 / (w C Q_C) (unloaded Q, common
    # practice, no source).  S21 to 1e-9.  The g-values are the closed form's
    # (spurplan.model.ladders.chebyshev_g, checked against the handbook table in
    # test_filters.py): the table's 4 decimals would limit the match to 1e-4.
    fc = 200e6
    f = np.geomspace(5e6, 2e9, 50)
    w = 2 * np.pi * f
    wc = 2 * np.pi * fc
    med = DefinedGammaZ0(frequency=skrf.Frequency.from_f(f, unit="Hz"), z0=R0)
    net = None
    for k, g in enumerate(chebyshev_g(5, 0.1)[:5], start=1):
        if k % 2:  # shunt capacitor with its series loss resistance, to ground
            c = g / (R0 * wc)
            arm = med.shunt(med.capacitor(c) ** med.resistor(1 / (w * c * Q_C)) ** med.short())
        else:  # series inductor with its loss resistance
            ind = g * R0 / wc
            arm = med.inductor(ind) ** med.resistor(w * ind / Q_L)
        net = arm if net is None else net**arm
    stage = _stage(
        {"family": "chebyshev", "order": 5, "cutoff": "200 MHz", "ripple": "0.1 dB", "floor": "none"}
    )
    np.testing.assert_allclose(stage.response(f), net.s[:, 1, 0], rtol=1e-9, atol=1e-12)


def test_defaults_are_noted_and_explicit_keys_are_not():
    stage = _stage(dict(LPF))
    p = stage.prototype
    # The stated defaults (common practice, no source).
    assert (p.q_inductor, p.q_capacitor, p.floor_db) == (Q_L, Q_C, FLOOR_DB)
    (note,) = stage.notes
    assert "Q_L 100" in note and "Q_C 500" in note and "-80 dB" in note and "no source" in note
    explicit = _stage({**LPF, "q_inductor": 60, "q_capacitor": 300, "floor": "-70 dB"})
    assert explicit.notes == ()
    assert (explicit.prototype.q_inductor, explicit.prototype.q_capacitor) == (60.0, 300.0)
    assert explicit.prototype.floor_db == -70.0
    ideal = _stage({**LPF, **LOSSLESS, "floor": "none"}).prototype
    assert ideal == Prototype("chebyshev", "lowpass", 7, 520e6, ripple_db=0.1)


# --- remedy ---------------------------------------------------------------------------------------


def test_remedy_prints_and_writes_the_q_and_floor_it_assumed(tmp_path):
    path = write(tmp_path, "fail.toml", _failing_lineup_text())
    fixed = tmp_path / "fixed.toml"
    out = invoke("remedy", path, "--write", fixed, expect=0).stdout
    assert "Q_L 100, Q_C 500, stopband floor -80 dB" in out
    assert 'q_inductor = 100, q_capacitor = 500, floor = "-80 dB"' in out
    written = spurplan.load(fixed)
    flt = written.stages[1]
    assert flt.name == "remedy filter" and flt.notes == ()  # nothing left to a default
    assert (flt.prototype.q_inductor, flt.prototype.q_capacitor, flt.prototype.floor_db) == (
        Q_L,
        Q_C,
        FLOOR_DB,
    )
    # The written file re-checks the same as remedy's own re-check.
    found = remedy(spurplan.load(path))
    again = check(written)
    assert again.passed
    assert again.worst_margin_db == pytest.approx(found.outcome.worst_margin_db, abs=1e-9)
    # The dissipation loss at the carrier is in the re-check: the carrier drop equals the
    # filter's own loss there (the pad after it is linear; arithmetic).
    loss = -float(_db(found.filter.response(np.array([150e6])))[0])
    assert found.before.carrier_dbm - found.outcome.carrier_dbm == pytest.approx(loss, abs=1e-9)


def test_remedy_options_set_the_parts_of_the_snippet(tmp_path):
    path = write(tmp_path, "fail.toml", _failing_lineup_text())
    args = ["remedy", path, "--q-inductor", "60", "--q-capacitor", "lossless", "--floor", "-70 dB"]
    doc = as_json(invoke(*args, "--format", "json", expect=0).stdout)["summary"]
    assert doc["parts"] == {"q_inductor": 60.0, "q_capacitor": None, "floor_db": -70.0}
    assert 'q_inductor = 60, q_capacitor = "lossless", floor = "-70 dB"' in doc["snippet"]
    lu = spurplan.load(path)
    found = remedy(lu, q_inductor=60.0, q_capacitor=None, floor_db=-70.0)
    fixed = tmp_path / "fixed.toml"
    write_fixed(lu, found, fixed)
    p = spurplan.load(fixed).stages[1].prototype
    assert (p.q_inductor, p.q_capacitor, p.floor_db) == (60.0, None, -70.0)


def test_remedy_refuses_a_product_that_needs_more_than_the_floor(tmp_path):
    # With a -20 dB floor no filter rejects more than 20 dB; the worst product needs
    # more (target - margin, arithmetic), so remedy proposes nothing and says why.
    path = write(tmp_path, "fail.toml", _failing_lineup_text())
    lu = spurplan.load(path)
    found = remedy(lu, floor_db=-20.0)
    assert not found.found and found.tried == []
    assert max(found.needed["rejection_needed_db"]) > 20.0
    assert "floor" in found.reason and "20.0 dB at most" in found.reason
    # Independent check: a steep filter by hand (15th-order Chebyshev at 165 MHz)
    # with that floor still misses the 3 dB target.
    text = _failing_lineup_text().replace(
        "[mask]",
        '[[stage]]\nkind = "filter"\nname = "steep"\nprototype = { family = "chebyshev", order = 15, '
        'cutoff = "165 MHz", ripple = "0.1 dB", floor = "-20 dB" }\n[mask]',
    )
    assert check(spurplan.load(write(tmp_path, "steep.toml", text))).worst_margin_db < 3.0
    code, out, err, detail, _ = run_in_process(["remedy", str(path), "--floor", "-20 dB"])
    assert detail == "" and code == 1, err
    assert "NO FILTER FOUND" in out and "stopband floor" in out
    # The default floor leaves room: a filter is found.
    assert remedy(lu).found


@pytest.mark.parametrize(
    ("option", "value", "needle"),
    [
        ("--floor", "-10 dB", "-300 dB to -20 dB"),
        ("--floor", "80 dB", "-300 dB to -20 dB"),
        ("--floor", "-80", "none"),
        ("--q-inductor", "lossy", "lossless"),
        ("--q-capacitor", "0", "0.5"),
        ("--q-inductor", "inf", "0.5"),
    ],
)
def test_malformed_remedy_parts_give_one_line_errors(tmp_path, option, value, needle):
    path = write(tmp_path, "fail.toml", _failing_lineup_text())
    code, out, err, detail, _ = run_in_process(["remedy", str(path), option, value])
    assert_one_error_line(code, out, err, (option, repr(value), needle), detail=detail)


# --- spurplan filter ------------------------------------------------------------------------------


def test_filter_command_shows_q_and_floor_and_marks_floor_rows():
    args = ["filter", "--family", "chebyshev", "--order", "7", "--cutoff", "520 MHz", "--ripple", "0.1 dB"]
    out = invoke(*args, "--carrier", "455 MHz", expect=0)
    assert "Q_L 100, Q_C 500, stopband floor -80 dB" in out.stdout
    assert "Q_L" in out.stdout.splitlines()[1] and "Q_C" in out.stdout.splitlines()[1]
    assert "assumed" in out.stderr
    rows = {line.split()[1]: line for line in out.stdout.splitlines() if "f1" in line}
    # The ideal ladder is below -80 dB at 10 x 455 MHz (scipy.signal.cheby1 above) and
    # above it at 2 x 455 MHz: -48 dB (same reference).
    assert _db(_cheby1([910e6]))[0] > -80.0 > _db(_cheby1([4550e6]))[0]
    assert "FLOOR" in rows["10f1"] and "FLOOR" not in rows["2f1"]
    doc = as_json(invoke(*args, "--q-inductor", "80", "--format", "json", expect=0).stdout)["summary"]
    assert doc["prototype"]["q_inductor"] == 80.0 and doc["prototype"]["floor_db"] == -80.0
    assert doc["parts"] == "Q_L 80, Q_C 500, stopband floor -80 dB"
    assert set(doc["elements"]["q_l"]) == {None, 80.0} and set(doc["elements"]["q_c"]) == {None, 500.0}


def test_filter_stage_view_shows_an_explicit_ideal_ladder(tmp_path):
    text = (
        '[[carrier]]\nfreq = "455 MHz"\npower = "0 dBm"\n'
        '[[stage]]\nkind = "amplifier"\nname = "pa"\ngain = "20 dB"\noip3 = "+40 dBm"\n'
        '[[stage]]\nkind = "filter"\nname = "lpf"\nprototype = { family = "chebyshev", order = 7, '
        'cutoff = "520 MHz", ripple = "0.1 dB", q_inductor = "lossless", q_capacitor = "lossless", floor = "none" }\n'
    )
    out = invoke("filter", write(tmp_path, "l.toml", text), "--stage", "lpf", expect=0)
    assert "Q_L lossless, Q_C lossless, stopband floor none" in out.stdout
    assert "lossless" in out.stdout.splitlines()[3]
    assert "assumed" not in out.stderr
