"""models.stability: statuses that hold night after night, verifying after repairs, labels, snoozes.

Each test plays a sequence of nightly runs: the scorer's status per vehicle
(invented, to drive the rules; never a check value) goes through
``stabilise`` and the run is appended to the status history, as
models.runner does.
"""

import datetime as dt

import pandas as pd
import pytest

from models.stability import StabilityRules, empty_history, history_rows, stabilise
from tracktrue.schema import STATUSES

DAY0 = dt.date(2026, 3, 2)
RULES = StabilityRules(verify_trips=10, deescalate_runs=3)


class Nights:
    """A fleet's nightly runs: each vehicle drives two trips a day unless told otherwise."""

    def __init__(self, vehicles):
        self.vehicles = list(vehicles)
        self.history = empty_history()
        self.trips = pd.DataFrame({"vehicle_id": pd.Series(dtype=object),
                                   "start_time": pd.Series(dtype="datetime64[ns, UTC]"), "score": []})
        self.events = pd.DataFrame(columns=["vehicle_id", "date", "kind", "component", "note", "source"])
        self.snoozes = None
        self.day = -1
        self.out = None

    def event(self, vid, day, kind, component=""):
        row = {"vehicle_id": vid, "date": DAY0 + dt.timedelta(days=day), "kind": kind, "component": component,
               "note": "", "source": "test"}
        self.events = pd.concat([self.events, pd.DataFrame([row])], ignore_index=True)

    def snooze(self, vid, until_day, status, component, reason="parts on order"):
        made = pd.Timestamp(DAY0 + dt.timedelta(days=self.day), tz="UTC") + pd.Timedelta(hours=12)
        self.snoozes = pd.DataFrame([{"vehicle_id": vid, "until": DAY0 + dt.timedelta(days=until_day), "reason": reason,
                                      "snoozed_status": status, "snoozed_component": component, "created_at": made}])

    def night(self, raw: dict, components: dict | None = None, idle=(), scores: dict | None = None) -> pd.DataFrame:
        """One run; ``raw`` maps vehicle → the scorer's status (default ok)."""
        self.day += 1
        as_of = DAY0 + dt.timedelta(days=self.day)
        for vid in self.vehicles:
            if vid not in idle:
                start = pd.Timestamp(as_of, tz="UTC") + pd.to_timedelta([8, 14], unit="h")
                self.trips = pd.concat([self.trips, pd.DataFrame({"vehicle_id": vid, "start_time": start,
                                                                  "score": 0.5})], ignore_index=True)
        components = components or {}
        rows = []
        for vid in self.vehicles:
            status = raw.get(vid, "ok")
            component = components.get(vid, "wheel_sensor_fl" if status in ("watch", "inspect", "lamp_lit") else "none")
            mine = self.trips[self.trips["vehicle_id"] == vid]
            rows.append({"vehicle_id": vid, "platform": "van", "status": status, "suspected_component": component,
                         "score": (scores or {}).get(vid, 0.5), "evidence": "", "suggestion": "",
                         "flagged_since": as_of if status != "ok" else None,
                         "last_trip": mine["start_time"].max(), "rank": 0})
        self.out = stabilise(pd.DataFrame(rows), self.trips, as_of, history=self.history, events=self.events,
                             snoozes=self.snoozes, rules=RULES)
        created = pd.Timestamp(as_of, tz="UTC") + pd.Timedelta(hours=26)  # the run after midnight
        self.history = pd.concat([self.history, history_rows(self.out, f"run{self.day}", created, as_of)],
                                 ignore_index=True)
        return self.out

    def status(self, vid) -> str:
        return self.out.set_index("vehicle_id").at[vid, "status"]

    def note(self, vid) -> str:
        return self.out.set_index("vehicle_id").at[vid, "status_note"]


def test_a_vehicle_hovering_at_the_threshold_does_not_flip_every_night():
    n = Nights(["V1"])
    shown, notes = [], []
    for k in range(21):  # watch, ok, watch, ..., watch
        shown.append(n.night({"V1": "watch" if k % 2 == 0 else "ok"}).iloc[0]["status"])
        notes.append(n.note("V1"))
    assert shown == ["watch"] * 21
    assert "held at watch (scorer: ok): lower on 1 of the 3 consecutive runs" in notes[-2]
    # three nights lower in a row with new trips: it steps down on the third
    assert [n.night({}).iloc[0]["status"] for _ in range(3)] == ["watch", "watch", "ok"]


