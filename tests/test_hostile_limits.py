"""Hostile input, tracebacks and hangs: every input is read as data with limits, and the work
a command accepts is bounded before it starts.

The contract (README, "Bad input gives one line ..." and "Limits"): exit status 2 (130
for an interrupt), no traceback, one ``spurplan: error:`` line naming the file or
option, the value and the limit; nothing hangs (every case here runs under a timeout
well below 10 s) and nothing is written.

* Input files (``spurplan.fields.read_text_file``): only regular files are opened, so a
  named pipe, ``/dev/zero``, ``/dev/urandom``, a socket or a folder is refused from
  ``os.stat`` without a read that could block or never end; TOML files are at most 1 MiB
  and 32 levels deep (tomllib recurses on nested arrays), channel files at most 8 MiB
  and 200,000 channels; bytes must be UTF-8 without NUL.
* Value strings (``spurplan.units``): at most 200 characters, and the patterns that read
  them take linear time (the earlier ones backtracked on runs of spaces).
* ``yield``: seeds 0 to 2^64 - 1 (numpy seeds are non-negative: numpy.random.SeedSequence
  documentation, from memory), at most 10^8 evaluated points, scheduler addresses of the
  form tcp://HOST:PORT, an answer as a dask scheduler within 3 s, and Ctrl-C as one line
  with exit status 130.
* Stages: at most 200, and attribution linear in their number.
* Engine work: sweeps and yield runs at most 10^10 grid points.

Network cases talk only to 127.0.0.1 servers that the test itself starts, each bounded
in the connections it accepts and in time.  Every lineup, rule file and channel file
below is invented for these tests.
"""

from __future__ import annotations

import contextlib
import json
import os
import signal
import socket
import subprocess
import sys
import threading
import time
from pathlib import Path

import numpy as np
import pytest
from helpers import assert_one_error_line, run_cli, run_in_process

from spurplan.engine.torus import Propagation
from spurplan.model.stages.mixer import parse_spur_label
from spurplan.units import _QUANTITY, parse_freq_hz

# Each subprocess case must end well before 10 s (the bound); in-process cases
# are faster still.
TIMEOUT_S = 9.0
QUICK_S = 5.0

CARRIER = '[[carrier]]\nfreq = "100 MHz"\npower = "0 dBm"\n'
PA = '[[stage]]\nkind = "amplifier"\nname = "pa"\ngain = "20 dB"\nh2 = "-40 dBc @ +20 dBm"\n'
MASK = '[[mask.rule]]\nname = "flat"\nstart = "9 kHz"\nstop = "10 GHz"\nlimit = "-21 dBm"\n'

# An invented amplifier whose second harmonic spreads (yield), checked against a flat
# limit; max_order 3 keeps the run small.
YIELD_LINEUP = (
    "# invented test lineup\n"
    + CARRIER
    + PA
    + 'tolerance = { ohip2 = "2 dB" }\n'
    + MASK
    + "[analysis]\nmax_order = 3\n"
)

# An invented three-tone lineup (two carriers and a mixer) at order 13: about 1.7
# million grid points per evaluation, so a long sweep of it exceeds the work budget.
HEAVY_LINEUP = (
    "# invented test lineup\n"
    '[[carrier]]\nfreq = "10 MHz"\npower = "-20 dBm"\n'
    '[[carrier]]\nfreq = "10.1 MHz"\npower = "-20 dBm"\n'
    '[[stage]]\nkind = "mixer"\nname = "mix"\nlo = { freq = "400 MHz", power = "+7 dBm" }\n'
    'conversion_loss = "7 dB"\n'
    '[[stage]]\nkind = "amplifier"\nname = "pa"\ngain = "20 dB"\noip3 = "+30 dBm"\np1db = "+20 dBm"\n'
    '[mask]\nuse = ["itu-sm329-cat-a"]\n'
    "[analysis]\nmax_order = 13\n"
)


