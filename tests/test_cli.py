"""The command line: output contracts (JSON, CSV), the bundled example, and a few numbers
checked against outside references (each names its source).

Lineups written here are invented for these tests.
"""

from __future__ import annotations

import csv
import hashlib
import importlib.metadata
import io
import math
import tomllib
from pathlib import Path

import pytest
from helpers import as_json, invoke, run_cli, write

import spurplan

PRODUCT_KEYS = {
    "freq_hz": float,
    "level_dbm": float,
    "dbc": float,
    "order": int,
    "mix": list,
    "label": str,
    "stage": str,
    "model_extrapolated": bool,
}
SUMMARY_KEYS = ("spurplan_version", "lineup_sha256", "analysis")

TWO_TONES = """
[lineup]
name = "two-tone test (invented)"

[[carrier]]
freq = "100 MHz"
power = "-30 dBm"

[[carrier]]
freq = "101 MHz"
power = "-30 dBm"

[[stage]]
kind = "amplifier"
name = "amp"
gain = "10 dB"
oip3 = "+30 dBm"

[analysis]
max_order = 5
"""

ONE_PAD = """
[[carrier]]
freq = "455 MHz"
power = "-8 dBm"

[[stage]]
kind = "attenuator"
name = "pad"
loss = "3 dB"
"""

CHAIN = """
[[carrier]]
freq = "455 MHz"
power = "-8 dBm"

[[stage]]
kind = "attenuator"
name = "pad1"
loss = "3 dB"

[[stage]]
kind = "amplifier"
name = "amp"
gain = "10 dB"
oip3 = "+40 dBm"

[[stage]]
kind = "attenuator"
name = "pad2"
loss = "3 dB"
"""


@pytest.fixture(scope="module")
def example_json():
    return as_json(invoke("spectrum", "--format", "json").stdout)


# --- spectrum --format json -----------------------------------------------------------------------


def test_spectrum_json_top_level(example_json):
    assert set(example_json) == {"summary", "products"}
    assert isinstance(example_json["products"], list) and example_json["products"]


def test_spectrum_json_product_rows(example_json):
    n_carriers = len(example_json["summary"]["carrier_dbm"])
    for row in example_json["products"]:
        for key, kind in PRODUCT_KEYS.items():
            assert key in row, key
            assert isinstance(row[key], kind), (key, row[key])
        assert not isinstance(row["order"], bool)
        assert len(row["mix"]) == n_carriers
        assert all(isinstance(m, int) and not isinstance(m, bool) for m in row["mix"])
        # The order of a product is the sum of |m_k| (definition of the mixing order).
        assert row["order"] == sum(abs(m) for m in row["mix"])


def test_spectrum_json_summary(example_json):
    summary = example_json["summary"]
    for key in SUMMARY_KEYS:
        assert key in summary
    assert summary["spurplan_version"] == importlib.metadata.version("spurplan") == spurplan.__version__
    source = Path(summary["lineup_file"])
    assert source.name == "uhf_telemetry.toml"
    # SHA-256 of the file's bytes, recomputed with hashlib.
    assert summary["lineup_sha256"] == hashlib.sha256(source.read_bytes()).hexdigest()
    settings = tomllib.loads(source.read_text(encoding="utf-8"))["analysis"]
    assert summary["analysis"]["max_order"] == settings["max_order"]
    assert summary["analysis"]["combine"] == settings["combine"]


def test_spectrum_json_frequencies_and_dbc_follow_mix(example_json):
    # One carrier: every product sits at |m| f1, and dBc = level - carrier level
    # (arithmetic).
    rows = example_json["products"]
    (carrier,) = [r for r in rows if r["mix"] == [1]]
    f1 = carrier["freq_hz"]
    assert carrier["level_dbm"] == pytest.approx(example_json["summary"]["carrier_dbm"][0], abs=1e-9)
    for row in rows:
        assert row["freq_hz"] == pytest.approx(abs(row["mix"][0]) * f1, rel=1e-12)
        assert row["dbc"] == pytest.approx(row["level_dbm"] - carrier["level_dbm"], abs=1e-9)


def test_spectrum_json_two_tones_hash_and_mix(tmp_path):
    path = write(tmp_path, "two.toml", TWO_TONES)
    doc = as_json(invoke("spectrum", path, "--format", "json").stdout)
    assert doc["summary"]["lineup_sha256"] == hashlib.sha256(path.read_bytes()).hexdigest()
    assert doc["summary"]["analysis"] == {"max_order": 5, "combine": "worst"}
    by_mix = {tuple(r["mix"]): r for r in doc["products"]}
    assert all(len(m) == 2 for m in by_mix)
    # 2f1 - f2 = 200 - 101 = 99 MHz (arithmetic).
    assert by_mix[(2, -1)]["freq_hz"] == pytest.approx(99e6, rel=1e-12)
    assert by_mix[(2, -1)]["order"] == 3
    assert by_mix[(1, 0)]["order"] == 1


