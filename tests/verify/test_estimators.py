"""Estimators against direct definitions and scipy reference functions; the reference process."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate, signal, stats

from emucompile.verify import estimators

from emucompile.verify import reference

from emucompile.verify import nulls
from emucompile.models.theory import DopplerSpectrum

RNG = np.random.default_rng(20261202)


def cn(n, rng=RNG):
    return (rng.standard_normal(n) + 1j * rng.standard_normal(n)) / math.sqrt(2.0)


def test_welch_equals_scipy():
    x = cn(10_001)
    f, p = estimators.welch_psd(x, 7.0, 256)
    f2, p2 = signal.welch(x, fs=7.0, nperseg=256, noverlap=128, detrend=False, return_onesided=False)
    order = np.argsort(f2)
    np.testing.assert_allclose(f, f2[order])
    np.testing.assert_allclose(p, p2[order], rtol=1e-12)


def test_welch_kaiser_equals_scipy():
    x = cn(5000)
    f, p = estimators.welch_psd(x, 3.0, 300, window=("kaiser", 14.0))
    _, p2 = signal.welch(x, fs=3.0, window=("kaiser", 14.0), nperseg=300, noverlap=150, detrend=False,
                         return_onesided=False)
    np.testing.assert_allclose(p, np.fft.fftshift(p2), rtol=1e-12)


def test_welch_chunks_equal_scipy(monkeypatch):
    """Chunks of 3 segments (a partial last one), summed: still scipy's estimate."""
    monkeypatch.setattr(estimators, "_WELCH_CHUNK_BYTES", 3 * 16 * 64)
    x = cn(2000)
    f, p = estimators.welch_psd(x, 5.0, 64)
    _, p2 = signal.welch(x, fs=5.0, nperseg=64, noverlap=32, detrend=False, return_onesided=False)
    assert (x.size - 64) // 32 + 1 == 61  # 20 full chunks and one of 1 segment
    np.testing.assert_allclose(p, np.fft.fftshift(p2), rtol=1e-12)


@pytest.mark.parametrize("periodic", [False, True])
def test_autocorrelation_equals_direct_sums(periodic):
    x = cn(501)
    n = x.size
    got = estimators.autocorrelation(x, 40, periodic=periodic)
    for k in range(40):
        if periodic:
            want = np.sum(np.roll(x, -k) * x.conj()) / n
        else:
            want = np.sum(x[k:] * x[: n - k].conj()) / (n - k)
        assert abs(got[k] - want) < 1e-12


@pytest.mark.parametrize("periodic", [False, True])
@pytest.mark.parametrize("n_lags", [1, 10, 501])
@pytest.mark.parametrize("direct_lags", [0, 40])
def test_autocorrelation_blocks_equal_direct_sums(periodic, n_lags, direct_lags, monkeypatch):
    """Small blocks and batches, so that several blocks, batches and a partial last block are summed;
    with direct_lags 0 the FFT path runs at every lag count, with 40 the dot-product path at 1 and 10."""
    monkeypatch.setattr(estimators, "_ACF_DIRECT_LAGS", direct_lags)
    monkeypatch.setattr(estimators, "_ACF_BLOCK", 64)
    monkeypatch.setattr(estimators, "_LAG_BLOCK_BYTES", 64 * 16)  # 64 complex samples
    monkeypatch.setattr(estimators, "_ACF_BATCH", 3)
    x = cn(501)
    n = x.size
    got = estimators.autocorrelation(x, n_lags, periodic=periodic)
    assert got.size == n_lags
    for k in range(n_lags):
        if periodic:
            want = np.sum(np.roll(x, -k) * x.conj()) / n
        else:
            want = np.sum(x[k:] * x[: n - k].conj()) / (n - k)
        assert abs(got[k] - want) < 1e-12


def test_envelope_ks_equals_kstest():
    x = cn(20_000) + 0.8
    law = stats.rice(b=0.8 * math.sqrt(2.0), scale=math.sqrt(0.5))
    want = stats.kstest(np.abs(x), law.cdf).statistic
    assert abs(estimators.envelope_ks_distance(x, law) - want) < 1e-6


