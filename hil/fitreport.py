"""`kinetab bench fit` from start to end: fit, write the model through the model writer (comments,
layout and units kept), and report estimates and the comparison before and after."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import click
from kinetab.generator import model, model_edit, outputs
from kinetab.generator.errors import UserError

from . import benchdata, compare, identify


def _phase_rms(v: Any, logs: list[benchdata.BenchLog]) -> dict[str, dict[str, float]]:
    """compare's RMS per phase (both wheels), per log, A."""
    out = {}
    for log in logs:
        doc = compare.compare(v, log)
        rows = {"all": doc["wheels"], **doc["phases"]}
        out[log.path.name] = {
            p: (d["right"]["rms"] ** 2 / 2 + d["left"]["rms"] ** 2 / 2) ** 0.5 for p, d in rows.items()
        }
    return out


def run_fit(
    model_path: Path, log_paths: list[Path], *, target: Path, robust: bool, as_json: bool, rig: str | None
) -> None:
    v = model.load(model_path)
    logs = [benchdata.read_log(p, rig) for p in log_paths]
    result = identify.fit(v, logs, robust=robust)
    changes = identify.model_changes(result)
    try:
        text = model_path.read_text(encoding="utf-8")
    except OSError as exc:
        raise UserError(f"{model_path}: cannot read ({exc.strerror})") from None
    new_text, fitted = model_edit.edited_text(text, changes, str(target))
    before, after = _phase_rms(v, logs), _phase_rms(fitted, logs)
    outputs.write_file(target, new_text)
    doc = _document(result, changes, before=before, after=after, target=target)
    click.echo(json.dumps(doc, indent=2) if as_json else _tables(doc))


def _document(
    result: identify.Fit, changes: dict[str, float], *, before: Any, after: Any, target: Path
) -> dict[str, Any]:
    return {
        "written": str(target),
        "estimates": [
            {"parameter": n, "model": m, "estimate": e, "standard_error": s}
            for n, (m, e, s) in result.estimates.items()
        ],
        "stribeck_speed_mps": None
        if result.stribeck is None
        else {"model": result.stribeck[0], "estimate": result.stribeck[1]},
        "held": [{"parameters": list(h.names), "why": h.why} for h in result.held],
        "condition_number": result.condition,
        "rms_force_n": {"before": result.rms_before_n, "after": result.rms_after_n},
        "accelerations": result.accel_source,
        "model_changes": changes,
        "compare_rms_a": {"before": before, "after": after},
    }


def _tables(doc: dict[str, Any]) -> str:
    lines = [f"{'parameter':28}{'model':>12}{'estimate':>12}{'std error':>11}"]
    for e in doc["estimates"]:
        lines.append(f"{e['parameter']:28}{e['model']:12.5g}{e['estimate']:12.5g}{e['standard_error']:11.2g}")
    if doc["stribeck_speed_mps"]:
        s = doc["stribeck_speed_mps"]
        lines.append(f"{'friction.stribeck_speed':28}{s['model']:12.5g}{s['estimate']:12.5g}{'(search)':>11}")
    lines += [f"held: {', '.join(h['parameters'])}: {h['why']}" for h in doc["held"]]
    lines.append(
        f"condition number {doc['condition_number']:.3g}; rim-force RMS residual "
        f"{doc['rms_force_n']['before']:.4g} N -> {doc['rms_force_n']['after']:.4g} N"
    )
    lines += [f"accelerations: {a}" for a in doc["accelerations"]]
    lines.append("compare RMS [mA] before -> after:")
    for log, phases in doc["compare_rms_a"]["before"].items():
        after = doc["compare_rms_a"]["after"][log]
        lines.append(
            f"  {log}: " + ", ".join(f"{p} {b * 1000:.1f} -> {after[p] * 1000:.1f}" for p, b in phases.items())
        )
    lines.append(f"wrote {doc['written']}")
    return "\n".join(lines)
