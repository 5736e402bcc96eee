"""Yaw-rate and steering features: each compares exactly two sources.

* yaw sensor vs nothing (at standstill, true yaw is 0): ``yaw_rest_dps``
* yaw sensor vs calibrated rear-axle wheel yaw: ``yaw_offset_dps``, ``yaw_gain``
* steering sensor vs the straight-road consensus of yaw sensor and wheels: ``steer_center_deg``
* yaw sensor vs single-track model of steering and speed: ``steer_yaw_residual_dps``
"""

from __future__ import annotations

import numpy as np

from features.kinematics import single_track_yaw_rate
from features.row import FeatureRow
from features.signals import (
    SMOOTH_S,
    TripArrays,
    deming_fit,
    dithered_mean,
    median,
    moving_mean,
    nan_median,
    seconds,
    white_noise_variance,
    window_samples,
)
from features.spec import VehicleSpec
from features.wheels import RATIO_MIN_SPEED_MPS, WheelReference, steady_reference_window
from features.windows import Windows
from tracktrue.units import DEG_RAD

REST_MIN_S = 3.0
YAW_FIT_MIN_S = 30.0
#: Linear range of the tyres; beyond it the wheel and model references bend.
YAW_FIT_MAX_LAT_MPS2 = 4.0
#: Turning (|r| ≥ 3 deg/s) needed before a gain means anything.
YAW_GAIN_MIN_TURN_S = 40.0
#: One speed step across the rear track, as yaw: above this the wheel yaw is quantisation.
WHEEL_YAW_MAX_STEP_RADPS = 2.0 * DEG_RAD
STEER_CENTER_MIN_S = 10.0
#: Turning (per the model) needed for a steering-gain residual.
STEER_TURN_MIN_RADPS = 3.0 * DEG_RAD
STEER_TURN_MIN_S = 10.0


def _to_deg(x: float) -> float:
    return float(x) / DEG_RAD


def yaw_rest_feature(row: FeatureRow, trip: TripArrays, windows: Windows) -> None:
    """yaw_rest_dps = mean of the yaw-rate sensor over standstill, in deg/s (true yaw is 0).

    A banded mean (features.signals.dithered_mean), not the median: a polled
    logger's 0.1 deg/s steps would pin a median to a step, while the sensor's
    own noise dithers the mean to the offset between them. Whether the step
    is fine enough for the feature at all is features.gating's call.
    """
    if not trip.has("yaw_rate"):
        row.nan("yaw_rest_dps", "signal_missing")
    elif windows.standstill_reason:
        row.nan("yaw_rest_dps", windows.standstill_reason)
    elif seconds(windows.standstill, trip) < REST_MIN_S:
        row.nan("yaw_rest_dps", "no_standstill")
    else:
        yaw = trip.signals["yaw_rate"][windows.standstill]
        row.set("yaw_rest_dps", _to_deg(dithered_mean(yaw, trip.resolution.get("yaw_rate", np.nan))))


def wheel_yaw_reason(trip: TripArrays, spec: VehicleSpec, ref: WheelReference, signal: str) -> str | None:
    """Why ``signal`` cannot be compared with the calibrated rear-axle yaw, or None."""
    if not trip.has(signal):
        return "signal_missing"
    missing = spec.missing("track_rear_m", "track_front_m")
    if missing:
        return missing
    if ref.reason:
        return ref.reason
    steps = [s for s in (trip.resolution.get(f"wheel_speed_{p}", np.nan) for p in ("rl", "rr")) if np.isfinite(s)]
    step = max(steps) if steps else np.nan
    if np.isfinite(step) and step / spec.track_rear_m > WHEEL_YAW_MAX_STEP_RADPS:
        return "resolution_too_coarse"
    return None


