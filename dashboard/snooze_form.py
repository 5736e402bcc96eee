"""The snooze control of the triage and vehicle pages (storage and rules: dashboard/snoozes.py)."""

from __future__ import annotations

import datetime as dt

import pandas as pd
import streamlit as st

from dashboard.snoozes import clear_snooze, read_snoozes, snooze_vehicle
from models.stability import SNOOZABLE
from tracktrue.errors import UserError
from tracktrue.store import Store

DEFAULT_SNOOZE_DAYS = 7


def snooze_section(store: Store, row: pd.Series, key: str) -> None:
    """One vehicle's snooze: what is stored, a form to set or replace it, a button to clear it."""
    vehicle = row["vehicle_id"]
    stored = read_snoozes(store)
    stored = stored.loc[stored["vehicle_id"] == vehicle]
    published_until = row.get("snoozed_until")
    if len(stored):
        s = stored.iloc[0]
        live = pd.notna(published_until) and pd.Timestamp(published_until).date() == s["until"]
        st.markdown(f"**Snoozed until {s['until']:%a %d %b %Y}**: {s['reason']} "
                    f"(when it was {s['snoozed_status']}"
                    + (f", {s['snoozed_component'].replace('_', ' ')}" if s["snoozed_component"] != "none" else "")
                    + ")." + ("" if live else " Takes effect at the next `tracktrue update`."))
        if st.button("Clear the snooze", key=f"{key}_clear"):
            clear_snooze(store, vehicle)
            st.session_state[f"{key}_note"] = f"Snooze of {vehicle} cleared; the next update shows its alert again."
            st.rerun()
    if row["status"] == "lamp_lit":
        st.caption("A vehicle with a lit ABS/ESC lamp needs service whatever its rank: it cannot be snoozed.")
        return
    if row["status"] not in (*SNOOZABLE, "snoozed"):
        st.caption("Only a vehicle with a watch or inspect alert can be snoozed.")
        return
    as_of = pd.Timestamp(row["as_of"]).date() if pd.notna(row.get("as_of")) else dt.date.today()
    with st.form(f"{key}_form", clear_on_submit=True):
        st.markdown("Put this vehicle's alert off until a date. It then ranks below the active alerts; a lit "
                    "lamp, a higher status or another suspected component cancels the snooze.")
        c1, c2 = st.columns([1, 2])
        until = c1.date_input("Snooze until", value=as_of + dt.timedelta(days=DEFAULT_SNOOZE_DAYS), min_value=as_of,
                              key=f"{key}_until")
        reason = c2.text_input("Reason", key=f"{key}_reason", placeholder="e.g. booked for its service on Friday")
        if st.form_submit_button("Snooze"):
            try:
                snooze_vehicle(store, vehicle, until, reason)
            except UserError as exc:
                st.error(str(exc))
            else:
                st.session_state[f"{key}_note"] = (f"{vehicle} snoozed until {until:%Y-%m-%d}; takes effect at the "
                                                   "next `tracktrue update`.")
                st.rerun()
    note = st.session_state.pop(f"{key}_note", None)
    if note:
        st.success(note)
