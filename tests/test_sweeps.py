"""Drive and tuning sweeps, the highest compliant drive, and the remedy filter."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from click.testing import CliRunner
from helpers import amp

import spurplan
from spurplan.analyses.check import check
from spurplan.analyses.remedy import FAMILIES_TRIED, remedy
from spurplan.analyses.sweep import drive_sweep, tune_sweep
from spurplan.cli import main
from spurplan.io.lineup_file import from_dict
from spurplan.output.remedy_file import write_fixed

FLAT = {"rule": [{"start": "9 kHz", "stop": "20 GHz", "limit": "-60 dBm", "name": "flat"}]}


def _lineup(stages, carriers, mask, max_order=10):
    doc = {"carrier": carriers, "stage": stages, "mask": mask, "analysis": {"max_order": max_order}}
    return from_dict(doc, name="sweep-test.toml")


def _slope(sweep, label, lo, hi):
    g = sweep.labels.index(label)
    sel = (sweep.input_dbm >= lo) & (sweep.input_dbm <= hi)
    return np.polyfit(sweep.input_dbm[sel], sweep.level_dbm[sel, g], 1)[0]


@pytest.mark.slow
def test_small_signal_slopes_and_flattening_in_saturation():
    # nth harmonic rises n dB per dB and IM3 3 dB per dB of drive at small signal, and
    # both flatten in saturation (Razavi, RF Microelectronics 2e, ch. 2, from memory;
    # common practice); within 0.05 dB/dB.
    stages = [amp(gain="20 dB", oip3="+30 dBm", h2="-40 dBc @ +10 dBm", psat="+24 dBm")]
    one = drive_sweep(_lineup(stages, [{"freq": "100 MHz", "power": "-40 dBm"}], FLAT), -60, 25, 0.5)
    assert _slope(one, "2f1", -60, -40) == pytest.approx(2.0, abs=0.05)
    assert _slope(one, "3f1", -60, -40) == pytest.approx(3.0, abs=0.05)
    assert abs(_slope(one, "3f1", 15, 25)) < 0.5
    two = drive_sweep(
        _lineup(
            stages, [{"freq": "100 MHz", "power": "-40 dBm"}, {"freq": "101 MHz", "power": "-40 dBm"}], FLAT
        ),
        -60,
        25,
        0.5,
    )
    assert _slope(two, "2f1-f2", -60, -40) == pytest.approx(3.0, abs=0.05)
    assert abs(_slope(two, "2f1-f2", 15, 25)) < 1.0


@pytest.mark.parametrize(("n", "ohip", "limit"), [(2, 50.0, -40.0), (3, 50.0, -60.0)])
def test_highest_compliant_output_matches_the_analytic_solution(n, ohip, limit):
    # One polynomial stage against a flat absolute limit L: the nth harmonic is
    # n P - (n-1) OHIPn (OHIPn = Pout + |dBc|/(n-1), common practice), so the highest
    # compliant output is P = (L + (n-1) OHIPn) / n (arithmetic); within 0.02 dB.
    stages = [amp(gain="20 dB", **{f"ohip{n}": f"{ohip:+.1f} dBm"})]
    mask = {"rule": [{"start": "9 kHz", "stop": "20 GHz", "limit": f"{limit} dBm"}]}
    sweep = drive_sweep(_lineup(stages, [{"freq": "100 MHz", "power": "-30 dBm"}], mask), -30, 20, 1.0)
    assert sweep.status == "limited"
    assert sweep.max_compliant_output_dbm == pytest.approx((limit + (n - 1) * ohip) / n, abs=0.02)
    assert sweep.limiting["label"] == f"{n}f1"


def test_terminal_and_report_state_the_same_highest_compliant_drive():
    # The analytic case above (h2 from OHIP2 +50 dBm, L = -40 dBm: P = +5 dBm out,
    # arithmetic): the terminal line and the report sentence give the same edge, to 0.02 dB.
    from spurplan.output.verdicts import drive_verdict

    stages = [amp(gain="20 dB", ohip2="+50.0 dBm")]
    mask = {"rule": [{"start": "9 kHz", "stop": "20 GHz", "limit": "-40 dBm"}]}
    sweep = drive_sweep(_lineup(stages, [{"freq": "100 MHz", "power": "-30 dBm"}], mask), -30, 20, 1.0)
    line, sentence = drive_verdict(sweep, "terminal"), drive_verdict(sweep, "report")
    edge_out = float(sentence.split(" dBm out")[0].split(", ")[-1])
    assert edge_out == pytest.approx(5.0, abs=0.02)
    assert line.startswith("HIGHEST COMPLIANT DRIVE: ") and f"output {edge_out:+.2f} dBm" in line
    assert "2f1" in line and "2f1" in sentence
    with pytest.raises(ValueError, match="style"):
        drive_verdict(sweep, "html")


def test_target_output_sweep_inverts_the_transfer():
    # Sweeping the output: each point's carrier output equals its target (the sweep
    # variable); a linear gain of 20 dB puts the input 20 dB lower (arithmetic).
    stages = [amp(gain="20 dB", h2="-40 dBc @ +10 dBm")]
    sweep = drive_sweep(
        _lineup(stages, [{"freq": "100 MHz", "power": "-30 dBm"}], FLAT), -10, 10, 1.0, target_output=True
    )
    np.testing.assert_allclose(sweep.output_dbm, np.arange(-10, 11, 1.0), atol=0.01)
    np.testing.assert_allclose(sweep.input_dbm, np.arange(-30, -9, 1.0), atol=0.01)


def _uhf_band_lineup():
    # 3rd harmonic well under Category A (-13 dBm) but above a -60 dBm planning limit
    # for the RR 5.340 band 1400-1427 MHz.
    stages = [amp("pa", gain="30 dB", h3="-60 dBc @ +30 dBm")]
    mask = {"use": ["itu-sm329-cat-a", {"name": "itu-rr-5.340", "limit": "-60 dBm", "rbw": "1 MHz"}]}
    return _lineup(stages, [{"freq": "465 MHz", "power": "0 dBm"}], mask)


def test_tuning_third_harmonic_enters_protected_band_from_466_67_mhz():
    # 3 f = 1400 MHz at f = 466.667 MHz and 3 f = 1427 MHz at 475.667 MHz (arithmetic):
    # over 460-470 MHz the 3rd harmonic fails in the band from 466.667 MHz to the top.
    sweep = tune_sweep(_uhf_band_lineup(), np.arange(460e6, 470e6 + 1, 12.5e3))
    ranges = [r for r in sweep.failing if r["label"] == "3f1"]
    assert len(ranges) == 1
    assert ranges[0]["start_hz"] == pytest.approx(1400e6 / 3, abs=2.0)
    assert ranges[0]["stop_hz"] == pytest.approx(470e6)
    assert "1400-1427" in ranges[0]["band"]
    assert all(r["label"] == "3f1" for r in sweep.failing)
    # Rows of the first failing channel carry the contract's keys.
    i = sweep.rows["pass"].index(False)
    assert sweep.rows["carrier_hz"][i] >= 1400e6 / 3
    assert sweep.rows["freq_hz"][i] == pytest.approx(3 * sweep.rows["carrier_hz"][i])


def test_tune_cli_json_and_exit_status(tmp_path):
    path = tmp_path / "t.toml"
    path.write_text(
        '[[carrier]]\nfreq = "465 MHz"\npower = "0 dBm"\n'
        '[[stage]]\nkind = "amplifier"\nname = "pa"\ngain = "30 dB"\nh3 = "-60 dBc @ +30 dBm"\n'
        '[mask]\nuse = ["itu-sm329-cat-a", { name = "itu-rr-5.340", limit = "-60 dBm", rbw = "1 MHz" }]\n',
        encoding="utf-8",
    )
    out = CliRunner().invoke(
        main,
        [
            "tune",
            str(path),
            "--start",
            "460 MHz",
            "--stop",
            "470 MHz",
            "--step",
            "100 kHz",
            "--format",
            "json",
        ],
    )
    assert out.exit_code == 1, out.output
    doc = json.loads(out.stdout)
    assert doc["summary"]["failing_ranges"][0]["start_hz"] == pytest.approx(1400e6 / 3, abs=2.0)
    assert {"carrier_hz", "freq_hz", "label", "band", "rule", "margin_db"} <= set(doc["rows"][0])
    assert "\x1b" not in out.stderr  # no progress bar or colour when piped


def test_drive_cli_reports_the_limit(tmp_path):
    # Same analytic case as above through the CLI (h2, L = -40 dBm: P = +5 dBm out).
    path = tmp_path / "d.toml"
    path.write_text(
        '[[carrier]]\nfreq = "100 MHz"\npower = "-30 dBm"\n'
        '[[stage]]\nkind = "amplifier"\nname = "a"\ngain = "20 dB"\nh2 = "-30 dBc @ +20 dBm"\n'
        '[[mask.rule]]\nstart = "9 kHz"\nstop = "20 GHz"\nlimit = "-40 dBm"\n',
        encoding="utf-8",
    )
    png = tmp_path / "d.png"
    out = CliRunner().invoke(
        main,
        [
            "drive",
            str(path),
            "--start",
            "-30 dBm",
            "--stop",
            "+10 dBm",
            "--step",
            "1 dB",
            "--format",
            "json",
            "--plot",
            str(png),
        ],
    )
    assert out.exit_code == 0, out.output
    s = json.loads(out.stdout)["summary"]
    assert s["max_compliant_output_dbm"] == pytest.approx(5.0, abs=0.02)
    assert s["max_compliant_input_dbm"] == pytest.approx(-15.0, abs=0.02)
    assert s["limiting"]["label"] == "2f1"
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


@pytest.mark.parametrize(
    ("args", "needle"),
    [
        (["drive", "--start", "+10 dBm", "--stop", "-10 dBm", "--step", "1 dB"], "below --start"),
        (["drive", "--start", "-10 dBm", "--stop", "+10 dBm", "--step", "0 dB"], "step > 0"),
        (["drive", "--start", "-10", "--stop", "+10 dBm", "--step", "1 dB"], "--start"),
        (["tune", "--start", "470 MHz", "--stop", "460 MHz", "--step", "1 MHz"], "below --start"),
        (["tune", "--start", "460 MHz", "--stop", "470 MHz", "--step", "0 Hz"], "step > 0"),
        (["tune", "--start", "460", "--stop", "470 MHz", "--step", "1 MHz"], "unit is missing"),
        (["tune", "--start", "460 MHz", "--stop", "470 MHz"], "--step"),
        (["drive", "--start", "-100 dBm", "--stop", "+90 dBm", "--step", "0.0001 dB"], "at most"),
    ],
)
def test_malformed_sweep_arguments_give_one_line_errors(args, needle):
    out = CliRunner().invoke(main, args)
    assert out.exit_code == 2, out.output
    err = out.stderr.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("spurplan: error:")
    assert needle in err[0]
    assert "Traceback" not in out.output


def _failing_lineup_text():
    return (
        "# invented test scenario\n"
        '[[carrier]]\nfreq = "150 MHz"\npower = "+10 dBm"\n'
        '[[stage]]\nkind = "amplifier"\nname = "pa"\ngain = "26 dB"\noip3 = "+50 dBm"\n'
        'h2 = "-25 dBc @ +36 dBm"\npsat = "+40 dBm"\n'
        '[[stage]]\nkind = "attenuator"\nname = "out"\nloss = "0.5 dB"\n'
        '[mask]\nuse = ["itu-sm329-cat-a"]\n'
    )


def test_remedy_filter_written_into_the_lineup_passes_and_one_order_lower_does_not(tmp_path):
    path = tmp_path / "fail.toml"
    path.write_text(_failing_lineup_text(), encoding="utf-8")
    lineup = spurplan.load(path)
    assert not check(lineup).passed
    found = remedy(lineup, margin_db=3.0)
    assert found.found and found.after == "pa"
    # Rejection still needed = target - margin now (arithmetic), for every short product.
    for m, need in zip(found.needed["margin_db"], found.needed["rejection_needed_db"], strict=True):
        assert need == pytest.approx(3.0 - m)
    fixed = tmp_path / "fixed.toml"
    write_fixed(lineup, found, fixed)
    again = check(spurplan.load(fixed))
    assert again.passed and again.worst_margin_db >= 3.0
    assert [s.name for s in spurplan.load(fixed).stages] == ["pa", "remedy filter", "out"]
    # No family reaches the target one order lower.
    order = found.filter.prototype.order
    lower = [t for t in found.tried if t["order"] == order - 1]
    assert lower, "the search must have tried the order below"
    assert len(lower) == sum(1 for fam, _ in FAMILIES_TRIED if fam == "butterworth" or (order - 1) % 2)
    assert all(t["worst_margin_db"] < 3.0 for t in lower)
    # And that lower-order filter, written in by hand, really fails the target.
    snippet = found.snippet.replace(f"order = {order}", f"order = {order - 1}")
    if "chebyshev" in snippet and (order - 1) % 2 == 0:
        snippet = snippet.replace('family = "chebyshev"', 'family = "butterworth"').replace(
            ', ripple = "0.1 dB"', ""
        )
    low = tmp_path / "lower.toml"
    text = fixed.read_text(encoding="utf-8").replace(found.snippet, snippet)
    low.write_text(text, encoding="utf-8")
    assert check(spurplan.load(low)).worst_margin_db < 3.0


def test_remedy_filter_loses_little_at_the_carrier(tmp_path):
    # The edge placement keeps the ideal ladder's loss at the carrier within 0.3 dB
    # (remedy.MAX_PASSBAND_LOSS_DB); the re-check includes that loss.
    path = tmp_path / "fail.toml"
    path.write_text(_failing_lineup_text(), encoding="utf-8")
    found = remedy(spurplan.load(path))
    assert found.before.carrier_dbm - found.outcome.carrier_dbm <= 0.3 + 1e-9
    h = found.filter.response(np.array([150e6]))
    assert -20 * math.log10(abs(h[0])) <= 0.3 + 1e-9


def test_a_sweep_that_fails_at_its_lowest_drive_has_no_compliant_drive_to_sign(tmp_path):
    # A rule held only at low carrier power (when_power at_most +10 dBm, an invented planning
    # rule) fails the 2nd harmonic at the low end; above +10 dBm out no rule covers it. The
    # drive up to which everything passes (DEVELOPERS.md: the top of the first passing stretch
    # from the low end) does not exist, whatever passes higher up: the sweep must say so
    # instead of naming a drive (arithmetic on the rule's condition: out = in + 20 dB).
    mask = {
        "rule": [
            {
                "name": "low-power test rule",
                "start": "150 MHz",
                "stop": "250 MHz",
                "limit": "-150 dBm",
                "when_power": {"at_most": "+10 dBm"},
                "status": "derived",
            }
        ]
    }
    stages = [amp(gain="20 dB", ohip2="+40 dBm")]
    lu = _lineup(stages, [{"freq": "100 MHz", "power": "-30 dBm"}], mask)
    sweep = drive_sweep(lu, -30.0, 0.0, 1.0)
    assert sweep.status == "fails at the lowest drive"
    assert sweep.max_compliant_input_dbm is None and sweep.limiting is None
    passing = sweep.worst_margin_db >= 0
    assert not passing[0] and passing[-1]  # precondition: some higher drive passes
    path = tmp_path / "low.toml"
    path.write_text(
        '[[carrier]]\nfreq = "100 MHz"\npower = "-30 dBm"\n'
        '[[stage]]\nkind = "amplifier"\nname = "amp"\ngain = "20 dB"\nohip2 = "+40 dBm"\n'
        '[[mask.rule]]\nname = "low-power test rule"\nstart = "150 MHz"\nstop = "250 MHz"\n'
        'limit = "-150 dBm"\nwhen_power = { at_most = "+10 dBm" }\nstatus = "derived"\n',
        encoding="utf-8",
    )
    args = ["drive", str(path), "--start", "-30 dBm", "--stop", "0 dBm", "--step", "1 dB"]
    out = CliRunner().invoke(main, args)
    assert out.exit_code == 0, out.output
    assert "none from the bottom of the range" in out.output


def test_sweep_and_yield_headlines_say_incomplete_when_a_figure_is_missing(tmp_path):
    # The project's rule (README, "A missing or doubtful number never turns into a PASS"):
    # a drive range, a tuning range or a yield computed from a model without a stated
    # figure says so in its headline and its JSON summary, as the check's verdict does.
    import json

    from helpers import run_in_process

    body = (
        '[[carrier]]\nfreq = "100 MHz"\npower = "-20 dBm"\n'
        '[[stage]]\nkind = "amplifier"\nname = "pa"\ngain = "20 dB"\noip3 = "+30 dBm"\n{extra}'
        '[mask]\nuse = ["itu-sm329-cat-a"]\n[analysis]\nmax_order = 5\n'
    )
    complete = 'oip2 = "+40 dBm"\npsat = "+20 dBm"\nnoise_figure = "5 dB"\n'
    for name, extra, caveat in (("gap.toml", "", True), ("full.toml", complete, False)):
        path = tmp_path / name
        path.write_text(body.format(extra=extra), encoding="utf-8")
        runs = (
            ["drive", str(path), "--start", "-30 dBm", "--stop", "-20 dBm", "--step", "5 dB"],
            ["tune", str(path), "--start", "99 MHz", "--stop", "101 MHz", "--step", "1 MHz"],
            ["yield", str(path), "--samples", "20", "--seed", "1"],
        )
        for args in runs:
            code, out, err, detail, _ = run_in_process(args)
            assert code == 0 and detail == "", (args, err)
            headline = next(line for line in out.splitlines() if line.split(":")[0].isupper() and ":" in line)
            assert ("INCOMPLETE: not modelled: stage 'pa' has no" in headline) is caveat, (args, headline)
            assert "products only: check judges the noise" in headline
            code, out, _, _, _ = run_in_process([*args, "--format", "json"])
            summary = json.loads(out)["summary"]
            assert summary["model_gaps"].startswith("INCOMPLETE") is caveat


@pytest.mark.slow
def test_sweeps_on_a_local_dask_cluster_equal_the_sweeps_in_process(monkeypatch):
    # The same chunks run on two worker processes: every margin is the same number.
    pytest.importorskip("dask.distributed")
    from spurplan.analyses import sweep as sweep_module

    monkeypatch.setattr(sweep_module, "CHUNK_POINTS", 16)  # several jobs from a short sweep
    lineup = _uhf_band_lineup()
    here = drive_sweep(lineup, -10.0, 5.0, 0.25)
    there = drive_sweep(lineup, -10.0, 5.0, 0.25, workers=2)
    np.testing.assert_array_equal(here.margin_db, there.margin_db)
    assert here.status == there.status
    channels = np.arange(460e6, 470e6 + 1, 125e3)
    t_here = tune_sweep(lineup, channels)
    t_there = tune_sweep(lineup, channels, workers=2)
    np.testing.assert_array_equal(t_here.worst_margin_db, t_there.worst_margin_db)
    assert t_here.failing == t_there.failing


def test_drive_points_whose_levels_do_not_settle_make_the_headline_uncertain():
    # Three saturating stages driven hard (the case of
    # tests/test_raster_carriers.py::test_levels_that_do_not_settle_keep_the_check_from_pass):
    # a lax invented limit is met at every drive, but the range is no compliance claim.
    from spurplan.output.verdicts import drive_verdict

    stages = [
        amp("driver", gain="16 dB", oip3="+34 dBm", oip2="+50 dBm", psat="+24 dBm", noise_figure="5 dB"),
        amp("pre", gain="12 dB", oip3="+40 dBm", oip2="+56 dBm", psat="+30 dBm", noise_figure="5 dB"),
        amp("pa", gain="15 dB", oip3="+48 dBm", oip2="+64 dBm", psat="+39 dBm", noise_figure="5 dB"),
    ]
    carriers = [{"freq": "455 MHz", "power": "0 dBm"}, {"freq": "455.025 MHz", "power": "0 dBm"}]
    mask = {"rule": [{"name": "lax", "start": "9 kHz", "stop": "10 GHz", "limit": "+60 dBm", "rbw": "1 MHz"}]}
    sweep = drive_sweep(_lineup(stages, carriers, mask), -2.0, 0.0, 1.0)
    assert sweep.status == "compliant throughout"  # precondition
    assert sweep.unsettled_signed >= 1
    assert "UNCERTAIN: levels not settled" in drive_verdict(sweep)


def test_yield_samples_whose_levels_do_not_settle_make_the_headline_uncertain():
    # The same hard-driven chain with a small gain spread: every sample meets the lax limit,
    # and those counted as passing without settled levels keep the yield from a clean claim.
    from spurplan.analyses.montecarlo import run_yield
    from spurplan.output.verdicts import yield_verdict

    stages = [
        amp("driver", gain="16 dB", oip3="+34 dBm", oip2="+50 dBm", psat="+24 dBm", noise_figure="5 dB"),
        amp("pre", gain="12 dB", oip3="+40 dBm", oip2="+56 dBm", psat="+30 dBm", noise_figure="5 dB"),
        {
            **amp("pa", gain="15 dB", oip3="+48 dBm", oip2="+64 dBm", psat="+39 dBm", noise_figure="5 dB"),
            "tolerance": {"gain": "0.2 dB"},
        },
    ]
    carriers = [{"freq": "455 MHz", "power": "0 dBm"}, {"freq": "455.025 MHz", "power": "0 dBm"}]
    mask = {"rule": [{"name": "lax", "start": "9 kHz", "stop": "10 GHz", "limit": "+60 dBm", "rbw": "1 MHz"}]}
    res = run_yield(_lineup(stages, carriers, mask), 8, seed=1)
    assert res.passed == 8  # precondition
    assert res.unsettled_passing >= 1
    assert "UNCERTAIN: levels not settled" in yield_verdict(res)
