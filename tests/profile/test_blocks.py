"""The profile blocks extends, preset, mimo, conditions and target: loading, checks with positions, records."""

from __future__ import annotations

import dataclasses
import json
import math
import textwrap

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from profile_helpers import BASE, assert_clean_failure, containers, run

from emucompile.profile.blocks import Conditions, MimoSetup, PresetInfo
from emucompile.models.conditions import HIGH_SPEED_TRAIN_SCENARIOS, high_speed_train, moving_propagation
from emucompile.errors import ProfileError
from emucompile.profile.presets import TAP_OVERRIDE_KEYS, load_preset, preset_document
from emucompile.profile.model import check_profile_text, load_profile_text, profile_from_document, profile_schema
from emucompile.profile.stats import profile_statistics
from emucompile.profile.target import Target, check_target_file, load_target, target_schema


def lab(extra, head=None):
    """The head of a profile and an indented block of more lines, dedented."""
    return (HEAD if head is None else head) + textwrap.dedent(extra)


def check_yaml(text):
    return check_profile_text(textwrap.dedent(text), filename="lab.yaml")


def load_yaml(text):
    return load_profile_text(textwrap.dedent(text), filename="lab.yaml")


def errors_of(text):
    return [p for p in check_yaml(text)[1] if p.severity == "error"]


def warnings_of(text):
    return [p for p in check_yaml(text)[1] if p.severity == "warning"]


def one_error(text, pointer, words):
    found = errors_of(text)
    assert len(found) == 1, [p.format() for p in found]
    assert found[0].pointer == pointer and words in found[0].format(), found[0].format()
    assert found[0].line is not None, found[0].format()
    return found[0]


HEAD = """\
format_version: 1
name: lab
"""
RICIAN_2X2 = lab("""\
max_doppler_hz: 50
taps:
  - {delay_ns: 0, power_db: 0, fading: rician, k_db: 6, los_angle_deg: 45}
  - {delay_ns: 200, power_db: -6}
mimo:
  n_tx: 2
  n_rx: 2
""")


# -- schema -------------------------------------------------------------------------------------


def test_the_target_block_in_the_profile_schema_is_the_target_schema():
    embedded = profile_schema()["$defs"]["emulator"]
    assert embedded["properties"] == target_schema()["properties"]
    assert embedded["additionalProperties"] is False and embedded["minProperties"] == 1


def test_the_override_keys_in_the_schema_are_the_ones_resolution_accepts():
    schema = profile_schema()["$defs"]
    assert set(schema["tap_override"]["properties"]) == set(TAP_OVERRIDE_KEYS) | {"index"}
    for key in TAP_OVERRIDE_KEYS:
        assert schema["tap_override"]["properties"][key] == schema["tap"]["properties"][key]


# -- extends ------------------------------------------------------------------------------------


def test_acceptance_extends_tdl_c_at_300_ns_through_stats(tmp_path):
    # docs/profile-format.md (extends): tdl-c with delay_spread_ns 300 -> RMS delay spread 300 ns +- 1 %
    # (TR 38.901 clause 7.7.3: delays = normalised delays x DS; the table's RMS spread is 1).
    path = tmp_path / "lab.yaml"
    path.write_text(HEAD + "extends: {preset: tdl-c, delay_spread_ns: 300}\n", encoding="utf-8")
    result = run("stats", path, "--json")
    assert result.exit_code == 0, result.output
    statistics = json.loads(result.stdout)
    assert statistics["rms_delay_spread_s"] == pytest.approx(300e-9, rel=0.01)
    assert statistics["n_taps"] == 24
    assert statistics["preset"]["name"] == "tdl-c" and statistics["preset"]["delay_spread_ns"] == 300
    text = run("stats", path).stdout
    assert "preset\n  tdl-c (data version 1): 3GPP TR 38.901 Table 7.7.2-3" in text


def test_the_resolved_document_loads_again_to_an_equal_profile_and_hash():
    profile = load_yaml(lab("""\
        extends:
          preset: tdl-d
          delay_spread_ns: 300
          taps: [{index: 0, k_db: 9, los_angle_deg: 30}]
        speed_kmh: 30
        carrier_hz: 2.6e9
        mimo: {n_tx: 2, n_rx: 1, correlation: {level: high, specification: ts36104}, direct_part: identical}
        conditions: {shadowing: {sigma_db: 6, decorrelation_distance_m: 20}}
        target: {max_fir_coefficients: 64, sample_rate_hz: 30.72e6}
    """))
    assert "extends" not in profile.document and profile.document["preset"]["name"] == "tdl-d"
    again = profile_from_document(profile.document)
    assert again == profile
    assert again.resolved_sha256() == profile.resolved_sha256()
    assert again.mimo == profile.mimo and again.conditions == profile.conditions
    assert again.preset == profile.preset == PresetInfo(**profile.document["preset"])
    # The hash covers the preset's data: another delay spread is another resolved profile.
    other = load_yaml(HEAD + "extends: {preset: tdl-d, delay_spread_ns: 301}\n")
    assert other.resolved_sha256() != profile.resolved_sha256()


