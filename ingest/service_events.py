"""Service events: repairs, tyre work, alignments and inspection outcomes per vehicle.

DESIGN.md, "Service events": they reset or annotate a vehicle's baseline
(models/service.py reads the published ``service_events`` table), so a
repaired vehicle does not top the list the next morning.

CSV format (``tracktrue service-events FILE.csv``, ``tracktrue ingest
--service-events FILE.csv``, ``tracktrue update --service-events FILE.csv``):
a header with ``vehicle_id``, ``date`` (YYYY-MM-DD), ``kind`` and optionally
``component`` and ``note``; comma, semicolon or tab separated, any case in
the header. ``kind`` is one of ``tracktrue.schema.SERVICE_EVENT_KINDS`` or a
spelling in ``SERVICE_EVENT_KIND_ALIASES`` (``alignment``, ``Tire replacement``: any case,
spaces or hyphens for underscores, ``tire`` for ``tyre``: ``ingest.grammar.vocabulary_key``); ``component`` is one of
``tracktrue.schema.COMPONENTS``, an area from ``SERVICE_EVENT_AREAS``
(``front_axle``, ``rear_axle``, ``tyres`` for all four) or empty for the whole
vehicle (``none`` is read as empty).

A row with a problem (not a date, a date in the future, an unknown kind or
component, a vehicle the catalog does not know, the same event twice in one
input) is not stored and is reported with its line number in the summary and
in the published ``rejects`` table. An event is keyed on (vehicle_id, date,
kind, component): importing the same file again adds nothing; a changed note
updates the stored one. Events live in the batch catalog (DuckDB) and are
published whole as ``service_events`` after every import.
"""

from __future__ import annotations

import datetime as dt
import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from ingest import catalog
from ingest.grammar import vocabulary_key
from ingest.reader import FileUnusable, clean_text, parse_rows, read_keyed_csv
from tracktrue.errors import UserError
from tracktrue.schema import (COMPONENTS, SERVICE_EVENT_AREAS, SERVICE_EVENT_KIND_ALIASES, SERVICE_EVENT_KINDS,
                              SERVICE_EVENTS_COLUMNS)
from tracktrue.store import Store

REQUIRED = ("vehicle_id", "date", "kind")
OPTIONAL = ("component", "note")
KEY = ("vehicle_id", "date", "kind", "component")
#: Components an event may name; "" is the whole vehicle.
EVENT_COMPONENTS: frozenset[str] = frozenset(c for c in COMPONENTS if c != "none") | set(SERVICE_EVENT_AREAS) | {""}
_ISO_DATE = re.compile(r"^\d{4}-\d{2}-\d{2}$")
_SHOWN = 15
_DDL = """
CREATE TABLE IF NOT EXISTS service_events (
    vehicle_id VARCHAR NOT NULL, date DATE NOT NULL, kind VARCHAR NOT NULL, component VARCHAR NOT NULL,
    note VARCHAR NOT NULL, source VARCHAR NOT NULL, imported_at TIMESTAMPTZ NOT NULL,
    PRIMARY KEY (vehicle_id, date, kind, component))
"""


@dataclass
class ServiceEventsSummary:
    """What one import did; ``describe()`` is the command line's summary."""

    source: str
    rows: int = 0
    added: int = 0
    notes_updated: int = 0
    already_stored: int = 0
    removed: int = 0
    rejects: list[tuple[int, str]] = field(default_factory=list)

    @property
    def changed(self) -> bool:
        return bool(self.added or self.notes_updated or self.removed)

    @property
    def exit_code(self) -> int:
        return 1 if self.rejects else 0

    def describe(self) -> str:
        lines = [f"service events from {self.source}: {self.rows} row(s): {self.added} added, "
                 f"{self.notes_updated} note(s) updated, {self.already_stored} already stored, "
                 f"{len(self.rejects)} rejected" + (f", {self.removed} removed" if self.removed else "")]
        lines += [f"  line {row}: {reason}" for row, reason in self.rejects[:_SHOWN]]
        if len(self.rejects) > _SHOWN:
            lines.append(f"  ... and {len(self.rejects) - _SHOWN} more (published rejects table)")
        return "\n".join(lines)


