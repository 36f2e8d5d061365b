"""The profile's JSON Schema: loaded once, run, and its errors worded for a person.

:func:`profile_schema` is the schema of ``format_version: 1`` as shipped in the
package (``emucompile/schemas/profile-v1.schema.json``, a copy in ``schemas/``);
:func:`_schema_problems` turns each schema error into a :class:`~emucompile.errors.Problem`
placed in the document (unknown keys with a "did you mean", types, ranges, enums).
"""

from __future__ import annotations

import difflib
import functools
import importlib.resources
import json

from emucompile._lazy import LazyModule
from emucompile.errors import Problem
from emucompile.profile.reader import pointer_join, pointer_tokens

# Imported when a profile is first checked (a few tenths of a second), not at start-up.
jsonschema = LazyModule("jsonschema")


SCHEMA_RESOURCE = "schemas/profile-v1.schema.json"
SCHEMA_ID = "https://emucompile.invalid/schemas/profile-v1.schema.json"


@functools.lru_cache(maxsize=1)
def _schema_text() -> str:
    return importlib.resources.files("emucompile").joinpath(SCHEMA_RESOURCE).read_text("utf-8")


def profile_schema() -> dict:
    """The JSON Schema (draft 2020-12) of format_version 1, read from the installed package."""
    return json.loads(_schema_text())


# -- helpers: schema -------------------------------------------------------------------


@functools.lru_cache(maxsize=1)
def _validator():
    # Built once a process. The shipped schema is checked against the metaschema by
    # tests/test_schema.py, not on every run (that check cost ~0.3 s of each command).
    return jsonschema.Draft202012Validator(profile_schema())


def _schema_problems(document, value, flagged) -> list[Problem]:
    problems, seen = [], set()
    for error in _validator().iter_errors(value):
        pointer = "".join(pointer_join("", t) for t in error.absolute_path)
        if any(pointer == f or pointer.startswith(f + "/") for f in flagged):
            continue
        for problem in _describe_schema_error(document, error, pointer):
            identity = (problem.pointer, problem.message)
            if identity not in seen:
                seen.add(identity)
                problems.append(problem)
    return problems


_TYPE_WORDS = {
    "object": "a mapping", "array": "a list", "string": "text", "number": "a number",
    "integer": "a whole number", "boolean": "true or false", "null": "null",
}


def _describe_schema_error(document, error, pointer):
    kind, instance, expected = error.validator, error.instance, error.validator_value
    where = _field_name(pointer)
    if kind == "additionalProperties":
        allowed = sorted(error.schema.get("properties", {}))
        for key in instance:
            if key not in allowed:
                yield document.problem(pointer_join(pointer, key), f"unknown key {key!r}",
                                       _did_you_mean(key, allowed), key=True)
        return
    if kind == "required":
        for key in expected:
            if key not in instance:
                hint = "or build on a preset: extends: NAME (see emucompile presets list)" \
                    if key == "taps" and not pointer else None
                yield document.problem(pointer, f"missing required key {key!r}", hint)
        return
    if kind == "type":
        types = [expected] if isinstance(expected, str) else expected
        wanted = " or ".join(_TYPE_WORDS.get(t, t) for t in types)
        got = _describe_value(instance)
        message = f"{where} must be {wanted}, not {got}"
        hint = None
        if isinstance(instance, str) and ("number" in types or "integer" in types):
            hint = "write the number without quotes or units"
        yield document.problem(pointer, message, hint)
        return
    if kind == "enum":
        choices = [str(c) for c in expected]
        yield document.problem(
            pointer,
            f"{where} must be one of {', '.join(choices)}, not {_describe_value(instance)}",
            _did_you_mean(str(instance), choices, list_all=False),
        )
        return
    if kind == "const":
        hint = "this program reads format_version 1" if where == "format_version" else None
        yield document.problem(pointer, f"{where} must be {expected!r}, not {_describe_value(instance)}", hint)
        return
    bounds = {"minimum": ">=", "maximum": "<=", "exclusiveMinimum": ">", "exclusiveMaximum": "<"}
    if kind in bounds:
        yield document.problem(pointer, f"{where} must be {bounds[kind]} {_number_text(expected)}, "
                               f"not {_number_text(instance)}")
        return
    if kind == "minItems":
        yield document.problem(pointer, f"{where} needs at least {expected} item(s)")
        return
    if kind == "pattern" and where == "name":
        yield document.problem(pointer, f"{instance!r} is not a valid name",
                               "use lower-case letters, digits, '.', '_' and '-', starting with "
                               "a letter or digit")
        return
    if kind == "maxLength":
        yield document.problem(pointer, f"{where} is longer than {expected} characters")
        return
    yield document.problem(pointer, f"{where}: {error.message}")  # pragma: no cover - fallback


def _field_name(pointer: str) -> str:
    tokens = pointer_tokens(pointer)
    return tokens[-1] if tokens and not tokens[-1].isdigit() else (pointer or "the document")


def _describe_value(value) -> str:
    if value is None:
        return "null"
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        return f"the text {value[:40]!r}" + ("..." if len(value) > 40 else "")
    if isinstance(value, dict):
        return "a mapping"
    if isinstance(value, list):
        return "a list"
    return _number_text(value)


def _number_text(value) -> str:
    if isinstance(value, float) and value.is_integer() and abs(value) < 1e16:
        return str(int(value))
    return repr(value) if isinstance(value, float) else str(value)


def _did_you_mean(key: str, allowed, *, list_all: bool = True) -> str | None:
    if key == "<<":
        return "YAML merge keys are not part of YAML 1.2; write the keys out"
    close = difflib.get_close_matches(key, allowed, n=1, cutoff=0.6)
    if close:
        return f"did you mean {close[0]!r}?"
    if list_all and len(allowed) <= 30:
        return "allowed here: " + ", ".join(allowed)
    return None
