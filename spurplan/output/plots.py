"""Figures. Plotting lives here only; everything returns a matplotlib Figure.

matplotlib is imported inside each function (with the non-interactive Agg
backend), so that the library and the CLI start without it.  Every text drawn that
holds a name from a user's file (lineup, stage, band) passes
:func:`spurplan.output.escaping.plot_text`, so that it is drawn literally, never as mathtext,
and shortened, so that a long name cannot squeeze the axes away.
"""

from __future__ import annotations

import numpy as np

from spurplan.output.escaping import plot_text


def _pyplot():
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt


def _freq_axis(freq_hz: np.ndarray) -> tuple[float, str]:
    top = float(np.max(freq_hz)) if np.size(freq_hz) else 1.0
    return (1e9, "GHz") if top >= 2e9 else (1e6, "MHz")


def filter_response(stage, marks: dict[str, list], *, points: int = 2000, size_in=(9.0, 5.0)):
    """|S21| in dB against frequency, with product frequencies marked.

    Parameters
    ----------
    stage : Filter
    marks : dict with "freq_hz" and "label" lists
        Products to mark (for example those present at the filter's input).
    points : int
        Frequencies evaluated across the plotted span.
    size_in : tuple of float
        Figure size (width, height) in inches.
    """
    plt = _pyplot()
    marked = np.asarray(marks.get("freq_hz", []), dtype=float)
    rng = stage.data_range_hz
    if rng is not None:
        lo, hi = rng
    else:
        hi = 1.15 * max(float(marked.max()) if marked.size else 0.0, 3.0 * _edge(stage))
        lo = hi / points
    f = np.linspace(lo, hi, points)
    with np.errstate(divide="ignore"):
        db = 20 * np.log10(np.abs(stage.response(f)))
    scale, unit = _freq_axis(np.append(f, marked))
    fig, ax = plt.subplots(figsize=size_in, layout="constrained")
    ax.plot(f / scale, db, color="tab:blue", lw=1.5, label="|S21|")
    if marked.size:
        with np.errstate(divide="ignore"):
            at = 20 * np.log10(np.abs(stage.response(marked)))
        ax.plot(marked / scale, at, "o", color="tab:red", ms=4, label="products")
        for x, y, text in zip(marked / scale, at, marks.get("label", []), strict=False):
            ax.annotate(plot_text(text), (x, y), textcoords="offset points", xytext=(3, 4), fontsize=7)
    if rng is not None:
        ax.set_title(f"{plot_text(stage.name)}: |S21| (data {lo / scale:.4g} to {hi / scale:.4g} {unit})")
    else:
        from spurplan.model.ladders import describe_parts

        proto = stage.prototype
        ax.set_title(
            f"{plot_text(stage.name)}: |S21| (synthesized ladder; {describe_parts(proto)})", fontsize=9
        )
        if proto.floor_db is not None:
            ax.axhline(proto.floor_db, color="grey", ls="--", lw=0.8, label="stopband floor")
    ax.set_xlabel(f"frequency ({unit})")
    ax.set_ylabel("|S21| (dB)")
    finite = db[np.isfinite(db)]
    ax.set_ylim(max(float(finite.min()) - 5, -160), 5)
    ax.grid(True, alpha=0.4)
    ax.legend(loc="lower left")
    return fig


def _edge(stage) -> float:
    proto = stage.prototype
    if proto is None:
        return 1.0
    return proto.edge_hz + (proto.bandwidth_hz or 0.0)