def read_service_csv(path: Path) -> tuple[pd.DataFrame, list[tuple[int, str]]]:
    """Raw text rows (``line`` plus the event columns, None for empty cells) and structural rejects."""
    text, index = read_keyed_csv(path, "service events", REQUIRED, OPTIONAL)
    try:
        parsed = parse_rows(text, [], list(index.values()))
    except FileUnusable as exc:
        raise UserError(f"service events {path}: {exc}") from None
    n = len(parsed.lines)
    rows = pd.DataFrame({"line": parsed.lines.astype(np.int64)})
    for c in (*REQUIRED, *OPTIONAL):
        rows[c] = pd.Series(clean_text(parsed.columns[index[c]]).to_pylist() if c in index else [None] * n,
                            dtype=object)
    return rows, list(parsed.structural_rejects)


def validate_events(rows: pd.DataFrame, known_vehicles: set[str], today: dt.date) -> tuple[pd.DataFrame, list]:
    """Canonical events (vehicle_id, date, kind, component, note) and (line, reason) rejects.

    ``rows`` holds text cells (None when empty) and a ``line`` column that the
    rejects name. Pure: the caller decides where rows come from.
    """
    problems: list[list[str]] = [[] for _ in range(len(rows))]
    vid = rows["vehicle_id"].fillna("").astype(str).str.strip()
    kind_text = rows["kind"].fillna("").astype(str).str.strip().str.lower()
    kind = kind_text.map(vocabulary_key).replace(SERVICE_EVENT_KIND_ALIASES)
    component = rows["component"].fillna("").astype(str).map(vocabulary_key).replace({"none": ""})
    date_text = rows["date"].fillna("").astype(str).str.strip()
    dates = [_parse_date(d) for d in date_text]
    for i, (v, k, kt, c, d, dtext) in enumerate(zip(vid, kind, kind_text, component, dates, date_text)):
        if not v:
            problems[i].append("vehicle_id is empty")
        elif v not in known_vehicles:
            problems[i].append(f"vehicle {v!r} is not known (not in the registry, no logs ingested)")
        if not dtext:
            problems[i].append("date is empty")
        elif d is None:
            problems[i].append(f"date {dtext!r} is not a date (YYYY-MM-DD)")
        elif d > today:
            problems[i].append(f"date {d} is in the future")
        if not kt:
            problems[i].append("kind is empty")
        elif k not in SERVICE_EVENT_KINDS:
            problems[i].append(f"kind {kt!r} is not one of {', '.join(SERVICE_EVENT_KINDS)}")
        if c not in EVENT_COMPONENTS:
            problems[i].append(f"component {c!r} is not a known component or area (or empty)")
    events = pd.DataFrame({"vehicle_id": vid.to_numpy(object), "date": pd.Series(dates, dtype=object).to_numpy(),
                           "kind": kind.to_numpy(object), "component": component.to_numpy(object),
                           "note": rows["note"].fillna("").astype(str).to_numpy(object)})
    first: dict[tuple, int] = {}
    for i, (key, line) in enumerate(zip(events[list(KEY)].itertuples(index=False, name=None), rows["line"])):
        if problems[i]:
            continue
        if key in first:
            problems[i].append(f"the same event (vehicle, date, kind, component) as line {first[key]}")
        else:
            first[key] = int(line)
    ok = np.array([not p for p in problems], bool)
    rejects = [(int(line), "; ".join(p)) for line, p, good in zip(rows["line"], problems, ok) if not good]
    return events[ok].reset_index(drop=True), rejects


def _parse_date(text: str) -> dt.date | None:
    if not _ISO_DATE.match(text):
        return None
    try:
        return dt.date.fromisoformat(text)
    except ValueError:
        return None


