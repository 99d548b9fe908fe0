"""Remedies for the whole plan (issue 16): one filter for every channel of the tuning range,
and what helps where no filter at the chosen place can.

The VHF case is examples/vhf_25w_transmitter.toml (an invented 25 W transmitter tuning
150-174 MHz, carrier written at 151 MHz, no harmonic filter); tests sweep it on a 1 MHz
raster (the example's own [report] tune is the 12.5 kHz channel raster).
"""

from __future__ import annotations

import json
from dataclasses import replace

import numpy as np
import pytest
from helpers import invoke, write

import spurplan
from spurplan.analyses.check import check
from spurplan.analyses.remedy import RemedyCase, remedy
from spurplan.analyses.sweep import drive_sweep, tune_sweep
from spurplan.io.resources import example_path
from spurplan.model.ladders import ladder_s21

MHZ = 1e6
RANGE_HZ = np.arange(150, 174 + 0.5, 1.0) * MHZ  # 150-174 MHz on a 1 MHz raster (25 channels)
TARGET_DB = 3.0  # remedy's default margin target
# 47 CFR / ITU-R SM.329 Category A in 30 MHz - 1 GHz: attenuation 43 + 10 log10(P/W) dB below
# P, i.e. P[dBm] - 43 - (P[dBm] - 30) = -13 dBm whatever P (the 70 dBc cap binds only above
# +57 dBm); SM.329-13 section 4.2, from memory (bands/itu-sm329-cat-a.toml).
SM329_LIMIT_DBM = -13.0
# The example's invented site limit in RR 5.149's 322-328.6 MHz radio-astronomy band.
RA_LIMIT_DBM = -40.0


def _vhf():
    return spurplan.load(example_path("vhf_25w_transmitter.toml"))


def _level(lineup, channel_hz: float, label: str) -> float:
    """Engine level (dBm) of ``label`` at the output with the lineup tuned to ``channel_hz``."""
    result = lineup.run(tone_freqs_hz=lineup.tuned_tones_hz(np.array([channel_hz])))
    rows = result.product_rows()
    return rows["level_dbm"][rows["label"].index(label)]


def _with_stage(lineup_text: str, after: str, table: str) -> str:
    """The lineup text with a ``[[stage]]`` table inserted after the stage called ``after``."""
    head, sep, tail = lineup_text.partition(f'name = "{after}"')
    assert sep, after
    cut = tail.find("\n[")  # the next table header after that stage
    return head + sep + tail[:cut] + "\n\n" + table.strip() + "\n" + tail[cut:]


def _chebyshev_rejection_db(f_hz, cutoff_hz, order, ripple_db):
    """Ideal Chebyshev low-pass rejection, -10 log10 |S21|^2 = 10 log10(1 + eps^2 T_n^2(w)),
    eps^2 = 10^(ripple/10) - 1, w = f / f_c, T_n(w) = cosh(n acosh w) above the edge and
    cos(n acos w) below it (Matthaei, Young and Jones 1964, section 4.03; Zverev 1967;
    from memory)."""
    w = np.asarray(f_hz, dtype=float) / cutoff_hz
    eps2 = 10 ** (ripple_db / 10) - 1
    t = np.where(
        w > 1, np.cosh(order * np.arccosh(np.maximum(w, 1))), np.cos(order * np.arccos(np.minimum(w, 1)))
    )
    return 10 * np.log10(1 + eps2 * t**2)


@pytest.fixture(scope="module")
def vhf_found():
    lineup = _vhf()
    return lineup, remedy(lineup, channels_hz=RANGE_HZ)


# --- the VHF case -----------------------------------------------------------------------------


def test_a_filter_designed_for_the_written_channel_alone_fails_part_of_the_range():
    # The symptom, kept as the reason for the rest: the filter for 151 MHz alone sits at
    # 1.1 x 151 = 166.1 MHz (remedy's edge rule, arithmetic) and lets 2f1 into the 322-328.6 MHz
    # band (2 x 161 = 322 MHz up to 2 x 164.3 = 328.6 MHz, arithmetic) on part of the range.
    lineup = _vhf()
    alone = remedy(lineup, channels_hz=[151 * MHZ])
    assert alone.found and alone.filter.prototype.edge_hz == pytest.approx(166.1 * MHZ)
    fixed = replace(lineup, stages=(*lineup.stages, alone.filter))
    sweep = tune_sweep(fixed, RANGE_HZ)
    assert not sweep.passed
    bad = [r for r in sweep.failing if r["label"] == "2f1"]
    assert bad and bad[0]["start_hz"] == pytest.approx(161 * MHZ)
    assert bad[0]["stop_hz"] == pytest.approx(164.3 * MHZ, abs=1e3)


