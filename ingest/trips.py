"""Trip splitting and the per-trip quality figures published in ``trips``.

A log may hold several ignition cycles; a time gap longer than ``gap_s``
(default 300 s) between consecutive rows of one vehicle starts a new trip.
The quality figures let features/ gate on sample rate and resolution
(DESIGN.md: a 1 km/h step is not a 0.01 km/h step); ``signal_records`` gives
the rows of the published ``trip_signals`` table.
"""

from __future__ import annotations

import numpy as np

from tracktrue.schema import NUMERIC_SIGNALS, WHEEL_SPEED_COLUMNS
from tracktrue.signal_quality import MOVING_MPS, fresh_rate, moving_seconds


def trip_bounds(codes: np.ndarray, us: np.ndarray, gap_s: float) -> list[tuple[int, int]]:
    """[start, stop) of each trip in rows sorted by (vehicle, time)."""
    n = len(us)
    if n == 0:
        return []
    breaks = np.flatnonzero((np.diff(us) > gap_s * 1e6) | (np.diff(codes) != 0)) + 1
    edges = np.concatenate(([0], breaks, [n]))
    return list(zip(edges[:-1].tolist(), edges[1:].tolist()))


def trip_speed(values: dict[str, np.ndarray]) -> np.ndarray | None:
    """Per-sample mean of the known wheel speeds, else the vehicle speed; None when neither is logged
    (shared by trip_quality and signal_records, which would otherwise each compute it)."""
    wheels = [values[c] for c in WHEEL_SPEED_COLUMNS if c in values]
    speeds = wheels or ([values["vehicle_speed"]] if "vehicle_speed" in values else [])
    return mean_known(speeds) if speeds else None


def trip_quality(us: np.ndarray, values: dict[str, np.ndarray], missing: list[np.ndarray],
                 speed: np.ndarray | None) -> dict:
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
    distance_km = float("nan")
    if speed is not None:
        along = np.abs(speed)  # reversing (signed speeds) adds distance too
        seg = 0.5 * (along[1:] + along[:-1]) * np.diff(t)
        distance_km = float(np.nansum(seg) / 1000.0)
    dt = np.diff(t)
    rate = float(np.median(1.0 / dt)) if len(dt) else float("nan")
    missing_fraction = float(np.mean([m.mean() for m in missing])) if missing else float("nan")
    out = {"distance_km": distance_km, "sample_rate_hz": rate, "missing_fraction": missing_fraction}
    for sig in NUMERIC_SIGNALS:
        out[f"resolution_{sig}"] = smallest_step(values[sig]) if sig in values else float("nan")
    return out


def mean_known(signals: list[np.ndarray]) -> np.ndarray:
    """Per-sample mean of the signals that are known there (NaN where none is)."""
    stack = np.vstack(signals)
    known = np.isfinite(stack).sum(axis=0)
    return np.where(known > 0, np.nansum(stack, axis=0) / np.maximum(known, 1), np.nan)


def smallest_step(v: np.ndarray) -> float:
    """Smallest positive change between consecutive known values (the logger's step), NaN if none."""
    known = v[np.isfinite(v)]
    steps = np.abs(np.diff(known))
    steps = steps[steps > 0]
    return float(steps.min()) if len(steps) else float("nan")


def signal_records(us: np.ndarray, values: dict[str, np.ndarray], lags: dict[str, np.ndarray],
                   speed: np.ndarray | None, quality: dict) -> list[dict]:
    """One ``trip_signals`` row per canonical numeric signal of one trip, from its values as logged.

    rate_hz and stale_frac as tracktrue.signal_quality.fresh_rate measures them
    while moving (mean of the known wheel speeds, else the vehicle speed, at
    least 3 m/s; the whole trip when no speed is logged), step_si the smallest
    non-zero step in SI units, read_lag_s the median read lag of the signal's
    companion column (ingest/skew.py; NaN without one). A signal the log lacks,
    or whose cells are all empty, has present False and NaN figures.
    """
    t = (us - us[0]) / 1e6
    if speed is not None:
        with np.errstate(invalid="ignore"):
            moving = speed >= MOVING_MPS
    else:
        moving = np.ones(t.size, bool)
    seconds = moving_seconds(t, moving)
    rows = []
    for sig in NUMERIC_SIGNALS:
        v = values.get(sig)
        present = v is not None and bool(np.isfinite(v).any())
        rate, stale = fresh_rate(v, moving, seconds) if present else (float("nan"), float("nan"))
        lag = lags.get(sig)
        known_lag = lag[np.isfinite(lag)] if lag is not None else np.array([])
        rows.append({"signal": sig, "present": present, "rate_hz": rate,
                     "step_si": quality[f"resolution_{sig}"] if present else float("nan"), "stale_frac": stale,
                     "read_lag_s": float(np.median(known_lag)) / 1000.0 if known_lag.size else float("nan")})
    return rows
