"""The optional lift axis: its physics against a hand calculation and an independent Lagrange derivation
(sympy), power balance, its envelope lines, the model section's errors, and predict/envelope/build output.

Every lift here is invented for the test (random within plausible ranges, or the worked example below);
no value is a product's or a handbook's.
"""

from __future__ import annotations

import math
import tomllib

import numpy as np
import pytest
import sympy as sp
from kinetab.generator import lift, model, synthesis
from kinetab.generator.dynamics import G_N
from kinetab.generator.errors import ModelError

from .helpers import demo_doc, run_cli, vehicle_from, write_model

# Worked example, invented: a belt-and-drum lift of a tote carriage with a counterweight.
WORKED = {
    "carriage_mass": "40 kg",
    "payload_max": "60 kg",
    "counterweight": "20 kg",
    "lead": f"{2 * math.pi * 0.05!r} m",  # a drum of 50 mm radius: 2 pi r of travel per turn
    "gear_ratio": 20,
    "efficiency": 0.9,
    "backdrive_efficiency": 0.8,
    "rotor_inertia": "2e-4 kg*m^2",
    "torque_constant": "0.1 N*m/A",
    "winding_resistance": "0.5 ohm",
    "current_limit": "40 A",
    "supply_voltage": "48 V",
    "coulomb": "30 N",
    "viscous": "50 N*s/m",
    "deadband": "10 mm/s",
    "travel": "1.5 m",
    "speed_max": "0.5 m/s",
    "accel_max": "1 m/s^2",
    "speed_lsb": "0.5 mm/s",
    "accel_lsb": "2 mm/s^2",
    "mass_lsb": "0.1 kg",
    "current_lsb": "10 mA",
    "current_budget": "40 mA",
}


def with_lift(section: dict) -> model.Vehicle:
    doc = demo_doc()
    doc["lift"] = dict(section)
    return vehicle_from(doc)


def random_lift(rng: np.random.Generator) -> dict:
    """An invented lift, uniform within plausible ranges for screw and belt lifts on mobile robots."""
    u = lambda lo, hi: float(rng.uniform(lo, hi))  # noqa: E731
    speed, accel, payload = u(0.05, 0.8), u(0.1, 3), u(5, 300)
    return {
        "carriage_mass": f"{u(5, 150)} kg",
        "payload_max": f"{payload} kg",
        "counterweight": f"{u(0, 80)} kg",
        "assist_force": f"{u(-50, 400)} N",
        "lead": f"{u(0.004, 0.5)} m",
        "gear_ratio": u(1, 50),
        "efficiency": u(0.4, 0.95),
        "backdrive_efficiency": u(0.2, 0.9),
        "rotor_inertia": f"{u(1e-6, 1e-3)} kg*m^2",
        "torque_constant": f"{u(0.02, 0.5)} N*m/A",
        "winding_resistance": f"{u(0.05, 3)} ohm",
        "current_limit": f"{u(5, 60)} A",
        "coulomb": f"{u(0, 80)} N",
        "viscous": f"{u(0, 300)} N*s/m",
        "deadband": f"{u(0.01, 0.2) * speed} m/s",
        "travel": f"{u(0.1, 3)} m",
        "speed_max": f"{speed} m/s",
        "accel_max": f"{accel} m/s^2",
        "speed_lsb": f"{speed / 2 ** u(8, 13)} m/s",
        "accel_lsb": f"{accel / 2 ** u(6, 11)} m/s^2",
        "mass_lsb": f"{payload / 2 ** u(5, 10)} kg",
        "current_lsb": f"{u(0.002, 0.02)} A",
        "current_budget": f"{u(0.03, 0.1)} A",
    }


