"""Small builders and checks shared by the tests.

The builders make lineups and harmonic phasors from compact Python data.  The checks
hold the command-line contract (README, "Bad input gives one line naming the file,
the stage, the field, the value and what was expected, and exit status 2"), the
in-process and subprocess ways of running the command line, and the comparison of
the engine's product rows with the brute-force reference (tests/reference.py).
"""

from __future__ import annotations

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
from spurplan.engine import apply_memoryless
from spurplan.lineup_file import from_dict
from spurplan.spectrum import mixing_vectors

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


def compare_with_reference(rows, ref, floor_dbc: float = -150.0, abs_db: float = 0.01) -> int:
    """Every product row above ``floor_dbc`` lies within ``abs_db`` of the reference
    spectrum ``ref`` (tests/reference.py) at its frequency; returns how many were compared."""
    compared = 0
    for f, level, dbc_ in zip(rows["freq_hz"], rows["level_dbm"], rows["dbc"], strict=True):
        if dbc_ > floor_dbc:
            assert level == pytest.approx(ref.at(f), abs=abs_db), f
            compared += 1
    return compared
