"""`tracktrue features`: compute trip_features for the trips that have none yet.

The only I/O of the stage: read the published "trips" and "vehicles" tables and
the samples ingest wrote, call the pure per-trip function, and publish
"trip_features" and "platform_specs" as new generations. Nothing is written
until the end, so a crash leaves the previous generation in place and a rerun
finishes the job.
"""

from __future__ import annotations

import logging
from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd
import pyarrow.parquet as pq
from tqdm import tqdm

from features.extract import ROW_COLUMNS, extract_trip_features
from features.platform_params import (
    PLATFORM_SPECS_COLUMNS,
    filled_spec,
    platform_specs,
    platforms_needing_estimates,
)
from features.row import parse_nan_reasons
from tracktrue.schema import SAMPLE_COLUMNS
from tracktrue.store import Store

log = logging.getLogger(__name__)

ID_COLUMNS: tuple[str, ...] = ("trip_id", "vehicle_id", "start_time", "platform")
#: Partition key of trip_features: one file per month, not one per trip.
MONTH_COLUMN = "start_month"
TRIP_FEATURES_COLUMNS: tuple[str, ...] = (*ID_COLUMNS, *ROW_COLUMNS, MONTH_COLUMN)


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


def run_features(store: Store, rebuild: bool = False, progress: bool = False) -> FeaturesSummary:
    """Compute features for trips without them (all trips with ``rebuild``) and publish.

    Raises tracktrue.store.TableMissing when ingest has not published "trips".
    """
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
        specs = platform_specs(vehicles, keep) if needs else platform_specs(vehicles, _empty_rows())
        new = _compute(store, todo, registry, specs, summary, progress)
        if needs:
            specs = platform_specs(vehicles, pd.concat([keep, new], ignore_index=True))
            redo = todo[todo["vehicle_id"].map(lambda v: registry.get(v, {}).get("platform") in needs)]
            if len(redo):
                redone = _compute(store, redo, registry, specs, FeaturesSummary(), progress)
                new = pd.concat([new[~new["trip_id"].isin(redone["trip_id"])], redone], ignore_index=True)
        summary.n_computed = len(new)
        summary.nan_reasons = _count_reasons(new)
        summary.estimated = specs[specs["estimated"]].to_dict("records")
        table = pd.concat([t for t in (keep, new) if len(t)], ignore_index=True) if len(keep) or len(new) else _empty_rows()
        table = table.sort_values(["start_time", "trip_id"], kind="stable")[list(TRIP_FEATURES_COLUMNS)]
        store.publish_table("trip_features", table, partition_by=MONTH_COLUMN)
        store.publish_table("platform_specs", specs[list(PLATFORM_SPECS_COLUMNS)])
    log.info("features: %d computed, %d kept", summary.n_computed, summary.n_kept)
    return summary


def _previous_rows(store: Store, rebuild: bool) -> pd.DataFrame:
    if rebuild or not store.has_table("trip_features"):
        return _empty_rows()
    rows = store.read_table("trip_features")
    missing = set(TRIP_FEATURES_COLUMNS) - set(rows.columns)
    if missing:  # written by an older version: recompute everything
        log.warning("trip_features lacks %s; recomputing all trips", sorted(missing))
        return _empty_rows()
    return rows


def _empty_rows() -> pd.DataFrame:
    frame = pd.DataFrame({c: pd.Series(dtype=float) for c in TRIP_FEATURES_COLUMNS})
    return frame.astype({"trip_id": str, "vehicle_id": str, "platform": str, "signals": str, "dtc": str,
                         "lamp_abs_on": bool, "lamp_esc_on": bool,
                         "nan_reasons": str, MONTH_COLUMN: str, "start_time": "datetime64[us, UTC]"})


def _compute(store, todo, registry, specs, summary, progress) -> pd.DataFrame:
    """Feature rows for ``todo`` trips, reading each sample file once."""
    rows = []
    bar = tqdm(total=len(todo), desc="features", unit="trip", disable=not progress)
    for sample_file, group in todo.groupby("sample_file", sort=True):
        samples = _read_samples(store.root / sample_file, list(group["trip_id"]), summary, sample_file)
        if samples is None:
            bar.update(len(group))
            continue
        by_trip = dict(tuple(samples.groupby("trip_id", sort=False))) if len(samples) else {}
        for trip in group.itertuples(index=False):
            vehicle = registry.get(trip.vehicle_id, {"vehicle_id": trip.vehicle_id})
            spec = filled_spec(vehicle, specs)
            part = by_trip.get(trip.trip_id, samples.iloc[:0])
            row = extract_trip_features(part, spec)
            platform = vehicle.get("platform")
            row.update(trip_id=trip.trip_id, vehicle_id=trip.vehicle_id, start_time=trip.start_time,
                       platform=None if pd.isna(platform) else platform)
            rows.append(row)
            bar.update(1)
    bar.close()
    if not rows:
        return _empty_rows()
    frame = pd.DataFrame(rows)
    frame["start_time"] = pd.to_datetime(frame["start_time"], utc=True)
    frame[MONTH_COLUMN] = frame["start_time"].dt.strftime("%Y-%m")
    return frame[list(TRIP_FEATURES_COLUMNS)]


def _read_samples(path: Path, trip_ids: list[str], summary: FeaturesSummary, name: str) -> pd.DataFrame | None:
    try:
        table = pq.read_table(path, filters=[("trip_id", "in", trip_ids)])
    except (OSError, ValueError) as exc:
        log.warning("cannot read %s: %s", path, exc)
        summary.unreadable[name] = str(exc).splitlines()[0]
        return None
    missing = [c for c in SAMPLE_COLUMNS if c not in table.column_names]
    if missing:
        summary.unreadable[name] = f"missing columns {missing}"
        return None
    return table.to_pandas()


def _count_reasons(rows: pd.DataFrame) -> Counter:
    counts: Counter = Counter()
    for text in rows["nan_reasons"].dropna():
        counts.update(parse_nan_reasons(text).items())
    return counts

