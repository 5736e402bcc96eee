"""Invented trip_features tables for the model tests (no tests here; helpers only).

The numbers are plausible, not measured: a healthy fleet with persistent
per-vehicle offsets (alignment, tyre wear) and trip noise, two logger rates,
two platforms, and faults that develop linearly from onset to lamp. They are
test inputs, never check values.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from tracktrue.ids import trip_id
from tracktrue.schema import POSITIONS

START = pd.Timestamp("2026-03-02", tz="UTC")


@dataclass(frozen=True)
class Fault:
    vehicle: str
    kind: str  # wheel_sensor | tyre | yaw_sensor | steering_angle_sensor
    position: str | None
    onset_day: int
    lamp_day: int | None

    @property
    def component(self) -> str:
        return f"{self.kind}_{self.position}" if self.position else self.kind


def make_trip_features(n_vehicles: int = 24, days: int = 50, seed: int = 1, faults: tuple[Fault, ...] = (),
                       outlier_trip: str | None = None, low_rate_vehicles: int = 3) -> pd.DataFrame:
    """One row per trip with CORE_FEATURES, QUALITY_COLUMNS and lamp summary columns."""
    rng = np.random.default_rng(seed)
    rows = []
    for i in range(n_vehicles):
        vid = f"V{i:03d}"
        platform = "van" if i % 3 else "truck"
        low = i >= n_vehicles - low_rate_vehicles
        rate = 1.0 if low else 10.0
        jit_base = 0.5 if low else 0.15
        off = {
            "ratio": rng.normal(0, 0.08, 4), "yaw": rng.normal(0, 0.05), "gain": rng.normal(1, 0.005),
            "steer": rng.normal(0, 1.0), "ax": rng.normal(0, 0.005), "ay": rng.normal(0, 0.005),
            "jit": jit_base + rng.normal(0, 0.1 * jit_base, 4),
        }
        off["ratio"] -= off["ratio"].mean()
        for day in range(days):
            for k in range(rng.integers(2, 6)):
                t = START + pd.Timedelta(days=day, hours=6 + 3 * k, minutes=int(rng.integers(0, 60)))
                dist = float(rng.uniform(5, 60))
                r = {"trip_id": trip_id(vid, t), "vehicle_id": vid, "start_time": t, "platform": platform,
                     "duration_s": dist * 90.0, "distance_km": dist, "sample_rate_hz": rate,
                     "missing_fraction": 0.01, "standstill_s": 120.0, "cruise_s": dist * 40, "moving_s": dist * 80}
                for j, p in enumerate(POSITIONS):
                    r[f"wheel_ratio_{p}_pct"] = off["ratio"][j] + rng.normal(0, 0.02)
                    r[f"wheel_jitter_{p}_pct"] = off["jit"][j] * np.exp(rng.normal(0, 0.1))
                    r[f"wheel_dropouts_{p}"] = 100.0 / dist * rng.poisson(0.02)
                standstill = rng.random() > 0.2
                r["yaw_rest_dps"] = off["yaw"] + rng.normal(0, 0.03) if standstill else np.nan
                r["yaw_offset_dps"] = off["yaw"] + rng.normal(0, 0.05)
                r["yaw_gain"] = off["gain"] + rng.normal(0, 0.01)
                r["steer_center_deg"] = off["steer"] + rng.normal(0, 0.3)
                r["steer_yaw_residual_dps"] = rng.normal(0, 0.1)
                r["accel_long_rest_g"] = off["ax"] + rng.normal(0, 0.003) if standstill else np.nan
                r["accel_lat_rest_g"] = off["ay"] + rng.normal(0, 0.003) if standstill else np.nan
                r["accel_long_residual_g"] = off["ax"] + rng.normal(0, 0.003)
                r["lat_residual_g"] = off["ay"] + rng.normal(0, 0.003)
                r["lamp_abs_on"], r["lamp_esc_on"], r["dtc"] = False, False, ""
                for f in faults:
                    if f.vehicle == vid:
                        _apply_fault(r, f, day, dist, rng)
                rows.append(r)
    df = pd.DataFrame(rows)
    if outlier_trip is not None:  # a gravel road: every wheel jitters, one dropout burst
        idx = df.index[df["vehicle_id"] == outlier_trip][len(df[df["vehicle_id"] == outlier_trip]) // 2]
        for p in POSITIONS:
            df.loc[idx, f"wheel_jitter_{p}_pct"] *= 6
        df.loc[idx, "wheel_dropouts_rl"] = 40.0
        df.loc[idx, "accel_long_residual_g"] += 0.05
    df["nan_reasons"] = ""
    return df


def _apply_fault(r: dict, f: Fault, day: int, dist: float, rng: np.random.Generator) -> None:
    if day < f.onset_day:
        return
    span = (f.lamp_day or f.onset_day + 30) - f.onset_day
    s = min(1.5, (day - f.onset_day) / span)
    if f.kind == "wheel_sensor":
        r[f"wheel_jitter_{f.position}_pct"] += 1.0 * s * abs(rng.normal(1, 0.3))
        r[f"wheel_dropouts_{f.position}"] += 100.0 / dist * rng.poisson(4 * s)
    elif f.kind == "tyre":
        r[f"wheel_ratio_{f.position}_pct"] -= 0.4 * min(1.0, s * 3)
        if f.position in ("rl", "rr"):
            sign = 1 if f.position == "rl" else -1
            # the intercept against the rear wheels moves; the steering centre does not: it is taken
            # where the yaw sensor and the wheels' trip-centred vote agree on straight road
            # (features/windows.py), so a radius change cannot shift it (models.attribution.TYRE_PROOF)
            r["yaw_offset_dps"] += sign * 0.5 * min(1.0, s * 3)
    elif f.kind == "yaw_sensor":
        if not np.isnan(r["yaw_rest_dps"]):
            r["yaw_rest_dps"] += 0.8 * s
        r["yaw_offset_dps"] += 0.8 * s
        r["steer_yaw_residual_dps"] += 0.8 * s
    elif f.kind == "steering_angle_sensor":
        r["steer_center_deg"] += 6.0 * s
        r["steer_yaw_residual_dps"] += 0.6 * s
    if f.lamp_day is not None and day >= f.lamp_day:
        r["lamp_abs_on" if f.kind == "wheel_sensor" else "lamp_esc_on"] = True
        r["dtc"] = "TT-W31" if f.kind == "wheel_sensor" else "TT-Y09"


def truth_frame(faults: tuple[Fault, ...]) -> pd.DataFrame:
    """truth.csv rows for the faults (vehicle_id, fault, component, onset_date, lamp_date)."""
    return pd.DataFrame([{
        "vehicle_id": f.vehicle, "fault": f.kind, "component": f.component,
        "onset_date": (START + pd.Timedelta(days=f.onset_day)).date().isoformat(),
        "lamp_date": (START + pd.Timedelta(days=f.lamp_day)).date().isoformat() if f.lamp_day is not None else "",
    } for f in faults])


DEFAULT_FAULTS: tuple[Fault, ...] = (
    Fault("V001", "wheel_sensor", "rl", 15, 45),
    Fault("V004", "wheel_sensor", "fr", 10, 30),
    Fault("V007", "yaw_sensor", None, 12, 48),
    Fault("V010", "steering_angle_sensor", None, 14, None),
    Fault("V013", "tyre", "rr", 20, None),
)
