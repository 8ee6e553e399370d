"""The `kinetab bench` command group: thin click commands over the bench modules."""

from __future__ import annotations

import json
import sys
import tempfile
from pathlib import Path
from typing import TYPE_CHECKING, Any

import click
from kinetab.generator import dynamics, interface, model, units
from kinetab.generator.cli_support import ProgressLine, QuantityType, out_folder
from kinetab.generator.errors import UserError

if TYPE_CHECKING:
    from kinetab.generator.synthesis import Firmware
    from kinetab.generator.vehicle import Vehicle

    from .plant import PlantOptions
    from .simulator import LinkFaults

CAUTION = (
    "CAUTION: a bench run moves the motors. Lift the wheels off the floor or restrain the vehicle, keep an\n"
    "emergency stop within reach, set the current limits in the drive, and keep people out of the path.\n"
    "Feed-forward from wrong parameters can move a vehicle unexpectedly; these values are engineering\n"
    "estimates, not a safety function. Follow the applicable standards (e.g. ISO 3691-4, IEC 61508,\n"
    "ISO 13849, IEC 61800-5-2) and local regulations and licensed practice."
)
RIG = click.Choice(list(dynamics.RIGS))
RIG_OPTION = click.option(
    "--rig", type=RIG, default="on-floor", show_default=True, help="Wheels on the floor or lifted."
)
SECONDS = units.Kind("a duration", "s", "'1 ms'")
ACCEPT_OTHER = click.option(
    "--accept-other-model",
    is_flag=True,
    help="Use logs recorded with another model or fingerprint (with a warning).",
)


def _period_option(text: str) -> Any:
    """The control period option (bare number: ms), shared by the commands that take it."""
    return click.option(
        "--period", type=QuantityType(SECONDS, "ms"), default="1", show_default=True, help=f"{text} (bare number: ms)."
    )


def _check_period(command: str, period: float) -> None:
    """The control period a bench command takes: 0.1 ms to 100 ms (one line, exit 2, otherwise)."""
    if not 0.0001 <= period <= 0.1:
        raise UserError(f"{command}: --period: expected between 0.1 ms and 100 ms")


def _check_lifted(command: str, rig: str, situation: dict[str, float]) -> None:
    """A wheels-up rig leaves gravity out of the model: a pitch or roll there would be ignored, so it is
    refused (one line, exit 2) rather than written into a plan that seems to test it."""
    tilted = [f"--{name}" for name in ("pitch", "roll") if situation.get(name)]
    if rig == "wheels-up" and tilted:
        raise UserError(f"{command}: {' and '.join(tilted)}: a wheels-up rig has no slope (gravity is left out)")


def _duration_option(text: str) -> Any:
    """The length option of the commands that write plans (bare number: s), 60 s by default."""
    return click.option(
        "--duration", type=QuantityType(SECONDS, "s"), default="60", show_default=True, help=f"{text} (bare number: s)."
    )


def _situation_options(f: Any) -> Any:
    """`bench plan`'s options for the inputs that stay fixed during a plan (the interface's slow members:
    payload, pitch, roll), each defaulting to zero, in the interface's order."""
    for m in reversed([m for m in interface.FF_IN.members if m.slow]):
        assert m.quantity is not None
        help_text = f"{m.labels[0]}, fixed for the whole plan (bare number: {m.typed_unit})."
        kind = QuantityType(m.quantity, m.typed_unit)
        f = click.option(f"--{m.name}", type=kind, default="0", show_default=True, help=help_text)(f)
    return f


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
def bench() -> None:
    """Bench link to the drive controller: link C, plans, a simulated controller, runs, serial ports."""


@bench.command(short_help="List serial ports with USB VID:PID, serial number and description.")
@click.option("--json", "as_json", is_flag=True, help="Print JSON instead of a table.")
def ports(as_json: bool) -> None:
    """List serial ports: device, USB VID:PID, serial number, description."""
    from . import portlist

    found = portlist.ports()
    if as_json:
        click.echo(json.dumps([p.as_dict() for p in found], indent=2))
        return
    click.echo(portlist.table(found))


