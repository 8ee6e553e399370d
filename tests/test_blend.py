"""The current through zero speed: the efficiency blends from motoring to back-driving over a band, so the
command has no jump where the direction of power flow changes; build prints and verify gates the largest
step between neighbouring firmware inputs. All on invented vehicles."""

from __future__ import annotations

import json

import numpy as np
import pytest
from kinetab.generator import dynamics, steps, synthesis

from tests.helpers import invented, run_cli, vehicle_from, write_model


@pytest.mark.parametrize("seed", [11, 12, 13])
def test_float_current_is_lipschitz_across_zero_speed_with_the_stated_constant(seed):
    """For a fixed rim force against the motion, I(u) over a fine grid across zero speed changes by at most
    |Q| r (1 - k) / (i eta k_t w) per m/s (docs/physics.md, Motor), and reaches that slope inside the band
    (a numerical check, as a finite-difference estimate of the Lipschitz constant); the two sides of
    zero meet (no jump), and beyond the band the back-driven current is Q r eta_back/(i k_t)."""
    _, fw = invented(seed, "veh")
    v = fw.vehicle
    w, k = dynamics.blend_width(v), dynamics.backdrive_ratio(v)
    assert w > 0
    rng = np.random.default_rng(seed)
    force = float(rng.uniform(5, 80))
    u = np.linspace(-3 * w, 3 * w, 60_001)  # the rim force is +: back-driven for u < 0
    current = dynamics.motor_current(v, force, u)
    slope = np.abs(np.diff(current) / np.diff(u))
    r, i, kt = v.wheels.diameter_m / 2, v.drive.gear_ratio, v.drive.torque_constant_nm_per_a
    stated = force * r * (1 - k) / (i * v.drive.efficiency * kt * w)
    assert slope.max() <= stated * (1 + 1e-6)
    assert slope.max() >= 0.999 * stated
    tiny = 1e-12
    assert dynamics.motor_current(v, force, -tiny) == pytest.approx(dynamics.motor_current(v, force, tiny), rel=1e-9)
    far = dynamics.motor_current(v, force, -2 * w)
    assert far == pytest.approx(force * r * v.drive.backdrive_efficiency / (i * kt), rel=1e-12)


def test_a_switch_is_still_there_when_asked_for_and_jumps_by_the_efficiency_ratio():
    """drive.blend_speed = 0: the old switch, whose jump at zero is the factor between 1/eta and eta_back."""
    doc, _ = invented(14, "veh")
    doc["drive"]["blend_speed"] = "0 m/s"
    v = vehicle_from(doc)
    force, tiny = 40.0, 1e-9
    ratio = dynamics.motor_current(v, force, -tiny) / dynamics.motor_current(v, force, tiny)
    assert ratio == pytest.approx(v.drive.efficiency * v.drive.backdrive_efficiency, rel=1e-12)


def _sloped(seed: int, **drive) -> dict:
    """An invented vehicle on a real ramp (6-8 deg) with a heavy payload, where zero speed matters."""

    def tweak(doc, rng):
        doc["envelope"]["pitch_max"] = f"{rng.uniform(6, 8)} deg"
        doc["drive"].update(drive)

    return invented(seed, "ramp", tweak)[0]


def test_neighbouring_firmware_steps_at_zero_speed_no_longer_jump(tmp_path, capsys):
    """The same invented vehicle with a switch and with the default blend: the switch's step at zero
    speed on its ramp exceeds the model's own (motoring) step by amperes; with the blend the excess is
    within firmware.current_step_margin's default, and predict one firmware step either side of zero
    differs by no more than the model's own step there plus that margin."""
    switch = synthesis.synthesise(vehicle_from(_sloped(21, blend_speed="0 m/s")))
    doc = _sloped(21)
    blended = synthesis.synthesise(vehicle_from(doc))
    jump, smooth = steps.neighbour_steps(switch)["speed"], steps.neighbour_steps(blended)["speed"]
    margin, _ = steps.margin_a(blended)
    assert jump.excess > 5 * margin and smooth.excess <= margin
    limit = smooth.amps
    path = write_model(tmp_path, doc)
    lsb = blended.vehicle.firmware.speed_lsb_mps
    fixed = []
    for speed in (-lsb, 0.0):
        args = ["predict", str(path), "--speed-right", f"{speed} m/s", "--speed-left", f"{speed} m/s"]
        args += ["--pitch", f"{np.degrees(blended.vehicle.envelope.pitch_max_rad)} deg", "--json"]
        args += ["--payload", f"{blended.vehicle.payload.mass_max_kg} kg"]
        code, out, _ = run_cli(args, capsys)
        assert code == 0
        fixed.append(json.loads(out)["right"]["current_fixed"])
    assert abs(fixed[0] - fixed[1]) <= limit


def test_verify_fails_on_a_step_above_the_limit_naming_the_key(tmp_path, capsys):
    """A switch on a ramp: build warns, verify exits 1 with the step, where it is, and the keys to change;
    with firmware.current_step_margin raised above the step it passes; --report holds every input's step."""
    doc = _sloped(22, blend_speed="0 m/s")
    path, out = write_model(tmp_path, doc), tmp_path / "fw"
    free = "--allow-infeasible-envelope"  # an invented drive, not sized for this vehicle: not the point here
    code, _, err = run_cli(["build", str(path), "-o", str(out), free], capsys)
    assert code == 0 and "largest current step" in err and "(verify fails on it)" in err
    code, _, err = run_cli(["verify", str(path), str(out), free], capsys)
    assert code == 1
    line = next(x for x in err.splitlines() if "largest current step" in x)
    assert "speed from" in line and "drive.blend_speed" in line and "firmware.current_step_margin" in line
    doc["firmware"]["current_step_margin"] = "50 A"
    path = write_model(tmp_path, doc, "raised.toml")
    assert run_cli(["build", str(path), "-o", str(out), free], capsys)[0] == 0
    rep = tmp_path / "r.json"
    code, _, _ = run_cli(["verify", str(path), str(out), "--report", str(rep), free], capsys)
    found = json.loads(rep.read_text())["current_step_a"]
    assert code == 0 and set(found) == {"speed", "accel", "pitch", "roll", "payload"}
    assert found["speed"]["excess"] > 4 * vehicle_from(doc).firmware.current_budget_a


def test_blend_speed_is_zero_or_between_one_speed_step_and_speed_max():
    """One line naming drive.blend_speed, saying 0 gives a switch; rpm-style units are not speeds here."""
    from kinetab.generator.errors import ModelError

    doc, _ = invented(15, "veh")
    for bad in ("0.0001 mm/s", "9 m/s"):
        doc["drive"]["blend_speed"] = bad
        with pytest.raises(ModelError) as err:
            vehicle_from(doc)
        text = str(err.value)
        assert "drive.blend_speed" in text and "'0 m/s' (a switch)" in text and "\n" not in text