def check_figure(outcome, size_px=(1200, 700), dpi: int = 100, trace=None):
    """Output products as stems against the mask's limit line.

    Protected bands are shaded and labelled, failing products annotated; stems are
    the level in the applicable rule's reference bandwidth (the whole product level
    where no rule applies).  A measured trace is drawn beside them in the same
    bandwidth (:func:`spurplan.analyses.bench_compare.trace_in_limit_rbw`).

    Parameters
    ----------
    outcome : CheckResult
        What :func:`spurplan.analyses.check.check` found (levels dBm, limits dBm); its
        :meth:`~spurplan.analyses.check.CheckResult.limit_line_dbm` gives the limit line.
    size_px : tuple of int, optional
        Figure size (width, height) in pixels.
    dpi : int, optional
        Dots per inch: the figure is ``size_px / dpi`` inches.
    trace : MeasuredTrace, optional
        A measured trace at the output, with its RBW, to draw beside the prediction.

    Returns
    -------
    matplotlib.figure.Figure
        The figure; release it with :func:`close`.
    """
    plt = _pyplot()
    rows = outcome.rows
    freq = np.asarray(rows["freq_hz"], dtype=float)
    level = np.array(
        [r if r is not None else t for r, t in zip(rows["level_in_rbw_dbm"], rows["level_dbm"], strict=True)],
        dtype=float,
    )
    carriers = list(outcome.result.carrier_freqs_hz()[0])
    # The axis spans the products and carriers; the noise rows (read at points of every rule
    # and protected band, up to hundreds of GHz) stay in the table, not on the axis.
    from spurplan.analyses.check import NOISE_LABEL

    products = freq[np.asarray([label != NOISE_LABEL for label in rows["label"]], dtype=bool)]
    top = max(float(products.max()) if products.size else 0.0, max(carriers)) * 1.08
    if trace is not None:
        top = max(top, float(trace.freq_hz[-1]))
    scale, unit = _freq_axis(np.array([top]))
    fig, ax = plt.subplots(figsize=(size_px[0] / dpi, size_px[1] / dpi), dpi=dpi, layout="constrained")
    grid = np.linspace(0.0, top, 4000)
    line = outcome.limit_line_dbm(grid)
    ax.plot(grid / scale, line, color="black", lw=1.4, drawstyle="steps-mid", label="limit (most stringent)")
    mask = outcome.result.lineup.mask
    # The continuous parts (noise, a modulated carrier's spectrum) in the same bandwidth.
    from spurplan.analyses.check import continuous_in_rbw_dbm

    spec = outcome.spectrum
    where = grid if spec is None else np.union1d(grid, spec.freq_hz[spec.freq_hz < top])
    curves = continuous_in_rbw_dbm(outcome, where)
    styles = {"noise": ("tab:gray", "output noise"), "spectrum": ("tab:purple", "modulated spectrum")}
    for key, values in curves.items():
        color, text = styles[key]
        shown = np.where(np.isfinite(values), values, np.nan)
        ax.plot(where / scale, shown, color=color, lw=0.9, alpha=0.9, label=f"{text} (in the rule's RBW)")
    if trace is not None:
        from spurplan.analyses.bench_compare import trace_in_limit_rbw

        ax.plot(
            trace.freq_hz / scale,
            trace_in_limit_rbw(outcome, trace),
            color="tab:olive",
            lw=0.8,
            alpha=0.9,
            gid="measured-trace",
            label=f"measured: {plot_text(str(trace.source))} (in the rule's RBW)",
        )
    shown_bands = [b for b in mask.bands if b.start_hz < top]
    for b in shown_bands:
        ax.axvspan(b.start_hz / scale, min(b.stop_hz, top) / scale, color="tab:orange", alpha=0.18, lw=0)
    floor = np.nanmin(np.append(level, line[np.isfinite(line)])) - 15 if level.size else -150
    bottom = max(floor, -200.0)
    ok = np.array([p is not False for p in rows["pass"]], dtype=bool)
    ax.vlines(freq[ok] / scale, bottom, level[ok], color="tab:blue", lw=1.2)
    ax.plot(freq[ok] / scale, level[ok], "o", color="tab:blue", ms=3.5, label="product (passes or unchecked)")
    if (~ok).any():
        ax.vlines(freq[~ok] / scale, bottom, level[~ok], color="tab:red", lw=1.6)
        ax.plot(freq[~ok] / scale, level[~ok], "X", color="tab:red", ms=7, label="product FAILS")
        for i in np.nonzero(~ok)[0]:
            ax.annotate(
                f"{plot_text(rows['label'][i])} FAIL {rows['margin_db'][i]:+.1f} dB",
                (freq[i] / scale, level[i]),
                textcoords="offset points",
                xytext=(4, 6),
                fontsize=8,
                color="tab:red",
            )
    carrier_level = outcome.carrier_dbm
    ax.vlines(
        np.array(carriers) / scale, bottom, carrier_level, color="tab:green", lw=2.0, label="carrier(s)"
    )
    ymax = max(carrier_level + 5, float(np.nanmax(line)) + 5 if np.isfinite(line).any() else carrier_level)
    for b in shown_bands:
        ax.text(
            (b.start_hz + min(b.stop_hz, top)) / 2 / scale,
            ymax - 2,
            plot_text(b.name),
            rotation=90,
            fontsize=6,
            va="top",
            ha="center",
            color="tab:brown",
        )
    ax.set_ylim(bottom, ymax)
    ax.set_xlim(0, top / scale)
    ax.set_xlabel(f"frequency ({unit})")
    ax.set_ylabel("level (dBm in the rule's reference bandwidth)")
    verdict = "PASS" if outcome.passed else "FAIL"
    margin = outcome.worst_margin_db
    ax.set_title(
        f"{plot_text(outcome.result.lineup.name)}: {verdict}"
        + ("" if margin is None else f", worst margin {margin:+.2f} dB")
        + " (planning estimate)"
    )
    ax.grid(True, alpha=0.35)
    ax.legend(loc="upper right", fontsize=8)
    return fig


