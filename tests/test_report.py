"""The design-review report (HTML and Markdown) and the notebook representations."""

from __future__ import annotations

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
    assert text.count("<tr>") == 1 + len(tuned.rows["carrier_hz"])
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
