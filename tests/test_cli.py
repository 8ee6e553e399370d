"""Command line: init, predict, envelope, --version through the real entry point."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from kinetab.generator import cli, dynamics, model

from tests.helpers import DEMO_PATH, demo_doc, write_model


def run(args, capsys):
    """(exit code, stdout, stderr) of one command; 0 when it returns normally."""
    try:
        cli.main(args)
        code = 0
    except SystemExit as exc:
        code = exc.code
    out = capsys.readouterr()
    return code, out.out, out.err


def run_ok(args, capsys):
    cli.main(args)
    return capsys.readouterr().out


def test_version(capsys):
    out = run_ok(["--version"], capsys)
    assert "0.1.0" in out


def test_init_writes_loadable_model_and_refuses_overwrite(tmp_path, capsys):
    target = tmp_path / "cart.toml"
    demo = DEMO_PATH.read_text().replace('name = "larkspur"', 'name = "cart"').replace("larkspur_lift()", "cart_lift()")
    run_ok(["init", str(target)], capsys)
    assert target.read_text() == demo
    assert "INVENTED DEMO" in target.read_text()
    model.load(target)
    target.write_text("mine")
    code, _, err = run(["init", str(target)], capsys)
    assert code == 2 and "--force" in err and target.read_text() == "mine"
    run_ok(["init", str(target), "--force"], capsys)
    assert target.read_text() == demo


def test_init_names_the_model_after_its_file(tmp_path, capsys):
    """Regression: `init cart.toml` wrote name = "larkspur", so the tour's cart_ff.h never appeared."""
    out = run_ok(["init", str(tmp_path / "cart.toml")], capsys)
    assert model.load(tmp_path / "cart.toml").name == "cart" and "from the file name" in out
    text = (tmp_path / "cart.toml").read_text()  # the lift comment names the function build would write
    assert "cart_lift()" in text and "larkspur_" not in text
    out = run_ok(["init", str(tmp_path / "My Cart.toml")], capsys)
    assert model.load(tmp_path / "My Cart.toml").name == "larkspur" and "stays 'larkspur'" in out
    out = run_ok(["init", str(tmp_path / "int.toml")], capsys)  # a C keyword, though it matches the pattern
    assert "'int' is a C or C++ keyword" in out and "not a C name" not in out


def test_predict_beyond_int32_names_the_option(capsys):
    """Regression: predict --speed-right 1e30 and --payload '1e30 kg' ended in tracebacks."""
    for option, value in (("--speed-right", "1e30"), ("--payload", "1e30 kg")):
        code, out, err = run(["predict", str(DEMO_PATH), option, value], capsys)
        assert code == 2 and out == "" and len(err.strip().splitlines()) == 1 and option in err, err


def test_envelope_limit_in_steps_contains_the_stated_limit(capsys):
    """Regression: --pitch 5 at pitch_max = 5 deg warned 'outside the envelope' (174.5 steps rounded up
    to 175 while the edge was 174); the warning now also names the input that is out."""
    code, _, err = run(["predict", str(DEMO_PATH), "--pitch", "5", "--roll", "-3", "--payload", "60"], capsys)
    assert code == 0 and "warning" not in err
    code, _, err = run(["predict", str(DEMO_PATH), "--pitch", "5.1", "--speed-left", "0.9"], capsys)
    assert code == 0 and "--speed-left, --pitch outside the envelope" in err


def test_predict_json_shape_and_values(capsys):
    out = run_ok(
        [
            "predict",
            str(DEMO_PATH),
            "--payload",
            "30 kg",
            "--speed-right",
            "50 cm/s",
            "--speed-left",
            "0.4",
            "--accel-right",
            "0.3 m/s^2",
            "--pitch",
            "3 deg",
            "--roll",
            "0.02 rad",
            "--json",
        ],
        capsys,
    )
    doc = json.loads(out)
    assert set(doc) == {"mass_matrix", "inverse_mass_matrix", "right", "left"}
    for side in ("right", "left"):
        assert set(doc[side]) == {"force", "motor_torque", "current", "voltage", "current_fixed"}
        assert set(doc[side]["force"]) == {"inertia", "coriolis", "friction", "rolling", "gravity", "total"}
        f = doc[side]["force"]
        parts = f["inertia"] + f["coriolis"] + f["friction"] + f["rolling"] + f["gravity"]
        assert f["total"] == pytest.approx(parts, rel=1e-12)
    v = model.load(DEMO_PATH)
    op = dynamics.OperatingPoint(
        speed_right=0.5,
        speed_left=0.4,
        accel_right=0.3,
        accel_left=0.0,
        pitch_rad=math.radians(3),
        roll_rad=0.02,
        payload_kg=30.0,
    )
    right, _ = dynamics.wheel_forces(v, op)
    assert doc["right"]["force"]["gravity"] == pytest.approx(float(right.gravity), rel=1e-12)
    assert np.array(doc["mass_matrix"]) == pytest.approx(dynamics.mass_matrix(v, 30.0), rel=1e-12)


def test_predict_table_readable(capsys):
    out = run_ok(["predict", str(DEMO_PATH), "--speed-right", "0.2"], capsys)
    assert "current [A]" in out and "force gravity [N]" in out


