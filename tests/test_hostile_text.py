"""Hostile free text in users' files: every output medium shows it as text, and only as text.

Names and sources come from users' files: the lineup's name, stage names, band and
rule names (inline ``[[mask.band]]``, a user's rule file), a rule file's title and
source, and the notes that quote them.  Each medium has its own way of being taken
over, and each case below puts a known one through the command line:

- Markdown report: raw HTML (``<script>``, ``<img onerror=...>``, ``<iframe>``), images
  and links (``![x](http://...)``, ``[a](javascript:...)``), ``|`` that ends a table
  cell (CommonMark 0.31 and GitHub Flavored Markdown 0.29, from memory);
- HTML report: the same HTML, and quotes that would end an attribute;
- CSV: a text cell starting with ``=``, ``+``, ``-`` or ``@`` is a spreadsheet formula
  (OWASP, "CSV Injection", from memory), while numbers must stay numbers;
- terminal: ECMA-48 control functions (ESC sequences, the C1 CSI, BEL, backspace, CR)
  and the Unicode bidirectional controls of UAX #9 (the "Trojan Source" attack,
  CVE-2021-42574, from memory) and zero-width characters;
- matplotlib: a name with an even number of ``$`` is parsed as mathtext, and
  ``$\\frac{$`` does not parse (matplotlib documentation, "Writing mathematical
  expressions").

The references are the contracts, not spurplan's own output: the forbidden characters
and constructs are listed here from the standards named above, and the literal text a
reader must see is the name as written in the file.  Every lineup and rule file below
is invented for these tests.
"""

from __future__ import annotations

import csv
import html.parser
import io
import json
import re
import xml.etree.ElementTree as ET
from pathlib import Path

import pytest
from helpers import assert_one_error_line, invoke, run_cli, run_in_process

# --- hostile pieces -------------------------------------------------------------------------------

HTML_PIECE = (
    '<script>alert(1)</script><img src=x onerror=alert(2)><iframe src="http://evil.example/"></iframe>'
)
MD_PIECE = "![x](http://remote.example/p.png) [link](javascript:alert(3)) | 2 | *b* _i_ `c`"
MATH_PIECE = r"$\frac{$ and $x$"
# ESC [ 2 J (erase display), OSC 0 (window title) ended by BEL, backspace, the C1 CSI,
# right-to-left override with its pop, a left-to-right isolate with its pop, a zero-width
# space (ECMA-48; Unicode UAX #9; from memory).
TERM_PIECE = "\x1b[2J\x1b]0;owned\x07\x08\x9b31m\u202eRLO\u202c\u2066iso\u2069\u200bend"
PRINTABLE = f"{HTML_PIECE} {MD_PIECE} {MATH_PIECE}"
HOSTILE = f"{PRINTABLE} {TERM_PIECE}"

# C0 controls but LF, DEL, C1 controls (ECMA-48), the bidi embeddings, overrides,
# isolates and marks (UAX #9), zero-width characters, word joiner and BOM (Unicode
# general category Cf), line and paragraph separators: none may reach a terminal.
TERMINAL_FORBIDDEN = re.compile(
    "[\x00-\x09\x0b-\x1f\x7f-\x9f\u061c\u200b-\u200f\u202a-\u202e\u2028\u2029\u2060-\u2069\ufeff]"
)
FORMULA_START = ("=", "+", "-", "@", "\t", "\r")  # OWASP, "CSV Injection", from memory


def toml_str(text: str) -> str:
    """A TOML basic string for ``text``.

    JSON's string escapes (\\" \\\\ \\b \\f \\n \\r \\t \\uXXXX) are all TOML escapes too
    (TOML 1.0, "String"; from memory); the pieces above hold no character outside the
    Basic Multilingual Plane, which JSON would write as a surrogate pair.
    """
    return json.dumps(text, ensure_ascii=True)


def names(text: str) -> dict[str, str]:
    """One hostile name per field, each opening with a different formula character."""
    return {
        "lineup": "-" + text,
        "stage": "+" + text,
        "band": "@" + text,
        "rule": "=" + text,
        "title": "=" + text,
        "source": "-" + text,
    }


