"""The mixer stage: product frequencies, leakage and image, drive scaling, brute force."""

from __future__ import annotations

import math

import numpy as np
import pytest
from click.testing import CliRunner
from helpers import compare_with_reference, levels_by_label
from reference import Linear, Mixing, Tone, simulate

import spurplan
from spurplan.check import check
from spurplan.cli import main
from spurplan.lineup_file import from_dict
from spurplan.resources import example_path
from spurplan.spur_chart import spur_chart
from spurplan.stages.mixer import parse_spur_label, spur_label


def _mixer(**kw):
    base = {"kind": "mixer", "name": "mixer", "lo": {"freq": "1.6 GHz", "power": "+7 dBm"}}
    if "conversion_gain" not in kw:
        base["conversion_loss"] = "6 dB"
    return {**base, **kw}


def _lineup(stages, carrier=("70 MHz", "-10 dBm"), max_order=7, mask=None):
    doc = {
        "carrier": [{"freq": carrier[0], "power": carrier[1]}],
        "stage": stages,
        "analysis": {"max_order": max_order},
    }
    if mask:
        doc["mask"] = mask
    return from_dict(doc, name="mixer-test.toml")


def test_spur_labels_round_trip():
    for m in range(0, 8):
        for n in range(-7, 8):
            if (m == 0 and n <= 0) or m + abs(n) > 7:
                continue
            assert parse_spur_label(spur_label(m, n)) == (m, n)


def test_chart_frequencies_are_m_flo_plus_n_fif_to_order_7():
    # |m f_LO + n f_IF| for all m, n with m + |n| <= 7 (arithmetic).
    f_lo, f_if = 1.6e9, 70e6
    lu = _lineup([_mixer(spur_drive="-10 dBm", spurs={"2LO-IF": "-40 dBc"})])
    chart = spur_chart(lu, "mixer", max_order=7)
    want = {
        (m, n): abs(m * f_lo + n * f_if)
        for m in range(8)
        for n in range(-7, 8)
        if m + abs(n) <= 7 and not (m == 0 and n <= 0)
    }
    got = {(m, n): f for m, n, f in zip(chart.rows["m"], chart.rows["n"], chart.rows["freq_hz"], strict=True)}
    assert got.keys() == want.keys()
    for key, f in want.items():
        assert got[key] == pytest.approx(f, rel=1e-15)
    # And the engine puts the products it makes at those frequencies.
    rows = lu.run().product_rows()
    for label, f in zip(rows["label"], rows["freq_hz"], strict=True):
        m, n = parse_spur_label(label)
        assert f == pytest.approx(abs(m * f_lo + n * f_if))


def test_image_and_lo_leakage_levels_follow_the_figures():
    # Wanted = IF drive + conversion gain; image = wanted - image rejection; LO leakage
    # = LO power - LO-to-RF isolation (definitions of the figures; common practice).
    lu = _lineup([_mixer(lo_isolation="35 dB", image_rejection="22 dB")])
    lv = levels_by_label(lu.run(), combine="phase")
    assert lv["LO+IF"] == pytest.approx(-10 - 6, abs=1e-9)
    assert lv["LO-IF"] == pytest.approx(-10 - 6 - 22, abs=1e-9)
    assert lv["LO"] == pytest.approx(7 - 35, abs=1e-9)
    # Lower sideband: the roles swap.
    lu = _lineup([_mixer(sideband="lower", image_rejection="22 dB")])
    lv = levels_by_label(lu.run(), combine="phase")
    assert lv["LO-IF"] == pytest.approx(-16.0, abs=1e-9)
    assert lv["LO+IF"] == pytest.approx(-38.0, abs=1e-9)
    assert lu.run().product_rows()["kind"][lu.run().product_rows()["label"].index("LO-IF")] == "carrier"


