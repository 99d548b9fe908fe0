"""Adjacent-channel power ratio (ACPR) rules in the check: channel power, margins, verdict.

The lineups here are invented for these tests.  Expected numbers are worked by hand
beside each check, from:

* the two-tone relation for third-order intermodulation at low drive, IM3 out =
  3 P_out - 2 OIP3 per tone (Razavi, RF Microelectronics 2e, ch. 2; from memory);
* the output noise of one amplifier, k T0 F G: -173.975 dBm/Hz (k = 1.380649e-23 J/K
  exact, T0 = 290 K, from memory) + NF + G, times the channel bandwidth;
* powers adding in milliwatts (incoherent products and noise; arithmetic);
* ACPR = channel power - carrier power, margin = limit - value (the rule's definition,
  common practice, no source).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from helpers import as_json, assert_one_error_line, invoke, write

from spurplan.analyses.check import channel_power_dbm, check
from spurplan.io.lineup_file import from_dict

KT0_DBM_HZ = 10 * math.log10(1.380649e-23 * 290.0 / 1e-3)  # -173.975 dBm/Hz (arithmetic)


def _db(mw: float) -> float:
    return 10 * math.log10(mw)


def _sum_dbm(*levels_dbm: float) -> float:
    """Powers added in mW (arithmetic)."""
    return _db(sum(10 ** (x / 10) for x in levels_dbm))


# One amplifier of 20 dB gain, OIP3 +30 dBm, NF 5 dB, P1dB +20 dBm (every figure stated,
# so the model is complete); carriers of -30 dBm in, -10 dBm out, 30 dB below P1dB.
PA = {
    "kind": "amplifier",
    "name": "pa",
    "gain": "20 dB",
    "oip3": "+30 dBm",
    "oip2": "+40 dBm",
    "p1db": "+20 dBm",
    "noise_figure": "5 dB",
}
P_OUT_DBM = -30.0 + 20.0
OIP3_DBM = 30.0
NF_DB, GAIN_DB = 5.0, 20.0
# Two CW carriers 25 kHz apart: 2f1 - f2 lies 25 kHz below f1, in f1's lower adjacent
# channel; f2 itself lies in f1's upper one (occupied).
F1_HZ, F2_HZ = 100e6, 100.025e6
CHANNEL_HZ = 16e3
IM3_DBM = 3 * P_OUT_DBM - 2 * OIP3_DBM  # -90 dBm (two-tone relation)
NOISE_IN_CHANNEL_DBM = KT0_DBM_HZ + NF_DB + GAIN_DB + 10 * math.log10(CHANNEL_HZ)  # -106.934 dBm
# f1's lower channel, 99.967 to 99.983 MHz, holds 2f1 - f2 (99.975 MHz) and no other
# product (3f1 - 2f2 is at 99.950 MHz): -90 dBm + -106.934 dBm = -89.913 dBm.
CHANNEL_DBM = _sum_dbm(IM3_DBM, NOISE_IN_CHANNEL_DBM)
ACPR_DBC = CHANNEL_DBM - P_OUT_DBM  # -79.913 dBc
# IM3 of the fitted model against the two-tone relation 30 dB below P1dB (as
# tests/test_closed_forms.py holds it).
MODEL_DB = 0.05


def _doc(mask, carriers=((F1_HZ, None), (F2_HZ, None)), stage=PA, max_order=5):
    return {
        "lineup": {"name": "ACPR test (invented)"},
        "carrier": [
            {"freq": f"{f / 1e6:.6f} MHz", "power": "-30 dBm", **({"bandwidth": b} if b else {})}
            for f, b in carriers
        ],
        "stage": [dict(stage)],
        "mask": mask,
        "analysis": {"max_order": max_order},
    }


def _check(mask, **kw):
    return check(from_dict(_doc(mask, **kw), name="acpr-test.toml"))


def _acpr_rule(**keys):
    return {"name": "acpr", "channel_bandwidth": "16 kHz", "offsets": ["25 kHz", "50 kHz"], **keys}


def _entry(outcome, carrier, offset_hz):
    hits = [e for e in outcome.acpr if e["carrier"] == carrier and e["offset_hz"] == pytest.approx(offset_hz)]
    assert len(hits) == 1, outcome.acpr
    return hits[0]


def _toml(doc) -> str:
    """The lineup dict as TOML text (strings, numbers, tables and arrays of tables only)."""

    def value(v):
        if isinstance(v, str):
            return '"' + v.replace('"', '\\"') + '"'
        if isinstance(v, list):
            return "[" + ", ".join(value(x) for x in v) + "]"
        return repr(v)

    lines = []
    for key in ("lineup", "analysis"):
        lines.append(f"[{key}]")
        lines += [f"{k} = {value(v)}" for k, v in doc[key].items()]
    for key in ("carrier", "stage"):
        for table in doc[key]:
            lines.append(f"[[{key}]]")
            lines += [f"{k} = {value(v)}" for k, v in table.items()]
    for key, tables in doc["mask"].items():
        for table in tables:
            lines.append(f"[[mask.{key}]]")
            lines += [f"{k} = {value(v)}" for k, v in table.items()]
    return "\n".join(lines) + "\n"


# --- the channel-power integration --------------------------------------------------------------


def test_cw_products_count_whole_inside_a_channel_and_spread_ones_by_their_fraction():
    # Channel 5 to 21 kHz.  A CW product at 10 kHz (-50 dBm) counts whole; one at 30 kHz
    # not at all; one at 0 Hz spread over 30 kHz (-15 to +15 kHz, flat) has 10 of its
    # 30 kHz inside: a third of -40 dBm, -44.771 dBm (arithmetic).  Total
    # -50 (+) -44.771 = -43.651 dBm.
    got = channel_power_dbm([5e3], [21e3], [10e3, 30e3, 0.0], [-50.0, -20.0, -40.0], [0.0, 0.0, 30e3])
    want = _sum_dbm(-50.0, -40.0 + _db(1 / 3))
    assert got.products_dbm[0] == pytest.approx(want, abs=1e-9)
    assert got.total_dbm[0] == pytest.approx(want, abs=1e-9)
    assert np.isnan(got.noise_dbm[0])  # no noise asked for
    assert got.largest[0] == 2  # the spread product adds most (-44.8 dBm against -50)


def test_noise_integration_matches_the_closed_form_of_a_sloping_density():
    # A density falling linearly in dB across a channel, d(x) = a + s x dBm/Hz for x from
    # 0 to B (a filter skirt), integrates to 10^(a/10) (10^(s B/10) - 1) / (s ln10 / 10)
    # mW (calculus).  20 dB across 16 kHz: the trapezoid rule on the module's points must
    # hold it within 0.001 dB.
    lo, bw, a, slope = 1e6, 16e3, -150.0, -20.0 / 16e3
    k = slope * math.log(10) / 10

    def density(f):
        return a + slope * (np.asarray(f) - lo)

    want = _db(10 ** (a / 10) * (math.exp(k * bw) - 1) / k)
    got = channel_power_dbm([lo], [lo + bw], [], [], [], density)
    assert got.noise_dbm[0] == pytest.approx(want, abs=1e-3)
    assert got.total_dbm[0] == pytest.approx(want, abs=1e-3)
    assert got.products_dbm[0] == -math.inf and got.largest[0] == -1
    # Only the channels asked for integrate noise (a channel beyond a stage's data holds
    # its products alone).
    two = channel_power_dbm([lo, lo], [lo + bw, lo + bw], [], [], [], density, noise_in=[False, True])
    assert np.isnan(two.noise_dbm[0]) and two.total_dbm[0] == -math.inf
    assert two.noise_dbm[1] == pytest.approx(want, abs=1e-3)


@pytest.mark.parametrize("channel", ["16 kHz", "100 kHz", "3.84 MHz"])
def test_a_single_cw_carrier_s_adjacent_channel_holds_k_t0_f_g_times_its_bandwidth(channel):
    # One CW carrier through one amplifier makes only harmonics (n f1), none near f1, so
    # the adjacent channel holds the output noise alone: -173.975 + NF + G + 10 log10(BW)
    # dBm (one stage, Friis), and ACPR is that less the carrier's -10 dBm out.
    bw = {"16 kHz": 16e3, "100 kHz": 100e3, "3.84 MHz": 3.84e6}[channel]
    offset = f"{2 * bw / 1e3:g} kHz"
    outcome = _check(
        {"adjacent_channel": [_acpr_rule(channel_bandwidth=channel, offsets=[offset], limit="-60 dBc")]},
        carriers=((F1_HZ, None),),
    )
    want = KT0_DBM_HZ + NF_DB + GAIN_DB + 10 * math.log10(bw)
    for side in (-1, 1):
        e = _entry(outcome, "f1", side * 2 * bw)
        assert e["products_dbm"] == -math.inf
        assert e["noise_dbm"] == pytest.approx(want, abs=1e-6)
        assert e["channel_dbm"] == pytest.approx(want, abs=1e-6)
        assert e["stage"] == "the chain (noise)"
        # The carrier's modelled output 30 dB below P1dB is -10 dBm within 0.01 dB.
        assert e["acpr_dbc"] == pytest.approx(want - P_OUT_DBM, abs=0.01)
        assert e["margin_db"] == pytest.approx(-60.0 - e["acpr_dbc"], abs=1e-9)
    assert outcome.status == "PASS"


# --- two carriers: IM3 in the adjacent channel ----------------------------------------------------


def test_im3_in_the_adjacent_channel_passes_a_75_dbc_limit_by_hand():
    # ACPR of f1's lower channel: -79.913 dBc (module docstring); under -75 dBc the margin
    # is -75 - (-79.913) = +4.913 dB.
    outcome = _check({"adjacent_channel": [_acpr_rule(limit="-75 dBc")]})
    e = _entry(outcome, "f1", -25e3)
    assert (e["channel_start_hz"], e["channel_stop_hz"]) == (pytest.approx(99.967e6), pytest.approx(99.983e6))
    assert e["products_dbm"] == pytest.approx(IM3_DBM, abs=MODEL_DB)
    assert e["noise_dbm"] == pytest.approx(NOISE_IN_CHANNEL_DBM, abs=1e-6)
    assert e["channel_dbm"] == pytest.approx(CHANNEL_DBM, abs=MODEL_DB)
    assert e["acpr_dbc"] == pytest.approx(ACPR_DBC, abs=MODEL_DB)
    assert e["margin_db"] == pytest.approx(-75.0 - ACPR_DBC, abs=MODEL_DB)
    assert e["limit_dbm"] == pytest.approx(e["carrier_dbm"] - 75.0, abs=1e-9)
    assert e["pass"] is True and e["stage"] == "pa"
    # The mirror image: 2f2 - f1 in f2's upper channel, the same by symmetry.
    assert _entry(outcome, "f2", 25e3)["acpr_dbc"] == pytest.approx(ACPR_DBC, abs=MODEL_DB)
    assert outcome.status == "PASS"
    row = outcome.rows["label"].index("ACPR f1 -25 kHz")
    assert outcome.rows["domain"][row] == "adjacent channel"
    assert outcome.rows["margin_db"][row] == pytest.approx(e["margin_db"], abs=1e-12)


def test_im3_in_the_adjacent_channel_fails_an_85_dbc_limit_and_decides_the_verdict():
    # The same channel under -85 dBc: margin -85 - (-79.913) = -5.087 dB, a FAIL.
    outcome = _check({"adjacent_channel": [_acpr_rule(limit="-85 dBc")]})
    e = _entry(outcome, "f1", -25e3)
    assert e["margin_db"] == pytest.approx(-85.0 - ACPR_DBC, abs=MODEL_DB) and e["pass"] is False
    assert outcome.status == "FAIL"
    assert outcome.rows["label"][outcome.worst].startswith("ACPR ")
    assert outcome.worst_margin_db == pytest.approx(-85.0 - ACPR_DBC, abs=MODEL_DB)


def test_an_absolute_limit_is_judged_beside_the_dbc_limit():
    # -60 dBc alone passes by some 20 dB; with absolute_limit = "-95 dBm" the channel's
    # -89.913 dBm is 5.087 dB over it: the more stringent decides (both must hold).
    lenient = _entry(_check({"adjacent_channel": [_acpr_rule(limit="-60 dBc")]}), "f1", -25e3)
    assert lenient["margin_db"] == pytest.approx(-60.0 - ACPR_DBC, abs=MODEL_DB)
    outcome = _check({"adjacent_channel": [_acpr_rule(limit="-60 dBc", absolute_limit="-95 dBm")]})
    e = _entry(outcome, "f1", -25e3)
    assert e["limit_dbm"] == -95.0
    assert e["margin_db"] == pytest.approx(-95.0 - CHANNEL_DBM, abs=MODEL_DB)
    assert outcome.status == "FAIL"
    # An absolute limit alone, without a dBc one, is a rule too.
    alone = _check({"adjacent_channel": [_acpr_rule(absolute_limit="-80 dBm")]})
    assert _entry(alone, "f1", -25e3)["margin_db"] == pytest.approx(-80.0 - CHANNEL_DBM, abs=MODEL_DB)


def test_a_channel_in_another_carrier_s_own_channel_is_occupied_and_skipped_with_a_note():
    # f1's upper channel at +25 kHz is centred on f2, and f2's lower one on f1: both are
    # occupied (a wanted channel, not an adjacent one), not judged, and a note says so.
    # f2's lower alternate channel (-50 kHz) lies 25 kHz below f1, clear of f1's own
    # 16 kHz channel (99.992 to 100.008 MHz): judged, and it holds the same 2f1 - f2.
    outcome = _check({"adjacent_channel": [_acpr_rule(limit="-75 dBc")]})
    judged = {(e["carrier"], e["offset_hz"]) for e in outcome.acpr}
    assert ("f1", 25e3) not in judged and ("f2", -25e3) not in judged
    assert judged == {("f1", -25e3), ("f1", -50e3), ("f1", 50e3), ("f2", 25e3), ("f2", 50e3), ("f2", -50e3)}
    (note,) = [n for n in outcome.notes if "occupied" in n]
    assert "+25 kHz of f1 (in f2's channel)" in note and "-25 kHz of f2 (in f1's channel)" in note
    assert _entry(outcome, "f2", -50e3)["acpr_dbc"] == pytest.approx(ACPR_DBC, abs=MODEL_DB)
    assert outcome.status == "PASS"  # occupied channels are no gap in the model


def test_a_product_spread_over_the_channel_edge_counts_by_its_fraction():
    # Carriers of 20 kHz bandwidth 100 kHz apart: 2f1 - f2 (99.9 MHz) spreads over
    # 2 x 20 + 20 = 60 kHz (the check's sum |m_k| B_k), 99.87 to 99.93 MHz.  A 30 kHz
    # channel 100 kHz below f1 (99.885 to 99.915 MHz) holds half of it: -90 - 3.010 dBm,
    # plus noise in 30 kHz (arithmetic).  The carriers are modulated, so the check also
    # says their own spectral regrowth is not modelled: INCOMPLETE, not PASS.
    rule = _acpr_rule(channel_bandwidth="30 kHz", offsets=["100 kHz"], limit="-60 dBc")
    outcome = _check({"adjacent_channel": [rule]}, carriers=((100e6, "20 kHz"), (100.1e6, "20 kHz")))
    e = _entry(outcome, "f1", -100e3)
    noise = KT0_DBM_HZ + NF_DB + GAIN_DB + 10 * math.log10(30e3)
    assert e["products_dbm"] == pytest.approx(IM3_DBM + _db(0.5), abs=MODEL_DB)
    assert e["channel_dbm"] == pytest.approx(_sum_dbm(IM3_DBM + _db(0.5), noise), abs=MODEL_DB)
    assert e["carrier_bandwidth_hz"] == 20e3  # the carrier's stated bandwidth
    assert outcome.passed and outcome.status == "INCOMPLETE"
    assert "ACPR not judged: the spectral regrowth of f1, f2" in outcome.verdict


def test_without_a_noise_figure_the_acpr_is_the_products_alone_and_can_still_fail():
    # No noise_figure: the channel holds 2f1 - f2 alone, -90 dBm, ACPR -80 dBc.  Under
    # -85 dBc that fails by 5 dB whatever the noise adds (noise only adds power), so the
    # check says FAIL; under -75 dBc it passes the products but cannot judge the noise:
    # INCOMPLETE, naming both.
    stage = {k: v for k, v in PA.items() if k != "noise_figure"}
    fail = _check({"adjacent_channel": [_acpr_rule(limit="-85 dBc")]}, stage=stage)
    e = _entry(fail, "f1", -25e3)
    assert e["noise_dbm"] is None
    assert e["channel_dbm"] == pytest.approx(IM3_DBM, abs=MODEL_DB)
    assert e["margin_db"] == pytest.approx(-85.0 - (IM3_DBM - P_OUT_DBM), abs=MODEL_DB)
    assert fail.status == "FAIL"
    ok = _check({"adjacent_channel": [_acpr_rule(limit="-75 dBc")]}, stage=stage)
    assert ok.passed and ok.status == "INCOMPLETE"
    assert "noise not judged in the adjacent channels (no noise figure for 'pa'" in ok.verdict
    assert "stage 'pa' has no noise figure" in ok.verdict


def test_a_channel_that_overlaps_its_own_carrier_s_bandwidth_is_not_judged():
    # A 30 kHz wide carrier spans +-15 kHz; a 16 kHz channel at 20 kHz starts 12 kHz from
    # its centre, inside it (arithmetic): the rule cannot be judged as stated.
    rule = _acpr_rule(offsets=["20 kHz"], limit="-60 dBc")
    outcome = _check({"adjacent_channel": [rule]}, carriers=((F1_HZ, "30 kHz"),))
    assert outcome.acpr == ()
    assert outcome.status == "INCOMPLETE"
    assert "overlaps its carrier's own channel" in outcome.verdict


# --- the command line ---------------------------------------------------------------------------


def test_cli_fails_with_exit_1_and_shows_the_acpr_rows_in_table_and_json(tmp_path):
    path = write(tmp_path, "acpr.toml", _toml(_doc({"adjacent_channel": [_acpr_rule(limit="-85 dBc")]})))
    text = invoke("check", path, expect=1).stdout
    (line,) = [ln for ln in text.splitlines() if "ACPR f1 -25 kHz" in ln and "VERDICT" not in ln]
    assert line.split()[0] == "FAIL" and "ADJACENT CHANNEL" in line
    # Margin -5.087 dB by hand, shown to 0.01 dB (MODEL_DB apart).
    level, limit, margin = (float(x) for x in line.split("ACPR f1 -25 kHz")[1].split()[:3])
    assert level == pytest.approx(CHANNEL_DBM, abs=MODEL_DB + 0.005)
    assert limit == pytest.approx(P_OUT_DBM - 85.0, abs=0.01 + 0.005)
    assert margin == pytest.approx(-85.0 - ACPR_DBC, abs=MODEL_DB + 0.005)
    verdict = next(ln for ln in text.splitlines() if ln.startswith("VERDICT"))
    assert verdict.startswith("VERDICT: FAIL") and "ACPR" in verdict
    doc = as_json(invoke("check", path, "--format", "json", expect=1).stdout)
    summary = doc["summary"]
    assert summary["status"] == "FAIL" and summary["acpr_not_judged"] == []
    lower = [e for e in summary["acpr"] if e["carrier"] == "f1" and e["offset_hz"] == -25e3]
    assert len(lower) == 1 and lower[0]["pass"] is False
    assert lower[0]["acpr_dbc"] == pytest.approx(ACPR_DBC, abs=MODEL_DB)
    # The channels are in the summary, not among the products (as the noise rows).
    assert all(p["domain"] != "adjacent channel" for p in doc["products"])
    assert summary["worst"]["label"].startswith("ACPR ")


def test_cli_passes_with_exit_0_under_a_rule_file(tmp_path):
    rules = """
