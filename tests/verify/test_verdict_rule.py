"""The printed-tolerance rule: a check passes exactly when |value - expected| <= tolerance.

(value <= tolerance where there is no expected value.) The tolerance is the
bound at the level that decides the check after Holm (tolerance.holm), so a
reviewer reading value against tolerance reads the verdict. Held here over
every check kind, on correct data and on slightly deviated data (Doppler 1 %
off at T f_D = 1e4 through verify_gains; a MIMO bundle with one link
decorrelated; a tap's power 0.3 dB off). The Holm levels are checked against
Holm's procedure itself (Holm 1979) by moving one p-value across its level.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from emucompile.compile import compiler

from emucompile.models import fading

from emucompile.verify import nulls
from emucompile.verify import tolerance
from emucompile.verify import run as verifier
from emucompile.profile.model import load_profile_text

FD = 50.0
RATE = 32 * FD  # verify decimates to 8 f_D: power_beyond_record_band is judged too

PROFILE = """\
format_version: 1
name: rule-lab
description: invented for the tests (Rayleigh, Rician with a turning direct part, flat spectrum, static)
max_doppler_hz: {fd}
taps:
  - {{delay_ns: 0, power_db: 0}}
  - {{delay_ns: 100, power_db: -3, fading: rician, k_db: 6, los_doppler_hz: {los}}}
  - {{delay_ns: 300, power_db: -6, spectrum: flat}}
  - {{delay_ns: 500, power_db: -9, fading: static}}
