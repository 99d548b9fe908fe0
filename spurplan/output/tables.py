"""Table layouts shared by the terminal, reports and notebooks.

Each layout is a list of ``(column, header with unit, number format)``; the
``*_display`` functions add the derived display columns (MHz, verdict words,
flags) to a row dict from the library, so that every front end shows the same.
"""

from __future__ import annotations

PRODUCT_TABLE = [
    ("freq_hz", "freq (MHz)", None),
    ("level_dbm", "level (dBm)", ".2f"),
    ("dbc", "dBc", ".2f"),
    ("order", "order", "d"),
    ("label", "product", None),
    ("kind", "kind", None),
    ("stage", "largest from", None),
    ("flags", "flags", None),
]

BUDGET_TABLE = [
    ("stage", "stage", None),
    ("kind", "kind", None),
    ("gain_db", "gain (dB)", ".2f"),
    ("cum_gain_db", "cum gain (dB)", ".2f"),
    ("carrier_in_dbm", "in (dBm)", ".2f"),
    ("carrier_out_dbm", "out (dBm)", ".2f"),
    ("compression_db", "compr (dB)", ".2f"),
    ("oip3_dbm", "OIP3 (dBm)", ".2f"),
    ("cascade_iip3_dbm", "casc IIP3 (dBm)", ".2f"),
    ("cascade_oip3_dbm", "casc OIP3 (dBm)", ".2f"),
    ("p1db_dbm", "model P1dB (dBm)", ".2f"),
    ("p1db_stated_dbm", "stated P1dB (dBm)", ".2f"),
    ("headroom_db", "headroom (dB)", ".2f"),
    ("psat_dbm", "model Psat (dBm)", ".2f"),
    ("nf_db", "NF (dB)", ".2f"),
    ("cascade_nf_db", "casc NF (dB)", ".2f"),
    ("noise_out_dbm_hz", "noise out (dBm/Hz)", ".2f"),
    ("figures", "figures", None),
]

ELEMENT_TABLE = [
    ("position", "#", "d"),
    ("branch", "arm", None),
    ("part", "part", None),
    ("g", "g", ".4f"),
    ("l_nh", "L (nH)", ".4g"),
    ("c_pf", "C (pF)", ".4g"),
    ("q_l", "Q_L", ".4g"),
    ("q_c", "Q_C", ".4g"),
]

RESPONSE_TABLE = [
    ("freq_mhz", "freq (MHz)", ".6f"),
    ("label", "product", None),
    ("level_in_dbm", "level in (dBm)", ".2f"),
    ("s21_db", "S21 (dB)", ".3f"),
    ("s21_deg", "phase (deg)", ".2f"),
    ("flags", "flags", None),
]

CHECK_TABLE = [
    ("verdict", "", None),
    ("freq_mhz", "freq (MHz)", ".6f"),
    ("label", "product", None),
    ("level_in_rbw_dbm", "level (dBm/RBW)", ".2f"),
    ("limit_dbm", "limit (dBm)", ".2f"),
    ("margin_db", "margin (dB)", ".2f"),
    ("limit_form", "limit", None),
    ("rule", "rule", None),
    ("band", "protected band", None),
    ("stage", "largest from", None),
    ("flags", "flags", None),
]

BANDS_TABLE = [
    ("name", "name", None),
    ("kind", "kind", None),
    ("entries", "entries", "d"),
    ("status", "status of values", None),
    ("title", "title", None),
]

RULES_TABLE = [
    ("name", "entry", None),
    ("start_mhz", "start (MHz)", ".6g"),
    ("stop_mhz", "stop (MHz)", ".6g"),
    ("limit", "limit", None),
    ("status", "status", None),
    ("source", "source", None),
]

DRIVE_TABLE = [
    ("input_dbm", "input (dBm)", ".2f"),
    ("output_dbm", "output (dBm)", ".2f"),
    ("worst_margin_db", "worst margin (dB)", ".2f"),
    ("worst_label", "worst product", None),
    ("verdict", "", None),
]

TUNE_TABLE = [
    ("carrier_mhz", "carrier (MHz)", ".6f"),
    ("freq_mhz", "product (MHz)", ".6f"),
    ("label", "product", None),
    ("margin_db", "margin (dB)", ".2f"),
    ("verdict", "", None),
    ("band", "protected band", None),
    ("rule", "rule", None),
]

NEEDED_TABLE = [
    ("freq_mhz", "freq (MHz)", ".6f"),
    ("label", "product", None),
    ("margin_db", "margin now (dB)", ".2f"),
    ("rejection_needed_db", "more rejection needed (dB)", ".2f"),
    ("channel_mhz", "worst at (MHz)", ".6g"),
    ("span_mhz", "lies over (MHz)", None),
    ("rule", "rule", None),
    ("band", "protected band", None),
]

