"""The header helps the integrator: SI <-> step helpers compiled by the host C compiler and checked
against the rounding rule written in their comment, and the stated largest current step between
neighbouring inputs checked against the compiled feed-forward. Invented vehicles (helpers.random_doc)."""

from __future__ import annotations

import math
import re
import subprocess

import numpy as np
import pytest
from kinetab.generator import hostc, interface, render

from tests import helpers
from tests.csteps import build_harness, needs_gcc, run_harness, write_files

pytestmark = [pytest.mark.slow, needs_gcc]


@pytest.fixture(scope="module")
def invented():
    """A random vehicle with random speed and current steps (helpers.invented, seeded) that builds."""

    def steps(doc, rng):
        doc["firmware"]["speed_lsb"] = f"{rng.uniform(0.0002, 0.002):.6g} m/s"
        doc["firmware"]["current_lsb"] = f"{rng.uniform(0.0005, 0.005):.6g} A"

    return helpers.invented(2718, "brisket", steps)[1]


CALLER = """#include <stdio.h>
#include <string.h>
#include "brisket_ff.h"
int main(void)
{
    char name[32];
    double x;
    long s;
    while (scanf("%31s %lf %ld", name, &x, &s) == 3) {
%s    }
    return 0;
}
"""


def test_conversions_follow_their_stated_rule(invented, tmp_path):
    """Each quantity's to_steps gives floor(x / step + 0.5) (the rule in the comment; computed here in
    Python's double arithmetic, IEEE 754 like C's) and from_steps the exact product, on random values
    and on exact ties (k + 1/2 steps)."""
    fw = invented
    header = render.render(fw)["brisket_ff.h"]
    names = re.findall(r"static inline int32_t brisket_(\w+)_to_steps", header)
    assert names == ["speed", "accel", "pitch", "roll", "payload", "current"]
    branches = "".join(
        f'        if (!strcmp(name, "{n}")) printf("%ld %.17g\\n", (long)brisket_{n}_to_steps(x), '
        f"brisket_{n}_from_steps((int32_t)s));\n"
        for n in names
    )
    src = tmp_path / "caller.c"
    src.write_text(CALLER.replace("%s    }", branches + "    }"))
    write_files(tmp_path, render.render(fw))
    exe = hostc.compile_c([src], tmp_path / "caller", include=[tmp_path])
    rng = np.random.default_rng(5)
    members = {m.name: m for m in (*interface.FF_IN.members, *interface.FF_OUT.members)}
    cases = []
    for n in names:
        step = interface.lsb(fw.vehicle, members[n])
        for k in rng.integers(-5000, 5000, 20):
            cases += [(n, float(k) * step + rng.uniform(-1, 1) * step, int(k)), (n, (float(k) + 0.5) * step, int(k))]
    text = "".join(f"{n} {x!r} {k}\n" for n, x, k in cases)
    out = subprocess.run([str(exe)], input=text, capture_output=True, text=True, check=True).stdout.splitlines()
    assert len(out) == len(cases)
    for (n, x, k), line in zip(cases, out):
        step = interface.lsb(fw.vehicle, members[n])
        got_steps, got_si = line.split()
        assert int(got_steps) == math.floor(x / step + 0.5), (n, x)
        assert float(got_si) == k * step, (n, k)


def test_stated_neighbour_steps_are_met_by_the_compiled_code(invented, tmp_path):
    """The header states, per input, the largest current step between neighbouring inputs. Run the
    compiled feed-forward at the stated step (at -> at + 1) over a grid of the other inputs' envelope
    edges and zero (a set the statement covers): no step found exceeds the stated one, and for speed the largest one
    found at zero speed on that grid is at least half the stated value when the stated one is at zero."""
    fw = invented
    files = render.render(fw)
    header = files["brisket_ff.h"]
    stated = {
        m.group(1): (float(m.group(2)), int(m.group(3)))
        for m in re.finditer(r"\*\s+(\w+):\s+(\S+) A \(from (-?\d+) to -?\d+ steps\)", header)
    }
    assert set(stated) == {m.name for m in interface.FF_IN.members}
    exe = build_harness(write_files(tmp_path, files), "brisket")
    lo, hi = interface.column_edges(fw.design.limits, interface.FF_IN)
    columns = interface.FF_IN.columns
    grid = (
        np.array(np.meshgrid(*[np.unique([a, 0, b]) for a, b in zip(lo, hi)], indexing="ij"))
        .reshape(len(columns), -1)
        .T
    )
    lsb = fw.vehicle.firmware.current_lsb_a
    for name, (amps, at) in stated.items():
        found = 0.0
        for col in (c for c in columns if c == name or c.startswith(name + "_")):
            j = columns.index(col)
            a, b = grid.copy(), grid.copy()
            a[:, j], b[:, j] = at, at + 1
            step = np.abs(run_harness(exe, b)[:, :2] - run_harness(exe, a)[:, :2]).max() * lsb
            found = max(found, float(step))
        assert found <= amps + 1e-12, (name, found, amps)
        if name == "speed" and at == 0:
            assert found >= 0.5 * amps, (found, amps)
