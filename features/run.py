"""`tracktrue features`: compute trip_features for the trips that have none yet.

The only I/O of the stage: read the published "trips" and "vehicles" tables and
the samples ingest wrote, call the pure per-trip function, and publish
"trip_features" and "platform_specs" as new generations. Nothing is written
until the end, so a crash leaves the previous generation in place and a rerun
finishes the job.
"""

from __future__ import annotations

import contextlib
import functools
import logging
from collections import Counter
from collections.abc import Iterator
from dataclasses import dataclass, field

import pandas as pd
from tqdm import tqdm

from features.batch import TripTask
from features.engines import run_in_pool
from features.platform_params import (
    PLATFORM_SPECS_COLUMNS,
    filled_spec,
    platform_specs,
    platforms_needing_estimates,
)
from features.row import parse_nan_reasons
from features.table import MONTH_COLUMN, TRIP_FEATURES_COLUMNS, empty_rows, rows_frame
from tracktrue.errors import UserError
from tracktrue.store import Store

log = logging.getLogger(__name__)


@dataclass
class FeaturesSummary:
    """What one run did, for the command line and the logs."""

    n_trips: int = 0
    n_computed: int = 0
    n_kept: int = 0
    unreadable: dict[str, str] = field(default_factory=dict)  #: sample_file → problem
    nan_reasons: Counter = field(default_factory=Counter)  #: (feature, reason) → trips, this run
    estimated: list[dict] = field(default_factory=list)  #: platform_specs rows with estimated True
    no_spec_vehicles: list[str] = field(default_factory=list)

    def describe(self) -> str:
        lines = [f"features: {self.n_computed} trip(s) computed, {self.n_kept} kept from earlier runs, "
                 f"{self.n_trips} in the catalog"]
        for path, problem in sorted(self.unreadable.items()):
            lines.append(f"  could not read {path}: {problem} (its trips stay pending; rerun after ingest)")
        for row in self.estimated:
            lines.append(f"  platform {row['platform']}: {row['parameter']} = {row['value']:.4g} "
                         f"ESTIMATED from {row['n_trips']} trips (not in the vehicle registry)")
        if self.no_spec_vehicles:
            lines.append(f"  {len(self.no_spec_vehicles)} vehicle(s) without registry spec: "
                         + ", ".join(sorted(self.no_spec_vehicles)[:10]))
        if self.nan_reasons:
            lines.append("  NaN feature values this run, by reason (trips × features):")
            by_reason = Counter()
            for (feature, reason), n in self.nan_reasons.items():
                by_reason[reason] += n
            for reason, n in by_reason.most_common():
                feats = sorted(f for (f, r) in self.nan_reasons if r == reason)
                lines.append(f"    {reason}: {n} ({', '.join(feats[:6])}{', …' if len(feats) > 6 else ''})")
        return "\n".join(lines)


ENGINES: tuple[str, ...] = ("local", "dask")


