"""diff: what changed between two profiles or bundles, resolved, with the statistics side by side."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from click.testing import CliRunner

import emucompile
from emucompile.compile import compiler
from emucompile.cli import cli
from emucompile.diff import CHANNEL, LABEL, SETTINGS, diff_profiles
from emucompile.errors import InputError
from emucompile.profile.model import load_profile
from emucompile.profile.stats import profile_statistics

ROOT = Path(__file__).resolve().parent.parent
CRANE = ROOT / "profiles_demo" / "port-crane-los.yaml"


def _run(*args):
    return CliRunner().invoke(cli, [str(a) for a in args], catch_exceptions=False)


def _edited(tmp_path, name, *replacements):
    text = CRANE.read_text(encoding="utf-8")
    for old, new in replacements:
        assert text.count(old) == 1, old
        text = text.replace(old, new)
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def test_one_tap_moved_and_one_k_changed_are_exactly_the_two_changes(tmp_path):
    edited = _edited(tmp_path, "crane.yaml", ("{delay_ns: 90, power_db: -4.5}", "{delay_ns: 100, power_db: -4.5}"),
                     ("k_db: 7\n", "k_db: 8\n"))
    result = diff_profiles(CRANE, edited)
    assert [c.text() for c in result.changes] == ["taps[0] K: 7 dB -> 8 dB", "taps[1] delay: 90 ns -> 100 ns"]
    assert {c.kind for c in result.changes} == {CHANNEL} and not result.same_channel
    rows = {key: (a, b) for key, _, _, a, b in result.statistics}
    expected_a, expected_b = (profile_statistics(load_profile(p))["rms_delay_spread_s"] for p in (CRANE, edited))
    assert rows["rms_delay_spread_s"] == (expected_a, expected_b) and expected_b > expected_a
    cli_result = _run("diff", CRANE, edited)
    assert cli_result.exit_code == 1
    assert "  [channel] taps[1] delay: 90 ns -> 100 ns" in cli_result.stdout
    spread = next(line for line in cli_result.stdout.splitlines() if "RMS delay spread" in line)
    assert f"{(expected_b - expected_a) * 1e9:+.5g}" in spread
    document = json.loads(_run("diff", CRANE, edited, "--json").stdout)
    assert document["same_channel"] is False and len(document["changes"]) == 2
    row = next(r for r in document["statistics"] if r["key"] == "rms_delay_spread_s")
    assert row["difference"] == pytest.approx(expected_b - expected_a, rel=1e-12)


def test_a_preset_based_profile_and_its_presets_show_expansion_are_the_same_channel(tmp_path):
    lab = tmp_path / "lab.yaml"
    lab.write_text("format_version: 1\nname: lab-tdl-c\ndescription: Invented lab set-up.\n"
                   "extends: {preset: tdl-c, delay_spread_ns: 300}\n", encoding="utf-8")
    shown = _run("presets", "show", "tdl-c", "--delay-spread-ns", 300)
    expansion = tmp_path / "tdl-c.yaml"
    expansion.write_text(shown.stdout, encoding="utf-8")
    result = _run("diff", lab, expansion)
    assert result.exit_code == 0, result.output
    assert result.stdout.splitlines()[-1].startswith("same channel")
    changes = diff_profiles(lab, expansion).changes
    assert changes and all(c.kind == LABEL for c in changes)  # the name and description only
    # the same holds for a preset with a Rician line-of-sight tap and an override
    lab.write_text("format_version: 1\nname: lab-tdl-d\ndescription: Invented.\n"
                   "extends: {preset: tdl-d, delay_spread_ns: 100}\nmax_doppler_hz: 20\n", encoding="utf-8")
    expansion.write_text(_run("presets", "show", "tdl-d", "--delay-spread-ns", 100).stdout
                         .replace("max_doppler_hz: 100", "max_doppler_hz: 20"), encoding="utf-8")
    assert diff_profiles(lab, expansion).same_channel


def test_taps_added_and_removed_are_named_not_shown_as_moves(tmp_path):
    edited = _edited(tmp_path, "crane.yaml", ("  - {delay_ns: 210, power_db: -7.0}\n", ""),
                     ("  - {delay_ns: 640,", "  - {delay_ns: 400, power_db: -7.0}\n  - {delay_ns: 640,"))
    texts = [c.text() for c in diff_profiles(CRANE, edited).changes]
    assert texts[0].startswith("taps[2] at 210 ns: removed: 210 ns,")
    assert texts[1].startswith("taps[3] at 400 ns: added: 400 ns, -9.") and "rayleigh" in texts[1] and len(texts) == 2, texts


def test_within_tolerance_is_the_same_channel_and_the_tolerance_is_settable(tmp_path):
    edited = _edited(tmp_path, "crane.yaml", ("{delay_ns: 90, power_db: -4.5}", "{delay_ns: 90.005, power_db: -4.5}"))
    assert diff_profiles(CRANE, edited).same_channel  # 0.005 ns < 0.01 ns
    assert not diff_profiles(CRANE, edited, tolerances={"delay_ns": 0.001}).same_channel
    assert _run("diff", CRANE, edited, "--tolerance", "delay_ns=0.001").exit_code == 1
    bad = _run("diff", CRANE, edited, "--tolerance", "speed=1")
    assert bad.exit_code == 2 and "unknown tolerance 'speed'" in bad.stderr
    with pytest.raises(InputError):
        diff_profiles(CRANE, edited, tolerances={"power_db": -1})
    assert _run("diff", CRANE, tmp_path / "missing.yaml").exit_code == 2


def test_two_bundles_say_whether_they_would_hold_the_same_bytes(tmp_path):
    robot = ROOT / "profiles_demo" / "warehouse-robot.yaml"
    for name, seed in (("a", 1), ("b", 1), ("c", 2)):
        compiler.compile_profile(robot, tmp_path / name, duration_s=1, seed=seed)
    same = diff_profiles(tmp_path / "a", tmp_path / "b")
    assert same.same_channel and same.same_bytes is True and same.changes == ()
    other = diff_profiles(tmp_path / "a", tmp_path / "c")
    assert other.same_channel and other.same_bytes is False
    assert other.bytes_differences == ("seed 1 -> 2",)
    assert [c.to_dict() for c in other.changes] == [{"where": "bundle seed", "old": "1", "new": "2", "kind": SETTINGS}]
    result = _run("diff", tmp_path / "a", tmp_path / "c")
    assert result.exit_code == 0 and "would not hold the same data bytes: seed 1 -> 2" in result.stdout
    mixed = diff_profiles(tmp_path / "a", robot)
    assert mixed.same_channel and mixed.same_bytes is None and mixed.notes
    assert emucompile.diff_profiles is diff_profiles
