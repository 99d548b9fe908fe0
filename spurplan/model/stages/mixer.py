"""Mixer stage: upconversion with its m x n spurs, LO and IF leakage, image and IF compression.

Keys::

    kind = "mixer"
    lo = { freq = "1.6 GHz", power = "+7 dBm" }
    conversion_gain = "-6.5 dB"        # or conversion_loss = "6.5 dB" (small-signal)
    sideband = "upper" | "lower"       # wanted product: LO + IF or LO - IF
    lo_isolation = "35 dB"             # LO-to-RF: LO leakage = LO power - isolation
    if_isolation = "40 dB"             # IF-to-RF: IF leakage = IF power - isolation
    image_rejection = "0 dB"           # other 1x1 sideband below the wanted (0: double-sideband)
    p1db = "+1 dBm"                    # input-referred (IF port) 1 dB compression; or
    iip3 = "+10 dBm"                   # input-referred (IF port) two-tone IP3
    spur_drive = "-10 dBm"             # IF drive at which the spur table holds
    spurs = { "2LO-IF" = "-40 dBc", "LO+2IF" = "-55 dBc", "2LO" = "-25 dBc", "2IF" = "-50 dBc" }

Model.  The LO is one more base tone of the engine.  With ``z`` the analytic IF
signal at the mixer input (each product at its positive frequency; for one IF tone
``z = A exp(j theta_IF)``) and ``w = z g(|z|)`` that signal after the IF port's
compression (``w = z`` without ``p1db`` / ``iip3``), the output is
``Re sum c_mn exp(j m theta_LO) w^n`` (and ``conj(w)^|n|`` for ``m LO - |n| IF``).
For one IF tone each term is exactly one product, at ``|m f_LO + n f_IF|``, with the
level ``L_mn`` of the table at the stated drive and a level that moves by ``|n|`` dB
per dB of IF drive below compression: ``|n| - 1`` dB in dBc (the usual rule; common
practice, no source).  LO harmonics (``n = 0``) do not move with IF drive.  The table
is a measurement at ``spur_drive``, so it holds there exactly, compression included:
with ``A_ref`` the peak voltage of ``spur_drive``, ``g_ref = g(A_ref)`` and ``A_w`` the
small-signal wanted output there, ``c_mn = A_w g_ref 10^(L_mn/20) / (A_ref g_ref)^|n|``
(dBc are relative to the wanted output as compressed at ``spur_drive``).  The entry
"IF" (``m = 0, n = 1``) is the IF feedthrough; ``if_isolation`` sets it to
``-isolation - conversion gain`` dBc, i.e. IF leakage = IF power - isolation below
compression.  ``lo_isolation`` sets "LO" to ``LO power - isolation`` dBm absolute.

Compression (IF port).  ``g`` is a smooth limiter of Rapp form on the envelope
(Rapp 1991; from memory)::

    g(r) = 1 / (1 + (r / r_c)^(2 s))^(1 / (2 s)),   s = 1

applied before the conversion terms, so the wanted product, the image, the IF
feedthrough and every m x n spur see the compressed envelope (spurs flatten in
compression too) and several IF carriers intermodulate (``|w|^2 w`` terms: ``LO + 2 IF1 -
IF2`` ...).  ``s = 1`` because it is the only integer smoothness whose leading
envelope term is cubic, so IM3 rises 3 dB per dB at low drive; a sharper knee
(``s >= 2``) would start at fifth order and show no low-drive IM3.

* ``p1db``: for one IF tone ``|z| = A`` is constant, so the wanted output is
  compressed by exactly ``g(A)``; 1 dB at ``A_1`` means ``(A_1 / r_c)^(2 s) =
  10^(s / 10) - 1``, solved for ``r_c`` in closed form (no fit needed; a drive sweep
  in the tests checks it).
* ``iip3``: with ``s = 1``, ``g(r) = 1 - r^2 / (2 r_c^2) + O(r^4)``.  Two tones
  ``z = A (e1 + e2)`` (``ek = exp(j theta_k)``) give ``|z|^2 z = A^3 (3 e1 + 3 e2 +
  e1^2 conj(e2) + e2^2 conj(e1))``, so ``w`` holds ``-A^3 / (2 r_c^2)`` at ``2 IF1 - IF2``
  against ``A`` at each tone; the wanted term carries both by the same ``c``.  The
  extrapolated lines meet where ``A = A^3 / (2 r_c^2)``: ``A_IIP3^2 = 2 r_c^2``, i.e.
  ``r_c = A_IIP3 / sqrt(2)`` (the knee power is IIP3 - 3.01 dB).  Then ``IM3 = 3 Pin -
  2 IIP3`` (input-referred; Razavi, RF Microelectronics 2e, ch. 2; from memory).
* Both: this model ties them, ``IIP3 - P1dB = 3.01 - 10 log10(10^0.1 - 1) = 8.88 dB``.
  If the two figures agree with that within 0.5 dB, ``p1db`` sets the knee; otherwise
  the stage is refused with a message asking for one of them (``p1db`` where the IF is
  driven near compression, ``iip3`` where IF intermodulation at low drive sets the
  margin).  Fitting both would need a second shape parameter that keeps the cubic term.

Several IF tones make an envelope that is no longer constant, so ``w`` has products of
every order; :meth:`MixerModel.convert` then doubles its torus grid until the kept
products agree between grids (the engine's ``CONVERGENCE_RTOL`` and floor).  With one
tone the compressed term is an exact polynomial and the first grid is exact.

Unstated figures (:meth:`Mixer.missing_figures` lists them; the stage is incomplete):

* no ``lo_isolation`` (nor "LO" in ``spurs``): no LO leakage at the output;
* no spur table (no ``spurs`` entry beyond the wanted, image, LO and IF): only the
  wanted product, the image and the stated leakages are made;
* no ``p1db`` / ``iip3``: linear in IF drive (no compression, no IF intermodulation);
* no ``if_isolation`` (nor "IF" in ``spurs``): no IF feedthrough at the output.

No ``image_rejection`` means a double-sideband mixer (the image at the wanted level),
which is the conservative reading and not flagged.

The mixer has no linear passage: its whole output counts as its own contribution,
so products converted from earlier stages are attributed to the mixer.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, replace

import numpy as np

from spurplan.fields import CARRIER_FREQ, NOISE_FIGURE, Fields, Within
from spurplan.model.nonlinear import per_sample
from spurplan.model.stages.base import (
    DB,
    NONPOLYNOMIAL_DEGREE,
    CascadeFigures,
    Conversion,
    LoadContext,
    SampledStage,
    StageDefaults,
)
from spurplan.model.torus_grid import (
    CONVERGENCE_FLOOR,
    CONVERGENCE_RTOL,
    MAX_GRID_POINTS,
    alias_free_grid,
    torus_analytic,
    torus_coefficients,
)
from spurplan.units import dbm_to_vpeak, parse_dbc, parse_freq_hz, parse_gain_db, parse_power_dbm

# Matched against the stripped label with fullmatch.  Each run of spaces can go to one
# quantifier only (every "\s*" follows a token that must be there), so the time is
# linear in the length; the earlier form, with optional digits and signs between
# adjacent "\s*", took over a minute for 500 spaces.
_SPUR = re.compile(r"(?:(?:(\d+)\s*)?LO)?\s*(?:(?:([+-])\s*)?(?:(\d+)\s*)?IF)?", re.IGNORECASE)
MAX_SPUR_ORDER = 15

# Physical-sense ranges of the keys (README, "Plausible values"; common practice, no
# source).  LO drive: active mixers take about -10 dBm, diode and FET rings +7 to
# +27 dBm; below -20 dBm no mixer switches, so the stated conversion gain cannot hold.
LO_FREQ = replace(CARRIER_FREQ, what="an LO frequency", why="")
LO_DRIVE = Within(
    "an LO drive", -20.0, 30.0, "dBm", "the stated conversion gain holds only with the LO port driven"
)
CONVERSION_GAIN = Within("a conversion gain", -40.0, 30.0, "dB")
CONVERSION_LOSS = Within(
    "a conversion loss", 0.0, 40.0, "dB", "a mixer with gain states conversion_gain instead"
)
# Isolations and image rejection of real mixers lie between 15 and 70 dB; 100 dB is the
# ratio parser's ceiling.
ISOLATION = Within("an isolation", 0.0, 100.0, "dB", "a port cannot leak more than it is driven with")
IMAGE_REJECTION = Within("an image rejection", 0.0, 100.0, "dB", "0 dB: double-sideband")
# IF port: the compression figures and the drive of the spur table.
IF_P1DB = Within("an IF-port 1 dB compression point", -40.0, 40.0, "dBm")
IF_IIP3 = Within("an IF-port IIP3", -40.0, 50.0, "dBm")
SPUR_DRIVE = Within("the IF drive of the spur table", -80.0, 30.0, "dBm")
# Conversion products (m >= 1, n != 0) are measured below the wanted product: a spur
# table entry above it is a sign slip.  LO products (n = 0) and the IF's own (m = 0)
# are absolute leaks and may exceed a weak wanted output; they are bounded by the drive
# of their port instead (:func:`_check_leaks`).
SPUR_DBC = Within("a spur level", -200.0, 0.0, "dBc", "at or below the wanted product")
LEAK_DBC = Within("a leakage level", -200.0, 200.0, "dBc")


def parse_spur_label(text: str) -> tuple[int, int]:
    """``"2LO-IF"`` -> (2, -1); ``"LO+3IF"`` -> (1, 3); ``"2LO"`` -> (2, 0); ``"2IF"`` -> (0, 2)."""
    m = _SPUR.fullmatch((text or "").strip())
    if not m or (m.group(0).strip() == "") or ("LO" not in text.upper() and "IF" not in text.upper()):
        raise ValueError(text)
    lo_part = "lo" in text.lower()
    if_part = "if" in text.lower()
    m_lo = (int(m.group(1)) if m.group(1) else 1) if lo_part else 0
    n_if = (int(m.group(3)) if m.group(3) else 1) if if_part else 0
    if if_part and lo_part and not m.group(2):
        raise ValueError(text)
    if m.group(2) == "-":
        n_if = -n_if
    if m_lo == 0 and n_if < 0:
        raise ValueError(text)
    return m_lo, n_if


# The IF envelope limiter's smoothness: 1 keeps a cubic leading term (module docstring).
SMOOTHNESS = 1
# IIP3 - P1dB of the limiter with s = 1: 10 log10(2) - 10 log10(10^0.1 - 1) dB (derived
# in the module docstring).
IIP3_OVER_P1DB_DB = 10 * math.log10(2.0) - 10 * math.log10(10**0.1 - 1.0)
# Relative spread of |z|^2 over the grid below which the envelope counts as constant
# (one IF tone): the compressed term is then an exact polynomial in z.
_CONSTANT_ENVELOPE = 1e-12


def knee_from_p1db_v(p1db_dbm: float, r_ohm: float, smoothness: int = SMOOTHNESS) -> float:
    """Envelope knee ``r_c`` (peak V) whose one-tone compression is 1 dB at ``p1db_dbm``.

    One tone has a constant envelope ``A``, so the wanted output is compressed by
    ``g(A)`` exactly: ``(A / r_c)^(2 s) = 10^(s / 10) - 1`` (from the Rapp form).

    Parameters
    ----------
    p1db_dbm : float
        Input-referred 1 dB compression point (dBm).
    r_ohm : float
        System impedance (ohm).
    smoothness : int
        Rapp smoothness ``s``.

    Returns
    -------
    float
        The knee ``r_c`` (V peak).
    """
    a_1db = float(dbm_to_vpeak(p1db_dbm, r_ohm))
    return a_1db / (10 ** (smoothness / 10) - 1.0) ** (1.0 / (2 * smoothness))


def knee_from_iip3_v(iip3_dbm: float, r_ohm: float) -> float:
    """Envelope knee ``r_c`` (peak V) for an input-referred IIP3: ``r_c = A_IIP3 / sqrt(2)``
    (``s = 1``; derivation in the module docstring).

    Parameters
    ----------
    iip3_dbm : float
        Input-referred third-order intercept (dBm).
    r_ohm : float
        System impedance (ohm).

    Returns
    -------
    float
        The knee ``r_c`` (V peak).
    """
    return float(dbm_to_vpeak(iip3_dbm, r_ohm)) / math.sqrt(2.0)


def envelope_gain(r2, knee_v: float, smoothness: int = SMOOTHNESS):
    """Rapp-form envelope gain ``g = (1 + (r / r_c)^(2 s))^(-1 / (2 s))`` from ``r2 = r^2`` (V^2).

    Parameters
    ----------
    r2 : float or array_like
        Squared envelope ``r^2`` (V^2).
    knee_v : float
        Knee ``r_c`` (V peak).
    smoothness : int
        Rapp smoothness ``s``.

    Returns
    -------
    ndarray
        Dimensionless gain ``g`` in (0, 1], the shape of ``r2``.
    """
    u = np.asarray(r2) / knee_v**2
    return (1.0 + u**smoothness) ** (-1.0 / (2 * smoothness))


def _rows(value, rows):
    """A per-sample parameter cut to the batch elements ``rows`` (scalars pass through)."""
    return value if np.ndim(value) == 0 else np.asarray(value)[rows]


@dataclass(frozen=True)
class MixerModel:
    """The conversion terms of a mixer and its IF compression (see the module docstring).

    Attributes
    ----------
    terms : tuple of (m, n, c)
        ``m`` LO order, ``n`` signed IF order, ``c`` coefficient in V^(1-|n|) (scalar,
        or one per batch element for Monte Carlo samples).
    lo_index : int
        Which base tone is this mixer's LO.
    knee_v : float or None
        Envelope knee ``r_c`` of the IF-port limiter (peak V); ``None``: no compression.
    smoothness : int
        Rapp smoothness ``s`` of the limiter.
    name : str
        The stage's name, for errors.
    """

    terms: tuple[tuple[int, int, float | np.ndarray], ...]
    lo_index: int
    knee_v: float | None = None
    smoothness: int = SMOOTHNESS
    name: str = ""

    gain = 0.0
    degree = None
    valid_peak_v = (-math.inf, math.inf)

    def convert(self, x_phasors: np.ndarray, mix: np.ndarray, freqs_hz: np.ndarray) -> np.ndarray:
        """Output phasors (B, P) for input phasors (B, P).

        Without compression, and with compression of a constant envelope (one IF tone),
        the output is a polynomial in ``z``, ``conj z`` and the LO, computed exactly on an
        alias-free grid.  Otherwise the grid doubles, for the batch elements that have not
        settled, until successive grids agree as in :func:`spurplan.engine.torus.apply_memoryless`.

        Parameters
        ----------
        x_phasors : ndarray, complex, shape (B, P)
            Input peak phasors (V) of the canonical products ``mix``.
        mix : ndarray of int, shape (P, K)
            Canonical mixing vectors, the LO among the base tones.
        freqs_hz : ndarray, shape (B, P)
            Signed product frequencies (Hz).

        Returns
        -------
        ndarray, complex, shape (B, P)
            Output peak phasors (V).
        """

        active = np.any(x_phasors != 0, axis=0)
        keep = np.abs(mix).max(axis=0)
        m_in = np.abs(mix[active]).max(axis=0) if active.any() else np.ones_like(keep)
        n_max = max(abs(n) for _, n, _ in self.terms)
        m_max = max(m for m, _, _ in self.terms)
        # With compression, room for one cubic envelope term more; either way the grid
        # exceeds 2 m_in, so |z|^2 (indices up to 2 m_in) is sampled without aliases and a
        # constant envelope on the grid is constant everywhere.  Per axis: the LO's axis
        # also holds the LO harmonics m_max.
        degree = max(n_max, 1) + (2 if self.knee_v is not None else 0)
        size = []
        for axis, (i, o) in enumerate(zip(m_in, keep, strict=True)):
            i, o = max(int(i), 1), max(int(o), 1)
            lo_terms = m_max if axis == self.lo_index else 0
            size.append(alias_free_grid(1, max(alias_free_grid(degree, i, o), i + lo_terms + o + 1), 0))
        shape = tuple(size)
        rows = np.arange(x_phasors.shape[0])
        y, exact = self._evaluate(x_phasors, mix, freqs_hz, shape, rows)
        if self.knee_v is None:
            return y
        todo = rows[~exact]
        while todo.size and math.prod(shape) * 2 ** len(shape) <= MAX_GRID_POINTS:
            shape = tuple(2 * v for v in shape)
            y2, _ = self._evaluate(x_phasors[todo], mix, freqs_hz[todo], shape, todo)
            scale = np.abs(y2).max(axis=1, keepdims=True)
            ok = np.all(
                np.abs(y2 - y[todo]) <= CONVERGENCE_RTOL * np.abs(y2) + CONVERGENCE_FLOOR * scale, axis=1
            )
            y[todo] = y2
            todo = todo[~ok]
        if todo.size:
            from spurplan.errors import LineupError

            raise LineupError(
                f"the IF compression model did not settle on {'x'.join(map(str, shape))} grid points: "
                "expected fewer IF carriers or a lower max_order",
                stage=f"stage {self.name!r}",
            )
        return y

    def _evaluate(self, x_phasors, mix, freqs_hz, size: tuple[int, ...], rows: np.ndarray):
        """Output phasors on a grid of ``size`` points per axis, in batch chunks, and whether
        each element's envelope is constant (so that this grid is exact)."""

        chunk = max(1, MAX_GRID_POINTS // math.prod(size))
        parts = [
            self._evaluate_chunk(
                x_phasors[s : s + chunk], mix, freqs_hz[s : s + chunk], size, rows[s : s + chunk]
            )
            for s in range(0, len(x_phasors), chunk)
        ]
        return tuple(np.concatenate(arrays) for arrays in zip(*parts, strict=True))

    def _evaluate_chunk(self, x_phasors, mix, freqs_hz, size: tuple[int, ...], rows: np.ndarray):
        z = torus_analytic(x_phasors, mix, freqs_hz, size)
        batch = z.shape[0]
        exact = np.ones(batch, dtype=bool)
        if self.knee_v is not None:
            r2 = (z.real**2 + z.imag**2).reshape(batch, -1)
            top = r2.max(axis=1)
            exact = top - r2.min(axis=1) <= _CONSTANT_ENVELOPE * top
            z = z * envelope_gain(r2, self.knee_v, self.smoothness).reshape(z.shape)
        k = mix.shape[1]
        shape = [1] * (k + 1)
        n_lo = size[self.lo_index]
        shape[1 + self.lo_index] = n_lo
        lo = np.exp(2j * np.pi * np.arange(n_lo) / n_lo).reshape(shape)
        y = np.zeros(z.shape)
        for m, n, c in self.terms:
            base = np.ones_like(z) if n == 0 else (z ** abs(n) if n > 0 else np.conj(z) ** abs(n))
            y += np.real(per_sample(_rows(c, rows), z) * lo**m * base)
        return torus_coefficients(y, mix), exact

    def scaled(self, gain_delta_db: np.ndarray) -> MixerModel:
        """Every term moved by a per-sample conversion-gain shift (dB, (B,)).

        The compression stays where it is: it belongs to the IF port, before conversion.
        """
        k = 10 ** (np.asarray(gain_delta_db) / 20)
        return replace(self, terms=tuple((m, n, c * k) for m, n, c in self.terms))


@dataclass(frozen=True)
class Mixer(StageDefaults):
    """An upconverting mixer stage.

    Attributes
    ----------
    lo_freq_hz, lo_power_dbm : float
        LO frequency (Hz) and drive (dBm).
    conversion_gain_db : float
        Small-signal conversion gain (dB).
    sideband : {"upper", "lower"}
    table : dict of (m, n) -> dBc
        Levels relative to the wanted output at ``spur_drive_dbm`` (as compressed
        there), including the image and the LO and IF leakage as derived from the figures.
    spur_drive_dbm : float
        IF drive of the table (dBm).
    transfer : MixerModel
    lo_isolation_db, if_isolation_db : float or None
        LO-to-RF and IF-to-RF isolation (dB) as given.
    p1db_dbm, iip3_dbm : float or None
        Input-referred (IF port) P1dB and IIP3 (dBm) as given.
    tabulated : frozenset of (m, n)
        The products the ``spurs`` table itself names.
    """

    name: str
    lo_freq_hz: float
    lo_power_dbm: float
    conversion_gain_db: float
    sideband: str
    table: dict
    spur_drive_dbm: float
    transfer: MixerModel
    notes: tuple[str, ...] = ()
    lo_isolation_db: float | None = None
    noise_figure_db: float | None = None
    if_isolation_db: float | None = None
    p1db_dbm: float | None = None
    iip3_dbm: float | None = None
    tabulated: frozenset = frozenset()

    kind = "mixer"
    data_range_hz = None

    @property
    def conversion(self) -> Conversion:
        """LO, wanted sideband and conversion gain."""
        return Conversion(self.lo_freq_hz, self.sideband, self.conversion_gain_db)

    @property
    def grid_degree(self) -> int:
        """The highest ``m + |n|`` of the conversion terms, at least :data:`NONPOLYNOMIAL_DEGREE`."""
        return max(NONPOLYNOMIAL_DEGREE, max(abs(n) + m for m, n, _ in self.transfer.terms))

    def describe_figures(self) -> str:
        """LO, conversion gain, sideband and spur table as stated, in one line."""
        return (
            f"LO {self.lo_freq_hz / 1e6:g} MHz at {self.lo_power_dbm:+g} dBm, conversion gain "
            f"{self.conversion_gain_db:+g} dB, {self.sideband} sideband wanted, {len(self.table)} spur-table terms "
            f"at {self.spur_drive_dbm:+g} dBm IF"
        )

    def cascade_figures(self, r_ohm: float) -> CascadeFigures:
        """The stated noise figure (SSB, dB), for the cascaded noise figure.

        Parameters
        ----------
        r_ohm : float
            System impedance (ohm).

        Returns
        -------
        CascadeFigures
        """
        return CascadeFigures(noise_figure_db=self.noise_figure_db)

    def spread_figures(self) -> dict[str, str]:
        """The conversion gain, in dB."""
        return {"conversion_gain": DB}

    def sampled(self, deltas: dict[str, np.ndarray], n: int, r_ohm: float) -> SampledStage:
        """The mixer with every sample's conversion gain (:meth:`MixerModel.scaled`).

        Parameters
        ----------
        deltas : dict of str -> ndarray (n,)
            ``conversion_gain`` shift per sample (dB).
        n : int
            Samples in the batch.
        r_ohm : float
            System impedance (ohm).

        Returns
        -------
        SampledStage
        """
        return SampledStage(
            self.name,
            self.transfer.scaled(deltas["conversion_gain"]),
            self.response,
            conversion=self.conversion,
        )

    def missing_figures(self) -> tuple[str, ...]:
        """The figure classes this mixer's file does not state (what is then assumed is in
        the module docstring: no LO leakage, no m x n spurs, linear in IF drive, no IF
        feedthrough)."""
        image = (1, -self.wanted[1])
        own = {self.wanted, image, (1, 0), (0, 1)}
        missing = []
        if self.lo_isolation_db is None and (1, 0) not in self.tabulated:
            missing.append("LO isolation (lo_isolation)")
        if not self.tabulated - own:
            missing.append("spur table (spurs with spur_drive)")
        if self.p1db_dbm is None and self.iip3_dbm is None:
            missing.append("compression (p1db or iip3)")
        if self.if_isolation_db is None and (0, 1) not in self.tabulated:
            missing.append("IF feedthrough (if_isolation or spurs 'IF')")
        if self.noise_figure_db is None:
            missing.append("noise figure (noise_figure)")
        return tuple(missing)

    @property
    def gain_db(self) -> float:
        return self.conversion_gain_db

    @property
    def wanted(self) -> tuple[int, int]:
        """(m, n) of the wanted product."""
        return (1, 1) if self.sideband == "upper" else (1, -1)

    def response(self, freq_hz: np.ndarray) -> np.ndarray:
        """No linear passage: the IF does not reach the output unconverted."""
        return np.zeros(np.shape(freq_hz), dtype=complex)

    def with_lo_index(self, index: int) -> Mixer:

        return replace(self, transfer=replace(self.transfer, lo_index=index))

    @classmethod
    def from_fields(cls, fields: Fields, context: LoadContext) -> Mixer:
        """The mixer stage read from its lineup table.

        Parameters
        ----------
        fields : Fields
            Reader of the stage's lineup table, which locates its errors.
        context : LoadContext
            Lineup-wide settings: system impedance (ohm), the lineup file's folder, the policy
            beyond data ranges, the reference carrier's frequency (Hz).

        Returns
        -------
        Mixer

        Raises
        ------
        LineupError
            Naming the file, stage and field of a missing or unacceptable value.
        """
        name = fields.raw("name")
        lo_raw = fields.raw("lo")
        if not isinstance(lo_raw, dict):
            raise fields.error("lo", f"{lo_raw!r}: expected a table {{ freq = '...', power = '...' }}")
        lo = Fields(lo_raw, fields.file, f"{fields.where} lo")
        lo_freq = lo.quantity("freq", parse_freq_hz, required=True, within=LO_FREQ)
        lo_power = lo.quantity("power", parse_power_dbm, required=True, within=LO_DRIVE)
        lo.finish()
        gain = fields.quantity("conversion_gain", parse_gain_db, within=CONVERSION_GAIN)
        loss = fields.quantity("conversion_loss", parse_gain_db, within=CONVERSION_LOSS)
        if (gain is None) == (loss is None):
            raise fields.error(
                "conversion_gain", "expected exactly one of 'conversion_gain' or 'conversion_loss'"
            )
        gain = gain if gain is not None else -loss
        sideband = fields.text("sideband", default="upper", choices=("upper", "lower"))
        isolation = fields.quantity("lo_isolation", parse_gain_db, within=ISOLATION)
        if_isolation = fields.quantity("if_isolation", parse_gain_db)
        if if_isolation is not None and if_isolation < 0:
            raise fields.error(
                "if_isolation", f"{fields.raw('if_isolation')!r}: expected an isolation >= 0 dB"
            )
        if if_isolation is not None:
            fields.require_within("if_isolation", if_isolation, ISOLATION)
        image_rej = fields.quantity("image_rejection", parse_gain_db, within=IMAGE_REJECTION)
        noise_figure = fields.quantity("noise_figure", parse_gain_db, within=NOISE_FIGURE)
        p1db, iip3, knee = _compression(fields, context.r_ohm)
        drive = fields.quantity("spur_drive", parse_power_dbm, within=SPUR_DRIVE)
        raw = fields.raw("spurs", {})
        if not isinstance(raw, dict):
            raise fields.error("spurs", f'{raw!r}: expected a table such as {{ "2LO-IF" = "-40 dBc" }}')
        if raw and drive is None:
            raise fields.error(
                "spur_drive", "is required with 'spurs': expected the IF drive of the table, e.g. '-10 dBm'"
            )
        drive = -10.0 if drive is None else drive
        table = _spur_table(fields, raw)
        tabulated = frozenset(table)
        wanted = (1, 1) if sideband == "upper" else (1, -1)
        image = (1, -wanted[1])
        if wanted in table and abs(table[wanted]) > 1e-9:
            raise fields.error(
                "spurs", f"{spur_label(*wanted)} is the wanted product: expected 0 dBc or no entry"
            )
        table[wanted] = 0.0
        if image_rej is not None:
            if image in table and abs(table[image] + image_rej) > 0.5:
                raise fields.error(
                    "image_rejection", f"{image_rej:g} dB disagrees with spurs {spur_label(*image)}"
                )
            table[image] = -image_rej
        table.setdefault(image, 0.0)
        a_ref = float(dbm_to_vpeak(drive, context.r_ohm))
        # The table is measured at spur_drive: dBc relative to the wanted output as
        # compressed there, by g_ref (1 without compression).
        g_ref = 1.0 if knee is None else float(envelope_gain(a_ref**2, knee))
        wanted_dbm = drive + gain + 20 * math.log10(g_ref)
        _check_leaks(fields, raw, table, wanted_dbm, lo_power, drive)
        if isolation is not None:
            leak_dbc = lo_power - isolation - wanted_dbm
            if (1, 0) in table and abs(table[(1, 0)] - leak_dbc) > 0.5:
                raise fields.error(
                    "lo_isolation", f"{isolation:g} dB disagrees with spurs LO {table[(1, 0)]:g} dBc"
                )
            table[(1, 0)] = leak_dbc
        if if_isolation is not None:
            # IF out - wanted = (P_IF - isolation) - (P_IF + gain), both through the same
            # compressed envelope: independent of the drive.
            feed_dbc = -if_isolation - gain
            if (0, 1) in table and abs(table[(0, 1)] - feed_dbc) > 0.5:
                raise fields.error(
                    "if_isolation",
                    f"{if_isolation:g} dB disagrees with spurs IF {table[(0, 1)]:g} dBc "
                    f"(expected about {feed_dbc:g} dBc with conversion gain {gain:g} dB)",
                )
            table[(0, 1)] = feed_dbc
        a_w = float(dbm_to_vpeak(drive + gain, context.r_ohm)) * g_ref
        a_env = a_ref * g_ref
        terms = tuple(
            (m, n, a_w * 10 ** (dbc / 20) / a_env ** abs(n)) for (m, n), dbc in sorted(table.items())
        )
        return cls(
            name=name,
            noise_figure_db=noise_figure,
            lo_freq_hz=lo_freq,
            lo_power_dbm=lo_power,
            conversion_gain_db=gain,
            sideband=sideband,
            table=table,
            spur_drive_dbm=drive,
            transfer=MixerModel(terms=terms, lo_index=0, knee_v=knee, name=name),
            lo_isolation_db=isolation,
            if_isolation_db=if_isolation,
            p1db_dbm=p1db,
            iip3_dbm=iip3,
            tabulated=tabulated,
        )


def _compression(fields: Fields, r_ohm: float) -> tuple[float | None, float | None, float | None]:
    """``p1db``, ``iip3`` (dBm, as given) and the envelope knee (peak V, or None)."""
    p1db = fields.quantity("p1db", parse_power_dbm, within=IF_P1DB)
    iip3 = fields.quantity("iip3", parse_power_dbm, within=IF_IIP3)
    if p1db is not None and iip3 is not None and abs(iip3 - (p1db + IIP3_OVER_P1DB_DB)) > 0.5:
        raise fields.error(
            "iip3",
            f"{fields.raw('iip3')!r} with p1db {fields.raw('p1db')!r}: the IF compression model ties "
            f"IIP3 = P1dB + {IIP3_OVER_P1DB_DB:.2f} dB ({p1db + IIP3_OVER_P1DB_DB:+.2f} dBm here); "
            "expected only one of them: p1db where the IF is driven near compression, iip3 where "
            "IF intermodulation at low drive sets the margin",
        )
    if p1db is not None:
        return p1db, iip3, knee_from_p1db_v(p1db, r_ohm)
    if iip3 is not None:
        return p1db, iip3, knee_from_iip3_v(iip3, r_ohm)
    return None, None, None


def spur_label(m: int, n: int) -> str:
    """``(2, -1)`` -> ``"2LO-IF"``; the trade's names for mixer products.

    Parameters
    ----------
    m : int
        LO harmonic (>= 0).
    n : int
        IF (input) harmonic, signed.

    Returns
    -------
    str
        The label; ``""`` for ``(0, 0)``.
    """
    lo = "" if m == 0 else ("LO" if m == 1 else f"{m}LO")
    if n == 0:
        return lo
    mag = "IF" if abs(n) == 1 else f"{abs(n)}IF"
    if not lo:
        return mag
    return f"{lo}{'+' if n > 0 else '-'}{mag}"


def _spur_table(fields: Fields, raw: dict) -> dict:
    from spurplan.errors import UnitError

    table = {}
    for key, value in raw.items():
        try:
            m, n = parse_spur_label(key)
        except ValueError:
            raise fields.error(
                "spurs", f"{key!r}: expected a product such as '2LO-IF', 'LO+3IF', '2LO' or '2IF'"
            ) from None
        if m + abs(n) > MAX_SPUR_ORDER:
            raise fields.error("spurs", f"{key!r}: expected an order m + |n| up to {MAX_SPUR_ORDER}")
        try:
            level = parse_dbc(value)
        except UnitError as exc:
            raise fields.error(
                "spurs", f"{key} = {value!r}: expected a level in dBc, e.g. '-40 dBc'{exc.hint}"
            ) from None
        within = SPUR_DBC if m >= 1 and n != 0 else LEAK_DBC
        if level not in within:
            raise fields.error("spurs", f"{key} = {value!r}: {within.expected()}")
        table[(m, n)] = level
    return table


def _check_leaks(fields: Fields, raw: dict, table: dict, wanted_dbm: float, lo_dbm: float, drive_dbm: float):
    """LO products (n = 0) at most the LO drive, the IF's own (m = 0) at most the IF drive.

    Both are leaks through a passive path or the port's own distortion, so at the
    output they cannot be stronger than what drives that port (isolation >= 0 dB,
    the bound of :data:`ISOLATION`).  The table states them relative to the wanted
    output at ``spur_drive``, ``wanted_dbm`` (dBm).
    """
    names = {parse_spur_label(k): k for k in raw}
    for (m, n), dbc in table.items():
        if n != 0 and m != 0:
            continue
        port, port_dbm = ("LO", lo_dbm) if n == 0 else ("IF", drive_dbm)
        if wanted_dbm + dbc > port_dbm + 1e-9:
            key = names.get((m, n), spur_label(m, n))
            raise fields.error(
                "spurs",
                f"{key} = {raw.get(key)!r} is {wanted_dbm + dbc:+.2f} dBm at the output, above the {port} drive "
                f"({port_dbm:+.2f} dBm): expected a leak at or below the drive of its port",
            )
