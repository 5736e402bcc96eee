"""From driven motion to what the chassis sensors report (canonical SI signals).

Healthy sensors are imperfect too: each wheel's effective rolling radius
differs by a few tenths of a percent, tyres slip a little under braking and
traction, and every sensor has noise and a small offset of realistic size
that drifts with temperature within its specification (magnitudes: common
practice, from memory). Faults and confounders act on the same chain, so a
fault shows exactly where its physics puts it and nowhere else.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from synthetic_fleet.config import WheelModule
from synthetic_fleet.drive import DriveTrace
from synthetic_fleet.faults import MAGNITUDE_AT_SEVERITY_1 as MAG, parse_fault
from synthetic_fleet.platforms import Platform
from synthetic_fleet.tone_ring import module_speeds
from synthetic_fleet.vehicle_motion import (
    road_wheel_angle_for_curvature,
    understeer_coefficient,
    wheel_centre_speeds,
    yaw_rate_single_track,
)
from tracktrue.schema import POSITIONS
from tracktrue.units import DEG_RAD, G0_MPS2

#: Healthy sensor imperfections (1-sigma unless said otherwise).
WHEEL_RADIUS_SPREAD = 0.0025  # relative, per wheel
TOOTH_POSITION_ERROR = 0.002  # of a pitch, per tooth of a healthy tone ring
MAX_TEETH = 128
YAW_NOISE_DPS = 0.07
YAW_OFFSET_DPS = 0.12  # clipped at +-0.3
YAW_GAIN_ERROR = 0.005
YAW_TEMP_COEFF_DPS_PER_C = 0.005  # clipped at +-0.01
STEER_NOISE_DEG = 0.1
STEER_OFFSET_DEG = 0.8
ACCEL_NOISE_MPS2 = 0.03
ACCEL_OFFSET_G = 0.004  # clipped at +-0.01
ACCEL_TEMP_COEFF_G_PER_C = 0.00008  # clipped at +-0.00015
#: Sensor temperature rises by this much towards a steady state after start.
WARMUP_C, WARMUP_TAU_S, REFERENCE_C = 12.0, 900.0, 20.0
#: Wheel reads 0 below this speed (passive sensors: no usable amplitude).
CUTOFF_MPS = {"active": 0.1, "passive": 0.8}
#: Longitudinal slip per g of deceleration (front, rear) and of traction on the driven axle.
BRAKE_SLIP_PER_G = (0.04, 0.028)
TRACTION_SLIP_PER_G = 0.05
#: Rough road: speed ripple common to all wheels (the body bounces), from each wheel track's profile
#: (the rear wheel meets it L/v after the front), each wheel's own; extra accelerometer and yaw vibration.
ROUGH_RIPPLE_FRAC, ROUGH_TRACK_FRAC, ROUGH_WHEEL_FRAC = 0.006, 0.0015, 0.0015
ROUGH_ACCEL_MPS2, ROUGH_YAW_DPS = 0.35, 0.25
ROAD_PROFILE_STEP_M = 0.5
#: Rolling-radius loss of a tyre under full axle load (common practice, from memory: a few tenths of a percent).
LOADED_RADIUS_FRAC = 0.003
#: A trailer's effect on pitch and understeer, as this share of a full payload.
TOWING_PITCH_LOAD = 0.6


@dataclass(frozen=True)
class SensorHealth:
    """One vehicle's healthy sensor imperfections (fixed for its life in the simulation)."""

    wheel_radius_factor: np.ndarray
    yaw_offset_dps: float
    yaw_gain_error: float
    yaw_temp_coeff_dps_per_c: float
    steer_offset_deg: float
    accel_offset_g: np.ndarray  # (long, lat)
    accel_temp_coeff_g_per_c: np.ndarray
    fault_sign: float  # direction of an offset / gain fault, should one develop
    #: Each wheel's tone-ring tooth position errors (fraction of a pitch), the first N teeth used.
    tooth_error: np.ndarray = field(default_factory=lambda: np.zeros((4, MAX_TEETH)))
    #: Where a tone-ring defect would sit (first damaged tooth) and which way each damaged edge moves.
    ring_defect_tooth: int = 0
    ring_defect_sign: np.ndarray = field(default_factory=lambda: np.array([1.0, -1.0, 1.0]))

    @classmethod
    def draw(cls, rng: np.random.Generator) -> "SensorHealth":
        return cls(
            wheel_radius_factor=1.0 + np.clip(rng.normal(0, WHEEL_RADIUS_SPREAD, 4), -0.006, 0.006),
            yaw_offset_dps=float(np.clip(rng.normal(0, YAW_OFFSET_DPS), -0.3, 0.3)),
            yaw_gain_error=float(rng.normal(0, YAW_GAIN_ERROR)),
            yaw_temp_coeff_dps_per_c=float(np.clip(rng.normal(0, YAW_TEMP_COEFF_DPS_PER_C), -0.01, 0.01)),
            steer_offset_deg=float(np.clip(rng.normal(0, STEER_OFFSET_DEG), -2.0, 2.0)),
            accel_offset_g=np.clip(rng.normal(0, ACCEL_OFFSET_G, 2), -0.01, 0.01),
            accel_temp_coeff_g_per_c=np.clip(rng.normal(0, ACCEL_TEMP_COEFF_G_PER_C, 2), -0.00015, 0.00015),
            fault_sign=float(rng.choice([-1.0, 1.0])),
            tooth_error=np.clip(rng.normal(0, TOOTH_POSITION_ERROR, (4, MAX_TEETH)), -0.01, 0.01),
            ring_defect_tooth=int(rng.integers(0, 40)),
            ring_defect_sign=rng.choice([-1.0, 1.0], 3),
        )


