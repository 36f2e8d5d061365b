"""The null sums: blockwise passes against whole-record sums, their definitions, and bounded memory.

The oracle (``whole_*``) is the earlier implementation, which held r(k) and the
lag weights over every lag of the record as n-long arrays: the blockwise sums
must give the same numbers (to 1e-12 relative: only the summation order
differs), whatever the block size, the order the sums are asked in, the
spectrum kind (``emucompile.models.spectra``) and the mode.
"""

from __future__ import annotations

import math
import tracemalloc

import numpy as np
import pytest
from scipy import fft as sp_fft
from scipy import special

from emucompile.models.theory import DopplerSpectrum
from emucompile.verify import estimators, nulls, reference, tolerance

FD = 10.0
RATE = 8 * FD
SPECTRA = [DopplerSpectrum("classical", FD), DopplerSpectrum("flat", FD), DopplerSpectrum("gaussian", FD, 0.3 * FD)]
IDS = ["classical", "flat", "gaussian"]


# -- the oracle: the whole-record implementation, as it was ---------------------------------


def whole_lags(spectrum, rate_hz, n, periodic):
    if periodic:
        r = reference.circular_autocorrelation(spectrum, rate_hz, n)
        return r / r[0]
    return np.array(spectrum.autocorrelation(np.arange(n) / rate_hz), dtype=float)


def whole_weights(n, periodic):
    if periodic:
        return np.ones(n)
    w = 2.0 * (1.0 - np.arange(n) / n)
    w[0] = 1.0
    return w


def whole_pair_sum(spectrum_a, spectrum_b, rate_hz, n, periodic):
    return float(whole_weights(n, periodic) @ (whole_lags(spectrum_a, rate_hz, n, periodic)
                                               * whole_lags(spectrum_b, rate_hz, n, periodic)))


def whole_bartlett_sums(spectrum, rate_hz, n, periodic, n_lags):
    r = whole_lags(spectrum, rate_hz, n, periodic)
    wt = whole_weights(n, periodic)
    s0 = float(wt @ (r * r))
    n_corr = 2 * n_lags + 2
    if periodic:
        if n_corr * 8 < n:
            corr = estimators.lagged_sums(r, np.concatenate([r, r[:n_corr]]), n_corr)
        else:
            corr = sp_fft.irfft(np.abs(sp_fft.rfft(r)) ** 2, n)
    else:
        two = np.concatenate([r[:0:-1], r])
        wtwo = np.concatenate([(1.0 - np.arange(n - 1, 0, -1) / n), 1.0 - np.arange(n) / n])
        weighted = two * wtwo
        if n_corr * 8 < n:
            corr = estimators.lagged_sums(weighted, np.concatenate([two, np.zeros(n_corr)]), n_corr)
        else:
            size = sp_fft.next_fast_len(2 * two.size)
            corr = sp_fft.irfft(np.conj(sp_fft.rfft(weighted, size)) * sp_fft.rfft(two, size), size)[:n_corr]
    return s0, corr[:n_lags], corr[: 2 * n_lags: 2]


def whole_phase_variances(spectrum, rate_hz, n, periodic):
    r = np.clip(whole_lags(spectrum, rate_hz, n, periodic), -1.0, 1.0)
    wt = whole_weights(n, periodic)
    r2 = r * r
    e1 = (math.pi / 4.0) * r * special.hyp2f1(0.5, 0.5, 2.0, r2)
    e2 = 0.5 * r2 * special.hyp2f1(1.0, 1.0, 3.0, np.minimum(r2, 1.0 - 1e-15))
    e2[r2 >= 1.0 - 1e-15] = 1.0
    return float(wt @ e1) / n, float(wt @ e2) / n


def whole_power_covariance_sum(spectrum, rate_hz, n, periodic, pd, a2, los_doppler_hz):
    r = whole_lags(spectrum, rate_hz, n, periodic)
    wt = whole_weights(n, periodic)
    total = pd * pd * float(wt @ (r * r))
    if a2 > 0:
        w = 2.0 * math.pi * los_doppler_hz / rate_hz
        cos_w = np.cos(w * np.arange(n)) if w else 1.0
        total += 2.0 * a2 * pd * float(wt @ (r * cos_w))
    return total


