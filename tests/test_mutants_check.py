"""The mask check: checks added after mutation testing (MUTATION.md).

Field-strength limits that fall as 1/F through the whole check, antenna gain
interpolated between points, margins of exactly zero, batches of a run, the order of
rows, the out-of-band boundary at exactly 250 %, and the shapes and carrier
conditions of a rule, each against a regulation's number or plain arithmetic."""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest
from helpers import amp

from spurplan.analyses.check import check
from spurplan.io.lineup_file import from_dict
from spurplan.model.masks import Mask, Rule


def _lineup(stages, carriers, mask, max_order=5):
    doc = {
        "carrier": [dict(c) for c in carriers],
        "stage": stages,
        "mask": mask,
        "analysis": {"max_order": max_order},
    }
    return from_dict(doc, name="mutants-check.toml")


def _row(outcome, label):
    i = outcome.rows["label"].index(label)
    return {k: v[i] for k, v in outcome.rows.items()}


def _eirp_dbm(e_uv_per_m: float, distance_m: float) -> float:
    # Free space, isotropic: e = sqrt(30 p) / d (ITU-R P.525-2 eq. (1)), so p = (e d)^2 / 30 W.
    p_w = (e_uv_per_m * 1e-6 * distance_m) ** 2 / 30.0
    return 10 * math.log10(p_w * 1e3)


PA = amp("pa", gain="20 dB", ohip2="+50 dBm", ohip3="+40 dBm")


def test_low_frequency_field_limit_and_interpolated_antenna_gain_in_the_check():
    # 47 CFR 15.209(a): 2400/F(kHz) uV/m at 300 m from 9 to 490 kHz.  The harmonic 2f1
    # of a 100 kHz carrier sits at 200 kHz: 12 uV/m -> EIRP by P.525 above.  The antenna
    # gain, 0 dBi at 100 kHz and 6 dBi at 300 kHz, is 3 dBi at 200 kHz (linear in
    # frequency, arithmetic), and the conducted limit is the EIRP limit less the gain.
    mask = {
        "antenna_gain": [["100 kHz", "0 dBi"], ["300 kHz", "6 dBi"]],
        "rule": [{"start": "9 kHz", "stop": "490 kHz", "limit": "2400/F uV/m @ 300 m", "name": "15.209 LF"}],
    }
    outcome = check(_lineup([PA], [{"freq": "100 kHz", "power": "-20 dBm"}], mask))
    h2 = _row(outcome, "2f1")
    assert h2["limit_dbm"] == pytest.approx(_eirp_dbm(2400 / 200, 300.0) - 3.0, abs=1e-6)
    h3 = _row(outcome, "3f1")
    assert h3["limit_dbm"] == pytest.approx(_eirp_dbm(2400 / 300, 300.0) - 6.0, abs=1e-6)
    # The rule alone, with the kHz of F read exactly (1/F: 24 uV/m at 100 kHz).
    rule = Rule("15.209 LF", 9e3, 490e3, "field", 20 * math.log10(2400.0), distance_m=300.0, per_khz=True)
    assert float(rule.limit_dbm(100e3, 0.0, 0.0)) == pytest.approx(_eirp_dbm(24.0, 300.0), abs=1e-9)


def test_antenna_gain_is_linear_between_points_and_held_beyond():
    # Linear interpolation in frequency between (100 MHz, 0 dBi) and (300 MHz, 6 dBi),
    # the end values held outside (arithmetic).
    mask = Mask(antenna_gain=((100e6, 0.0), (300e6, 6.0)))
    got = mask.antenna_gain_dbi(np.array([50e6, 100e6, 150e6, 200e6, 300e6, 1e9]))
    assert got == pytest.approx([0.0, 0.0, 1.5, 3.0, 6.0, 6.0], abs=1e-12)
    assert Mask().antenna_gain_dbi(np.array([1e6, 2e6])) == pytest.approx([0.0, 0.0])


