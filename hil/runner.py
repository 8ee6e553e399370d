"""`kinetab bench run` from start to end: read the model and plan, open the port, run the session with
a progress line, write LOG.csv as samples arrive and LOG.json at the end, halt the motors always."""

from __future__ import annotations

import json
import signal
import sys
import time
from collections.abc import Callable
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import numpy as np
from kinetab.generator import interface, model, outputs, synthesis
from kinetab.generator.cli_support import Interrupted
from kinetab.generator.errors import UserError

from . import liftplan, messages, planfile, session
from .benchlog import LogWriter
from .liftlog import LiftLogWriter


def plan_steps(v: Any, plan: planfile.Plan, source: Path) -> np.ndarray:
    """The plan in firmware steps, one row of the vehicle's input struct (interface.ff_in) per setpoint;
    one line naming the column if it cannot be."""
    try:
        fields = interface.to_steps(v, interface.ff_in(v), plan.si())
    except ValueError as exc:
        raise UserError(f"{source}: {exc}") from None
    return interface.fields_to_rows(interface.ff_in(v), fields).astype(np.int64)


def _open(url: str, baud: int) -> Any:
    import serial

    try:
        return serial.serial_for_url(url, baudrate=baud, timeout=0.05, write_timeout=2.0)
    except (serial.SerialException, ValueError, OSError) as exc:
        raise UserError(f"--port {url}: cannot open: {exc}") from None


class Progress:
    """One status line on stderr: rewritten in place at a terminal, a line every 5 s otherwise."""

    def __init__(self, total: int) -> None:
        self.total, self.start, self.shown = total, time.monotonic(), 0.0
        self.tty = sys.stderr.isatty()

    def show(self, c: session.Counters, drops: int, *, final: bool = False) -> None:
        now = time.monotonic()
        if not final and now - self.shown < (0.25 if self.tty else 5.0):
            return
        self.shown = now
        rate = c.samples / max(now - self.start, 1e-9)
        bar = "#" * int(20 * c.samples / max(self.total, 1))
        fifo = c.fifo_depth - c.fifo_free if c.fifo_depth else 0
        text = f"[{bar:<20}] {c.samples}/{self.total} samples, {rate:.0f}/s, drops {drops}, fifo {fifo}/{c.fifo_depth}"
        sys.stderr.write(("\r" + text + ("\n" if final else "")) if self.tty else text + "\n")
        sys.stderr.flush()


def bench_run(
    model_path: str,
    *,
    url: str,
    plan_path: Path,
    log_path: Path,
    baud: int,
    rig: str | None = None,
    feedforward: str | None = None,
    outside_envelope: bool = False,
    accept_other_model: bool = False,
    confirm: Callable[[], None] | None,
) -> None:
    """The whole run; BenchFailed (exit 1) on a fault, timeout or mismatch, UserError (2) on bad input.
    `rig` None: the one PLAN.json names, else on-floor; `feedforward` "none" asks the controller to apply
    no feed-forward current (the speed loop alone), the default wheels up."""
    job = _prepare(model_path, plan_path, rig=rig, outside=outside_envelope, log=log_path, accept=accept_other_model)
    feedforward = feedforward or ("none" if job.rig == "wheels-up" else "model")
    if confirm is not None:
        confirm()
    link, counters = session.Link(_open(url, baud)), session.Counters()
    meta = _meta(
        job.v, job.fingerprint, model=model_path, port=url, plan=plan_path, rig=job.rig, feedforward=feedforward
    )
    meta.update(rows=len(job.steps), axis="lift" if job.lift else "drive")
    progress, log = Progress(len(job.steps)), None
    reason = "error"
    try:
        ident = session.handshake(link, url)
        meta["controller"] = _controller(ident)
        session.check_identity(ident, job.fingerprint, url, lift=job.lift)
        session.check_period(ident, job.period, url, str(plan_path))
        log = job.make_log()  # only now: a refused controller leaves no log behind
        outputs.write_file(log_path.with_suffix(".json"), json.dumps({**meta, "ended": "running"}, indent=2) + "\n")
        on_sample = _sampler(log, progress, counters, link)
        rows = [tuple(int(x) for x in r) for r in job.steps]
        flags = messages.NO_FEEDFORWARD if feedforward == "none" else 0
        reason = session.run(
            link, rows, ident=ident, on_sample=on_sample, counters=counters, port_name=url, flags=flags, lift=job.lift
        )
    except BaseException as exc:  # a fault, Ctrl-C, SIGTERM, a lost port: halt first, then let it through
        reason = _ended(exc, counters)
        raise
    finally:
        _finish(link, log, progress, counters, meta=meta, reason=reason)


