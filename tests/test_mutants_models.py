"""Stage models: checks added after mutation testing (MUTATION.md).

They hold the saturating model's even part, expansive cubic, saturated levels and
batched parameters, the polynomial's turning points and valid range, and the rail
level ``pi/4`` of Psat's peak voltage, in the check path and the Monte Carlo path.
Each names its reference: a Fourier integral evaluated with scipy (independent of the
torus engine), a calculus closed form, or a textbook intermodulation law."""

from __future__ import annotations

import math

import numpy as np
import pytest
from helpers import amp, levels_by_label, lineup, single_tone
from scipy.integrate import quad

from spurplan.analyses.check import check
from spurplan.analyses.montecarlo import run_yield
from spurplan.io.lineup_file import from_dict
from spurplan.model.nonlinear import Polynomial, Saturating

R_OHM = 50.0


def _vpeak(dbm: float) -> float:
    # P = V^2 / (2 R) for a sine of peak V (definition), dBm = 10 log10(P / 1 mW).
    return math.sqrt(2 * R_OHM * 10 ** (dbm / 10) / 1e3)


def _harmonic_v(transfer_of_x, amplitude_v: float, n: int) -> float:
    """n-th Fourier cosine coefficient of y(A cos theta) (V), by numerical quadrature
    (scipy.integrate.quad): c_n = (1/pi) int_0^{2 pi} y(A cos t) cos(n t) dt."""
    val = quad(
        lambda t: transfer_of_x(amplitude_v * math.cos(t)) * math.cos(n * t), 0, 2 * math.pi, limit=400
    )
    return val[0] / math.pi


# --- the rail level pi/4 of Psat (square-wave fundamental) -------------------------------------

GAIN_DB, PSAT_DBM, OHIP2_DBM, F_HZ = 20.0, 30.0, 50.0, 100e6


def _pa_h2_dbm(pin_dbm: float) -> float:
    """H2 (dBm) of the saturating amplifier with gain, psat and ohip2 only, from first
    principles:

    * a1 = 10^(G/20); a harmonic intercept OHIP2 means a2 A^2 / 2 = a1 A at the
      input A = V(OHIP2) / a1 (cos^2 = (1 + cos 2t)/2), so a2 = 2 a1^2 / V(OHIP2);
    * the odd part is odd, so the second harmonic is all from the even part
      e(x) = a2 x^2 / sqrt(1 + g x^2) (Saturating docstring), whose knee g = (a1 / V_r)^2
      sits at the rail V_r = (pi / 4) V(Psat): a square wave of peak V_r has the
      fundamental (4 / pi) V_r (Fourier series of a square wave, standard tables);
    * its cos 2t coefficient is integrated numerically (scipy.integrate.quad).
    """
    a1 = 10 ** (GAIN_DB / 20)
    a2 = 2 * a1**2 / _vpeak(OHIP2_DBM)
    g = (a1 / ((math.pi / 4) * _vpeak(PSAT_DBM))) ** 2
    c2 = _harmonic_v(lambda x: a2 * x * x / math.sqrt(1 + g * x * x), _vpeak(pin_dbm), 2)
    return 10 * math.log10(c2 * c2 / (2 * R_OHM) * 1e3)


def _pa_doc(pin_dbm: float, limit_dbm: float, tolerance=None) -> dict:
    stage = {"kind": "amplifier", "name": "pa", "gain": f"{GAIN_DB} dB", "psat": f"+{PSAT_DBM} dBm"}
    stage["ohip2"] = f"+{OHIP2_DBM} dBm"
    if tolerance:
        stage["tolerance"] = tolerance
    return {
        "carrier": [{"freq": "100 MHz", "power": f"{pin_dbm} dBm"}],
        "stage": [stage],
        # Only the second-harmonic zone is examined (150 to 250 MHz).
        "mask": {
            "rule": [{"start": "150 MHz", "stop": "250 MHz", "limit": f"{limit_dbm} dBm", "name": "h2"}]
        },
        "analysis": {"max_order": 5},
    }


