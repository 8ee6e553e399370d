"""Vehicle model file: TOML with units -> a validated, frozen Vehicle in SI units.

The key table below is the model-file contract; README's model reference is written from it.
"""

from __future__ import annotations

import difflib
import math
import re
import tomllib
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from . import stability, units
from .errors import ModelError
from .vehicle import OPTIONAL_SECTION_TYPES, SECTION_TYPES, Vehicle

RATIO = units.Kind("a bare number", "", "0.85")
COUNT = units.Kind("a bare whole number", "", "4")
CHOICE = units.Kind("one of the listed words", "", "'ramp'")

C_KEYWORDS = frozenset(
    "auto break case char const continue default do double else enum extern float for goto if "
    "inline int long register restrict return short signed sizeof static struct switch typedef "
    "union unsigned void volatile while bool true false alignas alignof asm class delete new "
    "namespace operator private protected public template this throw try catch virtual".split()
)
NAME_PATTERN = re.compile(r"[a-z][a-z0-9_]{0,31}")
MAX_STEPS = 2**30


@dataclass(frozen=True)
class Key:
    """One model key: unit kind, the Vehicle field it fills, default (None = required), range, meaning."""

    kind: units.Kind
    field: str
    default: Any
    check: Callable[[float], bool] | None
    expect: str
    meaning: str
    choices: tuple[str, ...] = ()
    optional: bool = False  # absent: the field is None (no such limit), and the fingerprint leaves it out


def _within(lo: float | None, hi: float, unit: str, lo_open: bool = True) -> tuple[Callable[[float], bool], str]:
    """A range check and its text. Upper limits are what is plausible for a wheeled vehicle (common
    practice, not a physical law): they catch a unit slip such as grams for kilograms early."""
    if lo is None:
        return (lambda v: abs(v) <= hi), f"between -{hi:g} and {hi:g} {unit}".rstrip()
    low = (lambda v: v > lo) if lo_open else (lambda v: v >= lo)
    text = f"{'>' if lo_open else '>='} {lo:g} and <= {hi:g} {unit}".rstrip()
    return (lambda v: low(v) and v <= hi), text


def _key(
    kind: units.Kind,
    field: str,
    rng: tuple[Callable[[float], bool], str] | None,
    meaning: str,
    *,
    default: Any = None,
    choices: tuple[str, ...] = (),
    optional: bool = False,
) -> Key:
    check, expect = rng if rng is not None else (None, "")
    return Key(
        kind=kind,
        field=field,
        default=default,
        check=check,
        expect=expect,
        meaning=meaning,
        choices=choices,
        optional=optional,
    )


def _eff() -> tuple[Callable[[float], bool], str]:
    return (lambda v: 0 < v <= 1), "in (0, 1]"


def _angle() -> tuple[Callable[[float], bool], str]:
    return (lambda v: 0 <= v < math.radians(45)), "in [0, 45 deg)"


def _whole(hi: float, unit: str) -> tuple[Callable[[float], bool], str]:
    return (lambda v: 0 < v <= hi and v == int(v)), f"> 0 and <= {hi:g} {unit}, a whole number"


def _nonzero(hi: float) -> tuple[Callable[[float], bool], str]:
    return (lambda v: v != 0 and abs(v) <= hi), f"!= 0 and between -{hi:g} and {hi:g} m"


