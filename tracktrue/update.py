"""``tracktrue update``: the one command a nightly scheduler runs.

Orchestration only: ingest what is new (logs, registry, service events,
service events entered in the dashboard, snoozes), compute features for new
trips, score and publish, each step being the stage's own public function. Every
stage publishes atomically, so a failure or a kill leaves each table at a
complete generation and the next run finishes the job.

The dashboard's service entries are the whole of the ``dashboard`` source:
an entry deleted there is removed from ``service_events``. Inspection
outcomes "no fault found" recorded on the plan page become ``no_fault_found``
events (source ``dashboard outcomes``), the label models/stability.py reads. Snoozes (from
``tracktrue snooze`` and the dashboard, both kept in the dashboard's SQLite
file) are published whole as ``snoozes``.

Scoring is skipped when its inputs (trip_features, vehicles, service_events,
snoozes) are exactly what the last successful run scored: a night without new logs
computes nothing. A run lock (``runs/update.lock``) keeps two runs apart.
Each run appends to ``runs/update.log``; a run that finishes writes
``runs/last_success.json`` (time, counts, the scoring inputs' fingerprint),
which the dashboard's staleness warning reads.

Exit codes (tracktrue/cli.py maps the exceptions):
  0  done, nothing rejected
  1  done, but some input was rejected (see the summary / rejects table)
  2  unusable arguments (a path that does not exist, a bad profile)
  3  another run holds the lock (the message names it)
  4  a prerequisite is missing (e.g. no trips yet, no vehicles known)
  5  a stage failed (the message names it; earlier stages' tables are
     published, the failed stage's tables are unchanged)
"""

from __future__ import annotations

import contextlib
import datetime as dt
import hashlib
import json
import logging
import os
import socket
import time
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from tracktrue.errors import UserError
from tracktrue.store import LockHeld, Store, TableMissing, atomic_write_bytes

log = logging.getLogger(__name__)

LAST_SUCCESS = "last_success.json"
UPDATE_LOG = "update.log"
EXIT_MISSING, EXIT_STAGE_FAILED = 4, 5
DASHBOARD_SOURCE = "dashboard"
#: Inspection outcomes "no fault found" recorded on the dashboard's plan page.
OUTCOMES_SOURCE = "dashboard outcomes"
#: Stages whose UserError means an earlier stage gave them nothing to work on (exit 4).
NEEDS_EARLIER_STAGES = frozenset({"features", "score"})
#: Tables whose content decides whether scoring has anything new to do.
SCORING_INPUTS = ("trip_features", "vehicles", "service_events", "snoozes")


class StageFailed(UserError):
    """A stage raised; the message names it and where the traceback was logged."""

    exit_code = EXIT_STAGE_FAILED


@dataclass
class UpdateSummary:
    """What one run did; ``describe()`` is the command line's summary."""

    holder: str
    started_at: dt.datetime
    reports: list[tuple[str, str]] = field(default_factory=list)  #: (stage, its summary)
    counts: dict = field(default_factory=dict)
    rejected: bool = False
    scored: bool = False
    fingerprint: str | None = None  #: of the scoring inputs (SCORING_INPUTS) after this run
    finished_at: dt.datetime | None = None

    @property
    def exit_code(self) -> int:
        return 1 if self.rejected else 0

    def describe(self) -> str:
        lines = [f"update: {self.holder}"]
        for stage, text in self.reports:
            lines.append(f"[{stage}]")
            lines += ["  " + line for line in text.splitlines()]
        if not self.scored:
            lines.append("[score]\n  skipped: nothing new since the last successful run (ranking unchanged)")
        seconds = (self.finished_at - self.started_at).total_seconds() if self.finished_at else float("nan")
        lines.append(f"done in {seconds:.0f} s" + (", some input was rejected (exit code 1)" if self.rejected else ""))
        return "\n".join(lines)