def test_worked_example_by_hand():
    """Hand calculation (ours, for the invented lift above). Motor angle per metre: 2 pi i / lead = 20 / 0.05
    = 400 rad/m. Lifting the full load at v = 0.4 m/s, a = 0.5 m/s^2:
    F = (40 + 60 + 20) 0.5 + (40 + 60 - 20) g + 30 + 50 x 0.4 = 60 + 784.532 + 30 + 20 = 894.532 N;
    screw torque F / (400 x 0.9) = 2.484811 N*m, rotor 2e-4 x 400 x 0.5 = 0.04 N*m, I = 2.524811 / 0.1 = 25.24811 A,
    U = 0.5 I + 0.1 x 400 x 0.4 = 12.62406 + 16 = 28.62406 V.
    Lowering it at 0.4 m/s (a = 0): F = 784.532 - 30 - 20 = 734.532 N pushes up while the carriage moves down,
    so the load drives the motor: torque F x 0.8 / 400 = 1.469064 N*m (eta_back, beyond the blend band),
    I = 14.69064 A, U = 7.34532 - 16 = -8.65468 V."""
    lt = with_lift(WORKED).lift
    assert lt is not None
    g = 784.532  # 80 kg x 9.80665 m/s^2 (standard gravity, exact by definition), rounded to 1e-3 N
    assert lift.load_force(lt, 60, 0.4, 0.5) == pytest.approx(60 + g + 30 + 20, abs=1e-3)
    current = lift.motor_current(lt, 60, 0.4, 0.5)
    assert current == pytest.approx(25.24811, abs=1e-4)
    assert lift.motor_voltage(lt, current, 0.4) == pytest.approx(28.62406, abs=1e-4)
    lowering = lift.motor_current(lt, 60, -0.4, 0.0)
    assert lowering == pytest.approx(14.69064, abs=1e-4)
    assert lift.motor_voltage(lt, lowering, -0.4) == pytest.approx(-8.65468, abs=1e-4)
    assert lift.reflected_mass(lt) == pytest.approx(2e-4 * 400**2)  # 32 kg
    assert lift.motor_current(lt, 0, 0, 0) == pytest.approx(20 * G_N / (400 * 0.9) / 0.1)  # holding, empty


def _lagrange_torque(m_up: float, m_w: float, assist: float, lead: float, ratio: float, rotor: float):
    """Motor torque from Lagrange's equation in the motor angle theta (sympy), frictionless and lossless:
    z = lead theta / (2 pi i); T = (m_up + m_w) z'^2 / 2 + J_r theta'^2 / 2; V = (m_up - m_w) g z - F_assist z.
    Returns a function (accel of the carriage) -> torque."""
    t = sp.symbols("t")
    theta = sp.Function("theta")(t)
    z = lead * theta / (2 * sp.pi * ratio)
    kinetic = (m_up + m_w) * sp.diff(z, t) ** 2 / 2 + rotor * sp.diff(theta, t) ** 2 / 2
    potential = (m_up - m_w) * G_N * z - assist * z
    lag = kinetic - potential
    torque = sp.diff(sp.diff(lag, sp.diff(theta, t)), t) - sp.diff(lag, theta)
    accel = sp.symbols("a")
    torque = torque.subs(sp.diff(theta, t, 2), accel * 2 * sp.pi * ratio / lead)
    return sp.lambdify(accel, sp.simplify(torque))


@pytest.mark.parametrize("seed", range(6))
def test_lossless_torque_is_lagranges(seed):
    """With efficiency 1 and no friction, the motor torque is what Lagrange's equation gives for the
    carriage, payload, counterweight, assist force and rotor (an independent derivation in sympy)."""
    rng = np.random.default_rng(seed)
    section = random_lift(rng) | {
        "efficiency": 1.0,
        "backdrive_efficiency": 1.0,
        "coulomb": "0 N",
        "viscous": "0 N*s/m",
    }
    lt = with_lift(section).lift
    assert lt is not None
    payload = float(rng.uniform(0, lt.payload_max_kg))
    ref = _lagrange_torque(
        lt.carriage_mass_kg + payload,
        lt.counterweight_kg,
        lt.assist_force_n,
        lt.lead_m,
        lt.gear_ratio,
        lt.rotor_inertia_kgm2,
    )
    for accel in rng.uniform(-lt.accel_max_mps2, lt.accel_max_mps2, 5):
        speed = float(rng.uniform(-lt.speed_max_mps, lt.speed_max_mps))
        assert lift.motor_torque(lt, payload, speed, accel) == pytest.approx(float(ref(accel)), rel=1e-9, abs=1e-12)