def test_im3_follows_the_intercept_relation(tmp_path):
    # Two tones of -30 dBm into G = 10 dB, OIP3 = +30 dBm (IIP3 = +20 dBm):
    # P_IM3,out = 3 P_in + G - 2 IIP3 = -90 + 10 - 40 = -120 dBm (intercept-point
    # relation, Pozar, Microwave Engineering, from memory).  The third harmonic of a
    # cubic is 1/3 of the two-tone IM3 amplitude (a3 A^3 / 4 against 3 a3 A^3 / 4;
    # Razavi, RF Microelectronics, ch. 2, from memory): 20 log10(3) = 9.54 dB lower.
    path = write(tmp_path, "two.toml", TWO_TONES)
    doc = as_json(invoke("spectrum", path, "--format", "json").stdout)
    by_mix = {tuple(r["mix"]): r for r in doc["products"]}
    im3 = 3 * -30.0 + 10.0 - 2 * 20.0
    assert by_mix[(2, -1)]["level_dbm"] == pytest.approx(im3, abs=0.01)
    assert by_mix[(-1, 2)]["level_dbm"] == pytest.approx(im3, abs=0.01)
    assert by_mix[(3, 0)]["level_dbm"] == pytest.approx(im3 - 20 * math.log10(3.0), abs=0.01)
    # dBc = 2 (P_in - IIP3) = -100 dBc (same relation).
    assert by_mix[(2, -1)]["dbc"] == pytest.approx(-100.0, abs=0.01)
    assert by_mix[(2, -1)]["stage"] == "amp"


# --- csv --------------------------------------------------------------------------------------------


def test_spectrum_csv_has_the_json_columns(tmp_path):
    path = write(tmp_path, "two.toml", TWO_TONES)
    rows = as_json(invoke("spectrum", path, "--format", "json").stdout)["products"]
    table = list(csv.reader(io.StringIO(invoke("spectrum", path, "--format", "csv").stdout)))
    header, body = table[0], table[1:]
    assert header == list(rows[0].keys())
    assert len(body) == len(rows)
    for cells, row in zip(body, rows, strict=True):
        record = dict(zip(header, cells, strict=True))
        assert float(record["freq_hz"]) == row["freq_hz"]
        assert float(record["level_dbm"]) == pytest.approx(row["level_dbm"], abs=1e-9)
        assert [int(v) for v in record["mix"].split()] == row["mix"]
        assert record["label"] == row["label"]


def test_budget_csv_has_the_json_columns(tmp_path):
    path = write(tmp_path, "chain.toml", CHAIN)
    stages = as_json(invoke("budget", path, "--format", "json").stdout)["stages"]
    table = list(csv.reader(io.StringIO(invoke("budget", path, "--format", "csv").stdout)))
    assert table[0] == list(stages[0].keys())
    assert [r[0] for r in table[1:]] == [s["stage"] for s in stages]


# --- budget -----------------------------------------------------------------------------------------


def test_budget_json_has_stages(tmp_path):
    path = write(tmp_path, "chain.toml", CHAIN)
    doc = as_json(invoke("budget", path, "--format", "json").stdout)
    assert set(doc) == {"summary", "stages"}
    assert [s["stage"] for s in doc["stages"]] == ["pad1", "amp", "pad2"]
    assert doc["summary"]["lineup_sha256"] == hashlib.sha256(path.read_bytes()).hexdigest()
    assert doc["summary"]["spurplan_version"] == spurplan.__version__
    # Carrier levels along the chain: -8 - 3 = -11, -11 + 10 = -1, -1 - 3 = -4 dBm
    # (arithmetic; the amplifier is driven 41 dB below its IIP3, so compression is
    # far below the 0.01 dB tolerance).
    amp = doc["stages"][1]
    assert doc["stages"][0]["carrier_in_dbm"] == pytest.approx(-8.0, abs=1e-9)
    assert doc["stages"][0]["carrier_out_dbm"] == pytest.approx(-11.0, abs=1e-9)
    assert amp["carrier_out_dbm"] == pytest.approx(-1.0, abs=0.01)
    assert doc["stages"][2]["carrier_out_dbm"] == pytest.approx(-4.0, abs=0.01)
    assert doc["stages"][2]["cum_gain_db"] == pytest.approx(4.0, abs=1e-12)