def test_escalation_is_shown_the_same_night():
    n = Nights(["V1"])
    n.night({"V1": "watch"})
    assert n.night({"V1": "inspect"}).iloc[0]["status"] == "inspect"
    assert n.night({"V1": "lamp_lit"}).iloc[0]["status"] == "lamp_lit"


def test_de_escalation_steps_down_to_the_highest_status_of_the_lower_nights():
    n = Nights(["V1"])
    n.night({"V1": "inspect"})
    shown = [n.night({"V1": s}).iloc[0]["status"] for s in ("watch", "ok", "watch", "ok", "ok", "ok")]
    assert shown == ["inspect", "inspect", "watch", "watch", "watch", "ok"]


def test_a_held_alert_keeps_its_component_and_start_while_the_scorer_sees_nothing():
    n = Nights(["V1"])
    n.night({"V1": "inspect"}, components={"V1": "yaw_sensor"})
    row = n.night({}).iloc[0]
    assert (row["status"], row["suspected_component"], row["flagged_since"]) == ("inspect", "yaw_sensor", DAY0)
    assert row["suggestion"]  # what to check, for the held component


def test_a_night_without_new_trips_is_no_evidence_for_stepping_down():
    n = Nights(["V1"])
    n.night({"V1": "inspect"})
    n.night({})
    shown = [n.night({}, idle=["V1"]).iloc[0]["status"] for _ in range(4)]
    assert shown == ["inspect"] * 4
    assert [n.night({}).iloc[0]["status"] for _ in range(2)] == ["inspect", "ok"]


def test_insufficient_data_is_never_shown_as_ok_and_never_clears_an_alert():
    n = Nights(["NEW", "OLD"])
    n.night({"NEW": "insufficient_data", "OLD": "inspect"})
    assert n.status("NEW") == "insufficient_data"
    for _ in range(6):
        n.night({"NEW": "insufficient_data", "OLD": "insufficient_data"})
        assert n.status("NEW") == "insufficient_data" and n.status("OLD") == "inspect"
    assert "too few recent trips to clear it" in n.note("OLD")


def test_a_repair_clears_the_alert_the_vehicle_verifies_and_a_healthy_run_of_trips_returns_it_to_normal():
    n = Nights(["V1", "V2"])
    for _ in range(5):
        n.night({"V1": "inspect"})
    n.event("V1", day=5, kind="sensor_replaced", component="wheel_sensor_fl")
    # the scorer's new baseline has too few trips at first, then finds nothing
    shown, notes = [], []
    for k in range(6):
        n.night({"V1": "insufficient_data" if k < 2 else "ok"})
        shown.append(n.status("V1"))
        notes.append(n.note("V1"))
    # two trips a day from the event's day: 10 trips on the 5th night after it
    assert shown == ["verifying"] * 4 + ["ok", "ok"]
    assert notes[0] == "verifying after the sensor replaced (wheel sensor fl) on 2026-03-07: 2 of 10 trips since"
    assert STATUSES.index("verifying") > STATUSES.index("watch")


def test_the_same_fault_coming_back_after_a_repair_is_flagged_again():
    n = Nights(["V1"])
    n.night({"V1": "inspect"})
    n.event("V1", day=1, kind="tone_ring_replaced", component="wheel_sensor_fl")
    assert n.night({"V1": "insufficient_data"}).iloc[0]["status"] == "verifying"
    assert n.night({"V1": "watch"}).iloc[0]["status"] == "verifying"
    row = n.night({"V1": "inspect"}).iloc[0]
    assert row["status"] == "inspect"
    assert row["status_note"].startswith("flagged again after the tone ring replaced (wheel sensor fl) on 2026-03-03")


def test_a_repaired_vehicle_without_a_trip_since_verifies_even_if_the_scorer_still_repeats_the_alert():
    # the morning after a repair on a day the vehicle stood idle, the scorer has only the trips
    # from before it: its alert is old news, not the fault coming back
    n = Nights(["V1"])
    n.night({"V1": "inspect"})
    n.event("V1", day=2, kind="sensor_replaced", component="wheel_sensor_fl")
    n.night({"V1": "inspect"})
    row = n.night({"V1": "inspect"}, idle=("V1",)).iloc[0]
    assert row["status"] == "verifying"
    assert row["status_note"].startswith("verifying after the sensor replaced (wheel sensor fl) on 2026-03-04: 0 of 10")
    row = n.night({"V1": "inspect"}).iloc[0]  # its next trips still show the fault
    assert row["status"] == "inspect" and row["status_note"].startswith("flagged again after the sensor replaced")


