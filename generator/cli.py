"""The `kinetab` command line: thin click commands over pure functions (README: command line)."""

from __future__ import annotations

import json
import math
from collections.abc import Callable
from importlib import resources
from pathlib import Path
from typing import Any

import click
import numpy as np

from . import __version__, dynamics, emulate, envelope, interface, model, units
from . import lift as lift_axis
from .cli_support import LazyGroup, ProgressLine, QuantityType, out_folder, run
from .errors import CheckFailed, UserError
from .vehicle import Vehicle

DEMO = "larkspur.toml"
SKID_DEMO = "bramble.toml"


@click.group(cls=LazyGroup, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, "--version", prog_name="kinetab")
@click.option("--debug", is_flag=True, help="Show the traceback of an error instead of one line (bug reports).")
def cli(debug: bool) -> None:
    """Vehicle model -> dynamics -> fixed-point feed-forward tables and C for drive controllers."""


def register_lazy(name: str, module: str, attr: str, short_help: str) -> None:
    """Add a command group from another package, imported only when it is used."""
    assert isinstance(cli, LazyGroup)
    cli.add_lazy(name, module, attr, short_help)


@cli.command(short_help="Write a commented starter model (invented demo vehicle).")
@click.argument("path", type=click.Path(dir_okay=False), default="vehicle.toml")
@click.option("--force", is_flag=True, help="Overwrite PATH if it exists.")
@click.option("--skid", is_flag=True, help="A skid-steer ([skid]: wheels dragged sideways to turn) instead of casters.")
def init(path: str, force: bool, skid: bool) -> None:
    """Write a commented starter model (an invented demo vehicle) to PATH."""
    target = Path(path)
    if target.exists() and not force:
        raise UserError(f"{path}: file exists; pass --force to overwrite it")
    from . import outputs

    demo = SKID_DEMO if skid else DEMO
    text = resources.files(__package__ + ".demos").joinpath(demo).read_text(encoding="utf-8")
    name, stem = target.stem, demo.removesuffix(".toml")
    if model.NAME_PATTERN.fullmatch(name) and name not in model.C_KEYWORDS:
        text = text.replace(f'name = "{stem}"', f'name = "{name}"', 1).replace(f"{stem}_lift()", f"{name}_lift()")
        note = f"C prefix '{name}' from the file name"
    elif name in model.C_KEYWORDS:
        note = f"'{name}' is a C or C++ keyword, so the C prefix stays '{stem}'"
    else:
        note = f"'{name}' is not a C name ([a-z][a-z0-9_]{{0,31}}), so the C prefix stays '{stem}'"
    outputs.write_file(target, text)
    click.echo(f"wrote {path} (invented demo vehicle; edit every value for your own; {note})")


def point_options(st: interface.Struct) -> Callable[[Callable[..., Any]], Callable[..., Any]]:
    """A decorator adding one option per input column of `st`, default 0, in its unit."""

    def add(func: Callable[..., Any]) -> Callable[..., Any]:
        options = [(m, column, label) for m in st.members for column, label in zip(m.columns, m.labels)]
        for m, column, label in reversed(options):
            assert m.quantity is not None, f"{m.name}: an input member states what a person types"
            text = f"{label} (bare number: {m.typed_unit.replace('**', '^')})."
            option = click.option(
                "--" + column.replace("_", "-"),
                type=QuantityType(m.quantity, m.typed_unit),
                default="0",
                show_default=True,
                help=text,
            )
            func = option(func)
        return func

    return add


FORCE_TERMS = ("inertia", "coriolis", "friction", "rolling", "gravity", "total")


def force_terms(v: Vehicle) -> tuple[str, ...]:
    """The force terms predict shows: a skid-steer's also its turning resistance (before the total)."""
    return FORCE_TERMS if v.skid is None else (*FORCE_TERMS[:-1], "turning", "total")


def predict_point(v: Vehicle, op: dynamics.OperatingPoint) -> dict[str, Any]:
    """The predict JSON document (SI units) for one operating point; current_fixed filled later."""
    right, left = dynamics.wheel_forces(v, op)
    doc: dict[str, Any] = {
        "mass_matrix": dynamics.mass_matrix(v, op.payload_kg).tolist(),
        "inverse_mass_matrix": dynamics.inverse_mass_matrix(v, op.payload_kg).tolist(),
    }
    for name, side, speed in (("right", right, op.speed_right), ("left", left, op.speed_left)):
        torque = dynamics.motor_torque(v, side.total, speed)
        current = dynamics.motor_current(v, side.total, speed)
        doc[name] = {
            "force": {key: float(getattr(side, key)) for key in force_terms(v)},
            "motor_torque": float(torque),
            "current": float(current),
            "voltage": float(dynamics.motor_voltage(v, current, speed)),
            "current_fixed": None,
        }
    return doc