def save_check_plot(outcome, path, size_px=(1200, 700), trace=None):
    """Draw :func:`check_figure` to ``path`` atomically, at exactly ``size_px`` pixels.

    Parameters
    ----------
    outcome : CheckResult
        What :func:`spurplan.analyses.check.check` found.
    path : str or pathlib.Path
        The image file; its suffix chooses the format.
    size_px : tuple of int, optional
        Figure size (width, height) in pixels.
    trace : MeasuredTrace, optional
        A measured trace drawn beside the prediction.

    Returns
    -------
    pathlib.Path
        The file written (as :func:`spurplan.output.files.save_figure`).
    """
    return _save(check_figure(outcome, size_px, trace=trace), path)


def close(fig) -> None:
    """Release a figure made here (pyplot keeps figures alive until closed)."""
    _pyplot().close(fig)


def _save(fig, path, dpi: int = 100):
    from spurplan.output.files import save_figure

    try:
        return save_figure(fig, path, dpi=dpi)
    finally:
        _pyplot().close(fig)


def _closest_slots(margin: np.ndarray, n: int) -> np.ndarray:
    """The ``n`` slots whose margin comes lowest anywhere in the sweep."""
    lowest = np.where(np.isnan(margin), np.inf, margin).min(axis=0)
    order = np.argsort(lowest)
    return order[np.isfinite(lowest[order])][:n]


def drive_figure(sweep, size_px=(1200, 700), dpi: int = 100, n_products: int = 8):
    """Products (solid) and their limits (dashed) against drive, carrier output, compliant limit.

    Parameters
    ----------
    sweep : DriveSweep
        What :func:`spurplan.analyses.sweep.drive_sweep` found (drive, levels and limits in dBm).
    size_px : tuple of int, optional
        Figure size (width, height) in pixels.
    dpi : int, optional
        Dots per inch: the figure is ``size_px / dpi`` inches.
    n_products : int, optional
        How many products to draw: those whose margin comes lowest anywhere.

    Returns
    -------
    matplotlib.figure.Figure
        The figure; release it with :func:`close`.
    """
    plt = _pyplot()
    fig, ax = plt.subplots(figsize=(size_px[0] / dpi, size_px[1] / dpi), dpi=dpi, layout="constrained")
    x = sweep.input_dbm
    colors = plt.rcParams["axes.prop_cycle"].by_key()["color"]
    for c, g in enumerate(_closest_slots(sweep.margin_db, n_products)):
        col = colors[c % len(colors)]
        ax.plot(
            x,
            sweep.level_dbm[:, g],
            color=col,
            lw=1.4,
            label=f"{plot_text(sweep.labels[g])} ({sweep.freq_hz[0, g] / 1e6:.4g} MHz)",
        )
        ax.plot(x, sweep.limit_dbm[:, g], color=col, lw=1.0, ls="--")
    ax.plot(x, sweep.output_dbm, color="black", lw=2.0, label="carrier output")
    # Linear extrapolation from the lowest drive shows where compression starts.
    ax.plot(
        x, sweep.output_dbm[0] + (x - x[0]), color="black", lw=0.8, ls=":", label="carrier, no compression"
    )
    if sweep.status == "limited":
        ax.axvline(sweep.max_compliant_input_dbm, color="tab:red", lw=1.5)
        ax.annotate(
            f"highest compliant drive {sweep.max_compliant_input_dbm:+.2f} dBm in\n"
            f"({sweep.max_compliant_output_dbm:+.2f} dBm out; {plot_text(sweep.limiting['label'])} fails above)",
            (sweep.max_compliant_input_dbm, ax.get_ylim()[1]),
            textcoords="offset points",
            xytext=(6, -30),
            fontsize=8,
            color="tab:red",
        )
    ax.set_xlabel("drive: strongest carrier at the input (dBm)")
    ax.set_ylabel("level at the output (dBm); dashed: each product's limit")
    ax.set_title(f"{plot_text(sweep.lineup.name)}: products against drive (planning estimate)")
    ax.grid(True, alpha=0.35)
    ax.legend(loc="lower right", fontsize=7, ncols=2)
    return fig