def run_features(store: Store, rebuild: bool = False, progress: bool = False, workers: int = 1,
                 engine: str = "local", scheduler: str | None = None,
                 samples_url: str | None = None) -> FeaturesSummary:
    """Compute features for trips without them (all trips with ``rebuild``) and publish.

    ``engine`` "local" runs in this process, or over ``workers`` local
    processes; "dask" runs one task per sample file on the Dask cluster at
    ``scheduler`` (an address such as tcp://host:8786), or on a LocalCluster
    sized to this machine without one. ``samples_url`` is where the tasks
    read the sample files: the store root as the workers see it, a path or an
    fsspec URL (file://, s3://, …); default the store's own folder. The
    catalog tables are read and the results published here, in ``store``.
    Raises tracktrue.store.TableMissing when ingest has not published "trips".
    """
    if engine not in ENGINES:
        raise UserError(f"unknown engine {engine!r}: choose one of {', '.join(ENGINES)}")
    if scheduler and engine != "dask":
        raise UserError("--scheduler is an option of --engine dask")
    trips = store.read_table("trips")
    vehicles = store.read_table("vehicles") if store.has_table("vehicles") else pd.DataFrame(columns=["vehicle_id"])
    summary = FeaturesSummary(n_trips=len(trips))
    with store.run_lock("features", holder="tracktrue features"):
        previous = _previous_rows(store, rebuild)
        keep = previous[previous["trip_id"].isin(trips["trip_id"])] if len(previous) else previous
        todo = trips[~trips["trip_id"].isin(keep["trip_id"])] if len(keep) else trips
        summary.n_kept = len(keep)
        registry = {r["vehicle_id"]: r for r in vehicles.to_dict("records")}
        summary.no_spec_vehicles = sorted(set(todo["vehicle_id"]) - set(registry))
        needs = platforms_needing_estimates(vehicles)

        # Platforms lacking steering parameters: a first pass gives the trips'
        # steering-fit sums, the estimate fills the spec, then those trips are redone.
        specs = platform_specs(vehicles, keep) if needs else platform_specs(vehicles, empty_rows())
        root = samples_url or str(store.root)
        with _engine(engine, workers, scheduler, trips["start_time"].dtype) as run_files:
            new = _compute(run_files, root, todo, registry, specs, summary, progress)
            if needs:
                specs = platform_specs(vehicles, pd.concat([keep, new], ignore_index=True))
                redo = todo[todo["vehicle_id"].map(lambda v: registry.get(v, {}).get("platform") in needs)]
                if len(redo):
                    redone = _compute(run_files, root, redo, registry, specs, FeaturesSummary(), progress)
                    new = pd.concat([new[~new["trip_id"].isin(redone["trip_id"])], redone], ignore_index=True)
        summary.n_computed = len(new)
        summary.nan_reasons = _count_reasons(new)
        summary.estimated = specs[specs["estimated"]].to_dict("records")
        table = pd.concat([t for t in (keep, new) if len(t)], ignore_index=True) if len(keep) or len(new) else empty_rows()
        table = table.sort_values(["start_time", "trip_id"], kind="stable")[list(TRIP_FEATURES_COLUMNS)]
        store.publish_table("trip_features", table, partition_by=MONTH_COLUMN)
        store.publish_table("platform_specs", specs[list(PLATFORM_SPECS_COLUMNS)])
    log.info("features: %d computed, %d kept", summary.n_computed, summary.n_kept)
    return summary


def _previous_rows(store: Store, rebuild: bool) -> pd.DataFrame:
    if rebuild or not store.has_table("trip_features"):
        return empty_rows()
    rows = store.read_table("trip_features")
    missing = set(TRIP_FEATURES_COLUMNS) - set(rows.columns)
    if missing:  # written by an older version: recompute everything
        log.warning("trip_features lacks %s; recomputing all trips", sorted(missing))
        return empty_rows()
    return rows


@contextlib.contextmanager
def _engine(name: str, workers: int, scheduler: str | None, time_dtype) -> Iterator:
    """The function that runs file tasks (features.engines), open for the whole run."""
    if name == "local":
        yield functools.partial(run_in_pool, workers=workers)
        return
    from features.dask_engine import DaskEngine

    dask_engine = DaskEngine(scheduler, time_dtype)
    try:
        yield dask_engine
    finally:
        dask_engine.close()


def _compute(engine, root: str, todo, registry, specs, summary, progress) -> pd.DataFrame:
    """Feature rows for ``todo`` trips, one ``engine`` task per sample file (features.engines)."""
    jobs = _file_jobs(todo, registry, specs)
    sizes = {sample_file: len(tasks) for sample_file, tasks in jobs}
    rows = []
    bar = tqdm(total=len(todo), desc="features", unit="trip", disable=not progress)
    for sample_file, result in engine(root, jobs):
        if result.problem is not None:
            summary.unreadable[sample_file] = result.problem
        rows.extend(result.rows)
        bar.update(sizes[sample_file])
    bar.close()
    return rows_frame(rows, todo["start_time"].dtype)


def _file_jobs(todo: pd.DataFrame, registry: dict, specs: pd.DataFrame) -> list[tuple[str, list[TripTask]]]:
    """(sample_file, tasks) per file, each task carrying its vehicle's filled spec."""
    filled: dict[str, dict] = {}
    jobs = []
    for sample_file, group in todo.groupby("sample_file", sort=True):
        tasks = []
        for trip in group.itertuples(index=False):
            if trip.vehicle_id not in filled:
                filled[trip.vehicle_id] = filled_spec(registry.get(trip.vehicle_id, {"vehicle_id": trip.vehicle_id}),
                                                      specs)
            spec = filled[trip.vehicle_id]
            platform = spec.get("platform")
            tasks.append(TripTask(trip.trip_id, trip.vehicle_id, trip.start_time,
                                  None if pd.isna(platform) else platform, spec))
        jobs.append((sample_file, tasks))
    return jobs


def _count_reasons(rows: pd.DataFrame) -> Counter:
    counts: Counter = Counter()
    for text in rows["nan_reasons"].dropna():
        counts.update(parse_nan_reasons(text).items())
    return counts

