"""``remedy --write`` writes exactly the lineup it checked, whatever the file looks like.

The reference is the contract (README, remedy; issue "hostile and broken input",
class 2): the written file loads; ``spurplan check`` of it gives the worst margin
remedy printed (to 0.01 dB); the filter sits where remedy said it would ("Insert after
stage 'X'"); nothing else in the file changed (the tomllib documents are equal with the
new stage removed, and every line of the original is still there, in order); and when
the file cannot be edited that way, one error line, exit status 2, and nothing written
(over the input itself: the input intact).

Every lineup, Touchstone file and rule file below is invented for these tests.  Each
case runs the command line in-process (click's CliRunner) and takes about a second.
"""

from __future__ import annotations

import difflib
import os
import re
import shutil
import tomllib
from pathlib import Path

import pytest
from helpers import as_json, assert_one_error_line, invoke, run_in_process

import spurplan
from spurplan.analyses.check import check
from spurplan.io.resources import data_dir

BOM = b"\xef\xbb\xbf"
TOLERANCE_DB = 0.01  # remedy prints margins to 0.01 dB

# 150 MHz at +10 dBm into a PA whose harmonics fail itu-sm329-cat-a (invented figures,
# as in tests/test_sweeps.py): remedy proposes a low-pass filter after the PA.
HEAD = '# invented test scenario\n[[carrier]]\nfreq = "150 MHz"\npower = "+10 dBm"\n\n'
PA_KEYS = 'kind = "amplifier"\nname = "pa"\ngain = "26 dB"\noip3 = "+50 dBm"\nh2 = "-25 dBc @ +36 dBm"\npsat = "+40 dBm"\n'
PA = "[[stage]]\n" + PA_KEYS
PAD = '[[stage]]\nkind = "attenuator"\nname = "{name}"\nloss = "{loss}"\n'
MASK = '[mask]\nuse = ["itu-sm329-cat-a"]\n'

# A well matched 0.95 V/V through, 1 MHz to 5 GHz (invented data).
THRU_S2P = "! invented test data\n# MHz S RI R 50\n" + "".join(
    f"{f} 0.05 0 0.95 0 0.95 0 0.05 0\n" for f in (1, 10, 100, 500, 1000, 2000, 5000)
)

RECHECK = re.compile(
    r"RE-CHECKED WITH THE FILTER: (PASS|FAIL|INCOMPLETE|UNCERTAIN), worst margin ([+-][0-9.]+) dB"
)
INSERT = re.compile(r"Insert after stage '(.*)':")


def pad(name: str, loss: str = "0.5 dB") -> str:
    return PAD.format(name=name, loss=loss)


def _decode(data: bytes) -> str:
    return data.decode("utf-8-sig")


def _stages_without(doc: dict, name: str) -> dict:
    """The document with the stage called ``name`` removed."""
    out = dict(doc)
    out["stage"] = [s for s in doc["stage"] if s.get("name") != name]
    return out


def _check_margin_db(path: Path) -> float:
    doc = as_json(invoke("check", path, "--format", "json", expect=(0, 1)).stdout)
    return doc["summary"]["worst_margin_db"]


