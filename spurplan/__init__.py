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

Three functions share their name with the module that holds them (``check``,
``remedy``, ``spur_chart``).  Python's import system binds a submodule as an
attribute of its package when the submodule is first imported, which would replace
``spurplan.check`` the function by ``spurplan.check`` the module, depending on what
was imported first.  The package's module class (:class:`_Package`, assigned to
``__class__`` as the Python reference allows, "Customizing module attribute access")
keeps the function in that case, so ``spurplan.check`` is always the function;
``from spurplan.check import CheckResult`` still reads the module.  (``import
spurplan.check as m`` looks the attribute up first, so it too gives the function;
``importlib.import_module("spurplan.check")`` gives the module.)
"""

from __future__ import annotations

import importlib
import sys
import types

from .errors import (
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
    "Lineup": "lineup",
    "Carrier": "lineup",
    "Analysis": "lineup",
    "Result": "result",
    "check": "check",
    "CheckResult": "check",
    "drive_sweep": "sweep",
    "DriveSweep": "sweep",
    "tune_sweep": "sweep",
    "TuneSweep": "sweep",
    "remedy": "remedy",
    "Remedy": "remedy",
    "run_yield": "montecarlo",
    "YieldResult": "montecarlo",
    "budget_rows": "budget",
    "cascade_iip3_dbm": "budget",
    "spur_chart": "spur_chart",
    "SpurChart": "spur_chart",
    "build_report": "report",
    "write_report": "report",
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


def load(path):
    """Read and validate a lineup file.

    Parameters
    ----------
    path : str or path-like
        The lineup TOML file.

    Returns
    -------
    spurplan.lineup.Lineup
        The validated lineup.

    Raises
    ------
    LineupError, UnitError
        One line naming the file, stage, field, value and what was expected.
    """
    from .lineup_file import load as _load

    return _load(path)


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


class _Package(types.ModuleType):
    """The package's module type: a submodule never replaces a same-named public function."""

    def __setattr__(self, name: str, value) -> None:
        if isinstance(value, types.ModuleType) and _LAZY.get(name) == name:
            # The import system binding spurplan.<name> to the submodule: fetch the
            # function from it instead (the submodule is in sys.modules already).
            value = getattr(value, name)
        super().__setattr__(name, value)


sys.modules[__name__].__class__ = _Package