def _write(tmp_path: Path, name: str, text: str) -> Path:
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def _proc(args, cwd, needles=(), names=None, timeout=TIMEOUT_S, notes_ok=False, limit_memory=False) -> str:
    """Run the command as a real process under ``timeout``; the one-line contract; returns the line."""
    t0 = time.monotonic()
    r = run_cli([str(a) for a in args], cwd=cwd, timeout=timeout, limit_memory=limit_memory)
    assert time.monotonic() - t0 < timeout
    return assert_one_error_line(r.returncode, r.stdout, r.stderr, needles, names=names, notes_ok=notes_ok)


def _inproc(args, needles=(), names=None) -> str:
    """Run the command in process; the one-line contract, within QUICK_S; returns the line."""
    code, out, err, detail, seconds = run_in_process([str(a) for a in args])
    line = assert_one_error_line(code, out, err, needles, names=names, detail=detail)
    assert seconds < QUICK_S, f"took {seconds:.1f} s"
    return line


def _listing(folder: Path) -> list[str]:
    return sorted(p.name for p in folder.iterdir())


# --- input files: regular files only, bounded reads ------------------------------------------------


@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="no named pipes here")
@pytest.mark.parametrize("command", [["check"], ["spectrum"], ["budget"]])
@pytest.mark.slow
def test_a_named_pipe_as_lineup_is_refused_without_blocking(tmp_path, command):
    # Nothing ever writes to the pipe: a blocking open or read would hang until the timeout.
    os.mkfifo(tmp_path / "l.toml")
    _proc([*command, "l.toml"], tmp_path, ("named pipe", "regular file"), names="l.toml")


@pytest.mark.parametrize("device", ["/dev/zero", "/dev/urandom"])
@pytest.mark.slow
def test_an_endless_device_as_lineup_is_refused_without_reading_it(tmp_path, device):
    if not os.path.exists(device):
        pytest.skip(f"no {device} here")
    # Read whole, /dev/zero is 3.4 GB before MemoryError (the issue); the 2 GiB address
    # space limit of run_cli would turn any such read into a failure of this test.
    _proc(["check", device], tmp_path, ("character device", "regular file"), names=device, limit_memory=True)


@pytest.mark.skipif(not hasattr(socket, "AF_UNIX"), reason="no Unix sockets here")
@pytest.mark.slow
def test_a_socket_as_lineup_is_refused(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)  # a short relative name: socket paths are limited to ~100 bytes
    with socket.socket(socket.AF_UNIX, socket.SOCK_STREAM) as server:
        server.bind("l.toml")
        _proc(["check", "l.toml"], tmp_path, ("socket", "regular file"), names="l.toml")


@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="no named pipes here")
def test_a_named_pipe_as_channel_file_is_refused_without_blocking(tmp_path):
    _write(tmp_path, "l.toml", "# invented test lineup\n" + CARRIER + PA + MASK)
    os.mkfifo(tmp_path / "ch.txt")
    _proc(
        ["tune", "l.toml", "--channels", "ch.txt"], tmp_path, ("named pipe", "regular file"), names="ch.txt"
    )


@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="no named pipes here")
@pytest.mark.slow
def test_a_named_pipe_as_rule_file_is_refused_without_blocking(tmp_path):
    _write(tmp_path, "l.toml", "# invented test lineup\n" + CARRIER + PA + '[mask]\nfiles = ["rules.toml"]\n')
    os.mkfifo(tmp_path / "rules.toml")
    _proc(["check", "l.toml"], tmp_path, ("'rules.toml'", "named pipe", "regular file"), names="l.toml")


def test_a_folder_as_channel_file_is_refused(tmp_path):
    _write(tmp_path, "l.toml", "# invented test lineup\n" + CARRIER + PA + MASK)
    (tmp_path / "ch").mkdir()
    _inproc(["tune", tmp_path / "l.toml", "--channels", tmp_path / "ch"], ("ch",))


