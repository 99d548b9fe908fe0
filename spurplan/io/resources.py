"""Files shipped with spurplan: example lineups and rule sets (``bands/``).

In a wheel they sit in ``spurplan/_data/``; in a source checkout (or an editable
install) they are the repository's own ``examples/`` and ``bands/`` folders.
"""

from __future__ import annotations

from pathlib import Path

from spurplan.errors import ResourceError

_PACKAGE = Path(__file__).resolve().parents[1]  # spurplan/, above io/
DEFAULT_EXAMPLE = "uhf_telemetry.toml"


def data_dir(name: str) -> Path:
    """Folder ``name`` ("examples" or "bands") of the installed or checked-out package."""
    for candidate in (_PACKAGE / "_data" / name, _PACKAGE.parent / name):
        if candidate.is_dir():
            return candidate
    raise ResourceError(f"spurplan's {name}/ folder is missing from this installation")


def example_path(name: str = DEFAULT_EXAMPLE) -> Path:
    """Path of a bundled example lineup."""
    return data_dir("examples") / name
