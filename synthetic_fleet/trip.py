"""One simulated trip, end to end: drive cycle → body motion → sensors → monitor → logger.

``simulate_trips`` is the single code path behind both the in-memory API
(``trip_samples``, one trip) and the fleet's CSV exports (a vehicle's trips in one pass).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, replace

import numpy as np
import pandas as pd

from synthetic_fleet.config import WheelModule
from synthetic_fleet.drive import drive_traces
from synthetic_fleet.faults import LAMP_SEVERITY, check_confounders, parse_fault
from synthetic_fleet.logger import LOGGER_KINDS, LOGGERS, LoggerProfile, grid_rate_hz, logger_rate_hz, plan_rows
from synthetic_fleet.platforms import Platform, platform
from synthetic_fleet.scenario import DEPOTS, synthetic_vin
from synthetic_fleet.sensors import SensorHealth, TripCondition, measure_trips
from tracktrue.ids import trip_id
from tracktrue.schema import NUMERIC_SIGNALS, POSITIONS, SAMPLE_COLUMNS, WHEEL_SPEED_COLUMNS

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
    #: A polled logger's read lag of each cell behind its row's stamp, integer ms per signal (else None).
    read_lag_ms: dict[str, np.ndarray] | None = None

    @property
    def n_samples(self) -> int:
        return len(self.time_ms)

    def to_frame(self) -> pd.DataFrame:
        """The canonical samples table (tracktrue.schema.SAMPLE_COLUMNS); signals the logger does not
        record are NaN (numbers) or empty."""
        time = pd.to_datetime(self.start.value + self.time_ms * 1_000_000, unit="ns", utc=True)
        frame = pd.DataFrame({"vehicle_id": self.vehicle_id, "trip_id": self.trip_id, "time": time,
                              **{k: v for k, v in self.columns.items() if k != "dtc"}})
        for name in NUMERIC_SIGNALS:
            if name not in frame:
                frame[name] = np.nan
        for name in ("brake", "lamp_abs", "lamp_esc"):
            if name not in frame:
                frame[name] = pd.array([pd.NA] * len(frame), dtype="boolean")
        frame["dtc"] = pd.array(self.columns["dtc"], dtype="string")
        for name in ("vehicle_id", "trip_id"):
            frame[name] = frame[name].astype("string")
        return frame[list(SAMPLE_COLUMNS)]


@dataclass(frozen=True)
class SimulatedTrips:
    """Several trips of one vehicle, their logged rows one after the other (``lengths`` rows each)."""

    vehicle_id: str
    starts: list[pd.Timestamp]
    lengths: np.ndarray
    time_ms: np.ndarray  # from each trip's start
    columns: dict[str, np.ndarray]
    rate_hz: float
    read_lag_ms: dict[str, np.ndarray] | None = None
    #: Instants simulated on the grid the rows were taken from (a polled or telematics logger writes fewer).
    n_simulated: int = 0

    @property
    def n_samples(self) -> int:
        return len(self.time_ms)

    def trip(self, k: int) -> SimulatedTrip:
        """Trip ``k`` alone, with its trip_id (from its first logged row's time)."""
        rows = slice(int(self.lengths[:k].sum()), int(self.lengths[:k + 1].sum()))
        start = pd.Timestamp(self.starts[k])
        start = start.tz_localize("UTC") if start.tzinfo is None else start.tz_convert("UTC")
        first = start + pd.Timedelta(milliseconds=int(self.time_ms[rows.start]))
        lags = None if self.read_lag_ms is None else {name: v[rows] for name, v in self.read_lag_ms.items()}
        return SimulatedTrip(self.vehicle_id, trip_id(self.vehicle_id, first), start, self.time_ms[rows],
                             {name: v[rows] for name, v in self.columns.items()}, self.rate_hz, lags)


def simulate_trips(spec: Platform, health: SensorHealth, conds: Sequence[TripCondition], *, vehicle_id: str,
                   starts: Sequence[pd.Timestamp], drives: Sequence[str], durations_s: Sequence[float],
                   fleet_rate_hz: float, logger: LoggerProfile, rngs: Sequence[np.random.Generator],
                   module: WheelModule = WheelModule()) -> SimulatedTrips:
    """Drive, measure, emulate the on-board monitor's lamp and trouble code, and log several trips of one
    vehicle in one pass; each trip draws on its own random stream ``rngs[k]`` only.

    The ESC lamp also lights without a fault: for the seconds of a stability
    intervention and, after the driver switches ESC off, to the trip's end;
    neither stores a trouble code."""
    rate = grid_rate_hz(logger, fleet_rate_hz)
    streams = [rng.spawn(3) for rng in rngs]  # drive, sensors, logger: a fault changes nothing but its own signals
    drive_rngs, sensor_rngs, logger_rngs = ([s[i] for s in streams] for i in range(3))
    trace = drive_traces(list(drives), list(durations_s), rate, drive_rngs, [c.park_grade_start for c in conds],
                         [c.park_grade_end for c in conds])
    trips = trace.trips
    row_rate = logger_rate_hz(logger, fleet_rate_hz)
    rows = plan_rows(trace.t_s, trips, rate, logger, logger_rngs, list(SAMPLE_COLUMNS[3:]), row_rate)
    # A logger reading few of the grid's samples (polled) needs the wheel module only where it reads:
    # each wheel's cells and, for the vehicle speed (from all four), that speed's cells.
    wheel_at = None
    if row_rate < rate and set(WHEEL_SPEED_COLUMNS) <= set(rows.sources):
        wheel_at = [rows.needed([w, "vehicle_speed"], trips.total) for w in WHEEL_SPEED_COLUMNS]
    signals = measure_trips(trace, spec, health, list(conds), sensor_rngs, module, wheel_at)
    faults = [parse_fault(c.fault) if c.fault else None for c in conds]
    lit = [f.lamps if f else (False, False) for f in faults]
    lamp = trace.t_s >= trips.spread([np.inf if c.lamp_from_s is None else c.lamp_from_s for c in conds])
    signals["lamp_abs"] = lamp & trips.spread([abs_lit for abs_lit, _ in lit])
    signals["lamp_esc"] = lamp & trips.spread([esc_lit for _, esc_lit in lit])
    dtc = np.full(trips.total, None, dtype=object)
    for cond, fault, (abs_lit, esc_lit), a, b in zip(conds, faults, lit, trips.starts, trips.ends):
        if fault is not None and (abs_lit or esc_lit):
            dtc[a:b][lamp[a:b]] = fault.trouble_code
        t = trace.t_s[a:b]
        esc = signals["lamp_esc"][a:b]
        for lo, hi in cond.esc_flashes:
            esc |= (t >= lo) & (t < hi)
        if cond.esc_off_from_s is not None:
            esc |= t >= cond.esc_off_from_s
    signals["dtc"] = dtc
    return SimulatedTrips(vehicle_id, list(starts), rows.n_rows, rows.time_ms, rows.gather(signals), row_rate,
                          rows.read_lag_ms, trips.total)


def simulate_trip(spec: Platform, health: SensorHealth, cond: TripCondition, *, vehicle_id: str,
                  start: pd.Timestamp, drive: str, duration_s: float, fleet_rate_hz: float,
                  logger: LoggerProfile, rng: np.random.Generator, module: WheelModule = WheelModule()) -> SimulatedTrip:
    """One trip (simulate_trips of one trip)."""
    return simulate_trips(spec, health, [cond], vehicle_id=vehicle_id, starts=[start], drives=[drive],
                          durations_s=[duration_s], fleet_rate_hz=fleet_rate_hz, logger=logger, rngs=[rng],
                          module=module).trip(0)


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
        elif name == "towing":
            changes["towing"] = True
        elif name == "temperature":
            changes["ambient_c"] = float(rng.choice(EXTREME_AMBIENT_C))
        elif name == "slope_parking":
            sign = rng.choice([-1.0, 1.0], 2)
            changes["park_grade_start"] = float(sign[0] * rng.uniform(*PARKING_SLOPE))
            changes["park_grade_end"] = float(sign[1] * rng.uniform(*PARKING_SLOPE))
    return replace(base, tyre_factor=tyre, **changes)


def trip_samples(platform_name: str = "compact_van", *, fault: str | None = None, fault_severity: float = 1.0,
                 confounders: Sequence[str] = (), drive: str = "mixed", duration_s: float = 1200.0,
                 rate_hz: float = 10.0, seed: int = 0, logger_kind: str = "bus_capture",
                 wheel_step_kph: float | None = None) -> tuple[pd.DataFrame, dict]:
    """One trip of canonical SI samples and the vehicle's registry row.

    ``fault_severity`` 1.0 is a well-developed fault still below the lamp
    threshold (faults.LAMP_SEVERITY lights it); 0 is none. The vehicle's healthy
    imperfections depend on ``seed`` only, so the same seed with and without a
    fault compares one vehicle against itself. ``logger_kind`` (logger.LOGGER_KINDS)
    logs the trip at ``rate_hz`` rows per second (a polled logger at most half its
    20 Hz read grid); ``wheel_step_kph`` overrides the kind's wheel-speed step.
    Signals the kind does not record are NaN (telematics: everything but vehicle
    speed, lamps and trouble code).
    """
    spec = platform(platform_name)
    if fault is not None:
        parse_fault(fault)
    if not fault_severity >= 0:
        raise ValueError(f"fault_severity must be >= 0, got {fault_severity}")
    if not rate_hz > 0 or not duration_s > 0:
        raise ValueError("rate_hz and duration_s must be positive")
    if logger_kind not in LOGGER_KINDS:
        raise ValueError(f"unknown logger kind {logger_kind!r}; known: {', '.join(LOGGER_KINDS)}")
    logger = LOGGERS[logger_kind]
    if logger.grid_hz is not None and rate_hz > logger.grid_hz / 2:
        raise ValueError(f"a {logger_kind} logger reads at most {logger.grid_hz / 2:g} rows/s, got {rate_hz}")
    logger = replace(logger, rate_hz=None if logger_kind == "bus_capture" else rate_hz,
                     wheel_step_kph=wheel_step_kph or logger.wheel_step_kph)
    vehicle_rng, condition_rng, trip_rng = (np.random.default_rng(s) for s in np.random.SeedSequence(seed).spawn(3))
    health = SensorHealth.draw(vehicle_rng)
    lit = fault is not None and parse_fault(fault).is_sensor_fault and fault_severity >= LAMP_SEVERITY
    cond = TripCondition(fault=fault, severity=fault_severity if fault else 0.0, lamp_from_s=0.0 if lit else None)
    cond = confounded_condition(cond, confounders, condition_rng)
    vid = f"SIM-{platform_name}-{seed}"
    trip = simulate_trip(spec, health, cond, vehicle_id=vid, start=pd.Timestamp("2026-03-02T08:00:00Z"),
                         drive=drive, duration_s=duration_s, fleet_rate_hz=rate_hz, logger=logger, rng=trip_rng)
    registry = {"vehicle_id": vid, **spec.registry_row(), "depot": "simulated",
                "vin": synthetic_vin(platform_name, DEPOTS[0], seed, 5), "next_service_date": None}
    return trip.to_frame(), registry
