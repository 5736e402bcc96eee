"""Reading the published ranking back: the ``rank`` (and ``rank --changes``) and ``vehicle`` commands."""

from __future__ import annotations

import io
import json

import numpy as np
import pandas as pd

from models.attribution import SAFETY_NOTE
from models.changes import CHANGE_COLUMNS, RunChanges
from tracktrue.errors import UserError
from tracktrue.schema import RANKING_COLUMNS, STATUSES, VEHICLE_STATUS_COLUMNS
from tracktrue.store import Store


def ranking_table(store: Store, statuses: list[str] | None = None, top: int | None = None) -> pd.DataFrame:
    """The published vehicle_status, in rank order, optionally filtered (VEHICLE_STATUS_COLUMNS)."""
    if statuses:
        unknown = sorted(set(statuses) - set(STATUSES))
        if unknown:
            raise UserError(f"unknown status {', '.join(unknown)}; choose from {', '.join(STATUSES)}")
    df = store.read_table("vehicle_status").sort_values("rank").reset_index(drop=True)
    if statuses:
        df = df[df["status"].isin(statuses)]
    if top is not None:
        df = df.head(top)
    # a store scored before models.stability existed lacks its columns: they read as empty
    return df.reindex(columns=list(VEHICLE_STATUS_COLUMNS)).reset_index(drop=True)


def _contract_rows(df: pd.DataFrame) -> pd.DataFrame:
    out = df[list(RANKING_COLUMNS)].copy()
    out["flagged_since"] = out["flagged_since"].map(lambda d: d.isoformat() if pd.notna(d) else "")
    out["last_trip"] = pd.to_datetime(out["last_trip"], utc=True).map(lambda t: t.isoformat() if pd.notna(t) else "")
    out["score"] = out["score"].astype(float).round(4)
    out["rank"] = out["rank"].astype(int)
    return out


def format_ranking(df: pd.DataFrame, fmt: str) -> str:
    """``csv``/``json``: exactly RANKING_COLUMNS; ``table``: for people, with the safety note."""
    rows = _contract_rows(df)
    if fmt == "csv":
        buf = io.StringIO()
        rows.to_csv(buf, index=False)
        return buf.getvalue().rstrip("\n")
    if fmt == "json":
        return json.dumps(rows.to_dict(orient="records"), indent=2, ensure_ascii=False)
    if fmt != "table":
        raise UserError(f"unknown format {fmt!r}; choose table, csv or json")
    if rows.empty:
        return "no vehicles match"
    shown = pd.DataFrame({
        "#": rows["rank"], "vehicle": rows["vehicle_id"], "platform": rows["platform"],
        "score": rows["score"].map(lambda s: f"{s:.3f}"), "status": rows["status"],
        "component": rows["suspected_component"], "flagged since": rows["flagged_since"],
        "last trip": rows["last_trip"].str.slice(0, 16).str.replace("T", " "),
    })
    lines = [shown.to_string(index=False)]
    notes = [f"{v}: {n}" for v, n in zip(df["vehicle_id"], status_notes(df)) if n]
    if notes:
        lines += ["", *notes]
    flagged = rows[rows["evidence"].astype(str) != ""]
    if len(flagged):
        lines.append("")
        lines += [f"{r.vehicle_id}: {r.evidence}" for r in flagged.head(10).itertuples()]
    lines += ["", SAFETY_NOTE]
    return "\n".join(lines)


def status_notes(df: pd.DataFrame) -> list[str]:
    """Per row: why the status is what it is (held, verifying, snoozed) and its label.

    The dashboard shows the same text. A store scored before models.stability
    existed has neither column: empty notes."""
    empty = pd.Series("", index=df.index, dtype=object)
    note, label = (df.get(c, empty).astype(object) for c in ("status_note", "label"))
    note, label = (s.where(s.notna(), "").astype(str) for s in (note, label))
    return [f"{n}; {lb}" if n and lb else n or lb for n, lb in zip(note, label)]


