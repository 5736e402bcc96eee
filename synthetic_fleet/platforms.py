"""The invented fleet's vehicle platforms and their chassis parameters.

Values are plausible for light commercial vehicles of each body type (common
practice); they are our scenario's inventions, not any manufacturer's data.
The registry columns of vehicles.csv come straight from these fields.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass


@dataclass(frozen=True)
class Platform:
    """One platform's chassis. Angles leave SI only where the name says so."""

    name: str
    wheelbase_m: float
    track_front_m: float
    track_rear_m: float
    steering_ratio: float
    tyre_radius_m: float
    understeer_gradient_deg_per_g: float
    #: "front" or "rear": which axle slips under traction.
    driven_axle: str
    #: "active" (Hall, reads down to walking pace) or "passive" (inductive,
    #: reads 0 below a few km/h; amplitude grows with speed — common practice).
    wheel_sensor_kind: str
    #: Static nose-up pitch at full load (rad) and pitch under acceleration (rad per g).
    load_pitch_rad: float
    pitch_gradient_rad_per_g: float
    #: Relative change of the understeer gradient from empty to full load
    #: (rear-heavy payload makes a van understeer less).
    load_understeer_change: float
    #: Teeth of the wheels' tone rings (the module counts them; 40-100 is usual — common practice).
    tone_ring_teeth: int = 48

    def registry_row(self) -> dict[str, float | str]:
        """The vehicles.csv spec columns of a vehicle of this platform."""
        row = asdict(self)
        keep = ("wheelbase_m", "track_front_m", "track_rear_m", "steering_ratio", "tyre_radius_m",
                "understeer_gradient_deg_per_g")
        return {"platform": self.name, **{k: row[k] for k in keep}}


PLATFORM_SPECS: dict[str, Platform] = {
    p.name: p
    for p in (
        Platform("compact_van", 2.755, 1.520, 1.535, 16.2, 0.3150, 2.6, "front", "active",
                 0.004, 0.021, -0.15, 48),
        Platform("lwb_van", 3.665, 1.730, 1.700, 18.6, 0.3480, 3.9, "rear", "passive",
                 0.009, 0.026, -0.30, 44),
        Platform("pickup", 3.095, 1.605, 1.595, 17.4, 0.3870, 3.1, "rear", "passive",
                 0.007, 0.024, -0.25, 46),
    )
}

#: Platform names, for callers that iterate them.
PLATFORMS: tuple[str, ...] = tuple(PLATFORM_SPECS)


def platform(name: str) -> Platform:
    """The platform called ``name``, or a ValueError listing the known ones."""
    try:
        return PLATFORM_SPECS[name]
    except KeyError:
        raise ValueError(f"unknown platform {name!r}; known: {', '.join(PLATFORMS)}") from None
