"""The design-review report (HTML and Markdown) and the notebook representations."""

from __future__ import annotations

import math
import re
import shutil
import struct
import subprocess
from datetime import UTC, datetime

import numpy as np
import pytest
from click.testing import CliRunner

import spurplan
from spurplan.analyses.check import check
from spurplan.cli import main
from spurplan.io.resources import example_path
from spurplan.output.report import build_report, write_report

T0 = datetime(2026, 1, 2, 3, 4, 5, tzinfo=UTC)
T1 = datetime(2026, 6, 7, 8, 9, 10, tzinfo=UTC)


@pytest.fixture(scope="module")
def example():
    return spurplan.load(example_path())


@pytest.fixture(scope="module")
def html_file(example, tmp_path_factory):
    path = tmp_path_factory.mktemp("report") / "review.html"
    write_report(example, path, now=T0)
    return path


@pytest.mark.slow
def test_html_is_self_contained_and_has_the_parts(html_file, example):
    text = html_file.read_text(encoding="utf-8")
    # No reference outside the file: no URLs, no external stylesheets or scripts,
    # every image inline (the report must open offline).
    assert not re.search(r"https?://", text)
    assert "<link" not in text and "<script" not in text
    assert re.findall(r'src="([^"]*)"', text) and all(
        s.startswith("data:image/png;base64,") for s in re.findall(r'src="([^"]*)"', text)
    )
    outcome = check(example)
    assert outcome.status in text
    for heading in (
        "Cascade budget",
        "against the mask",
        "Drive sweep",
        "Tuning sweep",
        "Assumptions",
        "Cautions",
    ):
        assert heading in text
    # Provenance: version, the lineup's hash, the analysis settings.
    import hashlib

    assert spurplan.__version__ in text
    assert hashlib.sha256(example.source.read_bytes()).hexdigest() in text
    assert "Compliance is decided by measurement" in text
    assert "RF exposure" in text
    assert "@media print" in text


@pytest.mark.slow
def test_report_is_deterministic_apart_from_the_timestamp(example, tmp_path):
    a, b, c = tmp_path / "a.html", tmp_path / "b.html", tmp_path / "c.html"
    write_report(example, a, now=T0)
    write_report(example, b, now=T0)
    write_report(example, c, now=T1)
    assert a.read_bytes() == b.read_bytes()
    diff = [
        (x, y) for x, y in zip(a.read_text().splitlines(), c.read_text().splitlines(), strict=True) if x != y
    ]
    assert len(diff) == 1 and "Report made" in diff[0][0]


@pytest.mark.slow
def test_markdown_report_has_figures_beside_it(example, tmp_path):
    path = tmp_path / "review.md"
    write_report(example, path, now=T0)
    text = path.read_text(encoding="utf-8")
    links = re.findall(r"!\[[^\]]*\]\(([^)]+)\)", text)
    assert len(links) >= 3
    for link in links:
        png = (tmp_path / link).read_bytes()
        assert png[:8] == b"\x89PNG\r\n\x1a\n"
    assert "| product |" in text or "product" in text


@pytest.mark.slow
def test_report_command(tmp_path):
    out = CliRunner().invoke(main, ["report", "-o", str(tmp_path / "r.html")])
    assert out.exit_code == 0, out.output
    assert (tmp_path / "r.html").stat().st_size > 10_000
    bad = CliRunner().invoke(main, ["report", "-o", str(tmp_path / "r.pdf")])
    assert bad.exit_code == 2 and len(bad.stderr.strip().splitlines()) == 1


def _png_size(path):
    head = path.read_bytes()[:24]
    return struct.unpack(">II", head[16:24])


CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser") or shutil.which("google-chrome")
FLAGS = [
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
]


