"""The ingest run: find files, read each, write part files in chunks, commit, publish.

Idempotent: a file is identified by the sha256 of its content. The same path
with the same content adds nothing; the same content under another path is
recorded as a ``duplicate``; the same path with new content replaces the
trips of its earlier version (``replaced``). Memory stays bounded: rows are
written out and committed every ``CHUNK_ROWS`` rows.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import logging
from collections import Counter, defaultdict, deque
from collections.abc import Iterator
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd
from tqdm import tqdm

from ingest import catalog
from ingest.logfile import LogResult, read_log
from ingest.profile import Profile, load_profile
from ingest.registry import RegistryResult, read_registry, upsert_registry
from ingest.samples import part_path, write_part
from tracktrue.errors import UserError
from tracktrue.ids import vehicle_bucket
from tracktrue.store import Store

log = logging.getLogger(__name__)

#: Log exports in a folder: CSV, and the .txt / .tsv names scan tools give tab-separated exports;
#: each also gzip-compressed (``.csv.gz``), as telematics portals often deliver them.
SUFFIXES = (".csv", ".txt", ".tsv")
#: Rows held in memory before a chunk is written and committed.
CHUNK_ROWS = 2_000_000
#: Threads parsing files while the main thread stages and commits (pyarrow and
#: numpy release the GIL, so this uses both cores of a small machine).
WORKERS = 2
_SHOWN = 15


@dataclass
class IngestSummary:
    """What a run did; ``describe()`` is the command line's summary."""

    files_found: int = 0
    ingested: int = 0
    replaced: int = 0
    unchanged: int = 0
    duplicates: list[tuple[str, str]] = field(default_factory=list)
    rejected_files: list[tuple[str, str]] = field(default_factory=list)
    trips: int = 0
    rows: int = 0
    rows_rejected: int = 0
    reject_kinds: Counter = field(default_factory=Counter)
    column_errors: list[tuple[str, str]] = field(default_factory=list)
    warnings: list[tuple[str, str]] = field(default_factory=list)
    #: Files read whose every row was rejected (e.g. timestamps without a UTC offset): the first reason
    no_trip_files: list[tuple[str, str]] = field(default_factory=list)
    registry: RegistryResult | None = None

    @property
    def exit_code(self) -> int:
        registry_rejects = bool(self.registry and self.registry.rejects)
        return 1 if (self.rejected_files or self.rows_rejected or self.column_errors or registry_rejects) else 0

    def describe(self) -> str:
        lines = [
            f"ingest: {self.files_found} file(s) found: {self.ingested} ingested"
            + (f" ({self.replaced} replacing an earlier version)" if self.replaced else "")
            + f", {self.unchanged} unchanged, {len(self.duplicates)} duplicate, {len(self.rejected_files)} rejected",
            f"  {self.trips} trip(s) and {self.rows:,} row(s) stored, {self.rows_rejected:,} row(s) rejected",
        ]
        if self.reject_kinds:
            lines.append("  rejected rows by reason: "
                         + ", ".join(f"{k} {v:,}" for k, v in self.reject_kinds.most_common()))
        if self.registry is not None:
            r = self.registry
            lines.append(f"  vehicle registry {r.path}: {r.loaded} vehicle(s) loaded, {len(r.rejects)} row(s) rejected")
            lines += [f"    line {row}: {reason}" for row, reason in r.rejects[:_SHOWN]]
            lines += [f"    warning: {w}" for w in r.warnings[:_SHOWN]]
        for title, items in (("rejected files", self.rejected_files),
                             ("files with no trip stored", self.no_trip_files), ("column errors", self.column_errors),
                             ("duplicates", self.duplicates), ("warnings", self.warnings)):
            if items:
                lines.append(f"  {title} ({len(items)}):")
                lines += [f"    {path}: {text}" for path, text in items[:_SHOWN]]
                if len(items) > _SHOWN:
                    lines.append(f"    ... and {len(items) - _SHOWN} more")
        if self.exit_code:
            lines.append("  some input was rejected: see the published rejects and ingested_files tables (exit code 1)")
        return "\n".join(lines)


def find_files(paths: list[Path], store: Store) -> list[Path]:
    """Named files, plus *.csv / *.txt / *.tsv (any case, gzipped or not) under named folders, outside the store."""
    store_root = store.root.resolve()
    found: set[Path] = set()
    for p in paths:
        if p.is_file():
            found.add(p.resolve())
        elif p.is_dir():
            for f in p.rglob("*"):
                if _is_export(f.name) and f.is_file():
                    r = f.resolve()
                    if store_root not in r.parents:
                        found.add(r)
    return sorted(found)