@bench.command(short_help="Generate the controller side of the link: <name>_link.h and .c.")
@click.argument("model_path", metavar="MODEL", type=click.Path(dir_okay=False))
@click.option("-o", "--out", "out_dir", required=True, type=click.Path(file_okay=False), help="Output folder.")
@_period_option("Default control period the link reports")
def link(model_path: str, out_dir: str, period: float) -> None:
    """Write <name>_link.h and <name>_link.c into OUT, beside the <name>_ff files of `kinetab build`
    (they include <name>_ff.h). Hook them to the firmware as README shows."""
    from kinetab.generator import outputs, synthesis

    from . import linkview

    out_folder(out_dir)  # refuses an empty name
    v = model.load(model_path)
    files = linkview.render_link(synthesis.synthesise(v), period_us=round(period * 1e6))
    outputs.write_set({Path(out_dir) / name: text for name, text in files.items()})
    click.echo(f"wrote {', '.join(str(Path(out_dir) / n) for n in files)}")


@bench.command(short_help="Generate a reference firmware project for an emulated or real board.")
@click.argument("model_path", metavar="MODEL", type=click.Path(dir_okay=False))
@click.option("--board", "board_name", required=True, help="Target board: mps2-an386 (Cortex-M4) or mps2-an385 (M3).")
@click.option("-o", "--out", "out_dir", required=True, type=click.Path(file_okay=False), help="Output folder.")
@_period_option("Control period of the firmware's tick")
@click.option("--fifo-depth", type=click.IntRange(2, 4096), default=64, show_default=True, help="Setpoint FIFO depth.")
def firmware(model_path: str, board_name: str, out_dir: str, period: float, fifo_depth: int) -> None:
    """Write a bare-metal firmware project into OUT: the feed-forward and link C, main, startup, UART
    driver, linker script, Makefile and CMake project for BOARD. `make` builds it with arm-none-eabi-gcc;
    `kinetab bench simulate --board` runs it on qemu-system-arm with the simulated drive; the CMake build
    regenerates the C when the model changes and runs kinetab verify."""
    from kinetab.generator import outputs, synthesis

    from . import boards, firmwareview

    board = boards.board(board_name)
    out_folder(out_dir)  # refuses an empty name
    fw = synthesis.synthesise(model.load(model_path))
    files = firmwareview.render_project(
        fw,
        board,
        period_us=round(period * 1e6),
        fifo_depth=fifo_depth,
        model_path=Path(model_path).resolve().as_posix(),
    )
    outputs.write_set({Path(out_dir) / name: text for name, text in files.items()})
    runs = f"kinetab bench simulate --board {board.name} runs the same firmware on the emulator"
    click.echo(f"wrote {len(files)} files into {out_dir} for {board.title}: make builds it; {runs}")


@bench.command(short_help="Measured against predicted current, per wheel and phase; exit 1 on a mismatch.")
@click.argument("model_path", metavar="MODEL", type=click.Path(dir_okay=False))
@click.argument("log_path", metavar="LOG", type=click.Path(dir_okay=False))
@click.option("--json", "as_json", is_flag=True, help="Print JSON (SI units) instead of a table.")
@click.option("--plot", "plot_path", type=click.Path(dir_okay=False), help="Also write the comparison as a PNG.")
@click.option(
    "--tolerance",
    type=QuantityType(units.CURRENT, "A", least=0, above=True),
    help="RMS residual allowed (bare number: A).",
)
@click.option("--rig", type=RIG, help="Override the rig recorded in LOG.json.")
@ACCEPT_OTHER
def compare(
    model_path: str,
    log_path: str,
    as_json: bool,
    plot_path: str | None,
    tolerance: float | None,
    rig: str | None,
    accept_other_model: bool,
) -> None:
    """Predict the motor currents of LOG with MODEL (at the measured speeds, and at the setpoints) and
    compare: RMS, max and bias per wheel and per phase, the noise floor, which term the residual looks
    like. Exit 1 when a wheel's RMS residual exceeds the tolerance."""
    from kinetab.generator import outputs
    from kinetab.generator.errors import CheckFailed

    from . import compare as cmp
    from . import compareplot, fitreport, liftlog

    v = model.load(model_path)
    if liftlog.is_lift_log(Path(log_path)):
        _no_rig_for_lift("bench compare", rig)
        _lift_compare(
            v, Path(log_path), as_json=as_json, plot=plot_path, tolerance=tolerance, accept=accept_other_model
        )
        return
    if plot_path:
        if Path(plot_path).suffix.lower() != ".png":
            raise UserError(f"bench compare: --plot {plot_path}: the plot is a PNG; give a file name ending in .png")
        outputs.check_target(Path(plot_path))
    (log,) = fitreport.checked_logs(v, [Path(log_path)], rig=rig, accept_other_model=accept_other_model)
    doc = cmp.compare(v, log, tolerance_a=tolerance)
    if plot_path:
        compareplot.write_plot(log, doc, Path(plot_path), model_name=v.name)
    series = doc.pop("series")
    del series
    click.echo(json.dumps(doc, indent=2) if as_json else cmp.text(doc))
    if not doc["passed"]:
        raise CheckFailed(
            f"{log_path}: the model does not match the bench: RMS residual above {doc['tolerance_a'] * 1000:.1f} mA"
        )