@pytest.mark.skipif(CHROMIUM is None, reason="no Chromium installed (apt-get install chromium)")
@pytest.mark.slow
def test_report_opens_in_a_headless_browser(html_file, tmp_path):
    # The browser renders the page: the DOM has the verdict, the product table and the
    # figures, and a screenshot is taken (kept as tests' artefact for a person to look at).
    profile = tmp_path / "profile"
    common = [CHROMIUM, *FLAGS, f"--user-data-dir={profile}"]
    dom = subprocess.run(
        [*common, "--dump-dom", html_file.as_uri()], capture_output=True, text=True, timeout=120, check=True
    ).stdout
    assert 'class="verdict' in dom and "<table>" in dom and "data:image/png;base64," in dom
    shot = tmp_path / "shot.png"
    subprocess.run(
        [*common, f"--screenshot={shot}", "--window-size=1280,2400", "--hide-scrollbars", html_file.as_uri()],
        capture_output=True,
        timeout=120,
        check=True,
    )
    assert _png_size(shot) == (1280, 2400)
    import matplotlib.image as mpimg

    pixels = mpimg.imread(shot)
    assert float(np.std(pixels)) > 0.05  # not a blank page


def test_repr_html_of_a_check_has_the_verdict_and_the_worst_row(example):
    outcome = check(example)
    text = outcome._repr_html_()
    worst = outcome.rows["label"][outcome.worst]
    assert outcome.status in text
    assert f"<td>{worst}</td>" in text
    assert "<table>" in text


def test_notebook_objects_give_frames_and_figures(example):
    import matplotlib.figure

    from spurplan.output.documents import products_html

    result = example.run()
    assert "<table>" in products_html(result) and result._repr_html_() == products_html(result)
    assert list(result.products().columns)[:3] == ["freq_hz", "level_dbm", "dbc"]
    outcome = check(example, result)
    assert len(outcome.table()) == len(outcome.rows["freq_hz"])
    for fig in (result.plot(), outcome.plot()):
        assert isinstance(fig, matplotlib.figure.Figure)
        from spurplan.output.plots import close

        close(fig)


def test_sweep_views_have_one_html_row_per_point_and_every_result_a_figure(example):
    # An HTML table has one <tr> for its header and one per row (HTML Living Standard,
    # "The tr element"; from memory); every result object draws itself.
    import matplotlib.figure

    from spurplan.analyses.filter_view import prototype_view
    from spurplan.analyses.spur_chart import spur_chart
    from spurplan.analyses.sweep import drive_sweep, tune_sweep
    from spurplan.output.documents import drive_html, tune_html
    from spurplan.output.plots import close

    sweep = drive_sweep(example, -20.0, -18.0, 1.0)
    text = drive_html(sweep)
    assert text.count("<tr>") == 1 + 3 and f"<b>{sweep.status}</b>" in text
    assert sweep._repr_html_() == text
    tuned = tune_sweep(example, np.array([455.0125e6, 456.0125e6]))
    text = tune_html(tuned)
    assert tuned._repr_html_() == text
    # Two tables: the summary (one row per product and rule or band) and the channels.
    assert text.count("<tr>") == 2 + len(tuned.summary) + len(tuned.rows["carrier_hz"])
    assert ("every channel passes" in text) is tuned.passed
    view = prototype_view({"family": "butterworth", "order": 3, "cutoff": "520 MHz"}, "50 ohm", "455 MHz")
    chart = spur_chart(spurplan.load(example_path("upconverter_low_side.toml")), "mixer", 3)
    # m + |n| <= 3 with m >= 0 and no n <= 0 at m = 0 gives 3 + 5 + 3 + 1 = 12 products
    # (counting the (m, n) pairs; arithmetic).
    assert len(chart.rows["m"]) == 12
    for fig in (sweep.plot(), tuned.plot(), view.plot(), chart.plot()):
        assert isinstance(fig, matplotlib.figure.Figure)
        close(fig)


@pytest.mark.slow
def test_build_report_lists_rule_set_sources(example):
    report = build_report(example)
    titles = [s.title for s in report.sections]
    assert titles[0] == "Lineup" and titles[-1] == "Cautions"
    html = report.to_html("now")
    for s in example.mask.sets:
        assert s.name in html


def test_notebook_views_escape_a_lineup_name(example):
    # A name from the user's file is text, never markup (README: "written as text, never
    # as markup"); html.escape of "<b>" is "&lt;b&gt;" (Python standard library docs).
    import dataclasses
    import html

    from spurplan.analyses.sweep import drive_sweep

    lineup = dataclasses.replace(example, name="<b>x</b>")
    for view in (lineup.run()._repr_html_(), drive_sweep(lineup, -20.0, -19.0, 1.0)._repr_html_()):
        assert "<b>x</b>" not in view and html.escape("<b>x</b>") in view


