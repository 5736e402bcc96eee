"""The fleet over days: who drives when, which faults develop, what the workshop recorded,
and the files that result (logs, vehicles.csv, truth.csv, service_history.csv).

Planning (pure, fast, deterministic for a seed) is kept apart from synthesis, so
ground truth and lamp dates can be checked without generating samples. Each
vehicle's and each trip's random stream is derived from (seed, vehicle, trip),
so the output does not depend on the order of work.
"""

from __future__ import annotations

import datetime as dt
import logging
import multiprocessing as mp
import os
import shutil
import time
from concurrent.futures import ProcessPoolExecutor
from contextlib import nullcontext
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np
import pandas as pd
from tqdm import tqdm

from synthetic_fleet.config import SimConfig, sim_config
from synthetic_fleet.export import STYLES, ExportStyle, write_trips_csv
from synthetic_fleet.faults import (
    LAMP_SEVERITY,
    PER_WHEEL_KINDS,
    SENSOR_FAULT_KINDS,
    TYRE_DISTRACTOR_KINDS,
    parse_fault,
)
from synthetic_fleet.logger import LOGGERS, LoggerProfile, logger_rate_hz
from synthetic_fleet.platforms import PLATFORMS, Platform, platform
from synthetic_fleet.scenario import DEPOTS, FLEET_NAME, Depot, synthetic_vin, vehicle_id
from synthetic_fleet.sensors import SensorHealth, TripCondition
from synthetic_fleet.trip import NEW_TYRE_RADIUS_FRAC, PARKING_SLOPE, SPARE_RADIUS_FRAC, simulate_trips
from tracktrue.errors import UserError
from tracktrue.schema import POSITIONS

log = logging.getLogger(__name__)

#: Demo fleet: every fault kind, lamps lighting for some, about 5 million samples at 10 Hz
#: (the whole demo chain must run in minutes on a 2-core machine).
DEMO_VEHICLES = 24
DEMO_DAYS = 24

#: Shares of the fleet (DESIGN: ~30-40 % one sensor fault each, ~10 % tyre distractors).
FAULTY_SHARE, TYRE_DISTRACTOR_SHARE = 0.35, 0.10
#: Development of a sensor fault: days from onset to the lamp threshold, and severity cap.
LAMP_AFTER_DAYS = (14.0, 56.0)
SEVERITY_CAP = 1.6 * LAMP_SEVERITY
#: Trip pattern.
TRIPS_PER_DAY_P = (0.30, 0.35, 0.23, 0.12)  # 1, 2, 3, 4 trips on a working day
ACTIVE_P_BY_WEEKDAY = (0.93, 0.93, 0.93, 0.93, 0.9, 0.35, 0.1)
TRIP_MEDIAN_MIN, TRIP_SIGMA, TRIP_MIN_MAX_MIN = 9.0, 0.5, (4.0, 45.0)
DRIVE_P = {"town": 0.35, "suburban": 0.25, "highway": 0.10, "mixed": 0.30}
TYRE_WEAR_PER_DAY = 1.5e-5  # radius, all wheels alike
UNRECORDED_SHARE = 0.3  # tyre services the workshop did not write down
#: loggers.csv, the evaluation's ground truth of each vehicle's logger (ingest never reads it).
LOGGERS_COLUMNS = ("vehicle_id", "logger_kind", "wheel_sensor_type", "rate_hz", "wheel_speed_step_kph")


@dataclass(frozen=True)
class FaultPlan:
    """How one fault develops: severity as a function of (fractional) day index."""

    name: str
    onset_day: float
    lamp_after_days: float = np.inf  # sensor faults growing as a power law
    shape: float = 1.0
    step_severity: float | None = None  # a step change from onset (steering after alignment, wrong tyre)
    ramp_days: float = 0.0  # tyre deflation: linear to step_severity over these days

    def severity(self, day: float) -> float:
        since = day - self.onset_day
        if since < 0:
            return 0.0
        if self.step_severity is not None:
            ramp = min(1.0, since / self.ramp_days) if self.ramp_days > 0 else 1.0
            return self.step_severity * ramp
        return min(LAMP_SEVERITY * (since / self.lamp_after_days) ** self.shape, SEVERITY_CAP)


@dataclass(frozen=True)
class TyreEvent:
    """A change of the tyres' rolling radii on a day (rotation, new tyres, spare on/off)."""

    day: float
    kind: str
    positions: tuple[str, ...]
    radius_change: float = 0.0  # relative, for new tyres and spares
    recorded: bool = True
    note: str = ""


