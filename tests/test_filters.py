"""Filters: prototype tables, ladders against scipy, Touchstone data and its limits."""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.signal as ss
import skrf
from click.testing import CliRunner
from helpers import amp, levels_by_label

from spurplan.cli import main
from spurplan.errors import OutOfDataRange
from spurplan.io.lineup_file import from_dict
from spurplan.model.ladders import Prototype, butterworth_g, chebyshev_g, ladder_network

# Low-pass prototype element values g_1 .. g_(N+1) (Matthaei, Young and Jones 1964,
# Tables 4.05-1 and 4.05-2(a); from memory).
BUTTERWORTH_TABLE = {
    1: [2.0000, 1.0],
    2: [1.4142, 1.4142, 1.0],
    3: [1.0000, 2.0000, 1.0000, 1.0],
    4: [0.7654, 1.8478, 1.8478, 0.7654, 1.0],
    5: [0.6180, 1.6180, 2.0000, 1.6180, 0.6180, 1.0],
    6: [0.5176, 1.4142, 1.9318, 1.9318, 1.4142, 0.5176, 1.0],
    7: [0.4450, 1.2470, 1.8019, 2.0000, 1.8019, 1.2470, 0.4450, 1.0],
}
CHEBYSHEV_TABLE = {
    0.1: {
        1: [0.3052, 1.0],
        2: [0.8431, 0.6220, 1.3554],
        3: [1.0316, 1.1474, 1.0316, 1.0],
        4: [1.1088, 1.3062, 1.7704, 0.8181, 1.3554],
        5: [1.1468, 1.3712, 1.9750, 1.3712, 1.1468, 1.0],
        6: [1.1681, 1.4040, 2.0562, 1.5171, 1.9029, 0.8618, 1.3554],
        7: [1.1812, 1.4228, 2.0967, 1.5734, 2.0967, 1.4228, 1.1812, 1.0],
    },
    0.5: {
        1: [0.6986, 1.0],
        2: [1.4029, 0.7071, 1.9841],
        3: [1.5963, 1.0967, 1.5963, 1.0],
        4: [1.6703, 1.1926, 2.3661, 0.8419, 1.9841],
        5: [1.7058, 1.2296, 2.5408, 1.2296, 1.7058, 1.0],
        6: [1.7254, 1.2479, 2.6064, 1.3137, 2.4758, 0.8696, 1.9841],
        7: [1.7372, 1.2583, 2.6381, 1.3444, 2.6381, 1.2583, 1.7372, 1.0],
    },
}

FREQS_20 = np.geomspace(5e6, 2.5e9, 20)
# The ideal ladder (lossless parts, no stopband floor), stated explicitly where a test
# compares with an ideal reference: a lineup file's defaults are lossy and floored.
IDEAL = {"q_inductor": "lossless", "q_capacitor": "lossless", "floor": "none"}


def _filter_lineup(
    prototype=None, touchstone=None, base_dir=None, analysis=None, carriers=(("50 MHz", "-20 dBm"),)
):
    stage = {"kind": "filter", "name": "flt"}
    if prototype is not None:
        stage["prototype"] = prototype
    if touchstone is not None:
        stage["touchstone"] = touchstone
    doc = {
        "carrier": [{"freq": f, "power": p} for f, p in carriers],
        "stage": [stage],
        "analysis": analysis or {},
    }
    kw = {"base_dir": base_dir} if base_dir is not None else {}
    return from_dict(doc, name="filter-test.toml", **kw)


def _db(h):
    return 20 * np.log10(np.abs(h))


@pytest.mark.parametrize("order", sorted(BUTTERWORTH_TABLE))
def test_butterworth_g_values_match_table(order):
    # Matthaei, Young and Jones 1964, Table 4.05-1 (from memory), to 4 digits.
    np.testing.assert_allclose(butterworth_g(order), BUTTERWORTH_TABLE[order], atol=1e-4)


