"""Engine speed, and its speed against the brute-force reference at equal accuracy.

Run from the repository root::

    python tests/benchmarks/engine.py

Everything is measured side by side in this one run and printed as times and
ratios next to the targets of the design notes (section 9).  Not collected by
pytest.

(a) One run of a 6-stage, 2-carrier lineup to order 10 (driver, pad, amplifier,
    pad, saturating PA, output loss): ``Lineup.run()`` plus the phase-true product
    table, median of many repeats.
(b) The same lineup with carriers 25 kHz apart near 450 MHz against the
    brute-force time-domain reference (tests/reference.py).  The reference record
    starts at the shortest length that holds every order-10 product below Nyquist
    and doubles until every product above -150 dBc agrees with the engine within
    0.01 dB; that record is then timed against the engine, repeats interleaved.
(c) Carriers 12.3457 kHz apart: the engine's cost does not depend on the spacing,
    while a common-grid record would be far beyond reach.
(d) The ratio of (b) at 12.5, 6.25 and 1 kHz spacing: the brute-force record grows
    as 1 / spacing, the engine's cost stays put.
"""

from __future__ import annotations

import math
import statistics
import sys
import time
from pathlib import Path

import scipy.fft as sfft

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # tests/: the reference

from reference import Generating, Tone, exact_length, simulate, zone_weight

from spurplan.io.lineup_file import from_dict
from spurplan.model.products import mixing_vectors

FLOOR_DBC = -150.0
TOL_DB = 0.01
MAX_ORDER = 10
DF_HZ = 25e3  # tone spacing, and the reference's bin spacing


def lineup_doc(f2: str, saturating: bool = True, n_carriers: int = 2) -> dict:
    """Invented, realistic-looking UHF lineup (figures made up, not from a datasheet).

    With ``n_carriers`` above 2, that many carriers on the 25 kHz raster from 450 MHz
    (``f2`` unused), the same total input power (-7 dBm), phases spread."""
    pa = {
        "kind": "amplifier",
        "name": "pa",
        "gain": "18 dB",
        "oip3": "+46 dBm",
        "h2": "-30 dBc @ +37 dBm",
        "h5": "-60 dBc @ +37 dBm",
    }
    if saturating:
        pa["psat"] = "+38 dBm"
    carriers = [
        {"freq": "450.000 MHz", "power": "-10 dBm"},
        {"freq": f2, "power": "-10 dBm", "phase": "25 deg"},
    ]
    if n_carriers > 2:
        each = -7.0 - 10 * math.log10(n_carriers)
        carriers = [
            {
                "freq": f"{450e6 + k * DF_HZ:.1f} Hz",
                "power": f"{each:.4f} dBm",
                "phase": f"{(37 * k * k) % 360} deg",
            }
            for k in range(n_carriers)
        ]
    return {
        "lineup": {"name": "benchmark lineup (invented)", "impedance": "50 ohm"},
        "carrier": carriers,
        "stage": [
            {
                "kind": "amplifier",
                "name": "driver",
                "gain": "16 dB",
                "oip3": "+30 dBm",
                "h2": "-35 dBc @ +10 dBm",
            },
            {"kind": "attenuator", "name": "pad 1", "loss": "3 dB"},
            {
                "kind": "amplifier",
                "name": "amp",
                "gain": "14 dB",
                "oip3": "+38 dBm",
                "h2": "-32 dBc @ +20 dBm",
            },
            {"kind": "attenuator", "name": "pad 2", "loss": "2 dB"},
            pa,
            {"kind": "attenuator", "name": "output loss", "loss": "0.5 dB"},
        ],
        "analysis": {"max_order": MAX_ORDER, "combine": "phase"},
    }


def _timed(func) -> float:
    t0 = time.perf_counter()
    func()
    return time.perf_counter() - t0


def engine_once(lineup) -> tuple[float, dict]:
    t0 = time.perf_counter()
    rows = lineup.run().product_rows(combine="phase")
    return time.perf_counter() - t0, rows


def reference_inputs(lineup):
    tones = [Tone(c.freq_hz, c.power_dbm, c.phase_rad) for c in lineup.carriers]
    # The reference runs each stage's memoryless model (or its flat gain in dB), with an
    # amplifier's harmonic-zone weights on what it generates (tests/reference.py Generating),
    # zones centred on the strongest carrier (ties to the higher frequency).
    ref_hz = max(lineup.carriers, key=lambda c: (c.power_dbm, c.freq_hz)).freq_hz
    stages = []
    for s in lineup.stages:
        if s.transfer is None:
            stages.append(-s.loss_db)
        elif getattr(s, "zone_weights_db", None):
            stages.append(
                Generating(s.transfer, 10 ** (s.gain_db / 20), zone_weight(s.zone_weights_db, ref_hz))
            )
        else:
            stages.append(s.transfer)
    return tones, stages