L, U, K = units, _within, _key
SCHEMA: dict[str, dict[str, Key]] = {
    "body": {
        "mass": K(L.MASS, "mass_kg", U(0, 5000, "kg"), "mass of the empty vehicle"),
        "cog_ahead": K(
            L.LENGTH, "cog_ahead_m", U(None, 5, "m"), "CoG ahead of the axle midpoint P (negative = behind)"
        ),
        "cog_height": K(L.LENGTH, "cog_height_m", U(0, 5, "m", False), "CoG height above the floor"),
        "gyration_radius": K(
            L.LENGTH, "gyration_radius_m", U(0, 5, "m"), "yaw radius of gyration about the body's own CoG"
        ),
    },
    "payload": {
        "mass_max": K(L.MASS, "mass_max_kg", U(0, 10000, "kg"), "largest payload; tables span 0 .. mass_max"),
        "cog_ahead": K(L.LENGTH, "cog_ahead_m", U(None, 5, "m"), "payload CoG ahead of P (negative = behind)"),
        "cog_height": K(L.LENGTH, "cog_height_m", U(0, 5, "m", False), "payload CoG height above the floor"),
        "gyration_radius": K(
            L.LENGTH, "gyration_radius_m", U(0, 5, "m", False), "payload yaw radius of gyration about its own CoG"
        ),
    },
    "wheels": {
        "track": K(
            L.LENGTH,
            "track_m",
            U(0.05, 5, "m", False),
            "distance between the drive-wheel contact centres (b = track/2)",
        ),
        "diameter": K(L.LENGTH, "diameter_m", U(0.01, 2, "m", False), "drive-wheel rolling diameter"),
        "inertia": K(
            L.INERTIA, "inertia_kgm2", U(0, 100, "kg*m^2", False), "inertia of one drive wheel about its axle"
        ),
        "rolling_resistance": K(
            RATIO, "rolling_resistance", U(0, 0.5, "", False), "drive-wheel rolling-resistance coefficient C_rr"
        ),
        "grip": K(RATIO, "grip", U(0, 2, ""), "tyre-floor friction coefficient (traction limit)"),
    },
    "casters": {
        "behind_axle": K(
            L.LENGTH, "behind_axle_m", _nonzero(5), "caster contacts behind the drive axle (negative = ahead)"
        ),
        "rolling_resistance": K(
            RATIO, "rolling_resistance", U(0, 0.5, "", False), "caster rolling-resistance coefficient C_rr"
        ),
    },
    "drive": {
        "gear_ratio": K(RATIO, "gear_ratio", U(0, 1000, ""), "motor turns per wheel turn"),
        "efficiency": K(RATIO, "efficiency", _eff(), "gearbox efficiency when the motor drives"),
        "backdrive_efficiency": K(
            RATIO,
            "backdrive_efficiency",
            _eff(),
            "gearbox efficiency when the wheel drives the motor (default: efficiency)",
            default="efficiency",
        ),
        "rotor_inertia": K(L.INERTIA, "rotor_inertia_kgm2", U(0, 1, "kg*m^2", False), "motor rotor inertia"),
        "torque_constant": K(
            L.TORQUE_CONSTANT, "torque_constant_nm_per_a", U(0, 100, "N*m/A"), "motor torque constant k_t (= k_e in SI)"
        ),
        "winding_resistance": K(
            L.RESISTANCE,
            "winding_resistance_ohm",
            U(0, 1000, "ohm", False),
            "motor winding resistance, terminal to terminal",
        ),
        "current_limit": K(L.CURRENT, "current_limit_a", U(0, 10000, "A"), "largest motor current the drive allows"),
        "supply_voltage": K(L.VOLTAGE, "supply_voltage_v", U(0, 2000, "V"), "drive supply (bus) voltage"),
        "blend_speed": K(
            L.SPEED,
            "blend_speed_mps",
            (lambda v: 0 <= v <= 10, "'0 m/s', or from firmware.speed_lsb to envelope.speed_max"),
            "rim speed over which the efficiency moves from motoring to back-driving, so the current has no "
            "step at zero speed (default: 2 x friction.deadband, at least 4 speed steps); '0 m/s': a switch, "
            "whose step verify's current-step check then fails on a slope unless current_step_margin allows it",
            optional=True,
        ),
    },
    "friction": {
        "coulomb": K(
            L.FORCE, "coulomb_n", U(0, 10000, "N", False), "drivetrain Coulomb friction per wheel, at the rim"
        ),
        "breakaway": K(
            L.FORCE,
            "breakaway_n",
            (lambda v: 0 <= v <= 10000, ">= coulomb and <= 10000 N"),
            "friction at zero speed, at the rim (default: coulomb)",
            default="coulomb",
        ),
        "stribeck_speed": K(L.SPEED, "stribeck_speed_mps", U(0, 10, "m/s"), "rim speed where the Stribeck bump decays"),
        "viscous": K(
            L.DAMPING, "viscous_ns_per_m", U(0, 100000, "N*s/m", False), "viscous friction per wheel, at the rim"
        ),
        "deadband": K(
            L.SPEED, "deadband_mps", U(0, 10, "m/s"), "rim speed below which friction is shaped by deadband_shape"
        ),
        "deadband_shape": K(
            CHOICE,
            "deadband_shape",
            None,
            "'ramp': friction grows linearly up to deadband; 'gap': none until deadband",
            default="ramp",
            choices=("ramp", "gap"),
        ),
    },
    "envelope": {
        "speed_max": K(L.SPEED, "speed_max_mps", U(0, 30, "m/s"), "largest rim speed of either wheel"),
        "accel_max": K(L.ACCEL, "accel_max_mps2", U(0, 50, "m/s^2"), "largest rim acceleration of either wheel"),
        "pitch_max": K(L.ANGLE, "pitch_max_rad", _angle(), "steepest pitch either way (front up > 0)"),
        "roll_max": K(L.ANGLE, "roll_max_rad", _angle(), "steepest roll either way (left up > 0)"),
        "forward_speed_max": K(
            L.SPEED,
            "forward_speed_max_mps",
            U(0, 30, "m/s"),
            "largest speed of P, (u_R + u_L)/2, either way (default: none beyond speed_max)",
            optional=True,
        ),
        "forward_accel_max": K(
            L.ACCEL,
            "forward_accel_max_mps2",
            U(0, 50, "m/s^2"),
            "largest acceleration of P either way (default: none beyond accel_max)",
            optional=True,
        ),
        "yaw_rate_max": K(
            L.YAW_RATE,
            "yaw_rate_max_radps",
            U(0, 100, "rad/s"),
            "largest yaw rate, (u_R - u_L)/track, either way (default: none beyond speed_max)",
            optional=True,
        ),
        "yaw_accel_max": K(
            L.YAW_ACCEL,
            "yaw_accel_max_radps2",
            U(0, 1000, "rad/s^2"),
            "largest yaw acceleration either way (default: none beyond accel_max)",
            optional=True,
        ),
    },
    "firmware": {
        "speed_lsb": K(L.SPEED, "speed_lsb_mps", U(0, 30, "m/s"), "rim speed of one firmware speed step"),
        "accel_lsb": K(L.ACCEL, "accel_lsb_mps2", U(0, 50, "m/s^2"), "rim acceleration of one firmware step"),
        "angle_lsb": K(L.ANGLE, "angle_lsb_rad", U(0, 1, "rad"), "angle of one firmware pitch/roll step"),
        "mass_lsb": K(L.MASS, "mass_lsb_kg", U(0, 10000, "kg"), "payload mass of one firmware step"),
        "current_lsb": K(L.CURRENT, "current_lsb_a", U(0, 10000, "A"), "motor current of one firmware output step"),
        "current_budget": K(
            L.CURRENT,
            "current_budget_a",
            (lambda v: 0 < v <= 10000, "> 0 A and below drive.current_limit"),
            "largest allowed |firmware - float model| current",
        ),
        "word": K(CHOICE, "word", None, "storage word of table entries", default="int16", choices=("int16", "int32")),
        "sizing": K(
            CHOICE,
            "sizing",
            None,
            "what table sizing minimises within the budget: table bytes, or lookup instructions (then bytes)",
            default="instructions",
            choices=("instructions", "bytes"),
        ),
        "point_ahead": K(
            L.LENGTH,
            "point_ahead_m",
            (lambda v: 0.001 <= abs(v) <= 5, "between 1 mm and 5 m either way (not at P)"),
            "look-ahead point on the body's x axis, ahead of P (negative = behind): predict prints its "
            "Jacobian and mass matrix, and the forward helper gets a form for it (default: none)",
            optional=True,
        ),
        "inputs": K(
            CHOICE,
            "inputs",
            None,
            "what the feed-forward takes: 'wheels' (rim speed and acceleration per wheel) or 'body' (forward "
            "speed and acceleration of P, yaw rate and yaw acceleration, in the four steps below; default: wheels)",
            choices=("wheels", "body"),
            optional=True,
        ),
        "forward_speed_lsb": K(
            L.SPEED,
            "forward_speed_lsb_mps",
            U(0, 30, "m/s"),
            "speed of P of one body-frame step (inputs = 'body'; default: speed_lsb)",
            optional=True,
        ),
        "yaw_rate_lsb": K(
            L.YAW_RATE,
            "yaw_rate_lsb_radps",
            U(0, 100, "rad/s"),
            "yaw rate of one body-frame step (inputs = 'body'; default: speed_lsb / (track/2), one wheel step)",
            optional=True,
        ),
        "forward_accel_lsb": K(
            L.ACCEL,
            "forward_accel_lsb_mps2",
            U(0, 50, "m/s^2"),
            "acceleration of P of one body-frame step (inputs = 'body'; default: accel_lsb)",
            optional=True,
        ),
        "yaw_accel_lsb": K(
            L.YAW_ACCEL,
            "yaw_accel_lsb_radps2",
            U(0, 1000, "rad/s^2"),
            "yaw acceleration of one body-frame step (inputs = 'body'; default: accel_lsb / (track/2))",
            optional=True,
        ),
        "accel_budget": K(
            L.ACCEL,
            "accel_budget_mps2",
            U(0, 50, "m/s^2"),
            "largest allowed |firmware - float model| acceleration of the forward helper (default: what "
            "2 x current_budget of back-driven current gives at the lightest load)",
            optional=True,
        ),
        "current_step_margin": K(
            L.CURRENT,
            "current_step_margin_a",
            U(0, 10000, "A"),
            "how much more the current may change between neighbouring firmware inputs than the model does there "
            "with the motoring efficiency; verify gates it (default: 4 x current_budget, at least 1 % of "
            "drive.current_limit)",
            optional=True,
        ),
        "table_bytes_max": K(
            RATIO,
            "table_bytes_max",
            _whole(1e6, "bytes"),
            "most table bytes (both functions) sizing = 'instructions' may spend",
            default=2048.0,
        ),
    },
}
LIFT: dict[str, Key] = {
    "carriage_mass": K(L.MASS, "carriage_mass_kg", U(0, 5000, "kg"), "mass of the carriage the lift moves, empty"),
    "payload_max": K(L.MASS, "payload_max_kg", U(0, 10000, "kg"), "largest load on the carriage"),
    "counterweight": K(
        L.MASS,
        "counterweight_kg",
        U(0, 10000, "kg", False),
        "mass hung on a rope over a pulley, moving against the carriage",
        default=0.0,
    ),
    "assist_force": K(
        L.FORCE,
        "assist_force_n",
        U(None, 100000, "N"),
        "constant upward force on the carriage from a gas spring or the like (downward < 0)",
        default=0.0,
    ),
    "lead": K(
        L.LENGTH,
        "lead_m",
        U(0, 2, "m"),
        "carriage travel per turn of the gearbox output: the screw lead, or 2 pi x the drum or pulley radius",
    ),
    "gear_ratio": K(RATIO, "gear_ratio", U(0, 1000, ""), "motor turns per turn of the screw or drum"),
    "efficiency": K(RATIO, "efficiency", _eff(), "screw and gearbox efficiency when the motor drives the load"),
    "backdrive_efficiency": K(
        RATIO,
        "backdrive_efficiency",
        _eff(),
        "efficiency when the load drives the motor, as when lowering a load (default: efficiency)",
        default="efficiency",
    ),
    "rotor_inertia": K(L.INERTIA, "rotor_inertia_kgm2", U(0, 1, "kg*m^2", False), "motor rotor inertia"),
    "torque_constant": K(L.TORQUE_CONSTANT, "torque_constant_nm_per_a", U(0, 100, "N*m/A"), "motor torque constant"),
    "winding_resistance": K(
        L.RESISTANCE,
        "winding_resistance_ohm",
        U(0, 1000, "ohm", False),
        "motor winding resistance, terminal to terminal",
    ),
    "current_limit": K(L.CURRENT, "current_limit_a", U(0, 10000, "A"), "largest motor current the lift's drive allows"),
    "supply_voltage": K(
        L.VOLTAGE,
        "supply_voltage_v",
        U(0, 2000, "V"),
        "the lift drive's supply voltage (default: drive.supply_voltage, one bus)",
        optional=True,
    ),
    "coulomb": K(
        L.FORCE, "coulomb_n", U(0, 100000, "N", False), "Coulomb friction of guides and screw, at the carriage"
    ),
    "viscous": K(L.DAMPING, "viscous_ns_per_m", U(0, 1e6, "N*s/m", False), "viscous friction at the carriage"),
    "deadband": K(L.SPEED, "deadband_mps", U(0, 10, "m/s"), "carriage speed over which Coulomb friction ramps up"),
    "travel": K(L.LENGTH, "travel_m", U(0, 50, "m"), "stroke of the carriage, bottom to top"),
    "speed_max": K(L.SPEED, "speed_max_mps", U(0, 10, "m/s"), "largest carriage speed either way"),
    "accel_max": K(L.ACCEL, "accel_max_mps2", U(0, 50, "m/s^2"), "largest carriage acceleration either way"),
    "speed_lsb": K(L.SPEED, "speed_lsb_mps", U(0, 10, "m/s"), "carriage speed of one firmware step of the lift"),
    "accel_lsb": K(L.ACCEL, "accel_lsb_mps2", U(0, 50, "m/s^2"), "carriage acceleration of one firmware step"),
    "mass_lsb": K(L.MASS, "mass_lsb_kg", U(0, 10000, "kg"), "lift payload of one firmware step"),
    "current_lsb": K(L.CURRENT, "current_lsb_a", U(0, 10000, "A"), "lift motor current of one output step"),
    "current_budget": K(
        L.CURRENT,
        "current_budget_a",
        (lambda v: 0 < v <= 10000, "> 0 A and below lift.current_limit"),
        "largest allowed |firmware - float model| lift current (the lift function's own budget)",
    ),
}
SKID: dict[str, Key] = {
    "wheels_per_side": K(
        COUNT,
        "wheels_per_side",
        ((lambda v: 2 <= v <= 8 and v == int(v)), ">= 2 and <= 8, a whole number"),
        "driven wheels on each side, evenly spaced over the wheelbase, turning together",
    ),
    "wheelbase": K(
        L.LENGTH,
        "wheelbase_m",
        U(0, 5, "m"),
        "distance from the first to the last wheel contact of a side; P lies midway (the vehicle turns about it)",
    ),
    "lateral_friction": K(
        RATIO,
        "lateral_friction",
        U(0, 2, "", False),
        "sideways sliding friction coefficient of a wheel on the floor (0: no turning resistance)",
    ),
    "turn_transition": K(
        L.YAW_RATE,
        "turn_transition_radps",
        U(0, 20, "rad/s"),
        "yaw rate over which the turning resistance grows from zero to full, like friction.deadband",
    ),
    "motors_per_side": K(
        COUNT,
        "motors_per_side",
        ((lambda v: 1 <= v <= 8 and v == int(v)), ">= 1 and <= skid.wheels_per_side, a whole number"),
        "motors on a side, all given the same current; [drive] and [friction] describe one motor and its "
        "gearbox (default: one motor per wheel)",
        default="wheels_per_side",
    ),
}
OPTIONAL_SCHEMA: dict[str, dict[str, Key]] = {"lift": LIFT, "skid": SKID}
"""Sections a model may leave out (the Vehicle attribute is then None); their keys when present."""
del L, U, K

