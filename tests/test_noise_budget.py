"""Cascaded noise figure and output noise density in the budget (issue 14, noise: first step).

References: Friis, "Noise figures of radio receivers", Proc. IRE 32 (1944) for the
cascade formula (from memory); the 2019 SI for k = 1.380649e-23 J/K (exact) and the
IEEE reference temperature T0 = 290 K (from memory); a matched passive network at T0
has a noise figure equal to its loss (Pozar, Microwave Engineering, noise chapter, from
memory).
"""

from __future__ import annotations

import math

import pytest
from helpers import amp, lineup

from spurplan.analyses.budget import KT0_DBM_HZ, budget_rows, cascade_nf_db
from spurplan.errors import LineupError


def _db(x: float) -> float:
    return 10.0 * math.log10(x)


def test_kt0_is_minus_174_dbm_per_hz():
    # k T0 = 1.380649e-23 x 290 W/Hz = 4.0039e-21 W/Hz = -173.975 dBm/Hz (arithmetic);
    # "-174 dBm/Hz" is its common rounding (common practice, no source).
    assert pytest.approx(_db(1.380649e-23 * 290.0 / 1e-3), abs=1e-12) == KT0_DBM_HZ
    assert pytest.approx(-173.975, abs=1e-3) == KT0_DBM_HZ


def test_friis_three_stages():
    # LNA 20 dB / 1.5 dB, mixer -7 dB / 7 dB, IF amplifier 25 dB / 4 dB: Friis in linear
    # ratios, computed here term by term.
    g = [100.0, 10 ** (-0.7), 10**2.5]
    f = [10**0.15, 10**0.7, 10**0.4]
    want = [f[0], f[0] + (f[1] - 1) / g[0], f[0] + (f[1] - 1) / g[0] + (f[2] - 1) / (g[0] * g[1])]
    got = cascade_nf_db([20.0, -7.0, 25.0], [1.5, 7.0, 4.0])
    assert got == pytest.approx([_db(w) for w in want], abs=1e-12)


def test_unknown_noise_figure_leaves_the_cascade_unknown_from_there_on():
    assert cascade_nf_db([20.0, 10.0, 10.0], [2.0, None, 3.0]) == [pytest.approx(2.0), None, None]


def test_pad_before_an_amplifier_adds_its_loss_and_a_pad_alone_outputs_kt0():
    # A 6 dB pad then an amplifier of NF 3 dB: F = L + (F_a - 1) L = L F_a, i.e. 6 + 3 dB
    # (the passive-network rule above); the pad alone has NF 6 dB and, with gain -6 dB,
    # outputs exactly k T0 (a matched passive network at T0 adds as much as it takes).
    stages = [
        {"kind": "attenuator", "name": "pad", "loss": "6 dB"},
        amp("amp", gain="20 dB", oip3="+30 dBm", oip2="+40 dBm", p1db="+20 dBm", noise_figure="3 dB"),
    ]
    rows = budget_rows(lineup(stages).run())
    assert rows["nf_db"] == [pytest.approx(6.0, abs=1e-9), 3.0]
    assert rows["cascade_nf_db"][0] == pytest.approx(6.0, abs=1e-9)
    assert rows["cascade_nf_db"][1] == pytest.approx(9.0, abs=1e-9)
    assert rows["noise_out_dbm_hz"][0] == pytest.approx(KT0_DBM_HZ, abs=1e-9)
    assert rows["noise_out_dbm_hz"][1] == pytest.approx(KT0_DBM_HZ + 9.0 + 14.0, abs=1e-9)


def test_an_amplifier_without_a_noise_figure_has_no_cascade():
    rows = budget_rows(lineup([amp("amp", gain="20 dB", oip3="+30 dBm")]).run())
    assert rows["nf_db"] == [None] and rows["cascade_nf_db"] == [None]
    assert rows["noise_out_dbm_hz"] == [None]


@pytest.mark.parametrize("value", ["-1 dB", "45 dB", "3 dBm"])
def test_implausible_noise_figures_are_one_line_errors(value):
    with pytest.raises(LineupError) as caught:
        lineup([amp("amp", gain="20 dB", noise_figure=value)])
    assert "noise_figure" in str(caught.value) and "\n" not in str(caught.value)


