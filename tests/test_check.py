"""Limit rules and the compliance check, against regulations and hand calculations."""

from __future__ import annotations

import math

import pytest
from helpers import amp

from spurplan.analyses.check import check
from spurplan.errors import LineupError
from spurplan.io.lineup_file import from_dict
from spurplan.model.masks import Rule, field_to_eirp_dbm
from spurplan.units import dbm_to_vpeak, vpeak_to_dbm


def _lineup(stages, carriers, mask, max_order=10):
    doc = {
        "carrier": [dict(c) for c in carriers],
        "stage": stages,
        "mask": mask,
        "analysis": {"max_order": max_order},
    }
    return from_dict(doc, name="check-test.toml")


def _row(outcome, label):
    i = outcome.rows["label"].index(label)
    return {k: v[i] for k, v in outcome.rows.items()}


@pytest.mark.parametrize(
    ("p_dbm", "want_dbm"), [(20.0, -13.0), (30.0, -13.0), (50.0, -13.0), (56.99, -13.0), (60.0, -10.0)]
)
def test_43_plus_10logp_is_minus_13_dbm_until_the_cap(p_dbm, want_dbm):
    # ITU-R SM.329 Category A: 43 + 10 log10(P/W) dB or 70 dBc, whichever is less
    # stringent (cap: from memory); check values of the fact sheet 1.3 (derived): a
    # flat -13 dBm up to 500 W, then P - 70 dB (-10 dBm at 1 kW).
    rule = Rule("cat A", 30e6, 1e9, "attenuation", 43.0, rbw_hz=100e3, cap_db=70.0)
    assert float(rule.limit_dbm(100e6, p_dbm, 0.0)) == pytest.approx(want_dbm, abs=0.01)


def test_field_strength_54_dbuv_m_at_3_m_is_minus_41_2_dbm_eirp():
    # 47 CFR 15.209(a): 500 uV/m (53.98 dBuV/m) at 3 m above 960 MHz; free-space relation
    # E = EIRP + 104.77 - 20 log10(d) (ITU-R P.525 eq. (1)): 54 dBuV/m -> -41.2 dBm.
    assert float(field_to_eirp_dbm(54.0, 3.0)) == pytest.approx(-41.23, abs=0.01)
    rule = Rule("15.209", 960e6, math.inf, "field", 20 * math.log10(500), rbw_hz=1e6, distance_m=3.0)
    assert float(rule.limit_dbm(1.2e9, 30.0, 0.0)) == pytest.approx(-41.25, abs=0.01)
    # With a 6 dBi antenna the conducted limit is 6 dB lower (EIRP = P + G, arithmetic).
    assert float(rule.limit_dbm(1.2e9, 30.0, 6.0)) == pytest.approx(-47.25, abs=0.01)


def test_low_frequency_field_limit_falls_as_one_over_f():
    # 47 CFR 15.209(a): 2400/F(kHz) uV/m at 300 m: 24 uV/m at 100 kHz = 27.60 dBuV/m
    # (fact sheet 2.4) -> EIRP 27.60 - 104.77 + 20 log10(300) = -27.6 dBm (derived).
    rule = Rule("15.209 LF", 9e3, 490e3, "field", 20 * math.log10(2400.0), distance_m=300.0, per_khz=True)
    assert float(rule.limit_dbm(100e3, 0.0, 0.0)) == pytest.approx(-27.6, abs=0.05)


def test_product_of_unmodulated_carriers_reads_its_whole_power_in_the_rbw():
    # Carriers with a bandwidth but no modulation are CW for the nonlinearity: their products
    # are judged with their whole power in the RBW (the conservative reading; spreading them
    # evenly over sum |m_k| B_k read the spectral peak 3 to 5 dB low).  The spread is still
    # listed: 2f1 - f2 with B1 = 400 kHz, B2 = 200 kHz spans 1 MHz (arithmetic).
    carriers = [
        {"freq": "450 MHz", "power": "-10 dBm", "bandwidth": "400 kHz"},
        {"freq": "460 MHz", "power": "-10 dBm", "bandwidth": "200 kHz"},
    ]
    mask = {"rule": [{"start": "9 kHz", "stop": "10 GHz", "limit": "-36 dBm", "rbw": "100 kHz"}]}
    outcome = check(_lineup([amp(gain="20 dB", oip3="+30 dBm", oip2="+40 dBm")], carriers, mask))
    im3 = _row(outcome, "2f1-f2")
    assert im3["bandwidth_hz"] == pytest.approx(1e6)
    assert im3["level_in_rbw_dbm"] == pytest.approx(im3["level_dbm"], abs=1e-12)


