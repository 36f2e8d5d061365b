"""Small builders shared by the profile, validate and stats tests."""

from __future__ import annotations

import copy
import json

from click.testing import CliRunner

from emucompile.cli import cli
from emucompile.profile.model import check_profile_text

ROOT = __import__("pathlib").Path(__file__).resolve().parent.parent
DEMO_PROFILES = sorted(p for p in (ROOT / "profiles_demo").glob("*.*") if "campaign" not in p.name)
"""The demo profiles (the demo campaign plans, ``*campaign*.yml``, are not profiles)."""

BASE = {
    "format_version": 1,
    "name": "unit-test",
    "description": "invented test profile",
    "max_doppler_hz": 100,
    "taps": [
        {"delay_ns": 0, "power_db": 0},
        {"delay_ns": 100, "power_db": -3},
    ],
}


def profile_dict(**changes) -> dict:
    """BASE with top-level keys replaced (a value of None removes the key)."""
    document = copy.deepcopy(BASE)
    for key, value in changes.items():
        if value is None:
            document.pop(key, None)
        else:
            document[key] = value
    return document


def with_taps(*taps, **changes) -> dict:
    return profile_dict(taps=list(taps), **changes)


def check(document: dict):
    """(profile, problems) of a document written as JSON."""
    return check_profile_text(json.dumps(document), filename="t.json", format="json")


def errors(document: dict) -> list:
    return [p for p in check(document)[1] if p.severity == "error"]


def warnings(document: dict) -> list:
    return [p for p in check(document)[1] if p.severity == "warning"]


def containers(node, found=None) -> list:
    """Every dict and list inside ``node`` (itself included), for damaging documents at random."""
    found = [] if found is None else found
    if isinstance(node, (dict, list)):
        found.append(node)
        for child in (node.values() if isinstance(node, dict) else node):
            containers(child, found)
    return found


def run(*args):
    """Invoke the command line in-process; returns click's Result."""
    return CliRunner().invoke(cli, [str(a) for a in args])


def assert_clean_failure(result, *, code=2):
    """Exit code as asked, no traceback, no internal error."""
    assert result.exit_code == code, result.output
    assert "Traceback" not in result.output
    assert "internal error" not in result.output


# TDL-C (TR 38.901 Table 7.7.2-3) at 100 ns into 8 paths at 30.72 MHz: the fit drops 6 taps, 100 -> 62.6 ns
FIT_EXAMPLE = """\
format_version: 1
name: fit-example
description: Invented example (not a measurement) of a target that cannot hold the profile's delay spread.
extends: {preset: tdl-c, delay_spread_ns: 100}
speed_kmh: 30
carrier_hz: 3.5e9
target: {sample_rate_hz: 30.72e6, max_paths: 8, coefficient_bits: 12}
"""