def test_overrides_and_the_top_level_doppler_replace_the_presets():
    profile = load_yaml(lab("""\
        extends: {preset: tdl-d, taps: [{index: 0, k_db: 9, los_angle_deg: 30}, {index: 2, power_db: -10}]}
        max_doppler_hz: 40
    """))
    first = profile.taps[0]
    assert first.fading == "rician" and first.k_db == pytest.approx(9.0)
    assert first.los_doppler_hz == pytest.approx(40 * math.cos(math.radians(30)))
    assert all(t.max_doppler_hz == 40 for t in profile.taps)
    assert "max_doppler_hz 40 Hz as requested" in profile.preset.doppler
    # Tap 2's own power before scaling: the document says -10 dB.
    assert profile.document["taps"][2]["power_db"] == -10


def test_the_short_form_gives_what_presets_show_gives():
    short = load_yaml("format_version: 1\nname: epa\nextends: epa\n")
    shown = profile_from_document(preset_document("epa"))
    assert short == shown


@pytest.mark.parametrize("text, pointer, words", [
    ("extends: tdl-x\n", "/extends", "did you mean"),
    ("extends: {preset: epa, delay_spread_ns: 100}\n", "/extends/delay_spread_ns", "fixed in nanoseconds"),
    ("extends: {preset: epa, scale: 2}\n", "/extends/scale", "unknown key"),
    ("extends: {preset: epa, taps: [{index: 9, power_db: 0}]}\n", "/extends/taps/0", "out of range"),
    ("extends: {preset: epa, taps: [{index: 0}, {index: 0}]}\n", "/extends/taps/1/index", "twice"),
    ("extends: {preset: epa, taps: [{index: 0, delay_us: 1}]}\n", "/extends/taps/0/delay_us", "unknown key"),
    ("extends: epa\ntaps: [{delay_ns: 0, power_db: 0}]\n", "/taps", "takes its taps from the preset"),
    ("extends: epa\npreset: {name: epa, data_version: 1}\n", "/preset", "do not give both"),
    ("extends: epa\nspeed_kmh: 3\n", "/speed_kmh", "needs carrier_hz"),
])
def test_extends_problems_are_located(text, pointer, words):
    problem = one_error(HEAD + text, pointer, words)
    assert problem.line >= 3


def test_a_problem_in_the_presets_data_points_at_extends_and_names_the_resolved_place():
    problems = check_yaml(lab("""\
        extends:
          preset: tdl-c
          taps:
            - {index: 0, power_db: 40}
    """))[1]
    weak = [p for p in problems if "below the strongest" in p.message]
    assert weak and all(p.pointer == "/extends" and p.line == 3 for p in weak)
    assert any(p.message.startswith("/taps/23/power_db of the profile resolved from preset tdl-c") for p in weak)
    # The preset's own table order (tdl-c's delays are not sorted) is not news: no order warning.
    assert not [p for p in problems if "delay order" in p.message]


def test_an_error_in_an_override_points_at_the_override_key():
    problem = one_error(lab("""\
        extends:
          preset: tdl-c
          taps:
            - {index: 3, spectrum: gaussian, sigma_hz: 500}
    """), "/extends/taps/0/sigma_hz", "exceeds the tap's maximum Doppler")
    assert problem.line == 6 and "/taps/3/sigma_hz of the profile resolved from preset tdl-c" in problem.message


# -- preset provenance -----------------------------------------------------------------------------


def test_a_preset_block_is_carried_and_checked_against_this_versions_data():
    document = preset_document("eva")
    assert profile_from_document(document).preset.name == "eva"
    document["preset"]["data_version"] = 99
    profile, problems = check_profile_text(json.dumps(document), format="json")
    assert profile is not None and profile.preset.data_version == 99
    assert [p.pointer for p in problems if p.severity == "warning"] == ["/preset/data_version"]


# -- mimo -----------------------------------------------------------------------------------------


