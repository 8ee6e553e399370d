"""Compile generated C for the host with the strict flags the generated files promise to pass.

The tests use it, and so does the simulated controller, which runs the same C a drive controller
runs. Needs a C compiler on PATH (gcc, else cc).
"""

from __future__ import annotations

import shutil
import subprocess
from collections.abc import Sequence
from pathlib import Path

from .errors import UserError

STRICT = ("-std=c99", "-Wall", "-Wextra", "-Wpedantic", "-Wconversion", "-Wsign-conversion", "-Werror")
"""The warning flags every generated file must pass (README states them)."""


class CompileFailed(UserError):
    """The host C compiler is missing or refused the sources (the first error line is the message)."""


def compiler() -> str | None:
    """The host C compiler on PATH: gcc, else cc; None when neither exists."""
    return shutil.which("gcc") or shutil.which("cc")


def compile_c(
    sources: Sequence[Path],
    out: Path,
    *,
    include: Sequence[Path] = (),
    defines: Sequence[str] = (),
    extra: Sequence[str] = (),
    opt: str = "-O2",
) -> Path:
    """Compile and link `sources` into `out` with the strict flags; CompileFailed says why not."""
    cc = compiler()
    if cc is None:
        raise CompileFailed("no C compiler found: install gcc (for example: apt-get install gcc)")
    cmd = [
        cc,
        *STRICT,
        opt,
        *(f"-I{p}" for p in include),
        *(f"-D{d}" for d in defines),
        *extra,
        *map(str, sources),
        "-o",
        str(out),
    ]
    done = subprocess.run(cmd, capture_output=True, text=True, check=False)
    if done.returncode != 0:
        first = next((line for line in done.stderr.splitlines() if "error" in line), done.stderr.strip()[:300])
        raise CompileFailed(f"{cc} failed on {', '.join(p.name for p in sources)}: {first}")
    return out
