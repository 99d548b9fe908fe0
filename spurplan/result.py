"""Results of a lineup run: product tables at any node, with per-stage attribution.

Contributions of the stages to a product are combined in one of three ways
(design notes section 3):

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

import numpy as np

from .spectrum import label, labels, orders, tone_index
from .units import ratio_db, vpeak_to_dbm

# Rows more than this far below the strongest carrier are numerical noise of the
# engine (float64 FFTs reach about -300 dBc), not products.
REPORT_FLOOR_DBC = -200.0
# Frequencies closer than this (Hz) are one physical frequency.
SAME_FREQ_HZ = 1e-3

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
    propagation : spurplan.engine.Propagation
    """

    lineup: object
    mix: np.ndarray
    freqs_hz: np.ndarray
    propagation: object

    def node_index(self, stage: str | None) -> int:
        """Node number of a stage output (``None`` is the lineup output)."""
        if stage is None:
            return len(self.lineup.stages)
        return self.lineup.stage_index(stage)

    def source_names(self) -> list[str]:
        return ["input"] + [s.name for s in self.lineup.stages]

    def carrier_levels_dbm(self, stage: str | None = None, batch: int = 0) -> np.ndarray:
        """Modelled level (dBm) of each carrier at a node; shape (K,)."""
        node = self.node_index(stage)
        tones = tone_index(self.mix)
        cols = [int(np.nonzero(tones == k)[0][0]) for k in range(self.mix.shape[1])]
        x = self.propagation.nodes[node, batch, cols]
        return vpeak_to_dbm(x, self.lineup.r_ohm)

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

    def product_rows(self, stage: str | None = None, combine: str | None = None, batch: int = 0):
        """The rows of :meth:`products` as a dict of columns (lists), without pandas."""
        combine = combine or self.lineup.analysis.combine
        node = self.node_index(stage)
        prop = self.propagation
        f = self.freqs_hz[batch]
        # Physical phasors at +|f|: a product at negative m.f is the conjugate.
        contrib = prop.contributions(node)[:, batch, :]
        contrib = np.where(f < 0, np.conj(contrib), contrib)
        freq = np.abs(f)
        keys = np.round(freq / SAME_FREQ_HZ).astype(np.int64)
        uniq, group = np.unique(keys, return_inverse=True)
        n_groups = len(uniq)
        n_src = contrib.shape[0]

        coherent = np.zeros((n_src, n_groups), dtype=complex)
        np.add.at(coherent, (slice(None), group), contrib)
        modelled = np.abs(coherent.sum(axis=0))
        if combine == "phase":
            level = modelled
        elif combine == "worst":
            level = np.zeros(n_groups)
            np.add.at(level, group, np.abs(contrib).sum(axis=0))
        else:
            power = np.zeros(n_groups)
            np.add.at(power, group, (np.abs(contrib) ** 2).sum(axis=0))
            level = np.sqrt(power)

        tones = tone_index(self.mix)
        is_carrier = np.zeros(n_groups, dtype=bool)
        np.logical_or.at(is_carrier, group, tones >= 0)
        level = np.where(is_carrier, modelled, level)
        # Largest contributor: the input only counts for carriers.
        strength = np.abs(coherent)
        strength[0] = np.where(is_carrier, strength[0], -1.0)
        top_source = np.argmax(strength, axis=0)

        level_dbm = vpeak_to_dbm(level, self.lineup.r_ohm)
        # dBc against the strongest carrier row (what an analyser shows at the carrier,
        # including any product that lands on it).
        ref = float(np.max(level_dbm[is_carrier]))
        keep = np.nonzero((level > 0) & (level_dbm - ref > REPORT_FLOOR_DBC))[0]

        order_of = orders(self.mix)
        # Representative of each group: its lowest-order member.
        by_group = np.lexsort((np.arange(len(group)), order_of, group))
        rep = by_group[np.unique(group[by_group], return_index=True)[1]]
        plus, minus = labels(self.mix, self.lineup.tone_names)
        name_of = [plus[i] if f[i] >= 0 else minus[i] for i in range(len(f))]
        signed = np.where((f >= 0)[:, None], self.mix, -self.mix)
        sizes = np.bincount(group, minlength=n_groups)
        beyond = prop.beyond[:node, batch, :].any(axis=0)
        beyond_group = np.zeros(n_groups, dtype=bool)
        np.logical_or.at(beyond_group, group, beyond)
        sources = self.source_names()
        extrap = bool(prop.extrapolated[:node, batch].any())
        not_conv = bool((~prop.converged[:node, batch]).any())
        n = len(keep)
        reps = rep[keep]
        return {
            "freq_hz": freq[reps].tolist(),
            "level_dbm": level_dbm[keep].tolist(),
            "dbc": (level_dbm[keep] - ref).tolist(),
            "order": order_of[reps].tolist(),
            "mix": signed[reps].tolist(),
            "label": [name_of[i] for i in reps],
            "also": [self._also(g, group, by_group, name_of) if sizes[g] > 1 else "" for g in keep],
            "kind": ["carrier" if c else "product" for c in is_carrier[keep]],
            "stage": [sources[i] for i in top_source[keep]],
            "model_extrapolated": [extrap] * n,
            "not_converged": [not_conv] * n,
            "beyond_data": beyond_group[keep].tolist(),
        }

    @staticmethod
    def _also(g: int, group: np.ndarray, by_group: np.ndarray, name_of: list[str]) -> str:
        """Labels of the other products merged into group ``g`` (lowest order first)."""
        members = by_group[group[by_group] == g]
        return " ".join(name_of[i] for i in members[1:])

    @property
    def extrapolated_stages(self) -> list[str]:
        """Stages driven beyond where their polynomial holds (batch element 0)."""
        flags = self.propagation.extrapolated[:, 0]
        return [s.name for s, bad in zip(self.lineup.stages, flags, strict=True) if bad]

    @property
    def unconverged_stages(self) -> list[str]:
        flags = ~self.propagation.converged[:, 0]
        return [s.name for s, bad in zip(self.lineup.stages, flags, strict=True) if bad]

    def summary(self, stage: str | None = None, combine: str | None = None, batch: int = 0) -> dict:
        """Headline figures of a node: carriers, strongest product, flags, provenance."""
        from .provenance import provenance

        rows = self.product_rows(stage, combine, batch)
        products = [i for i, kind in enumerate(rows["kind"]) if kind == "product"]
        worst = max(products, key=lambda i: rows["level_dbm"][i]) if products else None
        return {
            "lineup": self.lineup.name,
            "node": stage or "output",
            "combine": combine or self.lineup.analysis.combine,
            "carrier_dbm": [float(v) for v in self.carrier_levels_dbm(stage, batch)],
            "n_products": len(products),
            "strongest": None
            if worst is None
            else {c: rows[c][worst] for c in ("label", "freq_hz", "level_dbm", "dbc", "stage")},
            "model_extrapolated": self.extrapolated_stages,
            "not_converged": self.unconverged_stages,
            "notes": list(self.lineup.notes),
            **provenance(self.lineup),
        }

    def stage_response(self, stage: str, batch: int = 0) -> dict[str, list]:
        """A linear stage's response at every product present at its input.

        Returns columns ``freq_hz``, ``label``, ``order``, ``level_in_dbm``, ``s21_db``,
        ``s21_deg`` and ``beyond_data``, sorted by frequency; products more than
        200 dB below the strongest one at the input are left out.
        """
        i = self.node_index(stage)
        prop = self.propagation
        x = prop.nodes[i - 1, batch]
        f = self.freqs_hz[batch]
        present = np.abs(x) > 10 ** (REPORT_FLOOR_DBC / 20) * np.abs(x).max()
        idx = np.nonzero(present)[0]
        idx = idx[np.argsort(np.abs(f[idx]), kind="stable")]
        h = prop.response[i - 1, batch]
        h = np.where(f < 0, np.conj(h), h)
        names = self.lineup.tone_names
        return {
            "freq_hz": [float(abs(f[p])) for p in idx],
            "label": [label(self.mix[p] * (1 if f[p] >= 0 else -1), names) for p in idx],
            "order": [int(orders(self.mix[p : p + 1])[0]) for p in idx],
            "level_in_dbm": [float(vpeak_to_dbm(x[p], self.lineup.r_ohm)) for p in idx],
            "s21_db": [float(ratio_db(h[p])) for p in idx],
            "s21_deg": [float(np.degrees(np.angle(h[p]))) for p in idx],
            "beyond_data": [bool(prop.beyond[i - 1, batch, p]) for p in idx],
        }
