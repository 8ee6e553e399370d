"""The reference firmware project for one board: the generated feed-forward and link C with a
bare-metal main, startup, UART driver, linker script and Makefile (templates/fw/), for a user to copy."""

from __future__ import annotations

from typing import Any

from kinetab.generator import cformat, interface, render
from kinetab.generator.synthesis import Firmware

from . import drivewire, linkview
from .boards import Board


def file_names(prefix: str, board: Board) -> dict[str, str]:
    """Every file of the project besides the feed-forward and link files, by role."""
    return {
        "main": f"{prefix}_main.c",
        "startup": f"{prefix}_startup.c",
        "uart_source": f"{prefix}_uart.c",
        "uart_header": f"{prefix}_uart.h",
        "drive_source": f"{prefix}_drive.c",
        "drive_header": f"{prefix}_drive.h",
        "board": f"{prefix}_board.h",
        "linker": f"{board.name}.ld",
        "makefile": "Makefile",
        "cmake": "CMakeLists.txt",
        "toolchain": "arm-none-eabi.cmake",
    }


STACK_BYTES = 8192
"""The main stack the linker script reserves at the top of RAM (the build fails if .data and .bss reach
it); the startup paints it so the firmware can report its worst use."""

SLOW_RATE_HZ = 50
"""The highest rate the reference firmware runs the slow part of the feed-forward at: pitch, roll and
payload come from an inclination filter and a load estimate, far slower than 50 Hz."""


def slow_ticks(period_us: int) -> int:
    """Control ticks per run of the slow part: the fewest that keep it at or under SLOW_RATE_HZ."""
    return max(1, -(-1_000_000 // (SLOW_RATE_HZ * period_us)))


TEMPLATES = {
    "main": "fw/main.c.j2",
    "startup": "fw/startup.c.j2",
    "uart_source": "fw/uart.c.j2",
    "uart_header": "fw/uart.h.j2",
    "drive_source": "fw/drive.c.j2",
    "drive_header": "fw/drive.h.j2",
    "board": "fw/board.h.j2",
    "linker": "fw/linker.ld.j2",
    "makefile": "fw/Makefile.j2",
    "cmake": "fw/CMakeLists.txt.j2",
    "toolchain": "fw/toolchain.cmake.j2",
}


def _cmake_quoted(text: str) -> str:
    """Text for the inside of a CMake quoted argument (backslash, quote, dollar and semicolon escaped)."""
    for ch in ("\\", '"', "$", ";"):
        text = text.replace(ch, "\\" + ch)
    return text


def context(
    fw: Firmware,
    board: Board,
    *,
    period_us: int,
    fifo_depth: int,
    model_path: str,
    watchdog_ticks: int = linkview.WATCHDOG_TICKS,
) -> dict[str, Any]:
    """Everything the firmware templates print (the link's context, the board, the file names)."""
    prefix = fw.vehicle.name
    names = file_names(prefix, board)
    generated = interface.file_names(prefix)
    ctx = linkview.context(fw, period_us=period_us, fifo_depth=fifo_depth, watchdog_ticks=watchdog_ticks)
    ctx.update(
        names={**names, "link_header": generated["link_header"]},
        board={
            **vars(board),
            "uart_base_hex": f"0x{board.uart_base:08X}",
            "drive_uart_base_hex": f"0x{board.drive_uart_base:08X}",
            "flash_origin_hex": f"0x{board.flash_origin:08X}",
            "ram_origin_hex": f"0x{board.ram_origin:08X}",
        },
        generated=generated,
        model_path=_cmake_quoted(model_path),
        measured_type=interface.MEASURED.c_type(prefix),
        drive=drivewire.c_context(interface.ff_in(fw.vehicle)),
        stack_bytes=STACK_BYTES,
        slow_ticks=slow_ticks(period_us),
        slow_hz=f"{1e6 / (slow_ticks(period_us) * period_us):g}",
        sources=[
            generated["ff_source"],
            generated["link_source"],
            names["main"],
            names["startup"],
            names["uart_source"],
            names["drive_source"],
        ],
        headers=[
            generated["ff_header"],
            generated["link_header"],
            names["board"],
            names["uart_header"],
            names["drive_header"],
        ],
    )
    return ctx


def render_project(
    fw: Firmware,
    board: Board,
    *,
    period_us: int,
    fifo_depth: int,
    model_path: str,
    watchdog_ticks: int = linkview.WATCHDOG_TICKS,
) -> dict[str, str]:
    """Every file of the project: the feed-forward and link files and the board's own; the CMake
    project names `model_path` (absolute) as the file it regenerates the C from."""
    files = dict(render.render(fw))
    link = {"period_us": period_us, "fifo_depth": fifo_depth, "watchdog_ticks": watchdog_ticks}
    files.update(linkview.render_link(fw, **link))
    ctx = context(fw, board, model_path=model_path, **link)
    env = render.environment()
    for role, template in TEMPLATES.items():
        files[ctx["names"][role]] = cformat.tidy(env.get_template(template).render(**ctx))
    return files