def import_service_events(path: Path, store: Store, today: dt.date | None = None) -> ServiceEventsSummary:
    """Validate a service-events CSV, store its new events in the catalog and publish (module doc)."""
    path = Path(path)
    rows, structural = read_service_csv(path)
    return import_service_rows(rows, store, source=str(path.resolve()), today=today, extra_rejects=structural)


def import_service_rows(rows: pd.DataFrame, store: Store, source: str, today: dt.date | None = None,
                        extra_rejects: list[tuple[int, str]] = (), replace_source: bool = False
                        ) -> ServiceEventsSummary:
    """Store validated events from ``rows`` (see ``validate_events``) under ``source`` and publish.

    ``source`` is recorded with each new event and names the input in the
    ``rejects`` table; that input's earlier rejects are replaced. With
    ``replace_source``, ``rows`` is the whole of that source: its stored events
    that ``rows`` no longer holds are removed (an entry deleted in the dashboard).
    """
    today = today or dt.datetime.now(dt.timezone.utc).date()
    summary = ServiceEventsSummary(source=source, rows=len(rows) + len(extra_rejects))
    with store.run_lock("ingest", holder=f"service-events import from {source}"):
        con = catalog.open_catalog(store)
        try:
            con.execute(_DDL)
            known = {r[0] for r in con.execute("SELECT vehicle_id FROM vehicles").fetchall()}
            if not known and len(rows):
                raise UserError("no vehicles are known yet: import the vehicle registry (--vehicles) or ingest "
                                "logs before service events", exit_code=4)
            events, rejects = validate_events(rows, known, today)
            summary.rejects = sorted([*extra_rejects, *rejects])
            _store(con, events, source, summary, replace_source)
            catalog.publish(con, store)
            publish_service_events(con, store)
        finally:
            con.close()
    return summary


def _store(con, events: pd.DataFrame, source: str, summary: ServiceEventsSummary, replace_source: bool = False) -> None:
    incoming = events.assign(source=source, imported_at=pd.Timestamp(dt.datetime.now(dt.timezone.utc)))
    con.execute("BEGIN TRANSACTION")
    try:
        con.register("_events", incoming)
        key = " AND ".join(f"s.{c} = e.{c}" for c in KEY)
        summary.already_stored = con.execute(f"SELECT count(*) FROM _events e JOIN service_events s ON {key}"
                                             ).fetchone()[0]
        summary.notes_updated = con.execute(f"SELECT count(*) FROM _events e JOIN service_events s ON {key} "
                                            "WHERE s.note <> e.note").fetchone()[0]
        summary.already_stored -= summary.notes_updated
        summary.added = len(incoming) - summary.already_stored - summary.notes_updated
        con.execute("INSERT INTO service_events SELECT vehicle_id, CAST(date AS DATE), kind, component, note, "
                    "source, imported_at FROM _events "
                    "ON CONFLICT (vehicle_id, date, kind, component) DO UPDATE SET note = excluded.note")
        if replace_source:
            summary.removed = len(con.execute(f"DELETE FROM service_events s WHERE s.source = ? AND NOT EXISTS "
                                              f"(SELECT 1 FROM _events e WHERE {key}) RETURNING 1", [source]).fetchall())
        con.unregister("_events")
        con.execute("DELETE FROM rejects WHERE source_file = ?", [source])
        catalog.insert(con, "rejects", catalog.frame(
            "rejects", [{"source_file": source, "row": r, "reason": why} for r, why in summary.rejects]))
        con.execute("COMMIT")
    except BaseException:
        con.execute("ROLLBACK")
        raise


def publish_service_events(con, store: Store) -> None:
    """Publish every stored event as ``service_events`` (SERVICE_EVENTS_COLUMNS)."""
    con.execute(_DDL)
    cols = ", ".join(SERVICE_EVENTS_COLUMNS)
    table = con.execute(f"SELECT {cols} FROM service_events ORDER BY date, vehicle_id, kind, component"
                        ).to_arrow_table()
    store.publish_table("service_events", table)