def _no_rig_for_lift(command: str, rig: str | None) -> None:
    """--rig names where the wheels ran; a lift log has no wheels (review: it was ignored without a word)."""
    if rig is not None:
        raise UserError(f"{command}: --rig {rig} picks the wheels' rig; a lift log has none: leave it out")


def _lift_compare(
    v: Vehicle, path: Path, *, as_json: bool, plot: str | None, tolerance: float | None, accept: bool
) -> None:
    """bench compare of a lift log (exit 1 when the RMS residual exceeds the tolerance)."""
    from kinetab.generator.errors import CheckFailed

    from . import fitreport, liftcompare, liftlog

    if v.lift is None:
        raise UserError(f"{path}: a lift log, but the model has no [lift] section")
    if plot:
        raise UserError("bench compare: --plot draws drive logs; leave it out for a lift log")
    (log,) = fitreport.checked_logs(v, [path], rig=None, accept_other_model=accept, read=liftlog.read_log)
    doc = liftcompare.compare(v, log, tolerance_a=tolerance)
    click.echo(json.dumps(doc, indent=2) if as_json else liftcompare.text(doc))
    if not doc["passed"]:
        raise CheckFailed(
            f"{path}: the lift model does not match the bench: RMS residual above {doc['tolerance_a'] * 1000:.1f} mA"
        )


@bench.command(short_help="Fit model parameters to bench logs and write the corrected model.")
@click.argument("model_path", metavar="MODEL", type=click.Path(dir_okay=False))
@click.argument("log_paths", metavar="LOG...", nargs=-1, required=True, type=click.Path(dir_okay=False))
@click.option("--write", "write_path", type=click.Path(dir_okay=False), help="Write the corrected model here.")
@click.option("--in-place", is_flag=True, help="Rewrite MODEL itself (comments, layout and units kept).")
@click.option("--json", "as_json", is_flag=True, help="Print JSON instead of tables.")
@click.option("--rig", type=RIG, help="Override the rig recorded in every LOG.json.")
@click.option(
    "--held-spread",
    type=click.FloatRange(0, 100),
    help="How far off (percent of each, one sigma) the values the logs leave open are taken to be; what they "
    "would pull the fitted ones by is added to the error bars. Default 25.",
)
@ACCEPT_OTHER
def fit(
    model_path: str,
    log_paths: tuple[str, ...],
    write_path: str | None,
    in_place: bool,
    as_json: bool,
    rig: str | None,
    held_spread: float | None,
    accept_other_model: bool,
) -> None:
    """One joint, bounded least-squares fit over the logs (wheels-up, on-floor at two payloads and on a
    ramp together determine everything; `bench campaign` plans them). Parameters the logs cannot tell
    apart are named, held at the model's values, and the combination the logs do determine is shown,
    with the further log that would separate them. Prints each estimate with its unit and HAC standard
    error, and the compare RMS per phase before and after. Without --write or --in-place nothing is
    written."""
    from . import fitreport, liftlog

    if write_path and in_place:
        raise UserError("bench fit: give at most one of --write NEW.toml and --in-place")
    target = Path(model_path) if in_place else Path(write_path) if write_path else None
    lifts = [liftlog.is_lift_log(Path(p)) for p in log_paths]
    if any(lifts):
        if not all(lifts):
            raise UserError("bench fit: give lift logs and drive logs in separate fits (they share no parameter)")
        _no_rig_for_lift("bench fit", rig)
        if held_spread is not None:
            raise UserError(
                "bench fit: --held-spread is for drive logs (the lift fit adds no held values' spread): leave it out"
            )
        fitreport.run_lift_fit(
            Path(model_path), [Path(p) for p in log_paths], target=target, as_json=as_json, accept=accept_other_model
        )
        return
    fitreport.run_fit(
        Path(model_path),
        [Path(p) for p in log_paths],
        target=target,
        as_json=as_json,
        rig=rig,
        accept_other_model=accept_other_model,
        held_spread=None if held_spread is None else held_spread / 100,
    )