def test_vhf_remedy_passes_every_channel_rechecked_by_tune_on_the_written_file(tmp_path, vhf_found):
    lineup, found = vhf_found
    assert found.found and found.after == "PA"
    # Its own re-check covers every channel, and says it meets the target there.
    assert len(found.recheck) == 1 and found.recheck[0].carrier_hz.tolist() == RANGE_HZ.tolist()
    assert float(np.min(found.recheck[0].worst_margin_db)) >= TARGET_DB
    # Independent: the lineup written to a file, loaded afresh and swept by tune on the
    # 12.5 kHz channel raster (finer than the design's) passes everywhere with the target.
    from spurplan.output.remedy_file import write_fixed

    path = tmp_path / "fixed.toml"
    write_fixed(lineup, found, path)
    written = spurplan.load(path)
    assert [s.name for s in written.stages] == ["driver", "PA", "remedy filter"]
    raster = np.arange(150 * MHZ, 174 * MHZ + 1, 12.5e3)
    sweep = tune_sweep(written, raster)
    assert sweep.passed and float(np.min(sweep.worst_margin_db)) >= TARGET_DB
    assert check(written).worst_margin_db >= TARGET_DB  # the full check at 151 MHz too


def test_vhf_filter_edge_clears_the_top_channel_and_meets_the_need_at_300_mhz(vhf_found):
    lineup, found = vhf_found
    proto = found.filter.prototype
    assert proto.family == "chebyshev" and proto.response == "lowpass"
    # The passband edge clears every carrier: at least 1.1 x 174 MHz = 191.4 MHz (arithmetic).
    assert proto.edge_hz >= 1.1 * 174 * MHZ - 1.0
    # The ideal ladder (lossless, no floor) is the textbook Chebyshev: closed form at the top
    # channel (inside the ripple) and at 300 and 322 MHz, to 0.01 dB.
    ideal = replace(proto, q_inductor=None, q_capacitor=None, floor_db=None)
    freqs = np.array([174, 300, 322]) * MHZ
    ladder_db = -20 * np.log10(np.abs(ladder_s21(ideal, freqs, lineup.r_ohm)))
    closed_db = _chebyshev_rejection_db(freqs, proto.edge_hz, proto.order, proto.ripple_db)
    np.testing.assert_allclose(ladder_db, closed_db, atol=0.01)
    assert closed_db[0] <= proto.ripple_db + 1e-9
    # The need at 2 x 150 MHz = 300 MHz (the lowest 2f1, the hardest for a low-pass): the
    # harmonic's level less the SM.329 limit, plus the target (hand calculation).
    level = _level(lineup, 150 * MHZ, "2f1")
    need_300 = level - SM329_LIMIT_DBM + TARGET_DB
    rows = found.needed
    i = next(
        k
        for k, (lab, f) in enumerate(zip(rows["label"], rows["freq_hz"], strict=True))
        if lab == "2f1" and f == 300 * MHZ
    )
    assert rows["rejection_needed_db"][i] == pytest.approx(need_300, abs=1e-6)
    assert rows["channel_hz"][i] == 150 * MHZ and "Category A" in rows["rule"][i]
    # ... and in the radio-astronomy band at 2 x 161 = 322 MHz, against its own limit.
    need_322 = _level(lineup, 161 * MHZ, "2f1") - RA_LIMIT_DBM + TARGET_DB
    j = next(k for k, b in enumerate(rows["band"]) if b and "322-328.6" in b)
    assert rows["freq_hz"][j] == 322 * MHZ and rows["rejection_needed_db"][j] == pytest.approx(
        need_322, abs=1e-6
    )
    # The textbook shape supplies both, and so does the proposed (lossy, floored) filter.
    real_db = -20 * np.log10(np.abs(found.filter.response(freqs)))
    assert closed_db[1] >= need_300 and real_db[1] >= need_300
    assert closed_db[2] >= need_322 and real_db[2] >= need_322
    # One order lower (7) at the same edge would not supply the 322 MHz need (closed form).
    assert _chebyshev_rejection_db(322 * MHZ, proto.edge_hz, proto.order - 2, proto.ripple_db) < need_322