FIELDS: dict[str, tuple[str, str]] = {
    f"{sec}.{key}": (sec, spec.field) for sec, keys in SCHEMA.items() for key, spec in keys.items()
}
"""Model key ("body.mass") -> (Vehicle attribute, field): the one map from file keys to dataclass fields."""


OPTIONAL_FIELDS: dict[str, tuple[str, str]] = {
    f"{sec}.{key}": (sec, spec.field) for sec, keys in OPTIONAL_SCHEMA.items() for key, spec in keys.items()
}
"""The same map for the keys of optional sections ("lift.lead")."""


def value(v: Vehicle, dotted: str) -> float | str:
    """The SI value (or choice word) of a model key in a validated vehicle (an optional key, or a key of
    an optional section, must be set)."""
    section, field = FIELDS[dotted] if dotted in FIELDS else OPTIONAL_FIELDS[dotted]
    result = getattr(getattr(v, section), field)
    assert isinstance(result, (float, str)), f"{dotted} is not set"
    return result


def _suggest(word: str, options: list[str]) -> str:
    close = difflib.get_close_matches(word, options, n=1, cutoff=0.6)
    return f" (did you mean '{close[0]}'?)" if close else ""


def _describe_raw(raw: Any) -> str:
    if isinstance(raw, bool):
        return f"boolean {str(raw).lower()}"
    if isinstance(raw, (int, float)):
        return f"bare number {raw!r}"
    if isinstance(raw, str):
        return f"string {raw!r}"
    if isinstance(raw, dict):
        return "a table"
    return f"{type(raw).__name__} {raw!r}"


