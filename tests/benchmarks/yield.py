"""Monte Carlo yield throughput: in process against a 2-worker local Dask cluster.

Run from the repository root::

    python tests/benchmarks/yield.py [SAMPLES]

Prints samples per second for the same lineup, seed and batches, measured side by
side in this one run (default 100,000 samples): once in this process, once on a
``dask.distributed.LocalCluster`` of 2 worker processes on the loopback interface
(started, warmed up and stopped here; its start-up time is reported apart). The yields must be
identical (seed per batch). Not collected by pytest.
"""

from __future__ import annotations

import dataclasses
import sys
import time

from spurplan.analyses.montecarlo import run_yield
from spurplan.io.lineup_file import from_dict


def lineup():
    """Invented 3-stage UHF chain with realistic-looking spreads (not from a datasheet)."""
    doc = {
        "lineup": {"name": "yield benchmark chain (invented)"},
        "carrier": [{"freq": "455 MHz", "power": "-8 dBm"}],
        "stage": [
            {
                "kind": "amplifier",
                "name": "driver",
                "gain": "16 dB",
                "oip3": "+34 dBm",
                "h2": "-28 dBc @ +20 dBm",
                "psat": "+24 dBm",
                "tolerance": {"gain": "0.5 dB", "oip3": "1 dB"},
            },
            {
                "kind": "amplifier",
                "name": "pa",
                "gain": "24 dB",
                "oip3": "+46 dBm",
                "h2": "-30 dBc @ +37 dBm",
                "psat": "+38.5 dBm",
                "tolerance": {"gain": "0.5 dB", "oip3": "1.5 dB", "psat": "0.3 dB", "ohip2": "2 dB"},
            },
            {
                "kind": "filter",
                "name": "lpf",
                "prototype": {
                    "family": "chebyshev",
                    "order": 5,
                    "cutoff": "600 MHz",
                    "ripple": "0.1 dB",
                    "q_inductor": 120,
                },
                "tolerance": {"cutoff": "3 %", "q_inductor": "10 %", "elements": "5 %"},
            },
        ],
        "mask": {
            "rule": [
                {
                    "start": "9 kHz",
                    "stop": "10 GHz",
                    "limit": "-25 dBm",
                    "rbw": "1 MHz",
                    "name": "tight flat limit",
                }
            ]
        },
        "analysis": {"max_order": 7},
    }
    return from_dict(doc, name="yield-benchmark.toml")


def main() -> None:
    samples = int(sys.argv[1]) if len(sys.argv) > 1 else 100_000
    lu = lineup()
    run_yield(lu, 500, seed=0)  # warm-up
    t0 = time.perf_counter()
    here = run_yield(lu, samples, seed=42)
    t_here = time.perf_counter() - t0

    import dask
    from dask.distributed import Client, LocalCluster

    t0 = time.perf_counter()
    # As spurplan's own --workers cluster: no aggressive malloc trimming (montecarlo._on_dask).
    with dask.config.set({"distributed.nanny.pre-spawn-environ.MALLOC_TRIM_THRESHOLD_": str(1 << 30)}):
        cluster = LocalCluster(
            n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1", dashboard_address=None
        )
    client = Client(cluster)
    t_start = time.perf_counter() - t0
    try:
        run_yield(lu, 4000, seed=0, scheduler=cluster.scheduler_address)  # warm the workers' imports
        t0 = time.perf_counter()
        there = run_yield(lu, samples, seed=42, scheduler=cluster.scheduler_address)
        t_there = time.perf_counter() - t0
    finally:
        client.close()
        cluster.close()
    same = (here.worst_margin_db == there.worst_margin_db).all()
    print(f"spurplan yield benchmark, {samples} samples, yield {100 * here.yield_fraction:.2f} %")
    print(f"  in process          : {samples / t_here:9.0f} samples/s  ({t_here:.2f} s)")
    print(
        f"  local cluster, 2 w. : {samples / t_there:9.0f} samples/s  ({t_there:.2f} s; cluster start {t_start:.1f} s apart)"
    )
    print(f"  ratio cluster/in-process: {t_here / t_there:.2f}x   identical results: {bool(same)}")
    target = 20_000
    print(f"  target >= {target} samples/s in process: {'met' if samples / t_here >= target else 'NOT met'}")
    # Two carriers 25 kHz apart through the same chain: the issue-15 row (in process).
    c = lu.carriers[0]
    lu2 = dataclasses.replace(lu, carriers=(c, dataclasses.replace(c, freq_hz=c.freq_hz + 25e3)))
    n2 = max(2000, samples // 50)
    run_yield(lu2, 200, seed=0)  # warm-up
    t0 = time.perf_counter()
    run_yield(lu2, n2, seed=42)
    rate = n2 / (time.perf_counter() - t0)
    print(
        f"  2 carriers, in process: {rate:9.0f} samples/s ({n2} samples)   "
        f"[target >= {target}: {'met' if rate >= target else 'NOT met'}]"
    )


if __name__ == "__main__":
    main()
