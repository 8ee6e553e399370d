"""Vehicle model file: TOML with units -> a validated, frozen Vehicle in SI units.

The key table below is the contract of DESIGN §3; README's model reference is written from it.
"""

from __future__ import annotations

import difflib
import math
import re
import tomllib
from dataclasses import asdict, dataclass
from pathlib import Path
from typing import Any, Callable

from generator import units
from generator.errors import ModelError
from generator.fixedpoint import steps_within

RATIO = units.Kind("a bare number", "", "0.85")
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
    """One model key: its unit kind, default (None = required), a range check and its meaning."""

    kind: units.Kind
    default: Any
    check: Callable[[float], bool] | None
    expect: str
    meaning: str
    choices: tuple[str, ...] = ()


def _gt0(v: float) -> bool:
    return v > 0


def _ge0(v: float) -> bool:
    return v >= 0


def _eff(v: float) -> bool:
    return 0 < v <= 1


def _angle_max(v: float) -> bool:
    return 0 <= v < math.radians(45)


SCHEMA: dict[str, dict[str, Key]] = {
    "body": {
        "mass": Key(units.MASS, None, _gt0, "> 0", "mass of the empty vehicle"),
        "cog_ahead": Key(units.LENGTH, None, None, "", "CoG ahead of the axle midpoint P (negative = behind)"),
        "cog_height": Key(units.LENGTH, None, _ge0, ">= 0", "CoG height above the floor"),
        "gyration_radius": Key(units.LENGTH, None, _gt0, "> 0", "yaw radius of gyration about the body's own CoG"),
    },
    "payload": {
        "mass_max": Key(units.MASS, None, _gt0, "> 0", "largest payload; tables span 0 .. mass_max"),
        "cog_ahead": Key(units.LENGTH, None, None, "", "payload CoG ahead of P (negative = behind)"),
        "cog_height": Key(units.LENGTH, None, _ge0, ">= 0", "payload CoG height above the floor"),
        "gyration_radius": Key(units.LENGTH, None, _ge0, ">= 0", "payload yaw radius of gyration about its own CoG"),
    },
    "wheels": {
        "track": Key(units.LENGTH, None, _gt0, "> 0", "distance between the drive-wheel contact centres (b = track/2)"),
        "diameter": Key(units.LENGTH, None, _gt0, "> 0", "drive-wheel rolling diameter"),
        "inertia": Key(units.INERTIA, None, _ge0, ">= 0", "inertia of one drive wheel about its axle"),
        "rolling_resistance": Key(RATIO, None, lambda v: 0 <= v <= 0.5, "in [0, 0.5]", "drive-wheel rolling-resistance coefficient C_rr"),
        "grip": Key(RATIO, None, lambda v: 0 < v <= 2, "in (0, 2]", "tyre-floor friction coefficient (traction limit)"),
    },
    "casters": {
        "behind_axle": Key(units.LENGTH, None, lambda v: v != 0, "!= 0", "caster contacts behind the drive axle (negative = ahead)"),
        "rolling_resistance": Key(RATIO, None, lambda v: 0 <= v <= 0.5, "in [0, 0.5]", "caster rolling-resistance coefficient C_rr"),
    },
    "drive": {
        "gear_ratio": Key(RATIO, None, _gt0, "> 0", "motor turns per wheel turn"),
        "efficiency": Key(RATIO, None, _eff, "in (0, 1]", "gearbox efficiency when the motor drives"),
        "backdrive_efficiency": Key(RATIO, "efficiency", _eff, "in (0, 1]", "gearbox efficiency when the wheel drives the motor (default: efficiency)"),
        "rotor_inertia": Key(units.INERTIA, None, _ge0, ">= 0", "motor rotor inertia"),
        "torque_constant": Key(units.TORQUE_CONSTANT, None, _gt0, "> 0", "motor torque constant k_t (= k_e in SI)"),
        "winding_resistance": Key(units.RESISTANCE, None, _ge0, ">= 0", "motor winding resistance, terminal to terminal"),
        "current_limit": Key(units.CURRENT, None, _gt0, "> 0", "largest motor current the drive allows"),
        "supply_voltage": Key(units.VOLTAGE, None, _gt0, "> 0", "drive supply (bus) voltage"),
    },
    "friction": {
        "coulomb": Key(units.FORCE, None, _ge0, ">= 0", "drivetrain Coulomb friction per wheel, at the rim"),
        "breakaway": Key(units.FORCE, "coulomb", _ge0, ">= coulomb", "friction at zero speed, at the rim (default: coulomb)"),
        "stribeck_speed": Key(units.SPEED, None, _gt0, "> 0", "rim speed where the Stribeck bump decays"),
        "viscous": Key(units.DAMPING, None, _ge0, ">= 0", "viscous friction per wheel, at the rim"),
        "deadband": Key(units.SPEED, None, _gt0, "> 0", "rim speed below which friction is shaped by deadband_shape"),
        "deadband_shape": Key(CHOICE, "ramp", None, "", "'ramp': friction grows linearly up to deadband; 'gap': none until deadband", ("ramp", "gap")),
    },
    "envelope": {
        "speed_max": Key(units.SPEED, None, _gt0, "> 0", "largest rim speed of either wheel"),
        "accel_max": Key(units.ACCEL, None, _gt0, "> 0", "largest rim acceleration of either wheel"),
        "pitch_max": Key(units.ANGLE, None, _angle_max, "in [0, 45 deg)", "steepest pitch either way (front up > 0)"),
        "roll_max": Key(units.ANGLE, None, _angle_max, "in [0, 45 deg)", "steepest roll either way (left up > 0)"),
    },
    "firmware": {
        "speed_lsb": Key(units.SPEED, None, _gt0, "> 0", "rim speed of one firmware speed step"),
        "accel_lsb": Key(units.ACCEL, None, _gt0, "> 0", "rim acceleration of one firmware step"),
        "angle_lsb": Key(units.ANGLE, None, _gt0, "> 0", "angle of one firmware pitch/roll step"),
        "mass_lsb": Key(units.MASS, None, _gt0, "> 0", "payload mass of one firmware step"),
        "current_lsb": Key(units.CURRENT, None, _gt0, "> 0", "motor current of one firmware output step"),
        "current_budget": Key(units.CURRENT, None, _gt0, "> 0", "largest allowed |firmware - float model| current"),
        "word": Key(CHOICE, "int16", None, "", "storage word of table entries", ("int16", "int32")),
    },
}


