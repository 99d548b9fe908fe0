"""The shipped rule sets and band lists (``bands/*.toml``) against the project's
regulatory fact sheet (shared/reference/regulatory-facts.md; section numbers below).

Three kinds of test:

* every shipped file loads, names its source, and gives every entry a status, proved
  both through spurplan's loader and on the raw TOML;
* data values against the fact sheet: whole tables where the fact sheet has them
  (47 CFR 15.205, RR 5.149, RR 5.340), computed limits where it gives check values
  (47 CFR 15.209 and 97.307, SM.329 Categories A and B);
* ``spurplan bands`` lists and shows them, and rejects an unknown name on one line.

Expected values are typed in from the fact sheet (or worked by arithmetic from its
rows), never read from spurplan's output.
"""

from __future__ import annotations

import itertools
import json
import math
import tomllib

import numpy as np
import pytest
from helpers import assert_one_error_line, invoke, run_in_process

from spurplan.io.mask_files import load_ruleset, shipped_names, shipped_path
from spurplan.io.resources import data_dir
from spurplan.model.masks import STATUSES

NAMES = shipped_names()

# The files the fact sheet has rows for (fact sheet sections 1.3, 1.4, 2.2-2.4, 3.1, 4.1,
# 4.2, 4.4); the loader must offer at least these.
EXPECTED_NAMES = {
    "etsi-en300220-spurious",
    "gnss-bands",
    "itu-rr-5.149",
    "itu-rr-5.340",
    "itu-sm329-cat-a",
    "us-fcc-15.205",
    "us-fcc-15.209",
    "us-fcc-97.307",
    "us-fcc-90.210-mask-b",
}

# Fact-sheet status codes (its first table) and the status word a data file uses.
CODE = {"V": "published text", "V2": "secondary source", "D": "derived", "M": "from memory"}

MHZ = 1e6
GHZ = 1e9
KHZ = 1e3


def _raw(name: str) -> dict:
    with shipped_path(name).open("rb") as handle:
        return tomllib.load(handle)


def _entries(rs):
    return list(rs.rules) + list(rs.bands)


def _limit(rule, freq_hz: float, carrier_dbm: float = 30.0, gain_dbi: float = 0.0) -> float:
    return float(rule.limit_dbm(np.array([freq_hz]), carrier_dbm, np.array([gain_dbi]))[0])


def _ranges(rs) -> list[tuple[float, float]]:
    return sorted((b.start_hz, b.stop_hz) for b in rs.bands)


def _same_ranges(got, want):
    assert len(got) == len(want), f"{len(got)} ranges shipped, {len(want)} in the fact sheet"
    for (g0, g1), (w0, w1) in zip(got, sorted(want), strict=True):
        assert g0 == pytest.approx(w0, rel=1e-12), (g0, g1, w0, w1)
        if math.isinf(w1):
            assert math.isinf(g1), (g0, g1)
        else:
            assert g1 == pytest.approx(w1, rel=1e-12), (g0, g1, w0, w1)


# --- (a) every shipped file loads, with sources and statuses --------------------------------------


def test_the_fact_sheet_sets_are_shipped():
    # Names as used in [mask] use = [...] (README); one file per fact-sheet table.
    assert set(NAMES) >= EXPECTED_NAMES


def test_shipped_names_are_the_files_in_bands():
    assert sorted(p.stem for p in data_dir("bands").glob("*.toml")) == NAMES
    for name in NAMES:
        assert shipped_path(name).is_file()
        assert shipped_path(name).stem == name


@pytest.mark.parametrize("name", NAMES)
def test_shipped_file_loads_with_a_source(name):
    rs = load_ruleset(shipped_path(name))
    # The set's name is how lineups refer to it and how check rows name their origin.
    assert rs.name == name
    assert isinstance(rs.source, str) and rs.source.strip()
    assert _entries(rs), f"{name} has no [[rule]] and no [[band]]"
    for entry in _entries(rs):
        assert entry.source.strip(), f"{name}: {entry.name} has no source"
        assert entry.status in STATUSES, f"{name}: {entry.name}: {entry.status!r}"
        # "user" marks a lineup's own rules; shipped data says how it was checked.
        assert entry.status != "user", f"{name}: {entry.name}"
        assert entry.origin == name
        assert entry.stop_hz > entry.start_hz
    for band in rs.bands:
        for rule in band.rules:
            assert rule.source.strip(), f"{name}: {band.name}: {rule.name} has no source"
            assert rule.status in STATUSES


