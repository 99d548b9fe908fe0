"""Modulated carriers as multisines: zone powers, regrowth, and reading the descriptions.

References outside spurplan: the moments of a complex Gaussian envelope
(``E|z|^(2n) = n! sigma^(2n)``, from memory), the triple convolution of a rectangle
(derived below), the Jacobi-Anger expansion behind sine FM (scipy.special.jv), and the
engine's own CW results, which the brute-force tests tie to numpy.fft.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pytest
from helpers import assert_one_error_line, invoke, write

from spurplan.analyses.check import check
from spurplan.engine.spectra import expand, line_spectrum
from spurplan.io.lineup_file import from_dict, load
from spurplan.model.modulation import Modulation, multisine

FC_HZ = 450e6
BW_HZ = 1e6


def _doc(amplifier: dict, power: str = "-10 dBm", **carrier) -> dict:
    """One invented carrier at 450 MHz, 1 MHz wide, through one amplifier."""
    return {
        "carrier": [{"freq": "450 MHz", "power": power, "bandwidth": "1 MHz", **carrier}],
        "stage": [{"kind": "amplifier", "name": "amp", "gain": "10 dB", **amplifier}],
        "analysis": {"max_order": 3, "combine": "phase"},
    }


def _with(lineup, modulation: Modulation):
    return replace(lineup, carriers=(replace(lineup.carriers[0], modulation=modulation),))


def _cw_zone_dbm(lineup, n: int) -> float:
    rows = lineup.run().product_rows(combine="phase")
    return next(
        lv for f, lv in zip(rows["freq_hz"], rows["level_dbm"], strict=True) if abs(f - n * FC_HZ) < 1
    )


@pytest.mark.parametrize(("n", "figure"), [(2, {"oip2": "+40 dBm"}), (3, {"oip3": "+40 dBm"})])
def test_noise_like_zone_power_exceeds_cw_by_log_n_factorial(n, figure):
    # A pure n-th order term maps the complex envelope z to z^n in the n-th zone, whose
    # mean power is E|z|^(2n) = n! sigma^(2n) for a complex Gaussian (from memory): 3.01 dB
    # (n = 2) and 7.78 dB (n = 3) above a CW carrier of the same mean power.
    lineup = from_dict(_doc(figure))
    cw = _cw_zone_dbm(lineup, n)
    spec = line_spectrum(_with(lineup, Modulation("gaussian", tones=64, realizations=64)))
    zone = spec.band_power_dbm(n * FC_HZ - n * BW_HZ, n * FC_HZ + n * BW_HZ)
    assert zone - cw == pytest.approx(10 * math.log10(math.factorial(n)), abs=0.3)


@pytest.mark.parametrize(("n", "figure"), [(2, {"oip2": "+40 dBm"}), (3, {"oip3": "+40 dBm"})])
def test_constant_envelope_gives_the_cw_zone_powers(n, figure):
    # |z| constant: |z^n|^2 = |z|^(2n) = (mean power)^n, as for CW (arithmetic).
    lineup = from_dict(_doc(figure))
    cw = _cw_zone_dbm(lineup, n)
    spec = line_spectrum(_with(lineup, Modulation("constant-envelope", tones=65)))
    zone = spec.band_power_dbm(n * FC_HZ - 2 * n * BW_HZ, n * FC_HZ + 2 * n * BW_HZ)
    assert zone == pytest.approx(cw, abs=0.01)


def test_constant_envelope_is_constant_and_fills_its_carson_bandwidth():
    # Sine FM: lines J_k(beta) (Jacobi-Anger; scipy.special.jv) with sum J_k^2 = 1 (Neumann's
    # identity, from memory), spaced f_m with 2 (beta + 1) f_m = B (Carson, from memory).
    from scipy.special import jv

    ms = multisine(Modulation("constant-envelope", tones=65), BW_HZ)
    assert ms.envelope_par_db()[0] < 1e-5
    beta = BW_HZ / (2 * ms.step_hz) - 1
    assert np.allclose(ms.phasors[0].real, jv(ms.steps, beta), atol=1e-9)


def _uncorrelated_split_db(x, y, freqs_hz) -> tuple[float, float]:
    """Upper and lower adjacent over in-band power (dB) of ``y`` less its part proportional
    to ``x`` (least squares over every tone and realization: Bussgang's theorem for
    Gaussian inputs, from memory)."""
    f = np.abs(freqs_hz)  # a product at -m . f is its conjugate: the same power
    tones = np.abs(x).max(axis=0) > 0
    c = np.sum(y[:, tones] * np.conj(x[:, tones])) / np.sum(np.abs(x[:, tones]) ** 2)
    power = np.mean(np.abs(np.where(tones, y - c * x, y)) ** 2, axis=0)
    zone1 = np.abs(f - FC_HZ) < 2 * BW_HZ
    in_band = power[zone1 & (np.abs(f - FC_HZ) < BW_HZ / 2)].sum()
    upper = power[zone1 & (f - FC_HZ > BW_HZ / 2) & (f - FC_HZ < 1.5 * BW_HZ)].sum()
    lower = power[zone1 & (FC_HZ - f > BW_HZ / 2) & (FC_HZ - f < 1.5 * BW_HZ)].sum()
    return 10 * math.log10(upper / in_band), 10 * math.log10(lower / in_band)


def test_cubic_regrowth_splits_two_thirds_in_band_and_one_sixth_each_side():
    # A cubic driven by a flat, band-limited Gaussian signal of width B: what is left of the
    # cubic term after the part proportional to the input is removed has the spectrum of
    # the triple convolution of the rectangle (the quadratic B-spline over [-3B/2, 3B/2]):
    # 2/3 of it in [-B/2, B/2] and 1/6 in each neighbouring band of width B (derived:
    # the spline's pieces integrate to 1/6, 2/3, 1/6).  Adjacent over in-band: -6.02 dB.
    # 256 tones: a comb of N tones departs from the continuum by about 1/N (64 tones read
    # -5.8 dB, the same with a brute-force envelope below).
    lineup = from_dict(_doc({"oip3": "+40 dBm"}))
    ex = expand(_with(lineup, Modulation("gaussian", tones=256, realizations=32)))
    result = ex.lineup.run(carrier_phasors_v=ex.phasors_v)
    upper, lower = _uncorrelated_split_db(
        result.propagation.nodes[0], result.propagation.nodes[-1], result.freqs_hz[0]
    )
    assert upper == pytest.approx(-6.02, abs=0.3)
    assert lower == pytest.approx(-6.02, abs=0.3)


def test_cubic_zone_lines_equal_a_brute_force_envelope():
    # The same cubic on the complex envelope, sampled and transformed by numpy.fft: the
    # first zone of a3 x^3 is (3/4) a3 |z|^2 z (common practice, no source); with the same
    # tones and phases every line's distortion agrees with the engine's.
    lineup = from_dict(_doc({"oip3": "+40 dBm"}))
    n = 64
    ex = expand(_with(lineup, Modulation("gaussian", tones=n, realizations=8)))
    result = ex.lineup.run(carrier_phasors_v=ex.phasors_v)
    engine = _uncorrelated_split_db(
        result.propagation.nodes[0], result.propagation.nodes[-1], result.freqs_hz[0]
    )
    # Half-step grid: tone i sits at (2 (i - n/2) + 1) half steps from the centre.
    length = 16 * n
    grid = np.zeros((len(ex.phasors_v), length), dtype=complex)
    grid[:, (2 * (np.arange(n) - n // 2) + 1) % length] = ex.phasors_v
    z = np.fft.ifft(grid, axis=1, norm="forward")
    spectrum = np.fft.fft(np.abs(z) ** 2 * z, axis=1, norm="forward")
    half = np.arange(length)
    half = np.where(half > length // 2, half - length, half)
    freqs = np.broadcast_to(FC_HZ + half * (BW_HZ / n) / 2, grid.shape)[0]
    brute = _uncorrelated_split_db(grid, spectrum, freqs)
    assert engine == pytest.approx(brute, abs=0.01)


def test_a_two_tone_record_equals_two_cw_carriers(tmp_path):
    # An I/Q record of cos(2 pi k n / N) is two lines of half the power each at +-k fs/N
    # (arithmetic): the lineup must give what two CW carriers there give, at every
    # frequency, through two nonlinear stages.
    n, k, fs = 64, 4, 1.6e6
    t = np.arange(n)
    np.save(tmp_path / "two_tone.npy", np.cos(2 * np.pi * k * t / n).astype(complex))
    stages = [
        {"kind": "amplifier", "name": "driver", "gain": "15 dB", "oip3": "+28 dBm", "oip2": "+35 dBm"},
        {"kind": "amplifier", "name": "pa", "gain": "12 dB", "oip3": "+38 dBm", "oip2": "+45 dBm"},
    ]
    modulated = from_dict(
        {
            "carrier": [
                {
                    "freq": "450 MHz",
                    "power": "-7 dBm",
                    "modulation": {"kind": "iq", "file": "two_tone.npy", "sample_rate": "1.6 MHz"},
                }
            ],
            "stage": stages,
            "analysis": {"max_order": 5, "combine": "phase"},
        },
        base_dir=tmp_path,
    )
    offset = k * fs / n
    two = from_dict(
        {
            "carrier": [
                {"freq": f"{FC_HZ - offset:.1f} Hz", "power": f"{-7 - 10 * math.log10(2):.6f} dBm"},
                {"freq": f"{FC_HZ + offset:.1f} Hz", "power": f"{-7 - 10 * math.log10(2):.6f} dBm"},
            ],
            "stage": stages,
            "analysis": {"max_order": 5, "combine": "phase"},
        }
    )
    spec = line_spectrum(modulated)
    rows = two.run().product_rows(combine="phase")
    cw = {
        round(f): lv
        for f, lv, d in zip(rows["freq_hz"], rows["level_dbm"], rows["dbc"], strict=True)
        if d > -150
    }
    lines = {round(f): p for f, p in zip(spec.freq_hz, spec.power_dbm, strict=True)}
    assert len(cw) > 20
    for f, level in cw.items():
        assert lines[f] == pytest.approx(level, abs=0.01), f


def test_stated_par_is_met():
    for par in (5.0, 9.0, 14.0):
        ms = multisine(Modulation("par", tones=64, realizations=4, par_db=par), BW_HZ)
        assert np.all(np.abs(ms.envelope_par_db() - par) <= 0.1)


def test_check_of_a_modulated_carrier_judges_its_spectrum(tmp_path):
    # The 2nd zone of a noise-like carrier through a stage with h2 = -30 dBc at +20 dBm:
    # 3.01 dB more power than CW (10 log10 2!), spread over 2 B; the check reports it as one
    # row whose level is the zone's power, and the ACPR channel holds the regrowth.
    doc = _doc({"oip3": "+35 dBm", "h2": "-30 dBc @ +20 dBm", "noise_figure": "5 dB"}, power="+10 dBm")
    doc["carrier"][0]["modulation"] = {"kind": "gaussian", "tones": 64, "realizations": 32}
    doc["analysis"]["max_order"] = 3
    doc["mask"] = {
        "rule": [{"name": "flat", "start": "9 kHz", "stop": "2 GHz", "limit": "-60 dBc", "rbw": "100 kHz"}],
        "adjacent_channel": [
            {
                "name": "acp",
                "channel_bandwidth": "1 MHz",
                "offsets": ["1 MHz"],
                "limit": "-30 dBc",
                "source": "invented",
                "status": "user",
            }
        ],
    }
    lineup = from_dict(doc)
    outcome = check(lineup)
    rows = outcome.rows
    zone2 = rows["label"].index("2f1 zone")
    cw = (
        from_dict({**doc, "carrier": [{"freq": "450 MHz", "power": "+10 dBm"}]})
        .run()
        .product_rows(combine="phase")
    )
    cw2 = next(lv for f, lv in zip(cw["freq_hz"], cw["level_dbm"], strict=True) if abs(f - 2 * FC_HZ) < 1)
    assert rows["level_dbm"][zone2] - cw2 == pytest.approx(10 * math.log10(2), abs=0.3)
    # The zone is the rectangle convolved with itself, a triangle of base 2 B whose peak
    # density is 1 / B of its power (derived): 100 kHz there hold 10 log10(0.1) = -10 dB of
    # it.  The check reads the worst window of a finite average, which reads a little high.
    assert rows["level_in_rbw_dbm"][zone2] - rows["level_dbm"][zone2] == pytest.approx(-10.0 + 0.5, abs=0.7)
    acp = next(e for e in outcome.acpr if e["side"] == "upper")
    # The channel holds the regrowth: the spectrum's lines in it (none of them carriers).
    spec = outcome.spectrum
    assert acp["products_dbm"] == pytest.approx(
        spec.band_power_dbm(acp["channel_start_hz"], acp["channel_stop_hz"]), abs=0.01
    )
    assert acp["products_dbm"] - acp["carrier_dbm"] > -80
    assert not outcome.acpr_not_judged


BAD_MODULATION = [
    ('modulation = "qam"', ("carrier 1 modulation", "kind", "'qam'", "gaussian")),
    ('modulation = { kind = "par", par = "30 dB" }', ("par", "30 dB", "for 64 tones")),
    ('modulation = { kind = "gaussian", tones = 4 }', ("tones", "4")),
    ('modulation = { kind = "gaussian", realizations = 0 }', ("realizations", "0")),
    (
        'modulation = { kind = "iq", file = "missing.npy", sample_rate = "1 MHz" }',
        ("missing.npy", "file not found"),
    ),
    ('modulation = { kind = "iq", file = "x.csv" }', ("sample_rate", "required")),
    ("modulation = 7", ("modulation", "7", "expected one of")),
]


@pytest.mark.parametrize(("text", "needles"), BAD_MODULATION)
def test_malformed_modulation_is_one_line(tmp_path, text, needles):
    path = write(
        tmp_path, "bad.toml", f'[[carrier]]\nfreq = "450 MHz"\npower = "0 dBm"\nbandwidth = "1 MHz"\n{text}\n'
    )
    r = invoke("spectrum", path, expect=2)
    assert_one_error_line(r.exit_code, r.stdout, r.stderr, needles)


@pytest.mark.parametrize(
    ("name", "content", "needles"),
    [
        ("a.csv", "I,Q\n1,0\n0.5,abc\n", ("line 3", "'0.5,abc'", "two numbers")),
        ("b.csv", "1,0\nnan,0\n", ("sample 2", "finite")),
        ("c.csv", "0,0\n0,0\n", ("every sample is zero",)),
        ("d.npy", b"not an array", ("not a readable .npy",)),
    ],
)
def test_malformed_iq_record_is_one_line(tmp_path, name, content, needles):
    (tmp_path / name).write_bytes(content if isinstance(content, bytes) else content.encode())
    path = write(
        tmp_path,
        "lineup.toml",
        f'[[carrier]]\nfreq = "450 MHz"\npower = "0 dBm"\nmodulation = {{ kind = "iq", file = "{name}", sample_rate = "1 MHz" }}\n',
    )
    r = invoke("spectrum", path, expect=2)
    assert_one_error_line(r.exit_code, r.stdout, r.stderr, (name, *needles))


def test_iq_record_wider_than_the_bandwidth_is_refused(tmp_path):
    np.save(tmp_path / "wide.npy", np.exp(2j * np.pi * 16 * np.arange(64) / 64))
    path = write(
        tmp_path,
        "lineup.toml",
        '[[carrier]]\nfreq = "450 MHz"\npower = "0 dBm"\nbandwidth = "10 kHz"\n'
        'modulation = { kind = "iq", file = "wide.npy", sample_rate = "1 MHz" }\n',
    )
    r = invoke("spectrum", path, expect=2)
    assert_one_error_line(r.exit_code, r.stdout, r.stderr, ("wide.npy", "wider than the carrier's bandwidth"))


def test_too_many_tones_for_the_grid_is_one_line(tmp_path):
    # Two modulated carriers 200 MHz apart on a 1 kHz raster of tones: the step axis alone
    # would span 200,000 steps times the order (arithmetic): far beyond the grid budget.
    text = "".join(
        f'[[carrier]]\nfreq = "{f} MHz"\npower = "0 dBm"\nbandwidth = "64 kHz"\nmodulation = "gaussian"\n'
        for f in (450, 650)
    )
    text += '[[stage]]\nkind = "amplifier"\nname = "pa"\ngain = "10 dB"\noip3 = "+30 dBm"\n'
    path = write(tmp_path, "lineup.toml", text)
    r = invoke("spectrum", path, expect=2)
    assert_one_error_line(r.exit_code, r.stdout, r.stderr, ("[analysis]", "grid points", "tones"))


def test_csv_record_with_header_reads(tmp_path):
    (tmp_path / "r.csv").write_text("# invented record\nI, Q\n1, 0\n0, 1\n-1, 0\n0, -1\n")
    lineup = load(
        write(
            tmp_path,
            "lineup.toml",
            '[[carrier]]\nfreq = "450 MHz"\npower = "0 dBm"\nmodulation = { kind = "iq", file = "r.csv", sample_rate = "4 kHz" }\n',
        )
    )
    # exp(j 2 pi n / 4): one line at +fs/4 = +1 kHz (arithmetic); the occupied bandwidth,
    # symmetric about the carrier frequency, is 2 x 1 kHz plus one 1 kHz bin.
    m = lineup.carriers[0].modulation
    assert m.iq_bins.tolist() == [1]
    assert lineup.carriers[0].bandwidth_hz == pytest.approx(3e3)


MODULATED_LINEUP = """
[lineup]
name = "noise-like carrier (invented)"
[[carrier]]
freq = "450 MHz"
power = "-10 dBm"
bandwidth = "1 MHz"
modulation = { kind = "gaussian", tones = 64, realizations = 16 }
[[stage]]
kind = "amplifier"
name = "pa"
gain = "30 dB"
oip3 = "+40 dBm"
h2 = "-30 dBc @ +20 dBm"
psat = "+33 dBm"
noise_figure = "5 dB"
[analysis]
max_order = 3
[mask]
use = ["itu-sm329-cat-a"]
"""


def test_spectrum_command_lists_every_line_with_its_density(tmp_path):
    import csv
    import io
    import json

    path = write(tmp_path, "mod.toml", MODULATED_LINEUP)
    doc = json.loads(invoke("spectrum", path, "--format", "json").stdout)
    lines = doc["lines"]
    # Density = line power over the raster (B / tones = 15625 Hz, arithmetic).
    assert doc["summary"]["raster_hz"] == pytest.approx(1e6 / 64)
    for line in lines[:50]:
        assert line["psd_dbm_hz"] == pytest.approx(line["level_dbm"] - 10 * math.log10(1e6 / 64), abs=1e-9)
        # The output noise beside it: k T0 F G (-173.975 dBm/Hz + 5 dB + 30 dB; k exact in SI
        # 2019, T0 = 290 K) at frequencies the flat-gain stage passes.
        assert line["noise_dbm_hz"] == pytest.approx(-173.975 + 5 + 30, abs=0.01)
    # The clusters' powers are their lines' power sums.
    zone2 = next(c for c in doc["summary"]["clusters"] if c["label"] == "2f1 zone")
    inside = [ln["level_dbm"] for ln in lines if zone2["start_hz"] <= ln["freq_hz"] <= zone2["stop_hz"]]
    assert zone2["level_dbm"] == pytest.approx(10 * math.log10(sum(10 ** (v / 10) for v in inside)), abs=1e-9)
    rows = list(csv.DictReader(io.StringIO(invoke("spectrum", path, "--format", "csv").stdout)))
    assert len(rows) == len(lines) and set(rows[0]) >= {"freq_hz", "psd_dbm_hz", "noise_dbm_hz"}
    text = invoke("spectrum", path).stdout
    assert "2f1 zone" in text and "f1 regrowth above" in text and "64 tones x 16 realizations" in text


def test_check_json_plot_and_sweep_headline_of_a_modulated_lineup(tmp_path):
    import json

    path = write(tmp_path, "mod.toml", MODULATED_LINEUP)
    r = invoke("check", path, "--format", "json", "--plot", tmp_path / "c.png", expect=(0, 1))
    summary = json.loads(r.stdout)["summary"]
    assert summary["spectrum"]["raster_hz"] == pytest.approx(1e6 / 64)
    assert len(summary["spectrum"]["freq_hz"]) == len(summary["spectrum"]["psd_dbm_hz"]) > 100
    assert (tmp_path / "c.png").stat().st_size > 10_000
    # Regrowth next to the carrier with no out-of-band rule: not judged, so not a PASS.
    assert summary["status"] != "PASS"
    out = invoke(
        "drive", path, "--start", "-20 dBm", "--stop", "-10 dBm", "--step", "5 dB", expect=None
    ).stdout
    assert "INCOMPLETE" in out and "swept as CW" in out


def test_remedy_does_not_call_an_incomplete_check_met(tmp_path):
    # Every judged product has its margin, but the regrowth beside the carrier has no rule:
    # the check is INCOMPLETE, and the remedy says so rather than "already meets the mask".
    path = write(tmp_path, "mod.toml", MODULATED_LINEUP)
    out = invoke("remedy", path, "--margin", "1 dB", expect=None).stdout
    assert "already meets" not in out
    assert "INCOMPLETE" in out and "out-of-band domain not judged" in out


def test_lines_beyond_a_touchstone_stages_data_are_flagged():
    # The bundled VHF example's filter data end at 2 GHz (examples/data/vhf_lpf.s2p): with a
    # modulated carrier at 156.8 MHz and order 14, the 13th zone (2038 MHz, arithmetic) and the
    # difference band (below its 1 MHz start) pass it beyond its data, and their rows say so,
    # as CW products' do.
    import tomllib
    from pathlib import Path

    root = Path(__file__).resolve().parents[1] / "examples"
    doc = tomllib.loads((root / "vhf_marine_touchstone.toml").read_text())
    doc["carrier"][0]["bandwidth"] = "25 kHz"
    doc["carrier"][0]["modulation"] = {"kind": "gaussian", "tones": 16, "realizations": 4}
    doc["analysis"].update({"max_order": 14, "beyond_data": "hold"})
    outcome = check(from_dict(doc, base_dir=root))
    rows = outcome.rows
    flagged = {(lab, b) for lab, b in zip(rows["label"], rows["beyond_data"], strict=True)}
    assert ("13f1 zone", True) in flagged
    assert ("difference band", True) in flagged
    assert ("2f1 zone", False) in flagged and ("2f1 zone", True) not in flagged