def _kron(a, b):
    return np.kron(np.asarray(a, complex), np.asarray(b, complex))


def test_medium_correlation_names_its_specification_and_gives_the_kronecker_matrix():
    text = HEAD + "max_doppler_hz: 50\ntaps: [{delay_ns: 0, power_db: 0}]\nmimo: {n_tx: 2, n_rx: 2, correlation: %s}\n"
    ue = load_yaml(text % "{level: medium, specification: ts36101}").mimo
    bs = load_yaml(text % "{level: medium, specification: ts36104}").mimo
    # TS 36.101 Table B.2.3.2-1 lists medium as alpha 0.3, beta 0.9 (from memory); TS 36.104 Table
    # B.5.2-1 as alpha 0.9, beta 0.3 (transcribed). Both put 0.3 on the transmitting side, 0.9 on the
    # receiving side, so R = [[1, 0.3], [0.3, 1]] (x) [[1, 0.9], [0.9, 1]] either way.
    expected = _kron([[1, 0.3], [0.3, 1]], [[1, 0.9], [0.9, 1]])
    np.testing.assert_allclose(ue.correlation.matrix, expected, atol=1e-15)
    np.testing.assert_allclose(bs.correlation.matrix, expected, atol=1e-15)
    assert (ue.correlation.origin["alpha"], ue.correlation.origin["beta"]) == (0.3, 0.9)
    assert (bs.correlation.origin["alpha"], bs.correlation.origin["beta"]) == (0.9, 0.3)
    assert isinstance(ue, MimoSetup) and ue.n_links == 4 and ue.direct_part is None


def test_the_standards_adjustment_is_the_default_and_can_be_overridden():
    text = HEAD + "max_doppler_hz: 50\ntaps: [{delay_ns: 0, power_db: 0}]\nmimo: {n_tx: 4, n_rx: 4, correlation: %s}\n"
    default = load_yaml(text % "{level: high, specification: ts36104}").mimo.correlation
    # TS 36.104 V19.2.0 B.5.2 (transcribed): high 4x4 uses (R + aI)/(1 + a) with a = 0.00012.
    assert default.adjustment == 0.00012
    none = load_yaml(text % "{level: high, specification: ts36104, adjustment: 0}").mimo.correlation
    assert none.adjustment == 0
    np.testing.assert_allclose(default.matrix, (none.matrix + 0.00012 * np.eye(16)) / 1.00012, atol=1e-15)


def test_alpha_beta_sides_and_complex_coefficients():
    text = HEAD + "max_doppler_hz: 50\ntaps: [{delay_ns: 0, power_db: 0}]\nmimo: {n_tx: 2, n_rx: 2, correlation: %s}\n"
    downlink = load_yaml(text % "{alpha: 0.9, beta: 0.3, base_station: tx}").mimo.correlation
    np.testing.assert_allclose(downlink.matrix, _kron([[1, 0.9], [0.9, 1]], [[1, 0.3], [0.3, 1]]))
    sides = load_yaml(text % "{tx: {re: 0.3, im: 0.4}, rx: 0}").mimo.correlation
    c = 0.3 + 0.4j
    np.testing.assert_allclose(sides.matrix, _kron([[1, c], [np.conj(c), 1]], np.eye(2)))


def test_user_matrices_are_checked_with_the_property_that_fails():
    text = HEAD + "max_doppler_hz: 50\ntaps: [{delay_ns: 0, power_db: 0}]\nmimo:\n  n_tx: 1\n  n_rx: 2\n  correlation: %s\n"
    one_error(text % "{matrix: [[1, 0.5], [0.4, 1]]}", "/mimo/correlation/matrix", "is not Hermitian")
    # A 3-element chain with neighbours correlated 0.9 and the ends not at all: eigenvalues
    # 1 and 1 -+ 0.9 sqrt(2), the smallest -0.2728 < 0 (no such correlation exists).
    chain = "[[1, 0.9, 0], [0.9, 1, 0.9], [0, 0.9, 1]]"
    failure = one_error((text % "{matrix: %s}" % chain).replace("n_rx: 2", "n_rx: 3"),
                        "/mimo/correlation/matrix", "not positive semidefinite")
    assert failure.line == 8 and "-0.273" in failure.message
    one_error(text % "{matrix: [[1, 0.5], [0.5, 0.8]]}", "/mimo/correlation/matrix", "unit diagonal")
    one_error(text % "{matrix: [[1, 0.5, 0], [0.5, 1, 0], [0, 0, 1]]}", "/mimo/correlation/matrix",
              "expected 2x2")
    one_error(text % "{matrix: [[1, 0.5], [0.5]]}", "/mimo/correlation/matrix/1", "row 1")
    one_error(text % "{tx_matrix: [[1]], rx_matrix: [[1, 0.5], [0.6, 1]]}", "/mimo/correlation/rx_matrix",
              "is not Hermitian")
    # The adjustment applies before the check: (R + aI)/(1 + a) has eigenvalue (-0.2728 + a)/(1 + a).
    three = text.replace("n_rx: 2", "n_rx: 3")
    assert not errors_of(three % ("{matrix: %s, adjustment: 0.28}" % chain))
    one_error(three % ("{matrix: %s, adjustment: 0.2}" % chain), "/mimo/correlation/matrix",
              "even after the adjustment")


