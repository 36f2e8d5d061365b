"""Likely slips are warned with the number and the value probably meant; never errors."""

from __future__ import annotations

import statistics

import pytest
from click.testing import CliRunner

from emucompile.cli import cli
from emucompile.profile.presets import list_presets, preset_document
from emucompile.profile.model import check_profile_text, profile_from_document
from emucompile.profile.slips import DELAY_SPACING_FACTOR, slip_warnings

INDOOR = """\
format_version: 1
name: office-slip
description: Invented indoor profile with a ns/us slip in its last tap.
max_doppler_hz: 5
taps:
  - {delay_ns: 0, power_db: 0}
  - {delay_ns: 50, power_db: -3}
  - {delay_ns: 110, power_db: -6}
  - {delay_us: 180, power_db: -9}
"""


def _warnings(text):
    profile, problems = check_profile_text(text, filename="p.yaml")
    assert profile is not None, [p.format() for p in problems]  # warnings, never errors
    return {p.pointer: p for p in problems if p.severity == "warning"}


def test_a_tap_far_beyond_the_median_spacing_is_a_likely_ns_us_slip(tmp_path):
    found = _warnings(INDOOR)
    problem = found["/taps/3/delay_us"]
    assert "180 us is 3000 x the median spacing" in problem.message and "(60 ns)" in problem.message
    assert "likely delay_ns: 180" in problem.hint
    path = tmp_path / "office.yaml"
    path.write_text(INDOOR, encoding="utf-8")
    result = CliRunner().invoke(cli, ["validate", str(path)])
    assert result.exit_code == 0 and f"{path}: valid, 1 warning(s)" in result.stdout
    assert "likely delay_ns: 180" in result.stderr
    assert not _warnings(INDOOR.replace("delay_us: 180", "delay_ns: 180"))


@pytest.mark.parametrize("replace, pointer, words", [
    ("max_doppler_hz: 5", "/max_doppler_hz", ("12000 Hz is above 10000 Hz", "likely max_doppler_hz: 12")),
    ("{delay_ns: 0, power_db: 0}", "/taps/0/k_db", ("K = 100 dB is above 40 dB", "k_db: 20")),
    ("max_doppler_hz: 5", "/speed_mps", ("speed 900 km/h is above the fastest trains", "speed_kmh: 250")),
    ("max_doppler_hz: 5", "/carrier_hz", ("carrier 2.6 Hz is below 1 MHz", "carrier_hz: 2.6e+09, i.e. 2.6 GHz")),
    ("max_doppler_hz: 5", "/carrier_hz", ("carrier 3.5e+11 Hz is above 300 GHz", "carrier_hz: 3.5e+08")),
])
def test_each_likely_slip_is_warned_with_the_value_meant(replace, pointer, words):
    text = INDOOR.replace("delay_us: 180", "delay_ns: 180")
    if pointer == "/max_doppler_hz":
        text = text.replace(replace, "max_doppler_hz: 12000")
    elif pointer == "/taps/0/k_db":
        text = text.replace(replace, "{delay_ns: 0, power_db: 0, fading: rician, k_db: 100, los_angle_deg: 90}")
    elif pointer == "/speed_mps":
        text = text.replace(replace, "speed_mps: 250\ncarrier_hz: 2e6")
    elif "2.6 Hz" in words[0]:
        text = text.replace(replace, "speed_kmh: 30\ncarrier_hz: 2.6\nmax_doppler_hz: 5")
    else:
        text = text.replace(replace, "speed_kmh: 0.01\ncarrier_hz: 3.5e11")
    profile, problems = check_profile_text(text, filename="p.yaml")
    found = {p.pointer: p for p in problems if p.severity == "warning"}
    assert pointer in found, [p.format() for p in problems]
    assert words[0] in found[pointer].message and words[1] in found[pointer].hint, found[pointer].format()


def test_the_standard_models_raise_no_slip_and_stay_well_below_the_delay_factor():
    for record in list_presets():
        document = preset_document(record.name, delay_spread_ns=300 if record.normalised else None)
        profile = profile_from_document(document)
        distinct = sorted({t.delay_s for t in profile.taps})
        spacing = statistics.median(b - a for a, b in zip(distinct, distinct[1:]))
        assert distinct[-1] / spacing < 0.5 * DELAY_SPACING_FACTOR, record.name
        taps = [{"index": i, "delay_s": t.delay_s, "k_db": t.k_db} for i, t in enumerate(profile.taps)]
        assert slip_warnings(document, taps) == [], record.name


def test_an_absurd_value_is_an_error_of_the_schema_and_no_crash():
    text = INDOOR.replace("{delay_ns: 0, power_db: 0}", "{delay_ns: 0, power_db: 0, fading: rician, k_db: 3083, "
                          "los_angle_deg: 90}")
    profile, problems = check_profile_text(text, filename="p.yaml")
    assert profile is None and any("k_db must be <= 100" in p.message for p in problems)
