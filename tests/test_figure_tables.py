"""Stage figures stated as tables against frequency (spurplan.model.figure_tables).

Every lineup here is an invented scenario (a VHF transmitter tuning 150-174 MHz).
"""

from __future__ import annotations

import numpy as np
import pytest
from helpers import amp, assert_one_error_line, invoke, write

from spurplan.analyses.check import check
from spurplan.analyses.montecarlo import run_yield
from spurplan.analyses.sweep import tune_sweep
from spurplan.errors import LineupError
from spurplan.io.lineup_file import from_dict
from spurplan.model.figure_tables import FigureTable
from spurplan.model.stages.amplifier_fit import HARMONIC_TOL_DB

GAIN_TABLE = [["150 MHz", "24 dB"], ["174 MHz", "22.5 dB"]]
LOSS_TABLE = [["150 MHz", "1 dB"], ["174 MHz", "2 dB"]]
FLAT = {"rule": [{"start": "9 kHz", "stop": "20 GHz", "limit": "-60 dBm", "name": "flat"}]}
CHANNELS_HZ = np.array([150e6, 156e6, 162e6, 168e6, 174e6])


def _lineup(stages, carrier=("162 MHz", "-40 dBm"), mask=FLAT, analysis=None, max_order=5):
    doc = {
        "lineup": {"name": "figure tables (invented)"},
        "carrier": [{"freq": carrier[0], "power": carrier[1]}],
        "stage": stages,
        "mask": mask,
        "analysis": {"max_order": max_order, **(analysis or {})},
    }
    return from_dict(doc, name="tables.toml")


def _gain(f_mhz):
    """Hand interpolation of GAIN_TABLE, linear in dB against frequency (common practice, no source)."""
    return 24.0 + (f_mhz - 150.0) / (174.0 - 150.0) * (22.5 - 24.0)


def _loss(f_mhz):
    """Hand interpolation of LOSS_TABLE (common practice, no source)."""
    return 1.0 + (f_mhz - 150.0) / (174.0 - 150.0) * (2.0 - 1.0)


# --- interpolation ---------------------------------------------------------------------------------


def test_interpolation_is_linear_in_db_against_frequency_by_hand():
    # Hand calculation (linear in dB against frequency, common practice, no source):
    # 24 dB at 150 MHz, 22.5 dB at 174 MHz; at 162 MHz 24 + (12/24)(-1.5) = 23.25 dB,
    # at 156 MHz 24 + (6/24)(-1.5) = 23.625 dB, at the rows the rows themselves.
    table = FigureTable("gain", (150e6, 174e6), (24.0, 22.5))
    got = table(np.array([150e6, 156e6, 162e6, 174e6]))
    assert got.tolist() == pytest.approx([24.0, 23.625, 23.25, 22.5], abs=1e-12)
    # Three rows: piecewise linear, each piece by hand: between 162 MHz (23 dB) and
    # 174 MHz (20 dB), 168 MHz is halfway: 21.5 dB.
    three = FigureTable("gain", (150e6, 162e6, 174e6), (24.0, 23.0, 20.0))
    assert float(three(168e6)) == pytest.approx(21.5, abs=1e-12)
    assert float(three(156e6)) == pytest.approx(23.5, abs=1e-12)


def test_loaded_stage_takes_the_figures_at_the_lineups_channel():
    # The loaded amplifier and pad hold the figures at the carrier (162 MHz): gain
    # 23.25 dB, loss 1.5 dB, OIP3 +41 dBm halfway between +42 and +40 dBm (by hand).
    stages = [
        amp(
            "pa",
            gain=GAIN_TABLE,
            oip3=[["150 MHz", "+42 dBm"], ["174 MHz", "+40 dBm"]],
            h2="-40 dBc @ +10 dBm",
        ),
        {"kind": "attenuator", "name": "pad", "loss": LOSS_TABLE},
    ]
    lu = _lineup(stages)
    pa, pad = lu.stages
    assert pa.gain_db == pytest.approx(23.25, abs=1e-12)
    assert pa.figures.oip3_dbm == pytest.approx(41.0, abs=1e-12)
    assert pad.loss_db == pytest.approx(1.5, abs=1e-12)
    # The check runs at the channel: carrier out = -40 + 23.25 - 1.5 dBm (by hand; the
    # cubic's compression 56 dB below the intercept is below 1e-4 dB).
    out = check(lu, lu.run())
    assert out.carrier_dbm == pytest.approx(-40 + 23.25 - 1.5, abs=1e-4)


