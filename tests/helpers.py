"""Test helpers: the demo model as a dict, TOML writing, random valid vehicles."""

from __future__ import annotations

import json
import tomllib
from importlib import resources
from pathlib import Path
from typing import Any

from kinetab.generator import model

DEMO_PATH = Path(str(resources.files("kinetab.generator.demos").joinpath("larkspur.toml")))


def demo_doc() -> dict[str, Any]:
    """The bundled demo model as a parsed TOML dict (a fresh copy each call)."""
    return tomllib.loads(DEMO_PATH.read_text(encoding="utf-8"))


def to_toml(doc: dict[str, Any]) -> str:
    """Write a flat model dict as TOML (strings JSON-quoted: valid TOML basic strings)."""
    lines = []
    for key, value in doc.items():
        if not isinstance(value, dict):
            lines.append(f"{key} = {_value(value)}")
    for key, value in doc.items():
        if isinstance(value, dict):
            lines.append(f"\n[{key}]")
            lines += [f"{k} = {_value(v)}" for k, v in value.items()]
    return "\n".join(lines) + "\n"


def _value(v: Any) -> str:
    if isinstance(v, bool):
        return str(v).lower()
    if isinstance(v, float) and v != v:
        return "nan"
    if isinstance(v, float) and abs(v) == float("inf"):
        return "inf" if v > 0 else "-inf"
    return json.dumps(v)


def run_cli(args: list[str], capsys) -> tuple[int, str, str]:
    """Run the command line in-process: exit code, standard output, standard error."""
    from kinetab.generator import cli

    try:
        cli.main(args)
        code = 0
    except SystemExit as exc:
        code = exc.code
    out, err = capsys.readouterr()
    return code, out, err


def write_model(tmp_path: Path, doc: dict[str, Any], name: str = "model.toml") -> Path:
    path = tmp_path / name
    path.write_text(to_toml(doc), encoding="utf-8")
    return path


def vehicle_from(doc: dict[str, Any]) -> model.Vehicle:
    return model.parse_document(doc, "<test>")


def random_doc(draw_float, shape: str = "ramp") -> dict[str, Any]:
    """A demo-shaped model with random values; `draw_float(lo, hi)` supplies the numbers.

    Casters sit behind the axle and both CoGs between axle and casters, so most draws stand stably.
    """
    doc = demo_doc()
    caster = draw_float(0.25, 0.8)
    doc["body"].update(
        mass=f"{draw_float(8, 300)} kg",
        cog_ahead=f"{-draw_float(0.25, 0.6) * caster} m",
        cog_height=f"{draw_float(0.05, 0.4)} m",
        gyration_radius=f"{draw_float(0.05, 0.5)} m",
    )
    doc["payload"].update(
        mass_max=f"{draw_float(1, 300)} kg",
        cog_ahead=f"{-draw_float(0.25, 0.6) * caster} m",
        cog_height=f"{draw_float(0.05, 0.6)} m",
        gyration_radius=f"{draw_float(0.0, 0.5)} m",
    )
    doc["wheels"].update(
        track=f"{draw_float(0.3, 0.9)} m",
        diameter=f"{draw_float(0.06, 0.4)} m",
        inertia=f"{draw_float(0, 0.02)} kg*m^2",
        rolling_resistance=draw_float(0, 0.05),
        grip=draw_float(0.3, 1.2),
    )
    doc["casters"].update(behind_axle=f"{caster} m", rolling_resistance=draw_float(0, 0.05))
    eff = draw_float(0.5, 1.0)
    doc["drive"].update(
        gear_ratio=draw_float(3, 60),
        efficiency=eff,
        backdrive_efficiency=draw_float(0.4, 1.0),
        rotor_inertia=f"{draw_float(0, 1e-4)} kg*m^2",
        torque_constant=f"{draw_float(0.01, 0.5)} N*m/A",
        winding_resistance=f"{draw_float(0.05, 3)} ohm",
    )
    coulomb = draw_float(0, 20)
    speed_max = draw_float(0.3, 3.0)
    doc["friction"].update(
        coulomb=f"{coulomb} N",
        breakaway=f"{coulomb + draw_float(0, 10)} N",
        stribeck_speed=f"{draw_float(0.002, 0.2)} m/s",
        viscous=f"{draw_float(0, 10)} N*s/m",
        deadband=f"{draw_float(0.003, 0.1) * speed_max} m/s",
        deadband_shape=shape,
    )
    doc["envelope"].update(
        speed_max=f"{speed_max} m/s",
        accel_max=f"{draw_float(0.1, 3)} m/s^2",
        pitch_max=f"{draw_float(0, 8)} deg",
        roll_max=f"{draw_float(0, 5)} deg",
    )
    return doc


