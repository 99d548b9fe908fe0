"""The engine with filter stages against the brute-force reference, and the filter command."""

from __future__ import annotations

import json

import numpy as np
import pytest
import skrf
from click.testing import CliRunner
from helpers import compare_with_reference
from reference import Linear, Tone, exact_length, simulate

from spurplan.cli import main
from spurplan.io.lineup_file import from_dict

DF_HZ = 1e6


def _doc(filter_stage):
    return {
        "carrier": [
            {"freq": "7 MHz", "power": "-5 dBm"},
            {"freq": "9 MHz", "power": "-8 dBm", "phase": "40 deg"},
        ],
        "stage": [
            {"kind": "amplifier", "name": "driver", "gain": "15 dB", "oip3": "+25 dBm", "oip2": "+35 dBm"},
            filter_stage,
            {"kind": "amplifier", "name": "pa", "gain": "12 dB", "oip2": "+40 dBm"},
        ],
        # Degrees 3 then 2: the engine keeps every product up to order 6 (exact).
        "analysis": {"max_order": 6, "combine": "phase"},
    }


@pytest.mark.parametrize(
    "filter_stage",
    [
        {
            "kind": "filter",
            "name": "lpf",
            "prototype": {"family": "chebyshev", "order": 5, "cutoff": "20 MHz", "ripple": "0.5 dB"},
        },
        {
            "kind": "filter",
            "name": "bpf",
            "prototype": {
                "family": "butterworth",
                "response": "bandpass",
                "order": 3,
                "center": "9 MHz",
                "bandwidth": "6 MHz",
                "q_inductor": 50,
            },
        },
    ],
)
def test_engine_with_a_filter_equals_brute_force(filter_stage):
    # Brute-force time-domain reference (tests/reference.py) applying the same H(f)
    # bin by bin, one long FFT: every product above -150 dBc within 0.01 dB, phase and all
    # through the second amplifier's regeneration.
    lineup = from_dict(_doc(filter_stage), name="f.toml")
    rows = lineup.run().product_rows()
    flt = lineup.stages[1]
    stages = [lineup.stages[0].transfer, Linear(flt.response), lineup.stages[2].transfer]
    tones = [Tone(c.freq_hz, c.power_dbm, c.phase_rad) for c in lineup.carriers]
    ref = simulate(tones, stages, df_hz=DF_HZ, length=4 * exact_length([7, 9], 6))
    tones_hz = [c.freq_hz for c in lineup.carriers]
    assert compare_with_reference(rows, ref, -150.0, 0.01, tones_hz=tones_hz, max_order=6) >= 20


def _lineup_file(tmp_path):
    path = tmp_path / "l.toml"
    path.write_text(
        '[[carrier]]\nfreq = "455 MHz"\npower = "0 dBm"\n'
        '[[stage]]\nkind = "amplifier"\nname = "pa"\ngain = "20 dB"\noip3 = "+40 dBm"\noip2 = "+50 dBm"\n'
        '[[stage]]\nkind = "filter"\nname = "lpf"\n'
        # The ideal ladder, stated: the closed forms below are for lossless parts.
        'prototype = { family = "butterworth", order = 5, cutoff = "600 MHz", q_inductor = "lossless", '
        'q_capacitor = "lossless", floor = "none" }\n',
        encoding="utf-8",
    )
    return path


def test_filter_command_reports_response_at_products_and_writes_files(tmp_path):
    # Butterworth |S21|^2 = 1 / (1 + (f/fc)^10) at the 2nd harmonic, 910 MHz (closed form).
    path = _lineup_file(tmp_path)
    out = CliRunner().invoke(
        main,
        [
            "filter",
            str(path),
            "--stage",
            "lpf",
            "--format",
            "json",
            "--plot",
            str(tmp_path / "lpf.png"),
            "--touchstone",
            str(tmp_path / "lpf.s2p"),
        ],
    )
    assert out.exit_code == 0, out.output
    doc = json.loads(out.stdout)
    rows = {r["label"]: r for r in doc["products"]}
    want = -10 * np.log10(1 + (910e6 / 600e6) ** 10)
    assert rows["2f1"]["s21_db"] == pytest.approx(want, abs=1e-6)
    assert len(doc["summary"]["elements"]["position"]) == 5
    png = (tmp_path / "lpf.png").read_bytes()
    assert png[:8] == b"\x89PNG\r\n\x1a\n"
    net = skrf.Network(str(tmp_path / "lpf.s2p"))  # scikit-rf reads what we wrote
    f = net.f
    closed = -10 * np.log10(1 + (f / 600e6) ** 10)
    np.testing.assert_allclose(20 * np.log10(np.abs(net.s[:, 1, 0])), closed, atol=1e-6)


def test_filter_command_with_a_prototype_only():
    # Element values, low-pass scaling (Pozar, Microwave Engineering, from memory):
    # 3rd-order Butterworth at 100 MHz, 50 ohm, shunt first: C = 1/(R0 wc) = 31.83 pF,
    # L = 2 R0 / wc = 159.15 nH.
    out = CliRunner().invoke(
        main, ["filter", "--family", "butterworth", "--order", "3", "--cutoff", "100 MHz"]
    )
    assert out.exit_code == 0, out.output
    assert "31.83" in out.stdout and "159.2" in out.stdout


def test_filter_command_on_a_non_filter_stage_is_an_error(tmp_path):
    out = CliRunner().invoke(main, ["filter", str(_lineup_file(tmp_path)), "--stage", "pa"])
    assert out.exit_code == 2
    assert "expected a filter stage" in out.stderr
