"""Mixer stage: upconversion with its m x n spurs, LO leakage and image.

Keys::

    kind = "mixer"
    lo = { freq = "1.6 GHz", power = "+7 dBm" }
    conversion_gain = "-6.5 dB"        # or conversion_loss = "6.5 dB"
    sideband = "upper" | "lower"       # wanted product: LO + IF or LO - IF
    lo_isolation = "35 dB"             # LO-to-RF: LO leakage = LO power - isolation
    image_rejection = "0 dB"           # other 1x1 sideband below the wanted (0: double-sideband)
    spur_drive = "-10 dBm"             # IF drive at which the spur table holds
    spurs = { "2LO-IF" = "-40 dBc", "LO+2IF" = "-55 dBc", "2LO" = "-25 dBc", "2IF" = "-50 dBc" }

Model.  The LO is one more base tone of the engine.  With ``z`` the analytic IF
signal at the mixer input (each product at its positive frequency; for one IF tone
``z = A exp(j theta_IF)``) and ``A_ref`` the peak voltage of ``spur_drive``, the output
is ``Re sum c_mn exp(j m theta_LO) z^n`` (and ``conj(z)^|n|`` for ``m LO - |n| IF``).
For one IF tone each term is exactly one product, at ``|m f_LO + n f_IF|``, with the
level ``L_mn`` of the table at the stated drive (``c_mn = A_w 10^(L_mn/20) / A_ref^|n|``,
``A_w`` the wanted output there) and a level that moves by ``|n|`` dB per dB of IF
drive: ``|n| - 1`` dB in dBc (the usual rule; common practice, no source).  LO
harmonics (``n = 0``) do not move with IF drive.  For several IF tones ``z^n`` makes
their sum products (``LO + IF1 + IF2`` ...); difference products among the IF tones
are not modelled here (put an amplifier before the mixer for IF intermodulation).

The mixer has no linear passage: its whole output counts as its own contribution,
so products converted from earlier stages are attributed to the mixer.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

import numpy as np

from ..engine import alias_free_grid, torus_analytic, torus_coefficients
from ..fields import Fields
from ..nonlinear import per_sample
from ..units import dbm_to_vpeak, parse_freq_hz, parse_gain_db, parse_power_dbm
from .base import LoadContext

_SPUR = re.compile(r"^\s*(?:(\d*)\s*LO)?\s*(?:([+-]?)\s*(\d*)\s*IF)?\s*$", re.IGNORECASE)
MAX_SPUR_ORDER = 15


def parse_spur_label(text: str) -> tuple[int, int]:
    """``"2LO-IF"`` -> (2, -1); ``"LO+3IF"`` -> (1, 3); ``"2LO"`` -> (2, 0); ``"2IF"`` -> (0, 2)."""
    m = _SPUR.match(text or "")
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


@dataclass(frozen=True)
class MixerModel:
    """The conversion terms of a mixer (see the module docstring).

    Attributes
    ----------
    terms : tuple of (m, n, c)
        ``m`` LO order, ``n`` signed IF order, ``c`` coefficient in V^(1-|n|).
    lo_index : int
        Which base tone is this mixer's LO.
    """

    terms: tuple[tuple[int, int, float], ...]
    lo_index: int

    gain = 0.0
    degree = None
    valid_peak_v = (-math.inf, math.inf)

    def convert(self, x_phasors: np.ndarray, mix: np.ndarray, freqs_hz: np.ndarray) -> np.ndarray:
        """Output phasors (B, P) for input phasors (B, P): exact (polynomial in z, conj z, LO)."""
        active = np.any(x_phasors != 0, axis=0)
        m_in = int(np.abs(mix[active]).max()) if active.any() else 1
        m_keep = int(np.abs(mix).max())
        n_max = max(abs(n) for _, n, _ in self.terms)
        m_max = max(m for m, _, _ in self.terms)
        size = max(alias_free_grid(max(n_max, 1), m_in, m_keep), m_in + m_max + m_keep + 1)
        size = alias_free_grid(1, size, 0)
        z = torus_analytic(x_phasors, mix, freqs_hz, size)
        k = mix.shape[1]
        shape = [1] * (k + 1)
        shape[1 + self.lo_index] = size
        lo = np.exp(2j * np.pi * np.arange(size) / size).reshape(shape)
        y = np.zeros(z.shape)
        for m, n, c in self.terms:
            base = np.ones_like(z) if n == 0 else (z ** abs(n) if n > 0 else np.conj(z) ** abs(n))
            y += np.real(per_sample(c, z) * lo**m * base)
        return torus_coefficients(y, mix)

    def scaled(self, gain_delta_db: np.ndarray) -> MixerModel:
        """Every term moved by a per-sample conversion-gain shift (dB, (B,))."""
        k = 10 ** (np.asarray(gain_delta_db) / 20)
        return MixerModel(tuple((m, n, c * k) for m, n, c in self.terms), self.lo_index)


@dataclass(frozen=True)
class Mixer:
    """An upconverting mixer stage.

    Attributes
    ----------
    lo_freq_hz, lo_power_dbm : float
    conversion_gain_db : float
    sideband : {"upper", "lower"}
    table : dict of (m, n) -> dBc
        Levels relative to the wanted output at ``spur_drive_dbm``, including the
        image and LO leakage as derived from the figures.
    spur_drive_dbm : float
    transfer : MixerModel
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

    data_range_hz = None

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
        from dataclasses import replace

        return replace(self, transfer=replace(self.transfer, lo_index=index))

    def chart(self, if_freq_hz: float, max_order: int) -> dict[str, list]:
        """The m x n chart: every ``|m f_LO + n f_IF|`` up to ``m + |n| <= max_order``."""
        cols = {"m": [], "n": [], "label": [], "freq_hz": [], "level_dbc": []}
        for m in range(0, max_order + 1):
            for n in range(-max_order, max_order + 1):
                if m + abs(n) > max_order or (m == 0 and n <= 0):
                    continue
                cols["m"].append(m)
                cols["n"].append(n)
                cols["label"].append(spur_label(m, n))
                cols["freq_hz"].append(abs(m * self.lo_freq_hz + n * if_freq_hz))
                cols["level_dbc"].append(self.table.get((m, n)))
        return cols

    @classmethod
    def from_fields(cls, fields: Fields, context: LoadContext) -> Mixer:
        name = fields.raw("name")
        lo_raw = fields.raw("lo")
        if not isinstance(lo_raw, dict):
            raise fields.error("lo", f"{lo_raw!r}: expected a table {{ freq = '...', power = '...' }}")
        lo = Fields(lo_raw, fields.file, f"{fields.where} lo")
        lo_freq = lo.quantity("freq", parse_freq_hz, required=True)
        lo_power = lo.quantity("power", parse_power_dbm, required=True)
        lo.finish()
        if lo_freq <= 0:
            raise fields.error("lo", "expected an LO frequency > 0 Hz")
        gain = fields.quantity("conversion_gain", parse_gain_db)
        loss = fields.quantity("conversion_loss", parse_gain_db)
        if (gain is None) == (loss is None):
            raise fields.error(
                "conversion_gain", "expected exactly one of 'conversion_gain' or 'conversion_loss'"
            )
        gain = gain if gain is not None else -loss
        sideband = fields.text("sideband", default="upper", choices=("upper", "lower"))
        isolation = fields.quantity("lo_isolation", parse_gain_db)
        image_rej = fields.quantity("image_rejection", parse_gain_db)
        drive = fields.quantity("spur_drive", parse_power_dbm)
        raw = fields.raw("spurs", {})
        if not isinstance(raw, dict):
            raise fields.error("spurs", f'{raw!r}: expected a table such as {{ "2LO-IF" = "-40 dBc" }}')
        if raw and drive is None:
            raise fields.error(
                "spur_drive", "is required with 'spurs': expected the IF drive of the table, e.g. '-10 dBm'"
            )
        drive = -10.0 if drive is None else drive
        table = _spur_table(fields, raw)
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
        wanted_dbm = drive + gain
        if isolation is not None:
            leak_dbc = lo_power - isolation - wanted_dbm
            if (1, 0) in table and abs(table[(1, 0)] - leak_dbc) > 0.5:
                raise fields.error(
                    "lo_isolation", f"{isolation:g} dB disagrees with spurs LO {table[(1, 0)]:g} dBc"
                )
            table[(1, 0)] = leak_dbc
        a_w = float(dbm_to_vpeak(wanted_dbm, context.r_ohm))
        a_ref = float(dbm_to_vpeak(drive, context.r_ohm))
        terms = tuple(
            (m, n, a_w * 10 ** (dbc / 20) / a_ref ** abs(n)) for (m, n), dbc in sorted(table.items())
        )
        return cls(
            name=name,
            lo_freq_hz=lo_freq,
            lo_power_dbm=lo_power,
            conversion_gain_db=gain,
            sideband=sideband,
            table=table,
            spur_drive_dbm=drive,
            transfer=MixerModel(terms=terms, lo_index=0),
        )


def spur_label(m: int, n: int) -> str:
    """``(2, -1)`` -> ``"2LO-IF"``; the trade's names for mixer products."""
    lo = "" if m == 0 else ("LO" if m == 1 else f"{m}LO")
    if n == 0:
        return lo
    mag = "IF" if abs(n) == 1 else f"{abs(n)}IF"
    if not lo:
        return mag
    return f"{lo}{'+' if n > 0 else '-'}{mag}"


def _spur_table(fields: Fields, raw: dict) -> dict:
    from ..errors import UnitError

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
        if not isinstance(value, str) or not value.strip().lower().endswith("dbc"):
            raise fields.error("spurs", f"{key} = {value!r}: expected a level in dBc, e.g. '-40 dBc'")
        try:
            table[(m, n)] = parse_gain_db(value.strip()[:-3] + "dB")
        except UnitError:
            raise fields.error(
                "spurs", f"{key} = {value!r}: expected a level in dBc, e.g. '-40 dBc'"
            ) from None
    return table
