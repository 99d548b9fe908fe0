"""The m x n chart of a mixer: every ``|m f_LO + n f_IF|`` with its level and where it lands.

For each product of LO order m and IF order n (``m + |n|`` up to a chosen order) the
chart gives its frequency, the datasheet level (dBc at the stated IF drive, where the
table has one), the level the model gives at the mixer's output in this lineup, and
two marks: whether it falls in the passband of the first filter after the mixer
(within 3 dB of that filter's response at the wanted output) and which protected
band, if any, it lands in.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from spurplan.engine.result import REPORT_FLOOR_DBC
from spurplan.model.stages import Filter, Mixer
from spurplan.model.stages.mixer import spur_label
from spurplan.units import ratio_db, vpeak_to_dbm

if TYPE_CHECKING:  # annotations only
    from spurplan.model.lineup import Lineup

PASSBAND_DB = 3.0
# LO range of a chart's figure, as factors of the LO, when none is asked for.
LO_SPAN = (0.8, 1.2)


@dataclass(frozen=True)
class SpurChart:
    """What :func:`spur_chart` found: one row per ``(m, n)`` product of a mixer.

    Attributes
    ----------
    rows : dict of str -> list
        ``m, n, label, freq_hz, table_dbc, model_dbm, model_dbc, in_passband, band, wanted``.
    filter_name : str or None
        The first filter after the mixer, whose passband the rows are marked against.
    """

    lineup: Lineup
    mixer: Mixer
    rows: dict
    filter_name: str | None

    @property
    def in_passband(self) -> list[str]:
        """Labels of the products besides the wanted one that the model puts in the passband."""
        r = self.rows
        return [
            lab
            for lab, p, w, lv in zip(r["label"], r["in_passband"], r["wanted"], r["model_dbm"], strict=True)
            if p and not w and lv is not None
        ]

    @property
    def rows_with_levels(self) -> dict[str, list]:
        """:attr:`rows` of the products with a datasheet level or a modelled one."""
        keep = [
            i
            for i, (t, v) in enumerate(zip(self.rows["table_dbc"], self.rows["model_dbm"], strict=True))
            if t is not None or v is not None
        ]
        return {c: [vals[i] for i in keep] for c, vals in self.rows.items()}

    def plot(self, lo_span_hz=None, size_px=(1200, 700)):
        """Product frequency against LO frequency; returns a matplotlib Figure.

        Parameters
        ----------
        lo_span_hz : tuple of float, optional
            First and last LO frequency (Hz); default the LO -20 % to +20 %
            (:data:`LO_SPAN`).
        size_px : tuple of int, optional
            Figure size (width, height) in pixels.

        Returns
        -------
        matplotlib.figure.Figure
        """
        # the one upward door: presentation, imported on use
        from spurplan.output.plots import spur_figure

        lo = self.mixer.lo_freq_hz
        span = lo_span_hz if lo_span_hz is not None else (LO_SPAN[0] * lo, LO_SPAN[1] * lo)
        return spur_figure(self, span, size_px)


def spur_chart(lineup, stage: str, max_order: int = 7) -> SpurChart:
    """Build the chart of mixer ``stage`` (the reference carrier, the strongest, is the IF).

    Parameters
    ----------
    lineup : Lineup
        The lineup, run once at its nominal drive.
    stage : str
        Name of the mixer stage.
    max_order : int
        Largest ``m + |n|`` charted.

    Returns
    -------
    SpurChart
        One row per ``(m, n)`` with ``m >= 0``: frequency (Hz), table level (dBc), modelled
        level (dBm and dBc of the wanted product), and the passband and band marks.

    Raises
    ------
    LineupError
        When no stage has that name or it is not a mixer.
    """
    index = lineup.stage_index(stage)
    mixer = lineup.stage_of_kind(stage, Mixer)
    k = lineup.reference_carrier_index
    if_hz = lineup.carriers[k].freq_hz
    result = lineup.run()
    node = result.propagation.nodes[index, 0]
    mix = result.mix
    lo_col = mixer.transfer.lo_index
    if_col = len(lineup.mixers) + k
    wanted_dbm = float(result.carrier_levels_dbm(stage)[k])
    after = [s for s in lineup.stages[index:] if isinstance(s, Filter)]
    flt = after[0] if after else None
    ref_db = (
        float(ratio_db(flt.response(np.array([abs(mixer.lo_freq_hz + mixer.wanted[1] * if_hz)])))[0])
        if flt
        else None
    )
    cols: dict[str, list] = {
        c: []
        for c in (
            "m",
            "n",
            "label",
            "freq_hz",
            "table_dbc",
            "model_dbm",
            "model_dbc",
            "in_passband",
            "band",
            "wanted",
        )
    }
    for m in range(0, max_order + 1):
        for n in range(-max_order, max_order + 1):
            if m + abs(n) > max_order or (m == 0 and n <= 0) or m + abs(n) == 0:
                continue
            f = abs(m * mixer.lo_freq_hz + n * if_hz)
            vec = np.zeros(mix.shape[1], dtype=np.int64)
            vec[lo_col], vec[if_col] = m, n
            hit = np.nonzero((mix == vec).all(axis=1) | (mix == -vec).all(axis=1))[0]
            level = float(vpeak_to_dbm(node[hit[0]], lineup.r_ohm)) if hit.size else None
            # Below the report floor the model makes nothing (FFT rounding only).
            if level is not None and not level - wanted_dbm > REPORT_FLOOR_DBC:
                level = None
            cols["m"].append(m)
            cols["n"].append(n)
            cols["label"].append(spur_label(m, n))
            cols["freq_hz"].append(f)
            cols["table_dbc"].append(mixer.table.get((m, n)))
            cols["model_dbm"].append(level)
            cols["model_dbc"].append(None if level is None else level - wanted_dbm)
            in_pass = False
            if flt is not None and ref_db is not None and f > 0:  # ref_db is set with flt
                in_pass = bool(float(ratio_db(flt.response(np.array([f])))[0]) >= ref_db - PASSBAND_DB)
            cols["in_passband"].append(in_pass)
            from spurplan.analyses.check import bands_at

            cols["band"].append(bands_at(lineup.mask, f) if lineup.mask is not None else None)
            cols["wanted"].append((m, n) == mixer.wanted)
    return SpurChart(lineup=lineup, mixer=mixer, rows=cols, filter_name=None if flt is None else flt.name)
