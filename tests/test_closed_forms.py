"""The engine and the amplifier models against closed forms of nonlinear distortion.

Sources are named beside each check.  Levels are compared in dB with the stated
tolerances.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from helpers import amp, dbc, levels_by_label, lineup, single_tone

from spurplan.analyses.budget import budget_rows, cascade_iip3_dbm
from spurplan.model.nonlinear import Clipper, Polynomial
from spurplan.model.stages.amplifier import output_p1db_dbm


def power_reduction_harmonics(coeffs, amplitude, n_harm):
    """Harmonic amplitudes of sum a_n (A cos t)^n.

    cos^n t = 2^(1-n) sum_k C(n, k) cos((n - 2k) t) for n - 2k > 0
    (Abramowitz and Stegun 4.3.xx power-reduction identities; from memory).
    """
    out = np.zeros(n_harm)
    for n, a in enumerate(coeffs, start=1):
        for k in range(0, n):
            h = n - 2 * k
            if 1 <= h <= n_harm:
                out[h - 1] += a * amplitude**n * math.comb(n, k) / 2 ** (n - 1)
    return out


def test_single_tone_harmonics_equal_power_reduction_forms():
    # Abramowitz and Stegun 4.3 power-reduction identities (from memory); 0.01 dB.
    coeffs = (3.0, 0.4, -0.9, 0.15, -0.05, 0.01, -0.004, 0.001, -0.0003)
    amplitude = 0.8
    got = np.abs(single_tone(Polynomial(coeffs), amplitude).spectrum[0, :9])
    want = np.abs(power_reduction_harmonics(coeffs, amplitude, 9))
    np.testing.assert_allclose(20 * np.log10(got), 20 * np.log10(want), atol=0.01)


def test_two_tone_im3_is_3pout_minus_2oip3_at_low_drive():
    # IM3 = 3 Pout - 2 OIP3 (Razavi, RF Microelectronics 2e, ch. 2; from memory); 0.05 dB.
    lu = lineup(
        [amp(gain="20 dB", oip3="+30 dBm")], carriers=(("100 MHz", "-40 dBm"), ("101 MHz", "-40 dBm"))
    )
    lv = levels_by_label(lu.run())
    pout = lv["f1"]
    assert pout == pytest.approx(-20.0, abs=0.01)
    assert lv["2f1-f2"] == pytest.approx(3 * pout - 2 * 30.0, abs=0.05)
    assert lv["2f2-f1"] == pytest.approx(3 * pout - 2 * 30.0, abs=0.05)


def test_im3_is_9_54_db_above_hd3_at_equal_tone_amplitude():
    # (3/4) a3 A^3 versus (1/4) a3 A^3: 20 log10(3) = 9.54 dB (Razavi 2e ch. 2; from memory).
    stages = [amp(gain="10 dB", oip3="+25 dBm")]
    one = levels_by_label(lineup(stages, carriers=(("100 MHz", "-40 dBm"),)).run())
    two = levels_by_label(lineup(stages, carriers=(("100 MHz", "-40 dBm"), ("100.2 MHz", "-40 dBm"))).run())
    assert two["2f1-f2"] - one["3f1"] == pytest.approx(20 * math.log10(3), abs=0.01)


def test_hip3_is_ip3_plus_4_77_db():
    # HIP3 = IP3 + 10 log10(3) = IP3 + 4.77 dB (design notes sec. 4 after Razavi 2e ch. 2; from memory).
    lv = levels_by_label(lineup([amp(gain="15 dB", oip3="+32 dBm")], carriers=(("50 MHz", "-45 dBm"),)).run())
    ohip3 = lv["f1"] + (lv["f1"] - lv["3f1"]) / 2
    assert ohip3 == pytest.approx(32 + 10 * math.log10(3), abs=0.05)


def test_hip2_is_ip2_plus_6_02_db():
    # HIP2 = IP2 + 20 log10(2) = IP2 + 6.02 dB (Razavi 2e ch. 2; from memory).
    lv = levels_by_label(lineup([amp(gain="15 dB", oip2="+50 dBm")], carriers=(("50 MHz", "-45 dBm"),)).run())
    ohip2 = 2 * lv["f1"] - lv["2f1"]
    assert ohip2 == pytest.approx(50 + 20 * math.log10(2), abs=0.05)
    # Two-tone IM2 at f1+f2 is a2 A1 A2: OIP2 = 2 Pout - P_IM2 (same source).
    lv2 = levels_by_label(
        lineup(
            [amp(gain="15 dB", oip2="+50 dBm")], carriers=(("50 MHz", "-45 dBm"), ("61 MHz", "-45 dBm"))
        ).run()
    )
    assert 2 * lv2["f1"] - lv2["f1+f2"] == pytest.approx(50.0, abs=0.05)


def test_pure_cubic_iip3_minus_input_p1db_is_9_64_db():
    # a1 A - (3/4)|a3| A^3 = 10^(-1/20) a1 A gives IIP3 - P1dB = 9.64 dB (Razavi 2e ch. 2; from memory).
    lu = lineup([amp(gain="12 dB", oip3="+30 dBm")])
    op1db = output_p1db_dbm(lu.stages[0].transfer, 50.0)
    ip1db = op1db - 12.0 + 1.0
    assert (30.0 - 12.0) - ip1db == pytest.approx(9.64, abs=0.02)


def test_datasheet_h2_figure_is_reproduced_and_slopes_one_db_per_db():
    # OHIPn = Pout + |dBc|/(n-1) (design notes sec. 4; common practice, no source): at the
    # stated +20 dBm the model gives -30 dBc, and 1 dB less drive gives 1 dB less dBc.
    for drive_dbm, want_dbc in ((0.0, -30.0), (-10.0, -40.0), (-25.0, -55.0)):
        lu = lineup([amp(gain="20 dB", h2="-30 dBc @ +20 dBm")], carriers=(("200 MHz", f"{drive_dbm} dBm"),))
        rows = lu.run().product_rows()
        dbc_of = dict(zip(rows["label"], rows["dbc"], strict=True))
        assert dbc_of["2f1"] == pytest.approx(want_dbc, abs=0.01)


def test_symmetric_limiter_driven_hard_approaches_square_wave():
    # Square wave: odd harmonics at 1/n (H3 -9.54 dBc, H5 -13.98 dBc), no even ones
    # (Fourier series, standard tables; from memory). Amplifier with psat only, 40 dB over.
    lu = lineup([amp(gain="20 dB", psat="+20 dBm")], carriers=(("100 MHz", "+40 dBm"),), max_order=10)
    rows = lu.run().product_rows()
    dbc_of = dict(zip(rows["label"], rows["dbc"], strict=True))
    assert dbc_of["3f1"] == pytest.approx(-20 * math.log10(3), abs=0.2)
    assert dbc_of["5f1"] == pytest.approx(-20 * math.log10(5), abs=0.2)
    assert all(dbc_of.get(f"{n}f1", -999.0) < -100.0 for n in (2, 4, 6, 8, 10))
    # psat is the fundamental under hard drive (the module's definition), within 0.1 dB.
    assert rows["level_dbm"][rows["label"].index("f1")] == pytest.approx(20.0, abs=0.1)


def test_unequal_limits_produce_even_harmonics():
    # Common practice, no source: an asymmetric transfer makes even harmonics, a symmetric one none.
    amplitude = 3.0
    asym = single_tone(Clipper(1.0, -0.5, 1.0), amplitude).spectrum[0]
    sym = single_tone(Clipper(1.0, -1.0, 1.0), amplitude).spectrum[0]
    assert dbc(asym, 2) > -30.0
    assert dbc(sym, 2) < -200.0
    # The amplifier model does the same: an IP2 figure makes its saturated levels unequal,
    # so even harmonics persist 10 dB into hard saturation; without one there are none.
    for figures, present in (({"oip2": "+35 dBm"}, True), ({}, False)):
        lu = lineup([amp(gain="20 dB", psat="+20 dBm", **figures)], carriers=(("100 MHz", "+10 dBm"),))
        rows = lu.run().product_rows()
        dbc_of = dict(zip(rows["label"], rows["dbc"], strict=True))
        if present:
            assert dbc_of["2f1"] > -60.0
        else:
            assert "2f1" not in dbc_of or dbc_of["2f1"] < -200.0


def test_half_wave_rectifier_harmonics():
    # Half-wave rectified sine: A/pi + A/2 cos t + 2A/(3 pi) cos 2t - 2A/(15 pi) cos 4t ...
    # H2 = 20 log10(4/(3 pi)) = -7.44 dBc, H4 = 20 log10(4/(15 pi)) = -21.42 dBc, no odd
    # harmonics above the fundamental (Fourier series, standard tables; from memory).
    h = single_tone(Clipper(1.0, 0.0, math.inf), 1.0).spectrum[0]
    assert dbc(h, 2) == pytest.approx(20 * math.log10(4 / (3 * math.pi)), abs=0.01)
    assert dbc(h, 4) == pytest.approx(20 * math.log10(4 / (15 * math.pi)), abs=0.01)
    assert all(dbc(h, n) < -100.0 for n in (3, 5, 7, 9))


def test_three_cubic_stages_reproduce_cascaded_iip3():
    # 1/IIP3 = 1/IIP3_1 + G1/IIP3_2 + G1 G2/IIP3_3 (Pozar, Microwave Engineering, cascaded
    # intercepts; from memory), in-phase cubic stages at low drive, within 0.1 dB.
    stages = [
        amp("a1", gain="15 dB", oip3="+28 dBm"),
        amp("a2", gain="10 dB", oip3="+33 dBm"),
        amp("a3", gain="12 dB", oip3="+42 dBm"),
    ]
    lu = lineup(stages, carriers=(("400 MHz", "-60 dBm"), ("400.5 MHz", "-60 dBm")), combine="phase")
    lv = levels_by_label(lu.run())
    oip3_measured = lv["f1"] + (lv["f1"] - lv["2f1-f2"]) / 2
    g = [15.0, 10.0, 12.0]
    iip3_mw = [10 ** ((o - gi) / 10) for o, gi in zip((28.0, 33.0, 42.0), g, strict=True)]
    inv = 1 / iip3_mw[0] + 10 ** (g[0] / 10) / iip3_mw[1] + 10 ** ((g[0] + g[1]) / 10) / iip3_mw[2]
    iip3_formula = -10 * math.log10(inv)
    assert oip3_measured - sum(g) == pytest.approx(iip3_formula, abs=0.1)
    assert cascade_iip3_dbm(g, [28.0, 33.0, 42.0])[-1] == pytest.approx(iip3_formula, abs=1e-9)
    assert budget_rows(lu.run())["cascade_iip3_dbm"][-1] == pytest.approx(iip3_formula, abs=1e-9)


def test_linear_lineup_makes_no_products():
    # A chain of gains and pads is linear (arithmetic): only the carriers come out, at
    # -20 + 10 - 3 + 20 dB.
    stages = [
        amp("a", gain="10 dB"),
        {"kind": "attenuator", "name": "pad", "loss": "3 dB"},
        amp("b", gain="20 dB"),
    ]
    lu = lineup(stages, carriers=(("100 MHz", "-20 dBm"), ("130 MHz", "-23 dBm")))
    rows = lu.run().product_rows()
    assert rows["kind"] == ["carrier", "carrier"]
    assert rows["level_dbm"] == pytest.approx([7.0, 4.0], abs=1e-9)


def test_odd_symmetric_model_makes_no_even_order_products():
    # An odd transfer y(-x) = -y(x) has only odd-order products (common practice, no source).
    stages = [amp("a", gain="10 dB", oip3="+20 dBm", psat="+15 dBm"), amp("b", gain="10 dB", oip3="+30 dBm")]
    lu = lineup(stages, carriers=(("100 MHz", "-5 dBm"), ("103 MHz", "-5 dBm")))
    rows = lu.run().product_rows()
    assert rows["order"], "expected odd products"
    assert all(o % 2 == 1 for o in rows["order"])


def test_polynomial_driven_near_its_limit_is_flagged():
    # The cubic's instantaneous gain falls 1 dB at x^2 = 0.109 a1/|a3| (arithmetic on
    # y = a1 x + a3 x^3); below that the rows are clean, above it they are flagged.
    lu_low = lineup([amp(gain="10 dB", oip3="+30 dBm")], carriers=(("100 MHz", "-10 dBm"),))
    lu_high = lineup([amp(gain="10 dB", oip3="+30 dBm")], carriers=(("100 MHz", "+15 dBm"),))
    assert not any(lu_low.run().product_rows()["model_extrapolated"])
    result = lu_high.run()
    assert all(result.product_rows()["model_extrapolated"])
    assert result.extrapolated_stages == ["amp"]


def test_p1db_only_amplifier_compresses_at_its_figure():
    # The saturating model is fitted so its own 1 dB compression point is the datasheet
    # p1db (definition of P1dB, common practice), within 0.05 dB; the small-signal
    # intercept still holds (IM3 = 3 Pout - 2 OIP3, Razavi 2e ch. 2, from memory).
    lu = lineup(
        [amp(gain="20 dB", oip3="+40 dBm", p1db="+27 dBm")],
        carriers=(("100 MHz", "-50 dBm"), ("100.1 MHz", "-50 dBm")),
    )
    assert output_p1db_dbm(lu.stages[0].transfer, 50.0) == pytest.approx(27.0, abs=0.05)
    lv = levels_by_label(lu.run())
    assert lv["2f1-f2"] == pytest.approx(3 * lv["f1"] - 2 * 40.0, abs=0.05)


def test_saturating_model_honours_harmonics_at_their_point_and_small_signal_slopes():
    # Datasheet harmonics "-30 dBc @ +10 dBm" and "-50 dBc @ +10 dBm" hold at +10 dBm out
    # with psat present (the figure's definition, within 0.05 dB); far below, the harmonics
    # fall n dB per dB, (n - 1) dB per dB in dBc (Razavi 2e ch. 2, from memory), within
    # 0.02 dB/dB.
    stage = amp(gain="20 dB", h2="-30 dBc @ +10 dBm", h3="-50 dBc @ +10 dBm", psat="+24 dBm")
    at_point = lineup([stage], carriers=(("300 MHz", "-10 dBm"),))
    offset = 0.0
    for _ in range(6):  # drive so that the carrier leaves at exactly +10 dBm
        rows = at_point.run(drive_offset_db=offset).product_rows()
        offset += 10.0 - rows["level_dbm"][rows["label"].index("f1")]
    rows = at_point.run(drive_offset_db=offset).product_rows()
    dbc_of = dict(zip(rows["label"], rows["dbc"], strict=True))
    assert rows["level_dbm"][rows["label"].index("f1")] == pytest.approx(10.0, abs=0.001)
    assert dbc_of["2f1"] == pytest.approx(-30.0, abs=0.05)
    assert dbc_of["3f1"] == pytest.approx(-50.0, abs=0.05)
    far = [
        dict(zip(r["label"], r["dbc"], strict=True))
        for r in (
            lineup([stage], carriers=(("300 MHz", f"{p} dBm"),)).run().product_rows() for p in (-50, -40)
        )
    ]
    assert (far[1]["2f1"] - far[0]["2f1"]) / 10 == pytest.approx(1.0, abs=0.02)
    assert (far[1]["3f1"] - far[0]["3f1"]) / 10 == pytest.approx(2.0, abs=0.02)
