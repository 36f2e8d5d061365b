"""Every command's --json output validates against its documented schema (schemas/output/)."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from jsonschema import Draft202012Validator

from emucompile.cli import cli

ROOT = Path(__file__).resolve().parent.parent
SCHEMAS = ROOT / "schemas" / "output"
ROBOT = ROOT / "profiles_demo" / "warehouse-robot.yaml"


def _json(schema_name, *args, exit_codes=(0,)):
    result = CliRunner().invoke(cli, [str(a) for a in args], catch_exceptions=False)
    assert result.exit_code in exit_codes, result.output
    document = json.loads(result.stdout, parse_constant=lambda c: pytest.fail(f"{c} in strict JSON"))
    schema = json.loads((SCHEMAS / f"{schema_name}.schema.json").read_text(encoding="utf-8"))
    Draft202012Validator.check_schema(schema)
    errors = sorted(Draft202012Validator(schema).iter_errors(document), key=lambda e: list(e.path))
    assert not errors, [f"{list(e.path)}: {e.message}" for e in errors[:5]]
    return document


def test_every_output_schema_is_documented_and_valid():
    documented = (ROOT / "docs" / "json-output.md").read_text(encoding="utf-8")
    names = sorted(p.name for p in SCHEMAS.glob("*.schema.json"))
    assert names == ["apply.schema.json", "compile.schema.json", "diff.schema.json", "presets-list.schema.json",
                     "reproduce.schema.json", "validate.schema.json"]
    for name in names:
        Draft202012Validator.check_schema(json.loads((SCHEMAS / name).read_text(encoding="utf-8")))
        assert f"schemas/output/{name}" in documented, name


def test_the_outputs_validate(tmp_path):
    bad = tmp_path / "bad.yaml"
    bad.write_text(ROBOT.read_text(encoding="utf-8").replace("format_version: 1", "format_version: 9"), encoding="utf-8")
    document = _json("validate", "validate", ROBOT, bad, "--json", exit_codes=(2,))
    assert [f["verdict"] for f in document["files"]] == ["valid", "invalid"]
    compiled = _json("compile", "compile", ROBOT, "-o", tmp_path / "b", "--duration", 1, "--seed", 2,
                     "--sample-rate", 10e6, "--format", "cf32", "--json")
    assert compiled["seed"] == 2 and compiled["sources"]["seed"] == "option"
    reproduced = _json("reproduce", "reproduce", tmp_path / "b", "--json")
    assert reproduced["status"] == "identical" and len(reproduced["files"]) == len(compiled["files"])
    np.save(tmp_path / "x.npy", np.ones(2000, np.complex64))
    applied = _json("apply", "apply", tmp_path / "b", tmp_path / "x.npy", "-o", tmp_path / "y.npy",
                    "--sample-rate", 10e6, "--json")
    assert applied["n_samples"] == 2000
    compared = _json("diff", "diff", tmp_path / "b", ROBOT, "--json")
    assert compared["same_channel"] is True and compared["same_bytes"] is None
    listed = _json("presets-list", "presets", "list", "--json")
    assert len(listed) >= 12
