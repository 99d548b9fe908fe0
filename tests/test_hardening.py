"""Hardening: malformed data files, command options and sweeps, and interrupted writes.

The contract (README, "Bad input gives one line naming the file, the stage, the field,
the value and what was expected, and exit status 2"): exit status 2, no traceback,
exactly one stderr line that starts ``spurplan: error:`` (other stderr lines may only
be ``spurplan: note:`` / ``spurplan: warning:`` lines), and that line names the file,
the stage and field where they apply, and the offending value.

These cases complement ``test_malformed.py`` (lineup tables and values),
``test_mask_malformed.py`` (masks and rule files) and ``test_filters.py`` (filter
stage keys, 1- and 4-port files, 75 ohm files): here the faults are inside
Touchstone files, channel files, command-line options, output paths, sweep sizes and
the encoding of the lineup file itself.  Every lineup, Touchstone file and channel
file below is invented for these tests.

Most cases run in-process through click's CliRunner; cases marked ``proc`` also run
as a real ``python -m spurplan.cli`` process (what a terminal sees), and cases that
could exhaust memory run only that way, under a 2 GiB address-space limit and a
timeout.

The second half interrupts output writes (``check --plot``, ``filter --touchstone``,
``remedy --write``, and ``report -o`` when that command exists) and checks that no
partial file and no stray temporary file is left behind (``spurplan.output.files``: a
temporary ``.NAME.*.part`` file, then ``os.replace``).
"""

from __future__ import annotations

import csv
import functools
import gc
import io
import os
import subprocess
import sys
import time
import warnings
from dataclasses import dataclass
from pathlib import Path

import pytest
from helpers import (
    assert_one_error_line,
    run_cli,
    run_in_process,
    run_in_process_unprivileged,
    unprivileged_ids,
)

try:
    import resource
except ImportError:  # not on Windows
    resource = None

# --- building blocks ------------------------------------------------------------------------------

CARRIER_100 = '[[carrier]]\nfreq = "100 MHz"\npower = "0 dBm"\n'

# A mildly nonlinear amplifier: OIP3 +30 dBm at +10 dBm out, far from any model warning.
PA = '[[stage]]\nkind = "amplifier"\nname = "pa"\ngain = "10 dB"\noip3 = "+30 dBm"\n'

# A lineup that passes its mask with no note: the rule set examines up to the 10th
# harmonic of 100 MHz, and max_order = 10 reaches it.
MASKED = (
    CARRIER_100
    + PA
    + '[[stage]]\nkind = "attenuator"\nname = "pad"\nloss = "1 dB"\n'
    + '[mask]\nuse = ["itu-sm329-cat-a"]\n[analysis]\nmax_order = 10\n'
)

# The failing lineup of the brief (invented): a 26 dB amplifier whose second harmonic
# is -35 dBc at +36 dBm, saturating at +40 dBm, driven with +10 dBm at 150 MHz.
FAILING = (
    "# invented test scenario\n"
    '[[carrier]]\nfreq = "150 MHz"\npower = "+10 dBm"\n'
    '[[stage]]\nkind = "amplifier"\nname = "pa"\ngain = "26 dB"\n'
    'h2 = "-35 dBc @ +36 dBm"\npsat = "+40 dBm"\n'
    '[mask]\nuse = ["itu-sm329-cat-a"]\n'
)


def filter_lineup(touchstone: str, extra: str = "", first: str = "") -> str:
    """Carrier at 100 MHz, then (``first``) and a filter stage 'flt' reading ``touchstone``."""
    return (
        CARRIER_100
        + first
        + f'[[stage]]\nkind = "filter"\nname = "flt"\ntouchstone = "{touchstone}"\n'
        + "[analysis]\nmax_order = 3\n"
        + extra
    )


def s2p_rows(freqs, fmt: str = "{f} 0.05 0 0.9 0 0.9 0 0.05 0") -> str:
    """Touchstone data lines (invented values: a well matched 0.9 V/V through)."""
    return "".join(fmt.format(f=f) + "\n" for f in freqs)


RI_MHZ = "! invented test data\n# MHz S RI R 50\n"
F6 = (10, 100, 200, 500, 1000, 2000)  # MHz

# Short of the carrier's third harmonic: 10 to 250 MHz (3 x 100 MHz = 300 MHz, arithmetic).
SHORT_S2P = RI_MHZ + s2p_rows((10, 100, 200, 250))


@dataclass(frozen=True)
class Case:
    """One malformed input.

    Attributes
    ----------
    id : str
    files : dict of str -> str or bytes
        Written into the test's folder before the run.
    args : tuple of str
        Command line; ``{tmp}`` stands for the test's folder.
    needles : tuple of str
        Text the error line must contain (``{tmp}`` as above): the file, the stage,
        the field or option, the offending value, what was expected.
    forbid : tuple of str
        Text the error line must not contain.
    proc : bool
        Also run as a real subprocess.
    only_proc : bool
        Run only as a subprocess, under a memory limit (may exhaust memory).
    max_seconds : float
        Wall time allowed for the in-process run.
    """

    id: str
    files: dict[str, str | bytes]
    args: tuple[str, ...]
    needles: tuple[str, ...]
    forbid: tuple[str, ...] = ()
    proc: bool = False
    only_proc: bool = False
    max_seconds: float = 60.0


def ts_case(cid: str, name: str, data: str | bytes, *needles: str, proc: bool = False) -> Case:
    """A Touchstone file that cannot be used: the line names lineup, stage, field and file."""
    return Case(
        cid,
        {"l.toml": filter_lineup(name), name: data},
        ("spectrum", "{tmp}/l.toml"),
        ("{tmp}/l.toml", "stage 1 'flt'", "field 'touchstone'", f"'{name}'", *needles),
        proc=proc,
    )


SWEEP_ARGS = ("--start", "-10 dBm", "--stop", "+10 dBm")