@cli.command(short_help="Forces, torque, current and voltage at one operating point.")
@click.argument("model_path", metavar="MODEL", type=click.Path(dir_okay=False))
@point_options(interface.FF_IN)
@click.option(
    "--point",
    "ahead",
    type=QuantityType(units.LENGTH, "m"),
    help="Also the look-ahead point this far ahead of P (negative: behind): its Jacobian and mass matrix "
    "(default: firmware.point_ahead of the model, if set; bare number: m).",
)
@click.option(
    "--lift-speed", type=QuantityType(units.SPEED, "m/s"), help="Lift carriage speed, up > 0 (bare number: m/s)."
)
@click.option(
    "--lift-accel",
    type=QuantityType(units.ACCEL, "m/s**2"),
    help="Lift carriage acceleration, up > 0 (bare number: m/s^2).",
)
@click.option(
    "--lift-payload", type=QuantityType(units.MASS, "kg"), help="Load on the lift carriage (bare number: kg)."
)
@click.option("--json", "as_json", is_flag=True, help="Print JSON (SI units) instead of a table.")
def predict(
    model_path: str,
    as_json: bool,
    ahead: float | None,
    lift_speed: float | None,
    lift_accel: float | None,
    lift_payload: float | None,
    **point: float,
) -> None:
    """Evaluate the model at one operating point: forces, torque, current and voltage per wheel (and at
    the lift, when the model has one: --lift-* default 0)."""
    v = model.load(model_path)
    lift_point = _lift_point(v, lift_speed, lift_accel, lift_payload)
    si = interface.FF_IN.si_names()
    if point["payload"] < 0:
        raise UserError(f"kinetab predict: --payload: expected a mass >= 0 kg, found {point['payload']:g} kg")
    op = dynamics.OperatingPoint(**{si[column]: value for column, value in point.items()})
    doc = predict_point(v, op)
    ahead = v.firmware.point_ahead_m if ahead is None else ahead
    if ahead is not None:
        doc["point"] = _point_doc(v, op, ahead)
    fw = _fill_fixed(v, op, doc)
    if lift_point is not None:
        doc["lift"] = _lift_predict(v, *lift_point)
        _lift_fixed(v, fw, doc["lift"])
    if as_json:
        click.echo(json.dumps(doc, indent=2))
        return
    click.echo(_predict_table(doc))
    if "lift" in doc:
        click.echo(_lift_table(doc["lift"]))


def _lift_point(
    v: Vehicle, speed: float | None, accel: float | None, payload: float | None
) -> tuple[float, float, float] | None:
    """The lift's operating point (payload, speed, accel), or None without a lift; --lift-* need one."""
    given = [name for name, x in (("speed", speed), ("accel", accel), ("payload", payload)) if x is not None]
    if v.lift is None:
        if given:
            raise UserError(f"kinetab predict: --lift-{given[0]}: {v.source} has no [lift] section")
        return None
    p = 0.0 if payload is None else payload
    if not 0 <= p <= v.lift.payload_max_kg:
        raise UserError(
            f"kinetab predict: --lift-payload: expected a mass from 0 to lift.payload_max "
            f"({v.lift.payload_max_kg:g} kg), found {p:g} kg"
        )
    return p, 0.0 if speed is None else speed, 0.0 if accel is None else accel


def _lift_predict(v: Vehicle, payload: float, speed: float, accel: float) -> dict[str, Any]:
    """The lift at one operating point (SI): load force, its friction share, torque, current, voltage."""
    lift = v.lift
    assert lift is not None
    current = float(lift_axis.motor_current(lift, payload, speed, accel))
    return {
        "payload": payload,
        "speed": speed,
        "accel": accel,
        "force": float(lift_axis.load_force(lift, payload, speed, accel)),
        "friction": float(lift_axis.friction(lift, speed)),
        "reflected_mass": lift_axis.reflected_mass(lift),
        "motor_torque": float(lift_axis.motor_torque(lift, payload, speed, accel)),
        "current": current,
        "voltage": float(lift_axis.motor_voltage(lift, current, speed)),
    }


