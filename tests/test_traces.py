"""Reading measured spectrum-analyser traces: the layouts, the header keys, and every
malformed trace as one located error line (exit status 2)."""

from __future__ import annotations

import numpy as np
import pytest
from helpers import assert_one_error_line, run_in_process, write

from spurplan.errors import LineupError
from spurplan.io.traces import MIN_POINTS, parse_columns, read_trace

LINEUP = """# Invented scenario for the trace tests.
[lineup]
name = "trace test (invented)"
[[carrier]]
freq = "100 MHz"
power = "-10 dBm"
[[stage]]
kind = "amplifier"
name = "pa"
gain = "20 dB"
oip3 = "+30 dBm"
oip2 = "+40 dBm"
noise_figure = "5 dB"
[analysis]
max_order = 3
[mask]
[[mask.rule]]
start = "30 MHz"
stop = "1 GHz"
limit = "-36 dBm"
rbw = "100 kHz"
"""


def _rows(n=21, start_mhz=100.0, step_mhz=1.0, fmt="{f:.6f},{lv:.2f}"):
    return "".join(fmt.format(f=start_mhz + i * step_mhz, lv=-80.0 - 0.1 * i) + "\n" for i in range(n))


def test_csv_with_our_header_lines():
    # 21 rows, 100 to 120 MHz in MHz; levels -80.0 down by 0.1 dB a row (as written).
    text = "# invented\n# rbw = 100 kHz\n# detector = peak\n# reference_level = 20 dBm\n"
    text += "Frequency (MHz),Level (dBm)\n" + _rows()
    trace = read_trace(_tmp("a.csv", text))
    assert trace.rbw_hz == 100e3 and trace.detector == "peak" and trace.reference_level_dbm == 20.0
    assert trace.freq_hz[0] == 100e6 and trace.freq_hz[-1] == pytest.approx(120e6)
    assert trace.level_dbm[3] == pytest.approx(-80.3)


def test_instrument_key_value_preamble_and_units_in_cells():
    # An instrument-style preamble: free rows, "RBW,100000,Hz", "Ref Level (dBm),20",
    # then names without units and cells with them.
    text = "Title,bench 3\nModel,XYZ\nRBW,100000,Hz\nDetector,Pos Peak\nRef Level (dBm),20\nFreq,Amplitude\n"
    text += _rows(fmt="{f:.3f} MHz,{lv:.2f} dBm")
    trace = read_trace(_tmp("b.csv", text))
    assert trace.rbw_hz == 100e3 and trace.detector == "peak" and trace.reference_level_dbm == 20.0
    assert trace.freq_hz[1] == pytest.approx(101e6)


def test_semicolon_separated_with_a_column_mapping():
    text = "# rbw = 10 kHz\nIndex;Hz_col (Hz);Amp (dBm);Other (dBm)\n"
    text += "".join(f"{i};{1e6 + i * 1e3:.1f};{-90 + i:.1f};0\n" for i in range(20))
    trace = read_trace(_tmp("c.csv", text), columns=parse_columns("freq=Hz_col,level=Amp"))
    assert trace.freq_hz[2] == pytest.approx(1.002e6)
    assert trace.level_dbm[2] == pytest.approx(-88.0)


def test_touchstone_like_two_column_text():
    # '!' comments (one holding a header key), an option line '# MHz', whitespace data.
    text = "! invented\n! rbw = 10 kHz\n# MHz dBm\n" + _rows(fmt="{f:.6f}   {lv:.2f}")
    trace = read_trace(_tmp("d.txt", text))
    assert trace.rbw_hz == 10e3 and trace.freq_hz[0] == 100e6


def test_rbw_from_the_option_and_an_equal_statement_in_the_file():
    text = "Frequency (MHz),Level (dBm)\n" + _rows()
    assert read_trace(_tmp("e.csv", text), rbw_hz=30e3).rbw_hz == 30e3
    text = "# rbw = 30 kHz\n" + text
    assert read_trace(_tmp("f.csv", text), rbw_hz=30e3).rbw_hz == 30e3  # the same value twice is no conflict


def test_trace_arrays_are_frozen():
    trace = read_trace(_tmp("g.csv", "# rbw = 1 kHz\nfreq_hz,level_dbm\n" + _rows(fmt="{f:.0f},{lv}")))
    with pytest.raises(ValueError):
        trace.level_dbm[0] = 0.0


_TMP = {}


def _tmp(name, text):
    path = _TMP["dir"] / name
    path.write_text(text, encoding="utf-8")
    return path


@pytest.fixture(autouse=True)
def _dir(tmp_path):
    _TMP["dir"] = tmp_path


GOOD = "# rbw = 100 kHz\nFrequency (MHz),Level (dBm)\n"

