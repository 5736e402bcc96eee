"""One simulated trip, end to end: drive cycle → body motion → sensors → monitor → logger.

``simulate_trip`` is the single code path behind both the in-memory API
(``trip_samples``) and the fleet's CSV exports.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, replace

import numpy as np
import pandas as pd

from synthetic_fleet.drive import drive_trace
from synthetic_fleet.faults import LAMP_SEVERITY, check_confounders, parse_fault
from synthetic_fleet.logger import LOGGERS, LoggerProfile, apply_logger, logger_rate_hz
from synthetic_fleet.platforms import Platform, platform
from synthetic_fleet.scenario import DEPOTS, synthetic_vin
from synthetic_fleet.sensors import SensorHealth, TripCondition, measure
from tracktrue.ids import trip_id
from tracktrue.schema import POSITIONS, SAMPLE_COLUMNS

#: Radius change of a compact spare (smaller than the road tyre) and of new tyres (deeper tread).
SPARE_RADIUS_FRAC = (-0.04, -0.025)
NEW_TYRE_RADIUS_FRAC = (0.006, 0.012)
#: Extreme ambient temperatures of the "temperature" confounder, °C.
EXTREME_AMBIENT_C = (-8.0, 38.0)
#: Slope of the "slope_parking" confounder (rise over run).
PARKING_SLOPE = (0.06, 0.12)


@dataclass(frozen=True)
class SimulatedTrip:
    """A trip's logged rows: canonical SI columns, row times as integer milliseconds from ``start`` (UTC)."""

    vehicle_id: str
    trip_id: str
    start: pd.Timestamp
    time_ms: np.ndarray  # from ``start``
    columns: dict[str, np.ndarray]
    rate_hz: float

    @property
    def n_samples(self) -> int:
        return len(self.time_ms)

    def to_frame(self) -> pd.DataFrame:
        """The canonical samples table (tracktrue.schema.SAMPLE_COLUMNS)."""
        time = pd.to_datetime(self.start.value + self.time_ms * 1_000_000, unit="ns", utc=True)
        frame = pd.DataFrame({"vehicle_id": self.vehicle_id, "trip_id": self.trip_id, "time": time,
                              **{k: v for k, v in self.columns.items() if k != "dtc"}})
        frame["dtc"] = pd.array(self.columns["dtc"], dtype="string")
        for name in ("vehicle_id", "trip_id"):
            frame[name] = frame[name].astype("string")
        return frame[list(SAMPLE_COLUMNS)]


def simulate_trip(spec: Platform, health: SensorHealth, cond: TripCondition, *, vehicle_id: str,
                  start: pd.Timestamp, drive: str, duration_s: float, fleet_rate_hz: float,
                  logger: LoggerProfile, rng: np.random.Generator) -> SimulatedTrip:
    """Drive, measure, emulate the on-board monitor's lamp and trouble code, and log one trip."""
    rate = logger_rate_hz(logger, fleet_rate_hz)
    drive_rng, sensor_rng, logger_rng = rng.spawn(3)  # a fault changes nothing but its own signals
    trace = drive_trace(drive, duration_s, rate, drive_rng, cond.park_grade_start, cond.park_grade_end)
    signals = measure(trace, spec, health, cond, sensor_rng)
    lamp = (np.zeros(len(trace.t_s), dtype=bool) if cond.lamp_from_s is None
            else trace.t_s >= cond.lamp_from_s)
    fault = parse_fault(cond.fault) if cond.fault else None
    abs_lit, esc_lit = fault.lamps if fault else (False, False)
    signals["lamp_abs"] = lamp & abs_lit
    signals["lamp_esc"] = lamp & esc_lit
    code = fault.trouble_code if fault and (abs_lit or esc_lit) else None
    signals["dtc"] = np.where(lamp & (code is not None), code, None).astype(object)
    time_ms, logged = apply_logger(signals, trace.t_s, rate, logger, logger_rng)
    start = pd.Timestamp(start)
    start = start.tz_localize("UTC") if start.tzinfo is None else start.tz_convert("UTC")
    first = start + pd.Timedelta(milliseconds=int(time_ms[0]))
    return SimulatedTrip(vehicle_id, trip_id(vehicle_id, first), start, time_ms, logged, rate)


def confounded_condition(base: TripCondition, confounders: Sequence[str], rng: np.random.Generator) -> TripCondition:
    """``base`` with the named healthy confounders applied for one trip."""
    tyre = base.tyre_factor.copy()
    changes: dict = {}
    for name in check_confounders(confounders):
        if name == "rough_road":
            changes["rough_road"] = True
        elif name == "tyre_change":
            axle = rng.choice(2)
            tyre[2 * axle:2 * axle + 2] *= 1.0 + rng.uniform(*NEW_TYRE_RADIUS_FRAC)
        elif name.startswith("spare_"):
            tyre[POSITIONS.index(name[-2:])] *= 1.0 + rng.uniform(*SPARE_RADIUS_FRAC)
        elif name == "full_load":
            changes["load"] = 1.0
        elif name == "temperature":
            changes["ambient_c"] = float(rng.choice(EXTREME_AMBIENT_C))
        elif name == "slope_parking":
            sign = rng.choice([-1.0, 1.0], 2)
            changes["park_grade_start"] = float(sign[0] * rng.uniform(*PARKING_SLOPE))
            changes["park_grade_end"] = float(sign[1] * rng.uniform(*PARKING_SLOPE))
    return replace(base, tyre_factor=tyre, **changes)


def trip_samples(platform_name: str = "compact_van", *, fault: str | None = None, fault_severity: float = 1.0,
                 confounders: Sequence[str] = (), drive: str = "mixed", duration_s: float = 1200.0,
                 rate_hz: float = 10.0, seed: int = 0) -> tuple[pd.DataFrame, dict]:
    """One trip of canonical SI samples and the vehicle's registry row.

    ``fault_severity`` 1.0 is a well-developed fault still below the lamp
    threshold (faults.LAMP_SEVERITY lights it); 0 is none. The vehicle's healthy
    imperfections depend on ``seed`` only, so the same seed with and without a
    fault compares one vehicle against itself.
    """
    spec = platform(platform_name)
    if fault is not None:
        parse_fault(fault)
    if not fault_severity >= 0:
        raise ValueError(f"fault_severity must be >= 0, got {fault_severity}")
    if not rate_hz > 0 or not duration_s > 0:
        raise ValueError("rate_hz and duration_s must be positive")
    vehicle_rng, condition_rng, trip_rng = (np.random.default_rng(s) for s in np.random.SeedSequence(seed).spawn(3))
    health = SensorHealth.draw(vehicle_rng)
    lit = fault is not None and parse_fault(fault).is_sensor_fault and fault_severity >= LAMP_SEVERITY
    cond = TripCondition(fault=fault, severity=fault_severity if fault else 0.0, lamp_from_s=0.0 if lit else None)
    cond = confounded_condition(cond, confounders, condition_rng)
    vid = f"SIM-{platform_name}-{seed}"
    trip = simulate_trip(spec, health, cond, vehicle_id=vid, start=pd.Timestamp("2026-03-02T08:00:00Z"),
                         drive=drive, duration_s=duration_s, fleet_rate_hz=rate_hz, logger=LOGGERS["bus"],
                         rng=trip_rng)
    registry = {"vehicle_id": vid, **spec.registry_row(), "depot": "simulated",
                "vin": synthetic_vin(platform_name, DEPOTS[0], seed, 5)}
    return trip.to_frame(), registry
