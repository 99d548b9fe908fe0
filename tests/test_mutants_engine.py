"""Mixing vectors, labels and the torus engine: checks added after mutation testing
(MUTATION.md).  Each one kills mutants that survived the earlier suite, against a
brute-force enumeration, a trigonometric identity or plain arithmetic."""

from __future__ import annotations

import itertools

import pytest
from helpers import compare_with_reference, levels_by_label, lineup, single_tone
from reference import Tone, exact_length, simulate

from spurplan.model.nonlinear import Polynomial
from spurplan.model.products import label, labels, mixing_vectors, product_index, tone_index
from spurplan.units import dbm_to_vpeak


def _brute_force_canonical(n_tones: int, max_order: int) -> set[tuple[int, ...]]:
    # Independent enumeration: every integer vector of order 1..max_order, one of each
    # {m, -m} pair (the one whose first nonzero entry is positive).
    out = set()
    for m in itertools.product(range(-max_order, max_order + 1), repeat=n_tones):
        if 1 <= sum(abs(v) for v in m) <= max_order:
            first = next(v for v in m if v)
            out.add(m if first > 0 else tuple(-v for v in m))
    return out


def test_tone_index_marks_exactly_the_unit_vectors():
    # A product "is" base tone k when its mixing vector is the unit vector e_k
    # (definition); every other vector is a true product (-1).  Brute force over the set.
    for n_tones, max_order in ((1, 4), (2, 3), (3, 3)):
        mix = mixing_vectors(n_tones, max_order)
        assert {tuple(r) for r in mix.tolist()} == _brute_force_canonical(n_tones, max_order)
        want = [(row.index(1) if sorted(row) == [0] * (n_tones - 1) + [1] else -1) for row in mix.tolist()]
        got = tone_index(mix)
        assert got.tolist() == want
        assert got.dtype.kind == "i"


def test_product_index_finds_either_sign():
    # A real signal holds m and -m as one product (e^{j theta} + e^{-j theta} = 2 cos theta),
    # so asking for -m finds the row of m.  Expected rows by brute-force search.
    mix = mixing_vectors(2, 3)
    rows = [tuple(r) for r in mix.tolist()]
    for m in ((2, -1), (-2, 1), (-1, 0), (0, -3), (-1, -2)):
        canon = m if next(v for v in m if v) > 0 else tuple(-v for v in m)
        assert product_index(mix, m) == rows.index(canon)
    with pytest.raises(ValueError):
        product_index(mix, (4, 0))


@pytest.mark.parametrize(
    ("m", "names", "want"),
    [
        # The trade's names (common practice, no source): positive terms first, in
        # tone order, a coefficient of 1 left out, "DC" for the zero vector.
        ((2, -1), ["f1", "f2"], "2f1-f2"),
        ((-1, 2), ["f1", "f2"], "2f2-f1"),
        ((1, 1), ["f1", "f2"], "f1+f2"),
        ((0, 3), ["f1", "f2"], "3f2"),
        ((-1, 3), ["LO", "IF"], "3IF-LO"),
        ((1, -1, 2), ["LO", "f1", "f2"], "LO+2f2-f1"),
        ((-2, -1), ["f1", "f2"], "-2f1-f2"),
        ((0, 0), ["f1", "f2"], "DC"),
    ],
)
def test_labels_read_as_the_trade_writes_them(m, names, want):
    assert label(m, names) == want


def test_labels_of_a_table_give_both_signs():
    # labels() is label() of each row and of its negative (definition), checked row by row.
    mix = mixing_vectors(2, 3)
    plus, minus = labels(mix, ["f1", "f2"])
    assert plus == tuple(label(list(r), ["f1", "f2"]) for r in mix.tolist())
    assert minus == tuple(label([-v for v in r], ["f1", "f2"]) for r in mix.tolist())
    assert plus[:2] == ("f1", "f2")
    with pytest.raises(ValueError):
        label([1, 0], ["f1"])  # one name per tone (zip strict)


def test_a_one_volt_tone_is_not_mistaken_for_silence():
    # cos^3 = (3 cos + cos 3theta) / 4 (trigonometric identity): y = x + a3 x^3 driven by
    # exactly 1 V gives a fundamental of 1 + 3 a3 / 4 and a third harmonic of a3 / 4.
    a3 = -0.1
    h = single_tone(Polynomial((1.0, 0.0, a3)), 1.0, max_order=5).spectrum[0]
    assert h[0] == pytest.approx(1 + 0.75 * a3, abs=1e-12)
    assert h[2] == pytest.approx(a3 / 4, abs=1e-12)
    assert abs(h[1]) < 1e-12 and abs(h[3]) < 1e-12


def test_a_lineup_of_linear_stages_only_runs_and_passes_the_carrier():
    # An attenuator of 6 dB takes 6 dB off the carrier (definition of loss, arithmetic).
    lu = lineup([{"kind": "attenuator", "name": "pad", "loss": "6 dB"}], carriers=(("100 MHz", "-10 dBm"),))
    res = lu.run()
    rows = res.product_rows(None, None)
    i = rows["kind"].index("carrier")
    assert rows["level_dbm"][i] == pytest.approx(-16.0, abs=1e-9)
    # and 10^(-6/20) of the voltage (P = V^2 / 2R, so dB of voltage is 20 log10).
    assert float(dbm_to_vpeak(rows["level_dbm"][i])) == pytest.approx(
        float(dbm_to_vpeak(-10.0)) * 10 ** (-6 / 20), rel=1e-9
    )
    assert set(levels_by_label(res)) >= {"f1"}


def _two_tone_rows_and_reference():
    # A polynomial amplifier (degree 3) on two tones at 7 and 9 MHz, on a 1 MHz grid.
    lu = lineup(
        [{"kind": "amplifier", "name": "pa", "gain": "15 dB", "oip3": "+25 dBm", "oip2": "+35 dBm"}],
        carriers=(("7 MHz", "-5 dBm"), ("9 MHz", "-8 dBm")),
        max_order=3,
    )
    rows = lu.run().product_rows()
    tones = [Tone(c.freq_hz, c.power_dbm, c.phase_rad) for c in lu.carriers]
    ref = simulate(tones, [lu.stages[0].transfer], df_hz=1e6, length=4 * exact_length([7, 9], 3))
    return rows, ref, [c.freq_hz for c in lu.carriers]


def test_reference_comparison_fails_when_the_engine_leaves_out_a_loud_product():
    # tests/helpers.compare_with_reference runs both ways: against the brute-force FFT
    # (tests/reference.py, numpy.fft) a table that lacks its loudest product must fail,
    # although every row it still has agrees with the reference.
    rows, ref, tones_hz = _two_tone_rows_and_reference()
    assert compare_with_reference(rows, ref, -150.0, 0.01, tones_hz=tones_hz, max_order=3) >= 8
    products = [i for i, k in enumerate(rows["kind"]) if k == "product"]
    loud = max(products, key=lambda i: rows["level_dbm"][i])
    cut = {k: [v for i, v in enumerate(col) if i != loud] for k, col in rows.items()}
    with pytest.raises(AssertionError, match="not in the engine's table"):
        compare_with_reference(cut, ref, -150.0, 0.01, tones_hz=tones_hz, max_order=3)
