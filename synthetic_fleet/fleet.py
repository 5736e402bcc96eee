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
import zlib
from concurrent.futures import ProcessPoolExecutor
from contextlib import nullcontext
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np
import pandas as pd
from tqdm import tqdm

from synthetic_fleet.config import SimConfig, WheelModule, sim_config
from synthetic_fleet.export import STYLES, ExportStyle, write_trips_csv
from synthetic_fleet.faults import (
    LAMP_SEVERITY,
    PER_WHEEL_KINDS,
    SENSOR_FAULT_KINDS,
    TYRE_DISTRACTOR_KINDS,
    parse_fault,
)
from synthetic_fleet.logger import LOGGER_KINDS, LOGGERS, LoggerProfile, grid_rate_hz, logger_rate_hz
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
#: Severity cap of a growing sensor fault (its days from onset to the lamp: SimConfig.lamp_after_days).
SEVERITY_CAP = 1.6 * LAMP_SEVERITY
#: Trip pattern.
TRIPS_PER_DAY_P = (0.30, 0.35, 0.23, 0.12)  # 1, 2, 3, 4 trips on a working day
ACTIVE_P_BY_WEEKDAY = (0.93, 0.93, 0.93, 0.93, 0.9, 0.35, 0.1)
TRIP_MEDIAN_MIN, TRIP_SIGMA, TRIP_MIN_MAX_MIN = 9.0, 0.5, (4.0, 45.0)
DRIVE_P = {"town": 0.35, "suburban": 0.25, "highway": 0.10, "mixed": 0.30}
UNRECORDED_SHARE = 0.3  # tyre services the workshop did not write down
#: Tread wear of the non-driven axle relative to the driven one (SimConfig.tyre_wear_per_day).
UNDRIVEN_WEAR = 0.6
#: Seasonal tyre swaps (month, day) windows: summer tyres in spring, winter tyres in autumn; the sets
#: differ in size and tread depth by up to this much rolling radius.
SWAP_WINDOWS = (((3, 10), (4, 20), "summer"), ((10, 15), (11, 30), "winter"))
SWAP_RADIUS_FRAC = (-0.006, 0.004)
#: Below this daily ambient temperature (°C) roads are often slippery.
FREEZING_C, SLIPPERY_BELOW_FREEZING_P = 1.0, 0.6
#: ESC-off is likelier when towing or on a slippery day (getting a stuck vehicle moving).
ESC_OFF_BOOST = 4.0
#: Intermittent wheel-sensor faults: chance per trip of a dropout episode, growing after onset.
INTERMITTENT_P = (0.08, 0.03, 0.5)  # at onset, per day after, at most
#: lamp_episodes.csv, the ESC lamp's non-fault episodes and stored intermittent codes (ground truth).
LAMP_EPISODE_COLUMNS = ("vehicle_id", "trip_start", "kind", "from_s", "to_s")
#: truth.csv: one row per vehicle with a fault or tyre distractor; growth gradual|sudden|intermittent.
TRUTH_COLUMNS = ("vehicle_id", "fault", "component", "onset_date", "lamp_date", "growth")
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
    #: "gradual", "sudden" (a step: nothing to see before it) or "intermittent" (episodes with a stored code).
    growth: str = "gradual"

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


