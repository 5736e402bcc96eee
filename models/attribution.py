"""From abnormal features to a suspected component, its evidence and an inspection suggestion.

Isolation follows a residual table (Isermann, *Fault-Diagnosis Systems*, 2006):
each feature compares two sources, so a fault shows in every residual that
involves its component and nowhere else. The wheel features involve only the
wheels, while the yaw-offset, steering-centre and lateral/longitudinal
residuals compare a sensor *with the wheels*. So:

1. A wheel whose jitter or dropouts are abnormal → that wheel's sensor / tone
   ring (signal faults show as jitter and dropouts; common practice).
2. Else a wheel whose speed ratio is abnormal → that wheel's tyre: a steady
   ratio error without jitter or dropouts is a rolling-radius change
   (DESIGN.md, "Tyre versus sensor") — unless a non-wheel sensor's own residuals,
   which no tyre can move (a level at rest, yaw against steering), changed together:
   a tyre changed on a vehicle whose yaw sensor fails does not hide the yaw sensor.
3. Else the non-wheel sources, where a "versus wheels" residual counts only
   when no wheel is abnormal (otherwise the wheel explains it; not the
   steering centre, which no tyre moves: TYRE_PROOF), and the
   steering-versus-yaw residual goes to whichever of the two the other
   residuals implicate.
"""

from __future__ import annotations

import numpy as np

from tracktrue.schema import POSITIONS

SAFETY_NOTE = (
    "This prioritises inspections; it does not clear a vehicle. Follow the manufacturer's service "
    "procedure; a replaced sensor may need calibration or a relearn."
)

SUGGESTIONS: dict[str, str] = {
    "wheel_sensor": "Inspect the {where} tone ring and wheel bearing for damage or play, check the sensor air gap, "
    "wiring and connector, then scope the sensor signal at speed.",
    "tyre": "Check the {where} tyre first: pressures, tyre sizes and tread against the other wheels "
    "(a steady ratio error without jitter or dropouts is a tyre, not a sensor).",
    "yaw_sensor": "Check the yaw-rate sensor mounting and connector, read its stored codes, and verify its zero "
    "and gain at standstill and in a steady turn; recalibrate per the manufacturer's procedure.",
    "steering_angle_sensor": "Check the wheel alignment and the steering-wheel centre, then recalibrate the "
    "steering angle sensor per the manufacturer's procedure.",
    "accel_long_sensor": "Check the longitudinal accelerometer's mounting and level, read its value at rest on "
    "level ground, and recalibrate or replace per the manufacturer's procedure.",
    "accel_lat_sensor": "Check the lateral accelerometer's mounting and level (loads and suspension height bias it), "
    "read its value at rest on level ground, and recalibrate per the manufacturer's procedure.",
    "none": "No component stands out; keep watching.",
}

#: The residuals that involve each non-wheel sensor (the rows of Isermann's residual table),
#: per fault mode, grouped by the *other* source each compares with (residuals sharing a source
#: would be one witness, not two). One residual alone cannot name its sensor — yaw-versus-
#: steering is shared, and a level at rest is also the grade or bank the vehicle stood on — so
#: a sensor alert needs residuals against two sources *of the same fault mode* to agree. Modes
#: matter because some residuals are blind to a mode: yaw-versus-steering is averaged over
#: left and right turns, so a yaw *offset* cancels in it (features/yaw.py) and only a *gain*
#: error shows; a yaw offset's witnesses are the rate at rest and the intercept against the
#: wheels, a gain error's the slope against the wheels and the residual against steering.
COMPONENT_RESIDUALS: dict[str, tuple[tuple[tuple[str, ...], ...], ...]] = {
    "yaw_sensor": ((("yaw",), ("yaw_vs_wheels",)), (("yaw_gain",), ("steering_vs_yaw",))),
    "steering_angle_sensor": ((("steering_vs_wheels",), ("steering_vs_yaw",)),),
    "accel_long_sensor": ((("accel_long",), ("accel_long_vs_wheels",)),),
    "accel_lat_sensor": ((("accel_lat",), ("accel_lat_vs_wheels",)),),
}


def residuals_of(component: str) -> set[str]:
    """Every residual that witnesses some fault mode of ``component``."""
    return {r for mode in COMPONENT_RESIDUALS.get(component, ()) for group in mode for r in group}


