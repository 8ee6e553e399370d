"""The CI gate: every check `kinetab verify` runs, each a pass or a fail with one line saying why."""

from __future__ import annotations

from pathlib import Path

from . import envelope, render, vectors
from .outputs import Check, check_file
from .synthesis import Firmware
from .vehicle import Vehicle

ALLOW_OPTION = "--allow-infeasible-envelope"
VECTORS_DEFAULT = "vectors.csv"


def envelope_check(v: Vehicle, *, allow: bool) -> tuple[Check, list[str]]:
    """The envelope against the drive's current, voltage and grip limits; `allow` accepts a failure
    (the check then passes and says that it was accepted)."""
    problems = envelope.corner_peaks(v)[3]
    name = "envelope within the drive's limits"
    if not problems:
        return Check(name, True, f"{v.source}: envelope feasible"), problems
    detail = f"{v.source}: envelope infeasible: {problems[0]}"
    if allow:
        return Check(name, True, f"{detail} (accepted by {ALLOW_OPTION})"), problems
    return Check(name, False, f"{detail}; fix the model, or pass {ALLOW_OPTION} to accept it"), problems


def budget_check(fw: Firmware) -> Check:
    f = fw.vehicle.firmware
    ok = fw.ff_bound_a <= f.current_budget_a
    return Check(
        "error budget", ok, f"proven bound {fw.ff_bound_a * 1000:.3f} mA, budget {f.current_budget_a * 1000:.3f} mA"
    )


def file_checks(fw: Firmware, folder: Path, vectors_path: Path | None, rebuild: str) -> list[Check]:
    """The generated C in `folder`, and the golden vectors when asked for or present in the folder."""
    checks = [check_file(folder / name, text, rebuild) for name, text in render.render(fw).items()]
    path = vectors_path if vectors_path is not None else folder / VECTORS_DEFAULT
    if vectors_path is not None or path.exists():
        text = vectors.to_csv(fw, vectors.feedforward_table(fw))
        checks.append(check_file(path, text, f"{rebuild} --vectors {path}"))
    return checks


def summary(checks: list[Check], source: str) -> str:
    failed = sum(1 for c in checks if not c.ok)
    if failed:
        return f"{source}: verify: {failed} of {len(checks)} checks failed"
    return f"{source}: verify: all {len(checks)} checks passed"