def test_a_level_exactly_at_the_limit_passes():
    # "Not exceed" / "at least ... below" (47 CFR 2.1051, 22.917: attenuated by at least
    # 43 + 10 log10 P dB): a margin of exactly 0 dB complies.  The limit is set to the
    # level itself, so the margin is exactly zero in floating point.
    carriers = [{"freq": "100 MHz", "power": "-10 dBm"}]
    first = check(
        _lineup([PA], carriers, {"rule": [{"start": "150 MHz", "stop": "250 MHz", "limit": "0 dBm"}]})
    )
    level = _row(first, "2f1")["level_dbm"]
    mask = {"rule": [{"start": "150 MHz", "stop": "250 MHz", "limit": f"{level!r} dBm", "name": "edge"}]}
    outcome = check(_lineup([PA], carriers, mask))
    row = _row(outcome, "2f1")
    assert row["margin_db"] == 0.0
    assert row["pass"] is True
    assert outcome.passed is True


def test_check_reads_the_batch_element_of_a_given_run():
    # A run of two drive offsets, 0 and +6 dB: the second element's H2 is 12 dB higher
    # (second-order product, 2 dB per dB of drive; Razavi, RF Microelectronics 2e, 2.2),
    # its H3 18 dB higher, and check() of that element reports exactly those levels.
    lu = _lineup(
        [PA],
        [{"freq": "100 MHz", "power": "-30 dBm"}],
        {"rule": [{"start": "150 MHz", "stop": "1 GHz", "limit": "0 dBm"}]},
    )
    res = lu.run(drive_offset_db=np.array([0.0, 6.0]))
    base = check(lu)
    hot = check(lu, result=res, batch=1)
    assert _row(hot, "2f1")["level_dbm"] == pytest.approx(_row(base, "2f1")["level_dbm"] + 12.0, abs=1e-6)
    assert _row(hot, "3f1")["level_dbm"] == pytest.approx(_row(base, "3f1")["level_dbm"] + 18.0, abs=1e-6)
    cold = check(lu, result=res, batch=0)
    assert _row(cold, "2f1")["level_dbm"] == pytest.approx(_row(base, "2f1")["level_dbm"], abs=1e-9)
    # The carrier too, up to its own cubic compression (3/4 a3 A^3, well under 0.01 dB here).
    assert hot.carrier_dbm == pytest.approx(base.carrier_dbm + 6.0, abs=0.01)


def test_rows_come_worst_margin_first_whatever_rule_holds():
    # Two rules, the first (index 0) strict: its product has the least margin and must
    # lead the table; the order is that of sorted() on the margins.
    mask = {
        "rule": [
            {"start": "150 MHz", "stop": "250 MHz", "limit": "-100 dBm", "name": "strict", "rbw": "100 kHz"},
            {"start": "250 MHz", "stop": "1 GHz", "limit": "0 dBm", "name": "lenient"},
        ]
    }
    outcome = check(_lineup([PA], [{"freq": "100 MHz", "power": "-10 dBm"}], mask))
    margins = [m for m in outcome.rows["margin_db"] if m is not None]
    assert margins == sorted(margins)
    assert outcome.rows["label"][0] == "2f1"
    assert outcome.rows["rbw_hz"][0] == 100e3  # the rule's stated reference bandwidth
    assert _row(outcome, "3f1")["rbw_hz"] is None
    # A CW carrier occupies no bandwidth (definition), so neither do its products.
    assert _row(outcome, "2f1")["bandwidth_hz"] == 0.0


def test_a_product_exactly_250_percent_away_is_spurious():
    # ITU RR Appendix 3 / ITU-R SM.329: the spurious domain is the frequencies 250 % or more
    # of the necessary bandwidth from the centre (from memory).  Carriers 100.000 and
    # 100.025 MHz of 10 kHz each: 2f1-f2 at 99.975 MHz is exactly 25 kHz = 2.5 x 10 kHz from
    # f1 (all exact in binary floating point); 3f1-2f2 at 99.95 MHz is 5 bandwidths away.
    carriers = [
        {"freq": "100 MHz", "power": "-10 dBm", "bandwidth": "10 kHz"},
        {"freq": "100025 kHz", "power": "-10 dBm", "bandwidth": "10 kHz"},
    ]
    mask = {"rule": [{"start": "9 kHz", "stop": "1 GHz", "limit": "0 dBm"}]}
    outcome = check(_lineup([PA], carriers, mask))
    assert _row(outcome, "2f1-f2")["domain"] == "spurious"
    assert _row(outcome, "2f2-f1")["domain"] == "spurious"
    # Just inside: carriers 24.9 kHz apart put 2f1-f2 2.49 bandwidths out.
    carriers[1]["freq"] = "100024.9 kHz"
    outcome = check(_lineup([PA], carriers, mask))
    assert _row(outcome, "2f1-f2")["domain"] == "out-of-band"