CAUSE_TABLE = [
    ("label", "product", None),
    ("rule", "rule", None),
    ("samples", "failing samples", "d"),
    ("fraction", "fraction", ".4f"),
]

SPUR_TABLE = [
    ("label", "product", None),
    ("m", "m", "d"),
    ("n", "n", "d"),
    ("freq_mhz", "freq (MHz)", ".6f"),
    ("table_dbc", "table (dBc)", ".1f"),
    ("model_dbc", "model (dBc)", ".2f"),
    ("marks", "marks", None),
    ("band", "protected band", None),
]


def spur_display(rows: dict) -> dict:
    shown = dict(rows)
    shown["freq_mhz"] = mhz(rows["freq_hz"])
    shown["marks"] = [
        "WANTED" if w else ("IN PASSBAND" if p else "")
        for w, p in zip(rows["wanted"], rows["in_passband"], strict=True)
    ]
    return shown


def verdict_words(passes: list) -> list[str]:
    """ "FAIL" / "pass" / "-" for True/False/None: failing rows are marked in text."""
    return ["FAIL" if p is False else ("pass" if p else "-") for p in passes]


def mhz(values: list) -> list:
    return [None if v is None else v / 1e6 for v in values]


def product_display(rows: dict) -> dict:
    shown = dict(rows)
    shown["freq_hz"] = [f"{f / 1e6:.6f}" for f in rows["freq_hz"]]
    shown["label"] = [f"{a} ({b})" if b else a for a, b in zip(rows["label"], rows["also"], strict=True)]
    shown["flags"] = [
        " ".join(t for t, on in (("EXTRAPOLATED", e), ("UNCONVERGED", u), ("BEYOND-DATA", d)) if on)
        for e, u, d in zip(
            rows["model_extrapolated"], rows["not_converged"], rows["beyond_data"], strict=True
        )
    ]
    return shown


def check_display(rows: dict) -> dict:
    shown = dict(rows)
    shown["verdict"] = verdict_words(rows["pass"])
    shown["freq_mhz"] = mhz(rows["freq_hz"])
    shown["flags"] = [
        " ".join(t for t, on in (("BEYOND-DATA", b), ("EXTRAPOLATED", e), (d.upper(), d != "spurious")) if on)
        for b, e, d in zip(rows["beyond_data"], rows["model_extrapolated"], rows["domain"], strict=True)
    ]
    return shown


def tune_display(rows: dict) -> dict:
    shown = dict(rows)
    shown["carrier_mhz"] = mhz(rows["carrier_hz"])
    shown["freq_mhz"] = mhz(rows["freq_hz"])
    shown["verdict"] = verdict_words(rows["pass"])
    return shown


def drive_display(rows: dict) -> dict:
    shown = dict(rows)
    shown["verdict"] = verdict_words(rows["pass"])
    return shown


def needed_display(rows: dict) -> dict:
    """The remedy's rejection-needed rows for a terminal: MHz, the channel (the swept
    frequency) where each product is shortest, and where it lies over the short channels."""
    shown = dict(rows)
    shown["freq_mhz"] = mhz(rows["freq_hz"])
    n = len(rows["freq_hz"])
    shown["channel_mhz"] = mhz(rows.get("channel_hz", [None] * n))
    lows, highs = rows.get("freq_low_hz", [None] * n), rows.get("freq_high_hz", [None] * n)
    shown["span_mhz"] = [
        None if a is None else (f"{a / 1e6:.6g}" if a == b else f"{a / 1e6:.6g} - {b / 1e6:.6g}")
        for a, b in zip(lows, highs, strict=True)
    ]
    return shown


def filter_response_display(view) -> dict:
    """A filter view's response rows for a terminal; FLOOR marks rows where the stopband
    floor, not the ladder, sets |S21|."""
    import numpy as np

    cols = dict(view.rows)
    cols["freq_mhz"] = mhz(cols["freq_hz"])
    floor = view.stage.ideal_below_floor(np.asarray(cols["freq_hz"], dtype=float))
    cols["flags"] = [
        " ".join(w for w, on in (("BEYOND-DATA", b), ("FLOOR", bool(fl))) if on)
        for b, fl in zip(cols["beyond_data"], floor, strict=True)
    ]
    return cols


def element_display(cols: dict) -> dict:
    shown = dict(cols)
    shown["l_nh"] = [None if v is None else v * 1e9 for v in cols["l_h"]]
    shown["c_pf"] = [None if v is None else v * 1e12 for v in cols["c_f"]]
    return shown