@pytest.mark.parametrize(("ripple", "order"), [(r, n) for r in CHEBYSHEV_TABLE for n in CHEBYSHEV_TABLE[r]])
def test_chebyshev_g_values_match_table(ripple, order):
    # Matthaei, Young and Jones 1964, Table 4.05-2(a) (from memory), to 4 significant
    # digits (rtol 1e-4) plus half a unit of the table's 4th decimal, where it is rounded.
    np.testing.assert_allclose(
        chebyshev_g(order, ripple), CHEBYSHEV_TABLE[ripple][order], rtol=1e-4, atol=5e-5
    )


def test_butterworth_lowpass_ladder_matches_closed_form_and_scipy():
    # |S21|^2 = 1 / (1 + (f/fc)^(2N)) for a doubly terminated Butterworth ladder, and
    # scipy.signal.butter(analog=True) (independent library); 0.01 dB at 20 frequencies.
    fc, n = 160e6, 7
    lu = _filter_lineup(
        {"family": "butterworth", "response": "lowpass", "order": n, "cutoff": "160 MHz", **IDEAL}
    )
    got = _db(lu.stages[0].response(FREQS_20))
    closed = -10 * np.log10(1 + (FREQS_20 / fc) ** (2 * n))
    _, h = ss.freqs(*ss.butter(n, 2 * np.pi * fc, analog=True), 2 * np.pi * FREQS_20)
    np.testing.assert_allclose(got, closed, atol=0.01)
    np.testing.assert_allclose(got, _db(h), atol=0.01)


def test_chebyshev_lowpass_ladder_matches_scipy_including_ripple():
    # scipy.signal.cheby1(analog=True), cutoff at the ripple edge; 0.01 dB, with 20
    # frequencies inside the passband where the ripple shows.
    fc, n, rip = 520e6, 7, 0.5
    lu = _filter_lineup(
        {
            "family": "chebyshev",
            "response": "lowpass",
            "order": n,
            "cutoff": "520 MHz",
            "ripple": "0.5 dB",
            **IDEAL,
        }
    )
    f = np.concatenate([np.linspace(10e6, 515e6, 20), FREQS_20])
    got = _db(lu.stages[0].response(f))
    _, h = ss.freqs(*ss.cheby1(n, rip, 2 * np.pi * fc, analog=True), 2 * np.pi * f)
    np.testing.assert_allclose(got, _db(h), atol=0.01)
    assert got[:20].min() == pytest.approx(-rip, abs=0.02)


@pytest.mark.parametrize("first", ["shunt", "series"])
def test_highpass_and_bandpass_match_scipy_transformations(first):
    # scipy.signal.lp2hp and lp2bp of the analog prototypes (independent library); 0.01 dB.
    hp = _filter_lineup(
        {
            "family": "chebyshev",
            "response": "highpass",
            "order": 5,
            "cutoff": "300 MHz",
            "ripple": "0.1 dB",
            "first": first,
            **IDEAL,
        }
    )
    _, h = ss.freqs(
        *ss.lp2hp(*ss.cheby1(5, 0.1, 1.0, analog=True), wo=2 * np.pi * 300e6), 2 * np.pi * FREQS_20
    )
    np.testing.assert_allclose(_db(hp.stages[0].response(FREQS_20)), _db(h), atol=0.01)
    bp = _filter_lineup(
        {
            "family": "butterworth",
            "response": "bandpass",
            "order": 4,
            "center": "450 MHz",
            "bandwidth": "40 MHz",
            "first": first,
            **IDEAL,
        }
    )
    b, a = ss.lp2bp(*ss.butter(4, 1.0, analog=True), wo=2 * np.pi * 450e6, bw=2 * np.pi * 40e6)
    f = np.linspace(350e6, 550e6, 20)
    _, h = ss.freqs(b, a, 2 * np.pi * f)
    np.testing.assert_allclose(_db(bp.stages[0].response(f)), _db(h), atol=0.01)


