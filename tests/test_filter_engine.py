"""The engine with filter stages against the brute-force reference, and the filter command."""

from __future__ import annotations

import json
import math

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


def _coincident_doc(combine: str) -> dict:
    # Invented scenario: f2 = 3 f1, so 2f1 and f2-f1 land together at 200 MHz at the
    # filter's input; a gain-and-OIP2 amplifier is the polynomial a1 x + a2 x^2.
    return {
        "carrier": [
            {"freq": "100 MHz", "power": "0 dBm"},
            {"freq": "300 MHz", "power": "-10 dBm", "phase": "120 deg"},
        ],
        "stage": [
            {"kind": "amplifier", "name": "pa", "gain": "20 dB", "oip2": "+40 dBm"},
            {
                "kind": "filter",
                "name": "lpf",
                "prototype": {"family": "butterworth", "order": 5, "cutoff": "1 GHz"},
            },
        ],
        "analysis": {"max_order": 2, "combine": combine},
    }


# Hand calculation (common practice, no source): with y = a1 x + a2 x^2 and output
# carriers P1 = +20 dBm, P2 = +10 dBm, OIP2 = +40 dBm, the difference product is
# P1 + P2 - OIP2 = -10 dBm (0.1 mW) with phase phi2 - phi1 = 120 deg, and the second
# harmonic (a2 A1^2 / 2, half the two-tone product's amplitude) is 2 P1 - OIP2 - 6.02 dB
# = 0.25 mW exactly, phase 2 phi1 = 0.  In sqrt(mW): a = 0.5, b = sqrt(0.1).
_A, _B = 0.5, math.sqrt(0.1)
COINCIDENT_DBM = {
    # worst case: amplitudes add
    "worst": 10 * math.log10((_A + _B) ** 2),  # -1.764 dBm
    # power sum
    "power": 10 * math.log10(_A**2 + _B**2),  # -4.559 dBm
    # phase-true: |a + b e^(j 120 deg)|^2 = a^2 + b^2 + 2 a b cos(120 deg)
    "phase": 10 * math.log10(_A**2 + _B**2 + 2 * _A * _B * math.cos(math.radians(120))),  # -7.170 dBm
}


@pytest.mark.parametrize("combine", ["worst", "power", "phase"])
def test_filter_stage_view_combines_coincident_products_as_the_lineup_says(combine):
    from spurplan.analyses.filter_view import stage_view

    lineup = from_dict(_coincident_doc(combine), name="coincident.toml")
    view = stage_view(lineup, "lpf")
    rows = view.rows
    at = [i for i, f in enumerate(rows["freq_hz"]) if abs(f - 200e6) < 1.0]
    assert len(at) == 1  # one row per physical frequency, as the check reads it
    i = at[0]
    assert {rows["label"][i], rows["also"][i]} == {"2f1", "f2-f1"}
    assert rows["level_in_dbm"][i] == pytest.approx(COINCIDENT_DBM[combine], abs=1e-6)
    assert view.combine == combine
    # The three hand values differ by more than 2 dB from one another, so a view that
    # combined in any other way would fail the check above.
    others = [v for k, v in COINCIDENT_DBM.items() if k != combine]
    assert all(abs(COINCIDENT_DBM[combine] - v) > 2.0 for v in others)


def test_filter_command_combine_option_overrides_the_lineup(tmp_path):
    path = tmp_path / "coincident.toml"
    path.write_text(
        "# Invented scenario: 2f1 and f2-f1 coincide at the filter input.\n"
        '[[carrier]]\nfreq = "100 MHz"\npower = "0 dBm"\n'
        '[[carrier]]\nfreq = "300 MHz"\npower = "-10 dBm"\nphase = "120 deg"\n'
        '[[stage]]\nkind = "amplifier"\nname = "pa"\ngain = "20 dB"\noip2 = "+40 dBm"\n'
        '[[stage]]\nkind = "filter"\nname = "lpf"\n'
        'prototype = { family = "butterworth", order = 5, cutoff = "1 GHz" }\n'
        '[analysis]\nmax_order = 2\ncombine = "worst"\n',
        encoding="utf-8",
    )
    for option, want in ((None, "worst"), ("power", "power"), ("phase", "phase")):
        args = ["filter", str(path), "--stage", "lpf", "--format", "json"]
        out = CliRunner().invoke(main, args + ([] if option is None else ["--combine", option]))
        assert out.exit_code == 0, out.output
        doc = json.loads(out.stdout)
        assert doc["summary"]["combine"] == want
        row = next(r for r in doc["products"] if abs(r["freq_hz"] - 200e6) < 1.0)
        assert row["level_in_dbm"] == pytest.approx(COINCIDENT_DBM[want], abs=1e-6)
    table = CliRunner().invoke(main, ["filter", str(path), "--stage", "lpf", "--combine", "power"])
    assert table.exit_code == 0, table.output
    assert "combine = power" in table.stdout and "2f1 (f2-f1)" in table.stdout
    proto = CliRunner().invoke(
        main, ["filter", "--family", "butterworth", "--order", "3", "--cutoff", "1 GHz", "--combine", "phase"]
    )
    assert proto.exit_code == 2 and len(proto.stderr.strip().splitlines()) == 1