def test_input_referred_table_moves_with_a_gain_table():
    # iip3 stated against frequency: OIP3 = IIP3 + G at each frequency (common practice,
    # no source): at 162 MHz +18 + 23.25 = +41.25 dBm.
    stages = [amp("pa", gain=GAIN_TABLE, iip3=[["150 MHz", "+18 dBm"], ["174 MHz", "+18 dBm"]])]
    pa = _lineup(stages).stages[0]
    assert pa.figures.oip3_dbm == pytest.approx(18.0 + 23.25, abs=1e-12)
    moved = pa.channel_deltas(np.array([150e6, 174e6]))
    # OIP3 moves by the gain's change: +0.75 dB at 150 MHz, -0.75 dB at 174 MHz.
    assert moved["oip3"].tolist() == pytest.approx([0.75, -0.75], abs=1e-12)


# --- sweeps and yield at each channel -------------------------------------------------------------


def _tune_lineup():
    # Polynomial amplifier (no compression figure): gain from the table, h2 -40 dBc at
    # +10 dBm output, i.e. OHIP2 = 10 + 40 = +50 dBm (small-signal reading, common
    # practice), so 2f1 = 2 P_out - 50 dBm whatever the gain.
    stages = [
        amp("pa", gain=GAIN_TABLE, h2="-40 dBc @ +10 dBm"),
        {"kind": "attenuator", "name": "pad", "loss": LOSS_TABLE},
    ]
    return _lineup(stages)


def test_tune_moves_the_carrier_by_the_tables_value_at_each_channel():
    lu = _tune_lineup()
    result = lu.run(tone_freqs_hz=lu.tuned_tones_hz(CHANNELS_HZ))  # what tune's chunks run
    out = result.carrier_levels_dbm_batch()[:, 0]
    f = CHANNELS_HZ / 1e6
    # Hand: P_out = -40 dBm + G(f) - L(f); a polynomial without odd terms has no
    # compression, so the level is exact (to rounding).
    assert out.tolist() == pytest.approx((-40.0 + _gain(f) - _loss(f)).tolist(), abs=1e-9)
    sweep = tune_sweep(lu, CHANNELS_HZ)
    g = sweep.labels[0].index("2f1")
    assert all(row[g] == "2f1" for row in sweep.labels)
    # 2f1 at the PA output = 2 P_pa - OHIP2 (Razavi, RF Microelectronics 2e, ch. 2, from
    # memory) with P_pa = -40 + G(f), then less the pad's L(f); against the flat -60 dBm
    # rule: margin = -60 - (2 P_pa - 50 - L), by hand per channel.
    expected = -60.0 - (2.0 * (-40.0 + _gain(f)) - 50.0 - _loss(f))
    assert sweep.margin_db[:, g].tolist() == pytest.approx(expected.tolist(), abs=1e-6)


def test_tune_through_an_upconverter_reads_the_table_at_the_rf_carrier():
    # The amplifier after the mixer sees the wanted product LO + IF: tuning the LO from
    # 140 to 164 MHz with a 10 MHz IF moves it over 150-174 MHz.  Carrier out =
    # IF power + conversion gain + G(LO + IF), by hand (the leaked LO and IF, 100 dB
    # down, mix onto the carrier in the amplifier some 1e-8 dB below it).
    mixer = {
        "kind": "mixer",
        "name": "mix",
        "lo": {"freq": "152 MHz", "power": "+7 dBm"},
        "conversion_loss": "6 dB",
        "lo_isolation": "100 dB",
        "if_isolation": "100 dB",
    }
    lu = _lineup([mixer, amp("pa", gain=GAIN_TABLE, h2="-40 dBc @ +10 dBm")], carrier=("10 MHz", "-40 dBm"))
    assert lu.stages[1].gain_db == pytest.approx(_gain(162.0), abs=1e-12)
    lo_hz = np.array([140e6, 146e6, 152e6, 164e6])
    out = lu.run(tone_freqs_hz=lu.tuned_tones_hz(lo_hz)).carrier_levels_dbm_batch()[:, 0]
    expected = -40.0 - 6.0 + _gain((lo_hz + 10e6) / 1e6)
    assert out.tolist() == pytest.approx(expected.tolist(), abs=1e-9)


def test_gain_table_with_a_pass_band_states_the_gain_at_each_channels_carrier():
    # With a gain table the pass band shapes what passes relative to the carrier of each
    # channel; the carrier itself gets the table's gain: -40 + G(f) dBm, by hand.
    band = {"low": "100 MHz", "high": "200 MHz", "order": 2}
    lu = _lineup([amp("pa", gain=GAIN_TABLE, h2="-40 dBc @ +10 dBm", band=band)])
    out = lu.run(tone_freqs_hz=lu.tuned_tones_hz(CHANNELS_HZ)).carrier_levels_dbm_batch()[:, 0]
    assert out.tolist() == pytest.approx((-40.0 + _gain(CHANNELS_HZ / 1e6)).tolist(), abs=1e-9)


