"""The simulated vehicle of the simulated controller: the float dynamics of the true vehicle under a
wheel-velocity PI loop plus the feed-forward current, with a current loop that is ideal until it
saturates (the current limit, and the supply voltage less the back-EMF across the winding resistance),
measured the way a drive measures it (current with noise, speed from a quantised encoder).

With `batch` > 0 the plant simulates that many independent copies at once (same truth, own noise):
state arrays are (batch, 2) instead of (2,)."""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field

import numpy as np
from kinetab.generator import dynamics
from kinetab.generator.vehicle import Vehicle

MAX_STEP_S = 0.001
"""The longest integration step: a slow control period (an emulated board ticks every 50 ms) is split
so the explicit integration stays accurate and stable for any vehicle."""
LOOP_PERIODS = 4
"""The velocity loop's time constant is at least this many control periods: a sampled PI loop as fast
as its own period is unstable (common practice: a loop several times slower than its sampling)."""


@dataclass(frozen=True)
class PlantOptions:
    """Simulation settings (SI units)."""

    period_s: float = 0.001
    rig: str = "on-floor"
    current_noise_a: float = 0.0  # standard deviation of the measured current
    encoder_counts: int = 4096  # encoder counts per motor turn
    loop_time_s: float = 0.05  # time constant of the velocity loop on its own (sets the PI gains)
    substeps: int = 1  # integration steps per period at least (more for a long period or a stiff vehicle)
    seed: int = 1
    batch: int = 0  # 0: one vehicle, state (2,); n > 0: n independent copies, state (n, 2)


