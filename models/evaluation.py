"""How good is the ranking? Ground-truth evaluation and a lamp backtest, always beside baselines.

Methods compared in one run, on the same trips:

* ``tracktrue`` — the FleetScorer as published.
* ``lamp_only`` — wait for the lamp: flags nothing before it (lead time 0);
  its precision at k is that of an arbitrary order of the unlit vehicles.
* ``single_feature`` — each raw feature against the fleet's own 0.5 % / 99.5 %
  trip quantiles; a vehicle alerts when at least half of its last ten trips
  break some threshold; component from the feature broken most often.
* ``raw_forest`` — the same isolation forest on un-normalised features
  (one forest, no peer groups, no drift detector); alerts at a vehicle
  score ``watch_score_z`` fleet spreads above the median.

Definitions (truth.csv: vehicle_id, fault, component, onset_date, lamp_date,
optionally growth = gradual | sudden | intermittent): positives at the as-of
date are sensor faults (component not a tyre) with onset ≤ as-of and no lamp
yet; k = their number; the ranking excludes vehicles whose lamp is lit. Lead
time = lamp date − ``flagged_since`` of the alert run still going on the last
trip before the lamp (0 when none): the run's first trip, or the change-point
estimate of a CUSUM that raised it where that lies earlier. Lead fraction =
lead / (lamp − onset), capped at 1. ``median_lead_days_slow`` is the median lead of the
faults that took ``SLOW_FAULT_DAYS`` (five weeks) or more from onset to lamp, the issue's
"≥ 21 days for faults that take five weeks or more" (NaN when none did). ``median_alarm_lead_fraction`` counts from
the run's first alerting trip instead: when the manager was first told.
``median_since_after_onset_days`` (flagged_since − onset of the faults flagged before their
lamp) and ``since_before_onset_share`` say how well flagged_since estimates the onset: the
capped lead fraction alone would reward a date reaching back before the fault began. False alarms = alert runs started on vehicles without any truth row, per
30 healthy vehicle-days, in % of vehicles. Tyre distractors (truth component ``tyre_<pos>``):
``tyres_classed_tyre`` is the share whose suspected component is a tyre at all — the
manager checks tyres rather than booking a sensor job, issue 5's figure — and
``tyres_at_right_wheel`` the stricter share naming the distractor's own wheel (a fleet's
other tyre work, a spare on another wheel say, may stand out more).

Two kinds of fault are reported apart, for every method alike, because no
detector of developing disagreement can warn of them early: faults whose truth
growth is sudden or intermittent ("not detectable early": no k, no recall, no
lead for them; ``not_early_found`` says how many were flagged or lamp-lit at
the as-of date), and faults on vehicles whose logs carry no signal any feature
can use (a telematics unit: vehicle speed and lamps only; such vehicles are
also left out of the false-alarm denominator). Which vehicles those are comes
from the data (no trip with a computable feature) or from ``loggers.csv``
beside the truth file (logger_kind telematics).

Per logger kind: with ``loggers.csv`` beside the truth file (vehicle_id,
logger_kind), or a ``logger_kind`` column in trip_features (the most frequent
kind of each vehicle's trips), every figure is also computed within each kind.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from models.feature_set import evidence_key
from models.runner import ScoredFleet, score_fleet
from models.scorer import FleetScorer, run_start
from tracktrue.errors import UserError
from tracktrue.store import Store

TRUTH_COLUMNS = ("vehicle_id", "fault", "component", "onset_date", "lamp_date")
ROLLING_TRIPS = 10
#: Truth growth curves no early-warning detector can anticipate (see module doc).
NOT_EARLY_GROWTH = frozenset({"sudden", "intermittent"})
#: Logger kinds that record no chassis sensor (vehicle speed and lamps only).
NO_SENSOR_LOGGERS = frozenset({"telematics"})


@dataclass
class MethodResult:
    """Per vehicle: order (1 = most urgent), flagged, component; per trip: alert."""

    vehicles: pd.DataFrame  # vehicle_id, order, flagged, component
    trips: pd.DataFrame  # vehicle_id, start_time, alert


@dataclass
class EvaluationReport:
    as_of: dt.date
    metrics: dict[str, dict[str, float]]
    early: "EvaluationReport | None" = None
    backtest: pd.DataFrame | None = None
    inspections: pd.DataFrame | None = None
    notes: list[str] = field(default_factory=list)
    by_logger: dict[str, dict[str, dict[str, float]]] = field(default_factory=dict)
    label: str = ""

    def describe(self) -> str:
        lines = []
        if self.metrics:
            lines.append(f"evaluation as of {self.as_of} (ground truth{', ' + self.label if self.label else ''})")
            lines.append(metrics_table(self.metrics).map(_cell).to_string())
        for kind, metrics in self.by_logger.items():
            lines.append(f"logger kind {kind}, as of {self.as_of}")
            lines.append(metrics_table(metrics).map(_cell).to_string())
        if self.backtest is not None:
            lines.append(f"backtest as of {self.as_of}: lamp events in the logs (no truth file)")
            if self.backtest.empty:
                lines.append("  no lamp events found")
            else:
                lines.append(self.backtest.to_string(index=False))
                lines.append(f"  median days flagged before the lamp: {self.backtest['days_earlier'].median():.1f}")
        if self.inspections is not None and not self.inspections.empty:
            lines.append("inspection outcomes recorded in the dashboard (real labels)")
            lines.append(self.inspections.to_string(index=False))
            lines.append(_inspection_summary(self.inspections))
        lines += [f"note: {n}" for n in self.notes]
        if self.early is not None:
            lines += ["", self.early.describe()]
        return "\n".join(lines)


def metrics_table(metrics: dict[str, dict[str, float]]) -> pd.DataFrame:
    """Figures as rows, methods as columns (the order of the first method's figures)."""
    names = list(next(iter(metrics.values())).keys())
    return pd.DataFrame(metrics).reindex(names)


def _cell(x) -> str:
    if x is None or (isinstance(x, float) and not np.isfinite(x)):
        return "n/a"
    return f"{x:.3f}" if isinstance(x, float) else str(x)


def read_truth(path: Path) -> pd.DataFrame:
    """truth.csv with dates parsed; a clear UserError naming file, row and problem."""
    try:
        df = pd.read_csv(path, dtype=str, keep_default_na=False)
    except FileNotFoundError:
        raise UserError(f"{path}: truth file not found") from None
    except (pd.errors.ParserError, UnicodeDecodeError) as exc:
        raise UserError(f"{path}: not a readable CSV ({exc})") from None
    missing = [c for c in TRUTH_COLUMNS if c not in df.columns]
    if missing:
        raise UserError(f"{path}: missing column(s) {', '.join(missing)} (need {', '.join(TRUTH_COLUMNS)})")
    for col in ("onset_date", "lamp_date"):
        parsed = pd.to_datetime(df[col].str.strip().replace("", None), format="%Y-%m-%d", errors="coerce")
        bad = parsed.isna() & (df[col].str.strip() != "")
        if bad.any():
            row = int(np.flatnonzero(bad.to_numpy())[0]) + 2  # header is line 1
            raise UserError(f"{path}, line {row}: {col} {df[col].iloc[row - 2]!r} is not a date (YYYY-MM-DD)")
        if col == "onset_date" and parsed.isna().any():
            row = int(np.flatnonzero(parsed.isna().to_numpy())[0]) + 2
            raise UserError(f"{path}, line {row}: onset_date is empty")
        df[col] = parsed.dt.date.astype(object)  # an all-empty column would stay datetime64 (pandas)
    if "growth" not in df.columns:
        df["growth"] = "gradual"
    return df


def read_loggers(truth_csv: Path) -> pd.Series | None:
    """logger_kind per vehicle from ``loggers.csv`` beside the truth file, when there is one."""
    path = Path(truth_csv).with_name("loggers.csv")
    if not path.is_file():
        return None
    try:
        df = pd.read_csv(path, dtype=str, keep_default_na=False)
    except (pd.errors.ParserError, UnicodeDecodeError) as exc:
        raise UserError(f"{path}: not a readable CSV ({exc})") from None
    missing = [c for c in ("vehicle_id", "logger_kind") if c not in df.columns]
    if missing:
        raise UserError(f"{path}: missing column(s) {', '.join(missing)} (need vehicle_id, logger_kind)")
    empty = df["logger_kind"].str.strip() == ""
    if empty.any():
        raise UserError(f"{path}, line {int(np.flatnonzero(empty.to_numpy())[0]) + 2}: logger_kind is empty")
    df["logger_kind"] = df["logger_kind"].str.strip()
    df = df.drop_duplicates(["vehicle_id", "logger_kind"])
    clash = df["vehicle_id"].duplicated()
    if clash.any():
        line = int(df.index[clash.to_numpy()][0]) + 2
        raise UserError(f"{path}, line {line}: {df['vehicle_id'][clash].iloc[0]!r} has a second logger_kind")
    return df.set_index("vehicle_id")["logger_kind"]


# --------------------------------------------------------------- methods
def _tracktrue_result(fleet: ScoredFleet) -> MethodResult:
    st = fleet.status
    veh = pd.DataFrame({"vehicle_id": st["vehicle_id"], "order": st["rank"],
                        "flagged": st["status"].eq("inspect").to_numpy(), "component": st["suspected_component"]})
    per = fleet.drift.attrs["per_trip"]
    # what sends a vehicle to the workshop: sensor alerts (tyre-only drift is a "watch")
    trips = per[["vehicle_id", "start_time", "sensor_alert", "sensor_change_since"]]
    return MethodResult(veh, trips.rename(columns={"sensor_alert": "alert", "sensor_change_since": "since"}))


def _rolling_alert(trips: pd.DataFrame, hit: np.ndarray) -> pd.Series:
    s = pd.Series(hit.astype(float), index=trips.index)
    frac = s.groupby(trips["vehicle_id"].to_numpy()).transform(lambda x: x.rolling(ROLLING_TRIPS, min_periods=3).mean())
    return frac


def _component_of(feature: str) -> str:
    key = evidence_key(feature)
    pos = key.rsplit("_", 1)[-1] if key.startswith("wheel_") else None
    if key.startswith("wheel_signal_"):
        return f"wheel_sensor_{pos}"
    if key.startswith("wheel_ratio_"):
        return f"tyre_{pos}"
    base = key.split("_vs_")[0]
    return {"yaw": "yaw_sensor", "yaw_gain": "yaw_sensor", "steering": "steering_angle_sensor", "accel_long": "accel_long_sensor",
            "accel_lat": "accel_lat_sensor"}.get(base, "none")


def _single_feature_result(fleet: ScoredFleet) -> MethodResult:
    tf = fleet.trip_features.sort_values(["vehicle_id", "start_time"]).reset_index(drop=True)
    feats = fleet.scorer.features_
    x = tf[feats].astype(float)
    lo, hi = x.quantile(0.005), x.quantile(0.995)
    broken = (x.lt(lo) | x.gt(hi))
    frac = _rolling_alert(tf, broken.any(axis=1).to_numpy())
    trips = pd.DataFrame({"vehicle_id": tf["vehicle_id"], "start_time": tf["start_time"], "alert": frac >= 0.5})
    recent = tf.assign(**{f: broken[f] for f in feats}).groupby("vehicle_id").tail(ROLLING_TRIPS)
    counts = recent.groupby("vehicle_id")[feats].sum()
    last_frac = frac.groupby(tf["vehicle_id"]).last()
    comp = counts.idxmax(axis=1).map(_component_of).where(counts.max(axis=1) > 0, "none")
    veh = pd.DataFrame({"vehicle_id": last_frac.index, "frac": last_frac.to_numpy()})
    veh["order"] = veh["frac"].rank(ascending=False, method="first")
    veh["flagged"] = veh["frac"] >= 0.5
    veh["component"] = veh["vehicle_id"].map(comp).fillna("none")
    return MethodResult(veh.drop(columns="frac"), trips)


def _raw_forest_result(fleet: ScoredFleet) -> MethodResult:
    base = FleetScorer(normalise_features=False, random_state=fleet.scorer.random_state).fit(fleet.trip_features)
    ts = base.score_trips(fleet.trip_features)
    z = ts.groupby("vehicle_id")["score"].transform(
        lambda s: s.rolling(ROLLING_TRIPS, min_periods=3).median())
    z = (z - base.score_center_) / base.score_scale_
    trips = pd.DataFrame({"vehicle_id": ts["vehicle_id"], "start_time": ts["start_time"],
                          "alert": (z >= base.watch_score_z).to_numpy()})
    last = z.groupby(ts["vehicle_id"]).last()
    top = ts.groupby("vehicle_id").tail(ROLLING_TRIPS).groupby("vehicle_id")["top_feature"].agg(
        lambda s: s.mode().iloc[0] if len(s.dropna()) else None)
    veh = pd.DataFrame({"vehicle_id": last.index, "z": last.to_numpy()})
    veh["order"] = veh["z"].rank(ascending=False, method="first")
    veh["flagged"] = veh["z"] >= base.watch_score_z
    veh["component"] = veh["vehicle_id"].map(top).map(lambda f: _component_of(f) if isinstance(f, str) else "none")
    return MethodResult(veh.drop(columns="z"), trips)


# --------------------------------------------------------------- metrics
#: Onset-to-lamp span from which issue 5's lead-time target (≥ 21 days) applies: five weeks.
SLOW_FAULT_DAYS = 35


def _run_start_before(trips: pd.DataFrame, vehicle: str, before: pd.Timestamp, use_since: bool = True) -> dt.date | None:
    """Start of the alert run going on at the last trip before ``before``; with ``since``
    in ``trips`` (and ``use_since``), the change-point estimate where it reaches back further."""
    g = trips[(trips["vehicle_id"] == vehicle) & (trips["start_time"] < before)].sort_values("start_time")
    since = g["since"] if use_since and "since" in g.columns else None
    start = run_start(g["start_time"], g["alert"].fillna(False).to_numpy(dtype=bool), since)
    return start.date() if start is not None else None


def _metrics(result: MethodResult, truth: pd.DataFrame, as_of: dt.date, lamp_lit: set[str],
             unmeasured: set[str] = frozenset(), lead_zero: bool = False,
             random_order: bool = False) -> dict[str, float]:
    """The figures of one method (module doc); ``unmeasured``: vehicles whose logs carry no
    feature signal, left out of every figure but counted."""
    result = _restrict(result, unmeasured, keep=False)
    t_all = truth[truth["onset_date"] <= as_of]
    t = t_all[~t_all["vehicle_id"].isin(unmeasured)]
    is_tyre = t["component"].str.startswith("tyre_")
    lit = t["lamp_date"].map(lambda d: d is not None and not pd.isna(d) and d <= as_of)
    not_early = t["growth"].isin(NOT_EARLY_GROWTH) & ~is_tyre
    positives = set(t.loc[~is_tyre & ~lit & ~not_early, "vehicle_id"])
    # a sudden fault before its lamp is neither a positive nor healthy: out of the ranking
    excluded = lamp_lit | set(t.loc[lit, "vehicle_id"]) | set(t.loc[not_early, "vehicle_id"])
    veh = result.vehicles[~result.vehicles["vehicle_id"].isin(excluded)].sort_values("order")
    k = len(positives)
    if random_order:
        precision = k / len(veh) if k and len(veh) else np.nan
    else:
        precision = len(set(veh["vehicle_id"].head(k)) & positives) / k if k else np.nan
    flagged = set(veh.loc[veh["flagged"], "vehicle_id"])
    flagged_any = set(result.vehicles.loc[result.vehicles["flagged"].astype(bool), "vehicle_id"])
    recall = len(flagged & positives) / k if k else np.nan
    comp = result.vehicles.set_index("vehicle_id")["component"]
    sensor = t[~is_tyre & t["vehicle_id"].isin(flagged_any | set(t.loc[lit, "vehicle_id"]))]
    attributed = sensor[sensor["vehicle_id"].map(comp).fillna("none") != "none"]
    attribution = (attributed["vehicle_id"].map(comp) == attributed["component"]).mean() if len(attributed) else np.nan
    tyres = t[is_tyre]
    named = tyres["vehicle_id"].map(comp).fillna("none")
    # classed as tyre: the manager checks tyres, not a sensor (issue 5's figure); at the right wheel: stricter
    tyre_ok = named.str.startswith("tyre_").mean() if len(tyres) else np.nan
    tyre_wheel = (named == tyres["component"]).mean() if len(tyres) else np.nan
    sudden = set(t.loc[not_early, "vehicle_id"])
    found = (flagged_any | lamp_lit | set(t.loc[lit, "vehicle_id"])) & sudden
    leads, slow_leads, fracs, alarm_fracs, after_onset = [], [], [], [], []
    for r in t[lit & ~is_tyre & ~not_early].itertuples():
        lamp = pd.Timestamp(r.lamp_date, tz="UTC")
        span = max(1, (r.lamp_date - r.onset_date).days)
        for use_since, out in ((True, fracs), (False, alarm_fracs)):
            start = None if lead_zero else _run_start_before(result.trips, r.vehicle_id, lamp, use_since)
            lead = max(0, (r.lamp_date - start).days) if start else 0
            out.append(min(1.0, lead / span))
            if use_since:
                leads.append(lead)
                if start:
                    after_onset.append((start - r.onset_date).days)
                if span >= SLOW_FAULT_DAYS:
                    slow_leads.append(lead)
    healthy = set(result.trips["vehicle_id"]) - set(truth["vehicle_id"])
    ht = result.trips[result.trips["vehicle_id"].isin(healthy)].sort_values(["vehicle_id", "start_time"])
    a = ht["alert"].fillna(False).astype(bool)
    starts = int((a & ~a.groupby(ht["vehicle_id"]).shift(1, fill_value=False).astype(bool)).sum())
    span_days = ht.groupby("vehicle_id")["start_time"].agg(lambda s: max(1.0, (s.max() - s.min()).total_seconds() / 86400))
    vdays = float(span_days.sum()) if len(span_days) else np.nan
    return {
        "k (unlit sensor faults)": float(k),
        "precision_at_k": float(precision),
        "recall": float(recall),
        "median_lead_days": float(np.median(leads)) if leads else np.nan,
        "median_lead_days_slow": float(np.median(slow_leads)) if slow_leads else np.nan,
        "median_lead_fraction": float(np.median(fracs)) if fracs else np.nan,
        "median_alarm_lead_fraction": float(np.median(alarm_fracs)) if alarm_fracs else np.nan,
        "median_since_after_onset_days": float(np.median(after_onset)) if after_onset else np.nan,
        "since_before_onset_share": float(np.mean(np.less(after_onset, 0))) if after_onset else np.nan,
        "false_alarms_pct_per_30d": 100.0 * starts / (vdays / 30.0) if vdays else np.nan,
        "healthy_vehicle_days_per_false_alarm": vdays / starts if starts else np.inf,
        "attribution_accuracy": float(attribution),
        "tyres_classed_tyre": float(tyre_ok),
        "tyres_at_right_wheel": float(tyre_wheel),
        "not_detectable_early (sudden/intermittent faults)": float(len(sudden)),
        "not_early_found": len(found) / len(sudden) if sudden else np.nan,
        "faults_without_sensor_signals": float(t_all["vehicle_id"].isin(unmeasured).sum()),
    }


def evaluate(store: Store, truth_csv: Path | None, as_of: dt.date | None, early: bool = True,
             outcomes: pd.DataFrame | None = None) -> EvaluationReport:
    """Evaluate against truth (all methods) or, without truth, backtest on lamp events.

    ``outcomes`` are inspection outcomes recorded by the workshop (vehicle_id,
    date, outcome, component, note); each is compared with what tracktrue had
    flagged before that inspection.
    """
    fleet = score_fleet(store, as_of)
    inspections = _inspections(fleet, outcomes) if outcomes is not None and len(outcomes) else None
    if truth_csv is None:
        return EvaluationReport(fleet.as_of, {}, backtest=_backtest(fleet), inspections=inspections,
                                notes=["without a truth file the first lamp event of each vehicle is the event"])
    truth = read_truth(Path(truth_csv))
    loggers = read_loggers(Path(truth_csv))
    report = _evaluate_fleet(fleet, truth, loggers)
    report.inspections = inspections
    onsets = pd.to_datetime(pd.Series(truth["onset_date"]))
    early_date = (onsets.median() + pd.Timedelta(days=7)).date() if len(onsets) else None
    if early and early_date is not None and early_date < fleet.as_of:
        try:
            report.early = _evaluate_fleet(score_fleet(store, early_date), truth, loggers)
        except UserError as exc:
            report.notes.append(f"early evaluation at {early_date} skipped: {exc}")
    return report


def vehicle_loggers(fleet: ScoredFleet, loggers: pd.Series | None) -> pd.Series:
    """Logger kind per vehicle: loggers.csv (ground truth) first, else the most frequent
    ``logger_kind`` of the vehicle's trips in trip_features, else ``unknown``."""
    vids = pd.Index(fleet.status["vehicle_id"].unique())
    kind = pd.Series("unknown", index=vids, dtype=object)
    tf = fleet.trip_features
    if "logger_kind" in tf.columns:
        seen = tf.dropna(subset=["logger_kind"]).groupby("vehicle_id")["logger_kind"].agg(lambda s: s.mode().iloc[0])
        kind.update(seen.astype(str))
    if loggers is not None:
        kind.update(loggers[loggers.index.isin(vids)])
    return kind


def unmeasured_vehicles(fleet: ScoredFleet, kinds: pd.Series) -> set[str]:
    """Vehicles no feature can speak for: no trip with a computable feature, or a logger
    kind that records no chassis sensor (a data property, the same for every method)."""
    tf = fleet.trip_features
    measured = tf[fleet.scorer.features_].notna().any(axis=1).groupby(tf["vehicle_id"]).any()
    return set(measured.index[~measured]) | set(kinds.index[kinds.isin(NO_SENSOR_LOGGERS)])


def _evaluate_fleet(fleet: ScoredFleet, truth: pd.DataFrame, loggers: pd.Series | None = None) -> EvaluationReport:
    kinds = vehicle_loggers(fleet, loggers)
    unmeasured = unmeasured_vehicles(fleet, kinds)
    results = _method_results(fleet)
    report = EvaluationReport(fleet.as_of, _method_metrics(fleet, results, truth, unmeasured))
    if kinds.nunique() > 1 or loggers is not None:
        for kind in sorted(kinds.unique()):
            vids = set(kinds.index[kinds == kind])
            report.by_logger[kind] = _method_metrics(fleet, results, truth, unmeasured, vids)
    if unmeasured:
        report.notes.append(f"{len(unmeasured)} vehicle(s) whose logs carry no feature signal (e.g. telematics: "
                            "vehicle speed and lamps only) are left out of every figure and shown as "
                            "insufficient_data; only their lamps speak for them")
    return report


def _method_results(fleet: ScoredFleet) -> dict[str, tuple[MethodResult, dict]]:
    """tracktrue and the three baselines on the same trips, with their metric options."""
    return {
        "tracktrue": (_tracktrue_result(fleet), {}),
        "lamp_only": (MethodResult(
            pd.DataFrame({"vehicle_id": fleet.status["vehicle_id"], "order": 1, "flagged": False, "component": "none"}),
            fleet.drift.attrs["per_trip"][["vehicle_id", "start_time"]].assign(alert=False)),
            {"lead_zero": True, "random_order": True}),
        "single_feature": (_single_feature_result(fleet), {}),
        "raw_forest": (_raw_forest_result(fleet), {}),
    }


def _method_metrics(fleet: ScoredFleet, results: dict[str, tuple[MethodResult, dict]], truth: pd.DataFrame,
                    unmeasured: set[str], within: set[str] | None = None) -> dict[str, dict[str, float]]:
    """Every method's figures, on the whole fleet or ``within`` a set of vehicles."""
    lamp_lit = set(fleet.status.loc[fleet.status["status"].eq("lamp_lit"), "vehicle_id"])
    if within is not None:
        truth = truth[truth["vehicle_id"].isin(within)]
        results = {name: (_restrict(res, within), kw) for name, (res, kw) in results.items()}
    metrics = {name: _metrics(res, truth, fleet.as_of, lamp_lit, unmeasured, **kw) for name, (res, kw) in results.items()}
    metrics["lamp_only"]["attribution_accuracy"] = np.nan
    metrics["lamp_only"]["tyres_classed_tyre"] = metrics["lamp_only"]["tyres_at_right_wheel"] = np.nan
    return metrics


def _restrict(result: MethodResult, vehicles: set[str], keep: bool = True) -> MethodResult:
    """The result on ``vehicles`` only (``keep``) or on all others."""
    v = result.vehicles["vehicle_id"].isin(vehicles) == keep
    t = result.trips["vehicle_id"].isin(vehicles) == keep
    return MethodResult(result.vehicles[v], result.trips[t])


def _flag_runs(fleet: ScoredFleet) -> pd.DataFrame:
    """Per trip: any alert and the change-point estimate behind it (what flagged_since shows)."""
    per = fleet.drift.attrs["per_trip"]
    return per[["vehicle_id", "start_time", "alert", "change_since"]].rename(columns={"change_since": "since"})


def _backtest(fleet: ScoredFleet) -> pd.DataFrame:
    """First lamp event per vehicle: how many days earlier tracktrue's alert run began."""
    lamps = fleet.lamps.sort_values(["vehicle_id", "start_time"])
    trips = _flag_runs(fleet)
    rows = []
    for vid, g in lamps.groupby("vehicle_id"):
        ev = g[g["lamp_event"]]
        if ev.empty:
            continue
        i = g.index.get_loc(ev.index[0])
        on = g["lamp_on"].to_numpy()
        while i > 0 and on[i - 1]:  # the event began with the first lit trip of its run
            i -= 1
        when = pd.Timestamp(g["start_time"].iloc[i])
        start = _run_start_before(trips, vid, when)
        rows.append({"vehicle_id": vid, "lamp_event": when.date(), "flagged_since": start,
                     "days_earlier": (when.date() - start).days if start else 0})
    return pd.DataFrame(rows, columns=["vehicle_id", "lamp_event", "flagged_since", "days_earlier"])



def _inspections(fleet: ScoredFleet, outcomes: pd.DataFrame) -> pd.DataFrame:
    """Each recorded inspection beside the alert run (if any) that began before it."""
    trips = _flag_runs(fleet)
    suspected = fleet.status.set_index("vehicle_id")["suspected_component"]
    rows = []
    for rec in outcomes.itertuples(index=False):  # one row per inspection, not per sample
        when = pd.Timestamp(rec.date)
        when = when.tz_localize("UTC") if when.tzinfo is None else when
        start = _run_start_before(trips, rec.vehicle_id, when)
        found = rec.component if rec.outcome == "fault_found" else "none"
        rows.append({"vehicle_id": rec.vehicle_id, "inspected": when.date(), "outcome": rec.outcome,
                     "component_found": found, "flagged_since": start,
                     "suspected_component": suspected.get(rec.vehicle_id, "none") if start else "none"})
    return pd.DataFrame(rows, columns=["vehicle_id", "inspected", "outcome", "component_found",
                                       "flagged_since", "suspected_component"])


def _inspection_summary(table: pd.DataFrame) -> str:
    flagged = table["flagged_since"].notna()
    found = table["outcome"].eq("fault_found")
    agree = found & flagged & table["component_found"].eq(table["suspected_component"])
    return (f"  flagged before inspection: {int(flagged.sum())} of {len(table)}; "
            f"faults found on flagged vehicles: {int((found & flagged).sum())} of {int(flagged.sum())}; "
            f"component agreed: {int(agree.sum())} of {int((found & flagged).sum())}; "
            f"faults found on vehicles not flagged: {int((found & ~flagged).sum())}")
