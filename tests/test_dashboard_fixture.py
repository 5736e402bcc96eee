"""A small store of published tables in the binding column contracts, for dashboard tests.

Invented UI data only (never a check value): it lets the dashboard be tested
before and independently of the ingest → features → models chain. The
benchmark builds its 500-vehicle store with the same function.
"""

from __future__ import annotations

import datetime as dt

import numpy as np
import pandas as pd

from tracktrue.ids import trip_id, vehicle_bucket
from tracktrue.schema import (CORE_FEATURES, COMPONENTS, PEER_BANDS_COLUMNS, QUALITY_COLUMNS, STATUS_HISTORY_COLUMNS,
                              STATUSES, TRIP_SCORES_COLUMNS, VEHICLE_DRIFT_COLUMNS, VEHICLE_STATUS_COLUMNS)
from tracktrue.store import Store, atomic_write_parquet

FIRST_DAY = dt.date(2026, 3, 2)
PLATFORMS = ("van_l2", "van_l3", "pickup")
DEPOTS = ("North yard", "Harbour", "Ridge")
RATE_HZ = 10.0


def build_store(root, n_vehicles: int = 12, days: int = 20, trips_per_day: float = 2.0,
                seed: int = 3, samples_for: int | None = 4) -> Store:
    """Publish every table the dashboard reads; ``samples_for`` vehicles get sample files."""
    rng = np.random.default_rng(seed)
    store = Store.open(root)
    ids = [f"TT-{i:03d}" for i in range(1, n_vehicles + 1)]
    vehicles = pd.DataFrame({
        "vehicle_id": ids,
        "platform": [PLATFORMS[i % len(PLATFORMS)] for i in range(n_vehicles)],
        "wheelbase_m": 3.0, "track_front_m": 1.6, "track_rear_m": 1.55, "steering_ratio": 16.0,
        "tyre_radius_m": 0.33, "understeer_gradient_deg_per_g": 2.0,
        "depot": [DEPOTS[(i // 2) % len(DEPOTS)] if i % 11 != 10 else None for i in range(n_vehicles)],
    })
    trips = _trips(rng, ids, days, trips_per_day)
    features = _features(rng, trips, vehicles)
    scores = _scores(rng, trips, vehicles)
    status = _status(rng, vehicles, scores)
    store.publish_table("vehicles", vehicles)
    store.publish_table("vehicle_status", status)
    store.publish_table("status_history", _history(status))
    store.publish_table("trip_scores", scores, partition_by="bucket_key")
    store.publish_table("trip_features", features)
    store.publish_table("vehicle_drift", _drift(scores))
    store.publish_table("peer_bands", _bands(features))
    store.publish_table("ingested_files", _files(trips))
    store.publish_table("rejects", pd.DataFrame({
        "source_file": ["logs/TT-002/bad.csv", "logs/TT-002/bad.csv", "logs/TT-005/x.csv"],
        "row": [12, 13, 1], "reason": ["time goes backwards", "time goes backwards", "=SUM(A1) unit unknown"]}))
    if samples_for:
        _write_samples(store, trips, ids[:samples_for], vehicles)
    store.publish_table("trips", trips)
    return store


def _trips(rng, ids, days, trips_per_day) -> pd.DataFrame:
    n = int(len(ids) * days * trips_per_day)
    vehicle = np.repeat(ids, n // len(ids))
    day = np.tile(np.arange(n // len(ids)) // trips_per_day, len(ids)).astype(int)
    start = (pd.Timestamp(FIRST_DAY, tz="UTC") + pd.to_timedelta(day, unit="D")
             + pd.to_timedelta(rng.integers(6 * 3600, 18 * 3600, len(vehicle)), unit="s"))
    # The last vehicle stopped logging half way through: the intake page must show it.
    keep = ~((vehicle == ids[-1]) & (day >= days // 2))
    vehicle, start = vehicle[keep], start[keep]
    duration = pd.to_timedelta(rng.integers(300, 1800, len(vehicle)), unit="s")
    frame = pd.DataFrame({"vehicle_id": vehicle, "start_time": start, "end_time": start + duration})
    frame.insert(0, "trip_id", [trip_id(v, t) for v, t in zip(frame["vehicle_id"], frame["start_time"])])
    frame["n_samples"] = (duration.total_seconds() * RATE_HZ).astype(int).to_numpy()
    frame["distance_km"] = np.round(rng.uniform(3, 40, len(frame)), 2)
    frame["sample_rate_hz"] = RATE_HZ
    frame["source_file"] = [f"logs/{v}/{t:%Y%m%dT%H%M%S}.csv" for v, t in zip(frame["vehicle_id"], frame["start_time"])]
    frame["sample_file"] = [f"samples/bucket={vehicle_bucket(v):02d}/part-0.parquet" for v in frame["vehicle_id"]]
    frame["signals"] = "wheel_speed_fl,wheel_speed_fr,wheel_speed_rl,wheel_speed_rr,yaw_rate,steering_angle,accel_long,accel_lat"
    frame["missing_fraction"] = 0.0
    return frame.sort_values(["vehicle_id", "start_time"], ignore_index=True)


def _features(rng, trips, vehicles) -> pd.DataFrame:
    out = trips[["trip_id", "vehicle_id", "start_time"]].merge(vehicles[["vehicle_id", "platform"]])
    for name in CORE_FEATURES:
        out[name] = rng.normal(0, 0.1, len(out))
    out.loc[out["vehicle_id"] == "TT-001", "wheel_jitter_rl_pct"] += np.linspace(0, 1.5, (out["vehicle_id"] == "TT-001").sum())
    for name in QUALITY_COLUMNS:
        out[name] = rng.uniform(10, 100, len(out))
    out["nan_reasons"] = ""
    return out


def _scores(rng, trips, vehicles) -> pd.DataFrame:
    out = trips[["trip_id", "vehicle_id", "start_time"]].merge(vehicles[["vehicle_id", "platform"]])
    out = out.rename(columns={"platform": "peer_group"})
    out["peer_group"] = out["peer_group"] + "@10Hz"
    out["score"] = rng.uniform(0.35, 0.55, len(out))
    first = out["vehicle_id"] == "TT-001"
    out.loc[first, "score"] += np.linspace(0, 0.25, first.sum())
    out["top_feature"] = np.where(first, "wheel_jitter_rl_pct", "yaw_rest_dps")
    out["top_z"] = np.where(first, 6.0, 1.0)
    for name in CORE_FEATURES:
        out[f"z_{name}"] = rng.normal(0, 1, len(out))
    out.loc[first, "z_wheel_jitter_rl_pct"] += 8
    out["bucket_key"] = [vehicle_bucket(v) % 4 for v in out["vehicle_id"]]
    assert list(out.columns[: len(TRIP_SCORES_COLUMNS)]) == list(TRIP_SCORES_COLUMNS)
    return out


def _status(rng, vehicles, scores) -> pd.DataFrame:
    agg = scores.groupby("vehicle_id").agg(score=("score", "median"), last_trip=("start_time", "max"),
                                           n_trips=("trip_id", "size")).reset_index()
    out = vehicles[["vehicle_id", "platform", "depot"]].merge(agg, how="left")
    out = out.sort_values("score", ascending=False, ignore_index=True)
    n = len(out)
    out["rank"] = np.arange(1, n + 1)
    statuses = ["inspect", "lamp_lit", "watch"] + ["ok"] * max(0, n - 4) + ["insufficient_data"]
    out["status"] = statuses[:n]
    comps = ["wheel_sensor_rl", "yaw_sensor", "tyre_fr"] + ["none"] * n
    out["suspected_component"] = comps[:n]
    out["evidence"] = ["rl jitter 1.4 % vs fleet 0.1 % (z = 8.1)", "rest yaw 0.9 deg/s", "-fr ratio +0.6 %"] + [""] * (n - 3)
    out["flagged_since"] = [FIRST_DAY + dt.timedelta(days=9), FIRST_DAY + dt.timedelta(days=12)] + [None] * (n - 2)
    out["suggestion"] = ["Check the rear-left tone ring and sensor air gap"] + [""] * (n - 1)
    out["lamp_on"] = out["status"] == "lamp_lit"
    out["as_of"] = pd.Timestamp(FIRST_DAY, tz="UTC") + pd.Timedelta(days=30)
    out["raw_status"] = out["status"]
    out["status_note"] = ""
    out["label"] = ""
    out["snoozed_until"] = None
    out["snooze_reason"] = ""
    assert set(out["status"]) <= set(STATUSES) and set(out["suspected_component"]) <= set(COMPONENTS)
    return out[list(VEHICLE_STATUS_COLUMNS)]


#: The run before the fixture's ranking: rank 1 was only on watch, rank 3 was fine.
EARLIER_STATUS = {0: ("watch", "wheel_sensor_rl"), 2: ("ok", "none")}


def _history(status) -> pd.DataFrame:
    """Two runs: the one before (EARLIER_STATUS changed) and the published ranking."""
    runs = []
    for k, run_id in enumerate(("run-before", "run-latest")):
        run = status.assign(run_id=run_id, created_at=pd.Timestamp("2026-04-01T02:00Z") + pd.Timedelta(days=k),
                            as_of=(pd.Timestamp(FIRST_DAY) + pd.Timedelta(days=29 + k)).date(),
                            held_status=status["status"], last_repair=None)
        if k == 0:
            for i, (st, comp) in EARLIER_STATUS.items():
                run.loc[i, ["status", "held_status", "raw_status", "suspected_component"]] = [st, st, st, comp]
        runs.append(run)
    out = pd.concat(runs, ignore_index=True)
    out["flagged_since"] = pd.to_datetime(out["flagged_since"]).dt.date
    return out[list(STATUS_HISTORY_COLUMNS)]


def _drift(scores) -> pd.DataFrame:
    out = scores[["vehicle_id", "trip_id", "start_time"]].copy()
    out["statistic"] = "wheel_rl"
    out["value"] = scores["z_wheel_jitter_rl_pct"].to_numpy()
    out["cusum_hi"] = out.groupby("vehicle_id")["value"].transform(lambda s: (s.clip(lower=0) * 0.2).cumsum())
    out["cusum_lo"] = 0.0
    out["threshold"] = 5.0
    out["alarm"] = out["cusum_hi"] > out["threshold"]
    return out[list(VEHICLE_DRIFT_COLUMNS)]


def _bands(features) -> pd.DataFrame:
    rows = []
    for platform, part in features.groupby("platform"):
        for name in CORE_FEATURES:
            q = part[name].quantile([0.05, 0.5, 0.95]).to_numpy()
            rows.append((f"{platform}@10Hz", name, *q, part["vehicle_id"].nunique()))
    return pd.DataFrame(rows, columns=list(PEER_BANDS_COLUMNS))


def _files(trips) -> pd.DataFrame:
    out = pd.DataFrame({"path": trips["source_file"], "sha256": "0" * 64, "status": "ingested", "reason": "",
                        "n_rows": trips["n_samples"], "n_rejected": 0, "n_trips": 1,
                        "ingested_at": trips["end_time"]})
    bad = pd.DataFrame({"path": ["logs/TT-002/bad.csv", "logs/TT-005/x.csv"], "sha256": ["1" * 64, "2" * 64],
                        "status": ["partial", "rejected"], "reason": ["2 rows rejected", "no recognised columns"],
                        "n_rows": [400, 0], "n_rejected": [2, 1], "n_trips": [1, 0],
                        "ingested_at": [trips["end_time"].max()] * 2})
    return pd.concat([out, bad], ignore_index=True)


def _write_samples(store, trips, ids, vehicles) -> None:
    """Canonical samples of a gentle left curve with a lamp lit half way, per bucket file."""
    parts = {}
    for tid, vid, start, n, sample_file in trips.loc[trips["vehicle_id"].isin(ids),
                                                     ["trip_id", "vehicle_id", "start_time", "n_samples",
                                                      "sample_file"]].itertuples(index=False):
        n = min(n, 1200)
        t = np.arange(n) / RATE_HZ
        v = 15 + 5 * np.sin(t / 20)
        yaw = 0.05 * np.sin(t / 15)
        frame = pd.DataFrame({"vehicle_id": vid, "trip_id": tid, "time": start + pd.to_timedelta(t, unit="s"),
                              "wheel_speed_fl": v - 0.6 * yaw, "wheel_speed_fr": v + 0.6 * yaw,
                              "wheel_speed_rl": v - 0.775 * yaw, "wheel_speed_rr": v + 0.775 * yaw,
                              "vehicle_speed": v, "yaw_rate": yaw, "steering_angle": yaw * 3.0 * 16 / 15,
                              "accel_long": np.gradient(v, t), "accel_lat": v * yaw, "brake": False,
                              "lamp_abs": t > t[-1] / 2, "lamp_esc": False,
                              "dtc": np.where(t > t[-1] / 2, "TT-W31", None)})
        parts.setdefault(sample_file, []).append(frame)
    for rel, frames in parts.items():
        atomic_write_parquet(store.root / rel, pd.concat(frames, ignore_index=True))