#: Residuals whose *change* (drift, not a level against peers) names their sensor alone, at the
#: uncorroborated threshold (models.drift): each is exclusive to its sensor and no healthy
#: confounder moves it. The yaw rate at rest: no grade, bank or tyre turns a vehicle that stands
#: still. The residuals against the wheels are built so that a tyre's common radius scale (a full
#: set of new tyres) cancels — an intercept against the wheel estimate, or for the longitudinal one
#: a distance-weighted mean that a scale error leaves unchanged from stop to stop (features/) —
#: and those a single tyre's radius can move are gated out while a wheel ratio is off
#: (``tyre_moves``). (The longitudinal one also carries g·Δh/distance, which a new one-way hilly
#: route could shift; the level must still move ``min_change_z`` peer spreads, models.scorer
#: ``_relevant``.)
#: The steering centre against the wheels is also the offset's only witness: the
#: steering-versus-yaw residual is computed about the measured centre (features/) and never sees
#: an offset; the inspection checks the alignment first, then recalibrates the sensor.
#: Not here, as confounded: an accelerometer's level at rest (the grade or bank the vehicle stood
#: on), the yaw gain against the wheels (the slope: on tuning seed 303 a healthy van's new tyres
#: all round moved it to 1.9 h) and the shared steering-versus-yaw residual. On the tuning seeds an
#: accelerometer offset's residual against the wheels stood at 2 h four days before its level at
#: rest reached half of h, and a yaw offset hidden by an unrecorded tyre rotation (its
#: residual against the wheels gated out) was named by its rate at rest.
SOLE_WITNESS: dict[str, tuple[str, ...]] = {
    "yaw_sensor": ("yaw", "yaw_vs_wheels"),
    "steering_angle_sensor": ("steering_vs_wheels",),
    "accel_long_sensor": ("accel_long_vs_wheels",),
    "accel_lat_sensor": ("accel_lat_vs_wheels",),
}

#: "Versus wheels" residuals that no tyre can move, so an abnormal wheel ratio does not explain
#: them away: the steering centre is the steering angle where the yaw sensor *and* the rear
#: wheels say straight, and the wheels' vote is their left-right difference centred on its own
#: trip median (features/windows.py), so a rolling-radius change shifts the vote's centre, not
#: the straight road it finds. On the tuning seeds two steering offsets were taken for tyres
#: because a seasonal tyre swap in the same weeks moved the ratios and silenced the centre.
#: The longitudinal residual is the distance-weighted trip mean of a_x − dv/dt, v the median of
#: the four wheels: a radius error s moves it by s·Δ(v²/2)/distance, zero from stop to stop
#: (features/accel.py). Measured on the tuning seeds 101, 202, 303 and 121: over every tyre
#: distractor and every healthy vehicle whose ratios drifted (tyre swaps, spares), its CUSUM
#: never passed 0.96 h, while the yaw intercept against the wheels reached 1.9 h and the
#: lateral one 1.0 h (those stay gated); and an accelerometer offset whose sensor alert a
#: half-h ratio drift had silenced for six days (seed 121) kept it.
TYRE_PROOF: frozenset[str] = frozenset({"steering_vs_wheels", "accel_long_vs_wheels"})


def tyre_moves(residual: str) -> bool:
    """Whether a rolling-radius change can move ``residual`` (a versus-wheels one not in TYRE_PROOF)."""
    return "_vs_wheels" in residual and residual not in TYRE_PROOF


#: The four-ratio pattern of one wheel's rolling-radius change (kinematic derivation, common
#: practice for indirect tyre monitoring): wheel_ratio_<pos> = v_pos / mean(v) − 1
#: (features/wheels.py). A wheel whose radius shrinks by a small fraction d turns faster and
#: reads v·(1 + d); the mean of four then reads v·(1 + d/4), so its own ratio moves by
#: +d − d/4 = +¾d and each other wheel's by −¼d. Column k is that pattern per unit d for wheel k.
RADIUS_PATTERNS = np.eye(4) - 0.25


def single_wheel_radius_fit(ratio_change_pct) -> tuple[int, float, float]:
    """The wheel whose own radius change best explains the four ratio changes, and that change.

    Least squares over the four candidates: for wheel k, d_k = argmin Σ (x − d·t_k)² over the
    measured wheels (NaN ones left out), t_k = RADIUS_PATTERNS[:, k]; the candidate with the
    smallest residual wins, with the share of the change's sum of squares it explains
    (1: exactly one tyre; an axle's or a set's change fits one tyre poorly). Why not the largest |x|: a ratio is against the mean of all four,
    so every wheel moves when one does, and the fit weighs the whole pattern instead of one
    wheel (with all four measured and Σx = 0 the two agree; they differ when a wheel is
    missing or the pattern carries a common shift). Returns (index into POSITIONS, d in %,
    share explained): d > 0 is a smaller rolling radius (a soft or smaller tyre), d < 0 a larger one.
    """
    x = np.asarray(ratio_change_pct, dtype=float)
    measured = np.isfinite(x)
    if not measured.any():
        return 0, float("nan"), float("nan")
    t = RADIUS_PATTERNS[measured]
    xm = x[measured][:, None]
    d = (t * xm).sum(axis=0) / (t * t).sum(axis=0)
    sse = ((xm - t * d) ** 2).sum(axis=0)
    k = int(np.argmin(sse))
    total = float((xm ** 2).sum())
    return k, float(d[k]), 1.0 - float(sse[k]) / total if total > 0 else float("nan")