def test_correlation_forms_and_coefficients():
    text = HEAD + "max_doppler_hz: 50\ntaps: [{delay_ns: 0, power_db: 0}]\nmimo: {n_tx: 2, n_rx: 2, correlation: %s}\n"
    missing = one_error(text % "{level: medium}", "/mimo/correlation", "one way")
    assert "other way round" in missing.hint
    one_error(text % "{alpha: 0.3, beta: 0.9}", "/mimo/correlation", "got {alpha, beta}")
    one_error(text % "{tx: {re: 0.9, im: 0.9}, rx: 0}", "/mimo/correlation/tx", "magnitude 1.27")
    one_error(text % "{tx: 1.5, rx: 0}", "/mimo/correlation/tx", "<= 1")  # the schema's bound


def test_a_direct_part_must_say_how_it_reaches_the_links():
    one_error(RICIAN_2X2 + "  correlation: {tx: 0, rx: 0}\n", "/mimo", "say how it reaches the 2x2 links")
    identical = load_yaml(RICIAN_2X2 + "  correlation: {tx: 0, rx: 0}\n  direct_part: identical\n").mimo
    np.testing.assert_array_equal(identical.direct_response, np.ones(4))
    arrays = load_yaml(RICIAN_2X2 + "  correlation: {tx: 0, rx: 0}\n"
                       "  direct_part: {tx_spacing_wavelengths: 0.5, rx_spacing_wavelengths: 1, "
                       "departure_deg: 10, arrival_deg: -30}\n").mimo
    # Steering vectors exp(j 2 pi d n sin theta) (TR 38.901 7.5 convention), h = a_tx (x) a_rx.
    a_tx = np.exp(2j * np.pi * 0.5 * np.arange(2) * np.sin(np.radians(10)))
    a_rx = np.exp(2j * np.pi * 1.0 * np.arange(2) * np.sin(np.radians(-30)))
    np.testing.assert_allclose(arrays.direct_response, np.kron(a_tx, a_rx), atol=1e-15)
    assert arrays.direct_part["kind"] == "uniform linear arrays"
    with pytest.raises(ValueError):
        arrays.direct_response[0] = 0  # frozen: read-only
    record = json.loads(json.dumps(arrays.as_record(), allow_nan=False))
    assert record["n_links"] == 4 and len(record["correlation"]["matrix_real"]) == 4


def test_one_by_one_is_siso_with_a_warning():
    profile, problems = check_yaml(HEAD + "max_doppler_hz: 5\ntaps: [{delay_ns: 0, power_db: 0}]\n"
                                   "mimo: {n_tx: 1, n_rx: 1, correlation: {tx: 0, rx: 0}}\n")
    assert profile.mimo is None and profile.n_tx == profile.n_rx == 1
    assert [p.pointer for p in problems] == ["/mimo"]


# -- conditions ---------------------------------------------------------------------------------


STATIC_AND_RAYLEIGH = lab("""\
max_doppler_hz: 50
taps:
  - {delay_ns: 0, power_db: 0, fading: static}
  - {delay_ns: 100, power_db: -10}
""")


