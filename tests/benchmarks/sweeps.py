"""Sweep speed: one batch through the engine against evaluating the points one by one.

Run from the repository root::

    python tests/benchmarks/sweeps.py

Prints, measured side by side in this one run on the same 6-stage lineup (invented:
driver, pad, amplifier, pad, saturating PA, 7th-order harmonic low-pass; single
carrier near 455 MHz, order 10, mask = SM.329 Category A style + RR 5.340 bands):

(a)  a 10,000-point drive sweep from -40 to +10 dBm (spurplan.analyses.sweep.drive_sweep:
     products, margins and the highest compliant drive) against the same points one by
     one (one run, node table and mask evaluation each), timed on a sample and scaled;
(a2) the same range with two carriers 25 kHz apart, timed on 1,000 points, scaled;
(b)  a 1,000-channel tuning sweep (spurplan.analyses.sweep.tune_sweep) against channel by
     channel;
(c)  a cold ``spurplan check`` of the bundled example.

Targets (issue 15): a 10,000-point sweep within 1 s (one or two carriers), >= 20x against
one by one, a 1,000-channel sweep within 0.3 s, a cold check within 0.3 s.
Not collected by pytest.
"""

from __future__ import annotations

import dataclasses
import statistics
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

from spurplan.analyses.check import evaluate
from spurplan.analyses.sweep import drive_sweep, tune_sweep
from spurplan.io.lineup_file import from_dict

SAMPLE = 300  # points evaluated one by one, then scaled


def lineup():
    amp = {"kind": "amplifier"}
    stages = [
        {
            **amp,
            "name": "driver",
            "gain": "16 dB",
            "oip3": "+34 dBm",
            "h2": "-28 dBc @ +20 dBm",
            "psat": "+24 dBm",
        },
        {"kind": "attenuator", "name": "pad1", "loss": "3 dB"},
        {**amp, "name": "pre", "gain": "12 dB", "oip3": "+40 dBm", "psat": "+30 dBm"},
        {"kind": "attenuator", "name": "pad2", "loss": "2 dB"},
        {
            **amp,
            "name": "pa",
            "gain": "15 dB",
            "oip3": "+48 dBm",
            "h2": "-30 dBc @ +37 dBm",
            "psat": "+39 dBm",
        },
        {
            "kind": "filter",
            "name": "lpf",
            "prototype": {
                "family": "chebyshev",
                "order": 7,
                "cutoff": "520 MHz",
                "ripple": "0.1 dB",
                "q_inductor": 120,
            },
        },
    ]
    doc = {
        "lineup": {"name": "benchmark 6-stage UHF chain (invented)"},
        "carrier": [{"freq": "455 MHz", "power": "-10 dBm"}],
        "stage": stages,
        "mask": {"use": ["itu-sm329-cat-a", {"name": "itu-rr-5.340", "limit": "-70 dBm", "rbw": "1 MHz"}]},
        "analysis": {"max_order": 10},
    }
    return from_dict(doc, name="benchmark.toml")


def one_point(lu, *, offset=0.0, tones=None):
    result = lu.run(drive_offset_db=offset, tone_freqs_hz=tones)
    ev = evaluate(lu, result, result.levels())
    return float(ev.worst_margin_db[0])


def timed(func, repeats=3):
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        out = func()
        times.append(time.perf_counter() - t0)
    return statistics.median(times), out


def two_carriers(lu):
    """The same chain with a second carrier 25 kHz above the first, equal power."""
    c = lu.carriers[0]
    return dataclasses.replace(lu, carriers=(c, dataclasses.replace(c, freq_hz=c.freq_hz + 25e3)))


def cold_check_s(repeats: int = 5) -> float:
    """Median wall time of a cold ``spurplan check`` of the bundled example (a new process)."""
    example = Path(__file__).resolve().parents[2] / "examples" / "uhf_telemetry.toml"
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        subprocess.run(
            [sys.executable, "-m", "spurplan.cli", "check", str(example)], capture_output=True, check=False
        )
        times.append(time.perf_counter() - t0)
    return statistics.median(times)


def row(label: str, value: float, unit: str, target: float, better: str = "lower") -> None:
    met = value <= target if better == "lower" else value >= target
    sign = "<=" if better == "lower" else ">="
    print(
        f"  {label:<58s} {value:10.3f} {unit:<4s} [target {sign} {target:g} {unit}: {'met' if met else 'NOT met'}]"
    )


def main() -> None:
    lu = lineup()
    one_point(lu)  # warm-up: imports, caches
    start = time.perf_counter()
    print("spurplan sweep benchmark (wall clock on this machine)")
    p0 = lu.carriers[0].power_dbm

    n_drive = 10_000
    t_batch, sweep = timed(lambda: drive_sweep(lu, -40.0, 9.995, 0.005))
    assert len(sweep.input_dbm) == n_drive, len(sweep.input_dbm)
    # The same points one by one: drive offsets from the carrier's own power.
    inputs = np.linspace(-40.0, 9.995, SAMPLE)
    t_one, _ = timed(lambda: [one_point(lu, offset=x - p0) for x in inputs], repeats=1)
    t_scaled = t_one / SAMPLE * n_drive
    print(f"\n[a] drive sweep, 1 carrier, {n_drive} points from -40 to +10 dBm (status: {sweep.status})")
    row("batch", t_batch, "s", 1.0)
    print(
        f"  one by one : {t_scaled:7.3f} s   ({t_one / SAMPLE * 1e3:.2f} ms a point over {SAMPLE} of the same points, scaled)"
    )
    row("RATIO one by one / batch", t_scaled / t_batch, "x", 20.0, "higher")

    lu2 = two_carriers(lu)
    drive_sweep(lu2, -40.0, -39.0, 0.5)  # warm-up
    n_two = 1_000
    t_two, sweep2 = timed(lambda: drive_sweep(lu2, -40.0, 9.95, 0.05), repeats=1)
    assert len(sweep2.input_dbm) == n_two
    print(
        f"\n[a2] drive sweep, 2 carriers 25 kHz apart, saturating PA: {n_two} points of the same range (status: {sweep2.status})"
    )
    row(f"batch of {n_two}, scaled to {n_drive} points", t_two * n_drive / n_two, "s", 1.0)

    n_tune = 1_000
    channels = np.linspace(400e6, 500e6, n_tune)
    t_batch, tuned = timed(lambda: tune_sweep(lu, channels))
    sample = channels[:: n_tune // SAMPLE][:SAMPLE]
    t_one, _ = timed(lambda: [one_point(lu, tones=[[f]]) for f in sample], repeats=1)
    t_scaled = t_one / len(sample) * n_tune
    print(f"\n[b] tuning sweep, 1 carrier, {n_tune} channels ({len(tuned.failing)} failing ranges)")
    row("batch", t_batch, "s", 0.3)
    print(
        f"  one by one : {t_scaled:7.3f} s   ({t_one / len(sample) * 1e3:.2f} ms a channel over {len(sample)}, scaled)"
    )
    row("RATIO one by one / batch", t_scaled / t_batch, "x", 20.0, "higher")

    print("\n[c] cold check of the bundled example (a new process each time, median of 5)")
    row("spurplan check examples/uhf_telemetry.toml", cold_check_s(), "s", 0.3)
    print(f"\ntotal benchmark time {time.perf_counter() - start:.1f} s")


if __name__ == "__main__":
    main()
