"""Small builders and checks shared by the tests.

The builders make lineups and harmonic phasors from compact Python data.  The checks
hold the command-line contract (README, "Bad input gives one line naming the file,
the stage, the field, the value and what was expected, and exit status 2"), the
in-process and subprocess ways of running the command line, and the comparison of
the engine's product rows with the brute-force reference (tests/reference.py).
"""

from __future__ import annotations

import codecs
import json
import os
import subprocess
import sys
import time
import traceback
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from spurplan.cli import main
from spurplan.engine.torus import apply_memoryless
from spurplan.io.lineup_file import from_dict
from spurplan.model.products import mixing_vectors

try:
    import resource
except ImportError:  # not on Windows
    resource = None


def lineup(stages, carriers=(("100 MHz", "-30 dBm"),), max_order=10, combine="phase"):
    """A Lineup from compact Python data (stage dicts, (freq, power) carriers)."""
    doc = {
        "lineup": {"name": "test lineup (invented)"},
        "carrier": [{"freq": f, "power": p} for f, p in carriers],
        "stage": [dict(s) for s in stages],
        "analysis": {"max_order": max_order, "combine": combine},
    }
    return from_dict(doc, name="test.toml")


def amp(name="amp", **figures):
    return {"kind": "amplifier", "name": name, **figures}


def levels_by_label(result, stage=None, combine=None):
    """{label: level_dbm} of a run's product table."""
    rows = result.product_rows(stage, combine)
    return dict(zip(rows["label"], rows["level_dbm"], strict=True))


def single_tone(transfer, amplitude_v, max_order=10):
    """Harmonic phasors (V) of ``transfer`` driven by ``amplitude_v cos(theta)``; index n-1 is harmonic n."""
    mix = mixing_vectors(1, max_order)
    x = np.zeros((1, max_order), dtype=complex)
    x[0, 0] = amplitude_v
    return apply_memoryless(x, mix, transfer)


def dbc(harmonics, n):
    """Level of harmonic n relative to the fundamental (dB)."""
    with np.errstate(divide="ignore"):
        return 20 * np.log10(np.abs(harmonics[n - 1]) / np.abs(harmonics[0]))


def write(tmp_path: Path, name: str, text: str) -> Path:
    """Write ``text`` (UTF-8) to ``tmp_path / name``; returns the path."""
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


# --- running the command line ---------------------------------------------------------------------


def cli_runner() -> CliRunner:
    """A CliRunner that keeps stderr apart from stdout."""
    try:
        return CliRunner(mix_stderr=False)  # click < 8.2
    except TypeError:
        return CliRunner()  # click >= 8.2 keeps stderr apart


def invoke(*args, expect=0):
    """Run the CLI in-process and return click's Result.

    An exception other than SystemExit is raised again; the exit status must be
    ``expect`` (an int, or a tuple of the statuses allowed; None: any); stderr must
    hold no traceback.
    """
    result = cli_runner().invoke(main, [str(a) for a in args])
    if result.exception is not None and not isinstance(result.exception, SystemExit):
        raise result.exception
    if expect is not None:
        allowed = (expect,) if isinstance(expect, int) else tuple(expect)
        assert result.exit_code in allowed, (result.exit_code, result.stderr, result.stdout)
    assert "Traceback" not in result.stderr
    return result


def run_in_process(args):
    """Run the CLI in-process; returns (exit code, stdout, stderr, detail, seconds).

    ``detail`` is the traceback of an exception other than SystemExit, or "".
    """
    t0 = time.perf_counter()
    result = cli_runner().invoke(main, list(args))
    seconds = time.perf_counter() - t0
    detail = ""
    if result.exception is not None and not isinstance(result.exception, SystemExit):
        detail = "\n--- exception ---\n" + "".join(traceback.format_exception(result.exception))
    return result.exit_code, result.stdout, result.stderr, detail, seconds


def _limit_memory() -> None:  # pragma: no cover - runs in the child
    cap = 2 << 30  # 2 GiB: a runaway allocation fails instead of taking the machine
    resource.setrlimit(resource.RLIMIT_AS, (cap, cap))


def run_cli(args, cwd, timeout: float = 120, limit_memory: bool = False, env_extra=None):
    """Run ``python -m spurplan.cli ARGS`` as a real process; returns CompletedProcess.

    ``limit_memory`` caps the child's address space at 2 GiB (where the resource
    module exists); a run longer than ``timeout`` seconds fails the test.
    """
    env = dict(os.environ, OPENBLAS_NUM_THREADS="1", OMP_NUM_THREADS="1", **(env_extra or {}))
    preexec = _limit_memory if limit_memory and resource is not None else None
    try:
        return subprocess.run(
            [sys.executable, "-m", "spurplan.cli", *args],
            capture_output=True,
            text=True,
            cwd=cwd,
            env=env,
            timeout=timeout,
            preexec_fn=preexec,
        )
    except subprocess.TimeoutExpired:
        pytest.fail(f"spurplan {' '.join(map(str, args))} did not finish within {timeout} s")