def test_the_high_speed_train_moves_every_direct_part_and_sets_the_largest_doppler():
    profile = load_yaml(STATIC_AND_RAYLEIGH + "conditions: {high_speed_train: {scenario: ts36104-1}}\n")
    train = profile.conditions.high_speed_train
    assert train == high_speed_train("ts36104-1") and profile.conditions.high_speed_train_taps == (0,)
    first, second = profile.taps
    assert first.los_trajectory == "high_speed_train" and first.los_doppler_hz is None
    assert second.los_trajectory is None
    # TS 36.104 Table B.3-1 scenario 1 (transcribed): D_s 1000 m, D_min 50 m, f_d 1340 Hz. |cos theta| is
    # largest at t = 0 (B.3.2): (D_s/2) / sqrt(D_min^2 + (D_s/2)^2) = 500 / sqrt(252500).
    peak = 1340.0 * 500.0 / math.sqrt(50.0**2 + 500.0**2)
    assert first.largest_doppler_hz == pytest.approx(peak, rel=1e-12)
    assert profile.largest_doppler_hz == pytest.approx(peak, rel=1e-12)
    # ... and the trajectory reaches it: the largest |f_s| on a fine grid over two periods.
    grid = np.linspace(0.0, 2 * train.period_s, 200001)
    assert np.abs(train.doppler_hz(grid)).max() == pytest.approx(peak, rel=1e-9)
    statistics = profile_statistics(profile)
    assert statistics["largest_doppler_hz"] == pytest.approx(peak)
    assert statistics["taps"][0]["los_trajectory"] == "high_speed_train"


def test_the_high_speed_trains_rms_doppler_is_its_time_average():
    # Only a static tap on the trajectory: the long-run RMS Doppler spread is sqrt(mean f_s(t)^2),
    # computed here by averaging f_s^2 over one period on a fine grid (B.3.1-B.3.3).
    profile = load_yaml(HEAD + "taps: [{delay_ns: 0, power_db: 0, fading: static}]\n"
                        "conditions: {high_speed_train: {scenario: ts36104-3}}\n")
    train = profile.conditions.high_speed_train
    t = (np.arange(400000) + 0.5) * train.period_s / 400000
    expected = math.sqrt(np.mean(train.doppler_hz(t) ** 2))
    statistics = profile_statistics(profile)
    assert statistics["rms_doppler_spread_hz"] == pytest.approx(expected, rel=1e-6)
    assert statistics["mean_doppler_shift_hz"] == 0.0


def test_a_rician_tap_on_the_trajectory_needs_no_direct_doppler_and_ignores_one():
    profile = load_yaml(lab("""\
        max_doppler_hz: 50
        taps: [{delay_ns: 0, power_db: 0, fading: rician, k_db: 10}]
        conditions: {high_speed_train: {ds_m: 300, dmin_m: 2, speed_kmh: 300, max_doppler_hz: 750}}
    """))
    assert profile.taps[0].los_trajectory == "high_speed_train"
    # The parameters of TS 36.101 B.3 (from memory), given one by one: the same train, no scenario name.
    assert profile.conditions.high_speed_train == dataclasses.replace(high_speed_train("ts36101"), scenario=None)
    warned = warnings_of(lab("""\
        max_doppler_hz: 50
        taps: [{delay_ns: 0, power_db: 0, fading: rician, k_db: 10, los_angle_deg: 30}]
        conditions: {high_speed_train: {scenario: ts36101}}
    """))
    assert [w.pointer for w in warned] == ["/taps/0/los_angle_deg"] and "ignored" in warned[0].message


def test_the_train_parameters_without_a_scenario_must_be_complete():
    one_error(STATIC_AND_RAYLEIGH + "conditions: {high_speed_train: {ds_m: 300, dmin_m: 2}}\n",
              "/conditions/high_speed_train", "missing: speed_kmh, max_doppler_hz")
    train = load_yaml(STATIC_AND_RAYLEIGH + "conditions: {high_speed_train: {scenario: ts36104-1, "
                      "max_doppler_hz: 900}}\n").conditions.high_speed_train
    ds, dmin, kmh, _ = HIGH_SPEED_TRAIN_SCENARIOS["ts36104-1"]
    assert (train.ds_m, train.dmin_m, train.max_doppler_hz) == (ds, dmin, 900.0)
    assert train.speed_mps == pytest.approx(kmh / 3.6) and "max_doppler_hz changed" in train.scenario


def test_the_high_speed_train_needs_a_direct_part_to_act_on():
    one_error(HEAD + "max_doppler_hz: 5\ntaps: [{delay_ns: 0, power_db: 0}]\n"
              "conditions: {high_speed_train: {scenario: ts36104-1}}\n",
              "/conditions/high_speed_train", "no tap has one")
    one_error(STATIC_AND_RAYLEIGH + "conditions: {high_speed_train: {scenario: ts36104-1, taps: [0, 1]}}\n",
              "/conditions/high_speed_train/taps/1", "tap 1 is rayleigh")
    one_error(STATIC_AND_RAYLEIGH + "conditions: {high_speed_train: {scenario: ts36104-1, taps: [5]}}\n",
              "/conditions/high_speed_train/taps/0", "does not exist")