def save_drive_plot(sweep, path, size_px=(1200, 700)):
    """Draw :func:`drive_figure` to ``path`` atomically, at exactly ``size_px`` pixels.

    Parameters
    ----------
    sweep : DriveSweep
        What :func:`spurplan.analyses.sweep.drive_sweep` found.
    path : str or pathlib.Path
        The image file; its suffix chooses the format.
    size_px : tuple of int, optional
        Figure size (width, height) in pixels.

    Returns
    -------
    pathlib.Path
        The file written (as :func:`spurplan.output.files.save_figure`).
    """
    return _save(drive_figure(sweep, size_px), path)


def product_traces(sweep, n_products: int = 10) -> list[tuple[str, np.ndarray, np.ndarray]]:
    """The segments a tuning figure draws: each one product over consecutive channels.

    A slot of a tuning sweep holds whichever product sits at its place in the node's
    table at each channel (products are merged by frequency, so a slot's product can
    change from channel to channel); drawing a slot as one line would join different
    products with vertical jumps.  Each slot is cut where its label changes or its
    product is absent, and only the ``n_products`` products whose margin comes lowest
    anywhere are kept.

    Parameters
    ----------
    sweep : TuneSweep
        What :func:`spurplan.analyses.sweep.tune_sweep` found (Hz, dB).
    n_products : int, optional
        How many products (labels) to keep.

    Returns
    -------
    list of (str, ndarray of int, ndarray of float)
        The product's label, the channel indices of the segment and the product's
        frequency at each (Hz).
    """
    labels = np.asarray(sweep.labels, dtype=object)
    freq = sweep.freq_hz
    margin = np.where(np.isnan(sweep.margin_db), np.inf, sweep.margin_db)
    present = np.isfinite(freq)
    names, code = np.unique(labels.astype(str), return_inverse=True)
    code = code.reshape(labels.shape)
    lowest = np.full(len(names), np.inf)
    np.minimum.at(lowest, code[present], margin[present])
    ranked = sorted(np.nonzero(np.isfinite(lowest))[0], key=lambda k: (lowest[k], names[k]))
    keep = np.zeros(len(names), dtype=bool)
    keep[ranked[:n_products]] = True
    # A segment starts wherever a slot's product differs from the channel before, or the
    # slot was empty there; its id counts the starts down each slot.
    starts = np.ones(labels.shape, dtype=bool)
    starts[1:] = (code[1:] != code[:-1]) | ~present[:-1]
    seg = np.cumsum(starts, axis=0)
    drawn = present & keep[code]
    out = []
    for g in np.nonzero(drawn.any(axis=0))[0]:
        rows = np.nonzero(drawn[:, g])[0]
        for ids in np.split(rows, np.nonzero(np.diff(seg[rows, g]))[0] + 1):
            out.append((str(names[code[ids[0], g]]), ids, freq[ids, g]))
    return out


