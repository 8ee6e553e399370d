"""Serial ports the bench can use, from pyserial's list_ports, with their USB identity."""

from __future__ import annotations

from dataclasses import asdict, dataclass

from serial.tools import list_ports


@dataclass(frozen=True)
class Port:
    """One serial port; `usb` is "VID:PID" in hex, empty for a port that is not on USB."""

    device: str
    usb: str
    serial_number: str
    description: str

    def as_dict(self) -> dict[str, str]:
        return asdict(self)


def ports() -> list[Port]:
    """Every serial port the operating system lists, sorted by device name."""
    out = []
    for info in list_ports.comports():
        usb = f"{info.vid:04X}:{info.pid:04X}" if info.vid is not None and info.pid is not None else ""
        out.append(
            Port(
                device=info.device, usb=usb, serial_number=info.serial_number or "", description=info.description or ""
            )
        )
    return sorted(out, key=lambda p: p.device)


def table(found: list[Port]) -> str:
    """A plain text table, or a line saying there is none."""
    if not found:
        return "no serial ports found"
    rows = [("device", "usb", "serial", "description")]
    rows += [(p.device, p.usb or "-", p.serial_number or "-", p.description) for p in found]
    widths = [max(len(r[k]) for r in rows) for k in range(3)]
    return "\n".join(f"{r[0]:<{widths[0]}}  {r[1]:<{widths[1]}}  {r[2]:<{widths[2]}}  {r[3]}" for r in rows)
