"""Log intake: which files came in or were turned away and why, and which vehicles went quiet."""

import pandas as pd
import streamlit as st

from dashboard.common import current_store, table_or_note
from dashboard.tables import has_columns

FILE_COUNTS_SQL = ("SELECT status, count(*) AS files, coalesce(sum(n_rejected), 0) AS rows_rejected "
                   "FROM {ingested_files} GROUP BY status ORDER BY status")
FILES_SQL = ("SELECT * EXCLUDE (sha256) FROM {ingested_files} WHERE list_contains(?, status) "
             "ORDER BY ingested_at DESC LIMIT 1000")
REJECT_REASONS_SQL = ("SELECT reason, count(*) AS rows_rejected, count(DISTINCT source_file) AS files "
                      "FROM {rejects} GROUP BY reason ORDER BY rows_rejected DESC")
REJECTS_SQL = "SELECT source_file, row, reason FROM {rejects} ORDER BY source_file, row LIMIT 1000"
COVERAGE_SQL = """
SELECT v.vehicle_id, v.platform, {depot},
       count(t.trip_id) AS trips,
       count(DISTINCT CAST(t.start_time AS DATE)) AS days_with_trips,
       min(t.start_time) AS first_trip, max(t.start_time) AS last_trip,
       coalesce(sum(t.distance_km), 0) AS distance_km
FROM {vehicles} v LEFT JOIN {trips} t USING (vehicle_id)
GROUP BY ALL ORDER BY v.vehicle_id
"""
#: The registry's depot column is optional (DESIGN.md, "Vehicle registry").
DEPOT_OR_NULL = {True: "v.depot", False: "CAST(NULL AS VARCHAR) AS depot"}

store = current_store()
st.title("Log intake")

# ---- files ---------------------------------------------------------------------
st.subheader("Files")
counts = table_or_note(store, FILE_COUNTS_SQL)
if counts is not None:
    cols = st.columns(len(counts) + 1)
    cols[0].metric("Rows rejected", int(counts["rows_rejected"].sum()))
    for col, state, n in zip(cols[1:], counts["status"], counts["files"]):
        col.metric(f"Files {state}", int(n))
    states = counts["status"].dropna().tolist()
    pick = st.multiselect("Show files whose status is", states, key="intake_status",
                          default=[s for s in states if s != "ingested"] or states)
    files = table_or_note(store, FILES_SQL, [pick])
    st.dataframe(files, hide_index=True, width="stretch", height=min(36 * (len(files) + 1) + 4, 320),
                 key="intake_files",
                 column_config={"ingested_at": st.column_config.DatetimeColumn(format="YYYY-MM-DD HH:mm")})
    if len(files) == 1000:
        st.caption("The newest 1,000 files of these statuses are shown.")

st.subheader("Rejected rows")
reasons = table_or_note(store, REJECT_REASONS_SQL)
if reasons is not None:
    if reasons.empty:
        st.caption("No rows were rejected.")
    else:
        st.dataframe(reasons, hide_index=True, width="stretch", key="intake_reasons")
        with st.expander("Every rejected row (first 1,000)"):
            st.dataframe(table_or_note(store, REJECTS_SQL), hide_index=True, width="stretch", key="intake_rejects")

# ---- coverage ------------------------------------------------------------------
st.subheader("Coverage per vehicle")
coverage = table_or_note(store, COVERAGE_SQL.replace(
    "{depot}", DEPOT_OR_NULL["depot" in has_columns(store, "vehicles")]))
if coverage is not None:
    newest = coverage["last_trip"].max()
    quiet_days = st.number_input("Quiet for at least (days)", min_value=1, max_value=365, value=7, step=1,
                                 key="intake_quiet_days")
    if pd.isna(newest):
        st.info("No trips in the store yet.")
    else:
        silent_for = (newest - coverage["last_trip"]).dt.days
        quiet = coverage.assign(days_quiet=silent_for).loc[coverage["last_trip"].isna() | (silent_for >= quiet_days)]
        st.caption(f"Measured from the newest log in the store, {newest:%Y-%m-%d %H:%M} UTC "
                   f"({(pd.Timestamp.now(tz='UTC') - newest).days} days before now).")
        if quiet.empty:
            st.success(f"Every vehicle logged a trip in the last {quiet_days} days.")
        else:
            st.warning(f"{len(quiet)} vehicle(s) sent no log in the last {quiet_days} days; "
                       "they cannot be ranked on fresh data.")
            st.dataframe(quiet[["vehicle_id", "platform", "depot", "last_trip", "days_quiet", "trips"]],
                         hide_index=True, width="stretch", key="intake_quiet",
                         column_config={"last_trip": st.column_config.DatetimeColumn(format="YYYY-MM-DD HH:mm")})
    coverage["trips_per_day"] = (coverage["trips"] / coverage["days_with_trips"].where(lambda d: d > 0)).round(2)
    st.dataframe(coverage, hide_index=True, width="stretch", height=320, key="intake_coverage",
                 column_config={"first_trip": st.column_config.DatetimeColumn(format="YYYY-MM-DD"),
                                "last_trip": st.column_config.DatetimeColumn(format="YYYY-MM-DD"),
                                "distance_km": st.column_config.NumberColumn("distance (km)", format="%.0f")})