def tune_figure(sweep, size_px=(1200, 700), dpi: int = 100, n_products: int = 10):
    """Product frequency against carrier frequency; protected bands shaded, failures marked.

    Parameters
    ----------
    sweep : TuneSweep
        What :func:`spurplan.analyses.sweep.tune_sweep` found (frequencies in Hz, margins in dB).
    size_px : tuple of int, optional
        Figure size (width, height) in pixels.
    dpi : int, optional
        Dots per inch: the figure is ``size_px / dpi`` inches.
    n_products : int, optional
        How many products to draw: those whose margin comes lowest anywhere, each as
        its own segments (:func:`product_traces`; a line's gid is ``"product:LABEL"``).

    Returns
    -------
    matplotlib.figure.Figure
        The figure; release it with :func:`close`.
    """
    plt = _pyplot()
    fig, ax = plt.subplots(figsize=(size_px[0] / dpi, size_px[1] / dpi), dpi=dpi, layout="constrained")
    xc = sweep.carrier_hz
    sx, ux = _freq_axis(xc)
    traces = product_traces(sweep, n_products)
    top = max((float(np.max(f)) for _, _, f in traces), default=float(xc.max()))
    sy, uy = _freq_axis(np.array([top]))
    for b in sweep.lineup.mask.bands:
        if b.start_hz <= top * 1.05:
            ax.axhspan(b.start_hz / sy, min(b.stop_hz, top * 1.05) / sy, color="tab:orange", alpha=0.2, lw=0)
            ax.text(
                xc[0] / sx,
                (b.start_hz + min(b.stop_hz, top)) / 2 / sy,
                plot_text(b.name),
                fontsize=6,
                va="center",
                color="tab:brown",
            )
    last: dict[str, tuple[float, float, int]] = {}
    for label, idx, f in traces:
        # One product per line: each segment is one product in one slot over consecutive
        # channels, so no line joins two products (or a product across channels it is absent).
        (line,) = ax.plot(xc[idx] / sx, f / sy, color="tab:blue", lw=1.0)
        line.set_gid(f"product:{label}")
        if idx[-1] >= last.get(label, (0.0, 0.0, -1))[2]:
            last[label] = (xc[idx[-1]] / sx, f[-1] / sy, int(idx[-1]))
    for label, (x_end, y_end, _) in last.items():
        ax.annotate(plot_text(label), (x_end, y_end), fontsize=7, xytext=(3, 0), textcoords="offset points")
    margin = sweep.margin_db
    labels = np.asarray(sweep.labels, dtype=object)
    shown = {label for label, _, _ in traces}
    bad = np.where(np.isnan(margin), False, margin < 0) & np.isin(labels, list(shown))
    if bad.any():
        i, g = np.nonzero(bad)
        ax.plot(xc[i] / sx, sweep.freq_hz[i, g] / sy, "s", color="tab:red", ms=3, ls="none")
    for r in sweep.failing:
        ax.axvspan(r["start_hz"] / sx, r["stop_hz"] / sx, color="tab:red", alpha=0.08, lw=0)
    ax.set_xlabel(f"{'LO' if sweep.lineup.mixers else 'carrier'} frequency ({ux})")
    ax.set_ylabel(f"product frequency ({uy}); red: the product fails")
    verdict = "every channel passes" if not sweep.failing else f"{len(sweep.failing)} failing range(s)"
    ax.set_title(f"{plot_text(sweep.lineup.name)}: tuning sweep, {verdict} (planning estimate)")
    ax.grid(True, alpha=0.35)
    return fig


def save_tune_plot(sweep, path, size_px=(1200, 700)):
    """Draw :func:`tune_figure` to ``path`` atomically, at exactly ``size_px`` pixels.

    Parameters
    ----------
    sweep : TuneSweep
        What :func:`spurplan.analyses.sweep.tune_sweep` found.
    path : str or pathlib.Path
        The image file; its suffix chooses the format.
    size_px : tuple of int, optional
        Figure size (width, height) in pixels.

    Returns
    -------
    pathlib.Path
        The file written (as :func:`spurplan.output.files.save_figure`).
    """
    return _save(tune_figure(sweep, size_px), path)


