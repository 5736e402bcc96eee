"""The fleet scorer: peer normalisation → trip forest → vehicle score, drift and attribution.

A scikit-learn-style estimator (STYLE.md): ``__init__`` stores the
hyper-parameters and nothing else, ``fit(trip_features)`` learns the peer
statistics, the forest and the drift calibration (state ends in ``_``),
``score_trips`` and ``rank`` are pure given the fitted state.

Vehicle score: the median trip score over the vehicle's last
``vehicle_trips`` trips — one odd trip (gravel, a trailer) moves a median of
ten by at most one order statistic.

Drift: one statistic per evidence key of models.attribution (4 wheel signal,
4 wheel ratio, and the yaw / steering / accelerometer residual groups: at most
16, not one per feature), each the mean of its features' z-scores on a trip
(wheel-signal keys minus the median of the four wheels, so a rough road that
shakes every wheel cancels), referred to the vehicle's *own* baseline (a
lagged expanding median since the last service event, models.service) and
divided by the peer group's pooled within-vehicle spread (floored at
``within_floor`` peer spreads, inflated for lag-1 autocorrelation). That makes
the CUSUM a detector of *change*; a persistent offset against the peers is
the peer comparison's business. Values are winsorised at ±``drift_clip`` (a
Huber-type robust CUSUM): one trip cannot cross ``h`` alone (``drift_clip − k
< h``). ``h`` comes from the false-alarm budget (models.drift). A non-wheel
statistic alarms only while its level has moved ``min_change_z`` peer spreads
from its baseline (``_relevant``): the CUSUM finds any persistent change, and
one that leaves the vehicle within a healthy between-vehicle spread is no fault.

A trip *alerts* when a drift statistic is above h, when the rolling median of
an evidence key's peer z is beyond ``inspect_evidence_z`` (a fault present
before the baseline was taken; for a wheel, also its dropouts once they recur
on ``recurring_trips`` of its last ``vehicle_trips`` trips), or when the rolling vehicle score exceeds
median + ``inspect_score_z`` scaled MADs of the fleet's vehicle scores; an
alert is held for ``alert_hold_trips`` trips. A *sensor* alert leaves out
ratio-only evidence (a tyre) and versus-wheels residuals while a wheel ratio
is off. A drift alarm on a non-wheel sensor counts only when a residual
against a second source agrees (at ``confirm_strength``·h; rows in
models.attribution.COMPONENT_RESIDUALS): on the tuning seeds every false
sensor alert on a healthy vehicle came from one residual alone — a lateral
level at rest moved by the road bank of the stops, yaw against steering moved
by load and route. Where one residual must decide alone (the only witness a
logger measures, or models.attribution.SOLE_WITNESS), its CUSUM must reach
``sole_cusum_h_`` instead of h: the threshold that holds the budget for a
baseline off by one standard error (models.drift, "Uncorroborated
statistics"; on the tuning seeds the polled loggers' false alerts were one
standstill accelerometer level whose CUSUM crept to h on a baseline median of
ten trips). Once raised, a sensor alert stands while some sensor
residual stays at ``confirm_strength``·h (hysteresis: one episode, one alert).
``inspect`` needs a sensor alert on a sensor component; ``flagged_since`` is
the date of the first trip of the current run of alerts, or earlier where an
alarming statistic's maximum-likelihood change point (models.drift.change_point)
lies before it.
"""

from __future__ import annotations

import logging
import warnings

import numpy as np
import pandas as pd

from models.attribution import (COMPONENT_RESIDUALS, POSITION_WORDS, SOLE_WITNESS, choose_component, residuals_of,
                                single_wheel_radius_fit, suggestion_for, tyre_moves)
from models.drift import baseline_error, change_point, required_arl0, tabular_cusum, threshold_for_arl
from models.feature_set import describe_feature, evidence_key, model_features
from models.forest import SubspaceForests
from models.ordering import SENSOR_COMPONENTS, ranked
from models.service import FAMILIES, WHEEL_SCALE_STATISTICS, epoch_keys, service_table, statistic_family
from models.peers import (MAD_TO_SIGMA, MIN_FEATURE_PEERS, assign_peer_groups, lookup_statistics, normalise,
                          peer_statistics, reference_sample)
from tracktrue.errors import UserError
from tracktrue.schema import POSITIONS

log = logging.getLogger(__name__)

#: A wheel-ratio change this large (in %) against the vehicle's own early trips is a
#: tyre change worth locating (a 20–30 % pressure loss moves the ratio roughly
#: 0.1–0.5 %: CHECKS.md, from memory).
OWN_TYRE_CHANGE_PCT = 0.1
#: One tyre's own rolling-radius change (in %) that puts an otherwise quiet vehicle on watch:
#: the top of the range a markedly low pressure gives (0.1–0.5 %, CHECKS.md, from memory),
#: so a tyre this far off is soft, damaged or of another size and worth a pressure and size check.
TYRE_WATCH_RADIUS_PCT = 0.5
#: ... when a single tyre's pattern explains this share of the four ratios' change: new tyres on
#: an axle or a set, and the trip-to-trip scatter, fit one tyre poorly.
TYRE_PATTERN_SHARE = 0.9


#: The yaw gain and the wheels' speed-scale witness (features.accel.lat_scale_witness), for _scale_explained.
SCALE_WITNESS_INPUTS: tuple[str, ...] = ("yaw_gain", "scale_ay_per_vr")