def test_rule_shapes_and_carrier_conditions():
    # numpy broadcasting: a limit over three frequencies at one power is three values.
    rule = Rule("flat", 0.0, math.inf, "absolute", -36.0)
    assert rule.limit_dbm(np.array([1e6, 2e6, 3e6]), 30.0, 0.0).shape == (3,)
    assert rule.limit_dbm(np.array([1e6, 2e6]), np.array([[30.0], [40.0]]), np.zeros(2)).shape == (2, 2)
    assert rule.holds_for(100e6, 30.0) is True
    # "when_carrier = {start, stop}" includes both ends; "when_power = {above, at_most}"
    # excludes "above" and includes "at_most" (the words' plain meaning; common practice).
    cond = Rule(
        "cond", 0.0, math.inf, "absolute", -36.0, when_carrier_hz=(30e6, 225e6), when_power_dbm=(40.0, 50.0)
    )
    f = np.array([30e6, 225e6, 100e6, 20e6, 100e6, 100e6])
    p = np.array([45.0, 45.0, 40.0, 45.0, 50.0, 51.0])
    assert cond.holds_for(f, p).tolist() == [True, True, False, False, True, False]
    # Both conditions must hold: a frequency outside with a power inside fails.
    assert cond.holds_for(300e6, 45.0) is False
    assert cond.holds_for(100e6, 45.0) is True


def test_the_250_percent_boundary_at_exactly_its_edge_scales_with_the_bandwidth():
    # The same edge (ITU RR Appendix 3, "250 % or more" spurious; from memory) with 20 kHz
    # channels 50 kHz apart: 2f1-f2 is exactly 50 kHz = 2.5 x 20 kHz from f1 (exact in
    # binary floating point), spurious; 49 kHz apart it is 2.45 bandwidths out, out-of-band.
    mask = {"rule": [{"start": "9 kHz", "stop": "1 GHz", "limit": "0 dBm"}]}
    for f2, domain in (("100050 kHz", "spurious"), ("100049 kHz", "out-of-band")):
        carriers = [
            {"freq": "100000 kHz", "power": "-10 dBm", "bandwidth": "20 kHz"},
            {"freq": f2, "power": "-10 dBm", "bandwidth": "20 kHz"},
        ]
        assert _row(check(_lineup([PA], carriers, mask)), "2f1-f2")["domain"] == domain, f2


def test_a_mask_built_in_code_has_the_250_percent_boundary():
    # ITU RR Appendix 3 / ITU-R SM.329: the out-of-band domain reaches 250 % of the necessary
    # bandwidth from the centre (from memory), for a Mask made in code as for one read
    # from a file.
    assert Mask().spurious_boundary == 2.5


def test_check_with_a_mask_built_in_code_keeps_products_within_250_percent_out_of_band():
    # Same boundary (ITU RR Appendix 3, 250 %; from memory) through check() for a lineup
    # whose Mask is built in code without naming the boundary: 2f1-f2 of 10 kHz carriers
    # 22 kHz apart is 2.2 bandwidths out, out-of-band; at 27 kHz (2.7) it is spurious.
    mask = {"rule": [{"start": "9 kHz", "stop": "1 GHz", "limit": "0 dBm"}]}
    for f2, domain in (("100022 kHz", "out-of-band"), ("100027 kHz", "spurious")):
        carriers = [
            {"freq": "100000 kHz", "power": "-10 dBm", "bandwidth": "10 kHz"},
            {"freq": f2, "power": "-10 dBm", "bandwidth": "10 kHz"},
        ]
        lu = _lineup([PA], carriers, mask)
        lu = dataclasses.replace(lu, mask=Mask(sets=lu.mask.sets))
        assert _row(check(lu), "2f1-f2")["domain"] == domain, f2