def test_flat_table_runs_the_loaded_stage_bit_for_bit():
    # A table that does not change leaves every channel with the loaded stage: the sweep
    # is the one of the scalar figure, to the bit (no figure moves, nothing is resampled).
    scalar = _lineup([amp("pa", gain="24 dB", h2="-40 dBc @ +10 dBm")])
    flat = _lineup([amp("pa", gain=[["150 MHz", "24 dB"], ["174 MHz", "24 dB"]], h2="-40 dBc @ +10 dBm")])
    a, b = tune_sweep(scalar, CHANNELS_HZ), tune_sweep(flat, CHANNELS_HZ)
    assert np.array_equal(a.margin_db, b.margin_db, equal_nan=True)


def _set_output(lu, ch_hz, target_dbm):
    """Drive offset (dB) that puts the carrier at ``target_dbm`` out at channel ``ch_hz`` (secant)."""
    tones = lu.tuned_tones_hz(np.array([ch_hz]))

    def out(x):
        return float(
            lu.run(drive_offset_db=np.array([x]), tone_freqs_hz=tones).carrier_levels_dbm_batch()[0, 0]
        )

    x0, x1 = 0.0, target_dbm - out(0.0)
    f0, f1 = out(x0) - target_dbm, out(x1) - target_dbm
    for _ in range(30):
        if abs(f1) < 1e-7:
            break
        x0, x1, f0 = x1, x1 - f1 * (x1 - x0) / (f1 - f0), f1
        f1 = out(x1) - target_dbm
    return lu.run(drive_offset_db=np.array([x1]), tone_freqs_hz=tones)


@pytest.mark.slow
def test_harmonic_table_holds_its_dbc_at_two_channels():
    # A saturating PA with h2 against frequency at +40 dBm out: driven to +40 dBm at
    # 156 and 170 MHz, 2f1 must read the table's dBc there, by hand
    # -32 + (6/24)(6) = -30.5 dBc and -32 + (20/24)(6) = -27 dBc (linear in dB, common
    # practice), within the fit's own tolerance (HARMONIC_TOL_DB).
    stages = [
        amp(
            "pa",
            gain=[["150 MHz", "31 dB"], ["174 MHz", "28.5 dB"]],
            oip3="+52 dBm",
            psat="+44 dBm",
            h2=[["150 MHz", "-32 dBc @ +40 dBm"], ["174 MHz", "-26 dBc @ +40 dBm"]],
            h3="-24 dBc @ +40 dBm",
        )
    ]
    lu = _lineup(stages, carrier=("162 MHz", "+10 dBm"))
    for ch_hz, stated in ((156e6, -30.5), (170e6, -27.0)):
        result = _set_output(lu, ch_hz, 40.0)
        rows = result.product_rows(None, "phase")
        level = dict(zip(rows["label"], rows["level_dbm"], strict=True))
        assert level["f1"] == pytest.approx(40.0, abs=1e-5)
        assert level["2f1"] - level["f1"] == pytest.approx(stated, abs=HARMONIC_TOL_DB)


def test_yield_over_channels_uses_each_channels_figures():
    # No tolerances: every sample is the nominal at each channel.  2f1 = 2 P_out - 50 dBm
    # (OHIP2 +50 dBm, as above); P_out = -40 + G: -16 dBm at 150 MHz (2f1 -82 dBm) and
    # -17.5 dBm at 174 MHz (2f1 -85 dBm), by hand.  Against -83.5 dBm: -1.5 dB and +1.5 dB.
    mask = {"rule": [{"start": "9 kHz", "stop": "20 GHz", "limit": "-83.5 dBm", "name": "flat"}]}
    lu = _lineup([amp("pa", gain=GAIN_TABLE, h2="-40 dBc @ +10 dBm")], mask=mask)
    high = run_yield(lu, 4, channels_hz=np.array([174e6]))
    low = run_yield(lu, 4, channels_hz=np.array([150e6, 174e6]))
    assert high.passed == 4 and low.passed == 0
    assert high.worst_margin_db.tolist() == pytest.approx([1.5] * 4, abs=1e-6)
    assert low.worst_margin_db.tolist() == pytest.approx([-1.5] * 4, abs=1e-6)