@pytest.mark.parametrize("name", NAMES)
def test_raw_toml_entries_each_carry_a_status(name):
    raw = _raw(name)
    head = raw["ruleset"]
    assert isinstance(head.get("source"), str) and head["source"].strip()
    tables = raw.get("rule", []) + raw.get("band", [])
    assert tables
    for i, table in enumerate(tables, start=1):
        # Written in the file itself, not supplied by a default of the loader.
        assert "status" in table, f"{name}: entry {i} ({table.get('name')!r}) has no status"
        assert table["status"] in STATUSES and table["status"] != "user"
        assert isinstance(table.get("name"), str) and table["name"].strip()
        if "source" in table:
            assert isinstance(table["source"], str) and table["source"].strip()
    rs = load_ruleset(shipped_path(name))
    assert len(rs.rules) == len(raw.get("rule", []))
    assert len(rs.bands) == len(raw.get("band", []))


# Status each entry may claim, from the fact sheet's status column for its rows.
STATUS_ALLOWED = {
    "us-fcc-15.205": {CODE["V"]},  # fact sheet 2.3: V
    "itu-rr-5.149": {CODE["V2"]},  # fact sheet 4.2: V2
    "itu-rr-5.340": {CODE["M"]},  # fact sheet 4.1: M for every row
    "gnss-bands": {CODE["V2"]},  # fact sheet 4.4: RNSS allocations V2
    "itu-sm329-cat-a": {CODE["M"]},  # fact sheet 1.3: attenuation rows M
    "us-fcc-97.307": {CODE["V"]},  # fact sheet 2.2: (d), (e) V
    "us-fcc-90.210-mask-b": {CODE["M"]},  # fact sheet 2.7: mask segments M
    # fact sheet 2.4: limits V; bandwidths below 1 GHz are not in the fact sheet (M).
    "us-fcc-15.209": {CODE["V"], CODE["M"]},
}


@pytest.mark.parametrize("name", sorted(STATUS_ALLOWED))
def test_status_is_no_stronger_than_the_fact_sheet(name):
    for entry in _entries(load_ruleset(shipped_path(name))):
        assert entry.status in STATUS_ALLOWED[name], f"{name}: {entry.name}: {entry.status!r}"


def test_category_b_is_published_and_broadcast_bands_from_memory():
    # fact sheet 1.4: Category B rows V (3GPP TS 36.106 Table 9.2.1.2.1-1);
    # fact sheet 3.1: the EN 300 220-1 broadcast-band -54 dBm rows M.
    rs = load_ruleset(shipped_path("etsi-en300220-spurious"))
    for rule in rs.rules:
        want = CODE["M"] if rule.value == -54.0 else CODE["V"]
        assert rule.status == want, rule.name


# --- (b) values: 47 CFR 15.205 restricted bands ---------------------------------------------------