def yaw_regression_features(row: FeatureRow, trip: TripArrays, spec: VehicleSpec,
                            windows: Windows, ref: WheelReference) -> None:
    """yaw_sensor = yaw_offset + yaw_gain · r_wheels, least squares; offset in deg/s, gain dimensionless.

    r_wheels = (v_rr − v_rl)/track_rear from radius-calibrated rear wheels
    (kinematic yaw, CHECKS.md); both sides smoothed over 1 s so wheel noise
    does not dominate, and fitted by Deming regression (both sides are noisy;
    least squares would shrink the gain by the wheel noise) with the noise
    ratio from each signal's successive differences. Calm driving only (no
    brake, |dv/dt| < 0.5 m/s², v ≥ 5 m/s, lateral < 4 m/s²) where front- and
    rear-axle yaw agree. The gain needs 40 s of turning above 3 deg/s; with
    too little turning only the offset is given (median of yaw − r_wheels).
    """
    names = ("yaw_offset_dps", "yaw_gain")
    reason = wheel_yaw_reason(trip, spec, ref, "yaw_rate")
    if reason:
        row.nan_all(names, reason)
        return
    yaw = trip.smoothed("yaw_rate")
    wheel = ref.yaw_rate_smoothed
    with np.errstate(invalid="ignore"):
        usable = (steady_reference_window(trip, windows, ref) & (np.abs(wheel * ref.speed) < YAW_FIT_MAX_LAT_MPS2)
                  & np.isfinite(yaw) & np.isfinite(wheel))
    if seconds(usable, trip) < YAW_FIT_MIN_S:
        row.nan_all(names, "too_little_driving")
        return
    x, y = wheel[usable], yaw[usable]
    if seconds(usable & (np.abs(wheel) >= STEER_TURN_MIN_RADPS), trip) < YAW_GAIN_MIN_TURN_S:
        row.nan("yaw_gain", "too_little_turning")
        row.set("yaw_offset_dps", _to_deg(median(y - x)))
        return
    noise_ratio = (white_noise_variance(trip.signals["yaw_rate"], usable)
                   / white_noise_variance(ref.yaw_rate, usable))
    gain, offset = deming_fit(x, y, noise_ratio)
    row.set("yaw_gain", gain)
    row.set("yaw_offset_dps", _to_deg(offset))


def steer_center_feature(row: FeatureRow, trip: TripArrays, windows: Windows) -> None:
    """steer_center_deg = median steering-wheel angle while yaw sensor and wheels agree on straight, in deg.

    Also the same median where the yaw sensor alone says straight, as the alternative the gates
    take where the wheels are too coarse to vote (features.gating.alternative_gates): its vote
    is centred on the trip's own median at speed, so a yaw offset cannot tilt it, and a yaw gain
    error does not move where straight is.
    """
    if not trip.has("steering_angle"):
        row.nan("steer_center_deg", "signal_missing")
        return
    if seconds(windows.straight_by_yaw_and_wheels, trip) < STEER_CENTER_MIN_S:
        row.nan("steer_center_deg", windows.straight_reason or "no_straight_cruise")
    else:
        row.set("steer_center_deg", _straight_median_deg(trip, windows.straight_by_yaw_and_wheels))
    if seconds(windows.straight_by_yaw, trip) >= STEER_CENTER_MIN_S:
        row.alternatives["steer_center_deg"] = _straight_median_deg(trip, windows.straight_by_yaw)


def _straight_median_deg(trip: TripArrays, straight: np.ndarray) -> float:
    return _to_deg(nan_median(trip.signals["steering_angle"][straight]))


def model_yaw_rate(trip: TripArrays, spec: VehicleSpec, speed: np.ndarray, centre_rad: float = 0.0) -> np.ndarray:
    """Single-track steady-state yaw from the steering-wheel angle, δ = (angle − centre) / steering ratio."""
    k = spec.understeer_k_s2pm2
    delta = (trip.signals["steering_angle"] - centre_rad) / spec.steering_ratio
    return single_track_yaw_rate(speed, delta, spec.wheelbase_m, k)