def remedy_and_verify(
    source: Path, target: Path | None = None, *args, filter_name="remedy filter", paths=None
):
    """Run ``remedy SOURCE --write TARGET ARGS`` and check the written file against the contract.

    ``paths`` maps a data path as written in the source to the one expected in the target
    (a file written to another folder).  Returns (stdout, written document, stage index
    of the filter).
    """
    target = target or source
    original_bytes = source.read_bytes()
    original = tomllib.loads(_decode(original_bytes))
    out = invoke("remedy", source, "--write", target, *args, expect=0).stdout
    word, printed = RECHECK.search(out).groups()
    after = INSERT.search(out).group(1)
    assert f"wrote {target}" in out

    written_bytes = target.read_bytes()
    written = tomllib.loads(_decode(written_bytes))
    lineup = spurplan.load(target)  # the written file loads with the project's loader
    names = [s.name for s in lineup.stages]
    i = names.index(filter_name)
    assert names[i - 1] == after, (names, after)  # where remedy said it would go
    assert written["stage"][i]["kind"] == "filter" and "prototype" in written["stage"][i]
    # spurplan check of the written file gives the margin remedy printed.
    assert _check_margin_db(target) == pytest.approx(float(printed), abs=TOLERANCE_DB)
    assert word == check(lineup).status  # PASS only for a complete model that meets the mask
    # Nothing else changed: equal documents with the new stage removed ...
    expected = original
    if paths:
        expected = _rewrite_paths(original, paths)
    assert _stages_without(written, filter_name) == expected
    # ... and the original bytes' BOM and line endings are kept.
    assert written_bytes.startswith(BOM) == original_bytes.startswith(BOM)
    if b"\r\n" in original_bytes:
        assert written_bytes.count(b"\r\n") == written_bytes.count(b"\n")
    return out, written, i


def _rewrite_paths(doc: dict, paths: dict) -> dict:
    doc = {**doc, "stage": [dict(s) for s in doc["stage"]]}
    for s in doc["stage"]:
        if "touchstone" in s:
            s["touchstone"] = paths[s["touchstone"]]
    if "mask" in doc and "files" in doc["mask"]:
        doc["mask"] = {**doc["mask"], "files": [paths[p] for p in doc["mask"]["files"]]}
    return doc


def assert_lines_kept(original: str, written: str, changed: dict | None = None) -> None:
    """Every line of ``original`` is in ``written``, in order, except the keys of
    ``changed`` (which became its values); what was added is the filter's table (its
    header as the file spells it, its keys) and blank lines."""
    changed = changed or {}
    a, b = original.replace("\r\n", "\n").split("\n"), written.replace("\r\n", "\n").split("\n")
    for tag, i1, i2, j1, j2 in difflib.SequenceMatcher(None, a, b, autojunk=False).get_opcodes():
        if tag in ("delete", "replace"):
            assert all(line in changed for line in a[i1:i2]), (tag, a[i1:i2], b[j1:j2])
        if tag in ("insert", "replace"):
            for line in b[j1:j2]:
                ok = not line.strip() or line in changed.values()
                ok = ok or re.match(r"\s*(kind|name|prototype) = ", line) is not None
                ok = ok or tomllib.loads(line) == {"stage": [{}]}  # the header
                assert ok, (tag, line)


def write(path: Path, text: str, *, newline: str = "\n", bom: bool = False) -> Path:
    path.parent.mkdir(parents=True, exist_ok=True)
    data = text.replace("\n", newline).encode("utf-8")
    path.write_bytes((BOM if bom else b"") + data)
    return path


# --- sub-tables of the last amplifier -------------------------------------------------------------


@pytest.mark.parametrize(
    "tolerance",
    [
        '\n[stage.tolerance]\ngain = "1 dB"\npsat = "0.5 dB"\n',  # a sub-table with a header
        'tolerance.gain = "1 dB"\n',  # a dotted key
        'tolerance = { gain = "1 dB" }\n',  # an inline table
        '\n[ "stage" . "tolerance" ]   # spread\ngain = "1 dB"\n',  # a quoted sub-table header
    ],
    ids=["header", "dotted", "inline", "quoted-header"],
)
@pytest.mark.slow
def test_sub_table_of_the_last_amplifier_stays_with_it(tmp_path, tolerance):
    # The amplifier is the last stage, so the filter goes at the end of the stage array;
    # its tolerance table must stay the amplifier's (the text editor moved it under the
    # filter, and the file did not load).
    text = HEAD + pad("input pad", "0.2 dB") + "\n" + PA + tolerance + "\n" + MASK
    path = write(tmp_path / "l.toml", text)
    _, written, i = remedy_and_verify(path)
    assert i == 2
    assert written["stage"][1]["tolerance"]["gain"] == "1 dB"
    assert "tolerance" not in written["stage"][2]
    assert_lines_kept(text, path.read_text(encoding="utf-8"))


