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

from synthetic_fleet.draws import bernoulli_successes
from synthetic_fleet.drive import DriveTrace
from synthetic_fleet.faults import MAGNITUDE_AT_SEVERITY_1 as MAG, parse_fault
from synthetic_fleet.platforms import Platform
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
WHEEL_NOISE_MPS = 0.006
WHEEL_NOISE_FRAC = 0.0003
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
#: Rough road: common speed ripple on all wheels, extra accelerometer and yaw vibration.
ROUGH_RIPPLE_FRAC, ROUGH_WHEEL_FRAC, ROUGH_ACCEL_MPS2, ROUGH_YAW_DPS = 0.006, 0.0015, 0.35, 0.25


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


def _wheel_signals(trace: DriveTrace, spec: Platform, health: SensorHealth, conds: list[TripCondition],
                   centre: np.ndarray, noise: np.ndarray, rough_rngs: list[np.random.Generator],
                   fault_rngs: list[np.random.Generator]) -> np.ndarray:
    """Wheel-speed readings (4, n) of all trips from wheel-centre speeds (4, n) and unit normal noise (4, n)."""
    trips = trace.trips
    a_g = trace.accel_mps2 / G0_MPS2
    front, rear = BRAKE_SLIP_PER_G
    slip = np.minimum(a_g, 0.0)[None, :] * np.array([front, front, rear, rear])[:, None]
    driven = [0, 1] if spec.driven_axle == "front" else [2, 3]
    slip[driven] += np.maximum(a_g, 0.0) * TRACTION_SLIP_PER_G
    radius = np.array([health.wheel_radius_factor * c.tyre_factor * _tyre_fault_factor(c, health.fault_sign)
                       for c in conds]).T
    # The sensor counts teeth per second; the controller converts with the nominal
    # radius, so a smaller tyre (or more slip) reads faster.
    wheels = centre * (1.0 + slip) / trips.spread(radius) + noise * (WHEEL_NOISE_MPS + WHEEL_NOISE_FRAC * centre)
    cutoff_mps = CUTOFF_MPS[spec.wheel_sensor_kind]
    air_gaps = []
    for cond, rough_rng, fault_rng, a, b in zip(conds, rough_rngs, fault_rngs, trips.starts, trips.ends):
        n = b - a
        if cond.rough_road:
            ripple = rough_rng.standard_normal(n, dtype=np.float32)  # common to all wheels: the body bounces
            ripple = np.convolve(ripple, np.ones(3, np.float32) / np.sqrt(np.float32(3)), mode="same")
            wheels[:, a:b] *= 1.0 + ROUGH_RIPPLE_FRAC * ripple[None, :] + ROUGH_WHEEL_FRAC * rough_rng.standard_normal(
                (4, n), dtype=np.float32)
        fault = parse_fault(cond.fault) if cond.fault else None
        if fault is not None and fault.kind == "tone_ring" and cond.severity > 0:
            i = POSITIONS.index(fault.position)
            v = wheels[i, a:b]
            dt = trace.t_s[a + 1] - trace.t_s[a] if n > 1 else 0.1
            angle = np.cumsum(v) * dt / spec.tyre_radius_m + fault_rng.uniform(0, 2 * np.pi)
            periodic = np.sin(angle) + 0.5 * np.sin(2 * angle + 1.3)
            steps = np.zeros(n)
            struck = bernoulli_successes(fault_rng, n, min(0.3, MAG["tone_ring_step_prob"] * cond.severity))
            steps[struck] = fault_rng.standard_normal(len(struck))
            wheels[i, a:b] = v * (1.0 + cond.severity * (MAG["tone_ring_error_frac"] * periodic
                                                         + MAG["tone_ring_step_frac"] * steps))
        if fault is not None and fault.kind == "air_gap" and cond.severity > 0:
            # A passive sensor's amplitude grows with speed (common practice): as the
            # gap widens, the speed below which it is too weak to count teeth rises.
            cutoff = cutoff_mps + MAG["air_gap_dropout_speed_mps"] * cond.severity**1.2
            runout = np.exp(0.12 * fault_rng.standard_normal(n, dtype=np.float32))  # ring and bearing runout
            air_gaps.append((POSITIONS.index(fault.position), a, b, cutoff, runout))
    np.maximum(wheels, 0.0, out=wheels)
    wheels[wheels < cutoff_mps] = 0.0
    for i, a, b, cutoff, runout in air_gaps:
        wheel = wheels[i, a:b]
        wheel[wheel * runout < cutoff] = 0.0
    return wheels


