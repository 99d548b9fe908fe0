"""Hostile files: Touchstone data that would read as more rejection than it has, and
output targets that are not regular files.

The contract (README, "Bad input gives one line naming the file, the stage, the field,
the value and what was expected, and exit status 2"): exit status 2, no traceback,
one ``spurplan: error:`` line naming the file, the stage and field (or the option),
the line or frequency and the value; nothing is written, replaced or left behind.

Part 1, Touchstone files (``spurplan.io.touchstone``): an exact zero, ``-inf`` or
NaN in the forward transmission is refused; values below -200 dB are held at -200 dB
with a note; the interpolation never passes below the lower of two neighbouring
points; Touchstone 2.0 keyword mismatches are refused.  The layouts are those of the
Touchstone File Format Specification, versions 1.1 and 2.0 (IBIS Open Forum; from
memory).  Every Touchstone file below is invented for these tests.

Part 2, output targets (``spurplan.output.files``): a device node, a named pipe, a socket,
a folder, a symbolic link, a name ending in ``/``, a missing folder, a read-only
folder, a clashing ``_files`` folder of a Markdown report; a SIGKILL while a report is
written.  The lineups are invented for these tests.
"""

from __future__ import annotations

import math
import os
import shutil
import signal
import socket
import stat
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import numpy as np
import pytest
from helpers import assert_one_error_line, run_in_process
from hypothesis import given, settings
from hypothesis import strategies as st

from spurplan.io.lineup_file import load
from spurplan.model.ladders import S_FLOOR_DB, SParameterTable
from spurplan.output.files import OutputError, check_target, save_figure, write_atomic

# --- Part 1: Touchstone files -----------------------------------------------------------------------

CARRIER_100 = '[[carrier]]\nfreq = "100 MHz"\npower = "0 dBm"\n'
F5 = (10, 100, 200, 500, 2000)  # MHz; the data cover 3 x 100 MHz (arithmetic)

HEADERS = {
    "ri": "! invented test data\n# MHz S RI R 50\n",
    "ma": "! invented test data\n# MHz S MA R 50\n",
    "db": "! invented test data\n# MHz S DB R 50\n",
}
# One well matched 0.9 V/V through per format (S11 S21 S12 S22, version 1 2-port order).
THROUGH = {
    "ri": "0.05 0 0.9 0 0.9 0 0.05 0",
    "ma": "0.05 0 0.9 -10 0.9 -10 0.05 0",
    "db": "-26 0 -0.9 -10 -0.9 -10 -26 0",
}
# The same row with the forward transmission S21 replaced by ``{}`` (two values).
S21_AT = {
    "ri": "0.05 0 {} 0.9 0 0.05 0",
    "ma": "0.05 0 {} 0.9 -10 0.05 0",
    "db": "-26 0 {} -0.9 -10 -26 0",
}


def ts_file(form: str, bad_at: int | None = None, s21: str = "") -> str:
    """A 5-point version 1 file in ``form``; point ``bad_at`` gets S21 = ``s21``."""
    rows = []
    for k, f in enumerate(F5):
        body = S21_AT[form].format(s21) if k == bad_at else THROUGH[form]
        rows.append(f"{f} {body}\n")
    return HEADERS[form] + "".join(rows)


def filter_lineup(name: str, kind: str = "filter", extra: str = "") -> str:
    stage = f'[[stage]]\nkind = "{kind}"\nname = "flt"\ntouchstone = "{name}"\n{extra}'
    if kind == "amplifier":
        stage += 'gain = "10 dB"\noip3 = "+30 dBm"\n'
    return CARRIER_100 + stage + "[analysis]\nmax_order = 3\n"


def run_ts(tmp_path: Path, data: str, name: str = "t.s2p", **kw) -> tuple:
    (tmp_path / "l.toml").write_text(filter_lineup(name, **kw), encoding="utf-8")
    (tmp_path / name).write_text(data, encoding="utf-8")
    return run_in_process(["spectrum", str(tmp_path / "l.toml")])


def assert_ts_refused(result, tmp_path: Path, name: str, *needles: str) -> str:
    code, out, err, detail, seconds = result
    line = assert_one_error_line(
        code,
        out,
        err,
        (str(tmp_path / "l.toml"), "stage 1 'flt'", "field 'touchstone'", f"'{name}'", *needles),
        detail=detail,
    )
    assert seconds < 10
    return line


# Positions: the first point (line 3: two header lines), one inside, the last.
POSITIONS = [(0, "line 3", "10 MHz"), (2, "line 5", "200 MHz"), (4, "line 7", "2000 MHz")]


@pytest.mark.parametrize(("at", "line", "freq"), POSITIONS, ids=["first", "middle", "last"])
@pytest.mark.parametrize(
    ("form", "value", "shown"),
    [("ma", "0 0", "|S21| = 0"), ("ri", "0 0", "|S21| = 0"), ("ri", "0.0 -0.0", "|S21| = 0")],
    ids=["ma-zero", "ri-zero", "ri-signed-zero"],
)
def test_exact_zero_forward_transmission_is_refused(form, value, shown, at, line, freq, tmp_path):
    # An exact zero is -inf dB: no instrument measures it, and a dB chord from it reads
    # unbounded rejection beside it (the issue: 2f1 27 dB under its limit).
    result = run_ts(tmp_path, ts_file(form, at, value))
    assert_ts_refused(result, tmp_path, "t.s2p", shown, line, freq)