def _platform_name(i: int) -> str:
    return PLATFORMS[(i // len(DEPOTS) + i) % len(PLATFORMS)]


def _roles(n: int, rng: np.random.Generator) -> list[str | None]:
    """One fault name (or None) per vehicle: every sensor-fault kind before any repeats, then a second
    wheel-sensor fault, which goes to a vehicle of the other wheel-sensor type (passive sensors fade,
    active ones fail suddenly or intermittently)."""
    n_faulty = int(round(FAULTY_SHARE * n))
    n_tyre = int(round(TYRE_DISTRACTOR_SHARE * n))
    kinds = [str(k) for k in rng.permutation(SENSOR_FAULT_KINDS)] + ["air_gap"]
    faults = [kinds[i % len(kinds)] for i in range(n_faulty)]
    faults += [TYRE_DISTRACTOR_KINDS[i % 2] for i in range(n_tyre)]
    names = [f"{k}_{POSITIONS[rng.integers(4)]}" if k in PER_WHEEL_KINDS else k for k in faults]
    roles: list[str | None] = names + [None] * (n - len(names))
    roles = [roles[i] for i in rng.permutation(n)]
    gaps = [i for i, r in enumerate(roles) if r is not None and r.startswith("air_gap")]
    sensor = [platform(_platform_name(i)).wheel_sensor_kind for i in range(n)]
    if len(gaps) >= 2 and len({sensor[i] for i in gaps}) == 1:
        other = next((i for i in range(n) if sensor[i] != sensor[gaps[-1]] and i not in gaps), None)
        if other is not None:
            roles[gaps[-1]], roles[other] = roles[other], roles[gaps[-1]]
    return roles


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


def _fault_plan(name: str, days: int, lamp_within: bool, spec: Platform, config: SimConfig,
                rng: np.random.Generator) -> FaultPlan:
    kind = parse_fault(name).kind
    onset = rng.uniform(0.1, 0.45) * days
    remaining = max(days - onset, 1.0)
    if kind == "tyre_deflation":
        return FaultPlan(name, onset, step_severity=rng.uniform(0.5, 2.0), ramp_days=rng.uniform(7.0, 21.0))
    if kind == "tyre_mismatch":
        return FaultPlan(name, onset, step_severity=rng.uniform(0.7, 1.3), growth="sudden")
    if kind == "steer_offset" and rng.random() < 0.5:  # after an alignment without recalibration
        return FaultPlan(name, np.floor(onset) + 0.3, step_severity=rng.uniform(0.8, 1.4), growth="sudden")
    if kind == "air_gap" and spec.wheel_sensor_kind == "active":
        # A powered sensor's signal does not fade with a widening gap: full until it is lost,
        # for good (sudden) or for moments (intermittent).
        if rng.random() < config.active_sudden_share:
            return FaultPlan(name, onset, step_severity=1.2 * LAMP_SEVERITY, growth="sudden")
        return FaultPlan(name, onset, step_severity=1.0, growth="intermittent")
    factor = rng.uniform(0.45, 0.85) if lamp_within else rng.uniform(1.15, 2.0)
    lamp_after = float(np.clip(factor * remaining, *config.lamp_after_days))
    return FaultPlan(name, onset, lamp_after_days=lamp_after, shape=float(rng.choice(config.growth_shapes)))


def _seasonal_swaps(start: dt.date, days: int, share: float, rng: np.random.Generator) -> list[TyreEvent]:
    """A set of summer or winter tyres fitted on a day of each swap window the period covers (for the
    vehicles of ``share``): all four tyres, another size and tread depth."""
    events = []
    for year in range(start.year, (start + dt.timedelta(days=days)).year + 1):
        for (m0, d0), (m1, d1), season in SWAP_WINDOWS:
            lo, hi = dt.date(year, m0, d0), dt.date(year, m1, d1)
            day = (lo - start).days + int(rng.integers(0, (hi - lo).days + 1))
            if rng.random() < share and 0 <= day < days:
                events.append(TyreEvent(day + 0.3, "tyre_change", POSITIONS, rng.uniform(*SWAP_RADIUS_FRAC),
                                        rng.random() >= UNRECORDED_SHARE, f"seasonal swap: {season} tyres fitted"))
    return events


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


def _tyre_factor(events: tuple[TyreEvent, ...], day: float, health: SensorHealth, wear_per_day: np.ndarray
                 ) -> np.ndarray:
    """Rolling radius of each position on ``day`` relative to its healthy value (tracktrue order):
    the tyres fitted, each worn by ``wear_per_day`` (per position) since it went on."""
    radius = health.wheel_radius_factor.copy()
    worn = np.zeros(4)  # radius lost to wear so far, per tyre where it sits
    since = 0.0
    spare_saved: dict[int, tuple[float, float]] = {}
    for e in events:
        if e.day > day:
            break
        worn += wear_per_day * (e.day - since)
        since = e.day
        idx = [POSITIONS.index(p) for p in e.positions]
        if e.kind == "tyre_rotation":  # fl<->rl, fr<->rr
            radius, worn = radius[[2, 3, 0, 1]], worn[[2, 3, 0, 1]]
        elif e.kind == "tyre_change":
            radius[idx] = 1.0 + e.radius_change + (radius[idx] - 1.0) * 0.3
            worn[idx] = 0.0
        elif e.kind == "spare_fitted":
            spare_saved[idx[0]] = radius[idx[0]], worn[idx[0]]
            radius[idx[0]], worn[idx[0]] = 1.0 + e.radius_change, 0.0
        elif e.kind == "spare_removed":
            radius[idx[0]], worn[idx[0]] = spare_saved.pop(idx[0], (radius[idx[0]], worn[idx[0]]))
    worn += wear_per_day * (day - since)
    return radius * (1.0 - worn) / health.wheel_radius_factor


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
        spec = platform(_platform_name(i))
        vid = vehicle_id(depot, depot_numbers[depot.code])
        fault = None
        if role is not None:
            lamp_within = parse_fault(role).is_sensor_fault and sensor_faults_seen % 2 == 0
            sensor_faults_seen += parse_fault(role).is_sensor_fault
            fault = _fault_plan(role, days, lamp_within, spec, config, rng)
        swaps = _seasonal_swaps(start, days, config.seasonal_swap_share, np.random.default_rng([seed, i, 4]))
        events = tuple(sorted(_tyre_events(days, fault, rng) + swaps, key=lambda e: e.day))
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
        plan.trips[v.vehicle_id], plan.lamp_dates[v.vehicle_id] = _vehicle_trips(v, start, days, seed, config)
    return plan


def _weather(depot_index: int, days: int, seed: int, config: SimConfig) -> tuple[np.ndarray, np.ndarray]:
    """(daily ambient °C, slippery roads) of one depot's area: shared by its vehicles."""
    rng = np.random.default_rng([seed, 1_000_033, depot_index])
    day = np.arange(days)
    ambient = 5.0 + 12.0 * day / 90.0 + rng.normal(0.0, 3.0, days)
    slippery = rng.random(days) < np.where(ambient < FREEZING_C, SLIPPERY_BELOW_FREEZING_P, config.slippery_day_prob)
    return ambient, slippery


def _lamp_without_fault(duration_s: float, slippery: bool, towing: bool, config: SimConfig,
                        rng: np.random.Generator) -> dict:
    """The ESC lamp's episodes of one trip that are no fault: interventions on a slippery day
    (a few seconds each) and the driver switching ESC off (to the trip's end)."""
    changes: dict = {}
    if slippery and rng.random() < config.intervention_trip_prob:
        starts = np.sort(rng.uniform(0.1, 0.9, int(rng.integers(1, 3)))) * duration_s
        changes["esc_flashes"] = tuple((float(a), float(a + rng.uniform(1.5, 5.0))) for a in starts)
    boost = ESC_OFF_BOOST if (slippery or towing) else 1.0
    if rng.random() < config.esc_off_trip_prob * boost:
        changes["esc_off_from_s"] = float(rng.uniform(0.05, 0.8) * duration_s)
    return changes


def _vehicle_trips(v: VehiclePlan, start: dt.date, days: int, seed: int,
                   config: SimConfig) -> tuple[list[TripPlan], dt.date | None]:
    rng = np.random.default_rng([seed, v.index, 1])
    lamp_rng = np.random.default_rng([seed, v.index, 6])  # lamp episodes without a fault, intermittent codes
    idle_from = rng.uniform(0, days) if rng.random() < 0.3 else np.inf
    idle_until = idle_from + rng.uniform(3, 8)
    habit = rng.choice([-1.0, 1.0])  # nose into the slope or out of it, most nights the same way
    grade = v.depot.yard_grade * habit  # where the vehicle stands: the yard, or its last stop
    tows = lamp_rng.random() < config.towing_vehicle_share
    ambient, slippery = _weather(DEPOTS.index(v.depot), days, seed, config)
    driven = [0, 1] if v.spec.driven_axle == "front" else [2, 3]
    wear = np.full(4, UNDRIVEN_WEAR * config.tyre_wear_per_day)
    wear[driven] = config.tyre_wear_per_day
    rough_share = min(1.0, v.depot.rough_trip_share * config.rough_share_factor)
    fault = parse_fault(v.fault.name) if v.fault else None
    growth = v.fault.growth if v.fault else "gradual"
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
        ambient_day = ambient[day] + rng.normal(0.0, 1.0)
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
            duration_s = minutes * 60.0
            lamp_from = None
            if fault is not None and fault.is_sensor_fault and severity >= LAMP_SEVERITY:
                if lamp_date is None:
                    lamp_date = date
                    lamp_from = rng.uniform(0.2, 0.7) * duration_s
                else:
                    lamp_from = 0.0
            episode: dict = {}
            if growth == "sudden" and lamp_from is not None and fault.kind == "air_gap":
                episode["dead_from_s"] = lamp_from
            if growth == "intermittent" and severity > 0:
                p0, per_day, cap = INTERMITTENT_P
                if lamp_rng.random() < min(cap, p0 + per_day * (t_day - v.fault.onset_day)):
                    lo = float(lamp_rng.uniform(0.15, 0.85) * duration_s)
                    episode["dropout_bursts"] = ((lo, lo + float(lamp_rng.uniform(0.4, 3.0))),)
                    lamp_from = lo  # the monitor stores its code and lights the lamp until the key is off
                    lamp_date = lamp_date or date
            load = 1.0 if rng.random() < config.heavy_load_share else float(rng.random() ** 1.5)
            towing = bool(tows and lamp_rng.random() < config.towing_trip_share)
            cond = TripCondition(
                fault=v.fault.name if severity > 0 else None, severity=severity,
                tyre_factor=_tyre_factor(v.tyre_events, t_day, v.health, wear), load=load,
                ambient_c=ambient_day + 4.0 * np.sin(2 * np.pi * (clock_h - 9.0) / 24.0),
                rough_road=bool(rng.random() < rough_share),
                park_grade_start=float(grade), park_grade_end=float(end_grade), lamp_from_s=lamp_from,
                towing=towing, growth=growth, **episode,
                **_lamp_without_fault(duration_s, bool(slippery[day]), towing, config, lamp_rng))
            drive = str(rng.choice(list(DRIVE_P), p=list(DRIVE_P.values())))
            trips.append(TripPlan(v, len(trips), pd.Timestamp(begin), duration_s, drive, cond))
            grade = end_grade
            clock_h += minutes / 60.0 + rng.uniform(0.25, 2.0)
    return trips, lamp_date


def lamp_episodes(plan: FleetPlan) -> pd.DataFrame:
    """Every ESC-lamp episode that is no lamp event (interventions, ESC off) and every stored
    intermittent code, per trip (lamp_episodes.csv): seconds from the trip's start; ``to_s`` empty
    where the lamp stays lit until the key is turned off (the trip's end)."""
    rows = []
    for v in plan.vehicles:
        for t in plan.trips[v.vehicle_id]:
            c = t.condition
            start = t.start.strftime("%Y-%m-%dT%H:%M:%SZ")
            rows += [(v.vehicle_id, start, "intervention", lo, hi) for lo, hi in c.esc_flashes]
            if c.esc_off_from_s is not None:
                rows.append((v.vehicle_id, start, "esc_off", c.esc_off_from_s, np.nan))
            if c.growth == "intermittent" and c.dropout_bursts:
                rows.append((v.vehicle_id, start, "intermittent_code", c.lamp_from_s, np.nan))
    frame = pd.DataFrame(rows, columns=LAMP_EPISODE_COLUMNS)
    for col in ("from_s", "to_s"):
        frame[col] = frame[col].round(3)
    return frame


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
    config: str = "tuning"
    loggers: tuple[tuple[str, int], ...] = ()  # (logger kind, vehicles)
    #: Instants simulated (all signals of a vehicle at one moment of its simulation grid); n_samples are
    #: the rows logged from them.
    n_simulated: int = 0

    def describe(self) -> str:
        return "\n".join([
            f"{self.fleet_name}: {self.n_vehicles} vehicles over {self.days} days "
            f"(simulator configuration: {self.config})",
            "  loggers: " + ", ".join(f"{n} {kind}" for kind, n in self.loggers),
            f"  {self.n_files} trip files, {self.n_samples:,} samples ({self.n_bytes / 1e6:.0f} MB) "
            f"in {self.seconds:.1f} s",
            f"  sensor faults: {len(self.faults)} ({', '.join(self.faults) or 'none'}); "
            f"lamps lit within the period: {self.lamps_lit}; tyre distractors: {self.distractors}",
            f"  logs:            {self.out / 'logs'}",
            f"  vehicles:        {self.out / 'vehicles.csv'}",
            f"  ground truth:    {self.out / 'truth.csv'}, {self.out / 'loggers.csv'}, "
            f"{self.out / 'lamp_episodes.csv'}",
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


#: Every vehicle is on a service interval; its next service falls within this many days after the
#: simulated period (so the inspection plan can combine inspections with services).
NEXT_SERVICE_WITHIN_DAYS = 45


def next_service_date(plan: FleetPlan, vehicle_id: str) -> dt.date:
    """Spread by a hash of seed and id, not drawn from a random stream, so no simulated value moves."""
    offset = zlib.crc32(f"{plan.seed}|{vehicle_id}".encode()) % (NEXT_SERVICE_WITHIN_DAYS + 1)
    return plan.start + dt.timedelta(days=plan.days + offset)


def _write_tables(out: Path, plan: FleetPlan, fleet_rate_hz: float) -> None:
    registry = pd.DataFrame([{"vehicle_id": v.vehicle_id, **v.spec.registry_row(), "depot": v.depot.name,
                              "vin": v.vin, "next_service_date": next_service_date(plan, v.vehicle_id).isoformat()}
                             for v in plan.vehicles])
    registry.to_csv(out / "vehicles.csv", index=False, lineterminator="\n")
    truth = pd.DataFrame([{
        "vehicle_id": v.vehicle_id, "fault": v.fault.name, "component": parse_fault(v.fault.name).component,
        "onset_date": (plan.start + dt.timedelta(days=int(v.fault.onset_day))).isoformat(),
        "lamp_date": plan.lamp_dates[v.vehicle_id].isoformat() if plan.lamp_dates[v.vehicle_id] else "",
        "growth": v.fault.growth,
    } for v in plan.vehicles if v.fault is not None], columns=TRUTH_COLUMNS)
    truth.to_csv(out / "truth.csv", index=False, lineterminator="\n")
    loggers = pd.DataFrame([{
        "vehicle_id": v.vehicle_id, "logger_kind": v.logger.name, "wheel_sensor_type": v.spec.wheel_sensor_kind,
        "rate_hz": logger_rate_hz(v.logger, fleet_rate_hz),
        "wheel_speed_step_kph": "" if v.logger.name == "telematics" else v.logger.wheel_step_kph,
    } for v in plan.vehicles], columns=LOGGERS_COLUMNS)
    loggers.to_csv(out / "loggers.csv", index=False, lineterminator="\n")
    lamp_episodes(plan).to_csv(out / "lamp_episodes.csv", index=False, lineterminator="\n")
    history = pd.DataFrame([r for v in plan.vehicles for r in v.service_rows],
                           columns=["vehicle_id", "date", "kind", "component", "note"])
    history.sort_values(["date", "vehicle_id", "component"], kind="stable").to_csv(
        out / "service_history.csv", index=False, lineterminator="\n")


def _write_vehicle(out: Path, trips: list[TripPlan], seed: int, fleet_rate_hz: float, analog: bool,
                   module: WheelModule) -> tuple[int, int, int, int]:
    """(samples, bytes, files, instants simulated) of one vehicle's trips; a unit of work for a worker process.

    The trips go through the simulation in groups of about _GROUP_SAMPLES
    samples (the arrays of a group stay near the processor's cache) and
    through the writer in one call.
    """
    if not trips:
        return 0, 0, 0, 0
    v = trips[0].vehicle
    folder = out / "logs" / v.vehicle_id
    n_samples = n_bytes = n_simulated = 0
    for group in _groups(trips, grid_rate_hz(v.logger, fleet_rate_hz)):
        sims = simulate_trips(v.spec, v.health, [t.condition for t in group], vehicle_id=v.vehicle_id,
                              starts=[t.start for t in group], drives=[t.drive for t in group],
                              durations_s=[t.duration_s for t in group], fleet_rate_hz=fleet_rate_hz,
                              logger=v.logger, rngs=[np.random.default_rng([seed, v.index, 2, t.number]) for t in group],
                              module=module)
        sizes = write_trips_csv([folder / f"{v.vehicle_id}_{t.start.strftime('%Y%m%dT%H%M%SZ')}.csv" for t in group],
                                v.style, vehicle_id=v.vehicle_id, vin=v.vin,
                                starts_ms=[t.start.value // 1_000_000 for t in group], lengths=sims.lengths,
                                time_ms=sims.time_ms, columns=sims.columns, polled=v.logger.name != "bus_capture",
                                analog=analog, read_lag_ms=sims.read_lag_ms, wheel_step_kph=v.logger.wheel_step_kph)
        n_samples += sims.n_samples
        n_bytes += sum(sizes)
        n_simulated += sims.n_simulated
    return n_samples, n_bytes, len(trips), n_simulated


#: Samples simulated in one pass (a group of whole trips).
_GROUP_SAMPLES = 60_000


def _groups(trips: list[TripPlan], grid_hz: float) -> list[list[TripPlan]]:
    """Consecutive trips in groups of about _GROUP_SAMPLES samples (by planned duration; at least one trip)."""
    groups: list[list[TripPlan]] = [[]]
    size = 0.0
    for t in trips:
        expected = t.duration_s * grid_hz
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
        module = plan.config.wheel_module
        futures = ([pool.submit(_write_vehicle, out, trips, seed, rate_hz, analog_accel, module) for trips in jobs]
                   if pool else [])
        for future in futures:
            future.add_done_callback(lambda f: f.cancelled() or bar.update())
        for k in reversed(range(len(jobs))):
            if pool is None or futures[k].cancel():
                results.append(_write_vehicle(out, jobs[k], seed, rate_hz, analog_accel, module))
                bar.update()
        results += [future.result() for future in futures if not future.cancelled()]
    bar.close()
    n_samples, n_bytes, n_files, n_simulated = (sum(r[i] for r in results) for i in range(4))
    _write_tables(out, plan, rate_hz)
    faults = [v.fault.name for v in plan.vehicles if v.fault and parse_fault(v.fault.name).is_sensor_fault]
    summary = FleetSummary(out, FLEET_NAME, n_vehicles, days, n_files, n_samples, n_bytes, tuple(faults),
                           sum(d is not None for d in plan.lamp_dates.values()),
                           sum(1 for v in plan.vehicles if v.fault and not parse_fault(v.fault.name).is_sensor_fault),
                           time.perf_counter() - t0, plan.config.name,
                           tuple((kind, sum(v.logger.name == kind for v in plan.vehicles)) for kind in LOGGER_KINDS),
                           n_simulated)
    log.info("synthetic fleet written: %s files, %s samples", n_files, n_samples)
    return summary
