"""Table layouts shared by the terminal, reports and notebooks.

Each layout is a list of ``(column, header with unit, number format)``; the
``*_display`` functions add the derived display columns (MHz, verdict words,
flags) to a row dict from the library, so that every front end shows the same.
"""

from __future__ import annotations

from collections.abc import Collection

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


def tune_table(variable: str) -> list:
    """The per-channel layout of a tuning sweep; the first column names what was swept
    (``"LO"`` with a mixer, else ``"carrier"``: :attr:`TuneSweep.variable`)."""
    return [
        ("channel_mhz", f"{variable} (MHz)", ".6f"),
        ("freq_mhz", "product (MHz)", ".6f"),
        ("label", "product", None),
        ("margin_db", "margin (dB)", ".2f"),
        ("verdict", "", None),
        ("judged", "rule or protected band", None),
    ]


def tune_summary_table(variable: str) -> list:
    """The layout of a tuning sweep's summary (one row per product and rule or band)."""
    return [
        ("verdict", "", None),
        ("label", "product", None),
        ("judged", "rule or protected band", None),
        ("listed", f"listed with the {variable} at (MHz)", None),
        ("failing", f"fails with the {variable} at (MHz)", None),
        ("worst_channel_mhz", f"worst at {variable} (MHz)", ".6f"),
        ("worst_freq_mhz", "product there (MHz)", ".6f"),
        ("worst_margin_db", "worst margin (dB)", ".2f"),
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

# The yield per corner and per channel (montecarlo.breakdown_row, through breakdown_display).
_BREAKDOWN_COLUMNS = [
    ("samples", "samples", "d"),
    ("failed", "failing", "d"),
    ("yield_pct", "yield (%)", ".3f"),
    ("low_pct", "95 % low (%)", ".3f"),
    ("high_pct", "95 % high (%)", ".3f"),
    ("leading_label", "leading product", None),
    ("leading_rule", "its rule", None),
    ("leading_samples", "its samples", "d"),
]
CORNER_TABLE = [("corner", "corner", None), *_BREAKDOWN_COLUMNS]
CHANNEL_TABLE = [("channel_mhz", "channel (MHz)", ".6f"), *_BREAKDOWN_COLUMNS]

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


IF_WINDOW_TABLE = [
    ("rank", "#", "d"),
    ("start_mhz", "IF from (MHz)", ".6f"),
    ("stop_mhz", "IF to (MHz)", ".6f"),
    ("width_mhz", "width (MHz)", ".6f"),
    ("best_if_mhz", "best IF (MHz)", ".6f"),
    ("clearance_mhz", "clearance (MHz)", ".6f"),
    ("closest", "closest product (MHz)", None),
    ("closest_near", "nearest band", None),
    ("ends", "window ends by", None),
]


# Band names longer than this are cut in the windows table (JSON and CSV keep them whole).
BAND_NAME_CHARS = 40


def _short(name: str) -> str:
    return name if len(name) <= BAND_NAME_CHARS else name[: BAND_NAME_CHARS - 3] + "..."


def if_window_display(rows: dict) -> dict:
    """Display columns of an IF plan's windows (:attr:`spurplan.analyses.frequency_plan.IfPlan.rows`).

    Parameters
    ----------
    rows : dict of str -> list
        One row per window (Hz).

    Returns
    -------
    dict of str -> list
        ``rows`` with MHz columns, the closest product with its frequency, the side of
        the band it is on, and what ends the window below and above.
    """
    shown = dict(rows)
    for key in ("start", "stop", "width", "best_if", "clearance"):
        shown[f"{key}_mhz"] = mhz(rows[f"{key}_hz"])
    shown["closest"] = [
        f"{lab} at {f / 1e6:.6f}"
        for lab, f in zip(rows["closest_label"], rows["closest_freq_hz"], strict=True)
    ]
    shown["closest_near"] = [
        f"{side} {_short(band)}"
        for side, band in zip(rows["closest_side"], rows["closest_band"], strict=True)
    ]

    def end(label, side):
        if label is None:
            return "end of range"
        return f"{label} (crosses)" if side == "crosses" else label

    shown["ends"] = [
        f"{end(lb, sb)} / {end(la, sa)}"
        for lb, sb, la, sa in zip(
            rows["below_label"], rows["below_side"], rows["above_label"], rows["above_side"], strict=True
        )
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


def judged_by(rule: str | None, band: str | None, band_rules: Collection[str]) -> str:
    """What judges a product, said once.

    Parameters
    ----------
    rule : str or None
        The rule's label.
    band : str or None
        The protected band(s) the product lands in.
    band_rules : set of str
        Labels of the bands' own rules.

    Returns
    -------
    str
        The band alone when the rule is the band's own limit (its label repeats the band's
        name), else the rule and the band it lands in.
    """
    if band is not None and rule in band_rules:
        return band
    if rule is None:
        return f"in {band}" if band else "-"
    return rule + (f" (in {band})" if band else "")


def tune_display(rows: dict, band_rules: Collection[str] = ()) -> dict:
    """A tuning sweep's rows for display.

    Parameters
    ----------
    rows : dict of str -> list
        :attr:`spurplan.analyses.sweep.TuneSweep.rows` (Hz, dB).
    band_rules : set of str, optional
        Labels of the bands' own rules (:func:`spurplan.analyses.tune_summary.band_rule_labels`).

    Returns
    -------
    dict of str -> list
        The rows with ``channel_mhz`` and ``freq_mhz`` (MHz), verdict words and ``judged``,
        one column for the rule or protected band (:func:`judged_by`).
    """
    shown = dict(rows)
    shown["channel_mhz"] = mhz(rows["carrier_hz"])
    shown["freq_mhz"] = mhz(rows["freq_hz"])
    shown["verdict"] = verdict_words(rows["pass"])
    shown["judged"] = [judged_by(r, b, band_rules) for r, b in zip(rows["rule"], rows["band"], strict=True)]
    return shown


def mhz_span(first_hz: float, last_hz: float) -> str:
    """A stretch of channels in MHz.

    Parameters
    ----------
    first_hz, last_hz : float
        Its ends (Hz).

    Returns
    -------
    str
        ``"466.675000-470.000000"``, or one value when both ends are the same channel.
    """
    if first_hz == last_hz:
        return f"{first_hz / 1e6:.6f}"
    return f"{first_hz / 1e6:.6f}-{last_hz / 1e6:.6f}"


def tune_summary_display(entries: list[dict]) -> dict:
    """A tuning sweep's summary entries (:func:`spurplan.analyses.tune_summary.tune_summary`)
    as display columns: verdict words, what judges each product, the stretches of
    channels where it is listed and where it fails (MHz, with their channel counts)."""
    keys = ("verdict", "label", "judged", "listed", "failing", "worst_channel_mhz", "worst_freq_mhz")
    shown: dict[str, list] = {k: [] for k in (*keys, "worst_margin_db")}
    for e in entries:
        shown["verdict"].append("FAIL" if not e["pass"] else "pass")
        shown["label"].append(e["label"])
        shown["judged"].append(judged_by(e["rule"], e["band"], {e["rule"]} if e["rule_is_band"] else set()))
        shown["listed"].append(
            ", ".join(f"{mhz_span(r['first_hz'], r['last_hz'])} ({r['channels']})" for r in e["runs"])
        )
        shown["failing"].append(
            ", ".join(
                f"{mhz_span(r['start_hz'], r['stop_hz'])} ({r['channels']})" for r in e["failing_ranges"]
            )
            or "-"
        )
        shown["worst_channel_mhz"].append(e["worst_channel_hz"] / 1e6)
        shown["worst_freq_mhz"].append(e["worst_freq_hz"] / 1e6)
        shown["worst_margin_db"].append(e["worst_margin_db"])
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
    # Products merged at one frequency read as on the spectrum table: "2f1 (f2-f1)".
    cols["label"] = [f"{a} ({b})" if b else a for a, b in zip(cols["label"], cols["also"], strict=True)]
    floor = view.stage.ideal_below_floor(np.asarray(cols["freq_hz"], dtype=float))
    cols["flags"] = [
        " ".join(w for w, on in (("BEYOND-DATA", b), ("FLOOR", bool(fl))) if on)
        for b, fl in zip(cols["beyond_data"], floor, strict=True)
    ]
    return cols


def breakdown_display(cols: dict) -> dict:
    """Yield rows per corner or channel for a terminal: per cent, channels in MHz, "-"
    for no leading cause."""
    shown = dict(cols)
    shown["yield_pct"] = [100 * v for v in cols["yield"]]
    shown["low_pct"] = [100 * lo for lo, _ in cols["interval_95"]]
    shown["high_pct"] = [100 * hi for _, hi in cols["interval_95"]]
    if "channel_hz" in cols:
        shown["channel_mhz"] = mhz(cols["channel_hz"])
    for key in ("leading_label", "leading_rule"):
        shown[key] = [v or "-" for v in cols[key]]
    return shown


def element_display(cols: dict) -> dict:
    shown = dict(cols)
    shown["l_nh"] = [None if v is None else v * 1e9 for v in cols["l_h"]]
    shown["c_pf"] = [None if v is None else v * 1e12 for v in cols["c_f"]]
    return shown
