"""Peer-group normalisation: each feature robust-scaled against comparable vehicles.

A peer group is (platform, logger class): a van's wheel ratio is compared
with other vans', and a 1 Hz polled logger's jitter never with a 50 Hz bus
capture's (DESIGN.md, "Logger kinds"). The logger class is the trip's
``logger_kind`` (bus_capture | polled | telematics, inferred by features/ from
the data) where trip_features carries it, else its sample-rate class. A group
with fewer than ``min_peer_vehicles`` vehicles falls back to the whole fleet
within the same logger class, and every trip carries the mark
``peer_fallback``.

Statistics are computed *leaving the vehicle out*: a vehicle's z-scores use
the median and scaled MAD of the other vehicles' trips only, because a small
platform's median otherwise absorbs its faulty member (DESIGN.md, "The
isolation forest's traps"). The reference sample takes at most
``ref_trips_per_vehicle`` recent trips from each vehicle, so one vehicle with
many trips does not own the median.

    z = (x − median_peers) / max(1.4826 · MAD_peers, floor)

1.4826 makes the MAD a consistent estimator of σ for Gaussian data
(1/Φ⁻¹(0.75)). The floor keeps a feature whose healthy spread is zero (e.g.
dropouts) from dividing by nothing: it is the larger of a per-family floor in
the feature's unit (about the smallest difference worth reporting; design
choices, listed in FEATURE_FLOORS) and ``rel_floor`` × the fleet-wide spread.

A group's scale is also at least the *between-vehicle* spread of its logger
class: the scaled MAD of each vehicle's median about its own group's median of
vehicle medians, pooled over every group of the class (``between_vehicle_spread``).
A level that is a vehicle's own (a yaw sensor's zero, a steering centre) spreads
between vehicles, not between trips, and a platform group of five vehicles —
four, leaving one out — cannot measure that spread: on the tuning seeds a
healthy pickup's yaw zero of −0.18 deg/s stood 8 spreads from four others
within 0.1 deg/s, while the class's vehicles spread 0.1 deg/s about their
groups' centres. Pooling over the class is what the drift's within-vehicle
spread does for the same reason (models.scorer).
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd

MAD_TO_SIGMA = 1.4826

#: Rate classes: (upper bound in Hz, label). Polled PIDs run 1–5 Hz, bus capture 50–100 Hz.
RATE_CLASSES: tuple[tuple[float, str], ...] = ((3.0, "lt3hz"), (20.0, "3to20hz"), (np.inf, "ge20hz"))

#: Scale floors in each feature family's own unit (prefix match; see module doc).
FEATURE_FLOORS: dict[str, float] = {
    "wheel_ratio_": 0.02,  # %
    "wheel_jitter_": 0.01,  # %
    "wheel_dropouts_": 1.0,  # events per 100 km
    "wheel_onset_": 0.1,  # m/s: about one sample's speed change on a launch at a bus logger's 10 Hz
    "yaw_rest_dps": 0.02,
    "yaw_offset_dps": 0.02,
    "yaw_gain": 0.002,
    "steer_center_deg": 0.2,
    "steer_yaw_residual_dps": 0.05,
    "accel_": 0.002,  # g
    "lat_residual_g": 0.002,
}

FLEET_GROUP_PREFIX = "fleet"


def rate_class(sample_rate_hz: pd.Series) -> pd.Series:
    """Label each trip's logger rate; unknown rates form their own class."""
    rate = pd.to_numeric(sample_rate_hz, errors="coerce").to_numpy(dtype=float)
    bounds = np.array([b for b, _ in RATE_CLASSES])
    labels = np.array([lab for _, lab in RATE_CLASSES] + ["unknown_rate"], dtype=object)
    idx = np.where(np.isnan(rate), len(RATE_CLASSES), np.searchsorted(bounds, rate, side="right"))
    idx = np.minimum(idx, len(labels) - 1)
    return pd.Series(labels[idx], index=sample_rate_hz.index, dtype=object)


def logger_class(trips: pd.DataFrame) -> pd.Series:
    """The trip's ``logger_kind`` where known, else its rate class (see module doc)."""
    rc = rate_class(trips["sample_rate_hz"])
    if "logger_kind" not in trips.columns:
        return rc
    kind = trips["logger_kind"].astype(object)
    known = kind.notna() & (kind.astype(str).str.strip() != "")
    return kind.astype(str).str.strip().where(known, rc)


