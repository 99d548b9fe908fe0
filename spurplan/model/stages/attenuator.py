"""Attenuator (pad): a matched loss, flat in frequency or stated as a table against it.

``loss`` may be a table (``[["150 MHz", "3 dB"], ["174 MHz", "3.4 dB"]]``,
:mod:`spurplan.model.figure_tables`): the loss at the reference carrier, flat across
the products of one channel, moved per channel by tuning sweeps and yield.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from spurplan.fields import Fields, Within
from spurplan.model.figure_tables import FigureReader, StageTables
from spurplan.model.stages.base import DB, LoadContext, SampledStage, StageDefaults, flat_response
from spurplan.units import parse_gain_db

# A negative loss would be a gain (an amplifier stage); beyond 100 dB no pad exists
# (switched attenuators stop near 120 dB in steps of pads of at most tens of dB; common
# practice, no source), and 100 dB is also the ratio parser's ceiling.
LOSS = Within("an attenuator loss", 0.0, 100.0, "dB")


@dataclass(frozen=True)
class Attenuator(StageDefaults):
    """A matched pad of ``loss_db`` (dB, >= 0).

    Attributes
    ----------
    name : str
    loss_db : float
        Loss at the reference carrier (dB).
    figure_tables : StageTables or None
        A ``loss`` table against frequency, or ``None``.
    notes : tuple of str
    """

    name: str
    loss_db: float
    figure_tables: StageTables | None = None
    notes: tuple[str, ...] = ()

    kind = "attenuator"
    transfer = None
    data_range_hz = None

    def describe_figures(self) -> str:
        """The loss as stated (and, from a table, where it was read)."""
        if self.figure_tables:
            return f"loss {self.loss_db:g} dB (from its table against frequency)"
        return f"loss {self.loss_db:g} dB"

    def spread_figures(self) -> dict[str, str]:
        """The loss, in dB."""
        return {"loss": DB}

    def sampled(
        self, deltas: dict[str, np.ndarray], n: int, r_ohm: float, ref_hz: np.ndarray | None = None
    ) -> SampledStage:
        """The pad with every sample's loss.

        Parameters
        ----------
        deltas : dict of str -> ndarray (n,)
            ``loss`` shift per sample (dB).
        n : int
            Samples in the batch.
        r_ohm : float
            System impedance (ohm).
        ref_hz : ndarray (n,), optional
            Each element's reference carrier (Hz); unused (the loss is flat in a channel).

        Returns
        -------
        SampledStage
        """
        k = 10 ** (-deltas["loss"] / 20)
        return SampledStage(self.name, None, lambda f: self.response(f) * np.reshape(k, (-1, 1)))

    def channel_deltas(self, ref_hz: np.ndarray) -> dict[str, np.ndarray]:
        """The change of a tabled loss from the loaded one, per channel (dB).

        Parameters
        ----------
        ref_hz : ndarray (B,)
            The reference carrier at the stage input per channel (Hz).

        Returns
        -------
        dict of str -> ndarray (B,)
            ``{"loss": ...}``, or empty without a table.
        """
        if not self.figure_tables:
            return {}
        return {"loss": self.figure_tables.change("loss", ref_hz)}

    @property
    def gain_db(self) -> float:
        return -self.loss_db

    def response(self, freq_hz: np.ndarray) -> np.ndarray:
        return flat_response(-self.loss_db)(freq_hz)

    def s_matrix(self, freq_hz: np.ndarray) -> np.ndarray:
        """Matched pad: S11 = S22 = 0, S21 = S12 = 10^(-loss/20)."""
        s = np.zeros((*np.shape(freq_hz), 2, 2), dtype=complex)
        s[..., 0, 1] = s[..., 1, 0] = 10.0 ** (-self.loss_db / 20.0)
        return s

    @classmethod
    def from_fields(cls, fields: Fields, context: LoadContext) -> Attenuator:
        """The attenuator (pad) read from its lineup table.

        Parameters
        ----------
        fields : Fields
            Reader of the stage's lineup table, which locates its errors.
        context : LoadContext
            Lineup-wide settings: system impedance (ohm), the lineup file's folder, the policy
            beyond data ranges, the reference carrier's frequency (Hz).

        Returns
        -------
        Attenuator

        Raises
        ------
        LineupError
            Naming the file, stage and field of a missing or unacceptable value.
        """
        reader = FigureReader(fields, context.ref_freq_hz, context.beyond_data, ("loss",), {"loss": 0.0})
        if isinstance(fields.table.get("loss"), list):
            loss = reader.quantity("loss", parse_gain_db, within=LOSS)
            return cls(
                name=fields.raw("name"),
                loss_db=loss,
                figure_tables=reader.stage_tables(),
                notes=reader.notes(),
            )
        loss = fields.quantity("loss", parse_gain_db, required=True)
        if loss < 0:
            raise fields.error(
                "loss",
                f"{fields.raw('loss')!r}: expected a loss >= 0 dB (a negative loss is a gain: use an amplifier stage)",
            )
        fields.require_within("loss", loss, LOSS)
        return cls(name=fields.raw("name"), loss_db=loss)