@dataclass(frozen=True)
class TripCondition:
    """The vehicle's state during one trip: fault severity, tyres, load, weather, road."""

    fault: str | None = None
    severity: float = 0.0
    #: Effective rolling radius of each tyre relative to its healthy value
    #: (tyre changes, rotations, a compact spare, deflation, a mismatched tyre).
    tyre_factor: np.ndarray = field(default_factory=lambda: np.ones(4))
    load: float = 0.0  # 0 empty .. 1 full
    ambient_c: float = 15.0
    rough_road: bool = False
    park_grade_start: float = 0.0  # rise over run
    park_grade_end: float = 0.0
    #: Seconds into the trip when the lamp lights (0: already lit at start; None: off).
    lamp_from_s: float | None = None
    towing: bool = False
    #: How the fault shows: "gradual" (grows with severity), "sudden" (a powered wheel sensor dead from
    #: ``dead_from_s``), "intermittent" (dead during ``dropout_bursts``, (from_s, to_s) pairs).
    growth: str = "gradual"
    dead_from_s: float | None = None
    dropout_bursts: tuple[tuple[float, float], ...] = ()
    #: ESC lamp without a fault: flashes during stability interventions ((from_s, to_s) pairs), and
    #: steadily from ``esc_off_from_s`` to the trip's end when the driver switches ESC off.
    esc_flashes: tuple[tuple[float, float], ...] = ()
    esc_off_from_s: float | None = None


def _fault_size(cond: TripCondition, kind: str, key: str) -> float:
    if cond.fault is None or parse_fault(cond.fault).kind != kind:
        return 0.0
    return cond.severity * MAG[key]


def _tyre_fault_factor(cond: TripCondition, sign: float) -> np.ndarray:
    """Rolling-radius factor of the tyre distractors: a deflating tyre shrinks, a
    mismatched replacement is larger or smaller by a step."""
    factor = np.ones(4)
    if cond.fault is not None:
        fault = parse_fault(cond.fault)
        if fault.kind in ("tyre_deflation", "tyre_mismatch"):
            i = POSITIONS.index(fault.position)
            factor[i] = (1.0 - _fault_size(cond, "tyre_deflation", "tyre_deflation_frac")
                         + sign * _fault_size(cond, "tyre_mismatch", "tyre_mismatch_frac"))
    return factor


