"""``emucompile validate`` and ``stats`` as a user meets them: bad inputs, exit codes, no tracebacks."""

from __future__ import annotations

import copy
import json
import re
import subprocess
import sys
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from profile_helpers import BASE, assert_clean_failure, containers, run

ROOT = Path(__file__).resolve().parents[2]
# the demo campaign plans (*campaign*.yml) are not profiles
DEMOS = sorted(p for p in (ROOT / "profiles_demo").iterdir() if "campaign" not in p.name)
LOCATED = re.compile(r"^(?P<file>.+?):(?P<line>\d+):(?P<column>\d+): (?P<pointer>/\S*): ")

GOOD_YAML = """\
format_version: 1
name: good
max_doppler_hz: 50
taps:
  - {delay_ns: 0, power_db: 0}
  - {delay_ns: 80, power_db: -4}
"""

# Point 6 of the profile issue: each bad input, the text of the file, and the
# line:column one of the messages must point at (None where the whole file is at fault).
BAD_INPUTS = {
    "broken-yaml": ("x.yaml", "format_version: 1\ntaps: [1, 2\nname: a\n", (3, 5)),
    "broken-json": ("x.json", '{"format_version": 1,\n "taps": [}\n', (2, 11)),
    "alias-bomb": ("x.yaml", "a: &a [x, x, x, x, x, x, x, x, x, x]\n" + "".join(
        f"a{i}: &a{i} [{', '.join(['*a' + ('' if i == 1 else str(i - 1))] * 10)}]\n"
        for i in range(1, 7)), None),
    "duplicate-key-yaml": ("x.yaml", GOOD_YAML + "name: again\n", (7, 1)),
    "duplicate-key-json": ("x.json", '{"format_version": 1, "name": "a",\n "name": "b", "taps": []}', (2, 2)),
    "number-too-large": ("x.yaml", GOOD_YAML.replace("max_doppler_hz: 50", "max_doppler_hz: 1e999"), (3, 17)),
    "huge-integer": ("x.json", '{"format_version": 1, "name": "a", "max_doppler_hz": 1' + "0" * 400 + "}", (1, 54)),
    "nan-json": ("x.json", '{"format_version": 1, "name": "a",\n "max_doppler_hz": NaN, "taps": []}', (2, 20)),
    "infinity-json": ("x.json", '{"format_version": 1, "name": "a",\n "max_doppler_hz": -Infinity, "taps": []}', (2, 20)),
    "nan-yaml": ("x.yaml", GOOD_YAML.replace("power_db: -4", "power_db: .nan"), (6, 30)),
    "wrong-type": ("x.yaml", GOOD_YAML.replace("power_db: -4", "power_db: [4]"), (6, 30)),
    "unknown-key": ("x.yaml", GOOD_YAML + "max_dopler_hz: 3\n", (7, 1)),
    "python-tag": ("x.yaml", GOOD_YAML + "x: !!python/object/apply:os.system ['echo hi']\n", (7, 4)),
    "empty": ("x.yaml", "", None),
    "not-utf8": ("x.yaml", b"name: caf\xe9\n", (1, 10)),
}


def write(tmp_path, name, content):
    path = tmp_path / name
    if isinstance(content, bytes):
        path.write_bytes(content)
    else:
        path.write_text(content, encoding="utf-8")
    return path


@pytest.mark.parametrize("case", sorted(BAD_INPUTS))
def test_each_bad_input_exits_2_naming_file_and_place_without_traceback(tmp_path, case):
    name, content, place = BAD_INPUTS[case]
    path = write(tmp_path, name, content)
    for command in ("validate", "stats"):
        result = run(command, path)
        assert_clean_failure(result)
        lines = [line for line in result.stderr.splitlines() if "warning:" not in line]
        assert lines and all(str(path) in line for line in lines), result.stderr
        if place is not None:
            located = [LOCATED.match(line.removeprefix("emucompile: error: ")) for line in lines]
            assert all(located), lines
            assert place in [(int(m["line"]), int(m["column"])) for m in located], lines


def test_missing_file_and_directory_exit_2(tmp_path):
    for target, words in ((tmp_path / "absent.yaml", "no such file"), (tmp_path, "is a directory")):
        for command in ("validate", "stats"):
            result = run(command, target)
            assert_clean_failure(result)
            assert words in result.stderr and str(target) in result.stderr
            assert len(result.stderr.strip().splitlines()) == 1