@dataclass
class Plant:
    """State: rim speeds and encoder positions of both wheels, the PI integrators."""

    truth: Vehicle
    options: PlantOptions
    speed: np.ndarray = field(init=False)
    counts: np.ndarray = field(init=False)
    integral: np.ndarray = field(init=False)
    current: np.ndarray = field(init=False)
    rim_per_count: float = 0.0
    rng: np.random.Generator = field(init=False)

    def __post_init__(self) -> None:
        v = self.truth
        self.rim_per_count = 2 * math.pi * dynamics.wheel_radius(v) / (v.drive.gear_ratio * self.options.encoder_counts)
        self.rng = np.random.default_rng(self.options.seed)
        shape = (self.options.batch, 2) if self.options.batch else (2,)
        self.speed, self.integral, self.current = np.zeros(shape), np.zeros(shape), np.zeros(shape)
        self.counts = np.zeros(shape, dtype=np.int64)
        self._position = np.zeros(shape)
        self._step_s = self.step_limit()

    def gains(self) -> tuple[float, float]:
        """PI gains in A per m/s and A per m: a first-order velocity loop of loop_time_s on the inertia
        each wheel sees, integral time five loop times (common practice for a velocity PI)."""
        v = self.truth
        if self.options.rig == "on-floor":
            inertia = float(dynamics.mass_matrix_entries(v, v.payload.mass_max_kg / 2)[0])
        else:
            inertia = dynamics.reflected_mass(v)
        loop_s = max(self.options.loop_time_s, LOOP_PERIODS * self.options.period_s)
        kp = inertia / loop_s * dynamics.motor_gain(v)
        return kp, kp / (5 * loop_s)

    def step(self, setpoint_si: dict[str, float], ff_current_a: np.ndarray) -> None:
        """One control period with the setpoint and feed-forward current applied."""
        opt = self.options
        # the setpoint's speed is where the period ends: the loop's reference now is that less one period
        # of the setpoint's acceleration (so perfect tracking needs no correction)
        asked = dynamics.OperatingPoint(**setpoint_si)
        end = np.array([asked.speed_right, asked.speed_left], dtype=float)
        target = end - opt.period_s * np.array([asked.accel_right, asked.accel_left], dtype=float)
        kp, ki = self.gains()
        error = target - self.speed
        low, high = self.current_range()
        command = ff_current_a + kp * error + ki * (self.integral + error * opt.period_s)
        self.current = np.clip(command, low, high)
        free = (command > low) & (command < high)  # integrate only while unsaturated (anti-windup)
        self.integral = self.integral + np.where(free, error * opt.period_s, 0.0)
        self._integrate(setpoint_si)

    def current_range(self) -> tuple[np.ndarray, np.ndarray]:
        """What the drive can put through each motor now, A: the current limit, and the supply voltage
        less the back-EMF across the winding, U = R I + k_t omega_m (docs/physics.md)."""
        d = self.truth.drive
        emf = d.torque_constant_nm_per_a * d.gear_ratio * self.speed / dynamics.wheel_radius(self.truth)
        ohm = max(d.winding_resistance_ohm, 1e-6)  # a winding of 0 ohm: the supply alone limits the speed
        low = np.maximum(-d.current_limit_a, (-d.supply_voltage_v - emf) / ohm)
        high = np.minimum(d.current_limit_a, (d.supply_voltage_v - emf) / ohm)
        return low, np.maximum(high, low)

    def coast(self, setpoint_si: dict[str, float]) -> None:
        """One control period with the motors halted (no current); the PI starts afresh afterwards."""
        self.current = np.zeros_like(self.speed)
        self.integral = np.zeros_like(self.speed)
        self._integrate(setpoint_si)

    def _integrate(self, setpoint_si: dict[str, float]) -> None:
        """One control period in steps of at most step_limit (and at least `substeps` of them)."""
        n = max(self.options.substeps, math.ceil(self.options.period_s / self._step_s - 1e-9))
        for _ in range(n):
            self._advance(setpoint_si, self.options.period_s / n)

    def step_limit(self) -> float:
        """The longest integration step, s: MAX_STEP_S, or shorter where a speed-dependent force is steep
        on a light rim mass (friction's ramp through the deadband, viscous friction, a skid-steer's
        turning resistance through its ramp), so that its slope times the step stays at 1/2 or below."""
        v = self.truth
        f, lsb = v.friction, v.firmware.speed_lsb_mps
        ramp = f.breakaway_n / f.deadband_mps if f.deadband_shape == "ramp" else 0.0
        slope = dynamics.motors_per_side(v) * (ramp + f.viscous_ns_per_m)  # N per m/s at one rim
        mass = dynamics.reflected_mass(v)  # wheels up: only the rotating parts and the drivetrain
        if self.options.rig == "on-floor":
            d, o = dynamics.mass_matrix_entries(v, 0.0)
            mass = float(d - abs(o))  # the lighter of the two modes (forward, turning)
            slope += float(dynamics.rolling_coefficients(v, v.payload.mass_max_kg)[0]) / f.deadband_mps
            if v.skid is not None:  # each rim's share of the turning ramp, over the difference of the two
                width = max(v.wheels.track_m * v.skid.turn_transition_radps, lsb)
                slope += 2 * float(dynamics.turning_coefficient(v, v.payload.mass_max_kg)) / width
        return min(MAX_STEP_S, 0.5 * mass / slope) if slope > 0 and mass > 0 else MAX_STEP_S

    def _advance(self, sp: dict[str, float], dt: float) -> None:
        """The midpoint rule over dt (accelerations from the rig at the speeds half a step on), positions
        by the trapezoid. A first-order step lags every speed-dependent force by half a step; a skid-steer's
        turning resistance, steep through its ramp, then reads as a yaw inertia 1.6 % light in the fit."""
        half = self.speed + dt / 2 * self._accel(sp, self.speed)
        new = self.speed + dt * self._accel(sp, half)
        self._position = self._position + dt * (self.speed + new) / 2
        self.speed = new

    def _accel(self, sp: dict[str, float], speed: np.ndarray) -> np.ndarray:
        """Rim accelerations at these speeds: forces from the motor currents, the rest from the rig."""
        v = self.truth
        force = dynamics.force_from_current(v, self.current, speed)
        op = dataclasses.replace(
            dynamics.OperatingPoint(**sp),
            speed_right=speed[..., 0],
            speed_left=speed[..., 1],
            accel_right=0.0,
            accel_left=0.0,
        )
        ar, al = dynamics.rig_forward_accel(v, op, force[..., 0], force[..., 1], rig=self.options.rig)
        return np.stack([np.asarray(ar, float), np.asarray(al, float)], -1)

    def measure(self) -> tuple[np.ndarray, np.ndarray]:
        """(motor currents A with noise, rim speeds m/s from encoder counts over the last period)."""
        counts = np.floor(self._position / self.rim_per_count).astype(np.int64)
        speed = (counts - self.counts) * self.rim_per_count / self.options.period_s
        self.counts = counts
        sigma = self.options.current_noise_a
        noise = self.rng.normal(0.0, sigma, self.speed.shape) if sigma > 0 else 0.0
        return self.current + noise, speed