def test_overlapping_rules_the_most_stringent_holds():
    # EN 300 220-1 style (from memory): -36 dBm/100 kHz in general, -54 dBm/100 kHz in
    # the broadcast band 87.5-118 MHz. The 2nd harmonic of 50 MHz (100 MHz) is held to
    # -54 dBm; the 3rd (150 MHz) to -36 dBm (arithmetic).
    mask = {"use": ["etsi-en300220-spurious"]}
    stages = [amp(gain="20 dB", oip3="+30 dBm", oip2="+40 dBm")]
    outcome = check(_lineup(stages, [{"freq": "50 MHz", "power": "-10 dBm"}], mask))
    assert _row(outcome, "2f1")["limit_dbm"] == pytest.approx(-54.0)
    assert "87.5" in _row(outcome, "2f1")["rule"]
    assert _row(outcome, "3f1")["limit_dbm"] == pytest.approx(-36.0)


def test_examined_range_follows_the_rule_set():
    # 47 CFR 2.1057(a)(1): investigate up to the 10th harmonic (below 10 GHz). With
    # max_order 12 the 11th harmonic is computed but no rule examines it (the odd
    # saturating model makes odd harmonics only).
    mask = {"use": ["us-fcc-97.307"]}
    stages = [amp(gain="20 dB", oip3="+30 dBm", psat="+25 dBm")]
    outcome = check(_lineup(stages, [{"freq": "144 MHz", "power": "+10 dBm"}], mask, max_order=12))
    assert _row(outcome, "9f1")["margin_db"] is not None
    assert _row(outcome, "11f1")["margin_db"] is None
    assert _row(outcome, "11f1")["domain"] == "no rule"
    # And an analysis that stops short of the examined range says so.
    short = check(_lineup(stages, [{"freq": "144 MHz", "power": "+10 dBm"}], mask, max_order=7))
    assert any("raise [analysis] max_order" in n for n in short.notes)


def test_97_307_limit_follows_carrier_power():
    # 47 CFR 97.307(e) check values (fact sheet 2.2, derived): 1 W at 145 MHz -> the
    # spurious limit is 25 uW (-16.0 dBm); 100 W -> 100 uW (-10.0 dBm).
    mask = {"use": ["us-fcc-97.307"]}
    for p_out_dbm, want in ((30.0, -16.02), (50.0, -10.0)):
        stages = [amp(gain="20 dB")]
        carriers = [{"freq": "145 MHz", "power": f"{p_out_dbm - 20} dBm"}]
        stages[0]["oip2"] = "+80 dBm"
        outcome = check(_lineup(stages, carriers, mask))
        assert _row(outcome, "2f1")["limit_dbm"] == pytest.approx(want, abs=0.01)