CASES = [
    # --- corrupt Touchstone files -----------------------------------------------------------------
    # The last row stops after 4 of its 9 values.
    ts_case(
        "ts-truncated-mid-row",
        "truncated.s2p",
        RI_MHZ + s2p_rows(F6[:3]) + "500 0.05 0 0.9",
        "Touchstone",
        proc=True,
    ),
    # One extra value: 6 x 9 + 1 = 55 numbers, not a multiple of 9 (arithmetic).
    ts_case("ts-odd-value-count", "odd.s2p", RI_MHZ + s2p_rows(F6) + "7\n", "Touchstone"),
    # An option line saying magnitude-angle over data written as real-imaginary: the
    # magnitude columns hold negative numbers, which no magnitude can be (Touchstone
    # 1.1 specification, option line, from memory).
    ts_case(
        "ts-ma-header-with-ri-data",
        "ma_ri.s2p",
        "! invented test data\n# GHz S MA R 50\n"
        + s2p_rows((0.01, 0.1, 0.2, 0.5, 1, 2), "{f} 0.05 0.02 -0.7 0.5 -0.7 0.5 0.05 0.02"),
    ),
    ts_case(
        "ts-non-numeric-cell",
        "nonnum.s2p",
        RI_MHZ + s2p_rows(F6[:3]) + "500 0.05 abc 0.9 0 0.9 0 0.05 0\n",
        "'abc'",
    ),
    ts_case("ts-empty-file", "empty.s2p", ""),
    ts_case("ts-only-comments", "comments.s2p", "! a comment\n! and another, no option line, no data\n"),
    ts_case(
        "ts-nan-values",
        "nan.s2p",
        RI_MHZ + s2p_rows(F6[:3]) + "500 nan 0 nan 0 0.9 0 0.05 0\n",
        "NaN",
    ),
    ts_case("ts-decreasing-frequencies", "down.s2p", RI_MHZ + s2p_rows(F6[::-1]), "increasing"),
    ts_case("ts-duplicate-frequencies", "dup.s2p", RI_MHZ + s2p_rows((10, 100, 200, 200, 500)), "increasing"),
    # A .s2p whose rows hold 3 values (f, Re, Im: a 1-port layout).  A 2-port row holds
    # 9 (Touchstone 1.1 specification, from memory); read 9 at a time, the file turns
    # into three frequencies made of S-parameter values.
    ts_case(
        "ts-s2p-with-3-columns",
        "three.s2p",
        "! invented test data\n# GHz S RI R 50\n"
        + s2p_rows((0.01, 0.1, 0.2, 0.3, 0.4, 0.5, 0.6, 0.7, 0.8), "{f} 0.5 0"),
    ),
    ts_case("ts-binary", "binary.s2p", b"\x89PNG\r\n\x1a\n" + bytes(range(256)) * 8, proc=True),
    # Touchstone 2.0 keywords; the file says 4 ports whatever its name says.
    ts_case(
        "ts-v2-four-ports",
        "v2.s2p",
        "! invented test data\n[Version] 2.0\n# MHz S RI R 50\n[Number of Ports] 4\n"
        "[Number of Frequencies] 2\n[Network Data]\n"
        + "".join(f"{f} " + " ".join(["0.1 0"] * 16) + "\n" for f in (10, 2000))
        + "[End]\n",
        "4 port",
    ),
    # A negative frequency is not a frequency (the loader asks for >= 0 Hz everywhere else).
    ts_case("ts-negative-frequency", "negf.s2p", RI_MHZ + s2p_rows((-10, 20, 200, 2000))),
    # 1e300 GHz overflows float64 to inf Hz (IEEE 754); the units parser caps at 1 THz.
    ts_case(
        "ts-infinite-frequency",
        "inff.s2p",
        "! invented test data\n# GHz S RI R 50\n" + s2p_rows((0.01, 1, 1e300)),
    ),
    # The file name names a folder.
    Case(
        "ts-is-a-directory",
        {"l.toml": filter_lineup("folder.s2p"), "folder.s2p/": ""},
        ("spectrum", "{tmp}/l.toml"),
        ("{tmp}/l.toml", "stage 1 'flt'", "field 'touchstone'", "'folder.s2p'"),
    ),
    # Path names the operating system refuses: a NUL byte, a name longer than NAME_MAX
    # (255 bytes on Linux file systems; limits.h, from memory).
    Case(
        "ts-path-with-nul",
        {"l.toml": filter_lineup("\\u0000")},
        ("spectrum", "{tmp}/l.toml"),
        ("{tmp}/l.toml", "stage 1 'flt'", "field 'touchstone'", "\\x00"),
    ),
    Case(
        "ts-path-too-long",
        {"l.toml": filter_lineup("x" * 2000 + ".s2p")},
        ("spectrum", "{tmp}/l.toml"),
        ("{tmp}/l.toml", "stage 1 'flt'", "field 'touchstone'", "xxxxxxxx"),
        proc=True,
    ),
    Case(
        "mask-file-with-nul",
        {"l.toml": MASKED.replace('use = ["itu-sm329-cat-a"]', 'files = ["\\u0000"]')},
        ("check", "{tmp}/l.toml"),
        ("{tmp}/l.toml", "[mask]", "field 'files'", "\\x00"),
    ),
    Case(
        "mask-file-name-too-long",
        {"l.toml": MASKED.replace('use = ["itu-sm329-cat-a"]', 'files = ["' + "r" * 2000 + '.toml"]')},
        ("check", "{tmp}/l.toml"),
        ("{tmp}/l.toml", "[mask]", "field 'files'", "rrrrrrrr"),
    ),
    # 1e-300 ohm makes every voltage underflow to 0 V (P = V^2 / 2R; IEEE 754 doubles);
    # the units parser bounds frequencies, powers and gains, and should bound this too.
    Case(
        "impedance-1e-300-ohm",
        {
            "l.toml": '[lineup]\nimpedance = "1e-300 ohm"\n'
            + CARRIER_100
            + '[[stage]]\nkind = "amplifier"\nname = "pa"\ngain = "3 dB"\nohip5 = "+50 dBm"\n'
        },
        ("spectrum", "{tmp}/l.toml"),
        ("{tmp}/l.toml", "[lineup]", "field 'impedance'", "'1e-300 ohm'"),
        proc=True,
    ),
    # --- data range and its policy ----------------------------------------------------------------
    # 3f1 at 300 MHz lies above data that stop at 250 MHz: the default policy stops the
    # check; the line must still say which lineup and which file.
    Case(
        "beyond-data-error-names-the-files",
        {"l.toml": filter_lineup("short.s2p", first=PA), "short.s2p": SHORT_S2P},
        ("spectrum", "{tmp}/l.toml"),
        ("{tmp}/l.toml", "'flt'", "3f1", "short.s2p", "beyond_data"),
        proc=True,
    ),
    Case(
        "beyond-data-misspelt-hld",
        {"l.toml": filter_lineup("short.s2p", 'beyond_data = "hld"\n', PA), "short.s2p": SHORT_S2P},
        ("spectrum", "{tmp}/l.toml"),
        ("{tmp}/l.toml", "[analysis]", "field 'beyond_data'", "'hld'", "did you mean 'hold'"),
    ),
    Case(
        "beyond-data-misspelt-no-rejection",
        {
            "l.toml": filter_lineup("short.s2p", 'beyond_data = "no-rejection"\n', PA),
            "short.s2p": SHORT_S2P,
        },
        ("check", "{tmp}/l.toml"),
        (
            "{tmp}/l.toml",
            "[analysis]",
            "field 'beyond_data'",
            "'no-rejection'",
            "did you mean 'no_rejection'",
        ),
    ),
    # --- absurd orders ----------------------------------------------------------------------------
    Case(
        "max-order-31",
        {"l.toml": CARRIER_100 + PA + "[analysis]\nmax_order = 31\n"},
        ("spectrum", "{tmp}/l.toml"),
        ("{tmp}/l.toml", "[analysis]", "field 'max_order'", "31", "1 to 30"),
    ),
    Case(
        "max-order-minus-1",
        {"l.toml": CARRIER_100 + PA + "[analysis]\nmax_order = -1\n"},
        ("budget", "{tmp}/l.toml"),
        ("{tmp}/l.toml", "[analysis]", "field 'max_order'", "-1", "1 to 30"),
    ),
    Case(
        "max-order-1e9",
        {"l.toml": CARRIER_100 + PA + "[analysis]\nmax_order = 1e9\n"},
        ("check", "{tmp}/l.toml"),
        ("{tmp}/l.toml", "[analysis]", "field 'max_order'", "1e+09", "1 to 30"),
        proc=True,
    ),
    Case(
        "filter-order-16",
        {
            "l.toml": CARRIER_100
            + '[[stage]]\nkind = "filter"\nname = "lpf"\n'
            + 'prototype = { family = "butterworth", order = 16, cutoff = "150 MHz" }\n'
        },
        ("spectrum", "{tmp}/l.toml"),
        ("{tmp}/l.toml", "stage 1 'lpf' prototype", "field 'order'", "16", "1 to 15"),
    ),
    Case(
        "filter-order-1.5",
        {
            "l.toml": CARRIER_100
            + '[[stage]]\nkind = "filter"\nname = "lpf"\n'
            + 'prototype = { family = "butterworth", order = 1.5, cutoff = "150 MHz" }\n'
        },
        ("spectrum", "{tmp}/l.toml"),
        ("{tmp}/l.toml", "stage 1 'lpf' prototype", "field 'order'", "1.5", "whole number"),
    ),
    # --- huge sweeps (subprocess, memory limit, timeout) ------------------------------------------
    # 20 dB in 1e-9 dB steps is 2e10 points (arithmetic).
    Case(
        "drive-step-1e-9-db",
        {"l.toml": MASKED},
        ("drive", "{tmp}/l.toml", *SWEEP_ARGS, "--step", "1e-9 dB"),
        ("at most", "--step"),
        only_proc=True,
    ),
    # 1 GHz in 1 Hz steps is 1e9 channels (arithmetic).
    Case(
        "tune-step-1-hz-over-1-ghz",
        {"l.toml": MASKED},
        ("tune", "{tmp}/l.toml", "--start", "100 MHz", "--stop", "1.1 GHz", "--step", "1 Hz"),
        ("at most", "--step"),
        only_proc=True,
    ),
    # 20 dB / 1e-320 dB overflows float64 to inf (a subnormal step, IEEE 754): still too
    # many points, and the answer must say so.
    Case(
        "drive-step-subnormal",
        {"l.toml": MASKED},
        ("drive", "{tmp}/l.toml", *SWEEP_ARGS, "--step", "1e-320 dB"),
        ("at most", "--step"),
        only_proc=True,
    ),
    # The step is a ratio in dB: the line must not call it dBm.
    Case(
        "drive-step-negative-unit-in-message",
        {"l.toml": MASKED},
        ("drive", "{tmp}/l.toml", *SWEEP_ARGS, "--step", "-1 dB"),
        ("--step", "-1 dB", "> 0"),
        forbid=("dBm",),
    ),
    # --- channel files ----------------------------------------------------------------------------
    Case(
        "channels-bad-line",
        {"l.toml": MASKED, "ch.txt": "100 MHz\n101 MHz\n# a comment\n102 MHz\n10x2 MHz\n"},
        ("tune", "{tmp}/l.toml", "--channels", "{tmp}/ch.txt"),
        ("{tmp}/ch.txt:5", "'10x2 MHz'", "MHz"),
        proc=True,
    ),
    Case(
        "channels-empty-file",
        {"l.toml": MASKED, "ch.txt": ""},
        ("tune", "{tmp}/l.toml", "--channels", "{tmp}/ch.txt"),
        ("{tmp}/ch.txt", "no frequencies"),
    ),
    Case(
        "channels-only-comments",
        {"l.toml": MASKED, "ch.txt": "# no channels yet\n\n   \n"},
        ("tune", "{tmp}/l.toml", "--channels", "{tmp}/ch.txt"),
        ("{tmp}/ch.txt", "no frequencies"),
    ),
    # A channel at 0 Hz reads as a frequency but cannot carry a carrier.
    Case(
        "channels-zero-hz-line",
        {"l.toml": MASKED, "ch.txt": "100 MHz\n0 Hz\n"},
        ("tune", "{tmp}/l.toml", "--channels", "{tmp}/ch.txt"),
        ("{tmp}/ch.txt:2", "'0 Hz'", "> 0"),
    ),
    Case(
        "channels-is-a-directory",
        {"l.toml": MASKED, "chans/": ""},
        ("tune", "{tmp}/l.toml", "--channels", "{tmp}/chans"),
        ("--channels", "chans", "directory"),
    ),
    # --- output paths -----------------------------------------------------------------------------
    Case(
        "check-plot-into-missing-folder",
        {"l.toml": MASKED},
        ("check", "{tmp}/l.toml", "--plot", "{tmp}/no/such/folder/a.png"),
        ("{tmp}/no/such/folder/a.png", "writable folder"),
        proc=True,
    ),
    Case(
        "check-plot-unknown-extension",
        {"l.toml": MASKED},
        ("check", "{tmp}/l.toml", "--plot", "{tmp}/a.xyz"),
        ("{tmp}/a.xyz", "'xyz'", "png"),
    ),
    Case(
        "drive-plot-unknown-extension",
        {"l.toml": MASKED},
        ("drive", "{tmp}/l.toml", *SWEEP_ARGS, "--step", "5 dB", "--plot", "{tmp}/d.xyz"),
        ("{tmp}/d.xyz", "'xyz'", "png"),
    ),
    Case(
        "filter-touchstone-into-missing-folder",
        {},
        (
            "filter",
            "--family",
            "butterworth",
            "--order",
            "3",
            "--cutoff",
            "100 MHz",
            "--touchstone",
            "{tmp}/no/f.s2p",
        ),
        ("{tmp}/no/f.s2p", "writable folder"),
    ),
    # --- options ----------------------------------------------------------------------------------
    Case(
        "remedy-margin-without-unit",
        {"l.toml": FAILING},
        ("remedy", "{tmp}/l.toml", "--margin", "3"),
        ("--margin", "'3'", "dB", "unit is missing"),
    ),
    Case(
        "filter-stage-is-an-amplifier",
        {"l.toml": MASKED},
        ("filter", "{tmp}/l.toml", "--stage", "pa"),
        ("{tmp}/l.toml", "--stage", "'pa'", "amplifier", "filter"),
        forbid=("a amplifier",),
    ),
    Case(
        "filter-stage-unknown",
        {"l.toml": MASKED},
        ("filter", "{tmp}/l.toml", "--stage", "lpf"),
        ("{tmp}/l.toml", "--stage", "'lpf'", "'pa'", "'pad'"),
    ),
    Case(
        "spectrum-stage-empty-name",
        {"l.toml": MASKED},
        ("spectrum", "{tmp}/l.toml", "--stage", ""),
        ("{tmp}/l.toml", "--stage", "''", "'pa'"),
    ),
    # The option is --at: the line must name it, not another option.
    Case(
        "remedy-at-unknown-stage",
        {"l.toml": FAILING},
        ("remedy", "{tmp}/l.toml", "--at", "driver"),
        ("{tmp}/l.toml", "--at", "'driver'", "'pa'"),
        forbid=("--stage",),
    ),
    # --- the lineup file itself -------------------------------------------------------------------
    Case(
        "duplicate-key-in-a-stage",
        {"l.toml": CARRIER_100 + PA + 'gain = "12 dB"\n'},
        ("spectrum", "{tmp}/l.toml"),
        ("{tmp}/l.toml", "line 9", "gain"),
    ),
    Case(
        "duplicate-analysis-table",
        {"l.toml": CARRIER_100 + PA + "[analysis]\nmax_order = 3\n[analysis]\nmax_order = 4\n"},
        ("spectrum", "{tmp}/l.toml"),
        ("{tmp}/l.toml", "analysis", "line 11"),
    ),
    # 100 kB of unit text: one line, quickly.
    Case(
        "unit-100-kb-long",
        {
            "l.toml": CARRIER_100
            + '[[stage]]\nkind = "amplifier"\nname = "pa"\ngain = "10 '
            + "d" * 100_000
            + '"\n'
        },
        ("spectrum", "{tmp}/l.toml"),
        ("{tmp}/l.toml", "stage 1 'pa'", "field 'gain'", "dB"),
        max_seconds=10.0,
    ),
    Case(
        "kind-100-kb-long",
        {
            "l.toml": CARRIER_100
            + '[[stage]]\nkind = "'
            + "amplifier" * 11_000
            + '"\nname = "pa"\ngain = "10 dB"\n'
        },
        ("spectrum", "{tmp}/l.toml"),
        ("{tmp}/l.toml", "stage 1 'pa'", "field 'kind'", "amplifieramplifier"),
        max_seconds=10.0,
    ),
]

