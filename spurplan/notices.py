"""Cautions that every output of spurplan carries (help text, reports, JSON)."""

PLANNING_NOTICE = (
    "spurplan gives planning estimates from models of datasheet figures. Compliance is "
    "decided by measurement under the regulation that applies; follow local rules and "
    "licensed practice."
)

POWER_NOTICE = (
    "High-power transmitters: keep clear of radiating antennas (RF exposure), terminate "
    "outputs into rated loads, and mind hot heatsinks, attenuators and loads."
)
