"""Hand-made trips for the feature tests, independent of the fleet simulator.

A trip is built from a speed profile and a curvature profile with the same
rigid-body relations the features invert (wheel paths, a_y = v·r, single-track
steering), plus small Gaussian noise. The tests in this file check the builder
itself so a wrong builder cannot make a feature test pass.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pyarrow.parquet as pq

from features.kinematics import wheel_path_factors
from tracktrue.schema import SAMPLE_COLUMNS, WHEEL_SPEED_COLUMNS
from tracktrue.store import Store, atomic_write_parquet

SPEC = {
    "vehicle_id": "VAN-1", "platform": "van", "wheelbase_m": 3.0, "track_front_m": 1.6,
    "track_rear_m": 1.5, "steering_ratio": 16.0, "tyre_radius_m": 0.33,
    "understeer_gradient_deg_per_g": 2.0,
}


def profile(rate_hz=10.0, stop_s=20.0, cruise_s=120.0, turns=2, grade=0.0, speed_scale=1.0):
    """Time, speed (m/s) and curvature (1/m) of a stop → drive → stop trip with ``turns`` left/right pairs."""
    a, b = 15.0 * speed_scale, 22.0 * speed_scale
    segments = [(stop_s, 0.0, 0.0), (10.0, a, 0.0), (cruise_s, a, 0.0)]
    segments += [(25.0, a, 1 / 100), (20.0, a, 0.0), (25.0, a, -1 / 100), (20.0, a, 0.0)] * int(turns)
    segments += [(10.0, b, 0.0), (cruise_s / 2, b, 0.0), (10.0, 0.0, 0.0), (stop_s, 0.0, 0.0)]
    t_knots = np.concatenate(([0.0], np.cumsum([s[0] for s in segments])))
    n = int(t_knots[-1] * rate_hz)
    t = np.arange(n) / rate_hz
    seg = np.clip(np.searchsorted(t_knots, t, side="right") - 1, 0, len(segments) - 1)
    target_v = np.array([s[1] for s in segments])
    # ease speed between segment targets over each segment (cosine ramp keeps dv/dt finite)
    start_v = np.concatenate(([0.0], target_v[:-1]))
    frac = (t - t_knots[seg]) / np.array([s[0] for s in segments])[seg]
    ramp = 0.5 - 0.5 * np.cos(np.pi * np.clip(frac / 0.5, 0, 1))
    v = start_v[seg] + (target_v[seg] - start_v[seg]) * ramp
    k_target = np.array([s[2] for s in segments])
    curvature = k_target[seg] * np.sin(np.pi * frac) ** 2
    return t, v, curvature, grade


def make_trip(seed=0, rate_hz=10.0, radius_error=(0, 0, 0, 0), yaw_offset_radps=0.0, yaw_gain=1.0,
              steer_offset_rad=0.0, ax_offset=0.0, ay_offset=0.0, wheel_noise=0.01, spec=SPEC,
              jitter_wheel=None, jitter_frac=0.0, dropout_wheel=None, **profile_args) -> pd.DataFrame:
    """Canonical samples of one hand-made trip (SI units, ISO 8855 signs)."""
    rng = np.random.default_rng(seed)
    t, v, k, grade = profile(rate_hz=rate_hz, **profile_args)
    n = t.size
    r = v * k
    factors = wheel_path_factors(k, spec["track_front_m"], spec["track_rear_m"], spec["wheelbase_m"])
    wheels = v * factors * (1.0 + np.asarray(radius_error, dtype=float))[:, None]
    wheels = wheels + rng.normal(0, wheel_noise, wheels.shape) * (v > 0)
    if jitter_wheel is not None:
        i = ("fl", "fr", "rl", "rr").index(jitter_wheel)
        wheels[i] *= 1.0 + jitter_frac * rng.standard_normal(n)
    if dropout_wheel is not None:
        i = ("fl", "fr", "rl", "rr").index(dropout_wheel)
        every = int(30 * rate_hz)
        drop = (np.arange(n) % every < max(1, int(0.5 * rate_hz))) & (v > 5)
        wheels[i][drop] = 0.0
    wheels = np.clip(wheels, 0.0, None)
    ax = np.gradient(v, t) + 9.80665 * np.sin(np.arctan(grade)) + ax_offset
    ay = v * r + ay_offset
    kus = spec["understeer_gradient_deg_per_g"] * np.pi / 180 / (9.80665 * spec["wheelbase_m"])
    delta = r * spec["wheelbase_m"] * (1 + kus * v * v) / np.maximum(v, 0.1)
    sw = delta * spec["steering_ratio"] + steer_offset_rad
    start = pd.Timestamp("2026-03-02 08:00", tz="UTC")
    df = pd.DataFrame({
        "vehicle_id": spec["vehicle_id"], "trip_id": f"trip-{seed}",
        "time": start + pd.to_timedelta(t, unit="s"),
        **{c: wheels[i] for i, c in enumerate(WHEEL_SPEED_COLUMNS)},
        "vehicle_speed": np.nan,
        "yaw_rate": yaw_offset_radps + yaw_gain * r + rng.normal(0, 0.002, n),
        "steering_angle": sw + rng.normal(0, 0.002, n),
        "accel_long": ax + rng.normal(0, 0.05, n),
        "accel_lat": ay + rng.normal(0, 0.05, n),
        "brake": (v < 0.05),
        "lamp_abs": False, "lamp_esc": False, "dtc": None,
    })
    return df[list(SAMPLE_COLUMNS)]


def build_store(root, trips: dict[str, pd.DataFrame], vehicles: list[dict], per_file: int = 2) -> Store:
    """A tiny store in ingest's published layout: samples part files, "trips" and "vehicles" tables."""
    store = Store.open(root)
    rows = []
    ids = sorted(trips)
    for part, start in enumerate(range(0, len(ids), per_file)):
        chunk = ids[start:start + per_file]
        rel = f"samples/part-{part:04d}.parquet"
        frames = [trips[i].assign(trip_id=i) for i in chunk]
        atomic_write_parquet(store.root / rel, pd.concat(frames, ignore_index=True))
        for i in chunk:
            df = trips[i]
            rows.append({
                "trip_id": i, "vehicle_id": df["vehicle_id"].iloc[0],
                "start_time": df["time"].iloc[0], "end_time": df["time"].iloc[-1],
                "n_samples": len(df), "distance_km": 1.0, "sample_rate_hz": 10.0,
                "source_file": f"{i}.csv", "sample_file": rel, "source_sha256": "0" * 64,
                "signals": "", "missing_fraction": 0.0,
            })
    store.publish_table("trips", pd.DataFrame(rows))
    store.publish_table("vehicles", pd.DataFrame(vehicles).assign(spec_source="registry"))
    return store


def test_builder_rear_wheels_follow_the_kinematic_yaw():
    df = make_trip(wheel_noise=0.0)
    r = (df["wheel_speed_rr"] - df["wheel_speed_rl"]) / SPEC["track_rear_m"]
    truth = df["yaw_rate"]
    turning = truth.abs() > 0.05
    assert np.allclose(r[turning], truth[turning], atol=0.01)


def test_builder_store_layout_can_be_read_back(tmp_path):
    store = build_store(tmp_path, {"a": make_trip(seed=1), "b": make_trip(seed=2)}, [SPEC])
    trips = store.read_table("trips")
    assert list(trips["trip_id"]) == ["a", "b"]
    table = pq.read_table(store.root / trips["sample_file"].iloc[0], filters=[("trip_id", "=", "b")])
    assert table.num_rows == len(make_trip(seed=2))
