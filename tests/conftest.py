"""pytest options: --refresh-golden rewrites tests/golden/ from a fresh build (review the diff)."""

from __future__ import annotations


def pytest_addoption(parser):
    parser.addoption(
        "--refresh-golden",
        action="store_true",
        default=False,
        help="rewrite tests/golden/ from the current generator instead of comparing",
    )
