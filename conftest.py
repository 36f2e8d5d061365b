"""pytest set-up shared by the tests and the package's doctests."""

from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent


@pytest.fixture(autouse=True)
def _doctests_run_from_the_repository_root(request, monkeypatch):
    """Doctest examples name demo files by their path from the repository root (``profiles_demo/...``)."""
    if isinstance(request.node, pytest.DoctestItem):
        monkeypatch.chdir(ROOT)