def assert_close(got, want, rtol=1e-12):
    got, want = np.asarray(got, dtype=float), np.asarray(want, dtype=float)
    np.testing.assert_allclose(got, want, rtol=0, atol=rtol * max(float(np.max(np.abs(want))), 1e-300))


@pytest.fixture(autouse=True)
def cold_caches():
    tolerance.clear_caches()
    yield
    tolerance.clear_caches()


# -- the blockwise sums equal the whole-record ones ---------------------------------------------


@pytest.mark.parametrize("spectrum", SPECTRA, ids=IDS)
@pytest.mark.parametrize("periodic", [False, True])
@pytest.mark.parametrize("n, block", [(400, None), (5000, None), (5000, 64), (100_003, None), (100_003, 4099)])
def test_blockwise_sums_equal_whole_record_sums(spectrum, periodic, n, block, monkeypatch):
    """Every sum, small and mid n, one block or many (the last one partial), both modes."""
    if block is not None:
        monkeypatch.setattr(nulls, "BLOCK_LAGS", block)
    for n_lags in (3, 25, 100):  # 100 at n = 400 and 5000 takes the FFT (2 n_lags + 2 >= n / 8)
        assert_close(np.concatenate([np.atleast_1d(x) for x in nulls.bartlett_sums(spectrum, RATE, n, periodic, n_lags)]),
                     np.concatenate([np.atleast_1d(x) for x in whole_bartlett_sums(spectrum, RATE, n, periodic, n_lags)]))
    assert_close(nulls.phase_variances(spectrum, RATE, n, periodic), whole_phase_variances(spectrum, RATE, n, periodic))
    other = DopplerSpectrum("flat", 0.7 * FD)
    for a, b in [(spectrum, spectrum), (spectrum, other)]:
        assert_close(nulls.pair_sum(a, b, RATE, n, periodic), whole_pair_sum(a, b, RATE, n, periodic))
    np.testing.assert_array_equal(nulls.lags_head(spectrum, RATE, n, periodic, 30),
                                  whole_lags(spectrum, RATE, n, periodic)[:30])


@pytest.mark.parametrize("spectrum", SPECTRA, ids=IDS)
@pytest.mark.parametrize("periodic", [False, True])
@pytest.mark.parametrize("pd, a2, los", [(1.0, 0.0, 0.0), (0.25, 0.75, 0.0), (0.25, 0.75, 0.3 * FD),
                                         (0.5, 0.5, -0.7 * FD), (0.1, 0.9, 1.0 * FD)])
def test_power_covariance_sum_equals_whole_record_sum(spectrum, periodic, pd, a2, los, monkeypatch):
    """Rayleigh and Rician taps, the direct part's Doppler at 0, inside and at the band edge."""
    monkeypatch.setattr(nulls, "BLOCK_LAGS", 4099)
    n = 50_001
    if periodic:  # the engine's periodic mode rounds f_los to a bin; an unrounded one is summed as it is too
        assert_close(nulls.power_covariance_sum(spectrum, RATE, n, periodic, pd, a2, los + 0.0123),
                     whole_power_covariance_sum(spectrum, RATE, n, periodic, pd, a2, los + 0.0123))
        los = round(los * n / RATE) * RATE / n
    assert_close(nulls.power_covariance_sum(spectrum, RATE, n, periodic, pd, a2, los),
                 whole_power_covariance_sum(spectrum, RATE, n, periodic, pd, a2, los))


@pytest.mark.parametrize("periodic", [False, True])
def test_reach_beyond_one_block(periodic, monkeypatch):
    """Lagged sums that reach further than a block (2 n_lags + 2 > BLOCK_LAGS) carry the lags across blocks."""
    monkeypatch.setattr(nulls, "BLOCK_LAGS", 50)
    spectrum, n, n_lags = SPECTRA[0], 3000, 60
    assert_close(np.concatenate(nulls.bartlett_sums(spectrum, RATE, n, periodic, n_lags)[1:]),
                 np.concatenate(whole_bartlett_sums(spectrum, RATE, n, periodic, n_lags)[1:]))