@bench.command(short_help="Write a jerk-limited test trajectory (CSV) inside the envelope.")
@click.argument("model_path", metavar="MODEL", type=click.Path(dir_okay=False))
@click.option("-o", "--out", "out_path", required=True, type=click.Path(dir_okay=False), help="Plan CSV to write.")
@_duration_option("Length of the plan")
@_period_option("Control period, one row each")
@RIG_OPTION
@_situation_options
@click.option("--for-fit", is_flag=True, help="Choose the plan that makes the fitted parameters best identifiable.")
@click.option(
    "--axis",
    type=click.Choice(["drive", "lift"]),
    default="drive",
    show_default=True,
    help="Plan for the wheels, or for the lift (strokes up and down; the model needs [lift]).",
)
@click.option(
    "--lift-payload",
    type=QuantityType(units.MASS, "kg"),
    default="0",
    show_default=True,
    help="With --axis lift: the load on the carriage for the whole plan (bare number: kg).",
)
def plan(
    model_path: str,
    out_path: str,
    duration: float,
    period: float,
    rig: str,
    for_fit: bool,
    axis: str,
    lift_payload: float,
    **situation: float,
) -> None:
    """Write PLAN.csv: both directions, several speeds and accelerations, turns, spin in place and slow
    zero crossings, checked with the float model against the envelope and 90 % of the current limit.
    With --axis lift: strokes up and down the lift's travel at several speeds and accelerations with
    one load, from and back to the bottom, checked against the lift's limits."""
    from kinetab.generator import outputs

    from . import excite, planfile, planner

    v = model.load(model_path)
    _check_period("bench plan", period)
    _check_lifted("bench plan", rig, situation)
    if axis == "lift":
        _lift_plan(v, Path(out_path), period_s=period, payload_kg=lift_payload, for_fit=for_fit)
        return
    if for_fit:
        progress = ProgressLine("bench plan")
        try:
            p, _ = excite.plan_for_fit(
                v,
                duration_s=duration,
                period_s=period,
                rig=rig,
                progress=progress,
                **situation,
            )
        finally:
            progress.clear()
    else:
        p = planner.make_plan(v, duration_s=duration, period_s=period, rig=rig, seed=None, **situation)
    cond, told = excite.condition(v, p, rig)
    out = Path(out_path)
    outputs.write_set({out: planfile.to_csv(p, v), planfile.side_file(out): planfile.side_text(v, rig=rig)})
    use = planner.plan_current_use(v, p.si(), rig=rig)
    click.echo(
        f"wrote {out_path}: {len(p)} rows of {period * 1000:g} ms, peak current {use:.0%} of the limit "
        f"({rig}); {excite.told_apart(told, cond)}"
    )


def _lift_plan(v: Vehicle, out: Path, *, period_s: float, payload_kg: float, for_fit: bool) -> None:
    """bench plan --axis lift: write the lift plan and its side file, or one line why not."""
    import numpy as np
    from kinetab.generator import lift, outputs
    from kinetab.generator.errors import CheckFailed

    from . import liftplan, planfile

    if for_fit:
        raise UserError("bench plan: --for-fit chooses among drive plans; a lift plan is fixed (leave it out)")
    p = liftplan.make_plan(v, period_s=period_s, payload_kg=payload_kg)
    problem = liftplan.plan_problem(v, p)
    if problem:
        raise CheckFailed(f"bench plan: the lift plan cannot stay inside the lift's limits: {problem}")
    outputs.write_set({out: liftplan.to_csv(p), planfile.side_file(out): planfile.side_text(v)})
    assert v.lift is not None
    si = p.si()
    peak = float(np.max(np.abs(lift.motor_current(v.lift, si["payload_kg"], si["speed_mps"], si["accel_mps2"]))))
    click.echo(
        f"wrote {out}: {len(p)} rows of {period_s * 1000:g} ms, {len(liftplan.STROKES)} strokes up and down "
        f"with {payload_kg:g} kg on the carriage, peak current {peak / v.lift.current_limit_a:.0%} of "
        "lift.current_limit; start it with the carriage at the bottom of its travel"
    )