@pytest.mark.parametrize(("at", "line", "freq"), POSITIONS, ids=["first", "middle", "last"])
@pytest.mark.parametrize(
    ("form", "value", "shown"),
    [
        ("db", "-inf 0", "-inf"),
        ("db", "nan 0", "NaN"),
        ("db", "inf 0", "inf"),
        ("ma", "nan 0", "NaN"),
        ("ri", "inf 0", "inf"),
        ("ma", "0.9 nan", "NaN"),  # the angle
    ],
    ids=["db-minus-inf", "db-nan", "db-plus-inf", "ma-nan", "ri-inf", "ma-nan-angle"],
)
def test_non_finite_values_are_refused_with_line_and_frequency(form, value, shown, at, line, freq, tmp_path):
    result = run_ts(tmp_path, ts_file(form, at, value))
    assert_ts_refused(result, tmp_path, "t.s2p", "S21", shown, line, freq)


def test_zero_reverse_transmission_is_refused_when_it_faces_the_source(tmp_path):
    # With input_port = 2 the signal enters port 2: the forward transmission is S12.
    data = HEADERS["ri"] + "".join(f"{f} 0.05 0 0.9 0 {'0 0' if f == 200 else '0.9 0'} 0.05 0\n" for f in F5)
    result = run_ts(tmp_path, data, extra="input_port = 2\n")
    assert_ts_refused(result, tmp_path, "t.s2p", "|S12| = 0", "line 5", "200 MHz")


def test_zero_reverse_transmission_of_a_unilateral_amplifier_still_loads(tmp_path):
    # S12 = 0 is a unilateral model (common practice, no source), not a hole in the
    # forward path: the amplifier's gain shape is its S21 and loads.
    data = HEADERS["ri"] + "".join(f"{f} 0.1 0 3.16 0 0 0 0.1 0\n" for f in F5)
    code, _, err, detail, _ = run_ts(tmp_path, data, kind="amplifier")
    assert code == 0, err + detail


def test_amplifier_shape_with_a_zero_is_refused_too(tmp_path):
    # Amplifier gain shapes share the Touchstone reader.
    data = HEADERS["ri"] + "".join(f"{f} 0.1 0 {'0 0' if f == 500 else '3.16 0'} 0 0 0.1 0\n" for f in F5)
    result = run_ts(tmp_path, data, kind="amplifier")
    assert_ts_refused(result, tmp_path, "t.s2p", "|S21| = 0", "line 6", "500 MHz")


def _notch(tmp_path: Path, deep: str, form: str = "ma") -> Path:
    """A notch file: 0 dB everywhere but ``deep`` (S21 as two values) at 200 MHz; 210 MHz is 0 dB."""
    through, match = {"ma": ("1 0", "0.01 0"), "db": ("0 0", "-40 0")}[form]
    rows = "".join(
        f"{f} {match} {deep if f == 200 else through} {deep if f == 200 else through} {match}\n"
        for f in (10, 100, 200, 210, 500, 2000)
    )
    (tmp_path / "notch.s2p").write_text(HEADERS[form] + rows, encoding="utf-8")
    (tmp_path / "l.toml").write_text(filter_lineup("notch.s2p"), encoding="utf-8")
    return tmp_path / "l.toml"


def _db_at(lineup_path: Path, freq_hz: float) -> float:
    stage = load(lineup_path).stages[0]
    return float(20 * np.log10(np.abs(stage.response(np.array([freq_hz])))[0]))


def test_notch_of_the_issue_reads_the_chord_between_its_points(tmp_path):
    # |S21| = 1e-4 (-80 dB) at 200 MHz and 1 (0 dB) at 210 MHz: at 209 MHz the dB
    # chord gives -80 + 0.9 x 80 = -8 dB (linear interpolation, arithmetic).
    path = _notch(tmp_path, "1e-4 0")
    assert _db_at(path, 209e6) == pytest.approx(-8.0, abs=1e-9)
    assert _db_at(path, 200e6) == pytest.approx(-80.0, abs=1e-9)


@pytest.mark.parametrize(
    ("deep", "form"),
    [("1e-13 0", "ma"), ("-250 0", "db"), ("-1e6 0", "db"), ("1e-320 0", "ma")],
    ids=["ma-1e-13", "db-250", "db-1e6", "ma-subnormal"],
)
def test_values_below_the_floor_are_held_at_minus_200_db_with_a_note(deep, form, tmp_path):
    # Held at -200 dB: at 209 MHz the chord from -200 dB to 0 dB gives -20 dB (arithmetic),
    # never the -26, -25 or -1e5 dB that the stated values (-260, -250, -1e6 dB) would
    # give; a note says so.
    path = _notch(tmp_path, deep, form)
    assert _db_at(path, 200e6) == pytest.approx(S_FLOOR_DB, abs=1e-9)
    assert _db_at(path, 209e6) == pytest.approx(0.1 * S_FLOOR_DB, abs=1e-9)
    notes = " ".join(load(path).stages[0].notes)
    assert "held at -200 dB" in notes and "line 5" in notes