IDS = [c.id for c in CASES]
assert len(set(IDS)) == len(IDS), "case ids must be unique"


def _materialise(case: Case, tmp: Path) -> None:
    for name, data in case.files.items():
        path = tmp / name
        if name.endswith("/"):
            path.mkdir(parents=True)
        elif isinstance(data, bytes):
            path.write_bytes(data)
        else:
            path.write_text(data, encoding="utf-8")


def _fill(items, tmp: Path) -> list[str]:
    return [s.replace("{tmp}", str(tmp)) for s in items]


# The contract here lets notes and warnings stand beside the one error line (see above).
assert_one_error = functools.partial(assert_one_error_line, notes_ok=True)


def run_limited(args, cwd, timeout: float = 60):
    """Run ``python -m spurplan.cli ARGS`` as a real process, memory-limited; returns
    (CompletedProcess, seconds)."""
    t0 = time.perf_counter()
    proc = run_cli(args, cwd, timeout=timeout, limit_memory=True)
    return proc, time.perf_counter() - t0


@pytest.mark.parametrize("case", [c for c in CASES if not c.only_proc], ids=lambda c: c.id)
@pytest.mark.slow
def test_malformed_in_process(case, tmp_path):
    _materialise(case, tmp_path)
    code, out, err, detail, seconds = run_in_process(_fill(case.args, tmp_path))
    # A handle leaked on a corrupt file is test_corrupt_touchstone_leaves_no_open_file's
    # business: collect it here so that it cannot fail whichever test runs next.
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ResourceWarning)
        gc.collect()
    assert_one_error(code, out, err, _fill(case.needles, tmp_path), forbid=case.forbid, detail=detail)
    assert seconds < case.max_seconds, f"took {seconds:.1f} s"


