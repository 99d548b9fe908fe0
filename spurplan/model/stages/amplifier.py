"""Amplifier stage: datasheet figures -> a model that honours each of them.

Small-signal terms (Razavi, RF Microelectronics 2e, ch. 2, from memory), in peak
volts across the system impedance R:

* ``a1 = 10^(G/20)``;
* two-tone IP3: ``A_IIP3^2 = (4/3) |a1/a3|``; IP2: ``A_IIP2 = |a1/a2|``;
* harmonic intercept of order n (input amplitude): ``A^(n-1) = 2^(n-1) |a1/a_n|``,
  output-referred ``OHIPn = IHIPn + G``; the small-signal reading of a datasheet
  "Hn = X dBc @ Pout" is ``OHIPn = Pout + |X|/(n-1)``.

The coefficient of order n comes from the two-tone figure when there is one, else
from the harmonic figure (the memoryless relations HIP3 = IP3 + 4.77 dB and HIP2 =
IP2 + 6.02 dB then tie them).  Odd coefficients are negative (compressive) unless
``cubic = "expansive"``; even ones positive.

The model (:mod:`spurplan.model.stages.amplifier_fit` fits it):

* with ``p1db`` or ``psat``, a :class:`~spurplan.model.nonlinear.Saturating` transfer whose
  rail and knee honour both figures; without, the bare polynomial (flagged where it
  is driven past where it holds);
* a weight per harmonic zone on what the stage generates there, fitted so that
  every ``hN`` (or ``ohipN``) holds at its stated point: the output network of a
  tuned amplifier sets its harmonics independently of its in-band intermodulation;
* an optional pass band (``band``) that shapes what passes through the stage and
  what it generates outside its zones with stated figures (difference products near
  DC, harmonics without a figure);
* an optional Touchstone gain shape, applied to what passes through the stage only:
  the datasheet figures are measured at the output connector.

Monte Carlo (:func:`sampled_model`, behind :meth:`Amplifier.sampled`).  A sample's model
is built from the sample's figures by the functions that build the nominal
(:func:`polynomial_from_figures`, :func:`saturating_base`), with the knee the nominal
fit chose; a full refit per sample is not affordable (the nominal fit takes 15 to 300 ms
per amplifier, measured on the bundled examples, against about 40 us per sample for
the whole engine pass of a yield batch).  What the fit solves for is solved per sample
where that is exact and cheap:

* gain, OIP3, OIP2 and every ``ohipN`` set the small-signal terms exactly (closed form);
* Psat sets the rail in closed form (:func:`~.amplifier_fit.rail_for_psat_v`, the
  function the nominal fit sets its rail with): exact;
* every ``hN`` holds at its stated output power: each zone weight moves by the change
  of the stated level less the change of the model's own harmonic there, read for the
  nominal and every sample alike by a vectorised one-tone DFT on
  ``SAMPLED_ONE_TONE_POINTS`` points after secant steps to the stated power
  (``_harmonic_change_db``); measured within 0.02 dB of the sample's stated figure
  (0.2 dB for an ``h5`` of a sharp-kneed PA, whose high harmonics the shorter DFT
  aliases a little), inside the fit's own 0.3 dB;
* not solved per sample: P1dB.  Without Psat the rail moves by the sample's P1dB
  shift, and the knee (sharpness, inner exponent, inner saturation without a cubic
  figure) is the nominal's, so a sample whose intercept moves against its P1dB misses
  its P1dB (measured: up to 1.8 dB for OIP3 spread by 1.5 dB, sigma).

Cost: the harmonic readings are about eleven evaluations of the model on (batch x 32
or 64) points per stated harmonic; ``tests/benchmarks/yield.py`` (two amplifiers with
one ``h2`` each) ran at 8,000 to 10,000 samples/s in process where scaling the nominal
ran at about 25,000 (2.5 to 3 times slower; measured on a shared two-core machine).
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass, field, replace

import numpy as np

from spurplan.fields import NOISE_FIGURE, Fields, Within
from spurplan.model.figure_tables import SAME_FREQ_RTOL, FigureReader, StageTables
from spurplan.model.ladders import SParameterTable
from spurplan.model.nonlinear import Polynomial, Saturating
from spurplan.model.stages import amplifier_fit
from spurplan.model.stages.amplifier_fit import FigureCheck, rail_for_psat_v
from spurplan.model.stages.base import (
    DB,
    CascadeFigures,
    LoadContext,
    SampledStage,
    StageDefaults,
    flat_response,
)
from spurplan.units import (
    dbm_to_vpeak,
    format_freq,
    parse_dbc_at,
    parse_freq_hz,
    parse_gain_db,
    parse_power_dbm,
    vpeak_to_dbm,
)

MAX_HARMONIC = 9
# Two forms of one figure (ohipN and hN, oip3 and iip3) may differ this much
# (datasheet rounding).
CONSISTENCY_DB = 0.5
MAX_BAND_ORDER = 8
# Physical-sense ranges of the keys (README, "Plausible values"; common practice, no
# source).  Gain: a pad-like stage of -20 dB to a high-gain module of +60 dB.  Output
# powers: -50 dBm (a small-signal buffer) to +90 dBm (1 MW).  Intercepts reach higher,
# a second-order intercept tens of dB above Psat, up to what the unit parser takes.
GAIN = Within("an amplifier gain", -20.0, 60.0, "dB")
PSAT = Within("a saturated output power", -50.0, 90.0, "dBm")
P1DB = Within("an output 1 dB compression point", -50.0, 90.0, "dBm")
OUTPUT_INTERCEPT = Within("an output intercept point", -50.0, 100.0, "dBm")
# Input-referred: the output range less the highest gain.
INPUT_INTERCEPT = Within("an input intercept point", -110.0, 100.0, "dBm")
HARMONIC_DBC = Within("a harmonic level", -200.0, 0.0, "dBc", "below the carrier")
HARMONIC_AT = Within("the output power of a harmonic figure", -50.0, 90.0, "dBm")
# Figures a tolerance or corner may move (dB; ohipN output-referred; hN in dBc at its
# stated output power), each only where the stage states it (Amplifier.spread_refusal).
HARMONIC_ORDERS = tuple(range(2, MAX_HARMONIC + 1))
SPREAD_FIGURES = (
    "gain",
    "oip3",
    "oip2",
    "psat",
    "p1db",
    *(f"ohip{n}" for n in HARMONIC_ORDERS),
    *(f"h{n}" for n in HARMONIC_ORDERS),
)
# Keys that may be tables against frequency (spurplan.model.figure_tables).
TABLE_KEYS = (
    "gain",
    "oip3",
    "iip3",
    "oip2",
    "iip2",
    "p1db",
    "psat",
    "noise_figure",
    *(f"ohip{n}" for n in range(2, MAX_HARMONIC + 1)),
    *(f"h{n}" for n in range(2, MAX_HARMONIC + 1)),
)
# Knots of the zone weights run to this zone; beyond, what the stage generates keeps
# the memoryless level (0 dB), shaped by the pass band.
_WEIGHT_ZONES = MAX_HARMONIC + 1


@dataclass(frozen=True)
class AmplifierFigures:
    """Datasheet figures of one amplifier, all output-referred, in dB / dBm.

    Attributes
    ----------
    gain_db : float
    oip3_dbm, oip2_dbm : float or None
    ohip_dbm : dict of int -> float
        Small-signal output harmonic intercepts given as ``ohipN`` (2 .. 9).
    harmonics : dict of int -> (level_dbc, at_output_dbm)
        Harmonic levels given as ``hN = "X dBc @ P"``: a point to honour.
    p1db_dbm, psat_dbm : float or None
        Output 1 dB compression point and saturated output power.
    expansive : bool
        Odd-order coefficients positive (gain expansion) instead of negative.
    """

    gain_db: float
    oip3_dbm: float | None = None
    oip2_dbm: float | None = None
    ohip_dbm: dict[int, float] = field(default_factory=dict)
    harmonics: dict[int, tuple[float, float]] = field(default_factory=dict)
    p1db_dbm: float | None = None
    psat_dbm: float | None = None
    expansive: bool = False

    @property
    def iip3_dbm(self) -> float | None:
        return None if self.oip3_dbm is None else self.oip3_dbm - self.gain_db

    def small_signal_ohip_dbm(self) -> dict[int, float]:
        """OHIPn (dBm) by order: ``ohipN``, else the small-signal reading of ``hN``."""
        out = {n: at + abs(dbc) / (n - 1) for n, (dbc, at) in self.harmonics.items()}
        out.update(self.ohip_dbm)
        return out

    def states_order(self, n: int) -> bool:
        """Whether any figure gives the order-n behaviour."""
        ip = {2: self.oip2_dbm, 3: self.oip3_dbm}.get(n)
        return ip is not None or n in self.ohip_dbm or n in self.harmonics


def polynomial_from_figures(fig: AmplifierFigures, r_ohm: float) -> Polynomial:
    """Polynomial coefficients (V^(1-n)) from datasheet figures (module docstring).

    The figures may be arrays (one value per Monte Carlo sample); the coefficients
    are then arrays too.

    Parameters
    ----------
    fig : AmplifierFigures
        Datasheet figures: gain (dB), output intercepts and harmonic levels (dBm, dBc).
    r_ohm : float
        System impedance (ohm), for dBm <-> V peak.

    Returns
    -------
    Polynomial
        Coefficients ``a_n`` in V^(1-n).
    """
    a1 = 10.0 ** (np.asarray(fig.gain_db, dtype=float) / 20.0)
    coeffs = {1: a1}
    odd_sign = 1.0 if fig.expansive else -1.0
    for n, ohip in fig.small_signal_ohip_dbm().items():
        a_ihip = dbm_to_vpeak(ohip - fig.gain_db, r_ohm)
        sign = odd_sign if n % 2 else 1.0
        coeffs[n] = sign * 2.0 ** (n - 1) * a1 / a_ihip ** (n - 1)
    # Two-tone intercepts set the coefficient; a harmonic figure of the same order is
    # then honoured by its zone weight.
    if fig.oip2_dbm is not None:
        coeffs[2] = a1 / dbm_to_vpeak(fig.oip2_dbm - fig.gain_db, r_ohm)
    if fig.oip3_dbm is not None:
        a_iip3 = dbm_to_vpeak(fig.oip3_dbm - fig.gain_db, r_ohm)
        coeffs[3] = odd_sign * (4.0 / 3.0) * a1 / a_iip3**2
    degree = max(coeffs)
    return Polynomial(tuple(coeffs.get(n, 0.0) for n in range(1, degree + 1)))


def saturating_base(poly: Polynomial, fig: AmplifierFigures, r_ohm: float) -> Saturating:
    """The :class:`~spurplan.model.nonlinear.Saturating` inner function for ``poly``'s terms.

    Its gain, second- and third-order terms (and even terms above) are the
    polynomial's; rail and knee are left to :func:`amplifier_fit.fit_compression`.
    Odd terms above the cubic are not carried: their harmonics are set by the zone
    weights, their in-band products by the saturation.

    Parameters
    ----------
    poly : Polynomial
        The small-signal polynomial (:func:`polynomial_from_figures`).
    fig : AmplifierFigures
        The same figures, for which orders are stated.
    r_ohm : float
        System impedance (ohm).

    Returns
    -------
    Saturating
    """
    c = [np.asarray(a, dtype=float) for a in poly.coeffs] + [np.zeros(())] * 3
    a1, a3 = c[0], c[2]
    gamma = np.where(a3 < 0, -2.0 * a3 / a1, 0.0)
    a3_exp = np.where(a3 > 0, a3, 0.0)
    even = tuple((n, c[n - 1]) for n in range(2, len(poly.coeffs) + 1, 2) if np.any(c[n - 1] != 0))
    v_ref = (
        (math.pi / 4.0) * dbm_to_vpeak(fig.psat_dbm, r_ohm)
        if fig.psat_dbm is not None
        else dbm_to_vpeak(fig.p1db_dbm, r_ohm)
    )
    gamma_even = np.where(gamma > 0, gamma, (a1 / v_ref) ** 2)
    return Saturating(
        a1=_scalar(a1),
        gamma=_scalar(gamma),
        a3_exp=_scalar(a3_exp),
        even=tuple((n, _scalar(a)) for n, a in even),
        gamma_even=_scalar(gamma_even),
    )


def _scalar(value):
    return float(value) if np.ndim(value) == 0 else np.asarray(value)


@dataclass(frozen=True)
class AmplifierModel:
    """What :func:`build_model` fitted.

    Attributes
    ----------
    transfer : Polynomial or Saturating
    zone_weights_db : dict of int -> float
        Added (dB) to what the stage generates in harmonic zone n.
    checks : tuple of FigureCheck
        Every large-signal figure beside what the model gives at its point.
    """

    transfer: Polynomial | Saturating
    zone_weights_db: dict[int, float]
    checks: tuple[FigureCheck, ...]

    @property
    def notes(self) -> tuple[str, ...]:
        return tuple(c.describe() for c in self.checks if not c.met)


def build_model(fig: AmplifierFigures, r_ohm: float) -> AmplifierModel:
    """Fit the whole model to every figure (module docstring).

    Parameters
    ----------
    fig : AmplifierFigures
        Datasheet figures, checked at the boundary.
    r_ohm : float
        System impedance (ohm).

    Returns
    -------
    AmplifierModel
        Transfer, harmonic-zone weights (dB) and the check of each large-signal figure.
    """
    poly = polynomial_from_figures(fig, r_ohm)
    checks: list[FigureCheck] = []
    transfer: Polynomial | Saturating = poly
    if fig.psat_dbm is not None or fig.p1db_dbm is not None:
        base = saturating_base(poly, fig, r_ohm)
        has_cubic = fig.states_order(3)
        fitted = amplifier_fit.fit_compression(
            base, fig.p1db_dbm, fig.psat_dbm, has_cubic, r_ohm, oip3_dbm=fig.oip3_dbm
        )
        transfer = fitted.transfer
        checks.extend(fitted.checks)
        if fig.oip3_dbm is not None:
            checks.append(amplifier_fit.oip3_check(transfer, fig.oip3_dbm, r_ohm))
    weights, harmonic_checks = amplifier_fit.fit_zone_weights(
        transfer, _harmonic_points(fig, transfer, r_ohm), r_ohm
    )
    # ohipN figures are read at small signal, where the weight meets them exactly.
    checks.extend(c for c in harmonic_checks if int(c.figure[1:]) in fig.harmonics)
    return AmplifierModel(transfer=transfer, zone_weights_db=weights, checks=tuple(checks))


def _harmonic_points(fig: AmplifierFigures, transfer, r_ohm: float) -> dict[int, tuple[float, float]]:
    """The point each harmonic figure must pass through: (dBc, output dBm).

    ``hN`` is its own point; ``ohipN`` (without ``hN``) is read at small signal,
    :data:`amplifier_fit.SMALL_SIGNAL_BACKOFF_DB` below the knee, where the
    harmonic is ``(n - 1) (P - OHIPn)`` dBc (module docstring).
    """
    points = dict(fig.harmonics)
    # An ohipN that sets its own coefficient is met exactly at small signal without a
    # weight: every order of a polynomial, orders 2 and 3 of the saturating model
    # (module docstring), unless a two-tone figure set that coefficient.
    own = set(range(2, MAX_HARMONIC + 1)) if isinstance(transfer, Polynomial) else {2, 3}
    own -= {n for n, ip in ((2, fig.oip2_dbm), (3, fig.oip3_dbm)) if ip is not None}
    weighted = set(fig.ohip_dbm) - set(points) - own
    if weighted:
        knee = float(amplifier_fit.knee_scale_v(transfer))
        out_dbm = float(vpeak_to_dbm(abs(float(transfer.gain)) * knee, r_ohm))
        at = out_dbm - amplifier_fit.SMALL_SIGNAL_BACKOFF_DB
        for n in weighted:
            points[n] = ((n - 1) * (at - fig.ohip_dbm[n]), at)
    return points


def output_p1db_dbm(transfer, r_ohm: float) -> float | None:
    """Output 1 dB compression point (dBm) of a model (``None`` if it never compresses 1 dB).

    Parameters
    ----------
    transfer : Polynomial or Saturating
        The model (V in, V out).
    r_ohm : float
        System impedance (ohm).

    Returns
    -------
    float or None
        Output P1dB (dBm).
    """
    return amplifier_fit.model_p1db_dbm(transfer, r_ohm)


@dataclass(frozen=True)
class PassBand:
    """An amplifier's small-signal pass band: Butterworth roll-offs below and above.

    ``H(f) = H_hp(f) H_lp(f)`` with the analog Butterworth responses of ``order``
    (poles ``exp(j pi (2k + N - 1) / (2N))``, k = 1..N; high-pass by ``s -> 1/s``;
    any filter-design text, e.g. Pozar, Microwave Engineering, from memory): -3.01 dB
    at each corner whatever the order, and ``20 N`` dB per decade beyond.

    Attributes
    ----------
    low_hz, high_hz : float or None
        Corners (Hz); ``None`` for no roll-off on that side.
    order : int
    """

    low_hz: float | None
    high_hz: float | None
    order: int = 1

    def response(self, freq_hz) -> np.ndarray:
        """Complex response at ``freq_hz`` (>= 0)."""
        f = np.asarray(freq_hz, dtype=float)
        k = np.arange(1, self.order + 1)
        poles = np.exp(1j * np.pi * (2 * k + self.order - 1) / (2 * self.order))
        h = np.ones(f.shape, dtype=complex)
        if self.high_hz is not None:
            s = 1j * f / self.high_hz
            h = h / np.prod(s[..., None] - poles, axis=-1) * np.prod(-poles).real
        if self.low_hz is not None:
            with np.errstate(divide="ignore", invalid="ignore"):
                s = np.where(f > 0, self.low_hz / (1j * np.where(f > 0, f, 1.0)), np.inf)
                hp = np.prod(-poles).real / np.prod(s[..., None] - poles, axis=-1)
            h = h * np.where(f > 0, hp, 0.0)
        return h


@dataclass(frozen=True)
class Amplifier(StageDefaults):
    """An amplifier stage: gain, a memoryless nonlinearity and harmonic-zone weights.

    Attributes
    ----------
    name : str
    figures : AmplifierFigures
    transfer : Polynomial or Saturating
    zone_weights_db : dict of int -> float
        Weight (dB) on what the stage generates in harmonic zone n (fitted; a zone
        without an entry keeps 0 dB).
    checks : tuple of FigureCheck
        Stated large-signal figures beside the model's own values.
    notes : tuple of str
        Figures the model misses, and how it was built, for the terminal and reports.
    shape : SParameterTable or None
        Touchstone gain shape, for what passes through the stage.
    band : PassBand or None
    ref_freq_hz : float
        Carrier frequency at the stage input where the figures hold (Hz).
    noise_figure_db : float or None
        Stated noise figure (dB).
    figure_tables : StageTables or None
        Figures stated against frequency (:mod:`spurplan.model.figure_tables`): the
        loaded model holds them at ``ref_freq_hz``; sweeps move them per channel
        (:meth:`channel_deltas`).
    """

    name: str
    figures: AmplifierFigures
    transfer: Polynomial | Saturating
    zone_weights_db: dict = field(default_factory=dict)
    checks: tuple[FigureCheck, ...] = ()
    notes: tuple[str, ...] = ()
    shape: SParameterTable | None = None
    band: PassBand | None = None
    ref_freq_hz: float = 0.0
    noise_figure_db: float | None = None
    figure_tables: StageTables | None = None
    # cascade_figures() per impedance: the model's P1dB and Psat are fitted by bisection,
    # and a check asks for them many times (not an init field: replace() starts afresh).
    _figures: dict = field(default_factory=dict, init=False, compare=False, repr=False)

    kind = "amplifier"

    @property
    def gain_db(self) -> float:
        return self.figures.gain_db

    def describe_figures(self) -> str:
        """Gain, intercepts, harmonics, compression and pass band as stated, in one line."""
        f = self.figures
        parts = [f"gain {f.gain_db:g} dB"]
        parts += [f"OIP3 {f.oip3_dbm:+g} dBm"] if f.oip3_dbm is not None else []
        parts += [f"OIP2 {f.oip2_dbm:+g} dBm"] if f.oip2_dbm is not None else []
        parts += [f"OHIP{n} {v:+.2f} dBm" for n, v in sorted(f.ohip_dbm.items())]
        parts += [f"H{n} {dbc:+g} dBc @ {at:+g} dBm" for n, (dbc, at) in sorted(f.harmonics.items())]
        parts += [f"P1dB {f.p1db_dbm:+g} dBm"] if f.p1db_dbm is not None else []
        parts += [f"Psat {f.psat_dbm:+g} dBm"] if f.psat_dbm is not None else []
        parts += [f"NF {self.noise_figure_db:g} dB"] if self.noise_figure_db is not None else []
        if self.band is not None:
            b = self.band
            edges = [
                f"{b.low_hz / 1e6:g} MHz" if b.low_hz else "DC",
                f"{b.high_hz / 1e6:g} MHz" if b.high_hz else "-",
            ]
            parts.append(f"pass band {edges[0]} to {edges[1]} (order {b.order})")
        if self.figure_tables:
            keys = ", ".join(t.key for t in self.figure_tables.tables)
            parts.append(
                f"at {format_freq(self.figure_tables.ref_freq_hz)} from tables against frequency ({keys})"
            )
        return ", ".join(parts)

    def cascade_figures(self, r_ohm: float) -> CascadeFigures:
        """Stated OIP3 and P1dB, and the model's own P1dB and Psat (dBm).

        Parameters
        ----------
        r_ohm : float
            System impedance (ohm).

        Returns
        -------
        CascadeFigures
        """
        hit = self._figures.get(r_ohm)
        if hit is None:
            hit = CascadeFigures(
                oip3_dbm=self.figures.oip3_dbm,
                p1db_stated_dbm=self.figures.p1db_dbm,
                p1db_model_dbm=output_p1db_dbm(self.transfer, r_ohm),
                psat_model_dbm=amplifier_fit.model_psat_dbm(self.transfer, r_ohm),
                noise_figure_db=self.noise_figure_db,
            )
            self._figures[r_ohm] = hit
        return hit

    def spread_figures(self) -> dict[str, str]:
        """Gain, intercepts, compression points and harmonic levels, each in dB; only those
        the stage states may be given a spread (:meth:`spread_refusal`)."""
        return dict.fromkeys(SPREAD_FIGURES, DB)

    def spread_refusal(self, figure: str) -> str | None:
        """Why ``figure`` (e.g. ``"h2"``, ``"psat"``) cannot spread on this stage: the stage
        does not state it, so a spread would move nothing (the model's own product of that
        order comes from the other figures) and be silently ignored; ``None`` when it can
        (or when the name is not in :meth:`spread_figures`, which the loader says itself)."""
        fig = self.figures
        n = _harmonic_key(figure)
        if n is not None and figure in SPREAD_FIGURES:
            if n not in fig.harmonics and n not in fig.ohip_dbm:
                return f"the stage states no h{n} or ohip{n} (expected a tolerance on a figure it states)"
            return None
        stated = {
            "oip3": (fig.oip3_dbm, "oip3 or iip3"),
            "oip2": (fig.oip2_dbm, "oip2 or iip2"),
            "psat": (fig.psat_dbm, "psat"),
            "p1db": (fig.p1db_dbm, "p1db"),
        }
        if figure in stated and stated[figure][0] is None:
            return f"the stage states no {stated[figure][1]} (expected a tolerance on a figure it states)"
        return None

    def sampled(
        self, deltas: dict[str, np.ndarray], n: int, r_ohm: float, ref_hz: np.ndarray | None = None
    ) -> SampledStage:
        """The amplifier with every sample's figures (:func:`sampled_model`).

        Parameters
        ----------
        deltas : dict of str -> ndarray (n,)
            Shifts (dB) of figures of :data:`SPREAD_FIGURES`; an ``hN`` shift (dBc) moves
            OHIPn (:func:`harmonic_spread_as_ohip`).
        n : int
            Samples in the batch.
        r_ohm : float
            System impedance (ohm).
        ref_hz : ndarray (n,), optional
            Each element's reference carrier at the stage input (Hz), for figures at
            each channel (:mod:`spurplan.model.figure_tables`).  With a gain table, the
            carrier of each element then gets the gain the table states there, and the
            pass band and Touchstone shape act relative to it (without, they shape the
            gain across channels as well).

        Returns
        -------
        SampledStage
            Per-sample transfer, gain and harmonic-zone weights.
        """
        transfer, weights = sampled_model(self, harmonic_spread_as_ohip(deltas), r_ohm)
        gain = 10 ** (deltas.get("gain", 0.0) / 20)
        tables = self.figure_tables
        if ref_hz is not None and tables and "gain" in tables and (self.band or self.shape):
            ref = np.asarray(ref_hz, dtype=float)
            shape_at_ref = np.abs(self.response(ref)) / 10.0 ** (self.figures.gain_db / 20.0)
            gain = gain / shape_at_ref

        def amp_response(f):
            return self.response(f) * np.reshape(gain, (-1, 1))

        weight = functools.partial(self.generated_weight, weights_db=weights)
        return SampledStage(self.name, transfer, amp_response, self.data_range_hz, weight)

    def channel_deltas(self, ref_hz: np.ndarray) -> dict[str, np.ndarray]:
        """The change of every tabled figure from the loaded one, per channel (dB).

        Keys are :data:`SPREAD_FIGURES` (what :meth:`sampled` moves): ``gain``; ``oip3``
        and ``oip2`` (an input-referred table, or a fixed input-referred figure with a
        gain table, moves with the gain as well); ``psat``, ``p1db``; ``ohipN`` for
        ``ohipN`` tables and for ``hN`` tables, whose dBc change is ``-(n - 1)`` times
        the OHIPn change (module docstring).

        Parameters
        ----------
        ref_hz : ndarray (B,)
            The reference carrier at the stage input per channel (Hz).

        Returns
        -------
        dict of str -> ndarray (B,)
            Only the figures that a table moves.
        """
        tables = self.figure_tables
        if not tables:
            return {}
        ref = np.asarray(ref_hz, dtype=float)
        out: dict[str, np.ndarray] = {}
        if "gain" in tables:
            out["gain"] = tables.change("gain", ref)
        gain = out.get("gain", np.zeros(ref.shape))
        for key in ("oip3", "oip2"):
            if key in tables.input_referred:
                out[key] = tables.change("i" + key[1:], ref) + gain
            elif key in tables:
                out[key] = tables.change(key, ref)
        for key in ("psat", "p1db"):
            if key in tables:
                out[key] = tables.change(key, ref)
        for n in range(2, MAX_HARMONIC + 1):
            if f"ohip{n}" in tables:
                out[f"ohip{n}"] = tables.change(f"ohip{n}", ref)
            elif f"h{n}" in tables:
                out[f"ohip{n}"] = -tables.change(f"h{n}", ref) / (n - 1)
        return {k: v for k, v in out.items() if k in SPREAD_FIGURES}

    @property
    def data_range_hz(self) -> tuple[float, float] | None:
        return None if self.shape is None else self.shape.data_range_hz

    def _band_ratio(self, freq_hz) -> np.ndarray:
        if self.band is None:
            return np.ones(np.shape(freq_hz), dtype=complex)
        return self.band.response(freq_hz) / self.band.response(np.array(self.ref_freq_hz))

    def response(self, freq_hz: np.ndarray) -> np.ndarray:
        """Small-signal gain for what passes through: the ``gain`` figure at the carrier,
        shaped by the pass band and by S21(f) / S21(f_ref) of a Touchstone file."""
        h = flat_response(self.figures.gain_db)(freq_hz) * self._band_ratio(freq_hz)
        if self.shape is None:
            return h
        return h * self.shape(freq_hz) / self.shape(np.array(self.ref_freq_hz))

    def generated_weight(self, freq_hz: np.ndarray, ref_hz=None, weights_db=None) -> np.ndarray:
        """Weight on what the stage generates at ``freq_hz`` (>= 0), shape of ``freq_hz``.

        In harmonic zone n (around ``n f_ref``) a fitted weight holds exactly at
        ``n f_ref``; between zone centres it is interpolated linearly in dB against
        frequency (a smooth output network), and zones without a fitted weight keep
        the pass band's shape alone.  The Touchstone shape is not applied: the stage's
        figures are measured at its output connector.

        Parameters
        ----------
        freq_hz : ndarray (B, P)
            Product frequencies (Hz), >= 0.
        ref_hz : ndarray (B,) or None
            Carrier frequency (Hz) at the stage input per batch element (default
            ``ref_freq_hz``).
        weights_db : dict of int -> float or ndarray (B,), optional
            Per-sample weights (Monte Carlo); default the fitted ones.

        Returns
        -------
        ndarray, complex
            Dimensionless weight, the shape of ``freq_hz``.
        """
        weights_db = self.zone_weights_db if weights_db is None else weights_db
        band = self._band_ratio(freq_hz)
        if not weights_db:
            return band
        f = np.asarray(freq_hz, dtype=float)
        f2 = np.atleast_2d(f)
        rows = f2.shape[0]
        ref = np.full(rows, self.ref_freq_hz) if ref_hz is None else np.asarray(ref_hz, dtype=float)
        ref = np.broadcast_to(ref, (rows,))[:, None]
        # Knots at n f_ref, n = 0 .. _WEIGHT_ZONES, (B, K): the fitted weight over the
        # band's own value there, so that band x correction is the fitted weight.
        knot_f = ref * np.arange(_WEIGHT_ZONES + 1)
        band_knots_db = 20.0 * np.log10(np.maximum(np.abs(self._band_ratio(knot_f)), 1e-300))
        corr = np.zeros(knot_f.shape)
        for n, w in weights_db.items():
            corr[:, n] = np.broadcast_to(np.asarray(w, dtype=float), (rows,)) - band_knots_db[:, n]
        t = np.clip(f2 / ref, 0.0, float(_WEIGHT_ZONES))
        i = np.minimum(np.floor(t).astype(int), _WEIGHT_ZONES - 1)
        lo = np.take_along_axis(corr, i, axis=1)
        hi = np.take_along_axis(corr, i + 1, axis=1)
        corr_db = (lo + (t - i) * (hi - lo)).reshape(f.shape)
        return band * 10.0 ** (corr_db / 20.0)

    def missing_figures(self) -> tuple[str, ...]:
        """Figure classes that this amplifier will produce but that no figure states."""
        fig = self.figures
        out = []
        if not fig.states_order(2):
            out.append("2nd-order figure (oip2, iip2, h2 or ohip2)")
        if not fig.states_order(3):
            out.append("3rd-order figure (oip3, iip3, h3 or ohip3)")
        if fig.p1db_dbm is None and fig.psat_dbm is None:
            out.append("compression (p1db or psat)")
        if self.noise_figure_db is None:
            out.append("noise figure (noise_figure)")
        return tuple(out)

    @classmethod
    def from_figures(
        cls,
        name: str,
        figures: AmplifierFigures,
        r_ohm: float = 50.0,
        band: PassBand | None = None,
        ref_freq_hz: float = 0.0,
    ) -> Amplifier:
        """Build and fit the model from figures already checked at the boundary.

        Parameters
        ----------
        name : str
            The stage's name.
        figures : AmplifierFigures
            Datasheet figures (dB, dBm, dBc).
        r_ohm : float
            System impedance (ohm).
        band : PassBand, optional
            Small-signal pass band (corners in Hz); ``None`` for a flat response.
        ref_freq_hz : float
            Reference carrier's frequency (Hz), where the figures are referred and harmonic
            zones are centred.

        Returns
        -------
        Amplifier
        """
        model = build_model(figures, r_ohm)
        return cls(
            name=name,
            figures=figures,
            transfer=model.transfer,
            zone_weights_db=model.zone_weights_db,
            checks=model.checks,
            notes=model.notes,
            band=band,
            ref_freq_hz=ref_freq_hz,
        )

    @classmethod
    def from_fields(cls, fields: Fields, context: LoadContext) -> Amplifier:
        """The amplifier read from its lineup table (figures, pass band, optional Touchstone shape).

        Parameters
        ----------
        fields : Fields
            Reader of the stage's lineup table, which locates its errors.
        context : LoadContext
            Lineup-wide settings: system impedance (ohm), the lineup file's folder, the policy
            beyond data ranges, the reference carrier's frequency (Hz).

        Returns
        -------
        Amplifier

        Raises
        ------
        LineupError
            Naming the file, stage and field of a missing or unacceptable value, or of a
            Touchstone file that does not cover the carrier.
        """
        reader = FigureReader(fields, context.ref_freq_hz, context.beyond_data, TABLE_KEYS)
        figures = read_figures(reader)
        band = read_band(fields, context)
        amp = cls.from_figures(fields.raw("name"), figures, context.r_ohm, band, context.ref_freq_hz)
        nf = reader.quantity("noise_figure", parse_gain_db, within=NOISE_FIGURE)
        if nf is not None:
            amp = replace(amp, noise_figure_db=nf)
        referred = tuple(
            out
            for out, inp in (("oip3", "iip3"), ("oip2", "iip2"))
            if fields.has(inp) and not fields.has(out)
        )
        tables = reader.stage_tables(referred)
        if tables is not None:
            _check_tables(reader, figures)
            amp = replace(amp, figure_tables=tables)
            channel = channel_checks(amp, context.r_ohm)
            amp = replace(
                amp,
                checks=amp.checks + channel,
                notes=amp.notes + reader.notes() + tuple(c.describe() for c in channel if not c.met),
            )
        fields.raw("input_port")
        fields.raw("touchstone")
        if not fields.has("touchstone"):
            return amp
        table, _, notes = context.read_touchstone(fields)
        lo, hi = table.data_range_hz
        if not lo <= context.ref_freq_hz <= hi:
            raise fields.error(
                "touchstone",
                f"{fields.raw('touchstone')!r} covers {lo:.6g} to {hi:.6g} Hz: expected it to include "
                f"the carrier at {context.ref_freq_hz:.6g} Hz, where the figures are referred",
            )
        return replace(amp, shape=table, notes=amp.notes + tuple(notes))


def _harmonic_key(figure: str) -> int | None:
    """The order n of ``"hN"`` or ``"ohipN"`` (2 .. 9); ``None`` for any other name."""
    for prefix in ("ohip", "h"):
        digits = figure[len(prefix) :]
        if figure.startswith(prefix) and digits.isdigit() and int(digits) in HARMONIC_ORDERS:
            return int(digits)
    return None


def harmonic_spread_as_ohip(deltas: dict) -> dict:
    """``deltas`` with every ``hN`` shift (dBc) turned into the OHIPn shift that gives it.

    A datasheet harmonic stated at a fixed output power P reads, at small signal,
    ``hN_dBc = (n - 1) (P - OHIPn)`` (module docstring; common practice, no source): the
    n-th harmonic grows n dB per dB of drive and the carrier 1 dB, so its distance to
    the carrier closes by (n - 1) dB per dB, and it meets the carrier at OHIPn.  With P
    held, a shift d of ``hN`` is ``d = -(n - 1) dOHIPn``, i.e. ``dOHIPn = -d / (n - 1)``.
    The sampled model then holds each sample's ``hN`` at P (the zone weight moves by
    ``-(n - 1) dOHIPn = d``, :func:`sampled_model`).  An ``hN`` and an ``ohipN`` spread of
    the same order add.

    Parameters
    ----------
    deltas : dict of str -> ndarray (B,)
        Shifts in dB: figures of :data:`SPREAD_FIGURES`, ``hN`` in dBc.

    Returns
    -------
    dict of str -> ndarray (B,)
        The same shifts with each ``hN`` folded into ``ohipN`` (dB).
    """
    out = {k: v for k, v in deltas.items() if not (k.startswith("h") and _harmonic_key(k))}
    for key, d in deltas.items():
        n = _harmonic_key(key)
        if n and key.startswith("h"):
            out[f"ohip{n}"] = out.get(f"ohip{n}", 0.0) - np.asarray(d) / (n - 1)
    return out


def sampled_model(amp: Amplifier, deltas: dict, r_ohm: float) -> tuple[Polynomial | Saturating, dict]:
    """The amplifier's model with its figures moved per Monte Carlo sample.

    The sample's figures go through the functions that build the nominal
    (:func:`polynomial_from_figures`, :func:`saturating_base`), with the knee the nominal
    fit chose (sharpness and inner exponent; without a third-order figure, its inner
    saturation); what the fit solves for is then solved per sample where it can be in
    closed form or in a few vectorised steps (module docstring, "Monte Carlo"):

    * the small-signal terms follow each sample's gain and intercepts exactly;
    * with ``psat`` the rail is solved in closed form for each sample's Psat;
      without, it moves by the sample's P1dB shift;
    * each zone weight is refitted so that each sample's ``hN`` holds at its stated
      output power: the weight moves by the change of the stated level less the change
      of the model's own harmonic there, both read with the same one-tone DFT for the
      nominal and the samples (:func:`_harmonic_change_db`).

    Parameters
    ----------
    amp : Amplifier
        The nominal stage.
    deltas : dict of str -> ndarray (B,)
        Shifts in dB of ``gain``, ``oip3``, ``oip2``, ``psat``, ``p1db`` and ``ohip2``
        .. ``ohip9`` (output-referred intercepts, dBm).
    r_ohm : float
        System impedance (ohm).

    Returns
    -------
    transfer, zone_weights_db
        The per-sample model, and the per-sample zone weights (dB, arrays (B,)).
    """
    fig = amp.figures
    batch = len(next(iter(deltas.values())))
    zero = np.zeros(batch)
    sample = _moved_figures(fig, deltas, zero)
    poly = polynomial_from_figures(sample, r_ohm)
    nominal = amp.transfer
    transfer: Polynomial | Saturating
    if isinstance(nominal, Saturating):
        base = saturating_base(poly, sample, r_ohm)
        if not fig.states_order(3):
            # The fit chose the inner saturation (no figure states it): it keeps its place
            # against the compression figure that sets the rail.
            shift_db = deltas.get("psat", zero) if fig.psat_dbm is not None else deltas.get("p1db", zero)
            base = replace(base, gamma=nominal.gamma / (10.0 ** (shift_db / 20.0)) ** 2)
        knee = replace(base, smoothness=nominal.smoothness, inner_exponent=nominal.inner_exponent)
        if fig.psat_dbm is not None:
            # The closed form the nominal fit sets its rail with (amplifier_fit).
            rail = rail_for_psat_v(knee, np.asarray(sample.psat_dbm, dtype=float), r_ohm)
            # A sample whose inner function saturates below its Psat has no such rail (the
            # nominal fit would leave Psat unmet): its rail moves by the Psat shift.
            moved = nominal.rail_v * 10.0 ** (deltas.get("psat", zero) / 20.0)
            rail = np.where(np.isfinite(rail) & (rail > 0), rail, moved)
        else:
            rail = nominal.rail_v * 10.0 ** (deltas.get("p1db", zero) / 20.0)
        transfer = replace(knee, rail_v=rail)
    else:
        transfer = poly
    points = _harmonic_points(fig, nominal, r_ohm)
    weights = {}
    for n, w in amp.zone_weights_db.items():
        stated_db = -(n - 1) * deltas.get(f"ohip{n}", zero)
        weights[n] = w + stated_db - _harmonic_change_db(nominal, transfer, n, points[n][1], r_ohm)
    return transfer, weights


def _moved_figures(fig: AmplifierFigures, deltas: dict, zero: np.ndarray) -> AmplifierFigures:
    """``fig`` with every delta added (arrays (B,)); an ``hN`` moves by ``-(n - 1)`` times its
    OHIPn shift at its stated output power (the small-signal reading, module docstring)."""

    def moved(value, key):
        return None if value is None else value + deltas.get(key, zero)

    return replace(
        fig,
        gain_db=fig.gain_db + deltas.get("gain", zero),
        oip3_dbm=moved(fig.oip3_dbm, "oip3"),
        oip2_dbm=moved(fig.oip2_dbm, "oip2"),
        psat_dbm=moved(fig.psat_dbm, "psat"),
        p1db_dbm=moved(fig.p1db_dbm, "p1db"),
        ohip_dbm={n: v + deltas.get(f"ohip{n}", zero) for n, v in fig.ohip_dbm.items()},
        harmonics={
            n: (dbc - (n - 1) * deltas.get(f"ohip{n}", zero), at) for n, (dbc, at) in fig.harmonics.items()
        },
    )


# Points per period of the one-tone reading of a per-sample harmonic change: the
# change is read the same way for the nominal and each sample, so what the reading
# itself misses (aliasing of harmonics above half of it, far below any figure for these
# smooth models) cancels in the difference; fewer points than the nominal fit's keep a
# batch cheap (module docstring, "Monte Carlo").
SAMPLED_ONE_TONE_POINTS = 64
# Secant steps on log |fundamental| against log input (read on half the points: the
# fundamental alone), and how close (in log units, 1e-6 = 9e-6 dB) the output must
# come to the stated power for the reading to count.
_SECANT_STEPS = 5
_REACHED_LOG = 1e-6


@functools.lru_cache(maxsize=64)
def _nominal_input_v(transfer, at_dbm: float, r_ohm: float) -> float | None:
    """The nominal model's input (V peak) for output ``at_dbm`` (dBm), once per model."""
    return amplifier_fit.input_for_output_v(transfer, at_dbm, r_ohm)


