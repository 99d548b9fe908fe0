"""Property tests: generated lineup files never end in anything but a result or a
:class:`~spurplan.errors.SpurplanError` with a one-line message.

Lineups are generated as TOML text from a vocabulary of realistic keys and values
(every stage kind, ``[lineup]``, ``[[carrier]]``, ``[analysis]``, ``[mask]`` with
``[[mask.rule]]`` and ``[[mask.band]]``, ``[report]``) mixed with junk: misspelt and
unknown keys, missing keys, bare numbers, wrong units, non-finite numbers, nested
tables where strings belong, dates, control characters, broken TOML lines, a
byte-order mark and CRLF line endings.  The Touchstone and rule files they name are
written once per module; all of it is invented for these tests.

Analyses stay small (``max_order`` at most 8, at most 2 carriers when the lineup is
meant to run) so that a few hundred examples take seconds, not minutes.

The last tests check determinism: ``check --format json`` and ``check --plot`` give
byte-identical files from two separate processes with different hash seeds.
"""

from __future__ import annotations

import collections
import json
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from helpers import cli_runner
from hypothesis import HealthCheck, given, note, settings
from hypothesis import strategies as st

import spurplan
from spurplan.analyses.check import check
from spurplan.cli import main
from spurplan.errors import SpurplanError
from spurplan.model.lineup import Lineup

# --- files the generated lineups may refer to (invented data) ---------------------------------------


def _s2p(freqs_hz, s21, s11=0.05) -> str:
    rows = "".join(
        f"{f / 1e6:.6f} {s11:.6f} 0 {v.real:.9f} {v.imag:.9f} {v.real:.9f} {v.imag:.9f} {s11:.6f} 0\n"
        for f, v in zip(freqs_hz, s21, strict=True)
    )
    return "! invented test data\n# MHz S RI R 50\n" + rows


def _write_data_files(folder: Path) -> None:
    f = np.linspace(1e6, 20e9, 401)
    # A single-pole low-pass at 500 MHz, |S21| <= 1 (invented).
    (folder / "good.s2p").write_text(_s2p(f, 0.95 / (1 + 1j * f / 500e6)), encoding="utf-8")
    short = np.linspace(10e6, 250e6, 25)
    (folder / "short.s2p").write_text(_s2p(short, np.full(short.size, 0.9 + 0j)), encoding="utf-8")
    # A 10 dB amplifier gain shape rolling off above 2 GHz (invented).
    (folder / "amp.s2p").write_text(_s2p(f, 3.16 / (1 + 1j * f / 2e9)), encoding="utf-8")
    (folder / "corrupt.s2p").write_text("# MHz S RI R 50\n1 2 3\nnot numbers here\n", encoding="utf-8")
    (folder / "three.s2p").write_text(
        "# GHz S RI R 50\n" + "".join(f"{g} 0.5 0\n" for g in (0.01, 0.1, 0.2, 0.3, 0.4, 0.5, 0.6, 0.7, 0.8)),
        encoding="utf-8",
    )
    (folder / "v2.s2p").write_text(
        "[Version] 2.0\n# MHz S RI R 50\n[Number of Ports] 4\n[Number of Frequencies] 2\n[Network Data]\n"
        + "".join(f"{g} " + " ".join(["0.1 0"] * 16) + "\n" for g in (10, 2000))
        + "[End]\n",
        encoding="utf-8",
    )
    (folder / "rules.toml").write_text(
        '[ruleset]\nname = "my-limits"\nsource = "test plan, section 1 (invented)"\n'
        '[[rule]]\nname = "general"\nstart = "30 MHz"\nlimit = "-36 dBm"\nrbw = "100 kHz"\nstatus = "derived"\n',
        encoding="utf-8",
    )
    (folder / "badrules.toml").write_text('[ruleset]\nname = "no-source"\n', encoding="utf-8")


@pytest.fixture(scope="module")
def fuzz_dir(tmp_path_factory):
    folder = tmp_path_factory.mktemp("fuzz")
    _write_data_files(folder)
    return folder


# --- TOML text from parts ---------------------------------------------------------------------------


def tstr(text: str) -> str:
    """A TOML basic string (JSON escapes are TOML escapes, apart from surrogates)."""
    return json.dumps(text)