def test_remedy_cli_designs_over_the_report_tune_range_and_says_it_rechecked(tmp_path):
    out = invoke("remedy", example_path("vhf_25w_transmitter.toml"), expect=0).stdout
    assert "Designed for 1921 channels: carrier 150 to 174 MHz (the lineup's [report] tune range)" in out
    # 150 to 174 MHz on the 12.5 kHz raster: 24 MHz / 12.5 kHz + 1 = 1921 channels (arithmetic).
    assert "RE-CHECKED ON EVERY CHANNEL (tune, the lineup with the filter pasted): PASS, 1921 channels" in out
    doc = json.loads(
        invoke(
            "remedy",
            example_path("vhf_25w_transmitter.toml"),
            "--start",
            "150 MHz",
            "--stop",
            "174 MHz",
            "--step",
            "2 MHz",
            "--format",
            "json",
            expect=0,
        ).stdout
    )["summary"]
    assert doc["channels"][0]["count"] == 13 and doc["channels"][0]["from"] == "given"
    assert doc["recheck"][0]["meets_target"] and doc["recheck"][0]["channels"] == 13


def test_one_filter_for_two_cases_serves_both(vhf_found):
    # Two ways of running (invented): the written lineup on 150-160 MHz, and the same radio
    # driven 1 dB harder on 160-174 MHz. One filter is designed for both and each passes.
    lineup, _ = vhf_found
    harder = replace(lineup, carriers=tuple(replace(c, power_dbm=c.power_dbm + 1.0) for c in lineup.carriers))
    cases = [
        RemedyCase(lineup, np.arange(150, 160.5, 1.0) * MHZ, "low"),
        RemedyCase(harder, np.arange(160, 174.5, 1.0) * MHZ, "high"),
    ]
    found = remedy(cases)
    assert found.found and [c.name for c in found.cases] == ["low", "high"]
    assert found.filter.prototype.edge_hz >= 1.1 * 174 * MHZ - 1.0
    for case in cases:
        fixed = replace(case.lineup, stages=(*case.lineup.stages, found.filter))
        sweep = tune_sweep(fixed, case.channels_hz)
        assert float(np.min(sweep.worst_margin_db)) >= TARGET_DB


# --- where no filter at the chosen place helps ---------------------------------------------------


def test_at_driver_says_the_pa_regenerates_the_harmonic(tmp_path):
    lineup = _vhf()
    found = remedy(lineup, at="driver", channels_hz=RANGE_HZ)
    assert not found.found
    first = found.advice[0]
    assert first["kind"] == "regenerated" and first["stage"] == "PA" and first["move_after"] == "PA"
    assert first["moved_helps"]
    # Independent: a steep real filter after the driver (15th-order lossless Chebyshev at
    # 191.4 MHz, no floor: over 100 dB from 2 x 150 MHz up by the closed form, so the driver's
    # harmonics are gone) still leaves the PA's own harmonic above the limit, at the level
    # remedy quotes ...
    assert _chebyshev_rejection_db(300 * MHZ, 191.4 * MHZ, 15, 0.1) > 100
    steep = (
        '[[stage]]\nkind = "filter"\nname = "steep"\nprototype = { family = "chebyshev", response = "lowpass", '
        'cutoff = "191.4 MHz", order = 15, ripple = "0.1 dB", q_inductor = "lossless", q_capacitor = "lossless", '
        'floor = "none" }\n'
    )
    text = example_path("vhf_25w_transmitter.toml").read_text(encoding="utf-8")
    after_driver = spurplan.load(write(tmp_path, "a.toml", _with_stage(text, "driver", steep)))
    level = _level(after_driver, first["channel_hz"], first["label"])
    # (to 0.25 dB: the real filter's passband ripple, up to 0.1 dB at the carrier by its
    # specification, lowers the PA's drive, and a harmonic of order n moves about n times as much)
    assert level == pytest.approx(first["level_dbm"], abs=0.25)
    # With the driver's harmonics removed, what is left is the PA's own: its stated
    # h2 = -28 dBc at +44 dBm (the example's figure), +44 - 28 = +16 dBm at its ~+44 dBm
    # output (hand calculation; 0.25 dB for the output's distance from the stated point).
    assert first["level_dbm"] == pytest.approx(44.0 - 28.0, abs=0.25)
    # (2f1 in the radio-astronomy band, against the example's -40 dBm there)
    assert first["label"] == "2f1" and first["limit_dbm"] == RA_LIMIT_DBM < level
    assert not tune_sweep(after_driver, RANGE_HZ).passed
    # ... while the same filter after the PA meets the target on every channel.
    after_pa = spurplan.load(write(tmp_path, "b.toml", _with_stage(text, "PA", steep)))
    assert float(np.min(tune_sweep(after_pa, RANGE_HZ).worst_margin_db)) >= TARGET_DB
    # The command line says so instead of only "NO FILTER FOUND", and exits 1.
    args = ["remedy", example_path("vhf_25w_transmitter.toml"), "--at", "driver"]
    out = invoke(*args, "--start", "150 MHz", "--stop", "174 MHz", "--step", "2 MHz", expect=1).stdout
    assert "NO FILTER FOUND: the stage 'PA' after this point regenerates 2f1 at" in out
    assert "even with a perfect filter after 'driver'; put the filter after 'PA'." in out