def _lift_table(doc: dict[str, Any]) -> str:
    head = f"lift at payload {doc['payload']:g} kg, speed {doc['speed']:+g} m/s, accel {doc['accel']:+g} m/s^2 (up > 0)"
    rows = [
        ("force on the carriage [N]", "force"),
        ("  of it friction [N]", "friction"),
        ("rotor as mass [kg]", "reflected_mass"),
        ("motor_torque [N*m]", "motor_torque"),
        ("current [A]", "current"),
        ("voltage [V]", "voltage"),
        ("current_fixed [A]", "current_fixed"),
    ]
    cell = lambda x: f"{x:12.4f}" if x is not None else f"{'-':>12}"  # noqa: E731
    return "\n".join([head, *(f"{label:26}{cell(doc[key])}" for label, key in rows)])


def _point_doc(v: Vehicle, op: dynamics.OperatingPoint, ahead: float) -> dict[str, Any]:
    """The look-ahead point at the operating point: J, Lambda = J^-T M J^-1, its velocity and the rates
    of its velocity components in body axes (SI)."""
    spec = model.SCHEMA["firmware"]["point_ahead"]  # the same range as the model key
    if spec.check is not None and not spec.check(ahead):
        raise UserError(f"kinetab predict: --point: expected a distance {spec.expect}, found {ahead:g} m")
    jac = dynamics.point_jacobian(v, ahead)
    speeds = np.array([op.speed_right, op.speed_left], dtype=float)
    accels = np.array([op.accel_right, op.accel_left], dtype=float)
    return {
        "ahead_m": ahead,
        "jacobian": jac.tolist(),
        "mass_matrix_kg": dynamics.point_mass_matrix(v, op.payload_kg, ahead).tolist(),
        "velocity_mps": (jac @ speeds).tolist(),
        "velocity_rates_mps2": (jac @ accels).tolist(),
    }


def _fill_fixed(v: Vehicle, op: dynamics.OperatingPoint, doc: dict[str, Any]) -> Any:
    """current_fixed: the bit-exact firmware result at the inputs rounded to firmware steps; returns the
    firmware (None when it cannot be made)."""
    from . import synthesis

    try:
        fw = synthesis.synthesise(v)
    except (CheckFailed, UserError) as exc:
        click.echo(f"warning: current_fixed unavailable: {exc}", err=True)
        return None
    try:
        inp = synthesis.firmware_inputs(v, op)
    except ValueError as exc:  # "speed_right: beyond ..." names the column, the option in the wheel form
        column, why = str(exc).split(": ", 1)
        raise UserError(f"kinetab predict: {_option_text(column)}: {why}") from None
    out = emulate.run(fw.design.feedforward, fw.tables, {k: np.atleast_1d(a) for k, a in inp.items()})
    flags = int(out["clamped"][0])
    if flags:
        names = _flagged_text([c for k, c in enumerate(interface.ff_in(v).columns) if flags >> k & 1])
        click.echo(f"warning: {names} outside the envelope; current_fixed uses the envelope edge", err=True)
    for i, side in enumerate(("right", "left")):
        doc[side]["current_fixed"] = float(out["current"][0][i]) * v.firmware.current_lsb_a
    return fw


def _lift_fixed(v: Vehicle, fw: Any, doc: dict[str, Any]) -> None:
    """The lift's current_fixed: <name>_lift() bit-exact at the inputs rounded to its steps (clamped to its
    envelope, with a warning naming the options beyond it)."""
    from . import liftfirmware

    doc["current_fixed"] = None
    lt = v.lift
    if fw is None or fw.lift is None or lt is None:
        return
    steps = liftfirmware.inputs_from_si(
        lt, np.atleast_1d(doc["payload"]), np.atleast_1d(doc["speed"]), np.atleast_1d(doc["accel"])
    )
    out = emulate.run(fw.lift.program, fw.lift.tables, steps)
    flags = int(out["clamped"][0])
    if flags:
        names = [f"--lift-{c}" for k, c in enumerate(interface.LIFT_IN.columns) if flags >> k & 1]
        click.echo(f"warning: {', '.join(names)} outside the lift's envelope; current_fixed uses its edge", err=True)
    doc["current_fixed"] = float(out["current"][0][0]) * lt.current_lsb_a


