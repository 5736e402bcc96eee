"""Physical sign checks: export tools differ in sign conventions (DESIGN.md).

ISO 8855 (x forward, y left, z up): yaw rate and lateral acceleration are
positive in a left turn, where the right wheels roll faster than the left
ones, so yaw rate r has the sign of v_rr - v_rl (kinematic yaw from a
non-steered axle, r = (v_right - v_left) / track) and a_y the sign of v * r
(steady turning, a_y = v * r); longitudinal acceleration is positive
forward, so a_x has the sign of dv/dt (some tools log deceleration as
positive). A log whose signals correlate the other way
most likely uses the opposite convention; ingest warns and a profile can set
``invert = true``. It never flips a sign on its own.
"""

from __future__ import annotations

import numpy as np

from ingest.trips import mean_known

#: A correlation this negative, over at least MIN_SAMPLES turning samples, is
#: reported. Deliberately loose: only a clearly reversed sign is flagged.
INVERTED_BELOW = -0.5
MIN_SAMPLES = 50


#: dv/dt is taken only between rows closer than this (not across a gap or from one trip to the next).
DERIVATIVE_MAX_DT_S = 2.0


def sign_warnings(values: dict[str, np.ndarray], t_s: np.ndarray) -> list[str]:
    """Warnings for yaw rate, lateral and longitudinal acceleration signs that contradict the wheels.

    ``values`` SI signals and ``t_s`` their times in seconds, rows in (vehicle, time) order.
    """
    out = []
    yaw = values.get("yaw_rate")
    rear = [values.get("wheel_speed_rl"), values.get("wheel_speed_rr")]
    if yaw is not None and rear[0] is not None and rear[1] is not None:
        if _correlation(yaw, rear[1] - rear[0], min_abs_b=0.05) < INVERTED_BELOW:
            out.append("yaw_rate correlates negatively with the rear-axle wheel-speed difference: it looks "
                       "positive to the right (ISO 8855 wants left); a profile can set invert = true")
    ay = values.get("accel_lat")
    wheels = [values[k] for k in ("wheel_speed_fl", "wheel_speed_fr", "wheel_speed_rl", "wheel_speed_rr") if k in values]
    speeds = wheels or ([values["vehicle_speed"]] if "vehicle_speed" in values else [])
    speed = mean_known(speeds) if speeds else None  # the wheels' mean whenever wheels are logged
    if ay is not None and yaw is not None and wheels:
        if _correlation(ay, speed * yaw, min_abs_b=0.5) < INVERTED_BELOW:
            out.append("accel_lat correlates negatively with speed x yaw_rate: one of the two has the opposite "
                       "sign convention (ISO 8855: both positive in a left turn); a profile can set invert = true")
    ax = values.get("accel_long")
    if ax is not None and speed is not None and len(t_s) > 2:
        if _correlation(ax, _derivative(speed, t_s), min_abs_b=0.3) < INVERTED_BELOW:
            out.append("accel_long correlates negatively with the wheel speeds' dv/dt: it looks positive in "
                       "deceleration (ISO 8855 wants forward); a profile can set invert = true")
    return out


def _derivative(v: np.ndarray, t_s: np.ndarray) -> np.ndarray:
    """Central difference (v[i+1] - v[i-1]) / (t[i+1] - t[i-1]); NaN across gaps and at the ends."""
    out = np.full(v.size, np.nan)
    span = t_s[2:] - t_s[:-2]
    with np.errstate(invalid="ignore", divide="ignore"):
        d = (v[2:] - v[:-2]) / span
    out[1:-1] = np.where((span > 0) & (span <= 2 * DERIVATIVE_MAX_DT_S), d, np.nan)
    return out


def _correlation(a: np.ndarray, b: np.ndarray, min_abs_b: float) -> float:
    """Pearson correlation over samples where both are known and |b| shows turning; NaN if too few."""
    with np.errstate(invalid="ignore"):
        ok = np.isfinite(a) & np.isfinite(b) & (np.abs(b) > min_abs_b)
    if ok.sum() < MIN_SAMPLES:
        return float("nan")
    x, y = a[ok] - a[ok].mean(), b[ok] - b[ok].mean()
    denom = np.sqrt((x * x).sum() * (y * y).sum())
    return float((x * y).sum() / denom) if denom > 0 else float("nan")
