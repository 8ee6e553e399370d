"""The shipped pre-commit hook gates a firmware repository's commits: the `pre-commit` package (the
framework's own implementation, not ours) installs kinetab from a copy of this checkout into its own
environment and runs `kinetab-verify` on `git commit`, with the configuration README shows. A model
change without a rebuild stops the commit; the rebuilt C lets it through."""

from __future__ import annotations

import os
import re
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

import kinetab
from tests.helpers import invented_feasible, to_toml

ROOT = Path(__file__).resolve().parents[1]
SOURCE = (
    "pyproject.toml",
    "kinetab.py",
    "README.md",
    "LICENSE",
    ".pre-commit-hooks.yaml",
    "generator",
    "hil",
    "templates",
)
pytestmark = [
    pytest.mark.slow,
    pytest.mark.skipif(shutil.which("git") is None, reason="needs git"),
    pytest.mark.skipif(not (ROOT / ".pre-commit-hooks.yaml").exists(), reason="needs the source checkout"),
]
pre_commit = pytest.importorskip("pre_commit")


def _git(folder: Path, *args: str, env: dict[str, str], check: bool = True) -> subprocess.CompletedProcess[str]:
    return subprocess.run(["git", *args], cwd=folder, env=env, capture_output=True, text=True, check=check, timeout=900)


def _kinetab_copy(folder: Path, env: dict[str, str]) -> str:
    """This checkout's package sources as a one-commit git repository (what a team would point `repo:` at);
    returns the commit."""
    for name in SOURCE:
        src = ROOT / name
        copy = shutil.copytree if src.is_dir() else shutil.copy2
        copy(src, folder / name, **({"ignore": shutil.ignore_patterns("__pycache__")} if src.is_dir() else {}))
    _git(folder, "init", "-q", env=env)
    _git(folder, "add", ".", env=env)
    _git(folder, "commit", "-q", "-m", "kinetab sources", env=env)
    return _git(folder, "rev-parse", "HEAD", env=env).stdout.strip()


def _config(repo: Path, rev: str) -> str:
    """README's .pre-commit-config.yaml block with `repo:` and `rev:` pointing at the copy."""
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    found = [b for b in re.findall(r"^```yaml\n(.*?)^```", text, re.S | re.M) if "kinetab-verify" in b]
    assert len(found) == 1, "README shows one pre-commit configuration"
    config = re.sub(r"(- repo: )\S+", lambda m: m.group(1) + str(repo), found[0])
    return re.sub(r"(rev: )\S+", lambda m: m.group(1) + rev, config)


def _build(team: Path, env: dict[str, str]) -> None:
    """`kinetab build model/cart.toml -o firmware/gen` with the package under test."""
    parent = str(Path(kinetab.__file__).resolve().parent.parent)
    code = f"import sys; sys.path.insert(0, {parent!r}); import kinetab; sys.argv[0] = 'kinetab'; kinetab.main()"
    done = subprocess.run(
        [sys.executable, "-c", code, "build", "model/cart.toml", "-o", "firmware/gen"],
        cwd=team,
        env=env,
        capture_output=True,
        text=True,
        timeout=600,
    )
    assert done.returncode == 0, done.stderr


def test_hook_stops_a_stale_commit_and_passes_a_fresh_one(tmp_path):
    env = {
        **os.environ,
        "PRE_COMMIT_HOME": str(tmp_path / "pre-commit-home"),
        "GIT_AUTHOR_NAME": "t",
        "GIT_AUTHOR_EMAIL": "t@example.com",
        "GIT_COMMITTER_NAME": "t",
        "GIT_COMMITTER_EMAIL": "t@example.com",
        "GIT_CONFIG_GLOBAL": os.devnull,
        "GIT_CONFIG_NOSYSTEM": "1",
        "PATH": f"{Path(sys.executable).parent}{os.pathsep}{os.environ['PATH']}",
    }
    (source := tmp_path / "kinetab").mkdir()
    rev = _kinetab_copy(source, env)
    (team := tmp_path / "firmware-repo").mkdir()
    (team / "model").mkdir()
    doc, _ = invented_feasible(1601, "rover")
    (team / "model" / "cart.toml").write_text(to_toml(doc), encoding="utf-8")
    (team / ".pre-commit-config.yaml").write_text(_config(source, rev), encoding="utf-8")
    _build(team, env)
    _git(team, "init", "-q", env=env)
    hook = subprocess.run(
        [sys.executable, "-m", "pre_commit", "install"], cwd=team, env=env, capture_output=True, text=True
    )
    assert hook.returncode == 0, hook.stderr
    _git(team, "add", ".", env=env)
    first = _git(team, "commit", "-m", "model and its C", env=env, check=False)
    assert first.returncode == 0, first.stdout + first.stderr
    assert "kinetab verify" in first.stdout + first.stderr and "Passed" in first.stdout + first.stderr

    doc["body"]["mass"] = "123.5 kg"  # a model change without a rebuild
    (team / "model" / "cart.toml").write_text(to_toml(doc), encoding="utf-8")
    _git(team, "add", "model/cart.toml", env=env)
    stale = _git(team, "commit", "-m", "heavier body, C not rebuilt", env=env, check=False)
    assert stale.returncode != 0
    assert "Failed" in stale.stdout + stale.stderr and "stale" in stale.stdout + stale.stderr
    assert _git(team, "rev-list", "--count", "HEAD", env=env).stdout.strip() == "1"

    _build(team, env)
    _git(team, "add", ".", env=env)
    fresh = _git(team, "commit", "-m", "heavier body, C rebuilt", env=env, check=False)
    assert fresh.returncode == 0, fresh.stdout + fresh.stderr
    assert _git(team, "rev-list", "--count", "HEAD", env=env).stdout.strip() == "2"
