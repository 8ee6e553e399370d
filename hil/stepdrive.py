"""The simulated drive seen through the firmware's integers: the plant (hil/plant.py) advanced one control
period per applied command, and measured in firmware steps. Both the host simulation and the drive behind
the emulated board use it, so the two cannot differ in how a command becomes physics."""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
from kinetab.generator import interface
from kinetab.generator.errors import InternalError
from kinetab.generator.synthesis import Firmware

from .liftplant import LiftPlant
from .plant import Plant

INT32 = (-(2**31), 2**31 - 1)


def idle_setpoint() -> dict[str, float]:
    """Standing still, level, empty: what the vehicle holds before the first setpoint."""
    return {name: 0.0 for name in interface.FF_IN.si_names().values()}


@dataclass
class StepDrive:
    """The plant behind one controller; `last` is the setpoint the vehicle coasts under when halted."""

    fw: Firmware
    plant: Plant
    last: dict[str, float] = field(default_factory=idle_setpoint)

    def measure(self) -> tuple[int, ...]:
        """The period that ended, as the MEASURED columns in firmware steps (an int32 sensor saturates)."""
        current, speed = self.plant.measure()
        if not (np.all(np.isfinite(current)) and np.all(np.isfinite(speed))):
            raise InternalError("the simulated vehicle diverged (a current or speed is not finite)")
        f = self.fw.vehicle.firmware
        steps = [*np.round(current / f.current_lsb_a), *np.round(speed / f.speed_lsb_mps)]
        return tuple(int(np.clip(x, *INT32)) for x in steps)

    def apply(self, inputs: Sequence[int], ff: Sequence[int], *, halted: bool) -> None:
        """One period under a setpoint (the input struct's steps) and its feed-forward (FF_OUT current
        steps), or coasting."""
        if halted:  # motors off: the vehicle coasts
            self.plant.coast(self.last)
            return
        st = interface.ff_in(self.fw.vehicle)
        fields = interface.rows_to_fields(st, np.array([inputs], dtype=np.int64))
        si = interface.to_si(self.fw.vehicle, st, fields)
        self.last = {k: float(np.asarray(val).ravel()[0]) for k, val in si.items()}
        self.plant.step(self.last, np.array(ff, dtype=float) * self.fw.vehicle.firmware.current_lsb_a)


@dataclass
class LiftStepDrive:
    """The simulated lift behind one controller, in the lift's firmware steps (interface.LIFT_IN,
    LIFT_OUT, LIFT_MEASURED); the brake holds the carriage whenever no lift setpoint is applied."""

    fw: Firmware
    plant: LiftPlant

    def measure(self) -> tuple[int, ...]:
        """The period that ended as the LIFT_MEASURED columns (an int32 sensor saturates)."""
        current, speed = self.plant.measure()
        if not (math.isfinite(current) and math.isfinite(speed)):
            raise InternalError("the simulated lift diverged (a current or speed is not finite)")
        lift = self.fw.vehicle.lift
        assert lift is not None
        steps = (round(current / lift.current_lsb_a), round(speed / lift.speed_lsb_mps))
        return tuple(int(np.clip(x, *INT32)) for x in steps)

    def apply(self, inputs: Sequence[int], ff: Sequence[int], *, held: bool) -> None:
        """One period under a lift setpoint (LIFT_IN steps) and its feed-forward (LIFT_OUT steps), or held."""
        lift = self.fw.vehicle.lift
        if held or lift is None:
            self.plant.hold()
            return
        fields = interface.rows_to_fields(interface.LIFT_IN, np.array([inputs], dtype=np.int64))
        si = interface.to_si(self.fw.vehicle, interface.LIFT_IN, fields)
        speed, accel, payload = (float(np.ravel(si[k])[0]) for k in interface.LIFT_IN.si_names().values())
        self.plant.step(speed, accel, payload, ff[0] * lift.current_lsb_a)
