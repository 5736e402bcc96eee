"""The features stage on a store written by the real ingest of simulated CSV exports."""

from __future__ import annotations

import pytest

from features import TRIP_FEATURES_COLUMNS, run_features
from ingest import run_ingest
from synthetic_fleet import generate_fleet
from tracktrue.store import Store


@pytest.mark.slow
def test_features_run_on_ingested_logs_one_row_per_trip_and_then_nothing_new(tmp_path):
    generate_fleet(tmp_path / "logs", n_vehicles=3, days=2, seed=5)
    store = Store.open(tmp_path / "store")
    run_ingest([tmp_path / "logs" / "logs"], store, vehicles_csv=tmp_path / "logs" / "vehicles.csv")
    trips = store.read_table("trips")
    summary = run_features(store)
    table = store.read_table("trip_features")
    assert summary.n_computed == len(trips) > 0
    assert sorted(table["trip_id"]) == sorted(trips["trip_id"])
    assert list(table.columns) == list(TRIP_FEATURES_COLUMNS)
    assert table["platform"].notna().all()
    assert table["wheel_ratio_fl_pct"].notna().mean() > 0.5
    assert run_features(store).n_computed == 0