def test_worked_lineup_third_harmonic_in_protected_band_fails_second_passes():
    # Hand calculation. Carrier 470 MHz at 0 dBm into a 20 dB amplifier with small-signal
    # harmonic intercepts OHIP2 = +80 dBm, OHIP3 = +50 dBm (a datasheet's h2 = -50 dBc and
    # h3 = -40 dBc @ +30 dBm read with OHIPn = Pout + |dBc|/(n-1), common practice). In peak volts
    # (Razavi 2e ch. 2, from memory): a_n = 2^(n-1) a1 / A_IHIPn^(n-1), A = sqrt(2 R P),
    # H2 = a2 A^2 / 2, H3 = a3 A^3 / 4, fundamental a1 A + (3/4) a3 A^3 (a3 < 0).
    r = 50.0
    a1 = 10.0
    a_in = float(dbm_to_vpeak(0.0, r))
    a2 = 2 * a1 / float(dbm_to_vpeak(80.0 - 20.0, r))
    a3 = -4 * a1 / float(dbm_to_vpeak(50.0 - 20.0, r)) ** 2
    h2_dbm = float(vpeak_to_dbm(a2 * a_in**2 / 2, r))
    h3_dbm = float(vpeak_to_dbm(abs(a3) * a_in**3 / 4, r))
    assert h2_dbm == pytest.approx(-40.0, abs=0.01)  # 20 dBm - 60 dBc (1 dB/dB)
    assert h3_dbm == pytest.approx(-40.0, abs=0.01)  # 20 dBm - 60 dBc (2 dB/dB)
    # 2f1 = 940 MHz sits under Category A (-13 dBm/100 kHz): margin +27 dB, passes.
    # 3f1 = 1410 MHz sits in 1400-1427 MHz (RR 5.340), held here to -50 dBm/1 MHz:
    # margin -10 dB, fails (arithmetic on 3 x 470 MHz).
    mask = {"use": ["itu-sm329-cat-a", {"name": "itu-rr-5.340", "limit": "-50 dBm", "rbw": "1 MHz"}]}
    stages = [amp(gain="20 dB", ohip2="+80 dBm", ohip3="+50 dBm")]
    outcome = check(_lineup(stages, [{"freq": "470 MHz", "power": "0 dBm"}], mask))
    h2, h3 = _row(outcome, "2f1"), _row(outcome, "3f1")
    assert h2["level_dbm"] == pytest.approx(h2_dbm, abs=0.01)
    assert h2["margin_db"] == pytest.approx(-13.0 - h2_dbm, abs=0.01)
    assert h2["pass"] is True and h2["band"] is None
    assert h3["level_dbm"] == pytest.approx(h3_dbm, abs=0.01)
    assert h3["margin_db"] == pytest.approx(-50.0 - h3_dbm, abs=0.01)
    assert h3["pass"] is False and "1400-1427" in h3["band"]
    assert outcome.passed is False
    assert outcome.rows["label"][outcome.worst] == "3f1"


def test_out_of_band_domain_is_not_judged_against_spurious_limits():
    # Spurious domain starts 250 % of the necessary bandwidth from the centre (ITU RR
    # Appendix 3, from memory): with 25 kHz channels, IM3 25 kHz away is out-of-band,
    # IM5 at 50 kHz too (< 62.5 kHz), IM7 at 75 kHz is spurious (arithmetic).
    carriers = [
        {"freq": "450.000 MHz", "power": "-10 dBm", "bandwidth": "25 kHz"},
        {"freq": "450.025 MHz", "power": "-10 dBm", "bandwidth": "25 kHz"},
    ]
    mask = {"rule": [{"start": "9 kHz", "stop": "10 GHz", "limit": "-36 dBm", "rbw": "100 kHz"}]}
    stages = [amp(gain="20 dB", oip3="+30 dBm", psat="+20 dBm")]
    outcome = check(_lineup(stages, carriers, mask, max_order=7))
    assert _row(outcome, "2f1-f2")["domain"] == "out-of-band"
    assert _row(outcome, "2f1-f2")["pass"] is None
    assert _row(outcome, "3f1-2f2")["domain"] == "out-of-band"
    assert _row(outcome, "4f1-3f2")["domain"] == "spurious"


def test_relative_rules_use_the_total_carrier_power():
    # Mean power P is what the transmitter supplies to the antenna feed: the sum of the
    # carriers (ITU RR Appendix 3 wording, from memory). Two equal carriers at +20 dBm
    # each are +23.01 dBm: a -60 dBc rule gives -36.99 dBm (arithmetic).
    carriers = [{"freq": "150 MHz", "power": "0 dBm"}, {"freq": "151 MHz", "power": "0 dBm"}]
    mask = {"rule": [{"start": "9 kHz", "limit": "-60 dBc"}]}
    outcome = check(_lineup([amp(gain="20 dB", oip3="+60 dBm")], carriers, mask))
    assert outcome.carrier_dbm == pytest.approx(20 + 10 * math.log10(2), abs=0.01)
    assert _row(outcome, "2f1-f2")["limit_dbm"] == pytest.approx(20 + 10 * math.log10(2) - 60, abs=0.01)


def _two_tone_check(carriers, mask, max_order=7):
    stages = [amp(gain="20 dB", oip3="+30 dBm", oip2="+40 dBm", ohip5="+45 dBm", ohip7="+40 dBm")]
    return check(_lineup(stages, carriers, mask, max_order=max_order))


FLAT_100K = {"rule": [{"start": "9 kHz", "stop": "10 GHz", "limit": "-36 dBm", "rbw": "100 kHz"}]}