@settings(max_examples=200, deadline=None)
@given(
    steps=st.lists(st.floats(1e3, 1e9), min_size=1, max_size=12),
    dbs=st.lists(st.floats(-320.0, 20.0), min_size=13, max_size=13),
    where=st.floats(0.0, 1.0),
    pick=st.integers(0, 11),
)
def test_interpolation_never_leaves_its_neighbours_interval(steps, dbs, where, pick):
    # A linear interpolant between two points never leaves the interval of their
    # values (any numerical analysis text, e.g. Burden and Faires, Numerical Analysis,
    # piecewise-linear interpolation), so the lookup never reads more rejection than
    # the lower neighbour, and never below the -200 dB floor.  Tolerance: rounding.
    freq = 1e6 + np.cumsum([0.0, *steps])
    db = np.array(dbs[: len(freq)])
    table = SParameterTable.from_s21(freq, 10 ** (db / 20.0))
    j = pick % (len(freq) - 1)
    f = freq[j] + where * (freq[j + 1] - freq[j])
    got = 20 * math.log10(abs(table(np.array([f]))[0]))
    held = np.maximum(db, S_FLOOR_DB)
    assert min(held[j], held[j + 1]) - 1e-9 <= got <= max(held[j], held[j + 1]) + 1e-9
    assert got >= S_FLOOR_DB - 1e-9


V2_HEAD = (
    "! invented test data\n[Version] 2.0\n# MHz S RI R 50\n[Number of Ports] 2\n[Two-Port Data Order] 21_12\n"
)


def v2(
    freqs=(10, 200, 2000), declared=None, head=V2_HEAD, data_kw="[Network Data]\n", end="[End]\n", rows=None
):
    """A Touchstone 2.0 2-port file (invented values), ``declared`` frequencies."""
    declared = len(freqs) if declared is None else declared
    rows = "".join(f"{f} {THROUGH['ri']}\n" for f in freqs) if rows is None else rows
    return head + f"[Number of Frequencies] {declared}\n" + data_kw + rows + end


V2_CASES = [
    # The issue's case: 7 declared, 3 given.
    ("nfreq-7-rows-3", v2(declared=7), ("[Number of Frequencies] 7", "3 points")),
    ("nfreq-2-rows-3", v2(declared=2), ("[Number of Frequencies] 2", "3 points")),
    ("ports-1", v2(head=V2_HEAD.replace("Ports] 2", "Ports] 1")), ("[Number of Ports] 1", "expected 2")),
    ("ports-4", v2(head=V2_HEAD.replace("Ports] 2", "Ports] 4")), ("[Number of Ports] 4", "4 port")),
    ("ports-not-a-number", v2(head=V2_HEAD.replace("Ports] 2", "Ports] two")), ("'two'", "whole number")),
    ("no-network-data-keyword", v2(data_kw=""), ("data outside [Network Data]", "line 7")),
    ("no-data-at-all", v2(data_kw="", rows=""), ("no [Network Data]",)),
    (
        "no-two-port-order",
        v2(head=V2_HEAD.replace("[Two-Port Data Order] 21_12\n", "")),
        ("[Two-Port Data Order]",),
    ),
    ("bad-two-port-order", v2(head=V2_HEAD.replace("21_12", "21-12")), ("'21-12'", "12_21 or 21_12")),
    ("truncated-no-end", v2(end=""), ("no [End]", "truncated")),
    ("rows-after-end", v2() + f"3000 {THROUGH['ri']}\n", ("after [End]", "line 12")),
    (
        "duplicate-frequency",
        v2(freqs=(10, 200, 200)),
        ("200 MHz after 200 MHz", "strictly increasing", "line 10"),
    ),
    ("decreasing-frequency", v2(freqs=(10, 2000, 200)), ("200 MHz after 2000 MHz", "strictly increasing")),
    ("unit-thz", v2(head=V2_HEAD.replace("MHz", "THz")), ("'THz'", "frequency unit", "line 3")),
    ("format-xy", v2(head=V2_HEAD.replace(" RI ", " XY ")), ("'XY'", "format")),
    ("z-parameters", v2(head=V2_HEAD.replace(" S RI", " Z RI")), ("'Z' parameters", "S-parameters")),
    ("r-without-value", v2(head=V2_HEAD.replace("R 50", "R")), ("'R'", "reference impedance")),
    ("two-option-lines", v2(head=V2_HEAD + "# GHz S MA R 50\n"), ("second option line", "line 6")),
    ("version-3", v2(head=V2_HEAD.replace("2.0", "3.0")), ("[Version] '3.0'", "2.0 or 2.1")),
    ("unknown-keyword", v2(head=V2_HEAD + "[Number Of Pins] 2\n"), ("unknown keyword [Number Of Pins]",)),
    ("keyword-twice", v2(head=V2_HEAD + "[Number of Ports] 2\n"), ("[Number of Ports] appears twice",)),
    # 3 x 9 = 27 values expected; the middle row has 8 (one S-parameter value short)
    # and the file holds 26.
    (
        "value-count-26",
        v2(rows=f"10 {THROUGH['ri']}\n200 0.05 0 0.9 0 0.9 0 0.05\n2000 {THROUGH['ri']}\n"),
        ("[Number of Frequencies] 3", "26 values", "9 per point"),
    ),
    # 27 values in all, but 8 on one row and 10 on the next: the third point starts
    # in the middle of a line.
    (
        "points-misaligned",
        v2(rows=f"10 {THROUGH['ri']}\n200 0.05 0 0.9 0 0.9 0 0.05\n2000 0 {THROUGH['ri']}\n"),
        ("line 10", "middle of the line"),
    ),
    ("matrix-upper", v2(head=V2_HEAD + "[Matrix Format] Upper\n"), ("[Matrix Format] 'Upper'", "Full")),
    ("mixed-mode", v2(head=V2_HEAD + "[Mixed-Mode Order] D2,1 C2,1\n"), ("mixed-mode",)),
    (
        "zero-s21",
        v2(rows=f"10 {THROUGH['ri']}\n200 0.05 0 0 0 0.9 0 0.05 0\n2000 {THROUGH['ri']}\n"),
        ("|S21| = 0", "line 9"),
    ),
    (
        "noise-count",
        v2(head=V2_HEAD + "[Number of Noise Frequencies] 2\n"),
        ("[Number of Noise Frequencies] 2", "0 rows"),
    ),
]


