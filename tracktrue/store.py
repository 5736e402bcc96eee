"""Where every table lives and how it is published atomically.

DESIGN.md: each stage publishes its tables as Parquet in a new *generation*
folder and then switches a small pointer file with one atomic rename, so a
reader (the dashboard, the next stage) sees either the old table or the new
one, never half of it. Readers key their caches on the generation id. A crash
mid-publish leaves an unreferenced ``*.tmp`` folder that the next publish
removes.
"""

from __future__ import annotations

import contextlib
import json
import logging
import os
import shutil
import time
import urllib.parse
import urllib.request
import uuid
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from tracktrue.errors import UserError

log = logging.getLogger(__name__)

STORE_ENV = "TRACKTRUE_STORE"
DEFAULT_STORE = "tracktrue-store"
POINTER = "CURRENT"
#: Empty Parquet file with the table's schema (not matched by ``*.parquet``).
SCHEMA_FILE = "_schema.pq"
#: Generations kept besides the current one, so a reader that resolved the
#: pointer a moment ago can still open its files.
KEEP_OLD_GENERATIONS = 2


class TableMissing(LookupError):
    """A table was asked for before the stage that owns it has published it."""


def resolve_store_root(arg: str | os.PathLike | None = None) -> Path:
    """``--store`` wins, then ``$TRACKTRUE_STORE``, then ``./tracktrue-store``.

    A ``file://`` URL names a local folder. Other URLs are refused: the
    catalog and the atomic publish need a local or mounted file system.
    """
    text = os.fspath(arg) if arg else os.environ.get(STORE_ENV) or DEFAULT_STORE
    if isinstance(text, str) and "://" in text:
        parsed = urllib.parse.urlparse(text)
        if parsed.scheme != "file" or parsed.netloc not in ("", "localhost"):
            raise UserError(f"store {text!r}: only local folders and file:// URLs can hold a store")
        return Path(urllib.request.url2pathname(parsed.path))
    return Path(text)


def atomic_write_bytes(path: Path, data: bytes) -> None:
    """Write a file so that it either exists whole or not at all."""
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f".{path.name}.{uuid.uuid4().hex}.tmp")
    with open(tmp, "wb") as fh:
        fh.write(data)
        fh.flush()
        os.fsync(fh.fileno())
    os.replace(tmp, path)


def atomic_write_parquet(path: Path, table: pa.Table | pd.DataFrame) -> None:
    """Write one Parquet file atomically (temporary name, then rename)."""
    if isinstance(table, pd.DataFrame):
        table = pa.Table.from_pandas(table, preserve_index=False)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f".{path.name}.{uuid.uuid4().hex}.tmp")
    pq.write_table(table, tmp, compression="zstd")
    with open(tmp, "rb") as fh:
        os.fsync(fh.fileno())
    os.replace(tmp, path)


