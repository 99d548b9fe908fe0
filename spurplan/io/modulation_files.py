"""Reading a carrier's ``modulation`` and the I/Q records it may name.

Syntax (in a ``[[carrier]]`` table, beside ``bandwidth``)::

    modulation = "gaussian"                  # or "constant-envelope"
    modulation = { kind = "gaussian", tones = 64, realizations = 16, seed = 1 }
    modulation = { kind = "par", par = "8 dB" }            # stated peak-to-average ratio
    modulation = { kind = "iq", file = "burst.npy", sample_rate = "1.92 MHz" }

An I/Q record is complex baseband samples, taken as one period of the signal: a ``.npy``
file of a 1-D complex array or an (N, 2) real one (I, Q), or a text file (``.csv``,
``.txt``) of two numbers per line (I and Q, separated by a comma, semicolon, tab or
spaces; ``#`` starts a comment; one header line of names is allowed).
"""

from __future__ import annotations

import io
import math
import re
from pathlib import Path

import numpy as np

from spurplan.errors import LineupError
from spurplan.fields import Fields, Within, read_file_bytes, read_text_file
from spurplan.model.modulation import (
    DEFAULT_REALIZATIONS,
    DEFAULT_SEED,
    DEFAULT_TONES,
    IQ_FLOOR_DB,
    MAX_REALIZATIONS,
    MAX_TONES,
    MODULATION_KINDS,
    Modulation,
    par_range_db,
)
from spurplan.units import parse_freq_hz, parse_gain_db

# A record of 2^20 samples (about 0.5 s at 1.92 MHz) is far beyond what a period of a
# planning signal needs; its .npy file (complex128) is 16 MiB, its text some 40 MiB.
MAX_IQ_SAMPLES = 1 << 20
MAX_IQ_BYTES = 48 << 20
SAMPLE_RATE = Within("a sample rate", 1.0, 1e11, "Hz")
MIN_TONES = 8


def read_modulation(raw, f: Fields, bandwidth_hz: float | None, base_dir: Path) -> tuple[Modulation, float]:
    """The carrier's ``modulation`` value, checked, and the bandwidth it occupies (Hz).

    Parameters
    ----------
    raw : str or dict
        The TOML value of ``modulation``.
    f : Fields
        The carrier's table (for located errors).
    bandwidth_hz : float or None
        The carrier's stated bandwidth (required except for an I/Q record, whose
        occupied bins set it when it is not stated).
    base_dir : Path
        Folder a record's relative path starts from.

    Returns
    -------
    (Modulation, float)
        The modulation and the occupied bandwidth (Hz).

    Raises
    ------
    LineupError
        One line naming the carrier, the field, the value and what was expected.
    """
    table = {"kind": raw} if isinstance(raw, str) else raw
    if not isinstance(table, dict):
        raise f.error(
            "modulation", f"{str(raw)[:80]!r}: expected one of {', '.join(MODULATION_KINDS)} or a table"
        )
    m = Fields(table, f.file, f"{f.where} modulation")
    kind = m.text("kind", default=None, choices=MODULATION_KINDS)
    if kind is None:
        raise m.error("kind", f"missing: expected one of {', '.join(MODULATION_KINDS)}")
    if kind == "iq":
        return _read_iq_modulation(m, bandwidth_hz, base_dir)
    if bandwidth_hz is None:
        raise f.error(
            "bandwidth", f"missing: a {kind} modulation spreads over the carrier's bandwidth; state it"
        )
    tones = m.integer("tones", default=DEFAULT_TONES, low=MIN_TONES, high=MAX_TONES)
    once = kind == "constant-envelope"
    realizations = m.integer(
        "realizations", default=1 if once else DEFAULT_REALIZATIONS, low=1, high=MAX_REALIZATIONS
    )
    seed = m.integer("seed", default=DEFAULT_SEED, low=0, high=2**32 - 1)
    par = None
    if kind == "par":
        par = m.quantity("par", parse_gain_db, required=True)
        lo, hi = par_range_db(tones)
        if not lo <= par <= hi:
            raise m.error(
                "par",
                f"{m.raw('par')!r}: expected {lo:g} to {hi:.1f} dB for {tones} tones (more tones reach higher)",
            )
    m.finish()
    return Modulation(kind=kind, tones=tones, realizations=realizations, seed=seed, par_db=par), bandwidth_hz


