"""Loading profiles: conversion to SI, power scaling, every semantic check, YAML vs JSON."""

from __future__ import annotations

import json
import math

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from profile_helpers import check, errors, profile_dict, warnings, with_taps

from emucompile.errors import ProfileError
from emucompile.profile.model import (
    MAX_TAPS,
    check_profile,
    check_profile_text,
    load_profile,
    load_profile_text,
    profile_from_document,
)
from emucompile.models import spectra
from emucompile.models.theory import SPEED_OF_LIGHT_MPS, doppler_from_speed


def only_error(document, pointer, words):
    found = errors(document)
    assert len(found) == 1, [p.format() for p in found]
    assert found[0].pointer == pointer, found[0].format()
    assert words in found[0].message, found[0].format()
    return found[0]


def one_warning(document, pointer, words):
    found = [w for w in warnings(document) if w.pointer == pointer and words in w.message]
    assert len(found) == 1, [p.format() for p in warnings(document)]
    assert not errors(document)
    return found[0]


# -- conversion ------------------------------------------------------------------------


def test_a_profile_becomes_frozen_si_dataclasses():
    profile, problems = check(with_taps(
        {"delay_ns": 0, "power_db": 0, "fading": "rician", "k_db": 10, "los_angle_deg": 60,
         "los_phase_deg": 45},
        {"delay_us": 1.5, "power_db": -3, "spectrum": "gaussian", "sigma_hz": 20,
         "max_doppler_hz": 80},
        {"delay_ns": 2500, "power_db": -6, "fading": "static"},
        compile={"update_rate_hz": 2000, "duration_s": 60, "seed": 20261202,
                 "sample_rate_hz": 30.72e6, "method": "sum-of-sinusoids", "periodic": True},
    ))
    assert problems == []
    first, second, third = profile.taps
    assert second.delay_s == pytest.approx(1.5e-6) and third.delay_s == pytest.approx(2.5e-6)
    assert first.k_linear == pytest.approx(10.0) and second.k_linear is None
    assert first.los_doppler_hz == pytest.approx(100 * math.cos(math.radians(60)))
    assert first.los_phase_deg == 45 and first.los_angle_deg == 60
    assert first.max_doppler_hz == 100 and second.max_doppler_hz == 80  # tap override
    assert second.los_doppler_hz is None and third.los_doppler_hz == 0.0
    assert third.max_doppler_hz == 100 and third.doppler_spectrum is None
    assert second.doppler_spectrum.kind == "gaussian" and second.sigma_hz == 20
    assert profile.compile.seed == 20261202 and profile.compile.periodic is True
    assert profile.compile.sample_rate_hz == 30.72e6
    with pytest.raises(AttributeError):
        profile.name = "changed"


def test_powers_are_scaled_to_the_total_and_recorded():
    profile, _ = check(with_taps({"delay_ns": 0, "power_db": 0}, {"delay_ns": 10, "power_db": 0}))
    assert sum(t.power_linear for t in profile.taps) == pytest.approx(1.0, rel=1e-15)
    assert profile.power_scale_db == pytest.approx(-10 * math.log10(2))
    assert profile.taps[0].power_db == pytest.approx(-3.0103, abs=1e-4)

    profile, _ = check(with_taps({"delay_ns": 0, "power_db": 0}, {"delay_ns": 10, "power_db": 0},
                                 total_power_db=-10))
    assert sum(t.power_linear for t in profile.taps) == pytest.approx(0.1, rel=1e-14)


def test_null_total_power_keeps_the_powers_as_written():
    profile, _ = check(with_taps({"delay_ns": 0, "power_db": -1}, {"delay_ns": 10, "power_db": -2},
                                 total_power_db=None) | {"total_power_db": None})
    assert [t.power_db for t in profile.taps] == pytest.approx([-1, -2])
    assert profile.total_power_db is None and profile.power_scale_db == 0.0


def test_rician_direct_and_diffuse_powers():
    profile, _ = check(with_taps({"delay_ns": 0, "power_db": 0, "fading": "rician", "k_db": 0,
                                  "los_doppler_hz": 0}))
    (tap,) = profile.taps
    assert tap.direct_power_linear == pytest.approx(0.5) and tap.diffuse_power_linear == pytest.approx(0.5)