def _read_value(src: str, where: str, spec: Key, raw: Any) -> float | str:
    """Convert one raw TOML value to SI (float) or a choice word, raising ModelError."""
    if spec.kind is CHOICE:
        if not isinstance(raw, str) or raw not in spec.choices:
            words = " or ".join(f"'{c}'" for c in spec.choices)
            hint = _suggest(raw, list(spec.choices)) if isinstance(raw, str) else ""
            raise ModelError(src, where, words, _describe_raw(raw) + hint)
        return raw
    if spec.kind in (RATIO, COUNT):
        if isinstance(raw, bool) or not isinstance(raw, (int, float)):
            raise ModelError(src, where, "a bare number, no unit", _describe_raw(raw))
        value = float(raw)
        if not math.isfinite(value):
            raise ModelError(src, where, "a finite number", _describe_raw(raw))
        return value
    if isinstance(raw, bool) or not isinstance(raw, str):
        found = _describe_raw(raw) + (" without a unit" if isinstance(raw, (int, float)) else "")
        raise ModelError(src, where, f"{spec.kind.name} with a unit, such as {spec.kind.example}", found)
    try:
        return units.parse(raw, spec.kind)
    except ValueError:
        raise ModelError(src, where, f"{spec.kind.name}, such as {spec.kind.example}", _describe_raw(raw)) from None


