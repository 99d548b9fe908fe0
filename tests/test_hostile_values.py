"""Nonsense values: numbers that parse but make no physical sense are refused at the boundary.

A value with the right unit can still be absurd: a mixer spur 25 dB above the wanted
product, a relative limit of +100 dBc (above the carrier, so no limit at all), a
saturated power of -300 dBm (which turned a lineup into "PASS +297 dB"), an LO of
-300 dBm converting at full gain, a wanted product at 0 Hz.  Each key and option has a
physical-sense range (README, "Plausible values"), stated once where the key is read
(``spurplan.fields.Within``), and a value outside it is bad input.

The reference for these cases is the command-line contract (README, "Bad input gives
one line naming the file, the stage, the field, the value and what was expected, and
exit status 2"): exit status 2, no traceback, nothing on stdout, one stderr line that
names the file, the stage and field (or the option), the value and the range expected;
quick; and no output file written.  The physical facts behind each range are named
beside the case ("common practice, no source" where that is where they come from).
Every lineup, rule file and channel file below is invented for these tests.
"""

from __future__ import annotations

from dataclasses import dataclass

import pytest
from helpers import as_json, assert_one_error_line, run_in_process

from spurplan.fields import Within
from spurplan.io.lineup_file import from_dict

# --- building blocks (TOML text, invented) --------------------------------------------------------

CARRIER = '[[carrier]]\nfreq = "100 MHz"\npower = "-10 dBm"\n'
MASK = '[mask]\nuse = ["itu-sm329-cat-a"]\n[analysis]\nmax_order = 5\n'
PAD = '[[stage]]\nkind = "attenuator"\nname = "pad"\nloss = "1 dB"\n'


def mixer(extra: str = "", *, name: str = "mixer", lo: str = "1.6 GHz", power: str = "+7 dBm") -> str:
    """A mixer stage with 6 dB conversion loss; ``extra`` adds keys."""
    return (
        f'[[stage]]\nkind = "mixer"\nname = "{name}"\nlo = {{ freq = "{lo}", power = "{power}" }}\n'
        'conversion_loss = "6 dB"\n' + extra
    )


def pa(extra: str = "", gain: str = "20 dB") -> str:
    """An amplifier stage 'pa' with ``gain``; ``extra`` adds keys."""
    return f'[[stage]]\nkind = "amplifier"\nname = "pa"\ngain = "{gain}"\n' + extra


def rule(limit_keys: str) -> str:
    """An inline mask rule from 9 kHz up with the given limit keys."""
    return f'[mask]\n[[mask.rule]]\nname = "r"\nstart = "9 kHz"\n{limit_keys}\n'


# The failing lineup of tests/test_hardening.py (invented): a 26 dB amplifier saturating
# at +40 dBm whose second harmonic fails Category A at +10 dBm in.
FAILING = (
    '[[carrier]]\nfreq = "150 MHz"\npower = "+10 dBm"\n'
    '[[stage]]\nkind = "amplifier"\nname = "pa"\ngain = "26 dB"\n'
    'h2 = "-35 dBc @ +36 dBm"\npsat = "+40 dBm"\n'
    '[mask]\nuse = ["itu-sm329-cat-a"]\n'
)


@dataclass(frozen=True)
class Case:
    """One value out of its physical-sense range.

    Attributes
    ----------
    id : str
    files : dict of str -> str
        Written into the test's folder; the lineup is ``l.toml``.
    args : tuple of str
        Command line; ``{tmp}`` stands for the test's folder.
    needles : tuple of str
        Text the error line must hold (``{tmp}`` as above).
    forbid : tuple of str
        Text the error line must not hold.
    absent : tuple of str
        Files (in the test's folder) that must not exist afterwards.
    """

    id: str
    files: dict[str, str]
    args: tuple[str, ...]
    needles: tuple[str, ...]
    forbid: tuple[str, ...] = ()
    absent: tuple[str, ...] = ()


def lineup_case(cid: str, text: str, *needles: str, command: str = "spectrum") -> Case:
    """A lineup that must be refused on loading: the line names the file and ``needles``."""
    return Case(cid, {"l.toml": text}, (command, "{tmp}/l.toml"), ("{tmp}/l.toml", *needles))


