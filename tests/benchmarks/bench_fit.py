"""Identification benchmark: wall time of the whole `kinetab bench fit` (a fresh process: imports, log
reading, the fit, the report) for one 60-s log at 1 kHz and for a designed campaign of 60-s logs,
against the goals (<= 1.5 s and <= 5 s); optionally the same for another checkout (the code before a
change) on the same logs; and each parameter's estimate, error and +-2 sigma against the truth.

The vehicle is drawn at random within plausible ranges (tests.test_identify.identifiable_vehicle), the
truth is 10-30 % off in ten parameters, and the logs come from the in-process plant (speed loop,
saturating drive, 1 % current noise, 4096-count encoder).

python tests/benchmarks/bench_fit.py [--before PATH_TO_OTHER_CHECKOUT]    # a few minutes
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from kinetab.hil import campaign, identify  # noqa: E402
from kinetab.hil import fitparams as fp  # noqa: E402

from tests.benchsim import run_plan, write_log  # noqa: E402
from tests.helpers import to_toml  # noqa: E402
from tests.test_identify import changed, identifiable_model  # noqa: E402

HERE = Path(__file__).parent
SECONDS = 60.0


def _logs(folder: Path) -> tuple[Path, list[Path], list[Path], object, object]:
    """Model file, the campaign's logs, the one-log case, the truth's coordinates and the fit of the campaign."""
    from kinetab.generator import model

    doc, v, rng, design = identifiable_model(41, duration_s=SECONDS)
    doc["name"] = "courier"
    path = folder / "courier.toml"
    path.write_text(to_toml(doc), encoding="utf-8")
    v = model.load(path)
    truth, x_true = changed(v, rng, fp.NAMES[:10])
    logs = []
    for k, c in enumerate(design.logs, start=1):
        plan = campaign.plan_for(v, c, duration_s=SECONDS, period_s=0.001)
        (log,) = run_plan(
            v, truth, plan, rig=c.rig, feedforward=c.rig == "on-floor", noise_a=0.01 * v.drive.current_limit_a
        )
        logs.append(write_log(log, folder / f"{k}-{c.slug()}-log.csv", v))
    one = [p for p in logs if "floor-0kg-log" in p.name][:1]
    return path, logs, one, x_true, v


def _time(cmd: list[str], cwd: Path, runs: int = 3) -> float:
    times = []
    for _ in range(runs):
        t = time.perf_counter()
        subprocess.run(cmd, cwd=cwd, check=True, capture_output=True)
        times.append(time.perf_counter() - t)
    return statistics.median(times)


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--before", help="another checkout to time on the same logs (needs --write)")
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        path, logs, one, x_true, v = _logs(folder)
        fit = [sys.executable, "-m", "kinetab.generator", "bench", "fit", str(path)]
        results: dict[str, object] = {
            "logs": [p.name for p in logs],
            "fit_s_one_log": _time([*fit, *map(str, one)], ROOT),
            "fit_s_campaign": _time([*fit, *map(str, logs)], ROOT),
        }
        if args.before:
            old = [*fit, "--write", str(folder / "old.toml")]
            env = {**os.environ, "PYTHONPATH": args.before}
            results["before_s_one_log"] = _time_env([*old, *map(str, one)], Path(args.before), env)
            results["before_s_campaign"] = _time_env([*old, *map(str, logs)], Path(args.before), env)
        from kinetab.hil import benchdata

        result = identify.fit(v, [benchdata.read_log(p) for p in logs])
        results["estimates"] = {
            n: {"truth": float(x_true[fp.INDEX[n]]), "estimate": e.estimate, "two_sigma": 2 * e.se}
            for n, e in result.estimates.items()
            if n in fp.INDEX
        }
        results["held"] = [list(h.names) for h in result.held]
    (HERE / "fit_results.json").write_text(json.dumps(results, indent=2) + "\n")
    (HERE / "fit_results.md").write_text(_markdown(results))
    print(_markdown(results))


def _time_env(cmd: list[str], cwd: Path, env: dict[str, str], runs: int = 3) -> float:
    times = []
    for _ in range(runs):
        t = time.perf_counter()
        subprocess.run(cmd, cwd=cwd, env=env, check=True, capture_output=True)
        times.append(time.perf_counter() - t)
    return statistics.median(times)


def _markdown(r: dict) -> str:
    lines = [
        "# Identification benchmark (a random vehicle; logs from the in-process plant)",
        "",
        f"Logs: {', '.join(r['logs'])} (60 s at 1 kHz each).",
        "",
        "| `bench fit`, whole command, median of 3 | now | goal | before |",
        "|---|---|---|---|",
        f"| one 60-s log | {r['fit_s_one_log']:.2f} s | 1.5 s | {_s(r.get('before_s_one_log'))} |",
        f"| the campaign ({len(r['logs'])} logs) | {r['fit_s_campaign']:.2f} s | 5 s "
        f"| {_s(r.get('before_s_campaign'))} |",
        "",
        "| parameter | truth | estimate | error | +-2 sigma |",
        "|---|---|---|---|---|",
    ]
    for n, e in r["estimates"].items():
        err = 100 * (e["estimate"] - e["truth"]) / e["truth"] if e["truth"] else float("nan")
        lines.append(f"| {n} | {e['truth']:.6g} | {e['estimate']:.6g} | {err:+.2f} % | {e['two_sigma']:.3g} |")
    lines.append("")
    lines.append(f"Held: {r['held'] or 'nothing'}.")
    return "\n".join(lines) + "\n"


def _s(x: object) -> str:
    return f"{x:.2f} s" if isinstance(x, float) else "-"


if __name__ == "__main__":
    main()
