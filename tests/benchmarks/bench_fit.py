"""Identification benchmark: fit time for a 60-s log at 1 kHz and for ten such logs jointly; parameter
error against the truth as the current noise grows; condition number of the default plan and of
--for-fit. Logs come from the float model (tests/test_identify.synthetic_log), so the numbers isolate
the fit. Writes tests/benchmarks/fit_results.md and .json.

python tests/benchmarks/bench_fit.py          # about two minutes
"""

from __future__ import annotations

import json
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from kinetab.generator import model  # noqa: E402
from kinetab.hil import excite, identify, planner  # noqa: E402

from tests.helpers import DEMO_PATH  # noqa: E402
from tests.test_identify import _changed, synthetic_log  # noqa: E402

HERE = Path(__file__).parent
NAMES = ("body.mass", "body.yaw_inertia", "friction.coulomb", "friction.viscous")


def _errors(truth, result) -> dict[str, float]:
    out = {}
    for name in NAMES:
        true = next(p for p in identify.PARAMS if p.name == name).get(truth)
        out[name] = 100 * (result.estimates[name][1] - true) / true if name in result.estimates else float("nan")
    return out


def main() -> None:
    demo = model.load(DEMO_PATH)
    truth = _changed(demo, body__mass=1.15, body__yaw_inertia=1.15 * 1.21, friction__coulomb=0.8, friction__viscous=1.3)
    up, floor = synthetic_log(truth, "wheels-up", seconds=60), synthetic_log(truth, "on-floor", seconds=60)
    t = time.perf_counter()
    identify.fit(demo, [up, floor])
    one = time.perf_counter() - t
    ten = [synthetic_log(truth, rig, seconds=60, seed=k) for k in range(5) for rig in ("wheels-up", "on-floor")]
    t = time.perf_counter()
    identify.fit(demo, ten)
    many = time.perf_counter() - t
    noise = {}
    for amps in (0.0, 0.01, 0.02, 0.05, 0.1):
        logs = [synthetic_log(truth, r, seconds=30, noise=amps, seed=7) for r in ("wheels-up", "on-floor")]
        noise[amps] = _errors(truth, identify.fit(demo, logs))
    default = planner.make_plan(demo, duration_s=60, period_s=0.001, rig="on-floor")
    _, for_fit = excite.plan_for_fit(demo, duration_s=60, period_s=0.001, rig="on-floor", payload=0.0)
    results = {
        "fit_s_one_pair_60s": one,
        "fit_s_ten_logs_60s": many,
        "noise_errors_percent": noise,
        "condition": {"default": excite.condition(demo, default, "on-floor")[0], "for_fit": for_fit},
    }
    (HERE / "fit_results.json").write_text(json.dumps(results, indent=2) + "\n")
    (HERE / "fit_results.md").write_text(markdown(results))
    print(markdown(results))


def markdown(r: dict) -> str:
    lines = [
        "# Identification benchmark (bundled demo; logs from the float model of a changed truth)",
        "",
        f"Fit of a wheels-up and an on-floor log of 60 s at 1 kHz: {r['fit_s_one_pair_60s']:.1f} s; "
        f"ten such logs jointly: {r['fit_s_ten_logs_60s']:.1f} s.",
        "",
        "| current noise | " + " | ".join(NAMES) + " |",
        "|---|" + "---|" * len(NAMES),
    ]
    for amps, errs in r["noise_errors_percent"].items():
        lines.append(f"| {float(amps) * 1000:g} mA | " + " | ".join(f"{errs[n]:+.2f} %" for n in NAMES) + " |")
    c = r["condition"]
    lines += [
        "",
        f"Regressor condition number on the floor: default plan {c['default']:.3g}, `--for-fit` {c['for_fit']:.3g}.",
        "",
    ]
    return "\n".join(lines)


if __name__ == "__main__":
    main()