@pytest.mark.parametrize("seed", range(6))
def test_steady_motion_balances_power(seed):
    """At constant speed beyond the blend band the motor's shaft power times the efficiency is the load's
    power when the motor drives it, and the load's power times eta_back is the shaft power when it drives
    the motor (energy balance, common practice)."""
    rng = np.random.default_rng(100 + seed)
    lt = with_lift(random_lift(rng)).lift
    assert lt is not None
    for speed in (lt.speed_max_mps, -lt.speed_max_mps, 0.5 * lt.speed_max_mps):
        if abs(speed) <= lift.blend_width(lt):
            continue
        payload = float(rng.uniform(0, lt.payload_max_kg))
        load_power = float(lift.load_force(lt, payload, speed, 0.0)) * speed
        shaft_power = float(lift.motor_torque(lt, payload, speed, 0.0)) * lift.motor_rad_per_m(lt) * speed
        if load_power >= 0:
            assert shaft_power * lt.efficiency == pytest.approx(load_power, rel=1e-12)
        else:
            assert shaft_power == pytest.approx(load_power * lt.backdrive_efficiency, rel=1e-12)


@pytest.mark.parametrize("seed", range(4))
def test_envelope_peaks_are_the_largest_on_a_dense_grid(seed):
    """The corner points hold the largest |current| and |voltage| of the whole box: a 41 x 161 x 21 grid
    of payload, speed and acceleration finds nothing larger (the current is piecewise linear in each)."""
    rng = np.random.default_rng(200 + seed)
    v = with_lift(random_lift(rng))
    lt = v.lift
    assert lt is not None
    rep = lift.analyse(v)
    assert rep is not None
    p, s, a = np.meshgrid(
        np.linspace(0, lt.payload_max_kg, 41),
        np.linspace(-lt.speed_max_mps, lt.speed_max_mps, 161),
        np.linspace(-lt.accel_max_mps2, lt.accel_max_mps2, 21),
    )
    current = lift.motor_current(lt, p, s, a)
    assert np.abs(current).max() <= rep.peak_current.value * (1 + 1e-12)
    assert np.abs(lift.motor_voltage(lt, current, s)).max() <= rep.peak_voltage.value * (1 + 1e-12)


def test_stroke_time_trapezoid_and_triangle():
    """Rest-to-rest time of a trapezoidal speed profile (common practice): travel/v + v/a when v^2/a <= travel,
    else 2 sqrt(travel/a)."""
    long = with_lift(WORKED).lift
    assert long is not None
    assert lift.stroke(long) == pytest.approx((1.5 / 0.5 + 0.5 / 1.0, 0.5))
    short = with_lift(WORKED | {"travel": "0.1 m"}).lift
    assert short is not None
    assert lift.stroke(short) == pytest.approx((2 * math.sqrt(0.1 / 1.0), math.sqrt(0.1)))


def test_a_model_without_a_lift_keeps_its_fingerprint_and_one_with_a_lift_changes_it():
    plain = vehicle_from(demo_doc())
    assert plain.lift is None
    assert "lift" not in plain.normalised()
    assert synthesis.fingerprint(with_lift(WORKED)) != synthesis.fingerprint(plain)


@pytest.mark.parametrize(
    ("change", "where"),
    [
        ({"lead": None}, "lift.lead"),
        ({"lead": 0.01}, "lift.lead"),
        ({"efficiency": 1.2}, "lift.efficiency"),
        ({"deadband": "0.6 m/s"}, "lift.deadband"),
        ({"counterweight": "-3 kg"}, "lift.counterweight"),
        ({"gear_ration": 3}, "lift.gear_ration"),
        ({"current_budget": "40 A"}, "lift.current_budget"),  # at the lift's current limit: bounds nothing
    ],
)
def test_lift_section_errors_name_the_key(change, where):
    section = dict(WORKED)
    for key, value in change.items():
        if value is None:
            del section[key]
        else:
            section[key] = value
    with pytest.raises(ModelError) as err:
        with_lift(section)
    assert where in str(err.value)
    assert "\n" not in str(err.value)


