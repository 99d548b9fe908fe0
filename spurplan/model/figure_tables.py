"""Stage figures stated against frequency: tables read at the boundary, interpolated in dB.

A figure key of a stage may hold a table of ``[frequency, value]`` rows instead of one
value (README, "Lineup files")::

    gain = [["150 MHz", "24 dB"], ["174 MHz", "22.5 dB"]]
    oip3 = [["150 MHz", "+45 dBm"], ["174 MHz", "+43 dBm"]]
    h2 = [["150 MHz", "-30 dBc @ +44 dBm"], ["174 MHz", "-26 dBc @ +44 dBm"]]

What a figure means: the stage's figure with its reference carrier (the strongest
carrier, moved by every mixer before the stage: ``LoadContext.ref_freq_hz``,
``Lineup.stage_reference_hz``) at that frequency at the stage's input.  Between rows the
value is interpolated linearly in its own logarithmic unit (dB, dBm, or the dBc of a
harmonic at its one stated output power) against frequency, as datasheet curves are
read (common practice, no source); ``numpy.interp`` does it, so a value between two rows
never leaves the interval of their values.

Outside the table's range the lineup's ``[analysis] beyond_data`` policy applies, with
the meaning it has for data files (:data:`spurplan.model.ladders.BEYOND_POLICIES`):
``"error"`` (the default) refuses a reference carrier outside the table with a located
one-line error (at load for the lineup's own channel, before any work for a sweep's or
a yield's channels); ``"hold"`` keeps the edge value; ``"no_rejection"`` assumes that
the stage rejects nothing there: a loss is 0 dB, and a figure that is no rejection
(a gain, an intercept, a harmonic) keeps its edge value.

The loaded stage is built, and fitted, from the figures at the lineup's own channel, so
``check`` and ``drive`` use those values with the whole fit.  A channel of a tuning
sweep or a yield uses the figures at its own reference carrier: each stage is the
stage's per-sample model (``stage.sampled``, the Monte Carlo machinery) with the
figures moved by ``table(f_channel) - table(f_nominal)`` (:func:`channel_stages`).  What
that model does not refit (an amplifier's P1dB, ``amplifier.sampled_model``) is measured
at every table frequency against the stated figure at load, and shown as figure checks
and notes (``Amplifier.checks``).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from spurplan.errors import LineupError, UnitError
from spurplan.fields import Fields, Within
from spurplan.units import format_freq, parse_freq_hz

# A datasheet gives its figures at a handful of frequencies; 64 rows is far beyond any,
# and keeps the load-time measurement of the per-channel model (a few ms per row and
# amplifier) bounded.
MAX_TABLE_ROWS = 64
# Table frequencies: the carrier frequency range (a radio frequency, not DC).
TABLE_FREQ = Within("a table frequency", 1e3, 1e12, "Hz", "a radio frequency, not DC")
# A channel whose reference carrier lies this close (relative) to the one the loaded
# stage was built at uses the loaded stage itself: the same frequency computed by
# another sum of the same tones differs in the last bits only.
SAME_FREQ_RTOL = 1e-12


@dataclass(frozen=True)
class FigureTable:
    """One figure against the reference carrier's frequency at the stage input.

    Attributes
    ----------
    key : str
        The lineup key (``"gain"``, ``"oip3"``, ``"h2"``, ``"loss"`` ...).
    freq_hz : tuple of float
        Strictly increasing frequencies (Hz).
    value : tuple of float
        The figure at each frequency, in the parser's unit (dB, dBm, dBc).
    beyond : str
        The policy outside the table (:data:`spurplan.model.ladders.BEYOND_POLICIES`).
    at_dbm : float or None
        For a harmonic figure (``hN``), the one output power (dBm) of every row.
    no_rejection_value : float or None
        The value assumed outside the table under ``"no_rejection"`` (0 dB for a loss);
        ``None`` holds the edge value (a figure that is no rejection).
    """

    key: str
    freq_hz: tuple[float, ...]
    value: tuple[float, ...]
    beyond: str = "error"
    at_dbm: float | None = None
    no_rejection_value: float | None = None

    @property
    def data_range_hz(self) -> tuple[float, float]:
        """``(first, last)`` table frequency (Hz)."""
        return self.freq_hz[0], self.freq_hz[-1]

    def covers(self, freq_hz) -> np.ndarray:
        """Whether each of ``freq_hz`` (Hz, any shape) lies within the table's range (ends included)."""
        f = np.asarray(freq_hz, dtype=float)
        lo, hi = self.data_range_hz
        return (f >= lo) & (f <= hi)

    def __call__(self, freq_hz) -> np.ndarray:
        """The figure at ``freq_hz`` (Hz, any shape): linear in its unit against frequency.

        Outside the range: the edge value (``"hold"``, and ``"error"``, whose refusal is
        the caller's, before), or :attr:`no_rejection_value` under ``"no_rejection"``.
        """
        f = np.asarray(freq_hz, dtype=float)
        out = np.interp(f, np.asarray(self.freq_hz), np.asarray(self.value))
        if self.beyond == "no_rejection" and self.no_rejection_value is not None:
            out = np.where(self.covers(f), out, self.no_rejection_value)
        return out

    def describe_range(self) -> str:
        """``"150 MHz to 174 MHz"`` (or the one frequency of a one-row table)."""
        lo, hi = self.data_range_hz
        return format_freq(lo) if lo == hi else f"{format_freq(lo)} to {format_freq(hi)}"


