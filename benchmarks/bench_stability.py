"""Speed of models.stability.stabilise at fleet scale: prints seconds and vehicles per second.

Invented statuses (a speed figure, never a check value): 10,000 vehicles, 90
nightly runs of history, a repair or no-fault-found event on one vehicle in
twenty, a snooze on one in a hundred.
"""

from __future__ import annotations

import argparse
import datetime as dt
import time

import numpy as np
import pandas as pd

from models.stability import history_rows, stabilise

STATUS_MIX = (["ok"] * 80 + ["watch"] * 12 + ["inspect"] * 5 + ["insufficient_data"] * 3)


def fleet(rng, n: int, as_of: dt.date) -> pd.DataFrame:
    status = rng.choice(STATUS_MIX, n)
    return pd.DataFrame({"vehicle_id": [f"V{i:05d}" for i in range(n)], "platform": "van", "status": status,
                         "suspected_component": np.where(status == "ok", "none", "wheel_sensor_fl"),
                         "score": rng.uniform(0.4, 0.7, n), "evidence": "", "suggestion": "",
                         "flagged_since": None, "last_trip": pd.Timestamp(as_of, tz="UTC"), "rank": 0})


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--vehicles", type=int, default=10_000)
    parser.add_argument("--runs", type=int, default=90)
    args = parser.parse_args()
    rng = np.random.default_rng(0)
    start = dt.date(2026, 1, 1)
    history = pd.concat([history_rows(fleet(rng, args.vehicles, start + dt.timedelta(days=k)).assign(
        raw_status=lambda f: f["status"], held_status=lambda f: f["status"], last_repair=None),
        f"r{k}", pd.Timestamp(start + dt.timedelta(days=k + 1), tz="UTC"), start + dt.timedelta(days=k))
        for k in range(args.runs)], ignore_index=True)
    as_of = start + dt.timedelta(days=args.runs)
    raw = fleet(rng, args.vehicles, as_of)
    ids = raw["vehicle_id"].to_numpy()
    picked = rng.choice(ids, args.vehicles // 20, replace=False)
    events = pd.DataFrame({"vehicle_id": picked, "date": as_of - dt.timedelta(days=5),
                           "kind": rng.choice(["sensor_replaced", "no_fault_found"], len(picked)), "component": ""})
    snoozed = rng.choice(ids, args.vehicles // 100, replace=False)
    snoozes = pd.DataFrame({"vehicle_id": snoozed, "until": as_of + dt.timedelta(days=7), "reason": "parts",
                            "snoozed_status": "watch", "snoozed_component": "wheel_sensor_fl",
                            "created_at": pd.Timestamp(as_of, tz="UTC")})
    trips = pd.DataFrame({"vehicle_id": np.repeat(ids, 20), "score": 0.5,
                          "start_time": pd.Timestamp(as_of, tz="UTC") - pd.to_timedelta(np.tile(np.arange(20), len(ids)), unit="h")})
    t0 = time.perf_counter()
    out = stabilise(raw, trips, as_of, history=history, events=events, snoozes=snoozes)
    seconds = time.perf_counter() - t0
    print(f"stabilise: {args.vehicles} vehicles, {len(history):,} history rows: {seconds:.2f} s "
          f"({args.vehicles / seconds:,.0f} vehicles/s); statuses {out['status'].value_counts().to_dict()}")


if __name__ == "__main__":
    main()