@pytest.mark.slow
def test_per_channel_model_is_measured_at_every_table_frequency():
    # The per-channel model (tune, yield) holds Psat and hN but does not refit P1dB:
    # each table frequency has a figure check of that model against the stated figure.
    stages = [
        amp(
            "pa",
            gain=[["150 MHz", "31 dB"], ["174 MHz", "28.5 dB"]],
            oip3="+51 dBm",
            psat=[["150 MHz", "+44.5 dBm"], ["174 MHz", "+43.8 dBm"]],
            p1db=[["150 MHz", "+42 dBm"], ["174 MHz", "+41 dBm"]],
        )
    ]
    lu = _lineup(stages, carrier=("162 MHz", "+10 dBm"))
    at = {(c.figure, c.freq_hz): c for _, c in lu.figure_checks()}
    # Stated values at the rows themselves (no interpolation); Psat is set in closed form
    # for each channel (amplifier.sampled_model), so it is met.
    assert at[("psat", 150e6)].stated == 44.5 and at[("psat", 174e6)].stated == 43.8
    assert at[("psat", 150e6)].met and at[("psat", 174e6)].met
    assert at[("p1db", 150e6)].stated == 42.0 and at[("p1db", 174e6)].stated == 41.0
    # Whatever the P1dB miss, the output says it: a note for each unmet one, and tune's
    # verdict is then at best UNCERTAIN (the check's own fit at 162 MHz stays its own).
    missed = [c for _, c in lu.figures_missed() if c.freq_hz is not None]
    assert all(any(c.describe() in n for n in lu.notes) for c in missed)
    assert not [c for _, c in check(lu, lu.run()).figures_missed if c.freq_hz is not None]
    # A drive sweep runs at the lineup's own channel, on the full fit there: its caveat
    # leaves out the per-channel misses; tune's names them.
    from spurplan.output.verdicts import model_caveat

    assert missed, "the case is built so that the per-channel P1dB misses"
    assert "(the model tune and yield use there)" in model_caveat(lu)
    assert "the model tune and yield use there" not in model_caveat(lu, channels=False)


# --- beyond the table -----------------------------------------------------------------------------


def test_channels_beyond_a_table_are_refused_under_the_default_policy():
    lu = _tune_lineup()
    with pytest.raises(LineupError) as info:
        tune_sweep(lu, np.array([145e6, 150e6]))
    text = str(info.value)
    assert "stage 1 'pa'" in text and "field 'gain'" in text  # the CLI test below: the file too
    assert "145 MHz" in text and "150 MHz to 174 MHz" in text and "\n" not in text
    with pytest.raises(LineupError, match="field 'gain'"):
        run_yield(lu, 2, channels_hz=np.array([180e6]))
    # The lineup's own channel outside the table is refused at load.
    with pytest.raises(LineupError, match="reference carrier at this stage's input is at 140 MHz"):
        _lineup([amp("pa", gain=GAIN_TABLE)], carrier=("140 MHz", "-40 dBm"))


def test_hold_keeps_the_edge_value_and_no_rejection_drops_a_loss():
    stages = [
        amp("pa", gain=GAIN_TABLE, h2="-40 dBc @ +10 dBm"),
        {"kind": "attenuator", "name": "pad", "loss": LOSS_TABLE},
    ]
    ch = np.array([140e6, 180e6])
    for policy, loss_beyond in (("hold", (1.0, 2.0)), ("no_rejection", (0.0, 0.0))):
        lu = _lineup(stages, analysis={"beyond_data": policy})
        out = lu.run(tone_freqs_hz=lu.tuned_tones_hz(ch)).carrier_levels_dbm_batch()[:, 0]
        # Gain held at its edges (24 and 22.5 dB) under both; the loss held (hold) or
        # 0 dB (no rejection: the pad rejects nothing there), by hand.
        expected = [-40 + 24.0 - loss_beyond[0], -40 + 22.5 - loss_beyond[1]]
        assert out.tolist() == pytest.approx(expected, abs=1e-9)
        assert any("figures against frequency" in n and policy in n for n in lu.notes)


