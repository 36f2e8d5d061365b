"""The demo bundles keep their bytes: same profile, seed and generator version on
the same library versions give the same data files (README, "The bundle").

The record comes from ``tools/record_demo_bytes.py``; a change meant to alter
the numbers bumps ``GENERATOR_VERSION`` and re-records (the tool names the files
that changed). Another numpy/scipy version may round differently: the promise
there is "within tolerance", so the test skips with the versions named.
"""
import importlib.util
import json
from pathlib import Path

import numpy
import pytest
import scipy

import emucompile

ROOT = Path(__file__).resolve().parents[2]
RECORD = json.loads((ROOT / "tests" / "data" / "demo_bytes.json").read_text())


def _tool():
    spec = importlib.util.spec_from_file_location("record_demo_bytes",
                                                  ROOT / "tools" / "record_demo_bytes.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def test_demo_bundles_have_their_recorded_bytes():
    if (numpy.__version__, scipy.__version__) != (RECORD["numpy"], RECORD["scipy"]):
        pytest.skip(f"recorded with numpy {RECORD['numpy']} / scipy {RECORD['scipy']}, "
                    f"running {numpy.__version__} / {scipy.__version__}")
    assert emucompile.GENERATOR_VERSION == RECORD["generator_version"], (
        "the generator version changed: re-record with tools/record_demo_bytes.py "
        "and say in the commit which demos' bytes changed and why")
    now = _tool().demo_hashes()
    assert sorted(now["demos"]) == sorted(RECORD["demos"])
    for demo, rec in RECORD["demos"].items():
        assert now["demos"][demo]["files"] == rec["files"], demo