@dataclass(frozen=True)
class VehiclePlan:
    index: int
    vehicle_id: str
    spec: Platform
    depot: Depot
    vin: str
    logger: LoggerProfile
    style: ExportStyle
    health: SensorHealth
    fault: FaultPlan | None
    tyre_events: tuple[TyreEvent, ...]
    service_rows: tuple[dict, ...]


@dataclass(frozen=True)
class TripPlan:
    vehicle: VehiclePlan
    number: int
    start: pd.Timestamp
    duration_s: float
    drive: str
    condition: TripCondition


@dataclass
class FleetPlan:
    start: dt.date
    days: int
    seed: int
    vehicles: list[VehiclePlan]
    config: SimConfig
    trips: dict[str, list[TripPlan]] = field(default_factory=dict)
    lamp_dates: dict[str, dt.date | None] = field(default_factory=dict)


def _roles(n: int, rng: np.random.Generator) -> list[str | None]:
    """One fault name (or None) per vehicle: every sensor-fault kind before any repeats."""
    n_faulty = int(round(FAULTY_SHARE * n))
    n_tyre = int(round(TYRE_DISTRACTOR_SHARE * n))
    kinds = [str(k) for k in rng.permutation(SENSOR_FAULT_KINDS)]
    faults = [kinds[i % len(kinds)] for i in range(n_faulty)]
    faults += [TYRE_DISTRACTOR_KINDS[i % 2] for i in range(n_tyre)]
    names = [f"{k}_{POSITIONS[rng.integers(4)]}" if k in PER_WHEEL_KINDS else k for k in faults]
    roles: list[str | None] = names + [None] * (n - len(names))
    return [roles[i] for i in rng.permutation(n)]


def _logger_kinds(n: int, config: SimConfig, rng: np.random.Generator) -> list[str]:
    """One logger kind per vehicle: the configuration's shares in whole vehicles, the rest bus capture."""
    n_telematics = int(round(config.telematics_share * n))
    n_polled = min(int(round(config.polled_share * n)), n - n_telematics)
    kinds = ["telematics"] * n_telematics + ["polled"] * n_polled
    kinds += ["bus_capture"] * (n - len(kinds))
    return [kinds[i] for i in rng.permutation(n)]


def _vehicle_logger(kind: str, config: SimConfig, rng: np.random.Generator) -> LoggerProfile:
    """The logger fitted to one vehicle: its kind's artefacts at this vehicle's rate and resolution."""
    base = LOGGERS[kind]
    if kind == "polled":
        return replace(base, rate_hz=float(rng.choice(config.polled_rates_hz)),
                       wheel_step_kph=float(rng.choice(config.polled_wheel_steps_kph)),
                       stale_prob=config.polled_stale_prob)
    if kind == "telematics":
        return replace(base, rate_hz=config.telematics_rate_hz)
    return replace(base, rate_factor=config.bus_rate_factor, wheel_step_kph=config.bus_wheel_step_kph)


def _fault_plan(name: str, days: int, lamp_within: bool, rng: np.random.Generator) -> FaultPlan:
    kind = parse_fault(name).kind
    onset = rng.uniform(0.1, 0.45) * days
    remaining = max(days - onset, 1.0)
    if kind == "tyre_deflation":
        return FaultPlan(name, onset, step_severity=rng.uniform(0.5, 2.0), ramp_days=rng.uniform(7.0, 21.0))
    if kind == "tyre_mismatch":
        return FaultPlan(name, onset, step_severity=rng.uniform(0.7, 1.3))
    if kind == "steer_offset" and rng.random() < 0.5:  # after an alignment without recalibration
        return FaultPlan(name, np.floor(onset) + 0.3, step_severity=rng.uniform(0.8, 1.4))
    factor = rng.uniform(0.45, 0.85) if lamp_within else rng.uniform(1.15, 2.0)
    lamp_after = float(np.clip(factor * remaining, *LAMP_AFTER_DAYS))
    return FaultPlan(name, onset, lamp_after_days=lamp_after, shape=float(rng.choice([1.0, 1.5, 2.0])))


