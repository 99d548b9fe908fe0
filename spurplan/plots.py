"""Figures. Plotting lives here only; everything returns a matplotlib Figure.

matplotlib is imported inside each function (with the non-interactive Agg
backend), so that the library and the CLI start without it.
"""

from __future__ import annotations

import numpy as np


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
            ax.annotate(text, (x, y), textcoords="offset points", xytext=(3, 4), fontsize=7)
    if rng is not None:
        ax.set_title(f"{stage.name}: |S21| (data {lo / scale:.4g} to {hi / scale:.4g} {unit})")
    else:
        ax.set_title(f"{stage.name}: |S21| (synthesized ladder)")
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