CASES = [
    # --- mixers ---
    # Conversion products of a mixer lie below the wanted (1x1) product at the drive of
    # the spur table (common practice, no source): +25 dBc is a sign slip.
    lineup_case(
        "mixer-spur-plus-25-dbc",
        CARRIER + mixer('spur_drive = "-10 dBm"\nspurs = { "2LO-IF" = "+25 dBc" }\n'),
        "stage 1 'mixer'",
        "field 'spurs'",
        "2LO-IF",
        "'+25 dBc'",
        "from -200 to 0 dBc",
    ),
    lineup_case(
        "mixer-image-spur-above-wanted",
        CARRIER + mixer('spur_drive = "-10 dBm"\nspurs = { "LO-IF" = "+3 dBc" }\n'),
        "field 'spurs'",
        "LO-IF",
        "'+3 dBc'",
        "at or below the wanted product",
    ),
    # LO leakage is LO power - isolation, isolation >= 0 dB: at the output it cannot
    # exceed the LO drive (+7 dBm).  The wanted output at spur_drive is -10 - 6 = -16 dBm,
    # so "LO" = +30 dBc would be +14 dBm (arithmetic).
    lineup_case(
        "mixer-lo-leak-above-lo-drive",
        CARRIER + mixer('spur_drive = "-10 dBm"\nspurs = { "LO" = "+30 dBc" }\n'),
        "field 'spurs'",
        "'+30 dBc'",
        "+14.00 dBm",
        "LO drive (+7.00 dBm)",
    ),
    # The IF's own products (feedthrough, IF harmonics) cannot exceed the IF drive:
    # "2IF" = +10 dBc is -16 + 10 = -6 dBm against a -10 dBm drive (arithmetic).
    lineup_case(
        "mixer-if-harmonic-above-if-drive",
        CARRIER + mixer('spur_drive = "-10 dBm"\nspurs = { "2IF" = "+10 dBc" }\n'),
        "field 'spurs'",
        "2IF",
        "IF drive (-10.00 dBm)",
    ),
    # An LO at -300 dBm does not switch the mixer, so its stated conversion gain cannot
    # hold; LO drives of mixers run from about -10 dBm (active) to +27 dBm (high-level
    # rings) (common practice, no source).
    lineup_case(
        "mixer-lo-minus-300-dbm",
        CARRIER + mixer(power="-300 dBm"),
        "stage 1 'mixer' lo",
        "field 'power'",
        "'-300 dBm'",
        "LO drive from -20 to +30 dBm",
    ),
    lineup_case(
        "mixer-lo-plus-40-dbm",
        CARRIER + mixer(power="+40 dBm"),
        "field 'power'",
        "'+40 dBm'",
        "LO drive",
    ),
    # LO equal to the IF with the lower sideband: the wanted product LO - IF is at 0 Hz
    # (arithmetic), no transmission at all.
    lineup_case(
        "lo-equals-if-lower-sideband",
        CARRIER + mixer('sideband = "lower"\n', lo="100 MHz") + MASK,
        "stage 1 'mixer'",
        "field 'sideband'",
        "100 MHz",
        "at 0 Hz",
        "wanted product from 1 kHz",
        command="check",
    ),
    # 100 MHz - 99.9995 MHz = 500 Hz: below any radio allocation (ITU Radio Regulations
    # Article 5 starts at 8.3 kHz; from memory).
    lineup_case(
        "wanted-product-near-0-hz",
        '[[carrier]]\nfreq = "99.9995 MHz"\npower = "-10 dBm"\n'
        + mixer('sideband = "lower"\n', lo="100 MHz"),
        "field 'sideband'",
        "500 Hz",
        "1 kHz",
    ),
    # Through a second mixer: 90 MHz + 10 MHz = 100 MHz after the first, then 100 MHz -
    # 100 MHz = 0 Hz after the second (arithmetic).
    lineup_case(
        "wanted-product-0-hz-after-second-mixer",
        '[[carrier]]\nfreq = "10 MHz"\npower = "-10 dBm"\n'
        + mixer(name="first", lo="90 MHz")
        + mixer('sideband = "lower"\n', name="second", lo="100 MHz"),
        "stage 2 'second'",
        "100 MHz at the mixer input",
        "at 0 Hz",
    ),
    # Two carriers: the second lands at 0 Hz while the first is fine.
    lineup_case(
        "second-carrier-at-0-hz",
        '[[carrier]]\nfreq = "90 MHz"\npower = "-10 dBm"\n[[carrier]]\nfreq = "100 MHz"\npower = "-20 dBm"\n'
        + mixer('sideband = "lower"\n', lo="100 MHz"),
        "carrier 2",
        "at 0 Hz",
    ),
    lineup_case(
        "mixer-negative-conversion-loss",
        CARRIER + mixer().replace('conversion_loss = "6 dB"', 'conversion_loss = "-10 dB"'),
        "field 'conversion_loss'",
        "'-10 dB'",
        "conversion_gain",
    ),
    lineup_case(
        "mixer-absurd-conversion-gain",
        CARRIER + mixer().replace('conversion_loss = "6 dB"', 'conversion_gain = "+45 dB"'),
        "field 'conversion_gain'",
        "'+45 dB'",
        "from -40 to +30 dB",
    ),
    # A negative isolation would leak more than the port is driven with.
    lineup_case(
        "mixer-negative-lo-isolation",
        CARRIER + mixer('lo_isolation = "-5 dB"\n'),
        "field 'lo_isolation'",
        "'-5 dB'",
        "from 0 to +100 dB",
    ),
    lineup_case(
        "mixer-negative-image-rejection",
        CARRIER + mixer('image_rejection = "-6 dB"\n'),
        "field 'image_rejection'",
        "'-6 dB'",
        "image rejection from 0",
    ),
    lineup_case(
        "mixer-spur-drive-plus-50-dbm",
        CARRIER + mixer('spur_drive = "+50 dBm"\nspurs = { "2LO-IF" = "-40 dBc" }\n'),
        "field 'spur_drive'",
        "'+50 dBm'",
        "-80 to +30 dBm",
    ),
    # --- amplifiers and pads ---
    # Psat -300 dBm made every product read hundreds of dB under its limit.
    lineup_case(
        "psat-minus-300-dbm",
        FAILING.replace('psat = "+40 dBm"', 'psat = "-300 dBm"'),
        "stage 1 'pa'",
        "field 'psat'",
        "'-300 dBm'",
        "saturated output power from -50 to +90 dBm",
        command="check",
    ),
    # +10 dBm into 26 dB of gain is +36 dBm small-signal output; a psat 96 dB below that
    # (arithmetic) is no amplifier but a typing slip, and read as one it passes any mask.
    lineup_case(
        "psat-far-below-the-drive",
        FAILING.replace('psat = "+40 dBm"', 'psat = "-60 dBm"'),
        "field 'psat'",
        "'-60 dBm'",
        "-50 to +90 dBm",
        command="check",
    ),
    # An output cannot exceed saturation, so a harmonic cannot have been measured at an
    # output far above psat (definition of the saturated output power).
    lineup_case(
        "harmonic-stated-above-psat",
        CARRIER + pa('h2 = "-30 dBc @ +45 dBm"\npsat = "+30 dBm"\n'),
        "field 'h2'",
        "'-30 dBc @ +45 dBm'",
        "above psat '+30 dBm'",
    ),
    lineup_case(
        "harmonic-at-absurd-output",
        CARRIER + pa('h3 = "-40 dBc @ +95 dBm"\n'),
        "field 'h3'",
        "'-40 dBc @ +95 dBm'",
        "-50 to +90 dBm",
    ),
    lineup_case(
        "amplifier-gain-plus-90-db", CARRIER + pa(gain="90 dB"), "field 'gain'", "'90 dB'", "-20 to +60 dB"
    ),
    lineup_case(
        "amplifier-gain-minus-50-db", CARRIER + pa(gain="-50 dB"), "field 'gain'", "'-50 dB'", "-20 to +60 dB"
    ),
    lineup_case(
        "p1db-above-range", CARRIER + pa('p1db = "+95 dBm"\n'), "field 'p1db'", "'+95 dBm'", "-50 to +90 dBm"
    ),
    # --- a rule file's examined range runs upwards ---
    Case(
        "rule-file-examine-stop-below-start",
        {
            "l.toml": CARRIER + PAD + '[mask]\nfiles = ["rules.toml"]\n',
            "rules.toml": '[ruleset]\nname = "mine"\nsource = "test plan (invented)"\n'
            'examine = { start = "1 GHz", stop = "30 MHz" }\n'
            '[[rule]]\nname = "general"\nstart = "9 kHz"\nlimit = "-36 dBm"\nstatus = "derived"\n',
        },
        ("check", "{tmp}/l.toml"),
        ("{tmp}/rules.toml", "[ruleset] examine", "field 'stop'", "'30 MHz'", "above start"),
    ),
    # A negative loss is a gain: the message says where a gain belongs.
    lineup_case(
        "attenuator-negative-loss",
        CARRIER + PAD.replace('"1 dB"', '"-6 dB"'),
        "field 'loss'",
        "'-6 dB'",
        "amplifier",
    ),
    # --- carriers and the lineup head ---
    lineup_case(
        "carrier-500-hz", '[[carrier]]\nfreq = "500 Hz"\npower = "0 dBm"\n', "carrier 1", "'500 Hz'", "1 kHz"
    ),
    lineup_case(
        "carrier-plus-95-dbm",
        '[[carrier]]\nfreq = "100 MHz"\npower = "+95 dBm"\n',
        "field 'power'",
        "'+95 dBm'",
        "-150 to +90 dBm",
    ),
    # An occupied band of 3 MHz around 1 MHz would reach below 0 Hz (arithmetic).
    lineup_case(
        "bandwidth-wider-than-twice-the-carrier",
        '[[carrier]]\nfreq = "1 MHz"\npower = "0 dBm"\nbandwidth = "3 MHz"\n',
        "field 'bandwidth'",
        "'3 MHz'",
        "2 x the carrier frequency",
    ),
    lineup_case(
        "impedance-half-an-ohm",
        '[lineup]\nimpedance = "0.5 ohm"\n' + CARRIER,
        "field 'impedance'",
        "'0.5 ohm'",
        "from 1 ohm to 10 kohm",
    ),
    lineup_case(
        "report-drive-start-above-range",
        CARRIER + PAD + MASK + '[report]\ndrive = { start = "+95 dBm", stop = "+96 dBm", step = "1 dB" }\n',
        "[report] drive",
        "field 'start'",
        "'+95 dBm'",
    ),
    # --- masks ---
    # A relative limit above the carrier is no limit (a spur may not exceed the carrier
    # it comes from in any regulation; common practice, no source).
    lineup_case(
        "relative-limit-plus-100-dbc",
        CARRIER + PAD + rule('limit = "+100 dBc"'),
        "[[mask.rule]] 1",
        "field 'limit'",
        "'+100 dBc'",
        "relative limit from -200 to 0 dBc",
        command="check",
    ),
    Case(
        "band-list-limit-above-carrier",
        {
            "l.toml": CARRIER
            + PAD
            + '[mask]\nuse = [{ name = "gnss-bands", limit = "+3 dBc", rbw = "1 MHz" }]\n'
        },
        ("check", "{tmp}/l.toml"),
        ("{tmp}/l.toml", "[mask] use 1 'gnss-bands'", "field 'limit'", "'+3 dBc'"),
    ),
    Case(
        "rule-file-absolute-limit-plus-85-dbm",
        {
            "l.toml": CARRIER + PAD + '[mask]\nfiles = ["rules.toml"]\n',
            "rules.toml": '[ruleset]\nname = "mine"\nsource = "test plan (invented)"\n'
            '[[rule]]\nname = "general"\nstart = "9 kHz"\nlimit = "+85 dBm"\nstatus = "derived"\n',
        },
        ("check", "{tmp}/l.toml"),
        ("{tmp}/rules.toml", "rule 1", "field 'limit'", "'+85 dBm'", "-200 to +80 dBm"),
    ),
    lineup_case(
        "rbw-one-ghz",
        CARRIER + PAD + rule('limit = "-36 dBm"\nrbw = "1 GHz"'),
        "field 'rbw'",
        "'1 GHz'",
        "1 Hz to 100 MHz",
        command="check",
    ),
    # A rule that holds only for carriers above +95 dBm (3 MW) holds for none.
    lineup_case(
        "when-power-above-plus-95-dbm",
        CARRIER + PAD + rule('limit = "-36 dBm"\nwhen_power = { above = "+95 dBm" }'),
        "[[mask.rule]] 1 when_power",
        "field 'above'",
        "'+95 dBm'",
        "-150 to +90 dBm",
        command="check",
    ),
    Case(
        "field-strength-190-dbuv-m",
        {
            "l.toml": CARRIER + PAD + '[mask]\nantenna_gain = "0 dBi"\n[[mask.rule]]\nname = "r"\n'
            'start = "9 kHz"\nlimit = "190 dBuV/m @ 3 m"\n'
        },
        ("check", "{tmp}/l.toml"),
        ("{tmp}/l.toml", "field 'limit'", "'190 dBuV/m @ 3 m'", "-60 to +160 dBuV/m"),
    ),
    Case(
        "antenna-gain-plus-90-dbi",
        {"l.toml": CARRIER + PAD + '[mask]\nuse = ["us-fcc-15.209"]\nantenna_gain = "+90 dBi"\n'},
        ("check", "{tmp}/l.toml"),
        ("{tmp}/l.toml", "[mask]", "field 'antenna_gain'", "'+90 dBi'", "-50 to +80 dBi"),
    ),
    # --- command options ---
    Case(
        "spurs-reversed-lo-range",
        {"l.toml": CARRIER + mixer() + MASK},
        (
            "spurs",
            "{tmp}/l.toml",
            "--stage",
            "mixer",
            "--plot",
            "{tmp}/chart.png",
            "--lo-start",
            "1.8 GHz",
            "--lo-stop",
            "1.4 GHz",
        ),
        ("--lo-start/--lo-stop", "1.8 GHz to 1.4 GHz", "below --lo-stop"),
        absent=("chart.png",),
    ),
    # Only --lo-start given, above the default stop (LO + 20 % = 1.92 GHz; arithmetic).
    Case(
        "spurs-lo-start-above-default-stop",
        {"l.toml": CARRIER + mixer() + MASK},
        ("spurs", "{tmp}/l.toml", "--stage", "mixer", "--plot", "{tmp}/chart.png", "--lo-start", "2 GHz"),
        ("--lo-start/--lo-stop", "2 GHz to 1.92 GHz"),
        absent=("chart.png",),
    ),
    # A negative margin target accepts products above their limit: on a failing lineup
    # it reported "already meets the mask".  Nothing may be written.
    Case(
        "remedy-margin-minus-300-db",
        {"l.toml": FAILING},
        ("remedy", "{tmp}/l.toml", "--margin", "-300 dB", "--write", "{tmp}/fixed.toml"),
        ("--margin", "'-300 dB'", "margin target from 0 to +60 dB"),
        forbid=("already meets",),
        absent=("fixed.toml",),
    ),
    Case(
        "remedy-margin-minus-half-db",
        {"l.toml": FAILING},
        ("remedy", "{tmp}/l.toml", "--margin", "-0.5 dB"),
        ("--margin", "'-0.5 dB'", "accepts products above their limit"),
    ),
    # The output cannot exceed saturation (+40 dBm here; definition of Psat): a target
    # of +45 dBm is unreachable and must not read as meeting the mask.
    Case(
        "drive-target-output-above-saturation",
        {"l.toml": FAILING},
        (
            "drive",
            "{tmp}/l.toml",
            "--target-output",
            "--start",
            "+30 dBm",
            "--stop",
            "+45 dBm",
            "--step",
            "1 dB",
        ),
        ("--stop +45 dBm", "unreachable", "saturates"),
        forbid=("met over the whole range",),
    ),
    Case(
        "drive-start-minus-200-dbm",
        {"l.toml": FAILING},
        ("drive", "{tmp}/l.toml", "--start", "-200 dBm", "--stop", "0 dBm", "--step", "1 dB"),
        ("--start -200 dBm", "-150 to +90 dBm"),
    ),
    # +10 dBm in and 26 dB gain: -60 dB of input is about -24 dBm out, the lowest output
    # searched (arithmetic); -100 dBm out is not reached and is said so.
    Case(
        "drive-target-output-below-the-search",
        {"l.toml": FAILING},
        (
            "drive",
            "{tmp}/l.toml",
            "--target-output",
            "--start",
            "-100 dBm",
            "--stop",
            "+30 dBm",
            "--step",
            "1 dB",
        ),
        ("--start -100 dBm", "unreachable", "lowest input searched"),
        forbid=("met over the whole range",),
    ),
    # Tuning a lower-sideband mixer's LO through the IF (100 MHz) puts the wanted product
    # at 0 Hz for that channel (arithmetic).
    Case(
        "tune-lo-through-the-if",
        {"l.toml": CARRIER + mixer('sideband = "lower"\n', lo="300 MHz") + MASK},
        ("tune", "{tmp}/l.toml", "--start", "50 MHz", "--stop", "150 MHz", "--step", "10 MHz"),
        ("LO at 100 MHz", "wanted product of 'mixer'", "at 0 Hz"),
    ),
    # A prototype shown at a carrier of 0 Hz showed no harmonics at all, silently.
    Case(
        "filter-carrier-0-hz",
        {},
        ("filter", "--family", "butterworth", "--order", "3", "--cutoff", "100 MHz", "--carrier", "0 Hz"),
        ("--carrier", "'0 Hz'", "1 kHz"),
    ),
    Case(
        "channels-file-500-hz",
        {"l.toml": CARRIER + PAD + MASK, "ch.txt": "100 MHz\n500 Hz\n"},
        ("tune", "{tmp}/l.toml", "--channels", "{tmp}/ch.txt"),
        ("{tmp}/ch.txt:2", "'500 Hz'", "1 kHz"),
    ),
]


