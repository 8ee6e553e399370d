"""The bench end to end without hardware: `bench plan`, `bench simulate` on a pseudo-terminal and
`bench run`, as real processes, with the faults a bench sees."""

from __future__ import annotations

import csv
import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from kinetab.generator import emulate, interface
from kinetab.hil import messages, planfile, session

from tests.csteps import needs_gcc
from tests.firmware_fixtures import demo_firmware
from tests.helpers import DEMO_PATH, demo_doc, write_model

ROOT = Path(__file__).resolve().parents[1]
KINETAB = [sys.executable, "-m", "kinetab.generator"]
pytestmark = [pytest.mark.slow, needs_gcc]


ROOMY = {"--fifo-depth": "1024", "--watchdog": "1 s"}
"""What a simulated controller gets unless a test names its own (README's loop uses the same): a host
starved by a loaded machine outlasted the defaults' 64 ms of FIFO and 100 ms of watchdog in CI runs
with both cores kept busy ('fifo dry', then 'watchdog'), which the tests that are not about them
should survive."""


class Sim:
    """A `bench simulate` process; `port` is the first line it prints. `roomy`: ROOMY for what `extra`
    does not set (False: the controller's defaults, for the tests about them)."""

    def __init__(self, model: Path, *extra: str, roomy: bool = True) -> None:
        room = [x for key, value in ROOMY.items() if roomy and key not in extra for x in (key, value)]
        self.proc = subprocess.Popen(
            [*KINETAB, "bench", "simulate", str(model), *extra, *room],
            cwd=ROOT,
            stdout=subprocess.PIPE,
            stderr=subprocess.PIPE,
            text=True,
        )
        assert self.proc.stdout is not None
        self.port = self.proc.stdout.readline().strip()
        assert self.port.startswith("/dev/"), self.proc.stderr.read() if self.proc.stderr else ""

    def finish(self, timeout: float = 10) -> tuple[int, str]:
        try:
            _, err = self.proc.communicate(timeout=timeout)
        except subprocess.TimeoutExpired:
            self.proc.kill()
            _, err = self.proc.communicate()
        return self.proc.returncode, err


def _plan(tmp_path: Path, seconds: float, period: str = "1 ms") -> Path:
    path = tmp_path / "plan.csv"
    subprocess.run(
        [*KINETAB, "bench", "plan", str(DEMO_PATH), "-o", str(path), "--duration", str(seconds), "--period", period],
        cwd=ROOT,
        check=True,
        capture_output=True,
    )
    return path


def _run(port: str, plan: Path, log: Path, model: Path = DEMO_PATH, **kw) -> subprocess.Popen:
    return subprocess.Popen(
        [*KINETAB, "bench", "run", str(model), "--port", port, "--plan", str(plan), "--log", str(log), "--yes"],
        cwd=ROOT,
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
        **kw,
    )


def _log_rows(log: Path) -> list[dict[str, str]]:
    with log.open() as fh:
        return list(csv.DictReader(fh))


def _wait_for_rows(log: Path, rows: int, run: subprocess.Popen, *, limit_s: float = 300) -> None:
    """Poll the log (written and flushed row by row) until it holds `rows` data rows: an event, not a
    wall-clock amount, so a loaded machine only makes the wait longer. Fails clearly if the run ends
    first or nothing comes within `limit_s` (a generous bound: the run would have hung)."""
    deadline = time.monotonic() + limit_s
    while time.monotonic() < deadline:
        if log.exists() and log.read_bytes().count(b"\n") > rows:  # the header line plus `rows`
            return
        if run.poll() is not None:
            pytest.fail(f"bench run ended (exit {run.returncode}) before its log held {rows} rows")
        time.sleep(0.05)
    pytest.fail(f"the log held fewer than {rows} rows after {limit_s:.0f} s")