def test_product_narrower_than_rbw_gets_no_correction():
    # A product narrower than the RBW falls whole inside it and reads its full power
    # (common practice, no source): 2f1 - f2 of two 10 kHz carriers is 2 x 10 + 10 = 30 kHz
    # wide (sum |m_k| B_k, arithmetic), 2f1 is 20 kHz: both below 100 kHz, 0 dB.
    carriers = [
        {"freq": "450 MHz", "power": "-10 dBm", "bandwidth": "10 kHz"},
        {"freq": "460 MHz", "power": "-10 dBm", "bandwidth": "10 kHz"},
    ]
    outcome = _two_tone_check(carriers, FLAT_100K)
    for label, width_hz in (("2f1-f2", 30e3), ("2f1", 20e3), ("f1+f2", 20e3)):
        row = _row(outcome, label)
        assert row["bandwidth_hz"] == pytest.approx(width_hz)
        assert row["level_in_rbw_dbm"] == row["level_dbm"], label


def test_noise_like_second_zone_in_a_narrow_rbw_reads_its_peak_density():
    # A noise-like carrier of width B = 500 kHz: its 2nd zone is the rectangle convolved
    # with itself, a triangle of base 2B whose peak density is P / B (derived), so 100 kHz at
    # the peak hold 10 log10(100 / 500) = -6.99 dB of the zone's power P, where an even spread
    # over 2B read -10 dB.  The check reads the worst window of a finite average (a little high).
    carriers = [{"freq": "100 MHz", "power": "-10 dBm", "bandwidth": "500 kHz", "modulation": "gaussian"}]
    stages = [amp(gain="20 dB", oip3="+30 dBm", oip2="+40 dBm")]
    outcome = check(_lineup(stages, carriers, FLAT_100K, max_order=3))
    h2 = _row(outcome, "2f1 zone")
    assert h2["level_in_rbw_dbm"] - h2["level_dbm"] == pytest.approx(10 * math.log10(0.2) + 0.4, abs=0.6)
    assert h2["bandwidth_hz"] == pytest.approx(1e6, rel=0.05)


@pytest.mark.parametrize(("spacing", "domain"), [("24.5 kHz", "out-of-band"), ("25.5 kHz", "spurious")])
def test_out_of_band_boundary_just_inside_and_just_beyond(spacing, domain):
    # The out-of-band domain reaches 250 % of the necessary bandwidth from the carrier
    # (ITU RR Appendix 3, from memory): 50 kHz for 20 kHz carriers. 3f1 - 2f2 lies two
    # spacings below f1 (arithmetic): 49 kHz (inside) or 51 kHz (beyond).
    f2 = 450e6 + float(spacing.split()[0]) * 1e3
    carriers = [
        {"freq": "450 MHz", "power": "-10 dBm", "bandwidth": "20 kHz"},
        {"freq": f"{f2 / 1e6:.4f} MHz", "power": "-10 dBm", "bandwidth": "20 kHz"},
    ]
    outcome = _two_tone_check(carriers, FLAT_100K)
    row = _row(outcome, "3f1-2f2")
    assert row["domain"] == domain
    assert (row["pass"] is None) == (domain == "out-of-band")
    # One spacing away is always inside, three always beyond (24.5-25.5 vs 73.5-76.5 kHz).
    assert _row(outcome, "2f1-f2")["domain"] == "out-of-band"
    assert _row(outcome, "4f1-3f2")["domain"] == "spurious"


@pytest.mark.parametrize(("bandwidth", "domain"), [("2 MHz", "out-of-band"), ("1.9 MHz", "spurious")])
def test_out_of_band_boundary_scales_with_the_necessary_bandwidth(bandwidth, domain):
    # The same boundary moved by the bandwidth (ITU RR Appendix 3, 250 %, from memory):
    # 2f1 - f2 sits 4.9 MHz below f1 (carriers 100 and 104.9 MHz, arithmetic); 2.5 x 2 MHz
    # = 5 MHz puts it inside, 2.5 x 1.9 MHz = 4.75 MHz beyond.
    carriers = [
        {"freq": "100 MHz", "power": "-10 dBm", "bandwidth": bandwidth},
        {"freq": "104.9 MHz", "power": "-10 dBm", "bandwidth": bandwidth},
    ]
    outcome = _two_tone_check(carriers, FLAT_100K, max_order=3)
    assert _row(outcome, "2f1-f2")["domain"] == domain
    assert _row(outcome, "2f2-f1")["domain"] == domain


