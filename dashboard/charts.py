"""Altair charts with a title on every axis, in the dashboard's own palette."""

from __future__ import annotations

import altair as alt
import pandas as pd

#: Our palette: slate, teal, amber, plum, moss (series in this order).
SERIES_COLOURS = ["#33658a", "#2a9d8f", "#e9a23b", "#8e5572", "#6a8d3a", "#b5483b"]
ALERT_COLOUR = "#c0392b"
BAND_COLOUR = "#9ccfc4"
HEIGHT = 220


def traces(frame: pd.DataFrame, x: str, x_title: str, y_title: str, x_type: str = "Q") -> alt.Chart:
    """Lines of a long frame (``x``, ``series``, ``value``)."""
    return (
        alt.Chart(frame)
        .mark_line(strokeWidth=1.2)
        .encode(
            x=alt.X(f"{x}:{x_type}", title=x_title),
            y=alt.Y("value:Q", title=y_title),
            color=alt.Color("series:N", title=None, scale=alt.Scale(range=SERIES_COLOURS),
                            legend=alt.Legend(orient="top")),
        )
        .properties(height=HEIGHT)
    )


def event_rules(times: pd.DataFrame, x: str, x_type: str = "Q") -> alt.Chart:
    """Vertical marks at events (``x``, ``event``), labelled in the tooltip."""
    return (alt.Chart(times).mark_rule(color=ALERT_COLOUR, strokeDash=[4, 3])
            .encode(x=f"{x}:{x_type}", tooltip=["event:N", f"{x}:{x_type}"]))


def score_history(scores: pd.DataFrame, y_title: str) -> alt.Chart:
    """Trip scores as points over time with a rolling median line."""
    base = alt.Chart(scores).encode(x=alt.X("start_time:T", title="trip start (UTC)"))
    points = base.mark_circle(size=28, color=SERIES_COLOURS[0], opacity=0.55).encode(
        y=alt.Y("score:Q", title=y_title), tooltip=["start_time:T", "score:Q", "top_feature:N"])
    trend = base.mark_line(color=SERIES_COLOURS[2], strokeWidth=2).encode(y="trend:Q")
    return (points + trend).properties(height=HEIGHT)


def drift_history(drift: pd.DataFrame) -> alt.Chart:
    """Each drift statistic's CUSUM (the larger side) against its threshold, alarms in red."""
    base = alt.Chart(drift).encode(x=alt.X("start_time:T", title="trip start (UTC)"))
    line = base.mark_line(strokeWidth=1.5).encode(
        y=alt.Y("cusum:Q", title="CUSUM (multiples of the in-control spread)"),
        color=alt.Color("statistic:N", title=None, scale=alt.Scale(range=SERIES_COLOURS),
                        legend=alt.Legend(orient="top")))
    limit = base.mark_line(strokeDash=[6, 3], color=ALERT_COLOUR, strokeWidth=1).encode(
        y="threshold:Q", detail="statistic:N")
    alarms = base.transform_filter("datum.alarm").mark_point(color=ALERT_COLOUR, size=40, filled=True).encode(
        y="cusum:Q", tooltip=["statistic:N", "start_time:T", "cusum:Q", "threshold:Q"])
    return (line + limit + alarms).properties(height=HEIGHT)


def feature_against_band(values: pd.DataFrame, band: dict | None, title: str, y_title: str) -> alt.Chart:
    """A feature's trip values with the peer group's p05–p95 band and median."""
    base = alt.Chart(values).encode(x=alt.X("start_time:T", title="trip start (UTC)"))
    layers = []
    if band is not None:
        edges = pd.DataFrame({"start_time": [values["start_time"].min(), values["start_time"].max()],
                              "p05": band["p05"], "p50": band["p50"], "p95": band["p95"]})
        b = alt.Chart(edges).encode(x="start_time:T")
        layers += [b.mark_area(color=BAND_COLOUR, opacity=0.45).encode(y="p05:Q", y2="p95:Q"),
                   b.mark_line(color=SERIES_COLOURS[1], strokeDash=[5, 3]).encode(y="p50:Q")]
    layers.append(base.mark_line(point=True, color=SERIES_COLOURS[0], strokeWidth=1.2).encode(
        y=alt.Y("value:Q", title=y_title), tooltip=["start_time:T", "value:Q"]))
    return alt.layer(*layers).properties(height=HEIGHT - 40, title=title)