def assign_peer_groups(trips: pd.DataFrame, min_peer_vehicles: int) -> pd.DataFrame:
    """``peer_group`` and ``peer_fallback`` for each trip (needs vehicle_id, platform,
    sample_rate_hz; uses logger_kind when present)."""
    rc = logger_class(trips)
    platform = trips["platform"].astype(object).where(trips["platform"].notna(), "unknown_platform")
    primary = platform.astype(str) + "/" + rc
    n_veh = trips.groupby(primary)["vehicle_id"].transform("nunique")
    fallback = n_veh < min_peer_vehicles
    group = primary.where(~fallback, FLEET_GROUP_PREFIX + "/" + rc)
    return pd.DataFrame({"peer_group": group.astype(str), "peer_fallback": fallback.to_numpy()}, index=trips.index)


def feature_floor(name: str) -> float:
    for prefix, floor in FEATURE_FLOORS.items():
        if name.startswith(prefix):
            return floor
    return 0.0


def reference_sample(trips: pd.DataFrame, per_vehicle: int) -> pd.DataFrame:
    """The most recent ``per_vehicle`` trips of each vehicle (per peer group)."""
    order = trips.sort_values("start_time")
    return order.groupby(["peer_group", "vehicle_id"], sort=False).tail(per_vehicle)


def _median_mad(values: np.ndarray, min_count: int) -> tuple[np.ndarray, np.ndarray]:
    n = np.sum(~np.isnan(values), axis=0)
    if not len(values):
        empty = np.full(values.shape[1], np.nan)
        return empty, empty
    with warnings.catch_warnings():  # all-NaN columns are expected (feature not computable)
        warnings.simplefilter("ignore", RuntimeWarning)
        med = np.nanmedian(values, axis=0)
        mad = np.nanmedian(np.abs(values - med), axis=0)
    enough = n >= min_count
    return np.where(enough, med, np.nan), np.where(enough, MAD_TO_SIGMA * mad, np.nan)


#: A feature's peer statistics need this many vehicles (other than the one scored) that measure it:
#: a polled group may hold five vehicles of which two measure the steering centre, and the median of
#: one other vehicle is that vehicle's own level, not a peer norm. Below it the feature has no peer
#: z-score (NaN); the vehicle's own drift still watches it. (Three lost a yaw-offset vehicle of a
#: small test fleet whose yaw zero only three vehicles measured: two peers are kept.)
MIN_FEATURE_PEERS = 2


def peer_statistics(reference: pd.DataFrame, features: list[str], rel_floor: float, min_ref_trips: int) -> pd.DataFrame:
    """Centre and scale per (peer_group, vehicle_id), leaving that vehicle out.

    Row ``vehicle_id == "*"`` holds the whole group's statistics, for a
    vehicle the reference never saw. Columns: ``center__<f>``, ``scale__<f>``,
    ``n_ref_vehicles``. A feature measured by fewer than MIN_FEATURE_PEERS
    vehicles (leaving the scored one out) gets NaN statistics.
    """
    fleet_values = reference[features].to_numpy(dtype=float)
    _, fleet_scale = _median_mad(fleet_values, 1)
    floors = np.array([feature_floor(f) for f in features])
    floors = np.fmax(floors, rel_floor * np.nan_to_num(fleet_scale, nan=0.0))
    floors = np.where(floors > 0, floors, 1e-9)
    between = between_vehicle_spread(reference, features, min_ref_trips)
    rows = []
    for group, ref in _group_references(reference):
        values = ref[features].to_numpy(dtype=float)
        vehicles = ref["vehicle_id"].to_numpy()
        cls = group.partition("/")[2]
        if cls in between.index:
            floors_g = np.fmax(floors, np.nan_to_num(between.loc[cls].to_numpy(dtype=float), nan=0.0))
        else:
            floors_g = floors
        measured = pd.DataFrame(~np.isnan(values)).groupby(vehicles).any()  # vehicle × feature
        n_measuring = measured.sum(axis=0).to_numpy()
        med, scale = _median_mad(values, min_ref_trips)
        few = n_measuring < MIN_FEATURE_PEERS
        rows.append((group, "*", np.where(few, np.nan, med), np.where(few, np.nan, np.fmax(scale, floors_g)),
                     len(set(vehicles))))
        for vid in pd.unique(vehicles):
            keep = vehicles != vid
            med_v, scale_v = _median_mad(values[keep], min_ref_trips)
            few = n_measuring - measured.loc[vid].to_numpy() < MIN_FEATURE_PEERS
            rows.append((group, vid, np.where(few, np.nan, med_v), np.where(few, np.nan, np.fmax(scale_v, floors_g)),
                         len(set(vehicles[keep]))))
    if not rows:
        return pd.DataFrame(columns=["peer_group", "vehicle_id", "n_ref_vehicles"])
    centers = pd.DataFrame(np.vstack([r[2] for r in rows]), columns=[f"center__{f}" for f in features])
    scales = pd.DataFrame(np.vstack([r[3] for r in rows]), columns=[f"scale__{f}" for f in features])
    keys = pd.DataFrame({"peer_group": [r[0] for r in rows], "vehicle_id": [r[1] for r in rows],
                         "n_ref_vehicles": [r[4] for r in rows]})
    return pd.concat([keys, centers, scales], axis=1)


