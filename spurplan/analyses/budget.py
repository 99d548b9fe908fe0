"""Cascade budget: carrier level, gain, cascaded intercepts and headroom per stage.

Cascaded third-order intercept, input-referred, in linear power units (Pozar,
Microwave Engineering, section on cascaded intercepts; Razavi, RF Microelectronics
2e, ch. 2; from memory)::

    1 / IIP3_total = 1 / IIP3_1 + G1 / IIP3_2 + G1 G2 / IIP3_3 + ...

with ``G_k`` the power gains before stage k; stages without an IP3 figure (pads,
filters) add nothing but their gain.  This assumes the stages' IM3 products add in
phase: the worst case, which the engine reproduces with in-phase cubic stages.

Cascaded noise figure (Friis 1944, from memory), in linear power ratios::

    F_total = F_1 + (F_2 - 1) / G_1 + (F_3 - 1) / (G_1 G_2) + ...

with the stages' small-signal power gains at the carrier frequency taken as their
available gains (matched stages).  An active stage's F is its stated noise figure; a
passive one (pad, filter) at the reference temperature T0 = 290 K has F = 1 / G, its
loss.  The output noise density is k T0 F_total G_total, with k T0 = -173.98 dBm/Hz
(k = 1.380649e-23 J/K, exact in the 2019 SI).
"""

from __future__ import annotations

import math

from spurplan.engine.noise import KT0_DBM_HZ
from spurplan.units import format_freq, ratio_db, vpeak_to_dbm

BUDGET_COLUMNS = [
    "stage",
    "kind",
    "gain_db",
    "cum_gain_db",
    "carrier_in_dbm",
    "carrier_out_dbm",
    "compression_db",
    "oip3_dbm",
    "cascade_iip3_dbm",
    "cascade_oip3_dbm",
    "p1db_dbm",
    "p1db_stated_dbm",
    "headroom_db",
    "psat_dbm",
    "nf_db",
    "cascade_nf_db",
    "noise_out_dbm_hz",
    "figures",
]


def cascade_nf_db(gains_db, nf_db) -> list[float | None]:
    """Cascaded noise figure (dB) at the output of each stage (Friis).

    Parameters
    ----------
    gains_db : sequence of float
        Small-signal power gain of each stage (dB), taken as its available gain.
    nf_db : sequence of float or None
        Noise figure of each stage (dB); ``None`` where it is not known.

    Returns
    -------
    list of float or None
        ``None`` from the first stage whose noise figure is not known on.
    """
    total = 1.0
    gain_before = 1.0
    out: list[float | None] = []
    known = True
    for g, nf in zip(gains_db, nf_db, strict=True):
        known = known and nf is not None
        if known:
            assert nf is not None
            total += (10.0 ** (nf / 10.0) - 1.0) / gain_before
        gain_before *= 10.0 ** (g / 10.0)
        out.append(10.0 * math.log10(total) if known else None)
    return out


def cascade_iip3_dbm(gains_db, oip3_dbm) -> list[float]:
    """Input-referred cascaded IIP3 (dBm) after each stage.

    Parameters
    ----------
    gains_db : sequence of float
        Small-signal gain of each stage (dB).
    oip3_dbm : sequence of float or None
        Output IP3 of each stage (dBm); ``None`` for a stage with no IM3.

    Returns
    -------
    list of float
        ``inf`` while no stage has an IP3.
    """
    inv_mw = 0.0
    gain_before_db = 0.0
    out = []
    for g, oip3 in zip(gains_db, oip3_dbm, strict=True):
        if oip3 is not None:
            iip3_mw = 10.0 ** ((oip3 - g) / 10.0)
            inv_mw += 10.0 ** (gain_before_db / 10.0) / iip3_mw
        gain_before_db += g
        out.append(math.inf if inv_mw == 0 else -10.0 * math.log10(inv_mw))
    return out