# --- what the report says of the plan: drive, tuning, filters, yield, listing floor -------------


def _section(report, start: str):
    hits = [s for s in report.sections if s.title.startswith(start)]
    assert len(hits) == 1, [s.title for s in report.sections]
    return hits[0]


def _texts(section) -> str:
    return "\n".join(v for k, v in section.parts if k == "text")


def _md_rows(section, index: int = 0) -> list[dict]:
    """The rows of the section's ``index``-th table, read back from its Markdown (cells
    unescaped: formatting.markdown_table puts a backslash before punctuation)."""
    md = [v[1] for k, v in section.parts if k == "table"][index]
    lines = md.strip().splitlines()

    def cells(line):
        return [re.sub(r"\\(.)", r"\1", c.strip()) for c in line.strip().strip("|").split(" | ")]

    head = cells(lines[0])
    return [dict(zip(head, cells(line), strict=True)) for line in lines[2:]]


def _plan_lineup(q_capacitor="lossless"):
    # Invented: a 20 dB amplifier whose 3rd harmonic is -100 dBc at +10 dBm out, a lossless
    # 5th-order Butterworth low-pass at 893 MHz, one protected band (RR 5.340 1400-1427 MHz)
    # held to -110 dBm in 1 MHz, a tuning range of 464-478 MHz in 100 kHz steps.
    from spurplan.io.lineup_file import from_dict

    doc = {
        "lineup": {"name": "report plan test (invented)"},
        "carrier": [{"freq": "470 MHz", "power": "-10 dBm"}],
        "stage": [
            {"kind": "amplifier", "name": "pa", "gain": "20 dB", "h3": "-100 dBc @ +10 dBm"},
            {
                "kind": "filter",
                "name": "lpf",
                "prototype": {
                    "family": "butterworth",
                    "order": 5,
                    "cutoff": "893 MHz",
                    "q_inductor": "lossless",
                    "q_capacitor": q_capacitor,
                    "floor": "none",
                },
            },
        ],
        "mask": {"use": [{"name": "itu-rr-5.340", "limit": "-110 dBm", "rbw": "1 MHz"}]},
        "report": {"tune": {"start": "464 MHz", "stop": "478 MHz", "step": "100 kHz"}},
        "analysis": {"max_order": 5},
    }
    return from_dict(doc, name="report-plan.toml")


@pytest.fixture(scope="module")
def plan_report():
    return build_report(_plan_lineup())


@pytest.mark.slow
def test_report_lists_butterworth_elements_with_the_handbook_g_values_and_q():
    sec = _section(build_report(_plan_lineup(q_capacitor=400)), "Filters")
    rows = _md_rows(sec)
    # Butterworth prototype g_k = 2 sin((2k - 1) pi / (2n)): for n = 5, 0.6180, 1.6180,
    # 2.0000, 1.6180, 0.6180 (Matthaei, Young and Jones, Microwave Filters, Impedance-Matching
    # Networks and Coupling Structures, table 4.05-1; from memory).  Denormalized to
    # 50 ohm at fc: L = g R / (2 pi fc), C = g / (R 2 pi fc) (same book, sec. 4.04; from memory).
    handbook = [0.6180, 1.6180, 2.0000, 1.6180, 0.6180]
    assert [float(r["g"]) for r in rows] == pytest.approx(handbook, abs=1e-4)
    w = 2 * np.pi * 893e6
    for k, r in enumerate(rows, start=1):
        g = 2 * np.sin((2 * k - 1) * np.pi / 10)
        if r["part"] == "L":
            assert float(r["L (nH)"]) == pytest.approx(g * 50 / w * 1e9, rel=5e-4)
            assert r["Q_L"] == "lossless" and r["Q_C"] == "-"
        else:
            assert float(r["C (pF)"]) == pytest.approx(g / (50 * w) * 1e12, rel=5e-4)
            assert float(r["Q_C"]) == 400 and r["Q_L"] == "-"
    text = _texts(sec)
    assert "'lpf': butterworth lowpass, order 5, cutoff 893 MHz" in text and "50 ohm" in text


