"""Header grammar: which canonical signal and unit a CSV column header names.

Export tools name the same signal in many ways ("Wheel Spd LF [kph]",
"wss_fl (km/h)", "Front left wheel speed (mph)"), so recognition works on
words, not on exact strings:

1. The unit is what stands in trailing ``[...]`` or ``(...)``; without
   brackets, a trailing unit word of our own snake_case style (``_kph``,
   ``_mps``, ``_dps``, ``_deg``, ``_g`` ...) is taken only when the remaining
   words still name a signal.
2. The name is split into lower-case words at spaces, ``_ - . /`` and
   camelCase boundaries (``WheelSpeedFL`` -> ``wheel speed fl``).
3. The words are matched against the phrase table below, most specific first.

A recognised numeric signal whose unit is missing or unknown is a column
error, never a guess; an unrecognised header is ignored (and reported).
"""

from __future__ import annotations

import re
from dataclasses import dataclass

from tracktrue import units

#: Physical quantity of each canonical signal (decides which units are valid).
QUANTITY: dict[str, str] = {
    **{f"wheel_speed_{p}": "speed" for p in ("fl", "fr", "rl", "rr")},
    "vehicle_speed": "speed",
    "yaw_rate": "angular_rate",
    "steering_angle": "angle",
    "accel_long": "acceleration",
    "accel_lat": "acceleration",
    "odometer": "distance",
    "time": "time",
    "brake": "switch",
    "lamp_abs": "switch",
    "lamp_esc": "switch",
    "dtc": "text",
    "vehicle_id": "text",
    "vin": "text",
    "date": "text",
}
NUMERIC_QUANTITIES = frozenset({"speed", "angular_rate", "angle", "acceleration", "distance"})

#: Unit spellings -> (quantity, factor to SI). Distance is stored in km (the
#: odometer is reported, not a sample column). ``V`` is an analog voltage whose
#: conversion needs a profile's zero point and sensitivity (factor None).
UNITS: dict[str, tuple[str, float | None]] = {
    "km/h": ("speed", units.KPH_MPS),
    "kph": ("speed", units.KPH_MPS),
    "kmh": ("speed", units.KPH_MPS),
    "km/hr": ("speed", units.KPH_MPS),
    "mph": ("speed", units.MPH_MPS),
    "mi/h": ("speed", units.MPH_MPS),
    "m/s": ("speed", 1.0),
    "mps": ("speed", 1.0),
    "deg/s": ("angular_rate", units.DEG_RAD),
    "°/s": ("angular_rate", units.DEG_RAD),
    "dps": ("angular_rate", units.DEG_RAD),
    "rad/s": ("angular_rate", 1.0),
    "deg": ("angle", units.DEG_RAD),
    "°": ("angle", units.DEG_RAD),
    "degrees": ("angle", units.DEG_RAD),
    "rad": ("angle", 1.0),
    "g": ("acceleration", units.G0_MPS2),
    "mg": ("acceleration", units.G0_MPS2 / 1000.0),  # milli-g: MEMS accelerometers often report it
    "m/s^2": ("acceleration", 1.0),
    "m/s2": ("acceleration", 1.0),
    "mps2": ("acceleration", 1.0),
    "ft/s^2": ("acceleration", units.FOOT_M),
    "ft/s2": ("acceleration", units.FOOT_M),
    "v": ("voltage", None),
    "km": ("distance", 1.0),
    "mi": ("distance", units.MILE_M / 1000.0),
    "miles": ("distance", units.MILE_M / 1000.0),
    "m": ("distance", 1e-3),
    "s": ("time", 1.0),
    "ms": ("time", 1e-3),
}
#: Trailing snake_case unit words accepted without brackets.
_SUFFIX_UNITS = {"kph": "kph", "kmh": "kmh", "mph": "mph", "mps": "m/s", "dps": "deg/s", "deg": "deg",
                 "rad": "rad", "g": "g", "mps2": "m/s^2", "km": "km", "mi": "mi", "s": "s", "ms": "ms"}