MALFORMED = {
    # name: (file text, needles in the error line)
    "no frequency column": (
        "# rbw = 100 kHz\nTime (s),Level (dBm)\n" + _rows(),
        ["no frequency column", "'Time (s)'"],
    ),
    "unsorted": (
        GOOD + _rows(5) + "103.500000,-80\n" + _rows(10, 106.0),
        ["line 8", "out of order", "strictly increasing"],
    ),
    "duplicate": (GOOD + _rows(5) + "104.000000,-80\n" + _rows(10, 106.0), ["line 8", "duplicate"]),
    "mixed units": (
        "# rbw = 100 kHz\nFreq,Level (dBm)\n"
        + "100 MHz,-80\n" * 0
        + "".join(f"{100 + i} MHz,-80\n" for i in range(5))
        + "0.105 GHz,-80\n"
        + "".join(f"{106 + i} MHz,-80\n" for i in range(10)),
        ["line 8", "0.105 GHz", "mixed units"],
    ),
    "unit against the column name": (
        GOOD + _rows(5) + "0.1055 GHz,-80\n" + _rows(10, 106.0),
        ["line 8", "GHz", "MHz"],
    ),
    "nan": (GOOD + _rows(5) + "105.5,nan\n" + _rows(10, 106.0), ["line 8", "'nan'", "finite"]),
    "inf": (GOOD + _rows(5) + "105.5,-inf\n" + _rows(10, 106.0), ["line 8", "'-inf'", "finite"]),
    "non-numeric": (GOOD + _rows(5) + "105.5,-8o.2\n" + _rows(10, 106.0), ["line 8", "'-8o.2'", "a number"]),
    "too few points": (GOOD + _rows(5), ["5 point", f"at least {MIN_POINTS}"]),
    "missing rbw": ("Frequency (MHz),Level (dBm)\n" + _rows(), ["no resolution bandwidth", "--rbw"]),
    "no unit": ("# rbw = 100 kHz\nFrequency,Level (dBm)\n" + _rows(), ["line 3", "without a unit"]),
    "level not dBm": ("# rbw = 100 kHz\nFrequency (MHz),Level (dBuV)\n" + _rows(), ["dBuV", "expected dBm"]),
    "bad detector": (
        "# rbw = 100 kHz\n# detector = quasi\n" + GOOD[16:] + _rows(),
        ["line 2", "'quasi'", "peak, rms"],
    ),
    "misspelt key": ("# rwb = 100 kHz\n" + GOOD[16:] + _rows(), ["line 1", "'rwb'", "did you mean 'rbw'"]),
    "bare rbw": ("# rbw = 100000\n" + GOOD[16:] + _rows(), ["line 1", "'100000'", "unit is missing"]),
    "two-column without an option line": (
        "! rbw = 10 kHz\n" + _rows(fmt="{f:.6f} {lv:.2f}"),
        ["no frequency unit", "# MHz"],
    ),
    "two-column with three values": (
        "# MHz\n! rbw = 10 kHz\n"
        + _rows(3, fmt="{f:.6f} {lv:.2f}")
        + "103 -80 1\n"
        + _rows(10, 104.0, fmt="{f} {lv}"),
        ["line 6", "expected two values"],
    ),
    "short row": (GOOD + _rows(5) + "105.5\n" + _rows(10, 106.0), ["line 8", "expected 2"]),
    "data without names": ("# rbw = 100 kHz\n" + _rows(), ["line 2", "column names"]),
}


@pytest.mark.parametrize("case", sorted(MALFORMED))
def test_malformed_trace_is_one_located_error_line_exit_2(case, tmp_path):
    text, needles = MALFORMED[case]
    lineup = write(tmp_path, "lineup.toml", LINEUP)
    trace = write(tmp_path, "trace.csv" if "two-column" not in case else "trace.txt", text)
    code, out, err, detail, _ = run_in_process(["compare", str(lineup), str(trace)])
    assert_one_error_line(code, out, err, [str(trace), *needles], detail=detail)


def test_rbw_in_the_file_and_a_different_option_is_an_error(tmp_path):
    lineup = write(tmp_path, "lineup.toml", LINEUP)
    trace = write(tmp_path, "t.csv", GOOD + _rows())
    code, out, err, detail, _ = run_in_process(["compare", str(lineup), str(trace), "--rbw", "30 kHz"])
    assert_one_error_line(code, out, err, ["100000 Hz (line 1)", "--rbw gives 30000 Hz"], detail=detail)


def test_column_mapping_naming_no_column_is_an_error(tmp_path):
    lineup = write(tmp_path, "lineup.toml", LINEUP)
    trace = write(tmp_path, "t.csv", GOOD + _rows())
    code, out, err, detail, _ = run_in_process(
        ["compare", str(lineup), str(trace), "--columns", "freq=Frequency,level=Amplitude"]
    )
    assert_one_error_line(code, out, err, ["--columns", "'Amplitude'", "'Level (dBm)'"], detail=detail)


def test_two_level_columns_need_a_mapping(tmp_path):
    text = "# rbw = 100 kHz\nFrequency (MHz),Trace 1 (dBm),Trace 2 (dBm)\n"
    text += "".join(f"{100 + i},-80,-81\n" for i in range(20))
    with pytest.raises(LineupError, match="2 level columns"):
        read_trace(write(tmp_path, "t.csv", text))
    trace = read_trace(write(tmp_path, "t.csv", text), columns={"level": "Trace 2"})
    assert np.all(trace.level_dbm == -81.0)


def test_bad_column_mapping_text():
    with pytest.raises(LineupError, match="freq=NAME,level=NAME"):
        parse_columns("frequency=F")
