"""Results of a lineup run: product tables at any node, with per-stage attribution.

Contributions of the stages to a product are combined in one of three ways:

``phase``  as modelled: the complex sum, phase-true;
``worst``  magnitudes add, the conservative default (interconnect phases on a real
           board are unknown, so this is what a careful engineer signs);
``power``  powers add (uncorrelated phases).

Carriers are always reported as modelled (phase-true): they are the wanted signal,
and their compression is part of the model.  Products that share one physical
frequency (harmonically related tones) are merged into one row, combined the same
way as the stage contributions.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from spurplan.engine.node_table import node_levels
from spurplan.model.products import labels, orders, product_index
from spurplan.units import ratio_db, vpeak_to_dbm

if TYPE_CHECKING:  # annotations only: lineup imports the engine, which result must not load
    from spurplan.engine.torus import Propagation
    from spurplan.model.lineup import Lineup

# Rows more than this far below the strongest carrier are numerical noise of the
# engine (float64 FFTs reach about -300 dBc), not products.
REPORT_FLOOR_DBC = -200.0


PRODUCT_COLUMNS = [
    "freq_hz",
    "level_dbm",
    "dbc",
    "order",
    "mix",
    "label",
    "also",
    "kind",
    "stage",
    "model_extrapolated",
    "not_converged",
    "beyond_data",
]


@dataclass(frozen=True)
class Result:
    """What :meth:`Lineup.run` computed.

    Attributes
    ----------
    lineup : Lineup
    mix : ndarray of int, (P, K)
    freqs_hz : ndarray, (B, P)
        Signed product frequencies.
    propagation : spurplan.engine.torus.Propagation
    tone_freqs_hz : ndarray, (B, K)
        Carrier frequencies of each batch element.
    """

    lineup: Lineup
    mix: np.ndarray
    freqs_hz: np.ndarray
    propagation: Propagation
    tone_freqs_hz: np.ndarray

    def node_index(self, stage: str | None) -> int:
        """Node number of a stage output (``None`` is the lineup output)."""
        if stage is None:
            return len(self.lineup.stages)
        return self.lineup.stage_index(stage)

    def source_names(self) -> list[str]:
        return ["input"] + [s.name for s in self.lineup.stages]

    def carrier_columns(self, node: int) -> list[int]:
        """Product index of each carrier at ``node`` (after mixers: the wanted products)."""
        return [product_index(self.mix, v) for v in self.lineup.carrier_vectors(node)]

    def carrier_freqs_hz(self, stage: str | None = None) -> np.ndarray:
        """Frequency (Hz) of each carrier at a node for every batch element; (B, K_c)."""
        vecs = self.lineup.carrier_vectors(self.node_index(stage)).astype(float)
        return np.abs(self.tone_freqs_hz @ vecs.T)

    def carrier_levels_dbm(self, stage: str | None = None, batch: int = 0) -> np.ndarray:
        """Modelled level (dBm) of each carrier at a node; shape (K_c,).

        Parameters
        ----------
        stage : str or None
            Stage whose output to read; ``None`` for the lineup output.
        batch : int
            Batch element (drive or tuning point).

        Returns
        -------
        ndarray, shape (K_c,)
            Level of each carrier (dBm), in the lineup's carrier order.
        """
        return self.carrier_levels_dbm_batch(stage)[batch]

    def carrier_levels_dbm_batch(self, stage: str | None = None) -> np.ndarray:
        """Modelled level (dBm) of each carrier at a node for every batch element; (B, K_c)."""
        node = self.node_index(stage)
        return vpeak_to_dbm(self.propagation.nodes[node][:, self.carrier_columns(node)], self.lineup.r_ohm)

    def slot_labels(self, levels, row: int = 0) -> list[str]:
        """Label of every slot of a :meth:`levels` row ("" for unused slots).

        Parameters
        ----------
        levels : NodeLevels
            What :meth:`levels` returned.
        row : int
            Row of ``levels`` (position within the batch rows it was made for).

        Returns
        -------
        list of str
        """
        plus, minus = labels(self.mix, self.lineup.tone_names)
        return [
            (plus[r] if s > 0 else minus[r]) if ok else ""
            for r, s, ok in zip(levels.rep[row], levels.sign[row], levels.valid[row], strict=True)
        ]

    def products(self, stage: str | None = None, combine: str | None = None, batch: int = 0):
        """Products at a node as a DataFrame (one row per physical frequency).

        Parameters
        ----------
        stage : str or None
            Stage whose output to report; ``None`` for the lineup output.
        combine : {"worst", "power", "phase"} or None
            ``None`` uses the lineup's analysis setting.
        batch : int
            Batch element (drive point) to report.

        Returns
        -------
        pandas.DataFrame
            Columns ``PRODUCT_COLUMNS``, sorted by frequency.
        """
        import pandas as pd

        return pd.DataFrame(self.product_rows(stage, combine, batch), columns=PRODUCT_COLUMNS)

    def levels(self, stage: str | None = None, combine: str | None = None, rows=slice(None)):
        """Merged, combined product levels of a node for the batch ``rows`` (arrays).

        See :class:`spurplan.engine.node_table.NodeLevels`.

        Parameters
        ----------
        stage : str or None
            Stage whose output to read; ``None`` for the lineup output.
        combine : {"worst", "power", "phase"} or None
            ``None`` uses the lineup's analysis setting.
        rows : slice or index array
            Batch elements to evaluate (default all).

        Returns
        -------
        NodeLevels
            Levels (dBm) and frequencies (Hz), ``(B, G)`` for the selected rows.
        """
        node = self.node_index(stage)
        return node_levels(
            self, node, combine or self.lineup.analysis.combine, rows, self.carrier_columns(node)
        )

    def product_rows(self, stage: str | None = None, combine: str | None = None, batch: int = 0):
        """The rows of :meth:`products` as a dict of columns (lists), without pandas.

        Parameters
        ----------
        stage : str or None
            Stage whose output to report; ``None`` for the lineup output.
        combine : {"worst", "power", "phase"} or None
            ``None`` uses the lineup's analysis setting.
        batch : int
            Batch element (drive or tuning point) to report.

        Returns
        -------
        dict of str to list
            Columns ``freq_hz`` (Hz), ``level_dbm`` (dBm), ``dbc`` (dB relative to the
            strongest carrier), ``order``, ``mix``, ``label``, ``also``, ``kind``, ``stage``
            and the flags, sorted by frequency; products below the report floor are left out.
        """
        node = self.node_index(stage)
        lv = self.levels(stage, combine, rows=slice(batch, batch + 1))
        prop = self.propagation
        ref = float(lv.carrier_ref_dbm[0])
        level_dbm = lv.level_dbm[0]
        keep = np.nonzero(lv.valid[0] & (level_dbm - ref > REPORT_FLOOR_DBC))[0]
        reps, signs = lv.rep[0, keep], lv.sign[0, keep]
        plus, minus = labels(self.mix, self.lineup.tone_names)
        order_of = orders(self.mix)
        group = lv.group[0]
        sources = self.source_names()
        extrap = bool(prop.extrapolated[:node, batch].any())
        not_conv = bool((~prop.converged[:node, batch]).any())
        f = self.freqs_hz[batch]

        def name(i: int | np.integer) -> str:
            return plus[i] if f[i] >= 0 else minus[i]

        def also(g: int | np.integer) -> str:
            members = [i for i in np.nonzero(group == g)[0] if i != lv.rep[0, g]]
            return " ".join(name(i) for i in sorted(members, key=lambda i: (order_of[i], i)))

        n = len(keep)
        return {
            "freq_hz": lv.freq_hz[0, keep].tolist(),
            "level_dbm": level_dbm[keep].tolist(),
            "dbc": (level_dbm[keep] - ref).tolist(),
            "order": order_of[reps].tolist(),
            "mix": (self.mix[reps] * signs[:, None]).tolist(),
            "label": [name(i) for i in reps],
            "also": [also(g) if lv.members[0, g] > 1 else "" for g in keep],
            "kind": ["carrier" if c else "product" for c in lv.is_carrier[0, keep]],
            "stage": [sources[i] for i in lv.top_source[0, keep]],
            "model_extrapolated": [extrap] * n,
            "not_converged": [not_conv] * n,
            "beyond_data": lv.beyond[0, keep].tolist(),
        }

    def _repr_html_(self) -> str:
        """Jupyter: the products at the lineup output, under the lineup's name."""
        # the one upward door: presentation, imported on use
        from spurplan.output.documents import products_html

        return products_html(self)

    def plot(self, stage: str | None = None):
        """The spectrum at a node as stems; returns a matplotlib Figure."""
        # the one upward door: presentation, imported on use
        from spurplan.output.plots import spectrum_figure

        return spectrum_figure(self, stage)

    @property
    def extrapolated_stages(self) -> list[str]:
        """Stages driven beyond where their polynomial holds (batch element 0)."""
        flags = self.propagation.extrapolated[:, 0]
        return [s.name for s, bad in zip(self.lineup.stages, flags, strict=True) if bad]

    @property
    def unconverged_stages(self) -> list[str]:
        flags = ~self.propagation.converged[:, 0]
        return [s.name for s, bad in zip(self.lineup.stages, flags, strict=True) if bad]

    def stage_response(self, stage: str, batch: int = 0, combine: str | None = None) -> dict[str, list]:
        """A linear stage's response at every product present at its input.

        The products at the stage's input are merged by frequency and their stage
        contributions combined as :meth:`levels` does (``combine``, default the lineup's
        ``[analysis] combine``), so ``level_in_dbm`` is the level the check would use at
        that node; carriers are as modelled.  Returns columns ``freq_hz``, ``label``,
        ``also``, ``order``, ``level_in_dbm``, ``s21_db``, ``s21_deg`` and
        ``beyond_data``, sorted by frequency; products more than 200 dB below the
        strongest one at the input are left out.

        Parameters
        ----------
        stage : str
            Name of the linear stage.
        batch : int
            Batch element (drive or tuning point).
        combine : {"worst", "power", "phase"} or None
            ``None`` uses the lineup's analysis setting.

        Returns
        -------
        dict of str to list
            Frequencies in Hz, input levels in dBm, ``s21_db`` in dB and ``s21_deg`` in
            degrees; ``also`` names the other products merged into a row.
        """
        i = self.node_index(stage)
        prop = self.propagation
        lv = node_levels(
            self,
            i - 1,
            combine or self.lineup.analysis.combine,
            slice(batch, batch + 1),
            self.carrier_columns(i - 1),
        )
        level = lv.level_dbm[0]
        strongest = level[lv.valid[0]].max()
        keep = np.nonzero(lv.valid[0] & (level - strongest > REPORT_FLOOR_DBC))[0]
        keep = keep[np.argsort(lv.freq_hz[0, keep], kind="stable")]
        reps, signs = lv.rep[0, keep], lv.sign[0, keep]
        # Every member of a row sits at one frequency, so the representative's response
        # is the row's; a product at negative m . f sees the conjugate (Hermitian S21).
        h = prop.response[i - 1, batch, reps]
        h = np.where(signs < 0, np.conj(h), h)
        group = lv.group[0]
        # The stage's own beyond-data flag, for any member of the row.
        beyond = np.bincount(group, weights=prop.beyond[i - 1, batch], minlength=group.size) > 0
        plus, minus = labels(self.mix, self.lineup.tone_names)
        order_of = orders(self.mix)
        f = self.freqs_hz[batch]

        def name(p: int | np.integer) -> str:
            return plus[p] if f[p] >= 0 else minus[p]

        def also(g: int | np.integer, rep: int | np.integer) -> str:
            members = [p for p in np.nonzero(group == g)[0] if p != rep]
            return " ".join(name(p) for p in sorted(members, key=lambda p: (order_of[p], p)))

        return {
            "freq_hz": lv.freq_hz[0, keep].tolist(),
            "label": [name(p) for p in reps],
            "also": [also(g, r) if lv.members[0, g] > 1 else "" for g, r in zip(keep, reps, strict=True)],
            "order": order_of[reps].tolist(),
            "level_in_dbm": level[keep].tolist(),
            "s21_db": ratio_db(h).tolist(),
            "s21_deg": np.degrees(np.angle(h)).tolist(),
            "beyond_data": beyond[keep].tolist(),
        }
