"""Results do not depend on the order in which carriers are listed.

The examined range of a rule set follows the highest carrier: 47 CFR 2.1057(a)(1) has the
spectrum investigated up to the 10th harmonic of the highest fundamental frequency (from
memory).  The reference carrier (rule conditions, drive, budget) is the strongest, ties to
the higher frequency.  Lineups here are invented for the tests.
"""

from __future__ import annotations

import math

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from spurplan.analyses.check import check
from spurplan.io.lineup_file import from_dict
from spurplan.model.lineup import Carrier, reference_carrier_index

# When a hypothesis test fails, its pytest plugin imports libcst, which triggers a
# DeprecationWarning from mypy_extensions; with filterwarnings=error that turns the
# failure report into an INTERNALERROR that stops the run.  Ignore that one warning.
pytestmark = pytest.mark.filterwarnings("ignore:mypy_extensions.TypedDict is deprecated:DeprecationWarning")

AMP = {"kind": "amplifier", "name": "pa", "gain": "10 dB", "oip3": "+30 dBm", "oip2": "+40 dBm"}
# With psat the model saturates (a limiter behind the polynomial) and makes products of
# every order, up to max_order.
PA = {**AMP, "psat": "+22 dBm"}
# A low-pass after the amplifier makes levels differ with frequency, so that no two
# products tie in margin and the worst one is unambiguous.
LPF = {
    "kind": "filter",
    "name": "lpf",
    "prototype": {"family": "butterworth", "response": "lowpass", "order": 3, "cutoff": "700 MHz"},
}


def _lineup(carriers, stages=(AMP,), mask=None, max_order=10):
    doc = {
        "lineup": {"name": "carrier-order test (invented)"},
        "carrier": [{"freq": f, "power": p} for f, p in carriers],
        "stage": [dict(s) for s in stages],
        "mask": mask or {"use": ["us-fcc-15.209"], "antenna_gain": "0 dBi"},
        "analysis": {"max_order": max_order, "combine": "worst"},
    }
    return from_dict(doc, name="carrier-order.toml")


def _row(outcome, label):
    i = outcome.rows["label"].index(label)
    return {k: v[i] for k, v in outcome.rows.items()}


def _eirp_dbm(uv_per_m: float, distance_m: float) -> float:
    # E[dBuV/m] = EIRP[dBm] + 104.77 - 20 log10(d / 1 m) (free space, ITU-R P.525).
    return 20 * math.log10(uv_per_m) - 104.77 + 20 * math.log10(distance_m)


def test_third_harmonic_of_the_weaker_higher_carrier_gets_a_limit():
    # 47 CFR 2.1057(a)(1) (from memory): investigate up to the 10th harmonic of the highest
    # fundamental, here 10 x 400.3 MHz = 4003 MHz, not 10 x 100 MHz (the strongest).  3f2 at
    # 1200.9 MHz is examined and held to 47 CFR 15.209(a) above 960 MHz: 500 uV/m at 3 m,
    # -41.25 dBm EIRP (fact sheet 2.4), conducted with a 0 dBi antenna.
    for carriers in (
        [("100 MHz", "0 dBm"), ("400.3 MHz", "-3 dBm")],
        [("400.3 MHz", "-3 dBm"), ("100 MHz", "0 dBm")],
    ):
        outcome = check(_lineup(carriers))
        label = "3f2" if carriers[1][0] == "400.3 MHz" else "3f1"
        row = _row(outcome, label)
        assert row["freq_hz"] == pytest.approx(1200.9e6, rel=1e-12)  # 3 x 400.3 MHz (arithmetic)
        assert row["margin_db"] is not None and row["domain"] == "spurious"
        assert row["limit_dbm"] == pytest.approx(_eirp_dbm(500.0, 3.0), abs=0.01)
        # And nothing above 1000 MHz goes unjudged for want of an examined range.
        assert not outcome.notes


def _tol_db(dbc: float) -> float:
    """How far two runs of one lineup, its tones listed in another order, may differ (dB).

    The torus FFT rounds relative to the strongest tone (IEEE 754 doubles; numpy.fft's
    error is of order 1e-15 of the largest coefficient, from memory); 1e-12 of the carrier
    amplitude is a generous bound, and a product ``dbc`` below the carrier then moves by at
    most 8.686 * 1e-12 * 10**(-dbc / 20) dB (d(20 log10 V) = 8.686 dV / V, arithmetic).
    """
    return 1e-9 + 8.686e-12 * 10 ** (-dbc / 20)


