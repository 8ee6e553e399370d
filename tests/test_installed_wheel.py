"""The built wheel (not an editable install) carries the templates and demos and runs the commands."""

from __future__ import annotations

import json
import os
import subprocess
import sys
import zipfile
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="session")
def installed(tmp_path_factory):
    """Build the wheel from the source tree and install it, without deps, into a private target dir."""
    work = tmp_path_factory.mktemp("wheel")
    subprocess.run(
        [
            sys.executable,
            "-m",
            "pip",
            "wheel",
            "--no-deps",
            "--no-build-isolation",
            "-q",
            "-w",
            str(work / "dist"),
            str(ROOT),
        ],
        check=True,
    )
    wheel = next((work / "dist").glob("kinetab-*.whl"))
    target = work / "site"
    subprocess.run(
        [sys.executable, "-m", "pip", "install", "--no-deps", "-q", "--target", str(target), str(wheel)], check=True
    )
    env = {**os.environ, "PYTHONPATH": str(target)}
    return wheel, target, env, work


def _kinetab(installed, *args, check=True):
    _, target, env, work = installed
    return subprocess.run(
        [str(target / "bin" / "kinetab"), *args], cwd=work, env=env, capture_output=True, text=True, check=check
    )


@pytest.mark.slow
def test_wheel_contains_templates_and_demo(installed):
    wheel = installed[0]
    names = zipfile.ZipFile(wheel).namelist()
    assert "kinetab/generator/demos/larkspur.toml" in names
    assert {"kinetab/generator/templates/ff/ff.h.j2", "kinetab/generator/templates/ff/ff.c.j2"} <= set(names)
    assert "kinetab/__init__.py" in names
    assert any(n.startswith("kinetab/hil/") for n in names)


@pytest.mark.slow
def test_wheel_installs_no_generic_top_level_name(installed):
    """Regression: the wheel used to install top-level `generator` and `hil` packages, names any other
    distribution may claim; everything must live under the one package `kinetab`."""
    names = zipfile.ZipFile(installed[0]).namelist()
    top = {n.split("/")[0] for n in names if not n.split("/")[0].endswith((".dist-info", ".data"))}
    assert top == {"kinetab"}
    assert sorted(p.name for p in installed[1].iterdir() if not p.name.endswith(".dist-info")) == ["bin", "kinetab"]


@pytest.mark.slow
def test_installed_commands_run(installed):
    work = installed[3]
    result = _kinetab(installed, "init", "cart.toml")
    assert (work / "cart.toml").exists(), result.stderr
    where = subprocess.run(
        [sys.executable, "-c", "import kinetab.generator as g; print(g.__file__)"],
        cwd=work,
        env=installed[2],
        capture_output=True,
        text=True,
        check=True,
    ).stdout
    assert str(installed[1]) in where  # imported from the installed wheel, not the source tree
    doc = json.loads(_kinetab(installed, "predict", "cart.toml", "--speed-right", "0.3", "--json").stdout)
    assert doc["right"]["current"] > 0
    assert "feasible" in _kinetab(installed, "envelope", "cart.toml").stdout
    _kinetab(installed, "build", "cart.toml", "-o", "gen")  # renders from the templates inside the wheel
    assert (work / "gen" / "cart_ff.h").read_text().startswith("/*")  # init names the model after its file
    assert _kinetab(installed, "verify", "cart.toml", "gen").returncode == 0
