"""Per-stage attribution and combining modes, against hand calculations."""

from __future__ import annotations

import math

import pytest
from helpers import amp, lineup

from spurplan.units import dbm_to_vpeak


def _rows(result, **kw):
    rows = result.product_rows(**kw)
    return {lab: {c: rows[c][i] for c in rows} for i, lab in enumerate(rows["label"])}


def test_driver_h2_carried_through_odd_pa_is_attributed_to_driver():
    # Hand calculation (OHIPn = Pout + |dBc|/(n-1), common practice): the driver makes
    # 2f1 at -40 dBc on a +10 dBm carrier (h2 figure at +20 dBm, 10 dB less drive -> 10 dB
    # less dBc), i.e. -30 dBm; the odd-order PA adds 20 dB of gain and no 2nd-order term
    # of its own, so 2f1 leaves at -10 dBm and the largest contributor is the driver.
    stages = [
        amp("driver", gain="20 dB", h2="-30 dBc @ +20 dBm"),
        amp("pa", gain="20 dB", oip3="+60 dBm"),
    ]
    result = lineup(stages, carriers=(("150 MHz", "-10 dBm"),), combine="worst").run()
    rows = _rows(result)
    assert rows["2f1"]["stage"] == "driver"
    assert rows["2f1"]["level_dbm"] == pytest.approx(-10.0, abs=0.05)
    # The PA's cubic makes the 3rd harmonic: 3f1 is attributed to the PA.
    assert rows["3f1"]["stage"] == "pa"


def test_worst_case_adds_magnitudes_of_two_equal_contributions():
    # Two identical second-order stages separated by a pad that exactly undoes the first
    # gain: the second stage sees the same carrier, so each makes the same 2f1 amplitude
    # A at its output; the first one's is carried by the pad and the second's gain (loss
    # 10 dB, gain 10 dB: unity). Worst case is |A| + |A| = +6.02 dB over one stage
    # (arithmetic); power sum is +3.01 dB.
    stages = [
        amp("s1", gain="10 dB", oip2="+40 dBm"),
        {"kind": "attenuator", "name": "pad", "loss": "10 dB"},
        amp("s2", gain="10 dB", oip2="+40 dBm"),
    ]
    one = _rows(lineup(stages[:1], carriers=(("100 MHz", "-20 dBm"),)).run())["2f1"]["level_dbm"]
    two = lineup(stages, carriers=(("100 MHz", "-20 dBm"),)).run()
    worst = _rows(two, combine="worst")["2f1"]["level_dbm"]
    power = _rows(two, combine="power")["2f1"]["level_dbm"]
    assert worst - one == pytest.approx(20 * math.log10(2), abs=0.01)
    assert power - one == pytest.approx(10 * math.log10(2), abs=0.01)


def test_node_report_at_intermediate_stage():
    # At the pad's output the carrier is input + gain - loss (arithmetic).
    stages = [amp("a", gain="15 dB", oip3="+40 dBm"), {"kind": "attenuator", "name": "pad", "loss": "6 dB"}]
    result = lineup(stages, carriers=(("100 MHz", "-30 dBm"),)).run()
    rows = _rows(result, stage="pad")
    assert rows["f1"]["level_dbm"] == pytest.approx(-30 + 15 - 6, abs=0.001)
    assert result.carrier_levels_dbm("a")[0] == pytest.approx(-15.0, abs=0.001)


def test_expansive_cubic_raises_gain_with_drive():
    # y = a1 x + a3 x^3 with a3 > 0: fundamental a1 A + (3/4) a3 A^3 (Razavi 2e ch. 2;
    # from memory), computed here from the IIP3 definition A_IIP3^2 = (4/3) a1/a3.
    lu = lineup([amp(gain="10 dB", oip3="+30 dBm", cubic="expansive")], carriers=(("100 MHz", "+5 dBm"),))
    a1 = 10**0.5
    amp_in = float(dbm_to_vpeak(5.0))
    a3 = (4 / 3) * a1 / float(dbm_to_vpeak(20.0)) ** 2
    want = 20 * math.log10(a1 * amp_in + 0.75 * a3 * amp_in**3)
    got_dbm = lu.run().carrier_levels_dbm()[0]
    assert 20 * math.log10(float(dbm_to_vpeak(got_dbm))) == pytest.approx(want, abs=1e-6)