def tkey(key: str) -> str:
    return key if key and all(c.isalnum() or c in "_-" for c in key) and key.isascii() else tstr(key)


def inline(items: dict[str, str]) -> str:
    return "{ " + ", ".join(f"{tkey(k)} = {v}" for k, v in items.items()) + " }"


def body(items: dict[str, str]) -> str:
    return "".join(f"{tkey(k)} = {v}\n" for k, v in items.items())


# --- vocabulary -------------------------------------------------------------------------------------

FREQS = ["455 MHz", "100 MHz", "150 MHz", "156.8 MHz", "1.2 GHz", "50 kHz", "455.0125 MHz", "30 MHz"]
BAD_FREQS = ["0 Hz", "-5 MHz", "1e308 GHz", "455", "455 dBm", "nan MHz", "inf Hz", "2 THz", "455 MHzz"]
POWERS = ["-8 dBm", "+10 dBm", "0 dBm", "-30 dBm", "1 W", "20 mW", "+3 dBW", "-20 dBm"]
BAD_POWERS = ["0 W", "-8", "nan dBm", "1e300 dBm", "-1 W", "+101 dBm", "-8 dB", "8 dBmW"]
GAINS = ["16 dB", "0 dB", "10 dB", "26 dB", "20 dB", "3 dB", "0.5 dB"]
BAD_GAINS = ["16 dBm", "1e300 dB", "16", "-3 dB", "201 dB", "inf dB"]
IPS = ["+34 dBm", "+30 dBm", "+50 dBm", "+40 dBm", "+24 dBm"]
BAD_IPS = ["34 dB", "+34", "-1e300 dBm", "+100 dBm", "-300 dBm"]
DBC_AT = ["-28 dBc @ +20 dBm", "-35 dBc @ +36 dBm", "-50 dBc @ +10 dBm", "-60 dBc @ +20 dBm"]
BAD_DBC_AT = ["-28 dBc", "+28 dBc @ +20 dBm", "-1e3 dBc @ 0 dBm", "-28 dBc @ 20", "@", "-0 dBc @ 0 dBm"]
IMPEDANCES = ["50 ohm", "75 ohm"]
BAD_IMPEDANCES = ["0 ohm", "50", "-50 ohm", "50 Ohms!"]
ANGLES = ["0 deg", "90 deg", "1 rad"]
BAD_ANGLES = ["90", "nan deg", "90 grad"]
LIMITS = ["-36 dBm", "-13 dBm", "-60 dBc", "54 dBuV/m @ 3 m", "2400/F uV/m @ 300 m", "-70 dBm"]
BAD_LIMITS = ["-36", "-36 dB", "54 dBuV/m", "x", "0 uV/m @ 3 m", "54 dBuV/m @ 0 m"]
RBWS = ["100 kHz", "1 MHz", "1 kHz"]
BAD_RBWS = ["0 Hz", "100", "-1 kHz"]
NAMES = ["driver", "pa", "pad", "lpf", "flt", "out", "harmonic filter", "amp 2", "pad 2", "bpf", "final"]
# Names with characters that break lines somewhere: vertical tab, NEL, U+2028.
ODD_NAMES = ["p\u000ba", "a\u0085b", "a\u2028b", "x" * 300, "", " ", "é"]
SHIPPED = [
    "itu-sm329-cat-a",
    "etsi-en300220-spurious",
    "us-fcc-97.307",
    "us-fcc-15.209",
    "us-fcc-15.205",
    "itu-rr-5.340",
    "itu-rr-5.149",
]
BAND_LISTS = ["gnss-bands", "itu-rr-5.340", "itu-rr-5.149"]
# empty.s2p is left out: reading it leaks a file handle (see test_hardening.py), which
# pytest's warnings-as-errors would report in whichever example runs next.
TOUCHSTONES = ["good.s2p", "short.s2p", "amp.s2p", "corrupt.s2p", "three.s2p", "v2.s2p", "missing.s2p"]

# Junk: TOML value text of every type, for any key.
JUNK = [
    "17",
    "-1",
    "0",
    "2.5",
    "1e400",
    "nan",
    "-inf",
    "true",
    '""',
    '" "',
    "[]",
    "{}",
    '["a", "b"]',
    "{ x = 1 }",
    "[[1, 2], [3]]",
    "1979-05-27T07:32:00Z",
    "07:32:00",
    '"\\u0000"',
    '"16 dB\\n"',
    tstr("x" * 2000),
]
JUNK_KEYS = ["oip33", "gian", "powr", "Gain", "unknown", "kind2", "", "é", "max_ordr", "freq "]