def _sorted_ks(x, law):
    """The sort-based KS distance envelope_ks_distance computed before its binned form (same F on its grid)."""
    p = np.sort(np.abs(x) ** 2)
    grid = np.linspace(0.0, math.sqrt(p[-1]), 8193)
    d = np.interp(p, grid * grid, law.cdf(grid)) - np.arange(p.size) / p.size
    return float(max(np.max(d), 1.0 / p.size - np.min(d)))


@pytest.mark.parametrize("case", ["rayleigh", "rice", "wrong_power", "coarse", "ties", "tiny", "constant"])
def test_binned_envelope_ks_is_the_sorted_statistic(case):
    """The O(n) binned KS gives the sort-based statistic itself (the bins only bound where to look)."""
    rng = np.random.default_rng(7)
    law = stats.rayleigh(scale=math.sqrt(0.5))
    x = cn(300_000, rng)
    if case == "rice":
        x = cn(200_000, rng) * math.sqrt(0.25) + math.sqrt(0.75)
        law = stats.rice(b=math.sqrt(6.0), scale=math.sqrt(0.125))
    elif case == "wrong_power":
        x = x * 1.05  # a large distance, far from the bins' scale
    elif case == "coarse":
        x = np.round(x * 20) / 20  # many equal values, several per bin edge
    elif case == "ties":
        x = np.repeat(x[:1000], 300)  # every value 300 times
    elif case == "tiny":
        x = x[:50]  # fewer samples than the bins need: the sort itself
    elif case == "constant":
        x = np.full(10_000, 0.7 + 0.1j)
    got = estimators.envelope_ks_distance(x, law)
    assert abs(got - _sorted_ks(x, law)) < 1e-12
    if case != "constant":
        assert abs(got - stats.kstest(np.abs(x), law.cdf).statistic) < 1e-6


def test_k_factor_moment_estimate_on_iid_rician():
    """Greenstein et al. 1999: consistent estimate; sd from the delta method (nulls.k_sd)."""
    k, n = 3.0, 400_000
    a = math.sqrt(k / (k + 1.0))
    x = a * np.exp(1j * 0.3) + cn(n) * math.sqrt(1.0 / (k + 1.0))
    k_hat = estimators.k_factor_moments(x)
    sd = nulls.k_sd(k, 1.0) / math.sqrt(n)
    assert abs(k_hat - k) < 5 * sd
    # and the delta-method sd itself against a small Monte Carlo (common practice check)
    hats = [estimators.k_factor_moments(a + cn(4000) * math.sqrt(1 / (k + 1))) for _ in range(300)]
    assert 0.8 < np.std(hats) / (nulls.k_sd(k, 1.0) / math.sqrt(4000)) < 1.25


def test_k_factor_rayleigh_is_near_zero():
    assert estimators.k_factor_moments(cn(200_000)) < 0.05


def test_remove_direct_recovers_the_line():
    n = np.arange(1000)
    line = 0.7 * np.exp(1j * (2 * np.pi * 0.05 * n + 1.0))
    rest, a = estimators.remove_direct(line, 1.0, 0.05)
    assert abs(a - 0.7 * np.exp(1j)) < 1e-12 and np.abs(rest).max() < 1e-12


def test_level_crossings_counts_upward_only():
    env = np.array([0.0, 2.0, 0.0, 2.0, 2.0, 0.0, 0.5, 2.0])
    assert estimators.level_crossings(env, 1.0) == 3


def _tones(tones, t):
    return sum(c * np.exp(2j * np.pi * f * t) for f, c in tones)


@pytest.mark.parametrize("band_fraction", [11 / 64, 0.46])  # the local interpolator; the FFT one (transition < 0.1)
def test_power_upsampled_is_band_limited_interpolation_of_a_periodic_record(band_fraction, monkeypatch):
    monkeypatch.setattr(estimators, "_INTERPOLATOR_BLOCK", 24)  # blocks of 24 samples, a partial last one
    n = 64
    tones = [(3 / n, 0.7), (-5 / n, 0.4 + 0.2j), (11 / n, 0.3j)]
    g = _tones(tones, np.arange(n))
    exact = np.abs(_tones(tones, np.arange(4 * n) / 4.0)) ** 2
    local = estimators.interpolator_reach(4, band_fraction) > 0
    assert local == (band_fraction < 0.45)
    got = estimators.power_upsampled(g, 4, band_fraction, periodic=True)
    assert got.dtype == np.float32 and got.size == 4 * n
    np.testing.assert_allclose(got, exact, atol=1e-5)


