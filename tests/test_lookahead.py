"""The look-ahead point: its Jacobian and its mass matrix Lambda = J^-T M J^-1, checked against an
independent derivation from the kinetic energy (sympy) and against the operational-space formula
Lambda = (J M^-1 J^T)^-1 (Khatib 1987, "A unified approach for motion and force control of robot
manipulators: the operational space formulation", IEEE J. Robotics and Automation 3(1)); predict's
output. Invented vehicles throughout."""

from __future__ import annotations

import json

import numpy as np
import pytest
import sympy as sp
from kinetab.generator import cli, dynamics, emulate, hostc, interface, pointform, render, synthesis

from tests.csteps import needs_gcc, run_harness, write_files
from tests.helpers import invented, vehicle_from, write_model


def _kinetic_energy_lambda(v, payload: float, ahead: float) -> np.ndarray:
    """Lambda as the Hessian of the kinetic energy in the point's velocity components (p_f, p_l), built
    here from scratch: the combined body (mass m, CoG c ahead of P, yaw inertia about its CoG) moving
    at v = p_f and turning at w = p_l/d, plus each wheel's and rotor's spin, (J_w + J_m i^2)(u/r)^2/2 with
    u = v +- b w. (Body and payload combined by the textbook mass-weighted CoG and parallel-axis rule.)"""
    pf, pl = sp.symbols("p_f p_l", real=True)
    b, r = v.wheels.track_m / 2, v.wheels.diameter_m / 2
    mb, mp = v.body.mass_kg, payload
    m = mb + mp
    c = (mb * v.body.cog_ahead_m + mp * v.payload.cog_ahead_m) / m
    i_p = mb * (v.body.gyration_radius_m**2 + v.body.cog_ahead_m**2) + mp * (
        v.payload.gyration_radius_m**2 + v.payload.cog_ahead_m**2
    )
    i_c = i_p - m * c**2
    fwd, yaw = pf, pl / ahead
    spin = v.wheels.inertia_kgm2 + v.drive.rotor_inertia_kgm2 * v.drive.gear_ratio**2
    energy = (
        sp.Rational(1, 2) * m * (fwd**2 + (c * yaw) ** 2)
        + sp.Rational(1, 2) * i_c * yaw**2
        + sp.Rational(1, 2) * spin * (((fwd + b * yaw) / r) ** 2 + ((fwd - b * yaw) / r) ** 2)
    )
    return np.array(sp.hessian(energy, (pf, pl)).evalf(30), dtype=float)


@pytest.mark.parametrize("seed", [3, 4])
def test_point_mass_matrix_matches_kinetic_energy_and_the_operational_space_formula(seed):
    _, fw = invented(seed, "veh")
    v = fw.vehicle
    rng = np.random.default_rng(seed)
    for _ in range(4):
        ahead = float(rng.choice([-1, 1]) * rng.uniform(0.05, 1.5))
        payload = float(rng.uniform(0, v.payload.mass_max_kg))
        lam = dynamics.point_mass_matrix(v, payload, ahead)
        assert lam == pytest.approx(_kinetic_energy_lambda(v, payload, ahead), rel=1e-9)
        jac, minv = dynamics.point_jacobian(v, ahead), dynamics.inverse_mass_matrix(v, payload)
        khatib = np.linalg.inv(jac @ minv @ jac.T)
        assert lam == pytest.approx(khatib, rel=1e-9)


def test_point_velocity_is_the_rigid_body_velocity_of_that_point():
    """J u = (v, d w): the forward speed of P and the sideways speed of a point d ahead on a body turning
    at w (rigid-body kinematics, v_point = v_P + w x r)."""
    _, fw = invented(5, "veh")
    v, b = fw.vehicle, fw.vehicle.wheels.track_m / 2
    ur, ul, ahead = 0.7, 0.2, 0.4
    fwd, yaw = (ur + ul) / 2, (ur - ul) / (2 * b)
    assert dynamics.point_jacobian(v, ahead) @ [ur, ul] == pytest.approx([fwd, ahead * yaw], rel=1e-12)
    with pytest.raises(ValueError, match="singular"):
        dynamics.point_jacobian(v, 0.0)


def test_predict_prints_the_point_with_units_and_refuses_a_point_on_the_axle(tmp_path, capsys):
    doc, fw = invented(6, "veh")
    doc["firmware"]["point_ahead"] = "250 mm"
    path = write_model(tmp_path, doc)
    args = ["predict", str(path), "--speed-right", "0.4 m/s", "--speed-left", "0.1 m/s", "--accel-right", "0.3"]
    cli.main([*args, "--json"])
    point = json.loads(capsys.readouterr().out)["point"]
    assert point["ahead_m"] == pytest.approx(0.25)
    lam = dynamics.point_mass_matrix(fw.vehicle, 0.0, 0.25)
    assert np.array(point["mass_matrix_kg"]) == pytest.approx(lam, rel=1e-12)
    cli.main([*args, "--point", "-40 cm"])
    text = capsys.readouterr().out
    assert "look-ahead point -0.4 m ahead of P" in text and "Lambda [kg]" in text and "J [1]" in text
    with pytest.raises(SystemExit) as exc:
        cli.main([*args, "--point", "0 mm"])
    assert exc.value.code == 2 and "--point" in capsys.readouterr().err


