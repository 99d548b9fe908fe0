"""``spurplan check`` on the command line: the JSON contract, exit status, table and CSV
output, the plot file, and one margin worked by hand.

Lineups written here are invented for these tests.  Expected numbers are worked by
hand (each names its source); the rest are consistency checks between outputs (JSON
against CSV, against the lineup file, against the shipped rule files).
"""

from __future__ import annotations

import csv
import hashlib
import io
import json
import struct
import tomllib
from pathlib import Path

import pytest
from helpers import as_json, invoke, write

import spurplan
from spurplan.io.mask_files import shipped_path
from spurplan.io.resources import example_path

# Keys the brief fixes for a product row (and so for summary["worst"]).
ROW_KEYS = (
    "freq_hz",
    "level_dbm",
    "level_in_rbw_dbm",
    "limit_dbm",
    "margin_db",
    "rule",
    "band",
    "stage",
    "order",
    "mix",
    "label",
    "pass",
    "beyond_data",
    "model_extrapolated",
)
SUMMARY_KEYS = (
    "pass",
    "worst_margin_db",
    "worst",
    "spurplan_version",
    "lineup_sha256",
    "analysis",
    "rule_sets",
)

# Hand calculation. Carrier 100 MHz at +10 dBm into a 20 dB amplifier: +30 dBm out
# (arithmetic). Datasheet h2 = -40 dBc at +30 dBm out gives OHIP2 = Pout + |dBc|/(n-1)
# = 30 + 40 = +70 dBm (common practice, no source), so 2f1 at 200 MHz is
# 2 * 30 - 70 = -10 dBm at the output (second-order products rise 2 dB/dB, common
# practice). Against -36 dBm in 100 kHz (CW: the whole power is in the RBW) the
# margin is -36 - (-10) = -26 dB: it fails (arithmetic).
HAND = """
[lineup]
name = "hand-worked 2nd harmonic (invented)"

[[carrier]]
freq = "100 MHz"
power = "+10 dBm"

[[stage]]
kind = "amplifier"
name = "amp"
gain = "20 dB"
h2 = "-40 dBc @ +30 dBm"

[[mask.rule]]
name = "inline -36 dBm"
start = "150 MHz"
stop = "1 GHz"
limit = "-36 dBm"
rbw = "100 kHz"

[analysis]
max_order = 3
combine = "worst"
"""

# A failing lineup with a passing row too: as HAND, plus h3 = -80 dBc at +30 dBm, so
# OHIP3 = 30 + 80/2 = +70 dBm and 3f1 (300 MHz) is 3 * 30 - 2 * 70 = -50 dBm: +14 dB
# of margin against -36 dBm, a pass; 2f1 fails as above (common practice, arithmetic).
MIXED = HAND.replace(
    'h2 = "-40 dBc @ +30 dBm"\n', 'h2 = "-40 dBc @ +30 dBm"\nh3 = "-80 dBc @ +30 dBm"\n'
).replace("hand-worked 2nd harmonic", "one fail, one pass")


@pytest.fixture(scope="module")
def example_json():
    # The bundled example (no LINEUP argument) meets its mask: exit status 0.
    return as_json(invoke("check", "--format", "json", expect=0).stdout)


@pytest.fixture
def mixed(tmp_path):
    return write(tmp_path, "mixed.toml", MIXED)


@pytest.fixture
def mixed_json(mixed):
    return as_json(invoke("check", mixed, "--format", "json", expect=1).stdout)


def _checked(rows):
    return [r for r in rows if r["margin_db"] is not None]


# --- the JSON contract ----------------------------------------------------------------------------