def _read_iq_modulation(m: Fields, bandwidth_hz: float | None, base_dir: Path) -> tuple[Modulation, float]:
    name = m.raw("file")
    if not isinstance(name, str) or not name.strip():
        raise m.error("file", f"{name!r}: expected the path of an I/Q record (.npy, .csv or .txt)")
    rate = m.quantity("sample_rate", parse_freq_hz, required=True, within=SAMPLE_RATE)
    m.finish()
    path = Path(name) if Path(name).is_absolute() else base_dir / name
    samples = read_iq(path)
    spectrum = np.fft.fft(samples) / len(samples)
    power = np.abs(spectrum) ** 2
    keep = np.nonzero(power >= power.max() * 10 ** (IQ_FLOOR_DB / 10))[0]
    if len(keep) > MAX_TONES:
        raise LineupError(
            f"the record has {len(keep)} DFT bins within {-IQ_FLOOR_DB:g} dB of its strongest: expected at "
            f"most {MAX_TONES} (a shorter record, or one decimated to its occupied bandwidth)",
            file=str(path),
        )
    n = len(samples)
    bins = np.where(keep > n // 2, keep - n, keep).astype(np.int64)
    order = np.argsort(bins)
    bins, phasors = bins[order], spectrum[keep][order]
    phasors = phasors / math.sqrt(float(np.sum(np.abs(phasors) ** 2)))
    step_hz = rate / n
    reach_hz = float(np.abs(bins).max() * step_hz)
    occupied = 2 * reach_hz + step_hz
    if bandwidth_hz is not None and reach_hz > bandwidth_hz / 2 * (1 + 1e-9) + step_hz / 2:
        raise m.error(
            "file",
            f"{name!r}: its spectrum reaches {reach_hz:.6g} Hz from the carrier, wider than the carrier's "
            f"bandwidth ({bandwidth_hz:.6g} Hz): expected a record within it, or a wider bandwidth",
        )
    modulation = Modulation(
        kind="iq",
        tones=len(bins),
        realizations=1,
        iq_bins=bins,
        iq_phasors=phasors,
        iq_rate_hz=rate,
        iq_length=n,
        source=str(path),
    )
    return modulation, bandwidth_hz if bandwidth_hz is not None else occupied


def read_iq(path) -> np.ndarray:
    """Complex baseband samples of an I/Q record (``.npy``, or text of I and Q per line).

    Parameters
    ----------
    path : str or Path

    Returns
    -------
    ndarray, complex, (N,)
        At least 2 and at most :data:`MAX_IQ_SAMPLES` finite samples, not all zero.

    Raises
    ------
    LineupError
        One line naming the file, what is wrong and what was expected.
    """
    path = Path(path)
    what = "an I/Q record (.npy of complex samples, or text of I and Q per line)"
    if path.suffix.lower() == ".npy":
        data = read_file_bytes(path, what, MAX_IQ_BYTES)
        try:
            arr = np.load(io.BytesIO(data), allow_pickle=False)
        except (ValueError, OSError, EOFError) as exc:
            raise LineupError(
                f"is not a readable .npy array ({str(exc)[:80]}): expected {what}", file=str(path)
            ) from None
        if not isinstance(arr, np.ndarray) or arr.dtype.kind not in "fciu":
            raise LineupError(
                f"holds {getattr(arr, 'dtype', type(arr))} data: expected {what}", file=str(path)
            )
        if arr.ndim == 1 and arr.dtype.kind == "c":
            samples = arr.astype(complex)
        elif arr.ndim == 2 and arr.shape[1] == 2 and arr.dtype.kind != "c":
            samples = arr[:, 0].astype(float) + 1j * arr[:, 1].astype(float)
        else:
            raise LineupError(
                f"holds an array of shape {arr.shape} ({arr.dtype}): expected a 1-D complex array or an "
                "(N, 2) real one of I and Q",
                file=str(path),
            )
    else:
        samples = _read_iq_text(read_text_file(path, what, MAX_IQ_BYTES), str(path))
    if not 2 <= len(samples) <= MAX_IQ_SAMPLES:
        raise LineupError(f"holds {len(samples)} samples: expected 2 to {MAX_IQ_SAMPLES}", file=str(path))
    bad = np.nonzero(~np.isfinite(samples))[0]
    if bad.size:
        raise LineupError(
            f"sample {int(bad[0]) + 1} is {samples[bad[0]]}: expected finite numbers", file=str(path)
        )
    if not np.any(samples != 0):
        raise LineupError("every sample is zero: expected a signal", file=str(path))
    return samples


_SEPARATOR = re.compile(r"[,;\t ]+")


def _read_iq_text(text: str, name: str) -> np.ndarray:
    """Two numbers per line (I, Q); ``#`` comments; one header line of names allowed."""
    values: list[tuple[float, float]] = []
    header_seen = False
    for number, line in enumerate(text.splitlines(), start=1):
        body = line.split("#", 1)[0].strip()
        if not body:
            continue
        parts = [p for p in _SEPARATOR.split(body) if p]
        try:
            if len(parts) != 2:
                raise ValueError
            values.append((float(parts[0]), float(parts[1])))
        except ValueError:
            if not values and not header_seen and all(re.fullmatch(r"[A-Za-z_][\w ()]*", p) for p in parts):
                header_seen = True
                continue
            raise LineupError(
                f"line {number}: {body[:60]!r}: expected two numbers, I and Q", file=name
            ) from None
        if len(values) > MAX_IQ_SAMPLES:
            raise LineupError(f"holds more than {MAX_IQ_SAMPLES} samples: expected at most that", file=name)
    arr = np.asarray(values, dtype=float).reshape(-1, 2)
    return arr[:, 0] + 1j * arr[:, 1]