def test_a_lineup_over_the_size_limit_is_refused_before_it_is_read(tmp_path):
    # 1 MiB + 1 byte of TOML comment: valid TOML, one byte over the limit (README, "Limits").
    path = tmp_path / "l.toml"
    path.write_bytes(b"#" + b"x" * (1 << 20) + b"\n")
    line = _inproc(["check", path], ("1 MiB",), names=path)
    assert "at most" in line


@pytest.mark.parametrize(
    "value",
    [
        "[" * 5000 + "]" * 5000,  # tomllib recurses once per level: RecursionError
        "{ a = " * 3000 + "1" + " }" * 3000,
        "[" * 40 + "]" * 40,  # parses, but deeper than any lineup (32 levels)
    ],
    ids=["arrays-5000", "inline-tables-3000", "arrays-40"],
)
def test_deeply_nested_toml_is_one_line(tmp_path, value):
    path = _write(tmp_path, "l.toml", "# invented test lineup\n" + CARRIER + f"deep = {value}\n")
    _inproc(["check", path], ("nested deeper than 32 levels",), names=path)


@pytest.mark.parametrize(
    ("data", "needle"),
    [
        (b'[lineup]\nname = "caf\xe9 (Latin-1, invented)"\n', "not UTF-8"),
        (b'[lineup]\nname = "x"\x00\n', "NUL byte"),
        (b"\xff\xfe[\x00l\x00i\x00n\x00e\x00u\x00p\x00]\x00", "NUL byte"),  # UTF-16 with its BOM
    ],
    ids=["latin-1", "nul", "utf-16"],
)
def test_a_lineup_that_is_not_utf8_text_is_one_line(tmp_path, data, needle):
    path = tmp_path / "l.toml"
    path.write_bytes(data)
    _inproc(["check", path], (needle,), names=path)


@pytest.mark.parametrize(
    ("data", "needle"),
    [(b"462.5625 MHz\n\x00\x01\x02\n", "NUL byte"), (b"462.5625 MHz\n\xc3\x28 MHz\n", "not UTF-8")],
    ids=["nul", "bad-utf8"],
)
def test_a_binary_channel_file_is_one_line(tmp_path, data, needle):
    _write(tmp_path, "l.toml", "# invented test lineup\n" + CARRIER + PA + MASK)
    (tmp_path / "ch.txt").write_bytes(data)
    _inproc(["tune", tmp_path / "l.toml", "--channels", tmp_path / "ch.txt"], (needle,), names="ch.txt")


@pytest.mark.slow
def test_a_channel_file_with_too_many_channels_stops_at_the_limit(tmp_path):
    # 1,000,000 lines: reading stops at channel 200,001 (README, "Limits") instead of
    # parsing them all first.
    _write(tmp_path, "l.toml", "# invented test lineup\n" + CARRIER + PA + MASK)
    (tmp_path / "ch.txt").write_text("1 MHz\n" * 1_000_000, encoding="ascii")
    line = _proc(["tune", "l.toml", "--channels", "ch.txt"], tmp_path, ("200000",), names="ch.txt")
    assert "at most" in line


