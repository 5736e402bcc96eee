"""From CSV to trip_features: a polled log with read-lag columns and a speed-only telematics log."""

from __future__ import annotations

import math
import numpy as np
import pandas as pd
import pytest

import synthetic_fleet
from features import run_features
from features.row import parse_nan_reasons
from ingest import run_ingest
from tracktrue.schema import POSITIONS
from tracktrue.store import Store
from tracktrue.units import DEG_RAD, G0_MPS2, KPH_MPS

SEED = 75
#: Read lag of each polled signal, in ms: the cells of one row are read one after another.
LAGS_MS = {"wheel_speed_fl": 0, "wheel_speed_fr": 100, "wheel_speed_rl": 200, "wheel_speed_rr": 300,
           "yaw_rate": 100, "steering_angle": 200, "accel_long": 300, "accel_lat": 0}
HEADERS = {"wheel_speed_fl": "Wheel speed FL [km/h]", "wheel_speed_fr": "Wheel speed FR [km/h]",
           "wheel_speed_rl": "Wheel speed RL [km/h]", "wheel_speed_rr": "Wheel speed RR [km/h]",
           "yaw_rate": "Yaw rate [deg/s]", "steering_angle": "Steering angle [deg]",
           "accel_long": "Long accel [g]", "accel_lat": "Lat accel [g]", "vehicle_speed": "Vehicle speed [km/h]"}
TO_LOGGED = {"wheel_speed_fl": 1 / KPH_MPS, "wheel_speed_fr": 1 / KPH_MPS, "wheel_speed_rl": 1 / KPH_MPS,
             "wheel_speed_rr": 1 / KPH_MPS, "vehicle_speed": 1 / KPH_MPS, "yaw_rate": 1 / DEG_RAD,
             "steering_angle": 1 / DEG_RAD, "accel_long": 1 / G0_MPS2, "accel_lat": 1 / G0_MPS2}
#: Logged steps in the logged units: 1 km/h, 0.1 deg/s, 1 deg, 0.01 g.
STEPS = {**{s: 1.0 for s in HEADERS if "speed" in s}, "yaw_rate": 0.1, "steering_angle": 1.0,
         "accel_long": 0.01, "accel_lat": 0.01}


def _write(path, samples: pd.DataFrame, rows: np.ndarray, signals: list[str], lagged: bool) -> None:
    """Rows ``rows`` of a 10 Hz trip as a CSV; each signal read LAGS_MS before its row when ``lagged``."""
    columns = {"time": samples["time"].iloc[rows].dt.strftime("%Y-%m-%dT%H:%M:%S.%fZ").to_numpy()}
    for s in signals:
        lag_rows = LAGS_MS.get(s, 0) // 100 if lagged else 0
        source = np.maximum(rows - lag_rows, 0)
        value = samples[s].to_numpy(float)[source] * TO_LOGGED[s]
        columns[HEADERS[s]] = np.round(value / STEPS[s]) * STEPS[s]
        if lagged and s in LAGS_MS:
            columns[HEADERS[s].split(" [")[0] + " @ms"] = np.full(rows.size, LAGS_MS[s])
    columns["ESC lamp"] = samples["lamp_esc"].iloc[rows].astype(int).to_numpy()
    frame = pd.DataFrame(columns)
    path.write_text(f"# vehicle: {samples['vehicle_id'].iloc[0]}\n" + frame.to_csv(index=False, float_format="%.2f"))


@pytest.fixture(scope="module")
def store(tmp_path_factory) -> Store:
    """One store holding both logs, ingested and featured."""
    root = tmp_path_factory.mktemp("gating")
    samples, spec = synthetic_fleet.trip_samples(seed=SEED, duration_s=1200.0)
    logs = root / "logs"
    logs.mkdir()
    polled_rows = np.arange(0, len(samples), 5)  # 10 Hz -> 2 Hz
    _write(logs / "polled.csv", samples, polled_rows, list(LAGS_MS), lagged=True)
    later = samples.assign(time=samples["time"] + pd.Timedelta(days=1))
    _write(logs / "telematics.csv", later, np.arange(0, len(samples), 10), ["vehicle_speed"], lagged=False)
    registry = root / "vehicles.csv"
    pd.DataFrame([{k: spec[k] for k in ("vehicle_id", "platform", "wheelbase_m", "track_front_m",
                                        "track_rear_m", "steering_ratio", "tyre_radius_m",
                                        "understeer_gradient_deg_per_g")}]).to_csv(registry, index=False)
    store = Store(root / "store")
    summary = run_ingest([logs], store, vehicles_csv=registry)
    assert summary.rejected_files == [] and summary.rows_rejected == 0, summary.describe()
    run_features(store)
    return store


def _by_kind(store: Store) -> dict[str, pd.Series]:
    tf = store.read_table("trip_features")
    return {row["logger_kind"]: row for _, row in tf.iterrows()}


def test_trip_signals_carry_each_signals_read_lag_and_step(store):
    ts = store.read_table("trip_signals")
    trips = store.read_table("trips").set_index("trip_id")
    polled = ts[ts.trip_id.map(trips["source_file"]).str.endswith("polled.csv")].set_index("signal")
    for signal, lag in LAGS_MS.items():
        assert polled.loc[signal, "read_lag_s"] == pytest.approx(lag / 1000.0), signal
    assert polled.loc["wheel_speed_fl", "step_si"] == pytest.approx(KPH_MPS, rel=1e-6)
    assert polled.loc["wheel_speed_fl", "rate_hz"] < 2.0 and bool(polled.loc["wheel_speed_fl", "present"])
    assert not polled.loc["vehicle_speed", "present"]


def test_the_polled_and_the_telematics_trip_get_their_logger_kind_and_reasons(store):
    rows = _by_kind(store)
    assert set(rows) == {"polled", "telematics"}
    polled = parse_nan_reasons(rows["polled"]["nan_reasons"])
    for f in ("yaw_offset_dps", "yaw_gain", "lat_residual_g"):
        assert polled[f] in {"resolution_too_coarse", "stale_values", "rate_too_low"}, f
    assert all(math.isfinite(rows["polled"][f"wheel_ratio_{p}_pct"]) for p in POSITIONS)
    telematics = parse_nan_reasons(rows["telematics"]["nan_reasons"])
    assert set(telematics.values()) == {"signal_missing"}
    assert rows["telematics"]["distance_km"] > 1.0


def test_read_lag_alignment_leaves_no_bias_between_wheels_read_300_ms_apart(store):
    # RR is read 0.3 s before FL; while accelerating at a ≥ 1 m/s² that alone makes RR − FL low by
    # a·0.3 s ≥ 0.3 m/s (v = v0 + a·t). Stored after alignment, RR − FL matches the unskewed source.
    samples, _ = synthetic_fleet.trip_samples(seed=SEED, duration_s=1200.0)
    rows = np.arange(0, len(samples), 5)
    trips = store.read_table("trips")
    polled = trips[trips.source_file.str.endswith("polled.csv")].iloc[0]
    stored = pd.read_parquet(store.root / polled.sample_file)
    stored = stored[stored.trip_id == polled.trip_id].sort_values("time")
    assert len(stored) == rows.size
    source = samples.iloc[rows]
    accelerating = np.gradient(samples.wheel_speed_rr.to_numpy(), 0.1)[rows] > 1.0
    assert accelerating.sum() > 30
    error = ((stored.wheel_speed_rr - stored.wheel_speed_fl).to_numpy()
             - (source.wheel_speed_rr - source.wheel_speed_fl).to_numpy())[accelerating]
    assert abs(np.nanmedian(error)) < 0.1  # unaligned: about -0.4 m/s