def write_case(tmp_path: Path, text: str = HOSTILE, *, lineup_name: bool = True) -> Path:
    """A lineup whose every name is hostile, with a user rule file beside it.

    The amplifier's second and third harmonics (200 and 300 MHz) fall in the inline
    band and under the file's rule, so the band and rule names appear in every row.
    """
    n = names(text)
    head = f"[lineup]\nname = {toml_str(n['lineup'])}\n" if lineup_name else ""
    lineup = (
        "# invented test scenario\n"
        + head
        + '[[carrier]]\nfreq = "100 MHz"\npower = "0 dBm"\n'
        + f'[[stage]]\nkind = "amplifier"\nname = {toml_str(n["stage"])}\ngain = "10 dB"\n'
        + 'oip3 = "+30 dBm"\noip2 = "+40 dBm"\n'
        + '[mask]\nfiles = ["rules.toml"]\n'
        + f"[[mask.band]]\nname = {toml_str(n['band'])}\n"
        + 'start = "190 MHz"\nstop = "210 MHz"\nlimit = "-90 dBm"\nstatus = "derived"\n'
        + "[analysis]\nmax_order = 3\n"
    )
    rules = (
        "# invented test rule file\n"
        + f'[ruleset]\nname = "mine"\ntitle = {toml_str(n["title"])}\nsource = {toml_str(n["source"])}\n'
        + f'[[rule]]\nname = {toml_str(n["rule"])}\nstart = "30 MHz"\nlimit = "-60 dBm"\nstatus = "derived"\n'
    )
    (tmp_path / "rules.toml").write_text(rules, encoding="utf-8")
    path = tmp_path / "hostile.toml"
    path.write_text(lineup, encoding="utf-8")
    return path


def assert_terminal_clean(*texts: str) -> None:
    for text in texts:
        bad = TERMINAL_FORBIDDEN.search(text)
        assert bad is None, f"{bad.group()!r} reached the terminal in {text[:300]!r}"


# --- terminal ---------------------------------------------------------------------------------------


def test_check_table_shows_names_without_control_or_bidi_characters(tmp_path):
    r = invoke("check", write_case(tmp_path), expect=1)
    assert_terminal_clean(r.stdout, r.stderr)
    # The hostile characters are shown, not dropped: the reader sees that they are there.
    assert "\\x1b[2J" in r.stdout and "\\u202e" in r.stdout and "\\x07" in r.stdout
    # No name can fake a verdict: the program's own line is the only one.
    assert sum(line.startswith("VERDICT:") for line in r.stdout.splitlines()) == 1


def test_notes_and_warnings_on_stderr_are_escaped(tmp_path):
    # The amplifier states no compression figure: the warning quotes the stage name.
    r = invoke("check", write_case(tmp_path), expect=1)
    assert "not modelled" in r.stderr and "+<script>" in r.stderr
    assert_terminal_clean(r.stderr)


def test_lineup_name_from_a_file_name_with_cr_and_esc(tmp_path):
    # Without [lineup] name the file's stem is the name; a file name may hold a CR and ESC.
    src = write_case(tmp_path, lineup_name=False)
    path = src.rename(tmp_path / "a\rVERDICT PASS\x1b[1A.toml")
    r = invoke("check", path, expect=1)
    assert_terminal_clean(r.stdout, r.stderr)
    # The loader keeps a name on one line (line breaks become spaces), so the CR cannot start
    # a line of its own.
    assert r.stdout.splitlines()[0].startswith("a VERDICT PASS")


def test_drive_sweep_lines_are_escaped(tmp_path):
    r = invoke(
        "drive", write_case(tmp_path), "--start", "-10 dBm", "--stop", "0 dBm", "--step", "5 dB", expect=None
    )
    assert r.exit_code in (0, 1)
    assert "drive sweep" in r.stdout
    assert_terminal_clean(r.stdout, r.stderr)


def test_spectrum_at_a_hostile_stage_name(tmp_path):
    r = invoke("spectrum", write_case(tmp_path), "--stage", names(HOSTILE)["stage"])
    assert "products at" in r.stdout
    assert_terminal_clean(r.stdout, r.stderr)


# --- error lines ----------------------------------------------------------------------------------


def test_error_line_with_an_esc_sequence_in_the_stage_name(tmp_path):
    path = write_case(tmp_path)
    text = path.read_text(encoding="utf-8").replace('gain = "10 dB"', 'gain = "10 dBz"')
    path.write_text(text, encoding="utf-8")
    code, out, err, detail, seconds = run_in_process(["check", str(path)])
    line = assert_one_error_line(code, out, err, ("field 'gain'", "10 dBz"), names=path.name, detail=detail)
    assert_terminal_clean(err)
    assert "\\x1b[2J" in line  # the stage is named, with its control characters shown
    assert seconds < 10


