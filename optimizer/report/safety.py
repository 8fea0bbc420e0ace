"""The high-voltage caution elopt prints wherever a design is driven above 50 V."""

from __future__ import annotations

#: Above this drive (V) a design gets the caution (common practice, no source).
HIGH_VOLTAGE_V = 50.0


def high_voltage_caution(drive_V: float) -> str | None:
    """The caution line for a drive of ``drive_V`` volts, or None at or below 50 V."""
    if abs(drive_V) <= HIGH_VOLTAGE_V:
        return None
    return (
        f"Caution: this design is driven at {abs(drive_V):,.0f} V, above {HIGH_VOLTAGE_V:.0f} V. "
        "High voltage can give a dangerous shock and can break down air or insulation. elopt's "
        "field limit is a design aid, not a safety rating: build, test and operate it only "
        "under your local electrical codes and licensed practice."
    )