def test_moving_propagation_and_a_carrier_that_follows():
    plain = load_yaml(STATIC_AND_RAYLEIGH + "conditions: {moving_propagation: {scenario: ts36104-2}}\n")
    assert plain.conditions.moving_propagation == moving_propagation("ts36104-2")
    assert plain.largest_doppler_hz == 50.0  # the carrier does not follow: no shift (TS 36.104 B.4 note)
    one_error(STATIC_AND_RAYLEIGH + "conditions: {moving_propagation: {scenario: ts36104-1, carrier_follows: true}}\n",
              "/conditions/moving_propagation/carrier_follows", "needs the carrier frequency")
    follows = load_yaml(STATIC_AND_RAYLEIGH + "conditions: {moving_propagation: {amplitude_us: 10, "
                        "angular_rate_per_s: 0.13, carrier_follows: true, carrier_hz: 2.0e9}}\n")
    # d/dt of (A/2) sin(w t) peaks at (A/2) w (B.4-1): f_c (A/2) w = 2e9 * 5e-6 * 0.13 = 1300 Hz.
    assert follows.conditions.drift_doppler_hz == pytest.approx(1300.0)
    assert follows.taps[1].largest_doppler_hz == pytest.approx(50.0 + 1300.0)
    assert follows.taps[0].largest_doppler_hz == pytest.approx(1300.0)


def test_shadowing_takes_the_profiles_speed_and_makes_the_seeded_process():
    base = HEAD + "speed_kmh: 36\ncarrier_hz: 1.0e9\ntaps: [{delay_ns: 0, power_db: 0}]\n"
    spec = load_yaml(base + "conditions: {shadowing: {sigma_db: 8, decorrelation_distance_m: 50}}\n") \
        .conditions.shadowing
    assert spec.speed_mps == pytest.approx(10.0) and spec.hold == "mean"
    # E[10^(S/10)] = 1 needs mu = -sigma^2 ln(10)/20 (log-normal mean, common practice).
    assert spec.offset_db == pytest.approx(-64 * math.log(10) / 20)
    process = spec.generator(seed=7)
    assert (process.sigma_db, process.speed_mps, process.hold) == (8.0, pytest.approx(10.0), "mean")
    one_error(HEAD + "max_doppler_hz: 5\ntaps: [{delay_ns: 0, power_db: 0}]\n"
              "conditions: {shadowing: {sigma_db: 8, decorrelation_distance_m: 50}}\n",
              "/conditions/shadowing", "needs a speed")
    one_error(base + "conditions: {shadowing: {sigma_db: 8, decorrelation_distance_m: 50, speed_kmh: 1, "
              "speed_mps: 1}}\n", "/conditions/shadowing/speed_mps", "not both")


def test_the_conditions_record_is_strict_json():
    profile = load_yaml(lab(head=STATIC_AND_RAYLEIGH, extra="""\
        conditions:
          high_speed_train: {scenario: ts36104-3}
          moving_propagation: {scenario: ts36104-1}
          shadowing: {sigma_db: 4, decorrelation_distance_m: 10, speed_mps: 3, hold: median}
    """))
    assert isinstance(profile.conditions, Conditions)
    record = json.loads(json.dumps(profile.conditions.as_record(), allow_nan=False))
    assert record["high_speed_train"]["taps"] == [0] and record["shadowing"]["hold"] == "median"
    assert len(profile.conditions.summary_lines()) == 3


# -- target ---------------------------------------------------------------------------------------


def test_a_target_block_becomes_a_target():
    profile = load_yaml(STATIC_AND_RAYLEIGH + "target: {sample_rate_hz: 30.72e6, max_fir_coefficients: 8, "
                        "delay_step_samples: 4, between_updates: linear}\n")
    assert profile.target == Target(sample_rate_hz=30.72e6, max_fir_coefficients=8, delay_step_samples=4,
                                    between_updates="linear")


def test_target_problems_are_located_once():
    text = STATIC_AND_RAYLEIGH + "target:\n  max_fir_coefficients: 0\n  max_pahts: 3\n"
    found = errors_of(text)
    assert sorted(p.pointer for p in found) == ["/target/max_fir_coefficients", "/target/max_pahts"]
    assert {p.line for p in found} == {8, 9}
    assert "did you mean 'max_paths'" in [p for p in found if p.pointer.endswith("pahts")][0].hint