@pytest.mark.parametrize("case", [c for c in CASES if c.proc or c.only_proc], ids=lambda c: c.id)
@pytest.mark.slow
def test_malformed_subprocess(case, tmp_path):
    _materialise(case, tmp_path)
    proc, seconds = run_limited(_fill(case.args, tmp_path), cwd=tmp_path, timeout=60)
    assert_one_error(
        proc.returncode, proc.stdout, proc.stderr, _fill(case.needles, tmp_path), forbid=case.forbid
    )
    # A refused sweep is refused before any work: well under the time to import the
    # libraries a few times over.
    assert seconds < 30, f"took {seconds:.1f} s"


def test_corpus_size():
    # The brief asks for at least 25 cases, at least 5 of them as real processes.
    assert len(CASES) >= 25
    assert sum(c.proc or c.only_proc for c in CASES) >= 5


def test_corrupt_touchstone_leaves_no_open_file(tmp_path):
    # Reading an empty .s2p fails (case "ts-empty-file"); the file must be closed all
    # the same, or a long-running caller leaks one handle per bad file (Python emits
    # ResourceWarning for a file object collected while open: Python docs, io module).
    import spurplan
    from spurplan.errors import SpurplanError

    (tmp_path / "empty.s2p").write_text("", encoding="utf-8")
    (tmp_path / "l.toml").write_text(filter_lineup("empty.s2p"), encoding="utf-8")
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        with pytest.raises(SpurplanError):
            spurplan.load(tmp_path / "l.toml")
        gc.collect()
    leaks = [str(w.message) for w in caught if issubclass(w.category, ResourceWarning)]
    assert leaks == []