@pytest.mark.parametrize("pin_dbm", [-30.0, 16.0, 20.0])
def test_check_path_h2_of_a_saturated_pa_follows_the_pi_over_4_rail(pin_dbm):
    # Small signal (-30 dBm in): H2 = 2 Pout - OHIP2 = -70 dBm (harmonic intercept,
    # common practice); hard drive (+16, +20 dBm in, 6 to 10 dB past Psat's input): the
    # Fourier integral above.  4/pi in place of pi/4 moves H2 at +16 dBm by 3.6 dB.
    outcome = check(from_dict(_pa_doc(pin_dbm, 0.0), name="pi4.toml"))
    i = outcome.rows["label"].index("2f1")
    want = _pa_h2_dbm(pin_dbm)
    assert outcome.rows["level_dbm"][i] == pytest.approx(want, abs=0.01)
    if pin_dbm == -30.0:
        assert want == pytest.approx(2 * (pin_dbm + GAIN_DB) - OHIP2_DBM, abs=0.01)


def _phi(z: float) -> float:
    # Standard normal CDF (Abramowitz and Stegun 26.2.29; from memory).
    return 0.5 * (1 + math.erf(z / math.sqrt(2)))


def test_yield_path_h2_of_a_saturated_pa_follows_the_pi_over_4_rail():
    # Monte Carlo (stages/amplifier.sampled_model): OHIP2 ~ N(50 dBm, 2 dB) moves a2, and
    # H2 with it, dB for dB (a2 = 2 a1^2 / V(OHIP2) above), while the rail stays at
    # (pi/4) V(Psat).  Against a limit 1 dB below the nominal H2 the sample passes when
    # the OHIP2 shift is at least +1 dB: yield = 1 - Phi(1 / 2) = 0.3085 (normal CDF).
    # With 4/pi the nominal H2 sits 3.6 dB higher and the yield falls to about 0.01.
    pin = 16.0
    limit = _pa_h2_dbm(pin) - 1.0
    samples = 4000
    res = run_yield(from_dict(_pa_doc(pin, limit, {"ohip2": "2 dB"}), name="pi4-yield.toml"), samples, seed=7)
    want = 1 - _phi(0.5)
    sigma = math.sqrt(want * (1 - want) / samples)  # binomial standard error (normal approximation)
    assert abs(res.yield_fraction - want) <= 4 * sigma, (res.yield_fraction, want)


# --- Saturating: even part, expansive cubic, saturated levels, batches -------------------------


@pytest.mark.parametrize(("n", "a_n", "g", "amplitude"), [(2, 0.05, 0.8, 3.0), (4, 0.002, 0.5, 4.0)])
def test_even_part_under_hard_drive_matches_its_fourier_integral(n, a_n, g, amplitude):
    # e(x) = a_n x^n / (1 + g x^2)^((n - p_n)/2), p_2 = 1, p_n = n - 1 above (Saturating
    # docstring): harmonics 2 and 4 of e(A cos t) by quadrature (scipy) against the engine.
    p = 1 if n == 2 else n - 1
    model = Saturating(a1=1.0, even=((n, a_n),), gamma_even=g)
    spectrum = single_tone(model, amplitude, max_order=8).spectrum[0]
    for k in (2, 4):
        want = _harmonic_v(lambda x: a_n * x**n / (1 + g * x * x) ** ((n - p) / 2), amplitude, k)
        got = spectrum[k - 1].real
        assert got == pytest.approx(want, rel=1e-6, abs=1e-12), k


def test_expansive_cubic_adds_a3_x_cubed():
    # Without inner saturation or rail, u(x) = a1 x + a3_exp x^3 (docstring) exactly;
    # driven by A cos t it gives a third harmonic a3 A^3 / 4 (cos^3 identity).
    model = Saturating(a1=2.0, a3_exp=0.1)
    x = np.linspace(-3, 3, 13)
    assert model(x) == pytest.approx(2.0 * x + 0.1 * x**3, abs=1e-12)
    assert single_tone(model, 2.0, max_order=5).spectrum[0, 2].real == pytest.approx(0.1 * 8 / 4, rel=1e-6)