def test_unknown_section_suggests_lift():
    doc = demo_doc()
    doc["lfit"] = dict(WORKED)
    with pytest.raises(ModelError, match="did you mean 'lift'"):
        vehicle_from(doc)


def test_cli_envelope_predict_and_build_with_a_lift(tmp_path, capsys):
    doc = demo_doc()
    doc["lift"] = dict(WORKED)
    path = write_model(tmp_path, doc)
    code, out, err = run_cli(["envelope", str(path)], capsys)
    assert code == 0, err
    assert "holding current" in out and "full stroke" in out
    code, out, err = run_cli(
        ["predict", str(path), "--lift-payload", "60", "--lift-speed", "0.4", "--lift-accel", "0.5", "--json"], capsys
    )
    assert code == 0, err
    import json

    lifted = json.loads(out)["lift"]
    assert lifted["current"] == pytest.approx(25.24811, abs=1e-4)  # the worked example
    bound = synthesis.synthesise(vehicle_from(doc)).lift.bound_a  # inputs on whole steps: no rounding
    assert abs(lifted["current_fixed"] - lifted["current"]) <= bound
    code, _, err = run_cli(["predict", str(path), "--lift-speed", "2", "--lift-payload", "60"], capsys)
    assert code == 0 and "--lift-speed outside the lift's envelope" in err
    code, _, err = run_cli(["predict", str(path), "--lift-payload", "61"], capsys)
    assert code != 0 and "--lift-payload" in err and "Traceback" not in err
    code, _, err = run_cli(["build", str(path), "-o", str(tmp_path / "fw")], capsys)
    assert code == 0, err
    header = (tmp_path / "fw" / "larkspur_ff.h").read_text()
    assert "void larkspur_lift(const larkspur_lift_in_t *in, larkspur_lift_out_t *out);" in header
    code, _, err = run_cli(["verify", str(path), str(tmp_path / "fw"), "--report", str(tmp_path / "r.json")], capsys)
    assert code == 0, err
    report = json.loads((tmp_path / "r.json").read_text())["lift"]
    assert report["bound_a"] <= report["budget_a"] == pytest.approx(0.04)
    assert {t["name"] for t in report["tables"]} == set(synthesis.synthesise(vehicle_from(doc)).lift.tables)


def test_cli_refuses_lift_options_without_a_lift_and_an_infeasible_lift(tmp_path, capsys):
    plain = write_model(tmp_path, demo_doc(), "plain.toml")
    code, _, err = run_cli(["predict", str(plain), "--lift-speed", "0.1"], capsys)
    assert code != 0 and "has no [lift] section" in err
    doc = demo_doc()
    doc["lift"] = WORKED | {"current_limit": "10 A"}  # the worked example needs 25 A
    weak = write_model(tmp_path, doc, "weak.toml")
    code, out, err = run_cli(["envelope", str(weak)], capsys)
    assert code == 1 and "lift.current_limit" in err
    code, _, err = run_cli(["build", str(weak), "-o", str(tmp_path / "fw")], capsys)
    assert code == 1 and "lift.current_limit" in err
    assert not (tmp_path / "fw").exists() or not any((tmp_path / "fw").iterdir())


def test_the_demos_commented_lift_loads_and_is_feasible():
    """The demo file's commented [lift] example, uncommented as its comment says, is a valid and feasible
    lift whose function meets its budget (the example stays true)."""
    from kinetab.generator import envelope

    from .helpers import DEMO_PATH

    lines, on = [], False
    for line in DEMO_PATH.read_text(encoding="utf-8").splitlines():
        on = on or line.startswith("# [lift]")
        lines.append(line.removeprefix("# ") if on else line)
    v = model.parse_document(tomllib.loads("\n".join(lines)), "demo with lift")
    assert v.lift is not None and not envelope.analyse(v).problems
    fw = synthesis.synthesise(v)
    assert fw.lift is not None and fw.lift.bound_a <= v.lift.current_budget_a