@pytest.fixture
def readable_dir(tmp_path):
    """A folder for the permission tests: ``tmp_path`` for an ordinary user; as root, a
    mode-0755 folder under the system's temporary folder, which the unprivileged child
    of :func:`helpers.run_in_process_unprivileged` can enter (pytest's own folders are
    mode 0700 and belong to root)."""
    if unprivileged_ids() is None:
        yield tmp_path
        return
    import shutil
    import tempfile

    folder = Path(tempfile.mkdtemp(prefix="spurplan-perm-"))
    try:
        folder.chmod(0o755)
        yield folder
    finally:
        shutil.rmtree(folder, ignore_errors=True)


def _run_without_read_permission(args, locked: Path):
    """Run the CLI where ``locked`` (mode 000) cannot be read: in process for an ordinary
    user; as root (who reads any file: POSIX access permissions, from memory) in a child
    that has dropped privileges.  Skips only when neither can make the file unreadable."""
    if unprivileged_ids() is None:
        if os.access(locked, os.R_OK):
            pytest.skip("this user can read a file with mode 000 and cannot drop privileges")
        code, out, err, detail, _ = run_in_process(args)
        return code, out, err, detail
    code, out, err, detail, unreadable = run_in_process_unprivileged(args, check_unreadable=[locked])
    assert unreadable, "precondition: the unprivileged child cannot read the mode-000 file"
    return code, out, err, detail


def test_unreadable_touchstone_file(readable_dir):
    lineup_path = readable_dir / "l.toml"
    lineup_path.write_text(filter_lineup("locked.s2p"), encoding="utf-8")
    lineup_path.chmod(0o644)
    locked = readable_dir / "locked.s2p"
    locked.write_text(RI_MHZ + s2p_rows(F6), encoding="utf-8")
    locked.chmod(0)
    try:
        code, out, err, detail = _run_without_read_permission(["spectrum", str(lineup_path)], locked)
        assert_one_error(
            code,
            out,
            err,
            (str(lineup_path), "stage 1 'flt'", "field 'touchstone'", "'locked.s2p'"),
            detail=detail,
        )
    finally:
        locked.chmod(0o600)


def test_unreadable_lineup_file(readable_dir):
    path = readable_dir / "l.toml"
    path.write_text(MASKED, encoding="utf-8")
    path.chmod(0)
    try:
        code, out, err, detail = _run_without_read_permission(["check", str(path)], path)
        # One line naming the file; the reason is either spurplan's ("cannot read") or
        # the command line's own check of the argument ("is not readable").
        line = assert_one_error(code, out, err, (str(path),), detail=detail)
        assert "cannot read" in line or "is not readable" in line, line
    finally:
        path.chmod(0o600)


# --- near misses: one edit away from a case above, and valid ----------------------------------------


def test_crlf_line_endings_load_like_lf(tmp_path):
    # TOML allows CRLF newlines (TOML 1.0 specification, from memory): the same lineup
    # with CRLF endings gives the same product table as with LF endings.
    lf, crlf = tmp_path / "lf.toml", tmp_path / "crlf.toml"
    lf.write_bytes(MASKED.encode("utf-8"))
    crlf.write_bytes(MASKED.replace("\n", "\r\n").encode("utf-8"))
    assert b"\r\n" in crlf.read_bytes()
    code_lf, out_lf, err_lf, _, _ = run_in_process(["spectrum", str(lf), "--format", "csv"])
    code_crlf, out_crlf, err_crlf, detail, _ = run_in_process(["spectrum", str(crlf), "--format", "csv"])
    assert code_crlf == 0, err_crlf + detail
    assert code_lf == 0, err_lf
    assert out_crlf == out_lf
    assert out_crlf.startswith("freq_hz,")


