"""Shared, cached firmware builds for tests (synthesis takes about half a second per model)."""

from __future__ import annotations

from functools import cache

from kinetab.generator import model, render, synthesis

from tests.helpers import DEMO_PATH


@cache
def demo_firmware() -> synthesis.Firmware:
    return synthesis.synthesise(model.load(DEMO_PATH))


@cache
def demo_files() -> dict[str, str]:
    return render.render(demo_firmware())