_POSITIONS = {
    "fl": ("fl", "lf", "front left", "left front"),
    "fr": ("fr", "rf", "front right", "right front"),
    "rl": ("rl", "lr", "rear left", "left rear"),
    "rr": ("rr", "rear right", "right rear"),
}
_WHEEL_WORDS = r"(wheel|wheels|whl|wss|ws|wheelspeed|whlspd)"
_ACCEL_WORDS = r"(acceleration|accel|acc|accelerometer|g sensor|gsensor)"
_LAMP_WORDS = r"(lamp|light|warning|tell ?tale|mil|indicator)"

#: (signal, pattern over the space-joined words), checked in this order.
_PATTERNS: tuple[tuple[str, str], ...] = (
    ("vin", r"vin|vehicle identification number"),
    ("vehicle_id", r"(vehicle|veh|unit|asset|fleet)( (id|no|number|name))?|vehicleid|vehicle_id"),
    ("time", r"(utc |unix |epoch |gps |rel |relative |elapsed )?(time|timestamp|time stamp|datetime|date time|"
             r"epoch|elapsed|t)( (utc|stamp|s|elapsed|since start|offset))?|utc"),
    # a calendar date beside a time-of-day column (ingest/logfile.py joins the two)
    ("date", r"(log |record |recording |trip |gps |utc )?date( (utc|local))?"),
    ("lamp_abs", rf"(.* )?abs( \w+)* {_LAMP_WORDS}( \w+)*|{_LAMP_WORDS} abs"),
    ("lamp_esc", rf"(.* )?esc( \w+)* {_LAMP_WORDS}( \w+)*|{_LAMP_WORDS} esc"),
    ("dtc", r"(active |stored |pending )?(dtc|dtcs|(diagnostic )?trouble codes?|fault codes?)"),
    ("brake", r"(.* )?brake( (switch|sw|pedal|light|lamp|status|state|on))*"),
    ("odometer", r"(.* )?(odometer|odo|mileage)( .*)?|total distance"),
    ("yaw_rate", r"(.* )?(yaw|yawrate|yrs)( (rate|rt|velocity|speed))?( (sensor|signal))?"),
    ("steering_angle", r"(.* )?(steering|steer|str|swa|sas)( wheel)?( (angle|ang|position|pos))?( sensor)?"),
    ("accel_long", rf"((.* )?{_ACCEL_WORDS} (longitudinal|long|lon|x)|(longitudinal|long|lon|x) ({_ACCEL_WORDS}|g)"
                   rf"|g (longitudinal|long|lon|x)|ax)( .*)?"),
    ("accel_lat", rf"((.* )?{_ACCEL_WORDS} (lateral|lat|y)|(lateral|lat|y) ({_ACCEL_WORDS}|g)"
                  rf"|g (lateral|lat|y)|ay)( .*)?"),
    ("vehicle_speed", r"((vehicle|veh|road|ground|gps|gnss) )?(speed|spd|vss)"),
)
_COMPILED = tuple((sig, re.compile(rf"^(?:{pat})$")) for sig, pat in _PATTERNS)
_WHEEL_RE = re.compile(rf"(^| ){_WHEEL_WORDS}( |$)|(^| )(speed|spd)( |$)")
_POSITION_RES = {
    pos: re.compile(r"(^| )(" + "|".join(re.escape(s) for s in spellings) + r")( |$)")
    for pos, spellings in _POSITIONS.items()
}
_UNIT_RE = re.compile(r"^(?P<name>.*?)\s*[\[({](?P<unit>[^\[\](){}]*)[\])}]\s*$")


@dataclass(frozen=True)
class Recognised:
    """What a header names: canonical signal (or None) and unit text as written."""

    header: str
    signal: str | None
    unit: str | None


def words(name: str) -> str:
    """Lower-case words of a header name, joined by single spaces."""
    text = re.sub(r"(?<=[a-z0-9])(?=[A-Z])", " ", name)
    text = re.sub(r"(?<=[A-Z])(?=[A-Z][a-z])", " ", text)
    text = re.sub(r"[_\-./:#,;|]+", " ", text.lower())
    return " ".join(text.split())


