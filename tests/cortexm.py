"""Cross-compile generated C for Cortex-M with zig (pip: ziglang) and run it in unicorn (pip).

Facts recorded in DEVELOPERS.md (cross-compiling): no -nostdlib (64-bit helpers come from compiler-rt); the CPU model
is set with ctl_set_cpu_model (UC_MODE_MCLASS would silently run a Cortex-M33); PT_LOAD segments
are loaded with pyelftools and the function is called with LR at a sentinel address.
"""

from __future__ import annotations

import shutil
import subprocess
import sys
from dataclasses import dataclass, field
from pathlib import Path

from kinetab.generator.hostc import STRICT

TARGETS = {
    "cortex_m0plus": ["-target", "thumb-freestanding-eabi", "-mcpu=cortex_m0plus"],
    "cortex_m4": ["-target", "thumb-freestanding-eabi", "-mcpu=cortex_m4"],
    "cortex_m4f": ["-target", "thumb-freestanding-eabihf", "-mcpu=cortex_m4+vfp4d16sp"],
}
RAM, RAM_SIZE = 0x2000_0000, 0x1_0000
SENTINEL = 0x0000_1000


def zig_available() -> bool:
    try:
        import ziglang  # noqa: F401
    except ImportError:
        return False
    return True


def zig_cc(target: str) -> list[str]:
    """The zig cc command for a target with the strict flags."""
    return [sys.executable, "-m", "ziglang", "cc", *TARGETS[target], *STRICT]


def compile_elf(sources: list[Path], target: str, entry: str, out: Path, extra: list[str] | None = None) -> Path:
    """One standalone ELF per entry function (-O2, sections garbage-collected)."""
    cmd = [
        sys.executable,
        "-m",
        "ziglang",
        "cc",
        *TARGETS[target],
        *STRICT,
        "-O2",
        "-g",
        "-ffunction-sections",
        "-fdata-sections",
        "-Wl,--gc-sections",
        f"-Wl,--entry={entry}",
        *(extra or []),
        *map(str, sources),
        "-o",
        str(out),
    ]
    subprocess.run(cmd, check=True, capture_output=True, text=True)
    return out


GCC_TARGETS = {
    "cortex_m0plus": ["-mcpu=cortex-m0plus", "-mthumb"],
    "cortex_m4": ["-mcpu=cortex-m4", "-mthumb"],
    "cortex_m4f": ["-mcpu=cortex-m4", "-mthumb", "-mfloat-abi=hard", "-mfpu=fpv4-sp-d16"],
}


def arm_gcc_available() -> bool:
    """gcc-arm-none-eabi from apt (the compiler most firmware teams use)."""
    return shutil.which("arm-none-eabi-gcc") is not None


def compile_elf_gcc(sources: list[Path], target: str, entry: str, out: Path, extra: list[str] | None = None) -> Path:
    """The same as compile_elf with gcc-arm-none-eabi: a standalone ELF (no start files; libgcc for helpers)."""
    cmd = [
        "arm-none-eabi-gcc",
        *GCC_TARGETS[target],
        *STRICT,
        "-ffunction-sections",
        "-fdata-sections",
        "-Wl,--gc-sections",
        f"-Wl,--entry={entry}",
        "-nostartfiles",
        "-specs=nosys.specs",
        *(extra or []),
        *map(str, sources),
        "-lgcc",
        "-o",
        str(out),
    ]
    subprocess.run(cmd, check=True, capture_output=True, text=True)
    return out


def elf_sizes(elf: Path) -> dict[str, int]:
    from elftools.elf.elffile import ELFFile

    with elf.open("rb") as fh:
        e = ELFFile(fh)
        return {s.name: s["sh_size"] for s in e.iter_sections() if s.name in (".text", ".rodata")}


