"""Isolation forest over trips (Liu, Ting & Zhou, ICDM 2008) with deliberate NaN handling.

NaN is not healthy. scikit-learn's IsolationForest would reject NaN, and
imputing 0 after peer normalisation would silently say "exactly the peer
median". Here each feature column is paired with a missingness indicator
(1 = the feature could not be computed on that trip); the value itself is
filled with the column's neutral value (0 in z-space, the training median for
raw features), so the forest can isolate a trip by an unusual *pattern* of
missing features (a dead sensor makes its features NaN) while the fill carries
no claim. Indicators that are constant in the training sample are dropped.

The training sample caps the trips per vehicle (``max_trips_per_vehicle``,
most recent first): a faulty vehicle's many similar trips would otherwise form
a dense cluster the forest learns as normal (masking).

Score: −score_samples, i.e. s(x, ψ) = 2^(−E[h(x)]/c(ψ)) in (0, 1], higher = more
unusual; about 0.5 and below is ordinary.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from sklearn.ensemble import IsolationForest


class TripForest:
    """Fit on a design frame of features; score trips. Hyper-parameters only in __init__."""

    def __init__(self, n_estimators: int = 200, max_samples: int = 256, max_trips_per_vehicle: int = 12,
                 value_clip: float | None = 30.0, random_state: int = 0):
        self.n_estimators = n_estimators
        self.max_samples = max_samples
        self.max_trips_per_vehicle = max_trips_per_vehicle
        self.value_clip = value_clip
        self.random_state = random_state

    def _design(self, values: pd.DataFrame) -> np.ndarray:
        x = values[self.columns_].to_numpy(dtype=float)
        miss = np.isnan(x)
        filled = np.where(miss, self.fill_, x)
        if self.value_clip is not None:
            filled = np.clip(filled, -self.value_clip, self.value_clip)
        return np.hstack([filled, miss[:, self.indicator_mask_].astype(float)])

    def fit(self, values: pd.DataFrame, vehicle_id: pd.Series, start_time: pd.Series, neutral_zero: bool) -> "TripForest":
        """``neutral_zero``: values are z-scores (fill 0); otherwise fill each column's median."""
        order = pd.DataFrame({"v": vehicle_id.to_numpy(), "t": start_time.to_numpy()}, index=values.index)
        order = order.sort_values("t", ascending=False)
        keep = order.groupby("v", sort=False).head(self.max_trips_per_vehicle).index
        train = values.loc[keep]
        self.columns_ = list(values.columns)
        x = train.to_numpy(dtype=float)
        if neutral_zero:
            self.fill_ = np.zeros(x.shape[1])
        else:
            with np.errstate(all="ignore"):
                med = np.nanmedian(np.where(np.isnan(x).all(axis=0), 0.0, x), axis=0)
            self.fill_ = np.nan_to_num(med)
        miss = np.isnan(x)
        self.indicator_mask_ = miss.any(axis=0) & ~miss.all(axis=0)
        self.n_train_ = len(train)
        self.forest_ = IsolationForest(
            n_estimators=self.n_estimators,
            max_samples=min(self.max_samples, max(len(train), 2)),
            random_state=self.random_state,
        ).fit(self._design(train))
        return self

    def score(self, values: pd.DataFrame) -> np.ndarray:
        """Anomaly score s ∈ (0, 1] per row, higher = more unusual."""
        return -self.forest_.score_samples(self._design(values))


class SubspaceForests:
    """One TripForest per component subspace; a trip's score is the largest subspace score.

    Why: an isolation forest picks split features at random, so an anomaly
    confined to two of forty columns is rarely split on before the depth
    limit and scores barely above normal (the dilution known from
    high-dimensional data). Per-component subspaces of one to five columns
    keep each forest's features relevant; the maximum tells which subspace
    made the trip unusual. A subspace whose features are all NaN on a trip
    gives no score for it (absent evidence, neither healthy nor faulty).
    """

    def __init__(self, subspaces: dict[str, list[str]], **forest_params):
        self.subspaces = subspaces
        self.forest_params = forest_params

    def fit(self, values: pd.DataFrame, vehicle_id: pd.Series, start_time: pd.Series, neutral_zero: bool) -> "SubspaceForests":
        self.forests_ = {}
        for name, cols in self.subspaces.items():
            seen = values[cols].notna().any(axis=1)
            if seen.sum() < 2:
                continue
            self.forests_[name] = TripForest(**self.forest_params).fit(
                values.loc[seen, cols], vehicle_id[seen], start_time[seen], neutral_zero)
        return self

    def score_subspaces(self, values: pd.DataFrame) -> pd.DataFrame:
        out = pd.DataFrame(index=values.index)
        for name, forest in self.forests_.items():
            cols = self.subspaces[name]
            seen = values[cols].notna().any(axis=1).to_numpy()
            s = np.full(len(values), np.nan)
            if seen.any():
                s[seen] = forest.score(values.loc[seen, cols])
            out[name] = s
        return out

    def score(self, values: pd.DataFrame) -> np.ndarray:
        sub = self.score_subspaces(values)
        return sub.max(axis=1, skipna=True).to_numpy(dtype=float)
