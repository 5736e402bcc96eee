"""Vega-Lite chart specifications with a title on every axis, in the dashboard's own palette.

Plain specification dictionaries drawn with ``st.vega_lite_chart``: the
same grammar Altair writes, without Altair's per-chart schema validation,
which cost more than all of a page's queries (benchmarks/bench_dashboard.py).
The main frame goes in as the chart's data; small overlays (bands, event
marks) travel inline in their layer.
"""

from __future__ import annotations

import json

import pandas as pd

#: Our palette: slate, teal, amber, plum, moss, brick (series in this order).
SERIES_COLOURS = ["#33658a", "#2a9d8f", "#e9a23b", "#8e5572", "#6a8d3a", "#b5483b"]
ALERT_COLOUR = "#c0392b"
BAND_COLOUR = "#9ccfc4"
HEIGHT = 220
TIME_AXIS = {"field": "start_time", "type": "temporal", "title": "trip start (UTC)"}


def _series_colour() -> dict:
    return {"field": "series", "type": "nominal", "title": None, "scale": {"range": SERIES_COLOURS},
            "legend": {"orient": "top"}}


def _inline(frame: pd.DataFrame) -> dict:
    """Small overlay data as JSON values (timestamps as ISO text, also inside a column of mixed
    types, as a concat of an empty frame with a timed one gives)."""
    return {"values": json.loads(frame.to_json(orient="records", date_format="iso", date_unit="s"))}


def traces(x: str, x_title: str, y_title: str, title: str, marks: pd.DataFrame | None = None) -> dict:
    """Lines of a long frame (``x`` seconds, ``series``, ``value``), optional event marks at ``x``."""
    layers = [{"params": [{"name": "zoom", "select": "interval", "bind": "scales", "encodings": ["x"]}],
               "mark": {"type": "line", "strokeWidth": 1.2},
               "encoding": {"x": {"field": x, "type": "quantitative", "title": x_title},
                            "y": {"field": "value", "type": "quantitative", "title": y_title,
                                  "scale": {"zero": False}},
                            "color": _series_colour()}}]
    if marks is not None and not marks.empty:
        layers.append(event_rules(marks, x, "quantitative"))
    return {"title": title, "height": HEIGHT, "layer": layers}


def event_rules(marks: pd.DataFrame, x: str, x_type: str) -> dict:
    """A layer of dashed vertical marks at events (``x``, ``event``)."""
    return {"data": _inline(marks[[x, "event"]]),
            "mark": {"type": "rule", "color": ALERT_COLOUR, "strokeDash": [4, 3]},
            "encoding": {"x": {"field": x, "type": x_type},
                         "tooltip": [{"field": "event", "type": "nominal"}, {"field": x, "type": x_type}]}}


def score_history(y_title: str, marks: pd.DataFrame | None = None) -> dict:
    """Trip scores (``start_time``, ``score``, ``trend``) as points with a rolling-median line."""
    layers = [
        {"mark": {"type": "circle", "size": 28, "color": SERIES_COLOURS[0], "opacity": 0.55},
         "encoding": {"x": TIME_AXIS, "y": {"field": "score", "type": "quantitative", "title": y_title},
                      "tooltip": [{"field": "start_time", "type": "temporal"},
                                  {"field": "score", "type": "quantitative", "format": ".3f"},
                                  {"field": "top_feature", "type": "nominal"}]}},
        {"mark": {"type": "line", "color": SERIES_COLOURS[2], "strokeWidth": 2},
         "encoding": {"x": TIME_AXIS, "y": {"field": "trend", "type": "quantitative"}}},
    ]
    if marks is not None and not marks.empty:
        layers.append(event_rules(marks, "start_time", "temporal"))
    return {"height": HEIGHT, "layer": layers}


def drift_history() -> dict:
    """Each drift statistic's CUSUM (``cusum``, the larger side) against its threshold, alarms in red."""
    colour = {**_series_colour(), "field": "statistic"}
    return {"height": HEIGHT, "layer": [
        {"mark": {"type": "line", "strokeWidth": 1.5},
         "encoding": {"x": TIME_AXIS, "y": {"field": "cusum", "type": "quantitative", "title": "CUSUM statistic"},
                      "color": colour}},
        {"mark": {"type": "line", "strokeDash": [6, 3], "color": ALERT_COLOUR, "strokeWidth": 1},
         "encoding": {"x": TIME_AXIS, "y": {"field": "threshold", "type": "quantitative"},
                      "detail": {"field": "statistic", "type": "nominal"}}},
        {"transform": [{"filter": "datum.alarm"}],
         "mark": {"type": "point", "color": ALERT_COLOUR, "size": 40, "filled": True},
         "encoding": {"x": TIME_AXIS, "y": {"field": "cusum", "type": "quantitative"},
                      "tooltip": [{"field": "statistic", "type": "nominal"}, {"field": "start_time", "type": "temporal"},
                                  {"field": "cusum", "type": "quantitative", "format": ".2f"},
                                  {"field": "threshold", "type": "quantitative"}]}},
    ]}


def feature_against_band(values: pd.DataFrame, band: dict | None, title: str, y_title: str) -> dict:
    """A feature's trip values (``start_time``, ``value``) over the peer group's p05–p95 band and median."""
    layers = []
    if band is not None:
        edges = pd.DataFrame({"start_time": [values["start_time"].min(), values["start_time"].max()],
                              "p05": band["p05"], "p50": band["p50"], "p95": band["p95"]})
        layers += [
            {"data": _inline(edges), "mark": {"type": "area", "color": BAND_COLOUR, "opacity": 0.45},
             "encoding": {"x": TIME_AXIS, "y": {"field": "p05", "type": "quantitative"},
                          "y2": {"field": "p95"}}},
            {"data": _inline(edges), "mark": {"type": "line", "color": SERIES_COLOURS[1], "strokeDash": [5, 3]},
             "encoding": {"x": TIME_AXIS, "y": {"field": "p50", "type": "quantitative"}}},
        ]
    layers.append({"mark": {"type": "line", "point": True, "color": SERIES_COLOURS[0], "strokeWidth": 1.2},
                   "encoding": {"x": TIME_AXIS, "y": {"field": "value", "type": "quantitative", "title": y_title},
                                "tooltip": [{"field": "start_time", "type": "temporal"},
                                            {"field": "value", "type": "quantitative", "format": ".3f"}]}})
    return {"title": title, "height": HEIGHT - 40, "layer": layers}