def _missing_rule_file_case(tmp_path: Path) -> Path:
    path = write_case(tmp_path)
    text = path.read_text(encoding="utf-8").replace(
        'files = ["rules.toml"]', f"files = [{toml_str(TERM_PIECE + '.toml')}]"
    )
    path.write_text(text, encoding="utf-8")
    return path


def test_error_line_quoting_a_hostile_file_name(tmp_path):
    # The message quotes the name and the path it looked for (which is not a repr).
    path = _missing_rule_file_case(tmp_path)
    code, out, err, detail, _ = run_in_process(["check", str(path)])
    assert_one_error_line(code, out, err, ("field 'files'", "not found"), names=path.name, detail=detail)
    assert_terminal_clean(err)


@pytest.mark.slow
def test_error_line_quoting_a_hostile_file_name_real_process(tmp_path):
    path = _missing_rule_file_case(tmp_path)
    proc = run_cli(["check", str(path)], cwd=tmp_path, timeout=60)
    assert_one_error_line(proc.returncode, proc.stdout, proc.stderr, ("not found",), names=path.name)
    assert_terminal_clean(proc.stdout, proc.stderr)


def test_error_line_listing_hostile_stage_names(tmp_path):
    # An unknown --stage: the line lists the lineup's stage names as the choices.
    code, out, err, detail, _ = run_in_process(["spectrum", str(write_case(tmp_path)), "--stage", "nope"])
    assert_one_error_line(code, out, err, ("--stage", "nope"), detail=detail)
    assert_terminal_clean(err)


def test_error_line_from_a_rule_file_with_a_hostile_title(tmp_path):
    path = write_case(tmp_path)
    rules = tmp_path / "rules.toml"
    rules.write_text(
        rules.read_text(encoding="utf-8").replace('limit = "-60 dBm"', 'limit = "-60 dBmm"'), encoding="utf-8"
    )
    code, out, err, detail, _ = run_in_process(["check", str(path)])
    assert_one_error_line(code, out, err, ("limit", "-60 dBmm"), names="rules.toml", detail=detail)
    assert_terminal_clean(err)


# --- CSV and JSON ---------------------------------------------------------------------------------


def _visible(text: str) -> str:
    """``text`` with each forbidden character written as Python writes it in a literal."""
    return TERMINAL_FORBIDDEN.sub(lambda m: m.group().encode("unicode_escape").decode("ascii"), text)


def _is_number(cell: str) -> bool:
    try:
        float(cell)
    except ValueError:
        return False
    return True


# For comparing cells: click removes ANSI "ESC [ ... letter" sequences itself when stdout
# is not a terminal (click.echo documentation), so the CSV cases use the other controls.
CSV_TEXT = PRINTABLE + " \x1b]0;owned\x07\x08\u202eRLO\u202c\u2066iso\u2069"


def test_check_csv_has_no_formula_cells_and_unchanged_numbers(tmp_path):
    path = write_case(tmp_path, CSV_TEXT)
    rows = list(csv.DictReader(io.StringIO(invoke("check", path, "--format", "csv", expect=1).stdout)))
    doc = json.loads(invoke("check", path, "--format", "json", expect=1).stdout)["products"]
    assert len(rows) == len(doc) >= 2
    quoted = 0
    for row, ref in zip(rows, doc, strict=True):
        for key, cell in row.items():
            value = ref[key]
            if isinstance(value, bool) or value is None:
                continue
            if isinstance(value, (int, float)):
                # Numbers are written as numbers, the same numbers (JSON is the other path).
                assert float(cell) == value, (key, cell, value)
            elif isinstance(value, str) and not _is_number(cell):
                assert not cell.startswith(FORMULA_START), (key, cell)
                # Only a leading quote was added, where a formula could start; stdout shows
                # control characters as their escapes, in CSV as in tables.
                shown = _visible(value)
                assert cell == shown or (cell == "'" + shown and value.startswith(FORMULA_START))
                quoted += cell != shown
    assert quoted >= 3  # the band, the stage (largest contributor) and the rule's source
    levels = [float(r["level_dbm"]) for r in rows]
    assert all(v < 0 for v in levels)  # negative levels stay numbers, not "'-16.0"


