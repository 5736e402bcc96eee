"""Accelerometer features: each compares the accelerometer with one other source.

The longitudinal accelerometer reads dv/dt + g·sin(grade); the lateral one
v·r + g·sin(roll + bank). Grade, crown and roll are real and larger than the
offsets worth finding, so offsets come from many stops and from means that
let grade average out (DESIGN.md, "Grade, crown and creeping").
"""

from __future__ import annotations

import numpy as np

from features.row import FeatureRow
from features.signals import (
    SMOOTH_S,
    TripArrays,
    median,
    moving_mean,
    nan_median,
    pair_differences,
    seconds,
    smooth_derivative,
    three_cornered_hat,
    widen,
    window_samples,
)
from features.wheels import WheelReference, steady_reference_window, wheel_comparison_window
from features.windows import Windows
from features.yaw import REST_MIN_S, wheel_yaw_reason
from features.spec import VehicleSpec
from tracktrue.schema import POSITIONS
from tracktrue.units import G0_MPS2

#: Derivative features need a few samples per second.
DERIVATIVE_MIN_RATE_HZ = 2.0
RESIDUAL_MIN_KM = 1.0
#: Slow content (grade, drift) removed before comparing a wheel's acceleration.
WHEEL_ACCEL_HIGHPASS_S = 5.0
WHEEL_ACCEL_MIN_S = 30.0
#: Lateral intercept is fitted where |v·r| is below this.
LAT_LOW_MPS2 = 1.5
LAT_MIN_S = 30.0
#: The speed-scale witness's slope is fitted up to this |v·r|, and needs this spread of it.
LAT_SCALE_MAX_MPS2 = 4.0
LAT_SCALE_MIN_SPREAD_MPS2 = 0.5


def accel_rest_features(row: FeatureRow, trip: TripArrays, windows: Windows) -> None:
    """accel_long_rest_g, accel_lat_rest_g = median accelerometer over standstill / g0, in g.

    At rest the true acceleration is 0; what remains is offset + g·sin(grade
    or bank) of this trip's stops, which averages out over many stops.
    """
    for signal, name in (("accel_long", "accel_long_rest_g"), ("accel_lat", "accel_lat_rest_g")):
        if not trip.has(signal):
            row.nan(name, "signal_missing")
        elif windows.standstill_reason:
            row.nan(name, windows.standstill_reason)
        elif seconds(windows.standstill, trip) < REST_MIN_S:
            row.nan(name, "no_standstill")
        else:
            row.set(name, nan_median(trip.signals[signal][windows.standstill]) / G0_MPS2)


def _wheel_derivatives(trip: TripArrays, ref: WheelReference) -> np.ndarray:
    """Each wheel's smoothed dv/dt, of its speed divided by its relative radius where calibrated (a
    spare wheel's speed is ~3 % low, and so would be its acceleration), else as logged. The
    calibrated stack is made here for this, so it is differentiated in place."""
    if np.isfinite(ref.radius_offset).all():
        return smooth_derivative(ref.calibrated(trip.wheels), trip, overwrite_input=True)
    return smooth_derivative(trip.wheels, trip)


def accel_long_residual_feature(row: FeatureRow, trip: TripArrays, windows: Windows) -> None:
    """accel_long_residual_g = Σ (a_x − dv/dt)·v·dt / Σ v·dt over moving, / g0, in g.

    The distance-weighted mean of a_x − dv/dt equals offset + g·Δh/distance
    (DESIGN.md), Δh → 0 over round trips. dv/dt is the Savitzky–Golay
    derivative of the median wheel speed, so one wheel's false accelerations
    do not enter (uncalibrated: a radius scale error s changes the weighted
    mean by s·Δ(v²/2)/distance, zero from stop to stop). Sources: longitudinal
    accelerometer vs wheel speeds.
    """
    name = "accel_long_residual_g"
    if not trip.has("accel_long"):
        row.nan(name, "signal_missing")
        return
    if not trip.rate_hz >= DERIVATIVE_MIN_RATE_HZ:
        row.nan(name, "rate_too_low")
        return
    dvdt = windows.accel
    residual = trip.signals["accel_long"] - dvdt
    usable = windows.moving & np.isfinite(residual)
    weight = windows.speed[usable] * trip.dt[usable]
    if weight.sum() / 1000.0 < RESIDUAL_MIN_KM:
        row.nan(name, "too_little_distance")
        return
    row.set(name, float(np.sum(residual[usable] * weight) / weight.sum()) / G0_MPS2)