def _harmonic_change_db(nominal, sampled, n: int, at_dbm: float, r_ohm: float) -> np.ndarray:
    """Harmonic ``n`` (dBc) of each sample's model less the nominal's, both at output ``at_dbm``.

    The nominal rides as row 0 of the batch, so that it and a sample with the same
    parameters are read with the same operations (a zero change is exactly 0).  The
    input that gives ``at_dbm`` is found by secant steps on the log of the fundamental
    against the log of the input, from the nominal's input scaled by the gain (the
    first step with the small-signal slope 1).  A sample whose model does not reach
    ``at_dbm``, or makes no harmonic there, keeps the nominal's weight (a change of 0),
    as the nominal fit keeps such a figure unmet.

    Parameters
    ----------
    nominal : Polynomial or Saturating
        The nominal model (scalar parameters).
    sampled : Polynomial or Saturating
        The same kind of model with per-sample parameters (B,).
    n : int
        Harmonic number (>= 2).
    at_dbm : float
        Output power of the stated point (dBm).
    r_ohm : float
        System impedance (ohm).

    Returns
    -------
    ndarray (B,)
        Change of the model's harmonic level (dB).
    """
    both = _with_nominal_row(nominal, sampled)
    rows = np.size(both.gain)
    start = _nominal_input_v(nominal, float(at_dbm), float(r_ohm))
    if start is None:
        return np.zeros(rows - 1)
    target = np.log(float(dbm_to_vpeak(at_dbm, r_ohm)))
    points = SAMPLED_ONE_TONE_POINTS

    # The even part makes no fundamental (Saturating's docstring): the search reads the
    # odd part alone, the harmonic the whole model.
    odd = both if isinstance(both, Polynomial) else (lambda x: both.rail(both.inner(x)))

    def miss(log_a):
        spec = amplifier_fit.one_tone(odd, np.exp(log_a), 1, points // 2)
        return np.log(np.abs(spec[:, 1])) - target

    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        x0 = np.log(start * abs(float(nominal.gain)) / np.abs(np.asarray(both.gain, dtype=float)))
        f0 = miss(x0)
        x1 = x0 - f0
        for _ in range(_SECANT_STEPS):
            f1 = miss(x1)
            slope = (f1 - f0) / (x1 - x0)
            step = np.where(np.isfinite(slope) & (slope > 0) & (f1 != 0), f1 / slope, 0.0)
            x0, f0, x1 = x1, f1, x1 - step
        f1 = miss(x1)
        spec = amplifier_fit.one_tone(both, np.exp(x1), n, points)
        level_db = 20.0 * np.log10(np.abs(spec[:, n]) / np.abs(spec[:, 1]))
    usable = (np.abs(f1) <= _REACHED_LOG) & np.isfinite(level_db) & (level_db > -250.0)
    change = np.where(usable & usable[0], level_db - level_db[0], 0.0)
    return change[1:]


def _with_nominal_row(nominal, sampled):
    """``sampled`` with the nominal's parameters prepended as row 0 (scalars broadcast)."""
    rows = len(np.atleast_1d(np.asarray(sampled.gain)))

    def stack(nom, per_sample):
        return np.concatenate([[nom], np.broadcast_to(np.asarray(per_sample, dtype=float), (rows,))])

    if isinstance(sampled, Polynomial):
        coeffs = list(nominal.coeffs) + [0.0] * (len(sampled.coeffs) - len(nominal.coeffs))
        return Polynomial(tuple(stack(a, b) for a, b in zip(coeffs, sampled.coeffs, strict=False)))
    nominal_even = dict(nominal.even)
    return replace(
        sampled,
        a1=stack(nominal.a1, sampled.a1),
        gamma=stack(nominal.gamma, sampled.gamma),
        a3_exp=stack(nominal.a3_exp, sampled.a3_exp),
        even=tuple((k, stack(nominal_even.get(k, 0.0), a)) for k, a in sampled.even),
        gamma_even=stack(nominal.gamma_even, sampled.gamma_even),
        rail_v=stack(nominal.rail_v, sampled.rail_v),
    )


def _pair(fields: Fields | FigureReader, out_key: str, in_key: str, gain_db: float) -> float | None:
    """An intercept given output-referred, input-referred or both (must agree)."""
    _one_form_if_tabled(fields, out_key, in_key)
    out = fields.quantity(out_key, parse_power_dbm, within=OUTPUT_INTERCEPT)
    inp = fields.quantity(in_key, parse_power_dbm, within=INPUT_INTERCEPT)
    if out is not None and inp is not None and abs(out - (inp + gain_db)) > CONSISTENCY_DB:
        raise fields.error(
            in_key,
            f"{fields.raw(in_key)!r} disagrees with {out_key} {fields.raw(out_key)!r} and "
            f"gain {gain_db:+.2f} dB: expected {in_key} = {out_key} - gain = {out - gain_db:+.2f} dBm",
        )
    if out is not None:
        return out
    return None if inp is None else inp + gain_db


def read_figures(fields: Fields | FigureReader) -> AmplifierFigures:
    """Parse and cross-check the amplifier keys of one ``[[stage]]`` table.

    ``hN`` and ``oipN`` of the same order are independent facts (the output network
    sets the harmonics, the in-band terminations the intermodulation) and are both
    honoured; ``hN`` and ``ohipN`` are two forms of one figure and must agree.
    """
    gain = fields.quantity("gain", parse_gain_db, required=True, within=GAIN)
    oip3 = _pair(fields, "oip3", "iip3", gain)
    oip2 = _pair(fields, "oip2", "iip2", gain)
    ohip: dict[int, float] = {}
    harmonics: dict[int, tuple[float, float]] = {}
    for n in range(2, MAX_HARMONIC + 1):
        _one_form_if_tabled(fields, f"ohip{n}", f"h{n}")
        from_ohip = fields.quantity(f"ohip{n}", parse_power_dbm, within=OUTPUT_INTERCEPT)
        point = fields.quantity(f"h{n}", parse_dbc_at, within=(HARMONIC_DBC, HARMONIC_AT))
        if from_ohip is not None and point is not None:
            dbc, at_dbm = point
            implied = at_dbm + abs(dbc) / (n - 1)
            if abs(from_ohip - implied) > CONSISTENCY_DB:
                raise fields.error(
                    f"h{n}",
                    f"{fields.raw(f'h{n}')!r} implies OHIP{n} {implied:+.2f} dBm but ohip{n} is "
                    f"{fields.raw(f'ohip{n}')!r}: expected one of them, or figures that agree within "
                    f"{CONSISTENCY_DB} dB",
                )
        if point is not None:
            harmonics[n] = point
        elif from_ohip is not None:
            ohip[n] = from_ohip
    p1db = fields.quantity("p1db", parse_power_dbm, within=P1DB)
    psat = fields.quantity("psat", parse_power_dbm, within=PSAT)
    if p1db is not None and psat is not None and p1db > psat:
        raise fields.error("p1db", f"{fields.raw('p1db')!r}: expected p1db <= psat {fields.raw('psat')!r}")
    if psat is not None:
        # The output cannot exceed saturation, so no figure can have been measured above it
        # (beyond datasheet rounding, CONSISTENCY_DB).
        for n, (_, at_dbm) in harmonics.items():
            if at_dbm > psat + CONSISTENCY_DB:
                raise fields.error(
                    f"h{n}",
                    f"{fields.raw(f'h{n}')!r} is stated at an output above psat {fields.raw('psat')!r}: "
                    f"expected the output power of a harmonic figure at or below saturation "
                    f"(within {CONSISTENCY_DB} dB)",
                )
    cubic = fields.text("cubic", default="compressive", choices=("compressive", "expansive"))
    return AmplifierFigures(
        gain_db=gain,
        oip3_dbm=oip3,
        oip2_dbm=oip2,
        ohip_dbm=ohip,
        harmonics=harmonics,
        p1db_dbm=p1db,
        psat_dbm=psat,
        expansive=cubic == "expansive",
    )


def _one_form_if_tabled(fields, out_key: str, in_key: str) -> None:
    """Refuse two forms of one figure (``oip3`` and ``iip3``, ``ohipN`` and ``hN``) when
    either is a table against frequency: they could only agree row by row."""
    table = fields.table
    if out_key in table and in_key in table and any(isinstance(table[k], list) for k in (out_key, in_key)):
        raise fields.error(
            in_key,
            f"{in_key} and {out_key} are both given and one of them is a table against frequency: "
            "expected one of them (they state one figure in two forms)",
        )


def _check_tables(reader: FigureReader, fig: AmplifierFigures) -> None:
    """The cross-checks of :func:`read_figures` at every table frequency: ``p1db <= psat``,
    and no harmonic figure stated above saturation."""
    tables = reader.tables

    def value(key: str, scalar, f_hz: float) -> float:
        t = tables.get(key)
        return float(t(f_hz)) if t is not None else scalar

    def freqs(*keys: str) -> list[float]:
        return sorted({f for k in keys if k in tables for f in tables[k].freq_hz})

    if fig.p1db_dbm is not None and fig.psat_dbm is not None:
        for f in freqs("p1db", "psat"):
            p1db, psat = value("p1db", fig.p1db_dbm, f), value("psat", fig.psat_dbm, f)
            if p1db > psat:
                raise reader.error(
                    "p1db",
                    f"at {format_freq(f)} p1db is {p1db:+.2f} dBm, above psat {psat:+.2f} dBm: expected "
                    "p1db <= psat at every frequency",
                )
    if fig.psat_dbm is not None:
        for n, (_, at_dbm) in sorted(fig.harmonics.items()):
            for f in freqs("psat"):
                psat = value("psat", fig.psat_dbm, f)
                if at_dbm > psat + CONSISTENCY_DB:
                    raise reader.error(
                        f"h{n}",
                        f"is stated at {at_dbm:+.2f} dBm, above psat {psat:+.2f} dBm at {format_freq(f)}: expected "
                        f"the output power of a harmonic figure at or below saturation (within {CONSISTENCY_DB} dB)",
                    )


def channel_checks(amp: Amplifier, r_ohm: float) -> tuple[FigureCheck, ...]:
    """The stated figures beside the per-channel model at every table frequency.

    Sweeps and yield run an amplifier with figure tables as its per-sample model with
    the figures moved to each channel (:meth:`Amplifier.sampled`, :func:`sampled_model`),
    which holds gain, intercepts, Psat and every ``hN`` but does not refit P1dB (module
    docstring, "Monte Carlo").  This reads that model where each table states its
    figures, and gives one :class:`FigureCheck` (with ``freq_hz``) per large-signal
    figure, as the loaded stage's fit does at its own frequency: P1dB, Psat and OIP3
    of the saturating model, and every ``hN`` at its stated output power.

    Parameters
    ----------
    amp : Amplifier
        The loaded stage, with :attr:`Amplifier.figure_tables`.
    r_ohm : float
        System impedance (ohm).

    Returns
    -------
    tuple of FigureCheck
        Empty when no table moves a large-signal model figure, or the only table
        frequency is the loaded stage's own.
    """
    tables = amp.figure_tables
    if not tables:
        return ()
    freqs = tables.frequencies_hz()
    freqs = freqs[np.abs(freqs - tables.ref_freq_hz) > SAME_FREQ_RTOL * tables.ref_freq_hz]
    deltas = amp.channel_deltas(freqs) if freqs.size else {}
    if not deltas:
        return ()
    transfer, weights = sampled_model(amp, deltas, r_ohm)
    stated = _moved_figures(amp.figures, deltas, np.zeros(len(freqs)))
    saturating = isinstance(amp.transfer, Saturating)
    out: list[FigureCheck] = []
    for k, f in enumerate(freqs.tolist()):
        model = transfer.take(k)
        if saturating and stated.p1db_dbm is not None:
            p1db = float(np.asarray(stated.p1db_dbm)[k])
            out.append(FigureCheck("p1db", p1db, output_p1db_dbm(model, r_ohm), "dBm", freq_hz=f))
        if saturating and stated.psat_dbm is not None:
            psat = float(np.asarray(stated.psat_dbm)[k])
            out.append(
                FigureCheck("psat", psat, amplifier_fit.model_psat_dbm(model, r_ohm), "dBm", freq_hz=f)
            )
        if saturating and stated.oip3_dbm is not None:
            check = amplifier_fit.oip3_check(model, float(np.asarray(stated.oip3_dbm)[k]), r_ohm)
            out.append(replace(check, freq_hz=f))
        for n, (dbc, at_dbm) in sorted(stated.harmonics.items()):
            drive_v = amplifier_fit.input_for_output_v(model, float(at_dbm), r_ohm)
            weight = weights.get(n)
            level = None
            if drive_v is not None and weight is not None:
                level = amplifier_fit.harmonic_dbc(model, drive_v, n) + float(np.asarray(weight)[k])
            out.append(FigureCheck(f"h{n}", float(np.asarray(dbc)[k]), level, "dBc", float(at_dbm), f))
    return tuple(out)


def read_band(fields: Fields, context: LoadContext) -> PassBand | None:
    """``band = { low = "...", high = "...", order = 1 }``: an optional pass band.

    Parameters
    ----------
    fields : Fields
        Reader of the stage's table; ``band`` holds ``low`` and ``high`` (frequencies) and
        ``order``.
    context : LoadContext
        Gives the reference carrier's frequency (Hz), which the band must contain.

    Returns
    -------
    PassBand or None
        Corners in Hz; ``None`` when the table has no ``band``.
    """
    raw = fields.raw("band")
    if raw is None:
        return None
    if not isinstance(raw, dict):
        raise fields.error("band", f"{raw!r}: expected a table {{ low = '400 MHz', high = '500 MHz' }}")
    sub = Fields(raw, fields.file, f"{fields.where} band")
    low = sub.quantity("low", parse_freq_hz)
    high = sub.quantity("high", parse_freq_hz)
    order = sub.integer("order", default=1, low=1, high=MAX_BAND_ORDER)
    sub.finish()
    if low is None and high is None:
        raise fields.error("band", "expected 'low', 'high' or both")
    if (low is not None and low <= 0) or (high is not None and high <= 0):
        raise fields.error("band", "expected corners above 0 Hz")
    if low is not None and high is not None and not low < high:
        raise fields.error(
            "band", f"low {sub.raw('low')!r} and high {sub.raw('high')!r}: expected low < high"
        )
    ref = context.ref_freq_hz
    if ref and not ((low or 0.0) <= ref <= (high or math.inf)):
        raise fields.error(
            "band", f"expected a band that contains the carrier at {ref:.6g} Hz, where the figures hold"
        )
    return PassBand(low_hz=low, high_hz=high, order=order)