def format_changes(changes: RunChanges, fmt: str) -> str:
    """``csv``/``json``: CHANGE_COLUMNS; ``table``: a heading and one line per vehicle."""
    rows = changes.table[list(CHANGE_COLUMNS)].copy()
    rows[["from_score", "to_score"]] = rows[["from_score", "to_score"]].astype(float).round(4)
    if fmt == "csv":
        buf = io.StringIO()
        rows.to_csv(buf, index=False)
        return buf.getvalue().rstrip("\n")
    if fmt == "json":
        return json.dumps(json.loads(rows.to_json(orient="records")), indent=2, ensure_ascii=False)
    if fmt != "table":
        raise UserError(f"unknown format {fmt!r}; choose table, csv or json")
    lines = [changes.heading()]
    for r in rows.itertuples():
        what = f"{r.from_status} → {r.to_status}"
        if r.to_component != r.from_component and pd.notna(r.to_component) and pd.notna(r.from_component):
            what += f" ({r.from_component} → {r.to_component})"
        elif isinstance(r.to_component, str) and r.to_component != "none":
            what += f" ({r.to_component})"
        lines.append(f"  {r.change:<13} {r.vehicle_id:<12} {what}")
    return "\n".join(lines)


def vehicle_report(store: Store, vehicle_id: str, n_trips: int = 20) -> str:
    """One vehicle's status, trip history, score trend and implicated features."""
    status = store.read_table("vehicle_status").reindex(columns=list(VEHICLE_STATUS_COLUMNS))
    row = status[status["vehicle_id"] == vehicle_id]
    if row.empty:
        raise UserError(f"unknown vehicle {vehicle_id!r}: it has no scored trips (known: {len(status)} vehicles)")
    r = row.iloc[0]
    trips = store.read_table("trip_scores")
    trips = trips[trips["vehicle_id"] == vehicle_id].sort_values("start_time")
    bands = store.read_table("peer_bands") if store.has_table("peer_bands") else pd.DataFrame()
    lines = [f"vehicle {vehicle_id} ({r['platform']}, depot {r['depot'] if pd.notna(r['depot']) else 'n/a'}): "
             f"rank {int(r['rank'])}, status {r['status']}, score {r['score']:.3f}, as of {r['as_of']}",
             f"suspected component: {r['suspected_component']}"
             + (f", flagged since {r['flagged_since']}" if pd.notna(r["flagged_since"]) else "")]
    for note in status_notes(row):
        if note:
            lines.append(f"note: {note}")
    if r["evidence"]:
        lines.append(f"evidence: {r['evidence']}")
    if r["suggestion"]:
        lines.append(f"suggestion: {r['suggestion']}")
    if len(trips) >= 4:
        half = len(trips) // 2
        first, second = trips["score"].iloc[:half].median(), trips["score"].iloc[half:].median()
        lines.append(f"score trend: median {first:.3f} over the first {half} trips, {second:.3f} over the last "
                     f"{len(trips) - half} ({'rising' if second > first + 0.02 else 'falling' if second < first - 0.02 else 'steady'})")
    zcols = [c for c in trips.columns if c.startswith("z_")]
    recent = trips.tail(n_trips)
    if zcols and len(recent):
        med = recent[zcols].median().abs().sort_values(ascending=False).dropna().head(5)
        lines.append("implicated features (median |z| over the listed trips, peer band p05..p95):")
        group = recent["peer_group"].iloc[-1]
        for col, z in med.items():
            feat = col[2:]
            band = bands[(bands["peer_group"] == group) & (bands["feature"] == feat)] if len(bands) else bands
            btxt = f"  band {band['p05'].iloc[0]:.4g}..{band['p95'].iloc[0]:.4g}" if len(band) else ""
            lines.append(f"  {feat:<28} |z| {z:6.2f}{btxt}")
    lines.append(f"last {len(recent)} trips:")
    lines.append(f"  {'start (UTC)':<17} {'score':>6}  {'top feature':<28} {'z':>7}")
    for t in recent.itertuples():
        tz = f"{t.top_z:7.2f}" if np.isfinite(t.top_z) else "    n/a"
        lines.append(f"  {pd.Timestamp(t.start_time):%Y-%m-%d %H:%M} {t.score:6.3f}  {str(t.top_feature):<28} {tz}")
    lines.append(SAFETY_NOTE)
    return "\n".join(lines)
