"""Sweep speed: one batch through the engine against evaluating the points one by one.

Run from the repository root::

    python tests/benchmarks/sweeps.py

Prints, measured side by side in this one run on the same 6-stage lineup (invented:
driver, pad, amplifier, pad, saturating PA, 7th-order harmonic low-pass; single
carrier near 455 MHz, order 10, mask = SM.329 Category A style + RR 5.340 bands):

(a) a 10,000-point drive sweep (spurplan.analyses.sweep.drive_sweep: products, margins and
    the highest compliant drive) against the same work point by point (one run,
    node table and mask evaluation per point), timed on a sample of points and
    scaled to 10,000;
(b) a 1,000-channel tuning sweep (spurplan.analyses.sweep.tune_sweep) against channel by
    channel.

Targets (design notes section 9): about 1 s each, and >= 20x against one by one.
Not collected by pytest.
"""

from __future__ import annotations

import statistics
import time

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


def main() -> None:
    lu = lineup()
    one_point(lu)  # warm-up: imports, caches
    start = time.perf_counter()
    print("spurplan sweep benchmark (wall clock on this machine)")

    n_drive = 10_000
    t_batch, sweep = timed(lambda: drive_sweep(lu, -40.0, 9.995, 0.005))
    assert len(sweep.input_dbm) == n_drive, len(sweep.input_dbm)
    offsets = np.linspace(-40.0, 9.995, SAMPLE)  # the batch's own range
    t_one, _ = timed(lambda: [one_point(lu, offset=x) for x in offsets], repeats=1)
    t_scaled = t_one / SAMPLE * n_drive
    print(f"\n[a] drive sweep, {n_drive} points (status: {sweep.status})")
    print(f"  batch      : {t_batch:7.3f} s   [target: about 1 s]")
    print(
        f"  one by one : {t_scaled:7.3f} s   ({t_one / SAMPLE * 1e3:.2f} ms a point over {SAMPLE} points, scaled)"
    )
    print(
        f"  RATIO      : {t_scaled / t_batch:7.1f}x  [target >= 20x: {'met' if t_scaled / t_batch >= 20 else 'NOT met'}]"
    )

    n_tune = 1_000
    channels = np.linspace(400e6, 500e6, n_tune)
    t_batch, tuned = timed(lambda: tune_sweep(lu, channels))
    sample = channels[:: n_tune // SAMPLE][:SAMPLE]
    t_one, _ = timed(lambda: [one_point(lu, tones=[[f]]) for f in sample], repeats=1)
    t_scaled = t_one / len(sample) * n_tune
    print(f"\n[b] tuning sweep, {n_tune} channels ({len(tuned.failing)} failing ranges)")
    print(f"  batch      : {t_batch:7.3f} s   [target: about 1 s]")
    print(
        f"  one by one : {t_scaled:7.3f} s   ({t_one / len(sample) * 1e3:.2f} ms a channel over {len(sample)}, scaled)"
    )
    print(
        f"  RATIO      : {t_scaled / t_batch:7.1f}x  [target >= 20x: {'met' if t_scaled / t_batch >= 20 else 'NOT met'}]"
    )
    print(f"\ntotal benchmark time {time.perf_counter() - start:.1f} s")


if __name__ == "__main__":
    main()
