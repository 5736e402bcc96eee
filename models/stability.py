"""From the scorer's status to the status a manager sees: stable night after night.

``FleetScorer.rank`` judges each vehicle on its trips as of one date. A
manager reads that judgement every morning, so this post-step (run by
models.runner on rank's output) adds what one night cannot know:

* **Hysteresis.** Escalation (watch → inspect → lamp_lit) is shown at once.
  De-escalation waits until the scorer's status has been lower on
  ``deescalate_runs`` (3) consecutive runs that brought the vehicle new trips,
  and then steps down to the highest of those runs' statuses. Why 3: the
  scorer already holds an alert for 5 trips, and a vehicle drives about two
  trips a working day, so a status that held across three nights of driving
  is no longer the tail of one episode; a run without new trips for the
  vehicle is no new evidence and counts for nothing; a cleared alert leaves
  the list two nights later, which an inspection plan made weekly does not
  notice. ``insufficient_data`` never clears an alert and is never shown as ``ok``.
* **Verifying.** A repair, sensor replacement, tone ring replacement or
  calibration starts a new baseline for the vehicle (models.service), and
  the alert before it no longer counts: the vehicle is ``verifying`` until
  ``verify_trips`` qualifying trips (trips the scorer scored) started on or
  after the event's date. models.runner sets it to the larger of the scorer's
  ``baseline_trips`` (the trips its new drift baseline needs before drift is
  watched again) and ``vehicle_trips`` (the trips the vehicle score is the
  median of): 10 with the defaults. A fault that comes back (``inspect`` or
  ``lamp_lit`` after the event) is shown at once, with a note naming the repair.
* **No fault found.** An inspection with no fault found is kept as a label.
  While the vehicle's suspected component is the one inspected (the event's
  component, else the one the last run before the inspection suspected), it
  keeps its status but ranks below every vehicle of the same status without
  such a label: the evidence has not gone away (an intermittent fault can
  hide at an inspection), but a technician looked. A different component, a
  lit lamp or a repair after the inspection ends that.
* **Snoozes.** A snoozed ``watch`` or ``inspect`` vehicle shows as
  ``snoozed`` (with reason and expiry) and ranks below the active alerts,
  until the ranking's as-of date passes the snooze's ``until`` date. A lit
  lamp, a higher status than when it was snoozed, or a different suspected
  component cancels the snooze for good (checked on every run since the
  snooze was made). A ``lamp_lit`` vehicle is never snoozed.

Everything here is a pure function of published tables (status history,
service events, snoozes, trip scores); models.runner publishes the result.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass

import numpy as np
import pandas as pd

from models.attribution import suggestion_for
from models.ordering import ranked
from tracktrue.schema import ALERT_STATUSES, SNOOZE_COLUMNS, STATUS_HISTORY_COLUMNS

#: Alert levels; statuses not listed are not alerts.
LEVEL = {"watch": 1, "inspect": 2, "lamp_lit": 3}
#: Service event kinds after which a vehicle is verified (DESIGN.md, "Service events").
REPAIR_KINDS = frozenset({"repair", "sensor_replaced", "tone_ring_replaced", "calibration"})
NO_FAULT_FOUND = "no_fault_found"
RECURRING = ("inspect", "lamp_lit")
#: The statuses a snooze puts off (shown as ``snoozed``); ``tracktrue snooze`` refuses any other.
SNOOZABLE = frozenset({"watch", "inspect"})


@dataclass(frozen=True)
class StabilityRules:
    """How long a status holds (module doc gives the reasons for the defaults)."""

    verify_trips: int = 10
    deescalate_runs: int = 3


def empty_history() -> pd.DataFrame:
    return pd.DataFrame({c: pd.Series(dtype=object) for c in STATUS_HISTORY_COLUMNS})


def empty_snoozes() -> pd.DataFrame:
    return pd.DataFrame({c: pd.Series(dtype=object) for c in SNOOZE_COLUMNS})


def level(status) -> int:
    return LEVEL.get(status, 0)


def stabilise(raw: pd.DataFrame, trip_scores: pd.DataFrame, as_of: dt.date, history: pd.DataFrame | None = None,
              events: pd.DataFrame | None = None, snoozes: pd.DataFrame | None = None,
              rules: StabilityRules = StabilityRules()) -> pd.DataFrame:
    """The published ranking from the scorer's (``raw``, one row per vehicle).

    Adds ``raw_status``, ``held_status``, ``status_note``, ``label``,
    ``snoozed_until``, ``snooze_reason``; re-ranks (status, then unlabelled
    before no-fault-found, then score). ``history`` is the published
    status_history (runs as of an earlier date only are used), ``events`` the
    published service_events, ``snoozes`` the published snoozes.
    """
    as_of = pd.Timestamp(as_of).date()
    events = _events(events, as_of)
    repairs = events[events["kind"].isin(REPAIR_KINDS)].groupby("vehicle_id").tail(1).set_index("vehicle_id")
    repair_day = dict(zip(repairs.index, _day_text(repairs["date"])))
    # the alert before a repair no longer counts: hysteresis remembers only the runs that knew of
    # the vehicle's latest repair (a repair entered late also voids the runs before its entry)
    prior = _prior_runs(history, as_of)
    memory = prior[_day_text(prior["last_repair"]) == np.array([repair_day.get(v, "") for v in prior["vehicle_id"]], dtype=object)]
    prev_held = memory.groupby("vehicle_id")["held_status"].last()
    holding = raw.loc[[level(prev_held.get(v)) > 0 and not (s in LEVEL and level(s) >= level(prev_held.get(v)))
                       for v, s in zip(raw["vehicle_id"], raw["status"])], "vehicle_id"]
    memory_of = _by_vehicle(memory[memory["vehicle_id"].isin(holding)])
    scored = trip_scores.loc[np.isfinite(trip_scores["score"].to_numpy(dtype=float)), ["vehicle_id", "start_time"]]
    scored = scored[scored["vehicle_id"].isin(repairs.index)]
    trips_after = pd.to_datetime(scored["start_time"], utc=True) >= pd.to_datetime(
        scored["vehicle_id"].map(repairs["date"])).dt.tz_localize("UTC")
    n_after = trips_after.groupby(scored["vehicle_id"]).sum()
    # labels and snoozes look at the whole history of the few vehicles that have one
    nff_of = _by_vehicle(events[events["kind"] == NO_FAULT_FOUND])
    snooze_of = _by_vehicle(_active_snoozes(snoozes, as_of))
    runs_of = _by_vehicle(prior[prior["vehicle_id"].isin(set(nff_of) | set(snooze_of))])
    rows = []
    for r in raw.to_dict("records"):
        vid = r["vehicle_id"]
        repair = repairs.loc[vid].to_dict() if vid in repair_day else None
        r = {**r, "raw_status": r["status"], "held_status": r["status"], "status_note": "", "label": "",
             "snoozed_until": None, "snooze_reason": "", "_nff": False,
             "last_repair": repair["date"] if repair is not None else None}
        if vid in memory_of:
            _hold(r, memory_of[vid], rules)
        if repair is not None:
            _verify(r, repair, int(n_after.get(vid, 0)), rules)
        if vid in nff_of:
            _no_fault_found(r, nff_of[vid], repair, runs_of.get(vid, prior.iloc[0:0]))
        if vid in snooze_of:
            _snooze(r, snooze_of[vid], runs_of.get(vid, prior.iloc[0:0]))
        rows.append(r)
    return ranked(pd.DataFrame(rows), after_status=("_nff",)).drop(columns="_nff")


def history_rows(status: pd.DataFrame, run_id: str, created_at: pd.Timestamp, as_of: dt.date) -> pd.DataFrame:
    """This run's STATUS_HISTORY_COLUMNS rows from ``stabilise``'s output."""
    out = status.assign(run_id=run_id, created_at=created_at, as_of=as_of)
    out["flagged_since"] = pd.to_datetime(out["flagged_since"]).dt.date
    return out[list(STATUS_HISTORY_COLUMNS)].reset_index(drop=True)


# ---- the steps, each on one vehicle's row ---------------------------------------
def _hold(r: dict, runs: pd.DataFrame, rules: StabilityRules) -> None:
    """Hysteresis where the scorer's status is below the last run's held alert (module doc)."""
    raw = r["raw_status"]
    last = runs.iloc[-1]
    prev = last["held_status"]
    # raw is lower than the held alert (or there is too little data to say): count the
    # consecutive runs with new trips for this vehicle whose raw status was lower
    seq = pd.concat([runs[["raw_status", "last_trip"]],
                     pd.DataFrame([{"raw_status": raw, "last_trip": r["last_trip"]}])], ignore_index=True)
    seq = seq.assign(last_trip=pd.to_datetime(seq["last_trip"], utc=True)).drop_duplicates("last_trip", keep="last")
    lower = seq["raw_status"].map(lambda s: s in ("ok", *LEVEL) and level(s) < level(prev)).to_numpy()
    streak = len(lower) - (np.flatnonzero(~lower)[-1] + 1 if (~lower).any() else 0)
    if raw != "insufficient_data" and streak >= rules.deescalate_runs:
        tail = seq["raw_status"].iloc[-rules.deescalate_runs:]
        r["held_status"] = max(tail, key=level)
        if level(r["held_status"]) > 0 and level(raw) < level(r["held_status"]):
            _keep_alert(r, last)
        return
    r["held_status"] = prev
    _keep_alert(r, last)
    why = ("too few recent trips to clear it" if raw == "insufficient_data" else
           f"lower on {streak} of the {rules.deescalate_runs} consecutive runs with new trips needed to step down")
    r["status_note"] = f"held at {prev} (scorer: {raw}): {why}"
    r["status"] = prev


def _keep_alert(r: dict, last: pd.Series) -> None:
    """An alert held above the scorer's status keeps the last run's component and start."""
    if r["suspected_component"] == "none" and last["suspected_component"] != "none":
        r["suspected_component"] = last["suspected_component"]
        r["suggestion"] = suggestion_for(last["suspected_component"])
    if pd.isna(r.get("flagged_since")) and pd.notna(last["flagged_since"]):
        r["flagged_since"] = last["flagged_since"]
    r["status"] = r["held_status"]


def _verify(r: dict, repair: dict, n_after: int, rules: StabilityRules) -> None:
    what = f"{repair['kind'].replace('_', ' ')}{_of(repair['component'])} on {pd.Timestamp(repair['date']):%Y-%m-%d}"
    # without a trip since the repair the scorer can only repeat the alert from before it
    if r["held_status"] in RECURRING and n_after > 0:
        r["status_note"] = _join(f"flagged again after the {what}", r["status_note"])
        return
    if n_after >= rules.verify_trips:
        return
    r["status"] = "verifying"
    r["status_note"] = f"verifying after the {what}: {n_after} of {rules.verify_trips} trips since" + (
        f" (scorer: {r['raw_status']})" if r["raw_status"] not in ("ok", "insufficient_data") else "")


def _no_fault_found(r: dict, nff: pd.DataFrame, repair: dict | None, runs: pd.DataFrame) -> None:
    if repair is not None:
        nff = nff[nff["date"] >= repair["date"]]
    event = _latest(nff)
    if event is None:
        return
    component = event["component"] or ""
    if not component or "_" not in component or component.endswith("_axle"):
        before = runs[pd.to_datetime(runs["as_of"]) <= pd.Timestamp(event["date"])]
        component = before["suspected_component"].iloc[-1] if len(before) else r["suspected_component"]
    r["label"] = f"no fault found on {pd.Timestamp(event['date']):%Y-%m-%d}{_of(component)}"
    r["_nff"] = r["status"] in ("inspect", "watch") and r["suspected_component"] == component


def _snooze(r: dict, snooze: pd.DataFrame, runs: pd.DataFrame) -> None:
    if snooze.empty:
        return
    s = snooze.iloc[-1]
    since = runs[pd.to_datetime(runs["created_at"], utc=True) > pd.Timestamp(s["created_at"])]
    seen = pd.concat([since[["held_status", "suspected_component"]],
                      pd.DataFrame([{"held_status": r["held_status"], "suspected_component": r["suspected_component"]}])])
    why = _escalation(seen, s["snoozed_status"], s["snoozed_component"])
    until = pd.Timestamp(s["until"]).date()
    if why:
        r["status_note"] = _join(f"snooze until {until} cancelled: {why}", r["status_note"])
        return
    r["snoozed_until"], r["snooze_reason"] = until, s["reason"]
    if r["status"] in SNOOZABLE:
        r["status_note"] = _join(f"snoozed until {until} ({s['reason']}); underneath: {r['status']}",
                                 r["status_note"])
        r["status"] = "snoozed"


def _escalation(seen: pd.DataFrame, snoozed_status: str, snoozed_component: str) -> str:
    """Why a snooze no longer stands ('' when it does)."""
    if (seen["held_status"] == "lamp_lit").any():
        return "the warning lamp is lit"
    if (seen["held_status"].map(level) > level(snoozed_status)).any():
        return f"escalated above {snoozed_status}"
    alerting = seen[seen["held_status"].isin(ALERT_STATUSES)]
    other = alerting[~alerting["suspected_component"].isin(["none", snoozed_component])]
    if snoozed_component != "none" and len(other):
        return f"now points at {other['suspected_component'].iloc[-1]}"
    return ""


# ---- inputs -----------------------------------------------------------------------
def _prior_runs(history: pd.DataFrame | None, as_of: dt.date) -> pd.DataFrame:
    """The last run of each earlier as-of date, oldest first (a rescore replaces its date's run)."""
    if history is None or history.empty:
        return empty_history()
    h = history.copy()
    h["as_of"] = pd.to_datetime(h["as_of"]).dt.date
    h = h[h["as_of"] < as_of]
    h["created_at"] = pd.to_datetime(h["created_at"], utc=True)
    last_run = h.sort_values("created_at").groupby("as_of")["run_id"].last()
    return h[h["run_id"].isin(last_run)].sort_values(["as_of", "created_at"], kind="stable").reset_index(drop=True)


def _events(events: pd.DataFrame | None, as_of: dt.date) -> pd.DataFrame:
    if events is None or events.empty:
        return pd.DataFrame({c: pd.Series(dtype=object) for c in ("vehicle_id", "date", "kind", "component")})
    e = events.copy()
    e["date"] = pd.to_datetime(e["date"]).dt.date
    e["component"] = e["component"].fillna("") if "component" in e else ""
    return e[e["date"] <= as_of].sort_values("date", kind="stable")


def _active_snoozes(snoozes: pd.DataFrame | None, as_of: dt.date) -> pd.DataFrame:
    if snoozes is None or snoozes.empty:
        return empty_snoozes()
    s = snoozes.copy()
    s["created_at"] = pd.to_datetime(s["created_at"], utc=True)
    return s[pd.to_datetime(s["until"]).dt.date >= as_of].sort_values("created_at")


def _by_vehicle(frame: pd.DataFrame) -> dict[str, pd.DataFrame]:
    return {str(v): g for v, g in frame.groupby("vehicle_id", sort=False)} if len(frame) else {}


def _day_text(days) -> np.ndarray:
    """Dates as YYYY-MM-DD text, '' for none (to compare columns that may hold None or NaT)."""
    return pd.to_datetime(pd.Series(days, dtype=object)).dt.strftime("%Y-%m-%d").fillna("").to_numpy(dtype=object)


def _latest(events: pd.DataFrame) -> dict | None:
    return events.iloc[-1].to_dict() if len(events) else None


def _of(component: str | None) -> str:
    return f" ({component.replace('_', ' ')})" if component and component != "none" else ""


def _join(first: str, rest: str) -> str:
    return f"{first}; {rest}" if rest else first
