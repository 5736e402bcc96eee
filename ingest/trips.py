"""Trip splitting and the per-trip quality figures published in ``trips``.

A log may hold several ignition cycles; a time gap longer than ``gap_s``
(default 300 s) between consecutive rows of one vehicle starts a new trip.
The quality figures let features/ gate on sample rate and resolution
(DESIGN.md: a 1 km/h step is not a 0.01 km/h step).
"""

from __future__ import annotations

import numpy as np

from tracktrue.schema import NUMERIC_SIGNALS, WHEEL_SPEED_COLUMNS


def trip_bounds(codes: np.ndarray, us: np.ndarray, gap_s: float) -> list[tuple[int, int]]:
    """[start, stop) of each trip in rows sorted by (vehicle, time)."""
    n = len(us)
    if n == 0:
        return []
    breaks = np.flatnonzero((np.diff(us) > gap_s * 1e6) | (np.diff(codes) != 0)) + 1
    edges = np.concatenate(([0], breaks, [n]))
    return list(zip(edges[:-1].tolist(), edges[1:].tolist()))


def trip_quality(us: np.ndarray, values: dict[str, np.ndarray], missing: list[np.ndarray]) -> dict:
    """Distance, sample rate, missing fraction and per-signal resolution of one trip.

    * distance_km: trapezoidal integral of the mean of the available wheel
      speeds (vehicle speed where no wheel speed is present) over intervals
      whose both ends are known.
    * sample_rate_hz: median of 1/dt over consecutive rows.
    * missing_fraction: missing cells / all cells of the signals the log has
      (``missing`` holds one mask per such signal).
    * resolution_<signal>: smallest positive step between consecutive known
      values (SI units), NaN where the signal is absent or never changes.
    """
    t = (us - us[0]) / 1e6
    wheels = [values[c] for c in WHEEL_SPEED_COLUMNS if c in values]
    speeds = wheels or ([values["vehicle_speed"]] if "vehicle_speed" in values else [])
    distance_km = float("nan")
    if speeds:
        mean = mean_known(speeds)
        seg = 0.5 * (mean[1:] + mean[:-1]) * np.diff(t)
        distance_km = float(np.nansum(seg) / 1000.0)
    dt = np.diff(t)
    rate = float(np.median(1.0 / dt)) if len(dt) else float("nan")
    missing_fraction = float(np.mean([m.mean() for m in missing])) if missing else float("nan")
    out = {"distance_km": distance_km, "sample_rate_hz": rate, "missing_fraction": missing_fraction}
    for sig in NUMERIC_SIGNALS:
        out[f"resolution_{sig}"] = _resolution(values[sig]) if sig in values else float("nan")
    return out


def mean_known(signals: list[np.ndarray]) -> np.ndarray:
    """Per-sample mean of the signals that are known there (NaN where none is)."""
    stack = np.vstack(signals)
    known = np.isfinite(stack).sum(axis=0)
    return np.where(known > 0, np.nansum(stack, axis=0) / np.maximum(known, 1), np.nan)


def _resolution(v: np.ndarray) -> float:
    known = v[np.isfinite(v)]
    steps = np.abs(np.diff(known))
    steps = steps[steps > 0]
    return float(steps.min()) if len(steps) else float("nan")