[ruleset]
name = "my-acpr"
source = "my test plan, section 4 (invented)"

[[adjacent_channel]]
name = "adjacent and alternate"
channel_bandwidth = "16 kHz"
offsets = ["25 kHz", "50 kHz"]
limit = "-75 dBc"
status = "derived"
"""
    write(tmp_path, "my-acpr.toml", rules)
    path = write(tmp_path, "acpr.toml", _toml(_doc({})) + '[mask]\nfiles = ["my-acpr.toml"]\n')
    summary = as_json(invoke("check", path, "--format", "json", expect=0).stdout)["summary"]
    assert summary["status"] == "PASS"
    e = next(e for e in summary["acpr"] if e["carrier"] == "f1" and e["offset_hz"] == -25e3)
    assert e["rule"] == "my-acpr: adjacent and alternate"
    assert e["rule_source"] == "my test plan, section 4 (invented) [derived]"
    assert e["margin_db"] == pytest.approx(-75.0 - ACPR_DBC, abs=MODEL_DB)


# --- malformed entries ----------------------------------------------------------------------------

LINEUP = """
[lineup]
name = "ACPR malformed-input test (invented)"

[[carrier]]
freq = "100 MHz"
power = "-30 dBm"

[[stage]]
kind = "amplifier"
name = "pa"
gain = "20 dB"
oip3 = "+30 dBm"