def run_update(paths, store: Store, vehicles_csv=None, service_events_csv=None, profile=None,
               trip_gap_s: float = 300.0, progress: bool = False) -> UpdateSummary:
    """ingest → service events → features → score, under the ``update`` lock (module doc)."""
    paths = [Path(p) for p in paths]
    named = [*paths, *(Path(p) for p in (vehicles_csv, service_events_csv, profile) if p is not None)]
    missing = [str(p) for p in named if not p.exists()]
    if missing:
        raise UserError(f"no such file or folder: {', '.join(missing)}")
    started = dt.datetime.now(dt.timezone.utc)
    holder = f"tracktrue update (pid {os.getpid()} on {socket.gethostname()}, started {started:%Y-%m-%d %H:%M:%S} UTC)"
    summary = UpdateSummary(holder=holder, started_at=started)
    with _run_log(store) as runlog:
        runlog.info("start: %s", holder)
        try:
            with store.run_lock("update", holder=holder):
                _run_stages(store, paths, vehicles_csv, service_events_csv, profile, trip_gap_s, progress,
                            summary, runlog)
                summary.finished_at = dt.datetime.now(dt.timezone.utc)
                _write_last_success(store, summary)
        except LockHeld as exc:
            runlog.warning("not started: %s", exc)
            raise
        except UserError as exc:
            runlog.error("stopped (exit %d): %s", exc.exit_code, exc)
            raise
        runlog.info("finished (exit %d): %s", summary.exit_code, json.dumps(summary.counts))
    return summary


def _run_stages(store, paths, vehicles_csv, service_events_csv, profile, trip_gap_s, progress, summary, runlog):
    from features import run_features
    from ingest import run_ingest
    from ingest.service_events import import_service_events, import_service_rows
    from models import run_scoring

    def step(name: str, fn: Callable, *args, **kwargs):
        result = _stage(name, runlog, _log_path(store), fn, *args, **kwargs)
        summary.reports.append((name, result.describe()))
        runlog.info("%s:\n%s", name, result.describe())
        return result

    ingested = step("ingest", run_ingest, paths, store, profile=profile, vehicles_csv=vehicles_csv,
                    trip_gap_s=trip_gap_s, progress=progress)
    service = []
    if service_events_csv is not None:
        service.append(step("service events", import_service_events, Path(service_events_csv), store))
    for source, rows in ((DASHBOARD_SOURCE, _dashboard_entries(store)),
                         (OUTCOMES_SOURCE, _no_fault_found_outcomes(store))):
        if len(rows) or _has_events_from(store, source):
            service.append(step(f"{source} service events", import_service_rows, rows, store,
                                source=source, replace_source=True))
    _publish_snoozes(store)
    computed = step("features", run_features, store, progress=progress)
    inputs = _fingerprint(store)
    previous = read_last_success(store) or {}
    scored = None
    if inputs != previous.get("scoring_inputs") or not store.has_table("vehicle_status"):
        scored = step("score", run_scoring, store, progress=progress)
    summary.scored = scored is not None
    summary.rejected = bool(ingested.exit_code or any(s.exit_code for s in service))
    summary.counts = {
        "files_found": ingested.files_found, "files_ingested": ingested.ingested, "trips_added": ingested.trips,
        "rows_stored": ingested.rows, "rows_rejected": ingested.rows_rejected,
        "files_rejected": len(ingested.rejected_files),
        "service_events_added": sum(s.added for s in service),
        "service_events_rejected": sum(len(s.rejects) for s in service),
        "trips_computed": computed.n_computed,
        "trips_scored": scored.n_trips if scored else 0,
        "vehicles_scored": scored.n_vehicles if scored else 0,
    }
    summary.fingerprint = inputs


def _stage(name: str, runlog: logging.Logger, log_path: Path, fn: Callable, *args, **kwargs):
    """Run one stage; turn what it raises into the documented exit codes."""
    try:
        return fn(*args, **kwargs)
    except LockHeld:
        raise
    except TableMissing as exc:
        raise UserError(f"stage {name}: {exc}", exit_code=EXIT_MISSING) from None
    except UserError as exc:
        if name not in NEEDS_EARLIER_STAGES or exc.exit_code != 2:
            raise  # bad input to ingest is a usage error, as for `tracktrue ingest`
        raise UserError(f"stage {name}: {exc}", exit_code=EXIT_MISSING) from None
    except Exception as exc:
        runlog.exception("stage %s failed", name)
        raise StageFailed(f"stage {name!r} failed ({type(exc).__name__}: {exc}). The tables of the stages "
                          f"before it are published; {name}'s tables keep their previous generation. "
                          f"Traceback in {log_path}; rerun `tracktrue update` to finish.") from exc


