"""The tolerance checks: the exact reference process passes, deliberately wrong records fail.

Records come from :mod:`emucompile.verify.reference` (inverse-DFT shaping, Young &
Beaulieu 2000), whose statistics are exact; the calibration
(``tools/calibrate_tolerances.py``) makes each check fail such a record in at
most 0.1 % of seeds at level 1e-3. Seeds are fixed and were not chosen.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from scipy import stats

from emucompile.verify import estimators

from emucompile.verify import reference

from emucompile.verify import nulls, verdicts
from emucompile.verify import tolerance
from emucompile.profile.model import Tap
from emucompile.models.theory import DopplerSpectrum

FD = 10.0
RATE = 8 * FD
N = 200_000  # T f_D = 2.5e4
CLASSICAL = DopplerSpectrum("classical", FD)


def record(spectrum=CLASSICAL, seed=1, n=N, rate=RATE, **kw):
    rng = np.random.default_rng(np.random.SeedSequence(20261202, spawn_key=(seed,)))
    return reference.tap_record(spectrum, rate, n, rng, periodic=kw.pop("periodic", False), **kw)


def by_name(results):
    return {r.name: r for r in results}


@pytest.mark.parametrize(
    "spectrum,k,los,periodic",
    [
        (CLASSICAL, 0.0, 0.0, False),
        (DopplerSpectrum("flat", FD), 3.0, 0.0, True),
        (DopplerSpectrum("gaussian", FD, 0.3 * FD), 3.0, 0.7 * FD, False),
    ],
    ids=["classical-rayleigh", "flat-rician-periodic", "gaussian-rician-turning"],
)
def test_reference_process_passes(spectrum, k, los, periodic):
    g = record(spectrum, seed=2, k_linear=k, los_doppler_hz=los, periodic=periodic)
    if periodic:
        los = round(los * N / RATE) * RATE / N
    res = tolerance.check_tap(g, RATE, tolerance.TapModel(spectrum, 1.0, k, los), periodic=periodic, tap=0)
    assert [r.name for r in res] == [n for n in tolerance.CHECK_NAMES if n != "cross_correlation"]
    for r in res:
        assert r.passed is not False, (r.name, r.value, r.expected, r.tolerance, r.p_value)
    applicable = {r.name for r in res if r.passed is not None}
    assert {"mean_power", "envelope_ks", "autocorrelation", "doppler_psd", "out_of_band_power",
            "level_crossing_rate", "fade_duration"} <= applicable
    assert ("k_factor" in applicable) == (k > 0) and ("phase_uniformity" in applicable) == (k == 0)


def test_power_off_by_one_db_fails():
    g = record(seed=3) * math.sqrt(10 ** 0.1)
    r = by_name(tolerance.check_tap(g, RATE, tolerance.TapModel(CLASSICAL, 1.0)))
    assert r["mean_power"].passed is False
    # the value is the ratio to the model's power (1 dB = 1.259): the test is on that linear scale
    assert abs(r["mean_power"].value - 10 ** 0.1) < 0.05
    assert r["mean_power"].tolerance < 0.05  # this record resolves far better than 1 dB


def test_wrong_doppler_fails():
    g = record(DopplerSpectrum("classical", 1.1 * FD), seed=4)
    r = by_name(tolerance.check_tap(g, RATE, tolerance.TapModel(CLASSICAL, 1.0)))
    for name in ("autocorrelation", "doppler_psd", "level_crossing_rate"):
        assert r[name].passed is False, name
    assert r["mean_power"].passed is True and r["envelope_ks"].passed is True


def test_white_noise_fails():
    rng = np.random.default_rng(5)
    g = (rng.standard_normal(N) + 1j * rng.standard_normal(N)) / math.sqrt(2)
    r = by_name(tolerance.check_tap(g, RATE, tolerance.TapModel(CLASSICAL, 1.0)))
    for name in ("autocorrelation", "doppler_psd", "out_of_band_power", "level_crossing_rate"):
        assert r[name].passed is False, name
    assert r["out_of_band_power"].value > -10.0


def test_wrong_k_fails():
    g = record(seed=6, k_linear=1.5)
    r = by_name(tolerance.check_tap(g, RATE, tolerance.TapModel(CLASSICAL, 1.0, 3.0)))
    assert r["k_factor"].passed is False and r["envelope_ks"].passed is False


def test_improper_phase_fails():
    """An elliptical (improper) Gaussian has a non-uniform phase (second circular moment)."""
    g = record(seed=7)
    g = (g.real * 1.1 + 1j * g.imag * 0.9) / math.sqrt((1.21 + 0.81) / 2)
    r = by_name(tolerance.check_tap(g, RATE, tolerance.TapModel(CLASSICAL, 1.0)))
    assert r["phase_uniformity"].passed is False


def test_too_short_record_is_not_enough_data():
    g = record(n=300)  # T f_D = 37.5
    res = tolerance.check_tap(g, RATE, tolerance.TapModel(CLASSICAL, 1.0))
    assert all(r.passed is None and "not enough data" in r.reason for r in res)


def test_static_tap():
    g = np.full(1000, 0.5 * np.exp(0.3j), np.complex64)
    res = by_name(tolerance.check_tap(g, 100.0, tolerance.TapModel(None, 0.25, math.inf, 0.0)))
    assert res["mean_power"].passed is True
    assert all(r.passed is None for n, r in res.items() if n != "mean_power")
    bad = by_name(tolerance.check_tap(g * 1.01, 100.0, tolerance.TapModel(None, 0.25, math.inf, 0.0)))
    assert bad["mean_power"].passed is False


def test_cross_correlation_expected_nonzero():
    a = record(seed=8)
    c = record(seed=9)
    rho = 0.6 * np.exp(0.5j)
    b = rho * a + math.sqrt(1 - abs(rho) ** 2) * c
    m = tolerance.TapModel(CLASSICAL, 1.0)
    # a target correlation is judged by the mimo_correlation statistic (Mahalanobis distance)
    ok = tolerance.check_cross_correlation(b, a, RATE, m, m, taps=(1, 0), expected=rho, name="mimo_correlation")
    assert ok.passed is True and ok.tap == (1, 0) and ok.unit == "Mahalanobis distance"
    assert tolerance.check_cross_correlation(b, a, RATE, m, m, taps=(1, 0)).passed is False
    off = tolerance.check_cross_correlation(b, a, RATE, m, m, expected=rho * np.exp(0.3j), name="mimo_correlation")
    assert off.passed is False
    with pytest.raises(ValueError, match="expects 0"):
        tolerance.check_cross_correlation(b, a, RATE, m, m, expected=rho)
    assert tolerance.check_cross_correlation(a, c, RATE, m, m, taps=(0, 2)).passed is True


def test_correlation_matrix_is_the_pairwise_estimate():
    """One Gram-matrix pass gives every pair's coefficient of the diffuse parts, a Rician tap's line removed."""
    rician = tolerance.TapModel(CLASSICAL, 2.0, 3.0, 0.7 * CLASSICAL.band_edge_hz)
    models = [tolerance.TapModel(CLASSICAL, 1.0), rician, tolerance.TapModel(CLASSICAL, 1.0)]
    n = 3 * tolerance._GRAM_BLOCK + 17  # several blocks and a partial one
    records = [record(seed=20 + i, n=n) for i in range(3)]
    t = np.arange(n) / RATE
    records[1] = records[1] + math.sqrt(1.5) * np.exp(2j * np.pi * rician.los_doppler_hz * t + 0.3j)
    records[2] = 0.5 * records[0] + records[2]  # a correlated pair
    rho = tolerance.correlation_matrix(records, RATE, models)
    for i in range(3):
        for j in range(3):
            pairwise = estimators.correlation_coefficient(verdicts.diffuse(records[i], RATE, models[i]),
                                                          verdicts.diffuse(records[j], RATE, models[j]))
            assert abs(rho[i, j] - pairwise) < 1e-12
    assert abs(rho[2, 0]) > 0.3 and abs(rho[1, 0]) < 0.1
    given = tolerance.check_cross_correlation(records[2], records[0], RATE, models[2], models[0], estimate=rho[2, 0])
    direct = tolerance.check_cross_correlation(records[2], records[0], RATE, models[2], models[0])
    assert given.value == pytest.approx(direct.value, abs=1e-12) and given.passed is direct.passed is False


def test_holm_leaves_results_without_p_alone():
    # Holm's levels and the printed-tolerance rule are tested in tests/test_verdict_rule.py.
    na = tolerance.CheckResult("k_factor", 0, None, None, None, None, None, "not applicable", 1e-3, None, "", {})
    null = {"law": "normal", "m": 1, "z": 5.0, "scale": 1.0, "calibration_factor": 1.0}
    failing = tolerance.CheckResult("mean_power", 0, 5.0, 0.0, None, 1e-5, False, None, 1e-3, None, "", {"null": null})
    out = tolerance.holm([na, failing], family_wise=0.01)
    assert out[0] is na and out[1].passed is False and out[1].level == 0.01


def test_to_dict_is_strict_json():
    r = tolerance.CheckResult("fade_duration", (0, 1), math.inf, float("nan"), 1.0, 0.5, True, None, 1e-3, 1.0,
                              "s", {"x": np.float64(np.inf), "y": [np.int64(2), 1j]})
    d = r.to_dict()
    text = json.dumps(d, allow_nan=False)
    assert d["value"] is None and d["expected"] is None and "value is inf" in d["reason"]
    assert d["tap"] == [0, 1] and d["detail"]["y"] == [2, [0.0, 1.0]]
    res = tolerance.check_tap(record(seed=10, n=20_000), RATE, tolerance.TapModel(CLASSICAL, 1.0))
    json.dumps([x.to_dict() for x in res], allow_nan=False)
    assert text


def test_tap_model_from_tap():
    m = tolerance.TapModel.from_tap(Tap(0.0, 0.5, fading="rician", k_linear=2.0, max_doppler_hz=FD,
                                        los_doppler_hz=3.0))
    assert m == tolerance.TapModel(DopplerSpectrum("classical", FD), 0.5, 2.0, 3.0)
    m = tolerance.TapModel.from_tap(Tap(0.0, 0.5, spectrum="gaussian", sigma_hz=2.0, max_doppler_hz=FD))
    assert m.spectrum == DopplerSpectrum("gaussian", FD, 2.0) and m.k_linear == 0.0
    m = tolerance.TapModel.from_tap(Tap(0.0, 0.5, fading="static", los_doppler_hz=1.0))
    assert m.spectrum is None and math.isinf(m.k_linear) and m.direct_power == 0.5
    with pytest.raises(ValueError):
        tolerance.TapModel.from_tap(Tap(0.0, 0.5, fading="rician", k_linear=1.0, max_doppler_hz=FD,
                                        los_trajectory="high_speed_train"))


def test_decimated_rate_just_above_nyquist():
    """verify checks band-limited decimated copies: the checks work at 2.5 f_D."""
    g = record(seed=11, rate=2.5 * FD, n=150_000)
    res = by_name(tolerance.check_tap(g, 2.5 * FD, tolerance.TapModel(CLASSICAL, 1.0)))
    for name in ("mean_power", "envelope_ks", "autocorrelation", "doppler_psd", "level_crossing_rate"):
        assert res[name].passed is True, (name, res[name])


def test_calibration_is_committed():
    cal = tolerance.calibration()
    # the MIMO correlation statistic has its own calibration file (tools/calibrate_mimo_correlation.py)
    assert set(cal["factors"]) == set(tolerance.CHECK_NAMES) - {"out_of_band_power"} | {"mimo_correlation"}
    assert all(0.2 < c < 5 for c in cal["factors"].values())
    mimo = cal["mimo_correlation"]
    assert mimo["false_alarms"]["0.001"]["count"] == 0 and mimo["false_alarms"]["0.001"]["pairs"] > 10000
    assert max(c["largest_abs_rho"] for c in mimo["by_abs_rho"]) >= 0.99


@pytest.mark.parametrize("periodic", [False, True])
@pytest.mark.parametrize("k, los", [(0.0, 0.0), (3.0, 0.3 * FD)])
def test_null_sum_tasks_fill_every_cache_check_tap_reads(periodic, k, los):
    """After the tasks ran, check_tap computes no null sum of its own (every cache lookup hits)."""
    model = tolerance.TapModel(CLASSICAL, 1.0, k, los)
    n = 4000
    g = reference.tap_record(CLASSICAL, RATE, n, np.random.default_rng(3), k_linear=k, los_doppler_hz=los,
                             periodic=periodic)
    tolerance.clear_caches()
    tasks = tolerance.null_sum_tasks(model, RATE, n, periodic)
    assert len(tasks) == 1  # one pass over the lags computes every sum of the model
    for task in tasks:
        task()
    cached = (nulls.lags_head, nulls.bartlett_sums, nulls.phase_variances, nulls.power_covariance_sum)
    misses = [c.cache_info().misses for c in cached]
    tolerance.check_tap(g, RATE, model, periodic=periodic)
    assert [c.cache_info().misses for c in cached] == misses
    assert tolerance.null_sum_tasks(tolerance.TapModel(None, 1.0, math.inf), RATE, n, periodic) == []


@pytest.mark.parametrize("law", ["normal", "exp", "kolmogorov", "gamma2"])
def test_pvalue_and_critical_agree_with_scipy_stats(law):
    """The special functions used equal scipy.stats' laws, and _critical inverts _pvalue."""
    z = np.array([0.3, 1.0, 2.5, 4.0])
    ref = {"normal": 2 * stats.norm.sf(z), "exp": np.exp(-z * z), "kolmogorov": stats.kstwobign.sf(z),
           "gamma2": stats.gamma.sf(z * z, 2)}[law]
    np.testing.assert_allclose([nulls.pvalue(law, float(x), 1) for x in z], ref, rtol=1e-12)
    for level, m in [(1e-3, 1), (1e-2, 7), (0.2, 3)]:
        zc = nulls.critical(law, level, m)
        assert abs(nulls.pvalue(law, zc, m) - level) < 1e-9 * level
