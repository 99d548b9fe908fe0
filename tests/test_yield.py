"""Monte Carlo yield: closed-form failure probability, zero spread, seeds across processes."""

from __future__ import annotations

import math
import re

import numpy as np
import pytest
from click.testing import CliRunner

from spurplan.analyses.check import check
from spurplan.analyses.montecarlo import run_yield, wilson_interval
from spurplan.cli import main
from spurplan.errors import LineupError
from spurplan.io.lineup_file import from_dict
from spurplan.model.ladders import Prototype, ladder_network, ladder_s21


def _lineup(tolerance=None, limit="-21 dBm", corners=None, pa_extra=None):
    stage = {
        "kind": "amplifier",
        "name": "pa",
        "gain": "20 dB",
        "h2": "-40 dBc @ +20 dBm",
        **(pa_extra or {}),
    }
    if tolerance:
        stage["tolerance"] = tolerance
    doc = {
        "carrier": [{"freq": "100 MHz", "power": "0 dBm"}],
        "stage": [stage],
        "mask": {"rule": [{"start": "9 kHz", "stop": "10 GHz", "limit": limit, "name": "flat"}]},
        "analysis": {"max_order": 3},
    }
    if corners:
        doc["corner"] = corners
    return from_dict(doc, name="yield-test.toml")


def _phi(z: float) -> float:
    # Standard normal CDF, Phi(z) = (1 + erf(z / sqrt 2)) / 2 (Abramowitz and Stegun 26.2.29; from memory).
    return 0.5 * (1 + math.erf(z / math.sqrt(2)))


def _within_4_sigma(res, want: float, samples: int) -> None:
    """The sampled yield lies within 4 sigma of ``want``, sigma = sqrt(p (1 - p) / N)
    (normal approximation to the binomial, e.g. Montgomery and Runger, Applied
    Statistics and Probability for Engineers, from memory), and inside its own Wilson
    interval.  A 95 % interval holding the true value is a 2-sigma window: with fixed
    seeds it passes or fails deterministically, but any change in how random numbers
    are drawn would fail it one time in twenty."""
    sigma = math.sqrt(want * (1 - want) / samples)
    assert abs(res.yield_fraction - want) <= 4 * sigma, (res.yield_fraction, want, sigma)
    lo, hi = res.interval
    assert lo <= res.yield_fraction <= hi


@pytest.mark.parametrize(("limit", "passes"), [("-21 dBm", False), ("-19 dBm", True)])
def test_zero_tolerance_yield_is_0_or_1_matching_the_check(limit, passes):
    lineup = _lineup(limit=limit)
    assert check(lineup).passed is passes
    res = run_yield(lineup, 500, seed=3)
    assert res.yield_fraction == (1.0 if passes else 0.0)


def test_normal_spread_on_one_intercept_gives_the_normal_cdf():
    # H2 = 2 P - OHIP2 (OHIPn = Pout + |dBc|/(n-1), common practice) at P = +20 dBm with
    # OHIP2 ~ N(60 dBm, 2 dB): the product exceeds L = -21 dBm when OHIP2 < 61 dBm, so the
    # yield is 1 - Phi((61 - 60) / 2) = 0.3085 (normal CDF). The Wilson 95 % interval of
    # 20000 samples must contain it.
    lineup = _lineup(tolerance={"ohip2": "2 dB"})
    res = run_yield(lineup, 20_000, seed=11)
    want = 1 - _phi(0.5)
    _within_4_sigma(res, want, 20_000)
    lo, hi = res.interval
    assert hi - lo < 0.02
    assert res.causes[0]["label"] == "2f1" and "flat" in res.causes[0]["rule"]


def test_uniform_spread_and_corners():
    # Uniform within +/- 2 dB on OHIP2 around 60 dBm: fail below 61 dBm, i.e. 3/4 of the
    # range (arithmetic); a corner that lowers OHIP2 by 3 dB fails every sample.
    res = run_yield(_lineup(tolerance={"ohip2": {"uniform": "2 dB"}}), 20_000, seed=5)
    _within_4_sigma(res, 0.25, 20_000)
    corners = [
        {"name": "cold", "shift": {"pa.ohip2": "-3 dB"}},
        {"name": "hot", "shift": {"pa.gain": "+0.1 dB"}},
    ]
    res = run_yield(_lineup(limit="-19 dBm", corners=corners), 200, seed=1)
    assert res.yield_fraction == 0.0