@dataclass(frozen=True)
class StageTables:
    """The figure tables of one stage and the frequency its loaded model was built at.

    Attributes
    ----------
    ref_freq_hz : float
        The reference carrier at the stage input where the loaded stage's figures were
        read (Hz).
    tables : tuple of FigureTable
        One per tabled key.
    input_referred : tuple of str
        Output-referred figures the file states input-referred (``"oip3"`` for ``iip3``):
        they move with the gain as well.
    """

    ref_freq_hz: float
    tables: tuple[FigureTable, ...]
    input_referred: tuple[str, ...] = ()

    def __bool__(self) -> bool:
        return bool(self.tables)

    def __contains__(self, key: str) -> bool:
        return any(t.key == key for t in self.tables)

    def table(self, key: str) -> FigureTable | None:
        """The table of ``key``, or ``None``."""
        return next((t for t in self.tables if t.key == key), None)

    def frequencies_hz(self) -> np.ndarray:
        """Every table frequency of the stage (Hz), sorted, without repeats."""
        return np.unique(np.concatenate([np.asarray(t.freq_hz) for t in self.tables]))

    def change(self, key: str, ref_hz) -> np.ndarray:
        """``table(ref_hz) - table(ref_freq_hz)`` (dB) for ``key``; zeros where untabled.

        A reference within :data:`SAME_FREQ_RTOL` of :attr:`ref_freq_hz` gives exactly 0,
        so the lineup's own channel uses its loaded stage.

        Parameters
        ----------
        key : str
            The lineup key.
        ref_hz : ndarray (B,)
            The reference carrier at the stage input per batch element (Hz).

        Returns
        -------
        ndarray (B,)
            The change of the figure (dB).
        """
        ref = np.asarray(ref_hz, dtype=float)
        t = self.table(key)
        if t is None:
            return np.zeros(ref.shape)
        same = np.abs(ref - self.ref_freq_hz) <= SAME_FREQ_RTOL * self.ref_freq_hz
        return np.where(same, 0.0, t(ref) - t(np.array(self.ref_freq_hz)))


def _parts(value) -> tuple[float, tuple]:
    """A parsed value as (the interpolated part, the parts that must be the same in every row)."""
    if isinstance(value, tuple):
        return float(value[0]), tuple(value[1:])
    return float(value), ()