def test_dbc_moves_n_minus_1_db_per_db_of_if_drive():
    # The usual rule: a product of IF order n moves (|n| - 1) dB in dBc per dB of IF
    # drive (common practice, no source); the model must agree. At the stated drive
    # the table holds exactly.
    spurs = {
        "2LO-IF": "-40 dBc",
        "LO+2IF": "-55 dBc",
        "2LO-3IF": "-65 dBc",
        "3LO": "-30 dBc",
        "2IF": "-50 dBc",
    }
    lu = _lineup([_mixer(spur_drive="-10 dBm", spurs=spurs)])
    result = lu.run(drive_offset_db=np.array([0.0, -10.0]))
    for label, dbc in spurs.items():
        _, n = parse_spur_label(label)
        at_ref = result.product_rows(batch=0)
        low = result.product_rows(batch=1)
        d0 = at_ref["dbc"][at_ref["label"].index(label)]
        d1 = low["dbc"][low["label"].index(label)]
        assert d0 == pytest.approx(float(dbc.split()[0]), abs=1e-9)
        assert (d0 - d1) / 10.0 == pytest.approx(abs(n) - 1, abs=1e-9)


def test_ideal_multiplier_gives_sidebands_6_02_db_below_the_product():
    # cos a cos b = (cos(a - b) + cos(a + b)) / 2 (trigonometric identity): a multiplier
    # y = x lo with amplitudes A and B gives both sidebands at A B / 2, 6.02 dB below A B.
    # A double-sideband mixer with conversion gain 20 log10(B/2) is that multiplier; the
    # brute-force reference multiplies the samples.
    b_lo = 2.0  # volts: the LO amplitude of the multiplier
    lu = _lineup(
        [_mixer(conversion_gain=f"{20 * math.log10(b_lo / 2)} dB")], carrier=("7 MHz", "0 dBm"), max_order=3
    )
    lv = levels_by_label(lu.run(), combine="phase")
    a_if = math.sqrt(2 * 50 * 1e-3)
    product_dbm = 10 * math.log10((a_if * b_lo) ** 2 / (2 * 50) * 1e3)
    assert lv["LO+IF"] == pytest.approx(product_dbm - 20 * math.log10(2), abs=1e-9)
    assert lv["LO-IF"] == pytest.approx(lv["LO+IF"], abs=1e-9)
    # The identity on a grid where both tones sit on bins (IF 7, LO 50 bins of 1 MHz).
    lo_bin = 50
    x_ref = simulate(
        [Tone(7e6, 0.0, 0.0)], [Mixing(((1, 1, b_lo / 2), (1, -1, b_lo / 2)), lo_bin)], df_hz=1e6, length=256
    )
    x_mul = simulate(
        [Tone(7e6, 0.0, 0.0)],
        [lambda x: x * b_lo * np.cos(2 * np.pi * lo_bin * np.arange(256) / 256)],
        df_hz=1e6,
        length=256,
    )
    for f in (43e6, 57e6):
        assert x_mul.at(f) == pytest.approx(product_dbm - 20 * math.log10(2), abs=1e-9)
        assert x_ref.at(f) == pytest.approx(x_mul.at(f), abs=1e-9)


def test_if_mixer_bandpass_pa_lowpass_equals_brute_force():
    # IF -> mixer -> band-pass -> PA -> low-pass against the brute-force time-domain
    # reference (tests/reference.py) with the same terms and responses: every product
    # above -150 dBc within 0.01 dB (polynomial PA and mixer terms: exact to the order).
    stages = [
        _mixer(
            lo={"freq": "50 MHz", "power": "+7 dBm"},
            lo_isolation="30 dB",
            spur_drive="-10 dBm",
            spurs={"2LO-IF": "-30 dBc", "LO+2IF": "-45 dBc", "2LO": "-25 dBc", "2IF": "-50 dBc"},
        ),
        {
            "kind": "filter",
            "name": "bpf",
            "prototype": {
                "family": "butterworth",
                "response": "bandpass",
                "order": 3,
                "center": "57 MHz",
                "bandwidth": "30 MHz",
            },
        },
        {"kind": "amplifier", "name": "pa", "gain": "20 dB", "oip3": "+25 dBm", "oip2": "+35 dBm"},
        {
            "kind": "filter",
            "name": "lpf",
            "prototype": {"family": "chebyshev", "order": 5, "cutoff": "80 MHz", "ripple": "0.1 dB"},
        },
    ]
    lu = _lineup(stages, carrier=("7 MHz", "-10 dBm"), max_order=12)
    rows = lu.run().product_rows(combine="phase")
    mixer = lu.stages[0]
    ref = simulate(
        [Tone(7e6, -10.0, 0.0)],
        [
            Mixing(mixer.transfer.terms, 50),
            Linear(lu.stages[1].response),
            lu.stages[2].transfer,
            Linear(lu.stages[3].response),
        ],
        df_hz=1e6,
        length=4096,
    )
    assert compare_with_reference(rows, ref, floor_dbc=-150.0, abs_db=0.01) >= 20