def between_vehicle_spread(reference: pd.DataFrame, features: list[str], min_trips: int,
                           min_vehicles: int = 6) -> pd.DataFrame:
    """Per logger class (rows) and feature: 1.4826 × the median |vehicle median − its group's
    median of vehicle medians| over the class's vehicles with ``min_trips`` trips or more
    (NaN below ``min_vehicles`` such vehicles). See the module doc."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        per = reference.groupby(["peer_group", "vehicle_id"])[features].median()
        counts = reference.groupby(["peer_group", "vehicle_id"])[features].count()
        per = per.where(counts >= min_trips)
        dev = (per - per.groupby(level=0).transform("median")).abs()
        cls = np.array([g.partition("/")[2] for g in dev.index.get_level_values(0)], dtype=object)
        spread = dev.groupby(cls).median() * MAD_TO_SIGMA
        enough = dev.notna().groupby(cls).sum() >= min_vehicles
    return spread.where(enough)


def _group_references(reference: pd.DataFrame):
    """(peer group, its reference trips): a platform group's own trips; a fallback group
    ``fleet/<class>`` takes every trip of that logger class, whatever the platform — the
    fleet, not just the vehicles left over from small platforms (a handful of those would
    compare a vehicle with two or three others and call a healthy offset extreme)."""
    logger = reference["peer_group"].str.split("/", n=1).str[1]
    for group in sorted(reference["peer_group"].unique()):
        platform, _, cls = group.partition("/")
        yield group, (reference[logger == cls] if platform == FLEET_GROUP_PREFIX else
                      reference[reference["peer_group"] == group])


def lookup_statistics(trips: pd.DataFrame, stats: pd.DataFrame, leave_one_out: bool = True) -> pd.DataFrame:
    """Each trip's own (leave-one-out) statistics row, or its group's if the vehicle is new
    (or when ``leave_one_out`` is False: a scale common to the group, as drift needs)."""
    key = trips[["peer_group", "vehicle_id"]].reset_index(drop=True)
    if not leave_one_out:
        key["vehicle_id"] = "*"
    own = key.merge(stats, on=["peer_group", "vehicle_id"], how="left")
    group = key[["peer_group"]].merge(stats[stats["vehicle_id"] == "*"].drop(columns="vehicle_id"),
                                      on="peer_group", how="left")
    missing = own["n_ref_vehicles"].isna().to_numpy()
    out = own.drop(columns=["peer_group", "vehicle_id"])
    if missing.any():
        out.loc[missing, :] = group.loc[missing, out.columns].to_numpy()
    out.index = trips.index
    return out


def normalise(trips: pd.DataFrame, stats: pd.DataFrame, features: list[str], leave_one_out: bool = True) -> pd.DataFrame:
    """z-score of every feature for every trip (NaN stays NaN: missing is not healthy)."""
    s = lookup_statistics(trips, stats, leave_one_out)
    x = trips[features].to_numpy(dtype=float)
    c = s[[f"center__{f}" for f in features]].to_numpy(dtype=float)
    sc = s[[f"scale__{f}" for f in features]].to_numpy(dtype=float)
    return pd.DataFrame((x - c) / sc, columns=features, index=trips.index)


def peer_bands(trips: pd.DataFrame, features: list[str], healthy: pd.Series) -> pd.DataFrame:
    """p05/p50/p95 of each feature per peer group over vehicles not flagged (PEER_BANDS_COLUMNS)."""
    use = trips[healthy.reindex(trips["vehicle_id"]).fillna(True).to_numpy()]
    rows = []
    for group, g in use.groupby("peer_group", sort=True):
        q = g[features].quantile([0.05, 0.5, 0.95])
        nveh = g["vehicle_id"].nunique()
        for f in features:
            rows.append({"peer_group": group, "feature": f, "p05": q.at[0.05, f], "p50": q.at[0.5, f],
                         "p95": q.at[0.95, f], "n_vehicles": int(nveh)})
    cols = ["peer_group", "feature", "p05", "p50", "p95", "n_vehicles"]
    return pd.DataFrame(rows, columns=cols)
