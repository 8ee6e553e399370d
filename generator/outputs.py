"""Generated files on disk: atomic writes of a whole set, freshness checks, and the verify report
(JSON, JUnit) built from the list of checks verify ran."""

from __future__ import annotations

import contextlib
import os
import signal
import stat
import tempfile
import threading
import xml.etree.ElementTree as ET
from collections.abc import Iterator, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from . import fixedpoint as fx
from . import tables as tb
from .accuracy import Accuracy
from .errors import UserError
from .pointform import point_form
from .steps import NeighbourStep
from .synthesis import Firmware, products_note, sizing_note


def _umask() -> int:
    """The process umask (read by setting it and putting it back)."""
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


def _temporary(path: Path, text: str | bytes) -> Path:
    """`text` (or bytes, for pictures) in a temporary file beside `path`, with the mode a plain new file
    would get (0666 less the umask: mkstemp's 0600 would hide the headers from a build server's other
    users)."""
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        if isinstance(text, bytes):
            with os.fdopen(fd, "wb") as out:
                out.write(text)
        else:
            with os.fdopen(fd, "w", encoding="utf-8", newline="\n") as fh:
                fh.write(text)
        os.chmod(tmp, 0o666 & ~_umask())
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
    return Path(tmp)


def destination(path: Path) -> tuple[Path, bool]:
    """Where writing `path` goes, and whether it is written through rather than replaced: a symlink is
    followed to its target (which is replaced, the link kept); a named pipe or a character device is
    written through (renaming over it would put a regular file where the device or pipe was); anything
    else that is not a regular file is refused, one line, exit 2."""
    real = Path(os.path.realpath(path)) if path.is_symlink() else path
    try:
        mode = real.stat().st_mode
    except FileNotFoundError:
        return real, False
    except OSError as exc:
        raise UserError(f"{path}: cannot write ({exc.strerror})") from None
    if stat.S_ISREG(mode):
        return real, False
    if stat.S_ISFIFO(mode) or stat.S_ISCHR(mode):
        return real, True
    if stat.S_ISDIR(mode):
        raise UserError(f"{path}: expected a file name, found a folder")
    raise UserError(f"{path}: cannot write: not a regular file, a named pipe or a character device")


def check_target(path: Path) -> None:
    """A path we are about to write: a regular file (or none yet), a pipe or character device written
    through, or a symlink to one of those; its folder exists or can be made and written."""
    path, through = destination(path)
    if through:
        return
    folder = path.parent
    probe = folder
    while not probe.exists():
        probe = probe.parent
    if not probe.is_dir():
        raise UserError(f"{path}: cannot write: {probe} is a file, not a folder")
    if not os.access(probe, os.W_OK | os.X_OK):
        raise UserError(f"{path}: cannot write: permission denied in {probe}")


def check_folder(folder: Path) -> None:
    """A folder we are about to fill: a folder (or creatable) and writable, else one line (exit 2)."""
    if folder.exists() and not folder.is_dir():
        raise UserError(f"{folder}: expected an output folder, found a file")
    check_target(folder / "index.html")


def write_set(files: Mapping[Path, str | bytes]) -> None:
    """Write several files so that readers see either the old set or the new one: every target is
    checked first, every text goes to a temporary file, and only then are they renamed into place.
    A failure before the renames leaves every old file untouched (one user-facing line, exit 2).
    Symlinks, pipes and character devices: see destination()."""
    for path in files:
        check_target(path)
    targets = {path: destination(path) for path in files}
    temps: dict[Path, Path] = {}  # the path asked for -> its temporary
    current: Path | None = None  # the path asked for being written: named in an error, never a temporary
    try:
        for path, text in files.items():
            real, through = targets[current := path]
            if not through:
                real.parent.mkdir(parents=True, exist_ok=True)
                temps[path] = _temporary(real, text)
        with _signals_deferred():  # Ctrl-C among the renames would leave half the set new
            for current, tmp in temps.items():
                os.replace(tmp, targets[current][0])
        for path, text in files.items():  # pipes and devices last: they cannot take part in the swap
            real, through = targets[current := path]
            if through:
                with real.open("wb") as out:
                    out.write(text if isinstance(text, bytes) else text.encode("utf-8"))
    except OSError as exc:
        raise UserError(f"{current or exc.filename or 'output'}: cannot write ({exc.strerror})") from None
    finally:
        for tmp in temps.values():
            tmp.unlink(missing_ok=True)