@bench.command(short_help="Serve a simulated controller on a pseudo-terminal.")
@click.argument("model_path", metavar="MODEL", type=click.Path(dir_okay=False))
@click.option("--truth", "truth_path", type=click.Path(dir_okay=False), help="The true vehicle (default: MODEL).")
@click.option(
    "--noise",
    type=QuantityType(units.CURRENT, "A", least=0),
    default="0",
    show_default=True,
    help="Standard deviation of the measured current (bare number: A).",
)
@_period_option("Control period")
@RIG_OPTION
@click.option(
    "--encoder-counts",
    type=click.IntRange(16, 1 << 24),
    default=4096,
    show_default=True,
    help="Encoder counts per motor turn (speed quantisation).",
)
@click.option(
    "--fifo-depth",
    type=click.IntRange(2, 4096),
    help="Setpoint FIFO depth of the controller (default: 64; 16 with --board, whose emulated UART is slow: the "
    "run starts after half the FIFO arrived).",
)
@click.option(
    "--watchdog",
    type=QuantityType(SECONDS, "ms"),
    help="Halt the motors after this long without a valid frame (bare number: ms; default: 100 ms or five "
    "control periods, whichever is longer: at a slow period the host sends one setpoint per period).",
)
@click.option("--drop-rate", type=click.FloatRange(0, 1), default=0.0, help="Test faults: drop bytes (probability).")
@click.option("--corrupt-rate", type=click.FloatRange(0, 1), default=0.0, help="Test faults: flip a bit (probability).")
@click.option(
    "--delay",
    type=QuantityType(SECONDS, "ms"),
    default="0",
    help="Test faults: hold every byte to the controller this long (bare number: ms).",
)
@click.option(
    "--garbage-every",
    type=QuantityType(SECONDS, "s"),
    default="0",
    help="Test faults: a burst of random bytes both ways at this interval (bare number: s).",
)
@click.option("--seed", type=int, default=1, show_default=True, help="Seed of the noise and the faults.")
@click.option(
    "--board",
    "board_name",
    help="Run the reference firmware on this emulated board (mps2-an386, mps2-an385) instead of on this host.",
)
@click.option(
    "--port-file",
    type=click.Path(dir_okay=False),
    help="Also write the port's path to this file (atomically, once the port is open): a script can wait for it.",
)
def simulate(
    model_path: str,
    truth_path: str | None,
    noise: float,
    period: float,
    rig: str,
    encoder_counts: int,
    fifo_depth: int | None,
    watchdog: float | None,
    drop_rate: float,
    corrupt_rate: float,
    delay: float,
    garbage_every: float,
    seed: int,
    board_name: str | None,
    port_file: str | None,
) -> None:
    """Compile the link and feed-forward C of MODEL for this host, drive a simulated vehicle (TRUE_MODEL's
    physics under a velocity PI loop plus the feed-forward) and serve it on a pseudo-terminal, whose path
    is the first line printed. Runs until the motors are halted, or until killed. With --board, the
    reference firmware runs on qemu-system-arm instead, driving the same simulated vehicle; it runs
    until killed (a board stays on after a halt and takes the next run)."""
    from kinetab.generator import outputs, synthesis

    from .linkview import FIFO_DEPTH
    from .plant import PlantOptions
    from .simulator import LinkFaults

    v = model.load(model_path)
    truth = model.load(truth_path) if truth_path else v
    if v.lift is not None and truth.lift is None:
        raise UserError(
            f"bench simulate: --truth {truth_path}: it has no [lift] and {model_path} has one; give the true lift"
        )
    _check_period("bench simulate", period)
    watchdog = _watchdog_s(watchdog, period)
    fifo_depth = fifo_depth or (BOARD_FIFO_DEPTH if board_name else FIFO_DEPTH)
    if port_file:
        outputs.check_target(Path(port_file))
    faults = LinkFaults(
        drop_rate=drop_rate, corrupt_rate=corrupt_rate, delay_s=delay, garbage_every_s=garbage_every, seed=seed
    )
    fw = synthesis.synthesise(v)
    opts = PlantOptions(period_s=period, rig=rig, current_noise_a=noise, encoder_counts=encoder_counts, seed=seed)
    if board_name:
        _refuse_faults(faults)
        sys.exit(_simulate_board(fw, truth, board_name, opts=opts, fifo_depth=fifo_depth, watchdog_s=watchdog,
                                 port_file=port_file))  # fmt: skip
    sys.exit(_simulate_host(fw, truth, opts=opts, faults=faults, fifo_depth=fifo_depth, watchdog_s=watchdog,
                            port_file=port_file))  # fmt: skip


