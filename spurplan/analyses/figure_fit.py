"""An amplifier's figures fitted to bench sweeps, with the model the engine uses.

The figures a lineup states (gain, OIP3, OIP2, hN, P1dB, Psat) are the parameters; the
model is the amplifier that :meth:`~spurplan.model.stages.amplifier.Amplifier.from_figures`
builds from them (the compression rail, the knee and the harmonic-zone weights that
:mod:`spurplan.model.stages.amplifier_fit` fits), run by the engine on a one-stage lineup
whose carriers are the sweep's tones, every drive point one element of a batch
(``Lineup.run(drive_offset_db=array)``).  The figures are adjusted by least squares on
the differences in dB between the model's levels and the measured ones
(``scipy.optimize.least_squares``, trust-region reflective within each figure's plausible
range), so the figures printed are exactly those that, pasted into the lineup, make the
engine reproduce the bench.

Uncertainty (Press et al., Numerical Recipes 3e, 15.5, from memory): with J the Jacobian
of the residuals (dB per dB of each figure) at the solution, the covariance of the
figures is ``C = s^2 (J^T J)^-1`` with ``s^2 = RSS / (m - n)`` the residual variance
(m readings, n figures); a figure's uncertainty is ``sqrt(C_kk)`` (one standard
deviation).  It assumes independent readings of equal scatter and a model that can
follow the part; a systematic miss (memory effects, AM/PM) shows in the residuals,
not in ``C``.  A figure is *poorly determined*, and never printed as if known, when its
uncertainty exceeds :data:`MAX_SIGMA_DB` (or is unbounded: ``J^T J`` singular in its
direction), or when no reading moves by :data:`MIN_INFLUENCE_DB_PER_DB` or more for
1 dB of it (the data do not constrain it: Psat from a sweep that never compresses,
whose scatter alone could otherwise make ``C`` look small).

Small-signal closed forms read from the low-drive points (Razavi, RF Microelectronics
2e, ch. 2, from memory) are printed beside the fit as a check independent of the
model, and start it: per tone ``OIP3 = Pout + (Pout - P_IM3) / 2``, ``OIP2 = 2 Pout -
P_IM2``, ``OHIPn = (n Pout - P_Hn) / (n - 1)`` (so ``hN = (n - 1) (P - OHIPn)`` dBc at an
output P), gain ``Pout - Pin``; P1dB is read off the measured gain where it has fallen
1 dB below its low-drive value.  "Low drive" is every point whose measured gain is within
:data:`LOW_DRIVE_COMPRESSION_DB` of its value at the lowest drive (the lower half of the
points where the gain is not measured).
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field, replace

import numpy as np

from spurplan.errors import LineupError
from spurplan.io.bench_sweeps import ONE_TONE_QUANTITIES, BenchSweep, SweepColumn
from spurplan.model.lineup import Analysis, Carrier, Lineup
from spurplan.model.products import product_index
from spurplan.model.stages.amplifier import (
    GAIN,
    HARMONIC_DBC,
    OUTPUT_INTERCEPT,
    P1DB,
    PSAT,
    Amplifier,
    AmplifierFigures,
)
from spurplan.model.stages.amplifier_fit import (
    HARMONIC_TOL_DB,
    INTERCEPT_PESSIMISTIC_TOL_DB,
    INTERCEPT_TOL_DB,
)

HARMONIC_FIGURES = tuple(f"h{n}" for n in range(2, 10))
FIGURES = ("gain", "oip3", "oip2", *HARMONIC_FIGURES, "p1db", "psat")
# One standard deviation above which a figure is poorly determined (dB): half the 1 dB a
# designer reads a datasheet figure to (common practice, no source).
MAX_SIGMA_DB = 0.5
# A figure that moves no reading by this much per dB is not constrained by the data.
MIN_INFLUENCE_DB_PER_DB = 0.05
# Low-drive points: measured gain within this of its value at the lowest drive (dB).
LOW_DRIVE_COMPRESSION_DB = 0.25
# Readings each fitted figure needs at least (its own columns).
MIN_READINGS = {"gain": 2, "oip3": 2, "oip2": 2, "h": 2, "p1db": 3, "psat": 3}
# Which measured quantities bear on each figure.
_EVIDENCE = {
    "gain": ("pout",),
    "oip3": ("im3", "im3_low", "im3_high"),
    "oip2": ("im2", "im2_sum"),
    "p1db": ("pout",),
    "psat": ("pout",),
}
_TWO_TONE_VECTORS = {"im3_low": (2, -1), "im3_high": (-1, 2), "im2": (-1, 1), "im2_sum": (1, 1)}
# Weight of a figure the model misses (consistency_db), against readings of weight 1; a
# model that cannot reach a figure's point at all counts this miss (dB).
CONSISTENCY_WEIGHT = 3.0
_UNREACHED_DB = 10.0
# Finite-difference step of the Jacobian (dB): well above the model's own fitting
# tolerances (bisections to 1e-12 relative), well below any figure's uncertainty.
JACOBIAN_STEP_DB = 0.01
MAX_EVALUATIONS = 60
# Output powers searched for a pout-driven sweep: input grid step and margin (dB).
_POUT_GRID_STEP_DB = 0.2
_POUT_GRID_MARGIN_DB = 20.0
# Psat above P1dB kept in [0, 40] dB during the fit (the model needs p1db <= psat).
_GAP_RANGE_DB = (0.0, 40.0)


@dataclass(frozen=True)
class FittedFigure:
    """One figure as fitted, with its uncertainty and how the data constrain it.

    Attributes
    ----------
    name : str
        The lineup key: ``"gain"``, ``"oip3"``, ``"oip2"``, ``"h2"`` .. ``"h9"``, ``"p1db"``,
        ``"psat"``.
    value : float
        dB (gain), dBm (intercepts, P1dB, Psat) or dBc (hN, at ``at_dbm``).
    unit : str
    sigma_db : float
        One standard deviation (dB); ``inf`` where the data leave it free.
    influence_db : float
        The largest change of any reading for 1 dB of this figure (dB per dB).
    start : float
        Where the fit started (the closed form, else the lineup's figure).
    closed_form : float or None
        The small-signal closed form from the low-drive points (module docstring), or the
        P1dB read off the measured gain; ``None`` where the readings give none.
    closed_form_points : int
        Points the closed form averages.
    at_dbm : float or None
        For ``hN``: the output power (dBm) of the stated point.
    """

    name: str
    value: float
    unit: str
    sigma_db: float
    influence_db: float
    start: float
    closed_form: float | None = None
    closed_form_points: int = 0
    at_dbm: float | None = None

    @property
    def determined(self) -> bool:
        """Whether the data pin the figure down (module docstring)."""
        return (
            math.isfinite(self.sigma_db)
            and self.sigma_db <= MAX_SIGMA_DB
            and self.influence_db >= MIN_INFLUENCE_DB_PER_DB
        )

    @property
    def why_poorly_determined(self) -> str:
        """Why the figure is poorly determined, in words; ``""`` when it is determined."""
        if self.influence_db < MIN_INFLUENCE_DB_PER_DB:
            what = {
                "psat": "the sweep does not drive the stage far enough into saturation",
                "p1db": "the sweep does not drive the stage far enough into compression",
            }.get(self.name, "no reading depends on it")
            return (
                f"1 dB of {self.name} moves no reading by more than {self.influence_db:.3f} dB ({what}; "
                f"at least {MIN_INFLUENCE_DB_PER_DB:g} dB needed)"
            )
        if not math.isfinite(self.sigma_db):
            return f"the readings cannot tell {self.name} from the other figures fitted"
        if self.sigma_db > MAX_SIGMA_DB:
            return f"its uncertainty {self.sigma_db:.2f} dB (1 sigma) exceeds {MAX_SIGMA_DB:g} dB"
        return ""


@dataclass(frozen=True)
class FitReading:
    """One reading of a sweep beside the fitted model's value.

    Attributes
    ----------
    file : str
    line : int
        The file line of its point.
    drive_dbm : float
        The drive (input or output power, per tone; the sweep's drive column).
    column : str
        Our column name (``"h2_dbc"``).
    measured : float
    model : float
        dBm or dBc, as the column.
    """

    file: str
    line: int
    drive_dbm: float
    column: str
    measured: float
    model: float

    @property
    def residual_db(self) -> float:
        """Model minus measured (dB)."""
        return self.model - self.measured


@dataclass(frozen=True, eq=False)
class FigureFit:
    """What :func:`fit_figures` found.

    Attributes
    ----------
    stage : str
        The stage's name.
    figures : tuple of FittedFigure
        The fitted figures, in :data:`FIGURES` order.
    held : dict of str -> float
        Figures not fitted, held at the lineup's values (same units as ``figures``;
        ``hN`` as dBc at its stated point, ``ohipN`` in dBm).
    amplifier : Amplifier
        The model built from the fitted figures (what the readings were compared with).
    readings : tuple of FitReading
    converged : bool
        The least-squares search stopped on its tolerances (not on its evaluation limit).
    message : str
        The search's own account of how it stopped.
    evaluations : int
        Models built and run (each a full fit of the amplifier model and an engine batch).
    sweeps : tuple of BenchSweep
    notes : tuple of str
        What the fit could not use or assumed, in sentences.
    r_ohm : float
    forms : dict of str -> tuple of str
        The keys the lineup's stage states each intercept in (``{"oip3": ("iip3",)}``),
        so that a written file keeps them.
    """

    stage: str
    figures: tuple[FittedFigure, ...]
    held: dict
    amplifier: Amplifier
    readings: tuple[FitReading, ...]
    converged: bool
    message: str
    evaluations: int
    sweeps: tuple[BenchSweep, ...]
    notes: tuple[str, ...] = ()
    r_ohm: float = 50.0
    forms: dict = field(default_factory=dict)

    @property
    def rms_db(self) -> float:
        """Root-mean-square residual over every reading (dB)."""
        r = np.array([x.residual_db for x in self.readings])
        return float(np.sqrt(np.mean(r * r))) if r.size else math.nan

    @property
    def worst(self) -> FitReading | None:
        """The reading the model misses most."""
        return max(self.readings, key=lambda x: abs(x.residual_db), default=None)

    @property
    def poorly_determined(self) -> tuple[FittedFigure, ...]:
        return tuple(f for f in self.figures if not f.determined)

    @property
    def status(self) -> str:
        """``"FITTED"``, ``"POORLY DETERMINED"`` (some figure) or ``"NOT CONVERGED"``."""
        if not self.converged:
            return "NOT CONVERGED"
        return "POORLY DETERMINED" if self.poorly_determined else "FITTED"

    def figure(self, name: str) -> FittedFigure | None:
        """The fitted figure called ``name``, or ``None``."""
        return next((f for f in self.figures if f.name == name), None)

    def key_values(self) -> dict[str, str | None]:
        """The stage's figure keys to write: TOML value text, or ``None`` to remove the key.

        Intercepts keep the forms the lineup states them in (``iip3 = oip3 - gain``); a
        fitted ``hN`` replaces an ``ohipN`` of the same order.  Only determined figures
        of a converged fit are given; the caller refuses to write otherwise.

        Returns
        -------
        dict of str -> str or None
        """
        out: dict[str, str | None] = {}
        gain = self.amplifier.figures.gain_db
        for f in self.figures:
            if not f.determined or not self.converged:
                continue
            if f.name == "gain":
                out["gain"] = format_db(f.value, "dB")
            elif f.name in ("oip3", "oip2"):
                out.update(_intercept_keys(f.name, f.value, gain, self.forms.get(f.name, (f.name,))))
            elif f.name.startswith("h"):
                out[f.name] = f"{f.value:.2f} dBc @ {f.at_dbm:+.2f} dBm"
                out["ohip" + f.name[1:]] = None
            else:
                out[f.name] = format_db(f.value, "dBm")
        fitted_gain = self.figure("gain")
        if fitted_gain is not None and fitted_gain.determined:
            # An intercept held in both forms must keep agreeing with the new gain.
            for name in ("oip3", "oip2"):
                forms = self.forms.get(name, ())
                if name in self.held and len(forms) == 2 and name not in out:
                    out.update(_intercept_keys(name, self.held[name], gain, forms))
        return {k: v for k, v in out.items() if v is not None or k in self.forms.get("present", ())}


def _intercept_keys(name: str, out_dbm: float, gain_db: float, forms) -> dict[str, str]:
    keys: dict[str, str] = {}
    for key in forms:
        value = out_dbm if key.startswith("o") else out_dbm - gain_db
        keys[key] = format_db(value, "dBm")
    return keys


def format_db(value: float, unit: str) -> str:
    """A figure as a lineup writes it: ``"+40.02 dBm"``, ``"20.31 dB"`` (0.01 dB).

    Parameters
    ----------
    value : float
        The figure (dB or dBm).
    unit : str
        ``"dB"`` or ``"dBm"``.

    Returns
    -------
    str
    """
    return f"{value:+.2f} {unit}" if unit == "dBm" else f"{value:.2f} {unit}"


# --- what the data hold ---------------------------------------------------------------------------


def _quantities(sweeps) -> set[str]:
    return {c.quantity for s in sweeps for c in s.columns}


def _input_driven_pout(sweeps) -> list[BenchSweep]:
    return [s for s in sweeps if s.drive == "pin_dbm" and s.column("pout") is not None]


def _pout(sweep: BenchSweep) -> SweepColumn:
    """The fundamental's column of a sweep known to have one (:func:`_input_driven_pout`)."""
    col = sweep.column("pout")
    if col is None:
        raise ValueError(f"{sweep.path}: no pout_dbm column")
    return col


def _readings_for(name: str, sweeps) -> int:
    """Readings that bear on figure ``name``."""
    if name.startswith("h"):
        return sum(c.measured for s in sweeps for c in s.columns if c.quantity == name)
    if name in ("gain", "p1db", "psat"):
        return sum(_pout(s).measured for s in _input_driven_pout(sweeps))
    direct = sum(c.measured for s in sweeps for c in s.columns if c.quantity in _EVIDENCE[name])
    if name == "oip3" and not direct:
        # The model's cubic term sets its small-signal compression too (memoryless).
        return sum(_pout(s).measured for s in _input_driven_pout(sweeps))
    return direct


def _max_compression_db(sweeps) -> float:
    """The most the measured gain falls below its low-drive value in any sweep (dB)."""
    worst = 0.0
    for s in _input_driven_pout(sweeps):
        gain = _pout(s).level - s.drive_dbm
        ok = np.isfinite(gain)
        if np.count_nonzero(ok) >= 2:
            g = gain[ok]
            worst = max(worst, float(np.mean(g[:3]) - np.min(g)))
    return worst


def default_figures(sweeps: Sequence[BenchSweep]) -> tuple[str, ...]:
    """The figures the sweeps can speak to: gain where the input and the fundamental are
    measured, oip3/oip2 from two-tone products, each measured hN, and P1dB and Psat where
    the measured gain compresses by 1 dB or more.

    Parameters
    ----------
    sweeps : sequence of BenchSweep
        The sweeps of one stage.

    Returns
    -------
    tuple of str
        Figure names in :data:`FIGURES` order.
    """
    q = _quantities(sweeps)
    out = []
    if _input_driven_pout(sweeps):
        out.append("gain")
    if q & set(_EVIDENCE["oip3"]):
        out.append("oip3")
    if q & set(_EVIDENCE["oip2"]):
        out.append("oip2")
    out += [h for h in HARMONIC_FIGURES if h in q]
    if _max_compression_db(sweeps) >= 1.0:
        out += ["p1db", "psat"]
    return tuple(out)


def _check_request(names: Sequence[str], sweeps, base: AmplifierFigures | None) -> None:
    """Refuse figures the sweeps cannot give, with the reason, in one line."""
    where = ", ".join(s.path for s in sweeps)
    for name in names:
        if name not in FIGURES:
            raise LineupError(f"{{@figures}} {name!r}: expected figures among {', '.join(FIGURES)}")
    if len(set(names)) != len(names):
        raise LineupError("{@figures} names a figure twice: expected each once")
    if not names:
        raise LineupError("no figure to fit: expected {@figures} or sweeps that measure one", file=where)
    for name in names:
        key = "h" if name.startswith("h") else name
        have = _readings_for(name, sweeps)
        need = MIN_READINGS[key]
        if have >= need:
            continue
        if name in ("gain", "p1db", "psat"):
            wanted = "pout_dbm readings in a sweep driven by pin_dbm"
        elif name.startswith("h"):
            wanted = f"{name}_dbm or {name}_dbc readings"
        else:
            wanted = " or ".join(f"{q}_dbm" for q in _EVIDENCE[name]) + " readings"
        raise LineupError(
            f"{name}: {have} reading{'s' if have != 1 else ''}: expected at least {need} {wanted} to fit {name} "
            "(too few points)",
            file=where,
        )
    if "gain" not in names and base is None and not any(s.drive == "pout_dbm" for s in sweeps):
        raise LineupError(
            "the gain is neither fitted nor stated: expected 'gain' among {@figures} or a lineup stating it",
            file=where,
        )


# --- closed forms ---------------------------------------------------------------------------------


def low_drive(sweep: BenchSweep) -> np.ndarray:
    """Which points of ``sweep`` are at low drive (module docstring); bool (points,).

    Parameters
    ----------
    sweep : BenchSweep
        One sweep as read.

    Returns
    -------
    ndarray of bool
    """
    n = len(sweep.drive_dbm)
    pout = sweep.column("pout")
    if sweep.drive == "pin_dbm" and pout is not None and pout.measured >= 2:
        gain = pout.level - sweep.drive_dbm
        ok = np.isfinite(gain)
        g0 = float(np.mean(gain[ok][:3]))
        return ok & (np.abs(gain - g0) <= LOW_DRIVE_COMPRESSION_DB)
    return np.arange(n) < max(2, (n + 1) // 2)


def _output_dbm(sweep: BenchSweep, gain_db: float | None) -> np.ndarray | None:
    """The fundamental output per tone at each point (dBm): measured, the drive itself, or
    the input plus a known gain; ``None`` when none of these is known."""
    if sweep.drive == "pout_dbm":
        return sweep.drive_dbm
    pout = sweep.column("pout")
    if pout is not None:
        return pout.level
    return None if gain_db is None else sweep.drive_dbm + gain_db


def _absolute(col, out_dbm: np.ndarray) -> np.ndarray:
    return col.level + out_dbm if col.unit == "dBc" else col.level


def closed_forms(
    sweeps: Sequence[BenchSweep], at_dbm: dict[int, float], gain_db: float | None = None
) -> dict:
    """Small-signal closed forms from the low-drive points, and P1dB off the measured gain.

    Parameters
    ----------
    sweeps : sequence of BenchSweep
        The sweeps of one stage.
    at_dbm : dict of int -> float
        Output power (dBm) at which each ``hN`` is stated.
    gain_db : float or None
        A known gain (dB) for sweeps that measure neither the output nor drive by it.

    Returns
    -------
    dict of str -> (float, int)
        Figure name -> (value, points averaged); ``hN`` in dBc at ``at_dbm[N]``.
    """
    values: dict[str, list[float]] = {}
    for s in sweeps:
        low = low_drive(s)
        out = _output_dbm(s, gain_db)
        if out is None:
            continue
        if s.drive == "pin_dbm" and s.column("pout") is not None:
            values.setdefault("gain", []).extend((out - s.drive_dbm)[low & np.isfinite(out)])
        for col in s.columns:
            q = col.quantity
            level = _absolute(col, out)
            ok = low & np.isfinite(level) & np.isfinite(out)
            if q in ("im3", "im3_low", "im3_high"):
                values.setdefault("oip3", []).extend(out[ok] + (out[ok] - level[ok]) / 2.0)
            elif q in ("im2", "im2_sum"):
                values.setdefault("oip2", []).extend(2.0 * out[ok] - level[ok])
            elif q in ONE_TONE_QUANTITIES:
                n = int(q[1:])
                ohip = (n * out[ok] - level[ok]) / (n - 1)
                values.setdefault(f"ohip{n}", []).extend(ohip)
    result = {k: (float(np.mean(v)), len(v)) for k, v in values.items() if v}
    for n, at in at_dbm.items():
        if f"ohip{n}" in result:
            ohip, count = result.pop(f"ohip{n}")
            result[f"h{n}"] = ((n - 1) * (at - ohip), count)
    p1db = _measured_p1db_dbm(sweeps)
    if p1db is not None:
        result["p1db"] = (p1db, 1)
    return result


def _measured_p1db_dbm(sweeps) -> float | None:
    """The output (dBm) where the measured gain first falls 1 dB below its low-drive value."""
    for s in _input_driven_pout(sweeps):
        out = _pout(s).level
        ok = np.isfinite(out)
        gain = out[ok] - s.drive_dbm[ok]
        if gain.size < 3:
            continue
        comp = float(np.mean(gain[:3])) - gain
        past = np.nonzero(comp >= 1.0)[0]
        if past.size and past[0] > 0:
            i = past[0]
            t = (1.0 - comp[i - 1]) / (comp[i] - comp[i - 1])
            o = out[ok]
            return float(o[i - 1] + t * (o[i] - o[i - 1]))
    return None


# --- the model ------------------------------------------------------------------------------------


@dataclass(frozen=True)
class _Space:
    """The fitted figures as the search's parameters: each figure itself, except Psat,
    searched as its height above P1dB when both are fitted (the model needs p1db <= psat)."""

    names: tuple[str, ...]
    at_dbm: dict  # n -> output power of hN's point
    base: AmplifierFigures | None
    held_inputs: dict  # "oip3"/"oip2" -> input-referred value held (file states iip only)

    @property
    def gap(self) -> bool:
        return "p1db" in self.names and "psat" in self.names

    def to_params(self, values: dict[str, float]) -> np.ndarray:
        x = [values[n] for n in self.names]
        if self.gap:
            x[self.names.index("psat")] -= values["p1db"]
        return np.array(x, dtype=float)

    def to_values(self, x: np.ndarray) -> dict[str, float]:
        values = dict(zip(self.names, (float(v) for v in x), strict=True))
        if self.gap:
            values["psat"] += values["p1db"]
        return values

    def map_matrix(self) -> np.ndarray:
        """d(params)/d(figures), for the Jacobian in figure terms."""
        a = np.eye(len(self.names))
        if self.gap:
            a[self.names.index("psat"), self.names.index("p1db")] = -1.0
        return a

    def bounds(self) -> tuple[np.ndarray, np.ndarray]:
        ranges = {
            "gain": (GAIN.lo, GAIN.hi),
            "oip3": (OUTPUT_INTERCEPT.lo, OUTPUT_INTERCEPT.hi),
            "oip2": (OUTPUT_INTERCEPT.lo, OUTPUT_INTERCEPT.hi),
            "p1db": (P1DB.lo, P1DB.hi),
            "psat": _GAP_RANGE_DB if self.gap else (PSAT.lo, PSAT.hi),
        }
        lo, hi = [], []
        for n in self.names:
            r = ranges.get(n, (HARMONIC_DBC.lo, -0.01))
            lo.append(r[0])
            hi.append(r[1])
        return np.array(lo), np.array(hi)

    def figures(self, values: dict[str, float]) -> AmplifierFigures:
        base = self.base
        gain = values.get("gain", base.gain_db if base is not None else 0.0)
        fig = AmplifierFigures(gain_db=gain) if base is None else replace(base, gain_db=gain)
        changes: dict = {}
        for key, attr in (("oip3", "oip3_dbm"), ("oip2", "oip2_dbm")):
            if key in values:
                changes[attr] = values[key]
            elif key in self.held_inputs:
                changes[attr] = self.held_inputs[key] + gain
        harmonics = dict(fig.harmonics)
        ohip = dict(fig.ohip_dbm)
        for n, at in self.at_dbm.items():
            if f"h{n}" in values:
                harmonics[n] = (values[f"h{n}"], at)
                ohip.pop(n, None)
        changes.update(harmonics=harmonics, ohip_dbm=ohip)
        if "p1db" in values:
            changes["p1db_dbm"] = values["p1db"]
        if "psat" in values:
            changes["psat_dbm"] = values["psat"]
        return replace(fig, **changes)


def _one_stage(amp: Amplifier, sweep: BenchSweep, r_ohm: float, max_order: int) -> Lineup:
    carriers = tuple(Carrier(freq_hz=f, power_dbm=0.0) for f in sweep.tones_hz)
    return Lineup(
        name=f"bench sweep {sweep.path}",
        carriers=carriers,
        stages=(amp,),
        analysis=Analysis(max_order=max_order),
        r_ohm=r_ohm,
    )


def _order(sweeps) -> int:
    q = _quantities(sweeps)
    harmonics = [int(x[1:]) for x in q if x in ONE_TONE_QUANTITIES]
    return max([3, *harmonics])


def _run_levels(lineup: Lineup, offsets_db: np.ndarray, quantities, two_tone: bool) -> dict[str, np.ndarray]:
    """Levels (dBm, per tone) of the fundamental and each quantity at every drive offset."""
    result = lineup.run(drive_offset_db=np.asarray(offsets_db, dtype=float))
    node = result.propagation.nodes[1]
    r = lineup.r_ohm

    def dbm(vec) -> np.ndarray:
        v = np.abs(node[:, product_index(result.mix, vec)])
        return 10.0 * np.log10(np.maximum(v * v / (2.0 * r), 1e-33)) + 30.0

    if two_tone:
        out = {"pout": (dbm((1, 0)) + dbm((0, 1))) / 2.0}
        for q, vec in _TWO_TONE_VECTORS.items():
            if q in quantities or (q in ("im3_low", "im3_high") and "im3" in quantities):
                out[q] = dbm(vec)
        if "im3" in quantities:
            out["im3"] = np.maximum(out["im3_low"], out["im3_high"])
        return out
    out = {"pout": dbm((1,))}
    for q in quantities:
        if q in ONE_TONE_QUANTITIES:
            out[q] = dbm((int(q[1:]),))
    return out


def model_levels(amp: Amplifier, sweep: BenchSweep, r_ohm: float, max_order: int) -> tuple[dict, np.ndarray]:
    """The model's level of every measured quantity at every point of ``sweep``.

    Parameters
    ----------
    amp : Amplifier
        The stage's model.
    sweep : BenchSweep
        The sweep (its tones and drive points).
    r_ohm : float
        System impedance (ohm).
    max_order : int
        Highest product order the engine computes.

    Returns
    -------
    levels : dict of str -> ndarray (points,)
        dBm per tone, by quantity (``"pout"``, ``"h2"``, ``"im3"`` ...).
    shortfall_db : ndarray (points,)
        For a sweep driven by its output power, how far (dB) each point lies above the
        highest output the model reaches (0 where it reaches it); zeros otherwise.
    """
    quantities = {c.quantity for c in sweep.columns}
    lineup = _one_stage(amp, sweep, r_ohm, max_order)
    if sweep.drive == "pin_dbm":
        return _run_levels(lineup, sweep.drive_dbm, quantities, sweep.two_tone), np.zeros(
            len(sweep.drive_dbm)
        )
    # Driven by its output: the model's levels against its own output, read on a grid of
    # inputs (linear interpolation in dB on 0.2 dB steps) where the output still rises.
    gain = amp.figures.gain_db
    lo = float(sweep.drive_dbm[0]) - gain - _POUT_GRID_MARGIN_DB
    hi = float(sweep.drive_dbm[-1]) - gain + _POUT_GRID_MARGIN_DB
    grid = np.arange(lo, hi + _POUT_GRID_STEP_DB, _POUT_GRID_STEP_DB)
    levels = _run_levels(lineup, grid, quantities, sweep.two_tone)
    out = levels["pout"]
    rising = np.concatenate([[True], np.diff(out) > 0])
    stop = int(np.argmin(rising)) if not rising.all() else len(out)
    o = out[:stop]
    target = np.clip(sweep.drive_dbm, o[0], o[-1])
    shortfall = np.maximum(sweep.drive_dbm - o[-1], 0.0)
    read = {q: np.interp(target, o, v[:stop]) for q, v in levels.items()}
    read["pout"] = sweep.drive_dbm
    return read, shortfall


# --- the fit --------------------------------------------------------------------------------------


class _Model:
    """Residuals of candidate figures, with the last few evaluations kept (the search asks
    for the Jacobian where it has just evaluated the residuals)."""

    def __init__(self, space: _Space, sweeps, name: str, r_ohm: float, template: Amplifier | None):
        self.space, self.sweeps, self.name, self.r_ohm, self.template = space, sweeps, name, r_ohm, template
        self.order = _order(sweeps)
        self.cache: dict[tuple, np.ndarray] = {}
        self.jacobians: dict[tuple, np.ndarray] = {}
        self.evaluations = 0
        self.ref_hz = sweeps[0].tones_hz[-1]

    def amplifier(self, values: dict[str, float]) -> Amplifier:
        fig = self.space.figures(values)
        t = self.template
        amp = Amplifier.from_figures(self.name, fig, self.r_ohm, t.band if t else None, self.ref_hz)
        if t is not None:
            amp = replace(amp, shape=t.shape, noise_figure_db=t.noise_figure_db)
        return amp

    def compare(self, amp: Amplifier) -> tuple[list[FitReading], np.ndarray]:
        readings: list[FitReading] = []
        penalties = []
        for s in self.sweeps:
            levels, shortfall = model_levels(amp, s, self.r_ohm, self.order)
            for col in s.columns:
                model = levels[col.quantity] - (levels["pout"] if col.unit == "dBc" else 0.0)
                for i in np.nonzero(np.isfinite(col.level))[0]:
                    readings.append(
                        FitReading(
                            s.path,
                            s.lines[i],
                            float(s.drive_dbm[i]),
                            col.name,
                            float(col.level[i]),
                            float(model[i]),
                        )
                    )
                    # A point above the model's highest output counts its shortfall.
                    penalties.append(float(shortfall[i]))
        return readings, np.array(penalties)

    def residuals(self, x: np.ndarray) -> np.ndarray:
        """Model minus measured at every reading, then the consistency rows (:func:`consistency_db`)."""
        key = tuple(np.round(x, 12))
        hit = self.cache.get(key)
        if hit is not None:
            return hit
        self.evaluations += 1
        amp = self.amplifier(self.space.to_values(x))
        readings, penalty = self.compare(amp)
        r = np.concatenate(
            [
                np.array([x.residual_db for x in readings]) + 10.0 * penalty,
                consistency_db(amp, self.space.names),
            ]
        )
        if len(self.cache) > 64:
            self.cache.clear()
        self.cache[key] = r
        return r

    def jacobian(self, x: np.ndarray, lo: np.ndarray, hi: np.ndarray) -> np.ndarray:
        """Forward differences of :data:`JACOBIAN_STEP_DB` (backward at an upper bound)."""
        key = tuple(np.round(x, 12))
        if key in self.jacobians:
            return self.jacobians[key]
        r0 = self.residuals(x)
        cols = []
        for k in range(len(x)):
            h = JACOBIAN_STEP_DB if x[k] + JACOBIAN_STEP_DB <= hi[k] else -JACOBIAN_STEP_DB
            step = x.copy()
            step[k] += h
            cols.append((self.residuals(step) - r0) / h)
        self.jacobians = {key: np.column_stack(cols)}
        return self.jacobians[key]


def consistency_db(amp: Amplifier, names: Sequence[str]) -> np.ndarray:
    """How far the model misses each fitted figure it states, weighted (dB), one row each.

    The model honours P1dB, Psat and hN at their points, and OIP3 at the datasheet test
    level within :class:`~spurplan.model.stages.amplifier_fit.FigureCheck`'s tolerances,
    where one memoryless model can; where it cannot, figures that differ can give the same
    model.  These rows make the search prefer the figures the model honours, so that the
    printed figures are the model's own: the full miss for P1dB and Psat, the part beyond
    the tolerance for OIP3 and hN, times :data:`CONSISTENCY_WEIGHT`.  They are zero, with a
    zero Jacobian, where the model honours its figures.

    Parameters
    ----------
    amp : Amplifier
        A candidate model.
    names : sequence of str
        The fitted figures; checks of held figures are left out.

    Returns
    -------
    ndarray
    """
    rows = []
    for check in amp.checks:
        if check.figure not in names:
            continue
        if check.model is None:
            rows.append(CONSISTENCY_WEIGHT * _UNREACHED_DB)
            continue
        miss = check.model - check.stated
        if check.figure.startswith("oip"):
            excess = max(miss - INTERCEPT_TOL_DB, -INTERCEPT_PESSIMISTIC_TOL_DB - miss, 0.0)
            miss = math.copysign(excess, miss)
        elif check.figure.startswith("h"):
            miss = math.copysign(max(abs(miss) - HARMONIC_TOL_DB, 0.0), miss)
        rows.append(CONSISTENCY_WEIGHT * miss)
    return np.array(rows, dtype=float)


def stated_value(base: AmplifierFigures | None, name: str, at_dbm: dict) -> float | None:
    """The lineup's value of a figure, in the fit's terms.

    Parameters
    ----------
    base : AmplifierFigures or None
        The stage's stated figures.
    name : str
        A figure of :data:`FIGURES`.
    at_dbm : dict of int -> float
        For ``hN``: the output power (dBm) to state it at.  A stated ``hN`` is carried
        there along its small-signal slope, ``(n - 1)`` dB per dB of output; one stated
        as ``ohipN`` is ``(n - 1) (P - OHIPn)`` (slope-of-n; common practice, no source).
        Without an entry, a stated ``hN`` stays at its own point.

    Returns
    -------
    float or None
        dB, dBm or dBc; ``None`` where the stage states no such figure.
    """
    if base is None:
        return None
    if name.startswith("h"):
        n = int(name[1:])
        if n in base.harmonics:
            dbc, at = base.harmonics[n]
            return dbc if n not in at_dbm else dbc + (n - 1) * (at_dbm[n] - at)
        ohip = base.small_signal_ohip_dbm().get(n)
        return None if ohip is None or n not in at_dbm else (n - 1) * (at_dbm[n] - ohip)
    return {
        "gain": base.gain_db,
        "oip3": base.oip3_dbm,
        "oip2": base.oip2_dbm,
        "p1db": base.p1db_dbm,
        "psat": base.psat_dbm,
    }[name]


def _harmonic_points(names, sweeps, base, at: float | None, gain_db: float | None) -> dict[int, float]:
    """The output power (dBm) at which each fitted hN is stated: ``at`` if given, else the
    lineup's own point, else the highest output measured with that harmonic (0.1 dB)."""
    out = {}
    for name in names:
        if not name.startswith("h"):
            continue
        n = int(name[1:])
        if at is not None:
            out[n] = at
            continue
        if base is not None and n in base.harmonics:
            out[n] = base.harmonics[n][1]
            continue
        best = None
        for s in sweeps:
            col = s.column(name)
            level_out = _output_dbm(s, gain_db)
            if col is None or level_out is None:
                continue
            ok = np.isfinite(col.level) & np.isfinite(level_out)
            if ok.any():
                top = float(np.max(level_out[ok]))
                best = top if best is None else max(best, top)
        if best is None:
            raise LineupError(
                f"{name}: no output power is known for its stated point: expected a pout_dbm column, a "
                "lineup stating the gain, or {@harmonic_at_dbm}",
                file=", ".join(s.path for s in sweeps),
            )
        out[n] = round(best, 1)
    return out


def _start(names, closed: dict, base, at_dbm: dict, sweeps) -> dict[str, float]:
    """Starting figures: the closed forms, else the lineup's, else rough readings."""
    top = max(
        (float(np.nanmax(c.level)) for s in sweeps for c in s.columns if c.quantity == "pout" and c.measured),
        default=None,
    )
    if top is None:
        top = (
            max(float(s.drive_dbm[-1]) for s in sweeps if s.drive == "pout_dbm")
            if any(s.drive == "pout_dbm" for s in sweeps)
            else 20.0
        )
    rough = {"gain": 15.0, "oip3": top + 12.0, "oip2": top + 30.0, "p1db": top, "psat": top + 2.0}
    values = {}
    for name in names:
        if name in closed:
            values[name] = closed[name][0]
            continue
        stated = stated_value(base, name, at_dbm)
        values[name] = stated if stated is not None else rough.get(name, -40.0)
    if "psat" in values and "p1db" in values:
        values["psat"] = max(values["psat"], values["p1db"] + 1.0)
    if "psat" in values:
        values["psat"] = max(values["psat"], top + 0.2)
    return values


def _uncertainty(j_fig: np.ndarray, residuals: np.ndarray) -> np.ndarray:
    """One-sigma uncertainty of each figure, ``sqrt(diag(s^2 (J^T J)^-1))`` (module
    docstring), ``s^2`` from the readings' residuals; ``inf`` for a figure in a direction
    ``J^T J`` cannot resolve."""
    n = j_fig.shape[1]
    dof = len(residuals) - n
    s2 = float(residuals @ residuals) / dof if dof > 0 else math.inf
    _u, sv, vt = np.linalg.svd(j_fig, full_matrices=False)
    tiny = sv <= sv.max() * 1e-9 if sv.size and sv.max() > 0 else np.ones_like(sv, dtype=bool)
    inv = np.where(tiny, 0.0, 1.0 / np.where(tiny, 1.0, sv) ** 2)
    var = (vt.T**2) @ inv * s2
    free = (np.abs(vt[tiny]) > 1e-6).any(axis=0) if tiny.any() else np.zeros(n, dtype=bool)
    return np.where(free, math.inf, np.sqrt(var))


def fit_figures(
    sweeps: Sequence[BenchSweep],
    stage: str | None = None,
    lineup: Lineup | None = None,
    figures: Iterable[str] | None = None,
    harmonic_at_dbm: float | None = None,
    r_ohm: float = 50.0,
) -> FigureFit:
    """Fit an amplifier's figures to bench sweeps by least squares in dB (module docstring).

    Parameters
    ----------
    sweeps : sequence of BenchSweep
        One or more sweeps of the stage (one-tone for harmonics, two-tone for IM).
    stage : str, optional
        The stage's name; default the sweeps' ``# stage`` header line.
    lineup : Lineup, optional
        A lineup with that amplifier stage: its figures start the fit where the readings
        give no closed form, and hold every figure not fitted; its pass band, gain shape
        and noise figure are kept; its impedance is used.
    figures : iterable of str, optional
        Figures to fit (:data:`FIGURES`); default :func:`default_figures`.
    harmonic_at_dbm : float, optional
        Output power (dBm) at which each fitted ``hN`` is stated; default the lineup's
        own point, else the highest output measured with that harmonic.
    r_ohm : float
        System impedance (ohm) without a lineup.

    Returns
    -------
    FigureFit

    Raises
    ------
    LineupError
        Sweeps that name different stages, a stage that is not an amplifier or whose
        figures are tables against frequency, a figure the sweeps cannot give, or too
        few readings for it.
    """
    from scipy.optimize import least_squares

    sweeps = tuple(sweeps)
    if not sweeps:
        raise LineupError("no sweep: expected at least one bench sweep file", field="{@sweeps}")
    name = _stage_name(stage, sweeps)
    template = None
    notes: list[str] = []
    forms: dict = {}
    if lineup is not None:
        template = lineup.stage_of_kind(name, Amplifier)
        if template.figure_tables:
            raise LineupError(
                f"stage {name!r} states figures in tables against frequency: expected single values to fit",
                file=None if lineup.source is None else str(lineup.source),
                field="{@stage}",
            )
        r_ohm = lineup.r_ohm
        forms = _stated_forms(lineup, name)
    base = template.figures if template is not None else None
    names = tuple(figures) if figures is not None else default_figures(sweeps)
    _check_request(names, sweeps, base)
    names = tuple(f for f in FIGURES if f in names)
    if "oip3" in names and not _quantities(sweeps) & set(_EVIDENCE["oip3"]):
        notes.append(
            "oip3 is fitted from the fundamental's compression alone (the model's cubic term, the memoryless "
            "relation): a two-tone sweep measures it directly"
        )
    if figures is None and "p1db" not in names and _input_driven_pout(sweeps):
        notes.append(
            f"the measured gain compresses by {_max_compression_db(sweeps):.2f} dB at most: P1dB and Psat are not "
            "fitted (the lineup's are held, if any)"
        )
    gain_known = None if "gain" in names else (base.gain_db if base is not None else None)
    at_dbm = _harmonic_points(names, sweeps, base, harmonic_at_dbm, gain_known)
    closed = closed_forms(sweeps, at_dbm, gain_known)
    held_inputs = {
        key: getattr(base, f"{key}_dbm") - base.gain_db
        for key in ("oip3", "oip2")
        if base is not None
        and key not in names
        and forms.get(key) == (f"i{key[1:]}",)
        and getattr(base, f"{key}_dbm") is not None
    }
    space = _Space(names, at_dbm, base, held_inputs)
    model = _Model(space, sweeps, name, r_ohm, template)
    lo, hi = space.bounds()
    x0 = np.clip(space.to_params(_start(names, closed, base, at_dbm, sweeps)), lo, hi)
    m = len(model.residuals(x0))
    if m <= len(names):
        raise LineupError(
            f"{m} readings for {len(names)} figures ({', '.join(names)}): expected more readings than figures "
            "(too few points)",
            file=", ".join(s.path for s in sweeps),
        )
    found = least_squares(
        model.residuals,
        x0,
        jac=lambda x: model.jacobian(x, lo, hi),
        bounds=(lo, hi),
        method="trf",
        # Steps below about 0.003 dB (1e-4 of a figure near 30 dBm) change nothing a
        # designer reads; the figures print to 0.01 dB.
        xtol=1e-4,
        ftol=1e-6,
        gtol=1e-8,
        max_nfev=MAX_EVALUATIONS,
    )
    converged = bool(found.status > 0)
    values = space.to_values(found.x)
    amp = model.amplifier(values)
    readings, _ = model.compare(amp)
    residuals = np.array([x.residual_db for x in readings])
    j_fig = model.jacobian(found.x, lo, hi) @ space.map_matrix()
    sigma = _uncertainty(j_fig, residuals)
    # The data's own constraint: the readings' rows only, not the consistency rows.
    influence = np.max(np.abs(j_fig[: len(readings)]), axis=0)
    start = space.to_values(x0)
    fitted = tuple(
        FittedFigure(
            name=f,
            value=values[f],
            unit=_unit(f),
            sigma_db=float(sigma[k]),
            influence_db=float(influence[k]),
            start=start[f],
            closed_form=closed.get(f, (None, 0))[0],
            closed_form_points=closed.get(f, (None, 0))[1],
            at_dbm=at_dbm.get(int(f[1:])) if f.startswith("h") else None,
        )
        for k, f in enumerate(names)
    )
    held = _held(base, names)
    for s in sweeps:
        if s.ignored:
            notes.append(
                f"{s.path}: columns not read (none of ours): {', '.join(repr(c) for c in s.ignored)}"
            )
    if template is not None and abs(template.ref_freq_hz - model.ref_hz) > 0.1 * model.ref_hz:
        notes.append(
            f"the sweeps were measured at {model.ref_hz / 1e6:.6g} MHz, the lineup's carrier reaches the stage at "
            f"{template.ref_freq_hz / 1e6:.6g} MHz: the fitted figures hold where they were measured"
        )
    notes += [f"the fitted model misses its own figure: {n}" for n in amp.notes]
    return FigureFit(
        stage=name,
        figures=fitted,
        held=held,
        amplifier=amp,
        readings=tuple(readings),
        converged=converged,
        message=str(found.message),
        evaluations=model.evaluations,
        sweeps=sweeps,
        notes=tuple(notes),
        r_ohm=r_ohm,
        forms=forms,
    )


def _unit(name: str) -> str:
    return "dB" if name == "gain" else "dBc" if name.startswith("h") else "dBm"


def _held(base: AmplifierFigures | None, names) -> dict:
    if base is None:
        return {}
    out: dict = {}
    for key in ("gain", "oip3", "oip2", "p1db", "psat"):
        v = stated_value(base, key, {})
        if key not in names and v is not None:
            out[key] = v
    for n, (dbc, at) in base.harmonics.items():
        if f"h{n}" not in names:
            out[f"h{n}"] = (dbc, at)
    for n, ohip in base.ohip_dbm.items():
        if f"h{n}" not in names:
            out[f"ohip{n}"] = ohip
    return out


def _stage_name(stage: str | None, sweeps) -> str:
    named = {s.stage for s in sweeps if s.stage is not None}
    if stage is None:
        if len(named) != 1:
            raise LineupError(
                "no stage named: expected {@stage} or a '# stage = NAME' header line"
                if not named
                else f"the sweeps name different stages ({', '.join(sorted(map(repr, named)))}): expected one",
                file=", ".join(s.path for s in sweeps),
                field="{@stage}",
            )
        return named.pop()
    other = named - {stage}
    if other:
        s = next(s for s in sweeps if s.stage in other)
        raise LineupError(
            f"its '# stage' header line names {s.stage!r}, not {{@stage}} {stage!r}: expected the sweeps of one stage",
            file=s.path,
        )
    return stage


def _stated_forms(lineup: Lineup, name: str) -> dict:
    """The keys the lineup file's stage states each intercept in, and every key it has."""
    import tomllib

    from spurplan.fields import MAX_TOML_BYTES, read_text_file

    if lineup.source is None:
        return {}
    doc = tomllib.loads(read_text_file(lineup.source, "a lineup file", MAX_TOML_BYTES))
    table = next(
        (t for t in doc.get("stage", []) if isinstance(t, dict) and t.get("name") == name),
        {},
    )
    forms: dict = {"present": tuple(table)}
    for out_key in ("oip3", "oip2"):
        stated = tuple(k for k in (out_key, "i" + out_key[1:]) if k in table)
        if stated:
            forms[out_key] = stated
    return forms


# --- the lineup with the fitted figures -----------------------------------------------------------


def readings_of(amp: Amplifier, sweeps: Sequence[BenchSweep], r_ohm: float) -> tuple[FitReading, ...]:
    """Every reading of ``sweeps`` beside what the model ``amp`` gives there.

    Parameters
    ----------
    amp : Amplifier
        A model of the stage.
    sweeps : sequence of BenchSweep
        The bench sweeps.
    r_ohm : float
        System impedance (ohm).

    Returns
    -------
    tuple of FitReading
    """
    space = _Space((), {}, amp.figures, {})
    model = _Model(space, tuple(sweeps), amp.name, r_ohm, None)
    return tuple(model.compare(amp)[0])


def fitted_lineup(fit: FigureFit, lineup: Lineup, path):
    """The lineup file with the stage's figure keys replaced by the fitted ones, checked.

    The file is edited as a TOML document (:func:`spurplan.io.lineup_edit.replace_stage_keys`):
    only the stage's figure keys change (:meth:`FigureFit.key_values`).  The new document
    is read back with the project's own loader; the stage must then state the fitted
    figures (to the 0.01 dB the file writes each key to) and its model must give the printed
    readings (rms within 0.01 dB).  A fit that did not converge or has a poorly
    determined figure is refused: a doubtful figure written into a lineup would read as
    known.  Nothing is written here (:func:`spurplan.output.fit_file.write_fitted` writes).

    Parameters
    ----------
    fit : FigureFit
        What :func:`fit_figures` found, with ``lineup``.
    lineup : Lineup
        The lineup the fit held its other figures from, loaded from a file.
    path : str or Path
        The file to write (may be the lineup's own file).

    Returns
    -------
    EditedLineup

    Raises
    ------
    LineupError
        One line, and nothing written, on any refusal or mismatch.
    """
    from pathlib import Path

    from spurplan.io.lineup_edit import replace_stage_keys
    from spurplan.io.lineup_file import from_dict

    target = Path(path)

    def refuse(message: str) -> LineupError:
        return LineupError(message, file=str(target), field="{@path}")

    if lineup.source is None:
        raise refuse("the lineup was not read from a file: expected a lineup file to edit")
    if not fit.converged:
        raise refuse(f"the fit did not converge ({fit.message}): nothing written")
    doubtful = fit.poorly_determined
    if doubtful:
        names = ", ".join(f.name for f in doubtful)
        raise refuse(
            f"{names} {'is' if len(doubtful) == 1 else 'are'} poorly determined ({doubtful[0].why_poorly_determined}): "
            "expected {@figures} without it (the lineup's value is then held) or sweeps that determine it; nothing written"
        )
    folder = target.parent if str(target.parent) else Path(".")
    if not folder.is_dir():
        raise refuse(f"the folder {folder} does not exist: expected an existing folder")
    position = lineup.stage_index(fit.stage) - 1
    edited = replace_stage_keys(lineup.source, target, position, fit.key_values())
    written = from_dict(edited.doc, name=str(target), base_dir=target.parent, source=target)
    stage = written.stage_of_kind(fit.stage, Amplifier)
    want = fit.amplifier.figures
    got = stage.figures
    pairs = [
        ("gain", got.gain_db, want.gain_db),
        ("oip3", got.oip3_dbm, want.oip3_dbm),
        ("oip2", got.oip2_dbm, want.oip2_dbm),
        ("p1db", got.p1db_dbm, want.p1db_dbm),
        ("psat", got.psat_dbm, want.psat_dbm),
    ]
    pairs += [(f"h{n}", got.harmonics.get(n, (None,))[0], dbc) for n, (dbc, _) in want.harmonics.items()]
    for key, a, b in pairs:
        if (a is None) != (b is None) or (a is not None and abs(a - b) > 0.011):
            raise refuse(f"the written stage would state {key} {a} where the fit found {b}: nothing written")
    again = readings_of(replace(stage, ref_freq_hz=fit.amplifier.ref_freq_hz), fit.sweeps, written.r_ohm)
    rms = float(np.sqrt(np.mean([x.residual_db**2 for x in again])))
    if not abs(rms - fit.rms_db) <= 0.01:
        raise refuse(
            f"the written stage's model gives an rms residual of {rms:.3f} dB where the fit gave {fit.rms_db:.3f} dB: "
            "nothing written"
        )
    return edited