def _fill(items, tmp_path):
    return tuple(str(s).replace("{tmp}", str(tmp_path)) for s in items)


@pytest.mark.parametrize("case", CASES, ids=lambda c: c.id)
def test_nonsense_value_is_one_line_and_exit_2(case, tmp_path):
    for name, text in case.files.items():
        (tmp_path / name).write_text(text, encoding="utf-8")
    code, out, err, detail, seconds = run_in_process(_fill(case.args, tmp_path))
    assert_one_error_line(code, out, err, _fill(case.needles, tmp_path), forbid=case.forbid, detail=detail)
    for name in case.absent:
        assert not (tmp_path / name).exists(), f"{name} was written"
    # Nothing was written beside the inputs (no output, no temporary file).
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted(case.files)
    assert seconds < 10, f"took {seconds:.1f} s"


def test_corpus_size():
    # The brief asks for at least 16 cases.
    assert len(CASES) >= 16
    assert len({c.id for c in CASES}) == len(CASES)


# --- the bounds are not tighter than physics -----------------------------------------------------


def _doc(stages, carriers=(("100 MHz", "-10 dBm"),), mask=None):
    doc = {"carrier": [{"freq": f, "power": p} for f, p in carriers], "stage": stages}
    if mask is not None:
        doc["mask"] = mask
    return doc