def test_sub_table_written_to_a_new_file_leaves_the_input_as_it_was(tmp_path):
    text = HEAD + PA + '\n[stage.tolerance]\ngain = "1 dB"\n\n' + MASK
    path = write(tmp_path / "l.toml", text)
    before = path.read_bytes()
    remedy_and_verify(path, tmp_path / "fixed.toml")
    assert path.read_bytes() == before


# --- quoted headers, comments, layout -------------------------------------------------------------


def test_quoted_stage_headers_put_the_filter_at_the_printed_place(tmp_path):
    # Quoted and spaced spellings of the [[stage]] header name the same array (TOML 1.0,
    # "Keys": quoted keys, whitespace around keys ignored; from memory).  The text editor
    # counted only bare [[stage]] headers and put the filter after the wrong stage.
    text = (
        HEAD
        + pad("input pad", "0.2 dB").replace("[[stage]]", '[["stage"]]')
        + "\n"
        + PA
        + "\n"
        + pad("pad 1").replace("[[stage]]", "[[ 'stage' ]]")
        + "\n"
        + pad("pad 2", "1 dB")
        + "\n"
        + MASK
    )
    path = write(tmp_path / "l.toml", text)
    _, written, i = remedy_and_verify(path)
    assert i == 2
    assert [s["name"] for s in written["stage"]] == ["input pad", "pa", "remedy filter", "pad 1", "pad 2"]
    # The user's spellings of the headers are kept.
    kept = path.read_text(encoding="utf-8")
    assert '[["stage"]]\nkind = "attenuator"\nname = "input pad"' in kept
    assert '[[ \'stage\' ]]\nkind = "attenuator"\nname = "pad 1"' in kept
    assert_lines_kept(text, kept)


def test_comments_and_blank_lines_between_stages_are_kept_in_place(tmp_path):
    text = (
        HEAD
        + "# --- the power amplifier ---\n"
        + PA.replace('gain = "26 dB"', 'gain = "26 dB"  # datasheet, typical')
        + "# still about the PA\n"
        + "\n\n"
        + "# the output pad, right above its header\n"
        + pad("out")
        + "\n# about the mask\n"
        + MASK
    )
    path = write(tmp_path / "l.toml", text)
    _, _, i = remedy_and_verify(path)
    assert i == 1
    kept = path.read_text(encoding="utf-8")
    assert_lines_kept(text, kept)
    # A comment directly under the PA's keys stays with the PA; the one written right
    # above the pad's header stays right above it.
    assert kept.index("# still about the PA") < kept.index('name = "remedy filter"')
    assert '# the output pad, right above its header\n[[stage]]\nkind = "attenuator"' in kept


@pytest.mark.parametrize("header", ["[[stage]]", '[["stage"]]'], ids=["bare", "mixed-spellings"])
@pytest.mark.slow
def test_crlf_line_endings_and_a_bom_are_kept(tmp_path, header):
    text = HEAD + PA + "\n" + pad("out").replace("[[stage]]", header) + "\n" + MASK
    path = write(tmp_path / "l.toml", text, newline="\r\n", bom=True)
    remedy_and_verify(path)
    data = path.read_bytes()
    assert data.startswith(BOM) and data.count(b"\r\n") == data.count(b"\n")
    assert_lines_kept(text, _decode(data))


