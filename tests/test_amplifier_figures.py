"""Every stated amplifier figure is honoured at its stated point, measured with the engine.

The references are the definitions of the figures themselves (each check names it):
a datasheet line is a measurement, and the model run through the engine must give it
back at the same point.  The invented parts are drawn by hypothesis within ranges that
real amplifiers have (OIP3 11 to 16 dB above P1dB, Psat 1.5 to 3 dB above it; common
practice, no source); parts whose figures conflict are checked for an honest report
of the miss instead.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from helpers import amp, lineup
from hypothesis import given, settings
from hypothesis import strategies as st

from spurplan.analyses.check import check
from spurplan.io.lineup_file import from_dict

F0_HZ = 100e6
GRID_DB = np.arange(-8.0, 30.0, 0.05)  # drive offsets around the stated point


def _single(stage: dict, p_in_dbm: float, max_order: int = 10):
    return lineup([stage], carriers=(("100 MHz", f"{p_in_dbm:+.4f} dBm"),), max_order=max_order)


def _sweep(stage: dict, p_in_dbm: float, offsets_db=GRID_DB, max_order: int = 10):
    """Input power, fundamental output and harmonics (dBc) over a drive sweep, one batch."""
    lu = _single(stage, p_in_dbm, max_order)
    result = lu.run(drive_offset_db=offsets_db)
    levels = result.levels(None, "phase")
    out = result.carrier_levels_dbm_batch()[:, 0]
    harmonics = {}
    for n in range(2, max_order + 1):
        hit = np.isclose(levels.freq_hz, n * F0_HZ, rtol=1e-9) & levels.valid
        level = np.where(hit, levels.level_dbm, -np.inf).max(axis=1)
        harmonics[n] = level - out
    return p_in_dbm + np.asarray(offsets_db), out, harmonics


def _at_output(out_dbm, values, target_dbm):
    """``values`` interpolated at the output power ``target_dbm`` (output rises with drive)."""
    rising = np.concatenate([[True], np.diff(out_dbm) > 0])
    top = np.nonzero(~rising)[0]
    stop = top[0] if top.size else len(out_dbm)
    assert out_dbm[:stop].min() <= target_dbm <= out_dbm[:stop].max(), "the sweep must reach the point"
    return float(np.interp(target_dbm, out_dbm[:stop], values[:stop]))


@st.composite
def parts(draw):
    """An invented amplifier with figures at rated power, within real ranges, and a
    third-order figure (oip3 or h3, or both)."""
    gain = draw(st.integers(20, 60)) / 2.0
    p1db = draw(st.integers(40, 92)) / 2.0
    which = draw(st.sampled_from(["p1db", "psat", "both"]))
    table = {"gain": f"{gain} dB"}
    if which in ("p1db", "both"):
        table["p1db"] = f"{p1db:+.1f} dBm"
    psat = p1db + draw(st.integers(6, 12)) / 4.0
    if which in ("psat", "both"):
        table["psat"] = f"{psat:+.2f} dBm"
    if draw(st.booleans()):
        table["oip3"] = f"{p1db + draw(st.integers(22, 32)) / 2.0:+.1f} dBm"
    rated = (p1db if which != "psat" else psat - 2.0) - draw(st.integers(0, 12)) / 2.0
    orders = draw(st.lists(st.sampled_from([2, 3, 5]), min_size=1, max_size=3, unique=True))
    if "oip3" not in table and 3 not in orders:
        orders.append(3)  # a third-order figure: the part is complete
    for n in orders:
        table[f"h{n}"] = f"{-draw(st.integers(15 + 5 * n, 45 + 5 * n)):d} dBc @ {rated:+.2f} dBm"
    return table


@settings(max_examples=40, deadline=None)
@given(parts())
@pytest.mark.slow
def test_every_stated_figure_is_reproduced_at_its_point(table):
    stage = amp("pa", **table)
    gain = float(table["gain"].split()[0])
    model = _single(stage, -30.0).stages[0]
    # Within these ranges the harmonics, P1dB and Psat are always met; the two-tone
    # intercept read at the datasheet test level may miss (a soft knee adds fifth-order
    # intermodulation there), and is then reported, never optimistic beyond tolerance.
    assert all(c.met for c in model.checks if c.figure != "oip3"), [c.describe() for c in model.checks]
    for c in model.checks:
        if c.figure == "oip3":
            assert c.miss_db <= 0.5
            assert c.met or any("oip3" in n for n in model.notes)
    # Sweep the drive so that the output runs from well below the lowest stated point
    # into hard saturation.
    points = [float(v.split("@")[1].split()[0]) for k, v in table.items() if k.startswith("h")]
    for key in ("p1db", "psat"):
        if key in table:
            points.append(float(table[key].split()[0]))
    p_in = min(points) - gain
    p_in_dbm, out, harmonics = _sweep(stage, p_in)
    for key, text in table.items():
        if key.startswith("h"):
            # "Hn = X dBc @ P": the n-th harmonic at X dBc when the carrier leaves at P
            # (the datasheet figure's definition), within 0.3 dB.
            n = int(key[1:])
            dbc, at = float(text.split()[0]), float(text.split("@")[1].split()[0])
            assert _at_output(out, harmonics[n], at) == pytest.approx(dbc, abs=0.3), key
    gain_db = out - p_in_dbm
    if "p1db" in table:
        # P1dB: the output power where the gain is 1 dB below its small-signal value
        # (definition, common practice, no source), within 0.2 dB.
        first = np.nonzero(gain_db <= gain - 1.0)[0][0]
        p1 = float(
            np.interp(gain - 1.0, gain_db[first - 1 : first + 1][::-1], out[first - 1 : first + 1][::-1])
        )
        assert p1 == pytest.approx(float(table["p1db"].split()[0]), abs=0.2)
    if "psat" in table:
        # Psat: the fundamental under hard drive, 30 dB past the sweep's start (definition),
        # within 0.2 dB.
        # Driven as an offset: the lineup's own carrier stays within the carrier power range
        # (at most +90 dBm), while the model is probed 60 dB harder.
        hard = _sweep(stage, p_in, offsets_db=np.array([60.0]))[1][0]
        assert hard == pytest.approx(float(table["psat"].split()[0]), abs=0.2)
    if "oip3" in table:
        oip3 = float(table["oip3"].split()[0])
        _check_small_signal_oip3(stage, oip3, gain)
        # What the model reports at the datasheet test level is what the engine gives.
        (c,) = [c for c in model.checks if c.figure == "oip3"]
        assert _two_tone_oip3(stage, c.at_dbm - gain) == pytest.approx(c.model, abs=0.1)


def _two_tone_oip3(stage: dict, p_in_dbm: float) -> float:
    # OIP3 = Pout + (Pout - P_IM3) / 2 for two equal tones (definition of the intercept;
    # Razavi, RF Microelectronics 2e, ch. 2, from memory).
    lu = lineup(
        [stage],
        carriers=(("100 MHz", f"{p_in_dbm:+.4f} dBm"), ("100.1 MHz", f"{p_in_dbm:+.4f} dBm")),
        max_order=7,
    )
    rows = lu.run().product_rows(combine="phase")
    level = dict(zip(rows["label"], rows["level_dbm"], strict=True))
    return level["f1"] + (level["f1"] - level["2f1-f2"]) / 2


def _check_small_signal_oip3(stage: dict, oip3_dbm: float, gain_db: float) -> None:
    # At small signal (each tone 55 dB below the intercept) within 0.1 dB.
    assert _two_tone_oip3(stage, oip3_dbm - gain_db - 55.0) == pytest.approx(oip3_dbm, abs=0.1)


def test_oip3_and_h3_are_both_honoured():
    # A tuned PA's datasheet gives both (h3 -33 dBc @ +27 dBm and OIP3 +38 dBm), which a
    # memoryless cubic cannot tie together (HIP3 = IP3 + 4.77 dB would put H3 at -17.3 dBc
    # there; Razavi 2e ch. 2, from memory). Both must hold: the intercept at small signal,
    # the harmonic at its point.
    table = {
        "gain": "15 dB",
        "oip3": "+38 dBm",
        "h3": "-33 dBc @ +27 dBm",
        "p1db": "+27.5 dBm",
        "psat": "+29 dBm",
    }
    stage = amp("pa", **table)
    assert all(c.met for c in _single(stage, 0.0).stages[0].checks)
    _, out, harmonics = _sweep(stage, 27.0 - 15.0)
    assert _at_output(out, harmonics[3], 27.0) == pytest.approx(-33.0, abs=0.3)
    _check_small_signal_oip3(stage, 38.0, 15.0)


def test_small_signal_slopes_stay_n_db_per_db():
    # Far below compression the n-th harmonic rises n dB per dB of drive (Razavi 2e ch. 2,
    # from memory), within 0.02 dB/dB, whatever the fitted zone weights.
    stage = amp(
        "pa",
        gain="20 dB",
        oip3="+40 dBm",
        h2="-25 dBc @ +30 dBm",
        h3="-40 dBc @ +30 dBm",
        h5="-60 dBc @ +30 dBm",
        p1db="+30 dBm",
        psat="+32 dBm",
    )
    _, out, harmonics = _sweep(stage, -40.0, offsets_db=np.array([0.0, 10.0]))
    for n in (2, 3, 5):
        absolute = harmonics[n] + out
        assert (absolute[1] - absolute[0]) / 10.0 == pytest.approx(float(n), abs=0.02), n


def test_hard_driven_limiter_tends_to_the_square_wave():
    # A symmetric limiter driven hard gives a square wave: odd harmonics at 1/n of the
    # fundamental, H3 -9.54 dBc, H5 -13.98 dBc, and no even ones (Fourier series of a
    # square wave, from memory); within 0.2 dB at 40 dB of overdrive.
    for table in (
        {"gain": "20 dB", "psat": "+30 dBm"},
        {"gain": "20 dB", "p1db": "+28 dBm", "oip3": "+40 dBm"},
    ):
        _, _, harmonics = _sweep(
            amp("pa", **table), 30.0 - 20.0 + 40.0, offsets_db=np.array([0.0]), max_order=9
        )
        assert harmonics[3][0] == pytest.approx(20 * math.log10(1 / 3), abs=0.2)
        assert harmonics[5][0] == pytest.approx(20 * math.log10(1 / 5), abs=0.2)
        assert harmonics[2][0] < -200.0


def test_conflicting_figures_are_reported_with_the_size_of_the_miss():
    # P1dB 8.5 dB below Psat with OIP3 only 16 dB above P1dB is softer than the model's
    # softest knee: the miss is reported, and what it reports is what the engine gives
    # (P1dB definition, common practice, no source; within 0.2 dB).
    table = {"gain": "24 dB", "oip3": "+46 dBm", "p1db": "+30 dBm", "psat": "+38.5 dBm"}
    stage = amp("pa", **table)
    lu = _single(stage, 0.0)
    (miss,) = [c for c in lu.stages[0].checks if not c.met and c.figure == "p1db"]
    assert miss.figure == "p1db" and abs(miss.miss_db) > 0.2
    assert any("p1db" in n and "misses by" in n for n in lu.notes)
    p_in_dbm, out, _ = _sweep(stage, 30.0 - 24.0)
    gain_db = out - p_in_dbm
    first = np.nonzero(gain_db <= 23.0)[0][0]
    measured = float(np.interp(23.0, gain_db[first - 1 : first + 1][::-1], out[first - 1 : first + 1][::-1]))
    assert measured == pytest.approx(miss.model, abs=0.2)


MASK = {"use": ["itu-sm329-cat-a"]}


def _doc(stage: dict, strict: bool | None = None) -> dict:
    doc = {
        "carrier": [{"freq": "100 MHz", "power": "-20 dBm"}],
        "stage": [stage],
        "mask": MASK,
        "analysis": {"max_order": 5},
    }
    if strict is not None:
        doc["analysis"]["strict"] = strict
    return doc


@pytest.mark.parametrize(
    ("figures", "missing"),
    [
        ({}, {"2nd-order", "3rd-order", "compression", "noise"}),
        ({"oip3": "+30 dBm"}, {"2nd-order", "compression", "noise"}),
        ({"oip3": "+30 dBm", "h2": "-40 dBc @ +10 dBm"}, {"compression", "noise"}),
        ({"oip3": "+30 dBm", "h2": "-40 dBc @ +10 dBm", "psat": "+20 dBm"}, {"noise"}),
        ({"oip3": "+30 dBm", "h2": "-40 dBc @ +10 dBm", "psat": "+20 dBm", "noise_figure": "5 dB"}, set()),
    ],
)
def test_missing_figures_never_pass(figures, missing):
    # A compliance verdict may not rest on a figure nobody gave (common practice, no
    # source: an unstated figure is unknown, not zero): the verdict says INCOMPLETE and
    # names what is missing; the JSON summary says complete: false with the list.
    from spurplan.output.documents import check_summary

    outcome = check(from_dict(_doc(amp("pa", gain="20 dB", **figures))))
    summary = check_summary(outcome)
    named = {m["figure"].split()[0] for m in summary["missing_figures"]}
    assert named == missing
    assert summary["complete"] is (not missing)
    if missing:
        assert outcome.verdict.startswith("INCOMPLETE") and "not modelled" in outcome.verdict
        assert summary["status"] == "INCOMPLETE"
    else:
        assert outcome.verdict.startswith("PASS")


@pytest.mark.slow
def test_strict_turns_an_incomplete_model_into_a_failure(tmp_path):
    from helpers import run_cli

    def write(name: str, strict_line: str, figures: str) -> str:
        path = tmp_path / name
        path.write_text(
            '[[carrier]]\nfreq = "100 MHz"\npower = "-20 dBm"\n'
            f'[[stage]]\nkind = "amplifier"\nname = "pa"\ngain = "20 dB"\n{figures}'
            '[mask]\nuse = ["itu-sm329-cat-a"]\n'
            f"[analysis]\nmax_order = 5\n{strict_line}",
            encoding="utf-8",
        )
        return str(path)

    incomplete = write("a.toml", "", 'oip3 = "+30 dBm"\n')
    in_file = write("b.toml", "strict = true\n", 'oip3 = "+30 dBm"\n')
    complete = write(
        "c.toml", "", 'oip3 = "+30 dBm"\nh2 = "-40 dBc @ +10 dBm"\npsat = "+20 dBm"\nnoise_figure = "5 dB"\n'
    )
    assert run_cli(["check", incomplete], cwd=tmp_path).returncode == 0
    assert run_cli(["check", incomplete, "--strict"], cwd=tmp_path).returncode == 1
    assert run_cli(["check", in_file], cwd=tmp_path).returncode == 1
    assert run_cli(["check", complete, "--strict"], cwd=tmp_path).returncode == 0


def test_pass_band_corner_is_minus_3_db_and_rolls_off_20n_db_per_decade():
    # Butterworth roll-off: |H|^2 = 1 / ((1 + (f/f_hi)^(2N)) (1 + (f_lo/f)^(2N))), -3.01 dB at
    # a corner for any order, -20 N dB per decade far beyond (common practice; Pozar,
    # Microwave Engineering, from memory). The figures hold at the carrier, so the
    # response is taken relative to it.
    def power_db(f_hz, order, lo=1e6, hi=10e9):
        return -10 * math.log10((1 + (f_hz / hi) ** (2 * order)) * (1 + (lo / f_hz) ** (2 * order)))

    for order in (1, 3):
        band = {"low": "1 MHz", "high": "10 GHz", "order": order}
        stage = lineup([amp("pa", gain="20 dB", band=band)], carriers=(("100 MHz", "-30 dBm"),)).stages[0]
        ref = abs(stage.response(np.array(100e6)))
        for f_hz in (10e9, 1e6, 100e9, 100e3):
            got = 20 * math.log10(abs(stage.response(np.array(f_hz))) / ref)
            assert got == pytest.approx(power_db(f_hz, order) - power_db(100e6, order), abs=0.001)
        corner = 20 * math.log10(abs(stage.response(np.array(10e9))) / ref)
        assert corner == pytest.approx(-3.01, abs=0.01)
        decade = 20 * math.log10(abs(stage.response(np.array(1e13))) / abs(stage.response(np.array(1e12))))
        assert decade == pytest.approx(-20.0 * order, abs=0.01)


@pytest.mark.slow
def test_pass_band_shapes_difference_products_and_passing_harmonics():
    # Two carriers 25 kHz apart through a driver whose f2 - f1 product the PA's band
    # (first order, 10 MHz low corner) cuts by 20 log10(25 kHz / 10 MHz) = -52.04 dB
    # (first-order high-pass far below its corner, common practice), while a 2f1 made by
    # the driver at a 1 GHz upper corner passes 3.01 dB low beside a flat PA.
    carriers = (("500 MHz", "-30 dBm"), ("500.025 MHz", "-30 dBm"))
    driver = amp("driver", gain="10 dB", oip2="+40 dBm", oip3="+40 dBm", p1db="+25 dBm")
    flat = amp("pa", gain="10 dB")
    banded = amp("pa", gain="10 dB", band={"low": "10 MHz", "high": "1 GHz"})
    lv = {}
    for name, pa in (("flat", flat), ("banded", banded)):
        rows = lineup([driver, pa], carriers=carriers, max_order=3).run().product_rows(combine="phase")
        lv[name] = dict(zip(rows["label"], rows["level_dbm"], strict=True))
    # Corner reference at the carrier: |H(500 MHz)| of the band, both sides.
    ref = 10 * math.log10((1 + (500e6 / 1e9) ** 2) * (1 + (10e6 / 500e6) ** 2))
    hp = -10 * math.log10(1 + (10e6 / 25e3) ** 2)
    assert lv["banded"]["f2-f1"] - lv["flat"]["f2-f1"] == pytest.approx(hp + ref, abs=0.01)
    lp_2f = -10 * math.log10(1 + (1000e6 / 1e9) ** 2) - 10 * math.log10(1 + (10e6 / 1000e6) ** 2)
    assert lv["banded"]["2f1"] - lv["flat"]["2f1"] == pytest.approx(lp_2f + ref, abs=0.01)


@pytest.mark.parametrize(
    "args",
    [
        ["drive", "--start", "-30 dBm", "--stop", "-20 dBm", "--step", "5 dB"],
        ["tune", "--start", "99 MHz", "--stop", "101 MHz", "--step", "1 MHz"],
        ["yield", "--samples", "200"],
        ["remedy"],
    ],
    ids=["drive", "tune", "yield", "remedy"],
)
def test_every_answer_of_an_incomplete_model_says_so(tmp_path, args):
    # A sweep, a yield or a remedy that passes on a model without a 2nd-order figure must
    # say the model is incomplete, as check's verdict does (common practice, no source: an
    # unstated figure is unknown, not zero).
    from helpers import run_in_process

    path = tmp_path / "incomplete.toml"
    path.write_text(
        '[[carrier]]\nfreq = "100 MHz"\npower = "-30 dBm"\n'
        '[[stage]]\nkind = "amplifier"\nname = "pa"\ngain = "20 dB"\noip3 = "+30 dBm"\npsat = "+20 dBm"\n'
        '[mask]\nuse = ["itu-sm329-cat-a"]\n',
        encoding="utf-8",
    )
    code, _out, err, detail, _ = run_in_process([args[0], str(path), *args[1:]])
    assert detail == "", detail
    assert code in (0, 1)
    assert "model incomplete" in err and "2nd-order figure" in err
