"""Vehicle geometry a trip's features need, read from a registry row (a Mapping).

A missing or unusable value is NaN, and the features that need it become NaN
with the reason ``spec_missing:<column>``, rather than falling back to a
guessed number that would make a healthy vehicle look faulty.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass

from tracktrue.units import DEG_RAD, G0_MPS2


def _positive(spec: Mapping, key: str) -> float:
    value = spec.get(key)
    try:
        value = float(value)
    except (TypeError, ValueError):
        return math.nan
    return value if math.isfinite(value) and value > 0 else math.nan


@dataclass(frozen=True)
class VehicleSpec:
    wheelbase_m: float
    track_front_m: float
    track_rear_m: float
    steering_ratio: float
    understeer_gradient_deg_per_g: float

    @classmethod
    def from_mapping(cls, spec: Mapping) -> "VehicleSpec":
        k = spec.get("understeer_gradient_deg_per_g")
        try:
            k = float(k)
        except (TypeError, ValueError):
            k = math.nan
        return cls(
            wheelbase_m=_positive(spec, "wheelbase_m"),
            track_front_m=_positive(spec, "track_front_m"),
            track_rear_m=_positive(spec, "track_rear_m"),
            steering_ratio=_positive(spec, "steering_ratio"),
            understeer_gradient_deg_per_g=k if math.isfinite(k) else math.nan,
        )

    def missing(self, *names: str) -> str | None:
        """``spec_missing:<first missing column>`` or None when all are present."""
        for name in names:
            if not math.isfinite(getattr(self, name)):
                return f"spec_missing:{name}"
        return None

    @property
    def understeer_k_s2pm2(self) -> float:
        """K = K_us / (g·L) in s²/m², K_us the understeer gradient in rad/g (DESIGN.md)."""
        return self.understeer_gradient_deg_per_g * DEG_RAD / (G0_MPS2 * self.wheelbase_m)