POSITION_WORDS = {"fl": "front-left", "fr": "front-right", "rl": "rear-left", "rr": "rear-right"}


def suggestion_for(component: str) -> str:
    """Plain-language next step for a component, always ending with the safety note."""
    family, _, pos = component.rpartition("_") if component.startswith(("wheel_sensor_", "tyre_")) else (component, "", "")
    text = SUGGESTIONS[family].format(where=POSITION_WORDS.get(pos, ""))
    return f"{text} {SAFETY_NOTE}"


def choose_component(evidence: dict[str, float], signal_z: float, attribution_z: float,
                     changed: set[str] | frozenset[str] = frozenset()) -> tuple[str, str | None]:
    """Suspected component and the evidence key that decided it.

    ``evidence`` maps keys ``wheel_signal_<pos>``, ``wheel_ratio_<pos>``,
    ``yaw``, ``yaw_gain``, ``yaw_vs_wheels``, ``steering_vs_wheels``, ``steering_vs_yaw``,
    ``accel_long``, ``accel_long_vs_wheels``, ``accel_lat``,
    ``accel_lat_vs_wheels`` to non-negative strengths (|z| or CUSUM/h);
    missing keys count as 0. ``changed``: the non-wheel sensors whose own residuals
    changed together (a corroborated drift alarm, models.scorer); with a wheel ratio
    abnormal, only such a sensor is preferred over the tyre — a level against the
    peers alone may be the vehicle's healthy offset or a coarse logger step.
    """
    e = lambda key: float(evidence.get(key, 0.0) or 0.0)  # noqa: E731
    signal = {p: e(f"wheel_signal_{p}") for p in POSITIONS}
    ratio = {p: e(f"wheel_ratio_{p}") for p in POSITIONS}
    best_signal = max(signal, key=signal.get)
    if signal[best_signal] >= signal_z:
        return f"wheel_sensor_{best_signal}", f"wheel_signal_{best_signal}"
    best_ratio = max(ratio, key=ratio.get)
    wheels_abnormal = ratio[best_ratio] >= attribution_z

    def against_wheels(key: str, component: str) -> float:
        # with a ratio abnormal a tyre explains a versus-wheels residual; one no tyre moves
        # (TYRE_PROOF) still counts, but only its change (``changed``): its level against the
        # peers is also the vehicle's own (the alignment, an accelerometer's mounting)
        if not wheels_abnormal or (not tyre_moves(key) and component in changed):
            return e(key)
        return 0.0

    yaw_rest, yaw_wheels, yaw_gain = e("yaw"), against_wheels("yaw_vs_wheels", "yaw_sensor"), e("yaw_gain")
    yaw_own = max(yaw_rest, yaw_wheels, yaw_gain)
    steer_own = against_wheels("steering_vs_wheels", "steering_angle_sensor")
    long_wheels = against_wheels("accel_long_vs_wheels", "accel_long_sensor")
    lat_wheels = against_wheels("accel_lat_vs_wheels", "accel_lat_sensor")
    # 2-out-of-3 vote: yaw-versus-steering blames the yaw sensor only when the
    # yaw sensor also disagrees with an independent source (rest or wheels).
    shared = e("steering_vs_yaw")
    yaw_gets_shared = yaw_own >= attribution_z
    candidates = {
        "yaw_sensor": (max(yaw_own, shared if yaw_gets_shared else 0.0),
                       max((("yaw", yaw_rest), ("yaw_vs_wheels", yaw_wheels), ("yaw_gain", yaw_gain),
                            ("steering_vs_yaw", shared * yaw_gets_shared)), key=lambda kv: kv[1])[0]),
        "steering_angle_sensor": (max(steer_own, 0.0 if yaw_gets_shared else shared),
                                  "steering_vs_wheels" if steer_own >= shared * (not yaw_gets_shared) else "steering_vs_yaw"),
        "accel_long_sensor": (max(e("accel_long"), long_wheels),
                              "accel_long" if e("accel_long") >= long_wheels else "accel_long_vs_wheels"),
        "accel_lat_sensor": (max(e("accel_lat"), lat_wheels),
                             "accel_lat" if e("accel_lat") >= lat_wheels else "accel_lat_vs_wheels"),
    }
    # a tyre explains its ratio and the versus-wheels residuals (zeroed above), never a level
    # at rest or yaw against steering: a sensor whose own residuals changed is the sensor
    changed_strength = max((v[0] for c, v in candidates.items() if c in changed), default=0.0)
    if wheels_abnormal and changed_strength < attribution_z:
        candidates[f"tyre_{best_ratio}"] = (ratio[best_ratio], f"wheel_ratio_{best_ratio}")
    component = max(candidates, key=lambda c: candidates[c][0])
    strength, key = candidates[component]
    if strength < attribution_z:
        return "none", None
    return component, key
