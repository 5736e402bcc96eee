"""The Dask engine: the local engine's file tasks as the partitions of a Dask DataFrame.

Each partition is one or more whole sample part files (a part holds whole
trips, so no shuffle), read on the worker from the samples root, a path or an
fsspec URL every worker can reach. Small files are grouped (ingest writes one
part per vehicle bucket and month per chunk, so a night brings many small
parts) until a partition holds enough trips to outweigh the per-task cost,
while leaving a few partitions per worker. The partition's frame has declared ``meta``: the
trip_features columns plus ``sample_file`` and ``read_problem`` (a file that
cannot be read gives one row with its problem and no trip, so its trips stay
pending exactly as in the local engine). Only the runner knows this module.

Dask is optional (the ``dask`` extra) and imported only when this engine runs.
"""

from __future__ import annotations

import importlib.metadata
import logging
import os
from collections.abc import Iterator, Sequence

import pandas as pd

from features.batch import FileResult, TripTask, compute_file, locate
from features.engines import FileJobs
from features.table import rows_frame
from tracktrue.errors import UserError

log = logging.getLogger(__name__)

SAMPLE_FILE, READ_PROBLEM = "sample_file", "read_problem"
#: A partition gathers whole files until it holds this many trips ...
TRIPS_PER_PARTITION = 64
#: ... unless that would leave fewer than this many partitions per worker thread.
PARTITIONS_PER_THREAD = 4


class DaskEngine:
    """Runs file tasks on a Dask cluster: the one at ``scheduler``, else a LocalCluster sized to this machine.

    The cluster is started at the first call (a run with nothing to compute
    starts none) and stopped by ``close``.
    """

    def __init__(self, scheduler: str | None = None, time_dtype: object = "datetime64[us, UTC]"):
        self.scheduler = scheduler
        self.time_dtype = time_dtype
        self._client = None
        self._cluster = None

    def __call__(self, root: str, jobs: FileJobs) -> Iterator[tuple[str, FileResult]]:
        if not jobs:
            return
        dd, distributed = _import_dask()
        client = self._connect(distributed)
        groups = group_files(jobs, sum(client.nthreads().values()))
        frame = dd.from_map(files_partition, [[(locate(root, f), f, list(t)) for f, t in g] for g in groups],
                            meta=partition_meta(self.time_dtype), time_dtype=self.time_dtype,
                            label="trip-features", enforce_metadata=False)
        futures = client.compute(frame.to_delayed())
        for future in distributed.as_completed(futures):
            yield from split_partition(future.result())

    def close(self) -> None:
        for thing in (self._cluster, self._client):
            if thing is not None:
                thing.close()
        self._client = self._cluster = None

    def _connect(self, distributed):
        if self._client is not None:
            return self._client
        if self.scheduler:
            try:
                self._client = distributed.Client(self.scheduler, timeout="30s")
            except (OSError, TimeoutError) as exc:
                raise UserError(f"cannot reach the Dask scheduler at {self.scheduler}: {exc}") from None
        else:
            self._cluster = local_cluster(os.cpu_count() or 1)
            self._client = distributed.Client(self._cluster)
        check_worker_versions(self._client)
        return self._client


#: Dask config for feature workers. The workers' sampling profiler (every 10 ms
#: it walks the task thread's stack, holding the GIL) halves the speed of code
#: made of many short numpy calls: measured 0.66 s → 0.31 s for one 8-trip
#: file (0.19 s outside Dask). Set it on a real cluster's workers too
#: (DASK_DISTRIBUTED__WORKER__PROFILE__ENABLED=False).
WORKER_CONFIG = {"distributed.worker.profile.enabled": False}


def local_cluster(n_workers: int):
    """A LocalCluster of ``n_workers`` single-threaded worker processes, configured for feature tasks."""
    import dask

    _, distributed = _import_dask()
    with dask.config.set(WORKER_CONFIG):
        return distributed.LocalCluster(n_workers=n_workers, threads_per_worker=1, processes=True,
                                        dashboard_address=None)


def group_files(jobs: FileJobs, n_threads: int) -> list[list[tuple[str, Sequence[TripTask]]]]:
    """Consecutive whole files per partition, about TRIPS_PER_PARTITION trips each (fewer for small runs)."""
    n_trips = sum(len(t) for _, t in jobs)
    target = max(1, min(TRIPS_PER_PARTITION, -(-n_trips // (PARTITIONS_PER_THREAD * max(n_threads, 1)))))
    groups, current, size = [], [], 0
    for job in jobs:
        current.append(job)
        size += len(job[1])
        if size >= target:
            groups.append(current)
            current, size = [], 0
    return groups + [current] if current else groups


def files_partition(files: Sequence[tuple[str, str, Sequence[TripTask]]], time_dtype: object) -> pd.DataFrame:
    """One partition: the feature rows of whole sample files' tasks (runs on a worker)."""
    frames = []
    for location, sample_file, tasks in files:
        result = compute_file(location, tasks)
        if result.problem is not None:
            frame = rows_frame([{"lamp_abs_on": False, "lamp_esc_on": False}], time_dtype)
        else:
            frame = rows_frame(result.rows, time_dtype)
        frames.append(frame.assign(**{SAMPLE_FILE: sample_file, READ_PROBLEM: result.problem}))
    return pd.concat(frames, ignore_index=True).astype({SAMPLE_FILE: str, READ_PROBLEM: str})


def partition_meta(time_dtype: object) -> pd.DataFrame:
    return rows_frame([], time_dtype).assign(**{SAMPLE_FILE: "", READ_PROBLEM: ""}).astype(
        {SAMPLE_FILE: str, READ_PROBLEM: str}).iloc[:0]


def split_partition(frame: pd.DataFrame) -> Iterator[tuple[str, FileResult]]:
    """Back to the runner's (sample_file, FileResult) from one partition's frame."""
    for sample_file, part in frame.groupby(SAMPLE_FILE, sort=False):
        problems = part[READ_PROBLEM].dropna()
        if len(problems):
            yield sample_file, FileResult([], str(problems.iloc[0]))
        else:
            yield sample_file, FileResult(part.drop(columns=[SAMPLE_FILE, READ_PROBLEM]).to_dict("records"))


def check_worker_versions(client) -> None:
    """Every worker must run this very version of tracktrue (README, "Running on a Dask cluster")."""
    ours = importlib.metadata.version("tracktrue")
    theirs = client.run(_installed_version)
    wrong = {worker: v for worker, v in theirs.items() if v != ours}
    if wrong:
        raise UserError(f"Dask workers must run tracktrue {ours}; found " +
                        ", ".join(f"{w}: {v or 'not installed'}" for w, v in sorted(wrong.items())))


def _installed_version() -> str | None:
    try:
        return importlib.metadata.version("tracktrue")
    except importlib.metadata.PackageNotFoundError:
        return None


def _import_dask():
    try:
        import dask.dataframe as dd
        import distributed
    except ImportError:
        raise UserError("--engine dask needs Dask: pip install 'tracktrue[dask]' "
                        "(dask[dataframe,distributed]) into this environment") from None
    # distributed sets its loggers to INFO when imported; follow the application's verbosity instead
    logging.getLogger("distributed").setLevel(logging.getLogger().getEffectiveLevel())
    return dd, distributed