def test_the_check_judges_the_output_noise_in_each_rule_bandwidth():
    # One amplifier of 30 dB gain and 5 dB noise figure: the output noise density is
    # k T0 F G = -173.975 + 5 + 30 = -138.975 dBm/Hz (Friis, one stage), so in a 1 MHz
    # reference bandwidth -78.975 dBm: a -80 dBm/1 MHz protected band fails it by
    # 1.025 dB (hand computation), far from the 100 MHz carrier.
    from helpers import amp as _amp

    from spurplan.analyses.check import check
    from spurplan.io.lineup_file import from_dict

    stage = _amp("amp", gain="30 dB", oip3="+40 dBm", oip2="+50 dBm", p1db="+25 dBm", noise_figure="5 dB")
    doc = {
        "carrier": [{"freq": "100 MHz", "power": "-40 dBm"}],
        "stage": [stage],
        "mask": {
            "band": [
                {
                    "name": "receiver",
                    "start": "1559 MHz",
                    "stop": "1610 MHz",
                    "limit": "-80 dBm",
                    "rbw": "1 MHz",
                }
            ]
        },
        "analysis": {"max_order": 5},
    }
    outcome = check(from_dict(doc, name="noise.toml"))
    i = outcome.rows["label"].index("noise")
    assert outcome.rows["level_dbm"][i] == pytest.approx(KT0_DBM_HZ + 35.0 + 60.0, abs=1e-6)
    assert outcome.rows["margin_db"][i] == pytest.approx(-80.0 - (KT0_DBM_HZ + 95.0), abs=1e-6)
    assert 1559e6 <= outcome.rows["freq_hz"][i] <= 1610e6
    assert outcome.status == "FAIL" and outcome.rows["label"][outcome.worst] == "noise"


def test_noise_through_a_mixer_follows_friis_with_the_conversion_gain():
    # A mixer (conversion gain -7 dB, SSB noise figure 7 dB) then an amplifier (20 dB,
    # 3 dB): F = F_m + (F_a - 1) / G_m = 5.012 + 0.995 / 0.1995 = 10.0 (10 dB; Friis,
    # arithmetic), and the output density k T0 F G_m G_a = -173.975 + 10 + 13 dBm/Hz at
    # any output frequency whose IF image |f - LO| the source covers.  The budget's
    # cascade says the same at the carrier.
    from spurplan.engine.noise import output_noise_dbm_hz
    from spurplan.io.lineup_file import from_dict

    doc = {
        "carrier": [{"freq": "100 MHz", "power": "-20 dBm"}],
        "stage": [
            {
                "kind": "mixer",
                "name": "mixer",
                "lo": {"freq": "1 GHz", "power": "+7 dBm"},
                "conversion_gain": "-7 dB",
                "noise_figure": "7 dB",
            },
            amp("amp", gain="20 dB", oip3="+30 dBm", noise_figure="3 dB"),
        ],
    }
    lineup = from_dict(doc, name="mixer-noise.toml")
    f_m, g_m, f_a = 10**0.7, 10**-0.7, 10**0.3
    want = KT0_DBM_HZ + _db(f_m + (f_a - 1) / g_m) + 13.0
    got = output_noise_dbm_hz(lineup, [1.1e9, 1.105e9, 0.9e9])
    assert got == pytest.approx([want] * 3, abs=1e-9)
    rows = budget_rows(lineup.run())
    assert rows["noise_out_dbm_hz"][-1] == pytest.approx(want, abs=1e-9)


def test_noise_a_rule_cannot_judge_keeps_the_check_from_pass():
    # A rule without a reference bandwidth compares a product's whole power, which broad
    # noise does not have: the noise under it is not judged, and a check that does not
    # judge something cannot say PASS (the project's rule).  The same amplifier as above
    # passes its products easily.
    from spurplan.analyses.check import check
    from spurplan.io.lineup_file import from_dict

    stage = amp("amp", gain="30 dB", oip3="+40 dBm", oip2="+50 dBm", p1db="+25 dBm", noise_figure="5 dB")
    doc = {
        "carrier": [{"freq": "100 MHz", "power": "-40 dBm"}],
        "stage": [stage],
        "mask": {"rule": [{"name": "whole power", "start": "9 kHz", "stop": "1 GHz", "limit": "-20 dBm"}]},
        "analysis": {"max_order": 5},
    }
    outcome = check(from_dict(doc, name="noise.toml"))
    assert outcome.passed and outcome.status == "INCOMPLETE"
    assert (
        "noise not judged under rules without a reference bandwidth (lineup: whole power)" in outcome.verdict
    )


def test_spectrum_document_carries_the_noise_density_beside_each_product():
    # Pad 6 dB then an amplifier of NF 3 dB and 20 dB gain (flat): k T0 + 9 dB + 14 dB at
    # every product's frequency (Friis, as above; k T0 = -173.975 dBm/Hz).
    from spurplan.output.documents import products_document

    stages = [
        {"kind": "attenuator", "name": "pad", "loss": "6 dB"},
        amp("amp", gain="20 dB", oip3="+30 dBm", oip2="+40 dBm", p1db="+20 dBm", noise_figure="3 dB"),
    ]
    doc = products_document(lineup(stages).run())
    assert len(doc.rows["noise_dbm_hz"]) == len(doc.rows["freq_hz"]) > 3
    for value in doc.rows["noise_dbm_hz"]:
        assert value == pytest.approx(KT0_DBM_HZ + 9.0 + 14.0, abs=1e-9)
    # At an inner node the output noise is not what the column means: left empty.
    inner = products_document(lineup(stages).run(), "pad")
    assert set(inner.rows["noise_dbm_hz"]) == {None}
