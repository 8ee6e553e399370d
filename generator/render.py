"""Render generated files from the jinja2 template sets shipped with the package: {filename: text}.

One loader over the template folder; a template set per output (`ff` the feed-forward files, `link` the
controller link files, `sim` the simulated controller's glue, `fw` the reference firmware project; `common`
their shared macros), each file named by `interface.file_names`. Templates only lay out text.
"""

from __future__ import annotations

import hashlib
import os
import sys
from dataclasses import dataclass
from importlib import resources
from pathlib import Path
from typing import Any

import jinja2
import jinja2.bccache
import platformdirs

from . import cformat, interface

CACHE_ENV = "KINETAB_TEMPLATE_CACHE"
"""Folder for compiled templates (saves about 0.1 s per build); unset: `templates` in the user's cache
folder (as pint caches its unit definitions); "off": none."""


@dataclass(frozen=True)
class TemplateSet:
    """The templates of one output: (file role in interface.file_names, template path)."""

    files: tuple[tuple[str, str], ...]


FEEDFORWARD = TemplateSet((("ff_header", "ff/ff.h.j2"), ("ff_source", "ff/ff.c.j2")))
LINK = TemplateSet((("link_header", "link/link.h.j2"), ("link_source", "link/link.c.j2")))
SIM = TemplateSet((("sim_source", "sim/sim.c.j2"),))


def template_dir() -> Path:
    """Templates inside the installed wheel (generator/templates), else the source tree's templates/."""
    packaged = resources.files(__package__).joinpath("templates")
    if packaged.is_dir():
        return Path(str(packaged))
    return Path(__file__).resolve().parent.parent / "templates"


OPTIONS: dict[str, Any] = {
    "undefined": jinja2.StrictUndefined,
    "keep_trailing_newline": True,
    "trim_blocks": True,
    "lstrip_blocks": True,
    "autoescape": False,
}
"""The template environment's options: strict (a missing variable is an error), no autoescape, LF kept."""


class _QuietCache(jinja2.FileSystemBytecodeCache):
    """jinja2's file cache of compiled templates that never stops a build: an entry that cannot be read
    is compiled afresh, one that cannot be written is skipped."""

    def load_bytecode(self, bucket: jinja2.bccache.Bucket) -> None:
        try:
            super().load_bytecode(bucket)
        except Exception:  # unreadable, truncated or foreign: a miss
            bucket.reset()

    def dump_bytecode(self, bucket: jinja2.bccache.Bucket) -> None:
        try:
            super().dump_bytecode(bucket)
        except OSError:
            pass


def _cache_folder(base: Path) -> Path:
    """A subfolder per jinja2 version, Python version and environment options: jinja2 keys an entry by
    template and source only, so code compiled under other options must not be found."""
    key = repr((jinja2.__version__, sys.version_info[:2], sorted((k, repr(v)) for k, v in OPTIONS.items())))
    return base / hashlib.sha256(key.encode()).hexdigest()[:16]


def _bytecode_cache() -> jinja2.BytecodeCache | None:
    """Compiled templates in the folder CACHE_ENV names, else the user's cache folder; none when that is
    "off" or cannot be made. Safe to share between processes: jinja2 checks each entry's source checksum
    and bytecode version and writes it through a temporary file (3.1.2 and later)."""
    chosen = os.environ.get(CACHE_ENV) or str(Path(platformdirs.user_cache_dir("kinetab")) / "templates")
    if chosen == "off":
        return None
    folder = _cache_folder(Path(chosen))
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError:
        return None
    return _QuietCache(str(folder))


def environment() -> jinja2.Environment:
    """The one template loader over the template folder, with OPTIONS and the compiled-template cache."""
    return jinja2.Environment(
        loader=jinja2.FileSystemLoader(str(template_dir())), bytecode_cache=_bytecode_cache(), **OPTIONS
    )


def file_names(tset: TemplateSet, prefix: str) -> list[str]:
    """The names of a template set's files for a vehicle prefix (what render_set writes)."""
    names = interface.file_names(prefix)
    return [names[role] for role, _ in tset.files]


def render_set(tset: TemplateSet, prefix: str, context: dict[str, Any]) -> dict[str, str]:
    """Every file of a template set, named for the vehicle prefix, byte-identical for identical input."""
    env = environment()
    names = interface.file_names(prefix)
    return {names[role]: cformat.tidy(env.get_template(path).render(**context)) for role, path in tset.files}


def render(fw: Any, *, neighbours: dict[str, Any] | None = None) -> dict[str, str]:
    """The feed-forward files of one synthesised vehicle (`synthesis.Firmware`); `neighbours`:
    steps.neighbour_steps of it, when the caller has them (the search is the slowest part)."""
    from . import cview

    return render_set(FEEDFORWARD, fw.vehicle.name, cview.context(fw, neighbours=neighbours))
