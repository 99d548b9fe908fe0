"""Many carriers on a channel raster: the engine on the tone lattice against brute force.

Carriers on a common raster (``f_k = f_0 + s_k delta``) share a two-axis lattice
(:mod:`spurplan.model.tone_lattice`); every product that lands on one frequency is one
value, and products above the analysis order are carried until the reported ones settle.
The reference is the brute-force time-domain FFT of tests/reference.py, which knows
nothing of lattices or orders: it samples the waveform, applies each stage sample by
sample and reads every frequency from one FFT.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from reference import Tone, exact_length, simulate
from test_engine_reference import polynomial, polynomial_coefficients, weighted

from spurplan.engine import run as engine_run
from spurplan.io.lineup_file import from_dict
from spurplan.model import lineup as lineup_module
from spurplan.model.products import mixing_vectors
from spurplan.model.tone_lattice import build_lattice, find_raster

DF_HZ = 25e3  # the channel raster, and the reference's bin spacing
BASE_BIN = 18000  # 450 MHz / 25 kHz: zones of order <= 15 never overlap (arithmetic)
FLOOR_DBC = -150.0
TOL_DB = 0.01
ORDER = 7


def _doc(steps, order: int = ORDER) -> dict:
    """Invented driver, pad and PA; carriers on the 25 kHz raster near 450 MHz, total input
    power -12 dBm whatever their number, phases spread (not all aligned)."""
    power = -12.0 - 10.0 * math.log10(len(steps))
    carriers = [
        {
            "freq": f"{(BASE_BIN + s) * DF_HZ:.1f} Hz",
            "power": f"{power:.6f} dBm",
            "phase": f"{(37 * i * i) % 360} deg",
        }
        for i, s in enumerate(steps)
    ]
    return {
        "carrier": carriers,
        "stage": [
            {"kind": "amplifier", "name": "driver", "gain": "15 dB", "oip3": "+28 dBm", "oip2": "+35 dBm"},
            {"kind": "attenuator", "name": "pad", "loss": "3 dB"},
            {
                "kind": "amplifier",
                "name": "pa",
                "gain": "12 dB",
                "iip3": "+20 dBm",
                "ohip2": "+45 dBm",
                "ohip5": "+27.5 dBm",
            },
        ],
        "analysis": {"max_order": order, "combine": "phase"},
    }


def _reference(lineup):
    """Brute-force spectrum of the lineup (tests/reference.py, numpy.fft): the stages
    rebuilt from their figures with the textbook relations (Razavi, RF Microelectronics 2e,
    ch. 2, from memory), degrees 3 and 5, so a record of 2 x 15 x top bin is exact."""
    driver = polynomial(polynomial_coefficients(15.0, {3: ("ip", 28.0), 2: ("ip", 35.0)}, False))
    pa = polynomial(
        polynomial_coefficients(12.0, {3: ("ip", 32.0), 2: ("hip", 45.0), 5: ("hip", 10.0 + 70.0 / 4)}, False)
    )
    tones = [Tone(c.freq_hz, c.power_dbm, c.phase_rad) for c in lineup.carriers]
    bins = [round(c.freq_hz / DF_HZ) for c in lineup.carriers]
    return simulate(
        tones, weighted(lineup, (driver, -3.0, pa)), df_hz=DF_HZ, length=exact_length(bins, 15), r_ohm=50.0
    )


def _reachable_bins(bins, order: int) -> set[int]:
    """Bins ``|sum m_k b_k|`` with ``sum |m_k| <= order``: a sumset grown one tone at a
    time (plain Python sets, independent of spurplan); 0 Hz left out (AC coupling)."""
    seen, frontier = {0}, {0}
    for _ in range(order):
        frontier = {s + d for s in frontier for b in bins for d in (b, -b)} - seen
        seen |= frontier
    return {abs(s) for s in seen if s}


def _compare(result, spectrum, order: int = ORDER) -> tuple[int, float]:
    """Every engine row above the floor and every loud reference bin of order <= ORDER:
    returns (how many compared, worst difference in dB)."""
    rows = result.product_rows(combine="phase")
    engine = {spectrum.bin_of(f): lv for f, lv in zip(rows["freq_hz"], rows["level_dbm"], strict=True)}
    carrier_dbm = max(rows["level_dbm"][i] for i, k in enumerate(rows["kind"]) if k == "carrier")
    compare = {spectrum.bin_of(f) for f, d in zip(rows["freq_hz"], rows["dbc"], strict=True) if d > FLOOR_DBC}
    bins = [round(c.freq_hz / DF_HZ) for c in result.lineup.carriers]
    loud = {int(b) for b in np.nonzero(spectrum.level_dbm - carrier_dbm > FLOOR_DBC + 0.1)[0]}
    loud &= _reachable_bins(bins, order)
    missing = sorted(loud - set(engine))
    assert not missing, f"reference bins {missing[:5]} are loud and of order <= {order} but not reported"
    compare |= loud
    worst = max(abs(engine[b] - float(spectrum.level_dbm[b])) for b in compare)
    return len(compare), worst


@pytest.mark.parametrize(
    "steps",
    [[0, 1, 2], [0, 3, 4, 9, 11], list(range(8)), list(range(16))],
    ids=["3 equally spaced", "5 on a sparse raster", "8", "16"],
)
def test_raster_carriers_equal_brute_force_at_every_frequency(steps):
    lineup = from_dict(_doc(steps))
    result = lineup.run()
    assert lineup.tone_lattice.n_axes == 2  # the raster's centre and step, whatever the count
    n, worst = _compare(result, _reference(lineup))
    # Expected: the brute-force reference (tests/reference.py) within 0.01 dB at every
    # physical frequency; the count is a precondition (more than the carriers compared).
    assert n > 3 * len(steps)
    assert worst <= TOL_DB


def test_one_value_per_frequency_where_an_axis_per_carrier_misses(monkeypatch):
    # Three equally spaced carriers (f1 + f3 = 2 f2): with an axis per carrier, products of
    # order above 7 that land on the frequency of an order-7 one are not reported with it,
    # and the row misses brute force by far more than 0.01 dB; on the lattice they are one
    # product and agree.
    lineup = from_dict(_doc([0, 1, 2]))
    spectrum = _reference(lineup)
    monkeypatch.setattr(
        lineup_module, "lattice_for", lambda n_lo, freqs, *_: build_lattice(n_lo, None, len(freqs))
    )
    _, per_carrier = _compare(lineup.run(), spectrum)
    monkeypatch.undo()
    _, on_lattice = _compare(lineup.run(), spectrum)
    assert per_carrier > 0.1  # brute force (tests/reference.py) tells the two apart
    assert on_lattice <= TOL_DB


@pytest.mark.parametrize("steps", [[0], [0, 1, 2]], ids=["one carrier", "three carriers"])
def test_products_above_the_order_are_carried_until_the_reported_ones_settle(steps, monkeypatch):
    # A driver with a fifth-order figure makes order-5 products; the PA mixes them with two
    # carriers back onto order 3.  Reporting order 3, nothing kept above it after the driver
    # misses brute force by more than 1 dB at 0 dBm drive; carried until the reported levels
    # settle, every frequency agrees within 0.01 dB.
    doc = _doc(steps, order=3)
    doc["stage"][0]["ohip5"] = "+20 dBm"
    for c in doc["carrier"]:
        c["power"] = f"{-10 * math.log10(len(steps)):.6f} dBm"
    lineup = from_dict(doc)
    driver = polynomial(
        polynomial_coefficients(15.0, {3: ("ip", 28.0), 2: ("ip", 35.0), 5: ("hip", 20.0)}, False)
    )
    pa = polynomial(
        polynomial_coefficients(12.0, {3: ("ip", 32.0), 2: ("hip", 45.0), 5: ("hip", 10.0 + 70.0 / 4)}, False)
    )
    tones = [Tone(c.freq_hz, c.power_dbm, c.phase_rad) for c in lineup.carriers]
    bins = [round(c.freq_hz / DF_HZ) for c in lineup.carriers]
    # Degrees 5 and 5: a record of 2 x 25 x top bin is exact (tests/reference.py).
    spectrum = simulate(
        tones, weighted(lineup, (driver, -3.0, pa)), df_hz=DF_HZ, length=exact_length(bins, 25)
    )
    monkeypatch.setattr(engine_run, "MAX_EXTRA_ORDER", 0)
    _, truncated = _compare(lineup.run(), spectrum, order=3)
    monkeypatch.undo()
    result = lineup.run()
    _, settled = _compare(result, spectrum, order=3)
    assert truncated > 1.0  # brute force, tests/reference.py
    assert settled <= TOL_DB
    assert result.propagation.converged.all()


def test_widening_the_kept_products_moves_no_reported_level(monkeypatch):
    # The engine's own stopping rule: a wider kept set changes no reported level by more
    # than 0.01 dB.  Forced to keep 12 orders more in one step, the levels agree.
    lineup = from_dict(_doc(list(range(6))))
    a = lineup.run().product_rows(combine="phase")
    monkeypatch.setattr(engine_run, "EXTRA_ORDER_STEP", 12)
    monkeypatch.setattr(engine_run, "MAX_EXTRA_ORDER", 24)
    b = lineup.run().product_rows(combine="phase")
    assert a["freq_hz"] == b["freq_hz"]
    for la, lb, d in zip(a["level_dbm"], b["level_dbm"], a["dbc"], strict=True):
        if d > FLOOR_DBC:
            assert la == pytest.approx(lb, abs=TOL_DB)


def test_sixty_four_carriers_on_a_raster():
    # 64 carriers: beyond any axis-per-carrier grid, two axes on the lattice.  Order 5 keeps
    # the brute-force comparison short; every frequency agrees within 0.01 dB.
    lineup = from_dict(_doc(list(range(64)), order=5))
    result = lineup.run()
    spectrum = _reference(lineup)
    rows = result.product_rows(combine="phase")
    assert sum(k == "carrier" for k in rows["kind"]) == 64
    worst = 0.0
    for f, lv, d in zip(rows["freq_hz"], rows["level_dbm"], rows["dbc"], strict=True):
        if d > FLOOR_DBC:
            worst = max(worst, abs(lv - spectrum.at(f)))  # brute force, tests/reference.py
    assert worst <= TOL_DB


def test_find_raster_is_the_greatest_common_step():
    # 450.000, 450.025, 450.075 MHz: differences 25 and 75 kHz, gcd 25 kHz (arithmetic).
    step, steps = find_raster([450.0e6, 450.025e6, 450.075e6])
    assert step == pytest.approx(25e3, abs=1e-6)
    assert steps.tolist() == [0, 1, 3]
    # 12.5 kHz channels among 25 kHz ones: the raster is 12.5 kHz (arithmetic).
    assert find_raster([450.0e6, 450.0125e6, 450.05e6])[0] == pytest.approx(12.5e3, abs=1e-6)
    # 1.0123457 MHz and 2.3 MHz apart share no step coarser than 0.1 Hz (1012345.7 Hz is
    # 10123457 tenths of a hertz, arithmetic): a raster that fine is no raster.
    found = find_raster([100e6, 101.0123457e6, 102.3e6])
    assert found is None or found[0] <= 0.1 + 1e-6


def test_products_off_a_raster_are_every_mixing_vector():
    # Tones with an axis each: the products are all integer vectors of order 1..N with the
    # first nonzero entry positive, enumerated here with numpy over the full cube.
    for k, order in [(1, 9), (2, 8), (3, 5)]:
        axis = np.arange(-order, order + 1)
        cube = np.stack([g.ravel() for g in np.meshgrid(*([axis] * k), indexing="ij")], axis=1)
        size = np.abs(cube).sum(axis=1)
        nz = cube[(size >= 1) & (size <= order)]
        first = nz[np.arange(len(nz)), np.argmax(nz != 0, axis=1)]
        expected = {tuple(v) for v in nz[first > 0]}
        got = build_lattice(0, None, k).products(order)
        assert {tuple(v) for v in got.mix.tolist()} == expected
        assert np.array_equal(got.mix, mixing_vectors(k, order))


def test_a_lattice_point_is_one_product_of_its_least_order():
    # Three equally spaced carriers: f1 + f3 and 2 f2 are one frequency (arithmetic), one
    # product of order 2; 2 f2 - f1 = f3 + (f2 - f1) ... lands on f3 + delta, order 3.
    lattice = build_lattice(0, np.array([0, 1, 2]), 3, 25e3)
    products = lattice.products(3)
    tones = np.array([450.0e6, 450.025e6, 450.05e6])
    freqs = np.abs(tones @ products.mix.T.astype(float))
    assert len(np.unique(np.round(freqs))) == len(freqs)  # every frequency once
    at = {round(f): int(o) for f, o in zip(freqs, products.orders, strict=True)}
    assert at[round(2 * 450.025e6)] == 2
    assert at[round(450.075e6)] == 3
    assert at[round(25e3)] == 2  # f2 - f1 = f3 - f2


def test_a_saturating_grid_is_accepted_only_when_its_aliases_are_below_the_floor():
    # The engine stops refining a non-polynomial model's grid when the aliases it estimates
    # from the grid's own spectrum are below the floor.  Checked against the same model on a
    # grid four times finer per axis, evaluated directly (aliases there some 1e-300 smaller):
    # every kept product agrees to the engine's own tolerance, rtol 1e-4 plus 1e-11 of the
    # strongest (spectral convergence: common practice, no source).
    from spurplan.engine import torus
    from spurplan.model.torus_grid import CONVERGENCE_FLOOR, CONVERGENCE_RTOL

    doc = _doc(list(range(8)), order=7)
    doc["stage"] = [
        {"kind": "amplifier", "name": "pa", "gain": "20 dB", "oip3": "+38 dBm", "psat": "+30 dBm"}
    ]
    for c in doc["carrier"]:
        c["power"] = "-2 dBm"  # 7 dBm in all: near saturation, many orders alive
    lineup = from_dict(doc)
    products = lineup.tone_lattice.products(7)
    x = lineup.input_phasors(products.mix)
    transfer = lineup.stages[0].transfer
    got = torus.apply_memoryless(x, products.coords, transfer)
    assert got.converged.all()
    fine = tuple(4 * n for n in got.grid)
    want = torus._eval_chunked(x, products.coords, transfer, fine, np.arange(len(x)))[0]
    scale = np.abs(want).max()
    assert np.all(np.abs(got.spectrum - want) <= CONVERGENCE_RTOL * np.abs(want) + CONVERGENCE_FLOOR * scale)


def test_levels_that_do_not_settle_keep_the_check_from_pass():
    # Two carriers driven deep into three saturating stages: products of every order stay
    # strong, and within max_order + 12 the reported levels still move by more than 0.01 dB.
    # A lax invented limit that every product meets: the check must not read PASS.
    from spurplan.analyses.check import check

    stages = [
        {
            "kind": "amplifier",
            "name": "driver",
            "gain": "16 dB",
            "oip3": "+34 dBm",
            "oip2": "+50 dBm",
            "psat": "+24 dBm",
        },
        {
            "kind": "amplifier",
            "name": "pre",
            "gain": "12 dB",
            "oip3": "+40 dBm",
            "oip2": "+56 dBm",
            "psat": "+30 dBm",
        },
        {
            "kind": "amplifier",
            "name": "pa",
            "gain": "15 dB",
            "oip3": "+48 dBm",
            "oip2": "+64 dBm",
            "psat": "+39 dBm",
        },
    ]
    doc = {
        "carrier": [{"freq": "455 MHz", "power": "0 dBm"}, {"freq": "455.025 MHz", "power": "0 dBm"}],
        "stage": [{**st, "noise_figure": "5 dB"} for st in stages],
        "mask": {
            "rule": [{"name": "lax", "start": "9 kHz", "stop": "10 GHz", "limit": "+60 dBm", "rbw": "1 MHz"}]
        },
        "analysis": {"max_order": 10},
    }
    outcome = check(from_dict(doc))
    assert outcome.passed and not outcome.missing_figures  # preconditions
    assert outcome.not_converged
    assert outcome.status == "UNCERTAIN"
    assert "levels not settled" in outcome.verdict