@pytest.mark.parametrize(
    "stage",
    [
        {"kind": "amplifier", "name": "a", "gain": "-20 dB"},
        {"kind": "amplifier", "name": "a", "gain": "+60 dB", "psat": "+90 dBm", "p1db": "+88 dBm"},
        {"kind": "amplifier", "name": "a", "gain": "10 dB", "psat": "-50 dBm"},
        {"kind": "attenuator", "name": "a", "loss": "0 dB"},
        {"kind": "attenuator", "name": "a", "loss": "100 dB"},
        {
            "kind": "mixer",
            "name": "m",
            "lo": {"freq": "1 GHz", "power": "-20 dBm"},
            "conversion_gain": "+30 dB",
        },
        {
            "kind": "mixer",
            "name": "m",
            "lo": {"freq": "1 GHz", "power": "+30 dBm"},
            "conversion_loss": "40 dB",
        },
    ],
    ids=["gain-20", "gain+60-psat+90", "psat-50", "loss0", "loss100", "lo-20-gain+30", "lo+30-loss40"],
)
def test_values_at_the_ends_of_their_range_load(stage):
    # Each end of a stated range is accepted (README, "Plausible values"): the ranges
    # are inclusive.
    lineup = from_dict(_doc([stage]), name="edges.toml")
    assert lineup.stages[0].name == stage["name"]