@dataclass
class Machine:
    """A loaded ELF in unicorn with the CPU model of the target core."""

    uc: object
    entry: int
    count: int = 0
    symbols: dict[str, int] = field(default_factory=dict)  # function name -> address (Thumb bit cleared)

    @classmethod
    def load(cls, elf: Path, target: str, count: bool = False) -> Machine:
        from elftools.elf.elffile import ELFFile
        from unicorn import UC_ARCH_ARM, UC_HOOK_CODE, UC_MODE_THUMB, Uc
        from unicorn.arm_const import UC_CPU_ARM_CORTEX_M0, UC_CPU_ARM_CORTEX_M4

        uc = Uc(UC_ARCH_ARM, UC_MODE_THUMB)
        uc.ctl_set_cpu_model(UC_CPU_ARM_CORTEX_M0 if target == "cortex_m0plus" else UC_CPU_ARM_CORTEX_M4)
        with elf.open("rb") as fh:
            e = ELFFile(fh)
            segs = [(s["p_vaddr"], s.data(), s["p_memsz"]) for s in e.iter_segments() if s["p_type"] == "PT_LOAD"]
            entry = e.header.e_entry & ~1
            table = e.get_section_by_name(".symtab")
            symbols = {
                sym.name: sym["st_value"] & ~1
                for sym in (table.iter_symbols() if table is not None else [])
                if sym["st_info"]["type"] == "STT_FUNC"
            }
        lo = min(a for a, _, _ in segs) & ~0xFFF
        hi = (max(a + n for a, _, n in segs) + 0xFFF) & ~0xFFF
        uc.mem_map(0, max(hi, SENTINEL + 0x1000))
        for addr, data, _ in segs:
            uc.mem_write(addr, data)
        uc.mem_map(RAM, RAM_SIZE)
        m = cls(uc, entry, symbols=symbols)
        if count:

            def hook(_uc, _addr, _size, machine):
                machine.count += 1

            uc.hook_add(UC_HOOK_CODE, hook, m, begin=lo, end=hi)
        return m

    def stack_bytes(self, args: bytes, out_size: int, depth: int = 4096) -> int:
        """Stack the call uses, bytes: the area below SP painted with a pattern, the lowest byte changed."""
        top = RAM + RAM_SIZE - 16
        self.uc.mem_write(top - depth, b"\xa5" * depth)  # type: ignore[attr-defined]
        self.call(args, out_size)
        painted = bytes(self.uc.mem_read(top - depth, depth))  # type: ignore[attr-defined]
        first = next((k for k, b in enumerate(painted) if b != 0xA5), depth)
        return depth - first

    def write(self, offset: int, data: bytes) -> int:
        """Write bytes at RAM + offset; returns that address."""
        self.uc.mem_write(RAM + offset, data)  # type: ignore[attr-defined]
        return RAM + offset

    def read(self, offset: int, size: int) -> bytes:
        return bytes(self.uc.mem_read(RAM + offset, size))  # type: ignore[attr-defined]

    def run_at(self, symbol: str, args: list[int]) -> int:
        """Call the function `symbol` with r0, r1, ... = args (addresses or integers); returns the
        instructions it ran (library helpers it calls included)."""
        from unicorn import arm_const

        uc = self.uc
        for k, value in enumerate(args):
            uc.reg_write(getattr(arm_const, f"UC_ARM_REG_R{k}"), value)  # type: ignore[attr-defined]
        uc.reg_write(arm_const.UC_ARM_REG_SP, RAM + RAM_SIZE - 16)  # type: ignore[attr-defined]
        uc.reg_write(arm_const.UC_ARM_REG_LR, SENTINEL | 1)  # type: ignore[attr-defined]
        self.count = 0
        uc.emu_start(self.symbols[symbol] | 1, SENTINEL, count=100_000)  # type: ignore[attr-defined]
        return self.count

    def call(self, args: bytes, out_size: int) -> tuple[bytes, int]:
        """Call entry(in, out) with the packed input struct; returns (output bytes, instructions)."""
        from unicorn.arm_const import UC_ARM_REG_LR, UC_ARM_REG_R0, UC_ARM_REG_R1, UC_ARM_REG_SP

        uc = self.uc
        uc.mem_write(RAM, args)
        uc.mem_write(RAM + 0x100, b"\0" * out_size)
        uc.reg_write(UC_ARM_REG_R0, RAM)
        uc.reg_write(UC_ARM_REG_R1, RAM + 0x100)
        uc.reg_write(UC_ARM_REG_SP, RAM + RAM_SIZE - 16)
        uc.reg_write(UC_ARM_REG_LR, SENTINEL | 1)
        self.count = 0
        uc.emu_start(self.entry | 1, SENTINEL, count=100_000)
        return bytes(uc.mem_read(RAM + 0x100, out_size)), self.count