def test_doppler_from_speed_and_carrier():
    # f_D = v f_c / c (common practice; c exact by the SI definition of the metre).
    profile, problems = check(profile_dict(max_doppler_hz=None, speed_kmh=120, carrier_hz=2.0e9))
    assert problems == []
    expected = (120 / 3.6) * 2.0e9 / 299_792_458.0
    assert profile.max_doppler_hz == pytest.approx(expected, rel=1e-15)
    # By hand: 120 km/h = 33.333 m/s, wavelength c / 2 GHz = 0.149896 m, v / wavelength = 222.376 Hz.
    assert profile.max_doppler_hz == pytest.approx(222.376, abs=5e-4)
    assert profile.speed_mps == pytest.approx(120 / 3.6)
    profile, _ = check(profile_dict(max_doppler_hz=None, speed_mps=10, carrier_hz=SPEED_OF_LIGHT_MPS))
    assert profile.max_doppler_hz == pytest.approx(10.0)


def test_doppler_given_twice_must_agree_within_a_tenth_of_a_percent():
    f_d = doppler_from_speed(30 / 3.6, 2.6e9)
    assert not errors(profile_dict(max_doppler_hz=f_d * 1.0009, speed_kmh=30, carrier_hz=2.6e9))
    only_error(profile_dict(max_doppler_hz=f_d * 1.0011, speed_kmh=30, carrier_hz=2.6e9),
               "/max_doppler_hz", "disagrees with the speed and carrier")


def test_all_static_profile_needs_no_doppler():
    profile, problems = check(with_taps({"delay_ns": 0, "power_db": 0, "fading": "static"},
                                        max_doppler_hz=None))
    assert problems == [] and profile.all_static and profile.taps[0].max_doppler_hz is None


# -- every semantic check ---------------------------------------------------------------


def test_missing_doppler_is_an_error_naming_the_taps():
    problem = only_error(profile_dict(max_doppler_hz=None), "", "no maximum Doppler")
    assert "0, 1" in problem.message


def test_per_tap_doppler_is_enough():
    document = with_taps({"delay_ns": 0, "power_db": 0, "max_doppler_hz": 5},
                         {"delay_ns": 1, "power_db": 0, "fading": "static"}, max_doppler_hz=None)
    assert not errors(document)


def test_speed_without_carrier_and_carrier_without_speed():
    only_error(profile_dict(max_doppler_hz=None, speed_kmh=50), "/speed_kmh", "needs carrier_hz")
    only_error(profile_dict(carrier_hz=1e9), "/carrier_hz", "used only with")


def test_both_speeds():
    only_error(profile_dict(max_doppler_hz=None, speed_kmh=36, speed_mps=10, carrier_hz=1e9),
               "/speed_mps", "not both")


def test_non_finite_numbers():
    text = json.dumps(profile_dict()).replace('"power_db": -3', '"power_db": .nan')
    text = text.replace('"max_doppler_hz": 100', '"max_doppler_hz": .inf')
    _, problems = check_profile_text(text, filename="t.yaml")
    assert {p.pointer for p in problems if p.severity == "error"} == {"/max_doppler_hz", "/taps/1/power_db"}
    assert all("not a finite number" in p.message for p in problems)


def test_k_db_on_a_non_rician_tap():
    for fading in ("rayleigh", "static"):
        only_error(with_taps({"delay_ns": 0, "power_db": 0, "fading": fading, "k_db": 3}),
                   "/taps/0/k_db", "rician taps only")


def test_rician_needs_k_db():
    only_error(with_taps({"delay_ns": 0, "power_db": 0, "fading": "rician", "los_doppler_hz": 1}),
               "/taps/0", "needs k_db")


def test_rician_needs_exactly_one_direct_doppler():
    only_error(with_taps({"delay_ns": 0, "power_db": 0, "fading": "rician", "k_db": 3}),
               "/taps/0", "los_angle_deg or los_doppler_hz")
    only_error(with_taps({"delay_ns": 0, "power_db": 0, "fading": "rician", "k_db": 3,
                          "los_angle_deg": 0, "los_doppler_hz": 100}),
               "/taps/0/los_doppler_hz", "not both")


