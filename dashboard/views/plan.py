"""Workshop plan: proposed inspection dates, moving them, exports, and recording outcomes."""

import datetime as dt

import pandas as pd
import streamlit as st

from dashboard import planner, workshop
from dashboard.common import current_store, safety_caution
from dashboard.scheduling import move_problem
from dashboard.tables import Missing, query
from dashboard.wording import OUTCOME_LABELS, STATUS_LABELS, component_label
from tracktrue.schema import COMPONENTS

STATUS_SQL = ("SELECT vehicle_id, rank, platform, depot, status, suspected_component, suggestion, evidence "
              "FROM {vehicle_status} ORDER BY rank")

store = current_store()
st.title("Workshop plan")
safety_caution()

note = st.session_state.pop("plan_note", None)
if note:
    st.info(note)

status = query(store, STATUS_SQL)
if isinstance(status, Missing):
    st.info(status.message + " Until then, vehicles cannot be added to the plan.")
    status = pd.DataFrame(columns=["vehicle_id", "rank", "platform", "depot", "status",
                                   "suspected_component", "suggestion", "evidence"])

# ---- capacity and start ----------------------------------------------------
with st.expander("Workshop capacity and plan start", icon=":material/tune:"):
    st.date_input("Plan from", key="plan_start", value=planner.default_start(),
                  help="Proposals start on the first working day (Mon–Fri) on or after this date.")
    saved = workshop.capacities(store)
    depots = sorted(set(status["depot"].fillna(workshop.NO_DEPOT)) | set(workshop.open_plan(store)["depot"]))
    st.caption("Inspections each depot's workshop can take per working day.")
    for col, depot in zip(st.columns(max(1, min(4, len(depots)))) * len(depots), depots):
        per_day = col.number_input(depot, min_value=0, max_value=50, step=1,
                                   value=int(saved.get(depot, workshop.DEFAULT_CAPACITY_PER_DAY)),
                                   key=f"capacity_{depot}")
        if per_day != saved.get(depot, workshop.DEFAULT_CAPACITY_PER_DAY):
            workshop.set_capacity(store, depot, per_day)
    if st.button("Propose new dates for entries not moved by hand", key="replan"):
        left = planner.replan(store, st.session_state["plan_start"], status)
        st.session_state["plan_note"] = "Plan re-proposed by priority." + (
            f" No free day within a year for {', '.join(left)}." if left else "")
        st.rerun()

capacity = workshop.capacities(store)
plan = workshop.open_plan(store)
if plan.empty:
    st.info("The plan is empty. Tick vehicles on **Fleet triage** and add them to the plan.")
else:
    detail = planner.with_status(plan, status, planner.service_dates(store))
    view = pd.DataFrame({
        "Date": detail["planned_date"],
        "Day": [d.strftime("%a") for d in detail["planned_date"]],
        "Depot": detail["depot"],
        "Vehicle": detail["vehicle_id"],
        "Priority": detail["priority"],
        "Status": detail["status"].map(STATUS_LABELS),
        "Suspected component": detail["suspected_component"].map(component_label),
        "What to check": detail["suggestion"],
        "Service": detail["service_note"],
        "Moved by hand": detail["pinned"],
    })
    st.dataframe(view, key="plan_table", hide_index=True, width="stretch",
                 column_config={"Date": st.column_config.DateColumn(format="YYYY-MM-DD")})

    st.subheader("Move or remove an entry")
    labels = {int(r.id): f"{r.vehicle_id} — {r.planned_date:%a %d %b} at {r.depot}" for r in plan.itertuples()}
    c1, c2, c3, c4 = st.columns([3, 2, 1, 1], vertical_alignment="bottom")
    entry = c1.selectbox("Entry", list(labels), format_func=labels.get, key="move_entry")
    new_date = c2.date_input("New date", key="move_date",
                             value=plan.loc[plan["id"] == entry, "planned_date"].iloc[0])
    if c3.button("Move", key="move"):
        problem = move_problem(plan, entry, new_date, capacity, workshop.DEFAULT_CAPACITY_PER_DAY)
        if problem:
            st.error(f"Not moved: {problem}.")
        else:
            workshop.set_dates(store, {entry: new_date}, pin=True)
            st.session_state["plan_note"] = f"Moved {labels[entry].split(' — ')[0]} to {new_date:%a %d %b %Y}."
            st.rerun()
    if c4.button("Remove", key="remove"):
        workshop.remove_entry(store, entry)
        st.rerun()

    d1, d2 = st.columns(2)
    d1.download_button("Download plan (CSV)", planner.export_csv(detail), file_name="inspection-plan.csv",
                       mime="text/csv", key="export_csv", icon=":material/table:")
    d2.download_button("Download plan (calendar, .ics)",
                       planner.export_ics(detail, dt.datetime.now(dt.timezone.utc)),
                       file_name="inspection-plan.ics", mime="text/calendar", key="export_ics",
                       icon=":material/calendar_month:")

# ---- outcomes -------------------------------------------------------------
st.subheader("Record an inspection outcome")
candidates = list(dict.fromkeys([*plan["vehicle_id"], *status["vehicle_id"]]))
if not candidates:
    st.caption("No vehicles known yet.")
else:
    o1, o2, o3 = st.columns(3)
    vehicle = o1.selectbox("Vehicle", candidates, key="outcome_vehicle",
                           help="Vehicles on the plan come first.")
    when = o2.date_input("Inspected on", value=dt.date.today(), key="outcome_date")
    outcome = o3.radio("Outcome", list(OUTCOME_LABELS), format_func=OUTCOME_LABELS.get, key="outcome_kind",
                       horizontal=True)
    suspected = status.loc[status["vehicle_id"] == vehicle, "suspected_component"]
    faults = [c for c in COMPONENTS if c != "none"]
    guess = suspected.iloc[0] if len(suspected) and suspected.iloc[0] in faults else faults[0]
    component = st.selectbox("Component found faulty", faults, index=faults.index(guess),
                             format_func=component_label, key="outcome_component",
                             disabled=outcome != "fault_found")
    text = st.text_area("Note", key="outcome_note", placeholder="What was found, what was done")
    if st.button("Save outcome", key="save_outcome", type="primary"):
        workshop.record_outcome(store, vehicle, when, outcome, component, text)
        st.session_state["plan_note"] = f"Outcome saved for {vehicle}: {OUTCOME_LABELS[outcome].lower()}."
        st.rerun()