def _sampler(
    log: Any, progress: Progress, counters: session.Counters, link: session.Link
) -> Callable[[int, Any], None]:
    def on_sample(index: int, sample: Any) -> None:
        log.add(index, sample)
        progress.show(counters, link.drops.total())

    return on_sample


LogMaker = Callable[[], "LogWriter | LiftLogWriter"]


@dataclass(frozen=True, kw_only=True)
class Job:
    """What a run streams: the model, the plan in steps and its period, the rig, how to open the log."""

    v: Any
    lift: bool
    rig: str
    steps: np.ndarray
    period: float | None
    make_log: LogMaker

    @property
    def fingerprint(self) -> int:
        return synthesis.fingerprint(self.v)


def _prepare(model_path: str, plan_path: Path, *, rig: str | None, outside: bool, log: Path, accept: bool) -> Job:
    """The model and the plan, checked (the lift's plan by its header), in steps; the rig resolved
    against PLAN.json; a log that would overwrite the model, the plan or its side file refused."""
    _check_log_path(log, model=Path(model_path), plan=plan_path)
    v = model.load(model_path)
    lift = liftplan.is_lift_header(plan_path)
    rig = "on-floor" if lift else _rig(plan_path, rig)
    if lift:
        steps, period, make = _lift_steps(v, plan_path, outside=outside, log=log, accept=accept)
    else:
        steps, period, make = _drive_steps(v, plan_path, rig=rig, outside=outside, log=log, accept=accept)
    return Job(v=v, lift=lift, rig=rig, steps=steps, period=period, make_log=make)


def _rig(plan_path: Path, asked: str | None) -> str:
    """The rig of the run: as asked, else as PLAN.json says, else on-floor; a plan made for the other rig
    is refused (a wheels-up plan run on-floor applied the on-floor feed-forward to lifted wheels)."""
    planned = planfile.plan_rig(plan_path)
    if asked is None:
        return planned or "on-floor"
    if planned is not None and planned != asked:
        raise UserError(
            f"{plan_path}: made for the {planned} rig (its {planfile.side_file(plan_path).name}), but --rig {asked}; "
            f"run it with --rig {planned}, or make a plan for {asked}"
        )
    return asked


def _check_log_path(log: Path, *, model: Path, plan: Path) -> None:
    """One line when LOG.csv or LOG.json would replace the model, the plan or the plan's side file."""
    taken = {
        model.resolve(): "the model",
        plan.resolve(): "the plan",
        planfile.side_file(plan).resolve(): "the plan's side file",
    }
    for target in (log, log.with_suffix(".json")):
        if target.resolve() in taken:
            raise UserError(
                f"--log {log}: would overwrite {taken[target.resolve()]} ({target}); give the log its own name"
            )


def _drive_steps(
    v: Any, plan_path: Path, *, rig: str, outside: bool, log: Path, accept: bool
) -> tuple[np.ndarray, float | None, LogMaker]:
    """A drive plan checked and in steps, its period, and how to open its log."""
    from . import planner

    plan = planfile.read_plan(plan_path, v)
    _check_plan(
        v,
        plan_path,
        planner.plan_problem(v, plan, rig),
        remake="kinetab bench plan",
        outside=outside,
        log=log,
        accept=accept,
        worst=lambda: planner.excess_summary(plan, planner.plan_excesses(v, plan, rig)),
    )
    steps = plan_steps(v, plan, plan_path)
    return steps, planfile.period_s(plan), lambda: LogWriter(log, v, plan, steps)


def _lift_steps(
    v: Any, plan_path: Path, *, outside: bool, log: Path, accept: bool
) -> tuple[np.ndarray, float | None, LogMaker]:
    """A lift plan checked and in steps, its period, and how to open its log."""
    if v.lift is None:
        raise UserError(f"{plan_path}: a lift plan, but the model has no [lift] section")
    plan = liftplan.read_plan(plan_path)
    problem = liftplan.plan_problem(v, plan)
    remake = "kinetab bench plan --axis lift"
    _check_plan(v, plan_path, problem, remake=remake, outside=outside, log=log, accept=accept)
    steps = liftplan.steps(v, plan, plan_path)
    return steps, liftplan.period_s(plan), lambda: LiftLogWriter(log, v, plan, steps)