# fact sheet 2.3, the 15.205(a) table, column by column (MHz, MHz, MHz, GHz).
FCC_15_205 = (
    [
        (0.090, 0.110),
        (0.495, 0.505),
        (2.1735, 2.1905),
        (4.125, 4.128),
        (4.17725, 4.17775),
        (4.20725, 4.20775),
        (6.215, 6.218),
        (6.26775, 6.26825),
        (6.31175, 6.31225),
        (8.291, 8.294),
        (8.362, 8.366),
        (8.37625, 8.38675),
        (8.41425, 8.41475),
        (12.29, 12.293),
        (12.51975, 12.52025),
        (12.57675, 12.57725),
        (13.36, 13.41),
        (16.42, 16.423),
        (16.69475, 16.69525),
        (16.80425, 16.80475),
        (25.5, 25.67),
        (37.5, 38.25),
        (73, 74.6),
        (74.8, 75.2),
        (108, 121.94),
        (123, 138),
        (149.9, 150.05),
        (156.52475, 156.52525),
        (156.7, 156.9),
        (162.0125, 167.17),
        (167.72, 173.2),
        (240, 285),
        (322, 335.4),
        (399.9, 410),
        (608, 614),
        (960, 1240),
        (1300, 1427),
        (1435, 1626.5),
        (1645.5, 1646.5),
        (1660, 1710),
        (1718.8, 1722.2),
        (2200, 2300),
        (2310, 2390),
        (2483.5, 2500),
        (2690, 2900),
        (3260, 3267),
        (3332, 3339),
        (3345.8, 3358),
        (3600, 4400),
    ],
    [
        (4.5, 5.15),
        (5.35, 5.46),
        (7.25, 7.75),
        (8.025, 8.5),
        (9.0, 9.2),
        (9.3, 9.5),
        (10.6, 12.7),
        (13.25, 13.4),
        (14.47, 14.5),
        (15.35, 16.2),
        (17.7, 21.4),
        (22.01, 23.12),
        (23.6, 24.0),
        (31.2, 31.8),
        (36.43, 36.5),
        (38.6, math.inf),
    ],
)


def test_15_205_has_the_65_ranges_of_the_table():
    # fact sheet 2.3: "65 ranges in all (17 + 16 + 16 + 16; the last is open-ended
    # above 38.6 GHz)".
    mhz, ghz = FCC_15_205
    want = [(a * MHZ, b * MHZ) for a, b in mhz] + [(a * GHZ, b * GHZ) for a, b in ghz]
    assert len(want) == 65  # fact sheet 2.3 count
    rs = load_ruleset(shipped_path("us-fcc-15.205"))
    assert len(rs.bands) == 65  # fact sheet 2.3
    _same_ranges(_ranges(rs), want)


@pytest.mark.parametrize(
    ("start", "stop"),
    [(1300 * MHZ, 1427 * MHZ), (2200 * MHZ, 2300 * MHZ), (608 * MHZ, 614 * MHZ), (38.6 * GHZ, math.inf)],
    ids=["1300-1427MHz", "2200-2300MHz", "608-614MHz", "above-38.6GHz"],
)
def test_15_205_spot_ranges(start, stop):
    # fact sheet 2.3 (15.205(a) table; "above 38.6" GHz is open-ended, note 2).
    ranges = _ranges(load_ruleset(shipped_path("us-fcc-15.205")))
    hits = [r for r in ranges if r[0] == pytest.approx(start, rel=1e-12)]
    assert len(hits) == 1, hits
    if math.isinf(stop):
        assert math.isinf(hits[0][1])
    else:
        assert hits[0][1] == pytest.approx(stop, rel=1e-12)


@pytest.mark.parametrize(
    ("freq_hz", "want_dbm"),
    [
        (1400 * MHZ, -41.25),  # 1300-1427 MHz band, >960 MHz row: 500 uV/m @ 3 m
        (611 * MHZ, -49.21),  # 608-614 MHz band, 216-960 MHz row: 200 uV/m @ 3 m
        (74 * MHZ, -55.23),  # 73-74.6 MHz band, 30-88 MHz row: 100 uV/m @ 3 m
        (130 * MHZ, -51.71),  # 123-138 MHz band, 88-216 MHz row: 150 uV/m @ 3 m
    ],
)
def test_15_205_bands_are_held_to_the_15_209_limits(freq_hz, want_dbm):
    # 15.205(b): field strength in restricted bands shall not exceed the 15.209 limits
    # (fact sheet 2.3, V); EIRP equivalents from fact sheet 2.4 (D), 0 dBi antenna.
    rs = load_ruleset(shipped_path("us-fcc-15.205"))
    inside = [b for b in rs.bands if b.start_hz <= freq_hz <= b.stop_hz]
    assert len(inside) == 1
    rules = [r for r in inside[0].rules if r.start_hz <= freq_hz <= r.stop_hz]
    assert rules, f"{inside[0].name} holds no rule at {freq_hz / MHZ} MHz"
    assert min(_limit(r, freq_hz) for r in rules) == pytest.approx(want_dbm, abs=0.01)