def _is_export(name: str) -> bool:
    name = name.lower()
    return name.endswith(SUFFIXES) or (name.endswith(".gz") and name[:-3].endswith(SUFFIXES))


def run_ingest(paths, store: Store, profile=None, vehicles_csv=None, trip_gap_s: float = 300.0,
               progress: bool = False) -> IngestSummary:
    """Ingest log files and folders into ``store`` and publish its tables (ingest/__init__.py)."""
    paths = [Path(p) for p in paths]
    missing = [str(p) for p in paths if not p.exists()]
    if missing:
        raise UserError(f"no such file or folder: {', '.join(missing)}")
    if not trip_gap_s > 0:
        raise UserError(f"--trip-gap must be positive, not {trip_gap_s}")
    prof = load_profile(profile)
    registry_df = registry_result = None
    if vehicles_csv is not None:
        registry_df, registry_result = read_registry(Path(vehicles_csv))
    files = find_files(paths, store)
    summary = IngestSummary(files_found=len(files), registry=registry_result)
    with store.run_lock("ingest", holder="tracktrue ingest"):
        con = catalog.open_catalog(store)
        try:
            if registry_df is not None:
                _import_registry(con, registry_df, registry_result)
            _Run(con, store, prof, trip_gap_s, summary).ingest(files, progress)
            catalog.publish(con, store)
            catalog.collect_garbage(con, store)
        finally:
            con.close()
    return summary


def _import_registry(con, df: pd.DataFrame, result: RegistryResult) -> None:
    con.execute("BEGIN TRANSACTION")
    try:
        upsert_registry(con, df)
        con.execute("DELETE FROM rejects WHERE source_file = ?", [result.path])
        catalog.insert(con, "rejects", catalog.frame(
            "rejects", [{"source_file": result.path, "row": r, "reason": why} for r, why in result.rejects]))
        con.execute("COMMIT")
    except BaseException:
        con.execute("ROLLBACK")
        raise


@dataclass(frozen=True)
class _Loaded:
    sha: str | None
    result: LogResult | None  # None when the file needs no parsing (unchanged or duplicate)
    error: str | None


def _in_order(pool: ThreadPoolExecutor, fn, items: list, window: int) -> Iterator[tuple]:
    """(item, fn(item)) in input order, with at most ``window`` items in flight (bounded memory)."""
    pending: deque = deque()
    for item in items:
        pending.append((item, pool.submit(fn, item)))
        if len(pending) >= window:
            head, future = pending.popleft()
            yield head, future.result()
    while pending:
        head, future = pending.popleft()
        yield head, future.result()


