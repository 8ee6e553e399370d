"""README stays true: every model key is documented, and the two set-up commands are the ones CI runs."""

from __future__ import annotations

from pathlib import Path

from kinetab.generator.model import SCHEMA

ROOT = Path(__file__).resolve().parents[1]


def test_readme_model_reference_is_the_schema():
    """README's model-key table is exactly what model.reference_rows writes from the schema (keys, kinds,
    defaults, meanings, accepted values): edit the schema, then paste the rows."""
    from kinetab.generator import model

    rows = model.reference_rows()
    lines = (ROOT / "README.md").read_text().splitlines()
    start = lines.index(rows[0])
    assert lines[start : start + len(rows)] == rows
    assert not lines[start + len(rows)].startswith("|"), "README's table has rows the schema does not"


def test_every_model_key_in_readme_reference():
    readme = (ROOT / "README.md").read_text()
    for section, keys in SCHEMA.items():
        for key in keys:
            assert f"`{section}.{key}`" in readme, f"{section}.{key} missing from README's model reference"


def test_documents_hold_each_section_once():
    """Regression: a bad merge left README with 190 lines (six sections) in it twice."""
    for path in (ROOT / "README.md", ROOT / "DEVELOPERS.md", *ROOT.glob("docs/*.md"), ROOT / "hil" / "PROTOCOL.md"):
        lines = path.read_text(encoding="utf-8").splitlines()
        fence, headings = False, []
        for line in lines:
            fence ^= line.startswith("```")
            if not fence and line.startswith("#"):
                headings.append(line)
        twice = sorted({h for h in headings if headings.count(h) > 1})
        assert not twice, f"{path.name}: {twice} appear more than once"


def test_ci_runs_readme_test_command():
    readme = (ROOT / "README.md").read_text()
    ci = (ROOT / ".ci" / "run").read_text()
    command = "python -m pytest -q -n auto --maxprocesses 4"
    assert f"pip install '.[test]' && {command}\n" in readme
    assert "python -m pip install -q '.[test]'" in ci and f"{command}\n" in ci


def test_documents_cite_only_files_the_clone_holds():
    """Regression: code and documents cited design notes beside the repository that a clone lacks."""
    import re

    texts = [
        *ROOT.glob("*.md"),
        *ROOT.glob("docs/*.md"),
        *ROOT.glob("hil/*.md"),
        *ROOT.glob("generator/*.py"),
        *ROOT.glob("hil/*.py"),
        *ROOT.glob("tests/*.py"),
        ROOT / "kinetab.py",
    ]
    for path in texts:
        text = path.read_text(encoding="utf-8")
        outside, section = "../" + "shared", "DESIGN" + " §"  # spelled apart so this file passes itself
        assert outside not in text and section not in text, path
        for cited in set(re.findall(r"\b[\w./-]+\.md\b", text)):
            held = [p.as_posix() for p in ROOT.rglob("*.md") if not any(s.startswith(".") for s in p.parts)]
            assert any(p.endswith("/" + cited.lstrip("./")) for p in held), (
                f"{path.name} cites {cited}: not in the clone"
            )


def test_readme_lists_every_verify_report_field(tmp_path):
    """Regression: report fields had no units (`input_resolution`, `clamping`) and README listed few."""
    import json

    from kinetab.generator import cli

    rep = tmp_path / "r.json"
    cli.main(["build", str(ROOT / "generator/demos/larkspur.toml"), "-o", str(tmp_path / "g")])
    cli.main(["verify", str(ROOT / "generator/demos/larkspur.toml"), str(tmp_path / "g"), "--report", str(rep)])
    doc = json.loads(rep.read_text())
    readme = (ROOT / "README.md").read_text()
    for key in doc:
        assert f"`{key}`" in readme, key
    for key in ("input_resolution_a", "clamping_a", "split_a", "budget_a", "bound_a", "forward_mps2"):
        assert key in doc