def _road_input(trace: DriveTrace, spec: Platform, rough_rngs: list[np.random.Generator],
                conds: list[TripCondition]) -> np.ndarray | None:
    """Relative wheel-speed ripple (4, n) of rough trips (None: no rough trip): the body's bounce, common
    to all wheels; each wheel track's road profile (left, right) met by the front wheel at distance s
    and by the rear wheel at s − L, i.e. L/v later; and each wheel's own ripple."""
    if not any(c.rough_road for c in conds):
        return None
    trips = trace.trips
    dt = 1.0 / trace.rate_hz
    dist = trips.cumsum(trace.speed_mps)
    dist *= dt
    ripple = np.zeros((4, trips.total), np.float32)
    for cond, rng, a, b in zip(conds, rough_rngs, trips.starts, trips.ends):
        if not cond.rough_road:
            continue
        n = b - a
        s = dist[a:b]
        points = int((s[-1] if n else 0.0) / ROAD_PROFILE_STEP_M) + 3
        lead = int(np.ceil(spec.wheelbase_m / ROAD_PROFILE_STEP_M)) + 1
        profile = rng.standard_normal((2, points + lead), dtype=np.float32)  # left, right track
        front = s / ROAD_PROFILE_STEP_M + lead
        rear = front - spec.wheelbase_m / ROAD_PROFILE_STEP_M
        grid = np.arange(points + lead)
        for track, (fi, ri) in enumerate(((0, 2), (1, 3))):
            ripple[fi, a:b] = np.interp(front, grid, profile[track])
            ripple[ri, a:b] = np.interp(rear, grid, profile[track])
        bounce = rng.standard_normal(n, dtype=np.float32)
        bounce = np.convolve(bounce, np.ones(3, np.float32) / np.sqrt(np.float32(3)), mode="same")
        ripple[:, a:b] *= ROUGH_TRACK_FRAC
        ripple[:, a:b] += ROUGH_RIPPLE_FRAC * bounce + ROUGH_WHEEL_FRAC * rng.standard_normal((4, n), dtype=np.float32)
    return ripple


def _tone_rings(spec: Platform, health: SensorHealth, cond: TripCondition) -> tuple[np.ndarray, np.ndarray]:
    """(tooth position errors (4, N) in pitches, missing teeth (4, N)) of one trip: the healthy rings'
    tolerances; a damaged ring is bent (edge errors once and twice per turn) and has three damaged
    teeth whose edges move with severity, the first broken off from ``tone_ring_missing_severity``."""
    n = spec.tone_ring_teeth
    error = health.tooth_error[:, :n].copy()
    missing = np.zeros((4, n), dtype=bool)
    if _fault_size(cond, "tone_ring", "tone_ring_edge_error_pitch") > 0:
        i = POSITIONS.index(parse_fault(cond.fault).position)
        turn = 2 * np.pi * np.arange(n) / n
        bend = MAG["tone_ring_bend_pitch"] * (np.sin(turn + health.ring_defect_tooth) + 0.5 * np.sin(2 * turn + 1.3))
        teeth = (health.ring_defect_tooth + np.arange(3)) % n
        error[i] += cond.severity * bend
        error[i, teeth] += health.ring_defect_sign * cond.severity * MAG["tone_ring_edge_error_pitch"] * np.array(
            [1.0, 0.6, 0.3])
        np.clip(error[i], -0.45, 0.45, out=error[i])
        missing[i, teeth[0]] = cond.severity >= MAG["tone_ring_missing_severity"]
    return error, missing