def test_envelope_feasible_demo(capsys):
    out = run_ok(["envelope", str(DEMO_PATH)], capsys)
    assert "feasible" in out and "INFEASIBLE" not in out
    doc = json.loads(run_ok(["envelope", str(DEMO_PATH), "--json"], capsys))
    assert doc["feasible"] is True and len(doc["payloads"]) == 5


def test_envelope_infeasible_exits_one_naming_the_limit(tmp_path, capsys):
    doc = demo_doc()
    doc["drive"]["current_limit"] = "3 A"
    path = write_model(tmp_path, doc)
    code, out, err = run(["envelope", str(path)], capsys)
    assert code == 1 and "INFEASIBLE" in out and "drive.current_limit" in err and len(err.splitlines()) == 1


def test_envelope_voltage_limit(tmp_path, capsys):
    doc = demo_doc()
    doc["drive"]["supply_voltage"] = "12 V"
    path = write_model(tmp_path, doc)
    code, _, err = run(["envelope", str(path), "--json"], capsys)
    assert code == 1 and "drive.supply_voltage" in err


def test_envelope_hold_pitch_by_hand():
    """Standing still, the held pitch satisfies m g sin(theta)/2 per wheel = current limit (statics)."""
    from kinetab.generator import envelope

    doc = demo_doc()
    doc["wheels"]["grip"] = 2.0  # traction no limit
    doc["drive"]["current_limit"] = "4 A"  # the current binds first
    doc["envelope"]["roll_max"] = "0 deg"
    doc["body"]["cog_ahead"] = "-100 mm"  # no tipping before the current limit
    doc["payload"]["cog_ahead"] = "-100 mm"
    v = model.parse_document(doc, "<t>")
    row = envelope.payload_row(v, 0.0)
    force = (
        v.drive.current_limit_a
        * v.drive.torque_constant_nm_per_a
        * v.drive.gear_ratio
        * v.drive.efficiency
        / (v.wheels.diameter_m / 2)
    )
    assert row.hold_pitch_rad == pytest.approx(math.asin(2 * force / (38.0 * 9.80665)), rel=1e-6)


def test_no_arguments_prints_normal_help(capsys):
    """Regression: `kinetab` alone printed its whole help folded onto one line of stderr, and the
    command list cut every description short."""
    import kinetab

    kinetab.main([])  # the composed command line, with the lazily loaded bench group
    out, err = capsys.readouterr()
    assert err == "" and out.startswith("Usage: kinetab") and len(out.splitlines()) > 10
    listing = out[out.index("Commands:") :].splitlines()[1:]
    assert {line.split()[0] for line in listing if line.startswith("  ") and not line.startswith("   ")} >= {
        "build",
        "verify",
        "predict",
        "envelope",
        "init",
        "report",
        "bench",
    }
    assert not any(line.rstrip().endswith("...") for line in listing)
    assert all(len(line) <= 100 for line in out.splitlines())


def test_bench_ports_lists_what_pyserial_sees(capsys, monkeypatch):
    """bench ports: device, USB VID:PID (hex, as lsusb prints it: common practice), serial number,
    description; a port without USB identity gets none."""
    import json

    from serial.tools import list_ports_common

    import kinetab

    usb = list_ports_common.ListPortInfo("/dev/ttyACM0")
    usb.vid, usb.pid, usb.serial_number, usb.description = 0x0483, 0x5740, "A1B2", "drive controller"
    plain = list_ports_common.ListPortInfo("/dev/ttyS0")
    monkeypatch.setattr("serial.tools.list_ports.comports", lambda: [usb, plain])
    kinetab.main(["bench", "ports", "--json"])
    doc = json.loads(capsys.readouterr().out)
    assert doc[0] == {
        "device": "/dev/ttyACM0",
        "usb": "0483:5740",
        "serial_number": "A1B2",
        "description": "drive controller",
    }
    assert doc[1]["usb"] == "" and doc[1]["device"] == "/dev/ttyS0"
    kinetab.main(["bench", "ports"])
    table = capsys.readouterr().out.splitlines()
    assert table[0].split() == ["device", "usb", "serial", "description"] and "0483:5740" in table[1]


def test_bench_run_refuses_without_confirmation(tmp_path, capsys, monkeypatch):
    """Without --yes and without a terminal to confirm at, bench run prints the cautions and refuses
    before opening the port: exit 2, no log."""
    import io

    from kinetab.generator import outputs
    from kinetab.hil import planfile, planner

    import kinetab

    plan = tmp_path / "plan.csv"
    outputs.write_file(
        plan, planfile.to_csv(planner.make_plan(model.load(DEMO_PATH), duration_s=5, period_s=0.001, rig="on-floor"))
    )
    monkeypatch.setattr("sys.stdin", io.StringIO(""))
    with pytest.raises(SystemExit) as exc:
        kinetab.main(
            [
                "bench",
                "run",
                str(DEMO_PATH),
                "--port",
                "loop://",
                "--plan",
                str(plan),
                "--log",
                str(tmp_path / "log.csv"),
            ]
        )
    err = capsys.readouterr().err
    assert exc.value.code == 2 and "CAUTION" in err and "--yes" in err.splitlines()[-1]
    assert not (tmp_path / "log.csv").exists()