# --- (b) values: 47 CFR 15.209 general radiated limits --------------------------------------------


def _eirp_dbm(uv_per_m: float, distance_m: float) -> float:
    # E[dBuV/m] = EIRP[dBm] + 104.77 - 20 log10(d / 1 m) (fact sheet 5, D; ITU-R P.525).
    return 20 * math.log10(uv_per_m) - 104.77 + 20 * math.log10(distance_m)


# fact sheet 2.4: (start MHz, stop MHz, uV/m, distance m, dBuV/m, EIRP dBm), all V/D.
FCC_15_209 = [
    (1.705, 30.0, 30.0, 30.0, 29.54, -45.7),
    (30.0, 88.0, 100.0, 3.0, 40.00, -55.23),
    (88.0, 216.0, 150.0, 3.0, 43.52, -51.71),
    (216.0, 960.0, 200.0, 3.0, 46.02, -49.21),
    (960.0, math.inf, 500.0, 3.0, 53.98, -41.25),
]


@pytest.mark.parametrize("row", FCC_15_209, ids=[f"{r[0]:g}-{r[1]:g}MHz" for r in FCC_15_209])
def test_15_209_field_limits(row):
    start, stop, uv, distance, dbuv, eirp = row
    # The fact sheet's EIRP column is the conversion of its uV/m column (fact sheet 2.4, D).
    assert _eirp_dbm(uv, distance) == pytest.approx(eirp, abs=0.06)
    rs = load_ruleset(shipped_path("us-fcc-15.209"))
    # A table row may be split where the measurement bandwidth changes (1000 MHz,
    # 47 CFR 15.35): the pieces must tile the row and carry its limit.
    hits = sorted(
        (r for r in rs.rules if start * MHZ * (1 - 1e-12) <= r.start_hz < stop * MHZ),
        key=lambda r: r.start_hz,
    )
    assert hits, "no rule for this row"
    assert hits[0].start_hz == pytest.approx(start * MHZ, rel=1e-12)
    for a, b in itertools.pairwise(hits):
        assert a.stop_hz == pytest.approx(b.start_hz, rel=1e-12)
    if math.isinf(stop):
        assert math.isinf(hits[-1].stop_hz)
    else:
        assert hits[-1].stop_hz == pytest.approx(stop * MHZ, rel=1e-12)
    for rule in hits:
        assert rule.kind == "field" and not rule.per_khz
        assert rule.distance_m == distance
        assert rule.value == pytest.approx(dbuv, abs=0.005)  # dBuV/m = 20 log10(uV/m), fact sheet 2.4
        middle = rule.start_hz * 1.01
        assert _limit(rule, middle) == pytest.approx(eirp, abs=0.01 if distance == 3.0 else 0.05)
        # Conducted limit = EIRP - antenna gain (fact sheet 5, "With gain", V2): 2.15 dBi.
        assert _limit(rule, middle, gain_dbi=2.15) == pytest.approx(eirp - 2.15, abs=0.05)


@pytest.mark.parametrize(
    ("freq_hz", "want_dbm", "distance"),
    [(100 * KHZ, -27.6, 300.0), (1000 * KHZ, -47.6, 30.0)],
    ids=["2400/F-at-100kHz", "24000/F-at-1000kHz"],
)
def test_15_209_low_frequency_rows(freq_hz, want_dbm, distance):
    # fact sheet 2.4: 2400/F(kHz) uV/m at 300 m (0.009-0.490 MHz): 100 kHz -> 27.60
    # dBuV/m -> -27.6 dBm; 24000/F(kHz) at 30 m (0.490-1.705 MHz): 1000 kHz -> 27.60
    # dBuV/m -> -47.6 dBm (D, nominal below 30 MHz).
    rs = load_ruleset(shipped_path("us-fcc-15.209"))
    rules = [r for r in rs.rules if r.start_hz <= freq_hz < r.stop_hz]
    assert len(rules) == 1
    assert rules[0].per_khz and rules[0].distance_m == distance
    assert _limit(rules[0], freq_hz) == pytest.approx(want_dbm, abs=0.05)