def test_lo_leak_above_a_weak_wanted_output_is_accepted_at_its_level(tmp_path):
    # LO leakage is an absolute level (LO power - isolation), so with a weak IF it may
    # lie above the wanted product.  Here the wanted output at the spur table's drive is
    # -10 dBm - 6 dB = -16 dBm and "LO" = +10 dBc puts the leak at -6 dBm, below the
    # +7 dBm LO drive (arithmetic from the table's definition: dBc relative to the
    # wanted output at spur_drive).
    text = CARRIER + mixer('spur_drive = "-10 dBm"\nspurs = { "LO" = "+10 dBc" }\n')
    (tmp_path / "l.toml").write_text(text, encoding="utf-8")
    code, out, err, detail, _ = run_in_process(["spectrum", str(tmp_path / "l.toml"), "--format", "json"])
    assert code == 0, err + detail
    rows = as_json(out)["products"]
    by_label = {row["label"]: row["level_dbm"] for row in rows}
    assert by_label["LO"] == pytest.approx(-6.0, abs=0.01)
    assert by_label["LO+IF"] == pytest.approx(-16.0, abs=0.01)


def test_relative_limit_at_the_carrier_edge_is_accepted():
    # 0 dBc is the top of the relative range (inclusive); -200 dBc the bottom.
    for value in ("0 dBc", "-200 dBc"):
        mask = {"rule": [{"name": "r", "start": "9 kHz", "limit": value}]}
        lineup = from_dict(
            _doc([{"kind": "attenuator", "name": "p", "loss": "1 dB"}], mask=mask), name="m.toml"
        )
        assert lineup.mask.rules[0][0].value == float(value.split()[0])


