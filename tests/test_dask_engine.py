"""`tracktrue features --engine dask`: the same trip_features as the local engine, incrementally."""

from __future__ import annotations

import shutil
import sys

import numpy as np
import pandas as pd
import pytest

from features import run_features
from test_features_support import SPEC, build_store, make_trip
from tracktrue.cli import main
from tracktrue.errors import UserError
from tracktrue.store import Store

distributed = pytest.importorskip("distributed")


@pytest.fixture(scope="module")
def scheduler():
    """A LocalCluster of two worker processes, shared by the tests of this module."""
    from features.dask_engine import local_cluster

    with local_cluster(2) as cluster:
        yield cluster.scheduler_address


def mixed_trips() -> dict[str, pd.DataFrame]:
    """Healthy trips, trips whose features are partly NaN for different reasons, and an unknown vehicle."""
    trips = {f"VAN-1-t{i}": make_trip(seed=i, cruise_s=100.0, speed_scale=0.6 + 0.2 * i) for i in range(3)}
    trips["VAN-1-slow-logger"] = make_trip(seed=7, rate_hz=1.0)  # jitter and derivatives: rate_too_low
    no_yaw = make_trip(seed=8)
    no_yaw["yaw_rate"] = np.nan  # yaw features: signal_missing
    trips["VAN-1-no-yaw"] = no_yaw
    trips["GHOST-t0"] = make_trip(seed=9, spec={**SPEC, "vehicle_id": "GHOST"})  # spec_missing
    for i, df in enumerate(trips.values()):
        df["time"] = df["time"] + pd.Timedelta(days=3 * i)
    return trips


def store_with_trouble(root) -> Store:
    """mixed_trips, plus a catalogued trip whose samples are not in its part file and a corrupt part file."""
    store = build_store(root, mixed_trips(), [SPEC], per_file=2)
    trips = store.read_table("trips")
    lost = trips.iloc[:1].assign(trip_id="VAN-1-lost", start_time=trips["start_time"].iloc[0] + pd.Timedelta(days=40))
    store.publish_table("trips", pd.concat([trips, lost], ignore_index=True))
    (store.root / "samples" / "part-0002.parquet").write_bytes(b"not parquet at all")
    return store


def assert_same_table(left: pd.DataFrame, right: pd.DataFrame) -> None:
    left, right = (t.sort_values("trip_id").reset_index(drop=True) for t in (left, right))
    assert list(left.columns) == list(right.columns)
    assert list(left["trip_id"]) == list(right["trip_id"])
    pd.testing.assert_frame_equal(left, right, check_exact=False, rtol=1e-12, atol=0.0)


def test_dask_engine_on_two_workers_gives_the_local_engines_rows(tmp_path, scheduler):
    local_store = store_with_trouble(tmp_path / "local")
    shutil.copytree(local_store.root, tmp_path / "dask")
    dask_store = Store.open(tmp_path / "dask")

    local = run_features(local_store)
    on_dask = run_features(dask_store, engine="dask", scheduler=scheduler)

    assert (on_dask.n_computed, on_dask.n_kept) == (local.n_computed, local.n_kept)
    assert on_dask.unreadable == local.unreadable == {"samples/part-0002.parquet": on_dask.unreadable[
        "samples/part-0002.parquet"]}
    assert on_dask.nan_reasons == local.nan_reasons
    table = dask_store.read_table("trip_features")
    assert_same_table(table, local_store.read_table("trip_features"))
    # the store really holds the troubles the test is about
    by_id = table.set_index("trip_id")
    assert "jitter" in by_id.loc["VAN-1-slow-logger", "nan_reasons"]
    assert "yaw_offset_dps=signal_missing" in by_id.loc["VAN-1-no-yaw", "nan_reasons"]
    assert by_id.loc["VAN-1-lost", "nan_reasons"].count("too_few_samples") > 10
    unreadable_trips = set(local_store.read_table("trips").query("sample_file == 'samples/part-0002.parquet'")["trip_id"])
    assert unreadable_trips and not unreadable_trips & set(table["trip_id"])
    assert dask_store.read_table("platform_specs").equals(local_store.read_table("platform_specs"))


def test_incremental_dask_run_computes_only_new_trips(tmp_path, scheduler):
    first = dict(list(mixed_trips().items())[:2])
    store = build_store(tmp_path, first, [SPEC])
    assert run_features(store, engine="dask", scheduler=scheduler).n_computed == 2
    before = store.read_table("trip_features").set_index("trip_id")
    build_store(tmp_path, mixed_trips(), [SPEC])  # ingest adds four trips
    again = run_features(store, engine="dask", scheduler=scheduler)
    assert (again.n_computed, again.n_kept) == (4, 2)
    after = store.read_table("trip_features").set_index("trip_id")
    pd.testing.assert_frame_equal(after.loc[before.index], before, check_like=True)
    assert run_features(store, engine="dask", scheduler=scheduler).n_computed == 0


def test_cli_reads_samples_through_a_file_url_store(tmp_path, scheduler, capsys):
    store = build_store(tmp_path / "store", dict(list(mixed_trips().items())[:2]), [SPEC])
    url = store.root.resolve().as_uri()
    assert url.startswith("file://")
    assert main(["features", "--store", url, "--engine", "dask", "--scheduler", scheduler]) == 0
    assert "2 trip(s) computed" in capsys.readouterr().out
    assert len(store.read_table("trip_features")) == 2


def test_samples_url_points_the_workers_at_the_samples(tmp_path, scheduler):
    local_store = build_store(tmp_path / "local", dict(list(mixed_trips().items())[:3]), [SPEC])
    shutil.copytree(local_store.root, tmp_path / "catalog")
    catalog = Store.open(tmp_path / "catalog")
    shutil.rmtree(catalog.root / "samples")  # the samples live only where the URL says
    run_features(local_store)
    summary = run_features(catalog, engine="dask", scheduler=scheduler, samples_url=local_store.root.as_uri())
    assert summary.n_computed == 3 and not summary.unreadable
    assert_same_table(catalog.read_table("trip_features"), local_store.read_table("trip_features"))


def test_without_dask_installed_the_engine_says_how_to_get_it(tmp_path, monkeypatch):
    store = build_store(tmp_path, dict(list(mixed_trips().items())[:1]), [SPEC])
    monkeypatch.setitem(sys.modules, "dask.dataframe", None)  # import fails as if not installed
    with pytest.raises(UserError, match=r"tracktrue\[dask\]"):
        run_features(store, engine="dask")


def test_scheduler_without_dask_engine_and_unknown_engines_are_usage_errors(tmp_path):
    store = build_store(tmp_path, dict(list(mixed_trips().items())[:1]), [SPEC])
    with pytest.raises(UserError, match="--engine dask"):
        run_features(store, scheduler="tcp://127.0.0.1:1")
    with pytest.raises(UserError, match="unknown engine"):
        run_features(store, engine="spark")


def test_small_sample_files_are_grouped_whole_into_partitions():
    from features.dask_engine import TRIPS_PER_PARTITION, group_files

    jobs = [(f"part-{i}", list(range(10))) for i in range(400)]  # 4,000 trips in 10-trip files
    groups = group_files(jobs, n_threads=2)
    assert [f for g in groups for f, _ in g] == [f for f, _ in jobs]  # every file once, none split
    sizes = [sum(len(t) for _, t in g) for g in groups]
    assert all(TRIPS_PER_PARTITION <= s < TRIPS_PER_PARTITION + 10 for s in sizes[:-1])
    few = group_files(jobs[:4], n_threads=2)  # a small run still feeds both workers
    assert len(few) == 4