@pytest.mark.parametrize(("data", "needles"), [c[1:] for c in V2_CASES], ids=[c[0] for c in V2_CASES])
def test_touchstone_2_keyword_mismatches_are_one_line(data, needles, tmp_path):
    assert_ts_refused(run_ts(tmp_path, data), tmp_path, "t.s2p", *needles)


V1_CASES = [
    # 8 values where a 2-port row holds 9 (frequency + 4 pairs).
    (
        "row-of-8",
        HEADERS["ri"] + f"10 {THROUGH['ri']}\n200 0.05 0 0.9 0 0.9 0 0.05\n",
        ("line 4", "8 values", "9"),
    ),
    (
        "data-before-option",
        f"10 {THROUGH['ri']}\n" + HEADERS["ri"] + f"200 {THROUGH['ri']}\n",
        ("line 1", "before the option line"),
    ),
    (
        "option-after-data",
        HEADERS["ri"] + f"10 {THROUGH['ri']}\n# GHz S RI R 50\n",
        ("line 4", "second option line"),
    ),
    (
        "keyword-in-v1",
        HEADERS["ri"] + "[Number of Frequencies] 2\n" + f"10 {THROUGH['ri']}\n",
        ("[Number of Frequencies]", "[Version]"),
    ),
    ("junk-in-option", "# MHz S RI R 50 ohm\n" + f"10 {THROUGH['ri']}\n", ("'ohm'", "option line")),
]


@pytest.mark.parametrize(("data", "needles"), [c[1:] for c in V1_CASES], ids=[c[0] for c in V1_CASES])
def test_touchstone_1_layout_faults_are_one_line(data, needles, tmp_path):
    assert_ts_refused(run_ts(tmp_path, data), tmp_path, "t.s2p", *needles)


def test_touchstone_2_with_12_21_order_reads_s21_from_its_column(tmp_path):
    # [Two-Port Data Order] 12_21: the values are S11, S12, S21, S22 (Touchstone 2.0
    # specification, from memory).  S21 here is 0.5 at -30 deg, S12 is 0.9: the stage
    # must see 0.5 / -30 deg at a data point, not 0.9.
    head = V2_HEAD.replace("21_12", "12_21").replace(" RI ", " MA ")
    rows = "".join(f"{f} 0.05 0 0.9 0 0.5 -30 0.05 0\n" for f in (10, 200, 2000))
    (tmp_path / "t.s2p").write_text(v2(head=head, rows=rows), encoding="utf-8")
    (tmp_path / "l.toml").write_text(filter_lineup("t.s2p"), encoding="utf-8")
    h = load(tmp_path / "l.toml").stages[0].response(np.array([200e6]))[0]
    assert abs(h) == pytest.approx(0.5, rel=1e-12)
    assert math.degrees(np.angle(h)) == pytest.approx(-30.0, abs=1e-9)


def test_touchstone_1_with_noise_parameters_loads_its_network_data(tmp_path):
    # A 2-port version 1 file may end with noise rows of 5 values, the first at a
    # frequency not above the last network frequency (Touchstone 1.1, from memory).
    data = ts_file("ma") + "! noise parameters\n10 1.2 0.3 40 0.2\n100 1.4 0.3 60 0.2\n"
    (tmp_path / "t.s2p").write_text(data, encoding="utf-8")
    (tmp_path / "l.toml").write_text(filter_lineup("t.s2p"), encoding="utf-8")
    stage = load(tmp_path / "l.toml").stages[0]
    assert stage.data_range_hz == (10e6, 2000e6)
    assert abs(stage.response(np.array([100e6]))[0]) == pytest.approx(0.9, rel=1e-12)


def test_a_reader_that_drops_a_point_is_caught(tmp_path, monkeypatch):
    # The pre-check's reading and scikit-rf's must agree: a reader that quietly skips a
    # row (as skrf 2.2 does with rows past a frequency that does not increase) is an
    # error, not a shorter table.
    import skrf

    real = skrf.Network
    monkeypatch.setattr(skrf, "Network", lambda *a, **k: real(*a, **k)[:-1])
    result = run_ts(tmp_path, ts_file("ri"))
    monkeypatch.undo()
    assert_ts_refused(result, tmp_path, "t.s2p", "scikit-rf read 4 points", "holds 5")


# --- Part 2: output targets -------------------------------------------------------------------------