def test_sixty_seconds_at_one_kilohertz(tmp_path):
    """Every setpoint answered exactly once and in order, no drops, no underrun, and the feed-forward
    current the C computed equals the Python emulation on every row."""
    plan, log = _plan(tmp_path, 60), tmp_path / "log.csv"
    sim = Sim(DEMO_PATH, "--noise", "0.02")
    run = _run(sim.port, plan, log)
    _, err = run.communicate(timeout=600)  # 60 s of plan; the bound only catches a hang
    assert run.returncode == 0, err
    code, sim_err = sim.finish()
    assert code == 0 and "halted: end" in sim_err
    meta = json.loads(log.with_suffix(".json").read_text())
    assert meta["ended"] == "completed" and meta["samples"] == 60_000 == meta["log_rows"]
    assert meta["drops"] == {"crc": 0, "length": 0, "unknown_type": 0, "out_of_order": 0}
    assert meta["missing_samples"] == 0 and meta["faults"] == []
    rows = _log_rows(log)
    assert [int(r["seq"]) for r in rows] == list(range(1, 60_001))
    fw = demo_firmware()
    si = {planfile.SI_NAME[c]: np.array([float(r[c]) for r in rows]) for c in planfile.PLAN_COLUMNS[1:]}
    steps = interface.to_steps(fw.vehicle, interface.FF_IN, si)
    want = emulate.run(fw.design.feedforward, fw.tables, steps)["current"]  # current steps
    amps = np.array([[float(r["ff_current_right"]), float(r["ff_current_left"])] for r in rows])
    got = np.round(amps / fw.vehicle.firmware.current_lsb_a).astype(np.int64)  # the log holds steps x step
    assert np.array_equal(got, want) and np.abs(want).max() > 1000


def test_controller_killed_mid_run(tmp_path):
    plan, log = _plan(tmp_path, 20), tmp_path / "log.csv"
    sim = Sim(DEMO_PATH)
    run = _run(sim.port, plan, log)
    _wait_for_rows(log, 1500, run)  # well into the run, whatever the machine's load
    sim.proc.kill()
    killed = time.monotonic()
    _, err = run.communicate(timeout=60)
    waited = time.monotonic() - killed
    assert run.returncode == 1, err
    # the host gives up 2 s after the last frame (PROTOCOL.md); 10 s leaves room for a loaded machine
    assert waited < 10, f"bench run took {waited:.1f} s to notice the controller was gone"
    # regression: a port that reported readiness and then gave no data ended in a traceback
    assert "Traceback" not in err and sim.port in err, err
    meta = json.loads(log.with_suffix(".json").read_text())
    assert 1000 < meta["samples"] == len(_log_rows(log)) < 20_000


@pytest.mark.parametrize(("depth", "period_ms"), [(512, 1), (4096, 1), (4096, 2)])
def test_a_deep_fifo_fills_and_runs_even_with_corruption(depth, period_ms, tmp_path):
    """Regressions: with a FIFO deeper than about 128 the host went back to the first setpoint every 5 ms
    while the prefill (half the FIFO) was still on its way, so the controller never started. At 2 ms the
    host sent the whole plan ahead, and each lost frame (the controller drops every later one) cost
    thousands of resent frames: the FIFO ran dry, or the host held back past the controller's watchdog
    (session.WINDOW, and waits capped at half the watchdog)."""
    rows = 6000 // period_ms
    plan, log = _plan(tmp_path, 6, f"{period_ms} ms"), tmp_path / "log.csv"
    sim = Sim(  # the controller's own watchdog: how the host paces itself against it is what this tests
        DEMO_PATH, "--fifo-depth", str(depth), "--corrupt-rate", "0.0003", "--period", f"{period_ms} ms", roomy=False
    )
    run = _run(sim.port, plan, log)
    _, err = run.communicate(timeout=60)
    assert run.returncode == 0, err + sim.finish()[1]
    meta = json.loads(log.with_suffix(".json").read_text())
    assert meta["ended"] == "completed" and meta["samples"] + meta["missing_samples"] == rows
    assert meta["controller"]["fifo_depth"] == depth