def test_a_product_exactly_on_the_out_of_band_boundary_is_judged_as_spurious():
    # ITU RR Appendix 3 (from memory) puts the boundary between the out-of-band and the
    # spurious domain at 250 % of the necessary bandwidth from the centre, and says
    # nothing of a product exactly on it.  spurplan's ruling: it is judged against the
    # spurious limits (the stricter reading: a product the out-of-band domain would leave
    # unjudged can never turn into a PASS there).  2f1 - f2 of 100 and 105 MHz carriers is
    # at 95 MHz, exactly 5 MHz = 2.5 x 2 MHz below f1 (arithmetic, exact in binary).
    carriers = [
        {"freq": "100 MHz", "power": "-10 dBm", "bandwidth": "2 MHz"},
        {"freq": "105 MHz", "power": "-10 dBm", "bandwidth": "2 MHz"},
    ]
    outcome = _two_tone_check(carriers, FLAT_100K, max_order=3)
    row = _row(outcome, "2f1-f2")
    assert row["freq_hz"] == 95e6
    assert row["domain"] == "spurious" and row["pass"] is not None


def test_a_strong_im3_in_the_out_of_band_domain_is_never_a_pass():
    # Two 1 MHz wide carriers 1 MHz apart: 2f1 - f2 sits 1 MHz below f1, inside the
    # out-of-band domain (250 % of the necessary bandwidth, ITU RR Appendix 3, from
    # memory), where the spurious limits do not apply.  With no out-of-band rule the
    # product is not judged, so the check cannot say PASS (the project's rule: a number
    # the check does not judge never turns into a pass).  Its level follows the textbook
    # two-tone relation, IM3 = 3 P_out - 2 OIP3 (Razavi, RF Microelectronics, from
    # memory): 3 x 10 - 2 x 30 = -30 dBm per tone at the output, -40 dBc.
    carriers = [
        {"freq": "100 MHz", "power": "-10 dBm", "bandwidth": "1 MHz"},
        {"freq": "101 MHz", "power": "-10 dBm", "bandwidth": "1 MHz"},
    ]
    lenient = {"rule": [{"start": "9 kHz", "stop": "10 GHz", "limit": "0 dBm", "rbw": "100 kHz"}]}
    outcome = _two_tone_check(carriers, lenient, max_order=3)
    row = _row(outcome, "2f1-f2")
    assert row["domain"] == "out-of-band" and row["pass"] is None
    assert row["level_dbm"] == pytest.approx(-30.0, abs=0.05)
    assert outcome.passed  # nothing the spurious rules judge fails
    assert outcome.status == "INCOMPLETE"
    assert outcome.verdict.startswith("INCOMPLETE")
    assert "out-of-band domain not judged (no out-of-band rule; strongest" in outcome.verdict
    assert outcome.strict_failure(strict=True)
    assert len(outcome.unjudged_rows) == sum(1 for d in outcome.rows["domain"] if d == "out-of-band")


def test_an_out_of_band_rule_judges_im3_against_its_offset_breakpoints():
    # The two-carrier case above under an out-of-band rule of dBc breakpoints against the
    # offset from the carrier's centre: -20 dBc at 0 Hz, -50 dBc at 1.5 MHz, linear in dB
    # between (the rule's own definition).  2f1 - f2 sits 1 MHz from f1: -20 - 30 x 1/1.5
    # = -40 dBc of the total mean carrier power (arithmetic); the product is about
    # -30 dBm (IM3 = 3 P_out - 2 OIP3, Razavi, from memory) against a carrier total of
    # 10 log10(2) + 10 = +13.01 dBm less the cubic's own two-tone compression (the model's
    # total, 0.3 dB lower at most 20 dB below OIP3): margin about +2.7 to +3.0 dB.
    carriers = [
        {"freq": "100 MHz", "power": "-10 dBm", "bandwidth": "1 MHz"},
        {"freq": "101 MHz", "power": "-10 dBm", "bandwidth": "1 MHz"},
    ]
    mask = {
        "rule": [
            {"start": "9 kHz", "stop": "10 GHz", "limit": "0 dBm", "rbw": "100 kHz"},
            {
                "name": "near the carriers",
                "domain": "out-of-band",
                "offsets": [["0 Hz", "-20 dBc"], ["1.5 MHz", "-50 dBc"]],
            },
        ]
    }
    outcome = _two_tone_check(carriers, mask, max_order=3)
    row = _row(outcome, "2f1-f2")
    assert row["domain"] == "out-of-band" and row["rule"] == "lineup: near the carriers"
    assert row["limit_dbm"] == pytest.approx(outcome.carrier_dbm - 40.0, abs=1e-9)
    assert 10 * math.log10(2) + 10.0 - 0.3 < outcome.carrier_dbm <= 10 * math.log10(2) + 10.0
    assert row["level_dbm"] == pytest.approx(-30.0, abs=0.05)
    assert row["margin_db"] == pytest.approx(row["limit_dbm"] - row["level_dbm"], abs=1e-9)
    assert 2.6 < row["margin_db"] < 3.1 and row["pass"] is True
    assert row["limit_form"] == "-20 dBc at 0 Hz, -50 dBc at 1.5 MHz"
    # A stricter flat out-of-band limit makes the same product fail the check.
    mask["rule"][1] = {"name": "strict", "domain": "out-of-band", "limit": "-50 dBc"}
    strict = _two_tone_check(carriers, mask, max_order=3)
    assert strict.status == "FAIL"
    assert strict.rows["label"][strict.worst] in ("2f1-f2", "2f2-f1")
    assert strict.worst_margin_db == pytest.approx(row["margin_db"] - 10.0, abs=1e-6)


