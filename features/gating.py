"""Gates: a feature is NaN (with a countable reason) when its signals' step, rate or staleness
alone would move it by more than its noise budget; and the trip's ``logger_kind``.

Logs arrive from loggers of very different quality (DESIGN.md, "Field
realities"): polled PIDs at 1–5 Hz with 1 km/h steps and stale repeats,
bus capture at 50–100 Hz with 0.01 km/h. A feature computed from a log too
coarse for it is not a weak measurement but a wrong one (a 1 km/h step
across a 1.5 m track is 10 deg/s of wheel-derived yaw), and a healthy
vehicle's wrong feature becomes a false alarm. So every feature that came out
finite is checked against the figures of the signals it uses, measured on
this trip's samples (tracktrue.signal_quality.fresh_rate, and the smallest
step of features.signals' TripArrays.resolution): q the step, f the fresh
values per second while moving, s the share of stale repeats.

Noise model (Bennett 1948; Widrow & Kollár, *Quantization Noise*, 2008): a
signal quantised with step q that moves across steps carries an error
uniform in ±q/2, standard deviation e = q/√12, independent from one fresh
value to the next. A feature that averages n fresh values sees e/√n; one
that measures a spread sees e itself; one that takes the median of a value
held still (a rest offset, a steering centre) sees no dither at all and can
be off by q/2. Each gate states its mode, the feature's sensitivity k to
each input signal (feature units per SI unit), the averaging time T and the
budget B. T is the feature's own minimum of qualifying data (so a trip that
just qualifies is still inside the budget), except for the two features that
average over most of the driving (the wheel ratios' distance sums and the
distance-weighted a_x − dv/dt), whose T is the trip's moving time. Modes:

* ``averaged``: σ = √(Σ (k·e)² / n), n = max(1, f·T) per input;
* ``spread``: σ = √(Σ (k·e)²) (per sample, nothing averages it away);
* ``held``: σ = Σ k·q/2 (worst case of a median of a steady quantised value);
* ``derivative``: the spread of a Savitzky–Golay slope over N = max(5, 1.5 s·f)
  fresh values of spacing Δ = 1/f. Its weights are i/(Δ·Σi²) with
  Σi² = N(N²−1)/12 (Savitzky & Golay 1964: a quadratic's slope at the
  centre is the straight line's), so σ = √(Σ (k·e)²·12/(Δ²·N(N²−1))).

B is a third of the smallest change the feature exists to find (a 3σ change
then stands out of one trip's quantisation noise); the smallest changes are
stated beside each gate, "from memory" where no single source gives them.
Some features also compare two signals over a short window to pick their
samples (1 s means for yaw, the straight-road and axle-agreement votes of
features.windows and features.wheels): a second, ``averaged`` gate with T
that window and B half the vote's tolerance keeps quantisation alone from
flipping the vote. Derivative and high-pass features need enough fresh
values inside their filter (``min_fresh_hz``).

Reasons (FeatureRow's nan_reasons, counted per run): ``signal_missing`` (a
signal the feature needs is not in the log at all: a telematics log has no
wheel speeds), ``resolution_too_coarse``, ``rate_too_low`` and
``stale_values`` (the gate would pass if the repeats were fresh values).
A feature already NaN keeps its own reason, except that a missing input
signal is named as the reason.

``logger_kind`` is inferred from the wheel speeds' figures alone, never from
any label of the log: ``telematics`` when no wheel speed is logged;
``polled`` when the wheel speeds (median over the logged wheels) arrive at
under 8 values per second (stale repeats counted, so the logger's row rate,
not the signal's changes, decides), or step by more than
0.05 km/h; ``bus_capture`` otherwise. The limits sit between the two kinds
DESIGN.md describes (polled 1–5 Hz and 0.1–1 km/h; bus capture 50–100 Hz and
0.01 km/h) with a margin on each side. The stale share does not decide: a
fine step at a high rate repeats often without being stale.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from features.accel import LAT_MIN_S
from features.row import FeatureRow
from features.signals import SMOOTH_S, TripArrays, median
from features.spec import VehicleSpec
from features.wheels import AXLE_AGREE_RADPS, JITTER_HIGHPASS_S, JITTER_MAX_QUANT_PCT
from features.windows import DROPOUT_ZERO_MPS, STRAIGHT_YAW_RADPS
from features.yaw import STEER_TURN_MIN_RADPS, STEER_TURN_MIN_S, YAW_FIT_MIN_S, YAW_GAIN_MIN_TURN_S
from tracktrue.schema import POSITIONS, WHEEL_SPEED_COLUMNS
from tracktrue.signal_quality import MOVING_MPS, fresh_rate, moving_seconds
from tracktrue.units import DEG_RAD, G0_MPS2, KPH_MPS

#: Columns the gates add to a trip's row: the logger kind, and which sources judged the straight
#: road of the steering centre (``yaw_and_wheels``, ``yaw`` where the wheels were too coarse to
#: vote and the yaw sensor alone did, empty where there is no centre).
STEER_CENTER_JUDGE = "steer_center_straight_by"
GATING_COLUMNS: tuple[str, ...] = ("logger_kind", STEER_CENTER_JUDGE)
LOGGER_KINDS: tuple[str, ...] = ("bus_capture", "polled", "telematics")
POLLED_BELOW_HZ = 8.0
POLLED_STEP_ABOVE_MPS = 0.05 * KPH_MPS
#: Speed the sensitivities are taken at when the trip never moves (DESIGN.md's cruise speed).
FALLBACK_SPEED_MPS = 8.0
#: The Savitzky–Golay window of features.signals.smooth_derivative (its default), s.
DERIVATIVE_S = 1.5
#: Fresh values a derivative or high-pass filter needs inside its window.
FILTER_MIN_VALUES = 5
_RMS_UNIFORM = 1.0 / math.sqrt(12.0)


@dataclass(frozen=True)
class Figures:
    """One signal's figures on this trip: step (SI), fresh values per second while moving, stale share,
    and values per second over the whole trip, stale repeats counted as if they were fresh."""

    step: float
    fresh_hz: float
    stale: float
    row_hz: float


@dataclass(frozen=True)
class Gate:
    """One condition a feature's inputs must meet (module docstring)."""

    mode: str  #: averaged | spread | held | derivative
    inputs: tuple[tuple[str, float], ...]  #: (signal, sensitivity k in feature units per SI unit)
    budget: float  #: largest quantisation noise allowed, feature units
    average_s: float | None = 0.0  #: T of the averaged mode; None: the trip's moving time
    min_fresh_hz: float = 0.0

    def noise(self, figures: dict[str, Figures], moving_s: float, stale_as_fresh: bool = False) -> float:
        average_s = moving_s if self.average_s is None else self.average_s
        total = 0.0
        for signal, k in self.inputs:
            fig = figures[signal]
            if self.mode == "held":
                total += abs(k) * fig.step / 2.0
                continue
            e2 = (k * fig.step * _RMS_UNIFORM) ** 2
            if self.mode == "derivative":
                rate = fig.row_hz if stale_as_fresh else fig.fresh_hz
                n = max(5.0, DERIVATIVE_S * rate)
                e2 *= 12.0 * rate * rate / (n * (n * n - 1.0))
            if self.mode == "averaged":
                rate = fig.row_hz if stale_as_fresh else fig.fresh_hz
                e2 /= max(1.0, rate * average_s) if math.isfinite(rate) else 1.0
            total += e2
        return total if self.mode == "held" else math.sqrt(total)

    def failure(self, figures: dict[str, Figures], moving_s: float) -> str | None:
        """Why the inputs cannot carry the feature, or None. NaN figures (a step never seen) pass."""
        for signal, _ in self.inputs:
            fig = figures[signal]
            if fig.fresh_hz < self.min_fresh_hz:
                return "stale_values" if fig.row_hz >= self.min_fresh_hz else "rate_too_low"
        if self.noise(figures, moving_s) > self.budget:
            return "stale_values" if not self.noise(figures, moving_s, stale_as_fresh=True) > self.budget else \
                "resolution_too_coarse"
        return None