def _cascade_iip3_dbm(stages):
    """1/IIP3 = 1/IIP3_1 + G1/IIP3_2 + G1 G2/IIP3_3 + ... in mW (Pozar, Microwave
    Engineering, from memory); ``stages`` is a list of (gain_db, iip3_dbm or None)."""
    inverse = 0.0
    gain_before = 1.0
    for gain_db, iip3_dbm in stages:
        if iip3_dbm is not None:
            inverse += gain_before / 10 ** (iip3_dbm / 10)
        gain_before *= 10 ** (gain_db / 10)
    return 10 * math.log10(1 / inverse)


@pytest.mark.parametrize(
    ("pad", "stages"),
    [
        # Two amplifiers: G1 = 10 dB, IIP3_1 = 20 - 10 = +10 dBm; G2 = 15 dB,
        # IIP3_2 = 30 - 15 = +15 dBm.
        ("", [(10.0, 10.0), (15.0, 15.0)]),
        # The same with a 3 dB pad between them: the gain before the second is 7 dB.
        ("3 dB", [(10.0, 10.0), (-3.0, None), (15.0, 15.0)]),
    ],
    ids=["two-amplifiers", "with-pad"],
)
def test_budget_cascaded_iip3_matches_cascade_formula(pad, stages, tmp_path):
    text = '[[carrier]]\nfreq = "455 MHz"\npower = "-40 dBm"\n'
    text += '[[stage]]\nkind = "amplifier"\nname = "a1"\ngain = "10 dB"\noip3 = "+20 dBm"\n'
    if pad:
        text += f'[[stage]]\nkind = "attenuator"\nname = "pad"\nloss = "{pad}"\n'
    text += '[[stage]]\nkind = "amplifier"\nname = "a2"\ngain = "15 dB"\noip3 = "+30 dBm"\n'
    path = write(tmp_path, "cascade.toml", text)
    rows = as_json(invoke("budget", path, "--format", "json").stdout)["stages"]
    expected = _cascade_iip3_dbm(stages)
    # Worked by hand for the first case: 1 / (1/10 + 10/31.623) mW = 2.4025 mW = +3.81 dBm.
    if not pad:
        assert expected == pytest.approx(3.8066, abs=1e-3)
    assert rows[0]["cascade_iip3_dbm"] == pytest.approx(10.0, abs=1e-9)
    assert rows[-1]["cascade_iip3_dbm"] == pytest.approx(expected, abs=1e-9)
    total_gain = sum(g for g, _ in stages)
    # Output-referred: OIP3 = IIP3 + total gain (definition).
    assert rows[-1]["cascade_oip3_dbm"] == pytest.approx(expected + total_gain, abs=1e-9)