def random_firmware_strategy(name: str = "veh"):
    """Hypothesis strategy: synthesised firmware of a random valid, stable vehicle with a random budget.

    Models whose budget cannot be met or that tip are rejected (assume), so only valid ones count."""
    from hypothesis import assume
    from hypothesis import strategies as st
    from kinetab.generator import stability, synthesis
    from kinetab.generator.errors import CheckFailed, ModelError

    @st.composite
    def build(draw):
        pick = lambda lo, hi: draw(st.floats(lo, hi, allow_nan=False, allow_infinity=False))  # noqa: E731
        doc = random_doc(pick, draw(st.sampled_from(["ramp", "gap"])))
        doc["name"] = name
        doc["firmware"]["current_budget"] = f"{pick(15, 80)} mA"
        doc["firmware"]["word"] = draw(st.sampled_from(["int16", "int32"]))
        blend = draw(st.sampled_from(["default", "switch", "drawn"]))  # the efficiency through zero speed
        if blend != "default":
            doc["drive"]["blend_speed"] = "0 m/s" if blend == "switch" else f"{pick(0.001, 0.2)} m/s"
        try:
            v = vehicle_from(doc)
            stability.check(v)
            return synthesis.synthesise(v)
        except (ModelError, CheckFailed):
            assume(False)

    return build()


def invented(seed: int, name: str, tweak=None):
    """A random vehicle (random_doc, seeded numpy draws) that stands and whose 60 mA budget can be met:
    its document and firmware. `tweak(doc, rng)` changes the document before it is tried."""
    import numpy as np
    from kinetab.generator import stability, synthesis
    from kinetab.generator.errors import CheckFailed, ModelError

    rng = np.random.default_rng(seed)
    for _ in range(50):
        doc = random_doc(lambda lo, hi: float(rng.uniform(lo, hi)))
        doc["name"] = name
        doc["firmware"]["current_budget"] = "60 mA"
        if tweak is not None:
            tweak(doc, rng)
        try:
            v = vehicle_from(doc)
            stability.check(v)
            return doc, synthesis.synthesise(v)
        except (ModelError, CheckFailed):
            continue
    raise AssertionError(f"no random vehicle could be built in 50 draws (seed {seed})")


def invented_feasible(seed: int, name: str):
    """An invented vehicle (as `invented`) whose drive is sized for it: current limit and supply voltage
    25 % above the envelope's peaks, so `build` and `verify` pass without --allow-infeasible-envelope.
    Draws whose grip is short are skipped. Returns the document and its firmware."""
    from kinetab.generator import envelope

    for attempt in range(50):
        doc, fw = invented(seed + 1000 * attempt, name)
        current, voltage, _, _ = envelope.corner_peaks(vehicle_from(doc))
        doc["drive"]["current_limit"] = f"{1.25 * current.value:.3f} A"
        doc["drive"]["supply_voltage"] = f"{1.25 * voltage.value:.3f} V"
        if not envelope.analyse(vehicle_from(doc)).problems:
            return invented(seed + 1000 * attempt, name, lambda d, _rng: d.update(drive=doc["drive"]))
    raise AssertionError(f"no invented vehicle had enough grip in 50 draws (seed {seed})")


def skid_doc(doc: dict[str, Any], draw_float, *, wheels: int, motors: int | None = None) -> dict[str, Any]:
    """`doc` made a skid-steer: no casters, `wheels` driven wheels a side over a random wheelbase, random
    lateral friction and transition, both CoGs well inside the end wheels (invented ranges)."""
    doc = {k: (dict(v) if isinstance(v, dict) else v) for k, v in doc.items() if k != "casters"}
    base = draw_float(0.25, 1.0)
    x = [-base / 2 + j * base / (wheels - 1) for j in range(wheels)]
    inside = sum(a * a for a in x) / (wheels * x[-1])  # where the end wheels' linear share reaches zero
    doc["body"]["cog_ahead"] = f"{draw_float(-0.4, 0.4) * inside} m"
    doc["payload"]["cog_ahead"] = f"{draw_float(-0.4, 0.4) * inside} m"
    for part in ("body", "payload"):
        doc[part]["gyration_radius"] = f"{draw_float(0.05, 0.4) * base + 0.01} m"
    doc["skid"] = {
        "wheels_per_side": wheels,
        "wheelbase": f"{base} m",
        "lateral_friction": draw_float(0.0, 0.7),
        "turn_transition": f"{draw_float(0.05, 0.8)} rad/s",
        "motors_per_side": motors if motors is not None else wheels,
    }
    return doc
