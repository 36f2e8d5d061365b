"""Start-up: light commands do not import the heavy modules (structural, not timed).

Timing lives in benchmarks/bench_startup.py; here each command runs in a fresh
interpreter and the test reads ``sys.modules`` afterwards. scipy.stats alone
costs about a second to import on a small machine, matplotlib more.
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

from profile_helpers import DEMO_PROFILES

ROOT = Path(__file__).resolve().parent.parent
DEMOS = [str(p.relative_to(ROOT)) for p in DEMO_PROFILES]

# Never needed to read, check or describe a profile on the command line.
NEVER = ("matplotlib", "emucompile.verify.run", "emucompile.report.figures", "emucompile.report.html")
# Not needed either: validate checks a profile's compile: block with compile's rules in closed form
# (emucompile.compile.rules.compile_findings: sizes, rates and filter lengths from emucompile.models.rates,
# the formulas the planner and the engine use), without the planner, the engine or scipy's filters.
HEAVY = NEVER + ("scipy.stats", "scipy.signal", "scipy.optimize", "scipy.integrate",
                 "emucompile.models.fading", "emucompile.compile.compiler", "emucompile.bundle.store")
# What still loads some: an expect: target is checked against the profile's statistics (numpy), and
# a target: block is fitted (its costs use scipy's Kaiser and Gaussian functions). The strict xfails
# below mark those gaps.
STATISTICS_GAP = pytest.mark.xfail(strict=True, reason="validate checks expect: targets with the profile's "
                                   "statistics (numpy)")
FIT_GAP = pytest.mark.xfail(strict=True, reason="validate fits a target: block (scipy's Kaiser and Gaussian "
                            "functions in the fit's costs)")


def _text(demo):
    return (ROOT / demo).read_text(encoding="utf-8")


def _has_expect(demo):
    return "\nexpect:" in _text(demo) or '"expect":' in _text(demo)


_PROBE = """
import json, sys
args = json.loads(sys.argv[1])
if args:
    from emucompile.cli import main
    sys.argv = ["emucompile", *args]
    try:
        main()
    except SystemExit as stop:
        code = stop.code
else:
    import emucompile.cli
    code = 0
print(json.dumps({"code": code, "modules": sorted(sys.modules)}), file=sys.__stderr__)
"""


def _loaded_after(*args):
    result = subprocess.run([sys.executable, "-c", _PROBE, json.dumps(list(args))], cwd=ROOT,
                            capture_output=True, text=True, env=_env(), timeout=120, check=False)
    report = json.loads(result.stderr.strip().splitlines()[-1])
    return report["code"], set(report["modules"])


def _env():
    import os

    env = dict(os.environ)
    env["PYTHONPATH"] = str(ROOT) + os.pathsep + env.get("PYTHONPATH", "")
    return env


def test_importing_the_command_line_imports_nothing_numeric():
    code, modules = _loaded_after()
    assert code == 0
    assert not {m for m in modules if m.split(".")[0] in ("numpy", "scipy", "matplotlib", "jsonschema")}


def test_version_imports_nothing_numeric():
    code, modules = _loaded_after("--version")
    assert code == 0
    assert not {m for m in modules if m.split(".")[0] in ("numpy", "scipy", "matplotlib", "jsonschema")}


@pytest.mark.parametrize("demo", DEMOS)
def test_validate_imports_no_plots(demo):
    code, modules = _loaded_after("validate", demo)
    assert code == 0
    assert not [m for m in NEVER if m in modules]


@pytest.mark.parametrize("demo", DEMOS)
def test_validate_imports_no_engine_planner_or_scipy_filters(demo):
    code, modules = _loaded_after("validate", demo)
    assert code == 0
    assert not [m for m in HEAVY if m in modules]


@pytest.mark.parametrize("demo", [pytest.param(d, marks=STATISTICS_GAP) if _has_expect(d) else d
                                  for d in DEMOS if "\nmimo:" not in _text(d)])
def test_validate_without_a_mimo_block_does_not_import_numpy(demo):
    # Only the correlation matrices of a mimo block need numpy to be checked.
    code, modules = _loaded_after("validate", demo)
    assert code == 0 and "numpy" not in modules


@FIT_GAP
def test_validate_of_a_profile_with_a_target_block_imports_no_statistics(tmp_path):
    # The target: block is checked (schema and semantics) without scipy's filters or statistics.
    text = _text("profiles_demo/warehouse-robot.yaml")
    text += "target:\n  sample_rate_hz: 30.72e6\n  max_fir_coefficients: 256\n  coefficient_bits: 16\n"
    path = tmp_path / "with-target.yaml"
    path.write_text(text, encoding="utf-8")
    code, modules = _loaded_after("validate", str(path))
    assert code == 0
    assert "emucompile.profile.target" in modules  # the block was really checked
    assert not [m for m in HEAVY if m in modules]


@pytest.mark.parametrize("args", [("presets", "list"), ("presets", "list", "--json"), ("presets", "show", "tdl-d")])
def test_the_presets_commands_import_no_scipy(args):
    # Delay statistics of a table need numpy at most; no root finding, filters or statistics.
    code, modules = _loaded_after(*args)
    assert code == 0
    assert not [m for m in modules if m.split(".")[0] in ("scipy", "matplotlib")]
    assert not [m for m in HEAVY if m in modules]