@pytest.mark.parametrize("block", [None, 64])  # one block; several and a partial last one
def test_power_upsampled_aperiodic_interior_is_exact(block, monkeypatch):
    """Tones off the record's bins (not periodic in it): exact except within the interpolator's reach of the ends."""
    if block is not None:
        monkeypatch.setattr(estimators, "_INTERPOLATOR_BLOCK", block)
    n, factor = 400, 8
    tones = [(0.0137, 0.7), (-0.071, 0.4 + 0.2j), (0.11, 0.3j)]
    g = _tones(tones, np.arange(n))
    reach = estimators.interpolator_reach(factor, 0.125)
    assert 0 < reach < 20
    got = estimators.power_upsampled(g, factor, 0.125)
    exact = np.abs(_tones(tones, np.arange(factor * n) / factor)) ** 2
    inner = slice(reach * factor, (n - reach) * factor)
    np.testing.assert_allclose(got[inner], exact[inner], atol=1e-5)
    assert np.max(np.abs(got[:factor] - exact[:factor])) > 1e-3  # the ends see zeros: callers drop them
    np.testing.assert_allclose(got[::factor], np.abs(g) ** 2, rtol=1e-6)  # phase 0 is the record itself
    np.testing.assert_allclose(estimators.power_upsampled(g, 1, 0.125), np.abs(g) ** 2, rtol=1e-6)


def test_correlation_coefficient_and_circular_moments():
    a = cn(1000)
    assert abs(estimators.correlation_coefficient(1j * a, a) - 1j) < 1e-12
    np.testing.assert_allclose(estimators.circular_moments(np.full(10, 2 * np.exp(0.4j)), (1, 2)),
                               [np.exp(0.4j), np.exp(0.8j)])
    g = np.array([0.0, 2.0 * np.exp(0.4j), 3.0 * np.exp(-1.1j), 0.0])  # a zero sample has no phase: it adds 0
    np.testing.assert_allclose(estimators.circular_moments(g, (1, 2, 3)),
                               [(np.exp(0.4j) + np.exp(-1.1j)) / 4, (np.exp(0.8j) + np.exp(-2.2j)) / 4,
                                (np.exp(1.2j) + np.exp(-3.3j)) / 4])


# -- reference process ----------------------------------------------------------------


SPECTRA = [DopplerSpectrum("classical", 10.0), DopplerSpectrum("flat", 10.0), DopplerSpectrum("gaussian", 10.0, 3.0)]


@pytest.mark.parametrize("spectrum", SPECTRA, ids=lambda s: s.kind)
def test_spectrum_cdf_integrates_the_psd(spectrum):
    for f in (-9.0, -2.5, 0.0, 4.0, 9.9):
        want, _ = integrate.quad(spectrum.psd, -spectrum.max_doppler_hz, f, limit=200)
        assert abs(reference.spectrum_cdf(spectrum, f) - want) < 1e-7


@pytest.mark.parametrize("spectrum", SPECTRA, ids=lambda s: s.kind)
def test_reference_autocorrelation_is_the_theory(spectrum):
    """Young & Beaulieu 2000 inverse-DFT process: its exact circular autocorrelation ~ r(tau)."""
    rate, n = 80.0, 1 << 16
    p = reference.bin_powers(spectrum, rate, n)
    assert abs(p.sum() - 1.0) < 1e-12
    lags = np.arange(0, 25)
    circ = reference.circular_autocorrelation(spectrum, rate, n)[lags]
    np.testing.assert_allclose(circ, spectrum.autocorrelation(lags / rate), atol=2e-3)


def test_reference_record_is_periodic_and_unit_power():
    s = DopplerSpectrum("classical", 10.0)
    rng = np.random.default_rng(3)
    g = reference.diffuse(s, 80.0, 4096, rng)
    # periodic: the band-limited continuation across the wrap matches (DFT of the record is band-limited)
    spec = np.fft.fft(g)
    f = np.fft.fftfreq(4096, 1 / 80.0)
    assert np.abs(spec[np.abs(f) > 10.02]).max() < 1e-9 * np.abs(spec).max()
    big = reference.diffuse(s, 80.0, 400_000, rng, oversize=2)
    assert abs(np.mean(np.abs(big) ** 2) - 1.0) < 0.03