@dataclass(frozen=True)
class Body:
    mass_kg: float
    cog_ahead_m: float
    cog_height_m: float
    gyration_radius_m: float


@dataclass(frozen=True)
class Payload:
    mass_max_kg: float
    cog_ahead_m: float
    cog_height_m: float
    gyration_radius_m: float


@dataclass(frozen=True)
class Wheels:
    track_m: float
    diameter_m: float
    inertia_kgm2: float
    rolling_resistance: float
    grip: float


@dataclass(frozen=True)
class Casters:
    behind_axle_m: float
    rolling_resistance: float


@dataclass(frozen=True)
class Drive:
    gear_ratio: float
    efficiency: float
    backdrive_efficiency: float
    rotor_inertia_kgm2: float
    torque_constant_nm_per_a: float
    winding_resistance_ohm: float
    current_limit_a: float
    supply_voltage_v: float


@dataclass(frozen=True)
class Friction:
    coulomb_n: float
    breakaway_n: float
    stribeck_speed_mps: float
    viscous_ns_per_m: float
    deadband_mps: float
    deadband_shape: str


@dataclass(frozen=True)
class Envelope:
    speed_max_mps: float
    accel_max_mps2: float
    pitch_max_rad: float
    roll_max_rad: float


@dataclass(frozen=True)
class Firmware:
    speed_lsb_mps: float
    accel_lsb_mps2: float
    angle_lsb_rad: float
    mass_lsb_kg: float
    current_lsb_a: float
    current_budget_a: float
    word: str


@dataclass(frozen=True)
class Vehicle:
    """A validated vehicle model, SI units throughout."""

    name: str
    body: Body
    payload: Payload
    wheels: Wheels
    casters: Casters
    drive: Drive
    friction: Friction
    envelope: Envelope
    firmware: Firmware
    source: str = "<model>"

    def normalised(self) -> dict[str, Any]:
        """The model as plain SI numbers (no source path): what the fingerprint hashes."""
        data = asdict(self)
        data.pop("source")
        return data


_SECTION_TYPES = {
    "body": Body, "payload": Payload, "wheels": Wheels, "casters": Casters, "drive": Drive,
    "friction": Friction, "envelope": Envelope, "firmware": Firmware,
}


def _suggest(word: str, options: list[str]) -> str:
    close = difflib.get_close_matches(word, options, n=1, cutoff=0.6)
    return f" (did you mean '{close[0]}'?)" if close else ""


def _describe(raw: Any) -> str:
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
            raise ModelError(src, where, words, _describe(raw) + hint)
        return raw
    if spec.kind is RATIO:
        if isinstance(raw, bool) or not isinstance(raw, (int, float)):
            raise ModelError(src, where, "a bare number (a ratio, no unit)", _describe(raw))
        value = float(raw)
        if not math.isfinite(value):
            raise ModelError(src, where, "a finite number", _describe(raw))
        return value
    if isinstance(raw, bool) or not isinstance(raw, str):
        found = _describe(raw) + (" without a unit" if isinstance(raw, (int, float)) else "")
        raise ModelError(src, where, f"{spec.kind.name} with a unit, such as {spec.kind.example}", found)
    try:
        return units.parse(raw, spec.kind)
    except ValueError:
        raise ModelError(src, where, f"{spec.kind.name}, such as {spec.kind.example}", _describe(raw)) from None


def _check_range(src: str, where: str, spec: Key, value: float | str, raw: Any) -> None:
    if spec.check is not None and not spec.check(value):
        raise ModelError(src, where, f"a value {spec.expect}", _describe(raw))


