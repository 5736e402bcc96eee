"""What changed between two scoring runs, from the published ``status_history``.

``tracktrue rank --changes`` and the dashboard's triage page both read this.
A change compares the *published* statuses (what the manager saw each
morning), so a hysteresis hold is no change and a snooze is one:

* ``new``: not an alert before (or not ranked), an alert now;
* ``escalated`` / ``de-escalated``: an alert both times, higher / lower now
  (lamp_lit > inspect > watch);
* ``cleared``: an alert before, not now (ok, verifying, snoozed, too few trips);
* ``component``: the same alert pointing at another component;
* ``other``: any other change of status (e.g. verifying → ok: a repair confirmed).
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass

import pandas as pd

from models.stability import level
from tracktrue.errors import UserError

CHANGE_COLUMNS = ("vehicle_id", "change", "from_status", "to_status", "from_component", "to_component",
                  "from_score", "to_score")
CHANGE_KINDS = ("new", "escalated", "de-escalated", "cleared", "component", "other")
NOT_RANKED = "not ranked"


@dataclass(frozen=True)
class RunChanges:
    """The changes from the ``baseline`` run to the ``latest`` (each: run_id, as_of, created_at)."""

    latest: dict
    baseline: dict | None
    table: pd.DataFrame

    def heading(self) -> str:
        if self.baseline is None:
            return f"run {self.latest['run_id']} (as of {self.latest['as_of']}) is the first run: nothing to compare with"
        return (f"changes from run {self.baseline['run_id']} (as of {self.baseline['as_of']}, "
                f"{_stamp(self.baseline['created_at'])}) to run {self.latest['run_id']} "
                f"(as of {self.latest['as_of']}, {_stamp(self.latest['created_at'])}): {len(self.table)} vehicle(s)")


def run_changes(history: pd.DataFrame, since: dt.date | None = None) -> RunChanges:
    """Changes between the last run and the run before it, or the last run as of a day before ``since``."""
    if history is None or history.empty:
        raise UserError("no status history yet: run `tracktrue update` (or `tracktrue score`) first", exit_code=4)
    h = history.copy()
    h["created_at"] = pd.to_datetime(h["created_at"], utc=True)
    h["as_of"] = pd.to_datetime(h["as_of"]).dt.date
    runs = h.drop_duplicates("run_id").sort_values("created_at", kind="stable")[["run_id", "as_of", "created_at"]]
    latest = runs.iloc[-1].to_dict()
    earlier = runs.iloc[:-1]
    if since is not None:
        earlier = earlier[earlier["as_of"] < since]
        if earlier.empty:
            raise UserError(f"no run as of a day before {since}: the oldest run is as of {runs['as_of'].min()}",
                            exit_code=4)
    baseline = earlier.iloc[-1].to_dict() if len(earlier) else None
    now = h[h["run_id"] == latest["run_id"]]
    before = h[h["run_id"] == baseline["run_id"]] if baseline else h.iloc[0:0]
    return RunChanges(latest, baseline, compare(before, now) if baseline else _empty())


def compare(before: pd.DataFrame, now: pd.DataFrame) -> pd.DataFrame:
    """CHANGE_COLUMNS for every vehicle whose status (or alert component) differs, by kind then vehicle."""
    cols = ["vehicle_id", "status", "suspected_component", "score"]
    both = before[cols].merge(now[cols], on="vehicle_id", how="outer", suffixes=("_from", "_to"))
    both[["status_from", "status_to"]] = both[["status_from", "status_to"]].fillna(NOT_RANKED)
    both["change"] = [_kind(a, b, ca, cb) for a, b, ca, cb in
                      both[["status_from", "status_to", "suspected_component_from", "suspected_component_to"]]
                      .itertuples(index=False)]
    out = both.dropna(subset=["change"]).rename(columns={
        "status_from": "from_status", "status_to": "to_status", "suspected_component_from": "from_component",
        "suspected_component_to": "to_component", "score_from": "from_score", "score_to": "to_score"})
    out["_k"] = out["change"].map(CHANGE_KINDS.index)
    return out.sort_values(["_k", "vehicle_id"])[list(CHANGE_COLUMNS)].reset_index(drop=True)


def _kind(a: str, b: str, ca, cb) -> str | None:
    la, lb = level(a), level(b)
    if la and lb:
        if lb > la:
            return "escalated"
        if lb < la:
            return "de-escalated"
        return "component" if ca != cb else None
    if lb:
        return "new"
    if la:
        return "cleared"
    return "other" if a != b else None


def _empty() -> pd.DataFrame:
    return pd.DataFrame({c: pd.Series(dtype=object) for c in CHANGE_COLUMNS})


def _stamp(ts) -> str:
    return f"{pd.Timestamp(ts):%Y-%m-%d %H:%M} UTC"
