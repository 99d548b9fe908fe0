"""spurplan: spurious-emission planning for transmitter lineups.

Results are planning estimates; compliance is decided by measurement under the
regulation that applies.

Typical use::

    import spurplan
    lineup = spurplan.load("examples/uhf_telemetry.toml")
    result = lineup.run()
    result.products()          # pandas DataFrame of products at the output
    outcome = spurplan.check(lineup)

The public API is :data:`__all__`.  ``import spurplan`` stays light (no numpy,
pandas, scipy, matplotlib or scikit-rf): the errors are imported at once (they need
only the standard library), every other name is imported from its module on first
use by the module-level ``__getattr__`` (PEP 562) and then kept.

The implementation lives in five wings, laid out as the data flows (DEVELOPERS.md,
"Layout"): ``model`` (what a lineup is), ``io`` (every reader), ``engine`` (every
product at every stage), ``analyses`` (questions asked of a lineup) and ``output``
(tables, figures, reports, files).  No public function shares its name with a
top-level module, so ``spurplan.check`` is always the function.
"""

from __future__ import annotations

import importlib

from spurplan.errors import (
    LineupError,
    OutOfDataRange,
    OutputError,
    ResourceError,
    SpurplanError,
    SweepError,
    TouchstoneFault,
    UnitError,
    YieldError,
)

__version__ = "0.1.0"

# Public name -> module that defines it (imported on first use).
_LAZY = {
    "Lineup": "model.lineup",
    "Carrier": "model.lineup",
    "Analysis": "model.lineup",
    "Mode": "model.modes",
    "load_modes": "io.modes",
    "Result": "engine.result",
    "check": "analyses.check",
    "CheckResult": "analyses.check",
    "drive_sweep": "analyses.sweep",
    "DriveSweep": "analyses.sweep",
    "tune_sweep": "analyses.sweep",
    "TuneSweep": "analyses.sweep",
    "remedy": "analyses.remedy",
    "Remedy": "analyses.remedy",
    "RemedyCase": "analyses.remedy",
    "run_yield": "analyses.montecarlo",
    "YieldResult": "analyses.montecarlo",
    "budget_rows": "analyses.budget",
    "cascade_iip3_dbm": "analyses.budget",
    "spur_chart": "analyses.spur_chart",
    "SpurChart": "analyses.spur_chart",
    "plan_if": "analyses.frequency_plan",
    "IfPlan": "analyses.frequency_plan",
    "build_report": "output.report",
    "write_report": "output.report",
}

__all__ = [
    "load",
    *_LAZY,
    "SpurplanError",
    "UnitError",
    "LineupError",
    "OutOfDataRange",
    "SweepError",
    "YieldError",
    "TouchstoneFault",
    "OutputError",
    "ResourceError",
]


def load(path, mode=None):
    """Read and validate a lineup file (one of its modes, for a file with ``[[mode]]`` tables).

    Parameters
    ----------
    path : str or path-like
        The lineup TOML file.
    mode : str, optional
        The mode to build, by name; needed only when the file has several modes
        (:func:`spurplan.io.modes.load_modes` builds them all).

    Returns
    -------
    spurplan.model.lineup.Lineup
        The validated lineup.

    Raises
    ------
    LineupError, UnitError
        One line naming the file, stage, field, value and what was expected.
    """
    from spurplan.io.modes import load_mode

    return load_mode(path, mode)


def __getattr__(name: str):
    module = _LAZY.get(name)
    if module is None:
        raise AttributeError(f"module 'spurplan' has no attribute {name!r}")
    value = getattr(importlib.import_module(f".{module}", __name__), name)
    # Kept in the package's namespace, so later look-ups do not come back here.
    globals()[name] = value
    return value


def __dir__():
    return sorted(set(globals()) | set(__all__))
