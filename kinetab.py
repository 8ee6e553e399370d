"""kinetab: vehicle model -> dynamics -> fixed-point feed-forward C, and the bench link.

The installed wheel holds this file as the package `kinetab/__init__.py`, with `generator` and `hil`
inside it (so the wheel claims no generic top-level name). In a source checkout this file stands
beside those folders and points the package path at them, so `import kinetab.generator` works from
the repository root without installing. It also composes the command line: the feed-forward
commands from `generator` and the `bench` group from `hil`, neither importing the other's CLI.
"""

from __future__ import annotations

import os
import signal
import sys

__path__ = [os.path.dirname(os.path.abspath(__file__))]


def _interrupted(_signum: int, _frame: object) -> None:
    """Ctrl-C while the modules are still loading: nothing is written yet, so leave at once."""
    sys.stderr.write("kinetab: interrupted\n")
    os._exit(130)


def main(argv: list[str] | None = None) -> None:
    """The `kinetab` console script: every command, with the bench group loaded only when used."""
    import importlib

    # One BLAS thread unless the user set a count (OpenBLAS reads these three): kinetab's matrices are
    # small, and OpenBLAS starting a thread per core took half of `import numpy` (0.12 -> 0.06 s, measured).
    if not any(os.environ.get(k) for k in ("OPENBLAS_NUM_THREADS", "GOTO_NUM_THREADS", "OMP_NUM_THREADS")):
        os.environ["OPENBLAS_NUM_THREADS"] = "1"
    previous = signal.signal(signal.SIGINT, _interrupted)
    try:
        cli = importlib.import_module("kinetab.generator.cli")
        cli.register_lazy(
            "bench", "kinetab.hil.commands", "bench", "Bench link: link C, plans, simulated controller, runs, ports."
        )
    finally:
        signal.signal(signal.SIGINT, previous)
    cli.main(argv)