def test_cli_tune_beyond_the_table_is_one_error_line(tmp_path):
    path = write(
        tmp_path,
        "vhf.toml",
        """# Invented scenario: a VHF PA with a gain table.
[[carrier]]
freq = "162 MHz"
power = "-40 dBm"

[[stage]]
kind = "amplifier"
name = "pa"
gain = [["150 MHz", "24 dB"], ["174 MHz", "22.5 dB"]]
h2 = "-40 dBc @ +10 dBm"

[mask]
rule = [{ start = "9 kHz", stop = "20 GHz", limit = "-60 dBm", name = "flat" }]
""",
    )
    result = invoke("tune", path, "--start", "140 MHz", "--stop", "160 MHz", "--step", "1 MHz", expect=2)
    assert_one_error_line(
        result.exit_code,
        result.stdout,
        result.stderr,
        ("vhf.toml", "stage 1 'pa'", "field 'gain'", "140 MHz"),
        notes_ok=True,
    )
    inside = invoke("tune", path, "--start", "150 MHz", "--stop", "174 MHz", "--step", "1 MHz", expect=(0, 1))
    assert "Traceback" not in inside.stderr


# --- malformed tables ------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("figures", "needles"),
    [
        ({"gain": []}, ("field 'gain'", "at least one row")),
        (
            {"gain": [["174 MHz", "22 dB"], ["150 MHz", "24 dB"]]},
            ("row 2", "expected increasing frequencies"),
        ),
        ({"gain": [["150 MHz", "22 dB"], ["150 MHz", "24 dB"]]}, ("row 2", "expected distinct frequencies")),
        ({"gain": [["150 MHz", "22 dBm"], ["174 MHz", "24 dB"]]}, ("row 1", "'22 dBm'", "a ratio in dB")),
        ({"gain": [["150 MHz", "24 dB", "x"]]}, ("row 1", "expected a [frequency, value] pair")),
        ({"gain": ["150 MHz", "24 dB"]}, ("row 1 '150 MHz'", "pair")),
        ({"gain": [["150 MHz", "nan dB"]]}, ("row 1", "'nan dB'", "finite")),
        ({"gain": [["150 Mhz", "24 dB"]]}, ("row 1", "'150 Mhz'")),
        ({"gain": [["0 Hz", "24 dB"], ["174 MHz", "24 dB"]]}, ("row 1", "a table frequency")),
        ({"gain": [["150 MHz", "90 dB"], ["174 MHz", "24 dB"]]}, ("row 1", "an amplifier gain")),
        (
            {"gain": "24 dB", "h2": [["150 MHz", "-30 dBc @ +10 dBm"], ["174 MHz", "-30 dBc @ +12 dBm"]]},
            ("field 'h2'", "row 2", "output power of row 1"),
        ),
        (
            {"gain": "24 dB", "oip3": [["150 MHz", "+40 dBm"]], "iip3": "+16 dBm"},
            ("field 'iip3'", "one of them"),
        ),
        (
            {"gain": "24 dB", "psat": "+30 dBm", "p1db": [["150 MHz", "+28 dBm"], ["174 MHz", "+31 dBm"]]},
            ("field 'p1db'", "174 MHz", "p1db <= psat"),
        ),
        ({"gain": [[f"{150 + i} MHz", "24 dB"] for i in range(65)]}, ("65 rows", "at most 64")),
    ],
)
def test_malformed_tables_are_one_located_error(figures, needles):
    with pytest.raises(LineupError) as info:
        _lineup([amp("pa", **figures)], carrier=("150 MHz", "-40 dBm"))
    text = str(info.value)
    assert "tables.toml" in text and "stage 1 'pa'" in text and "\n" not in text
    for needle in needles:
        assert needle in text, (needle, text)


def test_malformed_loss_table_and_cascaded_sections():
    pad = {"kind": "attenuator", "name": "pad", "loss": [["150 MHz", "-1 dB"], ["174 MHz", "2 dB"]]}
    with pytest.raises(LineupError, match=r"field 'loss'.*row 1.*an attenuator loss"):
        _lineup([amp("pa", gain="20 dB"), pad])
    good = dict(pad, loss=LOSS_TABLE)
    with pytest.raises(LineupError, match=r"stage 2 'pad'.*field 'loss'.*linear_sections"):
        _lineup([amp("pa", gain="20 dB"), good], analysis={"linear_sections": "cascade"})


def test_cli_malformed_table_is_one_error_line(tmp_path):
    path = write(
        tmp_path,
        "bad.toml",
        """# Invented scenario: a gain table with its rows out of order.
[[carrier]]
freq = "162 MHz"
power = "-40 dBm"

[[stage]]
kind = "amplifier"
name = "pa"
gain = [["174 MHz", "22.5 dB"], ["150 MHz", "24 dB"]]
""",
    )
    result = invoke("check", path, expect=2)
    assert_one_error_line(
        result.exit_code, result.stdout, result.stderr, ("bad.toml", "stage 1 'pa'", "field 'gain'", "row 2")
    )