# --- (b) values: 47 CFR 97.307 --------------------------------------------------------------------


def _allowed_97_307_e_watts(p_w: float) -> float:
    # fact sheet 2.2, check values for (e) (D): P * 1e-6 above 25 W; otherwise
    # max(min(25 uW, P * 1e-4), 10 uW).
    if p_w > 25:
        return p_w * 1e-6
    return max(min(25e-6, p_w * 1e-4), 10e-6)


@pytest.mark.parametrize(
    ("p_w", "want_dbm"),
    [(100, -10.0), (25, -16.0), (1, -16.0), (0.2, -17.0), (0.1, -20.0)],
    ids=["100W", "25W", "1W", "0.2W", "0.1W"],
)
def test_97_307_e_check_values(p_w, want_dbm):
    # fact sheet 2.2 (e) table: 100 W -> 100 uW (-10.0 dBm), 25 W and 1 W -> 25 uW
    # (-16.0 dBm), 0.2 W -> 20 uW (-17.0 dBm), 0.1 W -> 10 uW (-20.0 dBm).
    exact_dbm = 10 * math.log10(_allowed_97_307_e_watts(p_w) * 1e3)
    assert exact_dbm == pytest.approx(want_dbm, abs=0.05)  # the table rounds to 0.1 dB
    carrier_dbm = 10 * math.log10(p_w * 1e3)  # W -> dBm (arithmetic)
    rs = load_ruleset(shipped_path("us-fcc-97.307"))
    holding = [r for r in rs.rules if r.holds_for(145 * MHZ, carrier_dbm)]
    # At 145 MHz only (e) holds ((d) is for transmitters below 30 MHz), and of its two
    # rows exactly one: "above 25 W" or "25 W or less" (fact sheet 2.2).
    assert len(holding) == 1, [r.name for r in holding]
    assert "(e)" in holding[0].name
    got = _limit(holding[0], 2 * 145 * MHZ, carrier_dbm)
    assert got == pytest.approx(exact_dbm, abs=1e-6)


def test_97_307_d_below_30_mhz():
    # fact sheet 2.2 (d): below 30 MHz, at least 43 dB below the mean power of the
    # fundamental; 100 W (50 dBm) at 14.2 MHz -> 7 dBm (arithmetic). (e) does not hold.
    rs = load_ruleset(shipped_path("us-fcc-97.307"))
    holding = [r for r in rs.rules if r.holds_for(14.2 * MHZ, 50.0)]
    assert len(holding) == 1 and "(d)" in holding[0].name
    assert _limit(holding[0], 28.4 * MHZ, 50.0) == pytest.approx(7.0, abs=1e-9)


def test_97_307_has_no_rule_above_225_mhz():
    # fact sheet 2.2: above 225 MHz 97.307 has no numeric limit (M): nothing holds for a
    # 435 MHz carrier.
    rs = load_ruleset(shipped_path("us-fcc-97.307"))
    assert not [r for r in rs.rules if r.holds_for(435 * MHZ, 40.0)]


# --- (b) values: ITU-R SM.329 Category A and B ----------------------------------------------------


@pytest.mark.parametrize(
    ("p_w", "want_dbm"),
    [(0.1, -13.0), (1, -13.0), (100, -13.0), (500, -13.0), (1000, -10.0)],
    ids=["0.1W", "1W", "100W", "500W", "1kW"],
)
def test_category_a_check_values(p_w, want_dbm):
    # fact sheet 1.3 check values (D): 43 + 10 log P or 70 dBc, whichever is less
    # stringent: -13.0 dBm up to 500 W (69.99 dB), -10.0 dBm at 1 kW (70 dB cap).
    carrier_dbm = 10 * math.log10(p_w * 1e3)  # W -> dBm (arithmetic)
    rs = load_ruleset(shipped_path("itu-sm329-cat-a"))
    assert len(rs.rules) == 4  # one per SM.329 reference bandwidth (fact sheet 1.2)
    for rule in rs.rules:
        freq = rule.start_hz * 2
        assert _limit(rule, freq, carrier_dbm) == pytest.approx(want_dbm, abs=0.01), rule.name