def test_equal_carriers_give_the_same_check_in_either_order():
    # Two carriers of equal power: argmax would take whichever is listed first, and with it
    # the examined range (10 x 100 MHz or 10 x 130 MHz; 47 CFR 2.1057(a)(1), from memory).
    # Either listing is the same transmitter: the rows must agree product by product, the
    # mixing vectors reversed.  Levels come from the engine in either tone order: equal to
    # rounding (_tol_db).
    a = check(_lineup([("100 MHz", "0 dBm"), ("130 MHz", "0 dBm")], stages=(PA, LPF)))
    b = check(_lineup([("130 MHz", "0 dBm"), ("100 MHz", "0 dBm")], stages=(PA, LPF)))
    assert len(a.rows["freq_hz"]) == len(b.rows["freq_hz"]) > 20
    # Products up to 10 x 130 MHz are examined whichever order (1300 MHz is 10 x 130 MHz).
    examined = [f for f, m in zip(a.rows["freq_hz"], a.rows["margin_db"], strict=True) if m is not None]
    assert 1000e6 < max(examined) <= 1300e6 * (1 + 1e-12)
    unexamined = [f for f, m in zip(a.rows["freq_hz"], a.rows["margin_db"], strict=True) if m is None]
    assert all(f > 1300e6 for f in unexamined)
    for i in range(len(a.rows["freq_hz"])):
        ra = {k: v[i] for k, v in a.rows.items()}
        rb = {k: v[i] for k, v in b.rows.items()}
        assert ra["freq_hz"] == pytest.approx(rb["freq_hz"], rel=1e-12)
        tol = _tol_db(ra["dbc"])
        for key in ("level_dbm", "level_in_rbw_dbm", "limit_dbm", "margin_db", "dbc"):
            assert (ra[key] is None) == (rb[key] is None), (key, ra, rb)
            if ra[key] is not None:
                assert ra[key] == pytest.approx(rb[key], abs=tol), (key, ra, rb)
        for key in ("pass", "rule", "band", "domain", "stage", "order", "rbw_hz"):
            assert ra[key] == rb[key], (key, ra, rb)
        assert list(ra["mix"]) == list(rb["mix"])[::-1]
    assert a.passed == b.passed
    assert a.worst == b.worst
    assert a.worst_margin_db == pytest.approx(b.worst_margin_db, abs=_tol_db(a.rows["dbc"][a.worst]))
    # The verdict names the worst product by its label, and labels name carriers by position.
    label_a, label_b = a.rows["label"][a.worst], b.rows["label"][b.worst]
    assert a.verdict.replace(label_a, "<worst>") == b.verdict.replace(label_b, "<worst>")
    assert a.notes == b.notes


def test_carrier_conditions_test_the_reference_carrier_ties_to_the_higher_frequency():
    # 47 CFR 97.307 (shipped set): below 30 MHz -43 dBc (97.307(d)), 30 - 225 MHz
    # -40 dBc at 25 W or less (97.307(e)).  Two equal carriers at 28 MHz and 50 MHz, +10 dBm
    # each at the output (the 25 W-or-less row).  The reference carrier, equal powers tied
    # to the higher frequency, is 50 MHz in either order: the 30 - 225 MHz rows apply,
    # never the below-30 MHz one.
    mask = {"use": ["us-fcc-97.307"]}
    for carriers in ([("28 MHz", "0 dBm"), ("50 MHz", "0 dBm")], [("50 MHz", "0 dBm"), ("28 MHz", "0 dBm")]):
        outcome = check(_lineup(carriers, mask=mask))
        rules = {r for r in outcome.rows["rule"] if r is not None}
        assert rules and all("30 - 225 MHz" in r for r in rules), rules


def test_reference_carrier_is_the_strongest_then_the_higher_frequency():
    # The definition (spurplan.model.lineup.reference_carrier_index), checked on every order of
    # three carriers by brute force over the permutations.
    import itertools

    carriers = [Carrier(100e6, -10.0), Carrier(130e6, -10.0), Carrier(160e6, -13.0)]
    for perm in itertools.permutations(carriers):
        assert perm[reference_carrier_index(perm)] == Carrier(130e6, -10.0)
    same = [Carrier(100e6, -10.0), Carrier(100e6, -10.0)]
    assert reference_carrier_index(same) == 0


_FREQS_MHZ = st.sampled_from([70.0, 100.0, 130.0, 151.0, 212.5])
_POWERS_DBM = st.sampled_from([-16.0, -13.0, -10.0])


@settings(max_examples=25, deadline=None)
@given(
    carriers=st.lists(st.tuples(_FREQS_MHZ, _POWERS_DBM), min_size=2, max_size=3, unique_by=lambda c: c[0]),
    data=st.data(),
)
@pytest.mark.slow
def test_worst_margin_and_products_do_not_depend_on_the_order(carriers, data):
    # Listing the same carriers in another order describes the same transmitter: the set
    # of product frequencies, each one's margin, and the worst margin must not change
    # (an invariant; examined range per 47 CFR 2.1057(a)(1), from memory).  The
    # reference is the listing as drawn; the other is a random permutation of it.
    shuffled = data.draw(st.permutations(carriers))

    def run(cs):
        # Two polynomial amplifiers (exact in the engine): products to order 9, kept to 7.
        stages = (AMP, {**AMP, "name": "pa2"}, LPF)
        return check(_lineup([(f"{f} MHz", f"{p} dBm") for f, p in cs], stages=stages, max_order=7))

    a, b = run(carriers), run(shuffled)

    def by_freq(outcome):
        rows = outcome.rows
        return {
            round(f): (m, d) for f, m, d in zip(rows["freq_hz"], rows["margin_db"], rows["dbc"], strict=True)
        }

    ma, mb = by_freq(a), by_freq(b)
    assert ma.keys() == mb.keys()
    for f, (m, dbc) in ma.items():
        assert (m is None) == (mb[f][0] is None), f
        if m is not None:
            assert m == pytest.approx(mb[f][0], abs=_tol_db(dbc)), f
    assert (a.worst is None) == (b.worst is None)
    if a.worst is not None:
        assert a.worst_margin_db == pytest.approx(b.worst_margin_db, abs=_tol_db(a.rows["dbc"][a.worst]))