def test_garbage_and_corruption_both_ways_are_counted_and_the_run_completes(tmp_path):
    plan, log = _plan(tmp_path, 10), tmp_path / "log.csv"
    # the default FIFO: with 1024 slots, corruption and garbage the host's recovery let it run dry at once
    # (a deep FIFO's recovery under garbage deserves its own look); a watchdog of 1 s for a loaded machine
    sim = Sim(DEMO_PATH, "--corrupt-rate", "0.0003", "--garbage-every", "0.5", "--watchdog", "1 s", roomy=False)
    run = _run(sim.port, plan, log)
    _, err = run.communicate(timeout=60)
    assert run.returncode == 0, err + sim.finish()[1]  # the controller's side too, should it have halted
    meta = json.loads(log.with_suffix(".json").read_text())
    assert sum(meta["drops"].values()) > 0 and meta["ended"] == "completed"
    assert meta["samples"] + meta["missing_samples"] == 10_000
    _, sim_err = sim.finish()
    assert "halted: end" in sim_err and "dropped 0 crc" not in sim_err  # the controller counted its drops


@pytest.mark.parametrize("watchdog,ms", [(None, 100), ("250 ms", 250)])
def test_host_silent_the_controller_halts_on_its_watchdog(tmp_path, watchdog, ms):
    import serial

    sim = Sim(DEMO_PATH, *(["--watchdog", watchdog] if watchdog else []), roomy=False)
    port = serial.serial_for_url(sim.port, timeout=0.1)
    link = session.Link(port)
    ident = session.handshake(link, sim.port)
    link.send(messages.Arm(1, 32))
    link.send_many([messages.Setpoint(k, 0, (0,) * messages.N_IN) for k in range(1, 6)])  # then silence
    deadline, faults = time.monotonic() + 3, []
    while time.monotonic() < deadline and not faults:
        faults = [m for m in link.receive(0.1) if isinstance(m, messages.Fault)]
    port.close()
    # one fault, or it and its repeats (one watchdog time apart) should this process have stalled
    assert set(faults) == {messages.Fault(messages.FaultCode.WATCHDOG, 5)} and ident.watchdog_ms == ms
    code, err = sim.finish()
    assert code == 1 and "halted: watchdog" in err


def test_fingerprint_mismatch_is_refused_before_arming(tmp_path):
    doc = demo_doc()
    doc["friction"]["coulomb"] = "4.4 N"
    other = write_model(tmp_path, doc, "other.toml")
    plan, log = _plan(tmp_path, 5), tmp_path / "log.csv"
    sim = Sim(other)
    run = _run(sim.port, plan, log)
    _, err = run.communicate(timeout=30)
    assert run.returncode == 1 and "fingerprint mismatch" in err and f"0x{demo_firmware().fingerprint:08X}" in err
    assert sim.proc.poll() is None  # never armed, never halted: still waiting
    sim.proc.kill()
    # a trial found a header-only log and its side file left behind: a refused controller leaves nothing
    assert not log.exists() and not log.with_suffix(".json").exists()


