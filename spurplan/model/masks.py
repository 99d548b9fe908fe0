"""Emission limits: rules over frequency ranges, protected bands, and their evaluation.

A :class:`Rule` applies over ``[start_hz, stop_hz]`` and is one of

``absolute``     a level in a reference bandwidth, e.g. -36 dBm in 100 kHz;
``relative``     relative to the mean carrier power, e.g. -60 dBc (optionally held
                 between an absolute floor and ceiling, as some amateur rules are);
``attenuation``  at least ``A + 10 log10(P / 1 W)`` dB below the mean power P, or
                 ``cap`` dB, whichever is less stringent (ITU-R SM.329 category A
                 form; 43 + 10 log P is the same as -13 dBm absolute);
``field``        a radiated field strength at a distance, turned into EIRP by
                 ``E[dBuV/m] = EIRP[dBm] + 104.77 - 20 log10(d / 1 m)`` (free-space far
                 field, ITU-R P.525 eq. (1) in dB form) and into a conducted level by
                 subtracting the antenna gain; ``"2400/F uV/m"`` forms (F in kHz) are
                 supported for the low-frequency rows of 47 CFR 15.209.

Rules may hold only for some carriers: ``when_carrier_hz`` (the carrier frequency
range) and ``when_power_dbm`` (the carrier's mean power range), as in 47 CFR 97.307.

Where rules overlap the most stringent holds: the one that leaves the least
margin for the product at hand (reference bandwidths may differ).

An :class:`AdjacentChannelRule` limits the power in channels beside each carrier
rather than a product's level: the adjacent-channel power ratio (ACPR), the power in
a channel of stated bandwidth centred at stated offsets either side of the carrier,
relative to the carrier's own power (dBc), and optionally that power in dBm.

A product of carriers with occupied bandwidths ``B_k`` spreads over about
``sum |m_k| B_k`` (the convolution of the carrier spectra has that width).  The check
judges a product of carriers without a modulation with its whole power in the rule's
reference bandwidth (conservative); with a modulation it judges the output spectrum's
lines in each RBW (:mod:`spurplan.engine.spectra`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Literal

import numpy as np

RuleKind = Literal["absolute", "relative", "attenuation", "field"]
# 120 + 10 log10(30) - 30: E in dBuV/m at 1 m from an EIRP in dBm (ITU-R P.525).
FIELD_CONSTANT_DB = 120.0 + 10.0 * math.log10(30.0) - 30.0
STATUSES = ("published text", "secondary source", "derived", "from memory", "user")
# Where a rule judges (ITU RR Appendix 3: the out-of-band domain lies within the spurious
# boundary of a carrier, the spurious domain beyond it).
DOMAINS = ("spurious", "out-of-band")


@dataclass(frozen=True)
class Rule:
    """One limit over a frequency range (see the module docstring).

    Attributes
    ----------
    name : str
    start_hz, stop_hz : float
        Range the rule covers (``stop_hz`` may be ``inf``).
    kind : RuleKind
    value : float
        absolute: dBm; relative: dBc; attenuation: the coefficient A in dB; field:
        dBuV/m (with ``per_khz``: 20 log10 of the numerator K in uV/m).
    rbw_hz : float or None
        Reference bandwidth; ``None`` compares the product's whole power.
    cap_db : float or None
        attenuation: the "or X dBc, whichever is less stringent" figure.
    distance_m : float or None
        field: measurement distance.
    per_khz : bool
        field: the limit is ``K / F(kHz)`` uV/m, i.e. ``value - 20 log10(F/kHz)`` dBuV/m.
    floor_dbm, ceiling_dbm : float or None
        relative: the limit never needs to be below ``floor_dbm`` and never exceeds
        ``ceiling_dbm``.
    when_carrier_hz, when_power_dbm : (float, float) or None
        The rule holds only for carriers in this frequency range / with a mean power
        in this range (``(lo, hi]``).
    source : str
        Document, section, edition.
    status : str
        One of :data:`STATUSES`: how the value was checked.
    origin : str
        The rule set (file) or ``"lineup"`` it came from.
    domain : {"spurious", "out-of-band"}
        Where the rule judges: the spurious domain (beyond the out-of-band boundary of
        every carrier), or the out-of-band domain (within it; ITU RR Appendix 3).
    offsets : tuple of (float, float)
        Out-of-band relative rules: ``(offset_hz, dBc)`` breakpoints, the limit against
        the product's offset from the nearest carrier's centre, interpolated linearly in
        dB against offset; the rule covers offsets from the first breakpoint to the last.
        Empty for a constant limit.
    offsets_of_bandwidth : bool
        The breakpoints' offsets are fractions of the nearest carrier's necessary
        bandwidth (``"50 %"`` in a file is 0.5), as masks that scale with the authorized
        bandwidth state them, rather than hertz.
    """

    name: str
    start_hz: float
    stop_hz: float
    kind: RuleKind
    value: float
    rbw_hz: float | None = None
    cap_db: float | None = None
    distance_m: float | None = None
    per_khz: bool = False
    floor_dbm: float | None = None
    ceiling_dbm: float | None = None
    when_carrier_hz: tuple[float, float] | None = None
    when_power_dbm: tuple[float, float] | None = None
    source: str = ""
    status: str = "user"
    origin: str = "lineup"
    domain: str = "spurious"
    offsets: tuple[tuple[float, float], ...] = ()
    offsets_of_bandwidth: bool = False

    @property
    def label(self) -> str:
        """How outputs name the rule: ``"origin: name"`` (``"lineup: 47 CFR 80.211(f)"``)."""
        return f"{self.origin}: {self.name}"

    def holds_for(self, carrier_hz, carrier_dbm):
        """Whether the rule's carrier conditions hold (arrays broadcast: one per batch element).

        Parameters
        ----------
        carrier_hz : float or array_like
            Carrier frequency (Hz), one per batch element.
        carrier_dbm : float or array_like
            Mean carrier power (dBm), one per batch element.

        Returns
        -------
        bool or ndarray of bool
            True where the frequency lies in ``when_carrier_hz`` (ends included) and the power in
            ``when_power_dbm`` (lower end excluded); a bool for scalar arguments.
        """
        ok = np.ones(np.broadcast_shapes(np.shape(carrier_hz), np.shape(carrier_dbm)), dtype=bool)
        if self.when_carrier_hz is not None:
            lo, hi = self.when_carrier_hz
            ok &= (lo <= np.asarray(carrier_hz)) & (np.asarray(carrier_hz) <= hi)
        if self.when_power_dbm is not None:
            lo, hi = self.when_power_dbm
            ok &= (lo < np.asarray(carrier_dbm)) & (np.asarray(carrier_dbm) <= hi)
        return ok if ok.shape else bool(ok)

    def covers_offset(self, offset_hz) -> np.ndarray:
        """Where the rule's offset breakpoints cover ``offset_hz`` (everywhere without any).

        Parameters
        ----------
        offset_hz : array_like
            Offset of each product from the nearest carrier's centre: Hz, or a fraction of
            its necessary bandwidth for :attr:`offsets_of_bandwidth` rules.

        Returns
        -------
        ndarray of bool
            The shape of ``offset_hz``.
        """
        off = np.asarray(offset_hz, dtype=float)
        if not self.offsets:
            return np.ones(off.shape, dtype=bool)
        return (off >= self.offsets[0][0]) & (off <= self.offsets[-1][0])

    def offset_limit_dbm(self, offset_hz, carrier_dbm) -> np.ndarray:
        """The out-of-band limit (dBm in ``rbw_hz``) at ``offset_hz`` from the carrier.

        ``carrier_dbm`` plus the breakpoints' dBc, interpolated linearly in dB against
        offset (``numpy.interp``; held at the end values outside, where the rule does
        not cover: :meth:`covers_offset`).

        Parameters
        ----------
        offset_hz : array_like
            Offset from the nearest carrier's centre: Hz, or a fraction of its necessary
            bandwidth for :attr:`offsets_of_bandwidth` rules.
        carrier_dbm : array_like
            Mean carrier power (dBm); broadcasts with ``offset_hz``.

        Returns
        -------
        ndarray
            The limit (dBm).
        """
        xs = np.array([o for o, _ in self.offsets], dtype=float)
        ys = np.array([d for _, d in self.offsets], dtype=float)
        return np.asarray(carrier_dbm, dtype=float) + np.interp(np.asarray(offset_hz, dtype=float), xs, ys)

    def limit_dbm(self, freq_hz, carrier_dbm, antenna_gain_dbi) -> np.ndarray:
        """Conducted limit (dBm in ``rbw_hz``) at ``freq_hz`` for mean carrier power ``carrier_dbm``.

        All arguments broadcast (for example ``(B, G)`` frequencies with ``(B, 1)`` powers).

        Parameters
        ----------
        freq_hz : float or array_like
            Frequency of the product (Hz); used by field limits that fall with frequency.
        carrier_dbm : float or array_like
            Mean carrier power (dBm), for relative and attenuation limits.
        antenna_gain_dbi : float or array_like
            Antenna gain (dBi), subtracted from the EIRP of a field-strength limit.

        Returns
        -------
        ndarray
            The limit (dBm in ``rbw_hz``), the broadcast shape of the arguments.
        """
        f = np.asarray(freq_hz, dtype=float)
        p = np.asarray(carrier_dbm, dtype=float)
        shape = np.broadcast_shapes(f.shape, p.shape, np.shape(antenna_gain_dbi))
        if self.kind == "absolute":
            return np.full(shape, self.value)
        if self.kind == "relative":
            lim = p + self.value
            if self.ceiling_dbm is not None:
                lim = np.minimum(lim, self.ceiling_dbm)
            if self.floor_dbm is not None:
                lim = np.maximum(lim, self.floor_dbm)
            return np.broadcast_to(lim, shape).copy()
        if self.kind == "attenuation":
            attenuation = self.value + (p - 30.0)
            if self.cap_db is not None:
                attenuation = np.minimum(attenuation, self.cap_db)
            return np.broadcast_to(p - attenuation, shape).copy()
        e_dbuv = (
            self.value - 20.0 * np.log10(np.maximum(f, 1.0) / 1e3)
            if self.per_khz
            else np.full(f.shape, self.value)
        )
        # A field limit always carries its distance: parse_limit() returns one with every
        # "field" kind (mask_files.py), the only way a file makes such a rule.
        assert self.distance_m is not None
        eirp = field_to_eirp_dbm(e_dbuv, self.distance_m)
        return np.broadcast_to(eirp - antenna_gain_dbi, shape).copy()

    @property
    def describe(self) -> str:
        """Short human form of the limit, e.g. ``-36 dBm/100 kHz``."""
        bw = "" if self.rbw_hz is None else f"/{bandwidth_text(self.rbw_hz)}"
        if self.offsets:

            def at(o: float) -> str:
                return f"{100 * o:g} %" if self.offsets_of_bandwidth else (bandwidth_text(o) if o else "0 Hz")

            points = ", ".join(f"{d:g} dBc at {at(o)}" for o, d in self.offsets)
            return f"{points}{bw}"
        if self.kind == "absolute":
            return f"{self.value:g} dBm{bw}"
        if self.kind == "relative":
            return f"{self.value:g} dBc{bw}"
        if self.kind == "attenuation":
            cap = "" if self.cap_db is None else f" (max {self.cap_db:g} dB)"
            return f"{self.value:g}+10logP dB{cap}{bw}"
        value = f"{10 ** (self.value / 20):.6g}/F(kHz) uV/m" if self.per_khz else f"{self.value:.4g} dBuV/m"
        return f"{value} @ {self.distance_m:g} m{bw}"


@dataclass(frozen=True)
class AdjacentChannelRule:
    """A limit on the power in the channels beside every carrier (ACPR).

    For a carrier at ``f_c`` each offset ``o`` gives two channels, the lower one
    ``[f_c - o - B/2, f_c - o + B/2]`` and the upper one ``[f_c + o - B/2, f_c + o + B/2]``
    with ``B`` the channel bandwidth.  The power in a channel ``P_ch`` less the
    carrier's own power ``P_c`` is the adjacent-channel power ratio, ``ACPR = P_ch - P_c``
    (dBc).  Where both limits are stated both must hold, so the more stringent one
    decides (:meth:`channel_limit_dbm`); a rule that allows the less stringent of two
    figures is not of this form.

    Attributes
    ----------
    name : str
    channel_bandwidth_hz : float
        Bandwidth of each adjacent channel (Hz).
    offsets_hz : tuple of float
        Offsets of the adjacent channels' centres from the carrier's centre (Hz), > 0,
        increasing; each is judged on both sides.
    limit_dbc : float or None
        Highest ACPR (dBc); ``None`` for none.
    absolute_limit_dbm : float or None
        Highest power in the channel (dBm); ``None`` for none.  At least one of the two
        limits is stated.
    carrier_bandwidth_hz : float or None
        Bandwidth of the carrier's own (main) channel (Hz); ``None`` takes the carrier's
        stated bandwidth, else the channel bandwidth (:meth:`main_bandwidth_hz`).
    source : str
        Document, section, edition.
    status : str
        One of :data:`STATUSES`: how the values were checked.
    origin : str
        The rule set (file) or ``"lineup"`` it came from.
    """

    name: str
    channel_bandwidth_hz: float
    offsets_hz: tuple[float, ...]
    limit_dbc: float | None = None
    absolute_limit_dbm: float | None = None
    carrier_bandwidth_hz: float | None = None
    source: str = ""
    status: str = "user"
    origin: str = "lineup"

    @property
    def label(self) -> str:
        """How outputs name the rule: ``"origin: name"``."""
        return f"{self.origin}: {self.name}"

    def main_bandwidth_hz(self, stated_hz: float | None) -> float:
        """Bandwidth (Hz) of a carrier's own channel under this rule.

        Parameters
        ----------
        stated_hz : float or None
            The carrier's stated occupied bandwidth (Hz), ``None`` for a CW carrier.

        Returns
        -------
        float
            :attr:`carrier_bandwidth_hz` when the rule states one, else ``stated_hz``, else
            the channel bandwidth (a CW carrier is measured in a channel like its
            neighbours; common practice, no source).
        """
        if self.carrier_bandwidth_hz is not None:
            return self.carrier_bandwidth_hz
        return stated_hz if stated_hz else self.channel_bandwidth_hz

    def channels_hz(self, carrier_hz: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """The adjacent channels of a carrier at ``carrier_hz``: lower side first, each
        side in offset order.

        Parameters
        ----------
        carrier_hz : float
            The carrier's centre frequency (Hz).

        Returns
        -------
        offset_hz, start_hz, stop_hz : ndarray, shape (2 N,)
            Signed offset of each channel's centre from the carrier (Hz; negative below
            it) and the channel's edges (Hz).
        """
        offsets = np.asarray(self.offsets_hz, dtype=float)
        signed = np.concatenate([-offsets, offsets])
        centre = carrier_hz + signed
        half = self.channel_bandwidth_hz / 2.0
        return signed, centre - half, centre + half

    def channel_limit_dbm(self, carrier_dbm) -> np.ndarray:
        """The power (dBm) a channel may hold beside a carrier of ``carrier_dbm``.

        ``min(P_c + limit_dbc, absolute_limit_dbm)`` over the limits stated: both hold,
        and in dB the margin to each is that limit less the channel power, so the lower
        one leaves the least margin.

        Parameters
        ----------
        carrier_dbm : float or array_like
            The carrier's power (dBm).

        Returns
        -------
        ndarray
            The limit (dBm), the shape of ``carrier_dbm``.
        """
        p = np.asarray(carrier_dbm, dtype=float)
        limit = np.full(p.shape, np.inf)
        if self.limit_dbc is not None:
            limit = np.minimum(limit, p + self.limit_dbc)
        if self.absolute_limit_dbm is not None:
            limit = np.minimum(limit, self.absolute_limit_dbm)
        return limit

    @property
    def describe(self) -> str:
        """Short human form, e.g. ``-60 dBc, -36 dBm in 16 kHz at +/-25 kHz, +/-50 kHz``."""
        limits = [
            f"{v:g} {u}"
            for v, u in ((self.limit_dbc, "dBc"), (self.absolute_limit_dbm, "dBm"))
            if v is not None
        ]
        at = ", ".join(f"+/-{bandwidth_text(o)}" for o in self.offsets_hz)
        return f"{', '.join(limits)} in {bandwidth_text(self.channel_bandwidth_hz)} at {at}"


def field_to_eirp_dbm(field_dbuv_m, distance_m: float):
    """EIRP (dBm) that gives ``field_dbuv_m`` at ``distance_m`` in free space.

    ``E = EIRP + 104.77 - 20 log10(d)`` (ITU-R P.525-2 eq. (1), e = sqrt(30 p) / d, in dB).

    Parameters
    ----------
    field_dbuv_m : float or array_like
        Field strength (dBuV/m).
    distance_m : float
        Measurement distance (m).

    Returns
    -------
    ndarray
        EIRP (dBm).
    """
    return np.asarray(field_dbuv_m, dtype=float) - FIELD_CONSTANT_DB + 20.0 * math.log10(distance_m)


def bandwidth_text(hz: float) -> str:
    """A bandwidth or offset (Hz) in the unit that reads best: ``"25 kHz"``, ``"1.5 MHz"``."""
    for scale, unit in ((1e6, "MHz"), (1e3, "kHz")):
        if hz >= scale:
            return f"{hz / scale:g} {unit}"
    return f"{hz:g} Hz"


@dataclass(frozen=True)
class Band:
    """A protected band: a named range, with the rules that hold inside it.

    ``rules`` may be empty: the band is then named in reports, and the general
    rules decide.
    """

    name: str
    start_hz: float
    stop_hz: float
    rules: tuple[Rule, ...] = ()
    source: str = ""
    status: str = "user"
    origin: str = "lineup"


@dataclass(frozen=True)
class Examined:
    """Frequency range a rule set examines: ``start_hz`` up to the lower of
    ``stop_hz`` and ``harmonic`` times the highest carrier."""

    start_hz: float = 0.0
    stop_hz: float = math.inf
    harmonic: int | None = None

    def upper_hz(self, carrier_hz):
        """Upper end (Hz) for a carrier at ``carrier_hz`` (scalar or array)."""
        if self.harmonic is None:
            return np.full(np.shape(carrier_hz), self.stop_hz) if np.ndim(carrier_hz) else self.stop_hz
        top = np.minimum(self.stop_hz, self.harmonic * np.asarray(carrier_hz, dtype=float))
        return top if np.ndim(top) else float(top)


@dataclass(frozen=True)
class RuleSet:
    """Rules, bands and adjacent-channel (ACPR) rules from one file (shipped in ``bands/``, or the user's)."""

    name: str
    title: str
    source: str
    rules: tuple[Rule, ...] = ()
    bands: tuple[Band, ...] = ()
    examined: Examined = Examined()
    notes: str = ""
    adjacent_channels: tuple[AdjacentChannelRule, ...] = ()


@dataclass(frozen=True)
class Mask:
    """What a lineup is checked against.

    Attributes
    ----------
    sets : tuple of RuleSet
        Every set in use (shipped, user files, and the lineup's own inline rules).
    antenna_gain : ((freq_hz, gain_dbi), ...)
        Antenna gain for field-strength rules; one point is a constant, several are
        interpolated linearly in frequency (held beyond the ends).
    spurious_boundary : float
        Products within this many necessary bandwidths of a carrier's centre are in
        the out-of-band domain and not checked against spurious limits (2.5, i.e.
        250 %, after ITU RR Appendix 3; from memory).
    """

    sets: tuple[RuleSet, ...] = ()
    antenna_gain: tuple[tuple[float, float], ...] = ()
    spurious_boundary: float = 2.5
    notes: tuple[str, ...] = field(default=())

    @property
    def rules(self) -> list[tuple[Rule, Examined]]:
        return [(r, s.examined) for s in self.sets for r in s.rules]

    @property
    def bands(self) -> list[Band]:
        return [b for s in self.sets for b in s.bands]

    @property
    def adjacent_channels(self) -> list[AdjacentChannelRule]:
        """Every set's adjacent-channel (ACPR) rules."""
        return [a for s in self.sets for a in s.adjacent_channels]

    def antenna_gain_dbi(self, freq_hz: np.ndarray) -> np.ndarray:
        f = np.asarray(freq_hz, dtype=float)
        if not self.antenna_gain:
            return np.zeros(f.shape)
        pts = np.array(self.antenna_gain, dtype=float)
        return np.interp(f, pts[:, 0], pts[:, 1])

    @property
    def needs_antenna_gain(self) -> bool:
        rules = [r for r, _ in self.rules] + [r for b in self.bands for r in b.rules]
        return any(r.kind == "field" for r in rules)