def test_finite_q_series_inductor_loss():
    # A single series impedance Z between R0 and R0: S21 = 2 R0 / (2 R0 + Z), with
    # Z = w L / Q + j w L (circuit arithmetic, common practice). First-order
    # Butterworth, series-first: L = g1 R0 / wc with g1 = 2.
    fc, q, r0 = 100e6, 40.0, 50.0
    lu = _filter_lineup(
        {
            "family": "butterworth",
            "response": "lowpass",
            "order": 1,
            "cutoff": "100 MHz",
            "first": "series",
            "q_inductor": q,
            "floor": "none",
        }
    )
    f = np.array([5e6, 20e6, 60e6])
    w = 2 * np.pi * f
    inductance = 2.0 * r0 / (2 * np.pi * fc)
    want = 2 * r0 / (2 * r0 + w * inductance / q + 1j * w * inductance)
    np.testing.assert_allclose(lu.stages[0].response(f), want, rtol=1e-9)
    lossless = 2 * r0 / (2 * r0 + 1j * w * inductance)
    assert np.all(_db(want) < _db(lossless))


def _write_s2p(path, freq_hz, s21, s11=None):
    n = len(freq_hz)
    s = np.zeros((n, 2, 2), dtype=complex)
    s[:, 1, 0] = s[:, 0, 1] = s21
    if s11 is not None:
        s[:, 0, 0] = s[:, 1, 1] = s11
    net = skrf.Network(frequency=skrf.Frequency.from_f(freq_hz, unit="Hz"), s=s, z0=50.0, name="t")
    path.write_text(net.write_touchstone(return_string=True), encoding="utf-8")
    return net


def test_touchstone_round_trip_keeps_s21(tmp_path):
    # scikit-rf writes and reads the file (independent library); the lookup returns
    # S21 at the data points within 1e-9.
    proto = Prototype("chebyshev", "lowpass", 5, 200e6, ripple_db=0.1, q_inductor=80.0)
    f = np.linspace(1e6, 3e9, 301)
    ref = ladder_network(proto, f, 50.0)
    (tmp_path / "lpf.s2p").write_text(ref.write_touchstone(return_string=True), encoding="utf-8")
    lu = _filter_lineup(touchstone="lpf.s2p", base_dir=tmp_path)
    np.testing.assert_allclose(lu.stages[0].response(f), ref.s[:, 1, 0], atol=1e-9)


def test_data_stopping_below_a_product_is_an_error_by_default(tmp_path):
    # The 3rd harmonic of 400 MHz (1.2 GHz, arithmetic) lies above a file that ends at 1 GHz.
    f = np.linspace(10e6, 1e9, 100)
    _write_s2p(tmp_path / "short.s2p", f, np.full(100, 0.5))
    doc = {
        "carrier": [{"freq": "400 MHz", "power": "0 dBm"}],
        "stage": [
            amp("pa", gain="10 dB", oip3="+40 dBm"),
            {"kind": "filter", "name": "flt", "touchstone": "short.s2p"},
        ],
        "analysis": {"max_order": 3},
    }
    lu = from_dict(doc, name="x.toml", base_dir=tmp_path)
    with pytest.raises(OutOfDataRange) as info:
        lu.run()
    text = str(info.value)
    assert "flt" in text and "3f1" in text and "1.2e+09" in text and "1e+09" in text
    for policy, want_db in (("hold", 20 * math.log10(0.5)), ("no_rejection", 0.0)):
        doc["analysis"] = {"max_order": 3, "beyond_data": policy}
        res = from_dict(doc, name="x.toml", base_dir=tmp_path).run()
        rows = res.product_rows()
        i = rows["label"].index("3f1")
        assert rows["beyond_data"][i] is True
        assert rows["beyond_data"][rows["label"].index("f1")] is False
        sr = res.stage_response("flt")
        assert sr["s21_db"][sr["label"].index("3f1")] == pytest.approx(want_db, abs=1e-9)