def read_table(
    fields: Fields,
    key: str,
    rows: Any,
    parse,
    within: Within | tuple[Within | None, ...] | None,
    beyond: str,
    no_rejection_value: float | None = None,
) -> FigureTable:
    """A figure table of one key, validated row by row (located one-line errors).

    Parameters
    ----------
    fields : Fields
        Reader of the stage's table, which locates the errors (file, stage, field).
    key : str
        The key that holds the table.
    rows : list
        The TOML array: ``[[frequency, value], ...]``.
    parse : callable
        The key's own unit parser (:mod:`spurplan.units`).
    within : Within or tuple of (Within or None) or None
        The key's plausible range (one per element for a parser that returns a tuple,
        as ``parse_dbc_at`` does).
    beyond : str
        The lineup's policy outside the table.
    no_rejection_value : float, optional
        The value outside the table under ``"no_rejection"`` (a loss: 0 dB).

    Returns
    -------
    FigureTable

    Raises
    ------
    LineupError
        An empty table, more than :data:`MAX_TABLE_ROWS` rows, a row that is not a
        ``[frequency, value]`` pair, a frequency or value that does not parse or is
        implausible, frequencies not increasing or repeated, or (``hN``) rows at
        different output powers.
    """
    if not rows:
        raise fields.error(
            key,
            '[]: expected a table of [frequency, value] rows such as [["150 MHz", ...], ...] (at least one row)',
        )
    if len(rows) > MAX_TABLE_ROWS:
        raise fields.error(
            key, f"{len(rows)} rows: expected at most {MAX_TABLE_ROWS} [frequency, value] rows"
        )
    freqs: list[float] = []
    values: list[float] = []
    fixed: tuple | None = None
    for i, row in enumerate(rows, start=1):
        where = f"row {i} {_shown(row)}"
        if not isinstance(row, list) or len(row) != 2:
            raise fields.error(key, f'{where}: expected a [frequency, value] pair such as ["150 MHz", ...]')
        try:
            f_hz = parse_freq_hz(row[0])
        except UnitError as exc:
            raise fields.error(key, f"{where}: {exc}") from None
        if f_hz not in TABLE_FREQ:
            raise fields.error(key, f"{where}: {row[0]!r}: {TABLE_FREQ.expected()}")
        try:
            parsed = parse(row[1])
        except UnitError as exc:
            raise fields.error(key, f"{where}: {exc}") from None
        ranges = within if isinstance(within, tuple) else (within,)
        for part, rng in zip(parsed if isinstance(parsed, tuple) else (parsed,), ranges, strict=True):
            if rng is not None and part not in rng:
                raise fields.error(key, f"{where}: {row[1]!r}: {rng.expected()}")
        value, rest = _parts(parsed)
        if fixed is not None and rest != fixed:
            raise fields.error(
                key,
                f"{where}: {row[1]!r}: expected the output power of row 1 in every row (the level is "
                "interpolated in dBc at one stated output power)",
            )
        fixed = rest
        if freqs and f_hz == freqs[-1]:
            raise fields.error(
                key, f"{where}: {row[0]!r} repeats row {i - 1}'s frequency: expected distinct frequencies"
            )
        if freqs and f_hz < freqs[-1]:
            raise fields.error(
                key, f"{where}: {row[0]!r} is below row {i - 1}'s frequency: expected increasing frequencies"
            )
        freqs.append(f_hz)
        values.append(value)
    at = float(fixed[0]) if fixed else None
    return FigureTable(key, tuple(freqs), tuple(values), beyond, at, no_rejection_value)


def _shown(row) -> str:
    text = repr(row)
    return text if len(text) <= 120 else text[:117] + "..."


class FigureReader:
    """A stage table's reader whose figure keys may be tables against frequency.

    :meth:`quantity` reads a key as :meth:`spurplan.fields.Fields.quantity` does, or, when
    the key holds an array, as a :class:`FigureTable` whose value at the reference
    carrier (``ref_freq_hz``) it returns; the tables read are in :attr:`tables`.  Every
    other member is the wrapped :class:`~spurplan.fields.Fields`' own.

    Parameters
    ----------
    fields : Fields
        Reader of the stage's lineup table.
    ref_freq_hz : float
        The reference carrier at the stage input (Hz): where the returned values hold.
    beyond : str
        The lineup's policy outside a table's range.
    tabled : tuple of str
        The keys that may hold a table; any other key is read as one value.
    no_rejection : dict of str -> float, optional
        Per key, the value assumed outside the table under ``"no_rejection"``.
    """

    def __init__(
        self,
        fields: Fields,
        ref_freq_hz: float,
        beyond: str,
        tabled: tuple[str, ...],
        no_rejection: dict[str, float] | None = None,
    ):
        self.fields = fields
        self.ref_freq_hz = ref_freq_hz
        self.beyond = beyond
        self.tabled = tabled
        self.no_rejection = no_rejection or {}
        self.tables: dict[str, FigureTable] = {}

    def __getattr__(self, name):
        return getattr(self.fields, name)

    def quantity(self, key: str, parse, *, required: bool = False, within=None):
        """The value of ``key`` at the reference carrier: one value, or its table read there.

        Parameters
        ----------
        key : str
            The key to read.
        parse : callable
            The key's unit parser (:mod:`spurplan.units`).
        required : bool, optional
            Raise a located error when the key is absent.
        within : Within or tuple of (Within or None), optional
            The key's plausible range.

        Returns
        -------
        object or None
            What ``parse`` returns (a table: its value at the reference carrier, with the
            fixed parts of a row, e.g. ``(dBc, at dBm)``), or ``None`` when absent.

        Raises
        ------
        LineupError
            A malformed table, or (policy ``"error"``) a reference carrier outside it.
        """
        raw = self.fields.table.get(key)
        if key not in self.tabled or not isinstance(raw, list):
            return self.fields.quantity(key, parse, required=required, within=within)
        self.fields.raw(key)
        table = read_table(self.fields, key, raw, parse, within, self.beyond, self.no_rejection.get(key))
        self.tables[key] = table
        ref = self.ref_freq_hz
        if self.beyond == "error" and not table.covers(ref):
            raise self.fields.error(
                key,
                f"the table covers {table.describe_range()}, and the reference carrier at this stage's input "
                f"is at {format_freq(ref)}: expected a table that includes it, or [analysis] beyond_data = "
                '"hold" to hold the edge values',
            )
        value = float(table(ref))
        return (value, table.at_dbm) if table.at_dbm is not None else value

    def stage_tables(self, input_referred: tuple[str, ...] = ()) -> StageTables | None:
        """The tables read, as :class:`StageTables` (``None`` when no key held one).

        Parameters
        ----------
        input_referred : tuple of str
            Output-referred figures that the file states input-referred.

        Returns
        -------
        StageTables or None
        """
        if not self.tables:
            return None
        return StageTables(self.ref_freq_hz, tuple(self.tables.values()), input_referred)

    def notes(self) -> tuple[str, ...]:
        """One note on the stage's tables: keys, ranges and what the policy does beyond them."""
        if not self.tables:
            return ()
        if self.beyond == "error":
            what = 'outside a table a channel is refused (beyond_data = "error")'
        else:
            what = f'outside a table the edge value is held (beyond_data = "{self.beyond}")'
            if self.beyond == "no_rejection" and any(k in self.no_rejection for k in self.tables):
                what += ", a loss is 0 dB"
        ranges: dict[str, list[str]] = {}
        for key, t in self.tables.items():
            ranges.setdefault(t.describe_range(), []).append(key)
        listed = "; ".join(f"{', '.join(keys)} over {span}" for span, keys in ranges.items())
        return (f"figures against frequency (at the reference carrier at the stage input): {listed}; {what}",)


