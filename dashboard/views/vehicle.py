"""Vehicle record: score and drift over time, implicated features against the healthy band,
lamp and trouble-code events, workshop history, the trip table and one trip's traces."""

import pandas as pd
import streamlit as st

from dashboard import charts, workshop
from dashboard.common import PICKED_VEHICLE, current_store, table_or_note
from dashboard.outcomes import read_outcomes
from dashboard.service_form import service_event_section
from dashboard.snooze_form import snooze_section
from dashboard.tables import Missing, has_columns, query, trip_samples
from dashboard.traces import drilldown_frames
from dashboard.wording import OUTCOME_LABELS, STATUS_LABELS, component_label, feature_unit
from models.ranking import status_notes

#: How many of the vehicle's most implicated features are drawn by default.
N_IMPLICATED = 3
RECENT_TRIPS = 30



def _flagged(values: pd.Series) -> pd.Series:
    """True where a lamp / trouble-code column reports something (bool, count or code text)."""
    if pd.api.types.is_bool_dtype(values) or pd.api.types.is_numeric_dtype(values):
        return values.fillna(0).astype(float) > 0
    return values.fillna("").astype(str).str.len() > 0


store = current_store()
st.title("Vehicle record")

status = table_or_note(store, "SELECT * FROM {vehicle_status} ORDER BY rank")
if status is None:
    st.stop()
ids = status["vehicle_id"].tolist()
if st.session_state.get(PICKED_VEHICLE) in ids:
    st.session_state["vehicle_pick"] = st.session_state.pop(PICKED_VEHICLE)
vehicle = st.selectbox("Vehicle", ids, key="vehicle_pick",
                       format_func=lambda v: f"{v} (rank {ids.index(v) + 1})")
row = status.loc[status["vehicle_id"] == vehicle].iloc[0]

m1, m2, m3, m4 = st.columns(4)
m1.metric("Status", STATUS_LABELS.get(row["status"], row["status"]))
m2.metric("Rank", int(row["rank"]))
m3.metric("Suspected component", component_label(row["suspected_component"]) or "—")
m4.metric("Flagged since", "—" if pd.isna(row["flagged_since"]) else f"{pd.Timestamp(row['flagged_since']):%Y-%m-%d}")
if bool(row["lamp_on"]):
    st.error("ABS/ESC lamp lit: this vehicle needs service whatever its rank.", icon=":material/warning:")
if isinstance(row["suggestion"], str) and row["suggestion"]:
    st.markdown(f"**What to check:** {row['suggestion']}")
if isinstance(row["evidence"], str) and row["evidence"]:
    st.markdown(f"**Evidence:** {row['evidence']}")
for note in status_notes(status.loc[status["vehicle_id"] == vehicle]):
    if note:
        st.info(note, icon=":material/info:")
with st.expander("Snooze", icon=":material/snooze:"):
    snooze_section(store, row, key="vehicle_snooze")

# ---- workshop history -------------------------------------------------------
outcomes = read_outcomes(store)
mine = outcomes.loc[outcomes["vehicle_id"] == vehicle]
plan = workshop.open_plan(store)
planned = plan.loc[plan["vehicle_id"] == vehicle, "planned_date"]
with st.container(border=True):
    st.markdown("**Workshop history**")
    if len(planned):
        st.markdown(f"On the plan for {planned.iloc[0]:%A %d %B %Y}.")
    if mine.empty:
        st.caption("No inspection outcome recorded for this vehicle.")
    else:
        st.dataframe(pd.DataFrame({"date": mine["date"].dt.date, "outcome": mine["outcome"].map(OUTCOME_LABELS),
                                   "component": mine["component"].map(component_label), "note": mine["note"]}),
                     hide_index=True, width="stretch", key="vehicle_outcomes")
    service_event_section(store, vehicle)

# ---- lamp and trouble-code events from the per-trip tables -------------------
event_columns = {t: sorted(c for c in has_columns(store, t) if c.startswith(("lamp", "dtc")))
                 for t in ("trip_features", "trip_scores")}
events = []
for table, cols in event_columns.items():
    if cols:
        flags = query(store, f"SELECT start_time, {', '.join(cols)} FROM {{{table}}} WHERE vehicle_id = ?", [vehicle])
        for c in cols:
            events.append(pd.DataFrame({"start_time": flags.loc[_flagged(flags[c]), "start_time"], "event": c}))
inspections = pd.DataFrame({"start_time": mine["date"].dt.tz_localize("UTC"),
                            "event": "inspection: " + mine["outcome"].map(OUTCOME_LABELS)})
marks = pd.concat([*events, inspections], ignore_index=True)

# ---- score and drift over time ------------------------------------------------
st.subheader("Score over time")
scores = table_or_note(store, "SELECT * FROM {trip_scores} WHERE vehicle_id = ? ORDER BY start_time", [vehicle])
if scores is not None and not scores.empty:
    scores = scores.assign(trend=scores["score"].rolling(7, min_periods=1).median())
    st.vega_lite_chart(scores[["start_time", "score", "trend", "top_feature"]],
                       charts.score_history("trip score", marks), width="stretch")
    st.caption("Points: each trip's score against the fleet (higher is more unusual); orange: 7-trip median. "
               "Red dashed lines: lamp / trouble-code events and inspections.")
elif scores is not None:
    st.caption("No scored trips for this vehicle.")

drift = query(store, "SELECT * FROM {vehicle_drift} WHERE vehicle_id = ? ORDER BY start_time", [vehicle])
if isinstance(drift, Missing):
    st.info(drift.message)
elif not drift.empty:
    drift = drift.assign(cusum=drift[["cusum_hi", "cusum_lo"]].abs().max(axis=1), alarm=drift["alarm"].astype(bool))
    st.markdown("**Drift detector** (alert when a line crosses its dashed threshold)")
    st.vega_lite_chart(drift[["start_time", "statistic", "cusum", "threshold", "alarm"]], charts.drift_history(),
                       width="stretch")