# Share of values drawn from the good list, and from the extreme list (in range, but
# at the edges: overflow and underflow live there); the rest are bad values of the
# right type or junk of any type.
P_GOOD = 0.95
P_EXTREME = 0.02

EXTREME = {
    "freq": ["1 THz", "1e-300 Hz", "0.001 Hz", "999.999999 GHz", "1e-9 Hz"],
    "power": ["+100 dBm", "-300 dBm", "+70 dBW", "1e-30 W", "100 kW"],
    "gain": ["200 dB", "-400 dB", "1e-300 dB", "199.99 dB"],
    "ip": ["+100 dBm", "-300 dBm", "-100 dBm"],
    "dbc": ["-400 dBc @ +100 dBm", "-1e-300 dBc @ -300 dBm", "-0.0001 dBc @ +100 dBm", "-400 dBc @ -300 dBm"],
    "limit": ["+100 dBm", "-300 dBm", "-400 dBc", "1e9 dBuV/m @ 1e-300 m", "1e-300 uV/m @ 1e300 m", "43 dBc"],
    "rbw": ["1e-300 Hz", "1 THz"],
    "ripple": ["3 dB", "1e-300 dB"],
    "angle": ["1e300 deg", "-1e300 rad"],
    "impedance": ["1e-300 ohm", "1e300 ohm"],
}


@st.composite
def pick(draw, good: list[str], bad: list[str], extreme: list[str] = ()) -> str:
    """TOML value text: one of ``good`` with probability P_GOOD, ``extreme`` with
    P_EXTREME, else ``bad`` or junk."""
    rnd = draw(st.randoms(use_true_random=True))
    r = rnd.random()
    if r < P_GOOD:
        return rnd.choice(good)
    if r < P_GOOD + P_EXTREME and extreme:
        return rnd.choice(list(extreme))
    return rnd.choice(bad) if rnd.random() < 0.5 and bad else rnd.choice(JUNK)


def quantity(good, bad, extreme: str | None = None):
    """A quantity string: mostly good values, some extreme or bad ones, a little junk."""
    return pick([tstr(g) for g in good], [tstr(b) for b in bad], [tstr(e) for e in EXTREME.get(extreme, ())])


def choice(good, bad=()):
    """One of a set of words."""
    return pick([tstr(g) for g in good], [tstr(b) for b in (*bad, "nonsense")])


def number(good, bad, extreme=()):
    """A TOML number (``bad`` and ``extreme`` are TOML texts)."""
    return pick([str(g) for g in good], list(bad), list(extreme))


@st.composite
def table(draw, required: dict, optional: dict, max_optional: int = 3) -> dict[str, str]:
    """Key -> TOML value text: required keys (sometimes missing), a few optional ones,
    sometimes an unknown key.

    The structure comes from a seeded ``random.Random`` drawn from hypothesis, so that
    "sometimes" means a stated rate (hypothesis favours small integers, which would
    make every rare branch common); the values come from hypothesis strategies.
    """
    rnd = draw(st.randoms(use_true_random=True))
    items: dict[str, str] = {}
    for key, strategy in required.items():
        if rnd.random() < 0.98:
            items[key] = draw(strategy)
    if optional:
        for key in rnd.sample(sorted(optional), k=rnd.randint(0, min(max_optional, len(optional)))):
            items[key] = draw(optional[key])
    if rnd.random() < 0.015:
        items[rnd.choice(JUNK_KEYS)] = draw(st.one_of(st.sampled_from(JUNK), quantity(GAINS, BAD_GAINS)))
    return items


NAME_TEXTS = [tstr(n) for n in NAMES]
NAME = pick(NAME_TEXTS, [tstr(n) for n in ODD_NAMES])
TOUCHSTONE = st.one_of(st.sampled_from(TOUCHSTONES).map(tstr), st.sampled_from(JUNK))