def test_budget_csv_neutralises_text_but_not_numbers(tmp_path):
    r = invoke("budget", write_case(tmp_path, CSV_TEXT), "--format", "csv")
    rows = list(csv.DictReader(io.StringIO(r.stdout)))
    assert rows[0]["stage"] == "'+" + _visible(CSV_TEXT)
    assert float(rows[0]["gain_db"]) == 10.0  # the file's gain, as a number


def test_csv_cells_by_the_owasp_rule():
    from spurplan.output.formatting import to_csv

    cols = {
        "level_dbm": [-13.5, 2.0],
        "text": ["-13.5", "=1+1"],  # a number in text stays; a formula gets the quote
        "mix": [[-1, 2], [1, 0]],  # a mixing vector is numbers, not a formula
        "name": ["@SUM(A1)", "\tx"],
    }
    rows = list(csv.reader(io.StringIO(to_csv(cols))))
    assert rows[1] == ["-13.5", "-13.5", "-1 2", "'@SUM(A1)"]
    assert rows[2] == ["2.0", "'=1+1", "1 0", "'\tx"]


def test_check_json_is_printable_ascii_and_keeps_the_names(tmp_path):
    r = invoke("check", write_case(tmp_path), "--format", "json", expect=1)
    assert re.fullmatch(r"[\x20-\x7e\n]*", r.stdout)  # \uXXXX escapes only (RFC 8259, section 7)
    doc = json.loads(r.stdout)
    assert names(HOSTILE)["band"] in {p["band"] for p in doc["products"]}
    assert names(HOSTILE)["lineup"] == doc["summary"]["lineup"]


# --- Markdown report ------------------------------------------------------------------------------

# A link or image whose brackets are not backslash-escaped: "[text](destination)".
MD_LINK = re.compile(r"(?<!\\)!?\[(?:\\.|[^\]\\])*(?<!\\)\]\(([^)]*)\)")


def _unescape_md(text: str) -> str:
    """What a CommonMark renderer shows for escaped inline text (sections 2.4 and 2.5)."""
    text = re.sub(r"\\([!-/:-@\[-`{-~])", r"\1", text)
    return text.replace("&lt;", "<").replace("&gt;", ">").replace("&amp;", "&")


@pytest.fixture(scope="module")
def markdown_report(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("md")
    invoke("report", write_case(tmp), "-o", tmp / "x.md")
    return (tmp / "x.md").read_text(encoding="utf-8")


def test_markdown_report_has_no_raw_html(markdown_report):
    low = markdown_report.lower()
    for tag in ("<script", "<img", "<iframe", "<a ", "<http"):
        assert tag not in low
    assert "<" not in markdown_report  # the report writes no HTML of its own either


def test_markdown_report_links_only_its_own_figures(markdown_report):
    targets = MD_LINK.findall(markdown_report)
    assert targets, "the report's figures are missing"
    assert all(re.fullmatch(r"x_files/figure-\d+\.png", t) for t in targets), targets
    assert "javascript:" not in "".join(targets)


def _cell_bars(line: str) -> int:
    """The ``|`` that delimit cells in a GFM table row (a backslash escapes the next character)."""
    bars, i = 0, 0
    while i < len(line):
        if line[i] == "\\":
            i += 2
            continue
        bars += line[i] == "|"
        i += 1
    return bars


def test_markdown_report_tables_keep_their_columns(markdown_report):
    lines = markdown_report.splitlines()
    tables = 0
    for i, line in enumerate(lines):
        if line.startswith("|---"):
            tables += 1
            width = _cell_bars(line)
            assert _cell_bars(lines[i - 1]) == width, lines[i - 1][:200]
            for row in lines[i + 1 :]:
                if not row.startswith("|"):
                    break
                assert _cell_bars(row) == width, row[:200]
    assert tables >= 4


def test_markdown_report_has_no_control_characters(markdown_report):
    assert_terminal_clean(markdown_report)


def test_markdown_report_reads_the_literal_names(tmp_path):
    invoke("report", write_case(tmp_path, PRINTABLE), "-o", tmp_path / "x.md")
    text = (tmp_path / "x.md").read_text(encoding="utf-8")
    n = names(PRINTABLE)
    title = text.splitlines()[0]
    assert title.startswith("# ")
    assert _unescape_md(title[2:]) == f"{n['lineup']}: spurious-emission review"
    rendered = _unescape_md(text)
    for key in ("stage", "band", "rule", "title", "source"):
        assert n[key] in rendered, key


@pytest.mark.parametrize(
    "text",
    ["- item", "+ item", "# heading", "###### heading", "1. item", "7) item", "---", "===", "> quote"],
)
def test_markdown_line_start_constructs_are_text(text):
    from spurplan.output.escaping import markdown

    out = markdown(text)
    # CommonMark 0.31: list markers (5.2), ATX headings (4.2), setext underlines and
    # thematic breaks (4.1, 4.3), block quotes (5.1) need the bare marker at line start.
    assert not re.match(r"(?:[-+*>]|#{1,6}|\d{1,9}[.)])(?:\s|$)|[-=]+\s*$", out), out
    assert _unescape_md(out) == text


# --- HTML report ----------------------------------------------------------------------------------

SAFE_TAGS = {"html", "head", "meta", "title", "style", "body", "h1", "h2", "p", "table", "thead", "tbody"}
SAFE_TAGS |= {"tr", "th", "td", "figure", "img", "figcaption"}


class _Tags(html.parser.HTMLParser):
    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.tags, self.attrs, self.h1 = [], [], []
        self._in_h1 = False

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)
        self.attrs += attrs
        self._in_h1 = tag == "h1"

    def handle_endtag(self, tag):
        self._in_h1 = False

    def handle_data(self, data):
        if self._in_h1:
            self.h1.append(data)