def _check_range(src: str, where: str, spec: Key, value: float | str, *, raw: Any) -> None:
    if spec.check is not None and isinstance(value, float) and not spec.check(value):
        raise ModelError(src, where, f"a value {spec.expect}", _describe_raw(raw))


def _read_section(src: str, name: str, table: Any) -> dict[str, Any]:
    """Validate one section's keys and return SI values keyed by schema key (defaults resolved)."""
    schema = SCHEMA[name] if name in SCHEMA else OPTIONAL_SCHEMA[name]
    if not isinstance(table, dict):
        raise ModelError(src, name, "a [section] table", _describe_raw(table))
    for key in table:
        if key not in schema:
            raise ModelError(
                src, f"{name}.{key}", f"one of the keys of [{name}]", "an unknown key" + _suggest(key, list(schema))
            )
    values: dict[str, Any] = {}
    for key, spec in schema.items():
        where = f"{name}.{key}"
        if key not in table:
            if spec.optional:
                values[key] = None
                continue
            if spec.default is None:
                raise ModelError(
                    src, where, f"{spec.kind.name} such as {spec.kind.example}", "nothing (the key is required)"
                )
            continue
        values[key] = _read_value(src, where, spec, table[key])
        _check_range(src, where, spec, values[key], raw=table[key])
    for key, spec in schema.items():
        if key not in values:
            values[key] = values[spec.default] if spec.default in schema else spec.default
    return {key: values[key] for key in schema}


def _read_name(src: str, doc: dict[str, Any]) -> str:
    if "name" not in doc:
        raise ModelError(src, "name", "a C-safe name such as 'cart'", "nothing (the key is required)")
    name = doc["name"]
    if not isinstance(name, str) or not NAME_PATTERN.fullmatch(name):
        raise ModelError(src, "name", "a name matching [a-z][a-z0-9_]{0,31}", _describe_raw(name))
    if name in C_KEYWORDS:
        raise ModelError(src, "name", "a name that is not a C or C++ keyword", _describe_raw(name))
    return name


