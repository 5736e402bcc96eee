"""The whole chain on a small synthetic fleet: simulator → ingest → features → models.

Slow (about a minute): it runs every stage for real. Fleet seed 11 is a test
fixture, not a tuning seed; the figures of merit live in
benchmarks/bench_evaluate.py.
"""

from __future__ import annotations

import datetime as dt

import pandas as pd
import pytest

import models
from tracktrue.schema import RANKING_COLUMNS, VEHICLE_STATUS_COLUMNS
from tracktrue.store import Store

pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def chain(tmp_path_factory):
    from features import run_features
    from ingest import run_ingest
    from synthetic_fleet import generate_fleet

    root = tmp_path_factory.mktemp("chain")
    generate_fleet(root / "fleet", n_vehicles=12, days=16, seed=11)
    store = Store.open(root / "store")
    run_ingest([root / "fleet" / "logs"], store, vehicles_csv=root / "fleet" / "vehicles.csv")
    run_features(store)
    # stand-in: no stage publishes the simulator's service history yet (see models.service)
    store.publish_table("service_events", pd.read_csv(root / "fleet" / "service_history.csv", dtype=str))
    truth = pd.read_csv(root / "fleet" / "truth.csv", dtype=str, keep_default_na=False)
    return store, truth


def test_every_developed_sensor_fault_ranks_above_every_healthy_vehicle_with_its_component(chain):
    store, truth = chain
    models.run_scoring(store)
    ranking = models.ranking_table(store)
    assert list(ranking.columns) == list(VEHICLE_STATUS_COLUMNS)
    assert ranking["vehicle_id"].nunique() == store.read_table("vehicles")["vehicle_id"].nunique()
    end = pd.to_datetime(ranking["last_trip"], utc=True).max().date()
    # a telematics unit records no chassis sensor: its vehicle is insufficient_data, never ok
    loggers = pd.read_csv(store.root.parent / "fleet" / "loggers.csv", dtype=str).set_index("vehicle_id")["logger_kind"]
    blind = truth["vehicle_id"].map(loggers).eq("telematics")
    rank = ranking.set_index("vehicle_id")
    assert (rank.loc[loggers.index[loggers == "telematics"], "status"].isin(["insufficient_data", "lamp_lit"])).all()
    developed = truth[~truth["component"].str.startswith("tyre_") & ~blind & truth["growth"].eq("gradual")
                      & (pd.to_datetime(truth["onset_date"]).dt.date <= end - dt.timedelta(days=5))]
    assert len(developed) >= 2
    best_healthy = rank.drop(index=truth["vehicle_id"], errors="ignore")
    best_healthy = best_healthy.loc[best_healthy["status"] != "insufficient_data", "rank"].min()
    for r in developed.itertuples():
        assert rank.at[r.vehicle_id, "rank"] < best_healthy, r
        assert rank.at[r.vehicle_id, "suspected_component"] == r.component, r
    assert models.format_ranking(ranking, "csv").splitlines()[0].split(",") == list(RANKING_COLUMNS)


def test_scoring_as_of_a_date_reads_no_later_trip(chain):
    store, _ = chain
    as_of = dt.date(2026, 3, 10)
    models.run_scoring(store, as_of=as_of)
    end = pd.Timestamp(as_of, tz="UTC") + pd.Timedelta(days=1)
    assert store.read_table("trip_scores")["start_time"].max() < end
    assert store.read_table("vehicle_drift")["start_time"].max() < end
    status = store.read_table("vehicle_status")
    assert (pd.to_datetime(status["last_trip"], utc=True) < end).all()
    assert set(status["as_of"]) == {as_of}


def test_simulated_esc_interventions_and_esc_off_are_no_lamp_events_and_stored_codes_are(chain):
    # lamp_episodes.csv is the simulator's ground truth of every lamp that is no fault
    # (interventions flash the ESC lamp, ESC-off lights it until the key cycle) and of every
    # stored intermittent code (DESIGN.md, "What the lamp means")
    from models.lamps import lamp_events, read_trip_lamps

    store, truth = chain
    root = store.root.parent
    episodes = pd.read_csv(root / "fleet" / "lamp_episodes.csv", dtype={"vehicle_id": str})
    trips = store.read_table("trips")
    lamps = lamp_events(trips, read_trip_lamps(store, trips["trip_id"]))
    lamps["trip_start"] = pd.to_datetime(lamps["start_time"], utc=True).dt.strftime("%Y-%m-%dT%H:%M:%SZ")
    faulty_lit = set(truth.loc[truth["lamp_date"] != "", "vehicle_id"])
    merged = episodes.merge(lamps, on=["vehicle_id", "trip_start"], how="left", validate="many_to_one")
    assert merged["lamp_event"].notna().all(), "every episode's trip was ingested"
    harmless = merged[merged["kind"].isin(["intervention", "esc_off"]) & ~merged["vehicle_id"].isin(faulty_lit)]
    assert len(harmless) > 0 and harmless["lamp_on"].all()
    assert not harmless["lamp_event"].any()
    coded = merged[merged["kind"] == "intermittent_code"]
    assert coded["lamp_event"].all()
