"""Fleet triage: the published ranking, filters, picking vehicles for the workshop plan, snoozing one,
and what changed since the previous run."""

import pandas as pd
import streamlit as st

from dashboard import planner, workshop
from dashboard.changes_view import changes_section
from dashboard.common import PICKED_VEHICLE, current_store, safety_caution, table_or_note
from dashboard.snooze_form import snooze_section
from dashboard.wording import STATUS_LABELS, component_label
from models.ranking import status_notes
from tracktrue.schema import STATUSES

RANKING_SQL = "SELECT * FROM {vehicle_status} ORDER BY rank"
FILTERS = (("status", "Status"), ("platform", "Platform"), ("depot", "Depot"),
           ("suspected_component", "Suspected component"))

store = current_store()
st.title("Fleet triage")
st.caption("Vehicles ordered by how strongly their chassis sensors disagree with each other and with the fleet.")
safety_caution()

note = st.session_state.pop("triage_note", None)
if note and note[1] == "ok":
    st.success(note[0])
elif note:
    st.warning(note[0])

ranking = table_or_note(store, RANKING_SQL)
if ranking is not None:
    counts = ranking["status"].value_counts()
    for col, status in zip(st.columns(len(STATUSES)), STATUSES):
        col.metric(STATUS_LABELS[status], int(counts.get(status, 0)))
    lit = ranking.loc[ranking["lamp_on"].fillna(False).astype(bool), "vehicle_id"].tolist()
    if lit:
        st.error(f"ABS/ESC lamp lit on {len(lit)} vehicle(s): {', '.join(lit[:12])}"
                 f"{' …' if len(lit) > 12 else ''}. They need service whatever their rank.",
                 icon=":material/warning:")
    if ranking["as_of"].notna().any():
        st.caption(f"Scored as of {pd.Timestamp(ranking['as_of'].max()):%Y-%m-%d %H:%M}.")

    shown = ranking
    for col, (column, label) in zip(st.columns(len(FILTERS)), FILTERS):
        values = shown[column].fillna("").astype(str)
        options = sorted(set(ranking[column].fillna("").astype(str)))
        fmt = (lambda s: STATUS_LABELS.get(s, s)) if column == "status" else (lambda s: s or "—")
        chosen = col.multiselect(label, options, key=f"filter_{column}", format_func=fmt,
                                 placeholder="all")
        if chosen:
            shown = shown.loc[values.isin(chosen)]

    plan = workshop.open_plan(store)
    planned = dict(zip(plan["vehicle_id"], plan["planned_date"]))
    view = pd.DataFrame({
        "Rank": shown["rank"],
        "Vehicle": shown["vehicle_id"],
        "Platform": shown["platform"],
        "Depot": shown["depot"].fillna("—"),
        "Status": shown["status"].map(STATUS_LABELS),
        "Suspected component": shown["suspected_component"].map(component_label),
        "Note": status_notes(shown),
        "Evidence": shown["evidence"],
        "Flagged since": pd.to_datetime(shown["flagged_since"]).dt.strftime("%Y-%m-%d").fillna(""),
        "Last trip": shown["last_trip"],
        "Score": shown["score"],
        "Planned for": shown["vehicle_id"].map(planned),
    }).reset_index(drop=True)
    st.caption(f"{len(view)} of {len(ranking)} vehicles shown. Tick rows to plan them or open one.")
    event = st.dataframe(
        view, key="triage_table", on_select="rerun", selection_mode="multi-row", hide_index=True,
        width="stretch", height=min(36 * (len(view) + 1) + 4, 600),
        column_config={
            "Rank": st.column_config.NumberColumn(width="small"),
            "Score": st.column_config.NumberColumn(format="%.2f", width="small"),
            "Last trip": st.column_config.DatetimeColumn(format="YYYY-MM-DD HH:mm"),
            "Planned for": st.column_config.DateColumn(format="ddd YYYY-MM-DD"),
            "Evidence": st.column_config.TextColumn(width="large"),
            "Note": st.column_config.TextColumn(width="medium"),
        })
    picked = shown.iloc[event.selection.rows] if event.selection.rows else shown.iloc[0:0]

    left, right = st.columns(2)
    if left.button(f"Add {len(picked)} ticked to the workshop plan", key="add_to_plan",
                   disabled=picked.empty, type="primary"):
        booked, unplaced = planner.add_vehicles(store, picked[["vehicle_id", "depot", "rank", "status"]],
                                                st.session_state.get("plan_start") or planner.default_start())
        already = len(picked) - len(booked) - len(unplaced)
        text = f"Planned {len(booked)} vehicle(s)." + (f" {already} already on the plan." if already else "")
        if unplaced:
            text += f" No free workshop day within a year for {', '.join(unplaced)}: check the depot's capacity."
        st.session_state["triage_note"] = (text, "warn" if unplaced else "ok")
        st.rerun()
    if right.button("Open vehicle record", key="open_vehicle", disabled=len(picked) != 1):
        st.session_state[PICKED_VEHICLE] = picked["vehicle_id"].iloc[0]
        st.switch_page("views/vehicle.py")
    if len(picked) == 1:
        with st.expander(f"Snooze {picked['vehicle_id'].iloc[0]}", icon=":material/snooze:"):
            snooze_section(store, picked.iloc[0], key="triage_snooze")
    else:
        st.caption("Tick one vehicle to snooze it.")

changes_section(store)