def _cross_checks(src: str, s: dict[str, dict[str, Any]], raw: dict[str, Any]) -> None:
    """Relations between keys: breakaway >= coulomb, plausible gyration radii, firmware steps."""
    fr, wh = s["friction"], s["wheels"]
    if fr["breakaway"] < fr["coulomb"]:
        raise ModelError(
            src,
            "friction.breakaway",
            f"a force >= friction.coulomb ({fr['coulomb']:g} N)",
            _describe_raw(raw["friction"]["breakaway"]),
        )
    for part in ("body", "payload"):
        limit = 3 * wh["track"]  # a long cart on a narrow track still passes
        if s[part]["gyration_radius"] > limit:
            raise ModelError(
                src,
                f"{part}.gyration_radius",
                f"a radius up to 3 x wheels.track ({limit:g} m) for this vehicle",
                _describe_raw(raw[part]["gyration_radius"]),
            )
    _mass_ratio(src, s, raw)
    _firmware_steps(src, s, raw)
    _deadband_rules(src, s, raw)
    _blend_rule(src, s, raw)
    fw, drive = s["firmware"], s["drive"]
    _budget_below_limit(
        src,
        "firmware.current_budget",
        budget=fw["current_budget"],
        limit_key="drive.current_limit",
        limit=drive["current_limit"],
        raw=raw["firmware"]["current_budget"],
    )


PAYLOAD_PER_BODY_MAX = 50
"""payload.mass_max may be at most this many times body.mass: a vehicle lighter than 2 % of its load is
not one (a trial's body.mass in grams, 147 g under a 99 kg load, was blamed on payload.cog_ahead)."""


def _mass_ratio(src: str, s: dict[str, dict[str, Any]], raw: dict[str, Any]) -> None:
    """The empty vehicle weighs at least 1/PAYLOAD_PER_BODY_MAX of its largest payload."""
    least = s["payload"]["mass_max"] / PAYLOAD_PER_BODY_MAX
    if s["body"]["mass"] < least:
        raise ModelError(
            src,
            "body.mass",
            f"a mass of at least 1/{PAYLOAD_PER_BODY_MAX} of payload.mass_max ({least:g} kg; grams for kilograms?)",
            _describe_raw(raw["body"]["mass"]),
        )


def _budget_below_limit(src: str, key: str, *, budget: float, limit_key: str, limit: float, raw: Any) -> None:
    """An error budget at or above the current the drive allows bounds nothing (a trial built a 73 A
    budget on a 49 A drive)."""
    if budget >= limit:
        raise ModelError(src, key, f"a current below {limit_key} ({limit:g} A)", _describe_raw(raw))


def _firmware_steps(src: str, s: dict[str, dict[str, Any]], raw: dict[str, Any]) -> None:
    """Every span the firmware counts in steps lies between 1 and 2^30 of them (checked before the
    deadband rules, so a step coarser than the envelope names the step, not the deadband)."""
    fr, env, fw = s["friction"], s["envelope"], s["firmware"]
    _body_steps(src, s, raw)
    _body_inputs(src, s, raw)
    steps = [
        ("speed_lsb", env["speed_max"], "envelope.speed_max"),
        ("accel_lsb", env["accel_max"], "envelope.accel_max"),
        ("angle_lsb", max(env["pitch_max"], env["roll_max"]), "the larger of pitch_max and roll_max"),
        ("mass_lsb", s["payload"]["mass_max"], "payload.mass_max"),
        ("speed_lsb", fr["deadband"], "friction.deadband"),
    ]
    for key, span, what in steps:
        count = span / fw[key]
        if count > MAX_STEPS or (span > 0 and count < 1):
            raise ModelError(
                src,
                f"firmware.{key}",
                f"a step that puts {what} between 1 and 2^30 steps",
                f"{_describe_raw(raw['firmware'][key])} ({count:.3g} steps)",
            )


def _body_steps(src: str, s: dict[str, dict[str, Any]], raw: dict[str, Any]) -> None:
    """A body-frame limit that is set spans at least one firmware step of its wheels (the key named)."""
    env, fw, half_track = s["envelope"], s["firmware"], s["wheels"]["track"] / 2
    for key, lsb, span in (
        ("forward_speed_max", "speed_lsb", env["forward_speed_max"]),
        ("forward_accel_max", "accel_lsb", env["forward_accel_max"]),
        ("yaw_rate_max", "speed_lsb", _times(env["yaw_rate_max"], half_track)),
        ("yaw_accel_max", "accel_lsb", _times(env["yaw_accel_max"], half_track)),
    ):
        if span is not None and span < fw[lsb]:
            per_wheel = "" if key.startswith("forward") else " x track/2 at each wheel"
            raise ModelError(
                src,
                f"envelope.{key}",
                f"a limit{per_wheel} of at least one firmware.{lsb} ({fw[lsb]:g})",
                _describe_raw(raw["envelope"][key]),
            )


BODY_STEPS = (
    ("forward_speed_lsb", "forward_speed_max", "speed"),
    ("yaw_rate_lsb", "yaw_rate_max", "speed"),
    ("forward_accel_lsb", "forward_accel_max", "accel"),
    ("yaw_accel_lsb", "yaw_accel_max", "accel"),
)
"""Each body-frame input step key, its envelope limit and the wheel quantity it moves."""