AMPLIFIER = table(
    {"kind": st.just(tstr("amplifier")), "name": NAME, "gain": quantity(GAINS, BAD_GAINS, "gain")},
    {
        **{
            k: quantity(IPS, BAD_IPS, "ip")
            for k in ("oip3", "iip3", "oip2", "iip2", "ohip2", "ohip3", "ohip5")
        },
        **{f"h{n}": quantity(DBC_AT, BAD_DBC_AT, "dbc") for n in (2, 3, 4, 5, 7, 9)},
        "p1db": quantity(IPS, BAD_IPS, "ip"),
        "psat": quantity(IPS, BAD_IPS, "ip"),
        "cubic": choice(["compressive", "expansive"], ["linear"]),
        "touchstone": TOUCHSTONE,
        "input_port": number([1, 2], ["3", "0", "1.0"]),
    },
)

ATTENUATOR = table(
    {"kind": st.just(tstr("attenuator")), "name": NAME, "loss": quantity(GAINS, BAD_GAINS, "gain")}, {}
)


@st.composite
def prototype(draw) -> str:
    """An inline prototype table: coherent (the keys its response needs) most of the
    time, a random mix otherwise."""
    rnd = draw(st.randoms(use_true_random=True))
    family = rnd.choice(["butterworth", "chebyshev"])
    response = rnd.choice(["lowpass", "lowpass", "highpass", "bandpass"])
    items = {"family": draw(choice([family], ["elliptic"])), "response": draw(choice([response], ["notch"]))}
    items["order"] = draw(number([1, 3, 5, 7, 9], ["0", "4", "16", "1.5", '"5"']))
    if response == "bandpass":
        items["center"] = draw(quantity(["450 MHz", "150 MHz", "160 MHz"], BAD_FREQS, "freq"))
        items["bandwidth"] = draw(quantity(["40 MHz", "10 MHz"], ["0 Hz", "1 GHz", "40"], "freq"))
    else:
        items["cutoff"] = draw(quantity(["520 MHz", "200 MHz", "1 GHz", "120 MHz"], BAD_FREQS, "freq"))
    if family == "chebyshev":
        items["ripple"] = draw(quantity(["0.1 dB", "0.5 dB", "1 dB"], ["0 dB", "4 dB", "0.1"], "ripple"))
    extra = {
        "q_inductor": number([120, 60, 30.5], ["0", "-1", '"120"', "inf"], ["1e-300", "1e300", "5e-324"]),
        "q_capacitor": number([600, 400, '"lossless"'], ["0", "nan", '"lossy"'], ["1e-300", "1e300"]),
        "floor": quantity(["-80 dB", "-60 dB", "none"], ["-10 dB", "80 dB", "-80", "off"], "gain"),
        "first": choice(["shunt", "series"], ["parallel"]),
        "ripple": quantity(["0.1 dB"], ["0.1"]),
        "cutoff": quantity(["300 MHz"], ["300"]),
    }
    for key in rnd.sample(sorted(extra), k=rnd.choice([0, 0, 0, 1, 2])):
        if key not in items or rnd.random() < 0.1:
            items[key] = draw(extra[key])
    if rnd.random() < 0.1:
        del items[rnd.choice(sorted(items))]
    return inline(items)


@st.composite
def filter_stage(draw) -> dict[str, str]:
    rnd = draw(st.randoms(use_true_random=True))
    items = {"kind": tstr("filter"), "name": draw(NAME)}
    r = rnd.random()
    if r < 0.6:
        items["prototype"] = draw(prototype())
    elif r < 0.9:
        items["touchstone"] = draw(TOUCHSTONE)
        if rnd.random() < 0.2:
            items["input_port"] = draw(number([1, 2], ["3", "0", "true"]))
    elif r < 0.95:
        items["prototype"] = draw(st.one_of(prototype(), st.sampled_from(JUNK)))
        items["touchstone"] = draw(TOUCHSTONE)
    if rnd.random() < 0.015:
        items[rnd.choice(JUNK_KEYS)] = rnd.choice(JUNK)
    return items


JUNK_STAGE = table(
    {
        "kind": st.one_of(
            st.sampled_from(["amplifer", "mixer", "Filter", ""]).map(tstr), st.sampled_from(JUNK)
        ),
        "name": NAME,
    },
    {"gain": quantity(GAINS, BAD_GAINS, "gain")},
    max_optional=1,
)