def test_oversized_file_exits_2(tmp_path):
    path = write(tmp_path, "big.yaml", GOOD_YAML + "# " + "x" * (1024 * 1024) + "\n")
    result = run("validate", path)
    assert_clean_failure(result)
    assert "KiB limit" in result.stderr


def test_a_python_tag_never_runs(tmp_path):
    marker = tmp_path / "ran"
    path = write(tmp_path, "x.yaml", GOOD_YAML + f"x: !!python/object/apply:os.system ['touch {marker}']\n")
    assert_clean_failure(run("validate", path))
    assert not marker.exists()


def test_validate_reports_every_file_and_every_problem(tmp_path):
    good = write(tmp_path, "good.yaml", GOOD_YAML)
    bad = write(tmp_path, "bad.yaml", GOOD_YAML.replace("power_db: 0", "power_db: zero") + "tapz: 1\n")
    warned = write(tmp_path, "warned.yaml", GOOD_YAML.replace("delay_ns: 80", "delay_ns: 0"))
    result = run("validate", good, bad, warned)
    assert_clean_failure(result)
    assert f"{good}: valid" in result.stdout and f"{bad}: invalid, 2 error(s)" in result.stdout
    assert f"{warned}: valid, 1 warning(s)" in result.stdout
    problem_lines = result.stderr.splitlines()
    assert len(problem_lines) == 3 and all(LOCATED.match(line) for line in problem_lines)
    assert run("validate", good, warned).exit_code == 0


def test_validate_json_is_a_strict_verdict_per_file_with_its_problems(tmp_path):
    bad = write(tmp_path, "bad.json", json.dumps({**BASE, "name": "Bad", "taps": [{"delay_ns": 0}]}))
    good = write(tmp_path, "good.yaml", GOOD_YAML)
    result = run("validate", bad, good, "--json")
    assert result.exit_code == 2
    document = json.loads(result.stdout, parse_constant=lambda c: pytest.fail(c))
    assert document["valid"] is False and [f["file"] for f in document["files"]] == [str(bad), str(good)]
    first, second = document["files"]
    assert (first["verdict"], first["kind"], first["errors"]) == ("invalid", "profile", 2)
    assert {p["pointer"] for p in first["problems"]} == {"/name", "/taps/0"}
    assert all(set(p) == {"file", "pointer", "message", "hint", "line", "column", "severity"} for p in first["problems"])
    assert (second["verdict"], second["problems"]) == ("valid", [])
    assert result.stderr == ""
    ok = run("validate", good, "--json")
    assert ok.exit_code == 0 and json.loads(ok.stdout)["valid"] is True


def test_warnings_alone_exit_0(tmp_path):
    path = write(tmp_path, "w.yaml", GOOD_YAML.replace("power_db: -4", "power_db: -45"))
    result = run("validate", path)
    assert result.exit_code == 0 and "warning: the tap is 45 dB below" in result.stderr
    stats = run("stats", path)
    assert stats.exit_code == 0 and "warning:" in stats.stderr


def test_debug_shows_the_traceback_of_an_internal_error(tmp_path, monkeypatch):
    import emucompile.profile.stats

    def broken(profile):
        raise RuntimeError("boom")

    monkeypatch.setattr(emucompile.profile.stats, "profile_statistics", broken)
    path = write(tmp_path, "g.yaml", GOOD_YAML)
    result = run("stats", path)
    assert result.exit_code == 3 and "internal error: RuntimeError: boom" in result.stderr
    result = run("--debug", "stats", path)
    assert isinstance(result.exception, RuntimeError)


def test_help_texts_carry_examples():
    for command in ("validate", "stats"):
        result = run(command, "--help")
        assert result.exit_code == 0 and f"Example: emucompile {command} profiles_demo/" in result.stdout


def test_python_dash_m_is_the_same_program():
    result = subprocess.run([sys.executable, "-m", "emucompile", "validate", str(DEMOS[0])],
                            capture_output=True, text=True, cwd=ROOT, check=False)
    assert result.returncode == 0, result.stderr
    assert result.stdout.strip() == f"{DEMOS[0]}: valid"


# -- the demo profiles ---------------------------------------------------------------------


def test_there_are_at_least_three_demo_scenarios_in_yaml_and_json():
    assert len(DEMOS) >= 4
    assert {p.suffix for p in DEMOS} == {".yaml", ".json"}