def test_data_range_error_through_cli_is_one_line(tmp_path):
    f = np.linspace(10e6, 1e9, 50)
    _write_s2p(tmp_path / "short.s2p", f, np.full(50, 0.9))
    (tmp_path / "l.toml").write_text(
        '[[carrier]]\nfreq = "400 MHz"\npower = "0 dBm"\n'
        '[[stage]]\nkind = "amplifier"\nname = "pa"\ngain = "10 dB"\noip3 = "+40 dBm"\n'
        '[[stage]]\nkind = "filter"\nname = "flt"\ntouchstone = "short.s2p"\n',
        encoding="utf-8",
    )
    out = CliRunner().invoke(main, ["spectrum", str(tmp_path / "l.toml")])
    assert out.exit_code == 2
    assert len(out.stderr.strip().splitlines()) == 1
    assert "flt" in out.stderr and "outside the S-parameter data" in out.stderr


@pytest.mark.parametrize(
    ("stage", "needle"),
    [
        ({"touchstone": "missing.s2p"}, "file not found"),
        ({"touchstone": "one.s1p"}, "1 port"),
        ({"touchstone": "four.s4p"}, "4 port"),
        ({"touchstone": "z75.s2p"}, "expected 50 ohm"),
        ({"touchstone": "bad.s2p"}, "cannot be read"),
        ({"prototype": {"family": "elliptic", "order": 5, "cutoff": "1 GHz"}}, "expected one of butterworth"),
        ({"prototype": {"family": "butterworth", "order": 0, "cutoff": "1 GHz"}}, "order"),
        ({"prototype": {"family": "butterworth", "order": 5, "cutoff": "520"}}, "unit is missing"),
        ({"prototype": {"family": "chebyshev", "order": 5, "cutoff": "1 GHz"}}, "ripple"),
        (
            {"prototype": {"family": "butterworth", "order": 5, "cutoff": "1 GHz"}, "touchstone": "x.s2p"},
            "exactly one",
        ),
    ],
)
def test_malformed_filter_stages_give_one_line_errors(tmp_path, stage, needle):
    f = np.linspace(1e6, 1e9, 11)
    one = skrf.Network(frequency=skrf.Frequency.from_f(f, unit="Hz"), s=np.zeros((11, 1, 1)), z0=50, name="t")
    (tmp_path / "one.s1p").write_text(one.write_touchstone(return_string=True), encoding="utf-8")
    four = skrf.Network(
        frequency=skrf.Frequency.from_f(f, unit="Hz"), s=np.zeros((11, 4, 4)), z0=50, name="t"
    )
    (tmp_path / "four.s4p").write_text(four.write_touchstone(return_string=True), encoding="utf-8")
    z75 = skrf.Network(frequency=skrf.Frequency.from_f(f, unit="Hz"), s=np.zeros((11, 2, 2)), z0=75, name="t")
    (tmp_path / "z75.s2p").write_text(z75.write_touchstone(return_string=True), encoding="utf-8")
    (tmp_path / "bad.s2p").write_text("# MHz S RI R 50\n1 2 3\nnot numbers here\n", encoding="utf-8")
    lines = [
        "[[carrier]]",
        'freq = "100 MHz"',
        'power = "0 dBm"',
        "[[stage]]",
        'kind = "filter"',
        'name = "flt"',
    ]
    for key, value in stage.items():
        if isinstance(value, dict):
            inner = ", ".join(
                f"{k} = {v!r}" if isinstance(v, str) else f"{k} = {v}" for k, v in value.items()
            )
            lines.append(f"{key} = {{ {inner} }}".replace("'", '"'))
        else:
            lines.append(f'{key} = "{value}"')
    (tmp_path / "l.toml").write_text("\n".join(lines) + "\n", encoding="utf-8")
    out = CliRunner().invoke(main, ["spectrum", str(tmp_path / "l.toml")])
    assert out.exit_code == 2, out.output
    err = out.stderr.strip()
    assert len(err.splitlines()) == 1
    assert "l.toml" in err and "stage 1 'flt'" in err and needle in err


