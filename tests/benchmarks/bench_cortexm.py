"""Instructions per <name>_feedforward call on Cortex-M0+ and Cortex-M4 (unicorn counts), against a
float implementation of the same model (float_ff.c): soft float on M0+, the FPU on M4F."""

from __future__ import annotations

import tempfile
from pathlib import Path

import numpy as np
from kinetab.generator import accuracy, interface, render, synthesis, vectors
from kinetab.generator.interface import FF_IN, FF_OUT

from tests import cortexm

HERE = Path(__file__).parent
# Rough cycles per instruction class (Arm Cortex-M0+/M4 technical reference manuals [memory]):
# loads/stores 2, taken branches 2 (M0+) / 1-3 (M4, taken 2 here), multiply 1, others 1.
CYCLES = {"ldr": 2, "str": 2, "ldm": 3, "stm": 3, "push": 3, "pop": 4, "b": 2, "bl": 3, "bx": 3}


N_IN = len(FF_IN.columns)


def _bounds(fw: synthesis.Firmware, field: str) -> tuple[int, int]:
    return interface.edges(fw.design.limits, FF_IN.member(field))


def float_params(fw: synthesis.Firmware) -> str:
    v, lim, f = fw.vehicle, fw.design.limits, fw.vehicle.firmware
    from kinetab.generator import dynamics as dy

    b, lc = dy.half_track(v), v.casters.behind_axle_m
    k = dy.motor_gain(v)
    vals = {
        "SPEED_MAX": lim.speed,
        "ACCEL_MAX": lim.accel,
        "PITCH_MAX": lim.pitch,
        "ROLL_MAX": lim.roll,
        "PAYLOAD_MAX": lim.payload,
        "SPEED_LSB": f.speed_lsb_mps,
        "ACCEL_LSB": f.accel_lsb_mps2,
        "ANGLE_LSB": f.angle_lsb_rad,
        "MASS_LSB": f.mass_lsb_kg,
        "BODY_MASS": v.body.mass_kg,
        "BODY_MC": v.body.mass_kg * v.body.cog_ahead_m,
        "PAY_CP": v.payload.cog_ahead_m,
        "BODY_MH": v.body.mass_kg * v.body.cog_height_m,
        "PAY_HP": v.payload.cog_height_m,
        "BODY_IP": v.body.mass_kg * (v.body.gyration_radius_m**2 + v.body.cog_ahead_m**2),
        "PAY_IP": v.payload.gyration_radius_m**2 + v.payload.cog_ahead_m**2,
        "INV_4B2": 1 / (4 * b * b),
        "MROT": dy.reflected_mass(v),
        "G": dy.G_N,
        "LC": lc,
        "INV_LC": 1 / lc,
        "INV_2B": 1 / (2 * b),
        "CRR_W": v.wheels.rolling_resistance,
        "CRR_C": v.casters.rolling_resistance,
        "RAMP": 1 if v.friction.deadband_shape == "ramp" else 0,
        "DEADBAND": v.friction.deadband_mps,
        "INV_DEADBAND": 1 / v.friction.deadband_mps,
        "INV_STRIBECK": 1 / v.friction.stribeck_speed_mps,
        "COULOMB": v.friction.coulomb_n,
        "STRIBECK_BUMP": v.friction.breakaway_n - v.friction.coulomb_n,
        "VISCOUS": v.friction.viscous_ns_per_m,
        "K_MOT": k / f.current_lsb_a,
        "BACK_RATIO": dy.backdrive_ratio(v),
        "INV_BLEND": 1 / dy.blend_width(v) if dy.blend_width(v) > 0 else 1e30,  # 0: a switch
    }
    lines = [f"#define KT_{n} {val}" if isinstance(val, int) else f"#define KT_{n} {val!r}f" for n, val in vals.items()]
    return "\n".join(lines) + "\n"


def _cycles(machine_counts: dict[str, int]) -> int:
    total = 0
    for mnemonic, n in machine_counts.items():
        base = mnemonic.split(".")[0]
        key = next((k for k in CYCLES if base.startswith(k)), None) if base not in ("bic", "bics", "bl") else base
        total += n * CYCLES.get(key, 1) if key else n
    return total


def count(elf: Path, target: str, rows: np.ndarray, want: np.ndarray, ref_steps: np.ndarray) -> dict[str, object]:
    """Instruction counts per call, the instruction mix (for a cycle estimate), mismatches against the
    integer emulation and the worst difference from the float model, in current steps."""
    from capstone import CS_ARCH_ARM, CS_MODE_MCLASS, CS_MODE_THUMB, Cs
    from unicorn import UC_HOOK_CODE

    m = cortexm.Machine.load(elf, target)
    md = Cs(CS_ARCH_ARM, CS_MODE_THUMB | CS_MODE_MCLASS)
    mix: dict[str, int] = {}
    seen: dict[int, str] = {}

    def hook(uc, addr, size, _):
        if addr not in seen:
            insn = next(md.disasm(bytes(uc.mem_read(addr, size)), addr), None)
            seen[addr] = insn.mnemonic if insn else "?"
        mix[seen[addr]] = mix.get(seen[addr], 0) + 1
        m.count += 1

    m.uc.hook_add(UC_HOOK_CODE, hook)
    counts, mismatches, worst = [], 0, 0.0
    for i, row in enumerate(rows):
        out, n = m.call(FF_IN.pack(row[:N_IN]), FF_OUT.size)
        counts.append(n)
        got = FF_OUT.unpack(out)[:2]
        mismatches += got != tuple(int(x) for x in want[i][:2])
        worst = max(worst, float(np.max(np.abs(np.array(got) - ref_steps[i]))))
    sizes = cortexm.elf_sizes(elf)
    return {
        "median": float(np.median(counts)),
        "max": int(max(counts)),
        "mismatches": mismatches,
        "model_error_steps": worst,
        "flash": sizes.get(".text", 0) + sizes.get(".rodata", 0),
        "cycles_est": _cycles(mix) / len(rows),
    }


def run(fw: synthesis.Firmware, n_vectors: int = 1000) -> dict[str, object]:
    rows = vectors.feedforward_table(fw, n_vectors)
    inp = interface.rows_to_fields(FF_IN, rows[:, :N_IN])
    clamped = {k: np.clip(a, *_bounds(fw, k)) for k, a in inp.items()}
    ref = accuracy.reference_current(fw, accuracy.operating_point(fw, clamped)) / fw.vehicle.firmware.current_lsb_a
    out: dict[str, object] = {}
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        for name, text in render.render(fw).items():
            (folder / name).write_text(text)
        (folder / "float_params.h").write_text(float_params(fw))
        src = folder / f"{fw.vehicle.name}_ff.c"
        entry = f"{fw.vehicle.name}_feedforward"
        for target in ("cortex_m0plus", "cortex_m4"):
            elf = cortexm.compile_elf([src], target, entry, folder / f"{target}.elf")
            out[f"int_{target}"] = count(elf, target, rows, rows[:, N_IN:], ref)
        for target, label in (("cortex_m0plus", "float_soft_m0plus"), ("cortex_m4f", "float_fpu_m4f")):
            elf = cortexm.compile_elf(
                [HERE / "float_ff.c"],
                target,
                "bl_feedforward",
                folder / f"{label}.elf",
                extra=[f"-I{folder}", "-Wno-double-promotion"],
            )
            # the float version rounds differently: its mismatches with the integer result are expected
            out[label] = count(elf, "cortex_m0plus" if "m0" in target else "cortex_m4", rows, rows[:, N_IN:], ref)
    return out