def wheel_accel_features(row: FeatureRow, trip: TripArrays, windows: Windows, ref: WheelReference) -> None:
    """wheel_accel_disagree_<pos>_g = σ_pos / g0: the pos wheel's own false acceleration, in g.

    Five estimates of the body's longitudinal acceleration: each
    (radius-calibrated) wheel's Savitzky–Golay derivative and the accelerometer, each high-passed (minus
    a 5 s moving mean, which removes grade and offset). The variance of every
    wheel–accelerometer and wheel–wheel difference is σ_i² + σ_j²; solving
    the ten pairs (three-cornered hat, Gray & Allan 1974) gives each wheel its
    own σ, so a wheel that seems to speed up and slow down while the
    accelerometer and the other wheels see nothing is pinned to itself
    (CHECKS.md, common practice). Plain variances, not robust ones: a damaged
    ring's false accelerations are rare, sharp spikes.
    """
    names = [f"wheel_accel_disagree_{p}_g" for p in POSITIONS]
    if not trip.has("accel_long"):
        row.nan_all(names, "signal_missing")
        return
    usable = wheel_comparison_window(row, names, trip, windows, DERIVATIVE_MIN_RATE_HZ, WHEEL_ACCEL_MIN_S)
    if usable is None:
        return
    width = window_samples(WHEEL_ACCEL_HIGHPASS_S, trip.rate_hz)
    # only the usable samples' high-pass windows are filtered (usable runs
    # widened by half a window, joined): each window stays inside its run
    near = widen(usable, width // 2)
    kept = usable[near]

    sources = np.empty((5, kept.size))
    np.compress(near, _wheel_derivatives(trip, ref), axis=1, out=sources[:4])  # column picks: faster than [:, near]
    sources[4] = trip.signals["accel_long"][near]
    np.copyto(sources, np.nan, where=~kept)
    sources -= moving_mean(sources, width)  # high-passed, all five at once
    sources = np.compress(np.isfinite(sources).all(axis=0), sources, axis=1)
    if sources.shape[1] < 2:
        row.nan_all(names, "too_little_rolling")
        return
    # sample variance of each of the ten differences, straight from the
    # differences: the five estimates share most of their signal, and
    # C_ii + C_jj − 2·C_ij from a covariance matrix would cancel it in rounding
    pairs = [(i, j) for i in range(5) for j in range(i + 1, 5)]
    differences = pair_differences(sources)  # rows in the order of ``pairs``
    differences -= differences.mean(axis=1, keepdims=True)
    variances = np.einsum("ij,ij->i", differences, differences) / (sources.shape[1] - 1)
    pair_var = dict(zip(pairs, variances))
    own_var = three_cornered_hat(pair_var, 5)
    for name, var in zip(names, own_var[:4]):
        row.set(name, np.sqrt(var) / G0_MPS2)


def lat_residual_feature(row: FeatureRow, trip: TripArrays, spec: VehicleSpec,
                         windows: Windows, ref: WheelReference) -> None:
    """lat_residual_g = intercept b0 of a_y − v·r_wheels = b0 + b1·v·r_wheels on |v·r| < 1.5 m/s², / g0, in g.

    a_y = v·r in steady cornering (CHECKS.md); v and r from the calibrated
    rear axle, both sides smoothed over 1 s. Road crown and roll bias a_y in
    proportion to cornering and by a constant; the intercept on low-a_y
    windows is the accelerometer offset plus the average crown. Sources:
    lateral accelerometer vs wheel speeds.
    """
    name = "lat_residual_g"
    reason = wheel_yaw_reason(trip, spec, ref, "accel_lat")
    if reason:
        row.nan(name, reason)
        return
    steady = _steady_lateral(trip, windows, ref, LAT_LOW_MPS2)
    if steady is None:
        row.nan(name, "too_little_driving")
        return
    x, ay = steady
    y = ay - x
    if np.std(x) > 0.05:  # least-squares line
        intercept = y.mean() - _slope(x, y) * x.mean()
    else:
        intercept = median(y)
    row.set(name, intercept / G0_MPS2)


def lat_scale_witness(trip: TripArrays, spec: VehicleSpec, windows: Windows, ref: WheelReference) -> dict[str, float]:
    """scale_ay_per_vr: the least-squares slope of a_y on v·r_wheels over steady cornering, |v·r| < 4 m/s².

    A witness of the wheels' common speed scale, for models/ (not a model
    feature). With true speed v and rolling radii all k times their nominal
    value (a new set of tyres: deeper tread), the wheels report v/k and
    v·r_wheels = v·r/k², so the slope of a_y = v·r on it is k² — while a
    yaw-rate *gain* error, which moves yaw_gain and yaw against steering just
    as k does, leaves it alone: it uses neither the yaw sensor nor steering.
    Roll tilts the accelerometer in proportion to a_y, so the slope also holds
    a per-vehicle constant (and a load-dependent part), which only changes
    matter for. NaN where the lateral intercept would be, or without 0.5 m/s²
    spread of v·r.
    """
    nan = {"scale_ay_per_vr": np.nan}
    if wheel_yaw_reason(trip, spec, ref, "accel_lat"):
        return nan
    steady = _steady_lateral(trip, windows, ref, LAT_SCALE_MAX_MPS2)
    if steady is None or np.std(steady[0]) < LAT_SCALE_MIN_SPREAD_MPS2:
        return nan
    return {"scale_ay_per_vr": float(_slope(*steady))}


def _steady_lateral(trip: TripArrays, windows: Windows, ref: WheelReference,
                    limit_mps2: float) -> tuple[np.ndarray, np.ndarray] | None:
    """(v·r_wheels, a_y) on steady cornering with |v·r| below ``limit_mps2``; None below LAT_MIN_S of it."""
    ay, vr = trip.smoothed("accel_lat"), _wheel_vr(trip, ref)
    with np.errstate(invalid="ignore"):
        usable = (steady_reference_window(trip, windows, ref) & (np.abs(vr) < limit_mps2)
                  & np.isfinite(ay) & np.isfinite(vr))
    if seconds(usable, trip) < LAT_MIN_S:
        return None
    return vr[usable], ay[usable]


def _slope(x: np.ndarray, y: np.ndarray) -> float:
    """Least-squares slope of y on x, in centred form (what np.polyfit(x, y, 1) solves)."""
    dx = x - x.mean()
    return np.sum(dx * (y - y.mean())) / np.sum(dx * dx)


def _wheel_vr(trip: TripArrays, ref: WheelReference) -> np.ndarray:
    """v·r from the calibrated rear axle, smoothed over 1 s (the lateral intercept and the scale witness share it)."""
    width = window_samples(SMOOTH_S, trip.rate_hz)
    return trip.cached("wheel_vr", lambda: moving_mean(ref.speed * ref.yaw_rate, width))