def normalise_unit(unit: str) -> str:
    """Canonical spelling of a unit as written (``m/s²``, ``m/s/s``, ``m s-2`` -> ``m/s^2``; ``deg/sec`` ->
    ``deg/s``; ``mi/hr`` -> ``mi/h``)."""
    u = unit.strip().lower()
    # SI's negative exponents, as instrument software writes them: "m s-2", "m·s⁻¹", "deg s^-1"
    u = re.sub(r"^(.+?)[\s·.*]+(s|h)\^?(?:-|⁻)([12¹²])$",
               lambda m: f"{m[1]}/{m[2]}" + ("^2" if m[3] in "2²" else ""), u)
    u = u.replace(" ", "").replace("²", "^2").replace("º", "°")
    u = re.sub(r"/sec(?=$|\^|2|/)", "/s", u)
    u = re.sub(r"/hr$", "/h", u)
    u = re.sub(r"^(.+)/s/s$", r"\1/s^2", u)  # m/s/s, ft/sec/sec
    return {"km/std": "km/h", "sec": "s", "volt": "v", "volts": "v", "degree": "deg", "miles/h": "mi/h"}.get(u, u)


def vocabulary_key(text: str) -> str:
    """Another tool's wording as a key of our vocabularies (registry columns, service-event kinds and
    components): ``Tire Rotation`` -> ``tyre_rotation``, ``front-axle`` -> ``front_axle``."""
    key = re.sub(r"[\s\-/]+", "_", text.strip().lower())
    return re.sub(r"(?<![a-z])tire", "tyre", key)


def signal_of(name_words: str) -> str | None:
    """The canonical signal named by the words of a header, or None."""
    if not name_words:
        return None
    positions = [pos for pos, rx in _POSITION_RES.items() if rx.search(name_words)]
    if len(positions) == 1 and (_WHEEL_RE.search(name_words) or name_words in _POSITIONS[positions[0]]):
        return f"wheel_speed_{positions[0]}"  # a bare position ("FL [km/h]") names a wheel speed
    for sig, rx in _COMPILED:
        if rx.match(name_words):
            return sig
    return None


def split_unit(header: str) -> tuple[str, str | None]:
    """(name, unit as written in trailing brackets — [], () or {} — or None)."""
    text = header.strip().strip('"').strip()
    m = _UNIT_RE.match(text)
    return (m.group("name"), m.group("unit").strip() or None) if m else (text, None)


def recognise(header: str) -> Recognised:
    """Split a header into name and unit and name its canonical signal."""
    name, unit = split_unit(header)
    name_words = words(name)
    signal = signal_of(name_words)
    if unit is None:
        # a unit written as the last word without brackets ("Wheel Speed FL km/h"), read before
        # words() splits it ("km h", "m s")
        written = name.split()
        if len(written) > 1 and normalise_unit(written[-1]) in UNITS:
            head_signal = signal_of(words(" ".join(written[:-1])))
            if head_signal is not None:
                return Recognised(header, head_signal, written[-1])
    if unit is None and " " in name_words:
        head, last = name_words.rsplit(" ", 1)
        if last in _SUFFIX_UNITS and signal_of(head) is not None:
            return Recognised(header, signal_of(head), _SUFFIX_UNITS[last])
    return Recognised(header, signal, unit)


def unit_factor(signal: str, unit: str | None) -> tuple[float | None, str | None]:
    """(factor to SI, problem). ``None`` factor with no problem means a voltage."""
    quantity = QUANTITY[signal]
    if unit is None:
        return None, f"no unit given for {signal} (write it after the name, e.g. [{_example_unit(quantity)}])"
    key = normalise_unit(unit)
    if key not in UNITS:
        return None, f"unknown unit {unit!r} for {signal}"
    unit_quantity, factor = UNITS[key]
    if unit_quantity == "voltage" and quantity == "acceleration":
        return None, None
    if unit_quantity != quantity:
        return None, f"unit {unit!r} is for {unit_quantity.replace('_', ' ')}, {signal} needs {quantity.replace('_', ' ')}"
    return factor, None


def _example_unit(quantity: str) -> str:
    return {"speed": "km/h", "angular_rate": "deg/s", "angle": "deg", "acceleration": "m/s^2",
            "distance": "km"}.get(quantity, "?")