def test_within_states_its_range_as_the_messages_do():
    # The message form the README promises: "expected a saturated power from -50 to +90 dBm".
    psat = Within("a saturated power", -50.0, 90.0, "dBm")
    assert psat.expected() == "expected a saturated power from -50 to +90 dBm"
    assert -50.0 in psat and 90.0 in psat and 90.01 not in psat
    freq = Within("a carrier frequency", 1e3, 1e12, "Hz", "a radio frequency")
    assert freq.expected() == "expected a carrier frequency from 1 kHz to 1 THz (a radio frequency)"


def test_remedy_refuses_a_negative_margin_from_python():
    # The library boundary holds the same range as the option (README, "Plausible values").
    from spurplan.analyses.remedy import remedy
    from spurplan.errors import SpurplanError

    doc = {
        "carrier": [{"freq": "150 MHz", "power": "+10 dBm"}],
        "stage": [
            {"kind": "amplifier", "name": "pa", "gain": "26 dB", "h2": "-35 dBc @ +36 dBm", "psat": "+40 dBm"}
        ],
        "mask": {"use": ["itu-sm329-cat-a"]},
    }
    with pytest.raises(SpurplanError, match="margin target from 0 to"):
        remedy(from_dict(doc, name="failing.toml"), margin_db=-300.0)


def test_a_polynomial_driven_far_past_its_figures_is_refused_before_it_overflows(tmp_path):
    # Found by the CLI fuzz test: three stages stated only by a 7th harmonic (no
    # compression figure) at +33 dBm make a composed polynomial of degree 7^2 in the
    # second stage; its output (far above 1e9 V peak, which is +220 dBm into 50 ohm:
    # no transmitter, common practice, no source) overflowed when a node's levels
    # squared it, instead of being one located error.
    stage = 'kind = "amplifier"\ngain = "0.5 dB"\nh7 = "-60 dBc @ +20 dBm"\n'
    text = '[[carrier]]\nfreq = "455 MHz"\npower = "+3 dBW"\n' + "".join(
        f'[[stage]]\nname = "a{i}"\n{stage}' for i in (1, 2, 3)
    )
    (tmp_path / "l.toml").write_text(text, encoding="utf-8")
    code, out, err, detail, _ = run_in_process(["spectrum", str(tmp_path / "l.toml")])
    assert_one_error_line(code, out, err, ("stage 'a2'", "1e+09 V peak", "p1db or psat"), detail=detail)