def _option_text(column: str) -> str:
    """The option of a wheel input column; a body-frame input (firmware.inputs = 'body') by its name."""
    if column in interface.FF_IN.columns:
        return f"--{column.replace('_', '-')}"
    return f"the body-frame {column.replace('_', ' ')} made of the wheel options (firmware.inputs = 'body')"


def _flagged_text(columns: list[str]) -> str:
    """The options, or the body-frame inputs made of them, whose clamp bits are set."""
    options = [_option_text(c) for c in columns if c in interface.FF_IN.columns]
    body = [c.replace("_", " ") for c in columns if c not in interface.FF_IN.columns]
    if body:
        options.append(f"the body-frame {' and '.join(body)} made of the wheel options (firmware.inputs = 'body')")
    return ", ".join(options)


def _predict_table(doc: dict[str, Any]) -> str:
    lines = [f"{'':22}{'right':>12}{'left':>12}"]
    for key in doc["right"]["force"]:
        lines.append(f"{'force ' + key + ' [N]':22}{doc['right']['force'][key]:12.4f}{doc['left']['force'][key]:12.4f}")
    for key, unit in (("motor_torque", "N*m"), ("current", "A"), ("voltage", "V"), ("current_fixed", "A")):
        cells = [doc[side][key] for side in ("right", "left")]
        text = "".join(f"{x:12.4f}" if x is not None else f"{'-':>12}" for x in cells)
        lines.append(f"{key + f' [{unit}]':22}{text}")
    m, mi = doc["mass_matrix"], doc["inverse_mass_matrix"]
    lines.append(f"{'M [kg]':22}[[{m[0][0]:.4f}, {m[0][1]:.4f}], [{m[1][0]:.4f}, {m[1][1]:.4f}]]")
    lines.append(f"{'M^-1 [1/kg]':22}[[{mi[0][0]:.6f}, {mi[0][1]:.6f}], [{mi[1][0]:.6f}, {mi[1][1]:.6f}]]")
    if "point" in doc:
        p = doc["point"]
        j, lam = p["jacobian"], p["mass_matrix_kg"]
        lines += [
            f"look-ahead point {p['ahead_m']:g} m ahead of P; rows: forward, lateral (left > 0) in body axes",
            f"{'J [1]':22}[[{j[0][0]:.6f}, {j[0][1]:.6f}], [{j[1][0]:.6f}, {j[1][1]:.6f}]]  (per wheel rim speed)",
            f"{'Lambda [kg]':22}[[{lam[0][0]:.4f}, {lam[0][1]:.4f}], [{lam[1][0]:.4f}, {lam[1][1]:.4f}]]",
            f"{'velocity [m/s]':22}{p['velocity_mps'][0]:12.4f}{p['velocity_mps'][1]:12.4f}",
            f"{'rates [m/s^2]':22}{p['velocity_rates_mps2'][0]:12.4f}{p['velocity_rates_mps2'][1]:12.4f}",
        ]
    return "\n".join(lines)


@cli.command("envelope", short_help="Gradeability, acceleration and peak current and voltage.")
@click.argument("model_path", metavar="MODEL", type=click.Path(dir_okay=False))
@click.option("--json", "as_json", is_flag=True, help="Print JSON (SI units: rad, m/s^2, A, V).")
def envelope_cmd(model_path: str, as_json: bool) -> None:
    """Gradeability, acceleration on pitch_max and peak current/voltage; exit 1 if infeasible."""
    v = model.load(model_path)
    rep = envelope.analyse(v)
    click.echo(json.dumps(_envelope_doc(rep), indent=2) if as_json else _envelope_table(v, rep))
    if not rep.feasible:
        raise CheckFailed(f"{model_path}: envelope infeasible: {rep.problems[0]}")


def _envelope_doc(rep: envelope.EnvelopeReport) -> dict[str, Any]:
    return {
        "feasible": rep.feasible,
        "payloads": [
            {
                "payload": r.payload_kg,
                "hold_pitch": r.hold_pitch_rad,
                "climb_pitch": r.climb_pitch_rad,
                "accel_on_pitch_max": r.accel_on_pitch_max_mps2,
            }
            for r in rep.rows
        ],
        "peak_current": {"value": rep.peak_current.value, "where": rep.peak_current.where},
        "peak_voltage": {"value": rep.peak_voltage.value, "where": rep.peak_voltage.where},
        "peak_traction": {"value": rep.peak_traction.value, "where": rep.peak_traction.where},
        "problems": rep.problems,
        **({"lift": _lift_doc(rep.lift)} if rep.lift is not None else {}),
    }


