"""The safe YAML 1.2 / JSON reader: core-schema values, refused tags, positions, bad files."""

from __future__ import annotations

import math
import os
import subprocess

import pytest

from emucompile.profile.reader import MAX_DEPTH, MAX_DOCUMENT_BYTES, parse_text, read_document


def value_of(text, format="yaml"):
    document = parse_text(text, format=format)
    assert document.readable and not document.problems, [p.format() for p in document.problems]
    return document.value


def problems_of(text, format="yaml"):
    return parse_text(text, format=format).problems


# -- YAML 1.2 core schema (YAML 1.2.2 section 10.3.2) ------------------------------------


@pytest.mark.parametrize(
    "text, expected",
    [
        ("2.6e9", 2.6e9),          # YAML 1.1 loaders read this as a string
        ("30.72e6", 30.72e6),
        ("1e3", 1000.0),
        ("-.5", -0.5),
        ("1.", 1.0),
        ("+12", 12),
        ("0o17", 15),
        ("0x1F", 31),
        ("012", 12),               # decimal in 1.2, octal in 1.1
        ("1_000", "1_000"),        # no underscores in 1.2 numbers
        ("no", "no"),              # the Norway problem: a string in 1.2
        ("yes", "yes"),
        ("on", "on"),
        ("off", "off"),
        ("y", "y"),
        ("true", True),
        ("False", False),
        ("TRUE", True),
        ("null", None),
        ("~", None),
        ("", None),
        ("12:30", "12:30"),        # sexagesimal in 1.1, a string in 1.2
        ("2026-12-02", "2026-12-02"),  # no timestamps in the core schema
        ("'3'", "3"),
        ('"true"', "true"),
    ],
)
def test_yaml_12_core_schema_scalars(text, expected):
    value = value_of(f"x: {text}\n")["x"]
    assert value == expected and type(value) is type(expected)


def test_yaml_non_finite_literals_are_read_as_floats():
    # Refusing them is the profile checker's job (it names the pointer); the reader keeps them.
    value = value_of("a: .inf\nb: -.Inf\nc: .nan\n")
    assert value["a"] == math.inf and value["b"] == -math.inf and math.isnan(value["c"])


@pytest.mark.parametrize(
    "text, expected",
    [("!!str 2.6e9", "2.6e9"), ("!!float 3", 3.0), ("!!int '12'", 12), ("! 12", "12"),
     ("!!null ''", None), ("!!bool 'true'", True)],
)
def test_explicit_core_tags(text, expected):
    value = value_of(f"x: {text}\n")["x"]
    assert value == expected and type(value) is type(expected)


@pytest.mark.parametrize("text", ["!!int 'twelve'", "!!bool yes", "!!float abc"])
def test_explicit_core_tag_with_a_value_it_cannot_hold(text):
    (problem,) = problems_of(f"x: {text}\n")
    assert problem.pointer == "/x" and "not a valid" in problem.message


@pytest.mark.parametrize(
    "tag",
    ["!!python/object:os.system", "!!python/object/apply:os.system", "!!python/name:os.system",
     "!!binary", "!!timestamp", "!!set", "!!omap", "!custom", "!<tag:example.com,2000:x>"],
)
def test_tags_outside_the_core_schema_are_refused(tag):
    problems = problems_of(f"x: {tag} abc\n")
    assert len(problems) == 1
    assert problems[0].pointer == "/x" and "is not allowed" in problems[0].message
    assert (problems[0].line, problems[0].column) == (1, 4)


def test_nothing_in_a_document_is_ever_executed(tmp_path, monkeypatch):
    marker = tmp_path / "executed"
    calls = []
    monkeypatch.setattr(os, "system", lambda *a: calls.append(a))
    monkeypatch.setattr(subprocess, "Popen", lambda *a, **k: calls.append(a))
    text = (
        f"a: !!python/object/apply:os.system ['touch {marker}']\n"
        f"b: !!python/object/apply:subprocess.Popen [['touch', '{marker}']]\n"
        f"c: !!python/object/new:os.system ['touch {marker}']\n"
        "d: !!python/name:os.system\n"
    )
    problems = problems_of(text)
    assert {p.pointer for p in problems} == {"/a", "/b", "/c", "/d"}
    assert not marker.exists() and calls == []


def test_duplicate_keys_give_both_positions():
    (problem,) = problems_of("a: 1\nb: 2\na: 3\n")
    assert problem.pointer == "/a" and (problem.line, problem.column) == (3, 1)
    assert "first at line 1, column 1" in problem.message


def test_duplicate_keys_in_json_are_errors():
    document = parse_text('{"a": 1,\n "a": 2}', format="json")
    (problem,) = document.problems
    assert problem.pointer == "/a" and problem.line == 2 and "duplicate key 'a'" in problem.message
    assert document.value == {"a": 1}  # the first one is kept


def test_alias_bomb_is_stopped():
    levels = ["a0: &a0 [x, x, x, x, x, x, x, x, x, x]"]
    for i in range(1, 9):
        refs = ", ".join([f"*a{i - 1}"] * 10)
        levels.append(f"a{i}: &a{i} [{refs}]")
    document = parse_text("\n".join(levels) + "\n")
    assert not document.readable
    (problem,) = document.problems
    assert "too many aliases" in problem.message and problem.line is not None


