"""Fault and confounder vocabulary, fault magnitudes per severity, and the on-board monitor's thresholds.

Severity is dimensionless: 1.0 is a well-developed fault that the data shows
plainly but that is still below the monitor's coarse threshold
(``LAMP_SEVERITY``); 0 is none. ``MAGNITUDE_AT_SEVERITY_1`` turns severity
into the physical size of the fault. Tyre distractors are not sensor faults:
for them severity 1 means the radius change given there, and they never
light a lamp. Trouble codes are our own invention (``TT-`` family).
"""

from __future__ import annotations

from dataclasses import dataclass

from tracktrue.schema import POSITIONS

SENSOR_FAULT_KINDS: tuple[str, ...] = (
    "tone_ring", "air_gap", "yaw_offset", "yaw_gain", "steer_offset", "accel_long_offset", "accel_lat_offset")
TYRE_DISTRACTOR_KINDS: tuple[str, ...] = ("tyre_deflation", "tyre_mismatch")
#: Kinds that strike one wheel (their names end in _fl, _fr, _rl or _rr).
PER_WHEEL_KINDS = frozenset({"tone_ring", "air_gap", "tyre_deflation", "tyre_mismatch"})


def _expand(kinds: tuple[str, ...]) -> tuple[str, ...]:
    return tuple(n for k in kinds for n in ((f"{k}_{p}" for p in POSITIONS) if k in PER_WHEEL_KINDS else (k,)))


#: Every fault name trip_samples accepts (sensor faults, then tyre distractors).
FAULTS: tuple[str, ...] = _expand(SENSOR_FAULT_KINDS + TYRE_DISTRACTOR_KINDS)
#: Healthy confounders trip_samples accepts (never faults, never a lamp).
CONFOUNDERS: tuple[str, ...] = (
    "rough_road", "tyre_change", *(f"spare_{p}" for p in POSITIONS), "full_load", "towing", "temperature",
    "slope_parking")

#: The size of each fault at severity 1 (units in the key).
MAGNITUDE_AT_SEVERITY_1: dict[str, float] = {
    # a bent ring: edge error amplitude once per turn (fraction of a pitch); over N teeth it changes the
    # timed angle by about 2π/N of it, about 1.2 % of wheel speed at 48 teeth
    "tone_ring_bend_pitch": 0.09,
    "tone_ring_edge_error_pitch": 0.12,  # edge displacement of the worst damaged tooth, fraction of a pitch
    "tone_ring_missing_severity": 1.5,  # from this severity on, the damaged tooth is broken off (no edge)
    "air_gap_dropout_speed_mps": 4.5,  # rise of the speed below which the signal drops out
    "yaw_offset_dps": 1.5,
    "yaw_gain_frac": 0.07,
    "steer_offset_deg": 7.0,  # steering-wheel angle
    "accel_long_offset_g": 0.05,
    "accel_lat_offset_g": 0.05,
    "tyre_deflation_frac": 0.010,  # rolling-radius loss
    "tyre_mismatch_frac": 0.020,  # rolling-radius difference of the wrong tyre
}

#: The on-board monitor lights its lamp when severity reaches this (coarse, by design).
LAMP_SEVERITY = 1.8


@dataclass(frozen=True)
class FaultName:
    """A parsed fault name: its kind and, for per-wheel faults, the wheel."""

    kind: str
    position: str | None

    @property
    def is_sensor_fault(self) -> bool:
        return self.kind in SENSOR_FAULT_KINDS

    @property
    def component(self) -> str:
        """The ranking vocabulary's component (tracktrue.schema.COMPONENTS)."""
        if self.kind in ("tone_ring", "air_gap"):
            return f"wheel_sensor_{self.position}"
        if self.kind in TYRE_DISTRACTOR_KINDS:
            return f"tyre_{self.position}"
        return {"yaw_offset": "yaw_sensor", "yaw_gain": "yaw_sensor", "steer_offset": "steering_angle_sensor",
                "accel_long_offset": "accel_long_sensor", "accel_lat_offset": "accel_lat_sensor"}[self.kind]

    @property
    def lamps(self) -> tuple[bool, bool]:
        """(ABS lamp, ESC lamp) this fault lights once over the threshold; a wheel
        signal fault degrades ABS and with it ESC (common practice)."""
        if not self.is_sensor_fault:
            return (False, False)
        return (True, True) if self.kind in ("tone_ring", "air_gap") else (False, True)

    @property
    def trouble_code(self) -> str:
        """Our own code text: TT-W1n air gap / TT-W2n tone ring (n = 1..4 for fl..rr), TT-Y yaw, TT-S steering, TT-A accel."""
        if self.kind in ("tone_ring", "air_gap"):
            family = "1" if self.kind == "air_gap" else "2"
            return f"TT-W{family}{POSITIONS.index(self.position) + 1}"
        return {"yaw_offset": "TT-Y01", "yaw_gain": "TT-Y02", "steer_offset": "TT-S01",
                "accel_long_offset": "TT-A01", "accel_lat_offset": "TT-A02"}.get(self.kind, "")


def parse_fault(name: str) -> FaultName:
    """Parse ``tone_ring_fl`` etc.; a ValueError lists the accepted names."""
    if name not in FAULTS:
        raise ValueError(f"unknown fault {name!r}; known: {', '.join(FAULTS)}")
    head, _, tail = name.rpartition("_")
    if tail in POSITIONS and head in PER_WHEEL_KINDS:
        return FaultName(head, tail)
    return FaultName(name, None)


def check_confounders(names) -> tuple[str, ...]:
    """The confounder names as a tuple, or a ValueError naming the unknown one."""
    names = tuple(names)
    for n in names:
        if n not in CONFOUNDERS:
            raise ValueError(f"unknown confounder {n!r}; known: {', '.join(CONFOUNDERS)}")
    return names