@st.composite
def stage(draw) -> dict[str, str]:
    rnd = draw(st.randoms(use_true_random=True))
    kind = rnd.choices(["amplifier", "attenuator", "filter", "junk"], weights=[45, 20, 30, 5])[0]
    return draw(
        {"amplifier": AMPLIFIER, "attenuator": ATTENUATOR, "filter": filter_stage(), "junk": JUNK_STAGE}[kind]
    )


STAGE = stage()

CARRIER = table(
    {"freq": quantity(FREQS, BAD_FREQS, "freq"), "power": quantity(POWERS, BAD_POWERS, "power")},
    {
        "bandwidth": quantity(["12.5 kHz", "25 kHz", "1 MHz"], ["0 Hz", "12.5"], "freq"),
        "phase": quantity(ANGLES, BAD_ANGLES, "angle"),
    },
    max_optional=2,
)

HEAD = table(
    {},
    {
        "name": pick([tstr("fuzz lineup (invented)"), tstr("tx")], [tstr(n) for n in ODD_NAMES]),
        "impedance": quantity(IMPEDANCES, BAD_IMPEDANCES, "impedance"),
    },
    max_optional=2,
)

ANALYSIS = table(
    # max_order stays at most 8 when valid; an absent one means the default 10.
    {"max_order": number([1, 2, 3, 5, 8, 3.0], ["0", "-1", "31", "2.5", '"5"', "true", "1e9"], ["30", "20"])},
    {
        "combine": choice(["worst", "power", "phase"], ["max"]),
        "beyond_data": choice(["error", "hold", "no_rejection"], ["hld", "no-rejection"]),
        "linear_sections": choice(["matched", "cascade"], ["cascaded"]),
    },
    max_optional=3,
)

USE_ENTRY = st.one_of(
    st.sampled_from(SHIPPED).map(tstr),
    st.sampled_from(["itu-sm329-cat-b", "gnss", ""]).map(tstr),
    table(
        {
            "name": st.sampled_from([*BAND_LISTS, "itu-sm329-cat-a", "nope"]).map(tstr),
            "limit": quantity(LIMITS, BAD_LIMITS, "limit"),
        },
        {"rbw": quantity(RBWS, BAD_RBWS, "rbw")},
        max_optional=1,
    ).map(inline),
    st.sampled_from(JUNK),
)

MASK_HEAD = table(
    {
        "use": st.one_of(
            st.lists(USE_ENTRY, max_size=3).map(lambda xs: "[" + ", ".join(xs) + "]"), st.sampled_from(JUNK)
        )
    },
    {
        "files": st.one_of(
            st.lists(
                st.sampled_from(["rules.toml", "badrules.toml", "missing.toml"]).map(tstr), max_size=2
            ).map(lambda xs: "[" + ", ".join(xs) + "]"),
            st.sampled_from(JUNK),
        ),
        "antenna_gain": st.one_of(
            st.sampled_from(["2.15 dBi", "0 dBi", "2 dB", "dBi"]).map(tstr),
            st.just('[["100 MHz", "0 dBi"], ["1 GHz", "3 dBi"]]'),
            st.just('[["1 GHz", "0 dBi"], ["100 MHz", "3 dBi"]]'),
            st.sampled_from(JUNK),
        ),
        "spurious_boundary": number([2.5, 0, 1], ["-1", "101", '"2"'], ["100", "1e-300"]),
    },
    max_optional=2,
)

RULE = table(
    {
        "start": quantity(["30 MHz", "9 kHz", "1 GHz"], BAD_FREQS, "freq"),
        "limit": quantity(LIMITS, BAD_LIMITS, "limit"),
    },
    {
        "stop": quantity(["1 GHz", "20 GHz", "30 MHz"], BAD_FREQS, "freq"),
        "rbw": quantity(RBWS, BAD_RBWS, "rbw"),
        "name": st.sampled_from(["general", "near"]).map(tstr),
        "attenuation": quantity(["43 dB", "60 dB"], ["0 dB", "43"], "gain"),
        "cap": quantity(["70 dB"], ["0 dB"], "gain"),
        "floor": quantity(["-40 dBm"], ["-40"], "power"),
        "when_power": st.sampled_from(
            ['{ above = "25 W" }', '{ at_most = "25 W" }', "{}", '{ above = "1 W", at_most = "0.5 W" }']
        ),
        "status": choice(["derived", "from memory"], ["guess"]),
    },
    max_optional=3,
)

