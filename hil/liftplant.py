"""The simulated lift axis of the simulated controller: the float physics of the true lift (generator/lift.py)
under a carriage-speed PI loop plus the feed-forward current, with the current limit and the supply voltage
less the back-EMF, measured as a drive measures it (current with noise, speed from a quantised encoder).
Between lift runs the brake holds the carriage (speed 0), as a lift's holding brake does."""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from kinetab.generator import lift as liftphysics
from kinetab.generator.dynamics import G_N, opposed
from kinetab.generator.vehicle import Lift, Vehicle

from .plant import LOOP_PERIODS, MAX_STEP_S, PlantOptions


def accel_from_torque(lift: Lift, torque_nm: float, payload_kg: float, speed_mps: float) -> float:
    """Carriage acceleration, m/s^2, that a motor torque gives: lift.motor_torque solved for the
    acceleration. The screw factor depends on whether the load drives the motor, which depends on the
    acceleration: motoring is tried first, then back-driving; where neither is consistent (a torque
    between the two branches, a self-locking screw) the screw carries no force and the carriage moves
    under its own weight and friction."""
    k = liftphysics.motor_rad_per_m(lift)
    up, down = lift.carriage_mass_kg + payload_kg, lift.counterweight_kg
    mass = up + down
    rest = (up - down) * G_N - lift.assist_force_n + float(liftphysics.friction(lift, speed_mps))
    for backdriven, scale in enumerate((1.0, float(liftphysics.backdrive_factor(lift, speed_mps)))):
        screw = scale / (k * lift.efficiency)
        accel = (torque_nm - screw * rest) / (lift.rotor_inertia_kgm2 * k + screw * mass)
        if bool(opposed(mass * accel + rest, speed_mps)) == bool(backdriven):
            return accel
    return -rest / mass


@dataclass
class LiftPlant:
    """State: carriage speed and encoder position, the PI integrator, the motor current."""

    lift: Lift
    supply_v: float
    options: PlantOptions
    speed: float = 0.0
    integral: float = 0.0
    current: float = 0.0
    counts: int = 0
    _position: float = 0.0
    _payload: float = 0.0
    rng: np.random.Generator = field(init=False)

    def __post_init__(self) -> None:
        self.rng = np.random.default_rng(self.options.seed + 1)

    @classmethod
    def of(cls, truth: Vehicle, options: PlantOptions) -> LiftPlant:
        assert truth.lift is not None
        return cls(lift=truth.lift, supply_v=liftphysics.supply_voltage(truth, truth.lift), options=options)

    @property
    def per_count_m(self) -> float:
        """Carriage travel per encoder count, m (the encoder on the motor shaft)."""
        return 2 * math.pi / (liftphysics.motor_rad_per_m(self.lift) * self.options.encoder_counts)

    def gains(self) -> tuple[float, float]:
        """PI gains in A per m/s and A per m: a first-order speed loop of loop_time_s on the inertia the
        motor sees at half the payload, integral time five loop times (as the drive's, plant.gains)."""
        lift, k = self.lift, liftphysics.motor_rad_per_m(self.lift)
        mass = lift.carriage_mass_kg + lift.payload_max_kg / 2 + lift.counterweight_kg
        amps_per_accel = (lift.rotor_inertia_kgm2 * k + mass / (k * lift.efficiency)) / lift.torque_constant_nm_per_a
        loop_s = max(self.options.loop_time_s, LOOP_PERIODS * self.options.period_s)
        kp = amps_per_accel / loop_s
        return kp, kp / (5 * loop_s)

    def current_range(self) -> tuple[float, float]:
        """What the lift drive can put through its motor now, A: the limit, and U = R I + k_t omega_m."""
        lift = self.lift
        emf = lift.torque_constant_nm_per_a * liftphysics.motor_rad_per_m(lift) * self.speed
        ohm = max(lift.winding_resistance_ohm, 1e-6)
        low = max(-lift.current_limit_a, (-self.supply_v - emf) / ohm)
        high = min(lift.current_limit_a, (self.supply_v - emf) / ohm)
        return low, max(high, low)

    def step(self, speed_mps: float, accel_mps2: float, payload_kg: float, ff_current_a: float) -> None:
        """One control period with the setpoint (the speed where the period ends) and the feed-forward."""
        dt = self.options.period_s
        error = speed_mps - dt * accel_mps2 - self.speed
        kp, ki = self.gains()
        low, high = self.current_range()
        command = ff_current_a + kp * error + ki * (self.integral + error * dt)
        self.current = min(max(command, low), high)
        if low < command < high:  # anti-windup: integrate only while unsaturated
            self.integral += error * dt
        self._payload = payload_kg
        n = max(self.options.substeps, math.ceil(dt / MAX_STEP_S - 1e-9))
        torque, h = self.lift.torque_constant_nm_per_a * self.current, dt / n
        for _ in range(n):  # the midpoint rule: a first-order step lagged friction by half a step, which the
            # fit saw as a carriage 0.4 % light (viscous force times the step looks like inertia)
            mid = self.speed + h / 2 * accel_from_torque(self.lift, torque, payload_kg, self.speed)
            end = self.speed + h * accel_from_torque(self.lift, torque, payload_kg, mid)
            self._position += h * (self.speed + end) / 2
            self.speed = end

    def hold(self) -> None:
        """One control period with the brake on: the carriage stands, no current, the PI starts afresh."""
        self.speed, self.current, self.integral = 0.0, 0.0, 0.0

    def measure(self) -> tuple[float, float]:
        """(motor current A with noise, carriage speed m/s from encoder counts over the last period)."""
        counts = math.floor(self._position / self.per_count_m)
        speed = (counts - self.counts) * self.per_count_m / self.options.period_s
        self.counts = counts
        sigma = self.options.current_noise_a
        return self.current + (float(self.rng.normal(0.0, sigma)) if sigma > 0 else 0.0), speed