"""


CHECK_KINDS = set(tolerance.CHECK_NAMES) | {"power_beyond_record_band"}


def contradictions(checks):
    """Checks whose verdict disagrees with value, expected and tolerance as printed (or that print no tolerance)."""
    bad = []
    for check in checks:
        if check.passed is None:
            continue
        if check.value is None:  # no number could be made: may fail, never pass
            if check.passed:
                bad.append(check)
            continue
        if check.tolerance is None or check.passed != tolerance.within_tolerance(check.value, check.expected,
                                                                                 check.tolerance):
            bad.append(check)
    return bad


def _kind(check):
    return check.name.split(" [")[0].split(": ")[-1]


def _profile(fd=FD):
    """The profile with every Doppler (the direct part's, 0.6 f_D, too) at ``fd``."""
    return load_profile_text(PROFILE.format(fd=fd, los=0.6 * fd), filename="rule-lab.yaml")


@pytest.fixture(scope="module")
def gains_files(tmp_path_factory):
    """The profile's gains (T f_D = 1e4) and the same with every Doppler 1 % high, as foreign npy files."""
    root = tmp_path_factory.mktemp("rule")
    n = int(1e4 / FD * RATE)
    files = {}
    for label, fd in (("correct", FD), ("doppler+1%", 1.01 * FD)):
        gains = fading.generate(_profile(fd), RATE, n, 11)
        files[label] = root / f"{label}.npy"
        np.save(files[label], gains)
    return files


@pytest.mark.parametrize("label", ["correct", "doppler+1%"])
def test_no_contradiction_over_every_check_kind_of_verify_gains(gains_files, label):
    result = verifier.verify_gains(gains_files[label], _profile(), RATE)
    judged = [c for c in result.checks if c.passed is not None]
    assert {_kind(c) for c in judged} == CHECK_KINDS, CHECK_KINDS - {_kind(c) for c in judged}
    assert contradictions(result.checks) == []
    if label == "doppler+1%":  # the deviation is seen, so failing verdicts are among those held to the rule
        failed = {_kind(c) for c in result.failed}
        assert {"doppler_psd", "level_crossing_rate"} & failed, failed
        assert any(c.passed for c in judged)


def test_no_contradiction_with_a_tap_power_slightly_off(gains_files, tmp_path):
    gains = np.load(gains_files["correct"])
    gains[:, 0] *= np.float32(10 ** (0.3 / 20))
    np.save(tmp_path / "power.npy", gains)
    result = verifier.verify_gains(tmp_path / "power.npy", _profile(), RATE)
    assert contradictions(result.checks) == []
    assert ("mean_power", 0) in {(c.name, c.tap) for c in result.failed}


MIMO_PROFILE = """\
format_version: 1
name: rule-mimo
description: invented for the tests (2x4, TS 36.101 high correlation)
max_doppler_hz: 40
taps:
  - {delay_ns: 0, power_db: 0}
  - {delay_ns: 150, power_db: -4, fading: rician, k_db: 3, los_doppler_hz: 10}
mimo:
  n_tx: 2
  n_rx: 4
  correlation: {level: high, specification: ts36101}
  direct_part: identical
"""


@pytest.fixture(scope="module")
def mimo_bundle(tmp_path_factory):
    root = tmp_path_factory.mktemp("rule-mimo")
    (root / "p.yaml").write_text(MIMO_PROFILE)
    out = root / "bundle"
    compiler.compile_profile(root / "p.yaml", out, duration_s=25.0, seed=3, update_rate_hz=640.0,
                             sample_rate_hz=30.72e6, delay_mapping="nearest")
    return out


def test_no_contradiction_on_a_mimo_bundle_and_with_one_link_decorrelated(mimo_bundle, tmp_path):
    import shutil

    from emucompile.bundle.formats import sha256_file

    result = verifier.verify_bundle(mimo_bundle)
    mimo = [c for c in result.checks if c.name.startswith("mimo_correlation")]
    assert len(mimo) == 2 * 28 and all(c.unit == "Mahalanobis distance" for c in mimo)
    assert {_kind(c) for c in result.checks if c.passed is not None} >= {"mimo_correlation", "fir_power",
                                                                         "fir_rms_delay_spread", "fir_map_rebuilt"}
    assert contradictions(result.checks) == []

    bundle = tmp_path / "b"
    shutil.copytree(mimo_bundle, bundle)
    gains = np.load(bundle / "tap_gains.npy", mmap_mode="r+")
    gains[:, 1, 0, 0] = np.roll(np.array(gains[:, 1, 0, 0]), gains.shape[0] // 2)
    gains.flush()
    del gains
    import json

    manifest = json.loads((bundle / "manifest.json").read_text())
    for entry in manifest["files"]:
        entry["sha256"] = sha256_file(bundle / entry["name"])
    (bundle / "manifest.json").write_text(json.dumps(manifest, indent=2))
    deviated = verifier.verify_bundle(bundle)
    assert any(c.name.startswith("mimo_correlation") for c in deviated.failed)
    assert contradictions(deviated.checks) == []


# -- Holm's levels ------------------------------------------------------------------------------------


def _synthetic(p, name="mean_power"):
    """A check whose value sits at the normal law's z for p (scale 1, no calibration)."""
    z = nulls.critical("normal", p, 1)
    null = {"law": "normal", "m": 1, "z": z, "scale": 1.0, "calibration_factor": 1.0}
    return tolerance.CheckResult(name, 0, z, 0.0, None, p, True, None, 1e-3, None, "", {"null": null})


def _holm_verdicts(ps, alpha):
    """Holm 1979 written out: sorted p_(i) rejected at alpha / (m - i) until the first acceptance."""
    order = np.argsort(ps, kind="stable")
    out = [True] * len(ps)
    for step, i in enumerate(order):
        if ps[i] > alpha / (len(ps) - step):
            break
        out[i] = False
    return out


@pytest.mark.parametrize("seed", range(6))
def test_each_level_is_where_holm_changes_that_verdict(seed):
    rng = np.random.default_rng(seed)
    m, alpha = 12, 0.05
    ps = list(np.concatenate([10 ** rng.uniform(-5, -2, 5), rng.uniform(0, 1, m - 5)]))
    out = tolerance.holm([_synthetic(p) for p in ps], family_wise=alpha)
    assert [r.passed for r in out] == _holm_verdicts(ps, alpha)
    assert contradictions(out) == []
    for i, r in enumerate(out):
        for factor, fails in ((0.999, True), (1.001, False)):
            moved = list(ps)
            moved[i] = r.level * factor
            assert _holm_verdicts(moved, alpha)[i] is not fails, (i, r.level, factor)


def test_holm_levels_written_out():
    # p = [0.5, 1e-4, 0.004, 0.03] at 0.01: 1e-4 <= 0.01/4 is rejected, 0.004 > 0.01/3 stops Holm.
    # The three accepted checks are judged at the stopping level 0.01/3 (0.03 and 0.5 included: a
    # p-value at or below 0.01/3 would have made them rejected); the rejected one at 0.01/4 (with
    # the others as they are, nothing below it is rejected).
    out = tolerance.holm([_synthetic(p) for p in (0.5, 1e-4, 0.004, 0.03)], family_wise=0.01)
    assert [r.passed for r in out] == [True, False, True, True]
    assert [r.level for r in out] == pytest.approx([0.01 / 3, 0.0025, 0.01 / 3, 0.01 / 3])
    out = tolerance.holm([_synthetic(p) for p in (0.001, 0.002, 0.004, 0.5)], family_wise=0.01)
    assert [r.passed for r in out] == [False, False, False, True]
    # rejected ones, the others held: for 0.001 and 0.002 the rest is (0.002 or 0.001, 0.004, 0.5),
    # whose first is rejected at 0.01/4 and 0.004 > 0.01/3 stops, so each is judged at 0.01/3;
    # for 0.004 the rest (0.001, 0.002, 0.5) has two rejected, so 0.01/2; the accepted one at 0.01/1
    assert [r.level for r in out] == pytest.approx([0.01 / 3, 0.01 / 3, 0.005, 0.01])
    assert all(math.isclose(r.tolerance, nulls.critical("normal", r.level, 1)) for r in out)