@pytest.mark.parametrize("periodic", [False, True])
def test_one_pass_gives_what_each_sum_gives_alone(periodic):
    """prepare's single pass and each sum asked alone (in any order) give the same numbers, to the bit."""
    spectrum, n, n_lags = SPECTRA[0], 30_000, 25
    args = (spectrum, RATE, n, periodic)
    nulls.prepare(*args, n_lags, 0.25, 0.75, 3.0, True)
    together = (nulls.bartlett_sums(*args, n_lags), nulls.power_covariance_sum(*args, 0.25, 0.75, 3.0),
                nulls.phase_variances(*args), nulls.pair_sum(spectrum, spectrum, RATE, n, periodic))
    tolerance.clear_caches()
    alone = (nulls.phase_variances(*args),
             nulls.power_covariance_sum(*args, 0.25, 0.75, 3.0),
             nulls.pair_sum(spectrum, spectrum, RATE, n, periodic),
             nulls.bartlett_sums(*args, n_lags))
    alone = (alone[3], alone[1], alone[0], alone[2])
    assert together[1:] == alone[1:]
    assert together[0][0] == alone[0][0]
    np.testing.assert_array_equal(together[0][1], alone[0][1])
    np.testing.assert_array_equal(together[0][2], alone[0][2])


# -- the sums equal their definitions ----------------------------------------------------------


@pytest.mark.parametrize("periodic", [False, True])
@pytest.mark.parametrize("n_lags", [3, 40])
@pytest.mark.parametrize("block_bytes", [None, 8 * 37])
@pytest.mark.parametrize("block_lags", [None, 61])
def test_bartlett_sums_equal_their_definition(periodic, n_lags, block_bytes, block_lags, monkeypatch):
    """S0 = sum_j w_j r_j^2, c1(k) = sum_j w_j r_j r_{j+k}, c2(k) = c1(2k) over all lags -(n-1)..n-1.

    n_lags 3 takes the direct sums (in one block, or in blocks of 37 or 61 with a partial last one),
    40 the FFT (2 n_lags + 2 >= n / 8); both against the sums written out (circular lags for a
    periodic record).
    """
    if block_bytes is not None:
        monkeypatch.setattr(estimators, "_LAG_BLOCK_BYTES", block_bytes)
    if block_lags is not None:
        monkeypatch.setattr(nulls, "BLOCK_LAGS", block_lags)
    n = 400
    spectrum = DopplerSpectrum("classical", FD)
    s0, c1, c2 = nulls.bartlett_sums(spectrum, RATE, n, periodic, n_lags)
    r = whole_lags(spectrum, RATE, n, periodic)
    w = whole_weights(n, periodic)
    np.testing.assert_allclose(s0, np.sum(w * r * r), rtol=1e-12)
    if periodic:
        want = [np.sum(r * np.roll(r, -k)) for k in range(2 * n_lags)]
    else:
        j = np.arange(-(n - 1), n)
        rr = r[np.abs(j)]
        wj = 1.0 - np.abs(j) / n
        want = [np.sum((wj * rr)[: rr.size - k] * rr[k:]) for k in range(2 * n_lags)]
    scale = np.max(np.abs(want))
    np.testing.assert_allclose(c1, want[:n_lags], atol=1e-12 * scale)
    np.testing.assert_allclose(c2, want[: 2 * n_lags: 2], atol=1e-12 * scale)


