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

# From about 2 W at the antenna port RF exposure near the antenna and the heat of loads and
# heatsinks become practical hazards on a bench (common practice, no source).
HIGH_POWER_DBM = 33.0


def power_notice(carrier_dbm: float) -> str:
    """The RF-safety notice for a transmitter delivering ``carrier_dbm`` (dBm), or ``""``.

    Parameters
    ----------
    carrier_dbm : float
        Carrier power at the antenna port (dBm).

    Returns
    -------
    str
        ``"This transmitter delivers about +44.1 dBm (25.4 W). High-power ..."`` at or
        above :data:`HIGH_POWER_DBM`; ``""`` below it.
    """
    if not carrier_dbm >= HIGH_POWER_DBM:
        return ""
    return (
        f"This transmitter delivers about {carrier_dbm:+.1f} dBm ({10 ** ((carrier_dbm - 30) / 10):.3g} W). "
        + POWER_NOTICE
    )