# --- output contracts -----------------------------------------------------------------------------


def _no_constants(name):
    raise AssertionError(f"JSON output contains {name}, which is not valid JSON")


def as_json(text: str):
    """Parse JSON output, refusing NaN and Infinity (not JSON: RFC 8259, section 6, from memory)."""
    return json.loads(text, parse_constant=_no_constants)


NOTE_PREFIXES = ("spurplan: note:", "spurplan: warning:")


def assert_one_error_line(
    code, stdout: str, stderr: str, needles=(), *, names=None, forbid=(), detail: str = "", notes_ok=False
) -> str:
    """The bad-input contract; returns the error line.

    Exit status 2 and no traceback.  Strict (the default): nothing on stdout and
    exactly one stderr line, newline-terminated, starting ``spurplan: error: ``.  With
    ``notes_ok``: exactly one stderr line starting ``spurplan: error:`` and any others
    ``spurplan: note:`` / ``spurplan: warning:`` lines; stdout is not examined.  The
    error line must contain ``str(names)`` (when given) and every needle, and no
    ``forbid`` text.
    """
    context = (
        f"\n--- exit {code} ---\n--- stdout ---\n{stdout[:2000]}\n--- stderr ---\n{stderr[:4000]}{detail}"
    )
    assert "Traceback" not in stderr and "Traceback" not in stdout, context
    assert code == 2, context
    lines = stderr.splitlines()
    if notes_ok:
        errors = [ln for ln in lines if ln.startswith("spurplan: error:")]
        assert len(errors) == 1, context
        others = [ln for ln in lines if not ln.startswith("spurplan: error:")]
        assert all(ln.startswith(NOTE_PREFIXES) for ln in others), context
        line = errors[0]
    else:
        assert stdout == "", context
        assert len(lines) == 1, context
        assert stderr.endswith("\n"), context
        line = lines[0]
        assert line.startswith("spurplan: error: "), context
    if names is not None:
        assert str(names) in line, f"the line does not name {names}{context}"
    for needle in needles:
        assert needle in line, f"{needle!r} missing from the error line{context}"
    for bad in forbid:
        assert bad not in line, f"{bad!r} should not be in the error line{context}"
    return line


# --- the engine against the brute-force reference -------------------------------------------------


def representable_bins(tones_hz, max_order: int, df_hz: float) -> set[int]:
    """Bins (of ``df_hz``) holding a product ``|m . f|`` with ``sum |m_k| <= max_order``.

    Enumerated here by brute force over every integer vector (``itertools``-free:
    a numpy grid of ``(2 max_order + 1)^K`` vectors), independently of spurplan's
    mixing vectors; 0 Hz is left out (the stages are AC-coupled).  A product the engine
    keeps must sit on one of these bins; a reference bin outside them can only hold
    products of higher order, which the engine truncates by design.
    """
    tones = np.asarray(tones_hz, dtype=float)
    axis = np.arange(-max_order, max_order + 1)
    grids = np.meshgrid(*([axis] * len(tones)), indexing="ij")
    vectors = np.stack([g.ravel() for g in grids], axis=1)
    vectors = vectors[np.abs(vectors).sum(axis=1) <= max_order]
    bins = np.rint(np.abs(vectors @ tones) / df_hz).astype(np.int64)
    return {int(b) for b in np.unique(bins) if b > 0}