def _dashboard_entries(store: Store) -> pd.DataFrame:
    """Service events entered in the dashboard, in the shape ingest validates (line = entry id)."""
    from dashboard.service_entries import read_service_entries

    entries = read_service_entries(store)
    return entries.rename(columns={"entry_id": "line"})[["line", "vehicle_id", "date", "kind", "component", "note"]]


def _no_fault_found_outcomes(store: Store) -> pd.DataFrame:
    """Plan-page outcomes "no fault found" as no_fault_found service events (line = their order)."""
    from dashboard.outcomes import read_outcomes

    nff = read_outcomes(store)
    nff = nff[nff["outcome"] == "no_fault_found"].reset_index(drop=True)
    return pd.DataFrame({"line": nff.index + 1, "vehicle_id": nff["vehicle_id"],
                         "date": nff["date"].dt.strftime("%Y-%m-%d"), "kind": "no_fault_found", "component": "",
                         "note": nff["note"]})


def _has_events_from(store: Store, source: str) -> bool:
    """Whether service_events holds events of ``source`` (which a deletion there may remove)."""
    if not store.has_table("service_events"):
        return False
    return bool((store.read_table("service_events")["source"] == source).any())


def _publish_snoozes(store: Store) -> None:
    """Publish the snoozes kept in the dashboard's SQLite file when they differ from the published ones."""
    from dashboard.snoozes import read_snoozes

    snoozes = read_snoozes(store)
    if store.has_table("snoozes") and store.read_table("snoozes").astype(str).equals(snoozes.astype(str)):
        return
    store.publish_table("snoozes", snoozes)


def _fingerprint(store: Store) -> str:
    """A digest of the scoring inputs' content (not their generations: features republishes every run)."""
    digest = hashlib.sha256()
    for name in SCORING_INPUTS:
        digest.update(name.encode())
        if store.has_table(name):
            frame = store.read_table(name)
            digest.update(",".join(map(str, frame.columns)).encode())
            digest.update(pd.util.hash_pandas_object(frame, index=False).to_numpy().tobytes())
    return digest.hexdigest()


# ---- last success and the run log ---------------------------------------------
def last_success_path(store: Store) -> Path:
    return store.runs_dir / LAST_SUCCESS


def _log_path(store: Store) -> Path:
    return store.runs_dir / UPDATE_LOG


def read_last_success(store: Store) -> dict | None:
    """The last successful run's record, or None (never written, or unreadable)."""
    try:
        record = json.loads(last_success_path(store).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    return record if isinstance(record, dict) else None


def _write_last_success(store: Store, summary: UpdateSummary) -> None:
    record = {
        "finished_at": summary.finished_at.isoformat(timespec="seconds"),
        "started_at": summary.started_at.isoformat(timespec="seconds"),
        "duration_s": round((summary.finished_at - summary.started_at).total_seconds(), 1),
        "holder": summary.holder,
        "exit_code": summary.exit_code,
        "scored": summary.scored,
        "counts": summary.counts,
        "scoring_inputs": summary.fingerprint,
        "tables": store.generations(),
    }
    atomic_write_bytes(last_success_path(store), json.dumps(record, indent=2).encode("utf-8"))


@contextlib.contextmanager
def _run_log(store: Store) -> Iterator[logging.Logger]:
    """A logger writing to runs/update.log for this run; the stages' warnings go there too."""
    store.runs_dir.mkdir(parents=True, exist_ok=True)
    handler = logging.FileHandler(_log_path(store), encoding="utf-8")
    handler.setFormatter(logging.Formatter("%(asctime)s pid %(process)d %(levelname)s %(name)s: %(message)s"))
    runlog = logging.getLogger(f"{__name__}.run")
    runlog.setLevel(logging.INFO)
    runlog.propagate = False  # the summary is printed by the command line; the file keeps the record
    root = logging.getLogger()
    runlog.addHandler(handler)
    root.addHandler(handler)
    t0 = time.perf_counter()
    try:
        yield runlog
    finally:
        runlog.info("run took %.1f s", time.perf_counter() - t0)
        runlog.removeHandler(handler)
        root.removeHandler(handler)
        handler.close()