def _read_section(src: str, name: str, table: Any) -> dict[str, Any]:
    """Validate one section's keys and return SI values keyed by schema key (defaults resolved)."""
    schema = SCHEMA[name]
    if not isinstance(table, dict):
        raise ModelError(src, name, "a [section] table", _describe(table))
    for key in table:
        if key not in schema:
            raise ModelError(src, f"{name}.{key}", f"one of the keys of [{name}]",
                             "an unknown key" + _suggest(key, list(schema)))
    values: dict[str, Any] = {}
    for key, spec in schema.items():
        where = f"{name}.{key}"
        if key not in table:
            if spec.default is None:
                raise ModelError(src, where, f"{spec.kind.name} such as {spec.kind.example}", "nothing (the key is required)")
            continue
        values[key] = _read_value(src, where, spec, table[key])
        _check_range(src, where, spec, values[key], table[key])
    for key, spec in schema.items():
        if key not in values:
            values[key] = values[spec.default] if spec.default in schema else spec.default
    return {key: values[key] for key in schema}


def _read_name(src: str, doc: dict[str, Any]) -> str:
    if "name" not in doc:
        raise ModelError(src, "name", "a C-safe name such as 'cart'", "nothing (the key is required)")
    name = doc["name"]
    if not isinstance(name, str) or not NAME_PATTERN.fullmatch(name):
        raise ModelError(src, "name", "a name matching [a-z][a-z0-9_]{0,31}", _describe(name))
    if name in C_KEYWORDS:
        raise ModelError(src, "name", "a name that is not a C or C++ keyword", _describe(name))
    return name


def _cross_checks(src: str, s: dict[str, dict[str, Any]], raw: dict[str, Any]) -> None:
    """Relations between keys: breakaway >= coulomb, plausible gyration radii, firmware steps."""
    fr, env, fw, wh = s["friction"], s["envelope"], s["firmware"], s["wheels"]
    if fr["breakaway"] < fr["coulomb"]:
        raise ModelError(src, "friction.breakaway", f"a force >= friction.coulomb ({fr['coulomb']:g} N)",
                         _describe(raw["friction"]["breakaway"]))
    for part in ("body", "payload"):
        limit = 3 * wh["track"]  # a long cart on a narrow track still passes
        if s[part]["gyration_radius"] > limit:
            raise ModelError(src, f"{part}.gyration_radius",
                             f"a radius up to 3 x wheels.track ({limit:g} m) for this vehicle",
                             _describe(raw[part]["gyration_radius"]))
    if fr["deadband"] >= env["speed_max"]:
        raise ModelError(src, "friction.deadband", f"a speed below envelope.speed_max ({env['speed_max']:g} m/s)",
                         _describe(raw["friction"]["deadband"]))
    if steps_within(fr["deadband"], fw["speed_lsb"]) >= steps_within(env["speed_max"], fw["speed_lsb"]):
        raise ModelError(src, "friction.deadband", "a deadband at least one firmware.speed_lsb step below "
                         "envelope.speed_max", _describe(raw["friction"]["deadband"]))
    steps = [("speed_lsb", env["speed_max"], "envelope.speed_max"), ("accel_lsb", env["accel_max"], "envelope.accel_max"),
             ("angle_lsb", max(env["pitch_max"], env["roll_max"]), "the larger of pitch_max and roll_max"),
             ("mass_lsb", s["payload"]["mass_max"], "payload.mass_max"),
             ("speed_lsb", fr["deadband"], "friction.deadband")]
    for key, span, what in steps:
        count = span / fw[key]
        if count > MAX_STEPS or (span > 0 and count < 1):
            raise ModelError(src, f"firmware.{key}", f"a step that puts {what} between 1 and 2^30 steps",
                             f"{_describe(raw['firmware'][key])} ({count:.3g} steps)")


def parse_document(doc: dict[str, Any], source: str) -> Vehicle:
    """Validate a parsed TOML document and build the Vehicle (raises ModelError)."""
    for key in doc:
        if key != "name" and key not in SCHEMA:
            raise ModelError(source, key, "a known section or 'name'", "an unknown key" + _suggest(key, ["name", *SCHEMA]))
    name = _read_name(source, doc)
    sections: dict[str, dict[str, Any]] = {}
    for section in SCHEMA:
        if section not in doc:
            raise ModelError(source, section, f"a [{section}] section", "nothing (the section is required)")
        sections[section] = _read_section(source, section, doc[section])
    _cross_checks(source, sections, doc)
    built = {sec: _SECTION_TYPES[sec](*sections[sec].values()) for sec in SCHEMA}
    return Vehicle(name=name, source=source, **built)


def load(path: str | Path) -> Vehicle:
    """Read and validate a model file; every problem is one ModelError line naming the key."""
    path = Path(path)
    src = str(path)
    try:
        text = path.read_bytes().decode("utf-8")
    except FileNotFoundError:
        raise ModelError(src, "file", "an existing model file", "no such file") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise ModelError(src, "file", "a readable UTF-8 TOML file", type(exc).__name__) from None
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ModelError(src, "syntax", "valid TOML", str(exc)) from None
    return parse_document(doc, src)