def test_stages_written_as_an_inline_array(tmp_path):
    # A top-level key must come before the first table header (TOML 1.0, "Table").
    text = (
        "# invented test scenario\n"
        + "stage = [\n"
        + '  { kind = "amplifier", name = "pa", gain = "26 dB", oip3 = "+50 dBm", '
        + 'h2 = "-25 dBc @ +36 dBm", psat = "+40 dBm", tolerance = { gain = "1 dB" } },\n'
        + '  { kind = "attenuator", name = "out", loss = "0.5 dB" },  # the output pad\n'
        + "]\n\n"
        + HEAD.removeprefix("# invented test scenario\n")
        + MASK
    )
    path = write(tmp_path / "l.toml", text)
    _, written, i = remedy_and_verify(path)
    assert i == 1 and written["stage"][0]["tolerance"] == {"gain": "1 dB"}
    assert "# the output pad" in path.read_text(encoding="utf-8")


def test_single_line_inline_array_of_stages(tmp_path):
    text = (
        "stage = ["
        + '{ kind = "amplifier", name = "pa", gain = "26 dB", oip3 = "+50 dBm", h2 = "-25 dBc @ +36 dBm", '
        + 'psat = "+40 dBm" }, { kind = "attenuator", name = "out", loss = "0.5 dB" }]\n'
        + HEAD
        + MASK
    )
    path = write(tmp_path / "l.toml", text)
    remedy_and_verify(path)


@pytest.mark.parametrize(
    "text",
    [
        HEAD + MASK + "\n" + PA.rstrip("\n"),  # no line break at the end of the file
        HEAD + MASK + "\n" + PA + "# a last word on the PA",  # ... after a comment
        HEAD + "".join(f"  {line}\n" for line in (PA + "\n" + pad("out")).splitlines()) + MASK,  # indented
        HEAD + PA.replace("[[stage]]", '[["st\\u0061ge"]]') + "\n" + pad("out") + "\n" + MASK,  # escaped
        HEAD + PA + "   \n\t\n" + pad("out") + MASK,  # blank lines holding spaces and tabs
    ],
    ids=["no-final-newline", "final-comment", "indented", "escaped-header", "whitespace-lines"],
)
@pytest.mark.slow
def test_unusual_layouts_are_kept(tmp_path, text):
    path = write(tmp_path / "l.toml", text)
    _, written, i = remedy_and_verify(path)
    assert written["stage"][i - 1]["name"] == "pa"
    kept = path.read_text(encoding="utf-8")
    assert_lines_kept(text, kept)
    if "  [[stage]]" in text:  # the new table is indented as its neighbours
        assert '  [[stage]]\n  kind = "filter"\n  name = "remedy filter"' in kept
    if "# a last word" in text:  # a comment under the last key stays with it
        assert kept.index("# a last word") < kept.index('name = "remedy filter"')


# --- where the filter goes -------------------------------------------------------------------------


@pytest.mark.parametrize(("at", "index"), [("pa", 1), ("pad 1", 2)], ids=["first-stage", "middle-stage"])
def test_at_names_the_stage_the_filter_follows(tmp_path, at, index):
    text = HEAD + PA + "\n" + pad("pad 1") + "\n" + pad("pad 2", "1 dB") + "\n" + MASK
    path = write(tmp_path / "l.toml", text)
    out, _, i = remedy_and_verify(path, None, "--at", at)
    assert i == index and f"Insert after stage '{at}'" in out
    assert_lines_kept(text, path.read_text(encoding="utf-8"))


def test_a_lineup_remedied_before_gets_a_second_filter_of_its_own_name(tmp_path):
    # Stage names must be unique (the loader refuses a repeated name), so a second run
    # over a file that already holds "remedy filter" names the new one "remedy filter 2".
    path = write(tmp_path / "l.toml", HEAD + PA + "\n" + pad("out") + "\n" + MASK)
    remedy_and_verify(path)
    _, written, _ = remedy_and_verify(path, None, "--margin", "10 dB", filter_name="remedy filter 2")
    assert [s["name"] for s in written["stage"]] == ["pa", "remedy filter 2", "remedy filter", "out"]


# --- data files ------------------------------------------------------------------------------------


