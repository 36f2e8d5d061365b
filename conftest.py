"""pytest set-up shared by the tests and the package's doctests."""

from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent


@pytest.fixture(autouse=True)
def _doctests_run_from_the_repository_root(request, monkeypatch):
    """Doctest examples name demo files by their path from the repository root (``profiles_demo/...``)."""
    if isinstance(request.node, pytest.DoctestItem):
        monkeypatch.chdir(ROOT)


# Property tests are deterministic (fixed seeds, no example database): the same examples on
# every run and in CI, so a failure is reproducible and never a matter of luck. Every input
# that once broke the tool stays as an explicit regression test beside its property.
from hypothesis import settings  # noqa: E402

settings.register_profile("deterministic", derandomize=True, database=None, deadline=None)
settings.load_profile("deterministic")

# Tests live in subfolders mirroring the package (tests/<subpackage>/test_<module>.py); their
# shared helpers (profile_helpers, bundle_factory, ...) stay in tests/ and are imported by name.
import sys  # noqa: E402

sys.path.insert(0, str(ROOT / "tests"))