PA = '[[stage]]\nkind = "amplifier"\nname = "pa"\ngain = "10 dB"\noip3 = "+30 dBm"\n'
MASKED = (
    "# invented test lineup\n"
    + CARRIER_100
    + PA
    + '[mask]\nuse = ["itu-sm329-cat-a"]\n[analysis]\nmax_order = 10\n'
)
# Fails its mask (invented): remedy finds a filter for it.
FAILING = (
    "# invented test lineup\n"
    '[[carrier]]\nfreq = "150 MHz"\npower = "+10 dBm"\n'
    '[[stage]]\nkind = "amplifier"\nname = "pa"\ngain = "26 dB"\n'
    'h2 = "-35 dBc @ +36 dBm"\npsat = "+40 dBm"\n'
    '[mask]\nuse = ["itu-sm329-cat-a"]\n'
)
PROTO = ["filter", "--family", "butterworth", "--order", "5", "--cutoff", "200 MHz"]


def writer_args(which: str, folder: Path, target: str) -> list[str]:
    """The command line of each writer, with ``target`` as its output."""
    (folder / "masked.toml").write_text(MASKED, encoding="utf-8")
    (folder / "failing.toml").write_text(FAILING, encoding="utf-8")
    lineup = str(folder / "masked.toml")
    return {
        "check-plot": ["check", lineup, "--plot", target],
        "filter-touchstone": [*PROTO, "--touchstone", target],
        "filter-plot": [*PROTO, "--plot", target],
        "report": ["report", lineup, "-o", target],
        "remedy-write": ["remedy", str(folder / "failing.toml"), "--write", target],
        "drive-plot": ["drive", lineup, "--start", "-10 dBm", "--stop", "0 dBm", "--plot", target],
        "yield-plot": ["yield", lineup, "--samples", "10", "--plot", target],
    }[which]


WRITERS = [
    "check-plot",
    "filter-touchstone",
    "filter-plot",
    "report",
    "remedy-write",
    "drive-plot",
    "yield-plot",
]


def _suffix(which: str) -> str:
    return {"filter-touchstone": ".s2p", "report": ".html", "remedy-write": ".toml"}.get(which, ".png")


def _listing(folder: Path) -> dict[str, tuple[int, int]]:
    """Every name under ``folder`` with its file type and size (what must not change)."""
    out = {}
    for p in sorted(folder.rglob("*")):
        st_ = os.lstat(p)
        out[str(p.relative_to(folder))] = (stat.S_IFMT(st_.st_mode), st_.st_size)
    return out


def _device_node(folder: Path) -> Path:
    """A character device to write onto: a copy of /dev/null's node (root), else /dev/null
    itself (which a user other than root cannot replace, so a failing test harms nothing)."""
    if os.geteuid() != 0:
        return Path("/dev/null")
    node = folder / "null-node"
    os.mknod(node, stat.S_IFCHR | 0o666, os.makedev(1, 3))
    return node


def _hostile(kind: str, folder: Path, suffix: str) -> tuple[str, tuple[str, ...]]:
    """Make a hostile target of ``kind`` in ``folder``; returns it and what the error line must say."""
    if kind == "fifo":
        os.mkfifo(folder / f"pipe{suffix}")
        return str(folder / f"pipe{suffix}"), ("named pipe",)
    if kind == "socket":
        path = folder / f"s{suffix}"
        sock = socket.socket(socket.AF_UNIX, socket.SOCK_STREAM)
        sock.bind(str(path))
        sock.close()  # the socket file stays
        return str(path), ("socket",)
    if kind == "device":
        node = _device_node(folder)
        return str(node), ("character device",)
    if kind == "folder":
        (folder / f"d{suffix}").mkdir()
        return str(folder / f"d{suffix}"), ("directory",)  # click.Path's own words
    if kind == "trailing-slash":
        return str(folder / "out") + "/", ("names a folder",)
    if kind == "missing-folder":
        return str(folder / "nowhere" / f"x{suffix}"), ("does not exist",)
    if kind == "symlink":
        (folder / "real.txt").write_text("a file of the user's\n", encoding="utf-8")
        os.symlink(folder / "real.txt", folder / f"link{suffix}")
        return str(folder / f"link{suffix}"), ("symbolic link",)
    raise AssertionError(kind)


HOSTILE = ["fifo", "socket", "device", "folder", "trailing-slash", "missing-folder", "symlink"]


@pytest.mark.parametrize("kind", HOSTILE)
@pytest.mark.parametrize("which", WRITERS)
def test_every_writer_refuses_a_target_that_is_not_a_regular_file(which, kind, tmp_path):
    out = tmp_path / "out-folder"
    out.mkdir()
    target, says = _hostile(kind, out, _suffix(which))
    args = writer_args(which, tmp_path, target)
    before = _listing(tmp_path)
    device_before = os.lstat(target) if kind == "device" else None
    code, stdout, err, detail, seconds = run_in_process(args)
    line = assert_one_error_line(code, stdout, err, (*says,), detail=detail)
    assert target.rstrip("/").split("/")[-1] in line
    assert seconds < 10
    assert _listing(tmp_path) == before, "something was written, replaced or left behind"
    if device_before is not None:
        after = os.lstat(target)
        assert stat.S_ISCHR(after.st_mode) and after.st_rdev == device_before.st_rdev
    assert not (out / "out").exists()  # 'out/' must not become a file named 'out'