def _body_inputs(src: str, s: dict[str, dict[str, Any]], raw: dict[str, Any]) -> None:
    """Body-frame steps are set only with inputs = 'body', and then each puts its limit (the key, or
    what the wheel limits allow) between 1 and 2^30 steps; 'wheels' is stored as unset (same fingerprint)."""
    env, fw, half_track = s["envelope"], s["firmware"], s["wheels"]["track"] / 2
    body = fw["inputs"] == "body"
    fw["inputs"] = "body" if body else None
    for key, limit, quantity in BODY_STEPS:
        if fw[key] is not None and not body:
            raise ModelError(
                src,
                f"firmware.{key}",
                "a body-frame step only with firmware.inputs = 'body'",
                _describe_raw(raw["firmware"][key]),
            )
        if not body:
            continue
        wheel_max = env[f"{quantity}_max"]
        per_wheel = 1.0 if limit.startswith("forward") else half_track
        span = min(wheel_max / per_wheel, env[limit]) if env[limit] is not None else wheel_max / per_wheel
        lsb = fw[key] if fw[key] is not None else fw[f"{quantity}_lsb"] / per_wheel
        count = span / lsb
        if count > MAX_STEPS or count < 1:
            found = _describe_raw(raw["firmware"][key]) if fw[key] is not None else f"the default {lsb:g}"
            named = (
                f"envelope.{limit}"
                if env[limit] is not None
                else f"the {limit.replace('_max', '')} limit the wheels allow"
            )
            raise ModelError(
                src,
                f"firmware.{key}",
                f"a step that puts {named} ({span:g}) between 1 and 2^30 steps",
                f"{found} ({count:.3g} steps)",
            )


def _blend_rule(src: str, s: dict[str, dict[str, Any]], raw: dict[str, Any]) -> None:
    """drive.blend_speed is 0 (a switch) or spans at least one firmware speed step, and ends inside the
    envelope (else the back-driving efficiency would never be reached)."""
    blend, lsb, top = s["drive"]["blend_speed"], s["firmware"]["speed_lsb"], s["envelope"]["speed_max"]
    if blend is not None and blend != 0 and not lsb <= blend <= top:
        raise ModelError(
            src,
            "drive.blend_speed",
            f"'0 m/s' (a switch) or a speed from firmware.speed_lsb ({lsb:g} m/s) to envelope.speed_max ({top:g} m/s)",
            _describe_raw(raw["drive"]["blend_speed"]),
        )


def _times(x: float | None, k: float) -> float | None:
    return None if x is None else x * k


def _deadband_rules(src: str, s: dict[str, dict[str, Any]], raw: dict[str, Any]) -> None:
    """The deadband ends below speed_max. In steps it then ends at least one step below the envelope
    edge, which rounds up while the deadband edge rounds down (tablespecs.limits_of)."""
    fr, env = s["friction"], s["envelope"]
    top, what = env["speed_max"], "envelope.speed_max"
    if env["forward_speed_max"] is not None and env["yaw_rate_max"] is not None:
        both = env["forward_speed_max"] + s["wheels"]["track"] / 2 * env["yaw_rate_max"]
        if both < top:  # the fastest a wheel can go inside the body-frame limits (region.py)
            top, what = both, "forward_speed_max + yaw_rate_max x track/2"
    if fr["deadband"] >= top:
        raise ModelError(
            src,
            "friction.deadband",
            f"a speed below {what} ({top:g} m/s)",
            _describe_raw(raw["friction"]["deadband"]),
        )


def parse_document(doc: dict[str, Any], source: str) -> Vehicle:
    """Validate a parsed TOML document (every key, every cross rule, static stability) and build the
    Vehicle; raises ModelError, one line naming the key."""
    known = ["name", *SCHEMA, *OPTIONAL_SCHEMA]
    for key in doc:
        if key not in known:
            raise ModelError(source, key, "a known section or 'name'", "an unknown key" + _suggest(key, known))
    name = _read_name(source, doc)
    _layout_sections(source, doc)
    sections: dict[str, dict[str, Any]] = {}
    for section in SCHEMA:
        if section == "casters" and "skid" in doc:
            continue
        if section not in doc:
            also = " (or [skid] for a skid-steer, which has none)" if section == "casters" else ""
            raise ModelError(source, section, f"a [{section}] section{also}", "nothing (the section is required)")
        sections[section] = _read_section(source, section, doc[section])
    _cross_checks(source, sections, doc)
    built: dict[str, Any] = {
        sec: SECTION_TYPES[sec](**{SCHEMA[sec][key].field: val for key, val in sections[sec].items()})
        for sec in sections
    }
    built.setdefault("casters", None)
    optional = {sec: _optional_section(source, doc, sec, sections) for sec in OPTIONAL_SCHEMA}
    vehicle = Vehicle(name=name, source=source, **optional, **built)
    stability.check(vehicle)
    return vehicle


def _layout_sections(source: str, doc: dict[str, Any]) -> None:
    """A skid-steer ([skid]) has no casters: the two sections exclude each other."""
    if "skid" in doc and "casters" in doc:
        raise ModelError(
            source, "casters", "no [casters] section in a skid-steer model ([skid])", "a [casters] section"
        )