def test_a_repair_entered_late_voids_the_runs_that_did_not_know_of_it():
    n = Nights(["V1"])
    for _ in range(4):
        n.night({"V1": "inspect"})  # runs on days 0..3 held inspect
    n.event("V1", day=2, kind="repair")  # repaired on day 2, entered after day 3's run
    assert n.night({"V1": "ok"}).iloc[0]["status"] == "verifying"


def test_a_tyre_change_or_an_alignment_needs_no_verification():
    n = Nights(["V1"])
    n.night({"V1": "watch"})
    n.event("V1", day=1, kind="tyre_change", component="tyres")
    n.event("V1", day=1, kind="wheel_alignment", component="front_axle")
    assert n.night({"V1": "ok"}).iloc[0]["status"] == "watch"  # held, not verifying


def test_no_fault_found_keeps_the_status_ranks_below_the_other_inspections_and_stays_a_label():
    n = Nights(["A", "B", "C"])
    n.night({"A": "inspect", "B": "inspect", "C": "watch"}, scores={"A": 0.9, "B": 0.6})
    n.event("A", day=1, kind="no_fault_found")
    out = n.night({"A": "inspect", "B": "inspect", "C": "watch"}, scores={"A": 0.9, "B": 0.6})
    assert out["vehicle_id"].tolist() == ["B", "A", "C"]
    assert out.set_index("vehicle_id").at["A", "status"] == "inspect"
    assert out.set_index("vehicle_id").at["A", "label"] == "no fault found on 2026-03-03 (wheel sensor fl)"
    # another component is another alert: it ranks by its score again, the label stays
    out = n.night({"A": "inspect", "B": "inspect"}, components={"A": "yaw_sensor"}, scores={"A": 0.9, "B": 0.6})
    assert out["vehicle_id"].tolist()[:2] == ["A", "B"]
    assert out.set_index("vehicle_id").at["A", "label"].startswith("no fault found on 2026-03-03")


def test_a_snoozed_vehicle_shows_snoozed_below_active_alerts_and_returns_when_the_snooze_expires():
    n = Nights(["A", "B"])
    n.night({"A": "watch", "B": "watch"}, scores={"A": 0.9, "B": 0.5})
    n.snooze("A", until_day=3, status="watch", component="wheel_sensor_fl")
    shown = []
    for _ in range(4):
        out = n.night({"A": "watch", "B": "watch"}, scores={"A": 0.9, "B": 0.5})
        shown.append((out["vehicle_id"].tolist(), n.status("A")))
    assert shown[:3] == [(["B", "A"], "snoozed")] * 3
    row = n.out.set_index("vehicle_id").loc["A"]
    assert shown[3] == (["A", "B"], "watch")  # day 4 is past the snooze's last day
    assert pd.isna(row["snoozed_until"])


@pytest.mark.parametrize("raw, component, why", [
    ("inspect", "wheel_sensor_fl", "escalated above watch"),
    ("lamp_lit", "wheel_sensor_fl", "the warning lamp is lit"),
    ("watch", "yaw_sensor", "now points at yaw_sensor"),
])
def test_an_escalation_cancels_a_snooze_for_good(raw, component, why):
    n = Nights(["A"])
    n.night({"A": "watch"})
    n.snooze("A", until_day=20, status="watch", component="wheel_sensor_fl")
    assert n.night({"A": "watch"}).iloc[0]["status"] == "snoozed"
    assert n.night({"A": raw}, components={"A": component}).iloc[0]["status"] == raw
    assert f"cancelled: {why}" in n.note("A")
    # back where it was when snoozed: the snooze does not come back
    for _ in range(4):
        n.night({"A": "watch"})
    assert n.status("A") != "snoozed" and "cancelled" in n.note("A")


def test_a_rescore_of_the_same_day_replaces_that_days_run_in_the_memory():
    n = Nights(["V1"])
    n.night({"V1": "inspect"})
    for _ in range(2):
        n.night({})
    # rescore day 2 twice more (a dashboard entry, a rerun): still only two lower nights
    for _ in range(2):
        n.day -= 1
        n.trips = n.trips.iloc[:-2]
        n.night({})
    assert n.status("V1") == "inspect"
    assert n.night({}).iloc[0]["status"] == "ok"