class _Run:
    """One run's pending chunk and the catalog state it checks against."""

    def __init__(self, con, store: Store, profile: Profile, gap_s: float, summary: IngestSummary):
        self.con, self.store, self.profile, self.gap_s, self.summary = con, store, profile, gap_s, summary
        self.by_path, self.by_hash = catalog.file_states(con)
        self.registry_vins = catalog.registry_vins(con)
        self.trip_owner = catalog.trip_owners(con)  # trip_id -> source file, stored and staged
        self._reset()

    def _reset(self) -> None:
        self.parts: dict[tuple[int, str], list] = defaultdict(list)
        self.trips: list[dict] = []
        self.signal_rows: list[dict] = []
        self.files: list[dict] = []
        self.rejects: list[dict] = []
        self.vins: dict[str, str] = {}
        self.replaced: list[str] = []
        self.pending_rows = 0
        self.pending_hashes: dict[str, str] = {}

    def ingest(self, files: list[Path], progress: bool) -> None:
        file_bar = tqdm(total=len(files), unit="file", desc="files", disable=not progress)
        row_bar = tqdm(unit="row", desc="rows", disable=not progress, unit_scale=True)
        with file_bar, row_bar, ThreadPoolExecutor(max_workers=WORKERS) as pool:
            for path, loaded in _in_order(pool, self._load, files, window=2 * WORKERS):
                n = self._one(path, loaded)
                file_bar.update(1)
                row_bar.update(n)
                if self.pending_rows >= CHUNK_ROWS:
                    self._flush(pool)
            self._flush(pool)

    def _load(self, path: Path) -> _Loaded:
        """Read, hash and (unless already stored) parse one file; runs in a worker thread."""
        try:
            raw = path.read_bytes()
        except OSError as exc:
            return _Loaded(None, None, f"cannot be read: {exc}")
        sha = hashlib.sha256(raw).hexdigest()
        prev = self.by_path.get(str(path))
        stored = self.by_hash.get(sha)
        if (prev is not None and prev[0] == sha) or (stored is not None and stored != str(path)):
            return _Loaded(sha, None, None)  # unchanged or a duplicate: no need to parse
        return _Loaded(sha, read_log(raw, path.name, path.parent.name, self.profile, self.gap_s,
                                     self.registry_vins), None)

    def _one(self, path: Path, loaded: _Loaded) -> int:
        key, sha = str(path), loaded.sha
        if loaded.error is not None:
            self.summary.rejected_files.append((key, loaded.error))
            self._record(key, None, "rejected", loaded.error, LogResult())
            return 0
        prev = self.by_path.get(key)
        if prev is not None and prev[0] == sha:
            self.summary.unchanged += 1
            return 0
        replacing = prev is not None and prev[1] in ("ingested", "replaced")
        same = self.pending_hashes.get(sha) or self.by_hash.get(sha)
        if same is not None and same != key:
            if replacing:  # this path's earlier version's trips go; the content is stored under `same`
                self.replaced.append(key)
            self.summary.duplicates.append((key, f"same content as {same}"))
            self._record(key, sha, "duplicate", f"same content as {same}", LogResult())
            return 0
        result = loaded.result
        if replacing:
            self.replaced.append(key)
        if result.unusable:
            self.summary.rejected_files.append((key, result.unusable))
            self._record(key, sha, "rejected", result.unusable, result)
            return result.n_rows
        self._drop_stored_trips(key, result)
        self._stage(key, sha, result)
        self._record(key, sha, "replaced" if replacing else "ingested", "; ".join(result.column_errors) or None, result)
        self.pending_hashes[sha] = key
        s = self.summary
        s.ingested += 1
        s.replaced += replacing
        s.trips += len(result.trips)
        s.rows += sum(t.info["n_samples"] for t in result.trips)
        s.rows_rejected += len(result.rejects)
        s.reject_kinds.update(result.reject_kinds)
        s.column_errors += [(key, e) for e in result.column_errors]
        s.warnings += [(key, w) for w in result.warnings]
        if not result.trips and result.rejects:
            line, why = result.rejects[0]
            s.no_trip_files.append(
                (key, f"{len(result.rejects):,} of {result.n_rows:,} row(s) rejected, e.g. line {line}: {why}"))
        return result.n_rows

    def _drop_stored_trips(self, key: str, result: LogResult) -> None:
        """A trip (same vehicle and start) already stored from another file is rejected, not doubled."""
        keep = []
        for trip in result.trips:
            owner = self.trip_owner.get(trip.trip_id)
            if owner is None or owner == key:
                keep.append(trip)
                continue
            reason = f"trip {trip.trip_id} (same vehicle and start time) is already stored from {owner}"
            result.rejects.extend((int(line), reason) for line in trip.lines)
            result.reject_kinds["duplicate trip"] += len(trip.lines)
        result.trips = keep
        result.rejects.sort()

    def _stage(self, key: str, sha: str, result: LogResult) -> None:
        for trip in result.trips:
            info = {**trip.info, "source_file": key, "source_sha256": sha}
            month = info["start_time"].strftime("%Y-%m")
            self.parts[(vehicle_bucket(trip.vehicle_id), month)].append((info, trip.samples))
            self.trips.append(info)
            self.signal_rows += trip.signal_rows
            self.trip_owner[trip.trip_id] = key
            self.pending_rows += trip.samples.num_rows
        self.vins.update(result.vins)

    def _record(self, key: str, sha: str | None, status: str, reason: str | None, result: LogResult) -> None:
        self.files.append({
            "path": key, "sha256": sha, "status": status, "reason": reason, "n_rows": result.n_rows,
            "n_rejected": result.n_rejected, "n_trips": len(result.trips),
            "ingested_at": pd.Timestamp(dt.datetime.now(dt.timezone.utc)),
        })
        self.rejects += [{"source_file": key, "row": line, "reason": why} for line, why in result.rejects]

    def _flush(self, pool: ThreadPoolExecutor) -> None:
        if not self.files:
            return
        jobs = []
        for (bucket, month), items in self.parts.items():
            path = part_path(self.store.samples_dir, bucket, month)
            jobs.append(pool.submit(write_part, path, [samples for _, samples in items]))
            for info, _ in items:
                info["sample_file"] = catalog.relative(self.store, path)
        for job in jobs:  # every part is on disk before the commit that refers to it
            job.result()
        catalog.commit_chunk(self.con, self.trips, self.signal_rows, self.files, self.rejects, self.vins, self.replaced)
        log.debug("committed %d file(s), %d trip(s)", len(self.files), len(self.trips))
        self.by_path, self.by_hash = catalog.file_states(self.con)
        self._reset()
