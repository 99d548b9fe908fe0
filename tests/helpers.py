"""Small builders shared by the tests (no assertions here)."""

from __future__ import annotations

import numpy as np

from spurplan.engine import apply_memoryless
from spurplan.lineup_file import from_dict
from spurplan.spectrum import mixing_vectors


def lineup(stages, carriers=(("100 MHz", "-30 dBm"),), max_order=10, combine="phase"):
    """A Lineup from compact Python data (stage dicts, (freq, power) carriers)."""
    doc = {
        "lineup": {"name": "test lineup (invented)"},
        "carrier": [{"freq": f, "power": p} for f, p in carriers],
        "stage": [dict(s) for s in stages],
        "analysis": {"max_order": max_order, "combine": combine},
    }
    return from_dict(doc, name="test.toml")


def amp(name="amp", **figures):
    return {"kind": "amplifier", "name": name, **figures}


def levels_by_label(result, stage=None, combine=None):
    """{label: level_dbm} of a run's product table."""
    rows = result.product_rows(stage, combine)
    return dict(zip(rows["label"], rows["level_dbm"], strict=True))


def single_tone(transfer, amplitude_v, max_order=10):
    """Harmonic phasors (V) of ``transfer`` driven by ``amplitude_v cos(theta)``; index n-1 is harmonic n."""
    mix = mixing_vectors(1, max_order)
    x = np.zeros((1, max_order), dtype=complex)
    x[0, 0] = amplitude_v
    return apply_memoryless(x, mix, transfer)


def dbc(harmonics, n):
    """Level of harmonic n relative to the fundamental (dB)."""
    with np.errstate(divide="ignore"):
        return 20 * np.log10(np.abs(harmonics[n - 1]) / np.abs(harmonics[0]))