def reference_once(tones, stages, length: int, df_hz: float = DF_HZ):
    t0 = time.perf_counter()
    spectrum = simulate(tones, stages, df_hz=df_hz, length=length)
    return time.perf_counter() - t0, spectrum


def deviation_db(rows: dict, spectrum) -> tuple[float, int]:
    """Largest |engine - reference| (dB) over the engine's products above the floor."""
    worst, count = 0.0, 0
    for freq, level, dbc in zip(rows["freq_hz"], rows["level_dbm"], rows["dbc"], strict=True):
        if dbc > FLOOR_DBC:
            worst = max(worst, abs(level - spectrum.at(freq)))
            count += 1
    return worst, count


def even_fast_length(n: int) -> int:
    n = sfft.next_fast_len(n, real=True)
    while n % 2:
        n = sfft.next_fast_len(n + 1, real=True)
    return n


def compare(label: str, doc: dict, repeats: int, df_hz: float = DF_HZ, target: float = 300.0) -> float:
    lineup = from_dict(doc)
    _, rows = engine_once(lineup)
    tones, stages = reference_inputs(lineup)
    bins = [round(t.freq_hz / df_hz) for t in tones]
    start = exact_length(bins, MAX_ORDER)
    print(f"\n[{label}]")
    print(f"  reference grid: bins of {df_hz / 1e3:g} kHz, carriers on bins {bins}")
    length = None
    for k in range(7):
        trial = even_fast_length(start * 2**k)
        elapsed, spectrum = reference_once(tones, stages, trial, df_hz)
        dev, count = deviation_db(rows, spectrum)
        print(
            f"  record {trial:>9d} samples (fs {trial * df_hz / 1e9:6.2f} GHz): max |engine - reference| "
            f"{dev:.2e} dB over {count} products above {FLOOR_DBC:g} dBc ({elapsed * 1e3:.0f} ms)"
        )
        if dev <= TOL_DB:
            length = trial
            break
    if length is None:
        print("  reference did not reach 0.01 dB agreement: no ratio")
        return float("nan")
    # Reference self-check: a record twice as long changes the compared levels by:
    _, longer = reference_once(tones, stages, even_fast_length(2 * length), df_hz)
    compared = [f for f, dbc in zip(rows["freq_hz"], rows["dbc"], strict=True) if dbc > FLOOR_DBC]
    self_dev = max(abs(spectrum.at(f) - longer.at(f)) for f in compared)
    print(f"  reference with a 2x record moves the compared levels by at most {self_dev:.2e} dB")

    t_eng, t_ref = [], []
    for _ in range(repeats):
        t_eng.append(engine_once(lineup)[0])
        t_ref.append(reference_once(tones, stages, length, df_hz)[0])
    eng, ref = statistics.median(t_eng), statistics.median(t_ref)
    ratio = ref / eng
    print(f"  engine    : {eng * 1e3:8.2f} ms (median of {repeats}, interleaved)")
    print(f"  reference : {ref * 1e3:8.2f} ms (median of {repeats}, record {length} samples)")
    print(
        f"  RATIO reference/engine at equal accuracy ({TOL_DB} dB): {ratio:.0f}x   "
        f"[target >= {target:g}x: {'met' if ratio >= target else 'NOT met'}]"
    )
    return ratio


def modulated(label: str, saturating: bool) -> None:
    """Time the line spectrum of a noise-like carrier, and how far its regrowth has
    converged: the adjacent-channel power (one 25 kHz channel above) against a run with
    twice the tones and realizations."""
    from spurplan.engine.spectra import line_spectrum

    def doc(tones: int, realizations: int) -> dict:
        d = lineup_doc("450.025 MHz", saturating=saturating)
        modulation = {"kind": "gaussian", "tones": tones, "realizations": realizations}
        d["carrier"] = [
            {"freq": "450 MHz", "power": "-7 dBm", "bandwidth": "25 kHz", "modulation": modulation}
        ]
        return d

    def adjacent_dbm(spec) -> float:
        return spec.band_power_dbm(450.0125e6, 450.0375e6)

    lineup = from_dict(doc(64, 16))
    line_spectrum(lineup)  # warm-up
    times = [_timed(lambda: line_spectrum(lineup)) for _ in range(3)]
    spec = line_spectrum(lineup)
    finer = line_spectrum(from_dict(doc(128, 32)))
    t = statistics.median(times)
    print(
        f"  {label}: {t:.2f} s median of 3 ({len(spec.freq_hz)} lines); adjacent-channel power "
        f"{adjacent_dbm(spec):.2f} dBm, with 128 tones x 32 realizations {adjacent_dbm(finer):.2f} dBm "
        f"(moves {adjacent_dbm(finer) - adjacent_dbm(spec):+.2f} dB)   [target < 1 s: {'met' if t < 1 else 'NOT met'}]"
    )


