"""Lamp semantics: an event is a lamp across key cycles or with a trouble code."""

from __future__ import annotations

import pandas as pd

from models.lamps import lamp_events


def _trips(states):
    t0 = pd.Timestamp("2026-03-02", tz="UTC")
    trips = pd.DataFrame({"vehicle_id": "V1", "trip_id": [f"t{i}" for i in range(len(states))],
                          "start_time": [t0 + pd.Timedelta(hours=4 * i) for i in range(len(states))]})
    lamps = pd.DataFrame({"trip_id": trips["trip_id"], "lamp_abs_on": [s[0] for s in states],
                          "lamp_esc_on": [s[1] for s in states], "dtc": [s[2] for s in states]})
    return lamp_events(trips, lamps)


def test_esc_flash_in_one_trip_without_code_is_an_intervention_not_an_event():
    ev = _trips([(False, False, ""), (False, True, ""), (False, False, "")])
    assert ev["lamp_on"].tolist() == [False, True, False]
    assert not ev["lamp_event"].any()


def test_lamp_lit_across_two_key_cycles_is_an_event_from_the_second_trip():
    ev = _trips([(False, False, ""), (True, False, ""), (True, False, "")])
    assert ev["lamp_event"].tolist() == [False, False, True]


def test_lamp_with_a_trouble_code_is_an_event_at_once():
    ev = _trips([(False, False, ""), (False, True, "TT-Y01")])
    assert ev["lamp_event"].tolist() == [False, True]