def test_a_target_file_loads_with_positions(tmp_path):
    good = tmp_path / "bench.yaml"
    good.write_text("# Invented example.\nname: bench-fir-8\nmax_fir_coefficients: 8\ncoefficient_bits: 12\n")
    assert load_target(good) == Target(max_fir_coefficients=8, coefficient_bits=12, name="bench-fir-8")
    bad = tmp_path / "bad.yaml"
    bad.write_text("max_fir_coefficients: 8\nbetween_updates: cubic\nheadroom_db: 1e999\n")
    target, problems = check_target_file(bad)
    assert target is None
    assert [(p.line, p.pointer) for p in problems] == [(2, "/between_updates"), (3, "/headroom_db")]
    with pytest.raises(ProfileError) as raised:
        load_target(bad)
    assert str(raised.value).count("\n") == 1 and "bad.yaml:2:" in str(raised.value)
    assert check_target_file(tmp_path / "missing.yaml")[0] is None


# -- stats and the command line ---------------------------------------------------------------------


def test_stats_reports_the_blocks_and_keeps_the_contract_keys(tmp_path):
    path = tmp_path / "lab.yaml"
    path.write_text(RICIAN_2X2 + "  correlation: {level: medium, specification: ts36101}\n"
                    "  direct_part: identical\n"
                    "conditions: {high_speed_train: {scenario: ts36104-1}}\n", encoding="utf-8")
    result = run("stats", path, "--json")
    assert result.exit_code == 0, result.output
    s = json.loads(result.stdout)
    for key in ("n_taps", "total_power_db", "mean_excess_delay_s", "rms_delay_spread_s", "max_excess_delay_s",
                "coherence_bandwidth_50_hz", "coherence_bandwidth_90_hz", "coherence_bandwidth_rule_hz",
                "max_doppler_hz", "rms_doppler_spread_hz", "coherence_time_rule_s", "taps"):
        assert key in s
    assert s["max_doppler_hz"] == 50  # f_D of the diffuse parts, as before
    assert s["mimo"]["n_tx"] == 2 and s["mimo"]["correlation"]["level"] == "medium"
    assert s["conditions"]["high_speed_train"]["scenario"] == "ts36104-1"
    assert s["preset"] is None and "preset" in s["reasons"]
    text = run("stats", path).stdout
    assert "mimo\n  2x2 (4 links), correlation medium (ts36101: alpha 0.3, beta 0.9" in text
    assert "conditions\n  high-speed train ts36104-1" in text


def test_validate_reports_block_errors_with_exit_2(tmp_path):
    path = tmp_path / "lab.yaml"
    path.write_text(RICIAN_2X2 + "  correlation: {matrix: [[1, 0.5], [0.5, 1]]}\n", encoding="utf-8")
    result = run("validate", path)
    assert_clean_failure(result)
    assert "lab.yaml:10:25: /mimo/correlation/matrix: matrix is 2x2, expected 4x4" in result.stderr
    assert "lab.yaml:7:1: /mimo: tap(s) 0 have a direct part" in result.stderr
    assert "invalid, 2 error(s)" in result.stdout


def test_a_broken_block_gives_its_schema_errors_only():
    document = dict(BASE, mimo={"n_tx": "two", "n_rx": 2, "correlation": {"level": "medium"}})
    profile, problems = check_profile_text(json.dumps(document), format="json")
    assert profile is None and [p.pointer for p in problems] == ["/mimo/n_tx"]


def test_every_preset_with_every_block_loads():
    # The blocks combine with any preset's taps (their direct parts included).
    for name in ("tdl-a", "tdl-d", "tdl-e", "epa", "ped-a", "veh-b"):
        text = HEAD + (
            f"extends: {name}\n"
            "mimo: {n_tx: 2, n_rx: 2, correlation: {level: high, specification: ts36101}, direct_part: identical}\n"
            "target: {max_fir_coefficients: 4096, sample_rate_hz: 30.72e6}\n")
        profile = load_yaml(text)
        assert profile.mimo.n_links == 4 and profile.n_taps == load_preset(name).n_taps


# -- random damage never crashes the checks of the blocks ----------------------------------------------

