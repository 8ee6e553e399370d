"""Text helpers every C template set uses: numbers for comments, table rows, wrapped lists, tidy output."""

from __future__ import annotations


def num(x: float) -> str:
    """A number for a comment: six significant digits."""
    return f"{x:.6g}"


def rows(values: list[int] | list[str], per_row: int = 8) -> list[str]:
    """Array entries (integers or C literals), `per_row` to a line."""
    cells = [f"{v}" for v in values]
    return [", ".join(cells[i : i + per_row]) for i in range(0, len(cells), per_row)]


def wrap(items: list[str], width: int = 92) -> list[str]:
    """Comma-separated items folded into lines of at most `width` characters."""
    lines, line = [], ""
    for item in items:
        if line and len(line) + len(item) + 2 > width:
            lines.append(line + ",")
            line = item
        else:
            line = f"{line}, {item}" if line else item
    return lines + [line] if line else lines


def tidy(text: str) -> str:
    """LF endings, no trailing spaces, at most one blank line in a row, one final newline."""
    lines = [line.rstrip() for line in text.replace("\r\n", "\n").split("\n")]
    out: list[str] = []
    for line in lines:
        if line == "" and out and out[-1] == "":
            continue
        out.append(line)
    return "\n".join(out).strip("\n") + "\n"