@pytest.mark.slow
def test_report_tuning_section_gives_band_landings_and_the_worst_channel(plan_report):
    import math

    from spurplan.analyses.sweep import tune_sweep
    from spurplan.io.channels import sweep_points

    sec = _section(plan_report, "Tuning sweep, the carrier from 464 to 478 MHz")
    (row,) = [r for r in _md_rows(sec) if r["product"] == "3f1"]
    # First and last channels with 3 f in 1400-1427 MHz: 466.7 and 475.6 MHz (the first
    # 100 kHz channel at or above 1400/3 MHz, the last at or below 1427/3 MHz; n f = band
    # edge, common practice, no source): 90 channels.
    assert row["listed with the carrier at (MHz)"] == "466.700000-475.600000 (90)"
    assert row["rule or protected band"] == "RR 5.340 1400-1427 MHz"
    # Worst where the low-pass rejects least, at 3 x 466.7 MHz: margin = -110 - (-90 - L)
    # with L = 10 log10(1 + (f / fc)^10) (Butterworth, Zverev, Handbook of Filter Synthesis;
    # from memory): -0.42 dB (lossless parts).
    loss = 10 * math.log10(1 + (3 * 466.7e6 / 893e6) ** 10)
    assert float(row["worst margin (dB)"]) == pytest.approx(-110 + 90 + loss, abs=0.01)
    assert float(row["worst at carrier (MHz)"]) == pytest.approx(466.7)
    assert row[""] == "FAIL"
    assert "1400-1427" in _texts(sec) and "FAIL" not in _texts(sec)
    # The section only presents the sweep: its table is the library's summary, row for row.
    lineup = _plan_lineup()
    assert lineup.report.tune == (464e6, 478e6, 100e3)
    sw = tune_sweep(lineup, sweep_points(464e6, 478e6, 100e3, "channel", "Hz"))
    assert [r["product"] for r in _md_rows(sec)] == [e["label"] for e in sw.summary]
    assert [float(r["worst margin (dB)"]) for r in _md_rows(sec)] == pytest.approx(
        [e["worst_margin_db"] for e in sw.summary], abs=0.005
    )
    n_bad = int(np.sum(sw.worst_margin_db < 0))
    assert f"violated on {n_bad} of 141 channels" in _texts(sec)


@pytest.mark.slow
def test_report_states_the_listing_floor_of_the_check():
    # +10 dBm out of a 20 dB amplifier driven at -10 dBm (an h2 figure alone does not
    # compress the carrier: the square term adds only DC and 2f; common practice, no
    # source): products 200 dB below it, under -190 dBm, are not listed.
    from spurplan.io.lineup_file import from_dict

    lineup = from_dict(
        {
            "carrier": [{"freq": "100 MHz", "power": "-10 dBm"}],
            "stage": [{"kind": "amplifier", "name": "a", "gain": "20 dB", "h2": "-60 dBc @ +10 dBm"}],
            "mask": {"rule": [{"start": "9 kHz", "stop": "2 GHz", "limit": "-40 dBm"}]},
            "analysis": {"max_order": 3},
        },
        name="floor.toml",
    )
    text = _texts(_section(build_report(lineup), "Products at the antenna port"))
    assert "0 of 1 checked products fail" in text
    assert "Products below -190.00 dBm (200 dB below the strongest carrier at the output" in text
    assert "above order 3 are not computed" in text
    # Without a [report] table the sweeps say how to ask for them; no filter, no tolerances:
    # no filter or yield section.
    titles = [s.title for s in build_report(lineup).sections]
    assert "Drive sweep" in titles and "Tuning sweep" in titles
    assert "Filters" not in titles and not any(t.startswith("Yield") for t in titles)