def signal_figures(trip: TripArrays, moving: np.ndarray, seconds: float) -> dict[str, Figures]:
    """Figures of every numeric signal the trip logs, over its ``moving`` samples and their
    ``seconds`` (tracktrue.signal_quality.moving_seconds, as ingest's trip_signals measures them)."""
    duration = float(trip.dt.sum())
    out = {}
    for name in trip.resolution:
        if trip.has(name):
            values = trip.signal(name)
            rate, stale = fresh_rate(values, moving, seconds, known=trip.finite.get(name))
            row_hz = trip.present[name] / duration if duration > 0 else math.nan
            out[name] = Figures(trip.resolution[name], rate, stale, row_hz)
    return out


def logger_kind(figures: dict[str, Figures]) -> str:
    """bus_capture, polled or telematics from the wheel speeds' figures (module docstring)."""
    wheels = [figures[c] for c in WHEEL_SPEED_COLUMNS if c in figures]
    if not wheels:
        return "telematics"
    rate = _median_known([w.row_hz for w in wheels])
    step = _median_known([w.step for w in wheels])
    if rate < POLLED_BELOW_HZ or step > POLLED_STEP_ABOVE_MPS:
        return "polled"
    return "bus_capture"


def _median_known(values: list[float]) -> float:
    known = sorted(v for v in values if math.isfinite(v))
    if not known:
        return math.nan
    mid = len(known) // 2
    return known[mid] if len(known) % 2 else 0.5 * (known[mid - 1] + known[mid])