def test_direct_doppler_above_the_maximum():
    only_error(with_taps({"delay_ns": 0, "power_db": 0, "fading": "rician", "k_db": 3,
                          "los_doppler_hz": -100.5}), "/taps/0/los_doppler_hz", "exceeds")
    only_error(with_taps({"delay_ns": 0, "power_db": 0, "fading": "static",
                          "los_doppler_hz": 101}), "/taps/0/los_doppler_hz", "exceeds")
    assert not errors(with_taps({"delay_ns": 0, "power_db": 0, "fading": "rician", "k_db": 3,
                                 "los_doppler_hz": -100}))


def test_static_tap_angle_needs_a_doppler():
    only_error(with_taps({"delay_ns": 0, "power_db": 0, "fading": "static", "los_angle_deg": 30},
                         max_doppler_hz=None), "/taps/0/los_angle_deg", "needs a maximum Doppler")
    profile, _ = check(with_taps({"delay_ns": 0, "power_db": 0, "fading": "static",
                                  "los_angle_deg": 180}))
    assert profile.taps[0].los_doppler_hz == pytest.approx(-100.0)


def test_static_tap_may_turn_without_any_maximum_doppler():
    profile, problems = check(with_taps({"delay_ns": 0, "power_db": 0, "fading": "static",
                                         "los_doppler_hz": 2500}, max_doppler_hz=None))
    assert problems == [] and profile.taps[0].los_doppler_hz == 2500


@pytest.mark.parametrize("key", ["los_angle_deg", "los_doppler_hz", "los_phase_deg"])
def test_direct_part_keys_on_a_rayleigh_tap(key):
    only_error(with_taps({"delay_ns": 0, "power_db": 0, key: 0}), f"/taps/0/{key}",
               "rician and static taps only")


def test_delay_exactly_one_of_ns_and_us():
    only_error(with_taps({"power_db": 0}), "/taps/0", "delay_ns or delay_us")
    only_error(with_taps({"delay_ns": 0, "delay_us": 0, "power_db": 0}), "/taps/0/delay_us", "not both")


def test_gaussian_spectrum_checks():
    only_error(with_taps({"delay_ns": 0, "power_db": 0, "spectrum": "gaussian"}), "/taps/0", "sigma_hz")
    only_error(with_taps({"delay_ns": 0, "power_db": 0, "sigma_hz": 5}), "/taps/0/sigma_hz",
               "gaussian spectrum only")
    only_error(with_taps({"delay_ns": 0, "power_db": 0, "spectrum": "gaussian", "sigma_hz": 101}),
               "/taps/0/sigma_hz", "exceeds")
    assert not warnings(with_taps({"delay_ns": 0, "power_db": 0, "spectrum": "gaussian",
                                   "sigma_hz": 100 / 3}))


def test_gaussian_truncation_warning_says_how_much_power_is_removed():
    warning = one_warning(with_taps({"delay_ns": 0, "power_db": 0, "spectrum": "gaussian",
                                     "sigma_hz": 50}), "/taps/0/sigma_hz", "truncated")
    # f_D = 2 sigma keeps erf(2/sqrt 2) = 95.45 % (scipy.special.erf), so 4.55 % is removed.
    assert "4.55 %" in warning.message


def test_spectrum_on_a_static_tap_is_ignored_with_a_warning():
    one_warning(with_taps({"delay_ns": 0, "power_db": 0, "fading": "static", "spectrum": "flat"}),
                "/taps/0/spectrum", "ignored")


def test_too_many_taps():
    taps = [{"delay_ns": i, "power_db": 0} for i in range(MAX_TAPS + 1)]
    only_error(with_taps(*taps), "/taps", "at most 1024")
    assert not errors(with_taps(*taps[:MAX_TAPS]))