def test_upconverter_example_low_side_lo_puts_2lo_minus_if_in_the_passband():
    # Invented example: IF 295 MHz to 900 MHz. Low-side LO 605 MHz: 2 x 605 - 295 = 915
    # MHz (arithmetic) lands inside the 880-920 MHz band-pass and fails; the high-side
    # LO (1195 MHz, lower sideband) puts no tabulated product there and passes.
    low = spurplan.load(example_path("upconverter_low_side.toml"))
    high = spurplan.load(example_path("upconverter_high_side.toml"))
    chart = spur_chart(low, "mixer")
    assert "2LO-IF" in chart.summary()["in_passband"]
    assert spur_chart(high, "mixer").summary()["in_passband"] == []
    outcome = check(low)
    assert not outcome.passed and outcome.rows["label"][outcome.worst] == "2LO-IF"
    assert outcome.rows["freq_hz"][outcome.worst] == pytest.approx(915e6)
    assert check(high).passed
    out = CliRunner().invoke(
        main, ["spurs", str(example_path("upconverter_low_side.toml")), "--stage", "mixer"]
    )
    assert out.exit_code == 0 and "IN THE PASSBAND: 2LO-IF" in out.stdout


def test_tuning_the_lo_moves_the_products():
    # Sweeping the LO of the low-side example: 2LO-IF = 2 f_LO - 295 MHz stays inside
    # 880-920 MHz from about f_LO = 587.5 to 607.5 MHz (arithmetic, less the filter's
    # skirt), so some failing LO range lies inside that span.
    from spurplan.sweep import tune_sweep

    low = spurplan.load(example_path("upconverter_low_side.toml"))
    sweep = tune_sweep(low, np.arange(560e6, 620e6 + 1, 2e6))
    ranges = [r for r in sweep.failing if r["label"] == "2LO-IF"]
    assert ranges
    assert all(r["start_hz"] >= 587.5e6 - 5e6 and r["stop_hz"] <= 607.5e6 + 5e6 for r in ranges)
    assert sweep.summary()["swept"] == "LO"


@pytest.mark.parametrize(
    ("stage", "needle"),
    [
        ({"lo": "1 GHz"}, "expected a table"),
        ({"lo": {"freq": "1 GHz"}}, "power"),
        ({"conversion_gain": "-6 dB"}, "exactly one"),
        ({"spurs": {"2LO-IF": "-40 dBc"}}, "spur_drive"),
        ({"spur_drive": "-10 dBm", "spurs": {"2LX-IF": "-40 dBc"}}, "expected a product"),
        ({"spur_drive": "-10 dBm", "spurs": {"2LO-IF": "-40 dB"}}, "dBc"),
        ({"sideband": "both"}, "expected one of upper, lower"),
        ({"spur_drive": "-10 dBm", "spurs": {"LO+IF": "-3 dBc"}}, "wanted product"),
    ],
)
def test_malformed_mixer_stages(tmp_path, stage, needle):
    base = _mixer()
    base.update(stage)
    if stage.get("conversion_gain"):
        base["conversion_loss"] = "6 dB"  # both given: the error under test
    import json

    def toml_value(v):
        if isinstance(v, dict):
            return (
                "{ "
                + ", ".join(
                    f"{json.dumps(k) if not k.isidentifier() else k} = {toml_value(x)}" for k, x in v.items()
                )
                + " }"
            )
        return json.dumps(v)

    lines = ["[[carrier]]", 'freq = "70 MHz"', 'power = "-10 dBm"', "[[stage]]"]
    lines += [f"{k} = {toml_value(v)}" for k, v in base.items()]
    (tmp_path / "m.toml").write_text("\n".join(lines) + "\n", encoding="utf-8")
    out = CliRunner().invoke(main, ["spectrum", str(tmp_path / "m.toml")])
    assert out.exit_code == 2, out.output
    err = out.stderr.strip().splitlines()
    assert len(err) == 1 and "stage 1 'mixer'" in err[0] and needle in err[0]