@pytest.mark.parametrize("kind", HOSTILE)
def test_write_atomic_itself_refuses_them(kind, tmp_path):
    # The root fix is in the writer, whatever the caller (a library user, a new command).
    target, says = _hostile(kind, tmp_path, ".bin")
    before = _listing(tmp_path)
    with pytest.raises(OutputError) as caught:
        write_atomic(target, b"data")
    assert len(str(caught.value).splitlines()) == 1
    if kind != "folder":
        assert says[0] in str(caught.value)
    assert _listing(tmp_path) == before


def test_save_figure_refuses_before_rendering(tmp_path, monkeypatch):
    # A bad target is refused before the (slow) rendering: savefig is never reached.
    import matplotlib.figure

    os.mkfifo(tmp_path / "p.png")
    rendered = []
    monkeypatch.setattr(matplotlib.figure.Figure, "savefig", lambda *a, **k: rendered.append(1))
    with pytest.raises(OutputError, match="named pipe"):
        save_figure(matplotlib.figure.Figure(), tmp_path / "p.png")
    assert rendered == []


def test_check_target_names_dev_null_without_touching_it():
    with pytest.raises(OutputError, match="character device"):
        check_target("/dev/null")
    assert stat.S_ISCHR(os.stat("/dev/null").st_mode)


def test_new_files_get_the_usual_permissions(tmp_path):
    # 0666 less the umask, as open(2) gives (POSIX creat semantics): here umask 027 -> 0640.
    old = os.umask(0o027)
    try:
        write_atomic(tmp_path / "a.txt", "x")
    finally:
        os.umask(old)
    assert stat.S_IMODE(os.stat(tmp_path / "a.txt").st_mode) == 0o640


@pytest.mark.parametrize("how", ["no-flag", "not-supported"])
def test_named_temporary_fallback_works_and_leaves_nothing(how, tmp_path, monkeypatch):
    # Where O_TMPFILE is missing (other systems) or refused by the file system
    # (EOPNOTSUPP, open(2) man page), the named temporary file is used instead.
    import errno

    import spurplan.output.files as outputs

    if how == "no-flag":
        monkeypatch.delattr(outputs.os, "O_TMPFILE", raising=False)
    else:
        if not hasattr(os, "O_TMPFILE"):
            pytest.skip("no O_TMPFILE on this system: the no-flag case covers it")
        real_open, refused = os.open, []

        def refusing(path, flags, *a, **k):
            if flags & os.O_TMPFILE == os.O_TMPFILE:
                refused.append(path)
                raise OSError(errno.EOPNOTSUPP, os.strerror(errno.EOPNOTSUPP))
            return real_open(path, flags, *a, **k)

        monkeypatch.setattr(outputs.os, "open", refusing)
    old = os.umask(0o022)
    try:
        write_atomic(tmp_path / "a.txt", "first")
        write_atomic(tmp_path / "a.txt", "second")
    finally:
        os.umask(old)
    assert (tmp_path / "a.txt").read_text() == "second"
    assert how == "no-flag" or len(refused) == 2
    assert stat.S_IMODE(os.stat(tmp_path / "a.txt").st_mode) == 0o644
    assert sorted(p.name for p in tmp_path.iterdir()) == ["a.txt"]


def _run_as_a_user(args: list[str]) -> tuple:
    """Run the CLI without the power to write into read-only folders.

    In-process for a user other than root.  Root has CAP_DAC_OVERRIDE (capabilities(7)),
    so as root the CLI runs as a subprocess with that capability and
    CAP_DAC_READ_SEARCH dropped (setpriv(1)); without setpriv the test is skipped,
    since a read-only folder cannot fail for root.
    """
    if os.geteuid() != 0:
        return run_in_process(args)
    setpriv = shutil.which("setpriv")
    if setpriv is None:
        pytest.skip("running as root without setpriv: a read-only folder cannot fail")
    drop = "-dac_override,-dac_read_search"
    t0 = time.perf_counter()
    proc = subprocess.run(
        [
            setpriv,
            "--bounding-set",
            drop,
            "--inh-caps",
            drop,
            "--",
            sys.executable,
            "-m",
            "spurplan.cli",
            *args,
        ],
        capture_output=True,
        text=True,
        timeout=60,
        env=dict(os.environ, OPENBLAS_NUM_THREADS="1", OMP_NUM_THREADS="1"),
    )
    if "setpriv:" in proc.stderr:
        pytest.skip(f"setpriv cannot drop capabilities here: {proc.stderr.strip()[:200]}")
    return proc.returncode, proc.stdout, proc.stderr, "", time.perf_counter() - t0


@pytest.mark.parametrize("which", ["check-plot", "filter-touchstone", "report", "remedy-write"])
@pytest.mark.slow
def test_read_only_folder_is_one_line(which, tmp_path):
    ro = tmp_path / "ro"
    ro.mkdir()
    target = ro / f"x{_suffix(which)}"
    args = writer_args(which, tmp_path, str(target))
    if which == "remedy-write":  # the lineup and its new version in one folder
        (ro / "failing.toml").write_text(FAILING, encoding="utf-8")
        args[1] = str(ro / "failing.toml")
    ro.chmod(0o555)
    try:
        before = _listing(tmp_path)
        code, out, err, detail, seconds = _run_as_a_user(args)
        assert_one_error_line(
            code, out, err, (str(target), "Permission denied"), detail=detail, notes_ok=True
        )
        assert seconds < 10
        assert _listing(tmp_path) == before
    finally:
        ro.chmod(0o755)