# ---- implicated features against the healthy band ----------------------------
st.subheader("Implicated features")
if scores is not None and not scores.empty:
    z_cols = [c for c in scores.columns if c.startswith("z_")]
    recent = scores.tail(RECENT_TRIPS)[z_cols].abs().median().sort_values(ascending=False)
    names = [c[2:] for c in recent.index]
    feature_cols = has_columns(store, "trip_features")
    names = [n for n in names if n in feature_cols]
    chosen = st.multiselect("Features", names, default=names[:N_IMPLICATED], key="vehicle_features",
                            help="Ordered by how far this vehicle's recent trips sit from its peers.")
    peer_group = scores["peer_group"].dropna().iloc[-1] if scores["peer_group"].notna().any() else None
    if chosen:
        cols = ", ".join(f'"{c}"' for c in chosen)
        values = query(store, f"SELECT start_time, {cols} FROM {{trip_features}} WHERE vehicle_id = ? "
                              "ORDER BY start_time", [vehicle])
        bands = query(store, "SELECT * FROM {peer_bands} WHERE peer_group = ?", [peer_group])
        bands = {} if isinstance(bands, Missing) else {r.feature: r._asdict() for r in bands.itertuples()}
        grid = st.columns(min(len(chosen), 3))
        for i, name in enumerate(chosen):
            frame = values[["start_time", name]].rename(columns={name: "value"})
            grid[i % len(grid)].vega_lite_chart(
                frame, charts.feature_against_band(frame, bands.get(name), name, feature_unit(name)),
                width="stretch")
        st.caption(f"Shaded: the healthy band (5th–95th percentile) of peer group {peer_group}; dashed: its median.")

# ---- trips and drill-down ------------------------------------------------------
st.subheader("Trips")
trips = table_or_note(store, "SELECT * FROM {trips} WHERE vehicle_id = ? ORDER BY start_time DESC", [vehicle])
if trips is None or trips.empty:
    st.stop()
if scores is not None:
    trips = trips.merge(scores[["trip_id", "score", "top_feature", "top_z"]], on="trip_id", how="left")
shown = [c for c in ("start_time", "end_time", "distance_km", "n_samples", "sample_rate_hz", "score",
                     "top_feature", "top_z", "missing_fraction", "source_file", "trip_id") if c in trips]
st.dataframe(trips[shown], hide_index=True, width="stretch", height=260, key="vehicle_trips",
             column_config={"start_time": st.column_config.DatetimeColumn("start (UTC)", format="YYYY-MM-DD HH:mm"),
                            "end_time": st.column_config.DatetimeColumn("end (UTC)", format="YYYY-MM-DD HH:mm"),
                            "score": st.column_config.NumberColumn(format="%.3f")})

labels = {t: f"{s:%Y-%m-%d %H:%M} UTC" + (f" · score {sc:.2f}" if pd.notna(sc) else "")
          for t, s, sc in zip(trips["trip_id"], trips["start_time"], trips.get("score", pd.Series(index=trips.index)))}
trip = st.selectbox("Trip to draw", list(labels), format_func=labels.get, key="vehicle_trip")
sample_file = trips.loc[trips["trip_id"] == trip, "sample_file"].iloc[0] if "sample_file" in trips else None
if not isinstance(sample_file, str) or not (store.root / sample_file).is_file():
    st.info("This trip's samples are not in the store (the `trips` table names no existing sample file).")
    st.stop()
samples = trip_samples(str(store.root), sample_file, trip)
spec = query(store, "SELECT * FROM {vehicles} WHERE vehicle_id = ?", [vehicle])
spec = {} if isinstance(spec, Missing) or spec.empty else spec.iloc[0].to_dict()
if not spec:
    st.caption("No registry entry for this vehicle: the yaw estimates need its track, wheelbase and steering ratio.")
frames = drilldown_frames(samples, spec)

t_s = (samples["time"] - samples["time"].iloc[0]).dt.total_seconds()
trip_marks = []
for c in ("lamp_abs", "lamp_esc"):
    if c in samples:
        on = samples[c].fillna(False).astype(bool)
        starts = t_s[on & ~on.shift(fill_value=False)]
        trip_marks.append(pd.DataFrame({"t_s": starts, "event": f"{c} on"}))
if "dtc" in samples:
    code = samples["dtc"].fillna("").astype(str)
    new = (code != "") & (code != code.shift(fill_value=""))
    trip_marks.append(pd.DataFrame({"t_s": t_s[new], "event": "trouble code " + code[new]}))
trip_marks = pd.concat(trip_marks, ignore_index=True) if trip_marks else pd.DataFrame(columns=["t_s", "event"])
if not trip_marks.empty:
    st.caption("Lamp and trouble-code events in this trip: " + "; ".join(
        f"{e} at {t:.0f} s" for t, e in zip(trip_marks["t_s"], trip_marks["event"])))

X_TITLE = "time since trip start (s)"
PANELS = (("speed", "Wheel speeds", "wheel speed (km/h)"),
          ("deviation", "Each wheel minus the mean of the other three", "deviation (km/h)"),
          ("yaw", "Yaw rate: measured and estimated", "yaw rate (deg/s)"),
          ("accel", "Longitudinal acceleration: measured and from wheel speeds", "acceleration (g)"))
for (key, title, y_title), col in zip(PANELS, st.columns(2) * 2):
    if frames[key].empty:
        col.caption(f"{title}: signals not logged on this trip.")
        continue
    col.vega_lite_chart(frames[key], charts.traces("t_s", X_TITLE, y_title, title, trip_marks), width="stretch")