def compare_with_reference(
    rows,
    ref,
    floor_dbc: float = -150.0,
    abs_db: float = 0.01,
    *,
    tones_hz,
    max_order: int,
    margin_db: float = 0.1,
) -> int:
    """The engine's product rows against the reference spectrum ``ref``
    (tests/reference.py), in both directions; returns how many bins were compared.

    * Every row above ``floor_dbc`` lies within ``abs_db`` of the reference at its
      frequency.
    * Every reference bin more than ``margin_db`` above the floor that the engine can
      represent (a product of order <= ``max_order`` of the base tones ``tones_hz``,
      :func:`representable_bins`) is in the table, and is compared too: a loud
      product the engine left out fails.  dBc here is relative to the reference's
      strongest carrier bin (the rows of kind "carrier").
    """
    engine = {}
    for f, level, dbc_ in zip(rows["freq_hz"], rows["level_dbm"], rows["dbc"], strict=True):
        engine[ref.bin_of(f)] = (float(level), float(dbc_))
    compare = {b for b, (_, dbc_) in engine.items() if dbc_ > floor_dbc}
    carriers = [f for f, kind in zip(rows["freq_hz"], rows["kind"], strict=True) if kind == "carrier"]
    assert carriers, "no carrier row in the table"
    carrier_dbm = max(ref.at(f) for f in carriers)
    allowed = representable_bins(tones_hz, max_order, ref.df_hz)
    loud = np.nonzero(ref.level_dbm - carrier_dbm > floor_dbc + margin_db)[0]
    loud = {int(b) for b in loud if int(b) in allowed}
    missing = sorted(b for b in loud if b not in engine)
    assert not missing, (
        f"reference bins {missing} (df {ref.df_hz} Hz) are above {floor_dbc} dBc and of order "
        f"<= {max_order}, but not in the engine's table"
    )
    compare |= loud
    for b in sorted(compare):
        # Expected value: brute-force time-domain FFT (tests/reference.py, numpy.fft).
        assert engine[b][0] == pytest.approx(float(ref.level_dbm[b]), abs=abs_db), b * ref.df_hz
    return len(compare)


# --- running as an unprivileged user --------------------------------------------------------------


def unprivileged_ids() -> tuple[int, int] | None:
    """(uid, gid) of the ``nobody`` account when running as root on a POSIX system, else None."""
    if not hasattr(os, "fork") or not hasattr(os, "geteuid") or os.geteuid() != 0:
        return None
    try:
        import pwd

        entry = pwd.getpwnam("nobody")
    except (ImportError, KeyError):
        return None
    return entry.pw_uid, entry.pw_gid


def run_in_process_unprivileged(args, check_unreadable=(), warm_up=(), timeout: float = 120):
    """Run the CLI in-process in a forked child that has dropped root for ``nobody``.

    Returns (exit code, stdout, stderr, detail, unreadable), where ``unreadable`` says
    whether every path in ``check_unreadable`` was unreadable to the child
    (``os.access``), the precondition of a permission test.  ``warm_up`` (CLI
    arguments) is run first, still as root, for the modules it imports.  The child does not exec:
    the interpreter may sit in a folder that ``nobody`` cannot enter.  setgroups,
    setgid then setuid, in that order (a process that has given up its uid can no
    longer change its groups; POSIX setuid(2), from memory).  Skips when no
    unprivileged account exists.
    """
    import select
    import signal
    import warnings

    ids = unprivileged_ids()
    if ids is None:
        pytest.skip("needs root and a 'nobody' account to drop privileges")
    uid, gid = ids
    read_fd, write_fd = os.pipe()
    with warnings.catch_warnings():
        # Python 3.12+ warns that fork() in a threaded process may deadlock; the child
        # below is bounded by ``timeout`` and killed if it hangs.
        warnings.simplefilter("ignore", DeprecationWarning)
        pid = os.fork()
    if pid == 0:  # pragma: no cover - runs in the child
        status = 0
        try:
            os.close(read_fd)
            # The interpreter's own files may sit below a folder that ``nobody`` cannot
            # enter (a per-user Python install): load, while still root, what is loaded
            # lazily later: codecs, and the modules the command imports.
            codecs.lookup("utf-8-sig")
            if warm_up:
                run_in_process(warm_up)
            os.setgroups([])
            os.setgid(gid)
            os.setuid(uid)
            unreadable = all(not os.access(p, os.R_OK) for p in check_unreadable)
            code, out, err, detail, _ = run_in_process(args)
            payload = json.dumps([code, out, err, detail, unreadable])
        except BaseException as exc:
            payload = json.dumps(
                [-1, "", "", "child failed: " + "".join(traceback.format_exception(exc)), False]
            )
            status = 1
        data = payload.encode("utf-8")
        while data:
            data = data[os.write(write_fd, data) :]
        os._exit(status)
    os.close(write_fd)
    chunks = []
    deadline = time.monotonic() + timeout
    try:
        while True:
            left = deadline - time.monotonic()
            ready, _, _ = select.select([read_fd], [], [], max(left, 0))
            if not ready:
                os.kill(pid, signal.SIGKILL)
                pytest.fail(f"the unprivileged child did not finish within {timeout} s")
            chunk = os.read(read_fd, 1 << 16)
            if not chunk:
                break
            chunks.append(chunk)
    finally:
        os.close(read_fd)
        os.waitpid(pid, 0)
    code, out, err, detail, unreadable = json.loads(b"".join(chunks).decode("utf-8"))
    assert code != -1, detail
    return code, out, err, detail, unreadable