def test_the_port_file_appears_once_the_port_is_open_and_names_it(tmp_path):
    """`bench simulate --port-file F` writes the port's path to F, whole, once the port is open, so a
    script can wait for F (README's bench loop does); a port file that cannot be written (a folder) is one
    line and exit 2 before anything is compiled."""
    port_file = tmp_path / "sim.port"
    sim = Sim(DEMO_PATH, "--port-file", str(port_file))
    try:
        deadline = time.monotonic() + 120  # the simulator prints the port first, then writes the file
        while not port_file.exists() and sim.proc.poll() is None and time.monotonic() < deadline:
            time.sleep(0.05)
        assert port_file.read_text() == sim.port + "\n"
        fd = os.open(sim.port, os.O_RDWR | os.O_NOCTTY | os.O_NONBLOCK)
        assert os.isatty(fd)  # the path names the open pseudo-terminal
        os.close(fd)
    finally:
        sim.proc.kill()
        sim.proc.communicate()
    bad = subprocess.run(
        [*KINETAB, "bench", "simulate", str(DEMO_PATH), "--port-file", str(tmp_path)],  # a folder
        cwd=ROOT,
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert bad.returncode == 2 and bad.stdout == "" and len(bad.stderr.strip().splitlines()) == 1, bad.stderr
    assert "--port-file" in bad.stderr and str(tmp_path) in bad.stderr and "directory" in bad.stderr


def test_a_plan_at_another_period_is_refused_before_arming(tmp_path):
    """A plan with a row every 2 ms on a controller that ticks every 1 ms would run at half speed: refused
    after the handshake, naming both periods and the command that makes a fitting plan."""
    path = tmp_path / "plan.csv"
    subprocess.run(
        [*KINETAB, "bench", "plan", str(DEMO_PATH), "-o", str(path), "--duration", "5", "--period", "2"],
        cwd=ROOT,
        check=True,
        capture_output=True,
    )
    sim, log = Sim(DEMO_PATH), tmp_path / "log.csv"
    run = _run(sim.port, path, log)
    _, err = run.communicate(timeout=30)
    assert run.returncode == 1 and "ticks every 1 ms" in err and "row every 2 ms" in err and "--period 1" in err
    assert "kinetab bench simulate --period 2" in err
    assert sim.proc.poll() is None  # never armed, never halted: still waiting
    sim.proc.kill()
    # a trial found a header-only log and its side file left behind: a refused controller leaves nothing
    assert not log.exists() and not log.with_suffix(".json").exists()


def test_nothing_answers(tmp_path):
    plan, log = _plan(tmp_path, 5), tmp_path / "log.csv"
    master, slave = os.openpty()
    try:
        run = _run(os.ttyname(slave), plan, log)
        _, err = run.communicate(timeout=30)
    finally:
        os.close(master)
        os.close(slave)
    assert run.returncode == 1 and "nothing answers" in err
    run = _run("loop://", plan, log)  # our own bytes come back: still nobody answers
    _, err = run.communicate(timeout=30)
    assert run.returncode == 1 and "nothing answers" in err
    assert not log.exists() and not log.with_suffix(".json").exists()


@pytest.mark.parametrize("sig,code", [(signal.SIGINT, 130), (signal.SIGTERM, 143)])
def test_interrupted_run_halts_and_keeps_the_log(tmp_path, sig, code):
    plan, log = _plan(tmp_path, 20), tmp_path / "log.csv"
    sim = Sim(DEMO_PATH)
    run = _run(sim.port, plan, log)
    _wait_for_rows(log, 600, run)  # well into the run, however loaded the machine
    run.send_signal(sig)
    _, err = run.communicate(timeout=30)
    assert run.returncode == code, err
    sim_code, sim_err = sim.finish()
    assert sim_code == 0 and "halted: halt" in sim_err  # the host's HALT reached the controller
    meta = json.loads(log.with_suffix(".json").read_text())
    ended = "halted by the operator (SIGINT)" if sig == signal.SIGINT else "stopped by signal SIGTERM"
    assert meta["ended"] == ended and meta["faults"] == [] and meta["samples"] == len(_log_rows(log)) > 500


def _truth(tmp_path: Path) -> Path:
    doc = demo_doc()
    doc["body"]["mass"] = f"{38 * 1.15} kg"
    doc["body"]["gyration_radius"] = f"{230 * 1.10} mm"
    doc["friction"]["coulomb"] = f"{4.5 * 0.8} N"
    doc["friction"]["viscous"] = f"{3 * 1.3} N*s/m"
    return write_model(tmp_path, doc, "truth.toml")


def _bench_log(tmp_path: Path, model_path: Path, truth: Path, rig: str, name: str, seconds: float = 30) -> Path:
    plan, log = tmp_path / f"plan_{name}.csv", tmp_path / f"log_{name}.csv"
    subprocess.run(
        [*KINETAB, "bench", "plan", str(model_path), "-o", str(plan), "--duration", str(seconds), "--rig", rig],
        cwd=ROOT,
        check=True,
        capture_output=True,
    )
    # a deep FIFO and a long watchdog (1 s): this test is about the fit, and a loaded CI machine can stall
    # the host past the defaults (seen: 'fifo dry' after 64 ms with 64 slots, 'watchdog' after 100 ms)
    sim = Sim(
        model_path,
        "--truth",
        str(truth),
        "--noise",
        "20 mA",
        "--rig",
        rig,
        "--encoder-counts",
        "4096",
        "--fifo-depth",
        "1024",
        "--watchdog",
        "1 s",
    )
    run = subprocess.run(
        [
            *KINETAB,
            "bench",
            "run",
            str(model_path),
            "--port",
            sim.port,
            "--plan",
            str(plan),
            "--log",
            str(log),
            "--rig",
            rig,
            "--yes",
        ],
        cwd=ROOT,
        capture_output=True,
        text=True,
    )
    assert run.returncode == 0, run.stderr
    sim.finish()
    return log


def test_plan_run_fit_recovers_the_truth_and_compare_agrees(tmp_path):
    """Truth: body mass +15 %, gyration radius +10 %, Coulomb -20 %, viscous +30 %, with 20 mA current
    noise and a 4096-count encoder. A wheels-up and an on-floor run; the fit recovers each within 3 %,
    writes the model keeping every comment and the user's units; a new run with the fitted model
    compares within 1.2 x the noise floor, while the first model's log fails compare."""
    from concurrent.futures import ThreadPoolExecutor

    from kinetab.generator import model

    user = tmp_path / "cart.toml"
    user.write_text(DEMO_PATH.read_text())
    truth = _truth(tmp_path)
    with ThreadPoolExecutor(2) as pool:
        up = pool.submit(_bench_log, tmp_path, user, truth, "wheels-up", "up")
        floor = pool.submit(_bench_log, tmp_path, user, truth, "on-floor", "floor")
        logs = [up.result(), floor.result()]
    wrong = subprocess.run(
        [*KINETAB, "bench", "compare", str(user), str(logs[1])], cwd=ROOT, capture_output=True, text=True
    )
    assert wrong.returncode == 1 and "FAIL" in wrong.stdout
    fitted = tmp_path / "fitted.toml"
    done = subprocess.run(
        [*KINETAB, "bench", "fit", str(user), *map(str, logs), "--write", str(fitted)],
        cwd=ROOT,
        capture_output=True,
        text=True,
    )
    assert done.returncode == 0, done.stderr
    t, f = model.load(truth), model.load(fitted)
    for got, want in (
        (f.body.mass_kg, t.body.mass_kg),
        (f.body.gyration_radius_m, t.body.gyration_radius_m),
        (f.friction.coulomb_n, t.friction.coulomb_n),
        (f.friction.viscous_ns_per_m, t.friction.viscous_ns_per_m),
    ):
        assert got == pytest.approx(want, rel=0.03)
    old, new = user.read_text().splitlines(), fitted.read_text().splitlines()
    assert [line for line in old if line.lstrip().startswith("#")] == [
        line for line in new if line.lstrip().startswith("#")
    ]
    assert (
        'gyration_radius = "2' in fitted.read_text() and ' mm"' in fitted.read_text().split("gyration_radius")[1][:20]
    )
    again = _bench_log(tmp_path, fitted, truth, "on-floor", "again")
    done = subprocess.run(
        [*KINETAB, "bench", "compare", str(fitted), str(again), "--json"], cwd=ROOT, capture_output=True, text=True
    )
    doc = json.loads(done.stdout)
    assert done.returncode == 0 and doc["passed"]
    assert max(doc["wheels"]["right"]["rms"], doc["wheels"]["left"]["rms"]) <= 1.2 * doc["noise_floor_a"]


def test_the_lift_over_the_link_recovers_a_changed_truth(tmp_path):
    """An invented vehicle with an invented lift (tests/liftsim.py): bench plan --axis lift at two loads,
    bench simulate with a changed truth, bench run over the real link C (protocol 3): every lift sample's
    feed-forward equals the emulation of the lift's program; compare fails the model and passes the truth;
    bench fit --write recovers every fitted parameter within 4 standard errors of the truth, and the
    written model passes compare and builds."""
    from kinetab.generator import model as model_file
    from kinetab.generator import synthesis

    from tests.helpers import to_toml
    from tests.liftsim import changed_truth, feasible_lift_doc

    doc = feasible_lift_doc(31, buildable=True)
    truth_doc = changed_truth(doc, np.random.default_rng(31))
    model, truth = tmp_path / "hoist.toml", tmp_path / "truth.toml"
    model.write_text(to_toml(doc))
    truth.write_text(to_toml(truth_doc))
    v = model_file.load(str(model))
    assert v.lift is not None
    logs = []
    for k, fraction in enumerate((0.1, 0.9)):
        plan, log = tmp_path / f"lift{k}.csv", tmp_path / f"log{k}.csv"
        load = f"{fraction * v.lift.payload_max_kg} kg"
        command = [*KINETAB, "bench", "plan", str(model), "--axis", "lift", "--lift-payload", load, "-o", str(plan)]
        made = subprocess.run(command, cwd=ROOT, capture_output=True, text=True)
        assert made.returncode == 0, made.stderr
        sim = Sim(model, "--truth", str(truth), "--noise", "0.03")
        run = _run(sim.port, plan, log, model=model)
        _, err = run.communicate(timeout=900)
        assert run.returncode == 0, err
        assert sim.finish()[0] == 0
        logs.append(log)
    rows = _log_rows(logs[1])
    fw = synthesis.synthesise(v).lift
    assert fw is not None
    si = {"speed_mps": [], "accel_mps2": [], "payload_kg": []}
    for r in rows:
        for name, column in zip(si, ("lift_speed", "lift_accel", "lift_payload")):
            si[name].append(float(r[column]))
    steps = interface.to_steps(v, interface.LIFT_IN, {k: np.array(x) for k, x in si.items()})
    want = emulate.run(fw.program, fw.tables, steps)["current"][:, 0]
    got = np.round(np.array([float(r["ff_lift_current"]) for r in rows]) / v.lift.current_lsb_a).astype(np.int64)
    assert np.array_equal(got, want) and np.abs(want).max() > 100
    compare = lambda m, log, *x: subprocess.run([*KINETAB, "bench", "compare", str(m), str(log), *x],  # noqa: E731
                                                cwd=ROOT, capture_output=True, text=True).returncode  # fmt: skip
    assert compare(model, logs[0]) == 1 and compare(truth, logs[0], "--accept-other-model") == 0
    fitted = tmp_path / "fitted.toml"
    fit = subprocess.run([*KINETAB, "bench", "fit", str(model), *map(str, logs), "--write", str(fitted), "--json"],
                         cwd=ROOT, capture_output=True, text=True)  # fmt: skip
    assert fit.returncode == 0, fit.stderr
    true_lift, report = model_file.load(str(truth)).lift, json.loads(fit.stdout)
    for e in report["estimates"]:
        true = getattr(true_lift, e["name"] if e["name"] in ("efficiency", "backdrive_efficiency") else {
            "carriage_mass": "carriage_mass_kg", "assist_force": "assist_force_n", "coulomb": "coulomb_n",
            "viscous": "viscous_ns_per_m"}[e["name"]])  # fmt: skip
        assert e["written"] and abs(e["value"] - true) <= 4 * e["sigma"], e
    assert compare(fitted, logs[1], "--accept-other-model") == 0
    build = [*KINETAB, "build", str(fitted), "-o", str(tmp_path / "fw")]
    built = subprocess.run(build, cwd=ROOT, capture_output=True, text=True)
    if report["written_envelope_problems"]:  # the truth asks more of the lift than its limits: said, and refused
        assert built.returncode == 1 and "lift" in built.stderr, built.stderr
    else:
        assert built.returncode == 0, built.stderr