def main() -> None:
    t_start = time.perf_counter()
    print("spurplan engine benchmark (times are wall clock on this machine)")

    # (a) engine alone
    lineup = from_dict(lineup_doc("450.025 MHz"))
    engine_once(lineup)  # warm-up: imports, FFT plans
    times = [engine_once(lineup)[0] for _ in range(200)]
    med = statistics.median(times)
    print("\n[a] 6 stages (driver, pad, amp, pad, PA with psat, loss), 2 carriers, max_order 10")
    print(
        f"  ENGINE one run + product table: {med * 1e3:.2f} ms median of {len(times)} "
        f"(min {min(times) * 1e3:.2f}, max {max(times) * 1e3:.2f})   [target <= 1 ms: {'met' if med <= 1e-3 else 'NOT met'}]"
    )

    # Where the time goes (same lineup): the spectral propagation, the table, and
    # the enumeration of mixing vectors that run() redoes every time.
    t_run = statistics.median(_timed(lineup.run) for _ in range(100))
    result = lineup.run()
    t_rows = statistics.median(_timed(lambda: result.product_rows(combine="phase")) for _ in range(100))
    t_mix = statistics.median(_timed(lambda: mixing_vectors(2, MAX_ORDER)) for _ in range(100))
    print(
        f"  of which Lineup.run() {t_run * 1e3:.2f} ms (mixing_vectors alone {t_mix * 1e3:.2f} ms), "
        f"product_rows {t_rows * 1e3:.2f} ms"
    )

    # (b) against the brute force, 450.000 / 450.025 MHz
    compare("b  same lineup, carriers 450.000 and 450.025 MHz", lineup_doc("450.025 MHz"), repeats=15)
    compare(
        "b' same lineup with a polynomial PA (no psat), 450.000 and 450.025 MHz",
        lineup_doc("450.025 MHz", saturating=False),
        repeats=15,
    )

    # Spacing the brute force cannot resolve: the engine costs the same.
    odd = from_dict(lineup_doc("450.0123457 MHz"))
    engine_once(odd)
    t_odd = statistics.median(engine_once(odd)[0] for _ in range(100))
    # Common grid of the two carriers: their greatest common divisor (in 0.1 Hz steps).
    grid_hz = math.gcd(*(round(c.freq_hz * 10) for c in odd.carriers)) / 10
    samples = 2 * MAX_ORDER * max(c.freq_hz for c in odd.carriers) / grid_hz
    print(f"\n[c] carriers 450.000 and 450.0123457 MHz ({grid_hz:g} Hz common grid)")
    print(
        f"  engine {t_odd * 1e3:.2f} ms vs {med * 1e3:.2f} ms at 25 kHz spacing (ratio {t_odd / med:.2f}); "
        f"a common-grid record to order {MAX_ORDER} would need about {samples:.1e} samples"
    )
    # The brute force's record grows as 1 / spacing; the engine's cost does not move.
    print("\n[d] the same lineup at narrower carrier spacing (channel rasters in use)")
    ratios = {}
    for spacing_hz in (12.5e3, 6.25e3, 1e3):
        f2 = f"{450.0 + spacing_hz / 1e6:.6f} MHz"
        ratios[spacing_hz] = compare(
            f"d  spacing {spacing_hz / 1e3:g} kHz", lineup_doc(f2), repeats=3, df_hz=spacing_hz
        )
    print(
        "\n  summary of RATIO reference/engine by spacing: "
        + ", ".join(f"{k / 1e3:g} kHz: {v:.0f}x" for k, v in ratios.items())
    )
    # (e) many carriers on a raster: the lattice keeps the engine's cost by the raster's span.
    print("\n[e] 16 carriers on the 25 kHz raster from 450 MHz, the same 6 stages, max_order 10")
    compare("e  16 carriers, saturating PA", lineup_doc("", n_carriers=16), repeats=5, target=5.0)
    compare(
        "e' 16 carriers, polynomial PA",
        lineup_doc("", saturating=False, n_carriers=16),
        repeats=5,
        target=5.0,
    )
    # (f) one noise-like carrier through the 6 stages: its regrowth as a line spectrum.
    print("\n[f] one noise-like carrier (25 kHz wide, 64 tones x 16 realizations) through the 6 stages")
    for saturating in (False, True):
        modulated("f" + ("  saturating PA" if saturating else "  polynomial PA"), saturating)
    print(f"\ntotal benchmark time {time.perf_counter() - t_start:.1f} s")


if __name__ == "__main__":
    main()
