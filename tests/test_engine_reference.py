"""The spectral engine against a brute-force time-domain reference and closed forms.

The reference (:mod:`reference`) samples the physical waveform on a common time grid
and reads every product from one long FFT; it is exact when the carriers sit on FFT
bins and the record is long enough that nothing aliases.  The engine works on the
K-torus and must agree with it, product by product, merged frequencies included.

Polynomial stages are rebuilt here from the datasheet figures with the textbook
relations (Razavi, RF Microelectronics 2e, ch. 2, from memory; the same relations are
listed in the design notes, section 4), so the comparison also covers the conversion
from figures to coefficients.  Saturating models have no such closed form; for those
the reference runs the engine's own memoryless model and checks the propagation.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass

import numpy as np
import pytest
from helpers import representable_bins
from hypothesis import given, settings
from hypothesis import strategies as st
from reference import Generating, Spectrum, Tone, dbm_to_vpeak, exact_length, simulate, zone_weight

from spurplan.io.lineup_file import from_dict

R_OHM = 50.0
DF_HZ = 1e6  # carriers of the polynomial cases sit on whole MHz: bin n is n MHz
FLOOR_DBC = -150.0
TOL_DB = 0.01
# A reference bin this far above the floor must also be in the engine's table
# (margin for products that sit right at the floor).
MISSING_MARGIN_DB = 0.1


# --------------------------------------------------------------------------------------
# Figures -> polynomial, written out independently of spurplan
# --------------------------------------------------------------------------------------


def polynomial_coefficients(gain_db: float, intercepts: dict, expansive: bool) -> list[float]:
    """``[a1, ..., aD]`` (V^(1-n)) from output-referred intercepts.

    ``intercepts`` maps order n to ``("ip", OIPn dBm)`` (two-tone, n = 2 or 3) or
    ``("hip", OHIPn dBm)`` (harmonic).  Relations (Razavi, RF Microelectronics 2e,
    ch. 2, from memory): ``a1 = 10^(G/20)``; two-tone ``A_IIP2 = |a1/a2|``,
    ``A_IIP3^2 = (4/3) |a1/a3|``; harmonic ``A_IHIPn^(n-1) = 2^(n-1) |a1/a_n|``; input
    intercept = output intercept - G.  Odd terms compressive (negative) unless
    ``expansive``; even terms positive (the design notes' sign convention, section 4).
    """
    a1 = 10.0 ** (gain_db / 20.0)
    top = max(intercepts, default=1)
    coeffs = [a1] + [0.0] * (top - 1)
    for n, (kind, out_dbm) in intercepts.items():
        amp = dbm_to_vpeak(out_dbm - gain_db, R_OHM)
        if kind == "ip" and n == 2:
            mag = a1 / amp
        elif kind == "ip" and n == 3:
            mag = (4.0 / 3.0) * a1 / amp**2
        else:
            mag = 2.0 ** (n - 1) * a1 / amp ** (n - 1)
        sign = (1.0 if expansive else -1.0) if n % 2 else 1.0
        coeffs[n - 1] = sign * mag
    return coeffs


def polynomial(coeffs: list[float]):
    """``T(x) = sum a_n x^n`` evaluated by numpy."""
    full = [0.0, *coeffs]
    return lambda x: np.polynomial.polynomial.polyval(x, full)


# --------------------------------------------------------------------------------------
# Hypothesis: lineups of polynomial amplifiers and pads on whole-MHz carriers
# --------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Case:
    doc: dict
    tones: tuple[Tone, ...]
    ref_stages: tuple
    bins: tuple[int, ...]
    total_degree: int


def _dbm(value: float) -> str:
    return f"{value:+.2f} dBm"


@st.composite
def amplifier_table(draw, name: str, p_in_dbm: float, top: int):
    """One amplifier whose highest figure is of order ``top``.

    Every intercept is placed 20 to 45 dB above the small-signal drive at its input,
    so the stage runs well below compression.
    """
    # Gain 0 .. 30 dB, kept so that the drive stays at or below +40 dBm (and every
    # figure within the loader's -300 .. +100 dBm).
    gain = draw(st.integers(0, int(2 * min(30.0, max(0.0, 40.0 - p_in_dbm))))) / 2.0
    table = {"kind": "amplifier", "name": name, "gain": f"{gain} dB"}
    intercepts = {}
    for n in range(2, top + 1):
        if n != top and not draw(st.booleans()):
            continue
        backoff = draw(st.integers(80, 180)) / 4.0
        styles = ["oip", "iip", "h"] if n <= 3 else ["ohip", "h"]
        if p_in_dbm + gain < -50.0:
            # The loader takes a harmonic figure's output power from -50 dBm up
            # (stages/amplifier.py HARMONIC_AT); below it, state the intercept instead.
            styles.remove("h")
        style = draw(st.sampled_from(styles))
        if style == "iip":
            iip = round(p_in_dbm + backoff, 2)
            table[f"iip{n}"] = _dbm(iip)
            intercepts[n] = ("ip", iip + gain)
        elif style == "oip":
            oip = round(p_in_dbm + backoff + gain, 2)
            table[f"oip{n}"] = _dbm(oip)
            intercepts[n] = ("ip", oip)
        elif style == "ohip":
            ohip = round(p_in_dbm + backoff + gain, 2)
            table[f"ohip{n}"] = _dbm(ohip)
            intercepts[n] = ("hip", ohip)
        else:
            # "Hn = X dBc @ Pout" means OHIPn = Pout + |X| / (n - 1) (design notes
            # section 4, from memory).
            pout = round(p_in_dbm + gain, 2)
            dbc = round((n - 1) * backoff, 2)
            table[f"h{n}"] = f"{-dbc:.2f} dBc @ {pout:+.2f} dBm"
            intercepts[n] = ("hip", pout + dbc / (n - 1))
    expansive = any(n % 2 for n in intercepts) and draw(st.booleans())
    if expansive:
        table["cubic"] = "expansive"
    coeffs = polynomial_coefficients(gain, intercepts, expansive)
    return table, polynomial(coeffs), gain, len(coeffs)


@st.composite
def polynomial_lineups(draw, min_stages: int = 1, max_stages: int = 3):
    n_car = draw(st.integers(1, 2))
    bins = draw(st.lists(st.integers(1, 12), min_size=n_car, max_size=n_car, unique=True))
    powers = [draw(st.integers(-120, 0)) / 4.0 for _ in bins]
    phases_deg = [draw(st.integers(0, 359)) for _ in bins]
    kinds = draw(
        st.lists(st.sampled_from(["amplifier", "attenuator"]), min_size=min_stages, max_size=max_stages)
    )
    if "amplifier" not in kinds:
        kinds[draw(st.integers(0, len(kinds) - 1))] = "amplifier"

    # Drive at each stage input, as the power of one tone of the peak envelope
    # (two tones in phase reach twice the amplitude: +6 dB).
    p_in = max(powers) + 20.0 * math.log10(n_car)
    total_degree = 1
    tables, ref_stages = [], []
    for i, kind in enumerate(kinds):
        name = f"s{i + 1}"
        if kind == "attenuator":
            loss = draw(st.integers(0, 40)) / 2.0
            tables.append({"kind": "attenuator", "name": name, "loss": f"{loss} dB"})
            ref_stages.append(-loss)
            p_in -= loss
            continue
        # Keep the product of the degrees <= 30 (the highest max_order), so that the
        # engine truncates nothing; the first amplifier is nonlinear.  Highest degree
        # first: hypothesis favours early choices, and high orders are the hard part.
        low = 2 if total_degree == 1 else 1
        top = draw(st.sampled_from([d for d in range(5, low - 1, -1) if total_degree * d <= 30]))
        table, transfer, gain, degree = draw(amplifier_table(name, p_in, top))
        tables.append(table)
        ref_stages.append(transfer)
        total_degree *= degree
        p_in += gain
    max_order = draw(st.integers(total_degree, min(30, total_degree + 2)))
    doc = {
        "lineup": {"name": "hypothesis lineup", "impedance": "50 ohm"},
        "carrier": [
            {"freq": f"{b} MHz", "power": _dbm(p), "phase": f"{ph} deg"}
            for b, p, ph in zip(bins, powers, phases_deg, strict=True)
        ],
        "stage": tables,
        "analysis": {"max_order": max_order, "combine": "phase"},
    }
    tones = tuple(
        Tone(b * DF_HZ, p, math.radians(ph)) for b, p, ph in zip(bins, powers, phases_deg, strict=True)
    )
    return Case(doc, tones, tuple(ref_stages), tuple(bins), total_degree)


# --------------------------------------------------------------------------------------
# Comparison
# --------------------------------------------------------------------------------------


def assert_matches_reference(result, spectrum: Spectrum, batch: int = 0, max_order: int | None = None) -> int:
    """Every product above the floor agrees with the reference within TOL_DB.

    Compared: the engine's rows above -150 dBc, and every reference bin above
    -150 dBc, which the engine must then also report.  With ``max_order`` (where the
    reference holds products of every order and the engine keeps those up to it),
    only reference bins that a product of order <= ``max_order`` can reach are
    required (:func:`helpers.representable_bins`, a brute-force enumeration).
    Returns how many frequencies were compared.
    """
    rows = result.product_rows(combine="phase", batch=batch)
    engine = {}
    for freq, level, dbc in zip(rows["freq_hz"], rows["level_dbm"], rows["dbc"], strict=True):
        engine[spectrum.bin_of(freq)] = (level, dbc)
    compare = {b for b, (_, dbc) in engine.items() if dbc > FLOOR_DBC}
    carrier_ref = max(spectrum.at(c.freq_hz) for c in result.lineup.carriers)
    loud = {int(b) for b in np.nonzero(spectrum.level_dbm - carrier_ref > FLOOR_DBC + MISSING_MARGIN_DB)[0]}
    if max_order is not None:
        tones_hz = [c.freq_hz for c in result.lineup.carriers]
        loud &= representable_bins(tones_hz, max_order, spectrum.df_hz)
    missing = sorted(b for b in loud if b not in engine)
    assert not missing, f"reference bins {missing} are above {FLOOR_DBC} dBc but not in the table"
    compare |= loud
    for b in sorted(compare):
        level = engine[b][0]
        ref = float(spectrum.level_dbm[b])
        # Expected value: brute-force time-domain FFT (tests/reference.py, numpy.fft).
        assert abs(level - ref) <= TOL_DB, f"bin {b} ({b * spectrum.df_hz} Hz): engine {level} ref {ref}"
    return len(compare)


# --------------------------------------------------------------------------------------
# Polynomial lineups: engine == brute force
# --------------------------------------------------------------------------------------


@settings(max_examples=80, deadline=None)
@given(polynomial_lineups())
def test_polynomial_lineups_match_brute_force(case):
    lineup = from_dict(case.doc)
    result = lineup.run()
    length = exact_length(case.bins, case.total_degree)
    spectrum = simulate(
        case.tones, weighted(lineup, case.ref_stages), df_hz=DF_HZ, length=length, r_ohm=R_OHM
    )
    # Expected: the brute-force reference (tests/reference.py, numpy.fft); the count
    # is a precondition (at least the carriers were compared).
    assert assert_matches_reference(result, spectrum) >= len(case.bins)


def weighted(lineup, ref_stages) -> list:
    """The reference stages with each amplifier's fitted harmonic-zone weights applied to
    what it generates (tests/reference.py ``Generating``), zones centred on the reference
    carrier: the strongest, ties to the higher frequency (no mixers here).

    The weights come from the lineup's stages: this checks how the engine carries them;
    that they meet the stated figures is tested against the figures themselves
    (tests/test_amplifier_figures.py).
    """
    ref_hz = max(lineup.carriers, key=lambda c: (c.power_dbm, c.freq_hz)).freq_hz
    out = []
    for stage, ref in zip(lineup.stages, ref_stages, strict=True):
        weights = getattr(stage, "zone_weights_db", None)
        if callable(ref) and weights:
            ref = Generating(ref, 10 ** (stage.gain_db / 20), zone_weight(weights, ref_hz))
        out.append(ref)
    return out


def _driver_pad_pa_doc(f1: str, f2: str, max_order: int, combine: str = "phase") -> dict:
    return {
        "carrier": [{"freq": f1, "power": "-12 dBm", "phase": "40 deg"}, {"freq": f2, "power": "-15 dBm"}],
        "stage": [
            {"kind": "amplifier", "name": "driver", "gain": "15 dB", "oip3": "+28 dBm", "oip2": "+35 dBm"},
            {"kind": "attenuator", "name": "pad", "loss": "3 dB"},
            {
                "kind": "amplifier",
                "name": "pa",
                "gain": "12 dB",
                "iip3": "+20 dBm",
                # Small-signal intercepts, carried exactly by the polynomial (a datasheet's
                # h2 -35 dBc and h5 -70 dBc @ +10 dBm read with OHIPn = P + |dBc|/(n-1)).
                "ohip2": "+45 dBm",
                "ohip5": "+27.5 dBm",
            },
        ],
        "analysis": {"max_order": max_order, "combine": combine},
    }


def test_harmonically_related_carriers_merge_coherently():
    # 7 and 9 MHz: many mixing vectors share a frequency (e.g. 4f2 - 4f1 = 5f1 - 3f2
    # = 8 MHz, arithmetic), and the reference sees their phase-true sum.
    doc = _driver_pad_pa_doc("7 MHz", "9 MHz", max_order=15)
    result = from_dict(doc).run()
    rows = result.product_rows(combine="phase")
    merged = [a for a in rows["also"] if a]
    assert len(merged) >= 10  # precondition: the case exercises the merge
    driver = polynomial(polynomial_coefficients(15.0, {3: ("ip", 28.0), 2: ("ip", 35.0)}, False))
    pa = polynomial(
        polynomial_coefficients(12.0, {3: ("ip", 32.0), 2: ("hip", 45.0), 5: ("hip", 10.0 + 70.0 / 4)}, False)
    )
    tones = (Tone(7e6, -12.0, math.radians(40.0)), Tone(9e6, -15.0))
    spectrum = simulate(tones, (driver, -3.0, pa), df_hz=DF_HZ, length=exact_length((7, 9), 15), r_ohm=R_OHM)
    # Expected: the brute-force reference (numpy.fft); the count is a precondition.
    assert assert_matches_reference(result, spectrum) > 30


# --------------------------------------------------------------------------------------
# Saturating models: single stage driven into compression
# --------------------------------------------------------------------------------------

SATURATING = {
    "psat": {"psat": "+20 dBm"},
    "p1db": {"p1db": "+18 dBm"},
    "psat+p1db": {"p1db": "+17 dBm", "psat": "+20 dBm"},
}
# (carrier frequencies in MHz, record length).  One carrier on bin 1; two on bins
# 1000 and 1001, where a product of order <= 15 can only share a bin with one of
# order ~2000 (negligible).
CARRIER_SETS = {
    "one tone": ((1,), 2**12),
    "two tones": ((1000, 1001), 2**19),
}


@pytest.mark.parametrize("model", sorted(SATURATING))
@pytest.mark.parametrize("carriers", sorted(CARRIER_SETS))
@pytest.mark.slow
def test_saturating_amplifier_matches_brute_force(model, carriers):
    freqs_mhz, length = CARRIER_SETS[carriers]
    offsets = np.array([-6.0, 0.0, 6.0])  # dB: from near P1dB to hard compression
    doc = {
        "carrier": [
            {"freq": f"{f} MHz", "power": "+2 dBm", "phase": f"{37 * k} deg"} for k, f in enumerate(freqs_mhz)
        ],
        "stage": [
            {
                "kind": "amplifier",
                "name": "pa",
                "gain": "20 dB",
                "oip3": "+32 dBm",
                "h2": "-40 dBc @ +10 dBm",
                **SATURATING[model],
            }
        ],
        "analysis": {"max_order": 15, "combine": "phase"},
    }
    lineup = from_dict(doc)
    result = lineup.run(drive_offset_db=offsets)
    assert result.propagation.converged.all()
    transfer = lineup.stages[0].transfer
    for i, offset in enumerate(offsets):
        tones = [Tone(c.freq_hz, c.power_dbm + offset, c.phase_rad) for c in lineup.carriers]
        ref_stages = weighted(lineup, [transfer])
        spectrum = simulate(tones, ref_stages, df_hz=DF_HZ, length=length, r_ohm=R_OHM)
        finer = simulate(tones, ref_stages, df_hz=DF_HZ, length=2 * length, r_ohm=R_OHM)
        rows = result.product_rows(combine="phase", batch=i)
        compared = [
            spectrum.bin_of(f) for f, d in zip(rows["freq_hz"], rows["dbc"], strict=True) if d > FLOOR_DBC
        ]
        # Precondition: the reference has converged on the compared bins (a record
        # twice as long changes nothing).
        assert np.abs(spectrum.level_dbm[compared] - finer.level_dbm[compared]).max() < 1e-4
        if offset >= 0:
            # Precondition: past 1 dB gain compression (definition of P1dB, common
            # practice, no source).
            gain = spectrum.at(tones[0].freq_hz) - tones[0].power_dbm
            assert gain < 20.0 - 1.0
        # Expected: the brute-force reference (numpy.fft).  Only products up to
        # max_order are in the table: reference bins that only higher orders reach are
        # not required, every other loud one is.  The count is a precondition.
        assert assert_matches_reference(result, spectrum, batch=i, max_order=15) >= 8


# --------------------------------------------------------------------------------------
# Incommensurate tones: closed forms, and no dependence on the tone spacing
# --------------------------------------------------------------------------------------


def _rows_by_mix(result, combine="phase"):
    rows = result.product_rows(combine=combine)
    return {
        tuple(m): (lv, dbc, also)
        for m, lv, dbc, also in zip(rows["mix"], rows["level_dbm"], rows["dbc"], rows["also"], strict=True)
    }


def _vpeak_to_dbm(v: float) -> float:
    # P = V^2 / (2 R) (common practice, no source).
    return 10.0 * math.log10(v * v / (2.0 * R_OHM)) + 30.0


def test_pure_cubic_two_tone_closed_forms_at_incommensurate_spacing():
    gain, oip3, p_in = 15.0, 30.0, -30.0
    doc = {
        "carrier": [
            {"freq": "100 MHz", "power": _dbm(p_in)},
            {"freq": "100.0123457 MHz", "power": _dbm(p_in)},
        ],
        "stage": [{"kind": "amplifier", "name": "amp", "gain": f"{gain} dB", "oip3": _dbm(oip3)}],
        "analysis": {"max_order": 5, "combine": "phase"},
    }
    table = _rows_by_mix(from_dict(doc).run())
    p_out = p_in + gain  # small-signal output power per tone
    # IM3 = 3 Pout - 2 OIP3 (Razavi, RF Microelectronics 2e, ch. 2, from memory); for a
    # pure cubic the a3 term is the only source of 2f1 - f2, so it holds exactly.
    assert table[(2, -1)][0] == pytest.approx(3 * p_out - 2 * oip3, abs=1e-6)
    assert table[(-1, 2)][0] == pytest.approx(3 * p_out - 2 * oip3, abs=1e-6)

    # The whole table, from cos^3 and product-to-sum (trigonometric identity;
    # Abramowitz and Stegun 4.3, from memory), with a1, a3 from the intercept
    # (Razavi, ch. 2, from memory):
    a1, _, a3 = polynomial_coefficients(gain, {3: ("ip", oip3)}, False)
    amp = dbm_to_vpeak(p_in, R_OHM)
    expected = {
        (1, 0): a1 * amp + a3 * (0.75 + 1.5) * amp**3,
        (0, 1): a1 * amp + a3 * (0.75 + 1.5) * amp**3,
        (3, 0): a3 * amp**3 / 4.0,
        (0, 3): a3 * amp**3 / 4.0,
        (2, -1): 0.75 * a3 * amp**3,
        (-1, 2): 0.75 * a3 * amp**3,
        (2, 1): 0.75 * a3 * amp**3,
        (1, 2): 0.75 * a3 * amp**3,
    }
    assert set(table) == set(expected)
    for m, v in expected.items():
        assert table[m][0] == pytest.approx(_vpeak_to_dbm(abs(v)), abs=1e-6), m


# f2 for f1 = 100 MHz.  The engine's levels must not depend on it (flat stages).
SPACINGS = [
    pytest.param("100.0123457 MHz", id="12.3457 kHz"),
    pytest.param("100.001 MHz", id="1 kHz"),
    pytest.param("237 MHz", id="137 MHz"),
    # A 1 Hz beat is a product, not DC: guards the 0 Hz tolerance of the engine.
    pytest.param("100.000001 MHz", id="1 Hz"),
]


@pytest.mark.parametrize("f2", SPACINGS)
def test_levels_do_not_depend_on_tone_spacing(f2):
    max_order = 10  # = 2 (driver) x 5 (pa): nothing truncated
    result = from_dict(_driver_pad_pa_doc("100 MHz", f2, max_order)).run()
    table = _rows_by_mix(result)
    assert all(also == "" for _, _, also in table.values())  # precondition: no merges here
    # Reference on bins n1, n1 + 1 with n1 > 2 max_order: the bin (a + b) n1 + b of
    # m = (a, b) is distinct for every product up to max_order.
    n1 = 2 * max_order + 2
    bins = {}
    for m in itertools.product(range(-max_order, max_order + 1), repeat=2):
        if 0 < abs(m[0]) + abs(m[1]) <= max_order:
            b = abs(m[0] * n1 + m[1] * (n1 + 1))
            assert bins.setdefault(b, {m, (-m[0], -m[1])}) == {m, (-m[0], -m[1])}
    driver = polynomial(polynomial_coefficients(15.0, {3: ("ip", 28.0), 2: ("ip", 35.0)}, False))
    pa = polynomial(
        polynomial_coefficients(12.0, {3: ("ip", 32.0), 2: ("hip", 45.0), 5: ("hip", 10.0 + 70.0 / 4)}, False)
    )
    tones = (Tone(n1 * DF_HZ, -12.0, math.radians(40.0)), Tone((n1 + 1) * DF_HZ, -15.0))
    spectrum = simulate(tones, (driver, -3.0, pa), df_hz=DF_HZ, length=exact_length((n1 + 1,), 10))
    carrier_ref = max(spectrum.at(t.freq_hz) for t in tones)
    loud = {int(b) for b in np.nonzero(spectrum.level_dbm - carrier_ref > FLOOR_DBC + MISSING_MARGIN_DB)[0]}
    engine_bins = {}
    for m, (level, dbc, _) in table.items():
        b = abs(m[0] * n1 + m[1] * (n1 + 1))
        engine_bins[b] = level
        if dbc > FLOOR_DBC:
            loud.add(b)
    assert len(loud) > 40  # precondition: many products take part
    for b in sorted(loud):
        assert b in engine_bins, f"product {sorted(bins[b])[-1]} missing from the table"
        # Expected value: brute-force time-domain FFT at commensurate spacing (numpy.fft).
        assert engine_bins[b] == pytest.approx(float(spectrum.level_dbm[b]), abs=TOL_DB), sorted(bins[b])


# --------------------------------------------------------------------------------------
# Per-stage attribution and combining modes
# --------------------------------------------------------------------------------------


def _check_attribution(result) -> None:
    prop = result.propagation
    n_stages = len(result.lineup.stages)
    for node in range(n_stages + 1):
        parts = prop.contributions(node)
        assert parts.shape[0] == node + 1  # the input and each stage up to the node (arithmetic)
        total = parts.sum(axis=0)
        # Telescoping sum of "added beyond linear passage" (arithmetic): exact up to
        # rounding, relative to the magnitude sum of the parts.
        scale = np.abs(parts).sum(axis=0)
        assert np.all(np.abs(total - prop.nodes[node]) <= 1e-12 * scale)

    levels = {}
    for mode in ("phase", "worst", "power"):
        rows = result.product_rows(combine=mode)
        levels[mode] = dict(zip(rows["freq_hz"], rows["level_dbm"], strict=True))
    worst = levels["worst"]
    # |sum c| <= sum |c| (triangle inequality) and sqrt(sum |c|^2) <= sum |c|
    # (||c||_2 <= ||c||_1): the worst case is never below the modelled level, nor
    # below the power sum (so it reports every row they report).  Tolerance: rounding
    # of the dB conversion.
    for mode in ("phase", "power"):
        for f, level in levels[mode].items():
            assert f in worst, (mode, f)
            assert worst[f] >= level - 1e-9, (mode, f)


@settings(max_examples=30, deadline=None)
@given(polynomial_lineups(min_stages=2, max_stages=3))
def test_attribution_sums_to_node_and_worst_bounds_phase(case):
    _check_attribution(from_dict(case.doc).run())


def test_attribution_with_saturating_stage():
    doc = _driver_pad_pa_doc("450 MHz", "450.025 MHz", max_order=10)
    doc["stage"][2]["psat"] = "+16 dBm"
    result = from_dict(doc).run(drive_offset_db=np.array([-10.0, 0.0, 8.0]))
    _check_attribution(result)
    # Precondition: both amplifiers add products at the output, so the sums above
    # have more than one term.
    parts = result.propagation.contributions(3)
    assert np.abs(parts[1]).max() > 0
    assert np.abs(parts[3]).max() > 0
