"""The spectrum of a modulated lineup at a node, as rows: every line, and its clusters.

``spurplan spectrum`` of a lineup with a modulated carrier lists the lines of the
multisine spectrum (:func:`spurplan.engine.spectra.line_spectrum`) with their power
spectral density and, beside it, the output noise density at the same frequency (the
other continuous part); the terminal shows one line per cluster (a harmonic zone, the
regrowth on one side of a carrier, an intermodulation band).
"""

from __future__ import annotations

import numpy as np

from spurplan.engine.spectra import LineSpectrum, line_spectrum
from spurplan.model.products import label

LINE_COLUMNS = ["freq_hz", "level_dbm", "psd_dbm_hz", "noise_dbm_hz", "kind", "label", "stage"]
CLUSTER_COLUMNS = ["label", "start_hz", "stop_hz", "level_dbm", "peak_psd_dbm_hz", "stage"]


def node_spectrum(lineup, stage: str | None = None, combine: str | None = None):
    """The line spectrum at a node and the lineup's CW run (for carriers and names).

    Parameters
    ----------
    lineup : Lineup
        With at least one modulated carrier.
    stage : str or None
        Stage whose output to read; ``None`` for the lineup output.
    combine : str or None
        Combining mode of stage contributions within a realization.

    Returns
    -------
    (LineSpectrum, Result)
    """
    return line_spectrum(lineup, stage, combine), lineup.run()


def line_rows(spec: LineSpectrum, lineup, result, stage: str | None = None) -> dict[str, list]:
    """Every line: frequency (Hz), power (dBm), density (dBm/Hz), the output noise density
    there (dBm/Hz, None where a stage lacks a noise figure), kind, product and stage.

    Parameters
    ----------
    spec : LineSpectrum
    lineup : Lineup
    result : Result
        The lineup's CW run (stage names).
    stage : str or None
        The node (the noise is read at the lineup output only).

    Returns
    -------
    dict of str to list
        :data:`LINE_COLUMNS`.
    """
    from spurplan.engine.noise import output_noise_dbm_hz, unknown_noise_stages

    noise = None
    if stage is None and not unknown_noise_stages(lineup):
        noise = output_noise_dbm_hz(lineup, np.maximum(spec.freq_hz, 1.0), result.tone_freqs_hz[0])
    sources = result.source_names()
    names = lineup.tone_names
    return {
        "freq_hz": spec.freq_hz.tolist(),
        "level_dbm": spec.power_dbm.tolist(),
        "psd_dbm_hz": spec.psd_dbm_hz.tolist(),
        "noise_dbm_hz": [None] * len(spec.freq_hz) if noise is None else np.asarray(noise).tolist(),
        "kind": ["carrier" if c else "product" for c in spec.is_carrier],
        "label": [name if name != "DC" else "difference band" for name in spec.labels(names)],
        "stage": [sources[int(i)] for i in spec.top_source],
    }


def cluster_rows(spec: LineSpectrum, lineup, result) -> dict[str, list]:
    """One row per cluster of lines (and one per carrier's own band): name, extent (Hz),
    total power (dBm), peak density (dBm/Hz) and the largest contributor of its strongest line.

    Parameters
    ----------
    spec : LineSpectrum
    lineup : Lineup
    result : Result
        The lineup's CW run (carrier frequencies, stage names).

    Returns
    -------
    dict of str to list
        :data:`CLUSTER_COLUMNS`, by frequency.
    """
    from spurplan.analyses.check import cluster_label

    gap = max([c.bandwidth_hz or 0.0 for c in lineup.carriers] + [2 * spec.step_hz])
    out: dict[str, list] = {c: [] for c in CLUSTER_COLUMNS}
    sources = result.source_names()
    for wanted in (True, False):
        idx = np.nonzero(spec.is_carrier == wanted)[0]
        if not idx.size:
            continue
        cluster = np.cumsum(np.r_[True, np.diff(spec.freq_hz[idx]) > gap]) - 1
        for c in np.unique(cluster):
            members = idx[cluster == c]
            strongest = members[np.argmax(spec.power_dbm[members])]
            with np.errstate(divide="ignore"):
                total = float(10 * np.log10(np.sum(10 ** (spec.power_dbm[members] / 10))))
            if wanted:
                name = f"{label(spec.mix[strongest], lineup.tone_names)} carrier band"
            else:
                name = cluster_label(
                    spec.mix[strongest], lineup.tone_names, float(spec.freq_hz[strongest]), result
                )
            out["label"].append(name)
            out["start_hz"].append(float(spec.freq_hz[members].min()))
            out["stop_hz"].append(float(spec.freq_hz[members].max()))
            out["level_dbm"].append(total)
            out["peak_psd_dbm_hz"].append(float(spec.psd_dbm_hz[members].max()))
            out["stage"].append(sources[int(spec.top_source[strongest])])
    order = np.argsort(out["start_hz"], kind="stable")
    return {k: [v[i] for i in order] for k, v in out.items()}
