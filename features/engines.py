"""How the runner executes file tasks: in this process, or in a local process pool.

An engine is called with the samples root (a path or an fsspec URL) and a list
of (sample_file, tasks) and yields (sample_file, FileResult) as files finish.
It decides only *where* features.batch.compute_file runs; the physics never
knows (STYLE.md). The Dask engine (features.dask_engine) has the same shape.
"""

from __future__ import annotations

import multiprocessing
from collections.abc import Iterator, Sequence
from concurrent.futures import ProcessPoolExecutor, as_completed
from features.batch import FileResult, TripTask, compute_file, locate

FileJobs = Sequence[tuple[str, Sequence[TripTask]]]


def run_in_process(root: str, jobs: FileJobs) -> Iterator[tuple[str, FileResult]]:
    for sample_file, tasks in jobs:
        yield sample_file, compute_file(locate(root, sample_file), tasks)


def run_in_pool(root: str, jobs: FileJobs, workers: int) -> Iterator[tuple[str, FileResult]]:
    """One task per sample file over ``workers`` processes (spawned: no forked pyarrow threads)."""
    if workers < 2 or len(jobs) < 2:
        yield from run_in_process(root, jobs)
        return
    context = multiprocessing.get_context("spawn")
    with ProcessPoolExecutor(max_workers=min(workers, len(jobs)), mp_context=context) as pool:
        futures = {pool.submit(compute_file, locate(root, f), list(t)): f for f, t in jobs}
        for future in as_completed(futures):
            yield futures[future], future.result()