def _tyre_events(days: int, fault: FaultPlan | None, rng: np.random.Generator) -> list[TyreEvent]:
    events = []
    if rng.random() < 0.4:
        day = np.floor(rng.uniform(0.15, 0.9) * days) + 0.35
        recorded = rng.random() >= UNRECORDED_SHARE
        if rng.random() < 0.5:
            events.append(TyreEvent(day, "tyre_rotation", POSITIONS, recorded=recorded, note="front and rear swapped"))
        else:
            which = POSITIONS if rng.random() < 0.3 else (("fl", "fr") if rng.random() < 0.5 else ("rl", "rr"))
            events.append(TyreEvent(day, "tyre_change", which, rng.uniform(*NEW_TYRE_RADIUS_FRAC), recorded,
                                    "new tyres, worn ones scrapped"))
    if rng.random() < 0.12:
        day = np.floor(rng.uniform(0.1, 0.8) * days) + 0.4
        pos = (str(rng.choice(POSITIONS)),)
        recorded = rng.random() >= UNRECORDED_SHARE
        events.append(TyreEvent(day, "spare_fitted", pos, rng.uniform(*SPARE_RADIUS_FRAC), recorded,
                                "compact spare after a puncture"))
        events.append(TyreEvent(day + rng.integers(2, 6), "spare_removed", pos, recorded=recorded,
                                note="repaired road tyre refitted"))
    if fault is not None and parse_fault(fault.name).kind == "tyre_mismatch" and rng.random() < 0.5:
        events.append(TyreEvent(fault.onset_day, "tyre_change", (parse_fault(fault.name).position,), 0.0, True,
                                "one tyre replaced after damage"))
    return sorted(events, key=lambda e: e.day)


def _tyre_factor(events: tuple[TyreEvent, ...], day: float, health: SensorHealth) -> np.ndarray:
    """Rolling radius of each position on ``day`` relative to its healthy value (tracktrue order)."""
    radius = health.wheel_radius_factor.copy()
    spare_saved: dict[int, float] = {}
    for e in events:
        if e.day > day:
            break
        idx = [POSITIONS.index(p) for p in e.positions]
        if e.kind == "tyre_rotation":  # fl<->rl, fr<->rr
            radius = radius[[2, 3, 0, 1]]
        elif e.kind == "tyre_change":
            radius[idx] = 1.0 + e.radius_change + (radius[idx] - 1.0) * 0.3
        elif e.kind == "spare_fitted":
            spare_saved[idx[0]] = radius[idx[0]]
            radius[idx[0]] = 1.0 + e.radius_change
        elif e.kind == "spare_removed":
            radius[idx[0]] = spare_saved.pop(idx[0], radius[idx[0]])
    return radius * (1.0 - TYRE_WEAR_PER_DAY * day) / health.wheel_radius_factor


