"""The validated vehicle as frozen dataclasses in SI units (built only by `model`, by keyword)."""

from __future__ import annotations

from dataclasses import asdict, dataclass
from typing import Any


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
class Skid:
    """The optional [skid] section: a skid-steer layout, n driven wheels per side (dynamics.py)."""

    wheels_per_side: float
    wheelbase_m: float
    lateral_friction: float
    turn_transition_radps: float
    motors_per_side: float


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
    blend_speed_mps: float | None = None  # None: the default of dynamics.blend_width


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
    forward_speed_max_mps: float | None = None  # body-frame limits (region.py); None: no such limit
    forward_accel_max_mps2: float | None = None
    yaw_rate_max_radps: float | None = None
    yaw_accel_max_radps2: float | None = None


@dataclass(frozen=True)
class FirmwareFormat:
    """The [firmware] section: the SI value of one step of each quantity, the table word, the budget."""

    speed_lsb_mps: float
    accel_lsb_mps2: float
    angle_lsb_rad: float
    mass_lsb_kg: float
    current_lsb_a: float
    current_budget_a: float
    word: str
    sizing: str  # what sizing minimises: "instructions" (then bytes) or "bytes"
    table_bytes_max: float  # cap on table bytes when minimising instructions
    current_step_margin_a: float | None = None  # None: 4 x current_budget (steps.margin_a)
    accel_budget_mps2: float | None = None  # None: synthesis.forward_budget's default
    point_ahead_m: float | None = None  # the look-ahead point (dynamics.point_jacobian); None: none
    inputs: str | None = None  # "body": the feed-forward takes body-frame inputs (bodyframe.py); None: wheels
    forward_speed_lsb_mps: float | None = None  # body-frame input steps; None: bodyframe.lsb's default
    yaw_rate_lsb_radps: float | None = None
    forward_accel_lsb_mps2: float | None = None
    yaw_accel_lsb_radps2: float | None = None


@dataclass(frozen=True, kw_only=True)
class Lift:
    """The optional [lift] section: a vertical axis lifting a carriage and its payload (lift.py)."""

    carriage_mass_kg: float
    payload_max_kg: float
    counterweight_kg: float
    assist_force_n: float
    lead_m: float
    gear_ratio: float
    efficiency: float
    backdrive_efficiency: float
    rotor_inertia_kgm2: float
    torque_constant_nm_per_a: float
    winding_resistance_ohm: float
    current_limit_a: float
    supply_voltage_v: float | None  # None: drive.supply_voltage (one bus)
    coulomb_n: float
    viscous_ns_per_m: float
    deadband_mps: float
    travel_m: float
    speed_max_mps: float
    accel_max_mps2: float
    speed_lsb_mps: float  # the lift function's firmware steps and its error budget
    accel_lsb_mps2: float
    mass_lsb_kg: float
    current_lsb_a: float
    current_budget_a: float


@dataclass(frozen=True)
class Vehicle:
    """A validated vehicle model, SI units throughout."""

    name: str
    body: Body
    payload: Payload
    wheels: Wheels
    casters: Casters | None  # None: a skid-steer, which has no casters
    drive: Drive
    friction: Friction
    envelope: Envelope
    firmware: FirmwareFormat
    source: str = "<model>"
    lift: Lift | None = None  # the optional vertical lift axis; None: the vehicle has none
    skid: Skid | None = None  # the skid-steer layout; None: two drive wheels and casters

    def normalised(self) -> dict[str, Any]:
        """The model as plain SI numbers (no source path): what the fingerprint hashes. Optional limits
        that are not set are left out, so a model without them keeps its fingerprint."""
        data = asdict(self)
        data.pop("source")
        for optional in ("lift", "skid"):  # a vehicle without them keeps the fingerprint it had before they existed
            if data[optional] is None:
                data.pop(optional)
        for section, fields in data.items():  # optional keys left unset
            if isinstance(fields, dict):
                data[section] = {k: x for k, x in fields.items() if x is not None}
        return data


SECTION_TYPES: dict[str, type] = {
    "body": Body,
    "payload": Payload,
    "wheels": Wheels,
    "casters": Casters,
    "drive": Drive,
    "friction": Friction,
    "envelope": Envelope,
    "firmware": FirmwareFormat,
}

OPTIONAL_SECTION_TYPES: dict[str, type] = {"lift": Lift, "skid": Skid}
"""Sections a model may leave out; the Vehicle attribute is then None."""