[analysis]
max_order = 3
"""


def _table(**keys) -> str:
    base = {"name": '"acpr"', "channel_bandwidth": '"16 kHz"', "offsets": '["25 kHz"]', "limit": '"-60 dBc"'}
    base.update(keys)
    return "\n[[mask.adjacent_channel]]\n" + "".join(f"{k} = {v}\n" for k, v in base.items() if v is not None)


@pytest.mark.parametrize(
    ("table", "needles"),
    [
        (_table(channel_bandwidth=None), ("field 'channel_bandwidth'", "is required")),
        (_table(channel_bandwidth='"0 Hz"'), ("field 'channel_bandwidth'", "'0 Hz'", "> 0 Hz")),
        (_table(channel_bandwidth='"16"'), ("field 'channel_bandwidth'", "'16'", "unit")),
        (_table(channel_bandwidth='"20 GHz"'), ("field 'channel_bandwidth'", "channel bandwidth from")),
        (_table(offsets=None), ("field 'offsets'", "is required", "list of channel offsets")),
        (_table(offsets='"25 kHz"'), ("field 'offsets'", "list of channel offsets")),
        (_table(offsets="[]"), ("field 'offsets'", "1 to 16 of them")),
        (_table(offsets="[" + ", ".join(['"25 kHz"'] * 17) + "]"), ("field 'offsets'", "1 to 16 of them")),
        (_table(offsets='["50 kHz", "25 kHz"]'), ("field 'offsets'", "'25 kHz'", "increase")),
        (_table(offsets='["25"]'), ("field 'offsets'", "'25'", "unit")),
        (_table(offsets="[25000]"), ("field 'offsets'", "25000")),
        (
            _table(offsets='["5 kHz"]'),
            ("field 'offsets'", "'5 kHz'", "above half the channel bandwidth (8 kHz)"),
        ),
        (
            _table(offsets='["20 kHz"]', carrier_bandwidth='"30 kHz"'),
            ("field 'offsets'", "'20 kHz'", "(channel_bandwidth + carrier_bandwidth) / 2 = 23 kHz"),
        ),
        (_table(carrier_bandwidth='"0 Hz"'), ("field 'carrier_bandwidth'", "> 0 Hz")),
        (_table(limit='"-60 dBm"'), ("field 'limit'", "'-60 dBm'", "dBc")),
        (_table(limit='"+10 dBc"'), ("field 'limit'", "a limit above the carrier is no limit")),
        (_table(limit=None), ("field 'limit'", "is required", "absolute_limit")),
        (_table(absolute_limit='"-36 dBc"'), ("field 'absolute_limit'", "'-36 dBc'", "dBm")),
        (_table(absolute_limit='"+90 dBm"'), ("field 'absolute_limit'", "an absolute limit from")),
        (_table(rbw='"1 kHz"'), ("field 'rbw'", "unknown key")),
        (_table(status='"checked"'), ("field 'status'", "'checked'", "published text")),
    ],
)
def test_malformed_adjacent_channel_entries_are_one_line_errors(tmp_path, table, needles):
    path = write(tmp_path, "lineup.toml", LINEUP + table)
    result = invoke("check", path, expect=2)
    assert_one_error_line(
        result.exit_code,
        result.stdout,
        result.stderr,
        ("[[mask.adjacent_channel]] 1", *needles),
        names=path,
    )


def test_a_rule_file_entry_without_status_names_the_rule_file(tmp_path):
    rules = """