def spectrum_figure(result, stage=None, size_px=(1200, 600), dpi: int = 100):
    """The products at a node as stems (dBm against frequency).

    Parameters
    ----------
    result : Result
        A run of the lineup.
    stage : str, optional
        The stage whose output node to show; ``None`` for the lineup output.
    size_px : tuple of int, optional
        Figure size (width, height) in pixels.
    dpi : int, optional
        Dots per inch: the figure is ``size_px / dpi`` inches.

    Returns
    -------
    matplotlib.figure.Figure
        The figure; release it with :func:`close`.
    """
    plt = _pyplot()
    rows = result.product_rows(stage)
    freq = np.asarray(rows["freq_hz"], dtype=float)
    level = np.asarray(rows["level_dbm"], dtype=float)
    carrier = np.array([k == "carrier" for k in rows["kind"]], dtype=bool)
    scale, unit = _freq_axis(freq)
    fig, ax = plt.subplots(figsize=(size_px[0] / dpi, size_px[1] / dpi), dpi=dpi, layout="constrained")
    bottom = max(float(level.min()) - 10.0, -250.0) if level.size else -150.0
    ax.vlines(freq[~carrier] / scale, bottom, level[~carrier], color="tab:blue", lw=1.2)
    ax.plot(freq[~carrier] / scale, level[~carrier], "o", color="tab:blue", ms=3, label="products")
    ax.vlines(freq[carrier] / scale, bottom, level[carrier], color="tab:green", lw=2.0, label="carrier(s)")
    ax.set_ylim(bottom, float(level.max()) + 5 if level.size else 0)
    ax.set_xlabel(f"frequency ({unit})")
    ax.set_ylabel("level (dBm)")
    where = plot_text(stage) if stage else "the output"
    ax.set_title(f"{plot_text(result.lineup.name)}: spectrum at {where} (planning estimate)")
    ax.grid(True, alpha=0.35)
    ax.legend(loc="upper right", fontsize=8)
    return fig


def spur_figure(chart, lo_span_hz, size_px=(1200, 700), dpi: int = 100, points: int = 400):
    """Mixer products against LO frequency; the following filter's passband and protected bands shaded.

    Parameters
    ----------
    chart : SpurChart
        What :func:`spurplan.analyses.spur_chart.spur_chart` found for one mixer: its mixer,
        lineup and product rows.
    lo_span_hz : tuple of float
        First and last LO frequency (Hz) of the plot.
    size_px : tuple of int, optional
        Figure size (width, height) in pixels.
    dpi : int, optional
        Dots per inch: the figure is ``size_px / dpi`` inches.
    points : int, optional
        LO frequencies evaluated across the span.

    Returns
    -------
    matplotlib.figure.Figure
        The figure; release it with :func:`close`.
    """
    plt = _pyplot()
    fig, ax = plt.subplots(figsize=(size_px[0] / dpi, size_px[1] / dpi), dpi=dpi, layout="constrained")
    mixer = chart.mixer
    lo = np.linspace(lo_span_hz[0], lo_span_hz[1], points)
    if_hz = chart.lineup.carriers[chart.lineup.reference_carrier_index].freq_hz
    rows = chart.rows
    sx, ux = _freq_axis(lo)
    shown = [
        i
        for i, (t, w) in enumerate(zip(rows["table_dbc"], rows["wanted"], strict=True))
        if t is not None or w
    ]
    top = max(max(abs(rows["m"][i] * lo[-1] + rows["n"][i] * if_hz) for i in shown), 1.0)
    sy, uy = _freq_axis(np.array([top]))
    flt = [s for s in chart.lineup.stages if s.name == chart.filter_name]
    if flt:
        grid = np.linspace(top / 2000, top * 1.05, 2000)
        with np.errstate(divide="ignore"):
            db = 20 * np.log10(np.abs(flt[0].response(grid)))
        ref = db.max()
        inside = db >= ref - 3.0
        for a, b in _runs(grid, inside):
            ax.axhspan(a / sy, b / sy, color="tab:green", alpha=0.15, lw=0)
    if chart.lineup.mask is not None:
        for band in chart.lineup.mask.bands:
            if band.start_hz < top:
                ax.axhspan(
                    band.start_hz / sy, min(band.stop_hz, top) / sy, color="tab:orange", alpha=0.2, lw=0
                )
    for i in shown:
        f = np.abs(rows["m"][i] * lo + rows["n"][i] * if_hz)
        wanted = rows["wanted"][i]
        ax.plot(lo / sx, f / sy, color="black" if wanted else "tab:blue", lw=2.0 if wanted else 1.0)
        ax.annotate(
            plot_text(rows["label"][i]),
            (lo[-1] / sx, f[-1] / sy),
            fontsize=7,
            xytext=(3, 0),
            textcoords="offset points",
        )
    ax.axvline(mixer.lo_freq_hz / sx, color="tab:red", lw=1.0, ls="--")
    ax.set_xlabel(f"LO frequency ({ux})")
    ax.set_ylabel(f"product frequency ({uy}); green: passband of {plot_text(chart.filter_name or '-')}")
    ax.set_title(f"{plot_text(chart.lineup.name)}: mixer products against LO (planning estimate)")
    ax.set_ylim(0, top * 1.05 / sy)
    ax.grid(True, alpha=0.35)
    return fig