@pytest.mark.slow
def test_budget_of_a_linear_amplifier_is_clean(tmp_path):
    # An amplifier given only a gain is linear: it never compresses by 1 dB, so it has no
    # P1dB (None, as output_p1db_dbm documents for a linear model), and the carrier
    # leaves at -8 + 16 = +8 dBm (arithmetic).  The only other output is the warning that
    # the model is incomplete: no 2nd- or 3rd-order figure and no compression figure.
    text = '[[carrier]]\nfreq = "455 MHz"\npower = "-8 dBm"\n'
    text += '[[stage]]\nkind = "amplifier"\nname = "linear"\ngain = "16 dB"\n'
    path = write(tmp_path, "linear.toml", text)
    proc = run_cli(["budget", str(path), "--format", "json"], cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr
    (warning,) = proc.stderr.splitlines()
    assert warning.startswith("spurplan: warning: model incomplete")
    for missing in ("2nd-order figure", "3rd-order figure", "compression"):
        assert missing in warning
    (row,) = as_json(proc.stdout)["stages"]
    assert row["carrier_out_dbm"] == pytest.approx(8.0, abs=1e-9)
    assert row["p1db_dbm"] is None
    assert row["headroom_db"] is None


# --- carrier levels, --stage ------------------------------------------------------------------------


def test_one_pad_takes_3_db_off_the_carrier(tmp_path):
    # -8 dBm through a 3 dB pad is -11 dBm (arithmetic).
    path = write(tmp_path, "pad.toml", ONE_PAD)
    doc = as_json(invoke("spectrum", path, "--format", "json").stdout)
    assert doc["summary"]["carrier_dbm"] == [pytest.approx(-11.0, abs=1e-9)]
    carrier = [r for r in doc["products"] if r["mix"] == [1]]
    assert len(carrier) == 1
    assert carrier[0]["level_dbm"] == pytest.approx(-11.0, abs=1e-9)
    assert carrier[0]["dbc"] == pytest.approx(0.0, abs=1e-12)
    budget = as_json(invoke("budget", path, "--format", "json").stdout)["stages"]
    assert budget[0]["carrier_out_dbm"] == pytest.approx(-11.0, abs=1e-9)
    assert budget[0]["gain_db"] == pytest.approx(-3.0, abs=1e-12)


def test_stage_option_reports_an_intermediate_node(tmp_path):
    path = write(tmp_path, "chain.toml", CHAIN)
    at_pad1 = as_json(invoke("spectrum", path, "--stage", "pad1", "--format", "json").stdout)
    at_amp = as_json(invoke("spectrum", path, "--stage", "amp", "--format", "json").stdout)
    at_out = as_json(invoke("spectrum", path, "--format", "json").stdout)
    assert at_pad1["summary"]["node"] == "pad1"
    assert at_amp["summary"]["node"] == "amp"
    # -8 - 3 = -11 dBm, -11 + 10 = -1 dBm, -1 - 3 = -4 dBm (arithmetic; compression at
    # 41 dB below IIP3 is far below 0.01 dB).
    assert at_pad1["summary"]["carrier_dbm"][0] == pytest.approx(-11.0, abs=1e-9)
    assert at_amp["summary"]["carrier_dbm"][0] == pytest.approx(-1.0, abs=0.01)
    assert at_out["summary"]["carrier_dbm"][0] == pytest.approx(-4.0, abs=0.01)
    # Before the amplifier there is nothing but the carrier.
    assert at_pad1["summary"]["n_products"] == 0
    assert at_amp["summary"]["n_products"] > 0
    # A pad after the amplifier lowers every product by its loss (3 dB, arithmetic).
    amp_levels = {tuple(r["mix"]): r["level_dbm"] for r in at_amp["products"]}
    for row in at_out["products"]:
        assert row["level_dbm"] == pytest.approx(amp_levels[tuple(row["mix"])] - 3.0, abs=1e-6)


def test_stage_option_in_table_format(tmp_path):
    path = write(tmp_path, "chain.toml", CHAIN)
    out = invoke("spectrum", path, "--stage", "amp").stdout
    assert out.splitlines()[0].endswith("products at amp (combine = worst)")


def test_unknown_stage_is_one_line_error(tmp_path):
    path = write(tmp_path, "chain.toml", CHAIN)
    result = invoke("spectrum", path, "--stage", "pa", expect=2)
    assert result.stdout == ""
    lines = result.stderr.splitlines()
    assert len(lines) == 1
    assert "'pa'" in lines[0]
    for name in ("pad1", "amp", "pad2"):
        assert name in lines[0]


def test_combine_option_overrides_the_file(tmp_path):
    path = write(tmp_path, "two.toml", TWO_TONES)
    doc = as_json(invoke("spectrum", path, "--combine", "power", "--format", "json").stdout)
    assert doc["summary"]["combine"] == "power"
    result = invoke("spectrum", path, "--combine", "max", expect=2)
    assert len(result.stderr.splitlines()) == 1
    assert "'max'" in result.stderr


def test_bad_format_is_one_line_error(tmp_path):
    path = write(tmp_path, "pad.toml", ONE_PAD)
    result = invoke("spectrum", path, "--format", "xml", expect=2)
    assert result.stdout == ""
    assert len(result.stderr.splitlines()) == 1
    assert "'xml'" in result.stderr


# --- bundled example, version, help ----------------------------------------------------------------


@pytest.mark.parametrize(
    "args",
    [["spectrum"], ["spectrum", "--format", "json"], ["budget"], ["budget", "--format", "csv"]],
    ids=lambda a: " ".join(a),
)
@pytest.mark.slow
def test_bundled_example_from_another_directory(args, tmp_path):
    proc = run_cli(args, cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr
    assert "Traceback" not in proc.stderr
    assert proc.stdout.strip()
    assert list(tmp_path.iterdir()) == []  # nothing written into the working directory
    if "json" in args:
        doc = as_json(proc.stdout)
        assert Path(doc["summary"]["lineup_file"]).is_file()


def test_version():
    result = invoke("--version")
    assert result.stdout.strip() == f"spurplan, version {importlib.metadata.version('spurplan')}"


@pytest.mark.parametrize("args", [["--help"], ["spectrum", "--help"], ["budget", "--help"]])
def test_help_says_compliance_is_decided_by_measurement(args):
    text = " ".join(invoke(*args).stdout.split())
    assert "Compliance is decided by measurement" in text
    assert "planning estimates" in text
