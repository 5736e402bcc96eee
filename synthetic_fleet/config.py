"""The simulator's configurations: the tuning configuration (the default) and a held-out one.

Everything that decides how hard the fleet's logs are to read — logger rates
and resolutions, how faults grow, how strong the healthy confounders are —
lives in one frozen ``SimConfig``. ``DEFAULT`` is what the detector is tuned
on. ``HELD_OUT`` was chosen once, with other rates, resolutions, growth
curves and confounder strengths, and is never used while tuning: figures
reported on it say how much of the tuning carried over to logs the tuning
never saw (synthetic_fleet/README.md).
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class WheelModule:
    """How the ABS module turns tooth edges into a published wheel speed.

    ``method`` "period": the time between the first and the last tooth edge in
    the last ``window_s`` (fine resolution); "count": the teeth counted in a
    fixed ``window_s`` (resolution 2πr/(N·window_s)). The module publishes a
    new value every ``tick_s``; a wheel with no edge for ``timeout_s`` reads 0.
    """

    method: str = "period"
    tick_s: float = 0.01
    window_s: float = 0.02
    timeout_s: float = 0.25


@dataclass(frozen=True)
class SimConfig:
    name: str
    #: Shares of the fleet per logger kind (bus_capture takes the rest), rounded to whole vehicles.
    polled_share: float
    telematics_share: float
    #: bus_capture logs at this multiple of the fleet's sample rate.
    bus_rate_factor: float
    bus_wheel_step_kph: float
    #: polled: one of these row rates (Hz) and wheel-speed steps (km/h) per vehicle.
    polled_rates_hz: tuple[float, ...]
    polled_wheel_steps_kph: tuple[float, ...]
    polled_stale_prob: float
    telematics_rate_hz: float
    wheel_module: WheelModule
    #: Sensor faults: days from onset to the lamp threshold, and the growth exponents drawn.
    lamp_after_days: tuple[float, float]
    growth_shapes: tuple[float, ...]
    #: Share of active-sensor wheel faults that fail suddenly (the rest: intermittently).
    active_sudden_share: float
    #: Confounder strengths.
    rough_share_factor: float
    heavy_load_share: float
    towing_vehicle_share: float
    towing_trip_share: float
    tyre_wear_per_day: float  # relative radius loss of a driven-axle tyre per day
    seasonal_swap_share: float
    slippery_day_prob: float  # on a day above freezing (below it: 0.6)
    intervention_trip_prob: float  # per trip on a slippery day
    esc_off_trip_prob: float


DEFAULT = SimConfig(
    name="tuning",
    polled_share=0.25, telematics_share=0.10,
    bus_rate_factor=1.0, bus_wheel_step_kph=0.01,
    polled_rates_hz=(2.0, 5.0), polled_wheel_steps_kph=(0.1, 0.5, 1.0), polled_stale_prob=0.02,
    telematics_rate_hz=1.0,
    wheel_module=WheelModule(),
    lamp_after_days=(14.0, 56.0), growth_shapes=(1.0, 1.5, 2.0), active_sudden_share=0.5,
    rough_share_factor=1.0, heavy_load_share=0.15, towing_vehicle_share=0.15, towing_trip_share=0.3,
    tyre_wear_per_day=1.5e-5, seasonal_swap_share=0.5,
    slippery_day_prob=0.1, intervention_trip_prob=0.3, esc_off_trip_prob=0.01,
)

#: Chosen once and written down; never used while tuning (see the module docstring).
HELD_OUT = SimConfig(
    name="held-out",
    polled_share=0.30, telematics_share=0.12,
    bus_rate_factor=1.5, bus_wheel_step_kph=0.03125,  # 1/32 km/h per bit, a bus scaling (from memory)
    polled_rates_hz=(1.0, 4.0), polled_wheel_steps_kph=(0.25, 1.0), polled_stale_prob=0.05,
    telematics_rate_hz=1.0,
    wheel_module=WheelModule(method="period", tick_s=0.02, window_s=0.04, timeout_s=0.3),
    lamp_after_days=(10.0, 70.0), growth_shapes=(0.8, 1.3, 2.5), active_sudden_share=0.6,
    rough_share_factor=1.6, heavy_load_share=0.25, towing_vehicle_share=0.25, towing_trip_share=0.4,
    tyre_wear_per_day=2.5e-5, seasonal_swap_share=0.8,
    slippery_day_prob=0.2, intervention_trip_prob=0.4, esc_off_trip_prob=0.02,
)

CONFIGS: dict[str, SimConfig] = {"tuning": DEFAULT, "held-out": HELD_OUT}


def sim_config(config: SimConfig | str | None) -> SimConfig:
    """A SimConfig from itself, its name, or None (the tuning default); a ValueError lists the names."""
    if config is None:
        return DEFAULT
    if isinstance(config, SimConfig):
        return config
    try:
        return CONFIGS[config]
    except KeyError:
        raise ValueError(f"unknown simulator configuration {config!r}; known: {', '.join(CONFIGS)}") from None