@pytest.mark.slow
def test_report_drive_section_gives_the_highest_compliant_drive_and_its_limit():
    # The analytic case of tests/test_sweeps.py: h2 from OHIP2 +50 dBm, limit -40 dBm, so
    # H2 = 2 P - OHIP2 reaches the limit at P = +5 dBm out, -15 dBm in (OHIPn = Pout +
    # |dBc|/(n-1); common practice, no source).
    from spurplan.analyses.sweep import drive_sweep
    from spurplan.io.lineup_file import from_dict

    lineup = from_dict(
        {
            "carrier": [{"freq": "100 MHz", "power": "-30 dBm"}],
            "stage": [{"kind": "amplifier", "name": "a", "gain": "20 dB", "ohip2": "+50 dBm"}],
            "mask": {"rule": [{"start": "9 kHz", "stop": "20 GHz", "limit": "-40 dBm", "name": "flat"}]},
            "report": {"drive": {"start": "-30 dBm", "stop": "+0 dBm", "step": "1 dB"}},
            "analysis": {"max_order": 3},
        },
        name="drive.toml",
    )
    sec = _section(build_report(lineup), "Drive sweep")
    (row,) = _md_rows(sec)
    assert float(row["highest compliant input (dBm)"]) == pytest.approx(-15.0, abs=0.005)
    assert float(row["output there (dBm)"]) == pytest.approx(5.0, abs=0.005)
    assert row["limiting product"] == "2f1" and float(row["freq (MHz)"]) == pytest.approx(200.0)
    assert row["rule"] == "lineup: flat" and row["largest from"] == "a"
    # The section presents the library's sweep: the same edge and limiting product.
    sw = drive_sweep(lineup, -30.0, 0.0, 1.0)
    assert float(row["highest compliant input (dBm)"]) == pytest.approx(sw.max_compliant_input_dbm, abs=5e-4)
    assert row["limiting product"] == sw.limiting["label"]
    assert "INCOMPLETE" in _texts(sec)  # no oip3 or compression figure: the sweep says so


@pytest.mark.slow
def test_report_yield_section_with_tolerances():
    from spurplan.analyses.montecarlo import run_yield
    from spurplan.io.lineup_file import from_dict
    from spurplan.output.report import REPORT_YIELD_SAMPLES, REPORT_YIELD_SEED

    # tests/test_yield.py's closed form: OHIP2 ~ N(60 dBm, 2 dB) at +20 dBm out against
    # -21 dBm fails below 61 dBm: yield 1 - Phi(1/2) = 0.3085 (normal CDF, Abramowitz and
    # Stegun 26.2.29; from memory).
    lineup = from_dict(
        {
            "carrier": [{"freq": "100 MHz", "power": "0 dBm"}],
            "stage": [
                {
                    "kind": "amplifier",
                    "name": "pa",
                    "gain": "20 dB",
                    "h2": "-40 dBc @ +20 dBm",
                    "tolerance": {"ohip2": "2 dB"},
                }
            ],
            "mask": {"rule": [{"start": "9 kHz", "stop": "10 GHz", "limit": "-21 dBm", "name": "flat"}]},
            "analysis": {"max_order": 3},
        },
        name="yield.toml",
    )
    sec = _section(build_report(lineup), "Yield over the stated tolerances")
    text = _texts(sec)
    assert f"{REPORT_YIELD_SAMPLES} samples (seed {REPORT_YIELD_SEED})" in text
    percent = float(re.search(r"([0-9.]+) % \(", text).group(1))
    want = 1 - 0.5 * (1 + math.erf(0.5 / math.sqrt(2)))
    # Within 4 sigma of the closed form, sigma = sqrt(p (1 - p) / N) (normal approximation
    # to the binomial; from memory).
    assert abs(percent / 100 - want) <= 4 * math.sqrt(want * (1 - want) / REPORT_YIELD_SAMPLES)
    res = run_yield(lineup, REPORT_YIELD_SAMPLES, seed=REPORT_YIELD_SEED)
    assert f"{100 * res.yield_fraction:.3f} % ({res.passed} of {res.samples} pass)" in text
    (cause,) = _md_rows(sec)
    assert cause["product"] == "2f1" and int(cause["failing samples"]) == res.samples - res.passed


@pytest.mark.slow
def test_report_says_a_touchstone_filter_is_data():
    lineup = spurplan.load(example_path("vhf_marine_touchstone.toml"))
    text = _texts(_section(build_report(lineup), "Filters"))
    assert "Touchstone file data/vhf_lpf.s2p" in text and "no element values or Q" in text
