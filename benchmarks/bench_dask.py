"""The features stage on Dask against the local engine, on one store in one run.

Printed per engine: wall time of a full recompute (``rebuild``), fastest of
REPEATS on a warm cluster, plus the first (cold) run, which includes the
workers importing numpy/scipy/pyarrow; the speed-up over the local engine;
and the Dask overhead per trip, (Dask with one worker − local) / trips: what
scheduling, task transport and result collection cost on top of the same
computation. Cluster start-up is printed separately. The clusters are the
engine's own (features.dask_engine.local_cluster). The machine is shared
by other jobs, so read the figures as upper bounds.

    .venv/bin/python benchmarks/bench_dask.py [--trips 48] [--duration 1200]
"""

from __future__ import annotations

import argparse
import tempfile
import time
from pathlib import Path

from bench_features import build
from features import run_features
from features.dask_engine import local_cluster

REPEATS = 3


def wall(fn) -> float:
    t0 = time.perf_counter()
    fn()
    return time.perf_counter() - t0


def cold_and_warm(fn) -> tuple[float, float]:
    cold = wall(fn)
    return cold, min(wall(fn) for _ in range(REPEATS))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--trips", type=int, default=48)
    parser.add_argument("--duration", type=float, default=1200.0)
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        store, frames, _ = build(Path(tmp), args.trips, args.duration)
        n_samples = sum(len(f) for f in frames.values())
        n_files = len({*store.read_table("trips")["sample_file"]})
        print(f"store: {args.trips} trips, {n_samples:,} samples, {n_files} sample files")
        results = {"local": cold_and_warm(lambda: run_features(store, rebuild=True))}
        for n_workers in (1, 2):
            t0 = time.perf_counter()
            with local_cluster(n_workers) as cluster:
                print(f"LocalCluster with {n_workers} worker(s) started in {time.perf_counter() - t0:.1f} s")
                results[f"dask, {n_workers} worker(s)"] = cold_and_warm(
                    lambda: run_features(store, rebuild=True, engine="dask", scheduler=cluster.scheduler_address))
    local = results["local"][1]
    print(f"{'engine':<20} {'cold s':>7} {'warm s':>7} {'speed-up':>8} {'samples/s':>11}")
    for name, (cold, warm) in results.items():
        print(f"{name:<20} {cold:>7.2f} {warm:>7.2f} {local / warm:>8.2f} {n_samples / warm:>11,.0f}")
    overhead = (results["dask, 1 worker(s)"][1] - local) / args.trips
    print(f"Dask overhead per trip (1 worker − local, warm): {1000 * overhead:.1f} ms")


if __name__ == "__main__":
    main()