def budget_rows(result, batch: int = 0) -> dict[str, list]:
    """The cascade budget of a run, as a dict of columns.

    The carrier is the reference carrier (the strongest at the lineup input, ties to the
    higher frequency: :func:`spurplan.model.lineup.reference_carrier_index`); levels are as
    modelled (compression included); gains are small-signal at the carrier
    frequency (for a filter, its |S21| there).

    Parameters
    ----------
    result : Result
        A run of the lineup (:meth:`spurplan.model.lineup.Lineup.run`).
    batch : int
        Index along the run's batch axis (one drive or tuning point) to tabulate.

    Returns
    -------
    dict of str to list
        One list per name in :data:`BUDGET_COLUMNS`, one entry per stage; levels in dBm,
        gains and headroom in dB.
    """
    lineup = result.lineup
    stages = lineup.stages
    reference = lineup.reference_carrier_index
    # The carrier's product index at each node (a mixer moves it to the wanted product).
    col = [result.carrier_columns(i)[reference] for i in range(len(stages) + 1)]
    # Small-signal gain at the carrier: the conversion gain of a converter (which has no
    # linear passage), |S21| (or the amplifier's gain figure) for the others.
    gains = [
        float(s.conversion.gain_db)
        if s.conversion is not None
        else float(ratio_db(result.propagation.response[i, batch, col[i]]))
        for i, s in enumerate(stages)
    ]
    figures = [s.cascade_figures(lineup.r_ohm) for s in stages]
    oip3 = [f.oip3_dbm for f in figures]
    iip3 = cascade_iip3_dbm(gains, oip3)
    # A passive stage (no nonlinear model, no conversion) at T0 has the noise figure of
    # its loss; an active one has the figure it states.
    nf = [
        f.noise_figure_db
        if s.transfer is not None or s.conversion is not None
        else (max(-g, 0.0) if g <= 0.0 else None)
        for s, f, g in zip(stages, figures, gains, strict=True)
    ]
    nf_cascade = cascade_nf_db(gains, nf)
    cols: dict[str, list] = {c: [] for c in BUDGET_COLUMNS}
    cum = 0.0
    for i, stage in enumerate(stages):
        node_in = result.propagation.nodes[i, batch]
        node_out = result.propagation.nodes[i + 1, batch]
        p_in = float(vpeak_to_dbm(node_in[col[i]], lineup.r_ohm))
        p_out = float(vpeak_to_dbm(node_out[col[i + 1]], lineup.r_ohm))
        cum += gains[i]
        p1db = figures[i].p1db_model_dbm
        cols["stage"].append(stage.name)
        cols["kind"].append(stage.kind)
        cols["gain_db"].append(gains[i])
        cols["cum_gain_db"].append(cum)
        cols["carrier_in_dbm"].append(p_in)
        cols["carrier_out_dbm"].append(p_out)
        cols["compression_db"].append(gains[i] - (p_out - p_in))
        cols["oip3_dbm"].append(oip3[i])
        cols["cascade_iip3_dbm"].append(iip3[i])
        cols["cascade_oip3_dbm"].append(iip3[i] + cum)
        cols["p1db_dbm"].append(p1db)
        cols["p1db_stated_dbm"].append(figures[i].p1db_stated_dbm)
        cols["headroom_db"].append(None if p1db is None else p1db - p_out)
        cols["psat_dbm"].append(figures[i].psat_model_dbm)
        cols["nf_db"].append(nf[i])
        cols["cascade_nf_db"].append(nf_cascade[i])
        total_nf = nf_cascade[i]
        cols["noise_out_dbm_hz"].append(None if total_nf is None else KT0_DBM_HZ + total_nf + cum)
        cols["figures"].append(_figures_state(stage))
    return cols


def _figures_state(stage) -> str:
    """Stated figures the model misses, and missing figure classes, in a few words."""
    # A check at a figure table's frequency is of the model tune and yield use there.
    named = [
        (c, c.figure + (f" at {format_freq(c.freq_hz)}" if c.freq_hz is not None else ""))
        for c in stage.checks
    ]
    parts = [
        f"{name} misses by {c.miss_db:+.2f} dB" if c.model is not None else f"{name} not reached"
        for c, name in named
        if not c.met
    ]
    parts += [f"no {what.split(' (')[0]}" for what in stage.missing_figures()]
    return "; ".join(parts) if parts else ("all met" if stage.checks else "")