def feature_gates(spec: VehicleSpec, speed_mps: float) -> dict[str, list[Gate]]:
    """Each feature's gates, with sensitivities at the trip's typical moving speed ``speed_mps``.

    Budgets (a third of the smallest change worth finding, module docstring):
    wheel ratio 0.3 % (about a 20 kPa pressure loss, from memory); yaw and
    steering-yaw offsets 0.5 deg/s, yaw gain 5 % (yaw-rate sensors are
    specified to a few %, from memory); steering centre 3 deg (a wheel
    visibly off centre, from memory); accelerometer offsets 0.02 g (DESIGN.md:
    below a 5 % grade's 0.05 g). Jitter keeps features.wheels' 0.25 %
    (quantisation alone above it drowns a damaged ring's jitter); the wheel's
    false acceleration 0.03 g (what a damaged ring's tooth error puts on a
    derivative, from memory). Averaging times are each feature's own minimum
    of qualifying data (features.wheels, features.yaw, features.accel), or
    None for the trip's moving time (module docstring).
    """
    v = speed_mps
    t_r, t_f = spec.track_rear_m, spec.track_front_m
    rear_yaw_dps = 1.0 / (t_r * DEG_RAD)  # r = (v_rr − v_rl)/t_r, per wheel, in deg/s per m/s
    yaw_dps = 1.0 / DEG_RAD
    wheels_yaw = (("wheel_speed_rl", rear_yaw_dps), ("wheel_speed_rr", rear_yaw_dps))
    front_yaw = (("wheel_speed_fl", 1.0 / (t_f * DEG_RAD)), ("wheel_speed_fr", 1.0 / (t_f * DEG_RAD)))

    axles = vote_gate(AXLE_AGREE_RADPS, wheels_yaw + front_yaw)
    straight = vote_gate(STRAIGHT_YAW_RADPS, wheels_yaw)
    turning = vote_gate(STEER_TURN_MIN_RADPS, wheels_yaw)
    gates: dict[str, list[Gate]] = {}
    for pos in POSITIONS:
        own = f"wheel_speed_{pos}"
        gates[f"wheel_ratio_{pos}_pct"] = [Gate("averaged", ((own, 100.0 / v),), 0.1, average_s=None)]
        # the spread of a 2 s high-pass, at a bus logger's rate: below POLLED_BELOW_HZ a logger reads the
        # four wheels one after another, 50-300 ms apart (DESIGN.md), and on a rough road a wheel's speed
        # moves about as much within that time as a damaged ring's jitter (0.3-0.6 % against 0.5-0.8 %,
        # tests/test_features_fault_matrix_loggers.py); a log without read-lag columns cannot undo it
        gates[f"wheel_jitter_{pos}_pct"] = [Gate("spread", ((own, 100.0 / v),), JITTER_MAX_QUANT_PCT,
                                                 min_fresh_hz=max(POLLED_BELOW_HZ,
                                                                  FILTER_MIN_VALUES / JITTER_HIGHPASS_S))]
        # a wheel reads zero below 0.3 m/s: one step must leave that distinguishable
        gates[f"wheel_dropouts_{pos}"] = [Gate("held", ((own, 1.0),), DROPOUT_ZERO_MPS / 2.0)]
        # a third of the smallest onset rise worth finding, 0.5 m/s (from memory): a 1 km/h step passes
        gates[f"wheel_onset_{pos}_mps"] = [Gate("held", ((own, 1.0),), 0.5 / 3)]
        gates[f"wheel_accel_disagree_{pos}_g"] = [
            Gate("derivative", ((own, 1.0 / G0_MPS2),), 0.03 / 3, min_fresh_hz=FILTER_MIN_VALUES / DERIVATIVE_S)]
    # needed but adding no noise (k = 0): the wheels that judge standstill (features.windows), whose step
    # does not enter a rest value, and dv/dt, whose errors telescope in a distance-weighted mean
    needs_wheels = tuple((c, 0.0) for c in WHEEL_SPEED_COLUMNS)
    gates["yaw_rest_dps"] = [Gate("held", (("yaw_rate", yaw_dps), *needs_wheels), 0.5 / 3)]
    offset = Gate("averaged", (("yaw_rate", yaw_dps), *wheels_yaw), 0.5 / 3, average_s=YAW_FIT_MIN_S)
    # slope noise σ_b = σ_x / (spread of x · √n), x turning at least STEER_TURN_MIN_RADPS
    turn_dps = STEER_TURN_MIN_RADPS / DEG_RAD
    gain = Gate("averaged", (("yaw_rate", yaw_dps / turn_dps), *((s, k / turn_dps) for s, k in wheels_yaw)),
                0.05 / 3, average_s=YAW_GAIN_MIN_TURN_S)
    gates["yaw_offset_dps"] = [offset, axles]
    gates["yaw_gain"] = [gain, axles]
    gates["steer_center_deg"] = [_steering_centre_held(), straight]
    model_dps = v / (spec.steering_ratio * spec.wheelbase_m * DEG_RAD)  # single-track r per steering-wheel rad
    gates["steer_yaw_residual_dps"] = [
        Gate("averaged", (("yaw_rate", yaw_dps), ("steering_angle", model_dps)), 0.5 / 3,
             average_s=STEER_TURN_MIN_S), turning]
    for signal in ("accel_long", "accel_lat"):
        gates[f"{signal}_rest_g"] = [Gate("held", ((signal, 1.0 / G0_MPS2), *needs_wheels), 0.02 / 3)]
    # the distance-weighted mean of a_x − dv/dt: dv/dt's errors telescope (its mean is Δv/T), a_x's average
    gates["accel_long_residual_g"] = [Gate("averaged", (("accel_long", 1.0 / G0_MPS2), *needs_wheels), 0.02 / 3,
                                           average_s=None)]
    lat_wheels = tuple((s, v / t_r / G0_MPS2) for s, _ in wheels_yaw)  # v·r per wheel speed, in g
    gates["lat_residual_g"] = [Gate("averaged", (("accel_lat", 1.0 / G0_MPS2), *lat_wheels), 0.02 / 3,
                                    average_s=LAT_MIN_S), axles]
    return gates