def test_cascaded_linear_section_equals_scikit_rf_cascade():
    # Two mismatched filters in a row: with linear_sections = "cascade" the product of
    # the stage responses is S21 of scikit-rf's (a ** b) (independent library), and it
    # differs from the matched product S21(a) S21(b) in the transition band.
    pa = Prototype("chebyshev", "lowpass", 5, 500e6, ripple_db=0.5)
    pb = Prototype("butterworth", "highpass", 3, 300e6)
    stages = [
        {
            "kind": "filter",
            "name": "a",
            "prototype": {
                "family": "chebyshev",
                "order": 5,
                "cutoff": "500 MHz",
                "ripple": "0.5 dB",
                **IDEAL,
            },
        },
        {
            "kind": "filter",
            "name": "b",
            "prototype": {
                "family": "butterworth",
                "response": "highpass",
                "order": 3,
                "cutoff": "300 MHz",
                **IDEAL,
            },
        },
    ]
    doc = {"carrier": [{"freq": "420 MHz", "power": "0 dBm"}], "stage": stages}
    f = np.array([420e6])
    ref = (ladder_network(pa, f, 50.0) ** ladder_network(pb, f, 50.0)).s[:, 1, 0]
    doc["analysis"] = {"linear_sections": "cascade"}
    casc = from_dict(doc, name="c.toml").run().carrier_levels_dbm()[0]
    doc["analysis"] = {"linear_sections": "matched"}
    matched = from_dict(doc, name="c.toml").run().carrier_levels_dbm()[0]
    assert casc == pytest.approx(0.0 + float(_db(ref[0])), abs=1e-9)
    matched_ref = _db(ladder_network(pa, f, 50.0).s[0, 1, 0] * ladder_network(pb, f, 50.0).s[0, 1, 0])
    assert matched == pytest.approx(float(matched_ref), abs=1e-9)
    assert abs(casc - matched) > 0.01


def test_amplifier_touchstone_shape_applies_to_what_passes_not_to_what_it_makes(tmp_path):
    # The figures hold at the output connector, so the shape S21(f)/S21(f_ref) is applied
    # to what passes through the stage and not to what the stage generates (the
    # documented model): an h2 figure of the shaped stage itself is its datasheet level,
    # OHIP2 = Pout + |dBc| (common practice), while a 2f1 made by an earlier stage leaves
    # |S21(2f)/S21(f)| lower than a flat stage would pass it.
    f = np.linspace(10e6, 2e9, 400)
    shape = 10 ** (20 / 20) / (1 + 1j * f / 600e6)  # invented gain roll-off
    _write_s2p(tmp_path / "amp.s2p", f, shape)
    ratio_db = 20 * math.log10(abs((1 + 1j * 300e6 / 600e6) / (1 + 1j * 600e6 / 600e6)))
    own = {
        "carrier": [{"freq": "300 MHz", "power": "-20 dBm"}],
        "stage": [amp("a", gain="20 dB", ohip2="+40 dBm", touchstone="amp.s2p")],
        "analysis": {"max_order": 3},
    }
    lv = levels_by_label(from_dict(own, name="a.toml", base_dir=tmp_path).run(), combine="phase")
    assert lv["f1"] == pytest.approx(0.0, abs=0.001)
    assert lv["2f1"] == pytest.approx(-40.0, abs=0.01)
    passing = {
        "carrier": [{"freq": "300 MHz", "power": "-40 dBm"}],
        "stage": [amp("first", gain="20 dB", ohip2="+20 dBm"), amp("a", gain="20 dB", touchstone="amp.s2p")],
        "analysis": {"max_order": 3},
    }
    shaped = levels_by_label(from_dict(passing, name="a.toml", base_dir=tmp_path).run(), combine="phase")
    # The first stage alone: 2f1 at 2 (-20) - 20 = -60 dBm, -40 dBc; the second adds 20 dB
    # to the carrier and 20 dB + ratio to 2f1.
    assert shaped["2f1"] == pytest.approx(-40.0 + ratio_db, abs=0.01)
