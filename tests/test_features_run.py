"""`tracktrue features`: incremental runs over a store in ingest's published layout."""

from __future__ import annotations

import math

import pandas as pd
import pytest

from features import TRIP_FEATURES_COLUMNS, run_features
from test_features_support import SPEC, build_store, make_trip
from tracktrue.cli import EXIT_MISSING, main
from tracktrue.schema import CORE_FEATURES, QUALITY_COLUMNS
from tracktrue.store import Store, TableMissing


def trips(n: int, vehicle: str = "VAN-1", offset: int = 0) -> dict[str, pd.DataFrame]:
    """``n`` hand-made trips, each turning at its own speed (so steering ratio and understeer separate)."""
    out = {}
    for i in range(offset, offset + n):
        df = make_trip(seed=i, spec={**SPEC, "vehicle_id": vehicle}, cruise_s=100.0, speed_scale=0.6 + 0.2 * (i % 4))
        df["time"] = df["time"] + pd.Timedelta(days=i * 20)  # spread over months
        out[f"{vehicle}-t{i}"] = df
    return out


def test_run_without_published_trips_raises_table_missing(tmp_path):
    with pytest.raises(TableMissing):
        run_features(Store.open(tmp_path))


def test_cli_without_trips_says_to_run_the_earlier_stage(tmp_path, capsys):
    assert main(["features", "--store", str(tmp_path)]) == EXIT_MISSING
    assert "run the earlier stage" in capsys.readouterr().err


def test_publishes_one_row_per_trip_with_the_contract_columns(tmp_path):
    store = build_store(tmp_path, trips(3), [SPEC])
    summary = run_features(store)
    table = store.read_table("trip_features")
    assert summary.n_computed == 3 and summary.n_kept == 0
    assert list(table.columns) == list(TRIP_FEATURES_COLUMNS)
    assert list(TRIP_FEATURES_COLUMNS[:4]) == ["trip_id", "vehicle_id", "start_time", "platform"]
    assert set(CORE_FEATURES) | set(QUALITY_COLUMNS) <= set(table.columns)
    assert sorted(table["trip_id"]) == sorted(trips(3))
    assert (table["platform"] == "van").all()
    assert table["start_time"].dt.tz is not None
    assert len(store.table_files("trip_features")) == table["start_month"].nunique()  # one file per month
    assert "3 trip(s) computed" in summary.describe()


def test_incremental_run_computes_only_new_trips_and_rebuild_computes_all(tmp_path):
    store = build_store(tmp_path, trips(2), [SPEC])
    run_features(store)
    first = store.read_table("trip_features").set_index("trip_id")
    build_store(tmp_path, {**trips(2), **trips(1, offset=2)}, [SPEC])  # ingest adds a trip
    again = run_features(store)
    assert (again.n_computed, again.n_kept) == (1, 2)
    second = store.read_table("trip_features").set_index("trip_id")
    assert len(second) == 3
    pd.testing.assert_frame_equal(second.loc[first.index], first, check_like=True)
    assert run_features(store).n_computed == 0
    assert run_features(store, rebuild=True).n_computed == 3


def test_missing_steering_parameters_are_estimated_per_platform_and_marked(tmp_path):
    registry = {k: v for k, v in SPEC.items() if k not in ("steering_ratio", "understeer_gradient_deg_per_g")}
    store = build_store(tmp_path, trips(4), [registry])
    summary = run_features(store)
    specs = store.read_table("platform_specs")
    assert list(specs.columns) == ["platform", "parameter", "value", "estimated", "n_trips"]
    est = specs.set_index("parameter")
    assert est.loc["steering_ratio", "estimated"] and est.loc["steering_ratio", "n_trips"] == 4
    # the hand-made trips steer with ratio 16 and understeer 2 deg/g (test_features_support.SPEC)
    assert est.loc["steering_ratio", "value"] == pytest.approx(16.0, rel=0.03)
    assert est.loc["understeer_gradient_deg_per_g", "value"] == pytest.approx(2.0, abs=0.5)
    assert "ESTIMATED" in summary.describe()
    table = store.read_table("trip_features")
    assert table["steer_yaw_residual_dps"].notna().all()


def test_registry_values_are_published_unestimated(tmp_path):
    store = build_store(tmp_path, trips(1), [SPEC])
    run_features(store)
    specs = store.read_table("platform_specs")
    assert not specs["estimated"].any()
    assert set(specs["parameter"]) == {"steering_ratio", "understeer_gradient_deg_per_g"}


def test_a_vehicle_without_registry_row_gets_nan_with_the_missing_spec_named(tmp_path):
    store = build_store(tmp_path, trips(1, vehicle="GHOST-9"), [SPEC])
    summary = run_features(store)
    row = store.read_table("trip_features").iloc[0]
    assert pd.isna(row["platform"]) and math.isnan(row["yaw_offset_dps"])
    assert "yaw_offset_dps=spec_missing:track_rear_m" in row["nan_reasons"]
    assert "GHOST-9" in summary.describe()
    assert summary.nan_reasons[("yaw_offset_dps", "spec_missing:track_rear_m")] == 1


def test_an_unreadable_sample_file_is_reported_and_its_trips_stay_pending(tmp_path):
    store = build_store(tmp_path, trips(3), [SPEC], per_file=2)
    broken = store.root / "samples" / "part-0001.parquet"
    good = broken.read_bytes()
    broken.write_bytes(b"not parquet")
    summary = run_features(store)
    assert summary.n_computed == 2 and "part-0001.parquet" in summary.describe()
    broken.write_bytes(good)
    assert run_features(store).n_computed == 1


def test_cli_prints_the_summary(tmp_path, capsys):
    build_store(tmp_path, trips(1), [SPEC])
    assert main(["features", "--store", str(tmp_path)]) == 0
    assert "1 trip(s) computed" in capsys.readouterr().out
