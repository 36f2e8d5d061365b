"""The JSON Schema of format_version 1: shipped in the package, its one home, well described."""

from __future__ import annotations

import importlib.resources
import json
from pathlib import Path

import jsonschema
import pytest

from emucompile.profile.model import EXPECT_QUANTITIES, SCHEMA_ID, expect_keys, profile_schema

ROOT = Path(__file__).resolve().parents[2]
PACKAGED = importlib.resources.files("emucompile").joinpath("schemas/profile-v1.schema.json")


def test_every_format_schema_has_one_home_in_the_package():
    """The formats' schemas live in emucompile/schemas/ only (what the code reads and the wheel ships);
    schemas/ at the repository root holds the --json output schemas, which no code reads."""
    assert sorted(p.name for p in (ROOT / "schemas").glob("*.json")) == []
    assert PACKAGED.is_file()


def test_schema_is_valid_draft_2020_12_with_a_versioned_id():
    schema = profile_schema()
    assert schema["$schema"] == "https://json-schema.org/draft/2020-12/schema"
    jsonschema.Draft202012Validator.check_schema(schema)
    assert schema["$id"] == SCHEMA_ID and "-v1." in schema["$id"]
    assert schema["properties"]["format_version"] == {
        "const": 1, "description": schema["properties"]["format_version"]["description"]}


def _properties(node, path=""):
    """Every (path, property schema) below a schema node, through $defs too."""
    if isinstance(node, dict):
        for name, child in node.get("properties", {}).items():
            yield f"{path}/{name}", child
        for key, child in node.items():
            if key in ("properties", "$defs") and isinstance(child, dict):
                for name, grandchild in child.items():
                    yield from _properties(grandchild, f"{path}/{name}")
            elif isinstance(child, dict):
                yield from _properties(child, f"{path}/{key}")


def _described(prop, schema):
    """A property's description: its own, or that of the definition its local "$ref" names."""
    while not prop.get("description") and prop.get("$ref", "").startswith("#/"):
        target = schema
        for token in prop["$ref"][2:].split("/"):
            target = target[token]
        prop = target
    return prop.get("description")


def test_every_property_has_a_description():
    schema = profile_schema()
    missing = [path for path, prop in _properties(schema) if not _described(prop, schema)]
    assert missing == []


def test_every_object_refuses_unknown_keys_and_the_schema_has_examples():
    schema = profile_schema()
    objects = [schema, schema["properties"]["expect"],
               *(d for d in schema["$defs"].values() if "object" in d.get("type", ()))]
    assert all(o.get("additionalProperties") is False for o in objects)
    assert schema["examples"] and schema["$defs"]["target"]["examples"]
    for example in schema["examples"]:
        jsonschema.Draft202012Validator(schema).validate(example)


def test_schema_expect_keys_are_the_ones_the_loader_knows():
    assert set(profile_schema()["properties"]["expect"]["properties"]) == set(expect_keys())
    assert len(expect_keys()) == sum(len(units) for _, units in EXPECT_QUANTITIES.values())


def test_the_blocks_are_described_in_full():
    schema = profile_schema()
    for key in ("extends", "preset", "mimo", "target", "conditions"):
        assert "not supported yet" not in json.dumps(schema["properties"][key])
        assert schema["properties"][key]["$ref"].startswith("#/$defs/")


@pytest.mark.parametrize("name", ["quay-crane-telemetry", "a", "epa.5hz", "tdl_c-300"])
def test_name_pattern_accepts(name):
    jsonschema.validate(name, profile_schema()["properties"]["name"])


@pytest.mark.parametrize("name", ["", "Upper", "with space", "-lead", "ünï"])
def test_name_pattern_refuses(name):
    with pytest.raises(jsonschema.ValidationError):
        jsonschema.validate(name, profile_schema()["properties"]["name"])


def test_schema_file_is_plain_json_without_nan():
    json.loads(PACKAGED.read_text("utf-8"), parse_constant=lambda c: pytest.fail(c))
