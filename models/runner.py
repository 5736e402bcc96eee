"""``run_scoring``: read what features/ and ingest/ published, score, publish models/' tables.

Tables published (columns: tracktrue.schema; extra columns only appended):
``trip_scores``, ``vehicle_drift``, ``vehicle_status``, ``peer_bands``,
``status_history`` and ``model_runs`` (one row per vehicle / one row appended
per run). ``vehicle_status`` is the scorer's ranking after models.stability
(hysteresis against ``status_history``, verification after repairs,
no-fault-found labels, snoozes); evaluation scores without that step. Each publish is an atomic
generation switch, so a crash mid-run leaves every table at its previous
generation and a rerun finishes the job. Nothing is unpickled: the fitted
model is refitted from trip_features on every run and recorded as parameters.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import json
import platform as _platform
import uuid
from dataclasses import dataclass

import numpy as np
import pandas as pd
import sklearn

from models.lamps import lamp_events, trip_lamps
from models.peers import peer_bands
from models.scorer import FleetScorer
from models.stability import StabilityRules, history_rows, stabilise
from tracktrue import __version__
from tracktrue.errors import UserError
from tracktrue.schema import (PEER_BANDS_COLUMNS, TRIP_SCORES_COLUMNS, VEHICLE_DRIFT_COLUMNS,
                              VEHICLE_STATUS_COLUMNS)
from tracktrue.store import Store

MODEL_RUNS_COLUMNS = ("run_id", "created_at", "as_of", "params_json", "versions_json", "data_window",
                      "feature_list", "n_trips")


@dataclass(frozen=True)
class ScoringSummary:
    run_id: str
    as_of: dt.date
    n_trips: int
    n_vehicles: int
    status_counts: dict
    n_features: int
    cusum_h: float
    lamp_source: str

    def describe(self) -> str:
        counts = ", ".join(f"{k} {v}" for k, v in self.status_counts.items())
        return (f"scored {self.n_trips} trips of {self.n_vehicles} vehicles as of {self.as_of} "
                f"({self.n_features} features; drift threshold h = {self.cusum_h:.2f}; lamps from {self.lamp_source})\n"
                f"statuses: {counts}\nrun {self.run_id}")


@dataclass(frozen=True)
class ScoredFleet:
    """Everything one scoring pass produces (evaluation reuses it without publishing)."""

    scorer: FleetScorer
    trip_features: pd.DataFrame
    trip_scores: pd.DataFrame
    drift: pd.DataFrame
    status: pd.DataFrame
    lamps: pd.DataFrame
    as_of: dt.date
    lamp_source: str


def load_inputs(store: Store, as_of: dt.date | None) -> tuple[pd.DataFrame, pd.DataFrame, dt.date]:
    """trip_features (trips started before the end of ``as_of``) and vehicles."""
    tf = store.read_table("trip_features")
    tf["start_time"] = pd.to_datetime(tf["start_time"], utc=True)
    vehicles = store.read_table("vehicles") if store.has_table("vehicles") else pd.DataFrame()
    if as_of is not None:
        end = pd.Timestamp(as_of, tz="UTC") + pd.Timedelta(days=1)
        tf = tf[tf["start_time"] < end]
    if tf.empty:
        raise UserError(f"no trips in trip_features{' before the end of ' + str(as_of) if as_of else ''}: nothing to score")
    if "platform" not in tf.columns or tf["platform"].isna().any():
        if vehicles.empty or "platform" not in vehicles.columns:
            raise UserError("trip_features has trips without a platform and no vehicles table gives one")
        plat = tf["vehicle_id"].map(vehicles.drop_duplicates("vehicle_id").set_index("vehicle_id")["platform"])
        tf["platform"] = tf["platform"].fillna(plat) if "platform" in tf.columns else plat
    tf = tf.reset_index(drop=True)
    return tf, vehicles, as_of or tf["start_time"].max().date()


def score_fleet(store: Store, as_of: dt.date | None, scorer: FleetScorer | None = None) -> ScoredFleet:
    """Fit and score without publishing (run_scoring publishes; evaluation compares variants)."""
    tf, vehicles, as_of = load_inputs(store, as_of)
    scorer = scorer or FleetScorer()
    events = store.read_table("service_events") if store.has_table("service_events") else None
    scorer.fit(tf, service_events=events)
    ts = scorer.score_trips(tf)
    drift = scorer.drift(tf, ts)
    lamps, source = trip_lamps(store, tf)
    lamp_trips = lamp_events(ts, lamps)
    status = scorer.rank(scorer.attach_raw(ts, tf), drift, lamp_trips, vehicles=vehicles, as_of=as_of)
    return ScoredFleet(scorer, tf, ts, drift, status, lamp_trips, as_of, source)


def run_scoring(store: Store, as_of: dt.date | None = None, progress: bool = False) -> ScoringSummary:
    """Score trips and vehicles and publish models/' tables (see module doc).

    ``progress`` is accepted for the command line's sake; scoring a fleet's
    trip_features takes seconds, so no bar is drawn."""
    with store.run_lock("score", "tracktrue score"):
        fleet = score_fleet(store, as_of)
        run_id, created_at = uuid.uuid4().hex[:12], pd.Timestamp.now(tz="UTC")
        status = stabilise(fleet.status, fleet.trip_scores, fleet.as_of, history=_table(store, "status_history"),
                           events=_table(store, "service_events"), snoozes=_table(store, "snoozes"),
                           rules=stability_rules(fleet.scorer))
        fleet = dataclasses.replace(fleet, status=status)
        _publish(store, fleet, run_id, created_at)
    counts = fleet.status["status"].value_counts().to_dict()
    return ScoringSummary(run_id, fleet.as_of, len(fleet.trip_scores), fleet.status["vehicle_id"].nunique(),
                          counts, len(fleet.scorer.features_), fleet.scorer.cusum_h_, fleet.lamp_source)


def stability_rules(scorer: FleetScorer) -> StabilityRules:
    """A repair is verified once the new baseline is taken and the vehicle score rests on
    trips after it (models.stability module doc)."""
    return StabilityRules(verify_trips=max(scorer.baseline_trips, scorer.vehicle_trips))


def _table(store: Store, name: str) -> pd.DataFrame | None:
    return store.read_table(name) if store.has_table(name) else None


def _publish(store: Store, fleet: ScoredFleet, run_id: str, created_at: pd.Timestamp) -> None:
    sc = fleet.scorer
    ts = fleet.trip_scores.copy()
    ts["run_id"] = run_id
    lead = list(TRIP_SCORES_COLUMNS)
    ts = ts[lead + [c for c in ts.columns if c not in lead]]
    ts["month"] = ts["start_time"].dt.strftime("%Y-%m")
    store.publish_table("trip_scores", ts, partition_by="month")
    drift = pd.DataFrame(fleet.drift)[list(VEHICLE_DRIFT_COLUMNS)]
    store.publish_table("vehicle_drift", drift)
    status = fleet.status.copy()
    status["flagged_since"] = pd.to_datetime(status["flagged_since"]).dt.date
    status["as_of"] = fleet.as_of
    status["run_id"] = run_id
    lead = list(VEHICLE_STATUS_COLUMNS)
    store.publish_table("vehicle_status", status[lead + [c for c in status.columns if c not in lead]])
    history = _table(store, "status_history")
    rows = history_rows(fleet.status, run_id, created_at, fleet.as_of)
    store.publish_table("status_history", pd.concat([history, rows], ignore_index=True) if history is not None else rows)
    healthy = fleet.status.set_index("vehicle_id")["raw_status"].eq("ok")
    joined = fleet.trip_features.merge(ts[["trip_id", "peer_group"]], on="trip_id")
    bands = peer_bands(joined, sc.features_, healthy)
    store.publish_table("peer_bands", bands[list(PEER_BANDS_COLUMNS)])
    runs = store.read_table("model_runs") if store.has_table("model_runs") else pd.DataFrame(columns=MODEL_RUNS_COLUMNS)
    window = f"{fleet.trip_features['start_time'].min().isoformat()} .. {fleet.trip_features['start_time'].max().isoformat()}"
    params = {**sc.get_params(), "derived": {"cusum_h": sc.cusum_h_, "arl0_trips": sc.arl0_,
                                             "uncorroborated_cusum_h": sc.sole_cusum_h_,
                                             "trips_per_day": sc.trips_per_day_, "statistics": sc.statistics_,
                                             "fallback_peer_groups": sc.fallback_groups_}}
    row = pd.DataFrame([{
        "run_id": run_id,
        "created_at": created_at,
        "as_of": fleet.as_of,
        "params_json": json.dumps(params, default=_json_default, sort_keys=True),
        "versions_json": json.dumps({"tracktrue": __version__, "scikit-learn": sklearn.__version__,
                                     "numpy": np.__version__, "pandas": pd.__version__,
                                     "python": _platform.python_version()}),
        "data_window": window,
        "feature_list": json.dumps(sc.features_),
        "n_trips": int(len(fleet.trip_scores)),
    }])
    runs = pd.concat([runs[list(MODEL_RUNS_COLUMNS)], row], ignore_index=True) if len(runs) else row
    store.publish_table("model_runs", runs[list(MODEL_RUNS_COLUMNS)])


def _json_default(x):
    if isinstance(x, (np.floating, np.integer)):
        return x.item()
    return str(x)