@dataclass(frozen=True)
class Store:
    """One store folder: raw samples, the batch catalog, published tables."""

    root: Path

    @classmethod
    def open(cls, root: str | os.PathLike | None = None, create: bool = True) -> "Store":
        path = resolve_store_root(root)
        if create:
            path.mkdir(parents=True, exist_ok=True)
        return cls(path)

    # ---- fixed locations -------------------------------------------------
    @property
    def samples_dir(self) -> Path:
        """Raw layer owned by ingest: immutable Parquet part files."""
        return self.root / "samples"

    @property
    def catalog_path(self) -> Path:
        """DuckDB file the batch stages use; readers never open it."""
        return self.root / "catalog.duckdb"

    @property
    def dashboard_db_path(self) -> Path:
        """SQLite (WAL) file the dashboard writes: plan, outcomes, snoozes."""
        return self.root / "dashboard.sqlite"

    @property
    def runs_dir(self) -> Path:
        """Model-run records, logs and run locks."""
        return self.root / "runs"

    def tables_dir(self, name: str) -> Path:
        _check_table_name(name)
        return self.root / "tables" / name

    # ---- published tables -----------------------------------------------
    def generation(self, name: str) -> str | None:
        """The current generation id of a table, or None if never published."""
        pointer = self.tables_dir(name) / POINTER
        try:
            gen = pointer.read_text(encoding="utf-8").strip()
        except FileNotFoundError:
            return None
        return gen or None

    def generations(self) -> dict[str, str]:
        """Every published table and its generation (a cache key for readers)."""
        base = self.root / "tables"
        if not base.is_dir():
            return {}
        out = {}
        for d in sorted(base.iterdir()):
            gen = self.generation(d.name) if d.is_dir() else None
            if gen:
                out[d.name] = gen
        return out

    def table_files(self, name: str) -> list[Path]:
        """Parquet files of the current generation (raises TableMissing)."""
        gen = self.generation(name)
        if gen is None:
            raise TableMissing(f"table {name!r} has not been published in {self.root}")
        folder = self.tables_dir(name) / gen
        return sorted(folder.rglob("*.parquet"))

    def has_table(self, name: str) -> bool:
        return self.generation(name) is not None

    def read_table(self, name: str, columns: list[str] | None = None) -> pd.DataFrame:
        """Read a published table whole (tables, not samples, are small)."""
        files = self.table_files(name)
        if not files:  # an empty table still has a schema
            files = [self.tables_dir(name) / self.generation(name) / SCHEMA_FILE]
        return pq.ParquetDataset([str(f) for f in files]).read(columns=columns).to_pandas()

    def publish_table(
        self,
        name: str,
        data: pd.DataFrame | pa.Table,
        partition_by: str | None = None,
    ) -> str:
        """Publish a whole new generation of a table and switch the pointer.

        ``partition_by`` names an integer or text column; each value gets its
        own file, which keeps fleet-scale tables out of one huge file without
        one file per trip.
        """
        table = data if isinstance(data, pa.Table) else pa.Table.from_pandas(data, preserve_index=False)
        base = self.tables_dir(name)
        base.mkdir(parents=True, exist_ok=True)
        self._sweep_tmp(base)
        gen = f"gen-{time.strftime('%Y%m%dT%H%M%S', time.gmtime())}-{uuid.uuid4().hex[:8]}"
        tmp = base / f"{gen}.tmp"
        tmp.mkdir()
        _write_schema(tmp / SCHEMA_FILE, table.schema)
        if partition_by is None or table.num_rows == 0:
            pq.write_table(table, tmp / "part-0.parquet", compression="zstd")
        else:
            keys = table.column(partition_by).to_pandas()
            for i, key in enumerate(sorted(keys.dropna().unique().tolist())):
                mask = pa.array((keys == key).to_numpy())
                pq.write_table(table.filter(mask), tmp / f"part-{i:05d}.parquet", compression="zstd")
            if keys.isna().any():
                mask = pa.array(keys.isna().to_numpy())
                pq.write_table(table.filter(mask), tmp / "part-null.parquet", compression="zstd")
        _fsync_dir(tmp)
        os.replace(tmp, base / gen)
        atomic_write_bytes(base / POINTER, gen.encode("utf-8"))
        self._drop_old_generations(base, gen)
        log.debug("published %s generation %s (%d rows)", name, gen, table.num_rows)
        return gen

    # ---- run lock ---------------------------------------------------------
    @contextlib.contextmanager
    def run_lock(self, name: str, holder: str) -> Iterator[None]:
        """Exclusive lock for one batch job; raises LockHeld naming the holder."""
        self.runs_dir.mkdir(parents=True, exist_ok=True)
        path = self.runs_dir / f"{name}.lock"
        try:
            fd = os.open(path, os.O_CREAT | os.O_EXCL | os.O_WRONLY)
        except FileExistsError:
            info = _read_lock(path)
            if info and not _pid_alive(info.get("pid")):
                log.warning("removing stale lock %s left by pid %s", path, info.get("pid"))
                path.unlink(missing_ok=True)
                fd = os.open(path, os.O_CREAT | os.O_EXCL | os.O_WRONLY)
            else:
                raise LockHeld(path, info) from None
        with os.fdopen(fd, "w") as fh:
            json.dump({"pid": os.getpid(), "holder": holder, "since": time.time()}, fh)
        try:
            yield
        finally:
            path.unlink(missing_ok=True)

    # ---- internals --------------------------------------------------------
    @staticmethod
    def _sweep_tmp(base: Path) -> None:
        for leftover in base.glob("*.tmp"):
            shutil.rmtree(leftover, ignore_errors=True)

    @staticmethod
    def _drop_old_generations(base: Path, current: str) -> None:
        gens = sorted(p for p in base.iterdir() if p.is_dir() and p.name.startswith("gen-") and not p.name.endswith(".tmp"))
        old = [p for p in gens if p.name != current]
        for p in old[: max(0, len(old) - KEEP_OLD_GENERATIONS)]:
            shutil.rmtree(p, ignore_errors=True)


class LockHeld(RuntimeError):
    """Another run holds the store's lock."""

    def __init__(self, path: Path, info: dict | None):
        self.path = path
        self.info = info or {}
        who = self.info.get("holder", "unknown run")
        pid = self.info.get("pid", "?")
        super().__init__(f"{path} is held by {who} (pid {pid})")


def _check_table_name(name: str) -> None:
    if not name.replace("_", "").isalnum():
        raise ValueError(f"invalid table name {name!r}")


def _write_schema(path: Path, schema: pa.Schema) -> None:
    """An empty Parquet file holding the schema, so empty tables keep their columns."""
    pq.write_table(schema.empty_table(), path)


def _fsync_dir(path: Path) -> None:
    for f in path.iterdir():
        if f.is_file():
            with open(f, "rb") as fh:
                os.fsync(fh.fileno())


def _read_lock(path: Path) -> dict | None:
    try:
        return json.loads(path.read_text())
    except (OSError, ValueError):
        return None


def _pid_alive(pid) -> bool:
    if not isinstance(pid, int):
        return True  # unknown: be safe and treat it as held
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True
