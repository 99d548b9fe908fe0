"""What ``spurplan fit`` prints: the fitted figures, the ``[[stage]]`` table to paste, the
residuals, and the JSON document.

The numbers are :class:`~spurplan.analyses.figure_fit.FigureFit`'s; here they are only laid
out.  A poorly determined figure is never printed as a value to paste: in the table it is
commented out with the reason, and the verdict line names it.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

from spurplan.analyses.figure_fit import MAX_SIGMA_DB, FigureFit, FittedFigure, format_db, stated_value
from spurplan.notices import PLANNING_NOTICE, power_notice
from spurplan.output.documents import Document
from spurplan.output.formatting import text_table
from spurplan.output.provenance import provenance

if TYPE_CHECKING:  # annotations only
    from spurplan.io.lineup_edit import EditedLineup


def _toml_string(text: str) -> str:
    """A TOML basic string of ``text`` (quotes and backslashes escaped)."""
    escaped = text.replace("\\", "\\\\").replace('"', '\\"')
    escaped = "".join(c if c >= " " else f"\\u{ord(c):04x}" for c in escaped)
    return f'"{escaped}"'


def _figure_text(f: FittedFigure) -> str:
    if f.name.startswith("h"):
        return f"{f.value:.2f} dBc @ {f.at_dbm:+.2f} dBm"
    return format_db(f.value, f.unit)


def _held_lines(fit: FigureFit) -> list[str]:
    lines = []
    figures = fit.amplifier.figures
    for key, value in fit.held.items():
        if key in ("oip3", "oip2"):
            # As the model holds it: an input-referred form moves with a fitted gain.
            out_dbm = getattr(figures, f"{key}_dbm")
            for form in fit.forms.get(key, (key,)):
                v = out_dbm if form.startswith("o") else out_dbm - figures.gain_db
                lines.append(f"{form} = {_toml_string(format_db(v, 'dBm'))}  # held at the lineup's value")
        elif key.startswith("h"):
            dbc, at = value
            lines.append(
                f"{key} = {_toml_string(f'{dbc:.2f} dBc @ {at:+.2f} dBm')}  # held at the lineup's value"
            )
        elif key == "gain":
            lines.append(f"gain = {_toml_string(format_db(value, 'dB'))}  # held at the lineup's value")
        else:
            lines.append(f"{key} = {_toml_string(format_db(value, 'dBm'))}  # held at the lineup's value")
    return lines


def fit_snippet(fit: FigureFit) -> str:
    """The ``[[stage]]`` table of the fitted figures, to paste (uncertainties as comments).

    Parameters
    ----------
    fit : FigureFit
        What :func:`spurplan.analyses.figure_fit.fit_figures` found.

    Returns
    -------
    str
        TOML text: kind, name, each determined figure with its one-sigma uncertainty,
        each poorly determined one commented out with the reason, the held figures.
    """
    lines = ["[[stage]]", 'kind = "amplifier"', f"name = {_toml_string(fit.stage)}"]
    keys = fit.key_values() if fit.converged else {}
    gain = fit.amplifier.figures.gain_db
    for f in fit.figures:
        if f.determined and fit.converged:
            names = [k for k in keys if k == f.name or (f.name in ("oip3", "oip2") and k[1:] == f.name[1:])]
            for k in names:
                value = keys[k]
                if value is None:
                    continue
                lines.append(f"{k} = {_toml_string(value)}  # +-{f.sigma_db:.2f} dB (1 sigma), fitted")
        else:
            why = f.why_poorly_determined if fit.converged else "the fit did not converge"
            text = _figure_text(f)
            lines.append(
                f"# {f.name} = {_toml_string(text)}  # POORLY DETERMINED, not to be used as known: {why}"
            )
    lines += _held_lines(fit)
    if "gain" not in {f.name for f in fit.figures} and "gain" not in fit.held:
        lines.append(
            f"# gain = ?  # not measured (no pin_dbm drive with pout_dbm): the model used {gain:.2f} dB; state it"
        )
    if fit.amplifier.noise_figure_db is not None:
        lines.append(
            f"noise_figure = {_toml_string(format_db(fit.amplifier.noise_figure_db, 'dB'))}  # the lineup's"
        )
    return "\n".join(lines) + "\n"


def verdict_line(fit: FigureFit) -> str:
    """One line: FITTED, POORLY DETERMINED (which figures) or NOT CONVERGED, with the rms.

    Parameters
    ----------
    fit : FigureFit
        The fit.

    Returns
    -------
    str
    """
    worst = fit.worst
    spread = f"rms residual {fit.rms_db:.3f} dB over {len(fit.readings)} readings"
    if worst is not None:
        spread += f", worst {worst.residual_db:+.3f} dB ({worst.file}:{worst.line}, {worst.column})"
    if fit.status == "NOT CONVERGED":
        return f"NOT CONVERGED: {fit.message} ({spread}); no figure is given as known"
    doubtful = fit.poorly_determined
    if doubtful:
        names = ", ".join(f.name for f in doubtful)
        return (
            f"POORLY DETERMINED: {names} (uncertainty above {MAX_SIGMA_DB:g} dB or not constrained by the sweeps), "
            f"not given as known; the other figures are fitted ({spread})"
        )
    return f"FITTED: every figure determined within {MAX_SIGMA_DB:g} dB (1 sigma) ({spread})"


FIGURE_TABLE = [
    ("figure", "figure", None),
    ("fitted", "fitted", None),
    ("sigma", "+-1 sigma (dB)", None),
    ("influence", "influence (dB/dB)", ".3f"),
    ("closed_form", "closed form", None),
    ("start", "start", None),
    ("status", "status", None),
]


def _figure_rows(fit: FigureFit) -> dict[str, list]:
    rows: dict[str, list] = {c: [] for c, _, _ in FIGURE_TABLE}
    for f in fit.figures:
        rows["figure"].append(f.name)
        rows["fitted"].append(_figure_text(f))
        rows["sigma"].append(
            "unbounded"
            if f.sigma_db == float("inf")
            else f"{f.sigma_db:.3f}"
            if f.sigma_db < 100
            else "> 100"
        )
        rows["influence"].append(f.influence_db)
        if f.closed_form is None:
            rows["closed_form"].append("-")
        else:
            value = f.closed_form
            shown = format_db(value, f.unit) if not f.name.startswith("h") else f"{value:.2f} dBc"
            how = "read off the gain" if f.name == "p1db" else f"{f.closed_form_points} pts"
            rows["closed_form"].append(f"{shown} ({how})")
        rows["start"].append(
            format_db(f.start, f.unit) if not f.name.startswith("h") else f"{f.start:.2f} dBc"
        )
        rows["status"].append("determined" if f.determined and fit.converged else "POORLY DETERMINED")
    return rows


def residual_rows(fit: FigureFit) -> dict[str, list]:
    """Every reading beside the model: file, line, drive, column, measured, model, residual.

    Parameters
    ----------
    fit : FigureFit
        The fit.

    Returns
    -------
    dict of str -> list
    """
    cols = ("file", "line", "drive_dbm", "column", "measured", "model", "residual_db")
    rows: dict[str, list] = {c: [] for c in cols}
    for r in fit.readings:
        for c, v in zip(
            cols, (r.file, r.line, r.drive_dbm, r.column, r.measured, r.model, r.residual_db), strict=True
        ):
            rows[c].append(v)
    return rows


RESIDUAL_TABLE = [
    ("file", "file", None),
    ("line", "line", None),
    ("drive_dbm", "drive (dBm)", ".2f"),
    ("column", "column", None),
    ("measured", "measured", ".3f"),
    ("model", "model", ".3f"),
    ("residual_db", "model - measured (dB)", "+.3f"),
]


def _highest_output_dbm(fit: FigureFit) -> float:
    """The highest fundamental output (dBm) of the sweeps, measured or modelled."""
    levels = [r.measured for r in fit.readings if r.column == "pout_dbm"]
    levels += [r.model for r in fit.readings if r.column == "pout_dbm"]
    levels += [float(s.drive_dbm[-1]) for s in fit.sweeps if s.drive == "pout_dbm"]
    return max(levels, default=float("-inf"))


def fit_text(fit: FigureFit, written: EditedLineup | None = None, path=None) -> str:
    """``spurplan fit --format table``: heading, figures, the table to paste, residuals, verdict.

    Parameters
    ----------
    fit : FigureFit
        The fit.
    written : EditedLineup, optional
        What ``--write`` wrote.
    path : str or path-like, optional
        The file it was written to.

    Returns
    -------
    str
    """
    sweeps = ", ".join(s.path for s in fit.sweeps)
    out = [
        f"Figures of stage {fit.stage!r} fitted to {len(fit.sweeps)} bench sweep(s): {sweeps}",
        f"Model: the engine's amplifier built from the figures (one-stage lineup per sweep), "
        f"least squares in dB, {fit.evaluations} models evaluated",
        "",
        text_table(_figure_rows(fit), FIGURE_TABLE).rstrip("\n"),
        "",
        "Closed forms: small-signal slopes at low drive (OIP3 = Pout + dIM3/2, OHIPn = (n Pout - P_Hn)/(n - 1));",
        "P1dB read off the measured gain. Uncertainty: s^2 (J^T J)^-1, one standard deviation.",
        "",
        "# fitted from bench sweeps (planning estimate)",
        fit_snippet(fit).rstrip("\n"),
        "",
        "Residuals:",
        text_table(residual_rows(fit), RESIDUAL_TABLE).rstrip("\n"),
        "",
    ]
    out += [f"note: {n}" for n in fit.notes]
    if written is not None:
        out.append(f"Written: {path} (the stage's figure keys replaced; the file re-read and checked)")
        out += [f"  data path rewritten: {old} -> {new}" for old, new in written.moved]
    out += [verdict_line(fit), PLANNING_NOTICE]
    high = power_notice(_highest_output_dbm(fit))
    if high:
        out.append(high.replace("This transmitter delivers", "The stage delivered"))
    return "\n".join(out) + "\n"


def fit_document(fit: FigureFit, lineup=None) -> Document:
    """The JSON document of a fit: summary (status, figures, table to paste) and readings.

    Parameters
    ----------
    fit : FigureFit
        The fit.
    lineup : Lineup, optional
        The lineup the fit was made with (its provenance is recorded).

    Returns
    -------
    Document
        Summary: stage, status, converged, message, rms, figures (value, unit, sigma_db,
        influence_db, determined, why, closed form, start, at_dbm), held figures, notes,
        the snippet, the keys ``--write`` sets, the notice; rows under ``"readings"``.
    """
    summary = {
        "stage": fit.stage,
        "status": fit.status,
        "verdict": verdict_line(fit),
        "converged": fit.converged,
        "message": fit.message,
        "evaluations": fit.evaluations,
        "rms_db": fit.rms_db,
        "sweeps": [s.path for s in fit.sweeps],
        "figures": [
            {
                "name": f.name,
                "value": f.value,
                "unit": f.unit,
                "at_dbm": f.at_dbm,
                "sigma_db": f.sigma_db if f.sigma_db != float("inf") else None,
                "influence_db_per_db": f.influence_db,
                "determined": f.determined and fit.converged,
                "why_poorly_determined": f.why_poorly_determined,
                "closed_form": f.closed_form,
                "closed_form_points": f.closed_form_points,
                "start": f.start,
            }
            for f in fit.figures
        ],
        "held": {k: list(v) if isinstance(v, tuple) else v for k, v in fit.held.items()},
        "keys": fit.key_values() if fit.status == "FITTED" else {},
        "snippet": fit_snippet(fit),
        "notes": list(fit.notes),
        "notice": PLANNING_NOTICE,
        "power_notice": power_notice(_highest_output_dbm(fit)) or None,
        **(provenance(lineup) if lineup is not None else {}),
    }
    return Document(summary, "readings", residual_rows(fit))


BESIDE_TABLE = [
    ("figure", "figure", None),
    ("stated", "stated in the lineup", None),
    ("fitted", "fitted from the bench", None),
    ("sigma", "+-1 sigma (dB)", None),
    ("difference_db", "fitted - stated (dB)", "+.2f"),
    ("status", "status", None),
]


def beside_stated_rows(fit: FigureFit, lineup) -> dict[str, list]:
    """Each fitted figure beside the one the lineup states for the stage (the report's table).

    Parameters
    ----------
    fit : FigureFit
        What :func:`spurplan.analyses.figure_fit.fit_figures` found.
    lineup : Lineup
        The lineup whose stage the fit is of.

    Returns
    -------
    dict of str -> list
        Columns of :data:`BESIDE_TABLE` (dB, dBm, dBc; a stated ``hN`` carried to the
        fitted point, :func:`spurplan.analyses.figure_fit.stated_value`); "not stated" where
        the lineup gives no such figure, the difference ``None`` there.
    """
    stage = next((s for s in lineup.stages if s.name == fit.stage), None)
    base = getattr(stage, "figures", None)
    rows: dict[str, list] = {c: [] for c, _, _ in BESIDE_TABLE}
    for f in fit.figures:
        at = {} if f.at_dbm is None else {int(f.name[1:]): f.at_dbm}
        stated = stated_value(base, f.name, at)
        unit = "dBc" if f.name.startswith("h") else f.unit
        rows["figure"].append(f.name + (f" at {f.at_dbm:+.2f} dBm out" if f.at_dbm is not None else ""))
        rows["stated"].append("not stated" if stated is None else format_db(stated, unit))
        rows["fitted"].append(format_db(f.value, unit))
        rows["sigma"].append("unbounded" if not math.isfinite(f.sigma_db) else f"{f.sigma_db:.2f}")
        rows["difference_db"].append(None if stated is None else f.value - stated)
        rows["status"].append(
            "determined"
            if f.determined and fit.converged
            else f"POORLY DETERMINED: {f.why_poorly_determined}"
        )
    return rows
