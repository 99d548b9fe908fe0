"""Generate the invented bench session in examples/bench/ for the UHF telemetry example.

Invented data for demonstration, not measurements.  It stands in for what an engineer
brings back from the bench once the first prototype of examples/uhf_telemetry.toml
exists:

* ``bench/uhf_prototype_trace.csv``: a spectrum-analyser trace of the antenna port,
  30 MHz to 2.5 GHz in a 100 kHz RBW (peak detector), made from the plan's own predicted
  products with invented departures: the third harmonic 6 dB above the plan (as if the PA's
  output network were less kind to it than its datasheet), the second 2 dB below, an
  invented 600 MHz spur that the plan does not know (a clock harmonic, say), the
  transmitter's own output noise as the plan predicts it, and an analyser floor at
  -100 dBm in the RBW, with the scatter of a real trace;
* ``bench/uhf_pa_sweep.csv``: a drive sweep of the PA on its own (written by
  :func:`write_pa_sweep`; see its docstring).

Every number the walk-through in README "A bench session" quotes comes from these files.
Run from the repository root:  python examples/make_bench_session.py
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from spurplan.engine.noise import output_noise_dbm_hz
from spurplan.io.lineup_file import load

HERE = Path(__file__).resolve().parent
OUT = HERE / "bench"
LINEUP = HERE / "uhf_telemetry.toml"
SEED = 20261202

RBW_HZ = 100e3
START_HZ, STOP_HZ, STEP_HZ = 30e6, 2.5e9, 50e3  # points half an RBW apart
FLOOR_DBM = -100.0  # the displayed noise floor in the RBW (invented; a preamplified analyser)
# The invented departures from the plan, dB, by product label; what is not listed is as
# planned (within the trace's own scatter).
DEPARTURES_DB = {"3f1": +6.0, "2f1": -2.0}
EXTRA_SPURS = ((600e6, -58.0),)  # (Hz, dBm): a spur the plan does not model


def _gaussian_rbw_db(offset_hz: np.ndarray) -> np.ndarray:
    """An analyser's Gaussian RBW filter, 3 dB wide at the RBW (common practice, no source)."""
    return 10 * np.log10(np.exp(-4 * np.log(2) * (offset_hz / RBW_HZ) ** 2) + 1e-30)


def trace_levels_dbm(
    freq_hz: np.ndarray, lines: list[tuple[float, float]], rng, noise_dbm_hz: np.ndarray | None = None
) -> np.ndarray:
    """The trace: the analyser's own floor plus the transmitter's output noise in the RBW,
    with the scatter of a video-filtered display (the mean of ten exponential power
    readings, about +-1.4 dB), plus each line through the RBW."""
    floor_mw = 10 ** (FLOOR_DBM / 10)
    if noise_dbm_hz is not None:
        floor_mw = floor_mw + 10 ** ((noise_dbm_hz + 10 * np.log10(RBW_HZ)) / 10)
    floor_mw = floor_mw * rng.gamma(10.0, 0.1, freq_hz.shape)
    power_mw = floor_mw
    for f0, level in lines:
        near = np.abs(freq_hz - f0) < 5 * RBW_HZ
        power_mw[near] += 10 ** ((level + _gaussian_rbw_db(freq_hz[near] - f0)) / 10)
    return 10 * np.log10(power_mw)


def planned_lines(lineup) -> list[tuple[str, float, float]]:
    """(label, Hz, dBm) of every product and carrier the plan puts at the output."""
    rows = lineup.run().product_rows()
    return [
        (label, f, level)
        for label, f, level in zip(rows["label"], rows["freq_hz"], rows["level_dbm"], strict=True)
        if START_HZ <= f <= STOP_HZ and level > FLOOR_DBM - 20
    ]