def measure(trace: DriveTrace, spec: Platform, health: SensorHealth, cond: TripCondition,
            rng: np.random.Generator) -> dict[str, np.ndarray]:
    """Canonical SI signals of one trip as the sensors report them (measure_trips of one trip)."""
    return measure_trips(trace, spec, health, [cond], [rng])


def measure_trips(trace: DriveTrace, spec: Platform, health: SensorHealth, conds: list[TripCondition],
                  rngs: list[np.random.Generator]) -> dict[str, np.ndarray]:
    """Canonical SI signals as the sensors report them (before any logger artefacts), for the trips of
    ``trace`` one after the other, each with its condition and random stream.

    Sensor noise, rough-road vibration and fault randomness draw on separate
    streams, so one trip with and without a fault or confounder differs by
    exactly that fault or confounder.
    """
    trips = trace.trips
    noise_rngs, rough_rngs, fault_rngs = zip(*(rng.spawn(3) for rng in rngs))
    v = trace.speed_mps
    load = np.array([c.load for c in conds])
    k_us_rad_per_g = spec.understeer_gradient_deg_per_g * DEG_RAD * (1.0 + spec.load_understeer_change * load)
    k = trips.spread(understeer_coefficient(k_us_rad_per_g, spec.wheelbase_m))
    road_wheel = road_wheel_angle_for_curvature(v, trace.curvature_1pm, spec.wheelbase_m, k)
    yaw = yaw_rate_single_track(v, road_wheel, spec.wheelbase_m, k)
    centre = wheel_centre_speeds(v, yaw, spec.wheelbase_m, spec.track_front_m, spec.track_rear_m)
    # 4 wheels, yaw, steering, 2 accelerometers; single precision is ample for noise and twice as fast to draw
    noise = np.empty((8, trips.total), np.float32)
    for noise_rng, a, b in zip(noise_rngs, trips.starts, trips.ends):
        noise[:, a:b] = noise_rng.standard_normal((8, b - a), dtype=np.float32)
    wheels = _wheel_signals(trace, spec, health, conds, centre, noise[:4], rough_rngs, fault_rngs)

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
        yaw_offset_dps + noise[4] * (YAW_NOISE_DPS + rough * ROUGH_YAW_DPS))

    steer_offset_deg = per_trip([health.steer_offset_deg + s * _fault_size(c, "steer_offset", "steer_offset_deg")
                                 for c in conds])
    steer = spec.steering_ratio * road_wheel + DEG_RAD * (steer_offset_deg + STEER_NOISE_DEG * noise[5])

    # Accelerometers measure specific force: gravity along the tilted body axes
    # adds g·sin(grade + nose-up pitch) to a_x and g·sin(bank) to a_y.
    nose_up = spec.load_pitch_rad * trips.spread(load) + spec.pitch_gradient_rad_per_g * trace.accel_mps2 / G0_MPS2
    offset_g = health.accel_offset_g[:, None] + health.accel_temp_coeff_g_per_c[:, None] * sensor_c[None, :]
    offset_g[0] += per_trip([s * _fault_size(c, "accel_long_offset", "accel_long_offset_g") for c in conds])
    offset_g[1] += per_trip([s * _fault_size(c, "accel_lat_offset", "accel_lat_offset_g") for c in conds])
    accel_noise = noise[6:] * (ACCEL_NOISE_MPS2 + rough * ROUGH_ACCEL_MPS2)
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
