"""The simulated vehicle of the simulated controller: the float dynamics of the true vehicle under a
wheel-velocity PI loop plus the feed-forward current, with an ideal current loop, measured the way a
drive measures it (current with noise, speed from a quantised encoder)."""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from kinetab.generator import dynamics
from kinetab.generator.vehicle import Vehicle


@dataclass(frozen=True)
class PlantOptions:
    """Simulation settings (SI units)."""

    period_s: float = 0.001
    rig: str = "on-floor"
    current_noise_a: float = 0.0  # standard deviation of the measured current
    encoder_counts: int = 4096  # encoder counts per motor turn
    loop_time_s: float = 0.05  # time constant of the velocity loop on its own (sets the PI gains)
    substeps: int = 2
    seed: int = 1


@dataclass
class Plant:
    """State: rim speeds and encoder positions of both wheels, the PI integrators."""

    truth: Vehicle
    options: PlantOptions
    speed: np.ndarray = field(default_factory=lambda: np.zeros(2))
    counts: np.ndarray = field(default_factory=lambda: np.zeros(2, dtype=np.int64))
    integral: np.ndarray = field(default_factory=lambda: np.zeros(2))
    current: np.ndarray = field(default_factory=lambda: np.zeros(2))
    rim_per_count: float = 0.0
    rng: np.random.Generator = field(init=False)

    def __post_init__(self) -> None:
        v = self.truth
        self.rim_per_count = 2 * math.pi * dynamics.wheel_radius(v) / (v.drive.gear_ratio * self.options.encoder_counts)
        self.rng = np.random.default_rng(self.options.seed)
        self._position = np.zeros(2)

    def gains(self) -> tuple[float, float]:
        """PI gains in A per m/s and A per m: a first-order velocity loop of loop_time_s on the inertia
        each wheel sees, integral time five loop times (common practice for a velocity PI)."""
        v = self.truth
        if self.options.rig == "on-floor":
            inertia = float(dynamics.mass_matrix_entries(v, v.payload.mass_max_kg / 2)[0])
        else:
            inertia = dynamics.reflected_mass(v)
        kp = inertia / self.options.loop_time_s * dynamics.motor_gain(v)
        return kp, kp / (5 * self.options.loop_time_s)

    def step(self, setpoint_si: dict[str, float], ff_current_a: np.ndarray) -> None:
        """One control period with the setpoint and feed-forward current applied."""
        v, opt = self.truth, self.options
        # the setpoint's speed is where the period ends: the loop's reference now is that less one period
        # of the setpoint's acceleration (so perfect tracking needs no correction)
        end = np.array([setpoint_si["speed_right"], setpoint_si["speed_left"]])
        target = end - opt.period_s * np.array([setpoint_si["accel_right"], setpoint_si["accel_left"]])
        kp, ki = self.gains()
        error = target - self.speed
        self.integral += error * opt.period_s
        command = ff_current_a + kp * error + ki * self.integral
        limit = v.drive.current_limit_a
        self.current = np.clip(command, -limit, limit)
        dt = opt.period_s / opt.substeps
        for _ in range(opt.substeps):
            self._advance(setpoint_si, dt)

    def coast(self, setpoint_si: dict[str, float]) -> None:
        """One control period with the motors halted (no current); the PI starts afresh afterwards."""
        self.current = np.zeros(2)
        self.integral = np.zeros(2)
        dt = self.options.period_s / self.options.substeps
        for _ in range(self.options.substeps):
            self._advance(setpoint_si, dt)

    def _advance(self, sp: dict[str, float], dt: float) -> None:
        """Semi-implicit Euler over dt: forces from the motor currents, accelerations from the rig."""
        v = self.truth
        force = dynamics.force_from_current(v, self.current, self.speed)
        op = dynamics.OperatingPoint(
            sp["payload_kg"], self.speed[0], self.speed[1], 0.0, 0.0, sp["pitch_rad"], sp["roll_rad"]
        )
        ar, al = dynamics.rig_forward_accel(v, op, force[0], force[1], rig=self.options.rig)
        self.speed = self.speed + dt * np.array([float(ar), float(al)])
        self._position = self._position + dt * self.speed

    def measure(self) -> tuple[np.ndarray, np.ndarray]:
        """(motor currents A with noise, rim speeds m/s from encoder counts over the last period)."""
        counts = np.floor(self._position / self.rim_per_count).astype(np.int64)
        speed = (counts - self.counts) * self.rim_per_count / self.options.period_s
        self.counts = counts
        noise = self.rng.normal(0.0, self.options.current_noise_a, 2) if self.options.current_noise_a > 0 else 0.0
        return self.current + noise, speed