def _meta(v: Any, fingerprint: int, *, model: str, port: str, plan: Path, rig: str, feedforward: str) -> dict[str, Any]:
    """LOG.json's first fields: which model recorded the log, how and when it started."""
    return {
        "model": str(model),
        "model_name": v.name,
        "fingerprint": f"0x{fingerprint:08X}",
        "port": port,
        "plan": str(plan),
        "rig": rig,
        "feedforward": feedforward,
        "started": _now(),
    }


def _check_origin(v: Any, plan_path: Path, *, accept_other_model: bool) -> None:
    """Refuse (exit 2) a plan whose PLAN.json names another model unless accepted; warn when it names an
    earlier state of this one (a trial ran one vehicle's plan on another without a word)."""
    other, older = planfile.origin_problem(v, plan_path)
    if other is not None and not accept_other_model:
        raise UserError(f"{other}; nothing was sent (--accept-other-model runs it anyway)")
    for warning in (other, older):
        if warning is not None:
            print(f"warning: {warning}", file=sys.stderr)


def _check_plan(
    v: Any,
    path: Path,
    problem: str | None,
    *,
    remake: str,
    outside: bool,
    log: Path,
    accept: bool,
    worst: Callable[[], str] | None = None,
) -> None:
    """Refuse (exit 2, before the port is opened) a plan made for another model (unless `accept`), a plan
    with a `problem` (outside the envelope or the limits; unless accepted on purpose, then with a
    warning and the `worst` rows), and a log (LOG.csv, LOG.json) that cannot be written."""
    _check_origin(v, path, accept_other_model=accept)
    for target in (log, log.with_suffix(".json")):
        outputs.check_target(target)
    if problem and not outside:
        raise UserError(
            f"{path}: {problem}; nothing was sent (make the plan with `{remake}`, or pass "
            "--outside-envelope to run it anyway)"
        )
    if problem:
        detail = f"; {worst()}" if worst is not None else ""
        print(f"warning: {path}: {problem}{detail}; running it anyway (--outside-envelope)", file=sys.stderr)


def _ended(exc: BaseException, counters: session.Counters) -> str:
    """How a run that did not complete ended, for LOG.json's `ended`."""
    if isinstance(exc, session.BenchFailed):
        return f"fault: {counters.faults[-1]}" if counters.faults else f"error: {exc}"
    if isinstance(exc, Interrupted):
        if exc.signum == signal.SIGINT:
            return "halted by the operator (SIGINT)"
        return f"stopped by signal {signal.Signals(exc.signum).name}"
    return f"error: {type(exc).__name__}: {exc}"


def _controller(ident: messages.Identify) -> dict[str, Any]:
    """What the controller said of itself, for LOG.json."""
    return {
        "fingerprint": f"0x{ident.fingerprint:08X}",
        "protocol": ident.version,
        "period_us": ident.period_us,
        "fifo_depth": ident.fifo_depth,
        "watchdog_ms": ident.watchdog_ms,
    }


def _finish(
    link: session.Link,
    log: LogWriter | LiftLogWriter | None,
    progress: Progress,
    counters: session.Counters,
    *,
    meta: dict[str, Any],
    reason: str,
) -> None:
    """Every way out: halt the motors, close the log and write LOG.json (when the run got as far as opening
    them: the controller answered and matched), close the port."""
    _halt(link)
    if log is not None:
        log.close()
        progress.show(counters, link.drops.total(), final=True)
        meta.update(_summary(counters, link, reason, log.rows))
        outputs.write_file(log.path.with_suffix(".json"), json.dumps(meta, indent=2) + "\n")
    link.port.close()


def _halt(link: session.Link) -> None:
    """HALT twice (a corrupted byte must not keep the motors running); errors of a dead port ignored."""
    for _ in range(2):
        try:
            link.send(messages.Halt())
            link.port.flush()
        except Exception:  # noqa: BLE001 - the port may be gone; there is nothing else to try
            return


def _summary(c: session.Counters, link: session.Link, reason: str, rows: int) -> dict[str, Any]:
    d = link.drops
    return {
        "finished": _now(),
        "ended": reason,
        "samples": c.samples,
        "log_rows": rows,
        "missing_samples": c.missing,
        "setpoints_sent": c.sent,
        "faults": c.faults,
        "drops": {"crc": d.crc, "length": d.length, "unknown_type": d.unknown_type, "out_of_order": d.out_of_order},
    }


def _now() -> str:
    return datetime.now(UTC).isoformat(timespec="seconds")