def _assert_row(row):
    for key in ROW_KEYS:
        assert key in row, key
    assert isinstance(row["freq_hz"], float) and row["freq_hz"] > 0
    assert isinstance(row["level_dbm"], float)
    for key in ("level_in_rbw_dbm", "limit_dbm", "margin_db"):
        assert row[key] is None or isinstance(row[key], float), key
    assert row["rule"] is None or isinstance(row["rule"], str)
    assert row["band"] is None or isinstance(row["band"], str)
    assert isinstance(row["stage"], str) and row["stage"]
    assert isinstance(row["order"], int) and row["order"] >= 1
    assert isinstance(row["mix"], list) and all(isinstance(m, int) for m in row["mix"])
    assert isinstance(row["label"], str) and row["label"]
    assert row["pass"] in (True, False, None)
    assert isinstance(row["beyond_data"], bool)
    assert isinstance(row["model_extrapolated"], bool)
    # Order of a product = sum |m_k| of its mixing vector (definition).
    assert row["order"] == sum(abs(m) for m in row["mix"])
    if row["margin_db"] is None:
        assert row["pass"] is None and row["limit_dbm"] is None
    else:
        # margin = limit - level in the rule's bandwidth (definition); pass iff >= 0.
        assert row["margin_db"] == pytest.approx(row["limit_dbm"] - row["level_in_rbw_dbm"], abs=1e-9)
        assert row["pass"] is (row["margin_db"] >= 0)
        assert isinstance(row["rule"], str) and row["rule"]
        # Reading in a narrower bandwidth never raises a level (10 log10(B/RBW) >= 0).
        assert row["level_in_rbw_dbm"] <= row["level_dbm"] + 1e-9


@pytest.mark.parametrize("which", ["example", "mixed"])
def test_json_shape(which, example_json, mixed_json):
    doc = example_json if which == "example" else mixed_json
    assert set(doc) == {"summary", "products"}
    summary, rows = doc["summary"], doc["products"]
    for key in SUMMARY_KEYS:
        assert key in summary, key
    assert isinstance(summary["pass"], bool)
    assert isinstance(rows, list) and rows
    for row in rows:
        _assert_row(row)
    checked = _checked(rows)
    assert checked
    worst = min(checked, key=lambda r: r["margin_db"])
    assert summary["worst_margin_db"] == pytest.approx(worst["margin_db"], abs=1e-12)
    assert isinstance(summary["worst"], dict)
    for key in ROW_KEYS:
        assert summary["worst"][key] == worst[key], key
    assert summary["pass"] is all(r["pass"] for r in checked)
    assert summary["spurplan_version"] == spurplan.__version__
    assert isinstance(summary["analysis"], dict)


def test_json_frequencies_follow_the_mixing_vectors(mixed_json, example_json):
    # A product of carriers f_k with mixing vector m sits at |sum m_k f_k| (arithmetic).
    for doc, carriers in ((mixed_json, [100e6]), (example_json, [455.0125e6])):
        for row in doc["products"]:
            freq = abs(sum(m * f for m, f in zip(row["mix"], carriers, strict=True)))
            assert row["freq_hz"] == pytest.approx(freq, rel=1e-12)


def test_json_example_provenance_and_rule_sets(example_json):
    summary = example_json["summary"]
    path = example_path()
    assert summary["lineup_sha256"] == hashlib.sha256(path.read_bytes()).hexdigest()
    doc = tomllib.loads(path.read_text(encoding="utf-8"))
    assert summary["analysis"]["max_order"] == doc["analysis"]["max_order"]
    assert summary["analysis"]["combine"] == doc["analysis"]["combine"]
    used = [u if isinstance(u, str) else u["name"] for u in doc["mask"]["use"]]
    assert [s["name"] for s in summary["rule_sets"]] == used
    for entry in summary["rule_sets"]:
        with shipped_path(entry["name"]).open("rb") as handle:
            source = tomllib.load(handle)["ruleset"]["source"]
        assert entry["source"] == source and source.strip()
    assert summary["pass"] is True


def test_json_inline_rules_and_hash(mixed, mixed_json):
    summary = mixed_json["summary"]
    assert summary["lineup_sha256"] == hashlib.sha256(mixed.read_bytes()).hexdigest()
    assert summary["analysis"] == {"max_order": 3, "combine": "worst"}  # from MIXED's [analysis]
    assert len(summary["rule_sets"]) == 1
    (inline,) = summary["rule_sets"]
    # The lineup's own rules come from the lineup file: the source names it.
    assert str(mixed) in inline["source"]
    assert summary["pass"] is False


# --- exit status ----------------------------------------------------------------------------------