[ruleset]
name = "my-acpr"
source = "my test plan (invented)"

[[adjacent_channel]]
name = "adjacent"
channel_bandwidth = "16 kHz"
offsets = ["25 kHz"]
limit = "-60 dBc"
"""
    write(tmp_path, "my-acpr.toml", rules)
    path = write(tmp_path, "lineup.toml", LINEUP + '\n[mask]\nfiles = ["my-acpr.toml"]\n')
    result = invoke("check", path, expect=2)
    assert_one_error_line(
        result.exit_code,
        result.stdout,
        result.stderr,
        ("adjacent_channel 1", "field 'status'", "is required"),
        names=tmp_path / "my-acpr.toml",
    )


def test_near_misses_of_the_malformed_cases_are_valid(tmp_path):
    # One edit from the cases above, and valid: each case fails for the reason it names.
    for table in (
        _table(),
        _table(offsets='["8.001 kHz"]'),  # just beyond half the channel
        _table(offsets='["23 kHz"]', carrier_bandwidth='"30 kHz"'),  # exactly clear of it
        _table(limit=None, absolute_limit='"-36 dBm"'),
        _table(absolute_limit='"-36 dBm"', status='"from memory"', source='"my notes"'),
    ):
        path = write(tmp_path, "lineup.toml", LINEUP + table)
        invoke("check", path, "--format", "json", expect=(0, 1))