def _simulate_host(
    fw: Firmware,
    truth: Vehicle,
    *,
    opts: PlantOptions,
    faults: LinkFaults,
    fifo_depth: int,
    watchdog_s: float,
    port_file: str | None,
) -> int:
    """`bench simulate` on this host: the link and feed-forward C via ctypes, served on a pseudo-terminal."""
    from kinetab.generator import outputs

    from .simulator import Simulator

    with tempfile.TemporaryDirectory(prefix="kinetab-sim-") as tmp:
        sim = Simulator(
            fw, truth, options=opts, faults=faults, fifo_depth=fifo_depth, folder=Path(tmp), watchdog_s=watchdog_s
        )
        if port_file:
            outputs.write_file(Path(port_file), sim.path + "\n")
        return sim.run()


BOARD_FIFO_DEPTH = 16
"""`bench simulate --board`'s FIFO: 0.8 s at 50 ms; its prefill (8 setpoints) crosses the emulated UART
quickly, so the first sample comes well within the host's answer timeout even on a loaded machine."""


def _watchdog_s(watchdog_s: float | None, period_s: float) -> float:
    """--watchdog, or its default: 100 ms or five control periods, whichever is longer."""
    watchdog_s = max(0.1, 5 * period_s) if watchdog_s is None else watchdog_s
    if not period_s <= watchdog_s <= 60:
        raise UserError("bench simulate: --watchdog: expected between one control period and 60 s")
    return watchdog_s


_FAULT_OPTIONS = {"drop_rate": "--drop-rate", "corrupt_rate": "--corrupt-rate", "delay_s": "--delay",
                  "garbage_every_s": "--garbage-every"}  # fmt: skip


def _refuse_faults(faults: LinkFaults) -> None:
    """Fault injection belongs to the host simulation: a UserError naming the first one asked with --board."""
    for name, flag in _FAULT_OPTIONS.items():
        if getattr(faults, name):
            raise UserError(f"bench simulate: {flag}: fault injection is for the host simulation, not --board")


def _simulate_board(
    fw: Firmware,
    truth: Vehicle,
    board_name: str,
    *,
    opts: PlantOptions,
    fifo_depth: int,
    watchdog_s: float,
    port_file: str | None,
) -> int:
    """`bench simulate --board`: build the reference firmware, run it on qemu-system-arm with the simulated
    drive, print the link's port first; until the emulator exits or the command is stopped."""
    from kinetab.generator import outputs

    from . import boards, boardsim
    from .plant import Plant
    from .session import BenchFailed
    from .stepdrive import StepDrive

    board = boards.board(board_name)
    boardsim.check_tools("bench simulate --board")
    with tempfile.TemporaryDirectory(prefix="kinetab-board-") as tmp:
        period_us = round(opts.period_s * 1e6)
        spec = boardsim.Build(period_us=period_us, fifo_depth=fifo_depth, folder=Path(tmp) / "fw",
                              watchdog_ticks=max(1, round(watchdog_s / opts.period_s)))  # fmt: skip
        built = boardsim.build(fw, board, spec)
        emulated = boardsim.EmulatedBoard(board, built.elf, StepDrive(fw, Plant(truth=truth, options=opts)), Path(tmp))
        try:
            click.echo(emulated.port)
            if port_file:
                outputs.write_file(Path(port_file), emulated.port + "\n")
            click.echo(f"{built.report()}; {board.title} runs it; Ctrl-C stops it", err=True)
            code = emulated.serve()
        finally:
            emulated.close()
            click.echo(emulated.health(), err=True)
    if code != 0:
        raise BenchFailed(f"bench simulate: qemu-system-arm exited with code {code}")
    return 0


