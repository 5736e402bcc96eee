"""features stage: per-trip sensor-disagreement features (DESIGN.md, "Features").

``extract_trip_features(samples, spec)`` is the pure per-trip function;
``run_features(store)`` is the incremental batch job behind `tracktrue features`.
"""

from features.extract import FEATURE_COLUMNS, ROW_COLUMNS, extract_trip_features
from features.run import TRIP_FEATURES_COLUMNS, FeaturesSummary, run_features

__all__ = [
    "FEATURE_COLUMNS",
    "ROW_COLUMNS",
    "TRIP_FEATURES_COLUMNS",
    "FeaturesSummary",
    "extract_trip_features",
    "run_features",
]
