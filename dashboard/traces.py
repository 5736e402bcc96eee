"""Display-only estimates for the trip drill-down, in display units.

These are the two simple redundancy formulas of DESIGN.md, drawn beside the
measured signals so a manager can see the disagreement the features measure.
They are for the picture only; the numbers that rank vehicles come from
features/ and models/.

- Kinematic yaw from the rear (non-steered) axle: r = (v_rr − v_rl) / track_rear.
- Single-track model yaw: r = v·δ / (L·(1 + K·v²)), δ = steering-wheel angle /
  steering ratio, K = K_us / (g·L) with K_us the understeer gradient in rad/g
  (neutral steer, K = 0, when the registry gives none).
- Wheel-derived longitudinal acceleration: the derivative of the mean wheel
  speed after a centred moving average over ``SMOOTH_S`` seconds.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from tracktrue.schema import POSITIONS, WHEEL_SPEED_COLUMNS
from tracktrue.units import DEG_RAD, G0_MPS2, KPH_MPS

SMOOTH_S = 1.0
#: Most points drawn per series; longer traces are thinned by a fixed stride.
MAX_POINTS = 4000


def yaw_from_rear_wheels_rps(v_rl_mps, v_rr_mps, track_rear_m: float):
    return (np.asarray(v_rr_mps) - np.asarray(v_rl_mps)) / track_rear_m


def yaw_from_steering_rps(speed_mps, steering_angle_rad, wheelbase_m: float, steering_ratio: float,
                          understeer_rad_per_g: float = 0.0):
    v = np.asarray(speed_mps, dtype=float)
    delta = np.asarray(steering_angle_rad, dtype=float) / steering_ratio
    k = understeer_rad_per_g / (G0_MPS2 * wheelbase_m)
    return v * delta / (wheelbase_m * (1.0 + k * v * v))


def smoothed_derivative(t_s: np.ndarray, x: np.ndarray, window_s: float = SMOOTH_S) -> np.ndarray:
    """d/dt of ``x`` after a centred moving average over ``window_s`` seconds."""
    if len(t_s) < 3:
        return np.full(len(t_s), np.nan)
    dt_s = float(np.nanmedian(np.diff(t_s)))
    n = max(1, int(round(window_s / dt_s))) if dt_s > 0 else 1
    smooth = pd.Series(x).rolling(n, center=True, min_periods=1).mean().to_numpy()
    return np.gradient(smooth, t_s)


def drilldown_frames(samples: pd.DataFrame, spec: dict) -> dict[str, pd.DataFrame]:
    """Long-form frames for the four drill-down charts (``t_s`` plus series/value).

    ``spec`` holds ``track_rear_m``, ``wheelbase_m``, ``steering_ratio`` and
    optionally ``understeer_gradient_deg_per_g``; a missing signal or spec
    value leaves its series out.
    """
    t_s = (samples["time"] - samples["time"].iloc[0]).dt.total_seconds().to_numpy()
    wheels = {p: samples[c].to_numpy(dtype=float) for p, c in zip(POSITIONS, WHEEL_SPEED_COLUMNS)
              if c in samples}
    frames: dict[str, dict[str, np.ndarray]] = {"speed": {}, "deviation": {}, "yaw": {}, "accel": {}}
    if len(wheels) == 4:
        stack = np.vstack(list(wheels.values()))
        total = stack.sum(axis=0)
        mean_v = total / 4
        for p, v in wheels.items():
            frames["speed"][f"wheel {p}"] = v / KPH_MPS
            frames["deviation"][f"wheel {p}"] = (v - (total - v) / 3) / KPH_MPS
        frames["accel"]["from wheel speeds"] = smoothed_derivative(t_s, mean_v) / G0_MPS2
        if "yaw_rate" in samples:
            frames["yaw"]["measured"] = samples["yaw_rate"].to_numpy(dtype=float) / DEG_RAD
        if _usable(spec.get("track_rear_m")):
            frames["yaw"]["from rear wheels"] = yaw_from_rear_wheels_rps(
                wheels["rl"], wheels["rr"], float(spec["track_rear_m"])) / DEG_RAD
        if "steering_angle" in samples and _usable(spec.get("wheelbase_m")) and _usable(spec.get("steering_ratio")):
            k_us = spec.get("understeer_gradient_deg_per_g")
            frames["yaw"]["from steering"] = yaw_from_steering_rps(
                mean_v, samples["steering_angle"].to_numpy(dtype=float), float(spec["wheelbase_m"]),
                float(spec["steering_ratio"]), np.nan_to_num(_number(k_us)) * DEG_RAD) / DEG_RAD
    if "accel_long" in samples:
        frames["accel"]["measured"] = samples["accel_long"].to_numpy(dtype=float) / G0_MPS2
    stride = max(1, -(-len(t_s) // MAX_POINTS))
    return {name: _long(t_s, series, stride) for name, series in frames.items()}


def _number(value) -> float:
    try:
        return float(value)
    except (TypeError, ValueError):
        return float("nan")


def _usable(value) -> bool:
    """A positive spec value (NaN, None and text are not)."""
    return _number(value) > 0


def _long(t_s: np.ndarray, series: dict[str, np.ndarray], stride: int) -> pd.DataFrame:
    if not series:
        return pd.DataFrame({"t_s": pd.Series(dtype=float), "series": pd.Series(dtype=str),
                             "value": pd.Series(dtype=float)})
    parts = [pd.DataFrame({"t_s": t_s[::stride], "series": name, "value": v[::stride]})
             for name, v in series.items()]
    return pd.concat(parts, ignore_index=True)