@bench.command(short_help="Stream a plan to the controller and log what it measures.")
@click.argument("model_path", metavar="MODEL", type=click.Path(dir_okay=False))
@click.option("--port", "url", required=True, help="Serial port or pyserial URL (pty path, socket://, loop://).")
@click.option("--plan", "plan_path", required=True, type=click.Path(dir_okay=False), help="Plan CSV (bench plan).")
@click.option("--log", "log_path", required=True, type=click.Path(dir_okay=False), help="Log CSV to write.")
@click.option("--baud", type=int, default=1_000_000, show_default=True, help="Baud rate (ignored by USB CDC).")
@click.option("--yes", is_flag=True, help="Skip the confirmation of the cautions (they are still printed).")
@click.option(
    "--rig",
    type=RIG,
    help="Wheels on the floor or lifted (recorded in LOG.json for compare and fit). Default: the rig the plan "
    "was made for (its PLAN.json), else on-floor.",
)
@click.option(
    "--feedforward",
    type=click.Choice(["model", "none"]),
    help="'model': the controller adds the generated feed-forward; 'none': the speed loop alone. "
    "Default: model on the floor, none wheels up (the generated feed-forward is for the vehicle on its wheels).",
)
@click.option(
    "--outside-envelope", is_flag=True, help="Run a plan that leaves the model's envelope or drive limits (warned)."
)
@click.option(
    "--accept-other-model",
    is_flag=True,
    help="Run a plan whose PLAN.json names another model (warned); otherwise that is exit 2.",
)
def run(
    model_path: str,
    url: str,
    plan_path: str,
    log_path: str,
    baud: int,
    yes: bool,
    rig: str | None,
    feedforward: str | None,
    outside_envelope: bool,
    accept_other_model: bool,
) -> None:
    """Check PLAN against the model's envelope and drive limits, handshake, arm, stream PLAN one
    setpoint per control tick and log one row per sample; the motors are halted on every way out.
    Exit 0 when the plan completed, 1 on a fault, timeout or mismatch, 2 when the plan is outside."""
    from . import runner

    runner.bench_run(
        model_path,
        url=url,
        plan_path=Path(plan_path),
        log_path=Path(log_path),
        baud=baud,
        rig=rig,
        feedforward=feedforward,
        outside_envelope=outside_envelope,
        accept_other_model=accept_other_model,
        confirm=None if yes else _confirm,
    )


def _confirm() -> None:
    click.echo(CAUTION, err=True)
    if not sys.stdin or not sys.stdin.isatty():
        raise UserError("bench run: confirm the cautions at a terminal, or pass --yes")
    if not click.confirm("Start the run?", default=False, err=True):
        raise UserError("bench run: not confirmed; nothing was sent")


@bench.command(short_help="Plan the set of bench runs that lets `bench fit` determine every parameter.")
@click.argument("model_path", metavar="MODEL", type=click.Path(dir_okay=False))
@click.option("-o", "--out", "out_dir", required=True, type=click.Path(file_okay=False), help="Folder for the plans.")
@_duration_option("Length of each run")
@_period_option("Control period, one row each")
@click.option(
    "--noise",
    type=QuantityType(units.CURRENT, "A", least=0, above=True),
    help="Expected noise of the measured current (bare number: A; default 1 % of drive.current_limit).",
)
def campaign(model_path: str, out_dir: str, duration: float, period: float, noise: float | None) -> None:
    """Choose the runs (wheels up; on the floor empty and loaded; on a ramp) whose logs together let the
    fit determine every parameter with room to spare, judged from the planned motion; write one plan per
    run and CAMPAIGN.txt with the order, what each run needs and the commands, and print it."""
    from kinetab.generator import outputs

    from . import campaigntext

    out_folder(out_dir)  # refuses an empty name
    _check_period("bench campaign", period)
    if duration < 5:
        raise UserError("bench campaign: --duration: expected at least 5 s (room to start and stop)")
    v = model.load(model_path)
    files, text = campaigntext.campaign_files(
        v, Path(model_path), Path(out_dir), duration_s=duration, period_s=period, noise_a=noise
    )
    outputs.write_set(files)
    click.echo(text)