def _turning(trip: TripArrays, windows: Windows, turn_rate: np.ndarray, speed: np.ndarray) -> np.ndarray:
    with np.errstate(invalid="ignore"):
        return (windows.calm & (speed >= RATIO_MIN_SPEED_MPS) & (np.abs(turn_rate) >= STEER_TURN_MIN_RADPS)
                & (np.abs(turn_rate * speed) < YAW_FIT_MAX_LAT_MPS2))


def steer_yaw_residual_feature(row: FeatureRow, trip: TripArrays, spec: VehicleSpec,
                               windows: Windows, ref: WheelReference, steer_center_rad: float) -> None:
    """steer_yaw_residual_dps = mean over turns of (r_sensor − r_model)·sign(r_turn), in deg/s.

    r_model = v·δ/(L·(1 + K·v²)), δ = (steering-wheel angle − steer centre) /
    steering ratio, K = K_us/(g·L) (single-track model, Gillespie 1992;
    CHECKS.md); v is the median wheel speed. The centre (steer_center_deg,
    reported on its own) is removed so this residual answers for gain only.
    Turns are chosen by a third source, the calibrated wheel yaw where it is
    available (else the model), so neither compared source picks its own
    samples. Aligning with the turn's sign makes a gain error show with its
    sign while constant offsets cancel over left and right turns. Positive:
    the vehicle yaws more than the steering says (steering sensor reads low,
    or yaw sensor reads high).
    """
    name = "steer_yaw_residual_dps"
    reason = None
    if not (trip.has("steering_angle") and trip.has("yaw_rate")):
        reason = "signal_missing"
    else:
        reason = spec.missing("steering_ratio", "wheelbase_m", "understeer_gradient_deg_per_g")
    if reason:
        row.nan(name, reason)
        return
    width = window_samples(SMOOTH_S, trip.rate_hz)
    centre = steer_center_rad if np.isfinite(steer_center_rad) else 0.0
    model = moving_mean(model_yaw_rate(trip, spec, windows.speed, centre), width)
    yaw = trip.smoothed("yaw_rate")
    if ref.reason is None:
        judge = np.where(ref.axles_agree, ref.yaw_rate_smoothed, np.nan)
    else:
        judge = model
    usable = _turning(trip, windows, judge, windows.speed) & np.isfinite(yaw) & np.isfinite(model)
    if seconds(usable, trip) < STEER_TURN_MIN_S:
        row.nan(name, "too_little_turning")
        return
    row.set(name, _to_deg(np.mean((yaw[usable] - model[usable]) * np.sign(judge[usable]))))


def steering_fit_sums(trip: TripArrays, spec: VehicleSpec, windows: Windows) -> dict[str, float]:
    """Sufficient statistics to estimate a platform's steering ratio n and understeer K.

    Single-track model rearranged to be linear in the unknowns:
    r·(n·L) + r·v²·(n·L·K) = v·δ_sw. Least squares over turns needs only the
    sums below; features.platform_params pools them per vehicle. Uses the yaw sensor
    and steering sensor on turns where they agree in sign.
    """
    keys = ("steerfit_rr", "steerfit_rrv2", "steerfit_rrv4", "steerfit_rvs", "steerfit_rv3s", "steerfit_s")
    if not (trip.has("steering_angle") and trip.has("yaw_rate")):
        return dict.fromkeys(keys, np.nan)
    r = trip.smoothed("yaw_rate")
    sw = trip.smoothed("steering_angle")
    v = windows.speed
    usable = _turning(trip, windows, r, v) & (np.sign(r) == np.sign(sw)) & np.isfinite(sw)
    r, sw, v = r[usable], sw[usable], v[usable]
    v2 = v * v
    return dict(zip(keys, (
        float(np.sum(r * r)), float(np.sum(r * r * v2)), float(np.sum(r * r * v2 * v2)),
        float(np.sum(r * v * sw)), float(np.sum(r * v2 * v * sw)), float(seconds(usable, trip)),
    )))
