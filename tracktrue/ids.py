"""Deterministic identifiers shared by every stage.

``trip_id`` depends only on the vehicle and the trip's first timestamp, so a
rebuild of the store gives the same ids and labels, plan entries and outcomes
keyed on them survive it. Partition keys are small stable integers so that a
fleet's samples land in a bounded number of folders (DESIGN.md).
"""

from __future__ import annotations

import hashlib
import zlib

import pandas as pd

#: Number of sample partitions by vehicle; changing it requires a rebuild.
N_BUCKETS = 64


def trip_id(vehicle_id: str, start_time: pd.Timestamp) -> str:
    """20 hex digits from vehicle id and UTC start time (microsecond precision)."""
    ts = pd.Timestamp(start_time)
    ts = ts.tz_localize("UTC") if ts.tzinfo is None else ts.tz_convert("UTC")
    key = f"{vehicle_id}\x1f{ts.isoformat(timespec='microseconds')}"
    return hashlib.sha1(key.encode("utf-8")).hexdigest()[:20]


def vehicle_bucket(vehicle_id: str) -> int:
    """Stable partition number in [0, N_BUCKETS) for a vehicle id of any content."""
    return zlib.crc32(vehicle_id.encode("utf-8")) % N_BUCKETS