def vote_gate(tolerance_radps: float, inputs: tuple[tuple[str, float], ...]) -> Gate:
    """A vote's gate: quantisation alone must stay under half its tolerance over its 1 s comparison (SMOOTH_S)."""
    return Gate("averaged", inputs, tolerance_radps / DEG_RAD / 2.0, average_s=SMOOTH_S)


def _steering_centre_held() -> Gate:
    """A median of the steering angle held still: its step must stay under 1 deg (a third of 3 deg)."""
    return Gate("held", (("steering_angle", 1.0 / DEG_RAD),), 1.0)


def alternative_gates() -> dict[str, list[Gate]]:
    """Gates of the values features measure a second way (FeatureRow.alternatives), taken where a
    feature's own gates fail: the steering centre on the straight road the yaw sensor alone finds,
    for logs whose wheel speeds are too coarse to vote on straightness (a 1 km/h step is 10 deg/s of
    wheel yaw). Its vote's quantisation must stay under half the vote's tolerance, as the wheels' must."""
    yaw_vote = vote_gate(STRAIGHT_YAW_RADPS, (("yaw_rate", 1.0 / DEG_RAD),))
    return {"steer_center_deg": [_steering_centre_held(), yaw_vote]}


def gate_features(row: FeatureRow, trip: TripArrays, spec: VehicleSpec) -> dict[str, object]:
    """Apply every feature's gates to ``row`` (module docstring); returns the GATING_COLUMNS."""
    speed = _moving_speed(trip)
    moving = speed >= MOVING_MPS
    gates = feature_gates(spec, median(speed[moving]) if moving.any() else FALLBACK_SPEED_MPS)
    if not moving.any():  # a trip that never moves: its figures over all its samples
        moving = np.ones(trip.n, bool)
    moving_s = moving_seconds(trip.t, moving, capped_steps=trip.dt[:-1])  # TripArrays.dt holds the capped steps
    figures = signal_figures(trip, moving, moving_s)
    alternatives = alternative_gates()
    judged_by = {}
    for name, checks in gates.items():
        if name not in row.values:
            continue
        if any(s not in figures for gate in checks for s, _ in gate.inputs):
            row.nan(name, "signal_missing")
            continue
        reason = next((r for r in (gate.failure(figures, moving_s) for gate in checks) if r), None)
        if reason and _take_alternative(row, name, alternatives.get(name), figures, moving_s):
            judged_by[name] = "yaw"
        elif reason and math.isfinite(row.values[name]):
            row.nan(name, reason)
    centre_judge = judged_by.get("steer_center_deg", "yaw_and_wheels")
    return {"logger_kind": logger_kind(figures),
            STEER_CENTER_JUDGE: centre_judge if math.isfinite(row.values.get("steer_center_deg", math.nan)) else ""}


def _take_alternative(row: FeatureRow, name: str, checks: list[Gate] | None, figures: dict[str, Figures],
                      moving_s: float) -> bool:
    """Put ``name``'s alternative value in its place if it has one, finite, whose gates ``checks`` pass."""
    value = row.alternatives.get(name, math.nan)
    if not checks or not math.isfinite(value) or any(s not in figures for g in checks for s, _ in g.inputs):
        return False
    if any(gate.failure(figures, moving_s) for gate in checks):
        return False
    row.set(name, value)
    return True


def _moving_speed(trip: TripArrays) -> np.ndarray:
    """The trip's speed: median of four wheels, else the vehicle speed; NaN read as standing."""
    speed = trip.speed if any(trip.has(c) for c in WHEEL_SPEED_COLUMNS) else trip.signals["vehicle_speed"]
    return np.where(np.isfinite(speed), speed, 0.0)