IM3_LINEUP = """\
# invented test scenario: two carriers 1 MHz apart through one amplifier, whose
# third-order products 2f1-f2 and 2f2-f1 land 1 MHz either side, inside any passband
[[carrier]]
freq = "150 MHz"
power = "+5 dBm"
[[carrier]]
freq = "151 MHz"
power = "+5 dBm"
[[stage]]
kind = "amplifier"
name = "amp"
gain = "20 dB"
oip3 = "+40 dBm"
noise_figure = "5 dB"
[mask]
use = ["itu-sm329-cat-a"]
[analysis]
max_order = 5
"""
GAIN_DB, OIP3_DBM, P_IN_DBM = 20.0, 40.0, 5.0


def _im3_margin_db(p_in_dbm: float, oip3_dbm: float = OIP3_DBM) -> float:
    """Margin (dB) of the third-order products against SM.329's -13 dBm: each is
    P_IM3 = 3 P_in + G - 2 IIP3 with IIP3 = OIP3 - G (a cubic's intercept, Pozar, Microwave
    Engineering, section 10.3; from memory), exact for a model with only a cubic term."""
    iip3 = oip3_dbm - GAIN_DB
    return SM329_LIMIT_DBM - (3 * p_in_dbm + GAIN_DB - 2 * iip3)


def test_in_band_im3_gets_the_frequency_plan_the_intercept_and_the_back_off(tmp_path):
    path = write(tmp_path, "im3.toml", IM3_LINEUP)
    lineup = spurplan.load(path)
    m0 = _im3_margin_db(P_IN_DBM)  # -13 - (15 + 20 - 40) = -8 dB
    assert m0 == -8.0
    assert check(lineup).worst_margin_db == pytest.approx(m0, abs=1e-6)
    found = remedy(lineup)
    assert not found.found
    kinds = {a["kind"]: a for a in found.advice}
    assert kinds["plan"]["label"] in ("2f1-f2", "2f2-f1")
    # The intercept: the product falls 2 dB per dB of OIP3 (order 3), so a need of 3 - m0 =
    # 11 dB asks 5.5 dB more OIP3 (hand calculation) ...
    assert kinds["intercept"]["stage"] == "amp" and kinds["intercept"]["order"] == 3
    assert kinds["intercept"]["intercept_rise_db"] == pytest.approx((TARGET_DB - m0) / 2, abs=1e-6)
    # ... and the lineup with it meets the target exactly (independent re-check).
    better = spurplan.load(
        write(tmp_path, "better.toml", IM3_LINEUP.replace('oip3 = "+40 dBm"', 'oip3 = "+45.5 dBm"'))
    )
    assert check(better).worst_margin_db == pytest.approx(TARGET_DB, abs=1e-6)
    # The back-off: a product of order 3 rises 3 dB per dB of drive against a fixed limit, so
    # the target needs a back-off of (3 - m0) / 3 dB: +5 - 11/3 = +1.333 dBm (slope of 3).
    back = kinds["backoff"]
    assert back["input_dbm"] == pytest.approx(P_IN_DBM - (TARGET_DB - m0) / 3, abs=2e-3)
    assert _im3_margin_db(back["input_dbm"]) >= TARGET_DB - 1e-2
    # With no margin target the same search gives drive_sweep's own highest compliant drive
    # (both refined to 0.001 dB), and the slope-of-3 answer +5 - 8/3 = +2.333 dBm.
    zero = {a["kind"]: a for a in remedy(lineup, margin_db=0.0).advice}["backoff"]
    signed = drive_sweep(lineup, -10.0, 5.0, 0.25).max_compliant_input_dbm
    assert zero["input_dbm"] == pytest.approx(signed, abs=2e-3)
    assert zero["input_dbm"] == pytest.approx(P_IN_DBM + m0 / 3, abs=2e-3)
    # The command line words them, and exits 1.
    out = invoke("remedy", path, expect=1).stdout
    assert "lies inside the passband any filter here keeps for the carriers" in out
    assert "backing the drive off by 3.67 dB, to +1.33 dBm at the input of the strongest carrier" in out
    assert "OIP3) 5.5 dB higher" in out


