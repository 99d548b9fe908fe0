"""The sentences that state a result's verdict, written once for every front end.

The results carry the verdict data (a drive sweep's status, highest compliant drive
and limiting product; a tuning sweep's failing ranges; a check's status and worst
row); the words are here.  Where the terminal and the design-review report say it
differently (a line in capitals to scan for, a sentence in a paragraph), both forms
are side by side.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

if TYPE_CHECKING:  # annotations only
    from spurplan.analyses.bench_compare import BenchComparison, TraceMaskCheck
    from spurplan.analyses.check import CheckResult
    from spurplan.analyses.frequency_plan import IfPlan
    from spurplan.analyses.montecarlo import YieldResult
    from spurplan.analyses.remedy import Remedy
    from spurplan.analyses.spur_chart import SpurChart
    from spurplan.analyses.sweep import DriveSweep, TuneSweep

STYLES = ("terminal", "report")


def _in_band(band) -> str:
    return f" (in {band})" if band else ""


def model_caveat(lineup, channels: bool = True) -> str:
    """What a sweep's or yield's headline must add when the model lacks or misses figures.

    A drive or tuning range, or a yield, computed from a model without a stated figure is
    no compliance claim (the project's rule: a missing or doubtful number never reads as
    a pass): the headline says INCOMPLETE or UNCERTAIN and what is missing, as the check's
    verdict does.

    Parameters
    ----------
    lineup : Lineup
        The lineup the result was computed from.
    channels : bool, optional
        Whether the result visits other channels (tune, yield over channels): then the
        per-channel model's misses at the figure tables' frequencies count too.  A drive
        sweep runs at the lineup's own channel, on the stage fitted there.

    Returns
    -------
    str
        ``"; INCOMPLETE: not modelled: ..."``, ``"; UNCERTAIN: model misses: ..."``, or
        ``""`` when the model has every figure and meets it.
    """
    from spurplan.analyses.check import model_gaps

    missing, missed = lineup.missing_figures(), lineup.figures_missed()
    if not channels:
        missed = tuple((name, c) for name, c in missed if c.freq_hz is None)
    modulated = [f"f{k + 1}" for k, c in enumerate(lineup.carriers) if c.modulation is not None]
    if not missing and not missed and not modulated:
        return ""
    word = "INCOMPLETE" if missing or modulated else "UNCERTAIN"
    gaps = [model_gaps(missing, missed)] if missing or missed else []
    if modulated:
        # Sweeps and yield run the carriers as CW tones: a modulated carrier's regrowth and
        # its wider, stronger zones are the check's alone.
        gaps.append(
            f"modulated carrier{'s' * (len(modulated) > 1)} {', '.join(modulated)} swept as CW (check judges the spectrum)"
        )
    return f"; {word}: {'; '.join(gaps)}"


# Sweeps and yield judge the discrete products; the output noise and adjacent-channel
# power only check judges.
PRODUCTS_ONLY = " (products only: check judges the noise and ACPR)"


def unsettled_caveat(count: int, total: int, what: str) -> str:
    """``"; UNCERTAIN: levels not settled at N of M points"`` (empty for none).

    Parameters
    ----------
    count, total : int
        Points whose levels did not settle, and points in all.
    what : str
        What the points are ("drive points", "channels").

    Returns
    -------
    str
    """
    if not count:
        return ""
    return (
        f"; UNCERTAIN: levels not settled at {count} of {total} {what} (the model needs more products "
        "or a finer grid than spurplan allows there: a lower max_order or drive)"
    )


def drive_verdict(sweep: DriveSweep, style: str = "terminal") -> str:
    """The highest compliant drive of a sweep, and the product and rule that set it.

    Parameters
    ----------
    sweep : DriveSweep
        What :func:`spurplan.analyses.sweep.drive_sweep` found (drive in dBm).
    style : {"terminal", "report"}
        The terminal's ``HIGHEST COMPLIANT DRIVE:`` line, or the report's sentence.

    Returns
    -------
    str
        One line, without a line break.
    """
    if style not in STYLES:
        raise ValueError(f"style {style!r}: expected one of {', '.join(STYLES)}")
    report = style == "report"
    if sweep.status == "limited":
        lim = sweep.limiting
        # drive_sweep() sets limiting with the edge it bisects to whenever it says "limited".
        assert lim is not None
        above = f"above it {lim['label']} at {lim['freq_hz'] / 1e6:.6f} MHz fails {lim['rule']}"
        if report:
            return (
                f"Highest compliant drive: {sweep.max_compliant_input_dbm:+.2f} dBm in, "
                f"{sweep.max_compliant_output_dbm:+.2f} dBm out; {above}."
            )
        return (
            f"HIGHEST COMPLIANT DRIVE: input {sweep.max_compliant_input_dbm:+.2f} dBm, output "
            f"{sweep.max_compliant_output_dbm:+.2f} dBm; {above}"
            + _in_band(lim["band"])
            + PRODUCTS_ONLY
            + model_caveat(sweep.lineup, channels=False)
            + unsettled_caveat(sweep.unsettled_signed, len(sweep.input_dbm), "drive points")
        )
    if sweep.status == "fails throughout":
        if report:
            return "The mask is violated at every drive of the sweep."
        return "HIGHEST COMPLIANT DRIVE: none in the range (the mask is violated at every drive)"
    if sweep.status == "fails at the lowest drive":
        if report:
            return (
                "The mask is violated at the lowest drive of the sweep; some higher drives pass, which "
                "is no compliant range to sign."
            )
        return (
            "HIGHEST COMPLIANT DRIVE: none from the bottom of the range (the mask is violated at the "
            f"lowest drive, {sweep.input_dbm[0]:+.2f} dBm in; some higher drives pass, which is no compliant "
            "range to sign)"
        )
    if report:
        return (
            f"The mask is met over the whole sweep, up to its top: {sweep.max_compliant_input_dbm:+.2f} dBm in, "
            f"{sweep.max_compliant_output_dbm:+.2f} dBm out; nothing within the sweep limits the drive."
        )
    return (
        "HIGHEST COMPLIANT DRIVE: the mask is met over the whole range "
        f"(up to {sweep.max_compliant_input_dbm:+.2f} dBm in)"
        + PRODUCTS_ONLY
        + model_caveat(sweep.lineup, channels=False)
        + unsettled_caveat(sweep.unsettled_signed, len(sweep.input_dbm), "drive points")
    )


def check_verdict(outcome: CheckResult) -> str:
    """The terminal's ``VERDICT:`` line: the check's verdict and how many products fail.

    Parameters
    ----------
    outcome : CheckResult
        What :func:`spurplan.analyses.check.check` found.

    Returns
    -------
    str
        One line, without a line break.
    """
    tail = (
        f"; {outcome.n_failing} of {outcome.n_checked} checked products fail"
        if outcome.worst is not None
        else ""
    )
    return f"VERDICT: {outcome.verdict}{tail}"


def tune_verdict(sweep: TuneSweep, style: str = "terminal") -> list[str]:
    """The line on a tuning sweep: every channel passes, or how many fail and where worst.

    Parameters
    ----------
    sweep : TuneSweep
        What :func:`spurplan.analyses.sweep.tune_sweep` found (channels in Hz).
    style : {"terminal", "report"}
        The terminal's ``TUNING RANGE:`` line, or the report's sentence (whose section
        states the caveats on their own).

    Returns
    -------
    list of str
        One line: how many channels fail and the worst product, with the swept value
        (carrier, or the LO with a mixer) where it is worst (MHz, dB); or that every
        channel meets the mask.  The ranges are in :func:`tune_entry_line`.
    """
    if style not in STYLES:
        raise ValueError(f"style {style!r}: expected one of {', '.join(STYLES)}")
    unsettled = 0 if sweep.unsettled is None else int(sweep.unsettled.sum())
    if style == "report":
        if not sweep.failing:
            return ["Every channel meets the mask" + _least_margin_words(sweep) + "."]
        worst = sweep.summary[0]
        n_bad = int(sum(1 for w in sweep.worst_margin_db if w < 0))
        return [
            f"The mask is violated on {n_bad} of {len(sweep.carrier_hz)} channels; worst {worst['label']}, "
            f"{worst['worst_margin_db']:+.2f} dB with the {sweep.variable} at "
            f"{worst['worst_channel_hz'] / 1e6:.6f} MHz."
        ]
    if not sweep.failing:
        return [
            "TUNING RANGE: every channel meets the mask"
            + _least_margin_words(sweep)
            + PRODUCTS_ONLY
            + model_caveat(sweep.lineup)
            + unsettled_caveat(unsettled, len(sweep.carrier_hz), "channels")
        ]
    worst = sweep.summary[0]
    n_bad = int(sum(1 for w in sweep.worst_margin_db if w < 0))
    return [
        f"TUNING RANGE: FAILS on {n_bad} of {len(sweep.carrier_hz)} channels; worst {worst['label']} "
        f"{worst['worst_margin_db']:+.2f} dB with the {sweep.variable} at {worst['worst_channel_hz'] / 1e6:.6f} MHz"
        + PRODUCTS_ONLY
    ]


def _least_margin_words(sweep: TuneSweep) -> str:
    """``"; least margin +12.30 dB (3f1 at 1350.000 MHz) with the carrier at 450.000000 MHz"``."""
    least = sweep.least_margin
    if least is None:
        return ""
    return (
        f"; least margin {least['margin_db']:+.2f} dB ({least['label']} at {least['freq_hz'] / 1e6:.3f} MHz) "
        f"with the {sweep.variable} at {least['channel_hz'] / 1e6:.6f} MHz"
    )


# At most this many stretches of channels are spelled out in one summary line.
SHOWN_STRETCHES = 4


def _stretches(spans: list[tuple[float, float, int]], variable: str) -> str:
    """``"with the LO from 121.000000 to 124.300000 MHz and from ..."`` (Hz in, MHz out)."""
    words = []
    for a, b, _n in spans[:SHOWN_STRETCHES]:
        words.append(f"at {a / 1e6:.6f} MHz" if a == b else f"from {a / 1e6:.6f} to {b / 1e6:.6f} MHz")
    more = len(spans) - SHOWN_STRETCHES
    tail = f" and {more} more stretch{'es' * (more > 1)}" if more > 0 else ""
    return f"with the {variable} " + " and ".join(words) + tail


def tune_entry_line(entry: dict, variable: str) -> str:
    """One line of a tuning sweep's summary: a product, what judges it, where it fails or
    lands in a band, and its worst channel and margin.

    Parameters
    ----------
    entry : dict
        One entry of :func:`spurplan.analyses.tune_summary.tune_summary` (Hz, dB).
    variable : str
        What was swept (``"carrier"``, or ``"LO"`` with a mixer).

    Returns
    -------
    str
        One line, without a line break (MHz, dB): ``"FAILS with the LO from ... to ... MHz"``
        for failing stretches (edges refined where the sweep refined them), ``"lands there
        with the carrier from ... to ... MHz"`` for the channels in a protected band.
    """
    band, rule = entry["band"], entry["rule"]
    # Said once: a band's own limit is named by the band, another rule by its label.
    where = f"in {band}" if entry["rule_is_band"] else f"under {rule}" + (f" (in {band})" if band else "")
    parts = []
    n, n_bad = entry["channels"], entry["failing_channels"]
    if n_bad:
        spans = [(r["start_hz"], r["stop_hz"], r["channels"]) for r in entry["failing_ranges"]]
        parts.append(f"FAILS {_stretches(spans, variable)} ({n_bad} channel{'s' * (n_bad != 1)})")
    if band is not None and (not n_bad or n_bad < n):
        spans = [(r["first_hz"], r["last_hz"], r["channels"]) for r in entry["runs"]]
        parts.append(f"lands there {_stretches(spans, variable)} ({n} channel{'s' * (n != 1)})")
    verdict = "FAIL" if n_bad else "pass"
    worst = entry["worst_margin_db"]
    tail = (
        "no rule judges it"
        if worst is None
        else (
            f"worst {worst:+.2f} dB with the {variable} at {entry['worst_channel_hz'] / 1e6:.6f} MHz "
            f"(product at {entry['worst_freq_hz'] / 1e6:.6f} MHz)"
        )
    )
    return f"{verdict}  {entry['label']} {where}: {'; '.join(parts)}; {tail}"


def recheck_verdict(found: Remedy) -> str:
    """The terminal's line on the lineup re-checked with the remedy's filter.

    Parameters
    ----------
    found : Remedy
        What :func:`spurplan.analyses.remedy.remedy` found; it must hold a filter.

    Returns
    -------
    str
        The check's status (PASS, FAIL, INCOMPLETE or UNCERTAIN), the worst margin (dB)
        and product, the carrier at the output (dBm) with and without the filter, and what
        the check did not judge or know.
    """
    out = found.outcome
    assert out is not None  # the caller shows a re-check only when a filter was found
    # The check's own status: a re-check whose model lacks or misses figures, or leaves
    # products unjudged, is INCOMPLETE or UNCERTAIN, never PASS; what it does not know follows.
    word = out.status
    gaps = out.verdict.partition("; ")[2] if word in ("INCOMPLETE", "UNCERTAIN") else ""
    rows, i = out.rows, out.worst
    return (
        f"RE-CHECKED WITH THE FILTER: {word}, worst margin {out.worst_margin_db:+.2f} dB ({rows['label'][i]} at "
        f"{rows['freq_hz'][i] / 1e6:.6f} MHz); carrier at the output {out.carrier_dbm:+.2f} dBm "
        f"(was {found.before.carrier_dbm:+.2f} dBm)" + (f"; {gaps}" if gaps else "")
    )


def _case(item: dict) -> str:
    """``"[mode] "`` before a sentence about one of several cases (empty for a lineup's only one)."""
    return f"[{item['case']}] " if item.get("case") else ""


def _mhz(hz: float) -> str:
    return f"{hz / 1e6:.6g} MHz"


def _at_channel(item: dict) -> str:
    ch = item.get("channel_hz")
    return "" if ch is None else f", {item.get('swept', 'carrier')} at {_mhz(ch)}"


def advice_sentence(item: dict, lineup=None) -> str:
    """One thing that would help where no filter at the chosen place does, as a sentence.

    Parameters
    ----------
    item : dict
        An entry of :attr:`spurplan.analyses.remedy.Remedy.advice`: ``kind``
        "regenerated" (a later stage makes the product again), "plan" (the product lies
        in the passband every channel needs), "intercept" (the stage that makes it, and by
        how many dB its intercept must rise) or "backoff" (the drive that meets the
        target on every channel); levels in dBm, frequencies in Hz.
    lineup : Lineup, optional
        The lineup the item is about.

    Returns
    -------
    str
        One sentence without its full stop.  With ``lineup`` (the case's), a back-off
        that meets the mask says what the model does not know (:func:`model_caveat`).
    """
    kind, pre = item["kind"], _case(item)
    if kind == "regenerated":
        where = f"after '{item['at']}'" if item.get("at") else "at the lineup input"
        text = (
            f"{pre}the stage '{item['stage']}' after this point regenerates {item['label']} at "
            f"{item['level_dbm']:+.2f} dBm (limit {item['limit_dbm']:+.2f} dBm{_at_channel(item)}) even with a "
            f"perfect filter {where}"
        )
        if item["moved_helps"]:
            return text + f"; put the filter after '{item['move_after']}'"
        return text + (
            f"; even a perfect filter after '{item['move_after']}' leaves a worst margin of "
            f"{item['moved_worst_margin_db']:+.2f} dB"
        )
    if kind == "plan":
        return (
            f"{pre}{item['label']} at {_mhz(item['freq_hz'])} ({item['level_dbm']:+.2f} dBm, limit "
            f"{item['limit_dbm']:+.2f} dBm{_at_channel(item)}) lies inside the passband any filter here keeps "
            f"for the carriers ({_mhz(item['carriers_low_hz'])} to {_mhz(item['carriers_high_hz'])} over every "
            f"channel; passband {_mhz(item['pass_low_hz'])} to {_mhz(item['pass_high_hz'])}), so no filter here "
            "removes it: change the frequency plan (carrier spacing or tuning range; with a mixer, the LO side: "
            "see spurplan spurs)"
        )
    if kind == "intercept":
        n, rise, need = item["order"], item["intercept_rise_db"], item["need_db"]
        slope = f"it falls {n - 1} dB per dB of intercept at the same output"
        if item["harmonic"]:
            figure = (
                f"an order-{n} harmonic intercept {rise:.1f} dB higher (h{n} {need:.1f} dB lower, in dBc at the "
                "same output)"
            )
        else:
            figure = f"an order-{n} intercept (OIP{n}) {rise:.1f} dB higher"
        return (
            f"{pre}'{item['stage']}', which makes {item['label']} ({_mhz(item['freq_hz'])}{_at_channel(item)}), "
            f"would meet the target with {figure} ({slope})"
        )
    if kind == "backoff":
        target = item["margin_target_db"]
        if item.get("input_dbm") is None:
            return (
                f"{pre}no drive within {item['range_db']:g} dB below the written "
                f"{item['written_input_dbm']:+.2f} dBm meets the mask with {target:g} dB margin on every channel"
            )
        return (
            f"{pre}backing the drive off by {-item['offset_db']:.2f} dB, to {item['input_dbm']:+.2f} dBm at the "
            f"input of the strongest carrier ({item['output_dbm']:+.2f} dBm out), meets the mask with "
            f"{target:g} dB margin on every channel ({item['channels']} channel{'s' * (item['channels'] > 1)} "
            f"re-checked by tune, worst margin {item['worst_margin_db']:+.2f} dB)"
            + ("" if lineup is None else PRODUCTS_ONLY + model_caveat(lineup))
            + unsettled_caveat(item.get("unsettled_channels", 0), item["channels"], "channels")
        )
    raise ValueError(f"advice kind {kind!r}: expected regenerated, plan, intercept or backoff")


def remedy_reason(found: Remedy) -> str:
    """Why the remedy proposes no filter: its own reason, or the first thing no filter fixes.

    Parameters
    ----------
    found : Remedy
        What :func:`spurplan.analyses.remedy.remedy` found.

    Returns
    -------
    str
        One sentence without its full stop ("" when a filter was found).
    """
    if found.reason or found.found:
        return found.reason
    first = next((a for a in found.advice if a["kind"] in ("regenerated", "plan")), None)
    if first is not None:
        return advice_sentence(first)
    return "no filter at this place meets the target"


def remedy_advice(found: Remedy) -> list[str]:
    """The sentences of what would help, less the one :func:`remedy_reason` already says.

    Parameters
    ----------
    found : Remedy

    Returns
    -------
    list of str
    """
    said = remedy_reason(found)
    lineups = {c.name: c.lineup for c in found.cases}
    return [
        s for s in (advice_sentence(a, lineups.get(a.get("case", ""))) for a in found.advice) if s != said
    ]


def channels_recheck_verdict(found: Remedy) -> list[str]:
    """The terminal's lines on the filter re-checked on every channel of every case (by tune).

    Parameters
    ----------
    found : Remedy
        What :func:`spurplan.analyses.remedy.remedy` found; it must hold a filter.

    Returns
    -------
    list of str
        One line per case: PASS or FAIL, how many channels from which to which (MHz), the
        worst margin (dB), its product and channel.
    """
    import numpy as np

    lines = []
    for case, sweep in zip(found.cases, found.recheck, strict=True):
        b = int(np.argmin(sweep.worst_margin_db))
        worst = float(sweep.worst_margin_db[b])
        g = int(np.nanargmin(np.where(np.isnan(sweep.margin_db[b]), np.inf, sweep.margin_db[b])))
        ch = sweep.carrier_hz
        unsettled = 0 if sweep.unsettled is None else int(sweep.unsettled.sum())
        caveat = model_caveat(case.lineup) + unsettled_caveat(unsettled, len(ch), "channels")
        # Meeting the target from a model that lacks or misses figures is no PASS.
        word = "FAIL" if worst < found.margin_target_db else "PASS"
        if word == "PASS" and caveat:
            word = "INCOMPLETE" if "INCOMPLETE" in caveat else "UNCERTAIN"
        span = f"{sweep.variable} {_mhz(ch.min())}" + (f" to {_mhz(ch.max())}" if len(ch) > 1 else "")
        pre = f"[{case.name}] " if case.name else ""
        lines.append(
            f"{pre}RE-CHECKED ON EVERY CHANNEL (tune, the lineup with the filter pasted): {word}, {len(ch)} "
            f"channel{'s' * (len(ch) > 1)}, {span}; worst margin {worst:+.2f} dB ({sweep.labels[b][g]} at "
            f"{_mhz(sweep.freq_hz[b, g])}, {sweep.variable} at {_mhz(ch[b])})" + PRODUCTS_ONLY + caveat
        )
    return lines


def yield_verdict(res: YieldResult) -> str:
    """The terminal's ``YIELD:`` line: the fraction that passes and its 95 % Wilson interval.

    Parameters
    ----------
    res : YieldResult
        What :func:`spurplan.analyses.montecarlo.run_yield` found.

    Returns
    -------
    str
        One line, in per cent.
    """
    lo, hi = res.interval
    return (
        f"YIELD: {100 * res.yield_fraction:.3f} % ({res.passed} of {res.samples} pass); "
        f"95 % Wilson interval {100 * lo:.3f} - {100 * hi:.3f} %"
        + PRODUCTS_ONLY
        + model_caveat(res.lineup, channels=bool(res.by_channel))
        + unsettled_caveat(res.unsettled_passing, res.samples, "samples (counted as passing)")
    )


def passband_verdict(chart: SpurChart) -> str:
    """The terminal's ``IN THE PASSBAND:`` line: the products the next filter passes.

    Parameters
    ----------
    chart : SpurChart
        What :func:`spurplan.analyses.spur_chart.spur_chart` found.

    Returns
    -------
    str
        One line.
    """
    hits = chart.in_passband
    return "IN THE PASSBAND: " + (", ".join(hits) if hits else "no product besides the wanted one")


# --- several operating modes (spurplan.model.modes) ----------------------------------------------

_STATUS_WORDS = {"FAIL": "fail", "INCOMPLETE": "are incomplete", "UNCERTAIN": "are uncertain"}


def modes_verdict(title: str, entries) -> str:
    """The terminal's line over every mode run: the worst mode's status, and which modes hold it.

    Parameters
    ----------
    title : str
        What is judged, in capitals: ``"VERDICT"``, ``"TUNING RANGE"``, ``"DRIVE"``,
        ``"REMEDY"``.
    entries : sequence of (str, str)
        Each mode's label (:attr:`spurplan.model.modes.Mode.label`) and status (PASS,
        UNCERTAIN, INCOMPLETE, FAIL), in file order.

    Returns
    -------
    str
        ``"VERDICT OVER ALL 2 MODES: FAIL (1 of 2 modes fail: mode 'UHF band')"``; one line.
    """
    from spurplan.model.modes import worst_status

    n = len(entries)
    status = worst_status(s for _, s in entries)
    head = f"{title} OVER ALL {n} MODES: {status}"
    if status == "PASS":
        return f"{head} (every mode passes)"
    which = [label for label, s in entries if s == status]
    lead = "" if status == "FAIL" else "no mode fails; "
    return f"{head} ({lead}{len(which)} of {n} modes {_STATUS_WORDS[status]}: {', '.join(which)})"


def mode_line(label: str, line: str) -> str:
    """One mode's verdict under the line over all modes: ``"  mode 'UHF band': VERDICT: FAIL ..."``.

    Parameters
    ----------
    label : str
        The mode's label (:attr:`spurplan.model.modes.Mode.label`).
    line : str
        Its own verdict in one line.

    Returns
    -------
    str
    """
    return f"  {label}: {line}"


def tune_mode_line(sweep: TuneSweep, status: str) -> str:
    """A tuning sweep's verdict in one line (for the list under the line over all modes).

    Parameters
    ----------
    sweep : TuneSweep
        What :func:`spurplan.analyses.sweep.tune_sweep` found.
    status : str
        Its standing (:func:`spurplan.analyses.modes.tune_status`).

    Returns
    -------
    str
        The failing ranges counted with the worst margin (dB), or :func:`tune_verdict`'s
        line.
    """
    if not sweep.failing:
        return f"{status}: " + tune_verdict(sweep)[0]
    worst = min(r["worst_margin_db"] for r in sweep.failing)
    n = len(sweep.failing)
    return (
        f"FAIL: {n} failing channel range{'s' * (n > 1)} (product and rule), worst margin {worst:+.2f} dB"
        f"; first from {sweep.failing[0]['start_hz'] / 1e6:.6f} to {sweep.failing[0]['stop_hz'] / 1e6:.6f} MHz"
    )


def drive_mode_line(standing) -> str:
    """A mode's own drive against its compliant range, in one line.

    Parameters
    ----------
    standing : spurplan.analyses.modes.DriveStanding
        What :func:`spurplan.analyses.modes.drive_standing` found (dBm, dB).

    Returns
    -------
    str
        The status, the mode's drive (its strongest carrier's input power) and how far it
        is from the highest compliant drive.
    """
    s = standing
    drive = f"its drive {s.drive_dbm:+.2f} dBm in"
    if s.reason == "no compliant drive":
        return f"FAIL: {drive}; no compliant drive from the bottom of the sweep"
    if s.reason == "above":
        return f"FAIL: {drive} is {-s.headroom_db:.2f} dB above its highest compliant drive {s.limit_dbm:+.2f} dBm"
    if s.reason == "outside the sweep":
        return f"{s.status}: {drive} lies outside the sweep (not computed there)"
    within = f"{drive} is {s.headroom_db:.2f} dB below its highest compliant drive {s.limit_dbm:+.2f} dBm"
    if s.reason == "model":
        return f"{s.status}: {within}, by a model that lacks or misses a figure, or did not settle"
    return f"PASS: {within}"


def yield_modes_verdict(labels, results) -> str:
    """The terminal's line over every mode's yield: the units passing in every mode where the
    modes drew the same units (:func:`spurplan.analyses.modes.joint_yield`), else the lowest
    mode's yield, an upper bound of the design's.

    Parameters
    ----------
    labels : sequence of str
        Each mode's label, in the order of ``results``.
    results : sequence of YieldResult
        One per mode.

    Returns
    -------
    str
        ``"YIELD OVER ALL 2 MODES: at most 93.100 % ..."``; one line, in per cent.
    """
    from spurplan.analyses.modes import joint_yield, lowest_yield
    from spurplan.analyses.montecarlo import wilson_interval

    # What any mode's model does not know qualifies the line over all of them too.
    doubts = [
        f"{label}{caveat}"
        for label, r in zip(labels, results, strict=True)
        if (
            caveat := model_caveat(r.lineup, channels=bool(r.by_channel))
            + unsettled_caveat(r.unsettled_passing, r.samples, "samples (counted as passing)")
        )
    ]
    tail = PRODUCTS_ONLY + ("; " + " / ".join(doubts) if doubts else "")
    joint = joint_yield(results)
    if joint is not None:
        passed, n = joint
        lo, hi = wilson_interval(passed, n)
        return (
            f"YIELD OVER ALL {len(results)} MODES: {100 * passed / n:.3f} % ({passed} of {n} simulated units pass "
            f"in every mode: the same units in each); 95 % Wilson interval {100 * lo:.3f} - {100 * hi:.3f} %"
            + tail
        )
    k = lowest_yield(results)
    return (
        f"YIELD OVER ALL {len(results)} MODES: at most {100 * results[k].yield_fraction:.3f} % "
        f"({labels[k]}, the lowest: a unit must pass in every mode, and each mode's samples are "
        "other units, so the yield over all modes is not computed)" + tail
    )


def if_plan_verdict(plan: IfPlan) -> list[str]:
    """The terminal's ``SPUR-FREE IF:`` lines of an IF plan and where the lineup's own IF lies.

    Parameters
    ----------
    plan : IfPlan
        What :func:`spurplan.analyses.frequency_plan.plan_if` found.

    Returns
    -------
    list of str
        The verdict line, the line on the lineup's IF and the line on what is not judged.
    """
    bands = "the output passband" + (" or a protected band" if plan.protected_bands else "")
    judged = f"no product |m LO + n IF| to order {plan.order} (but the wanted one) in {bands}"
    if not plan.found:
        lines = [
            f"NO SPUR-FREE IF: at every IF candidate a product |m LO + n IF| to order {plan.order} lands in "
            f"{bands} on some channel (or crosses one before the next candidate)"
        ]
    else:
        w = plan.windows[0]
        c = w.closest
        lines = [
            f"SPUR-FREE IF: {plan.window_count} window(s) with {judged} on any channel; the best "
            f"({'widest' if plan.rank == 'width' else 'largest clearance'}) is {w.start_hz / 1e6:.6f} to "
            f"{w.stop_hz / 1e6:.6f} MHz, where IF {w.best_if_hz / 1e6:.6f} MHz keeps the closest product, "
            f"{c.label} at {c.freq_hz / 1e6:.6f} MHz, {c.distance_hz / 1e6:.6f} MHz {c.side} {c.band}"
        ]
    where = (
        f"lies in window {plan.lineup_if_rank}"
        if plan.lineup_if_rank is not None
        else "lies in no spur-free window"
    )
    lines.append(f"The lineup's IF {plan.lineup_if_hz / 1e6:.6f} MHz {where}.")
    lines.append(
        "Frequencies only: levels, amplifier products and products above the order are not judged; "
        "check the lineup at the chosen IF."
    )
    return lines


def trace_mask_verdict(mask: TraceMaskCheck, style: str = "terminal") -> str:
    """The line on a measured trace judged against the mask.

    Parameters
    ----------
    mask : TraceMaskCheck
        What :func:`spurplan.analyses.bench_compare.check_trace` found (Hz, dBm, dB).
    style : {"terminal", "report"}
        The terminal's ``TRACE AGAINST MASK:`` line, or the report's sentence.

    Returns
    -------
    str
        One line: the status, the rule and point of least margin, and what the trace
        does not vouch for (rules beyond its span, unjudged points, doubtful passes).
    """
    worst = mask.worst
    if worst is None:
        core = "no rule covers a point of the trace"
    else:
        rbw = "no RBW" if worst.rbw_hz is None else f"{worst.rbw_hz / 1e3:.6g} kHz"
        core = (
            f"least margin {worst.margin_db:+.2f} dB at {worst.freq_hz / 1e6:.6f} MHz under {worst.rule} "
            f"({worst.level_dbm:+.2f} dBm in {rbw} against {worst.limit_dbm:+.2f} dBm)"
        )
        failing = [r for r in mask.rules if r.status == "FAIL"]
        if failing:
            core += f"; {len(failing)} of {len(mask.rules)} rules fail on the trace"
    gaps = []
    if mask.uncovered:
        gaps.append("beyond the trace's span: " + "; ".join(mask.uncovered))
    if mask.unjudged_points:
        gaps.append(f"{mask.unjudged_points} points in the out-of-band domain no rule judges")
    doubts = sorted({r.reason for r in mask.rules if r.reason})
    if doubts:
        gaps.append("; ".join(doubts))
    text = f"{mask.status}, {core}" + (f"; {'; '.join(gaps)}" if gaps else "")
    if style == "report":
        return f"Against the mask the measured trace is {text}."
    return f"TRACE AGAINST MASK: {text}"


def bench_verdict(comparison: BenchComparison, style: str = "terminal") -> str:
    """The line on a trace compared with the plan: what was seen, the largest difference.

    Parameters
    ----------
    comparison : BenchComparison
        What :func:`spurplan.analyses.bench_compare.compare` found (dB).
    style : {"terminal", "report"}
        The terminal's ``BENCH AGAINST PLAN:`` line, or the report's sentence.

    Returns
    -------
    str
        One line, without a line break.
    """
    seen = len(comparison.matches)
    expected = seen + len(comparison.not_seen)
    parts = [f"{seen} of {expected} predicted products and carriers above the floor seen"]
    top = comparison.largest_difference
    if top is not None:
        parts.append(
            f"largest difference {top.difference_db:+.2f} dB at {top.prediction.label} "
            f"({top.prediction.freq_hz / 1e6:.6f} MHz, largest from {top.prediction.stage})"
        )
    missing = [n for n in comparison.not_seen if n.detectable]
    if missing:
        parts.append(
            f"{len(missing)} predicted at least {comparison.threshold_db:g} dB above the floor not seen"
        )
    if comparison.unmatched:
        strongest = max(comparison.unmatched, key=lambda k: k.level_dbm)
        parts.append(
            f"{len(comparison.unmatched)} "
            + ("peaks match" if len(comparison.unmatched) > 1 else "peak matches")
            + " no product "
            f"(strongest {strongest.level_dbm:+.2f} dBm at {strongest.freq_hz / 1e6:.6f} MHz)"
        )
    text = "; ".join(parts)
    if style == "report":
        return f"Against the plan: {text}."
    return f"BENCH AGAINST PLAN: {text}"