@pytest.mark.parametrize("key, value, pointer", [
    ("mimo", {}, "/mimo"),
    ("conditions", {}, "/conditions"),
    ("target", {}, "/target"),
    ("extends", 3, "/extends"),
])
def test_the_formerly_reserved_blocks_are_checked_by_the_schema(key, value, pointer):
    # The blocks are real now (tests/test_profile_blocks.py); a wrong shape is one located error.
    found = errors(profile_dict(**{key: value}))
    assert found and all(p.pointer.startswith(pointer) for p in found), [p.format() for p in found]


# -- warnings (valid, exit 0) ---------------------------------------------------------------


def test_unsorted_delays_warn():
    one_warning(with_taps({"delay_ns": 50, "power_db": 0}, {"delay_ns": 10, "power_db": 0}),
                "/taps/1/delay_ns", "not in delay order")


def test_several_taps_at_one_delay_warn():
    one_warning(with_taps({"delay_us": 0.1, "power_db": 0},
                          {"delay_ns": 100, "power_db": -1, "fading": "static"}),
                "/taps/1/delay_ns", "same delay as tap 0")


def test_very_weak_taps_warn():
    one_warning(with_taps({"delay_ns": 0, "power_db": 0}, {"delay_ns": 5, "power_db": -40.5}),
                "/taps/1/power_db", "40.5 dB below")
    assert not warnings(with_taps({"delay_ns": 0, "power_db": 0}, {"delay_ns": 5, "power_db": -40}))


def test_large_power_scaling_warns():
    one_warning(with_taps({"delay_ns": 0, "power_db": -12}), "/taps", "scaled by +12 dB")
    one_warning(with_taps({"delay_ns": 0, "power_db": 0}, total_power_db=-10.5), "/total_power_db",
                "scaled by -10.5 dB")
    assert not warnings(with_taps({"delay_ns": 0, "power_db": 10}))


# -- expect: ----------------------------------------------------------------------------


def test_expect_targets_convert_to_si():
    profile, problems = check(profile_dict(expect={
        "rms_delay_spread_ns": {"value": 300, "tolerance_pct": 3},
        "coherence_bandwidth_50_khz": {"value": 500, "tolerance": 10},
        "coherence_time_rule_ms": {"min": 2},
        "total_power_db": {"max": 0.5},
    }))
    assert problems == []
    rms, bandwidth, time, power = profile.expect
    assert (rms.statistic, rms.low_si, rms.high_si) == ("rms_delay_spread_s", pytest.approx(291e-9),
                                                       pytest.approx(309e-9))
    assert bandwidth.low_si == pytest.approx(490e3) and bandwidth.high_si == pytest.approx(510e3)
    assert time.low_si == pytest.approx(2e-3) and time.high_si == math.inf and time.value_si is None
    assert power.low_si == -math.inf and power.high_si == 0.5


@pytest.mark.parametrize("spec", [{"value": 1}, {"tolerance": 1}, {"value": 1, "tolerance": 1, "min": 0},
                                  {}, {"value": 1, "tolerance": 1, "tolerance_pct": 1}])
def test_expect_target_shapes(spec):
    only_error(profile_dict(expect={"rms_delay_spread_ns": spec}), "/expect/rms_delay_spread_ns",
               "a target is")


def test_expect_min_above_max():
    only_error(profile_dict(expect={"max_doppler_hz": {"min": 5, "max": 4}}), "/expect/max_doppler_hz",
               "larger than max")


# -- all problems at once, with places -----------------------------------------------------


def test_every_problem_is_reported_in_one_pass():
    text = """\
format_version: 1
name: Bad Name
max_doppler_hz: 10
tapz: []
taps:
  - {delay_ns: 0, power_db: 0, fading: rician, los_angle_deg: 0}
  - {delay_ns: -5, power_db: loud}
  - {delay_ns: 5, power_db: 0, fading: raleigh, k_db: 3}
"""
    profile, problems = check_profile_text(text, filename="bad.yaml")
    assert profile is None
    lines = [p.format() for p in problems]
    assert lines == sorted(lines, key=lambda s: [int(x) for x in s.split(":")[1:3]])
    by_pointer = {p.pointer: p for p in problems}
    assert set(by_pointer) == {"/name", "/tapz", "/taps/0", "/taps/1/delay_ns", "/taps/1/power_db",
                               "/taps/2/fading"}
    assert by_pointer["/tapz"].hint == "did you mean 'taps'?"
    assert (by_pointer["/tapz"].line, by_pointer["/tapz"].column) == (4, 1)
    assert (by_pointer["/taps/1/power_db"].line, by_pointer["/taps/1/power_db"].column) == (7, 30)
    assert by_pointer["/taps/2/fading"].hint == "did you mean 'rayleigh'?"
    assert lines[0].startswith("bad.yaml:2:7: /name: ")