@pytest.mark.parametrize("path", DEMOS, ids=lambda p: p.name)
def test_demo_profiles_are_valid_invented_and_meet_their_targets(path):
    text = path.read_text(encoding="utf-8")
    assert run("validate", path).exit_code == 0
    result = run("stats", path, "--json")
    assert result.exit_code == 0, result.output
    statistics = json.loads(result.stdout)
    assert len(statistics["expect"]) >= 3 and all(t["met"] for t in statistics["expect"])
    from emucompile.profile.model import load_profile

    assert "invented" in load_profile(path).description.lower()
    if path.suffix == ".yaml":
        assert re.search(r"^#.*[Ii]nvented", text, flags=re.M), "a comment says the data are invented"


# -- property tests: random damage never crashes the validator ------------------------------------


json_values = st.recursive(
    st.none() | st.booleans() | st.integers(-10**6, 10**6) | st.floats(allow_nan=False, allow_infinity=False)
    | st.text(max_size=8),
    lambda children: st.lists(children, max_size=3) | st.dictionaries(st.text(max_size=8), children, max_size=3),
    max_leaves=6,
)
KEYS = ["format_version", "name", "max_doppler_hz", "speed_kmh", "carrier_hz", "total_power_db", "taps",
        "compile", "expect", "mimo", "delay_ns", "delay_us", "power_db", "fading", "k_db", "los_angle_deg",
        "los_doppler_hz", "spectrum", "sigma_hz", "rms_delay_spread_ns", "value", "tolerance_pct", "min"]
RICH = {
    **BASE,
    "taps": [{"delay_ns": 0, "power_db": 0, "fading": "rician", "k_db": 5, "los_doppler_hz": 20},
             {"delay_us": 0.3, "power_db": -3, "spectrum": "gaussian", "sigma_hz": 30},
             {"delay_ns": 500, "power_db": -9, "fading": "static"}],
    "compile": {"seed": 1, "update_rate_hz": 1000},
    "expect": {"rms_delay_spread_ns": {"value": 100, "tolerance_pct": 50}},
}


@st.composite
def damaged_documents(draw):
    document = copy.deepcopy(RICH)
    for _ in range(draw(st.integers(1, 4))):
        target = draw(st.sampled_from(containers(document)))
        action = draw(st.sampled_from(["set", "delete", "add"]))
        if isinstance(target, dict):
            if action == "delete" and target:
                del target[draw(st.sampled_from(sorted(target)))]
            else:
                key = draw(st.sampled_from(sorted(target) + KEYS) if action == "set" else st.sampled_from(KEYS))
                target[key] = draw(json_values)
        elif target:
            index = draw(st.integers(0, len(target) - 1))
            if action == "delete":
                del target[index]
            else:
                target[index] = draw(json_values)
    return document


def _assert_never_crashes(tmp_path, name, content):
    path = write(tmp_path, name, content)
    for command in ("validate", "stats"):
        result = run(command, path, "--json")
        assert result.exit_code in (0, 1, 2) if command == "stats" else (0, 2), result.output
        assert "Traceback" not in result.output and "internal error" not in result.output, result.output
        if command == "validate":
            json.loads(result.stdout)


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(damaged_documents())
def test_random_damage_to_a_document_never_crashes(tmp_path, document):
    _assert_never_crashes(tmp_path, "d.json", json.dumps(document))


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(st.data())
def test_random_damage_to_the_text_never_crashes(tmp_path, data):
    text = (ROOT / "profiles_demo" / "port-crane-los.yaml").read_text(encoding="utf-8")
    for _ in range(data.draw(st.integers(1, 5))):
        at = data.draw(st.integers(0, len(text)))
        cut = data.draw(st.integers(0, 8))
        insert = data.draw(st.text(alphabet=st.sampled_from(list("{}[]:,-&*!'\"#\n 0.9e|>?%@`\t\\a")) | st.characters(),
                                   max_size=6))
        text = text[:at] + insert + text[at + cut:]
    _assert_never_crashes(tmp_path, "d.yaml", text.encode("utf-8", "surrogatepass"))


def test_the_readme_example_profile_is_valid_and_meets_its_targets(tmp_path):
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    example = re.search(r"^```yaml\n(.+?)\n```", text, flags=re.M | re.S).group(1)
    path = write(tmp_path, "readme.yaml", example + "\n")
    result = run("stats", path, "--json")
    assert result.exit_code == 0 and result.stderr == "", result.output
    assert all(t["met"] for t in json.loads(result.stdout)["expect"])