def _wheel_signals(trace: DriveTrace, spec: Platform, health: SensorHealth, conds: list[TripCondition],
                   centre: np.ndarray, ring_rngs: list[np.random.Generator], rough_rngs: list[np.random.Generator],
                   fault_rngs: list[np.random.Generator], module: WheelModule,
                   wheel_at: list[np.ndarray] | None = None) -> np.ndarray:
    """Wheel-speed readings (4, n) of all trips from wheel-centre speeds (4, n), as the ABS module
    publishes them from tooth edges (tone_ring.py), then lost where the sensor gives no signal;
    with ``wheel_at`` (each wheel's samples that are read) only there, NaN elsewhere."""
    trips = trace.trips
    a_g = trace.accel_mps2 / G0_MPS2
    front, rear = BRAKE_SLIP_PER_G
    slip = np.minimum(a_g, 0.0)[None, :] * np.array([front, front, rear, rear])[:, None]
    driven = [0, 1] if spec.driven_axle == "front" else [2, 3]
    traction = np.maximum(a_g, 0.0) * TRACTION_SLIP_PER_G
    for wheel in driven:
        slip[wheel] += traction
    axle_load = np.array([[0.3 * c.load, 0.3 * c.load, c.load + 0.6 * c.towing, c.load + 0.6 * c.towing]
                          for c in conds]).T
    radius = np.array([health.wheel_radius_factor * c.tyre_factor * _tyre_fault_factor(c, health.fault_sign)
                       for c in conds]).T * (1.0 - LOADED_RADIUS_FRAC * np.minimum(axle_load, 1.5))
    # The wheel turns at its speed over its rolling radius; the module converts the
    # tooth rate with the nominal radius, so a smaller tyre (or more slip) reads faster.
    true_speed = slip  # (4, n) arrays are large: worked on in place
    true_speed += 1.0
    true_speed *= centre
    for k, (a, b) in enumerate(zip(trips.starts.tolist(), trips.ends.tolist())):
        true_speed[:, a:b] /= radius[:, k:k + 1]
    ripple = _road_input(trace, spec, rough_rngs, conds)
    if ripple is not None:
        true_speed *= 1.0 + ripple
    phases = np.array([rng.uniform(0.0, 2 * np.pi, 4) for rng in ring_rngs]).T  # (4, trips)
    errors, missing = (np.stack(x, axis=1) for x in zip(*(_tone_rings(spec, health, c) for c in conds)))
    omega_rps = true_speed
    omega_rps /= spec.tyre_radius_m
    args = (omega_rps, trips, trace.rate_hz, spec.tyre_radius_m, spec.tone_ring_teeth, module,
            phases, errors, missing)
    if wheel_at is None:
        wheels = module_speeds(*args)
    else:
        wheels = np.full_like(omega_rps, np.nan)
        at = np.concatenate([i * trips.total + idx for i, idx in enumerate(wheel_at)])
        wheels.flat[at] = module_speeds(*args, at=at)
    cutoff_mps = CUTOFF_MPS[spec.wheel_sensor_kind]
    wheels[wheels < cutoff_mps] = 0.0
    for cond, fault_rng, a, b in zip(conds, fault_rngs, trips.starts, trips.ends):
        fault = parse_fault(cond.fault) if cond.fault else None
        if fault is None or fault.kind != "air_gap":
            continue
        wheel = wheels[POSITIONS.index(fault.position), a:b]
        t = trace.t_s[a:b]
        if cond.growth == "gradual" and cond.severity > 0:
            # A passive sensor's amplitude grows with speed (common practice): as the
            # gap widens, the speed below which it is too weak to count teeth rises.
            cutoff = cutoff_mps + MAG["air_gap_dropout_speed_mps"] * cond.severity**1.2
            runout = np.exp(0.12 * fault_rng.standard_normal(b - a, dtype=np.float32))  # ring and bearing runout
            wheel[wheel * runout < cutoff] = 0.0
        if cond.dead_from_s is not None:  # a powered sensor gives full signal until it gives none
            wheel[t >= cond.dead_from_s] = 0.0
        for lo, hi in cond.dropout_bursts:  # an intermittent connection
            wheel[(t >= lo) & (t < hi)] = 0.0
    return wheels


def measure(trace: DriveTrace, spec: Platform, health: SensorHealth, cond: TripCondition,
            rng: np.random.Generator, module: WheelModule = WheelModule()) -> dict[str, np.ndarray]:
    """Canonical SI signals of one trip as the sensors report them (measure_trips of one trip)."""
    return measure_trips(trace, spec, health, [cond], [rng], module)


