"""Boards the reference firmware is written for: what a port to another part changes (memory map,
the UART the bench link uses and its interrupt numbers, the core clock), one description each.

Both are Arm MPS2 FPGA images that `qemu-system-arm` emulates (machines `mps2-an386` and `mps2-an385`):
SSRAM1 holds the code at 0x00000000, SSRAM2/3 the data at 0x20000000; the CMSDK APB UART0 at
0x40004000 raises interrupt 0 on receive and 1 on transmit, UART1 at 0x40005000 interrupts 2 and 3
(the simulated drive's wire; qemu's `-serial` options map to UART0, UART1 in order); the system clock
is 25 MHz (Arm, "Cortex-M4 / Cortex-M3 Prototyping System" application notes AN386 / AN385; the
addresses were checked with the emulator's `info mtree`, UART1's interrupts in qemu's hw/arm/mps2.c)."""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

from kinetab.generator.errors import UserError


@dataclass(frozen=True, kw_only=True)
class Board:
    """One target: its core, memories, the bench-link UART and the clock the control tick divides."""

    name: str
    title: str
    cpu: str  # gcc -mcpu
    qemu_machine: str  # qemu-system-arm -machine
    flash_origin: int
    flash_bytes: int
    ram_origin: int
    ram_bytes: int
    uart_base: int  # CMSDK APB UART used by the bench link
    uart_rx_irq: int
    uart_tx_irq: int
    drive_uart_base: int  # CMSDK APB UART of the simulated drive (emulated board only)
    drive_uart_rx_irq: int
    drive_uart_tx_irq: int
    clock_hz: int  # SysTick counts this clock
    irq_count: int  # external interrupt lines in the vector table


AN386 = Board(
    name="mps2-an386",
    title="Arm MPS2 with the AN386 image (Cortex-M4)",
    cpu="cortex-m4",
    qemu_machine="mps2-an386",
    flash_origin=0x00000000,
    flash_bytes=4 << 20,
    ram_origin=0x20000000,
    ram_bytes=4 << 20,
    uart_base=0x40004000,
    uart_rx_irq=0,
    uart_tx_irq=1,
    drive_uart_base=0x40005000,
    drive_uart_rx_irq=2,
    drive_uart_tx_irq=3,
    clock_hz=25_000_000,
    irq_count=32,
)
AN385 = dataclasses.replace(
    AN386,
    name="mps2-an385",
    title="Arm MPS2 with the AN385 image (Cortex-M3)",
    cpu="cortex-m3",
    qemu_machine="mps2-an385",
)
BOARDS = {b.name: b for b in (AN386, AN385)}


def board(name: str) -> Board:
    """The board of that name, or a UserError listing the known ones."""
    if name not in BOARDS:
        raise UserError(f"--board: expected one of {', '.join(BOARDS)}, found {name!r}")
    return BOARDS[name]
