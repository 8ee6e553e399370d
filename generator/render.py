"""Render the C files from the jinja2 templates shipped with the package: {filename: text}."""

from __future__ import annotations

import os
from importlib import resources
from pathlib import Path

import jinja2

from generator import cview
from generator.synthesis import Firmware


def template_dir() -> Path:
    """Templates inside the installed wheel (generator/templates), else the source tree's templates/."""
    packaged = resources.files("generator").joinpath("templates")
    if packaged.is_dir():
        return Path(str(packaged))
    return Path(__file__).resolve().parent.parent / "templates"


def _bytecode_cache() -> jinja2.BytecodeCache | None:
    """Compiled templates in the user's cache folder (keyed by template source, so never stale);
    saves ~0.1 s per build. No cache when the folder cannot be made."""
    base = Path(os.environ.get("XDG_CACHE_HOME") or Path.home() / ".cache") / "kinetab" / "templates"
    try:
        base.mkdir(parents=True, exist_ok=True)
    except OSError:
        return None
    return jinja2.FileSystemBytecodeCache(str(base))


def environment() -> jinja2.Environment:
    return jinja2.Environment(loader=jinja2.FileSystemLoader(str(template_dir())), undefined=jinja2.StrictUndefined,
                              keep_trailing_newline=True, trim_blocks=True, lstrip_blocks=True, autoescape=False,
                              bytecode_cache=_bytecode_cache())


def _tidy(text: str) -> str:
    """LF endings, no trailing spaces, at most one blank line in a row, one final newline."""
    lines = [line.rstrip() for line in text.replace("\r\n", "\n").split("\n")]
    out: list[str] = []
    for line in lines:
        if line == "" and out and out[-1] == "":
            continue
        out.append(line)
    return "\n".join(out).strip("\n") + "\n"


def render(fw: Firmware) -> dict[str, str]:
    """The generated files of one vehicle, byte-identical for identical input."""
    env = environment()
    ctx = cview.context(fw)
    return {name: _tidy(env.get_template(tpl).render(**ctx))
            for name, tpl in ((f"{fw.vehicle.name}_ff.h", "ff.h.j2"), (f"{fw.vehicle.name}_ff.c", "ff.c.j2"))}