def test_conversion_gain_spread_of_a_compressed_mixer_gives_the_normal_cdf():
    # A mixer driven at its P1dB with its spur table measured there: 2LO-IF is
    # -40 dBc of the wanted output, which is 1 dB compressed (definition of P1dB), so
    # it sits at +1 - 6 - 1 - 40 = -46 dBm (arithmetic). A conversion-gain spread
    # N(0, 1 dB) moves every product with it; against a -45 dBm limit the yield is
    # Phi((-45 - -46) / 1) = 0.8413 (normal CDF). The image is 60 dB down and passes.
    doc = {
        "carrier": [{"freq": "70 MHz", "power": "+1 dBm"}],
        "stage": [
            {
                "kind": "mixer",
                "name": "mixer",
                "lo": {"freq": "1.6 GHz", "power": "+7 dBm"},
                "conversion_loss": "6 dB",
                "image_rejection": "60 dB",
                "p1db": "+1 dBm",
                "spur_drive": "+1 dBm",
                "spurs": {"2LO-IF": "-40 dBc"},
                "tolerance": {"conversion_gain": "1 dB"},
            }
        ],
        "mask": {"rule": [{"start": "9 kHz", "stop": "10 GHz", "limit": "-45 dBm", "name": "flat"}]},
        "analysis": {"max_order": 3},
    }
    lineup = from_dict(doc, name="yield-mixer.toml")
    res = run_yield(lineup, 20_000, seed=4)
    _within_4_sigma(res, _phi(1.0), 20_000)
    lo, hi = res.interval
    assert hi - lo < 0.02
    assert res.causes[0]["label"] == "2LO-IF"


def test_wilson_interval_matches_published_example():
    # Wilson score interval, 95 %: 81 successes of 263 gives 0.2553 to 0.3662 (worked
    # example in Newcombe, Statistics in Medicine 17 (1998) 857, method 3; from memory).
    lo, hi = wilson_interval(81, 263)
    assert lo == pytest.approx(0.2553, abs=5e-4)
    assert hi == pytest.approx(0.3662, abs=5e-4)


def test_sampled_ladder_equals_scikit_rf_with_the_moved_cutoff():
    # The vectorised ABCD ladder with the response scaled by k equals scikit-rf's
    # ladder built at cutoff k fc (independent library), to 1e-12.
    proto = Prototype("chebyshev", "lowpass", 7, 520e6, ripple_db=0.1, q_inductor=100.0)
    f = np.linspace(50e6, 2e9, 41)
    k = np.array([0.97, 1.0, 1.03])
    got = ladder_s21(proto, np.broadcast_to(f, (3, f.size)), 50.0, scale=k)
    for i, ki in enumerate(k):
        moved = Prototype("chebyshev", "lowpass", 7, 520e6 * ki, ripple_db=0.1, q_inductor=100.0)
        np.testing.assert_allclose(got[i], ladder_network(moved, f, 50.0).s[:, 1, 0], atol=1e-12)


@pytest.mark.slow
def test_same_seed_same_result_in_process_and_on_a_local_dask_cluster():
    pytest.importorskip("dask.distributed")
    lineup = _lineup(tolerance={"ohip2": "2 dB", "gain": "0.3 dB"})
    here = run_yield(lineup, 3000, seed=7, batch_samples=500)
    there = run_yield(lineup, 3000, seed=7, batch_samples=500, workers=2)
    assert there.where.startswith("local dask cluster")
    np.testing.assert_array_equal(here.worst_margin_db, there.worst_margin_db)
    assert here.passed == there.passed


@pytest.mark.parametrize(
    ("tolerance", "needle"),
    [
        ({"oip33": "1 dB"}, "did you mean 'oip3'"),
        ({"gain": "1"}, "unit is missing"),
        ({"gain": "-1 dB"}, "spread >= 0"),
        ({"gain": {"gaussian": "1 dB"}}, "normal"),
    ],
)
def test_malformed_tolerances(tmp_path, tolerance, needle):
    import json

    def toml(v):
        if isinstance(v, dict):
            return "{ " + ", ".join(f"{k} = {toml(x)}" for k, x in v.items()) + " }"
        return json.dumps(v)

    text = (
        '[[carrier]]\nfreq = "100 MHz"\npower = "0 dBm"\n[[stage]]\nkind = "amplifier"\nname = "pa"\n'
        f'gain = "20 dB"\ntolerance = {toml(tolerance)}\n'
    )
    (tmp_path / "t.toml").write_text(text, encoding="utf-8")
    out = CliRunner().invoke(main, ["spectrum", str(tmp_path / "t.toml")])
    assert out.exit_code == 2, out.output
    err = out.stderr.strip().splitlines()
    assert len(err) == 1 and "stage 1 'pa'" in err[0] and needle in err[0]