@pytest.mark.parametrize("fmt", ["table", "csv", "json"])
def test_exit_status_0_for_the_bundled_example(fmt):
    invoke("check", "--format", fmt, expect=0)


@pytest.mark.parametrize("fmt", ["table", "csv", "json"])
def test_exit_status_1_for_a_failing_lineup(fmt, mixed):
    invoke("check", mixed, "--format", fmt, expect=1)


# --- table and CSV --------------------------------------------------------------------------------


def _row_line(stdout: str, label: str) -> str:
    hits = [ln for ln in stdout.splitlines() if f" {label} " in f" {ln} " and "VERDICT" not in ln]
    assert len(hits) == 1, stdout
    return hits[0]


def test_table_marks_failing_rows_with_text(mixed):
    out = invoke("check", mixed, expect=1).stdout
    assert "\x1b[" not in out  # words, not colour codes
    # 2f1 fails (-26 dB) and 3f1 passes (+14 dB): see MIXED.
    assert "FAIL" in _row_line(out, "2f1").split()
    assert "FAIL" not in _row_line(out, "3f1")
    assert "FAIL" in next(ln for ln in out.splitlines() if ln.startswith("VERDICT"))


def test_table_of_a_passing_lineup_has_no_fail():
    out = invoke("check", expect=0).stdout
    assert "FAIL" not in out
    assert "\x1b[" not in out


@pytest.mark.parametrize("which", ["example", "mixed"])
def test_csv_has_the_json_columns_and_rows(which, mixed):
    args = ["check", "--format"] if which == "example" else ["check", mixed, "--format"]
    expect = 0 if which == "example" else 1
    doc = as_json(invoke(*args, "json", expect=expect).stdout)
    text = invoke(*args, "csv", expect=expect).stdout
    reader = csv.DictReader(io.StringIO(text))
    rows = list(reader)
    assert reader.fieldnames == list(doc["products"][0])
    for key in ROW_KEYS:
        assert key in reader.fieldnames
    assert len(rows) == len(doc["products"])
    for got, want in zip(rows, doc["products"], strict=True):
        assert float(got["freq_hz"]) == pytest.approx(want["freq_hz"], rel=1e-12)
        assert float(got["level_dbm"]) == pytest.approx(want["level_dbm"], abs=1e-9)
        assert got["label"] == want["label"]
        assert got["stage"] == want["stage"]
        if want["margin_db"] is None:
            assert got["margin_db"] == ""
        else:
            assert float(got["margin_db"]) == pytest.approx(want["margin_db"], abs=1e-9)


# --- the plot -------------------------------------------------------------------------------------


def _png_size(path: Path) -> tuple[int, int]:
    # PNG: 8-byte signature, then the IHDR chunk (length, "IHDR", width, height as
    # big-endian 32-bit integers at bytes 16-24) (PNG specification, section 11.2.2).
    head = path.read_bytes()[:24]
    assert head[:8] == b"\x89PNG\r\n\x1a\n"
    assert head[12:16] == b"IHDR"
    return struct.unpack(">II", head[16:24])


@pytest.mark.parametrize(("size", "want"), [("800x500", (800, 500)), ("640x480", (640, 480))])
@pytest.mark.slow
def test_plot_png_has_the_asked_size(size, want, mixed, tmp_path):
    out = tmp_path / "out.png"
    invoke("check", mixed, "--plot", out, "--plot-size", size, expect=1)
    assert _png_size(out) == want


def test_plot_of_the_bundled_example(tmp_path):
    out = tmp_path / "example.png"
    invoke("check", "--plot", out, "--plot-size", "800x500", expect=0)
    assert _png_size(out) == (800, 500)


BAD_SIZES = ["800x", "abc", "100x100", "800x500x3", "9000x500", "0x0"]


@pytest.mark.parametrize("size", BAD_SIZES)
def test_bad_plot_size_is_one_line(size, mixed, tmp_path):
    out = tmp_path / "out.png"
    result = invoke("check", mixed, "--plot", out, "--plot-size", size, expect=2)
    assert result.stdout == ""
    lines = result.stderr.splitlines()
    assert len(lines) == 1, result.stderr
    assert lines[0].startswith("spurplan: error:")
    assert repr(size) in lines[0] or size in lines[0]
    assert not out.exists()