# --- the Markdown report and its _files folder --------------------------------------------------------


def _md_report(tmp_path: Path, name: str = "r.md"):
    (tmp_path / "masked.toml").write_text(MASKED, encoding="utf-8")
    return run_in_process(["report", str(tmp_path / "masked.toml"), "-o", str(tmp_path / name)])


@pytest.mark.parametrize("clash", ["file", "symlink", "foreign-file", "subfolder", "fifo-inside"])
def test_clashing_files_folder_is_one_line_and_nothing_is_written(clash, tmp_path):
    files = tmp_path / "r_files"
    if clash == "file":
        files.write_text("the user's notes\n", encoding="utf-8")
    elif clash == "symlink":
        (tmp_path / "elsewhere").mkdir()
        os.symlink(tmp_path / "elsewhere", files)
    else:
        files.mkdir()
        (files / "figure-1.png").write_bytes(b"an earlier figure")
        if clash == "foreign-file":
            (files / "notes.txt").write_text("the user's notes\n", encoding="utf-8")
        elif clash == "subfolder":
            (files / "figure-2.png").mkdir()
        else:
            os.mkfifo(files / "figure-3.png")
    (tmp_path / "masked.toml").write_text(MASKED, encoding="utf-8")
    before = _listing(tmp_path)
    code, out, err, detail, seconds = run_in_process(
        ["report", str(tmp_path / "masked.toml"), "-o", str(tmp_path / "r.md")]
    )
    assert_one_error_line(code, out, err, (str(files),), detail=detail)
    assert seconds < 10
    assert _listing(tmp_path) == before


@pytest.mark.parametrize("where", ["files-folder", "report-folder"])
@pytest.mark.slow
def test_read_only_folders_of_a_markdown_report_are_one_line(where, tmp_path):
    # A read-only r_files (from an earlier report), or a read-only folder for the report.
    home = tmp_path / "reports"
    home.mkdir()
    files = home / "r_files"
    files.mkdir()
    (files / "figure-1.png").write_bytes(b"an earlier figure")
    (tmp_path / "masked.toml").write_text(MASKED, encoding="utf-8")
    locked = files if where == "files-folder" else home
    locked.chmod(0o555)
    try:
        before = _listing(tmp_path)
        code, out, err, detail, _ = _run_as_a_user(
            ["report", str(tmp_path / "masked.toml"), "-o", str(home / "r.md")]
        )
        says = (
            (str(files), "read-only")
            if where == "files-folder"
            else (str(home / "r.md"), "Permission denied")
        )
        assert_one_error_line(code, out, err, says, detail=detail)
        assert _listing(tmp_path) == before
    finally:
        locked.chmod(0o755)


