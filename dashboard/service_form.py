"""The vehicle record's service events: what is published, what waits for the next update, the entry
form, and deleting a mistyped entry (after a confirmation)."""

from __future__ import annotations

import datetime as dt

import pandas as pd
import streamlit as st

from dashboard.service_entries import add_service_entry, delete_service_entry, read_service_entries
from dashboard.tables import Missing, query
from dashboard.wording import component_label
from tracktrue.schema import COMPONENTS, SERVICE_EVENT_AREAS, SERVICE_EVENT_KINDS
from tracktrue.store import Store

EVENT_COMPONENTS = ("", *(c for c in COMPONENTS if c != "none"), *SERVICE_EVENT_AREAS)
KEY = ["date", "kind", "component"]


def service_event_section(store: Store, vehicle: str) -> None:
    """A form to add an event, then the published events and the entries not yet published."""
    today = dt.datetime.now(dt.timezone.utc).date()
    with st.form("service_event_form", clear_on_submit=True):
        st.markdown("Record a service event (repair, tyre work, alignment, calibration). The next "
                    "`tracktrue update` publishes it; scoring then restarts the baselines it touches.")
        c1, c2, c3 = st.columns(3)
        date = c1.date_input("Date", value=today, max_value=today, key="service_date")
        kind = c2.selectbox("Kind", SERVICE_EVENT_KINDS, key="service_kind",
                            format_func=lambda k: k.replace("_", " "))
        component = c3.selectbox("Component", EVENT_COMPONENTS, key="service_component",
                                 format_func=lambda c: component_label(c) or "whole vehicle")
        note = st.text_input("Note", key="service_note")
        if st.form_submit_button("Record service event"):
            add_service_entry(store, vehicle, date, kind, component, note)
            st.success(f"Recorded {kind.replace('_', ' ')} on {date:%Y-%m-%d} for {vehicle}.")
    published = query(store, "SELECT date, kind, component, note, source FROM {service_events} "
                             "WHERE vehicle_id = ? ORDER BY date", [vehicle])
    published = (pd.DataFrame(columns=[*KEY, "note", "source"]) if isinstance(published, Missing)
                 else published.assign(date=lambda f: f["date"].astype(str)))
    entries = read_service_entries(store)
    entries = entries.loc[entries["vehicle_id"] == vehicle]
    waiting = entries[[*KEY, "note"]].merge(published[KEY], on=KEY, how="left", indicator=True)
    waiting = waiting.loc[waiting["_merge"] == "left_only"].drop(columns="_merge").assign(
        source="dashboard (waiting for the next `tracktrue update`)")
    shown = pd.concat([published, waiting], ignore_index=True)
    if shown.empty:
        st.caption("No service event recorded for this vehicle.")
    else:
        st.dataframe(shown.assign(component=shown["component"].map(component_label)), hide_index=True,
                     width="stretch", key="vehicle_service_events")
    if len(entries):
        _delete_entry(store, entries)


def _delete_entry(store: Store, entries: pd.DataFrame) -> None:
    """Pick one of the vehicle's dashboard entries, delete it after a second click that confirms."""
    labels = {int(r.entry_id): f"{r.date} {r.kind.replace('_', ' ')} {component_label(r.component)}".strip()
              + (f" ({r.note})" if r.note else "") for r in entries.itertuples()}
    c1, c2 = st.columns([3, 1], vertical_alignment="bottom")
    picked = c1.selectbox("Entry made here", list(labels), format_func=labels.get, key="service_delete_pick",
                          help="Entries made in the dashboard can be deleted; imported events are changed "
                          "in their CSV file.")
    if c2.button("Delete entry", key="service_delete"):
        st.session_state["service_delete_pending"] = picked
    pending = st.session_state.get("service_delete_pending")
    if pending not in labels:
        return
    st.warning(f"Delete the entry {labels[pending]}? The next `tracktrue update` removes it from the "
               "published service events, and scoring forgets the baseline restart it caused.")
    y, n = st.columns(2)
    if y.button("Yes, delete it", key="service_delete_confirm", type="primary"):
        delete_service_entry(store, pending)
        del st.session_state["service_delete_pending"]
        st.rerun()
    if n.button("Keep it", key="service_delete_cancel"):
        del st.session_state["service_delete_pending"]
        st.rerun()
