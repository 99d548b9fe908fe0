"""spurplan: spurious-emission planning for transmitter lineups.

Results are planning estimates; compliance is decided by measurement under the
regulation that applies.

Typical use::

    import spurplan
    lineup = spurplan.load("examples/uhf_telemetry.toml")
    result = lineup.run()
    result.products()          # pandas DataFrame of products at the output
"""

from __future__ import annotations

__version__ = "0.1.0"


def load(path):
    """Read and validate a lineup file; returns a :class:`spurplan.lineup.Lineup`."""
    from .lineup_file import load as _load

    return _load(path)