def test_ordinary_aliases_are_expanded_with_positions():
    document = parse_text("base: &t {power_db: -3}\ntaps: [*t, *t]\n")
    assert document.value["taps"] == [{"power_db": -3}, {"power_db": -3}]
    assert document.value["taps"][0] is not document.value["taps"][1]
    assert document.locate("/taps/1/power_db") == (1, 21)


def test_unknown_alias():
    (problem,) = problems_of("a: *nowhere\n")
    assert "unknown alias" in problem.message


def test_nesting_depth_is_capped_in_yaml_and_json():
    deep = "[" * (MAX_DEPTH + 5) + "]" * (MAX_DEPTH + 5)
    for format in ("yaml", "json"):
        document = parse_text(deep, format=format)
        assert not document.readable and "nested deeper" in document.problems[0].message
    very_deep = "[" * 100_000 + "]" * 100_000  # beyond the json module's recursion limit
    document = parse_text(very_deep, format="json")
    assert not document.readable and "nested deeper" in document.problems[0].message


def test_non_string_keys_are_refused():
    (problem,) = problems_of("? [1, 2]\n: 3\n")
    assert "mapping key" in problem.message


def test_a_second_document_is_refused():
    document = parse_text("a: 1\n---\na: 2\n")
    assert not document.readable and document.problems[0].line == 2


@pytest.mark.parametrize("text, line, column", [("a: [1, 2\nb: 3\n", 2, 2), ("a: b: c\n", 1, 5)])
def test_yaml_syntax_errors_have_line_and_column(text, line, column):
    (problem,) = problems_of(text)
    assert "YAML syntax error" in problem.message
    assert (problem.line, problem.column) == (line, column)


def test_json_syntax_errors_have_json_line_and_column():
    (problem,) = problems_of('{\n  "a": 1,\n  "b": }\n', format="json")
    assert "JSON syntax error" in problem.message and (problem.line, problem.column) == (3, 8)


@pytest.mark.parametrize("text", ['{"a": NaN}', '{"a": Infinity}', '{"a": -Infinity}'])
def test_json_nan_and_infinity_are_refused(text):
    (problem,) = problems_of(text, format="json")
    assert problem.pointer == "/a" and "is not a JSON number" in problem.message


@pytest.mark.parametrize("format", ["yaml", "json"])
@pytest.mark.parametrize("number", ["1e999", "-1e400", "1" + "0" * 400])
def test_numbers_too_large_for_a_float_are_refused(format, number):
    text = f'{{"a": {number}}}'
    (problem,) = problems_of(text, format=format)
    assert problem.pointer == "/a" and "too large" in problem.message and problem.column == 7


def test_large_integers_that_fit_a_float_are_kept_exactly():
    assert value_of("seed: 18446744073709551615\n")["seed"] == 2**64 - 1


def test_json_escaped_surrogate_pairs_make_one_character():
    assert value_of('{"a": "\\ud83d\\ude00"}', format="json") == {"a": "\U0001F600"}
    (problem,) = problems_of('{"a": "\\ud800"}', format="json")
    assert "surrogate" in problem.message


def test_json_keys_longer_than_yaml_allows_still_read():
    key = "k" * 1100
    document = parse_text(f'{{"{key}": 1, "{key}": 2}}', format="json")
    assert document.readable and document.value == {key: 1}
    assert "duplicate key" in document.problems[0].message


def test_control_characters_are_refused_with_their_place():
    (problem,) = problems_of("a: 1\nb: \x07\n")
    assert (problem.line, problem.column) == (2, 4)


# -- files ---------------------------------------------------------------------------


def test_missing_file(tmp_path):
    (problem,) = read_document(tmp_path / "absent.yaml").problems
    assert "no such file" in problem.message and problem.file.endswith("absent.yaml")


def test_directory(tmp_path):
    assert "directory" in read_document(tmp_path).problems[0].message


@pytest.mark.parametrize("content", [b"", b"   \n\n"])
def test_empty_file(tmp_path, content):
    path = tmp_path / "empty.yaml"
    path.write_bytes(content)
    assert "empty" in read_document(path).problems[0].message


def test_only_comments(tmp_path):
    path = tmp_path / "c.yaml"
    path.write_text("# nothing here\n")
    assert "no document" in read_document(path).problems[0].message


def test_non_utf8_names_the_byte_offset_and_place(tmp_path):
    path = tmp_path / "latin1.yaml"
    path.write_bytes("name: x\ndescription: caf\xe9\n".encode("latin-1"))
    (problem,) = read_document(path).problems
    assert "byte offset 24" in problem.message and "0xe9" in problem.message
    assert (problem.line, problem.column) == (2, 17)


def test_utf8_byte_order_mark_is_accepted(tmp_path):
    path = tmp_path / "bom.json"
    path.write_bytes(b'\xef\xbb\xbf{"a": 1}')
    assert read_document(path).value == {"a": 1}


def test_oversized_file(tmp_path):
    path = tmp_path / "big.yaml"
    path.write_bytes(b"# " + b"x" * MAX_DOCUMENT_BYTES + b"\n")
    (problem,) = read_document(path).problems
    assert "1024 KiB limit" in problem.message


def test_format_is_guessed_from_the_name_and_then_the_text(tmp_path):
    for name, text, expected in [("a.json", "{}", "json"), ("a.yml", "{}", "yaml"),
                                 ("a.txt", "{}", "json"), ("a.txt", "a: 1", "yaml")]:
        path = tmp_path / name
        path.write_text(text)
        assert read_document(path).format == expected