def test_bad_plot_size_names_the_option(mixed, tmp_path):
    # The line should say which option is wrong (the field), not only its value.
    result = invoke("check", mixed, "--plot", tmp_path / "o.png", "--plot-size", "800x", expect=2)
    assert "--plot-size" in result.stderr.splitlines()[0], result.stderr


# --- hand-worked margin ---------------------------------------------------------------------------


@pytest.mark.parametrize("fmt", ["json", "table"])
def test_hand_worked_second_harmonic_margin(fmt, tmp_path):
    path = write(tmp_path, "hand.toml", HAND)
    result = invoke("check", path, "--format", fmt, expect=1)  # fails: exit status 1
    if fmt == "table":
        line = _row_line(result.stdout, "2f1")
        assert "FAIL" in line.split()
        assert "-26.00" in line.split()  # margin, 2 decimals (see HAND)
        return
    doc = as_json(result.stdout)
    rows = [r for r in doc["products"] if r["label"] == "2f1"]
    assert len(rows) == 1
    h2 = rows[0]
    assert h2["freq_hz"] == pytest.approx(200e6)  # 2 x 100 MHz (arithmetic)
    assert h2["level_dbm"] == pytest.approx(-10.0, abs=0.01)  # see HAND
    assert h2["level_in_rbw_dbm"] == pytest.approx(-10.0, abs=0.01)  # CW: all of it in 100 kHz
    assert h2["limit_dbm"] == pytest.approx(-36.0, abs=1e-9)  # the inline rule
    assert h2["margin_db"] == pytest.approx(-26.0, abs=0.01)  # -36 - (-10), arithmetic
    assert h2["pass"] is False
    assert "inline -36 dBm" in h2["rule"]
    assert h2["stage"] == "amp"
    assert doc["summary"]["pass"] is False
    assert doc["summary"]["worst"]["label"] == "2f1"
    assert doc["summary"]["worst_margin_db"] == pytest.approx(-26.0, abs=0.01)


def test_high_power_check_carries_the_rf_safety_notice():
    from helpers import invoke

    from spurplan.io.resources import example_path
    from spurplan.notices import POWER_NOTICE

    # 25 W at the antenna port (+44 dBm): the terminal and JSON outputs carry the RF-exposure
    # and hot-parts caution with the power in watts (10^((P - 30)/10) W; arithmetic).
    r = invoke("check", example_path("vhf_25w_transmitter.toml"), expect=1)
    assert POWER_NOTICE in r.stdout and "dBm (25" in r.stdout
    doc = json.loads(
        invoke("check", example_path("vhf_25w_transmitter.toml"), "--format", "json", expect=1).stdout
    )
    assert POWER_NOTICE in doc["summary"]["power_notice"]
    # A low-power lineup does not shout it.
    low = json.loads(
        invoke("check", example_path("uhf_telemetry.toml"), "--format", "json", expect=None).stdout
    )
    assert "power_notice" not in low["summary"]


def test_check_plot_spans_the_products_not_the_noise_points():
    from spurplan.analyses.check import check
    from spurplan.io.lineup_file import load
    from spurplan.io.resources import example_path
    from spurplan.output.plots import check_figure

    # The bundled example's noise rows are read in protected bands up to 252 GHz (RR 5.340);
    # its listed products end a few GHz up.  The axis ends 8 % beyond the highest product
    # (or carrier), in GHz, not at the noise points.
    outcome = check(load(example_path()))
    rows = outcome.rows
    noise = [f for f, lab in zip(rows["freq_hz"], rows["label"], strict=True) if lab == "noise"]
    products = [f for f, lab in zip(rows["freq_hz"], rows["label"], strict=True) if lab != "noise"]
    assert max(noise) > 200e9 and max(products) < 10e9
    fig = check_figure(outcome)
    assert fig.axes[0].get_xlim()[1] == pytest.approx(max(products) * 1.08 / 1e9, rel=0.06)
