"""Every sentence and label the dashboard shows more than once."""

from __future__ import annotations

#: DESIGN.md, "Safety". Shown on the triage and workshop-plan pages and in every calendar entry.
SAFETY_CAUTION = (
    "ABS and ESC are safety systems. tracktrue prioritises inspections; it does not clear a "
    "vehicle, replace the on-board monitor, or replace a qualified technician following the "
    "manufacturer's service procedure. A vehicle with a lit ABS/ESC lamp needs service whatever "
    "its rank. Sensor replacement often needs a calibration or relearn; local regulations and "
    "licensed practice govern the work."
)

#: One per tracktrue.schema.STATUSES, in that order (a test checks both).
STATUS_LABELS: dict[str, str] = {
    "lamp_lit": "Lamp lit",
    "inspect": "Inspect",
    "watch": "Watch",
    "snoozed": "Snoozed",
    "verifying": "Verifying repair",
    "ok": "Fine",
    "insufficient_data": "Too few trips",
}

#: What rank --changes and the triage page's "What changed" call each change (models.changes).
CHANGE_LABELS: dict[str, str] = {
    "new": "New alert",
    "escalated": "Escalated",
    "de-escalated": "De-escalated",
    "cleared": "Cleared",
    "component": "Other component",
    "other": "Other status change",
}

OUTCOME_LABELS: dict[str, str] = {
    "fault_found": "Fault found",
    "no_fault_found": "No fault found",
}

#: Unit of a feature, from its name's suffix (DESIGN.md, "Features").
FEATURE_UNIT_SUFFIXES: tuple[tuple[str, str], ...] = (
    ("_pct", "%"),
    ("_dps", "deg/s"),
    ("_mps", "m/s"),
    ("_deg", "deg"),
    ("_g", "g"),
    ("_km", "km"),
    ("_hz", "Hz"),
    ("_s", "s"),
)


def feature_unit(name: str) -> str:
    """Display unit of a feature column (``events/100 km`` for dropouts, ratio for gains)."""
    if name.startswith("wheel_dropouts_"):
        return "events/100 km"
    for suffix, unit in FEATURE_UNIT_SUFFIXES:
        if name.endswith(suffix):
            return unit
    return "ratio"


def component_label(component: str | None) -> str:
    """``wheel_sensor_fl`` → ``wheel sensor FL``; empty for missing or ``none``."""
    if not component or component == "none":
        return ""
    words = component.split("_")
    if words[-1] in ("fl", "fr", "rl", "rr"):
        words[-1] = words[-1].upper()
    return " ".join(words)