def test_a_bad_spectrum_or_parameter_reads_the_same_in_a_tap_and_an_override():
    # The kinds and sigma_hz are defined once in the schema ($defs) and referred to; the problems
    # still name the key, the choices and the nearest kind.
    text = """\
format_version: 1
name: spectra
max_doppler_hz: 50
taps:
  - {delay_ns: 0, power_db: 0, spectrum: gausian}
  - {delay_ns: 5, power_db: 0, spectrum: gaussian, sigma_hz: 0}
"""
    _, problems = check_profile_text(text, filename="s.yaml")
    by_pointer = {p.pointer: p for p in problems}
    kinds = ", ".join(spectra.KINDS)  # the registry's order, as the schema lists them
    assert by_pointer["/taps/0/spectrum"].message == f"spectrum must be one of {kinds}, not the text 'gausian'"
    assert by_pointer["/taps/0/spectrum"].hint == "did you mean 'gaussian'?"
    assert by_pointer["/taps/1/sigma_hz"].message == "sigma_hz must be >= 1e-06, not 0"
    text = "format_version: 1\nname: o\nextends: {preset: epa, taps: [{index: 1, spectrum: flatt}]}\n"
    _, problems = check_profile_text(text, filename="o.yaml")
    [problem] = [p for p in problems if p.pointer.endswith("/spectrum")]
    assert problem.message == f"spectrum must be one of {kinds}, not the text 'flatt'"
    assert problem.hint == "did you mean 'flat'?"


def test_load_profile_raises_with_every_problem(tmp_path):
    path = tmp_path / "p.json"
    path.write_text(json.dumps(with_taps({"delay_ns": 0}, {"power_db": 0})))
    with pytest.raises(ProfileError) as raised:
        load_profile(path)
    assert len(raised.value.problems) == 2
    assert str(raised.value).count(str(path)) == 2


# -- YAML and JSON give the same profile; the resolved document round-trips ------------------------


YAML_TEXT = """\
format_version: 1
name: same-either-way
description: invented
speed_kmh: 60
carrier_hz: 3.5e9
total_power_db: -2
taps:
  - {delay_ns: 0, power_db: 0, fading: rician, k_db: 6, los_angle_deg: 45}
  - {delay_us: 0.25, power_db: -4.5, spectrum: flat}
  - {delay_ns: 400, power_db: -9, fading: static, los_doppler_hz: 12}
compile: {update_rate_hz: 1000, seed: 5}
expect:
  rms_delay_spread_ns: {value: 150, tolerance_pct: 50}
"""


def test_yaml_and_json_give_the_same_profile():
    from_yaml = load_profile_text(YAML_TEXT, format="yaml")
    as_json = json.dumps(from_yaml.document)
    from_json = load_profile_text(as_json, format="json")
    assert from_yaml == from_json
    assert from_yaml.resolved_sha256() == from_json.resolved_sha256()


def test_the_resolved_document_makes_defaults_explicit_and_loads_to_an_equal_profile():
    profile = load_profile_text(YAML_TEXT)
    document = profile.document
    assert document["taps"][0]["spectrum"] == "classical" and document["taps"][1]["fading"] == "rayleigh"
    assert "spectrum" not in document["taps"][2]  # static: no diffuse part
    assert document["taps"][1]["delay_us"] == 0.25  # unit keys and values as written
    again = profile_from_document(document)
    assert again == profile and again.document == document
    assert len(profile.resolved_sha256()) == 64