def tabled_stages(stages) -> list[int]:
    """Indices of the stages with figure tables (``stage.figure_tables``)."""
    return [i for i, s in enumerate(stages) if getattr(s, "figure_tables", None)]


def refuse_beyond(lineup, ref_hz: np.ndarray) -> None:
    """Under ``beyond_data = "error"``, refuse a reference carrier outside a stage's table.

    Parameters
    ----------
    lineup : Lineup
        The lineup (its file and stages name the error).
    ref_hz : ndarray (S, B)
        The reference carrier at each stage's input per channel (Hz),
        :meth:`~spurplan.model.lineup.Lineup.stage_reference_hz`.

    Raises
    ------
    LineupError
        Naming the file, the stage, the key, the table's range and the first channel's
        reference carrier outside it.
    """
    if lineup.analysis.beyond_data != "error":
        return
    for i in tabled_stages(lineup.stages):
        stage = lineup.stages[i]
        for t in stage.figure_tables.tables:
            outside = ~t.covers(ref_hz[i])
            if outside.any():
                f = float(ref_hz[i][np.argmax(outside)])
                raise LineupError(
                    f"the table covers {t.describe_range()}, and a channel puts the reference carrier at this "
                    f"stage's input at {format_freq(f)}: expected channels within the table, or [analysis] "
                    'beyond_data = "hold" to hold the edge values',
                    file=None if lineup.source is None else str(lineup.source),
                    stage=f"stage {i + 1} {stage.name!r}",
                    field=t.key,
                )


def channel_stages(lineup, tones_hz: np.ndarray, stages) -> list | None:
    """The stages with each batch element's figures at its own channel, or ``None``.

    Parameters
    ----------
    lineup : Lineup
        The lineup; its stages with figure tables move.
    tones_hz : ndarray (B, K)
        Base-tone frequencies per batch element (Hz).
    stages : sequence of stage
        The stages the engine would propagate (the lineup's, or their linear-section
        views); a tabled stage is replaced by its per-channel model.

    Returns
    -------
    list or None
        The stages, ``None`` when no figure changes in the batch (the lineup's own
        channel, a drive sweep): the loaded stages then run as they are.

    Raises
    ------
    LineupError
        Under ``beyond_data = "error"``, a channel outside a stage's table.
    """
    tabled = tabled_stages(lineup.stages)
    if not tabled:
        return None
    ref = lineup.stage_reference_hz(tones_hz)
    refuse_beyond(lineup, ref)
    out = list(stages)
    moved = False
    for i in tabled:
        stage = lineup.stages[i]
        deltas = stage.channel_deltas(ref[i])
        if not any(np.any(d != 0.0) for d in deltas.values()):
            continue
        out[i] = stage.sampled(deltas, len(tones_hz), lineup.r_ohm, ref_hz=ref[i])
        moved = True
    return out if moved else None