@pytest.mark.parametrize("periodic", [False, True])
def test_phase_variances_series_equals_hyp2f1(periodic):
    """The 2F1 series used at small r equals scipy.special.hyp2f1 everywhere (both regimes are present)."""
    n = 20000
    spectrum = DopplerSpectrum("classical", FD)
    v1, v2 = nulls.phase_variances(spectrum, RATE, n, periodic)
    r2 = np.clip(whole_lags(spectrum, RATE, n, periodic), -1.0, 1.0) ** 2
    assert (r2 < nulls.PHASE_SERIES_X).mean() > 0.5 and (r2 >= nulls.PHASE_SERIES_X).any()
    w1, w2 = whole_phase_variances(spectrum, RATE, n, periodic)  # scipy.special.hyp2f1 at every lag
    assert abs(v1 - w1) <= 1e-13 * abs(v1)
    assert abs(v2 - w2) <= 1e-13 * abs(v2)


# -- memory ---------------------------------------------------------------------------------


MEMORY_N = 2_000_000
MEMORY_BOUND = 16 * 2**20  # one n-long float64 array at n = 2e6 (16 MB); the sums should need a few MiB


@pytest.mark.parametrize("name, call", [
    ("bartlett_sums", lambda s, n: nulls.bartlett_sums(s, RATE, n, False, 25)),
    ("power_covariance_sum", lambda s, n: nulls.power_covariance_sum(s, RATE, n, False, 0.25, 0.75, 3.0)),
    ("phase_variances", lambda s, n: nulls.phase_variances(s, RATE, n, False)),
    ("pair_sum", lambda s, n: nulls.pair_sum(s, DopplerSpectrum("flat", 0.7 * FD), RATE, n, False)),
    ("prepare", lambda s, n: nulls.prepare(s, RATE, n, False, 25, 0.25, 0.75, 3.0, True)),
])
def test_aperiodic_sums_hold_no_record_long_array(name, call):
    """The peak traced allocation (tracemalloc) of each aperiodic sum at n = 2e6 stays below 16 MB.

    And it does not grow with the record: at n = 2e6 within 1 MiB of its peak at n = 5e5 (an
    n-long float64 array would add 12 MB). The whole-record sums held r and the weights, 16 MB
    each at 2e6, and temporaries of 2n.
    """
    spectrum = DopplerSpectrum("gaussian", FD, 0.3 * FD)  # the costliest closed form (Faddeeva function)
    peaks = []
    for n in (MEMORY_N // 4, MEMORY_N):
        tolerance.clear_caches()
        tracemalloc.start()
        try:
            call(spectrum, n)
            peaks.append(tracemalloc.get_traced_memory()[1])
        finally:
            tracemalloc.stop()
    assert peaks[1] < MEMORY_BOUND, (name, peaks[1] / 2**20)
    assert peaks[1] - peaks[0] < 2**20, (name, [p / 2**20 for p in peaks])


# -- one pass for every tap of a spectrum ------------------------------------------------------


@pytest.mark.parametrize("periodic", [False, True])
def test_taps_of_one_spectrum_share_one_pass(periodic, monkeypatch):
    """A Rician and two Rayleigh taps of one spectrum: their tasks make one pass over the lags, check_tap none."""
    passes = []
    whole_pass = nulls._pass
    monkeypatch.setattr(nulls, "_pass", lambda *args: passes.append(args[4:]) or whole_pass(*args))
    spectrum, n = SPECTRA[0], 20_000
    models = [tolerance.TapModel(spectrum, 1.0, 3.0, 0.3 * FD), tolerance.TapModel(spectrum, 0.5, 0.0),
              tolerance.TapModel(spectrum, 0.25, 0.0)]
    tasks = [task for model in models for task in tolerance.null_sum_tasks(model, RATE, n, periodic)]
    assert len(tasks) == 3
    for task in tasks:
        task()
    assert len(passes) == 1  # (n_corr, omegas, phase) of the one pass: the Rician's Doppler and the phase sums
    n_corr, omegas, phase = passes[0]
    assert omegas == (2 * math.pi * 0.3 * FD / RATE,) and phase and n_corr is not None
    for seed, model in enumerate(models):
        g = reference.tap_record(spectrum, RATE, n, np.random.default_rng(seed), k_linear=model.k_linear,
                                 los_doppler_hz=model.los_doppler_hz, mean_power=model.mean_power, periodic=periodic)
        tolerance.check_tap(g, RATE, model, periodic=periodic)
    assert len(passes) == 1