def measure_trips(trace: DriveTrace, spec: Platform, health: SensorHealth, conds: list[TripCondition],
                  rngs: list[np.random.Generator], module: WheelModule = WheelModule(),
                  wheel_at: list[np.ndarray] | None = None) -> dict[str, np.ndarray]:
    """Canonical SI signals as the sensors report them (before any logger artefacts), for the trips of
    ``trace`` one after the other, each with its condition and random stream.

    Sensor noise, rough-road vibration and fault randomness draw on separate
    streams, so one trip with and without a fault or confounder differs by
    exactly that fault or confounder.
    """
    trips = trace.trips
    noise_rngs, rough_rngs, fault_rngs, ring_rngs = zip(*(rng.spawn(4) for rng in rngs))
    v = trace.speed_mps
    load = np.array([c.load for c in conds])
    towing = np.array([float(c.towing) for c in conds])
    # A trailer's tongue load sits behind the rear axle: like a rear-heavy payload, it lifts the nose
    # and lessens understeer.
    k_us_rad_per_g = spec.understeer_gradient_deg_per_g * DEG_RAD * (
        1.0 + spec.load_understeer_change * (load + TOWING_PITCH_LOAD * towing))
    k = trips.spread(understeer_coefficient(k_us_rad_per_g, spec.wheelbase_m))
    road_wheel = road_wheel_angle_for_curvature(v, trace.curvature_1pm, spec.wheelbase_m, k)
    yaw = yaw_rate_single_track(v, road_wheel, spec.wheelbase_m, k)
    centre = wheel_centre_speeds(v, yaw, spec.wheelbase_m, spec.track_front_m, spec.track_rear_m)
    # yaw, steering, 2 accelerometers; single precision is ample for noise and twice as fast to draw
    noise = np.empty((4, trips.total), np.float32)
    for noise_rng, a, b in zip(noise_rngs, trips.starts, trips.ends):
        noise[:, a:b] = noise_rng.standard_normal((4, b - a), dtype=np.float32)
    wheels = _wheel_signals(trace, spec, health, conds, centre, ring_rngs, rough_rngs, fault_rngs, module, wheel_at)

    def per_trip(values) -> np.ndarray:
        return trips.spread(np.array(values, dtype=float))

    # Single precision where a value is a small correction (and its functions are several times faster).
    warm_c = WARMUP_C * (1.0 - np.exp(-trace.t_s.astype(np.float32) / WARMUP_TAU_S)) - REFERENCE_C
    sensor_c = per_trip([c.ambient_c for c in conds]) + warm_c
    rough = per_trip([1.0 if c.rough_road else 0.0 for c in conds])
    s = health.fault_sign
    yaw_gain = per_trip([1.0 + health.yaw_gain_error + s * _fault_size(c, "yaw_gain", "yaw_gain_frac")
                         for c in conds])
    yaw_offset_dps = (health.yaw_offset_dps + health.yaw_temp_coeff_dps_per_c * sensor_c
                      + per_trip([s * _fault_size(c, "yaw_offset", "yaw_offset_dps") for c in conds]))
    yaw_meas = yaw_gain * yaw + DEG_RAD * (
        yaw_offset_dps + noise[0] * (YAW_NOISE_DPS + rough * ROUGH_YAW_DPS))

    steer_offset_deg = per_trip([health.steer_offset_deg + s * _fault_size(c, "steer_offset", "steer_offset_deg")
                                 for c in conds])
    steer = spec.steering_ratio * road_wheel + DEG_RAD * (steer_offset_deg + STEER_NOISE_DEG * noise[1])

    # Accelerometers measure specific force: gravity along the tilted body axes
    # adds g·sin(grade + nose-up pitch) to a_x and g·sin(bank) to a_y.
    nose_up = spec.load_pitch_rad * trips.spread(load + TOWING_PITCH_LOAD * towing) + spec.pitch_gradient_rad_per_g * trace.accel_mps2 / G0_MPS2
    offset_g = health.accel_offset_g[:, None] + health.accel_temp_coeff_g_per_c[:, None] * sensor_c[None, :]
    offset_g[0] += per_trip([s * _fault_size(c, "accel_long_offset", "accel_long_offset_g") for c in conds])
    offset_g[1] += per_trip([s * _fault_size(c, "accel_lat_offset", "accel_lat_offset_g") for c in conds])
    accel_noise = noise[2:] * (ACCEL_NOISE_MPS2 + rough * ROUGH_ACCEL_MPS2)
    tilt_long = np.sin((trace.grade_rad + nose_up).astype(np.float32))
    tilt_lat = np.sin(trace.bank_rad.astype(np.float32))
    accel_long = trace.accel_mps2 + G0_MPS2 * (tilt_long + offset_g[0]) + accel_noise[0]
    accel_lat = v * yaw + G0_MPS2 * (tilt_lat + offset_g[1]) + accel_noise[1]

    # The controller's vehicle speed: mean of the middle two wheels, robust to one bad wheel.
    middle = 0.5 * (wheels.sum(axis=0) - wheels.max(axis=0) - wheels.min(axis=0))
    return {
        "wheel_speed_fl": wheels[0], "wheel_speed_fr": wheels[1],
        "wheel_speed_rl": wheels[2], "wheel_speed_rr": wheels[3],
        "vehicle_speed": middle, "yaw_rate": yaw_meas, "steering_angle": steer,
        "accel_long": accel_long, "accel_lat": accel_lat, "brake": trace.brake.copy(),
    }
