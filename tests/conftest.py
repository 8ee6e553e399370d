"""pytest options: --refresh-golden rewrites tests/golden/ from a fresh build (review the diff). Every
test run keeps its compiled templates in its own folder, not the user's cache."""

from __future__ import annotations

import pytest


def pytest_addoption(parser):
    parser.addoption(
        "--refresh-golden",
        action="store_true",
        default=False,
        help="rewrite tests/golden/ from the current generator instead of comparing",
    )


@pytest.fixture(autouse=True, scope="session")
def _own_template_cache(tmp_path_factory):
    """The run's compiled templates in a folder of its own (the CLI's subprocesses inherit it)."""
    mp = pytest.MonkeyPatch()
    mp.setenv("KINETAB_TEMPLATE_CACHE", str(tmp_path_factory.mktemp("template_cache")))
    yield
    mp.undo()