def _lift_doc(rep: lift_axis.LiftReport) -> dict[str, Any]:
    def peak(p: lift_axis.LiftPeak) -> dict[str, float]:
        return {"value": p.value, "payload": p.payload_kg, "speed": p.speed_mps, "accel": p.accel_mps2}

    return {
        "hold_current_empty": rep.hold_empty_a,
        "hold_current_full": rep.hold_full_a,
        "peak_current": peak(rep.peak_current),
        "peak_voltage": peak(rep.peak_voltage),
        "stroke_time": rep.stroke_s,
        "stroke_top_speed": rep.stroke_top_speed_mps,
    }


def _lift_lines(v: Vehicle, rep: lift_axis.LiftReport | None) -> list[str]:
    """The lift's envelope lines (none without a lift)."""
    if rep is None or v.lift is None:
        return []
    lift, supply = v.lift, lift_axis.supply_voltage(v, v.lift)
    return [
        f"lift: payload up to {lift.payload_max_kg:g} kg, speed_max {lift.speed_max_mps:g} m/s, "
        f"accel_max {lift.accel_max_mps2:g} m/s^2, travel {lift.travel_m:g} m",
        f"  holding current {rep.hold_empty_a:8.2f} A empty, {rep.hold_full_a:.2f} A full (motoring efficiency)",
        f"  peak current    {rep.peak_current.value:8.2f} A  of {lift.current_limit_a:g} A"
        f"   ({rep.peak_current.where()})",
        f"  peak voltage    {rep.peak_voltage.value:8.2f} V  of {supply:g} V   ({rep.peak_voltage.where()})",
        f"  full stroke     {rep.stroke_s:8.2f} s  (top speed {rep.stroke_top_speed_mps:g} m/s)",
        "",
    ]


def _deg(rad: float) -> str:
    return "   none" if rad < 0 else f"{math.degrees(rad):7.2f}"


def _body_limits_line(env: Any) -> list[str]:
    """The body-frame limits that are set, as one line (none: no line, the wheel box alone)."""
    parts = [
        f"{name} {value:g} {unit}"
        for name, value, unit in (
            ("forward_speed_max", env.forward_speed_max_mps, "m/s"),
            ("forward_accel_max", env.forward_accel_max_mps2, "m/s^2"),
            ("yaw_rate_max", None if env.yaw_rate_max_radps is None else math.degrees(env.yaw_rate_max_radps), "deg/s"),
            (
                "yaw_accel_max",
                None if env.yaw_accel_max_radps2 is None else math.degrees(env.yaw_accel_max_radps2),
                "deg/s^2",
            ),
        )
        if value is not None
    ]
    return [f"  body frame: {', '.join(parts)}"] if parts else []


def _envelope_table(v: Vehicle, rep: envelope.EnvelopeReport) -> str:
    env = v.envelope
    lines = [
        f"envelope of '{v.name}': speed_max {env.speed_max_mps:g} m/s, accel_max {env.accel_max_mps2:g} m/s^2, "
        f"pitch_max {math.degrees(env.pitch_max_rad):g} deg, roll_max {math.degrees(env.roll_max_rad):g} deg",
        *_body_limits_line(env),
        "",
        f"{'payload':>9} {'hold pitch':>11} {'climb pitch':>12} {'accel on':>10}",
        f"{'[kg]':>9} {'[deg]':>11} {'[deg]':>12} {'pitch_max':>10}",
    ]
    for r in rep.rows:
        acc = "   none" if r.accel_on_pitch_max_mps2 < 0 else f"{r.accel_on_pitch_max_mps2:7.3f}"
        lines.append(f"{r.payload_kg:9.2f} {_deg(r.hold_pitch_rad):>11} {_deg(r.climb_pitch_rad):>12} {acc:>10}")
    lines += [
        "",
        "hold: standing still either way at roll_max; climb: straight at full acceleration, all speeds;",
        "accel on pitch_max: m/s^2, straight climb; limits: current, grip, voltage, tipping.",
        "",
        f"peak current  {rep.peak_current.value:8.2f} A  of {v.drive.current_limit_a:g} A   ({rep.peak_current.where})",
        f"peak voltage  {rep.peak_voltage.value:8.2f} V  of {v.drive.supply_voltage_v:g} V "
        f"  ({rep.peak_voltage.where})",
        f"peak traction {rep.peak_traction.value:8.2f} of the grip limit ({rep.peak_traction.where})",
        "",
        *_lift_lines(v, rep.lift),
    ]
    lines.append("feasible" if rep.feasible else "INFEASIBLE: " + "; ".join(rep.problems))
    return "\n".join(lines)