def _optional_section(source: str, doc: dict[str, Any], name: str, sections: dict[str, dict[str, Any]]) -> Any:
    """The dataclass of an optional section present in the document (its cross rules checked, against the
    required sections' values where they relate), else None."""
    if name not in doc:
        return None
    values = _read_section(source, name, doc[name])
    if name == "lift":
        _lift_rules(source, values, doc[name])
    else:
        _skid_rules(source, values, doc[name], sections)
    fields = OPTIONAL_SCHEMA[name]
    return OPTIONAL_SECTION_TYPES[name](**{fields[key].field: val for key, val in values.items()})


def _lift_rules(src: str, s: dict[str, Any], raw: dict[str, Any]) -> None:
    """Each span the lift function counts in steps lies between 1 and 2^30 of them (the deadband at least
    one step), and the deadband ends below speed_max (else friction never reaches its Coulomb level)."""
    for key, span, what in (
        ("speed_lsb", s["speed_max"], "lift.speed_max"),
        ("accel_lsb", s["accel_max"], "lift.accel_max"),
        ("mass_lsb", s["payload_max"], "lift.payload_max"),
        ("speed_lsb", s["deadband"], "lift.deadband"),
    ):
        count = span / s[key]
        if count > MAX_STEPS or count < 1:
            unit = LIFT[what.split(".")[1]].kind.si.replace("**", "^")
            raise ModelError(
                src,
                f"lift.{key}",
                f"a step that puts {what} ({span:g} {unit}) between 1 and 2^30 steps",
                f"{_describe_raw(raw[key])} ({count:.3g} steps)",
            )
    _budget_below_limit(
        src,
        "lift.current_budget",
        budget=s["current_budget"],
        limit_key="lift.current_limit",
        limit=s["current_limit"],
        raw=raw["current_budget"],
    )
    if s["deadband"] >= s["speed_max"]:
        raise ModelError(
            src,
            "lift.deadband",
            f"a speed below lift.speed_max ({s['speed_max']:g} m/s)",
            _describe_raw(raw["deadband"]),
        )


def _skid_rules(src: str, s: dict[str, Any], raw: dict[str, Any], sections: dict[str, dict[str, Any]]) -> None:
    """Each motor of a side drives at least one of its wheels, and the turning resistance's ramp spans at
    least one firmware speed step of the wheels' difference (track x turn_transition), as the deadband
    does: a narrower one is a jump of the whole turning force between neighbouring speed steps."""
    track, lsb = sections["wheels"]["track"], sections["firmware"]["speed_lsb"]
    if track * s["turn_transition"] < lsb:
        raise ModelError(
            src,
            "skid.turn_transition",
            f"a yaw rate of at least firmware.speed_lsb / wheels.track ({lsb / track:.4g} rad/s): the ramp must span "
            "one speed step of u_R - u_L",
            _describe_raw(raw["turn_transition"]),
        )
    if s["motors_per_side"] > s["wheels_per_side"]:
        raise ModelError(
            src,
            "skid.motors_per_side",
            f"at most skid.wheels_per_side ({s['wheels_per_side']:g}) motors",
            _describe_raw(raw["motors_per_side"]),
        )


def load(path: str | Path) -> Vehicle:
    """The one way to get a vehicle from a file: read, validate every key and cross rule, check static
    stability; every problem is one ModelError line naming the file and the key."""
    path = Path(path)
    src = str(path)
    try:
        text = path.read_bytes().decode("utf-8")
    except FileNotFoundError:
        raise ModelError(src, "file", "an existing model file", "no such file") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise ModelError(src, "file", "a readable UTF-8 TOML file", type(exc).__name__) from None
    text = text.removeprefix("\ufeff")  # a UTF-8 byte-order mark, as some Windows editors write
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ModelError(src, "syntax", "valid TOML", str(exc)) from None
    return parse_document(doc, src)


def reference_rows() -> list[str]:
    """README's model reference table, one Markdown row per key, written from the schema above."""
    rows = ["| key | unit kind | default | meaning and sign convention | accepted values |", "|---|---|---|---|---|"]
    rows.append(
        "| `name` | C identifier `[a-z][a-z0-9_]{0,31}`, no C/C++ keyword | required "
        "| prefix of every generated C symbol | |"
    )
    for section, keys in (*SCHEMA.items(), *OPTIONAL_SCHEMA.items()):
        for key, spec in keys.items():
            if spec.kind is CHOICE:
                kind = " or ".join(f"`{c}`" for c in spec.choices)
            elif spec.kind in (RATIO, COUNT):
                kind = "bare number"
            else:
                kind = f"{spec.kind.name.split(' ', 1)[1]} (e.g. {spec.kind.example})"
            shown = f"{spec.default:g}" if isinstance(spec.default, float) else spec.default
            default = "optional" if spec.optional else "required" if spec.default is None else f"= `{shown}`"
            if section == "casters" and default == "required":
                default = "required, unless `[skid]` (a skid-steer has none)"
            if section in OPTIONAL_SCHEMA and default == "required":
                default = f"required in `[{section}]` (an optional section)"
            meaning = spec.meaning.replace("|", "\\|")
            rows.append(f"| `{section}.{key}` | {kind} | {default} | {meaning} | {spec.expect} |")
    return rows