def test_expansive_amplifier_keeps_its_two_tone_intercept():
    # IM3 = 3 Pout - 2 OIP3 at small signal (Razavi, RF Microelectronics 2e, sec. 2.2),
    # whatever the sign of the cubic: two tones of -20 dBm out against OIP3 +30 dBm give
    # 2f1-f2 at -120 dBm.  An expansive amplifier with psat carries the cubic in a3_exp.
    stage = amp("pa", gain="20 dB", oip3="+30 dBm", psat="+33 dBm", cubic="expansive")
    res = lineup([stage], carriers=(("100 MHz", "-40 dBm"), ("101 MHz", "-40 dBm")), max_order=5).run()
    levels = levels_by_label(res)
    assert levels["2f1-f2"] == pytest.approx(-120.0, abs=0.05)
    assert levels["2f2-f1"] == pytest.approx(-120.0, abs=0.05)


def test_saturated_levels_of_the_inner_function():
    # a1 x / sqrt(1 + g x^2) -> a1 / sqrt(g) as x -> inf (calculus): 10 / sqrt(4) = 5 V;
    # a smaller q (x (1 + g x^2 / 2q)^-q ~ x^(1 - 2q)) or an expansive cubic grow without
    # bound, so only a rail limits them.
    lo, hi = Saturating(a1=10.0, gamma=4.0).saturated_levels_v()
    assert (float(lo), float(hi)) == pytest.approx((-5.0, 5.0), rel=1e-12)
    lo, hi = Saturating(a1=10.0, gamma=4.0, inner_exponent=0.3).saturated_levels_v()
    assert math.isinf(hi) and math.isinf(lo)
    lo, hi = Saturating(a1=10.0, gamma=4.0, a3_exp=0.1).saturated_levels_v()
    assert math.isinf(hi)
    _, hi = Saturating(a1=10.0, gamma=4.0, rail_v=3.0, smoothness=2.0).saturated_levels_v()
    # The rail R(v) = v / (1 + (v/V_r)^4)^(1/4) of the inner level 5 V (docstring formula).
    assert float(hi) == pytest.approx(5.0 / (1 + (5.0 / 3.0) ** 4) ** 0.25, rel=1e-12)


def _batched_and_scalars():
    params = {
        "a1": np.array([1.0, 2.0, 3.0]),
        "gamma": np.array([0.5, 1.0, 0.0]),
        "a3_exp": np.array([0.0, 0.0, 0.01]),
        "gamma_even": np.array([1.0, 2.0, 0.5]),
        "rail_v": np.array([3.0, 4.0, 5.0]),
    }
    even_a = np.array([0.1, 0.2, 0.05])
    batched = Saturating(**params, even=((2, even_a),), smoothness=1.5, inner_exponent=0.3)
    scalars = [
        Saturating(
            **{k: float(v[b]) for k, v in params.items()},
            even=((2, float(even_a[b])),),
            smoothness=1.5,
            inner_exponent=0.3,
        )
        for b in range(3)
    ]
    return batched, scalars


def test_batched_saturating_rows_equal_the_scalar_models():
    # One model per batch element (Monte Carlo): row b of the batched model is the model
    # built from element b's parameters alone (independent construction), on samples
    # (B, N); take(rows) keeps exactly those rows.
    batched, scalars = _batched_and_scalars()
    x = np.linspace(-4, 4, 17)
    xb = np.broadcast_to(x, (3, x.size))
    got = batched(xb)
    for b in range(3):
        assert got[b] == pytest.approx(scalars[b](x), rel=1e-12, abs=1e-15)
    part = batched.take(np.array([2, 0]))
    got = part(np.broadcast_to(x, (2, x.size)))
    assert got[0] == pytest.approx(scalars[2](x), rel=1e-12, abs=1e-15)
    assert got[1] == pytest.approx(scalars[0](x), rel=1e-12, abs=1e-15)
    assert part.smoothness == 1.5 and part.inner_exponent == 0.3
    single = Saturating(a1=2.0)
    assert single.take(np.array([0])) is single


