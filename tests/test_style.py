"""The code style the project holds itself to, checked on the source (DEVELOPERS.md names it):
no function over 50 lines in the packages, keyword-only parameters past the fourth, and dataclasses of
more than three fields built by keyword."""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
SOURCES = sorted([*ROOT.glob("generator/*.py"), *ROOT.glob("hil/*.py"), ROOT / "kinetab.py"])


def _functions(path: Path) -> list[ast.FunctionDef | ast.AsyncFunctionDef]:
    tree = ast.parse(path.read_text(encoding="utf-8"))
    return [n for n in ast.walk(tree) if isinstance(n, ast.FunctionDef | ast.AsyncFunctionDef)]


@pytest.mark.parametrize("path", SOURCES, ids=lambda p: str(p.relative_to(ROOT)))
def test_no_function_over_fifty_lines(path):
    long = [
        f"{f.name} ({(f.end_lineno or f.lineno) - f.lineno + 1} lines)"
        for f in _functions(path)
        if (f.end_lineno or f.lineno) - f.lineno + 1 > 50
    ]
    assert not long, long


@pytest.mark.parametrize("path", SOURCES, ids=lambda p: str(p.relative_to(ROOT)))
def test_more_than_four_parameters_are_keyword_only(path):
    """Positional parameters (self and cls not counted) stop at four; click callbacks are exempt, since
    click passes every option by keyword anyway."""
    bad = []
    for f in _functions(path):
        decorators = " ".join(ast.unparse(d) for d in f.decorator_list)
        if any(word in decorators for word in (".command", "click.option", "point_options")):
            continue
        positional = [a.arg for a in f.args.posonlyargs + f.args.args if a.arg not in ("self", "cls")]
        if len(positional) > 4:
            bad.append(f"{f.name}({', '.join(positional)})")
    assert not bad, bad


def _wide_dataclasses() -> dict[str, list[tuple[str, ...]]]:
    """Class name -> the field tuples of every dataclass of that name with more than three fields."""
    found: dict[str, list[tuple[str, ...]]] = {}
    for path in SOURCES:
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.ClassDef) and any("dataclass" in ast.unparse(d) for d in node.decorator_list):
                fields = tuple(
                    s.target.id for s in node.body if isinstance(s, ast.AnnAssign) and isinstance(s.target, ast.Name)
                )
                if len(fields) > 3:
                    found.setdefault(node.name, []).append(fields)
    return found


@pytest.mark.parametrize("path", SOURCES, ids=lambda p: str(p.relative_to(ROOT)))
def test_wide_dataclasses_are_built_by_keyword(path):
    """A dataclass with more than three fields is never built with two or more positional arguments:
    reordering or adding a field then cannot silently shift values into the wrong one."""
    wide = _wide_dataclasses()
    assert "Member" in wide and "OperatingPoint" in wide  # the check sees the classes it is for
    bad = []
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.Call):
            name = node.func.attr if isinstance(node.func, ast.Attribute) else getattr(node.func, "id", "")
            if name in wide and len(node.args) > 1:
                bad.append(f"line {node.lineno}: {name}({len(node.args)} positional)")
    assert not bad, bad