@contextlib.contextmanager
def _signals_deferred() -> Iterator[None]:
    """Hold SIGINT and SIGTERM back for the duration (a handful of renames) and deliver them after,
    to the handlers that were in place. Only the main thread may set handlers; elsewhere a no-op."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    held: list[int] = []
    previous = {
        s: signal.signal(s, lambda signum, _frame: held.append(signum)) for s in (signal.SIGINT, signal.SIGTERM)
    }
    try:
        yield
    finally:
        for sig, handler in previous.items():
            signal.signal(sig, handler)
        if held:
            signal.raise_signal(held[0])


def write_file(path: Path, text: str | bytes) -> None:
    """One file, atomically (see write_set)."""
    write_set({path: text})


@dataclass(frozen=True)
class Check:
    """One verdict of verify: a JUnit test case and a JSON entry."""

    name: str
    ok: bool
    detail: str


def check_file(path: Path, expected: str, rebuild: str) -> Check:
    """Fresh, or missing, or the first difference (line and both texts); `rebuild` is the command
    that brings it up to date."""
    name = f"file {path.name} is fresh"
    if not path.is_file():
        return Check(name, False, f"{path}: missing; run: {rebuild}")
    try:
        found = path.read_bytes().decode("utf-8")
    except (OSError, UnicodeDecodeError):
        return Check(name, False, f"{path}: unreadable; run: {rebuild}")
    if found == expected:
        return Check(name, True, f"{path}: fresh")
    if found.replace("\r\n", "\n") == expected:
        return Check(
            name,
            False,
            f"{path}: line endings changed (CRLF); check it out with LF line endings "
            f"(git: `*.c *.h text eol=lf` in .gitattributes) or run: {rebuild}",
        )
    exp_lines, got_lines = expected.split("\n"), found.split("\n")
    for i, (e, g) in enumerate(zip(exp_lines, got_lines), start=1):
        if e != g:
            return Check(
                name,
                False,
                f"{path}:{i}: stale or edited: expected {e.strip()[:60]!r}, found {g.strip()[:60]!r}; run: {rebuild}",
            )
    longer = "shorter" if len(got_lines) < len(exp_lines) else "longer"
    line = min(len(exp_lines), len(got_lines)) + 1
    return Check(
        name, False, f"{path}:{line}: stale or edited: the file is {longer} than a fresh build; run: {rebuild}"
    )


def _forward_doc(fw: Firmware) -> dict[str, Any]:
    """The forward helper's proven bound, its budget, and the look-ahead point's bound (None without)."""
    form = point_form(fw)
    return {
        "bound": fw.fwd_bound_mps2,
        "goal": fw.fwd_budget_mps2,
        "point_bound": None if form is None else form.bound_mps2,
    }


def _steps_doc(neighbours: Mapping[str, NeighbourStep]) -> dict[str, Any]:
    """Per input, the largest current step between neighbouring inputs and its excess over the model's."""
    return {
        name: {"amps": s.amps, "from_steps": s.at, "excess": s.excess, "excess_from_steps": s.excess_at}
        for name, s in neighbours.items()
    }


def report(
    fw: Firmware, acc: Accuracy, checks: list[Check], problems: list[str], *, neighbours: Mapping[str, NeighbourStep]
) -> dict[str, Any]:
    """The verify JSON (README lists every field): currents in A, each table's error in its own unit."""
    f = fw.vehicle.firmware
    return {
        "ok": all(c.ok for c in checks),
        "model": fw.vehicle.source,
        "fingerprint": f"0x{fw.fingerprint:08X}",
        "budget_a": f.current_budget_a,
        "bound_a": fw.ff_bound_a,
        "max_error_a": acc.total.max,
        "rms_error_a": acc.total.rms,
        "worst_case": acc.where,
        "points": acc.points,
        "split_a": {
            name: {"max": getattr(acc, name).max, "rms": getattr(acc, name).rms}
            for name in ("interpolation", "quantisation", "arithmetic")
        },
        "clamping_a": {"max": acc.clamping.max, "rms": acc.clamping.rms},
        "input_resolution_a": acc.input_resolution,
        "current_step_a": _steps_doc(neighbours),
        "envelope_problems": problems,
        "forward_mps2": _forward_doc(fw),
        "total_bytes": fw.total_bytes,
        "multiplies_64bit": {"products": fw.products64(), "note": products_note(fw)},
        "sizing": {
            "goal": fw.vehicle.firmware.sizing,
            "table_bytes_max": int(fw.vehicle.firmware.table_bytes_max),  # a whole number (model.py)
            "over_cap": fw.over_cap,
            "note": sizing_note(fw),
        },
        "tables": _tables_doc(fw.tables, fw.errors),
        "lift": _lift_doc(fw),
        "checks": [{"name": c.name, "ok": c.ok, "detail": c.detail} for c in checks],
    }


def _lift_doc(fw: Firmware) -> dict[str, Any] | None:
    """The lift function's budget, proven bound and tables (null without a lift)."""
    lf, lt = fw.lift, fw.vehicle.lift
    if lf is None or lt is None:
        return None
    return {
        "budget_a": lt.current_budget_a,
        "bound_a": lf.bound_a,
        "total_bytes": lf.total_bytes,
        "tables": _tables_doc(lf.tables, lf.errors),
    }


def _tables_doc(
    tables: Mapping[str, tb.Table], errors: Mapping[str, tuple[tb.PieceError, ...]]
) -> list[dict[str, Any]]:
    """Per table: its pieces' segments, Q format, bytes and worst error in its own SI unit."""
    return [
        {
            "name": n,
            "segments": [p.segments for p in t.pieces],
            "q_format": fx.q_name(t.spec.frac_bits, t.spec.bits),
            "bytes": t.bytes,
            "max_error": max(e.total for e in errors[n]) * t.spec.si_scale,
            "unit": t.spec.si_unit,
        }
        for n, t in tables.items()
    ]


def failed_report(source: str, budget: float, checks: list[Check]) -> dict[str, Any]:
    """The verify JSON when no tables could be made (the budget cannot be met at all)."""
    return {
        "ok": False,
        "model": source,
        "budget_a": budget,
        "tables": [],
        "checks": [{"name": c.name, "ok": c.ok, "detail": c.detail} for c in checks],
    }


def junit(doc: dict[str, Any]) -> str:
    """JUnit XML: one test case per check verify ran."""
    suite = ET.Element("testsuite", name="kinetab verify")
    for c in doc["checks"]:
        case = ET.SubElement(suite, "testcase", classname="kinetab", name=c["name"])
        if not c["ok"]:
            ET.SubElement(case, "failure", message=c["detail"]).text = c["detail"]
        else:
            ET.SubElement(case, "system-out").text = c["detail"]
    suite.set("tests", str(len(doc["checks"])))
    suite.set("failures", str(sum(1 for c in doc["checks"] if not c["ok"])))
    return ET.tostring(suite, encoding="unicode") + "\n"
