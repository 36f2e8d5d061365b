"""`emucompile presets list` and `presets show`: every preset printed as a valid profile, both formats."""

from __future__ import annotations

import json

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from profile_helpers import assert_clean_failure, run

from emucompile.profile.presets import PRESET_NAMES, list_presets, load_preset, preset_document
from emucompile.profile.model import load_profile, load_profile_text
from emucompile.profile.reader import dump_yaml, parse_text
from emucompile.profile.stats import profile_statistics


def test_list_shows_all_twelve_with_sources_and_says_normalised():
    result = run("presets", "list")
    assert result.exit_code == 0, result.output
    lines = result.stdout.splitlines()
    assert lines[0].split()[:2] == ["name", "taps"]
    assert [line.split()[0] for line in lines[1:]] == list(PRESET_NAMES)
    for line, record in zip(lines[1:], list_presets()):
        assert record.source in line and f" {record.n_taps} " in line
        assert ("normalised" in line) == record.normalised
    # The printed spread of a fixed model is its table's: EPA 43 ns per TS 36.101 Table B.2.1-1
    # (from memory), recomputed from the transcribed taps as 43.13 ns.
    assert "43.13 ns" in [line for line in lines if line.startswith("epa ")][0]


def test_list_json():
    result = run("presets", "list", "--json")
    assert result.exit_code == 0, result.output
    records = json.loads(result.stdout)
    assert [r["name"] for r in records] == list(PRESET_NAMES)
    assert all(r["source"] and r["values"] for r in records)


@pytest.mark.parametrize("output_format", ["yaml", "json"])
@pytest.mark.parametrize("name", PRESET_NAMES)
def test_show_prints_a_valid_profile_of_every_preset(tmp_path, name, output_format):
    result = run("presets", "show", name, "--format", output_format)
    assert result.exit_code == 0, result.output
    path = tmp_path / f"{name}.{output_format}"
    path.write_text(result.stdout, encoding="utf-8")
    profile = load_profile(path)  # raises on any error
    assert parse_text(result.stdout, format=output_format).value == preset_document(name)
    assert profile.document == preset_document(name)  # nothing left implicit
    assert profile.preset.name == name and profile.n_taps == load_preset(name).n_taps
    assert run("validate", path).exit_code == 0


def test_show_scales_a_normalised_model():
    # TR 38.901 clause 7.7.3: delay = normalised delay x DS; TDL-C's table has RMS spread 1.
    result = run("presets", "show", "tdl-c", "--delay-spread-ns", "300", "--format", "json")
    assert result.exit_code == 0, result.output
    profile = load_profile_text(result.stdout, format="json")
    assert profile_statistics(profile)["rms_delay_spread_s"] == pytest.approx(300e-9, rel=0.01)
    yaml_text = run("presets", "show", "tdl-c", "--delay-spread-ns", "300").stdout
    assert yaml_text.startswith("# emucompile presets show tdl-c --delay-spread-ns 300\n")
    assert load_profile_text(yaml_text) == profile


def test_an_unknown_name_exits_2_with_a_did_you_mean():
    result = run("presets", "show", "tdl-z")
    assert_clean_failure(result)
    assert "unknown preset 'tdl-z'" in result.stderr and "did you mean tdl-" in result.stderr
    assert result.stdout == ""


def test_delay_spread_on_a_fixed_model_exits_2():
    result = run("presets", "show", "eva", "--delay-spread-ns", "100")
    assert_clean_failure(result)
    assert "fixed in nanoseconds" in result.stderr


# -- the YAML writer ----------------------------------------------------------------------------

scalars = (st.none() | st.booleans() | st.integers(-10**12, 10**12)
           | st.floats(allow_nan=False, allow_infinity=False) | st.text(max_size=12))
documents = st.recursive(
    scalars,
    lambda children: st.lists(children, max_size=3) | st.dictionaries(st.text(max_size=8), children, max_size=3),
    max_leaves=10,
)


@settings(max_examples=200, deadline=None)
@given(st.dictionaries(st.text(min_size=1, max_size=8), documents, min_size=1, max_size=4))
def test_dump_yaml_reads_back_to_the_same_document(document):
    # Any text (control characters and non-ASCII included), numbers, nesting: dump_yaml checks the
    # read-back itself and raises ValueError if it fails, so this also guards that check.
    text = dump_yaml(document)
    back = parse_text(text)
    assert back.problems == [] and back.value == document


def test_dump_yaml_quotes_what_would_read_as_something_else():
    document = {"a": "null", "b": "1e3", "c": "yes", "d": "x: y", "e": " lead", "f": "#", "g": "", "h": "no"}
    text = dump_yaml(document)
    assert parse_text(text).value == document
    assert 'a: "null"' in text and 'b: "1e3"' in text and "h: no" in text  # YAML 1.2: "no" is text


def test_list_shows_whether_each_preset_was_checked_against_the_standard():
    lines = run("presets", "list").stdout.splitlines()
    assert "against the standard" in lines[0]
    for line, record in zip(lines[1:], list_presets()):
        assert f" {record.check_state} " in line
    records = json.loads(run("presets", "list", "--json").stdout)
    for record in records:
        assert record["check_state"] in ("confirmed", "recalled, not confirmed")
        assert record["check_statement"].startswith(record["check_state"])
    shown = run("presets", "show", "epa").stdout
    assert f"# against the standard's text: {load_preset('epa').check_state}\n" in shown
