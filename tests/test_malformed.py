"""Malformed lineups: every one must give exit status 2 and one line on stderr.

The contract (README, "Bad input gives one line naming the file, the stage, the field,
the value and what was expected, and exit status 2"): no traceback, nothing on stdout,
exactly one line on stderr, and that line names the file and, where they apply, the
stage (position and name), the field and the offending value.

Each case is a whole lineup written as TOML text below; the lineups are invented for
these tests.  Most cases run in-process through click's CliRunner (``_Group.main``
turns every input error into ``sys.exit(2)``, which CliRunner catches); the cases
marked ``proc`` also run as a real ``python -m spurplan.cli`` subprocess, to prove
that what reaches a terminal is one line and no traceback.  Cases with extreme
numbers run only as a subprocess, under a memory limit and a timeout, because a bad
one can exhaust memory.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import pytest
from helpers import assert_one_error_line, invoke, run_cli, run_in_process, write

# --- building blocks (TOML text) ------------------------------------------------------------------

CARRIER = """
[[carrier]]
freq = "455 MHz"
power = "-8 dBm"
"""

PAD = """
[[stage]]
kind = "attenuator"
name = "pad"
loss = "3 dB"
"""

DRIVER = """
[[stage]]
kind = "amplifier"
name = "driver"
gain = "16 dB"
"""

# Stage 2, after the pad: an amplifier called "pa" whose keys each case completes.
PA_HEAD = """
[[stage]]
kind = "amplifier"
name = "pa"
"""

PA = PA_HEAD + 'gain = "16 dB"\n'

# Stage 1: a synthesized low-pass whose prototype table each case completes (``%s``).
LPF = """
[[stage]]
kind = "filter"
name = "lpf"
prototype = { family = "butterworth", order = 5, cutoff = "600 MHz"%s }
"""

# Stage 1: a mixer whose keys each case completes.
MIXER = """
[[stage]]
kind = "mixer"
name = "mixer"
lo = { freq = "1.6 GHz", power = "+7 dBm" }
conversion_loss = "6 dB"
"""


@dataclass(frozen=True)
class Case:
    """One malformed input.

    Attributes
    ----------
    id : str
    text : str or bytes or None
        File contents; ``None`` with ``special`` for a missing file or a directory.
    needles : tuple of str
        Text the error line must contain besides the file name: the stage (position
        and name), the field, the offending value, what was expected.
    special : str
        ``""``, ``"missing"`` or ``"directory"``.
    proc : bool
        Also run as a real subprocess.
    only_proc : bool
        Run only as a subprocess (extreme numbers: may crash or exhaust memory).
    """

    id: str
    text: str | bytes | None
    needles: tuple[str, ...]
    special: str = ""
    proc: bool = False
    only_proc: bool = False


CASES = [
    # --- values without a unit ---
    Case(
        "gain-bare-number",
        CARRIER + PAD + PA_HEAD + "gain = 17\n",
        ("stage 2 'pa'", "field 'gain'", "17", "dB", "no unit"),
        proc=True,
    ),
    Case(
        "oip3-no-unit",
        CARRIER + PAD + PA + 'oip3 = "+34"\n',
        ("stage 2 'pa'", "field 'oip3'", "'+34'", "dBm"),
    ),
    Case(
        "power-bare-number",
        '[[carrier]]\nfreq = "455 MHz"\npower = -8\n',
        ("carrier 1", "field 'power'", "-8", "dBm"),
    ),
    Case(
        "impedance-no-unit",
        '[lineup]\nimpedance = "50"\n' + CARRIER,
        ("[lineup]", "field 'impedance'", "'50'", "ohm"),
    ),
    # --- wrong unit ---
    Case(
        "freq-in-dbm",
        '[[carrier]]\nfreq = "455 dBm"\npower = "-8 dBm"\n',
        ("carrier 1", "field 'freq'", "'455 dBm'", "MHz"),
    ),
    Case(
        "oip3-in-db",
        CARRIER + PAD + PA + 'oip3 = "34 dB"\n',
        ("stage 2 'pa'", "field 'oip3'", "'34 dB'", "dBm"),
    ),
    Case(
        "loss-in-dbm",
        CARRIER + '[[stage]]\nkind = "attenuator"\nname = "pad"\nloss = "3 dBm"\n',
        ("stage 1 'pad'", "field 'loss'", "'3 dBm'", "dB"),
    ),
    # --- not finite ---
    Case(
        "power-nan",
        '[[carrier]]\nfreq = "455 MHz"\npower = "nan dBm"\n',
        ("carrier 1", "field 'power'", "'nan dBm'", "dBm"),
    ),
    Case(
        "freq-inf",
        '[[carrier]]\nfreq = "inf MHz"\npower = "-8 dBm"\n',
        ("carrier 1", "field 'freq'", "'inf MHz'", "MHz"),
    ),
    Case(
        "freq-toml-nan",
        '[[carrier]]\nfreq = nan\npower = "-8 dBm"\n',
        ("carrier 1", "field 'freq'", "nan", "MHz"),
    ),
    # --- out of range ---
    Case(
        "freq-negative",
        '[[carrier]]\nfreq = "-455 MHz"\npower = "-8 dBm"\n',
        ("carrier 1", "field 'freq'", "'-455 MHz'", "negative"),
    ),
    Case(
        "freq-zero",
        '[[carrier]]\nfreq = "0 MHz"\npower = "-8 dBm"\n',
        ("carrier 1", "field 'freq'", "'0 MHz'", "> 0"),
    ),
    Case(
        "loss-negative",
        CARRIER + DRIVER + '[[stage]]\nkind = "attenuator"\nname = "pad"\nloss = "-3 dB"\n',
        ("stage 2 'pad'", "field 'loss'", "'-3 dB'", ">= 0"),
    ),
    Case(
        "linear-power-zero",
        '[[carrier]]\nfreq = "455 MHz"\npower = "0 W"\n',
        ("carrier 1", "field 'power'", "'0 W'", "> 0"),
    ),
    Case(
        "bandwidth-zero",
        '[[carrier]]\nfreq = "455 MHz"\npower = "-8 dBm"\nbandwidth = "0 Hz"\n',
        ("carrier 1", "field 'bandwidth'", "'0 Hz'", "> 0"),
    ),
    Case(
        "impedance-zero",
        '[lineup]\nimpedance = "0 ohm"\n' + CARRIER,
        ("[lineup]", "field 'impedance'", "'0 ohm'", "> 0"),
    ),
    # --- unknown names (with did-you-mean) ---
    Case(
        "kind-misspelt",
        CARRIER + PAD + '[[stage]]\nkind = "amplifer"\nname = "pa"\ngain = "16 dB"\n',
        ("stage 2 'pa'", "field 'kind'", "'amplifer'", "did you mean 'amplifier'"),
        proc=True,
    ),
    Case(
        "key-misspelt-oip33",
        CARRIER + PAD + PA + 'oip33 = "+34 dBm"\n',
        ("stage 2 'pa'", "'oip33'", "unknown", "did you mean 'oip3'"),
    ),
    Case(
        "carrier-key-misspelt",
        '[[carrier]]\nfreq = "455 MHz"\npowr = "-8 dBm"\n',
        ("carrier 1", "'powr'", "'power'"),
    ),
    Case(
        "top-level-table-unknown",
        CARRIER + '[lineups]\nname = "x"\n',
        ("'lineups'", "unknown", "did you mean 'lineup'"),
    ),
    Case(
        "analysis-key-misspelt",
        CARRIER + "[analysis]\nmax_ordr = 5\n",
        ("[analysis]", "'max_ordr'", "did you mean 'max_order'"),
    ),
    Case(
        "cubic-unknown",
        CARRIER + PA + 'cubic = "linear"\n',
        ("stage 1 'pa'", "field 'cubic'", "'linear'", "compressive"),
    ),
    # --- missing required fields ---
    Case(
        "gain-missing",
        CARRIER + PAD + PA_HEAD + 'oip3 = "+34 dBm"\n',
        ("stage 2 'pa'", "field 'gain'", "required"),
    ),
    Case(
        "carrier-freq-missing",
        CARRIER + '[[carrier]]\npower = "-8 dBm"\n',
        ("carrier 2", "field 'freq'", "required"),
    ),
    Case(
        "kind-missing",
        CARRIER + PAD + '[[stage]]\nname = "pa"\ngain = "16 dB"\n',
        ("stage 2 'pa'", "field 'kind'", "required", "amplifier"),
    ),
    Case(
        "name-missing",
        CARRIER + PAD + '[[stage]]\nkind = "amplifier"\ngain = "16 dB"\n',
        ("stage 2", "field 'name'", "required"),
    ),
    Case(
        "name-blank",
        CARRIER + '[[stage]]\nkind = "amplifier"\nname = "  "\ngain = "16 dB"\n',
        ("stage 1", "field 'name'", "non-empty"),
    ),
    Case(
        "name-not-a-string",
        CARRIER + '[[stage]]\nkind = "amplifier"\nname = 3\ngain = "16 dB"\n',
        ("stage 1", "field 'name'", "3", "string"),
    ),
    Case(
        "empty-stage-table",
        CARRIER + "[[stage]]\n",
        ("stage 1", "field 'kind'", "required"),
    ),
    # --- lineup-level structure ---
    Case(
        "duplicate-stage-names",
        CARRIER + PA + PAD + PA,
        ("stage 3", "field 'name'", "'pa'", "unique"),
        proc=True,
    ),
    Case("no-carrier", PAD, ("carrier",)),
    Case("empty-file", "", ("carrier",)),
    Case(
        "too-many-carriers",
        "".join(f'[[carrier]]\nfreq = "{455 + f / 40} MHz"\npower = "-40 dBm"\n' for f in range(257)),
        ("257 carriers", "at most 256"),
    ),
    Case(
        # Four carriers on no common raster: an axis each, 61^4 grid points for the degree-5
        # amplifier (alias-free grid 5 x 10 + 10 + 1 = 61 per axis, arithmetic).
        "four-carriers-off-raster",
        "".join(
            f'[[carrier]]\nfreq = "{f} MHz"\npower = "-20 dBm"\n' for f in (455, 456.0123, 457.31, 458.77)
        )
        + PA_HEAD
        + 'gain = "16 dB"\noip3 = "+30 dBm"\nh5 = "-60 dBc @ +10 dBm"\n',
        ("4 carriers on no common raster", "grid points", "raster"),
    ),
    Case(
        "carrier-off-stated-raster",
        "".join(f'[[carrier]]\nfreq = "{f} MHz"\npower = "-20 dBm"\n' for f in (455, 455.025, 455.0625))
        + '[analysis]\nraster = "25 kHz"\n',
        ("carrier 3", "freq", "12500 Hz off the 25 kHz raster", "raster_tolerance"),
    ),
    Case(
        "duplicate-carrier",
        CARRIER + CARRIER,
        ("carrier 2", "freq", "455 MHz", "distinct"),
    ),
    Case(
        "raster-tolerance-too-wide",
        CARRIER + '[analysis]\nraster = "25 kHz"\nraster_tolerance = "20 kHz"\n',
        ("raster_tolerance", "20 kHz", "half the raster"),
    ),
    Case(
        "stage-array-of-strings",
        'stage = ["pa"]\n' + CARRIER,
        ("stage 1", "'pa'", "table"),
    ),
    Case(
        "stage-is-a-string",
        'stage = "pa"\n' + CARRIER,
        ("'stage'", "'pa'", "[[stage]]"),
    ),
    Case(
        "stage-single-table",
        CARRIER + '[stage]\nkind = "amplifier"\nname = "pa"\ngain = "16 dB"\n',
        ("'stage'", "[[stage]]"),
    ),
    Case(
        "carrier-array-of-numbers",
        "carrier = [455]\n",
        ("carrier 1", "455", "table"),
    ),
    Case(
        "analysis-not-a-table",
        "analysis = 3\n" + CARRIER,
        ("[analysis]", "3", "table"),
    ),
    # --- figures that contradict each other ---
    Case(
        # iip3 = oip3 - gain = 34 - 16 = 18 dBm (arithmetic), not 20.
        "iip3-disagrees-with-oip3-and-gain",
        CARRIER + PAD + PA + 'oip3 = "+34 dBm"\niip3 = "+20 dBm"\n',
        ("stage 2 'pa'", "field 'iip3'", "'+20 dBm'", "+18.00 dBm"),
    ),
    Case(
        "h2-positive-dbc",
        CARRIER + PAD + PA + 'h2 = "+28 dBc @ +20 dBm"\n',
        ("stage 2 'pa'", "field 'h2'", "'+28 dBc @ +20 dBm'", "dBc"),
    ),
    Case(
        "h2-without-output-power",
        CARRIER + PA + 'h2 = "-28 dBc"\n',
        ("stage 1 'pa'", "field 'h2'", "'-28 dBc'", "@"),
    ),
    Case(
        "p1db-above-psat",
        CARRIER + PAD + PA + 'p1db = "+30 dBm"\npsat = "+28 dBm"\n',
        ("stage 2 'pa'", "field 'p1db'", "'+30 dBm'", "psat"),
    ),
    # --- mixer figures: compression, IF feedthrough ---
    Case(
        "mixer-p1db-no-unit",
        CARRIER + MIXER + 'p1db = "+1"\n',
        ("stage 1 'mixer'", "field 'p1db'", "'+1'", "dBm"),
    ),
    Case(
        "mixer-iip3-in-db",
        CARRIER + MIXER + 'iip3 = "+10 dB"\n',
        ("stage 1 'mixer'", "field 'iip3'", "'+10 dB'", "dBm"),
    ),
    Case(
        # The envelope limiter with s = 1 ties IIP3 - P1dB = 10 log10(2) - 10 log10(10^0.1 - 1)
        # = 8.88 dB (arithmetic on the Rapp form, spurplan/stages/mixer.py), so p1db +1 dBm
        # means +9.88 dBm, not +15.
        "mixer-iip3-disagrees-with-p1db",
        CARRIER + MIXER + 'p1db = "+1 dBm"\niip3 = "+15 dBm"\n',
        ("stage 1 'mixer'", "field 'iip3'", "'+15 dBm'", "'+1 dBm'", "8.88", "+9.88 dBm", "only one"),
        proc=True,
    ),
    Case(
        "mixer-if-isolation-no-unit",
        CARRIER + MIXER + 'if_isolation = "40"\n',
        ("stage 1 'mixer'", "field 'if_isolation'", "'40'", "dB"),
    ),
    Case(
        "mixer-if-isolation-negative",
        CARRIER + MIXER + 'if_isolation = "-40 dB"\n',
        ("stage 1 'mixer'", "field 'if_isolation'", "'-40 dB'", ">= 0 dB"),
    ),
    Case(
        # IF - wanted = (P - 40 dB) - (P - 6 dB) = -34 dBc (arithmetic), not -20.
        "mixer-if-isolation-disagrees-with-spurs",
        CARRIER + MIXER + 'if_isolation = "40 dB"\nspur_drive = "-10 dBm"\nspurs = { "IF" = "-20 dBc" }\n',
        ("stage 1 'mixer'", "field 'if_isolation'", "40 dB", "-20 dBc", "-34 dBc"),
    ),
    # --- [analysis] ---
    Case("max-order-0", CARRIER + "[analysis]\nmax_order = 0\n", ("[analysis]", "field 'max_order'", "0")),
    Case(
        "max-order-100",
        CARRIER + "[analysis]\nmax_order = 100\n",
        ("[analysis]", "field 'max_order'", "100"),
    ),
    Case(
        "max-order-2.5",
        CARRIER + "[analysis]\nmax_order = 2.5\n",
        ("[analysis]", "field 'max_order'", "2.5", "whole number"),
    ),
    Case(
        "max-order-ten",
        CARRIER + '[analysis]\nmax_order = "ten"\n',
        ("[analysis]", "field 'max_order'", "'ten'", "whole number"),
    ),
    Case(
        "max-order-true",
        CARRIER + "[analysis]\nmax_order = true\n",
        ("[analysis]", "field 'max_order'", "True"),
    ),
    Case(
        "combine-max",
        CARRIER + '[analysis]\ncombine = "max"\n',
        ("[analysis]", "field 'combine'", "'max'", "worst"),
    ),
    # --- synthesized filters: unloaded Q and stopband floor ---
    Case(
        "filter-floor-positive",
        CARRIER + LPF % ', floor = "+80 dB"',
        ("stage 1 'lpf' prototype", "field 'floor'", "'+80 dB'", "-300 dB to -20 dB", "none"),
        proc=True,
    ),
    Case(
        "filter-floor-too-high",
        CARRIER + LPF % ', floor = "-10 dB"',
        ("stage 1 'lpf' prototype", "field 'floor'", "'-10 dB'", "-300 dB to -20 dB"),
    ),
    Case(
        "filter-floor-bare-number",
        CARRIER + LPF % ", floor = -80",
        ("stage 1 'lpf' prototype", "field 'floor'", "-80", "dB"),
    ),
    Case(
        "filter-floor-in-dbm",
        CARRIER + LPF % ', floor = "-80 dBm"',
        ("stage 1 'lpf' prototype", "field 'floor'", "'-80 dBm'", "dB"),
    ),
    Case(
        "filter-floor-word",
        CARRIER + LPF % ', floor = "off"',
        ("stage 1 'lpf' prototype", "field 'floor'", "'off'", "none"),
    ),
    Case(
        "filter-q-inductor-word",
        CARRIER + LPF % ', q_inductor = "lossy"',
        ("stage 1 'lpf' prototype", "field 'q_inductor'", "'lossy'", "lossless"),
    ),
    Case(
        "filter-q-capacitor-zero",
        CARRIER + LPF % ", q_capacitor = 0",
        ("stage 1 'lpf' prototype", "field 'q_capacitor'", "0", "0.5 to 1e+12"),
    ),
    Case(
        "filter-q-inductor-string-number",
        CARRIER + LPF % ', q_inductor = "100"',
        ("stage 1 'lpf' prototype", "field 'q_inductor'", "'100'", "a number"),
    ),
    # --- the file itself ---
    Case("not-valid-toml", CARRIER + "gain = = 3\n", ("TOML", "line"), proc=True),
    Case("missing-file", None, ("not found",), special="missing", proc=True),
    Case("directory", None, ("directory",), special="directory", proc=True),
    Case(
        "not-utf8",
        (CARRIER + '[lineup]\nname = "caf\xe9"\n').encode("latin-1"),
        ("UTF-8",),
        proc=True,
    ),
    # --- found while writing this corpus (see the report of these tests) ---
    Case(
        # A newline inside a stage name must not split the error over two lines.
        "stage-name-with-newline",
        CARRIER + '[[stage]]\nkind = "amplifier"\nname = "p\\na"\ngain = "16 dB"\n',
        ("stage 1", "field 'name'", "'p\\na'"),
        proc=True,
    ),
    Case(
        # 10^(1e300 / 20) overflows float64 (IEEE 754).
        "gain-overflows",
        CARRIER + PA_HEAD + 'gain = "1e300 dB"\n',
        ("stage 1 'pa'", "field 'gain'", "'1e300 dB'"),
        only_proc=True,
    ),
    Case(
        # An intercept of -1e300 dBm is 0 V in float64: the model divides by it.
        "oip3-minus-huge",
        CARRIER + PA + 'oip3 = "-1e300 dBm"\n',
        ("stage 1 'pa'", "field 'oip3'", "'-1e300 dBm'"),
        only_proc=True,
    ),
    Case(
        # 1e300 dBm is infinite in watts (float64).
        "p1db-huge",
        CARRIER + PA + 'p1db = "1e300 dBm"\n',
        ("stage 1 'pa'", "field 'p1db'", "'1e300 dBm'"),
        only_proc=True,
    ),
    Case(
        "carrier-power-huge",
        '[[carrier]]\nfreq = "455 MHz"\npower = "1e300 dBm"\n' + PA,
        ("carrier 1", "field 'power'", "'1e300 dBm'"),
        only_proc=True,
    ),
    Case(
        # 1e308 GHz = 1e317 Hz: beyond float64.
        "carrier-freq-overflows",
        '[[carrier]]\nfreq = "1e308 GHz"\npower = "-8 dBm"\n',
        ("carrier 1", "field 'freq'", "'1e308 GHz'"),
        only_proc=True,
    ),
    Case(
        "loss-huge",
        CARRIER + '[[stage]]\nkind = "attenuator"\nname = "pad"\nloss = "1e300 dB"\n',
        ("stage 1 'pad'", "field 'loss'", "'1e300 dB'"),
        only_proc=True,
    ),
]

IDS = [c.id for c in CASES]
assert len(set(IDS)) == len(IDS), "case ids must be unique"


def _materialise(case: Case, tmp_path: Path) -> Path:
    path = tmp_path / f"{case.id}.toml"
    if case.special == "missing":
        return path
    if case.special == "directory":
        path.mkdir()
        return path
    if isinstance(case.text, bytes):
        path.write_bytes(case.text)
    else:
        path.write_text(case.text, encoding="utf-8")
    return path


@pytest.mark.parametrize("command", ["spectrum", "budget"])
@pytest.mark.parametrize("case", [c for c in CASES if not c.only_proc], ids=lambda c: c.id)
def test_malformed_in_process(case, command, tmp_path):
    path = _materialise(case, tmp_path)
    code, out, err, detail, _ = run_in_process([command, str(path)])
    assert_one_error_line(code, out, err, case.needles, names=path, detail=detail)


@pytest.mark.parametrize("case", [c for c in CASES if c.proc or c.only_proc], ids=lambda c: c.id)
@pytest.mark.slow
def test_malformed_subprocess(case, tmp_path):
    path = _materialise(case, tmp_path)
    # A runaway case must fail, not take the machine's memory.
    proc = run_cli(["spectrum", str(path)], cwd=tmp_path, limit_memory=True)
    assert_one_error_line(proc.returncode, proc.stdout, proc.stderr, case.needles, names=path)


def test_corpus_size():
    # The brief asks for at least 20 malformed lineups.
    assert len(CASES) >= 20


# --- near misses: one edit away from a malformed case, and valid ----------------------------------
# They show that each case above fails for the reason it names, not for another one.

NEAR_MISSES = [
    ("base", CARRIER + PAD + PA),
    # iip3 = oip3 - gain = 34 - 16 = 18 dBm (arithmetic).
    ("iip3-agrees", CARRIER + PAD + PA + 'oip3 = "+34 dBm"\niip3 = "+18 dBm"\n'),
    # OHIP3 = OIP3 + 10 log10(3) = 38.77 dBm (Razavi, ch. 2, from memory), so
    # h3 = -2 (38.77 - 20) = -37.54 dBc at +20 dBm (arithmetic).
    ("h3-agrees", CARRIER + PAD + PA + 'oip3 = "+34 dBm"\nh3 = "-37.54 dBc @ +20 dBm"\n'),
    ("p1db-below-psat", CARRIER + PAD + PA + 'p1db = "+27 dBm"\npsat = "+28 dBm"\n'),
    ("max-order-1", CARRIER + PA + "[analysis]\nmax_order = 1\n"),
    ("max-order-2.0", CARRIER + PA + "[analysis]\nmax_order = 2.0\n"),
    (
        "three-carriers",
        "".join(f'[[carrier]]\nfreq = "{f} MHz"\npower = "-20 dBm"\n' for f in (455, 456, 458)),
    ),
    ("combine-power", CARRIER + PA + '[analysis]\ncombine = "power"\n'),
    # A mixer with every figure; +9.88 dBm is p1db + 8.88 dB (see the case above).
    (
        "mixer-complete",
        CARRIER
        + MIXER
        + 'lo_isolation = "35 dB"\nif_isolation = "40 dB"\np1db = "+1 dBm"\niip3 = "+9.88 dBm"\n'
        + 'spur_drive = "-10 dBm"\nspurs = { "2LO-IF" = "-40 dBc", "IF" = "-34 dBc" }\n',
    ),
    # A 0 dB pad is a through connection: accepted (the loader documents loss >= 0).
    ("loss-zero", CARRIER + '[[stage]]\nkind = "attenuator"\nname = "pad"\nloss = "0 dB"\n'),
    # The ideal ladder asked for by name, and the floor's range ends (FLOOR_RANGE_DB).
    ("filter-ideal", CARRIER + LPF % ', q_inductor = "lossless", q_capacitor = "lossless", floor = "none"'),
    ("filter-floor-minus-20", CARRIER + LPF % ', floor = "-20 dB", q_inductor = 0.5'),
    ("filter-floor-minus-300", CARRIER + LPF % ', floor = "-300 dB", q_capacitor = 1e12'),
]


@pytest.mark.parametrize(("name", "text"), NEAR_MISSES, ids=[n for n, _ in NEAR_MISSES])
def test_near_miss_is_accepted(name, text, tmp_path):
    path = write(tmp_path, f"{name}.toml", text)
    result = invoke("spectrum", path, "--format", "csv", expect=0)
    assert result.stdout.startswith("freq_hz,")
    assert "error" not in result.stderr
