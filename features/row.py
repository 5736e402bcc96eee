"""One trip's feature row, with a countable reason for every NaN.

A feature without enough qualifying data is NaN, never 0 (DESIGN.md), and the
reason is kept so a run can say how many trips lacked a standstill or a
straight road instead of silently scoring them as healthy.
"""

from __future__ import annotations

import math


class FeatureRow:
    """Values by name plus the reason each NaN has; ``as_dict`` adds ``nan_reasons``."""

    def __init__(self) -> None:
        self.values: dict[str, float] = {}
        self.reasons: dict[str, str] = {}
        #: a value measured another way, for the gates to use where the feature's own inputs
        #: are too coarse for it (features.gating.alternative_gates)
        self.alternatives: dict[str, float] = {}

    def set(self, name: str, value: float, reason_if_nan: str = "not_finite") -> None:
        value = float(value)
        self.values[name] = value
        self.reasons.pop(name, None)
        if not math.isfinite(value):
            self.values[name] = math.nan
            self.reasons[name] = reason_if_nan

    def nan(self, name: str, reason: str) -> None:
        self.values[name] = math.nan
        self.reasons[name] = reason

    def nan_all(self, names, reason: str) -> None:
        for name in names:
            self.nan(name, reason)

    def as_dict(self) -> dict[str, object]:
        out: dict[str, object] = dict(self.values)
        out["nan_reasons"] = ";".join(f"{k}={v}" for k, v in sorted(self.reasons.items()))
        return out


def parse_nan_reasons(text: str | None) -> dict[str, str]:
    """Inverse of the ``nan_reasons`` column: feature → reason."""
    if not text:
        return {}
    return dict(item.split("=", 1) for item in text.split(";") if "=" in item)