def test_batched_polynomial_take_keeps_the_rows():
    # Row b of y = sum a_n x^n with per-element coefficients (Horner, by hand).
    poly = Polynomial((np.array([1.0, 2.0]), np.array([0.1, -0.2]), 0.01))
    part = poly.take(np.array([1]))
    x = np.linspace(-2, 2, 9)
    assert part(x[None, :])[0] == pytest.approx(2.0 * x - 0.2 * x**2 + 0.01 * x**3, rel=1e-12)
    plain = Polynomial((1.0, 0.1))
    assert plain.take(np.array([0])) is plain


@pytest.mark.parametrize(
    ("coeffs", "want"),
    [
        # dy/dx = 1 - 4 x^2 = 0 at x = +-1/2 (calculus).
        ((1.0, 0.0, -4.0 / 3.0), (-0.5, 0.5)),
        # dy/dx = 1 - x = 0 at x = 1 only.
        ((1.0, -0.5), (-math.inf, 1.0)),
        # dy/dx = 1 + 0.2 x + 3 x^2: discriminant 0.04 - 12 < 0, no real turning point.
        ((1.0, 0.1, 1.0), (-math.inf, math.inf)),
        ((2.0,), (-math.inf, math.inf)),
        # dy/dx = 2 - 6 x^2 + ...: +-1/sqrt(3) for y = 2x - 2x^3.
        ((2.0, 0.0, -2.0), (-1 / math.sqrt(3), 1 / math.sqrt(3))),
    ],
)
def test_turning_points_are_the_real_roots_of_the_derivative(coeffs, want):
    assert Polynomial(coeffs).turning_points() == pytest.approx(want, rel=1e-9)


@pytest.mark.parametrize("a3", [1e-4, 1e8])
def test_valid_range_of_an_expansive_cubic(a3):
    # y / x = 1 + a3 x^2 leaves 1 by 1 dB at x = sqrt((10^(1/20) - 1) / a3) (algebra),
    # whatever the scale of a3; the search grid steps by 0.35 %.
    want = math.sqrt((10 ** (1 / 20) - 1) / a3)
    lo, hi = Polynomial((1.0, 0.0, a3)).valid_peak_v
    assert hi == pytest.approx(want, rel=5e-3)
    assert lo == pytest.approx(-want, rel=5e-3)


@pytest.mark.parametrize("order", [1, 2, 3, 4])
def test_pass_band_is_the_analog_butterworth_in_phase_too(order):
    # scipy.signal.butter(analog=True) designs the same low-pass and high-pass (s -> 1/s)
    # Butterworth prototypes; their complex product, phase included, is the reference.
    from scipy.signal import butter, freqs

    from spurplan.model.stages.amplifier import PassBand

    lo, hi = 10e6, 1e9
    f = np.array([1e5, 3e6, 10e6, 50e6, 300e6, 1e9, 4e9, 2e10])
    b_lp, a_lp = butter(order, 2 * np.pi * hi, btype="low", analog=True)
    b_hp, a_hp = butter(order, 2 * np.pi * lo, btype="high", analog=True)
    want = freqs(b_lp, a_lp, worN=2 * np.pi * f)[1] * freqs(b_hp, a_hp, worN=2 * np.pi * f)[1]
    got = PassBand(lo, hi, order).response(f)
    assert got == pytest.approx(want, rel=1e-9, abs=1e-15)
    assert PassBand(lo, None, order).response(np.array([0.0]))[0] == 0  # a high-pass blocks DC