@pytest.mark.parametrize(
    ("rule", "needle"),
    [
        ({"offsets": [["0 Hz", "-20 dBc"], ["1 MHz", "-50 dBc"]]}, 'expected domain = "out-of-band"'),
        ({"domain": "out-of-band", "offsets": [["0 Hz", "-20 dBc"]]}, "2 to 64 of them"),
        ({"domain": "out-of-band", "offsets": [["1 MHz", "-20 dBc"], ["1 MHz", "-50 dBc"]]}, "increase"),
        ({"domain": "out-of-band", "offsets": [["0 Hz", "-20 dBm"], ["1 MHz", "-50 dBc"]]}, "dBc"),
        ({"domain": "out-of-band", "attenuation": "43 dB"}, "dBm or dBc"),
        ({"domain": "nearby", "limit": "-30 dBc"}, "out-of-band"),
    ],
)
def test_malformed_out_of_band_rules_are_one_line_errors(rule, needle):
    carriers = [{"freq": "100 MHz", "power": "-10 dBm", "bandwidth": "1 MHz"}]
    rule = {"name": "r", **({"start": "9 kHz"} if "domain" not in rule else {}), **rule}
    with pytest.raises(LineupError) as caught:
        _lineup([amp(gain="20 dB", oip3="+30 dBm")], carriers, {"rule": [rule]})
    assert needle in str(caught.value) and "\n" not in str(caught.value)


def test_the_shipped_mask_b_judges_a_product_by_its_offset_in_bandwidths():
    # us-fcc-90.210-mask-b (fact sheet 2.7, from memory): 25 dB from 50 % to 100 % of the
    # authorized bandwidth.  Two 20 kHz carriers 15 kHz apart: 2f1 - f2 sits 15 kHz below
    # f1 = 75 % of 20 kHz, so its limit is the total carrier power less 25 dB; 3f1 - 2f2
    # at 30 kHz (150 %) is held 35 dB down (arithmetic).
    carriers = [
        {"freq": "150 MHz", "power": "-10 dBm", "bandwidth": "20 kHz"},
        {"freq": "150.015 MHz", "power": "-10 dBm", "bandwidth": "20 kHz"},
    ]
    mask = {"use": ["us-fcc-90.210-mask-b", "itu-sm329-cat-a"]}
    outcome = _two_tone_check(carriers, mask, max_order=5)
    im3, im5 = _row(outcome, "2f1-f2"), _row(outcome, "3f1-2f2")
    assert im3["rule"] == "us-fcc-90.210-mask-b: Mask B, 50 % - 250 % of the authorized bandwidth"
    assert im3["limit_dbm"] == pytest.approx(outcome.carrier_dbm - 25.0, abs=1e-9)
    assert im5["limit_dbm"] == pytest.approx(outcome.carrier_dbm - 35.0, abs=1e-9)
    # IM3 = 3 P_out - 2 OIP3 = -30 dBm per side (Razavi, from memory) against about
    # +12.8 - 25 = -12.2 dBm: judged, and a pass by about 18 dB.
    assert im3["level_dbm"] == pytest.approx(-30.0, abs=0.05)
    assert im3["pass"] is True and im3["margin_db"] == pytest.approx(im3["limit_dbm"] + 30.0, abs=0.05)