@pytest.mark.parametrize(
    ("start", "stop", "rbw"),
    [
        (9 * KHZ, 150 * KHZ, 1 * KHZ),
        (150 * KHZ, 30 * MHZ, 10 * KHZ),
        (30 * MHZ, 1 * GHZ, 100 * KHZ),
        (1 * GHZ, math.inf, 1 * MHZ),
    ],
    ids=["9k-150k", "150k-30M", "30M-1G", "above-1G"],
)
def test_category_a_reference_bandwidths(start, stop, rbw):
    # fact sheet 1.2 (SM.329 section 4.1 / RR AP3, V2): 1 kHz, 10 kHz, 100 kHz, 1 MHz.
    rs = load_ruleset(shipped_path("itu-sm329-cat-a"))
    hits = [r for r in rs.rules if r.start_hz == pytest.approx(start, rel=1e-12)]
    assert len(hits) == 1
    assert hits[0].rbw_hz == pytest.approx(rbw, rel=1e-12)
    if math.isinf(stop):
        assert math.isinf(hits[0].stop_hz)
    else:
        assert hits[0].stop_hz == pytest.approx(stop, rel=1e-12)


@pytest.mark.parametrize(
    ("start", "stop", "limit", "rbw"),
    [
        (9 * KHZ, 150 * KHZ, -36.0, 1 * KHZ),
        (150 * KHZ, 30 * MHZ, -36.0, 10 * KHZ),
        (30 * MHZ, 1 * GHZ, -36.0, 100 * KHZ),
        (1 * GHZ, 12.75 * GHZ, -30.0, 1 * MHZ),
    ],
    ids=["9k-150k", "150k-30M", "30M-1G", "1G-12.75G"],
)
def test_category_b_rows(start, stop, limit, rbw):
    # fact sheet 1.4 (3GPP TS 36.106 Table 9.2.1.2.1-1, V): -36 dBm in 1 kHz / 10 kHz /
    # 100 kHz up to 1 GHz, -30 dBm in 1 MHz from 1 GHz to 12.75 GHz.
    rs = load_ruleset(shipped_path("etsi-en300220-spurious"))
    hits = [
        r
        for r in rs.rules
        if r.start_hz == pytest.approx(start, rel=1e-12) and r.stop_hz == pytest.approx(stop, rel=1e-12)
    ]
    assert len(hits) == 1, [r.name for r in hits]
    rule = hits[0]
    assert rule.kind == "absolute"
    assert rule.rbw_hz == pytest.approx(rbw, rel=1e-12)
    assert _limit(rule, start * 1.5) == limit


def test_en_300_220_broadcast_bands():
    # fact sheet 3.1 (M): -54 dBm in 100 kHz in 47-74, 87.5-118, 174-230, 470-862 MHz.
    rs = load_ruleset(shipped_path("etsi-en300220-spurious"))
    broadcast = sorted((r.start_hz, r.stop_hz) for r in rs.rules if r.value == -54.0)
    want = [(47 * MHZ, 74 * MHZ), (87.5 * MHZ, 118 * MHZ), (174 * MHZ, 230 * MHZ), (470 * MHZ, 862 * MHZ)]
    _same_ranges(broadcast, want)
    for rule in rs.rules:
        if rule.value == -54.0:
            assert rule.rbw_hz == 100 * KHZ


# --- (b) values: protected bands ------------------------------------------------------------------

