"""The stage protocol: sampled copies, the sampled amplifier's figures, a kind added from outside.

References: the sampled amplifier is held to the sample's stated figures (the datasheet
values moved by the sample's deltas) with the tolerances of the nominal fit
(amplifier_fit.FigureCheck); the yield of the toy kind is the normal CDF (Abramowitz and
Stegun 26.2.29; from memory).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pytest

from spurplan.analyses.check import check
from spurplan.analyses.montecarlo import run_yield
from spurplan.engine.torus import propagate
from spurplan.io.lineup_file import from_dict
from spurplan.model import stages as stage_kinds
from spurplan.model.products import mixing_vectors, product_freqs_hz
from spurplan.model.stages import amplifier_fit
from spurplan.model.stages.amplifier import Amplifier, AmplifierFigures
from spurplan.model.stages.base import DB, SampledStage, StageDefaults, flat_response
from spurplan.output.report import build_report
from spurplan.units import parse_gain_db


def _uhf_lineup():
    doc = {
        "carrier": [{"freq": "455 MHz", "power": "-8 dBm"}],
        "stage": [
            {
                "kind": "amplifier",
                "name": "driver",
                "gain": "16 dB",
                "oip3": "+34 dBm",
                "h2": "-28 dBc @ +20 dBm",
                "h3": "-38 dBc @ +20 dBm",
                "psat": "+24 dBm",
            },
            {"kind": "attenuator", "name": "pad", "loss": "3 dB"},
            {
                "kind": "amplifier",
                "name": "pa",
                "gain": "24 dB",
                "oip3": "+48 dBm",
                "h2": "-30 dBc @ +37 dBm",
                "p1db": "+37 dBm",
                "psat": "+38.5 dBm",
            },
            {
                "kind": "filter",
                "name": "lpf",
                "prototype": {"family": "chebyshev", "order": 5, "cutoff": "600 MHz", "ripple": "0.1 dB"},
            },
        ],
        "analysis": {"max_order": 5},
    }
    return from_dict(doc, name="protocol.toml")


def _mixer_lineup():
    doc = {
        "carrier": [{"freq": "70 MHz", "power": "-10 dBm"}],
        "stage": [
            {
                "kind": "mixer",
                "name": "mixer",
                "lo": {"freq": "1.6 GHz", "power": "+7 dBm"},
                "conversion_loss": "6 dB",
                "p1db": "+1 dBm",
                "spur_drive": "-10 dBm",
                "spurs": {"2LO-IF": "-40 dBc"},
            }
        ],
        "analysis": {"max_order": 3},
    }
    return from_dict(doc, name="protocol-mixer.toml")


def _engine_nodes(lineup, stages, n):
    mix = mixing_vectors(lineup.n_tones, lineup.analysis.max_order)
    tones = np.broadcast_to(lineup.tone_freqs_hz, (n, lineup.n_tones))
    x_in = lineup.input_phasors(mix, np.zeros(n))
    freqs = product_freqs_hz(mix, tones)
    return propagate(stages, x_in, mix, freqs, lineup.stage_reference_hz(tones)).nodes


def _zero_deltas(stage, n):
    return {k: np.zeros((n, 64) if k == "elements" else n) for k in stage.spread_figures()}


@pytest.mark.parametrize("make", [_uhf_lineup, _mixer_lineup])
def test_zero_delta_sampled_copy_equals_the_nominal_for_every_kind(make):
    # The nominal run of the same engine is the reference: a sample without a shift is
    # the nominal stage (to rtol 1e-12, numpy's assert_allclose).
    lineup = make()
    n = 3
    nominal = _engine_nodes(lineup, list(lineup.stages), n)
    kinds = set()
    for i, stage in enumerate(lineup.stages):
        assert stage.spread_figures(), stage.kind
        kinds.add(stage.kind)
        stages = list(lineup.stages)
        stages[i] = stage.sampled(_zero_deltas(stage, n), n, lineup.r_ohm)
        np.testing.assert_allclose(
            _engine_nodes(lineup, stages, n), nominal, rtol=1e-12, atol=1e-15, err_msg=stage.name
        )
    assert kinds == ({"amplifier", "attenuator", "filter"} if make is _uhf_lineup else {"mixer"})


def _row(transfer, i):
    """Sample ``i`` of a per-sample model, as a model with scalar parameters."""
    one = transfer.take(np.array([i]))
    return type(one)(
        **{
            k: (
                tuple((n, float(np.asarray(a)[0])) for n, a in v)
                if k == "even"
                else float(np.asarray(v).reshape(-1)[0])
                if np.ndim(v)
                else v
            )
            for k, v in vars(one).items()
        }
    )


@pytest.mark.parametrize(
    ("figures", "spread"),
    [
        # psat with a third-order figure: the knee chosen by the intercept (invented figures).
        (
            AmplifierFigures(gain_db=16, oip3_dbm=34, harmonics={2: (-28, 20), 3: (-38, 20)}, psat_dbm=24),
            {"gain": 0.5, "oip3": 1.5, "psat": 0.3, "ohip2": 2.0, "ohip3": 1.0},
        ),
        # a PA near saturation with a weight-carried fifth harmonic (invented figures).
        (
            AmplifierFigures(gain_db=24, oip3_dbm=48, harmonics={2: (-30, 37), 5: (-60, 37)}, psat_dbm=38.5),
            {"gain": 0.5, "oip3": 1.5, "psat": 0.3, "ohip2": 2.0, "ohip5": 1.0},
        ),
    ],
)
def test_sampled_amplifier_meets_the_samples_stated_figures(figures, spread):
    # Each sample's stated figures are the datasheet's moved by its deltas; the sampled
    # model must meet them within the tolerances the nominal fit promises
    # (FigureCheck.met: Psat 0.2 dB, hN 0.3 dB, OIP3 at the test level -1 / +0.5 dB).
    amp = Amplifier.from_figures("amp", figures, 50.0)
    assert all(c.met for c in amp.checks)
    rng = np.random.default_rng(5)
    n = 40
    deltas = {k: rng.normal(0.0, s, n) for k, s in spread.items()}
    stage = amp.sampled(deltas, n, 50.0)
    weights = stage.generated_weight.keywords["weights_db"]
    for i in range(n):
        model = _row(stage.transfer, i)
        psat = figures.psat_dbm + deltas["psat"][i]  # the sample's stated figure
        checks = [amplifier_fit.FigureCheck("psat", psat, amplifier_fit.model_psat_dbm(model, 50.0), "dBm")]
        oip3 = figures.oip3_dbm + deltas["oip3"][i]  # the sample's stated figure
        checks.append(amplifier_fit.oip3_check(model, oip3, 50.0))
        for h, (dbc, at) in figures.harmonics.items():
            stated = dbc - (h - 1) * deltas[f"ohip{h}"][i]  # the sample's stated figure
            a = amplifier_fit.input_for_output_v(model, at, 50.0)
            got = amplifier_fit.harmonic_dbc(model, a, h) + float(np.asarray(weights[h])[i])
            checks.append(amplifier_fit.FigureCheck(f"h{h}", stated, got, "dBc", at))
        missed = [c.describe() for c in checks if not c.met]
        assert missed == [], (i, missed)


@dataclass(frozen=True)
class _GainBlock(StageDefaults):
    """A toy linear kind: a flat gain (defined in this test only)."""

    name: str
    gain_db: float

    kind = "gain_block"
    transfer = None
    data_range_hz = None

    def response(self, freq_hz):
        return flat_response(self.gain_db)(freq_hz)

    def describe_figures(self):
        return f"flat gain {self.gain_db:+g} dB"

    def spread_figures(self):
        return {"gain": DB}

    def sampled(self, deltas, n, r_ohm):
        k = 10 ** (deltas["gain"] / 20)
        return SampledStage(self.name, None, lambda f: self.response(f) * np.reshape(k, (-1, 1)))

    @classmethod
    def from_fields(cls, fields, context):
        return cls(name=fields.raw("name"), gain_db=fields.quantity("gain", parse_gain_db, required=True))


def test_a_kind_added_outside_the_package_loads_runs_checks_reports_and_spreads(monkeypatch):
    monkeypatch.setitem(stage_kinds.KINDS, "gain_block", _GainBlock)
    doc = {
        "carrier": [{"freq": "100 MHz", "power": "0 dBm"}],
        "stage": [
            {"kind": "amplifier", "name": "pa", "gain": "20 dB", "h2": "-40 dBc @ +20 dBm"},
            {"kind": "gain_block", "name": "block", "gain": "0 dB", "tolerance": {"gain": "1 dB"}},
        ],
        "mask": {"rule": [{"start": "9 kHz", "stop": "10 GHz", "limit": "-19 dBm", "name": "flat"}]},
        "analysis": {"max_order": 3},
    }
    lineup = from_dict(doc, name="toy.toml")
    assert lineup.stages[1].kind == "gain_block"
    # H2 = +20 - 40 = -20 dBm at the amplifier (the stated point, arithmetic), through 0 dB.
    assert check(lineup).passed
    report = build_report(lineup)
    assert "flat gain +0 dB" in report.to_markdown("now", "figs")[0]
    # The H2 passes while the block's gain shift d <= 1 dB: yield Phi(1) = 0.8413 (normal CDF).
    res = run_yield(lineup, 4000, seed=2)
    want = 0.5 * (1 + math.erf(1 / math.sqrt(2)))
    sigma = math.sqrt(want * (1 - want) / 4000)
    assert abs(res.yield_fraction - want) <= 4 * sigma