BAND = table(
    {
        "name": st.sampled_from(["rx band", "gnss"]).map(tstr),
        "start": quantity(["1559 MHz", "400 MHz"], BAD_FREQS, "freq"),
    },
    {
        "stop": quantity(["1610 MHz", "470 MHz"], BAD_FREQS, "freq"),
        "limit": quantity(LIMITS, BAD_LIMITS, "limit"),
        "rbw": quantity(RBWS, BAD_RBWS, "rbw"),
    },
    max_optional=3,
)

SWEEP = table(
    {
        "start": quantity(["-20 dBm", "440 MHz"], ["-20"]),
        "stop": quantity(["+6 dBm", "470 MHz"], ["x"]),
        "step": quantity(["1 dB", "1 MHz"], ["0 dB", "1e-9 dB"]),
    },
    {},
    max_optional=0,
).map(inline)

REPORT = table({}, {"drive": SWEEP, "tune": SWEEP}, max_optional=2)

BROKEN_LINES = [
    "gain = = 3",
    "[[",
    "just words",
    "[lineup]",
    'kind = "amplifier"',
    "x = 1\nx = 2",
    "[mask.rule]",
]


@st.composite
def lineup_texts(draw) -> str:
    """TOML text of a generated lineup (valid or not); rates as in :func:`table`."""
    rnd = draw(st.randoms(use_true_random=True))
    parts = []
    if rnd.random() < 0.5:
        parts.append("[lineup]\n" + body(draw(HEAD)))
    n_carriers = rnd.choices([0, 1, 2, 4], weights=[2, 62, 34, 2])[0]
    for _ in range(n_carriers):
        parts.append("[[carrier]]\n" + body(draw(CARRIER)))
    names: set[str] = set()
    for i in range(rnd.choices([0, 1, 2, 3, 4], weights=[5, 40, 30, 15, 10])[0]):
        items = draw(STAGE)
        # Mostly unique names (a duplicate is one error among many, not the usual one).
        if items.get("name") in names and items.get("name") in NAME_TEXTS and rnd.random() < 0.8:
            items["name"] = tstr(f"{json.loads(items['name'])} {i + 1}")
        names.add(items.get("name"))
        parts.append("[[stage]]\n" + body(items))
    if rnd.random() < 0.9:
        parts.append("[analysis]\n" + body(draw(ANALYSIS)))
    if rnd.random() < 0.5:
        parts.append("[mask]\n" + body(draw(MASK_HEAD)))
        for _ in range(rnd.choices([0, 1, 2], weights=[50, 35, 15])[0]):
            parts.append("[[mask.rule]]\n" + body(draw(RULE)))
        if rnd.random() < 0.3:
            parts.append("[[mask.band]]\n" + body(draw(BAND)))
    if rnd.random() < 0.1:
        parts.append("[report]\n" + body(draw(REPORT)))
    if rnd.random() < 0.05:
        parts.append(rnd.choice(["[lineups]\nname = 'x'\n", 'stage = "pa"\n', "[extra]\nkey = 1\n"]))
    if rnd.random() < 0.05:
        rnd.shuffle(parts)
    text = "\n".join(parts)
    if rnd.random() < 0.05:
        lines = text.split("\n")
        lines.insert(rnd.randint(0, len(lines)), rnd.choice(BROKEN_LINES))
        text = "\n".join(lines)
    if rnd.random() < 0.1:
        text = text.replace("\n", "\r\n")
    if rnd.random() < 0.05:
        text = "\ufeff" + text
    return text


def _one_line(exc: SpurplanError) -> None:
    text = str(exc)
    assert text.strip(), f"empty message from {type(exc).__name__}"
    assert len(text.splitlines()) == 1, f"{type(exc).__name__} message is not one line: {text!r}"