def _runs(x: np.ndarray, flags: np.ndarray):
    """(start, stop) of the stretches of ``x`` where ``flags`` holds."""
    out, start = [], None
    for xi, f in zip(x, flags, strict=True):
        if f and start is None:
            start = xi
        if not f and start is not None:
            out.append((start, xi))
            start = None
    if start is not None:
        out.append((start, x[-1]))
    return out


def save_spur_plot(chart, lo_span_hz, path, size_px=(1200, 700)):
    """Draw :func:`spur_figure` to ``path`` atomically, at exactly ``size_px`` pixels.

    Parameters
    ----------
    chart : SpurChart
        As :func:`spur_figure`.
    lo_span_hz : tuple of float
        First and last LO frequency (Hz) of the plot.
    path : str or pathlib.Path
        The image file; its suffix chooses the format.
    size_px : tuple of int, optional
        Figure size (width, height) in pixels.

    Returns
    -------
    pathlib.Path
        The file written (as :func:`spurplan.output.files.save_figure`).
    """
    return _save(spur_figure(chart, lo_span_hz, size_px), path)


def yield_figure(result, size_px=(1000, 600), dpi: int = 100):
    """Histogram of every sample's worst margin, the failing side marked.

    Parameters
    ----------
    result : YieldResult
        What :func:`spurplan.analyses.montecarlo.run_yield` found (worst margins in dB).
    size_px : tuple of int, optional
        Figure size (width, height) in pixels.
    dpi : int, optional
        Dots per inch: the figure is ``size_px / dpi`` inches.

    Returns
    -------
    matplotlib.figure.Figure
        The figure; release it with :func:`close`.
    """
    plt = _pyplot()
    fig, ax = plt.subplots(figsize=(size_px[0] / dpi, size_px[1] / dpi), dpi=dpi, layout="constrained")
    m = result.worst_margin_db[np.isfinite(result.worst_margin_db)]
    if m.size:
        bins = np.linspace(min(m.min(), -1.0), max(m.max(), 1.0), 60)
        ax.hist(m[m >= 0], bins=bins, color="tab:blue", label="pass")
        ax.hist(m[m < 0], bins=bins, color="tab:red", label="FAIL")
    ax.axvline(0.0, color="black", lw=1.2)
    lo, hi = result.interval
    ax.set_title(
        f"{plot_text(result.lineup.name)}: yield {100 * result.yield_fraction:.2f} % "
        f"(95 % Wilson {100 * lo:.2f}-{100 * hi:.2f} %, {result.samples} samples; planning estimate)"
    )
    ax.set_xlabel("worst margin of a sample (dB)")
    ax.set_ylabel("samples")
    ax.grid(True, alpha=0.35)
    ax.legend()
    return fig


def save_yield_plot(result, path, size_px=(1000, 600)):
    """Draw :func:`yield_figure` to ``path`` atomically, at exactly ``size_px`` pixels.

    Parameters
    ----------
    result : YieldResult
        What :func:`spurplan.analyses.montecarlo.run_yield` found.
    path : str or pathlib.Path
        The image file; its suffix chooses the format.
    size_px : tuple of int, optional
        Figure size (width, height) in pixels.

    Returns
    -------
    pathlib.Path
        The file written (as :func:`spurplan.output.files.save_figure`).
    """
    return _save(yield_figure(result, size_px), path)


def save_filter_plot(view, path):
    """Draw :func:`filter_response` of a filter view to ``path`` atomically.

    Parameters
    ----------
    view : FilterView
        What :func:`spurplan.analyses.filter_view.stage_view` or
        :func:`~spurplan.analyses.filter_view.prototype_view` made: the filter and the
        products (Hz) to mark.
    path : str or pathlib.Path
        The image file; its suffix chooses the format.

    Returns
    -------
    pathlib.Path
        The file written (as :func:`spurplan.output.files.save_figure`, at its default
        resolution).
    """
    from spurplan.output.files import save_figure

    fig = filter_response(view.stage, view.rows)
    try:
        return save_figure(fig, path)
    finally:
        close(fig)