def _driver(prefix: str) -> str:
    """A C driver: rows of forward-helper inputs on stdin -> <prefix>_forward_point's outputs and bits."""
    ins = interface.FWD_IN.lvalues()
    reads = " ".join(["%ld"] * len(ins))
    refs = ", ".join(f"&v[{k}]" for k in range(len(ins)))
    sets = "\n".join(f"        in.{lv} = (int32_t)v[{k}];" for k, lv in enumerate(ins))
    return f"""#include <stdio.h>
#include "{prefix}_ff.h"
int main(void)
{{
    long v[{len(ins)}];
    {prefix}_fwd_in_t in;
    {prefix}_fwd_out_t out;
    while (scanf("{reads}", {refs}) == {len(ins)}) {{
{sets}
        {prefix}_forward_point(&in, &out);
        printf("%ld %ld %lu\\n", (long)out.accel[0], (long)out.accel[1], (unsigned long)out.clamped);
    }}
    return 0;
}}
"""


@needs_gcc
@pytest.mark.parametrize("seed, ahead", [(7, "350 mm"), (8, "-0.8 m")])
def test_point_forward_helper_in_c_equals_its_emulation_and_stays_within_its_bound(seed, ahead, tmp_path):
    """<name>_forward_point compiled with the strict flags equals the emulation (the forward program, then
    pointform.emulate) on random inputs, clamped ones included, and inside the envelope it is within its
    proven bound of the float model's point rates, J times dynamics.forward_accel."""
    doc, _ = invented(seed, "veh")
    doc["firmware"]["point_ahead"] = ahead
    fw = synthesis.synthesise(vehicle_from(doc))
    form = pointform.point_form(fw)
    assert form is not None
    write_files(tmp_path, render.render(fw))
    (tmp_path / "driver.c").write_text(_driver("veh"))
    exe = hostc.compile_c([tmp_path / "driver.c", tmp_path / "veh_ff.c"], tmp_path / "drv", include=[tmp_path])
    rng = np.random.default_rng(seed)
    lo, hi = interface.column_edges(fw.design.limits, interface.FWD_IN)
    rows = np.stack([rng.integers(a - a // 8 - 1, b + b // 8 + 2, 3000) for a, b in zip(lo, hi)], -1)
    got = run_harness(exe, rows)
    inp = interface.rows_to_fields(interface.FWD_IN, rows)
    wheels = emulate.run(fw.design.forward, fw.tables, inp)
    assert np.array_equal(got[:, :2], pointform.emulate(form, wheels["accel"]))
    assert np.array_equal(got[:, 2], wheels["clamped"])
    inside = np.all((rows >= lo) & (rows <= hi), axis=1)
    v, lsb = fw.vehicle, fw.vehicle.firmware
    si = interface.to_si(v, interface.FWD_IN, interface.rows_to_fields(interface.FWD_IN, rows[inside]))
    op = dynamics.OperatingPoint(
        speed_right=si["speed_right"],
        speed_left=si["speed_left"],
        accel_right=0.0,
        accel_left=0.0,
        pitch_rad=si["pitch_rad"],
        roll_rad=si["roll_rad"],
        payload_kg=si["payload_kg"],
    )
    currents = interface.rows_to_fields(interface.FWD_IN, rows[inside])["current"] * lsb.current_lsb_a
    forces = [
        dynamics.force_from_current(v, currents[:, k], si[f"speed_{side}"]) for k, side in enumerate(("right", "left"))
    ]
    ref = dynamics.point_accel(v, op, forces[0], forces[1], ahead_m=form.ahead_m)
    err = np.abs(got[inside, :2] * lsb.accel_lsb_mps2 - ref)
    assert err.max() <= form.bound_mps2
    assert (
        form.bound_mps2 < 10 * fw.fwd_bound_mps2 * max(1.0, abs(form.ahead_m) / v.wheels.track_m) + lsb.accel_lsb_mps2
    )


def test_a_point_form_whose_integers_could_overflow_is_refused_naming_the_key():
    """The range proof of <name>_forward_point on an extreme choice (a 0.1 m track, the point 5 m behind,
    a fine accel step, int32 tables): the lateral output's proven range leaves int32, so point_form
    raises CheckFailed naming firmware.point_ahead instead of giving C that could wrap. (Sizing for such
    a point usually refuses first, naming firmware.accel_budget: the check is the last line of defence,
    so the firmware is sized here without the point and the point added after.)"""
    import dataclasses

    from kinetab.generator.errors import CheckFailed

    doc, _ = invented(9, "veh")
    doc["wheels"]["track"] = "100 mm"
    doc["firmware"].update(accel_lsb="0.1 mm/s^2", word="int32", current_budget="1 A", accel_budget="50 m/s^2")
    doc["body"]["gyration_radius"] = "50 mm"
    doc["payload"]["gyration_radius"] = "50 mm"
    fw = synthesis.synthesise(vehicle_from(doc))
    v = fw.vehicle
    far = dataclasses.replace(
        fw, vehicle=dataclasses.replace(v, firmware=dataclasses.replace(v.firmware, point_ahead_m=-5.0))
    )
    with pytest.raises(CheckFailed, match="firmware.point_ahead.*int32"):
        pointform.point_form(far)