class FleetScorer:
    """Rank a fleet's vehicles by sensor disagreement (see module doc for the method)."""

    def __init__(
        self,
        min_peer_vehicles: int = 5,
        ref_trips_per_vehicle: int = 30,
        min_ref_trips: int = 10,
        rel_floor: float = 0.1,
        recent_days: float = 28.0,
        n_estimators: int = 200,
        max_samples: int = 256,
        max_trips_per_vehicle: int = 5,
        random_state: int = 0,
        vehicle_trips: int = 10,
        min_trips: int = 3,
        baseline_trips: int = 10,
        min_baseline_trips: int = 6,
        cusum_k: float = 0.75,
        drift_clip: float = 3.0,
        forest_clip: float = 30.0,
        baseline_lag_trips: int = 15,
        within_floor: float = 0.5,
        budget_vehicle_days: float = 1500.0,
        trips_per_day: float | None = None,
        alert_hold_trips: int = 5,
        recurring_trips: int = 3,
        confirm_strength: float = 0.5,
        min_change_z: float = 1.0,
        inspect_score_z: float = 8.0,
        watch_score_z: float = 4.0,
        signal_z: float = 4.0,
        attribution_z: float = 4.0,
        watch_evidence_z: float = 6.0,
        inspect_evidence_z: float = 8.0,
        normalise_features: bool = True,
    ):
        self.min_peer_vehicles = min_peer_vehicles
        self.ref_trips_per_vehicle = ref_trips_per_vehicle
        self.min_ref_trips = min_ref_trips
        self.rel_floor = rel_floor
        self.recent_days = recent_days
        self.n_estimators = n_estimators
        self.max_samples = max_samples
        self.max_trips_per_vehicle = max_trips_per_vehicle
        self.random_state = random_state
        self.vehicle_trips = vehicle_trips
        self.min_trips = min_trips
        self.baseline_trips = baseline_trips
        self.min_baseline_trips = min_baseline_trips
        self.cusum_k = cusum_k
        self.drift_clip = drift_clip
        self.forest_clip = forest_clip
        self.baseline_lag_trips = baseline_lag_trips
        self.within_floor = within_floor
        self.budget_vehicle_days = budget_vehicle_days
        self.trips_per_day = trips_per_day
        self.alert_hold_trips = alert_hold_trips
        self.recurring_trips = recurring_trips
        self.confirm_strength = confirm_strength
        self.min_change_z = min_change_z
        self.inspect_score_z = inspect_score_z
        self.watch_score_z = watch_score_z
        self.signal_z = signal_z
        self.attribution_z = attribution_z
        self.watch_evidence_z = watch_evidence_z
        self.inspect_evidence_z = inspect_evidence_z
        self.normalise_features = normalise_features

    # ------------------------------------------------------------------ fit
    def get_params(self) -> dict:
        return {k: getattr(self, k) for k in self.__init__.__code__.co_varnames[1:self.__init__.__code__.co_argcount]}

    def fit(self, trip_features: pd.DataFrame, service_events: pd.DataFrame | None = None) -> "FleetScorer":
        df = trip_features.copy()
        df["start_time"] = pd.to_datetime(df["start_time"], utc=True)
        df = df.sort_values(["vehicle_id", "start_time"], kind="stable").reset_index(drop=True)
        self.features_ = model_features(df)
        if not self.features_:
            raise ValueError("trip_features holds no model feature columns")
        df[["peer_group", "peer_fallback"]] = assign_peer_groups(df, self.min_peer_vehicles)
        self.peer_stats_ = peer_statistics(reference_sample(df, self.ref_trips_per_vehicle), self.features_,
                                           self.rel_floor, self.min_ref_trips)
        self.fallback_groups_ = sorted(df.loc[df["peer_fallback"], "peer_group"].unique().tolist())
        self.as_of_ = df["start_time"].max()
        recent = df[df["start_time"] >= self.as_of_ - pd.Timedelta(days=self.recent_days)]
        design = self._design(recent)
        self.forest_ = SubspaceForests(self._subspaces(), n_estimators=self.n_estimators,
                                       max_samples=self.max_samples, max_trips_per_vehicle=self.max_trips_per_vehicle,
                                       value_clip=self.forest_clip, random_state=self.random_state)
        self.forest_.fit(design, recent["vehicle_id"], recent["start_time"], neutral_zero=self.normalise_features)
        self.service_events_ = service_table(service_events)
        # drift calibration: statistics, baselines, pooled within-vehicle spread, threshold
        stats = self._drift_statistics(df)
        self.statistics_ = [c for c in stats.columns if stats[c].notna().any()]
        if not self.statistics_ and not df[self.features_].notna().to_numpy().any():
            raise UserError(
                f"nothing to score: none of the {len(df)} trip(s) of {df['vehicle_id'].nunique()} vehicle(s) "
                "carries a signal any feature can use (wheel speeds, yaw rate, steering angle, accelerometers; "
                "a telematics unit logging vehicle speed and lamps only measures no sensor)")
        if not self.statistics_:
            raise UserError(
                f"too little data to score yet: {len(df)} trip(s) of {df['vehicle_id'].nunique()} vehicle(s), and "
                f"no feature has a peer norm (each needs {self.min_ref_trips} or more trips from at least "
                f"{MIN_FEATURE_PEERS} vehicles of a peer group that measure it); add more logs and score again")
        base, in_base, _ = self._baselines(df, stats)
        # deviations of trips *outside* the baseline they are compared with (inside it,
        # a trip pulls its own baseline towards itself and the spread comes out too small)
        spread = stats[self.statistics_].sub(base).abs().mask(in_base)
        per_vehicle = spread.groupby([df["peer_group"].to_numpy(), df["vehicle_id"].to_numpy()]).median() * MAD_TO_SIGMA
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            fleet_sigma = per_vehicle.median().fillna(1.0).clip(lower=self.within_floor)
            by_group = per_vehicle.groupby(level=0).median()
        by_group = by_group.fillna(fleet_sigma).clip(lower=self.within_floor)
        # a within-vehicle spread pooled over fewer than three vehicles is too noisy: use the fleet's
        small = per_vehicle.groupby(level=0).size() < 3
        by_group.loc[small[small].index] = fleet_sigma.to_numpy()
        # trips of one vehicle are not independent (weather, routes, temperature drift of
        # offsets): scale by the long-run factor √((1+ρ)/(1−ρ)) of an AR(1) sequence, ρ the
        # pooled lag-1 autocorrelation of each statistic's in-control deviations
        self.autocorrelation_ = self._lag1(stats[self.statistics_].sub(base).mask(in_base), df["vehicle_id"])
        inflate = np.sqrt((1 + self.autocorrelation_) / (1 - self.autocorrelation_))
        self.within_sigma_ = by_group * inflate
        fleet_sigma = fleet_sigma * inflate
        self.fleet_within_sigma_ = fleet_sigma
        days = (df.groupby("vehicle_id")["start_time"].agg(lambda s: s.dt.floor("D").nunique()))
        n = df.groupby("vehicle_id").size()
        self.trips_per_day_ = float(self.trips_per_day or max(1.0, float(np.median(n / days))))
        self.arl0_ = required_arl0(len(self.statistics_), self.trips_per_day_, self.budget_vehicle_days)
        self.cusum_h_ = threshold_for_arl(self.cusum_k, self.arl0_)
        self.sole_cusum_h_ = threshold_for_arl(self.cusum_k, self.arl0_, baseline_error(self.baseline_trips))
        # fleet score thresholds from the spread of vehicle scores
        vscore = self._vehicle_scores(recent.assign(score=self.forest_.score(design)))
        med = float(vscore.median())
        mad = float((vscore - med).abs().median() * MAD_TO_SIGMA) or 1e-3
        self.score_center_, self.score_scale_ = med, max(mad, 1e-3)
        log.info("fitted on %d trips, %d features, h=%.2f (ARL0 %.0f trips)", len(df), len(self.features_),
                 self.cusum_h_, self.arl0_)
        return self

    # ------------------------------------------------------------- helpers
    @staticmethod
    def _lag1(dev: pd.DataFrame, vehicle: pd.Series) -> pd.Series:
        """Median over vehicles of each statistic's lag-1 autocorrelation, clipped to [0, 0.8]."""
        prev = dev.groupby(vehicle.to_numpy()).shift(1)
        both = dev.notna() & prev.notna()
        a, b = dev.where(both), prev.where(both)
        g = vehicle.to_numpy()
        ca = a - a.groupby(g).transform("mean")
        cb = b - b.groupby(g).transform("mean")
        num = (ca * cb).groupby(g).sum(min_count=5)
        den = np.sqrt((ca ** 2).groupby(g).sum(min_count=5) * (cb ** 2).groupby(g).sum(min_count=5))
        with np.errstate(all="ignore"):
            rho = (num / den).median()
        return rho.fillna(0.0).clip(0.0, 0.8)

    def _design(self, df: pd.DataFrame, z: pd.DataFrame | None = None) -> pd.DataFrame:
        """Forest input: peer z-scores, or raw features for the un-normalised baseline."""
        if not self.normalise_features:
            return df[self.features_].astype(float)
        return z if z is not None else normalise(df, self.peer_stats_, self.features_)

    def _subspaces(self) -> dict[str, list[str]]:
        """Component subspaces for the forests (models.forest.SubspaceForests): one per
        wheel, yaw, steering and each accelerometer; the baseline uses one forest on all."""
        if not self.normalise_features:
            return {"all": list(self.features_)}
        groups: dict[str, list[str]] = {}
        for f in self.features_:
            key = evidence_key(f)
            name = ("wheel_" + key.rsplit("_", 1)[1]) if key.startswith("wheel_") else key.split("_vs_")[0]
            groups.setdefault(name, []).append(f)
        return groups

    def _vehicle_scores(self, scored: pd.DataFrame) -> pd.Series:
        recent = scored.sort_values("start_time").groupby("vehicle_id").tail(self.vehicle_trips)
        return recent.groupby("vehicle_id")["score"].median()

    def _key_means(self, z: pd.DataFrame, clip: float) -> pd.DataFrame:
        """Per trip, the mean clipped z of each evidence key's features."""
        z = z.clip(-clip, clip)
        keys = {f: evidence_key(f) for f in self.features_}
        out = {}
        for key in sorted(set(keys.values())):
            cols = [f for f, k in keys.items() if k == key]
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", RuntimeWarning)
                out[key] = np.nanmean(z[cols].to_numpy(dtype=float), axis=1)
        return _remove_common_mode(pd.DataFrame(out, index=z.index))

    def _drift_statistics(self, df: pd.DataFrame) -> pd.DataFrame:
        """Drift inputs per trip, in a unit common to the peer group (not leave-one-out:
        the vehicle's own baseline removes its offset, and the scale must be shared
        for the pooled within-vehicle spread to mean the same for every vehicle)."""
        return self._key_means(normalise(df, self.peer_stats_, self.features_, leave_one_out=False),
                               clip=self.forest_clip)

    def _baselines(self, df: pd.DataFrame, stats: pd.DataFrame):
        """Each trip's own-vehicle baseline per statistic: a lagged expanding median.

        Returns (baseline values, in-baseline mask, epoch key per family);
        df must be sorted by vehicle and time (series are contiguous rows).

        Trip t of a (vehicle, epoch) series is compared with the median of its
        trips [0, max(baseline_trips, t − baseline_lag_trips)): at first the
        early trips, later all history but the most recent ``baseline_lag_trips``
        (so a developing fault is not absorbed). A short fixed baseline would
        leave each series a persistent estimation error of 1.25σ/√n, which a
        CUSUM turns into false alarms; the growing history shrinks it.
        Undefined (NaN) until ``min_baseline_trips`` values exist.
        """
        base = pd.DataFrame(index=df.index, columns=self.statistics_, dtype=float)
        in_base = pd.DataFrame(False, index=df.index, columns=self.statistics_)
        keys = {}
        for family in FAMILIES:
            cols = [c for c in self.statistics_ if statistic_family(c) == family]
            key = epoch_keys(df, self.service_events_, family)
            keys[family] = key
            if not cols:
                continue
            base[cols], in_base[cols] = self._lagged_baseline(stats[cols], key)
        return base, in_base, keys

    def _lagged_baseline(self, values: pd.DataFrame, key: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """(baseline, in-baseline mask) of ``values`` per series of ``key``, by _baselines' rule."""
        codes = pd.factorize(key)[0]
        order = pd.Series(codes).groupby(codes).cumcount().to_numpy()
        expanding = values.reset_index(drop=True).groupby(codes).expanding(
            min_periods=self.min_baseline_trips).median().reset_index(level=0, drop=True).sort_index()
        upto = np.maximum(self.baseline_trips, order - self.baseline_lag_trips)  # exclusive end
        size = pd.Series(order).groupby(codes).transform("size").to_numpy()
        row = np.arange(len(values)) - order + np.minimum(upto, size) - 1  # series are contiguous rows
        return expanding.to_numpy()[row], np.repeat((order < self.baseline_trips)[:, None], values.shape[1], axis=1)

    # ------------------------------------------------------------ scoring
    def score_trips(self, trip_features: pd.DataFrame) -> pd.DataFrame:
        """One row per trip: TRIP_SCORES_COLUMNS, peer_fallback, z_<feature>, drift statistics."""
        df = trip_features.copy()
        df["start_time"] = pd.to_datetime(df["start_time"], utc=True)
        df = df.sort_values(["vehicle_id", "start_time"], kind="stable").reset_index(drop=True)
        df[["peer_group", "peer_fallback"]] = assign_peer_groups(df, self.min_peer_vehicles)
        z = normalise(df, self.peer_stats_, self.features_)
        design = self._design(df, z)
        absz = z.abs().fillna(-1.0)
        top = absz.to_numpy().argmax(axis=1) if len(df) else np.array([], dtype=int)
        out = df[["trip_id", "vehicle_id", "start_time", "peer_group", "peer_fallback", "platform"]].copy()
        out["score"] = self.forest_.score(design) if len(df) else np.array([])
        out["top_feature"] = np.array(self.features_, dtype=object)[top] if len(df) else []
        out["top_z"] = z.to_numpy()[np.arange(len(df)), top] if len(df) else []
        zcols = z.add_prefix("z_")
        return pd.concat([out, zcols], axis=1)

    def drift(self, trip_features: pd.DataFrame, trip_scores: pd.DataFrame) -> pd.DataFrame:
        """VEHICLE_DRIFT_COLUMNS long table, plus the per-trip ``alert`` in a wide frame (``.attrs``)."""
        df = trip_scores[["trip_id", "vehicle_id", "start_time", "peer_group", "score"]].copy()
        by_trip = trip_features.set_index("trip_id")
        feats = by_trip.loc[df["trip_id"], self.features_].reset_index(drop=True)
        stats = self._drift_statistics(pd.concat([df, feats], axis=1))[self.statistics_]
        base, in_base, keys = self._baselines(df, stats)
        groups = trip_scores["peer_group"].to_numpy()
        sigma = self.within_sigma_.reindex(groups)[self.statistics_].fillna(self.fleet_within_sigma_)
        u = ((stats - base) / sigma.to_numpy()).clip(-self.drift_clip, self.drift_clip)
        u = u.mask(in_base)  # the baseline trips are the reference, not evidence
        hi = np.zeros(u.shape)
        lo = np.zeros(u.shape)
        for family in FAMILIES:
            idx = [j for j, c in enumerate(self.statistics_) if statistic_family(c) == family]
            if idx:
                hi[:, idx], lo[:, idx] = _cusum_by_group(u.iloc[:, idx], keys[family], self.cusum_k)
        strength = self._relevant(np.maximum(hi, lo) / self.cusum_h_, (stats - base).mask(in_base), keys)
        witness = [c for c in SCALE_WITNESS_INPUTS if c in by_trip.columns]
        strength = self._scale_explained(strength, by_trip.loc[df["trip_id"], witness], keys["tyre"])
        alarm = strength > 1.0
        vehicle_key = keys["sensor"]
        rolling = (df.groupby(vehicle_key)["score"]
                   .transform(lambda s: s.rolling(self.vehicle_trips, min_periods=self.min_trips).median()))
        score_alert = ((rolling - self.score_center_) / self.score_scale_ >= self.inspect_score_z).to_numpy()
        kinds = np.array([_alarm_kind(c) for c in self.statistics_])
        ratio_strength = strength[:, kinds == "ratio"].max(axis=1) if (kinds == "ratio").any() else np.zeros(len(df))
        wheel_signal = np.array([c.startswith("wheel_signal_") for c in self.statistics_])
        measured = u.notna().groupby(vehicle_key).cummax().to_numpy(dtype=bool)
        confirmed = self._corroborated(strength, ratio_strength < 0.5, measured=measured,
                                       sole=self.sole_cusum_h_ / self.cusum_h_)
        sensor_alarm = alarm[:, wheel_signal].any(axis=1) | np.any(list(confirmed.values()) or [False], axis=0)
        recurring = self._recurring_dropouts(trip_scores, vehicle_key)
        peer_any, peer_sensor = self._peer_alarms(trip_scores, vehicle_key, recurring)
        wide = df[["trip_id", "vehicle_id", "start_time"]].copy()
        wide["drift_alarm"] = alarm.any(axis=1)
        wide["peer_alarm"] = peer_any
        wide["score_alert"] = score_alert
        # hold an alert for alert_hold_trips trips: a CUSUM hovering at h is one episode, not many
        wide["alert"] = self._held(wide["drift_alarm"] | peer_any | score_alert, vehicle_key)
        # hysteresis: a sensor alert, once raised, stands while some sensor residual stays at
        # confirm_strength·h or more (a CUSUM hovering about h is one episode, not several)
        raised = sensor_alarm | peer_sensor | score_alert
        witnesses = sorted(set().union(*map(residuals_of, COMPONENT_RESIDUALS)))
        sensor_stats = wheel_signal | np.isin(self.statistics_, witnesses)
        gated = np.where((kinds == "vs_wheels")[None, :] & (ratio_strength >= 0.5)[:, None], 0.0, strength)
        sustained = raised | (gated[:, sensor_stats].max(axis=1, initial=0.0) >= self.confirm_strength)
        wide["sensor_alert"] = self._held(_latched(raised, sustained, vehicle_key), vehicle_key)
        wide["epoch_key"] = vehicle_key
        # where each alarming statistic's change began (_change_rows); flagged_since reaches
        # back to it (see _run_start)
        started = pd.to_datetime(df["start_time"], utc=True)
        days = started.astype("int64").to_numpy() / 86_400e9
        begun = np.full(hi.shape, len(df), dtype=np.int64)
        for family in FAMILIES:
            idx = [j for j, c in enumerate(self.statistics_) if statistic_family(c) == family]
            if idx:
                begun[:, idx] = _change_rows(u.iloc[:, idx].to_numpy(), hi[:, idx] >= lo[:, idx], alarm[:, idx],
                                             keys[family], days)
        times = np.append(started.to_numpy(), np.datetime64("NaT"))
        wide["change_since"] = times[begun.min(axis=1, initial=len(df))]
        wide["sensor_change_since"] = times[np.where(sensor_stats[None, :], begun, len(df)).min(axis=1, initial=len(df))]
        for component, hit in confirmed.items():
            wide[f"confirmed__{component}"] = hit
        for j, s in enumerate(self.statistics_):
            wide[f"strength__{s}"] = strength[:, j]
        for c in recurring.columns:
            wide[f"recurring__{c}"] = recurring[c].to_numpy()
        long = pd.DataFrame({
            "vehicle_id": np.repeat(df["vehicle_id"].to_numpy(), len(self.statistics_)),
            "trip_id": np.repeat(df["trip_id"].to_numpy(), len(self.statistics_)),
            "start_time": np.repeat(df["start_time"].to_numpy(), len(self.statistics_)),
            "statistic": np.tile(np.array(self.statistics_, dtype=object), len(df)),
            "value": u.to_numpy().ravel(),
            "cusum_hi": hi.ravel(),
            "cusum_lo": lo.ravel(),
            "threshold": self.cusum_h_,
            "alarm": alarm.ravel(),
        })
        long["start_time"] = pd.to_datetime(long["start_time"], utc=True)
        long.attrs["per_trip"] = wide
        return long

    def _relevant(self, strength: np.ndarray, change: pd.DataFrame, keys: dict) -> np.ndarray:
        """CUSUM strengths of non-wheel statistics capped at 1 (no alarm alone; still a second
        witness or a sustaining one) while the level's change — the rolling median over the
        last ``vehicle_trips`` trips of the statistic minus its baseline, in peer spreads — is
        under ``min_change_z``. A CUSUM finds any persistent change, however small, once its
        within-vehicle spread is small (a bus capture's yaw zero); a change that leaves the
        vehicle within one healthy between-vehicle spread (models.peers) of where it was is
        what healthy sensors do (on tuning seed 202 a healthy yaw zero moved 0.03 deg/s with the
        weather, the rate at rest and the intercept against the wheels agreeing, 1.1 h)."""
        moved = np.ones(strength.shape, dtype=bool)
        for family in FAMILIES:
            idx = [j for j, c in enumerate(self.statistics_) if statistic_family(c) == family and not c.startswith("wheel_")]
            if idx:
                level = change.iloc[:, idx].groupby(keys[family]).transform(
                    lambda c: c.rolling(self.vehicle_trips, min_periods=self.min_trips).median())
                moved[:, idx] = level.abs().to_numpy() >= self.min_change_z
        return np.where(moved, strength, np.minimum(strength, 1.0))

    def _scale_explained(self, strength: np.ndarray, features: pd.DataFrame, key: np.ndarray) -> np.ndarray:
        """Strengths of the wheel-scale statistics (models.service.WHEEL_SCALE_STATISTICS) capped at 1
        while a change of the wheels' common speed scale explains the yaw gain's change better than
        the yaw sensor does.

        New tyres all round (k times the rolling radius) make the wheels read v/k: the yaw gain
        against the wheels becomes k·g and yaw against the single-track model moves with it, the
        two "independent" witnesses of a yaw gain error, while the slope of a_y on v·r_wheels
        (features.accel.lat_scale_witness) becomes k². A yaw-rate gain error g leaves that slope
        alone. So, from the rolling medians of both logs' changes against the vehicle's lagged
        baseline (since its last tyre event), Δ ln slope ≈ 2·Δ ln gain says tyres and ≈ 0 says the
        sensor; closer to the former (same sign, |Δ ln slope| > |Δ ln gain|) caps them.
        """
        names = [c for c in SCALE_WITNESS_INPUTS if c in features.columns]
        scale_stats = [j for j, c in enumerate(self.statistics_) if c in WHEEL_SCALE_STATISTICS]
        if len(names) < 2 or not scale_stats:
            return strength
        with np.errstate(invalid="ignore", divide="ignore"):
            values = features[names].astype(float)
            logs = np.log(values.where(values > 0)).reset_index(drop=True)
        base, in_base = self._lagged_baseline(logs, key)
        change = (logs - base).mask(in_base)
        # the last min_trips trips see a step as soon as the CUSUM does (a median of ten moves only
        # once half its trips are past it), the last vehicle_trips more surely later on: each trip
        # asks the window in which the gain has moved further
        short, long = ([self._recent_median(change[c], key, w) for c in names]
                       for w in (self.min_trips, self.vehicle_trips))
        with np.errstate(invalid="ignore"):
            use_short = np.abs(short[0]) > np.abs(long[0])
        gain, scale = (np.where(use_short, s, w) for s, w in zip(short, long))
        with np.errstate(invalid="ignore"):
            explained = (gain * scale > 0) & (np.abs(scale) > np.abs(gain))
        out = strength.copy()
        out[np.ix_(explained, scale_stats)] = np.minimum(out[np.ix_(explained, scale_stats)], 1.0)
        return out

    def _recent_median(self, values: pd.Series, key: np.ndarray, window: int) -> np.ndarray:
        """Median of each series' last ``window`` measured values (at least min_trips), carried over
        trips where the value is missing."""
        measured = values.dropna()
        groups = pd.Series(key, index=values.index)
        level = measured.groupby(groups[measured.index].to_numpy()).transform(
            lambda c: c.rolling(window, min_periods=self.min_trips).median())
        return level.reindex(values.index).groupby(key).ffill().to_numpy()

    def _corroborated(self, strength: np.ndarray, wheels_agree: np.ndarray, names: list[str] | None = None,
                      measured: np.ndarray | None = None, sole: float = 1.0) -> dict[str, np.ndarray]:
        """Per non-wheel sensor and trip: one residual past h (strength > 1) and a residual
        against a second source of the same fault mode (models.attribution.COMPONENT_RESIDUALS)
        at least ``confirm_strength``? Versus-wheels residuals count only while the wheel ratios
        agree (else the wheels explain them). A sensor with only one witness measured
        needs only that one: in the fleet's columns, or, with ``measured`` (trips ×
        names: drift alarms, i.e. changes), on the vehicle's own logs so far (a polled
        logger whose wheel steps gate the wheel-derived references out leaves the level
        at rest as the only witness); with ``measured``, a change in a residual of
        models.attribution.SOLE_WITNESS counts alone too. A residual deciding alone must
        exceed ``sole`` (in units of h; the drift alarm's sole_cusum_h_ / h, see module doc)."""
        names = self.statistics_ if names is None else names
        col = {s: j for j, s in enumerate(names)}
        gated = np.where(np.array([tyre_moves(c) for c in names], dtype=bool)[None, :] & ~wheels_agree[:, None],
                         0.0, strength)
        out = {}
        for component, modes in COMPONENT_RESIDUALS.items():
            hit = np.zeros(len(strength), dtype=bool)
            # a residual shared with another sensor never names this one alone
            shared = set().union(*(residuals_of(c) for c in COMPONENT_RESIDUALS if c != component))
            only_one = sum(1 for mode in modes for w in mode if any(r in col for r in w)) == 1
            for witnesses in modes:
                named = [w for w in witnesses if any(r in col for r in w)]
                groups = [[col[r] for r in w if r in col] for w in named]
                if not groups:
                    continue
                st = np.column_stack([gated[:, g].max(axis=1) for g in groups])
                if len(groups) == 1:
                    hit |= (st[:, 0] > sole) & only_one
                    continue
                top2 = np.sort(st, axis=1)[:, -2:]
                hit |= (top2[:, 1] > 1.0) & (top2[:, 0] >= self.confirm_strength)
                if measured is not None:
                    seen = np.column_stack([measured[:, g].any(axis=1) for g in groups])
                    exclusive = np.array([not set(w) & shared for w in named])
                    alone = (seen.sum(axis=1) == 1) & (seen & exclusive[None, :]).any(axis=1)
                    hit |= alone & (top2[:, 1] > sole)
            if measured is not None:  # a change only (see SOLE_WITNESS)
                for residual in SOLE_WITNESS.get(component, ()):
                    if residual in col:
                        hit |= gated[:, col[residual]] > sole
            out[component] = hit
        return out

    def _recurring_dropouts(self, trip_scores: pd.DataFrame, key: np.ndarray) -> pd.DataFrame:
        """Per trip and wheel (columns ``wheel_signal_<pos>``): the median peer z of the wheel's
        dropout trips among its last ``vehicle_trips`` trips, once there are at least
        ``recurring_trips`` of them, else 0.

        Why not the rolling median the other keys use: a loose connector or a widening air
        gap drops the signal on some trips only (an intermittent fault), so the median of ten
        trips stays 0 while the wheel reads zero with the other three rolling, again and
        again — a sensor or tone-ring fault, not a stopped vehicle (CHECKS.md, common
        practice). Two odd trips (a wheel locked on ice, a splash) cannot reach three. On the
        nine tuning seeds no healthy wheel had a dropout trip at all; an intermittent air gap
        with dropouts on 4 of its last 10 trips had been named after a healthy lateral offset.
        """
        out = {}
        for pos in POSITIONS:
            col = f"z_wheel_dropouts_{pos}"
            if col not in trip_scores.columns:
                continue
            z = trip_scores[col].astype(float)
            rolling = z.where(z > 0).groupby(np.asarray(key)).rolling(self.vehicle_trips, min_periods=1)
            count = rolling.count().reset_index(level=0, drop=True).reindex(z.index)
            level = rolling.median().reset_index(level=0, drop=True).reindex(z.index)
            out[f"wheel_signal_{pos}"] = level.where(count >= self.recurring_trips, 0.0).fillna(0.0)
        return pd.DataFrame(out, index=trip_scores.index)

    def _peer_alarms(self, trip_scores: pd.DataFrame, key: np.ndarray,
                     recurring: pd.DataFrame | None = None) -> tuple[np.ndarray, np.ndarray]:
        """Fleet-relative alarms: the rolling median (last ``vehicle_trips`` trips) of an
        evidence key's leave-one-out z beyond ``inspect_evidence_z`` peer spreads.

        This catches a fault already present when the vehicle's own baseline was
        taken (drift sees only change). Wheel-signal keys count upwards only; a
        ratio key alone is a tyre (``any`` but not ``sensor``); a non-wheel sensor
        needs residuals against two sources (the drift alarm's rule, at
        ``inspect_evidence_z`` and ``confirm_strength`` of it), a versus-wheels one
        counting only while no wheel ratio is abnormal: on the tuning seeds the
        peer alarms of healthy vehicles came from one residual alone (a steering
        centre or a standstill yaw level off its peers').
        """
        z = trip_scores[[f"z_{f}" for f in self.features_]].set_axis(self.features_, axis=1)
        keys = self._key_means(z, clip=self.forest_clip)
        roll = keys.groupby(key).transform(lambda c: c.rolling(self.vehicle_trips, min_periods=self.min_trips).median())
        strength = pd.DataFrame({c: roll[c].clip(lower=0) if c.startswith("wheel_signal_") else roll[c].abs()
                                 for c in roll.columns}).fillna(0.0)
        if recurring is not None:  # a wheel's recurring dropouts count as its signal evidence
            for c in recurring.columns.intersection(strength.columns):
                strength[c] = np.maximum(strength[c].to_numpy(), recurring[c].to_numpy())
        kinds = np.array([_alarm_kind(c) for c in strength.columns])
        beyond = strength.to_numpy() >= self.inspect_evidence_z
        ratio = strength.to_numpy()[:, kinds == "ratio"].max(axis=1) if (kinds == "ratio").any() else np.zeros(len(z))
        wheel_signal = np.array([c.startswith("wheel_signal_") for c in strength.columns])
        # a non-wheel sensor against its peers needs two witnesses, as its drift alarm does
        confirmed = self._corroborated(strength.to_numpy() / self.inspect_evidence_z, ratio < self.attribution_z,
                                       list(strength.columns))
        sensor = beyond[:, wheel_signal].any(axis=1) | np.any(list(confirmed.values()) or [False], axis=0)
        return beyond.any(axis=1), sensor

    def _held(self, alarm, key) -> np.ndarray:
        s = pd.Series(np.asarray(alarm, dtype=float))
        held = s.groupby(np.asarray(key)).transform(lambda x: x.rolling(self.alert_hold_trips, min_periods=1).max())
        return held.to_numpy() > 0

    def rank(self, trip_scores: pd.DataFrame, drift_long: pd.DataFrame, lamps: pd.DataFrame,
             vehicles: pd.DataFrame | None = None, as_of=None) -> pd.DataFrame:
        """VEHICLE_STATUS_COLUMNS (plus helper columns), ordered by status then score."""
        per_trip = drift_long.attrs["per_trip"]
        ts = trip_scores.merge(per_trip[["trip_id", "alert", "sensor_alert", "epoch_key", "change_since",
                                         "sensor_change_since"]], on="trip_id", how="left")
        ts = ts.sort_values(["vehicle_id", "start_time"])
        current = ts.groupby("vehicle_id")["epoch_key"].transform("last")
        cur = ts[ts["epoch_key"] == current]
        recent = cur.groupby("vehicle_id").tail(self.vehicle_trips)
        zc = [f"z_{f}" for f in self.features_]
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            zmed = recent.groupby("vehicle_id")[zc].median()
        vscore = recent.groupby("vehicle_id")["score"].median()
        # trips that measured something: a telematics unit's (vehicle speed and lamps only)
        # measure nothing, and its vehicle is insufficient_data, never ok
        n_recent = recent.groupby("vehicle_id").size()
        n_measured = recent[zc].notna().any(axis=1).groupby(recent["vehicle_id"]).sum()
        last = cur.groupby("vehicle_id").tail(1).set_index("vehicle_id")
        since_any = _run_start(cur, "alert", "change_since")
        since_sensor = _run_start(cur, "sensor_alert", "sensor_change_since")
        lamp_last = _lamp_state(lamps, ts)
        strength = per_trip.sort_values("start_time").groupby("vehicle_id").tail(1).set_index("vehicle_id")
        rows = []
        for vid in vscore.index:
            # evidence per key: the peer comparison or the vehicle's own change, whichever is stronger
            # (drift strength cusum/h = 1 counts as attribution_z)
            ev = self._evidence(zmed.loc[vid])
            for st in self.statistics_:
                ev[st] = max(ev.get(st, 0.0), float(strength.at[vid, f"strength__{st}"]) * self.attribution_z)
            recurring = {c.removeprefix("recurring__"): float(strength.at[vid, c])
                         for c in strength.columns[strength.columns.str.startswith("recurring__")]}
            recurring = {k: v for k, v in recurring.items() if v > ev.get(k, 0.0)}  # where it is the stronger
            ev.update(recurring)
            confirmed = {c for c in COMPONENT_RESIDUALS if bool(strength.get(f"confirmed__{c}", {}).get(vid, False))}
            component, key = choose_component(ev, self.signal_z, self.attribution_z, confirmed)
            tyre = None
            if component.startswith("tyre_"):
                tyre = self._tyre_position(cur[cur["vehicle_id"] == vid], recent[recent["vehicle_id"] == vid])
                component, key = f"tyre_{tyre[0]}", f"wheel_ratio_{tyre[0]}"
            alert = bool(last.at[vid, "alert"])
            sensor_alert = bool(last.at[vid, "sensor_alert"])
            lamp_on = bool(lamp_last.at[vid, "lamp_on"]) if vid in lamp_last.index else False
            lamp_event = bool(lamp_last.at[vid, "lamp_event"]) if vid in lamp_last.index else False
            score_z = (vscore[vid] - self.score_center_) / self.score_scale_
            if lamp_event:
                status = "lamp_lit"
            elif n_measured[vid] < self.min_trips:
                status, component, key = "insufficient_data", "none", None
            elif sensor_alert and component in SENSOR_COMPONENTS:
                status = "inspect"
            elif alert or score_z >= self.watch_score_z or max(ev.values(), default=0.0) >= self.watch_evidence_z:
                status = "watch"
            elif (quiet_tyre := self._changed_tyre(cur[cur["vehicle_id"] == vid], recent[recent["vehicle_id"] == vid])):
                status, tyre = "watch", quiet_tyre
                component, key = f"tyre_{tyre[0]}", f"wheel_ratio_{tyre[0]}"
            else:
                status, component, key = "ok", "none", None
            flagged = (since_sensor.get(vid) if status == "inspect" else since_any.get(vid)) if alert else None
            rows.append({
                "vehicle_id": vid,
                "platform": last.at[vid, "platform"],
                "peer_group": last.at[vid, "peer_group"],
                "score": float(vscore[vid]),
                "score_z": float(score_z),
                "status": status,
                "suspected_component": component,
                "evidence": (self._evidence_text(vid, key, zmed.loc[vid], recent, flagged, as_of, lamp_last, tyre,
                                                 by_recurrence=key in recurring)
                             if status != "insufficient_data" else
                             f"{int(n_measured[vid])} of the last {int(n_recent[vid])} trips carried the signals "
                             "the features need (a logger with vehicle speed and lamps only measures no sensor)"),
                "flagged_since": flagged,
                "last_trip": last.at[vid, "start_time"],
                "suggestion": suggestion_for(component) if status != "ok" else "",
                "lamp_on": lamp_on,
                "n_trips": int(n_recent[vid]),
                "alert": alert,
                "sensor_alert": sensor_alert,
            })
        out = pd.DataFrame(rows)
        if vehicles is not None and not vehicles.empty:
            info = vehicles.drop_duplicates("vehicle_id").set_index("vehicle_id")
            out["depot"] = out["vehicle_id"].map(info["depot"]) if "depot" in info.columns else None
            if "platform" in info.columns:
                out["platform"] = out["vehicle_id"].map(info["platform"]).fillna(out["platform"])
        else:
            out["depot"] = None
        out = ranked(out)
        out["as_of"] = as_of
        return out

    def _tyre_position(self, history: pd.DataFrame, recent: pd.DataFrame) -> tuple[str, float, str]:
        """The tyre whose own radius change best explains the four ratio changes, in % (one unit
        for all four wheels; models.attribution.single_wheel_radius_fit), that change d (%, > 0:
        smaller) and what it is against.

        Ratios are relative to the mean of the four wheels, so one tyre's change
        of ε shows as about ¾ε on its wheel and −¼ε on each other. z-scores would
        mislead here, because each wheel position has its own peer spread. The
        change is against the vehicle's own early trips, or against the peer
        median when its own history shows none (a wrong tyre fitted before the
        data began).
        """
        own, against = self._own_ratio_change(history, recent), "in the vehicle's early trips"
        if not np.isfinite(own).any() or np.nanmax(np.abs(own)) < OWN_TYRE_CHANGE_PCT:
            now = recent[[f"raw__wheel_ratio_{p}_pct" for p in POSITIONS]].median().to_numpy(dtype=float)
            own = now - recent[[f"center__wheel_ratio_{p}_pct" for p in POSITIONS]].median().to_numpy(dtype=float)
            against = "its peers' median (no change in its own trips)"
        k, d, _ = single_wheel_radius_fit(own)
        return POSITIONS[k], d, against

    def _own_ratio_change(self, history: pd.DataFrame, recent: pd.DataFrame) -> np.ndarray:
        """The four wheel ratios' change, in %: median of ``recent`` minus that of the first
        ``baseline_trips`` of ``history``."""
        cols = [f"raw__wheel_ratio_{p}_pct" for p in POSITIONS]
        return (recent[cols].median() - history[cols].head(self.baseline_trips).median()).to_numpy(dtype=float)

    def _changed_tyre(self, history: pd.DataFrame, recent: pd.DataFrame) -> tuple[str, float, str] | None:
        """A single tyre whose rolling radius moved by TYRE_WATCH_RADIUS_PCT or more against the
        vehicle's early trips since its last tyre work, the pattern of one tyre (TYRE_PATTERN_SHARE):
        (position, d in %, what it is against) as _tyre_position gives, else None.

        The peer comparison and the drift cannot see every such tyre: tyre sizes and pressures
        spread between vehicles, and tyre wear and seasonal sets make the ratios wander within one,
        so a tyre's slow deflation can stay inside both spreads while the four ratios show plainly
        which wheel changed. A tyre says nothing of a sensor, so this only ever sets a watch.
        """
        epoch = epoch_keys(history, self.service_events_, "tyre")
        own = history[epoch == epoch[-1]] if len(history) else history
        recent = recent[recent["trip_id"].isin(own["trip_id"])]
        if len(own) < self.baseline_trips + self.vehicle_trips or len(recent) < self.vehicle_trips:
            return None
        k, d, share = single_wheel_radius_fit(self._own_ratio_change(own, recent))
        if not (abs(d) >= TYRE_WATCH_RADIUS_PCT and share >= TYRE_PATTERN_SHARE):
            return None
        since_work = len(own) < len(history)
        return POSITIONS[k], d, "just after its last tyre work" if since_work else "in the vehicle's early trips"

    def _evidence(self, zmed: pd.Series) -> dict[str, float]:
        """Strength per evidence key: largest |median z| of its features (signal keys: positive only)."""
        ev: dict[str, float] = {}
        for f in self.features_:
            v = zmed.get(f"z_{f}")
            if v is None or np.isnan(v):
                continue
            key = evidence_key(f)
            ev[key] = max(ev.get(key, np.nan), v) if key.startswith("wheel_signal_") else max(ev.get(key, 0.0), abs(v))
        common = _remove_common_mode(pd.DataFrame([ev]))
        return {k: (max(float(v), 0.0) if k.startswith("wheel_signal_") else float(v))
                for k, v in common.iloc[0].items() if np.isfinite(v)}

    def _evidence_text(self, vid, key, zmed, recent, flagged, as_of, lamp_last, tyre=None,
                       by_recurrence: bool = False) -> str:
        parts = []
        if vid in lamp_last.index and bool(lamp_last.at[vid, "lamp_event"]):
            dtc = str(lamp_last.at[vid, "dtc"] or "").strip()
            if bool(lamp_last.at[vid, "lamp_on"]):
                parts.append("warning lamp lit" + (f" with trouble code {dtc}" if dtc else " across key cycles"))
            else:
                parts.append(f"trouble code {dtc} stored on {lamp_last.at[vid, 'event_date']}, lamp out since "
                             "(an intermittent fault)")
        if key is not None:
            if by_recurrence:  # an intermittent signal loss: the trips with dropouts speak (_recurring_dropouts)
                f = f"wheel_dropouts_{key.rsplit('_', 1)[1]}"
            else:
                feats = [c for c in self.features_ if evidence_key(c) == key]
                f = max(feats, key=lambda c: abs(np.nan_to_num(zmed.get(f"z_{c}", np.nan))))
            rows = recent[recent["vehicle_id"] == vid]
            with warnings.catch_warnings():  # a feature its logger cannot measure is all NaN
                warnings.simplefilter("ignore", RuntimeWarning)
                value = float(np.nanmedian(rows[f"raw__{f}"])) if f"raw__{f}" in rows else np.nan
                center = float(np.nanmedian(rows[f"center__{f}"])) if f"center__{f}" in rows else np.nan
            words, unit = describe_feature(f)
            group = str(rows["peer_group"].iloc[-1])
            if by_recurrence:
                rates = rows[f"raw__{f}"].astype(float)
                hit = rates[rates > 0]
                text = (f"{words} on {len(hit)} of the last {len(rows)} trips, a median of {_fmt(float(hit.median()))}"
                        f"{_unit(unit)} on those trips ({group}; peer median {_fmt(center)}{_unit(unit)})")
            else:
                text = (f"{words} {_fmt(value)}{_unit(unit)} against a peer median of {_fmt(center)}{_unit(unit)} "
                        f"({group}; {_fmt(zmed.get(f'z_{f}'))} peer spreads, median of {len(rows)} recent trips)")
            if flagged is not None and as_of is not None:
                days = (pd.Timestamp(as_of).date() - flagged).days
                text += f", changing for about {days} day{'' if days == 1 else 's'}"
            parts.append(text)
            if tyre is not None and np.isfinite(tyre[1]):
                pos, d, against = tyre
                parts.append(f"the four ratios fit a single tyre: the {POSITION_WORDS[pos]} rolling radius about "
                             f"{_fmt(abs(d))} % {'smaller' if d > 0 else 'larger'} than {against}")
        return "; ".join(parts)

    def attach_raw(self, trip_scores: pd.DataFrame, trip_features: pd.DataFrame) -> pd.DataFrame:
        """Add raw value and peer centre of each feature (for evidence text; not published)."""
        df = trip_features.copy()
        df["start_time"] = pd.to_datetime(df["start_time"], utc=True)
        df = df.set_index("trip_id").loc[trip_scores["trip_id"]].reset_index()
        df["peer_group"] = trip_scores["peer_group"].to_numpy()
        s = lookup_statistics(df, self.peer_stats_)
        extra = {f"raw__{f}": df[f].to_numpy(dtype=float) for f in self.features_}
        extra.update({f"center__{f}": s[f"center__{f}"].to_numpy(dtype=float) for f in self.features_})
        return pd.concat([trip_scores.reset_index(drop=True), pd.DataFrame(extra)], axis=1)


def _fmt(x) -> str:
    if x is None or not np.isfinite(x):
        return "n/a"
    a = abs(x)
    return f"{x:.2f}" if a >= 0.1 or a == 0 else f"{x:.3f}" if a >= 0.01 else f"{x:.4f}"


def _unit(unit: str) -> str:
    return "" if not unit else (" %" if unit == "%" else f" {unit}")


def _remove_common_mode(keys: pd.DataFrame) -> pd.DataFrame:
    """Wheel-signal keys minus the median of the four wheels' (a rough road shakes every
    wheel; a damaged tone ring one). The median of four is unmoved by one faulty wheel."""
    cols = [c for c in keys.columns if c.startswith("wheel_signal_")]
    if len(cols) < 3:
        return keys
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        common = np.nanmedian(keys[cols].to_numpy(dtype=float), axis=1)
    out = keys.copy()
    out[cols] = keys[cols].to_numpy(dtype=float) - common[:, None]
    return out


def _alarm_kind(statistic: str) -> str:
    """``ratio`` (a tyre as likely as a sensor), ``vs_wheels`` (a tyre moves it too), else ``sensor``."""
    if statistic.startswith("wheel_ratio_"):
        return "ratio"
    return "vs_wheels" if tyre_moves(statistic) else "sensor"


def _cusum_by_group(u: pd.DataFrame, keys: np.ndarray, k: float) -> tuple[np.ndarray, np.ndarray]:
    """Run the CUSUM per (vehicle, epoch) series, all series advancing together (padded)."""
    codes, uniq = pd.factorize(keys)
    pos = pd.Series(codes).groupby(codes).cumcount().to_numpy()
    n_series, length, n_stat = len(uniq), (pos.max() + 1) if len(pos) else 0, u.shape[1]
    cube = np.full((n_series, n_stat, length), np.nan)
    cube[codes, :, pos] = u.to_numpy(dtype=float)
    hi, lo = tabular_cusum(cube, k)
    return hi[codes, :, pos], lo[codes, :, pos]


def _latched(raised: np.ndarray, sustained: np.ndarray, key: np.ndarray) -> np.ndarray:
    """Set/reset latch per series: on from a ``raised`` trip for as long as ``sustained``
    holds (raised implies sustained). Vectorised: within each run of sustained trips of
    one series, the latch is the running maximum of ``raised``."""
    sustained = np.asarray(sustained, dtype=bool) | np.asarray(raised, dtype=bool)
    codes = pd.factorize(np.asarray(key))[0]
    new_run = ~sustained | np.r_[True, codes[1:] != codes[:-1]]
    run_id = np.cumsum(new_run)
    on = pd.Series(np.asarray(raised, dtype=float)).groupby(run_id).cummax().to_numpy() > 0
    return on & sustained


def _lamp_state(lamps: pd.DataFrame, ts: pd.DataFrame) -> pd.DataFrame:
    """Per vehicle: the last trip's ``lamp_on``, and ``lamp_event`` / ``dtc`` / ``event_date``
    of the last lamp event of the current service epoch that still stands: a trouble code
    stays stored (an intermittent fault's lamp goes out at the next key cycle, and the
    vehicle still needs service until a repair starts a new epoch: DESIGN.md, "What the
    lamp means" and "Safety"); a lamp event without a code stands while the lamp is lit."""
    df = lamps.merge(ts[["trip_id", "epoch_key"]], on="trip_id", how="left").sort_values("start_time")
    last = df.groupby("vehicle_id").tail(1).set_index("vehicle_id")
    coded = df["dtc"].fillna("").astype(str).str.strip() != ""
    is_last = df["trip_id"].isin(last["trip_id"])
    current = df["epoch_key"] == df["vehicle_id"].map(last["epoch_key"])
    # a code stays stored; a lamp without one (it may be ESC-off twice running) counts while lit
    events = df[df["lamp_event"] & current & (coded | is_last)]
    ev = events.groupby("vehicle_id").tail(1).set_index("vehicle_id")
    out = last[["lamp_on"]].copy()
    out["lamp_event"] = out.index.isin(ev.index)
    out["dtc"] = ev["dtc"].reindex(out.index).where(out["lamp_event"], last["dtc"]).fillna("")
    out["event_date"] = pd.to_datetime(ev["start_time"].reindex(out.index), utc=True).dt.date
    return out


def _change_rows(u: np.ndarray, upper: np.ndarray, alarm: np.ndarray, key: np.ndarray,
                 days: np.ndarray) -> np.ndarray:
    """Row where each alarming statistic's change began (``len(u)`` where it does not
    alarm): on each run of alarming trips, the maximum-likelihood change point of its
    series up to the run's first trip (models.drift.change_point: a step, or a fault
    growing from nothing, for which the CUSUM's last zero, Page's estimate, comes late).
    Rows are series-contiguous (sorted by vehicle and time)."""
    out = np.full(u.shape, len(u), dtype=np.int64)
    codes = pd.factorize(np.asarray(key))[0]
    first_row = np.arange(len(codes)) - pd.Series(codes).groupby(codes).cumcount().to_numpy()
    same = np.r_[False, codes[1:] == codes[:-1]]
    for j in range(alarm.shape[1]):
        a = alarm[:, j]
        run_starts = np.flatnonzero(a & ~(np.r_[False, a[:-1]] & same))
        estimates = np.array([first_row[r] + change_point((1.0 if upper[r, j] else -1.0) * u[first_row[r]:r + 1, j],
                                                          days[first_row[r]:r + 1]) for r in run_starts], dtype=np.int64)
        run = np.cumsum(np.isin(np.arange(len(a)), run_starts)) - 1  # each alarming row's run
        out[a, j] = estimates[run[a]]
    return out


def run_start(times: pd.Series, alert: np.ndarray, since: pd.Series | None = None) -> pd.Timestamp | None:
    """Start of the run of alerting trips that includes the last trip (None when it does not
    alert): its first trip, or earlier where a CUSUM in the run estimates its change began
    earlier (``since``, NaT where none)."""
    a = np.asarray(alert, dtype=bool)
    if not len(a) or not a[-1]:
        return None
    breaks = np.flatnonzero(~a)
    first = breaks[-1] + 1 if len(breaks) else 0
    start = pd.Timestamp(times.iloc[first])
    if since is not None:
        earliest = pd.to_datetime(since.iloc[first:], utc=True).min()
        if pd.notna(earliest) and earliest < start:
            start = earliest
    return start


def _run_start(ts: pd.DataFrame, column: str, since_column: str | None = None) -> dict:
    """Date of the start of each vehicle's current run of alerting trips (see run_start)."""
    out = {}
    for vid, g in ts.groupby("vehicle_id", sort=False):
        start = run_start(g["start_time"], g[column].fillna(False).to_numpy(dtype=bool),
                          g[since_column] if since_column else None)
        if start is not None:
            out[vid] = start.date()
    return out
