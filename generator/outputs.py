"""Generated files on disk: atomic writes, freshness checks, and the verify report (JSON, JUnit)."""

from __future__ import annotations

import os
import tempfile
import xml.etree.ElementTree as ET
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from . import fixedpoint as fx
from .accuracy import Accuracy
from .errors import UserError
from .synthesis import Firmware


def write_atomically(path: Path, text: str) -> None:
    """Write via a temporary file in the same folder and rename, so readers never see half a file."""
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline="\n") as fh:
            fh.write(text)
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def write_file(path: Path, text: str) -> None:
    """write_atomically, with a failure reported as one user-facing line (exit 2)."""
    if path.is_dir():
        raise UserError(f"{path}: expected a file name, found a folder")
    try:
        write_atomically(path, text)
    except OSError as exc:
        raise UserError(f"{path}: cannot write ({exc.strerror})") from None


def write_all(folder: Path, files: dict[str, str]) -> None:
    if folder.exists() and not folder.is_dir():
        raise UserError(f"{folder}: expected an output folder, found a file")
    try:
        for name, text in files.items():
            write_atomically(folder / name, text)
    except OSError as exc:
        raise UserError(f"{folder}: cannot write ({exc.strerror})") from None


@dataclass(frozen=True)
class FileStatus:
    name: str
    ok: bool
    detail: str


def check_file(folder: Path, name: str, expected: str) -> FileStatus:
    """Fresh, or the first difference (line and both texts), or missing."""
    path = folder / name
    if not path.is_file():
        return FileStatus(name, False, f"{path}: missing (run kinetab build)")
    try:
        found = path.read_bytes().decode("utf-8")
    except (OSError, UnicodeDecodeError):
        return FileStatus(name, False, f"{path}: unreadable")
    if found == expected:
        return FileStatus(name, True, f"{path}: fresh")
    exp_lines, got_lines = expected.split("\n"), found.split("\n")
    for i, (e, g) in enumerate(zip(exp_lines, got_lines), start=1):
        if e != g:
            return FileStatus(
                name, False, f"{path}:{i}: stale or edited: expected {e.strip()[:60]!r}, found {g.strip()[:60]!r}"
            )
    line = min(len(exp_lines), len(got_lines)) + 1
    return FileStatus(
        name,
        False,
        f"{path}:{line}: stale or edited: the file is "
        f"{'shorter' if len(got_lines) < len(exp_lines) else 'longer'} than a fresh build",
    )


def report(fw: Firmware, acc: Accuracy, files: list[FileStatus]) -> dict[str, Any]:
    """The verify JSON: SI units (A for currents; each table's own unit for its error)."""
    f = fw.vehicle.firmware
    budget_ok = fw.ff_bound_a <= f.current_budget_a
    return {
        "ok": budget_ok and all(s.ok for s in files),
        "model": fw.vehicle.source,
        "fingerprint": f"0x{fw.fingerprint:08X}",
        "budget": f.current_budget_a,
        "bound": fw.ff_bound_a,
        "max_error": acc.total.max,
        "rms_error": acc.total.rms,
        "worst_case": acc.where,
        "points": acc.points,
        "split": {
            name: {"max": getattr(acc, name).max, "rms": getattr(acc, name).rms}
            for name in ("interpolation", "quantisation", "arithmetic")
        },
        "clamping": {"max": acc.clamping.max, "rms": acc.clamping.rms},
        "input_resolution": acc.input_resolution,
        "forward": {"bound": fw.fwd_bound_mps2, "goal": fw.fwd_budget_mps2},
        "total_bytes": fw.total_bytes,
        "tables": [
            {
                "name": n,
                "segments": [p.segments for p in t.pieces],
                "q_format": fx.q_name(t.spec.frac_bits, t.spec.bits),
                "bytes": t.bytes,
                "max_error": max(e.total for e in fw.errors[n]) * t.spec.si_scale,
                "unit": t.spec.si_unit,
            }
            for n, t in fw.tables.items()
        ],
        "files": [{"name": s.name, "ok": s.ok, "detail": s.detail} for s in files],
    }


def failed_report(source: str, budget: float, error: str) -> dict[str, Any]:
    """The verify JSON when the budget cannot be met at all (no tables to report)."""
    return {"ok": False, "model": source, "budget": budget, "error": error, "tables": [], "files": []}


def junit(doc: dict[str, Any]) -> str:
    """JUnit XML: one case per generated file and one for the error budget."""
    suite = ET.Element("testsuite", name="kinetab verify")
    cases = []
    for f in doc["files"]:
        cases.append((f"file {f['name']} is fresh", f["ok"], f["detail"]))
    if "error" in doc:
        cases.append(("error budget", False, doc["error"]))
    else:
        cases.append(
            (
                "error budget",
                doc["bound"] <= doc["budget"],
                f"proven bound {doc['bound']:.6g} A, measured max {doc['max_error']:.6g} A, "
                f"budget {doc['budget']:.6g} A",
            )
        )
    for name, ok, detail in cases:
        case = ET.SubElement(suite, "testcase", classname="kinetab", name=name)
        if not ok:
            ET.SubElement(case, "failure", message=detail).text = detail
        else:
            ET.SubElement(case, "system-out").text = detail
    suite.set("tests", str(len(cases)))
    suite.set("failures", str(sum(1 for _, ok, _ in cases if not ok)))
    return ET.tostring(suite, encoding="unicode") + "\n"