def test_html_report_escapes_text_and_attributes(tmp_path):
    quoted = PRINTABLE + " \" onmouseover=\"alert(4)\" ' onfocus='alert(5)'"
    invoke("report", write_case(tmp_path, quoted), "-o", tmp_path / "x.html")
    parser = _Tags()
    parser.feed((tmp_path / "x.html").read_text(encoding="utf-8"))
    assert set(parser.tags) <= SAFE_TAGS, set(parser.tags) - SAFE_TAGS
    assert {a for a, _ in parser.attrs} <= {"lang", "charset", "class", "alt", "src"}
    assert all(v.startswith("data:image/png;base64,") for a, v in parser.attrs if a == "src")
    assert all(re.fullmatch(r"[a-z ]+", v) for a, v in parser.attrs if a == "class")
    # The reader sees the name exactly as written (HTML 5 character references decoded).
    assert "".join(parser.h1) == f"-{quoted}: spurious-emission review"


# --- matplotlib -----------------------------------------------------------------------------------

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # PNG specification, section 5.2


def test_check_plot_with_hostile_names_renders(tmp_path):
    out = tmp_path / "x.png"
    r = invoke("check", write_case(tmp_path), "--plot", out, expect=1)
    assert out.read_bytes().startswith(PNG_SIGNATURE)
    assert_terminal_clean(r.stdout, r.stderr)


def test_drive_plot_with_a_mathtext_name_renders(tmp_path):
    out = tmp_path / "d.png"
    args = ("drive", write_case(tmp_path, MATH_PIECE), "--start", "-10 dBm", "--stop", "0 dBm")
    r = invoke(*args, "--step", "5 dB", "--plot", out, expect=None)
    assert r.exit_code in (0, 1)
    assert out.read_bytes().startswith(PNG_SIGNATURE)


def _svg_texts(fig) -> list[str]:
    """Every text of the figure as drawn (SVG with text kept as text, not paths)."""
    import matplotlib

    buf = io.BytesIO()
    with matplotlib.rc_context({"svg.fonttype": "none"}):
        fig.savefig(buf, format="svg")
    root = ET.fromstring(buf.getvalue())
    return ["".join(t.itertext()) for t in root.iter("{http://www.w3.org/2000/svg}text")]


@pytest.mark.parametrize("name", [r"$\frac{$", "gain $5 and $x^2$ too", "cost $5", r"a\$b \alpha"])
@pytest.mark.slow
def test_figure_draws_the_literal_name(tmp_path, name):
    from spurplan.analyses.check import check
    from spurplan.io.lineup_file import load
    from spurplan.output.plots import check_figure, close

    lu = load(write_case(tmp_path, name))
    fig = check_figure(check(lu))
    try:
        buf = io.BytesIO()
        fig.savefig(buf, format="png")  # mathtext would fail here on "$\frac{$"
        assert buf.getvalue().startswith(PNG_SIGNATURE)
        texts = _svg_texts(fig)
    finally:
        close(fig)
    n = names(name)
    assert any(t.startswith(f"{n['lineup']}: ") for t in texts), texts
    assert n["band"] in texts, texts  # the protected band's label