def _with_data_files(folder: Path, quoted: bool) -> Path:
    """A lineup in ``folder`` with a Touchstone input filter and a rule file, both named
    relative to it (the rule file is the shipped itu-sm329-cat-a, copied)."""
    (folder / "data").mkdir(parents=True)
    (folder / "data" / "thru.s2p").write_text(THRU_S2P, encoding="utf-8")
    shutil.copy(data_dir("bands") / "itu-sm329-cat-a.toml", folder / "rules.toml")
    key = '"touchstone"' if quoted else "touchstone"
    text = (
        HEAD
        + f'[[stage]]\nkind = "filter"\nname = "input filter"\n{key} = \'data/thru.s2p\'\n\n'
        + PA
        + "\n"
        + pad("out")
        + '\n[mask]\n"files" = ["rules.toml"]\n'
    )
    return write(folder / "l.toml", text)


def test_quoted_touchstone_key_written_to_another_folder_keeps_naming_the_file(tmp_path):
    # The text guard looked for a bare `touchstone =` and let a quoted key through: the
    # file written elsewhere named a Touchstone file that was not there.  The paths are
    # read from the parsed document and rewritten for the new folder.
    path = _with_data_files(tmp_path / "in", quoted=True)
    target = tmp_path / "elsewhere" / "deeper" / "fixed.toml"
    target.parent.mkdir(parents=True)
    moved = {"data/thru.s2p": "../../in/data/thru.s2p", "rules.toml": "../../in/rules.toml"}
    out, _, _ = remedy_and_verify(path, target, paths=moved)
    assert "data paths rewritten" in out and "'data/thru.s2p' -> '../../in/data/thru.s2p'" in out
    # Each rewritten path names the very file the input named (os.path.samefile).
    for old, new in moved.items():
        assert os.path.samefile(path.parent / old, target.parent / new)
    lines = target.read_text(encoding="utf-8")
    assert "\"touchstone\" = '../../in/data/thru.s2p'" in lines  # quoting style kept
    assert_lines_kept(
        path.read_text(encoding="utf-8"),
        lines,
        changed={
            "\"touchstone\" = 'data/thru.s2p'": "\"touchstone\" = '../../in/data/thru.s2p'",
            '"files" = ["rules.toml"]': '"files" = ["../../in/rules.toml"]',
        },
    )


def test_data_paths_in_the_same_folder_are_not_touched(tmp_path):
    path = _with_data_files(tmp_path, quoted=False)
    out, _, _ = remedy_and_verify(path, tmp_path / "fixed.toml")
    assert "rewritten" not in out
    assert_lines_kept(path.read_text(encoding="utf-8"), (tmp_path / "fixed.toml").read_text(encoding="utf-8"))


def test_write_over_the_input_with_data_files(tmp_path):
    path = _with_data_files(tmp_path, quoted=True)
    text = path.read_text(encoding="utf-8")
    out, _, _ = remedy_and_verify(path)
    assert "rewritten" not in out
    assert_lines_kept(text, path.read_text(encoding="utf-8"))


def test_write_onto_a_data_file_is_refused(tmp_path):
    path = _with_data_files(tmp_path, quoted=True)
    s2p = tmp_path / "data" / "thru.s2p"
    before = s2p.read_bytes()
    code, out, err, detail, _ = run_in_process(["remedy", str(path), "--write", str(s2p)])
    assert_one_error_line(code, out, err, ("--write", "data/thru.s2p", "data file"), detail=detail)
    assert s2p.read_bytes() == before


# --- refusals: nothing written ---------------------------------------------------------------------


def _no_temporary_files(folder: Path) -> list[str]:
    return sorted(p.name for p in folder.rglob("*") if p.name.endswith(".part"))