def write_trace(lineup, rng, out: Path = OUT) -> Path:
    freq = np.arange(START_HZ, STOP_HZ + STEP_HZ / 2, STEP_HZ)
    lines = [(f, level + DEPARTURES_DB.get(label, 0.0)) for label, f, level in planned_lines(lineup)]
    lines += list(EXTRA_SPURS)
    # The transmitter's own output noise (the plan's, as check predicts it) where it rises
    # above the analyser's floor: below the harmonic filter's cutoff.
    level = trace_levels_dbm(freq, lines, rng, output_noise_dbm_hz(lineup, freq))
    path = out / "uhf_prototype_trace.csv"
    head = (
        "# Invented data for the spurplan bench example: a made-up analyser trace of the UHF\n"
        "# telemetry prototype (examples/make_bench_session.py), not a measurement.\n"
        "# rbw = 100 kHz\n# detector = peak\n# reference_level = 40 dBm\n"
        "freq_mhz,level_dbm\n"
    )
    body = "".join(f"{f / 1e6:.3f},{v:.1f}\n" for f, v in zip(freq, level, strict=True))
    path.write_text(head + body)
    return path


# The invented PA on the bench, in closed form (not spurplan's model): gain 24 dB, an output
# rail of Rapp form (smoothness 2) at +38.5 dBm, the second harmonic -30 dBc and the third
# -40 dBc at +37 dBm out, falling by 1 and 2 dB per dB of output below it (slope-of-n;
# common practice, no source).  The datasheet states no h3; the bench measures it.
PA_GAIN_DB, PA_PSAT_DBM, RAPP_P = 24.0, 38.5, 2.0
PA_H2_DBC, PA_H3_DBC, PA_AT_DBM = -30.0, -40.0, 37.0
READ_NOISE_DB = 0.05  # the scatter of the bench's power readings (invented)


def pa_output_dbm(pin_dbm: np.ndarray) -> np.ndarray:
    """Rapp's AM/AM, |Vout| = G |Vin| / (1 + (G |Vin| / Vsat)^(2p))^(1/(2p)) (Rapp 1991; from memory)."""
    linear_mw = 10 ** ((pin_dbm + PA_GAIN_DB) / 10)
    sat_mw = 10 ** (PA_PSAT_DBM / 10)
    return 10 * np.log10(linear_mw / (1 + (linear_mw / sat_mw) ** RAPP_P) ** (1 / RAPP_P))


def write_pa_sweep(rng, out: Path = OUT) -> Path:
    """A one-tone drive sweep of the PA at 455 MHz: output and, below +30 dBm out (where the
    slope-of-n holds and the analyser's range allows), the 2nd and 3rd harmonics in dBc."""
    pin = np.arange(-20.0, 14.0 + 0.5, 1.0)
    pout = pa_output_dbm(pin)
    rows = []
    for p_in, p_out in zip(pin, pout, strict=True):
        read = p_out + rng.normal(0.0, READ_NOISE_DB)
        h = ""
        if p_out <= 30.0:
            h2 = PA_H2_DBC + (p_out - PA_AT_DBM) + rng.normal(0.0, READ_NOISE_DB)
            h3 = PA_H3_DBC + 2 * (p_out - PA_AT_DBM) + rng.normal(0.0, READ_NOISE_DB)
            h = f"{h2:.2f},{h3:.2f}"
        else:
            h = ","
        rows.append(f"{p_in:.2f},{read:.2f},{h}\n")
    path = out / "uhf_pa_sweep.csv"
    head = (
        "# Invented data for the spurplan bench example: a made-up drive sweep of the UHF\n"
        "# telemetry PA (examples/make_bench_session.py), not a measurement.\n"
        "# stage = pa\n# freq = 455 MHz\n"
        "pin_dbm,pout_dbm,h2_dbc,h3_dbc\n"
    )
    path.write_text(head + "".join(rows))
    return path


def main(out: Path = OUT) -> list[Path]:
    """Write both files into ``out`` (the trace first: one generator, one order)."""
    out.mkdir(exist_ok=True)
    rng = np.random.default_rng(SEED)
    lineup = load(LINEUP)
    return [write_trace(lineup, rng, out), write_pa_sweep(rng, out)]


if __name__ == "__main__":
    for path in main():
        print("wrote", path)