# fact sheet 4.1, RR No. 5.340 (GHz; all M).
RR_5_340 = [
    (1.4, 1.427),
    (2.69, 2.7),
    (10.68, 10.7),
    (15.35, 15.4),
    (23.6, 24),
    (31.3, 31.5),
    (31.5, 31.8),
    (48.94, 49.04),
    (50.2, 50.4),
    (52.6, 54.25),
    (86, 92),
    (100, 102),
    (109.5, 111.8),
    (114.25, 116),
    (148.5, 151.5),
    (164, 167),
    (182, 185),
    (190, 191.8),
    (200, 209),
    (226, 231.5),
    (250, 252),
]


def test_rr_5_340_contains_1400_1427_mhz():
    # fact sheet 4.1: 1400-1427 MHz, all emissions prohibited (M).
    rs = load_ruleset(shipped_path("itu-rr-5.340"))
    hits = [b for b in rs.bands if b.start_hz <= 1413.5 * MHZ <= b.stop_hz]
    assert len(hits) == 1
    assert (hits[0].start_hz, hits[0].stop_hz) == (pytest.approx(1400 * MHZ), pytest.approx(1427 * MHZ))


def test_rr_5_340_has_the_fact_sheet_list():
    # fact sheet 4.1, 21 bands.
    rs = load_ruleset(shipped_path("itu-rr-5.340"))
    _same_ranges(_ranges(rs), [(a * GHZ, b * GHZ) for a, b in RR_5_340])


# fact sheet 4.2, RR No. 5.149 (WRC-07 text, V2): kHz, MHz, GHz.
RR_5_149_KHZ = [(13360, 13410), (25550, 25670)]
RR_5_149_MHZ = [
    (37.5, 38.25),
    (73, 74.6),
    (150.05, 153),
    (322, 328.6),
    (406.1, 410),
    (608, 614),
    (1330, 1400),
    (1610.6, 1613.8),
    (1660, 1670),
    (1718.8, 1722.2),
    (2655, 2690),
    (3260, 3267),
    (3332, 3339),
    (3345.8, 3352.5),
    (4825, 4835),
    (4950, 4990),
    (4990, 5000),
    (6650, 6675.2),
]
RR_5_149_GHZ = [
    (10.6, 10.68),
    (14.47, 14.5),
    (22.01, 22.21),
    (22.21, 22.5),
    (22.81, 22.86),
    (23.07, 23.12),
    (31.2, 31.3),
    (31.5, 31.8),
    (36.43, 36.5),
    (42.5, 43.5),
    (48.94, 49.04),
    (76, 86),
    (92, 94),
    (94.1, 100),
    (102, 109.5),
    (111.8, 114.25),
    (128.33, 128.59),
    (129.23, 129.49),
    (130, 134),
    (136, 148.5),
    (151.5, 158.5),
    (168.59, 168.93),
    (171.11, 171.45),
    (172.31, 172.65),
    (173.52, 173.85),
    (195.75, 196.15),
    (209, 226),
    (241, 250),
    (252, 275),
]


def test_rr_5_149_has_the_fact_sheet_list():
    # fact sheet 4.2: 11 + 9 + 14 + 15 = 49 bands.
    want = (
        [(a * KHZ, b * KHZ) for a, b in RR_5_149_KHZ]
        + [(a * MHZ, b * MHZ) for a, b in RR_5_149_MHZ]
        + [(a * GHZ, b * GHZ) for a, b in RR_5_149_GHZ]
    )
    assert len(want) == 49  # fact sheet 4.2 count (arithmetic on its columns)
    _same_ranges(_ranges(load_ruleset(shipped_path("itu-rr-5.149"))), want)


@pytest.mark.parametrize(
    ("multiple", "what"),
    [(154, "GPS L1"), (120, "GPS L2"), (115, "GPS L5 / Galileo E5a")],
)
def test_gnss_bands_cover_the_gps_carriers(multiple, what):
    # fact sheet 4.4: GPS L1 = 154 x 10.23 MHz = 1575.42 MHz, L2 = 120 x 10.23 MHz =
    # 1227.60 MHz, L5 = 115 x 10.23 MHz = 1176.45 MHz (V2/D; arithmetic).
    freq = multiple * 10.23 * MHZ
    if multiple == 154:
        assert freq == pytest.approx(1575.42 * MHZ, rel=1e-12)
    rs = load_ruleset(shipped_path("gnss-bands"))
    assert [b for b in rs.bands if b.start_hz <= freq <= b.stop_hz], what


