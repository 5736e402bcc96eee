"""Lamp semantics (DESIGN.md, "What the lamp means"): an event is a lamp across key cycles
or a trouble code; stability interventions and ESC-off are recorded, never events."""

from __future__ import annotations

import pandas as pd
import pytest

from models.lamps import lamp_events
from models.runner import score_fleet
from test_models_fixtures import make_trip_features
from tracktrue.store import Store


def _trips(states, at_start=None):
    t0 = pd.Timestamp("2026-03-02", tz="UTC")
    trips = pd.DataFrame({"vehicle_id": "V1", "trip_id": [f"t{i}" for i in range(len(states))],
                          "start_time": [t0 + pd.Timedelta(hours=4 * i) for i in range(len(states))]})
    lamps = pd.DataFrame({"trip_id": trips["trip_id"], "lamp_abs_on": [s[0] for s in states],
                          "lamp_esc_on": [s[1] for s in states], "dtc": [s[2] for s in states]})
    if at_start is not None:
        lamps["lamp_at_start"] = at_start
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


def test_esc_off_episodes_and_interventions_between_normal_trips_are_never_events():
    # flash (intervention), normal, ESC switched off for one key cycle, normal, flash again
    # (lamp behaviour: DESIGN.md, "What the lamp means"; common practice)
    ev = _trips([(False, True, ""), (False, False, ""), (False, True, ""), (False, False, ""), (False, True, "")])
    assert ev["lamp_on"].sum() == 3
    assert not ev["lamp_event"].any()


def test_stored_intermittent_code_is_an_event_even_after_the_lamp_went_out():
    # the lamp comes on with a code, goes out at the next key cycle, the code stays stored
    ev = _trips([(False, False, ""), (True, False, "TT-W31"), (False, False, "TT-W31"), (False, False, "")])
    assert ev["lamp_event"].tolist() == [False, True, True, False]


@pytest.fixture(scope="module")
def lamp_fleet(tmp_path_factory):
    """A healthy fleet where one van flashes its ESC lamp on many trips (slippery days, ESC-off)
    and another had one intermittent episode: lamp and code on one trip, lamp out since."""
    tf = make_trip_features(n_vehicles=12, days=20, seed=11, low_rate_vehicles=0)
    flashy = tf.index[tf["vehicle_id"].eq("V001")][::3]
    tf.loc[flashy, "lamp_esc_on"] = True
    episode = tf.index[tf["vehicle_id"].eq("V002")]
    tf.loc[episode[len(episode) // 2], ["lamp_abs_on", "dtc"]] = [True, "TT-W31"]
    store = Store.open(tmp_path_factory.mktemp("lamps"))
    store.publish_table("trip_features", tf)
    return score_fleet(store, None).status.set_index("vehicle_id")


def test_a_vehicle_that_only_flashes_its_esc_lamp_is_not_lamp_lit(lamp_fleet):
    assert lamp_fleet.at["V001", "status"] != "lamp_lit"


def test_an_intermittent_code_keeps_the_vehicle_lamp_lit_after_the_lamp_went_out(lamp_fleet):
    row = lamp_fleet.loc["V002"]
    assert row["status"] == "lamp_lit"
    assert "TT-W31 stored" in row["evidence"] and "lamp out" in row["evidence"]


def test_interventions_on_consecutive_slippery_trips_are_no_event_a_lamp_relit_at_key_on_is():
    # the ESC lamp flashes mid-trip on three trips in a row (never lit at a trip's first sample)
    flashes = _trips([(False, True, "")] * 3, at_start=[False, False, False])
    assert not flashes["lamp_event"].any()
    # a warning lamp is relit at key-on (common practice, from memory): lit from the first sample
    # of the trip after a lit trip
    fault = _trips([(False, False, ""), (True, True, ""), (True, True, "")], at_start=[False, False, True])
    assert fault["lamp_event"].tolist() == [False, False, True]