def _load_run_check(path: Path) -> str:
    """What happened: 'load error', 'run error', 'check error' or 'ok'."""
    try:
        lineup = spurplan.load(path)
    except SpurplanError as exc:
        _one_line(exc)
        return "load error"
    assert isinstance(lineup, Lineup)
    try:
        result = lineup.run()
    except SpurplanError as exc:
        _one_line(exc)
        return "run error"
    # A carrier is always reported as modelled (README, "Combining"): a level, or -inf
    # when nothing reaches the output, never NaN (which drops rows without a word).
    carriers = np.asarray(result.carrier_levels_dbm(), dtype=float)
    assert not np.isnan(carriers).any(), f"carrier levels at the output: {carriers}"
    if lineup.mask is not None:
        try:
            check(lineup)
        except SpurplanError as exc:
            _one_line(exc)
            return "check error"
    return "ok"


FAST = settings(
    deadline=None,
    suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large, HealthCheck.filter_too_much],
)


@settings(FAST, max_examples=200)
@given(text=lineup_texts())
@pytest.mark.slow
def test_load_run_check_raise_only_spurplan_errors(text, fuzz_dir):
    note(text)
    path = fuzz_dir / "lineup.toml"
    path.write_bytes(text.encode("utf-8", "surrogatepass"))
    note(_load_run_check(path))


# A lineup that surely loads and runs, checked by the property above as one example:
# without it, a generator that never produced a valid lineup would pass unnoticed.
VALID = (
    '[lineup]\nname = "fuzz anchor (invented)"\n'
    '[[carrier]]\nfreq = "150 MHz"\npower = "+10 dBm"\n'
    '[[stage]]\nkind = "amplifier"\nname = "pa"\ngain = "26 dB"\nh2 = "-35 dBc @ +36 dBm"\npsat = "+40 dBm"\n'
    '[[stage]]\nkind = "filter"\nname = "lpf"\n'
    'prototype = { family = "chebyshev", order = 5, cutoff = "200 MHz", ripple = "0.1 dB" }\n'
    '[analysis]\nmax_order = 5\n[mask]\nuse = ["itu-sm329-cat-a"]\n'
)


def test_anchor_lineup_runs(fuzz_dir):
    path = fuzz_dir / "anchor.toml"
    path.write_text(VALID, encoding="utf-8")
    assert _load_run_check(path) == "ok"


def test_generated_lineups_include_valid_and_invalid_ones(fuzz_dir):
    # A check of the generator, not of spurplan: it yields lineups that load, run and
    # check, and lineups that are refused (else the property above tests little).  It
    # draws its own fixed set of examples (derandomized, no example database), so it
    # does not depend on which other tests ran before it, or in which order.
    outcomes: collections.Counter = collections.Counter()

    @settings(FAST, max_examples=60, derandomize=True, database=None)
    @given(text=lineup_texts())
    def draw(text):
        path = fuzz_dir / "generator.toml"
        path.write_bytes(text.encode("utf-8", "surrogatepass"))
        outcomes[_load_run_check(path)] += 1

    draw()
    assert outcomes["ok"] > 0 and outcomes["load error"] > 0, dict(outcomes)


CLI_COMMANDS = [
    ["spectrum"],
    ["budget", "--format", "json"],
    ["check"],
    ["check", "--format", "csv"],
    ["filter", "--stage", "lpf"],
    ["drive", "--start", "-10 dBm", "--stop", "+5 dBm", "--step", "5 dB"],
    ["tune", "--start", "140 MHz", "--stop", "160 MHz", "--step", "10 MHz"],
]


@settings(FAST, max_examples=40)
@given(text=lineup_texts(), command=st.sampled_from(CLI_COMMANDS))
def test_cli_exits_0_1_or_2_without_traceback(text, command, fuzz_dir):
    note(text)
    path = fuzz_dir / "cli.toml"
    path.write_bytes(text.encode("utf-8", "surrogatepass"))
    args = [command[0], str(path), *command[1:]]
    result = cli_runner().invoke(main, args)
    note(f"exit {result.exit_code}\n{result.stderr}")
    if result.exception is not None and not isinstance(result.exception, SystemExit):
        raise result.exception
    assert result.exit_code in (0, 1, 2)
    assert "Traceback" not in result.stderr and "Traceback" not in result.stdout
    if result.exit_code == 2:
        errors = [ln for ln in result.stderr.splitlines() if ln.startswith("spurplan: error:")]
        assert len(errors) == 1, result.stderr