def test_gnss_bands_lie_in_the_rnss_allocations():
    # fact sheet 4.4: RNSS bands under RR 5.328B: 1164-1300, 1559-1610, 5010-5030 MHz (V2).
    allocations = [(1164 * MHZ, 1300 * MHZ), (1559 * MHZ, 1610 * MHZ), (5010 * MHZ, 5030 * MHZ)]
    rs = load_ruleset(shipped_path("gnss-bands"))
    for band in rs.bands:
        assert any(lo <= band.start_hz and band.stop_hz <= hi for lo, hi in allocations), band.name
    for lo, hi in allocations:
        inside = sorted((b.start_hz, b.stop_hz) for b in rs.bands if lo <= b.start_hz and b.stop_hz <= hi)
        assert inside and inside[0][0] == lo and inside[-1][1] == hi
        assert all(a[1] >= b[0] for a, b in itertools.pairwise(inside))  # no gap


# --- (c) spurplan bands ---------------------------------------------------------------------------


def test_bands_lists_every_shipped_name():
    result = invoke("bands")
    assert result.exit_code == 0, result.stderr
    for name in NAMES:
        assert name in result.stdout
    assert "Traceback" not in result.stderr


@pytest.mark.parametrize("name", NAMES)
def test_bands_name_shows_its_source(name):
    result = invoke("bands", name)
    assert result.exit_code == 0, result.stderr
    assert _raw(name)["ruleset"]["source"] in result.stdout
    assert name in result.stdout


@pytest.mark.parametrize("name", ["us-fcc-15.205", "itu-rr-5.149"])
def test_bands_name_json_lists_every_entry(name):
    result = invoke("bands", name, "--format", "json")
    assert result.exit_code == 0, result.stderr
    doc = json.loads(result.stdout)
    raw = _raw(name)
    n_raw = len(raw.get("rule", [])) + len(raw.get("band", []))
    entries = doc["entries"]
    # 65 for 15.205 (fact sheet 2.3), 49 for 5.149 (fact sheet 4.2).
    assert len(entries) == n_raw == {"us-fcc-15.205": 65, "itu-rr-5.149": 49}[name]
    assert doc["summary"]["source"] == raw["ruleset"]["source"]
    assert all(e["status"] in STATUSES and e["source"] for e in entries)


def _one_error_line(*args) -> str:
    code, out, err, detail, _ = run_in_process(args)
    return assert_one_error_line(code, out, err, detail=detail)


def test_bands_unknown_name_suggests_the_close_one():
    line = _one_error_line("bands", "us-fcc-97.30")
    assert "'us-fcc-97.30'" in line
    assert "did you mean 'us-fcc-97.307'" in line


def test_bands_unknown_name_lists_the_names():
    line = _one_error_line("bands", "no-such-set")
    assert "'no-such-set'" in line
    for name in NAMES:
        assert name in line


@pytest.mark.parametrize(
    ("displacement", "want_dbc"),
    [(0.4, None), (0.5, -25.0), (0.75, -25.0), (1.0, -25.0), (1.5, -35.0), (2.5, -35.0), (2.6, None)],
)
def test_90_210_mask_b_segments(displacement, want_dbc):
    # Fact sheet 2.7 (from memory): mask B attenuates 25 dB at 50-100 % of the authorized
    # bandwidth and 35 dB at 100-250 %; beyond 250 % the spurious limit takes over.
    (rule,) = load_ruleset(shipped_path("us-fcc-90.210-mask-b")).rules
    assert rule.domain == "out-of-band" and rule.offsets_of_bandwidth
    covered = bool(rule.covers_offset(displacement))
    assert covered is (want_dbc is not None)
    if covered:
        assert float(rule.offset_limit_dbm(displacement, 0.0)) == pytest.approx(want_dbc, abs=1e-9)