def test_a_channel_file_over_the_size_limit_is_refused(tmp_path):
    _write(tmp_path, "l.toml", "# invented test lineup\n" + CARRIER + PA + MASK)
    (tmp_path / "ch.txt").write_bytes(b"# comment\n" * ((8 << 20) // 10 + 1))  # just over 8 MiB
    _inproc(["tune", tmp_path / "l.toml", "--channels", tmp_path / "ch.txt"], ("8 MiB",), names="ch.txt")


# --- value strings: bounded length, linear patterns -----------------------------------------------


@pytest.mark.parametrize(
    "value",
    ["1 M" + " " * 200_000 + "Hz", " " * 200_000 + "100 MHz", "1" * 200_000 + " MHz"],
    ids=["spaces-in-unit", "leading-spaces", "digits"],
)
def test_a_200k_character_value_is_one_line_at_once(tmp_path, value):
    # The earlier pattern took 20 s at 64k characters and minutes at 200k (the issue).
    text = "# invented test lineup\n" + CARRIER.replace('"100 MHz"', f'"{value}"') + PA + MASK
    path = _write(tmp_path, "l.toml", text)
    line = _inproc(["check", path], ("carrier 1", "field 'freq'", "at most 200 characters"), names=path)
    assert len(line) < 1000  # the value is quoted by its start, not whole


@pytest.mark.parametrize(
    "text",
    ["1 M" + " " * 200_000 + "Hz!", "1" * 200_000 + " -", "1 " + "M " * 100_000 + "\n" * 10],
    ids=["spaces", "digits", "alternating"],
)
def test_the_quantity_pattern_itself_is_linear(text):
    # The pattern, without the length cap in front of it: 200k characters in well under a
    # second (a quadratic pattern needs minutes here; measured on the earlier one).
    t0 = time.perf_counter()
    _QUANTITY.fullmatch(text.strip())
    assert time.perf_counter() - t0 < 1.0


def test_a_value_at_the_length_limit_still_parses():
    # 200 characters: the limit is inclusive (README, "Limits"); the value is 455 MHz.
    text = "455 MHz".ljust(200)
    assert len(text) == 200
    assert parse_freq_hz(text) == 455e6


def test_a_mixer_spur_label_of_200k_spaces_is_one_line_at_once(tmp_path):
    # The earlier spur-label pattern took 82 s for 500 spaces (measured).
    t0 = time.perf_counter()
    with pytest.raises(ValueError):
        parse_spur_label(" " * 200_000 + "x")
    with pytest.raises(ValueError):
        parse_spur_label("LO" + " " * 200_000 + "x")
    assert time.perf_counter() - t0 < 1.0
    assert parse_spur_label("2 LO - IF") == (2, -1)  # spaces between the parts still read
    mixer = (
        '[[stage]]\nkind = "mixer"\nname = "mix"\nlo = { freq = "400 MHz", power = "+7 dBm" }\n'
        f'conversion_loss = "7 dB"\nspur_drive = "-10 dBm"\nspurs = {{ "{" " * 200_000}x" = "-40 dBc" }}\n'
    )
    path = _write(tmp_path, "l.toml", "# invented test lineup\n" + CARRIER + mixer + MASK)
    _inproc(["check", path], ("field 'spurs'",), names=path)


# --- yield: seeds, budgets, schedulers, interrupts ------------------------------------------------


@pytest.mark.parametrize("seed", ["-1", "-9223372036854775808", str(2**64)])
def test_an_out_of_range_seed_is_one_line_and_writes_nothing(tmp_path, seed):
    path = _write(tmp_path, "l.toml", YIELD_LINEUP)
    before = _listing(tmp_path)
    _inproc(
        ["yield", path, "--samples", "100", "--seed", seed, "--plot", tmp_path / "h.png"], ("--seed", seed)
    )
    assert _listing(tmp_path) == before


def test_the_library_refuses_a_negative_seed_as_well(tmp_path):
    from spurplan.analyses.montecarlo import YieldError, run_yield
    from spurplan.io.lineup_file import load

    lineup = load(_write(tmp_path, "l.toml", YIELD_LINEUP))
    with pytest.raises(YieldError, match="non-negative"):
        run_yield(lineup, 100, seed=-1)


def test_samples_times_channels_beyond_the_budget_is_refused_before_any_work(tmp_path):
    # 10^7 samples x 200,000 channels was accepted (the issue); 10^6 x 200 = 2 x 10^8 is
    # already twice the budget of 10^8 evaluated points (README, "Limits").
    path = _write(tmp_path, "l.toml", YIELD_LINEUP)
    (tmp_path / "ch.txt").write_text("".join(f"{100 + i * 0.01:.2f} MHz\n" for i in range(200)), "ascii")
    line = _inproc(
        ["yield", path, "--samples", "1000000", "--channels", tmp_path / "ch.txt"], ("200 channels", "1e+08")
    )
    assert "2e+08" in line


def test_corners_count_in_the_yield_budget(tmp_path):
    corners = "".join(f'[[corner]]\nname = "c{i}"\nshift = {{ "pa.gain" = "0.{i} dB" }}\n' for i in range(20))
    path = _write(tmp_path, "l.toml", YIELD_LINEUP + corners)
    _inproc(["yield", path, "--samples", "10000000"], ("20 corners", "1e+08"))


@pytest.mark.parametrize(
    "address", ["", "   ", "tcp://", "http://127.0.0.1:8786", "127.0.0.1:99999", "inproc://x", "::::"]
)
def test_a_malformed_scheduler_address_is_one_line(tmp_path, address):
    # '' ran in process before (the issue): an empty option is an error, not "no scheduler".
    path = _write(tmp_path, "l.toml", YIELD_LINEUP)
    _inproc(
        ["yield", path, "--samples", "100", "--scheduler", address], ("--scheduler", "tcp://127.0.0.1:8786")
    )


class _LoopbackServer:
    """A TCP server on 127.0.0.1 that this test starts: it accepts at most ``max_accepts``
    connections within ``lifetime_s``, sends ``payload`` on each and holds it open for
    ``hold_s`` (or until the server stops), then closes."""

    def __init__(self, payload: bytes, hold_s: float, max_accepts: int = 4, lifetime_s: float = 8.0):
        self.payload, self.hold_s, self.max_accepts, self.lifetime_s = (
            payload,
            hold_s,
            max_accepts,
            lifetime_s,
        )
        self.sock = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
        self.sock.bind(("127.0.0.1", 0))
        self.sock.listen(4)
        self.sock.settimeout(0.1)
        self.port = self.sock.getsockname()[1]
        self.stop = threading.Event()
        self.accepted = 0
        self.thread = threading.Thread(target=self._serve, daemon=True)

    def _serve(self):
        end = time.monotonic() + self.lifetime_s
        conns = []
        try:
            while not self.stop.is_set() and time.monotonic() < end:
                if self.accepted < self.max_accepts:
                    try:
                        conn, _ = self.sock.accept()
                    except (TimeoutError, OSError):
                        pass
                    else:
                        self.accepted += 1
                        if self.payload:
                            with contextlib.suppress(OSError):  # the client may be gone already
                                conn.sendall(self.payload)
                        conns.append((conn, time.monotonic() + self.hold_s))
                for conn, until in list(conns):
                    if time.monotonic() >= until:
                        conn.close()
                        conns.remove((conn, until))
                self.stop.wait(0.02)
        finally:
            for conn, _ in conns:
                conn.close()
            self.sock.close()

    def __enter__(self):
        self.thread.start()
        return self

    def __exit__(self, *exc):
        self.stop.set()
        self.thread.join(5)


@pytest.mark.parametrize(
    ("payload", "hold_s"),
    [
        (b"HTTP/1.0 200 OK\r\n\r\nnot a scheduler\r\n", 0.0),  # answers and closes
        (bytes(range(256)) * 4, 6.0),  # garbage (dask reads a frame length from it), held open
        (b"", 30.0),  # accepts and stays silent: dask.distributed waits without end
    ],
    ids=["http", "garbage", "silent"],
)
@pytest.mark.slow
def test_a_peer_that_is_no_scheduler_is_one_line_within_seconds(tmp_path, payload, hold_s):
    pytest.importorskip("dask.distributed")
    path = _write(tmp_path, "l.toml", YIELD_LINEUP)
    with _LoopbackServer(payload, hold_s) as server:
        _proc(
            ["yield", "l.toml", "--samples", "100", "--scheduler", f"127.0.0.1:{server.port}"],
            tmp_path,
            ("--scheduler", f"127.0.0.1:{server.port}", "scheduler"),
        )
    assert path.exists()


@pytest.mark.slow
def test_an_address_where_nothing_listens_is_one_line_within_seconds(tmp_path):
    pytest.importorskip("dask.distributed")
    _write(tmp_path, "l.toml", YIELD_LINEUP)
    with socket.socket() as s:  # a port that was free a moment ago, and is closed now
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    # dask.distributed alone waited 30 s and raised OSError (the issue).
    _proc(
        ["yield", "l.toml", "--samples", "100", "--scheduler", f"tcp://127.0.0.1:{port}"],
        tmp_path,
        (str(port), "3 s"),
    )


def _interrupt(args, cwd, wait_s: float) -> tuple[int, str, str]:
    """Start ``spurplan ARGS`` in a session of its own, send SIGINT to that process group
    after ``wait_s`` (as a terminal's Ctrl-C does) and wait for it, at most 8 s more."""
    env = dict(os.environ, OPENBLAS_NUM_THREADS="1", OMP_NUM_THREADS="1")
    proc = subprocess.Popen(
        [sys.executable, "-m", "spurplan.cli", *map(str, args)],
        cwd=cwd,
        env=env,
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
        start_new_session=True,
    )
    try:
        time.sleep(wait_s)
        os.killpg(proc.pid, signal.SIGINT)
        out, err = proc.communicate(timeout=8)
    except subprocess.TimeoutExpired:
        os.killpg(proc.pid, signal.SIGKILL)
        proc.communicate()
        pytest.fail(f"spurplan {' '.join(map(str, args))} did not end within 8 s of SIGINT")
    # The workers (same process group) must be gone too: they exit with their parent.
    deadline = time.monotonic() + 5
    while _alive_in_group(proc.pid):
        if time.monotonic() > deadline:
            os.killpg(proc.pid, signal.SIGKILL)
            pytest.fail("processes of the interrupted run were left behind")
        time.sleep(0.1)
    return proc.returncode, out, err


def _alive_in_group(pgid: int) -> bool:
    """Whether a process of group ``pgid`` is still running (zombies left to an init
    that does not reap them do not count: they run nothing)."""
    proc_root = Path("/proc")
    if not proc_root.is_dir():
        try:
            os.killpg(pgid, 0)
        except ProcessLookupError:
            return False
        return True
    for stat_file in proc_root.glob("[0-9]*/stat"):
        try:
            fields = stat_file.read_text().rsplit(")", 1)[1].split()
        except (OSError, IndexError):
            continue
        state, pgrp = fields[0], int(fields[2])  # proc(5): state, ppid, pgrp after the name
        if pgrp == pgid and state != "Z":
            return True
    return False


def _assert_interrupted(code: int, out: str, err: str) -> None:
    context = f"\n--- exit {code} ---\n--- stdout ---\n{out[:2000]}\n--- stderr ---\n{err[:4000]}"
    assert code == 130, context
    assert "Traceback" not in err and "Traceback" not in out, context
    assert err.splitlines() == ["spurplan: interrupted"], context


@pytest.mark.skipif(not hasattr(os, "killpg"), reason="no process groups here")
@pytest.mark.parametrize("wait_s", [1.0, 3.0], ids=["while-starting", "while-running"])
@pytest.mark.slow
def test_ctrl_c_during_yield_on_two_workers_is_one_line_and_130(tmp_path, wait_s):
    pytest.importorskip("dask.distributed")
    _write(tmp_path, "l.toml", YIELD_LINEUP)
    # 10^7 samples run for minutes: the interrupt lands during the cluster's start or its work.
    _assert_interrupted(
        *_interrupt(["yield", "l.toml", "--samples", "10000000", "--workers", "2"], tmp_path, wait_s)
    )


@pytest.mark.skipif(not hasattr(os, "killpg"), reason="no process groups here")
@pytest.mark.slow
def test_ctrl_c_during_yield_in_process_is_one_line_and_130(tmp_path):
    _write(tmp_path, "l.toml", YIELD_LINEUP)
    _assert_interrupted(*_interrupt(["yield", "l.toml", "--samples", "10000000"], tmp_path, 2.0))


# --- stages: bounded, and attribution linear in their number ---------------------------------------


def _chain(n: int) -> str:
    stages = "".join(f'[[stage]]\nkind = "attenuator"\nname = "p{i}"\nloss = "0.1 dB"\n' for i in range(n))
    return "# invented test lineup\n" + CARRIER + stages + MASK


def test_more_than_200_stages_are_refused(tmp_path):
    path = _write(tmp_path, "l.toml", _chain(201))
    _inproc(["check", path], ("201 [[stage]] tables", "at most 200"), names=path)


def test_a_200_stage_lineup_runs_quickly(tmp_path):
    # At the limit the run (attribution included) takes well under a second of work;
    # carrying each stage's part forward on its own took seconds at a few hundred stages.
    pairs = "".join(
        f'[[stage]]\nkind = "amplifier"\nname = "a{i}"\ngain = "1 dB"\noip3 = "+60 dBm"\n'
        f'[[stage]]\nkind = "attenuator"\nname = "p{i}"\nloss = "1 dB"\n'
        for i in range(100)
    )
    text = "# invented test lineup\n" + CARRIER.replace('"0 dBm"', '"-60 dBm"') + pairs + MASK
    path = _write(tmp_path, "l.toml", text)
    code, out, err, detail, seconds = run_in_process(["spectrum", str(path), "--format", "json"])
    assert code == 0, err + detail
    assert seconds < QUICK_S, f"took {seconds:.1f} s"
    # 100 x (+1 dB - 1 dB) from -60 dBm: -60 dBm out (arithmetic; at -59 dBm against an
    # OIP3 of +60 dBm the compression is far below 0.01 dB).
    carrier_dbm = json.loads(out)["summary"]["carrier_dbm"][0]
    assert carrier_dbm == pytest.approx(-60.0, abs=0.01)


def test_contributions_match_the_direct_product_of_responses():
    # Reference: the definition (row k = stage k's added part times the responses of
    # stages k+1 .. node), with np.prod over the stage axis; random complex arrays.
    rng = np.random.default_rng(12)
    stages, batch, products = 7, 3, 5

    def c(*shape):
        return rng.normal(size=shape) + 1j * rng.normal(size=shape)

    prop = Propagation(
        nodes=c(stages + 1, batch, products),
        added=c(stages, batch, products),
        response=c(stages, batch, products),
        extrapolated=np.zeros((stages, batch), bool),
        converged=np.ones((stages, batch), bool),
        beyond=np.zeros((stages, batch, products), bool),
    )
    for node in range(stages + 1):
        got = prop.contributions(node, rows=slice(1, 3))
        sources = [prop.nodes[0]] + [prop.added[k] for k in range(node)]
        want = [src * np.prod(prop.response[k:node], axis=0) for k, src in enumerate(sources)]
        np.testing.assert_allclose(got, np.stack(want)[:, 1:3], rtol=1e-12)


# --- engine work: sweeps and yield runs bounded before they start -----------------------------------


@pytest.mark.parametrize(
    "args",
    [
        ["drive", "--start", "-30 dBm", "--stop", "0 dBm", "--step", "0.001 dB"],
        ["tune", "--start", "390 MHz", "--stop", "410 MHz", "--step", "1 kHz"],
        ["yield", "--samples", "100000"],
    ],
    ids=["drive", "tune", "yield"],
)
def test_work_beyond_the_grid_budget_is_refused_before_it_starts(tmp_path, args):
    path = _write(tmp_path, "l.toml", HEAVY_LINEUP)
    command, *options = args
    _inproc([command, path, *options], ("engine grid points", "1e+10", "max_order"))


def test_a_tiny_drive_step_is_refused_by_the_point_limit(tmp_path):
    path = _write(tmp_path, "l.toml", "# invented test lineup\n" + CARRIER + PA + MASK)
    _inproc(
        ["drive", path, "--start", "-10 dBm", "--stop", "0 dBm", "--step", "1e-300 dB"], ("--step", "200000")
    )