SUBPROCESS_TEXTS = [
    # (text, expected exit statuses): the anchor is valid; a bare number for a gain is
    # refused; so is a max_order of 40 (above 30).
    (VALID, (0, 1)),
    (VALID.replace('"26 dB"', "26"), (2,)),
    (VALID.replace("max_order = 5", "max_order = 40"), (2,)),
]


@pytest.mark.parametrize("command", ["spectrum", "check"])
@pytest.mark.parametrize(("text", "codes"), SUBPROCESS_TEXTS, ids=["valid", "bare-gain", "order-40"])
@pytest.mark.slow
def test_cli_subprocess_on_fixed_examples(command, text, codes, tmp_path):
    # What a terminal sees, for a few lineups of the vocabulary above.
    path = tmp_path / "l.toml"
    path.write_text(text, encoding="utf-8")
    proc = subprocess.run(
        [sys.executable, "-m", "spurplan.cli", command, str(path)],
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert "Traceback" not in proc.stderr
    want = (0,) if command == "spectrum" and codes == (0, 1) else codes
    assert proc.returncode in want, proc.stderr


# --- determinism ------------------------------------------------------------------------------------

# Two carriers, a filter and a mask with a protected band (invented): enough sets and
# dicts inside the check for an unstable order to show.
TWO_CARRIERS = (
    "# invented test scenario\n"
    '[lineup]\nname = "determinism (invented)"\n'
    '[[carrier]]\nfreq = "455 MHz"\npower = "-10 dBm"\nbandwidth = "12.5 kHz"\n'
    '[[carrier]]\nfreq = "456 MHz"\npower = "-13 dBm"\n'
    '[[stage]]\nkind = "amplifier"\nname = "driver"\ngain = "16 dB"\noip3 = "+34 dBm"\nh2 = "-28 dBc @ +20 dBm"\n'
    '[[stage]]\nkind = "amplifier"\nname = "pa"\ngain = "14 dB"\noip3 = "+46 dBm"\npsat = "+37 dBm"\n'
    '[[stage]]\nkind = "filter"\nname = "lpf"\n'
    'prototype = { family = "chebyshev", order = 7, cutoff = "520 MHz", ripple = "0.1 dB", q_inductor = 120 }\n'
    "[analysis]\nmax_order = 5\n"
    '[mask]\nuse = ["itu-sm329-cat-a", { name = "gnss-bands", limit = "-70 dBm", rbw = "1 MHz" }]\n'
    '[[mask.band]]\nname = "customer receiver"\nstart = "1360 MHz"\nstop = "1370 MHz"\nlimit = "-80 dBm"\nrbw = "1 MHz"\n'
)


def _cli_bytes(args, cwd: Path, seed: str) -> tuple[int, bytes]:
    env = dict(os.environ, PYTHONHASHSEED=seed)
    proc = subprocess.run(
        [sys.executable, "-m", "spurplan.cli", *args], capture_output=True, cwd=cwd, env=env, timeout=180
    )
    return proc.returncode, proc.stdout


@pytest.fixture(params=["two-carriers", "bundled-example"])
def determinism_lineup(request, tmp_path):
    if request.param == "bundled-example":
        return []
    path = tmp_path / "two.toml"
    path.write_text(TWO_CARRIERS, encoding="utf-8")
    return [str(path)]


@pytest.mark.slow
def test_check_json_is_byte_identical_across_processes(determinism_lineup, tmp_path):
    args = ["check", *determinism_lineup, "--format", "json"]
    code_a, out_a = _cli_bytes(args, tmp_path, "1")
    code_b, out_b = _cli_bytes(args, tmp_path, "2")
    assert code_a in (0, 1) and code_a == code_b
    assert json.loads(out_a)["products"], "no products to compare"
    assert out_a == out_b


@pytest.mark.slow
def test_check_plot_is_byte_identical_across_processes(determinism_lineup, tmp_path):
    pngs = []
    for seed, name in (("1", "a.png"), ("2", "b.png")):
        code, _ = _cli_bytes(["check", *determinism_lineup, "--plot", str(tmp_path / name)], tmp_path, seed)
        assert code in (0, 1)
        pngs.append((tmp_path / name).read_bytes())
    assert pngs[0][:8] == b"\x89PNG\r\n\x1a\n"
    assert pngs[0] == pngs[1]
