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


@cache
def demo_unfolded() -> synthesis.Firmware:
    """The demo with its cosines looked up, not folded into the payload tables (synthesis._layout)."""
    return synthesis._layout(model.load(DEMO_PATH), flat=False)
