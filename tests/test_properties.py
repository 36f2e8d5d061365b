"""Property tests: generated valid profiles and hostile mutations of them through validate, stats and
a tiny compile; generated hostile bundles through verify, reproduce and apply.

Bounded and deterministic (``derandomize=True``, no example database) so that CI
stays fast and repeatable; tools/fuzz_hostile.py runs the same generators by the
thousand. Asserted: exit codes 0/1/2 only, never a traceback or internal error,
never a file read through a link, never a write inside a bundle.
"""

from __future__ import annotations

import tempfile
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import hostile
import profile_fuzz
from emucompile.cli import cli

ROOT = Path(__file__).resolve().parent.parent
FIXED = settings(derandomize=True, database=None, deadline=None, max_examples=40,
                 suppress_health_check=list(HealthCheck))


def invoke(args):
    result = CliRunner().invoke(cli, [str(a) for a in args])
    return result.exit_code, result.stdout, result.stderr


@FIXED
@given(profile_fuzz.hostile_profile_texts())
def test_generated_and_mutated_profiles_never_crash_validate_stats_or_compile(case):
    suffix, data = case
    with tempfile.TemporaryDirectory() as scratch:
        path = Path(scratch) / f"p{suffix}"
        path.write_bytes(data)
        problems = profile_fuzz.check_profile_text(path, Path(scratch), invoke)
    assert problems == [], (data[:300], problems)


@FIXED
@given(profile_fuzz.valid_profiles())
def test_generated_valid_profiles_validate_and_describe(document):
    import json

    with tempfile.TemporaryDirectory() as scratch:
        path = Path(scratch) / "p.json"
        path.write_text(json.dumps(document))
        code, _, stderr = invoke(["validate", path])
        assert code in (0, 2) and "internal" not in stderr, stderr
        if code == 0:
            code, _, stderr = invoke(["stats", path])
            assert code in (0, 1), stderr


@pytest.fixture(scope="module")
def intact(tmp_path_factory):
    where = tmp_path_factory.mktemp("intact")
    hostile.compile_intact(where)
    np.save(where / "rec.npy", np.ones(300, np.complex64))
    return where


NOT_BLOCKING = sorted(name for name in hostile.MUTATIONS if "FIFO" not in name and "64 MiB" not in name)


@settings(derandomize=True, database=None, deadline=None, max_examples=8,
          suppress_health_check=list(HealthCheck))
@given(st.lists(st.sampled_from(NOT_BLOCKING), min_size=1, max_size=3, unique=True))
def test_hostile_bundles_never_crash_a_reader_nor_change_the_bundle(intact, names):
    with tempfile.TemporaryDirectory() as scratch:
        scratch = Path(scratch)
        bundle, outside = hostile.apply_mutations(intact / "b", scratch, names)
        before = hostile.digest_tree(bundle)
        outside_before = hostile.digest_tree(outside)
        for command, args in hostile.commands(bundle, scratch, intact / "rec.npy").items():
            problem = hostile.judge(invoke(args))
            assert problem is None, (names, command, problem)
        assert hostile.digest_tree(bundle) == before
        assert hostile.digest_tree(outside) == outside_before