RICH_BLOCKS = {
    "format_version": 1, "name": "lab", "speed_kmh": 30, "carrier_hz": 2.6e9,
    "extends": {"preset": "tdl-d", "delay_spread_ns": 100, "taps": [{"index": 0, "k_db": 9, "los_angle_deg": 30}]},
    "mimo": {"n_tx": 2, "n_rx": 2, "correlation": {"matrix": [[1, 0.5, 0, 0], [0.5, 1, 0, 0], [0, 0, 1, 0.5],
                                                              [0, 0, 0.5, 1]], "adjustment": 0.001},
             "direct_part": {"rx_spacing_wavelengths": 0.5, "arrival_deg": 30}},
    "conditions": {"high_speed_train": {"scenario": "ts36104-1", "taps": [0]},
                   "moving_propagation": {"amplitude_us": 10, "angular_rate_per_s": 0.04, "carrier_follows": True},
                   "shadowing": {"sigma_db": 8, "decorrelation_distance_m": 50, "hold": "median"}},
    "target": {"max_fir_coefficients": 64, "max_paths": 8, "coefficient_bits": 12},
}
BLOCK_KEYS = ["n_tx", "n_rx", "correlation", "level", "specification", "alpha", "beta", "base_station", "tx",
              "rx", "matrix", "tx_matrix", "adjustment", "direct_part", "high_speed_train", "taps", "scenario",
              "ds_m", "speed_mps", "carrier_follows", "shadowing", "hold", "preset", "index", "re", "im",
              "max_paths", "extends", "delay_spread_ns", "fading", "k_db"]


small_values = st.none() | st.booleans() | st.integers(-3, 20) | st.floats(-2, 2) | st.sampled_from(
    ["identical", "medium", "ts36101", "tx", "rician", "static", "tdl-c", "epa", "ts36104-3", "mean"]) | \
    st.lists(st.integers(-1, 3), max_size=3) | st.dictionaries(st.sampled_from(BLOCK_KEYS), st.integers(0, 2),
                                                               max_size=2)


@st.composite
def damaged_block_documents(draw):
    document = json.loads(json.dumps(RICH_BLOCKS))
    if draw(st.booleans()):  # the same blocks on explicit taps instead of a preset
        del document["extends"]
        document["taps"] = [{"delay_ns": 0, "power_db": 0, "fading": "static"},
                            {"delay_ns": 50, "power_db": -3, "fading": "rician", "k_db": 3, "los_doppler_hz": 5},
                            {"delay_ns": 90, "power_db": -6}]
    for _ in range(draw(st.integers(1, 4))):
        target = draw(st.sampled_from(containers(document)))
        if isinstance(target, dict):
            key = draw(st.sampled_from(sorted(target) + BLOCK_KEYS))
            if draw(st.booleans()) and key in target:
                del target[key]
            else:
                target[key] = draw(small_values)
        elif target:
            target[draw(st.integers(0, len(target) - 1))] = draw(small_values)
    return document


@settings(max_examples=150, deadline=None)
@given(damaged_block_documents())
def test_random_damage_to_the_blocks_never_crashes(document):
    profile, problems = check_profile_text(json.dumps(document), format="json")
    assert (profile is None) == any(p.severity == "error" for p in problems)
    if profile is not None:
        json.dumps(profile_statistics(profile), allow_nan=False)
        assert profile_from_document(profile.document) == profile


def test_the_readme_example_of_the_blocks_loads():
    from pathlib import Path

    readme = (Path(__file__).resolve().parents[2] / "README.md").read_text(encoding="utf-8")
    section = readme.split("### Standard models, MIMO, conditions and an emulator target", 1)[1]
    example = section.split("```yaml\n", 1)[1].split("\n```", 1)[0]
    profile, problems = check_profile_text(example + "\n", filename="README.md")
    assert profile is not None and problems == [], [p.format() for p in problems]
    assert profile.preset.name == "tdl-d" and profile.mimo.n_links == 4
    assert profile.taps[0].k_db == pytest.approx(9.0) and profile.target.coefficient_bits == 16


def test_the_raw_schema_accepts_extends_without_taps_as_an_editor_sees_it():
    import jsonschema

    validator = jsonschema.Draft202012Validator(profile_schema())
    assert validator.is_valid({"format_version": 1, "name": "a", "extends": "tdl-c"})
    assert validator.is_valid({"format_version": 1, "name": "a", "extends": {"preset": "epa", "taps": [{"index": 1, "power_db": -2}]}})
    assert not validator.is_valid({"format_version": 1, "name": "a"})  # taps or extends
    assert not validator.is_valid({"format_version": 1, "name": "a", "extends": "tdl-x"})
    assert not validator.is_valid({"format_version": 1, "name": "a", "extends": {"delay_spread_ns": 3}})
    for name in ("tdl-c", "epa"):
        assert validator.is_valid(preset_document(name))  # with its preset: block