@pytest.mark.parametrize("policy", ["hold", "no_rejection"])
def test_data_short_of_a_product_runs_under_the_other_policies(policy, tmp_path):
    # Same lineup as "beyond-data-error-names-the-files", with a policy that proceeds:
    # the check runs and flags the row at 300 MHz (3 x 100 MHz) as beyond the data.
    (tmp_path / "short.s2p").write_text(SHORT_S2P, encoding="utf-8")
    text = (
        filter_lineup("short.s2p", f'beyond_data = "{policy}"\n', PA) + '[mask]\nuse = ["itu-sm329-cat-a"]\n'
    )
    (tmp_path / "l.toml").write_text(text, encoding="utf-8")
    code, out, err, detail, _ = run_in_process(["check", str(tmp_path / "l.toml"), "--format", "csv"])
    assert code in (0, 1), err + detail
    assert "spurplan: error" not in err
    rows = list(csv.DictReader(io.StringIO(out)))
    row = next(r for r in rows if r["label"] == "3f1")
    assert float(row["freq_hz"]) == pytest.approx(300e6)
    assert row["beyond_data"] == "True"
    assert all(r["beyond_data"] == "False" for r in rows if float(r["freq_hz"]) <= 250e6)


@pytest.mark.parametrize("how", ["in-process", "subprocess"])
@pytest.mark.slow
def test_lineup_with_a_byte_order_mark(how, tmp_path):
    # Some editors start UTF-8 files with U+FEFF (the Unicode standard calls it a
    # byte-order mark and allows it in UTF-8; from memory).  Either read the file as
    # the text after it (the same products as without it) or say what is at line 1,
    # column 1; "Invalid statement" alone sends the user looking at good TOML.
    plain, bom = tmp_path / "plain.toml", tmp_path / "bom.toml"
    plain.write_text(MASKED, encoding="utf-8")
    bom.write_bytes(("\ufeff" + MASKED).encode("utf-8"))
    if how == "in-process":
        code, out, err, detail, _ = run_in_process(["spectrum", str(bom), "--format", "csv"])
    else:
        proc, _ = run_limited(["spectrum", str(bom), "--format", "csv"], cwd=tmp_path)
        code, out, err, detail = proc.returncode, proc.stdout, proc.stderr, ""
    if code == 0:
        _, want, _, _, _ = run_in_process(["spectrum", str(plain), "--format", "csv"])
        assert out == want
    else:
        line = assert_one_error(code, out, err, (str(bom),), detail=detail)
        assert "byte-order mark" in line or "BOM" in line or "U+FEFF" in line, line


def test_stage_name_100_kb_is_fine_or_one_line(tmp_path):
    # The brief: a 100 kB stage name may load or be refused, but in one line and fast.
    name = "x" * 100_000
    text = CARRIER_100 + f'[[stage]]\nkind = "amplifier"\nname = "{name}"\ngain = "10 dB"\noip3 = "+30 dBm"\n'
    (tmp_path / "l.toml").write_text(text, encoding="utf-8")
    code, out, err, detail, seconds = run_in_process(
        ["spectrum", str(tmp_path / "l.toml"), "--format", "csv"]
    )
    assert seconds < 10, f"took {seconds:.1f} s"
    assert "Traceback" not in err, detail
    if code == 2:
        assert_one_error(code, out, err, (str(tmp_path / "l.toml"),), detail=detail)
    else:
        assert code == 0, err + detail
        assert name in out  # the product rows name the stage


@pytest.mark.slow
def test_stage_name_100_kb_subprocess(tmp_path):
    name = "y" * 100_000
    text = CARRIER_100 + f'[[stage]]\nkind = "amplifier"\nname = "{name}"\ngain = "10 dB"\nloss = "1 dB"\n'
    (tmp_path / "l.toml").write_text(text, encoding="utf-8")
    proc, seconds = run_limited(["spectrum", str(tmp_path / "l.toml")], cwd=tmp_path)
    # "loss" is not an amplifier key: one line, even with a huge name in it.
    assert_one_error(proc.returncode, proc.stdout, proc.stderr, ("field 'loss'", "unknown"))
    assert seconds < 30


def test_error_about_a_touchstone_name_with_a_line_break_is_one_line(tmp_path):
    # The library's own message (not only the CLI's, which joins lines) is one line.
    import spurplan
    from spurplan.errors import SpurplanError

    (tmp_path / "l.toml").write_text(filter_lineup("flt\\n.s2p"), encoding="utf-8")
    with pytest.raises(SpurplanError) as info:
        spurplan.load(tmp_path / "l.toml")
    assert len(str(info.value).splitlines()) == 1, repr(str(info.value))


def test_carrier_at_1e_300_hz_is_refused_or_reported(tmp_path):
    # 1e-300 Hz passes the "> 0 Hz" check; the run then takes it for DC and the output
    # table comes out empty with exit status 0.  Either refuse it (one line naming the
    # field) or list the carrier: a carrier is always reported (README, "Combining").
    text = '[[carrier]]\nfreq = "1e-300 Hz"\npower = "0 dBm"\n' + PA + "[analysis]\nmax_order = 3\n"
    (tmp_path / "l.toml").write_text(text, encoding="utf-8")
    code, out, err, detail, _ = run_in_process(["spectrum", str(tmp_path / "l.toml"), "--format", "csv"])
    if code == 2:
        assert_one_error(code, out, err, ("carrier 1", "field 'freq'", "'1e-300 Hz'"), detail=detail)
    else:
        assert code == 0, err + detail
        assert any(r["label"] == "f1" for r in csv.DictReader(io.StringIO(out))), out


# --- found while fuzzing: a lossless band-pass evaluated exactly at its centre ---------------------
# An L||C shunt arm without loss has an infinite impedance at resonance; computed as
# 1 / (1/Z_L + 1/Z_C) it divides by zero when w^2 L C rounds to exactly 1, and S21 comes
# out NaN.  For these values (order 3, 0.5 dB, 160 MHz, 10 MHz) it does at 160 MHz.
BANDPASS = (
    '[[stage]]\nkind = "filter"\nname = "bpf"\n'
    'prototype = { family = "chebyshev", response = "bandpass", order = 3, center = "160 MHz", '
    'bandwidth = "10 MHz", ripple = "0.5 dB"%s }\n'
)
# Lossless parts and no stopband floor, stated (a lineup file's defaults are lossy).
LOSSLESS = ', q_inductor = "lossless", q_capacitor = "lossless", floor = "none"'