def test_markdown_report_replaces_its_own_earlier_folder_whole(tmp_path):
    # The control: an earlier report's folder (figures only) is replaced as a whole,
    # a stale figure with it; nothing hidden is left.
    files = tmp_path / "r_files"
    files.mkdir()
    (files / "figure-1.png").write_bytes(b"an earlier figure")
    (files / "figure-9.png").write_bytes(b"a stale figure")
    code, _, err, detail, _ = _md_report(tmp_path)
    assert code == 0, err + detail
    names = sorted(p.name for p in files.iterdir())
    assert names and "figure-9.png" not in names
    assert (files / "figure-1.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (PNG spec)
    text = (tmp_path / "r.md").read_text(encoding="utf-8")
    assert all(f"r_files/{n}" in text for n in names)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["masked.toml", "r.md", "r_files"]


@pytest.mark.parametrize("step", ["folder-rename", "text-rename"])
@pytest.mark.slow
def test_interrupted_markdown_report_keeps_the_earlier_one(step, tmp_path, monkeypatch):
    # Ctrl-C at the folder's rename or at the text's: the earlier report (text and
    # figures) is as it was, and no hidden folder or file is left.
    import spurplan.output.files as outputs

    files = tmp_path / "r_files"
    files.mkdir()
    (files / "figure-1.png").write_bytes(b"an earlier figure")
    (tmp_path / "r.md").write_text("an earlier report\n", encoding="utf-8")
    (tmp_path / "masked.toml").write_text(MASKED, encoding="utf-8")
    before = {p: (tmp_path / p).read_bytes() for p in ("r.md", "r_files/figure-1.png")}
    hit = []
    real_rename, real_replace = os.rename, os.replace

    def rename(src, dst, *a, **k):
        if step == "folder-rename" and Path(dst) == files and str(src).endswith(".part"):
            hit.append(src)
            raise KeyboardInterrupt
        return real_rename(src, dst, *a, **k)

    def replace(src, dst, *a, **k):
        if step == "text-rename" and Path(dst) == tmp_path / "r.md":
            hit.append(src)
            raise KeyboardInterrupt
        return real_replace(src, dst, *a, **k)

    monkeypatch.setattr(outputs.os, "rename", rename)
    monkeypatch.setattr(outputs.os, "replace", replace)
    code, _, err, detail, _ = run_in_process(
        ["report", str(tmp_path / "masked.toml"), "-o", str(tmp_path / "r.md")]
    )
    monkeypatch.undo()
    assert hit, "the report did not go through spurplan.output.files"
    assert code == 130, err + detail
    assert {p: (tmp_path / p).read_bytes() for p in before} == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["masked.toml", "r.md", "r_files"]
    assert sorted(p.name for p in files.iterdir()) == ["figure-1.png"]


# --- SIGKILL during a write ---------------------------------------------------------------------------

# The child stalls inside its N-th write of an output file, after half the bytes
# have reached the file, and says so by creating a sentinel file outside the output
# folder; the test then kills it with SIGKILL (signal(7): cannot be caught).
CHILD = textwrap.dedent(
    """
    import os, sys, time
    sentinel, nth, args = sys.argv[1], int(sys.argv[2]), sys.argv[3:]
    real_fdopen = os.fdopen
    calls = [0]

    class Stall:
        def __init__(self, handle):
            self.handle = handle
        def write(self, data):
            calls[0] += 1
            if calls[0] < nth:
                return self.handle.write(data)
            self.handle.write(bytes(data[: max(1, len(data) // 2)]))
            self.handle.flush()
            open(sentinel, "w").close()
            time.sleep(120)
        def __enter__(self):
            return self
        def __exit__(self, *exc):
            self.handle.close()
            return False

    def fdopen(fd, mode="r", *a, **k):
        handle = real_fdopen(fd, mode, *a, **k)
        return Stall(handle) if "w" in mode else handle

    import spurplan.output.files
    spurplan.output.files.os.fdopen = fdopen
    from spurplan.cli import main
    main(args, prog_name="spurplan")
    """
)


def _tmpfile_supported(folder: Path) -> bool:
    flag = getattr(os, "O_TMPFILE", None)
    if flag is None:
        return False
    try:
        os.close(os.open(folder, flag | os.O_WRONLY, 0o666))
    except OSError:
        return False
    return True


@pytest.mark.parametrize(
    ("output", "nth", "earlier"),
    [
        ("r.html", 1, False),
        ("r.html", 1, True),
        ("r.md", 1, False),  # during the first figure
        ("r.md", 2, True),  # during the text, over an earlier report
        ("plot.png", 1, False),
    ],
    ids=["html-new", "html-over-earlier", "md-figure", "md-text-over-earlier", "check-plot"],
)
@pytest.mark.slow
def test_sigkill_during_a_write_leaves_nothing_behind(output, nth, earlier, tmp_path):
    out = tmp_path / "out"
    out.mkdir()
    if not _tmpfile_supported(out):
        pytest.skip("no O_TMPFILE here: the named temporary file is used (DEVELOPERS.md)")
    (tmp_path / "masked.toml").write_text(MASKED, encoding="utf-8")
    if earlier:
        (out / output).write_text("an earlier output\n", encoding="utf-8")
        if output.endswith(".md"):
            (out / "r_files").mkdir()
            (out / "r_files" / "figure-1.png").write_bytes(b"an earlier figure")
    before = {p: (out / p).read_bytes() for p in _listing(out) if (out / p).is_file()}
    listing = _listing(out)
    sentinel = tmp_path / "stalled"
    command = ["report", str(tmp_path / "masked.toml"), "-o", str(out / output)]
    if output.endswith(".png"):
        command = ["check", str(tmp_path / "masked.toml"), "--plot", str(out / output)]
    env = dict(os.environ, OPENBLAS_NUM_THREADS="1", OMP_NUM_THREADS="1")
    child = subprocess.Popen(
        [sys.executable, "-c", CHILD, str(sentinel), str(nth), *command],
        stdout=subprocess.DEVNULL,
        stderr=subprocess.PIPE,
        env=env,
    )
    try:
        deadline = time.monotonic() + 8
        while not sentinel.exists():
            assert child.poll() is None, child.stderr.read().decode()
            assert time.monotonic() < deadline, "the child never reached its write"
            time.sleep(0.01)
        os.kill(child.pid, signal.SIGKILL)
        child.wait(timeout=10)
    finally:
        if child.poll() is None:
            child.kill()
            child.wait()
        child.stderr.close()
    assert child.returncode == -signal.SIGKILL
    assert _listing(out) == listing, "a file or folder was left behind or changed"
    assert {p: (out / p).read_bytes() for p in before} == before


@pytest.mark.parametrize("delay_s", [0.4, 0.8, 1.2])
@pytest.mark.slow
def test_sigkill_at_a_moment_leaves_the_whole_report_or_nothing(delay_s, tmp_path):
    # No patching: the real command, killed at some moment of its run.  Whatever the
    # moment, the folder holds nothing new, or the whole report (an HTML file ends
    # with its closing tag, HTML Living Standard) and nothing else.
    out = tmp_path / "out"
    out.mkdir()
    (tmp_path / "masked.toml").write_text(MASKED, encoding="utf-8")
    env = dict(os.environ, OPENBLAS_NUM_THREADS="1", OMP_NUM_THREADS="1")
    child = subprocess.Popen(
        [
            sys.executable,
            "-m",
            "spurplan.cli",
            "report",
            str(tmp_path / "masked.toml"),
            "-o",
            str(out / "r.html"),
        ],
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
        env=env,
    )
    time.sleep(delay_s)
    child.send_signal(signal.SIGKILL)
    child.wait(timeout=30)
    names = sorted(p.name for p in out.iterdir())
    assert names in ([], ["r.html"]), names
    if names:
        assert (out / "r.html").read_text(encoding="utf-8").endswith("</html>\n")
