"""Emulated-board benchmark: `kinetab bench simulate --board` (the reference firmware on qemu-system-arm,
the simulated drive on its second UART) at a range of control periods. Measures the time to the port and
to the first IDENTIFY, the sustained sample rate and whether a run completes with zero drops, the ticks
the firmware ran late waiting for the drive, host CPU per second of run (kinetab, qemu and `bench run`),
and the firmware's flash, RAM and worst stack. Writes tests/benchmarks/board_results.md and .json.

python tests/benchmarks/bench_board.py          # about three minutes; needs gcc-arm-none-eabi, qemu-system-arm
"""

from __future__ import annotations

import json
import re
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from kinetab.hil import framing, messages  # noqa: E402

from tests.helpers import invented_feasible, to_toml  # noqa: E402

KINETAB = [sys.executable, "-m", "kinetab.generator"]
HERE = Path(__file__).parent
BOARD = "mps2-an386"
PERIODS_MS = (100, 50, 40, 30, 25, 20, 15, 10, 5, 1)
SECONDS = 10


def _cpu() -> float:
    """CPU seconds of every child process waited for so far (their children included)."""
    r = resource.getrusage(resource.RUSAGE_CHILDREN)
    return r.ru_utime + r.ru_stime


def _first_identify(port: str) -> float:
    """Seconds until the firmware answers HELLO."""
    import serial

    start = time.monotonic()
    with serial.Serial(port, timeout=0.05) as link:
        reader = framing.FrameReader()
        while time.monotonic() - start < 60:
            link.write(framing.frame(messages.encode(messages.Hello())))
            for payload in reader.feed(link.read(256)):
                if isinstance(messages.decode(payload), messages.Identify):
                    return time.monotonic() - start
    return float("nan")


def one_period(model: Path, period_ms: float, tmp: Path) -> dict[str, object]:
    """Start the board at a period, run a SECONDS-long plan, stop it; what was measured."""
    plan, log = tmp / f"plan_{period_ms}.csv", tmp / f"log_{period_ms}.csv"
    period = f"{period_ms} ms"
    subprocess.run([*KINETAB, "bench", "plan", str(model), "-o", str(plan), "--duration", str(SECONDS),
                    "--period", period], check=True, capture_output=True)  # fmt: skip
    cpu0, t0 = _cpu(), time.monotonic()
    sim = subprocess.Popen([*KINETAB, "bench", "simulate", str(model), "--board", BOARD, "--period", period],
                           stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)  # fmt: skip
    assert sim.stdout is not None and sim.stderr is not None
    port = sim.stdout.readline().strip()
    to_port = time.monotonic() - t0
    to_identify = to_port + _first_identify(port)
    run_start = time.monotonic()
    run = subprocess.run([*KINETAB, "bench", "run", str(model), "--port", port, "--plan", str(plan), "--log",
                          str(log), "--yes"], capture_output=True, text=True)  # fmt: skip
    run_s = time.monotonic() - run_start
    sim.terminate()
    _, err = sim.communicate(timeout=60)
    cpu = _cpu() - cpu0
    meta = json.loads(log.with_suffix(".json").read_text()) if log.with_suffix(".json").exists() else {}
    health = re.search(r"(\d+) control ticks, (\d+) of them late.*worst stack (\d+) of", err)
    sizes = re.search(r"flash (\d+) bytes, RAM (\d+) bytes", err)
    return {
        "period_ms": period_ms,
        "ended": meta.get("ended", run.stderr.strip().splitlines()[-1] if run.stderr.strip() else "?"),
        "samples": meta.get("samples", 0),
        "rows": round(SECONDS * 1000 / period_ms),
        "drops": sum(meta.get("drops", {}).values()),
        "missing": meta.get("missing_samples", 0),
        "samples_per_s": meta.get("samples", 0) / run_s,
        "run_s": run_s,
        "late_ticks": int(health.group(2)) if health else None,
        "ticks": int(health.group(1)) if health else None,
        "stack_bytes": int(health.group(3)) if health else None,
        "flash_bytes": int(sizes.group(1)) if sizes else None,
        "ram_bytes": int(sizes.group(2)) if sizes else None,
        "to_port_s": to_port,
        "to_identify_s": to_identify,
        "host_cpu_per_s": cpu / (time.monotonic() - t0),
    }


def main() -> None:
    results = []
    with tempfile.TemporaryDirectory() as tmp_text:
        tmp = Path(tmp_text)
        doc, _ = invented_feasible(1803, "tugboat")  # an invented vehicle, as in the tests
        model = tmp / "tugboat.toml"
        model.write_text(to_toml(doc), encoding="utf-8")
        for period_ms in PERIODS_MS:
            results.append(one_period(model, period_ms, tmp))
            print(results[-1], flush=True)
    (HERE / "board_results.json").write_text(json.dumps(results, indent=1) + "\n")
    clean = [r for r in results if r["ended"] == "completed" and r["drops"] == 0 and r["missing"] == 0]
    fastest = min((r["period_ms"] for r in clean), default=None)
    lines = [
        f"# Emulated-board benchmark ({BOARD} on qemu-system-arm, invented vehicle, {SECONDS}-s plans)",
        "",
        "| period | plan rate | run | samples | drops | missing | sustained | late ticks | host CPU per s |",
        "|---|---|---|---|---|---|---|---|---|",
    ]
    for r in results:
        lines.append(
            f"| {r['period_ms']} ms | {1000 / r['period_ms']:.4g}/s | {r['ended']} | {r['samples']}/{r['rows']} | "
            f"{r['drops']} | {r['missing']} | {r['samples_per_s']:.1f}/s | {r['late_ticks']} | "
            f"{r['host_cpu_per_s']:.2f} s |"
        )
    first = results[0]
    lines += [
        "",
        f"Fastest period with a completed run, zero drops and zero missing samples: {fastest} ms.",
        f"Firmware: flash {first['flash_bytes']} bytes, RAM {first['ram_bytes']} bytes static + 8192 stack; "
        f"worst stack measured {max(r['stack_bytes'] or 0 for r in results)} bytes.",
        f"Start: port printed after {statistics.median([r['to_port_s'] for r in results]):.2f} s (median; build and "
        f"emulator start), first IDENTIFY after {statistics.median([r['to_identify_s'] for r in results]):.2f} s.",
        "",
        "The emulator hands host bytes to a CMSDK UART one per turn of its main loop, so the host-to-board",
        "direction carries a few kB/s; a setpoint frame is about 37 bytes and each drive reading 21.",
    ]
    (HERE / "board_results.md").write_text("\n".join(lines) + "\n")
    print("\n".join(lines))


if __name__ == "__main__":
    main()
