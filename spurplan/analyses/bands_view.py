"""What ``spurplan bands`` shows: the shipped rule sets and band lists, with sources."""

from __future__ import annotations

import math

from spurplan.io.mask_files import load_ruleset, shipped_names, shipped_path


def catalogue_rows() -> dict[str, list]:
    """One row per shipped file: name, kind, number of entries, statuses, title."""
    cols: dict[str, list] = {"name": [], "kind": [], "entries": [], "status": [], "title": [], "source": []}
    for name in shipped_names():
        s = load_ruleset(shipped_path(name))
        entries = list(s.rules) + list(s.bands)
        cols["name"].append(name)
        cols["kind"].append("rules" if s.rules else "bands")
        cols["entries"].append(len(entries))
        cols["status"].append(", ".join(sorted({e.status for e in entries})))
        cols["title"].append(s.title)
        cols["source"].append(s.source)
    return cols


def _mhz(hz: float):
    return None if math.isinf(hz) else hz / 1e6


def band_rows(name: str) -> tuple[dict[str, list], dict]:
    """Entries of one shipped file with their limits, statuses and sources."""
    s = load_ruleset(shipped_path(name))
    cols: dict[str, list] = {
        "name": [],
        "start_mhz": [],
        "stop_mhz": [],
        "limit": [],
        "status": [],
        "source": [],
    }
    for r in s.rules:
        cols["name"].append(r.name)
        cols["start_mhz"].append(_mhz(r.start_hz))
        cols["stop_mhz"].append(_mhz(r.stop_hz))
        cols["limit"].append(r.describe + _conditions(r))
        cols["status"].append(r.status)
        cols["source"].append(r.source)
    for b in s.bands:
        cols["name"].append(b.name)
        cols["start_mhz"].append(_mhz(b.start_hz))
        cols["stop_mhz"].append(_mhz(b.stop_hz))
        cols["limit"].append("; ".join(r.describe for r in b.rules) or "none of its own")
        cols["status"].append(b.status)
        cols["source"].append(b.source)
    summary = {"name": s.name, "title": s.title, "source": s.source, "notes": s.notes}
    return cols, summary


def _conditions(rule) -> str:
    parts = []
    if rule.when_carrier_hz is not None:
        lo, hi = rule.when_carrier_hz
        parts.append(
            f"carrier {lo / 1e6:g}-{hi / 1e6:g} MHz" if math.isfinite(lo) else f"carrier <= {hi / 1e6:g} MHz"
        )
    if rule.when_power_dbm is not None:
        lo, hi = rule.when_power_dbm
        parts.append(f"P > {lo:g} dBm" if math.isinf(hi) else f"P <= {hi:g} dBm")
    if rule.ceiling_dbm is not None:
        parts.append(f"at most {rule.ceiling_dbm:.2f} dBm")
    if rule.floor_dbm is not None:
        parts.append(f"need not be below {rule.floor_dbm:.2f} dBm")
    return f" ({', '.join(parts)})" if parts else ""
