"""The mixer stage: product frequencies, leakage and image, drive scaling, brute force."""

from __future__ import annotations

import math

import numpy as np
import pytest
from click.testing import CliRunner
from helpers import compare_with_reference, levels_by_label
from reference import Linear, Mixing, Tone, simulate

import spurplan
from spurplan.analyses.check import check
from spurplan.analyses.spur_chart import spur_chart
from spurplan.cli import main
from spurplan.io.lineup_file import from_dict
from spurplan.io.resources import example_path
from spurplan.model.stages.mixer import parse_spur_label, spur_label

# An invented spur table of IF orders 0 to 3.
TABLE = {"2LO-IF": "-40 dBc", "LO+2IF": "-55 dBc", "2LO-3IF": "-65 dBc", "3LO": "-30 dBc", "2IF": "-50 dBc"}


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
    spurs = TABLE
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


@pytest.mark.parametrize(
    ("carriers", "compression", "df_hz", "floor_dbc"),
    [
        ((("7 MHz", "-10 dBm"),), {}, 1e6, -150.0),
        # One IF tone 1 dB above P1dB: a constant envelope, exact on any grid.
        ((("7 MHz", "-2 dBm"),), {"p1db": "-3 dBm"}, 1e6, -150.0),
        # Two IF tones (7.0 and 7.3 MHz, LO 50 MHz, on a 100 kHz grid: two products share
        # a bin only if their mixing vectors differ by order 24 or more, e.g. 3 LO - 11 IF1
        # - 10 IF2; arithmetic) in compression: the limited envelope has products of
        # every order, which the engine keeps to max_order and the reference keeps all
        # of; the PA mixes the dropped orders back into the kept products at a low level,
        # so the floor is raised to where that is far below 0.01 dB (raising max_order
        # lowers the level at which it shows).
        ((("7 MHz", "-8 dBm"), ("7.3 MHz", "-10 dBm")), {"p1db": "-3 dBm"}, 1e5, -110.0),
    ],
    ids=["linear", "compressed-one-tone", "compressed-two-tones"],
)
def test_if_mixer_bandpass_pa_lowpass_equals_brute_force(carriers, compression, df_hz, floor_dbc):
    # IF -> mixer -> band-pass -> PA -> low-pass against the brute-force time-domain
    # reference (tests/reference.py) with the same terms and responses: every product
    # above the floor within 0.01 dB (polynomial PA and mixer terms: exact to the order;
    # the reference compresses the FFT analytic signal sample by sample).
    stages = [
        _mixer(
            lo={"freq": "50 MHz", "power": "+7 dBm"},
            lo_isolation="30 dB",
            spur_drive="-10 dBm",
            spurs={"2LO-IF": "-30 dBc", "LO+2IF": "-45 dBc", "2LO": "-25 dBc", "2IF": "-50 dBc"},
            **compression,
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
    doc = {
        "carrier": [{"freq": f, "power": p} for f, p in carriers],
        "stage": stages,
        "analysis": {"max_order": 12},
    }
    lu = from_dict(doc, name="mixer-test.toml")
    rows = lu.run().product_rows(combine="phase")
    mixer = lu.stages[0]
    ref = simulate(
        [Tone(float(f.split()[0]) * 1e6, float(p.split()[0]), 0.0) for f, p in carriers],
        [
            Mixing(mixer.transfer.terms, round(50e6 / df_hz), knee_v=mixer.transfer.knee_v),
            Linear(lu.stages[1].response),
            lu.stages[2].transfer,
            Linear(lu.stages[3].response),
        ],
        df_hz=df_hz,
        length=round(4096e6 / df_hz),
    )
    tones_hz = [50e6] + [float(f.split()[0]) * 1e6 for f, _ in carriers]  # LO, then the IF tones
    assert compare_with_reference(rows, ref, floor_dbc, 0.01, tones_hz=tones_hz, max_order=12) >= 20


@pytest.mark.slow
def test_upconverter_example_low_side_lo_puts_2lo_minus_if_in_the_passband():
    # Invented example: IF 295 MHz to 900 MHz. Low-side LO 605 MHz: 2 x 605 - 295 = 915
    # MHz (arithmetic) lands inside the 880-920 MHz band-pass and fails; the high-side
    # LO (1195 MHz, lower sideband) puts no tabulated product there and passes.
    low = spurplan.load(example_path("upconverter_low_side.toml"))
    high = spurplan.load(example_path("upconverter_high_side.toml"))
    chart = spur_chart(low, "mixer")
    assert "2LO-IF" in chart.in_passband
    assert spur_chart(high, "mixer").in_passband == []
    outcome = check(low)
    assert not outcome.passed and outcome.rows["label"][outcome.worst] == "2LO-IF"
    assert outcome.rows["freq_hz"][outcome.worst] == pytest.approx(915e6)
    assert check(high).passed
    out = CliRunner().invoke(
        main, ["spurs", str(example_path("upconverter_low_side.toml")), "--stage", "mixer"]
    )
    assert out.exit_code == 0 and "IN THE PASSBAND: 2LO-IF" in out.stdout


@pytest.mark.slow
def test_tuning_the_lo_moves_the_products():
    # Sweeping the LO of the low-side example: 2LO-IF = 2 f_LO - 295 MHz stays inside
    # 880-920 MHz from about f_LO = 587.5 to 607.5 MHz (arithmetic, less the filter's
    # skirt), so some failing LO range lies inside that span.
    from spurplan.analyses.sweep import tune_sweep

    low = spurplan.load(example_path("upconverter_low_side.toml"))
    sweep = tune_sweep(low, np.arange(560e6, 620e6 + 1, 2e6))
    ranges = [r for r in sweep.failing if r["label"] == "2LO-IF"]
    assert ranges
    assert all(r["start_hz"] >= 587.5e6 - 5e6 and r["stop_hz"] <= 607.5e6 + 5e6 for r in ranges)
    assert sweep.variable == "LO"


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


# --- IF compression, IF feedthrough, missing figures ----------------------------------------------


def _level(result, label, batch=0):
    rows = result.product_rows(batch=batch, combine="phase")
    return rows["level_dbm"][rows["label"].index(label)]


def _level_at(result, freq_hz, batch=0):
    rows = result.product_rows(batch=batch, combine="phase")
    i = int(np.argmin(np.abs(np.asarray(rows["freq_hz"]) - freq_hz)))
    assert rows["freq_hz"][i] == pytest.approx(freq_hz, abs=1.0)
    return rows["level_dbm"][i]


@pytest.mark.parametrize(("p1db", "sideband"), [(1.0, "upper"), (-4.0, "lower"), (12.5, "upper")])
def test_p1db_is_where_a_drive_sweep_compresses_the_wanted_output_by_1_db(p1db, sideband):
    # Definition of P1dB (common practice, no source): the input power at which the
    # output lies 1 dB below the small-signal line (IF drive + conversion gain). The
    # sweep crosses -1 dB between two points 0.05 dB apart; the crossing, interpolated
    # linearly, must be the stated figure within 0.05 dB.
    lu = _lineup(
        [_mixer(p1db=f"{p1db:+g} dBm", sideband=sideband)], carrier=("70 MHz", "-10 dBm"), max_order=5
    )
    drive = p1db + np.arange(-2.0, 2.0 + 1e-9, 0.05)
    result = lu.run(drive_offset_db=drive + 10.0)
    wanted = "LO+IF" if sideband == "upper" else "LO-IF"
    comp = np.array([_level(result, wanted, b) - (d - 6.0) for b, d in enumerate(drive)])
    assert np.all(np.diff(comp) < 0)  # compression deepens with drive
    i = int(np.nonzero(comp <= -1.0)[0][0])
    crossing = drive[i - 1] + (-1.0 - comp[i - 1]) / (comp[i] - comp[i - 1]) * 0.05
    assert crossing == pytest.approx(p1db, abs=0.05)
    # 30 dB below P1dB the mixer is linear: wanted = IF + conversion gain within 0.01 dB.
    low = _lineup([_mixer(p1db=f"{p1db:+g} dBm", sideband=sideband)], carrier=("70 MHz", f"{p1db - 30} dBm"))
    assert _level(low.run(), wanted) == pytest.approx(p1db - 30 - 6.0, abs=0.01)


def test_spurs_rise_n_db_per_db_then_flatten_in_compression():
    # Below compression a product of IF order n rises n dB per dB (common practice, no
    # source); a limited envelope stops growing, so 14 to 19 dB above P1dB every product
    # that depends on the IF grows by less than 0.5 dB per dB (saturation of a limiter).
    spurs = {"2LO-IF": "-40 dBc", "LO+2IF": "-55 dBc", "LO-3IF": "-65 dBc"}
    lu = _lineup([_mixer(p1db="+1 dBm", spur_drive="-10 dBm", spurs=spurs)], carrier=("70 MHz", "-40 dBm"))
    result = lu.run(drive_offset_db=np.array([0.0, 1.0, 55.0, 60.0]))
    for label in ("LO+IF", *spurs):
        n = abs(parse_spur_label(label)[1])
        assert _level(result, label, 1) - _level(result, label, 0) == pytest.approx(n, abs=0.01)
        assert (_level(result, label, 3) - _level(result, label, 2)) / 5.0 < 0.5


@pytest.mark.parametrize("iip3", [10.0, -3.0])
def test_two_tone_im3_of_the_wanted_output_follows_3_to_1_and_the_stated_iip3(iip3):
    # Input-referred IM3 = 3 Pin - 2 IIP3 per tone at low drive (Razavi, RF
    # Microelectronics 2e, ch. 2; from memory); at the output add the conversion gain.
    # Two IF tones at 70 and 71 MHz: IM3 of the wanted output at LO + 2 IF1 - IF2 and
    # LO + 2 IF2 - IF1 (arithmetic).
    f_lo, f1, f2 = 1.6e9, 70e6, 71e6
    for pin in (iip3 - 40.0, iip3 - 50.0):
        lu = from_dict(
            {
                "carrier": [
                    {"freq": "70 MHz", "power": f"{pin} dBm"},
                    {"freq": "71 MHz", "power": f"{pin} dBm"},
                ],
                "stage": [_mixer(iip3=f"{iip3:+g} dBm", image_rejection="30 dB")],
                "analysis": {"max_order": 5},
            },
            name="im3.toml",
        )
        result = lu.run()
        for f in (f_lo + 2 * f1 - f2, f_lo + 2 * f2 - f1):
            assert _level_at(result, f) == pytest.approx(3 * pin - 2 * iip3 - 6.0, abs=0.05)
        assert _level_at(result, f_lo + f1) == pytest.approx(pin - 6.0, abs=0.01)


def test_compression_leaves_the_spur_table_alone_at_low_drive():
    # The table is what the mixer gives at spur_drive; below compression each entry is
    # L dBc at the stated drive and moves |n| - 1 dB in dBc per dB (common practice, no
    # source). With P1dB 20 dB above the table's drive the model must still give those
    # levels within 0.05 dB, at the drive and 10 dB below it.
    spurs = TABLE
    lu = _lineup([_mixer(p1db="+10 dBm", spur_drive="-10 dBm", spurs=spurs)])
    result = lu.run(drive_offset_db=np.array([0.0, -10.0]))
    for batch, offset in ((0, 0.0), (1, -10.0)):
        for label, text in spurs.items():
            n = abs(parse_spur_label(label)[1])
            level_dbc = float(text.split()[0]) + (n - 1) * offset
            assert _level(result, label, batch) == pytest.approx(-10 + offset - 6 + level_dbc, abs=0.05)


def test_spur_table_holds_at_its_drive_even_in_compression():
    # A spur table is a measurement at spur_drive (common practice, no source): dBc
    # relative to the wanted output as it is there, compressed or not. At spur_drive =
    # P1dB the wanted output is 1 dB below the small-signal line (definition of P1dB)
    # and each entry still holds exactly.
    spurs = {"2LO-IF": "-40 dBc", "LO+2IF": "-55 dBc", "3LO": "-30 dBc"}
    lu = _lineup([_mixer(p1db="-10 dBm", spur_drive="-10 dBm", spurs=spurs)], carrier=("70 MHz", "-10 dBm"))
    result = lu.run()
    wanted = -10 - 6 - 1.0
    assert _level(result, "LO+IF") == pytest.approx(wanted, abs=1e-9)
    for label, text in spurs.items():
        assert _level(result, label) == pytest.approx(wanted + float(text.split()[0]), abs=1e-9)


def test_if_isolation_puts_the_if_at_if_power_minus_isolation():
    # Definition of the figure (common practice, no source): IF leakage at the output =
    # IF power - IF-to-RF isolation, 1 dB per dB of IF drive. Exact without compression;
    # 40 dB below P1dB within 0.01 dB.
    for extra in ({}, {"p1db": "+10 dBm"}):
        lu = _lineup([_mixer(if_isolation="40 dB", **extra)], carrier=("70 MHz", "-30 dBm"))
        result = lu.run(drive_offset_db=np.array([0.0, -7.0]))
        tol = 1e-9 if not extra else 0.01
        assert _level(result, "IF", 0) == pytest.approx(-30 - 40, abs=tol)
        assert _level(result, "IF", 1) == pytest.approx(-37 - 40, abs=tol)
    # The same figure as a table entry is -isolation - conversion gain = -34 dBc
    # (arithmetic); an entry within 0.5 dB of it is accepted and the isolation sets the level.
    both = _lineup([_mixer(if_isolation="40 dB", spur_drive="-10 dBm", spurs={"IF": "-34.2 dBc"})])
    assert _level(both.run(), "IF") == pytest.approx(-10 - 40, abs=1e-9)


_ALL = {
    "lo_isolation": "35 dB",
    "spur_drive": "-10 dBm",
    "spurs": {"2LO-IF": "-40 dBc"},
    "p1db": "+1 dBm",
    "if_isolation": "40 dB",
    "noise_figure": "8 dB",
}
_PHRASE = {
    "lo_isolation": "LO isolation (lo_isolation)",
    "spurs": "spur table (spurs with spur_drive)",
    "p1db": "compression (p1db or iip3)",
    "if_isolation": "IF feedthrough (if_isolation or spurs 'IF')",
    "noise_figure": "noise figure (noise_figure)",
}


@pytest.mark.parametrize(
    "absent",
    [(), ("lo_isolation",), ("spurs",), ("p1db",), ("if_isolation",), ("noise_figure",), tuple(_PHRASE)],
)
def test_missing_figures_lists_exactly_what_is_absent(absent):
    # The figure classes of the module docstring, and the noise figure; each absent one
    # is named once.
    keys = dict(_ALL)
    for key in absent:
        keys.pop(key)
        if key == "spurs":
            keys.pop("spur_drive")
    mixer = _lineup([_mixer(**keys)]).stages[0]
    assert mixer.missing_figures() == tuple(_PHRASE[k] for k in _PHRASE if k in absent)


def test_figures_given_as_table_entries_or_through_iip3_count_as_stated():
    mixer = _lineup(
        [
            _mixer(
                iip3="+10 dBm",
                spur_drive="-10 dBm",
                spurs={"LO": "-30 dBc", "IF": "-40 dBc", "3LO": "-20 dBc"},
                noise_figure="8 dB",
            )
        ]
    ).stages[0]
    assert mixer.missing_figures() == ()
    # A table of only the wanted product, the image, LO and IF holds no m x n spurs.
    mixer = _lineup(
        [_mixer(spur_drive="-10 dBm", spurs={"LO": "-30 dBc", "IF": "-40 dBc", "LO-IF": "-20 dBc"})]
    ).stages[0]
    assert mixer.missing_figures() == (
        "spur table (spurs with spur_drive)",
        "compression (p1db or iip3)",
        "noise figure (noise_figure)",
    )


def test_compressed_mixer_equals_brute_force_one_and_two_if_tones():
    # The mixer alone, driven into compression, against the time-domain reference
    # (tests/reference.py: analytic signal by FFT, the envelope limiter per sample).
    # One tone: constant envelope, exact on any grid. Two tones 7.0 and 7.3 MHz on a
    # 100 kHz grid (two products share a bin only if their mixing vectors differ by
    # order 24 or more, so no two of order 9 or less do; arithmetic): the limited
    # envelope has products of every order; a record of 4096 bins holds them until they
    # are far below the floor.
    stage = _mixer(
        lo={"freq": "50 MHz", "power": "+7 dBm"},
        lo_isolation="30 dB",
        if_isolation="35 dB",
        p1db="-3 dBm",
        spur_drive="-10 dBm",
        spurs={"2LO-IF": "-30 dBc", "LO+2IF": "-45 dBc", "2LO": "-25 dBc", "LO-3IF": "-60 dBc"},
    )
    for carriers in ((("7 MHz", "0 dBm"),), (("7 MHz", "-6 dBm"), ("7.3 MHz", "-8 dBm"))):
        lu = from_dict(
            {
                "carrier": [{"freq": f, "power": p} for f, p in carriers],
                "stage": [stage],
                "analysis": {"max_order": 9},
            },
            name="bf.toml",
        )
        rows = lu.run().product_rows(combine="phase")
        mixer = lu.stages[0]
        tones = [Tone(float(f.split()[0]) * 1e6, float(p.split()[0]), 0.0) for f, p in carriers]
        ref = simulate(
            tones,
            [Mixing(mixer.transfer.terms, 500, knee_v=mixer.transfer.knee_v)],
            df_hz=1e5,
            length=4096,
        )
        tones_hz = [50e6] + [t.freq_hz for t in tones]  # LO, then the IF tones
        assert compare_with_reference(rows, ref, -120.0, 0.01, tones_hz=tones_hz, max_order=9) >= 8


def test_switching_mixer_matches_if_times_a_square_wave_lo():
    # A physical model that no spurplan code builds: a switching (commutating) mixer
    # multiplies the IF by a +-1 square-wave LO, sq(t) = sum over odd m of
    # (4 / (pi m)) cos(m w_LO t) (Fourier series of a square wave; from memory), so the
    # output has m f_LO +- f_IF for odd m at amplitude A 2 / (pi m) each, i.e.
    # 20 log10(1/m) dB relative to m = 1, and nothing at even m.  The spurplan mixer
    # states exactly that: conversion gain 20 log10(2/pi) dB per sideband (double
    # sideband: no image rejection), the odd-m sidebands at 20 log10(1/m) dBc in its
    # spur table, no LO or IF leakage.  Held against IF x square wave sampled in numpy.
    orders = (3, 5, 7, 9)
    spurs = {}
    for m in orders:
        for sign in "+-":
            spurs[f"{m}LO{sign}IF"] = f"{20 * math.log10(1 / m):.12f} dBc"
    p_if_dbm = -10.0
    lu = _lineup(
        [
            _mixer(
                lo={"freq": "80 MHz", "power": "+7 dBm"},
                conversion_gain=f"{20 * math.log10(2 / math.pi):.12f} dB",
                spur_drive=f"{p_if_dbm} dBm",
                spurs=spurs,
            )
        ],
        carrier=("10 MHz", f"{p_if_dbm} dBm"),
        max_order=11,
    )
    lv = levels_by_label(lu.run(), combine="phase")

    def square_wave_product(samples_per_lo_period: int) -> dict:
        # IF on bin 1, LO on bin 8 (10 MHz bins). A period of N samples with N = 2
        # mod 4 never samples a zero crossing of cos and has exactly N/2 positive
        # samples (50 % duty); the sampled square wave aliases its harmonics, which
        # vanishes as N grows (checked below by doubling N).
        lo_bin, if_bin = 8, 1
        n = lo_bin * samples_per_lo_period
        j = np.arange(n, dtype=np.int64)
        a_if = math.sqrt(2 * 50 * 10 ** ((p_if_dbm - 30) / 10))
        x = a_if * np.cos(2 * np.pi * ((if_bin * j) % n) / n)
        sq = np.sign(np.cos(2 * np.pi * ((lo_bin * j) % n) / n))
        amp = 2 * np.abs(np.fft.rfft(x * sq)) / n
        with np.errstate(divide="ignore"):
            dbm = 10 * np.log10(amp**2 / (2 * 50)) + 30
        return {(m, s): dbm[m * lo_bin + s * if_bin] for m in range(1, 11) for s in (1, -1)}

    sim = square_wave_product(2 * 8192 + 2)
    finer = square_wave_product(4 * 8192 + 2)
    for key, level in sim.items():
        if np.isfinite(level) and level > -100:
            # Precondition: the sampled square wave has converged on these bins.
            assert abs(level - finer[key]) < 1e-3, key
    for m in (1, *orders):
        for s, sign in ((1, "+"), (-1, "-")):
            label = "LO" + sign + "IF" if m == 1 else f"{m}LO{sign}IF"
            # Expected: the time-domain product of the IF and a square wave (numpy).
            assert lv[label] == pytest.approx(sim[(m, s)], abs=0.01), label
            # And the Fourier series itself: 20 log10(1/m) below m = 1 (from memory).
            assert sim[(m, s)] - sim[(1, 1)] == pytest.approx(20 * math.log10(1 / m), abs=0.01)
    for m in (2, 4, 6, 8, 10):
        # Even harmonics: none in the physical model, none in the engine's table.
        assert max(sim[(m, 1)], sim[(m, -1)]) < sim[(1, 1)] - 200
        assert f"{m}LO+IF" not in lv and f"{m}LO-IF" not in lv
    # No other product: the ideal switch has no leakage (the table lists only the
    # products above).
    assert set(lv) == {"LO+IF", "LO-IF"} | set(spurs)