def test_yield_command(tmp_path):
    path = tmp_path / "y.toml"
    path.write_text(
        '[[carrier]]\nfreq = "100 MHz"\npower = "0 dBm"\n[[stage]]\nkind = "amplifier"\nname = "pa"\n'
        'gain = "20 dB"\nh2 = "-40 dBc @ +20 dBm"\ntolerance = { ohip2 = "2 dB" }\n'
        '[[mask.rule]]\nstart = "9 kHz"\nstop = "10 GHz"\nlimit = "-21 dBm"\n',
        encoding="utf-8",
    )
    import json

    out = CliRunner().invoke(
        main,
        [
            "yield",
            str(path),
            "--samples",
            "4000",
            "--seed",
            "2",
            "--format",
            "json",
            "--plot",
            str(tmp_path / "h.png"),
        ],
    )
    assert out.exit_code == 0, out.output
    s = json.loads(out.stdout)["summary"]
    # Expected: 1 - Phi(0.5) = 0.3085 (as in the normal-CDF test above). Window of 4 sigma
    # of a sample proportion, sigma = sqrt(p (1 - p) / N) (normal approximation to the
    # binomial, e.g. Montgomery and Runger, Applied Statistics and Probability for
    # Engineers, from memory): 0.0073 for N = 4000. Seed fixed, so the run is deterministic.
    want = 1 - _phi(0.5)
    sigma = math.sqrt(want * (1 - want) / 4000)
    assert s["interval_method"] == "Wilson score"
    assert abs(s["yield"] - want) <= 4 * sigma, (s["yield"], want, sigma)
    assert (tmp_path / "h.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


# Two-sided 95 % normal quantile, from scipy (independent library), for the Wilson
# interval's closed forms below.
def _z95() -> float:
    from scipy.stats import norm

    return float(norm.ppf(0.975))


def _filtered_lineup(tolerance, corners):
    # Invented scenario: a PA whose H2 (-40 dBc @ +20 dBm, i.e. -20 dBm) meets a -20 dBm
    # limit only just, then a 5th-order Butterworth low-pass at 250 MHz.
    doc = {
        "carrier": [{"freq": "100 MHz", "power": "0 dBm"}],
        "stage": [
            {
                "kind": "amplifier",
                "name": "pa",
                "gain": "20 dB",
                "h2": "-40 dBc @ +20 dBm",
                "tolerance": tolerance,
            },
            {
                "kind": "filter",
                "name": "lpf",
                "prototype": {"family": "butterworth", "order": 5, "cutoff": "250 MHz"},
            },
        ],
        "mask": {"rule": [{"start": "9 kHz", "stop": "10 GHz", "limit": "-20 dBm", "name": "flat"}]},
        "analysis": {"max_order": 3},
        "corner": corners,
    }
    return from_dict(doc, name="yield-breakdown.toml")


def test_yield_breakdown_by_corner_and_channel_known_by_construction():
    # By construction (arithmetic): OHIP2 spreads uniformly within +/- 1 dB, so H2 lies
    # within -20 +/- 1 dBm before any corner (H2 = 2 P - OHIP2 at P = +20 dBm, common
    # practice).  Corner "low" takes 3 dB off OHIP2 (H2 -17 +/- 1 dBm), "high" adds 3 dB
    # (-23 +/- 1 dBm).  At the 100 MHz channel H2 (200 MHz) is in the low-pass's passband
    # (Butterworth loss 10 log10(1 + 0.8^10) = 0.44 dB, plus part losses well under
    # 2 dB), so "low" fails every sample and "high" passes every one; at the 200 MHz
    # channel H2 (400 MHz) is 10 log10(1 + 1.6^10) = 20.4 dB down and every sample
    # passes at both corners.  Per corner: yield 0 ("low") and 1 ("high"); per channel:
    # 0 (100 MHz) and 1 (200 MHz); overall 0.
    lineup = _filtered_lineup(
        {"ohip2": {"uniform": "1 dB"}},
        [{"name": "low", "shift": {"pa.ohip2": "-3 dB"}}, {"name": "high", "shift": {"pa.ohip2": "+3 dB"}}],
    )
    n = 600
    res = run_yield(lineup, n, seed=9, channels_hz=np.array([100e6, 200e6]), batch_samples=250)
    assert res.passed == 0
    z2 = _z95() ** 2
    # Wilson (1927) score interval at p = 0 and p = 1 in closed form (Agresti and Coull
    # 1998; from memory): [0, z^2 / (n + z^2)] and [n / (n + z^2), 1].
    none_pass = (0.0, z2 / (n + z2))
    all_pass = (n / (n + z2), 1.0)
    want = {"low": (n, 0.0, none_pass), "high": (0, 1.0, all_pass)}
    assert [r["corner"] for r in res.by_corner] == ["low", "high"]
    for row in res.by_corner:
        failed, yld, interval = want[row["corner"]]
        assert row["samples"] == n and row["failed"] == failed and row["yield"] == yld
        np.testing.assert_allclose(row["interval_95"], interval, atol=1e-12)
    want_ch = {100e6: (n, 0.0, none_pass), 200e6: (0, 1.0, all_pass)}
    assert [r["channel_hz"] for r in res.by_channel] == [100e6, 200e6]
    for row in res.by_channel:
        failed, yld, interval = want_ch[row["channel_hz"]]
        assert row["samples"] == n and row["failed"] == failed and row["yield"] == yld
        np.testing.assert_allclose(row["interval_95"], interval, atol=1e-12)
    # The leading cause where samples fail is H2 against the flat rule; none where all pass.
    low, high = res.by_corner
    assert (low["leading_label"], low["leading_samples"]) == ("2f1", n) and "flat" in low["leading_rule"]
    assert (high["leading_label"], high["leading_rule"], high["leading_samples"]) == ("", "", 0)
    assert res.by_channel[0]["leading_label"] == "2f1" and res.by_channel[1]["leading_label"] == ""


def test_yield_per_corner_follows_the_normal_cdf():
    # OHIP2 ~ N(60 dBm, 2 dB) as in test_normal_spread_on_one_intercept_gives_the_normal_cdf:
    # a sample fails the -21 dBm limit when its OHIP2 is below 61 dBm (arithmetic).  Corner
    # "up" adds 1 dB to OHIP2: it fails below a delta of 0, yield 1 - Phi(0) = 0.5; corner
    # "down" takes 1 dB off: yield 1 - Phi(1) = 0.1587 (normal CDF).  A sample passing
    # "down" passes "up", so the overall yield is that of "down".
    corners = [
        {"name": "up", "shift": {"pa.ohip2": "+1 dB"}},
        {"name": "down", "shift": {"pa.ohip2": "-1 dB"}},
    ]
    samples = 20_000
    res = run_yield(_lineup(tolerance={"ohip2": "2 dB"}, corners=corners), samples, seed=13)
    up, down = res.by_corner
    for row, want in ((up, 0.5), (down, 1 - _phi(1.0))):
        sigma = math.sqrt(want * (1 - want) / samples)  # binomial, normal approximation (as above)
        assert abs(row["yield"] - want) <= 4 * sigma, (row, want)
        lo, hi = row["interval_95"]
        assert (lo, hi) == pytest.approx(wilson_interval(samples - row["failed"], samples))
        assert row["leading_label"] == "2f1" and row["leading_samples"] == row["failed"]
    assert res.passed == samples - down["failed"]
    assert res.by_channel == ()


def test_yield_command_shows_the_breakdown(tmp_path):
    import json

    path = tmp_path / "y.toml"
    path.write_text(
        "# Invented scenario: one corner fails every sample, the other passes every one.\n"
        '[[carrier]]\nfreq = "100 MHz"\npower = "0 dBm"\n[[stage]]\nkind = "amplifier"\nname = "pa"\n'
        'gain = "20 dB"\nh2 = "-40 dBc @ +20 dBm"\ntolerance = { ohip2 = { uniform = "1 dB" } }\n'
        '[[mask.rule]]\nstart = "9 kHz"\nstop = "10 GHz"\nlimit = "-20 dBm"\nname = "flat"\n'
        '[[corner]]\nname = "low"\nshift = { "pa.ohip2" = "-3 dB" }\n'
        '[[corner]]\nname = "high"\nshift = { "pa.ohip2" = "+3 dB" }\n',
        encoding="utf-8",
    )
    (tmp_path / "ch.txt").write_text("100 MHz\n101 MHz\n", encoding="utf-8")
    args = ["yield", str(path), "--samples", "300", "--channels", str(tmp_path / "ch.txt")]
    out = CliRunner().invoke(main, [*args, "--format", "json"])
    assert out.exit_code == 0, out.output
    s = json.loads(out.stdout)["summary"]
    # By construction (as above, without the filter): "low" puts H2 at -17 +/- 1 dBm on
    # both channels, "high" at -23 +/- 1 dBm.
    assert [(r["corner"], r["failed"]) for r in s["by_corner"]] == [("low", 300), ("high", 0)]
    assert [(r["channel_hz"], r["failed"]) for r in s["by_channel"]] == [(100e6, 300), (101e6, 300)]
    assert s["by_corner"][0]["leading_label"] == "2f1"
    text = CliRunner().invoke(main, args)
    assert text.exit_code == 0, text.output
    assert "By corner" in text.stdout and "By channel" in text.stdout
    line = next(x for x in text.stdout.splitlines() if x.startswith("low "))
    assert "0.000" in line and "2f1" in line


# --- what a tolerance means (README, "Tolerances and corners") ------------------------------


def _sampled_run(lineup, n: int, seed: int, corner=None):
    """Deltas of one batch and the engine run of the lineup with them (batch of n)."""
    from spurplan.analyses.montecarlo import draw, sampled_stages
    from spurplan.engine.run import run

    deltas = draw(lineup.tolerances, n, seed, 0)
    stages = sampled_stages(lineup, deltas, corner, n)
    tones = np.broadcast_to(lineup.tone_freqs_hz, (n, lineup.n_tones))
    return deltas, run(lineup, tone_freqs_hz=tones, stages=stages)


def _std_in_chi2_window(x: np.ndarray, sigma: float) -> None:
    # (n - 1) s^2 / sigma^2 ~ chi^2 with n - 1 degrees of freedom for normal samples
    # (e.g. Montgomery and Runger, Applied Statistics and Probability for Engineers, from
    # memory); scipy.stats.chi2 gives the 99.9 % window.
    from scipy.stats import chi2

    n = x.size
    lo, hi = chi2.ppf([0.0005, 0.9995], n - 1)
    stat = (n - 1) * np.var(x, ddof=1) / sigma**2
    assert lo <= stat <= hi, (np.std(x, ddof=1), sigma)


def test_a_bare_tolerance_is_a_standard_deviation_and_uniform_a_limit():
    from scipy import stats

    doc = {
        "carrier": [{"freq": "100 MHz", "power": "0 dBm"}],
        "stage": [
            {
                "kind": "amplifier",
                "name": "pa",
                "gain": "20 dB",
                "oip3": "+100 dBm",
                "tolerance": {"gain": "1 dB"},
            },
            {"kind": "attenuator", "name": "pad", "loss": "3 dB", "tolerance": {"loss": {"uniform": "1 dB"}}},
            {
                "kind": "filter",
                "name": "lpf",
                "prototype": {"family": "butterworth", "order": 3, "cutoff": "1 GHz"},
                "tolerance": {"cutoff": "2 %", "q_inductor": {"normal": "10 %"}},
            },
        ],
        "analysis": {"max_order": 3},
    }
    lineup = from_dict(doc, name="tolerance-meaning.toml")
    n = 20_000
    deltas, result = _sampled_run(lineup, n, seed=21)
    gain, loss = deltas[(0, "gain")], deltas[(1, "loss")]
    # "1 dB" is sigma of a normal distribution centred on the stated gain: the sample
    # standard deviation is 1 dB within the chi-square window, the sample passes a
    # Kolmogorov-Smirnov test against N(0, 1) (scipy.stats), and about
    # 2 (1 - Phi(1)) = 31.7 % of samples lie beyond +/- 1 dB (normal CDF): it is not a limit.
    _std_in_chi2_window(gain, 1.0)
    assert stats.kstest(gain, stats.norm(0.0, 1.0).cdf).pvalue > 1e-3
    beyond = float(np.mean(np.abs(gain) > 1.0))
    want = 2 * (1 - _phi(1.0))
    assert abs(beyond - want) <= 4 * math.sqrt(want * (1 - want) / n)
    assert np.abs(gain).max() > 3.0  # not truncated: 3-sigma draws occur (P = 1 - 0.9973^n)
    # { uniform = "1 dB" } is a limit: every draw within +/- 1 dB, uniform (KS test), with
    # standard deviation 1 / sqrt(3) dB (variance of a uniform distribution, a^2 / 3).
    assert np.abs(loss).max() <= 1.0 and np.abs(loss).max() > 0.999
    assert stats.kstest(loss, stats.uniform(-1.0, 2.0).cdf).pvalue > 1e-3
    assert np.std(loss) == pytest.approx(1 / math.sqrt(3), rel=0.02)
    # Per cent figures are fractions of the stated value: "2 %" is sigma 0.02, and
    # { normal = ... } reads as a bare amount does.
    _std_in_chi2_window(deltas[(2, "cutoff")], 0.02)
    _std_in_chi2_window(deltas[(2, "q_inductor")], 0.10)
    # The draw is added in dB to the stated figure: each sample's carrier at the pad's
    # output is 0 + (20 + dG) - (3 + dL) dBm (arithmetic; with oip3 +100 dBm the cubic
    # term takes (P / OIP3) = 1e-7.6 or less of the carrier's amplitude up to +24 dBm
    # out, under 1e-6 dB).
    pad_out = result.carrier_levels_dbm_batch("pad")[:, 0]
    np.testing.assert_allclose(pad_out, 17.0 + gain - loss, atol=1e-5)


def test_malformed_tolerance_forms_are_refused():
    # Only a bare amount, { normal = ... } and { uniform = ... } are read (README).
    for form in ({"sigma": "1 dB"}, {"normal": "1 dB", "uniform": "1 dB"}):
        doc = {
            "carrier": [{"freq": "100 MHz", "power": "0 dBm"}],
            "stage": [{"kind": "amplifier", "name": "pa", "gain": "20 dB", "tolerance": {"gain": form}}],
        }
        with pytest.raises(LineupError, match=re.escape("expected { normal = ... } or { uniform = ... }")):
            from_dict(doc, name="t.toml")


def _harmonic_lineup(tolerance, corners=None, **extra):
    # Invented scenario.  oip3 +100 dBm keeps the carrier at +20 dBm to within 1e-6 dB
    # (its cubic term is 80 dB down), so the harmonics are read at their stated power.
    stage = {
        "kind": "amplifier",
        "name": "pa",
        "gain": "20 dB",
        "oip3": "+100 dBm",
        "h2": "-40 dBc @ +20 dBm",
        "h3": "-50 dBc @ +20 dBm",
        "tolerance": tolerance,
        **extra,
    }
    doc = {
        "carrier": [{"freq": "100 MHz", "power": "0 dBm"}],
        "stage": [stage],
        "analysis": {"max_order": 3},
    }
    if corners:
        doc["corner"] = corners
    return from_dict(doc, name="harmonic-spread.toml")


def _harmonic_dbc(result, n_harm: int) -> np.ndarray:
    """Each sample's n-th harmonic at the output, dBc (the slot at n x 100 MHz)."""
    lv = result.levels(None, "phase")
    slot = np.argmin(np.abs(lv.freq_hz - n_harm * 100e6), axis=1)
    rows = np.arange(lv.level_dbm.shape[0])
    return lv.level_dbm[rows, slot] - lv.carrier_ref_dbm


def test_harmonic_tolerance_spreads_the_stated_level():
    from scipy import stats

    lineup = _harmonic_lineup({"h2": {"uniform": "2 dB"}, "h3": "1.5 dB"})
    n = 4000
    deltas, result = _sampled_run(lineup, n, seed=17)
    assert np.all(np.abs(result.carrier_levels_dbm_batch()[:, 0] - 20.0) < 1e-4)
    h2, h3 = _harmonic_dbc(result, 2), _harmonic_dbc(result, 3)
    # Each sample's harmonic at the stated +20 dBm is the stated level moved by its
    # draw: h2 = -40 + d2, h3 = -50 + d3 dBc (the figure as stated, moved), within the
    # 0.02 dB the sampled model promises (amplifier module docstring).  A mapping of the
    # h3 draw to OHIP3 without the 1 / (n - 1) = 1/2 would move h3 by 2 d3 and fail.
    np.testing.assert_allclose(h2, -40.0 + deltas[(0, "h2")], atol=0.02)
    np.testing.assert_allclose(h3, -50.0 + deltas[(0, "h3")], atol=0.02)
    # The spread itself against the stated distributions (scipy.stats): h2 within
    # -40 +/- 2 dBc and uniform there (KS test), h3 normal with sigma 1.5 dB.
    assert np.all(np.abs(h2 + 40.0) <= 2.0 + 0.02)
    assert stats.kstest(h2 + 40.0, stats.uniform(-2.0, 4.0).cdf).pvalue > 1e-3
    _std_in_chi2_window(h3 + 50.0, 1.5)
    assert stats.kstest(h3 + 50.0, stats.norm(0.0, 1.5).cdf).pvalue > 1e-3


def test_harmonic_corner_shift_moves_the_stated_level():
    # A corner { "pa.h3" = "+3 dB" } puts every sample's h3 at -47 dBc at +20 dBm
    # (arithmetic), i.e. OHIP3 1.5 dB lower: (n - 1) (P - OHIP3) with n = 3.
    from spurplan.model.tolerances import Corner

    lineup = _harmonic_lineup({"gain": "0 dB"}, corners=[{"name": "loud", "shift": {"pa.h3": "+3 dB"}}])
    corner = lineup.tolerances.corners[0]
    assert isinstance(corner, Corner)
    _, result = _sampled_run(lineup, 8, seed=1, corner=corner)
    np.testing.assert_allclose(_harmonic_dbc(result, 3), -47.0, atol=0.02)
    np.testing.assert_allclose(_harmonic_dbc(result, 2), -40.0, atol=0.02)


@pytest.mark.parametrize(
    ("stage_keys", "where", "needle"),
    [
        # no h2 or ohip2 stated (oip2 sets H2 through the polynomial): nothing to spread
        ('oip2 = "+40 dBm"\ntolerance = { h2 = "2 dB" }\n', "tolerance", "states no h2 or ohip2"),
        ('h2 = "-40 dBc @ +20 dBm"\ntolerance = { ohip3 = "1 dB" }\n', "tolerance", "states no h3 or ohip3"),
        (
            'h2 = "-40 dBc @ +20 dBm"\n[[corner]]\nshift = { "pa.h4" = "1 dB" }\n',
            "corner",
            "states no h4 or ohip4",
        ),
        # the same for the other figures: a spread of a figure not stated would move nothing
        ('h3 = "-50 dBc @ +20 dBm"\ntolerance = { oip3 = "1 dB" }\n', "tolerance", "states no oip3 or iip3"),
        ('oip3 = "+40 dBm"\ntolerance = { psat = "0.5 dB" }\n', "tolerance", "states no psat"),
        ('oip3 = "+40 dBm"\n[[corner]]\nshift = { "pa.p1db" = "-1 dB" }\n', "corner", "states no p1db"),
    ],
)
def test_harmonic_tolerance_without_the_harmonic_is_a_one_line_error(tmp_path, stage_keys, where, needle):
    path = tmp_path / "t.toml"
    path.write_text(
        '[[carrier]]\nfreq = "100 MHz"\npower = "0 dBm"\n'
        '[[stage]]\nkind = "amplifier"\nname = "pa"\ngain = "20 dB"\n' + stage_keys,
        encoding="utf-8",
    )
    out = CliRunner().invoke(main, ["spectrum", str(path)])
    assert out.exit_code == 2, out.output
    err = out.stderr.strip().splitlines()
    assert len(err) == 1 and "t.toml" in err[0] and needle in err[0] and where in err[0], err


def test_tolerance_on_a_figure_stated_in_its_other_form_loads():
    # iip3 and iip2 state the output intercepts (oip = iip + gain), and ohip2 states the
    # second harmonic: each may spread under either name.
    doc = {
        "carrier": [{"freq": "100 MHz", "power": "0 dBm"}],
        "stage": [
            {
                "kind": "amplifier",
                "name": "pa",
                "gain": "20 dB",
                "iip3": "+20 dBm",
                "iip2": "+30 dBm",
                "ohip2": "+60 dBm",
                "tolerance": {"oip3": "1 dB", "oip2": "1 dB", "h2": "1 dB", "ohip2": "1 dB"},
            }
        ],
    }
    figures = {t.figure for t in from_dict(doc, name="t.toml").tolerances.items}
    assert figures == {"oip3", "oip2", "h2", "ohip2"}