def test_no_back_off_within_the_search_range_is_said_so(tmp_path):
    # An invented absolute limit of -150 dBm under the third-order products: they fall 3 dB
    # per dB of drive, so 40 dB of back-off (remedy's search range) takes the -5 dBm products
    # only to -5 - 3 x 40 = -125 dBm, still 25 dB above it (arithmetic): no drive helps.
    text = IM3_LINEUP.replace(
        '[mask]\nuse = ["itu-sm329-cat-a"]',
        '[[mask.rule]]\nname = "invented strict limit"\nstart = "100 MHz"\nstop = "200 MHz"\nlimit = "-150 dBm"\n',
    )
    path = write(tmp_path, "strict.toml", text)
    found = remedy(spurplan.load(path))
    back = next(a for a in found.advice if a["kind"] == "backoff")
    assert back["input_dbm"] is None and back["range_db"] == 40.0
    out = invoke("remedy", path, expect=1).stdout
    assert (
        "no drive within 40 dB below the written +5.00 dBm meets the mask with 3 dB margin on every channel"
        in out
    )


# --- one filter for every mode ---------------------------------------------------------------


def test_one_filter_for_two_modes_is_written_into_the_shared_stages_and_passes_both(tmp_path):
    from spurplan.io.modes import load_modes

    # The VHF example in two modes: full power and 6 dB lower drive, each over its own part
    # of the band.  The filter goes into the stages both modes share; the written file,
    # loaded fresh, must pass every channel of both (tune_sweep, independent of remedy).
    text = example_path("vhf_25w_transmitter.toml").read_text()
    text = text.replace('[report]\ntune = { start = "150 MHz", stop = "174 MHz", step = "12.5 kHz" }\n', "")
    text += (
        '\n[[mode]]\nname = "full power"\n[mode.report]\ntune = { start = "150 MHz", stop = "162 MHz", step = "1 MHz" }\n'
        '\n[[mode]]\nname = "low power"\ndrive = "-5 dBm"\n'
        '[mode.report]\ntune = { start = "160 MHz", stop = "174 MHz", step = "1 MHz" }\n'
    )
    src = tmp_path / "two_power.toml"
    src.write_text(text)
    out = tmp_path / "fixed.toml"
    invoke("remedy", src, "--write", out)
    written = load_modes(out)
    assert [m.name for m in written] == ["full power", "low power"]
    for m in written:
        assert [s.kind for s in m.lineup.stages] == ["amplifier", "amplifier", "filter"]
        lo, hi, step = m.lineup.report.tune
        sweep = tune_sweep(m.lineup, np.arange(lo, hi + step / 2, step))
        assert sweep.passed and float(np.nanmin(sweep.worst_margin_db)) >= TARGET_DB - 1e-9
    # The filter's passband clears the highest carrier of both modes, 174 MHz.
    flt = written[1].lineup.stages[2]
    assert abs(ladder_s21(flt.prototype, np.array([174 * MHZ]), 50.0))[0] > 10 ** (-1.0 / 20)
    # A subset of the modes would change the others unchecked: refused, nothing written.
    other = tmp_path / "subset.toml"
    r = invoke("remedy", src, "--mode", "low power", "--write", other, expect=2)
    assert not other.exists()
    assert "full power" in r.stderr and len(r.stderr.strip().splitlines()) == 1