def test_carrier_at_the_centre_of_a_lossless_bandpass_passes_it(tmp_path):
    # An odd-order Chebyshev ladder passes the centre of its band without loss: the
    # low-pass prototype has |S21| = 1 at DC for odd N (Matthaei, Young and Jones 1964,
    # section 4.05, from memory), and the band-pass transform maps DC to the centre.
    text = (
        '[[carrier]]\nfreq = "160 MHz"\npower = "0 dBm"\n'
        + '[[stage]]\nkind = "amplifier"\nname = "pa"\ngain = "20 dB"\noip3 = "+40 dBm"\n'
        + BANDPASS % LOSSLESS
        + "[analysis]\nmax_order = 3\n"
    )
    (tmp_path / "l.toml").write_text(text, encoding="utf-8")
    rows = {}
    for node in ("pa", None):
        args = ["spectrum", str(tmp_path / "l.toml"), "--format", "csv"] + (["--stage", node] if node else [])
        code, out, err, detail, _ = run_in_process(args)
        assert detail == "", detail
        assert code == 0, err
        rows[node] = {r["label"]: float(r["level_dbm"]) for r in csv.DictReader(io.StringIO(out))}
    assert "f1" in rows[None], f"the carrier is missing at the output: {rows[None]}"
    assert rows[None]["f1"] == pytest.approx(rows["pa"]["f1"], abs=0.01)


def test_lossless_bandpass_at_the_carrier_does_not_hide_a_failure(tmp_path):
    # Two carriers of +30 dBm at the output of an amplifier with OIP3 +40 dBm give IM3
    # near 3 x 30 - 2 x 40 = +10 dBm (two-tone intercept relation, Razavi, RF
    # Microelectronics, ch. 2, from memory) at 159 and 162 MHz, inside the 155-165 MHz
    # passband (at most 0.5 dB ripple).  The general limit of itu-sm329-cat-a is far
    # below that, so the check must FAIL (exit 1), as it does with nearly lossless parts
    # (Q = 1e9): a lossless part is the limit of high Q (common practice, no source).
    base = (
        "# invented test scenario\n"
        '[[carrier]]\nfreq = "160 MHz"\npower = "+10 dBm"\n'
        '[[carrier]]\nfreq = "161 MHz"\npower = "+10 dBm"\n'
        '[[stage]]\nkind = "amplifier"\nname = "pa"\ngain = "20 dB"\noip3 = "+40 dBm"\n'
        + "%s"
        + '[mask]\nuse = ["itu-sm329-cat-a"]\n[analysis]\nmax_order = 3\n'
    )
    outcomes = {}
    for name, q in (("lossless", LOSSLESS), ("q1e9", ", q_inductor = 1e9, q_capacitor = 1e9")):
        path = tmp_path / f"{name}.toml"
        path.write_text(base % (BANDPASS % q), encoding="utf-8")
        code, out, err, detail, _ = run_in_process(["check", str(path), "--format", "csv"])
        labels = {r["label"]: r for r in csv.DictReader(io.StringIO(out))}
        outcomes[name] = (code, labels)
        assert detail == "", f"{name}: {detail}"
        assert code == 1, f"{name}: exit {code}, rows {sorted(labels)}\n{err}"
        assert float(labels["2f1-f2"]["level_dbm"]) > 0.0
    assert sorted(outcomes["lossless"][1]) == sorted(outcomes["q1e9"][1])


# --- interrupted writes leave no partial file -------------------------------------------------------


def _report_available() -> bool:
    code, _, _, _, _ = run_in_process(["report", "--help"])
    return code == 0


def _writers(tmp: Path) -> dict[str, tuple[list[str], Path]]:
    """Command line and target of every command that writes a file."""
    (tmp / "masked.toml").write_text(MASKED, encoding="utf-8")
    (tmp / "failing.toml").write_text(FAILING, encoding="utf-8")
    proto = ["filter", "--family", "butterworth", "--order", "5", "--cutoff", "200 MHz"]
    return {
        "check-plot": (["check", str(tmp / "masked.toml"), "--plot", str(tmp / "out.png")], tmp / "out.png"),
        "filter-touchstone": ([*proto, "--touchstone", str(tmp / "out.s2p")], tmp / "out.s2p"),
        "filter-plot": ([*proto, "--plot", str(tmp / "f.png")], tmp / "f.png"),
        "remedy-write": (
            ["remedy", str(tmp / "failing.toml"), "--write", str(tmp / "fixed.toml")],
            tmp / "fixed.toml",
        ),
        "report": (["report", str(tmp / "masked.toml"), "-o", str(tmp / "out.html")], tmp / "out.html"),
    }


WRITERS = ["check-plot", "filter-touchstone", "filter-plot", "remedy-write", "report"]


def _stray(folder: Path) -> list[str]:
    # write_atomic's temporary files are ".NAME.*.part" in the target's folder.
    return sorted(p.name for p in folder.iterdir() if p.name.endswith(".part") or p.name.startswith("."))


class _Calls:
    """How often a patched function was reached (so that no test passes by missing it)."""

    def __init__(self):
        self.calls = 0


def _previous_contents(target: Path, existed: bool) -> bytes | None:
    """Give ``target`` earlier contents when ``existed``; returns them (None: no file)."""
    if not existed:
        return None
    before = b"previous contents\n"
    target.write_bytes(before)
    return before


def _assert_as_before(target: Path, before: bytes | None, folder: Path) -> None:
    """The target holds its earlier contents (or does not exist), and no temporary file is left."""
    if before is not None:
        assert target.read_bytes() == before
    else:
        assert not target.exists()
    assert _stray(folder) == []