def plan_fleet(n_vehicles: int, days: int, seed: int, start: dt.date = dt.date(2026, 3, 2),
               config: SimConfig | str | None = None) -> FleetPlan:
    """Vehicles, their loggers, faults and service events, every trip with its condition, and lamp dates.
    ``config`` is a SimConfig or its name (default: the tuning configuration, config.DEFAULT)."""
    if n_vehicles < 1 or days < 1:
        raise UserError(f"a fleet needs at least one vehicle and one day (got {n_vehicles} vehicles, {days} days)")
    config = sim_config(config)
    fleet_rng = np.random.default_rng([seed, 1_000_003])
    roles = _roles(n_vehicles, fleet_rng)
    logger_kinds = _logger_kinds(n_vehicles, config, fleet_rng)
    depot_numbers = {d.code: 0 for d in DEPOTS}
    vehicles = []
    sensor_faults_seen = 0
    for i, role in enumerate(roles):
        rng = np.random.default_rng([seed, i, 0])
        depot = DEPOTS[i % len(DEPOTS)]
        depot_numbers[depot.code] += 1
        spec = platform(PLATFORMS[(i // len(DEPOTS) + i) % len(PLATFORMS)])
        vid = vehicle_id(depot, depot_numbers[depot.code])
        fault = None
        if role is not None:
            lamp_within = parse_fault(role).is_sensor_fault and sensor_faults_seen % 2 == 0
            sensor_faults_seen += parse_fault(role).is_sensor_fault
            fault = _fault_plan(role, days, lamp_within, rng)
        events = tuple(_tyre_events(days, fault, rng))
        rows = [{"vehicle_id": vid, "date": (start + dt.timedelta(days=int(e.day))).isoformat(), "kind": e.kind,
                 "component": f"tyre_{p}", "note": e.note} for e in events if e.recorded for p in e.positions]
        if fault is not None and parse_fault(fault.name).kind == "steer_offset" and fault.step_severity is not None:
            rows.append({"vehicle_id": vid, "date": (start + dt.timedelta(days=int(fault.onset_day))).isoformat(),
                         "kind": "wheel_alignment", "component": "front_axle", "note": "four-wheel alignment"})
        logger = _vehicle_logger(logger_kinds[i], config, np.random.default_rng([seed, i, 3]))
        vehicles.append(VehiclePlan(i, vid, spec, depot, synthetic_vin(spec.name, depot, 1000 * seed % 997_000 + i,
                                                                           int(rng.integers(0, 6))),
                                    logger, STYLES[depot.export_style], SensorHealth.draw(rng), fault, events,
                                    tuple(rows)))
    plan = FleetPlan(start, days, seed, vehicles, config)
    for v in vehicles:
        plan.trips[v.vehicle_id], plan.lamp_dates[v.vehicle_id] = _vehicle_trips(v, start, days, seed)
    return plan


def _vehicle_trips(v: VehiclePlan, start: dt.date, days: int, seed: int) -> tuple[list[TripPlan], dt.date | None]:
    rng = np.random.default_rng([seed, v.index, 1])
    idle_from = rng.uniform(0, days) if rng.random() < 0.3 else np.inf
    idle_until = idle_from + rng.uniform(3, 8)
    habit = rng.choice([-1.0, 1.0])  # nose into the slope or out of it, most nights the same way
    grade = v.depot.yard_grade * habit  # where the vehicle stands: the yard, or its last stop
    fault = parse_fault(v.fault.name) if v.fault else None
    trips: list[TripPlan] = []
    lamp_date = None
    origin = dt.datetime(start.year, start.month, start.day, tzinfo=dt.timezone.utc)
    for day in range(days):
        date = start + dt.timedelta(days=day)
        if idle_from <= day < idle_until or rng.random() >= ACTIVE_P_BY_WEEKDAY[date.weekday()]:
            continue
        n_trips = 1 + int(rng.choice(4, p=TRIPS_PER_DAY_P))
        clock_h = rng.uniform(6.0, 8.5)
        yard_grade = v.depot.yard_grade * habit * (1.0 if rng.random() < 0.7 else -1.0)  # parked tonight
        ambient_day = 5.0 + 12.0 * day / 90.0 + rng.normal(0.0, 3.0)
        for k in range(n_trips):
            minutes = float(np.clip(TRIP_MEDIAN_MIN * np.exp(TRIP_SIGMA * rng.standard_normal()), *TRIP_MIN_MAX_MIN))
            if clock_h + minutes / 60 > 21.0:
                break
            begin = origin + dt.timedelta(days=day, seconds=round(clock_h * 3600))
            t_day = day + clock_h / 24.0
            if k == n_trips - 1:
                end_grade = yard_grade
            else:
                steep = rng.random() < 0.1
                end_grade = (rng.choice([-1.0, 1.0]) * rng.uniform(*PARKING_SLOPE) if steep
                             else rng.normal(0.0, 0.02))
            severity = v.fault.severity(t_day) if v.fault else 0.0
            lamp_from = None
            if fault is not None and fault.is_sensor_fault and severity >= LAMP_SEVERITY:
                if lamp_date is None:
                    lamp_date = date
                    lamp_from = rng.uniform(0.2, 0.7) * minutes * 60
                else:
                    lamp_from = 0.0
            load = 1.0 if rng.random() < 0.15 else float(rng.random() ** 1.5)
            cond = TripCondition(
                fault=v.fault.name if severity > 0 else None, severity=severity,
                tyre_factor=_tyre_factor(v.tyre_events, t_day, v.health), load=load,
                ambient_c=ambient_day + 4.0 * np.sin(2 * np.pi * (clock_h - 9.0) / 24.0),
                rough_road=bool(rng.random() < v.depot.rough_trip_share),
                park_grade_start=float(grade), park_grade_end=float(end_grade), lamp_from_s=lamp_from)
            drive = str(rng.choice(list(DRIVE_P), p=list(DRIVE_P.values())))
            trips.append(TripPlan(v, len(trips), pd.Timestamp(begin), minutes * 60.0, drive, cond))
            grade = end_grade
            clock_h += minutes / 60.0 + rng.uniform(0.25, 2.0)
    return trips, lamp_date


@dataclass(frozen=True)
class FleetSummary:
    out: Path
    fleet_name: str
    n_vehicles: int
    days: int
    n_files: int
    n_samples: int
    n_bytes: int
    faults: tuple[str, ...]
    lamps_lit: int
    distractors: int
    seconds: float

    def describe(self) -> str:
        return "\n".join([
            f"{self.fleet_name}: {self.n_vehicles} vehicles over {self.days} days",
            f"  {self.n_files} trip files, {self.n_samples:,} samples ({self.n_bytes / 1e6:.0f} MB) "
            f"in {self.seconds:.1f} s",
            f"  sensor faults: {len(self.faults)} ({', '.join(self.faults) or 'none'}); "
            f"lamps lit within the period: {self.lamps_lit}; tyre distractors: {self.distractors}",
            f"  logs:            {self.out / 'logs'}",
            f"  vehicles:        {self.out / 'vehicles.csv'}",
            f"  ground truth:    {self.out / 'truth.csv'}, {self.out / 'loggers.csv'}",
            f"  service history: {self.out / 'service_history.csv'}",
        ])


def _prepare_out(out: Path) -> None:
    """Make ``out`` ready; an earlier synthetic output there is replaced, anything else is refused."""
    if out.exists() and not out.is_dir():
        raise UserError(f"{out}: exists and is not a folder")
    if out.is_dir() and any(out.iterdir()):
        if not (out / "truth.csv").is_file():
            raise UserError(f"{out}: folder is not empty and holds no earlier synthetic fleet "
                            "(no truth.csv); choose an empty or new folder")
        shutil.rmtree(out / "logs", ignore_errors=True)
    (out / "logs").mkdir(parents=True, exist_ok=True)


def _write_tables(out: Path, plan: FleetPlan, fleet_rate_hz: float) -> None:
    registry = pd.DataFrame([{"vehicle_id": v.vehicle_id, **v.spec.registry_row(), "depot": v.depot.name,
                              "vin": v.vin} for v in plan.vehicles])
    registry.to_csv(out / "vehicles.csv", index=False, lineterminator="\n")
    truth = pd.DataFrame([{
        "vehicle_id": v.vehicle_id, "fault": v.fault.name, "component": parse_fault(v.fault.name).component,
        "onset_date": (plan.start + dt.timedelta(days=int(v.fault.onset_day))).isoformat(),
        "lamp_date": plan.lamp_dates[v.vehicle_id].isoformat() if plan.lamp_dates[v.vehicle_id] else "",
    } for v in plan.vehicles if v.fault is not None], columns=["vehicle_id", "fault", "component", "onset_date",
                                                                "lamp_date"])
    truth.to_csv(out / "truth.csv", index=False, lineterminator="\n")
    loggers = pd.DataFrame([{
        "vehicle_id": v.vehicle_id, "logger_kind": v.logger.name, "wheel_sensor_type": v.spec.wheel_sensor_kind,
        "rate_hz": logger_rate_hz(v.logger, fleet_rate_hz),
        "wheel_speed_step_kph": "" if v.logger.name == "telematics" else v.logger.wheel_step_kph,
    } for v in plan.vehicles], columns=LOGGERS_COLUMNS)
    loggers.to_csv(out / "loggers.csv", index=False, lineterminator="\n")
    history = pd.DataFrame([r for v in plan.vehicles for r in v.service_rows],
                           columns=["vehicle_id", "date", "kind", "component", "note"])
    history.sort_values(["date", "vehicle_id", "component"], kind="stable").to_csv(
        out / "service_history.csv", index=False, lineterminator="\n")


def _write_vehicle(out: Path, trips: list[TripPlan], seed: int, fleet_rate_hz: float,
                   analog: bool) -> tuple[int, int, int]:
    """(samples, bytes, files) of one vehicle's trips; a unit of work for a worker process.

    The trips go through the simulation in groups of about _GROUP_SAMPLES
    samples (the arrays of a group stay near the processor's cache) and
    through the writer in one call.
    """
    if not trips:
        return 0, 0, 0
    v = trips[0].vehicle
    folder = out / "logs" / v.vehicle_id
    n_samples = n_bytes = 0
    for group in _groups(trips, fleet_rate_hz):
        sims = simulate_trips(v.spec, v.health, [t.condition for t in group], vehicle_id=v.vehicle_id,
                              starts=[t.start for t in group], drives=[t.drive for t in group],
                              durations_s=[t.duration_s for t in group], fleet_rate_hz=fleet_rate_hz,
                              logger=v.logger, rngs=[np.random.default_rng([seed, v.index, 2, t.number]) for t in group])
        sizes = write_trips_csv([folder / f"{v.vehicle_id}_{t.start.strftime('%Y%m%dT%H%M%SZ')}.csv" for t in group],
                                v.style, vehicle_id=v.vehicle_id, vin=v.vin,
                                starts_ms=[t.start.value // 1_000_000 for t in group], lengths=sims.lengths,
                                time_ms=sims.time_ms, columns=sims.columns, polled=v.logger.name != "bus_capture",
                                analog=analog, read_lag_ms=sims.read_lag_ms)
        n_samples += sims.n_samples
        n_bytes += sum(sizes)
    return n_samples, n_bytes, len(trips)


#: Samples simulated in one pass (a group of whole trips).
_GROUP_SAMPLES = 60_000


def _groups(trips: list[TripPlan], fleet_rate_hz: float) -> list[list[TripPlan]]:
    """Consecutive trips in groups of about _GROUP_SAMPLES samples (by planned duration; at least one trip)."""
    groups: list[list[TripPlan]] = [[]]
    size = 0.0
    for t in trips:
        expected = t.duration_s * fleet_rate_hz
        if groups[-1] and size + expected > _GROUP_SAMPLES:
            groups.append([])
            size = 0.0
        groups[-1].append(t)
        size += expected
    return groups


def _default_workers(plan: FleetPlan, rate_hz: float) -> int:
    """Two processes (this one and one started) when the fleet is large enough to repay a
    process's start-up (~1 s of imports), else one."""
    expected = sum(t.duration_s for trips in plan.trips.values() for t in trips) * rate_hz
    return min(2, os.cpu_count() or 1) if expected > 1_500_000 else 1


def generate_fleet(out: Path, n_vehicles: int, days: int, seed: int, rate_hz: float = 10.0,
                   start: dt.date = dt.date(2026, 3, 2), progress: bool = False,
                   analog_accel: bool = False, workers: int | None = None,
                   config: SimConfig | str | None = None) -> FleetSummary:
    """Simulate the fleet and write its CSV logs and tables under ``out``.

    ``rate_hz`` is the bus-capture loggers' sample rate (times the
    configuration's factor); polled and telematics loggers keep their own.
    ``config`` is a SimConfig or its name ("tuning", the default, or "held-out").

    ``workers`` counts the processes that simulate, this one included. The
    files are byte-identical for a seed whatever ``workers`` is (each trip's
    random stream depends on seed, vehicle and trip only). ``analog_accel`` adds
    the accelerometers' analog voltages as extra columns.
    """
    if not rate_hz > 0:
        raise UserError(f"sample rate must be positive, got {rate_hz}")
    t0 = time.perf_counter()
    out = Path(out)
    plan = plan_fleet(n_vehicles, days, seed, start, config)
    _prepare_out(out)
    workers = workers or _default_workers(plan, rate_hz)
    # Largest vehicles first, so that the last job to finish is a small one.
    jobs = sorted((plan.trips[v.vehicle_id] for v in plan.vehicles), key=lambda trips: -sum(t.duration_s for t in trips))
    bar = tqdm(total=len(jobs), desc="synthesising vehicles", unit="vehicle", disable=not progress)
    results = []
    with ProcessPoolExecutor(workers - 1, mp_context=mp.get_context("spawn")) if workers > 1 else nullcontext() as pool:
        # The calling process is one of the workers. The pool's processes (started with spawn,
        # not fork: a fork does not copy the threads of numeric libraries' pools safely) take
        # jobs from the front of the queue, this process takes back the smallest from its end
        # (a job not yet handed to a process can be cancelled), so the two meet in the middle.
        futures = [pool.submit(_write_vehicle, out, trips, seed, rate_hz, analog_accel) for trips in jobs] if pool else []
        for future in futures:
            future.add_done_callback(lambda f: f.cancelled() or bar.update())
        for k in reversed(range(len(jobs))):
            if pool is None or futures[k].cancel():
                results.append(_write_vehicle(out, jobs[k], seed, rate_hz, analog_accel))
                bar.update()
        results += [future.result() for future in futures if not future.cancelled()]
    bar.close()
    n_samples, n_bytes, n_files = (sum(r[i] for r in results) for i in range(3))
    _write_tables(out, plan, rate_hz)
    faults = [v.fault.name for v in plan.vehicles if v.fault and parse_fault(v.fault.name).is_sensor_fault]
    summary = FleetSummary(out, FLEET_NAME, n_vehicles, days, n_files, n_samples, n_bytes, tuple(faults),
                           sum(d is not None for d in plan.lamp_dates.values()),
                           sum(1 for v in plan.vehicles if v.fault and not parse_fault(v.fault.name).is_sensor_fault),
                           time.perf_counter() - t0)
    log.info("synthetic fleet written: %s files, %s samples", n_files, n_samples)
    return summary