def test_defaults_written_out_or_left_out_give_one_resolved_hash():
    short = load_profile_text("format_version: 1\nname: a\nmax_doppler_hz: 5\ntaps: [{delay_ns: 0, power_db: 0}]\n")
    long = load_profile_text("format_version: 1\nname: a\ndescription: ''\nmax_doppler_hz: 5\n"
                             "total_power_db: 0\ntaps: [{delay_ns: 0, power_db: 0, fading: rayleigh, "
                             "spectrum: classical}]\n")
    assert short == long and short.resolved_sha256() == long.resolved_sha256()


def test_check_profile_never_raises_for_a_missing_file(tmp_path):
    profile, problems = check_profile(tmp_path / "none.yaml")
    assert profile is None and len(problems) == 1


# -- property tests -------------------------------------------------------------------------


@st.composite
def valid_profiles(draw):
    f_d = draw(st.floats(0.1, 2000))
    taps = []
    for _ in range(draw(st.integers(1, 12))):
        tap = {"power_db": draw(st.floats(-35, 5))}
        if draw(st.booleans()):
            tap["delay_ns"] = draw(st.floats(0, 20_000))
        else:
            tap["delay_us"] = draw(st.floats(0, 20))
        fading = draw(st.sampled_from(["rayleigh", "rician", "static", None]))
        if fading:
            tap["fading"] = fading
        if fading == "rician":
            tap["k_db"] = draw(st.floats(-20, 30))
            if draw(st.booleans()):
                tap["los_angle_deg"] = draw(st.floats(-720, 720))
            else:
                tap["los_doppler_hz"] = draw(st.floats(-1, 1)) * f_d
        if fading == "static" and draw(st.booleans()):
            tap["los_doppler_hz"] = draw(st.floats(-1, 1)) * f_d
        if fading in ("rician", "static") and draw(st.booleans()):
            tap["los_phase_deg"] = draw(st.floats(-360, 360))
        if fading != "static":
            spectrum = draw(st.sampled_from(["classical", "flat", "gaussian", None]))
            if spectrum:
                tap["spectrum"] = spectrum
            if spectrum == "gaussian":
                tap["sigma_hz"] = draw(st.floats(0.05, 1.0)) * f_d
        taps.append(tap)
    return {"format_version": 1, "name": draw(st.from_regex(r"[a-z0-9][a-z0-9._-]{0,20}", fullmatch=True)),
            "max_doppler_hz": f_d, "total_power_db": draw(st.one_of(st.none(), st.floats(-30, 30))),
            "taps": taps}


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(valid_profiles(), st.sampled_from(["json", "yaml"]))
def test_random_valid_profiles_load(document, format):
    text = json.dumps(document)
    if format == "yaml":  # a block-style YAML rendering of the same document
        from io import StringIO

        from ruamel.yaml import YAML

        stream = StringIO()
        YAML(typ="safe", pure=True).dump(document, stream)
        text = stream.getvalue()
    profile = load_profile_text(text, format=format)
    assert profile.n_taps == len(document["taps"])
    total = sum(t.power_linear for t in profile.taps)
    if document["total_power_db"] is not None:
        assert 10 * math.log10(total) == pytest.approx(document["total_power_db"], abs=1e-9)
    for tap in profile.taps:
        if tap.los_doppler_hz is not None and tap.max_doppler_hz is not None:
            assert abs(tap.los_doppler_hz) <= tap.max_doppler_hz * (1 + 1e-12)
    assert profile_from_document(profile.document) == profile


def test_a_duplicate_key_does_not_hide_problems_of_the_value_kept():
    _, problems = check_profile_text('{"format_version": 1, "name": "Bad", "name": "good", '
                             '"max_doppler_hz": 5, "taps": [{"delay_ns": 0, "power_db": 0}]}', format="json")
    assert sorted(p.message.split(" ")[0] for p in problems) == ["'Bad'", "duplicate"]


def test_a_doppler_too_small_to_compute_with_is_refused():
    only_error(profile_dict(max_doppler_hz=1e-7), "/max_doppler_hz", ">= 1e-06")
    only_error(profile_dict(max_doppler_hz=None, speed_mps=1e-9, carrier_hz=1e3), "/speed_mps", "below")
