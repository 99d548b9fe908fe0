"""Monte Carlo yield: closed-form failure probability, zero spread, seeds across processes."""

from __future__ import annotations

import math

import numpy as np
import pytest
from click.testing import CliRunner

from spurplan.analyses.check import check
from spurplan.analyses.montecarlo import run_yield, wilson_interval
from spurplan.cli import main
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