def _half_then_fail_fdopen(hit: _Calls, error):
    """An ``os.fdopen`` whose files opened for writing write half of what they are
    given, flush it to the disk, then raise ``error()``."""
    real_fdopen = os.fdopen

    class HalfThenFail:
        def __init__(self, handle):
            self.handle = handle

        def write(self, data):
            hit.calls += 1
            self.handle.write(bytes(data[: max(1, len(data) // 2)]))
            self.handle.flush()
            raise error()

        def __enter__(self):
            return self

        def __exit__(self, *exc):
            self.handle.close()
            return False

    def fdopen(fd, mode="r", *a, **k):
        handle = real_fdopen(fd, mode, *a, **k)
        return HalfThenFail(handle) if "w" in mode else handle

    return fdopen


@pytest.fixture
def writer(request, tmp_path):
    which = request.param
    if which == "report" and not _report_available():
        pytest.skip("no 'spurplan report' command yet")
    args, target = _writers(tmp_path)[which]
    return which, args, target


@pytest.mark.parametrize("writer", WRITERS, indirect=True)
@pytest.mark.slow
def test_writer_works_when_not_interrupted(writer, tmp_path):
    # The control for the tests below: uninterrupted, each command writes its file.
    _, args, target = writer
    code, _, err, detail, _ = run_in_process(args)
    assert code in (0, 1), err + detail
    assert target.is_file() and target.stat().st_size > 0
    assert _stray(tmp_path) == []


@pytest.mark.parametrize("existed", [False, True], ids=["new", "existing"])
@pytest.mark.parametrize("writer", WRITERS, indirect=True)
@pytest.mark.slow
def test_interrupted_rename_leaves_no_partial_file(writer, existed, tmp_path, monkeypatch):
    import spurplan.output.files

    _, args, target = writer
    before = _previous_contents(target, existed)
    real_replace = os.replace
    hit = _Calls()

    def replace(src, dst, *a, **k):
        if str(src).endswith(".part"):
            hit.calls += 1
            raise KeyboardInterrupt
        return real_replace(src, dst, *a, **k)

    monkeypatch.setattr(spurplan.output.files.os, "replace", replace)
    code, _, err, detail, _ = run_in_process(args)
    monkeypatch.undo()
    assert hit.calls >= 1, "the write did not go through spurplan.output.files (temporary file + os.replace)"
    assert code == 130, err + detail  # click's Abort, mapped by the CLI
    assert "Traceback" not in err
    _assert_as_before(target, before, tmp_path)


@pytest.mark.parametrize("existed", [False, True], ids=["new", "existing"])
@pytest.mark.parametrize("writer", WRITERS, indirect=True)
@pytest.mark.slow
def test_interrupted_mid_write_leaves_no_partial_file(writer, existed, tmp_path, monkeypatch):
    # The interruption comes after half the bytes have reached the disk.
    import spurplan.output.files

    _, args, target = writer
    before = _previous_contents(target, existed)
    hit = _Calls()
    monkeypatch.setattr(spurplan.output.files.os, "fdopen", _half_then_fail_fdopen(hit, KeyboardInterrupt))
    code, _, err, detail, _ = run_in_process(args)
    monkeypatch.undo()
    assert hit.calls >= 1, "the write did not go through spurplan.output.files.write_atomic"
    assert code == 130, err + detail
    _assert_as_before(target, before, tmp_path)


@pytest.mark.parametrize("existed", [False, True], ids=["new", "existing"])
@pytest.mark.parametrize("writer", ["check-plot", "filter-plot", "report"], indirect=True)
def test_figure_rendering_interrupted_halfway_leaves_no_file(writer, existed, tmp_path, monkeypatch):
    # matplotlib has written some bytes of the figure when the user presses Ctrl-C.
    import matplotlib.figure

    _, args, target = writer
    before = _previous_contents(target, existed)
    hit = _Calls()

    def savefig(self, fname, *a, **k):
        hit.calls += 1
        data = b"\x89PNG\r\n\x1a\n half a figure"
        if hasattr(fname, "write"):
            fname.write(data)
        else:
            Path(fname).write_bytes(data)
        raise KeyboardInterrupt

    monkeypatch.setattr(matplotlib.figure.Figure, "savefig", savefig)
    code, _, err, detail, _ = run_in_process(args)
    monkeypatch.undo()
    assert hit.calls >= 1, "no figure was rendered"
    assert code == 130, err + detail
    _assert_as_before(target, before, tmp_path)


@pytest.mark.parametrize("writer", WRITERS, indirect=True)
@pytest.mark.slow
def test_full_disk_is_one_line_and_leaves_no_partial_file(writer, tmp_path, monkeypatch):
    # The disk fills up after half the bytes (ENOSPC, errno 28 on Linux): an output
    # error, so exit status 2 and one line naming the file, and nothing left behind.
    import errno

    import spurplan.output.files

    _, args, target = writer
    hit = _Calls()

    def full_disk():
        return OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    monkeypatch.setattr(spurplan.output.files.os, "fdopen", _half_then_fail_fdopen(hit, full_disk))
    code, out, err, detail, _ = run_in_process(args)
    monkeypatch.undo()
    assert hit.calls >= 1, "the write did not go through spurplan.output.files.write_atomic"
    assert not target.exists()
    assert _stray(tmp_path) == []
    assert_one_error(code, out, err, (str(target), "No space left on device"), detail=detail)


@pytest.mark.slow
def test_file_size_limit_in_a_real_process_is_one_line(tmp_path):
    # A real write failure without any patching: RLIMIT_FSIZE makes write(2) fail
    # with EFBIG once a file would pass 4 kB (setrlimit(2) man page; CPython ignores
    # SIGXFSZ, so the failure arrives as OSError).  A PNG of 1200x700 pixels is larger.
    if resource is None:
        pytest.skip("no resource module")
    (tmp_path / "l.toml").write_text(MASKED, encoding="utf-8")
    target = tmp_path / "big.png"

    def limits():  # pragma: no cover - runs in the child
        resource.setrlimit(resource.RLIMIT_FSIZE, (4096, 4096))

    env = dict(os.environ, PYTHONDONTWRITEBYTECODE="1")
    proc = subprocess.run(
        [sys.executable, "-m", "spurplan.cli", "check", str(tmp_path / "l.toml"), "--plot", str(target)],
        capture_output=True,
        text=True,
        cwd=tmp_path,
        env=env,
        timeout=120,
        preexec_fn=limits,
    )
    assert not target.exists()
    assert _stray(tmp_path) == []
    assert_one_error(proc.returncode, proc.stdout, proc.stderr, (str(target),))