def _envelope_gate(v: Vehicle, allow: bool) -> None:
    """build refuses an infeasible envelope unless the user accepts it, and says so either way."""
    from . import gate

    check, problems = gate.envelope_check(v, allow=allow)
    if not check.ok:
        raise CheckFailed(check.detail)
    if problems:
        click.echo(f"warning: {check.detail}", err=True)


ALLOW_HELP = "Build or pass even when the envelope exceeds the drive's current, voltage or grip limits (or the lift's)."


@cli.command(short_help="Generate the feed-forward C files for a model.")
@click.argument("model_path", metavar="MODEL", type=click.Path(dir_okay=False))
@click.option("-o", "--out", "out_dir", required=True, type=click.Path(file_okay=False), help="Output folder.")
@click.option(
    "--vectors",
    "vectors_path",
    type=click.Path(dir_okay=False, allow_dash=True),
    help="Also write golden vectors (CSV, firmware steps); '-' prints them on standard output. "
    "Without it, an OUT/vectors.csv already there is refreshed.",
)
@click.option("--allow-infeasible-envelope", "allow", is_flag=True, help=ALLOW_HELP)
def build(model_path: str, out_dir: str, vectors_path: str | None, allow: bool) -> None:
    """Generate <name>_ff.h and <name>_ff.c into OUT, all files or none; exit 1 if the envelope is
    infeasible (unless accepted) or the budget cannot be met."""
    from . import gate, outputs, render, steps, synthesis, vectors

    folder = out_folder(out_dir)
    v = model.load(model_path)
    _envelope_gate(v, allow)
    fw = synthesis.synthesise(v)
    if fw.over_cap:
        click.echo(f"warning: {v.source}: {synthesis.sizing_note(fw)}", err=True)
    neighbours = steps.neighbour_steps(fw)  # once: the header states them, the build line checks them
    files = {folder / name: text for name, text in render.render(fw, neighbours=neighbours).items()}
    vectors_path = _vectors_target(folder, vectors_path)
    csv = vectors.to_csv(fw, vectors.feedforward_table(fw)) if vectors_path else None
    if csv is not None and vectors_path != "-":
        files[Path(str(vectors_path))] = csv
    outputs.write_set(files)
    if csv is not None and vectors_path == "-":
        click.echo(csv, nl=False)
    click.echo(
        f"wrote {', '.join(str(p) for p in files)}: tables {fw.total_bytes} bytes, proven error "
        f"{fw.ff_bound_a * 1000:.3f} mA of {v.firmware.current_budget_a * 1000:.3f} mA budget; "
        f"{synthesis.sizing_note(fw)}; {synthesis.products_note(fw)}",
        err=vectors_path == "-",
    )
    if fw.lift is not None:
        click.echo(
            f"lift: {v.name}_lift(), tables {fw.lift.total_bytes} bytes, proven error {fw.lift.bound_a * 1000:.3f} mA "
            f"within lift.current_budget",
            err=vectors_path == "-",
        )
    step = gate.step_check(fw, neighbours)
    click.echo(
        step.detail if step.ok else f"warning: {step.detail} (verify fails on it)",
        err=not step.ok or vectors_path == "-",
    )
    for check in (gate.companion_check(fw, path, model_path) for path in gate.companions(fw, folder)):
        if not check.ok:
            click.echo(f"warning: {check.detail}", err=True)


def _vectors_target(folder: Path, vectors_path: str | None) -> str | None:
    """Where build writes golden vectors: the file --vectors names, else the folder's vectors.csv when
    one is there already (so a rebuild never leaves stale vectors beside fresh C), else none."""
    from . import gate

    if vectors_path is None and (folder / gate.VECTORS_DEFAULT).is_file():
        return str(folder / gate.VECTORS_DEFAULT)
    return vectors_path