def test_stage_array_split_by_another_table_is_refused_not_reordered(tmp_path):
    # Valid TOML (an array of tables may continue after another table), but tomlkit would
    # move the second [[stage]] table up: remedy refuses rather than reorder the file.
    text = HEAD + PA + "\n" + MASK + "\n" + pad("out")
    path = write(tmp_path / "l.toml", text)
    before = path.read_bytes()
    code, out, err, detail, _ = run_in_process(["remedy", str(path), "--write", str(path)])
    assert_one_error_line(code, out, err, ("--write", "without --write"), names=path, detail=detail)
    assert path.read_bytes() == before and _no_temporary_files(tmp_path) == []
    # Without --write the snippet is printed for pasting by hand.
    assert "[[stage]]" in invoke("remedy", path, expect=0).stdout


def test_a_misplaced_insertion_is_caught_before_writing(tmp_path, monkeypatch):
    # Break the editor on purpose (the filter put first): the check of the edited text
    # against the lineup plus one stage must refuse, and the input stays as it was.
    import spurplan.io.lineup_edit as edit

    real = edit._insert
    monkeypatch.setattr(edit, "_insert", lambda doc, position, snippet: real(doc, 0, snippet))
    text = HEAD + PA + "\n" + pad("out") + "\n" + MASK
    path = write(tmp_path / "l.toml", text)
    before = path.read_bytes()
    code, out, err, detail, _ = run_in_process(["remedy", str(path), "--write", str(path)])
    assert_one_error_line(code, out, err, ("--write", "nothing written"), names=path, detail=detail)
    assert path.read_bytes() == before


def test_a_file_that_loads_as_another_lineup_is_caught_before_writing(tmp_path, monkeypatch):
    # The last guard re-reads the new document with the project's loader and compares it
    # with the lineup remedy checked: here an editor that returns the filter one place
    # late (after 'out') is refused, with nothing written.
    import spurplan.io.lineup_edit as edit

    real = edit.insert_stage

    def late(source, target, position, snippet):
        return real(source, target, position + 1, snippet)

    monkeypatch.setattr(edit, "insert_stage", late)
    path = write(tmp_path / "l.toml", HEAD + PA + "\n" + pad("out") + "\n" + MASK)
    target = tmp_path / "fixed.toml"
    code, out, err, detail, _ = run_in_process(["remedy", str(path), "--write", str(target)])
    line = assert_one_error_line(
        code, out, err, ("--write", "not the lineup that was checked"), detail=detail
    )
    assert "'out', 'remedy filter'" in line and not target.exists()


def test_failed_write_over_the_input_leaves_it_intact(tmp_path, monkeypatch):
    import spurplan.output.files

    path = write(tmp_path / "l.toml", HEAD + PA + "\n" + pad("out") + "\n" + MASK)
    before = path.read_bytes()
    calls = []

    def full_disk(src, dst, *a, **k):
        calls.append(dst)
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(spurplan.output.files.os, "replace", full_disk)
    code, out, err, detail, _ = run_in_process(["remedy", str(path), "--write", str(path)])
    monkeypatch.undo()
    assert calls, "the write did not go through spurplan.output.files.write_atomic"
    assert_one_error_line(code, out, err, ("No space left",), detail=detail)
    assert path.read_bytes() == before and _no_temporary_files(tmp_path) == []


def test_json_output_reports_the_numbers_of_the_written_file(tmp_path):
    text = HEAD + PA + '\n[stage.tolerance]\ngain = "1 dB"\n\n' + pad("out") + "\n" + MASK
    path = write(tmp_path / "l.toml", text)
    target = tmp_path / "fixed.toml"
    doc = as_json(invoke("remedy", path, "--write", target, "--format", "json", expect=0).stdout)["summary"]
    assert doc["insert_after"] == "pa"
    assert _check_margin_db(target) == pytest.approx(doc["after"]["worst_margin_db"], abs=TOLERANCE_DB)
    assert doc["snippet"] in target.read_text(encoding="utf-8")  # the snippet as printed