@cli.command(short_help="CI gate: files fresh, envelope feasible, error in budget.")
@click.argument("model_path", metavar="MODEL", type=click.Path(dir_okay=False))
@click.argument("out_dir", metavar="DIR", type=click.Path(file_okay=False))
@click.option("--report", "report_path", type=click.Path(dir_okay=False), help="Write a JSON report (SI units).")
@click.option("--junit", "junit_path", type=click.Path(dir_okay=False), help="Write JUnit XML for CI.")
@click.option(
    "--vectors",
    "vectors_path",
    type=click.Path(dir_okay=False),
    help="Golden vectors to check (default: DIR/vectors.csv when it exists).",
)
@click.option("--allow-infeasible-envelope", "allow", is_flag=True, help=ALLOW_HELP)
def verify(
    model_path: str,
    out_dir: str,
    report_path: str | None,
    junit_path: str | None,
    vectors_path: str | None,
    allow: bool,
) -> None:
    """Exit 0 when DIR holds exactly what build writes now, the envelope is feasible and the error
    budget holds; else 1, with one line per failed check."""
    from . import accuracy, gate, outputs, steps, synthesis

    folder = out_folder(out_dir)
    v = model.load(model_path)
    env, problems = gate.envelope_check(v, allow=allow)
    try:
        fw = synthesis.synthesise(v)
    except CheckFailed as exc:
        checks = [env, outputs.Check("error budget", False, str(exc))]
        _write_reports(outputs.failed_report(v.source, v.firmware.current_budget_a, checks), report_path, junit_path)
        _finish(checks, v.source)
        return
    rebuild = f"kinetab build {model_path} -o {out_dir}"
    neighbours = steps.neighbour_steps(fw)
    vectors = Path(vectors_path) if vectors_path else None
    checks = [
        *gate.file_checks(fw, folder, vectors, rebuild, model_path=model_path, neighbours=neighbours),
        env,
        gate.budget_check(fw),
        gate.step_check(fw, neighbours),
    ]
    doc = outputs.report(fw, accuracy.measure(fw), checks, problems, neighbours=neighbours)
    _write_reports(doc, report_path, junit_path)
    click.echo(
        f"accuracy: proven bound {fw.ff_bound_a * 1000:.3f} mA, measured max "
        f"{doc['max_error_a'] * 1000:.3f} mA, budget {v.firmware.current_budget_a * 1000:.3f} mA"
    )
    _finish(checks, v.source)


def _write_reports(doc: dict[str, Any], report_path: str | None, junit_path: str | None) -> None:
    from . import outputs

    files = {}
    if report_path:
        files[Path(report_path)] = json.dumps(doc, indent=2) + "\n"
    if junit_path:
        files[Path(junit_path)] = outputs.junit(doc)
    outputs.write_set(files)


def _finish(checks: list[Any], source: str) -> None:
    """One line per check (passes on stdout, failures on stderr), then the verdict."""
    from . import gate

    for c in checks:
        click.echo(f"{'ok' if c.ok else 'FAILED'}: {c.detail}", err=not c.ok)
    if not all(c.ok for c in checks):
        raise CheckFailed(gate.summary(checks, source))
    click.echo(gate.summary(checks, source))


@cli.command(short_help="Plots of every table, the error and the envelope.")
@click.argument("model_path", metavar="MODEL", type=click.Path(dir_okay=False))
@click.option("-o", "--out", "out_dir", required=True, type=click.Path(file_okay=False), help="Output folder.")
def report(model_path: str, out_dir: str) -> None:
    """Plots (PNG) of every table, the error distribution and the envelope, with an index.html."""
    from . import accuracy, outputs, plots, synthesis

    folder = out_folder(out_dir)
    v = model.load(model_path)
    for problem in envelope.corner_peaks(v)[3]:
        click.echo(f"warning: {v.source}: envelope: {problem}", err=True)
    fw = synthesis.synthesise(v)
    outputs.check_folder(folder)
    progress = ProgressLine("report")
    try:
        progress("measuring the error")
        files = plots.report_files(fw, accuracy.measure(fw), envelope.analyse(v), folder, progress=progress)
    finally:
        progress.clear()
    outputs.write_set(files)
    click.echo(f"wrote {len(files)} files to {out_dir} (open index.html)")


def main(argv: list[str] | None = None) -> None:
    """Run the commands with the project's exit codes (see cli_support.run)."""
    run(cli, argv)
