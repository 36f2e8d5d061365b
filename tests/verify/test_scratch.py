"""verify's passes over a whole record work in blocks: the same statistics as whole-array formulas, on
complex64 and mapped records, in memory that does not grow with the record (emucompile.verify.scratch)."""

from __future__ import annotations

import math
import multiprocessing
import tracemalloc

import numpy as np
import pytest
from scipy import signal, stats

from emucompile.verify import estimators, scratch

RNG = np.random.default_rng(20261203)
N = 3 * estimators.BLOCK + 4321  # several blocks and a partial last one


def record(n, rng=RNG, los=0.0, rate=1000.0):
    """A complex64 record (an AR(1)-coloured circular Gaussian, plus a direct line when ``los``)."""
    white = (rng.standard_normal(n) + 1j * rng.standard_normal(n)) / math.sqrt(2.0)
    x = signal.lfilter([0.3], [1.0, -0.7], white) + (0.9 * np.exp(2j * np.pi * los / rate * np.arange(n)) if los else 0)
    return x.astype(np.complex64)


def mapped(x, monkeypatch):
    monkeypatch.setattr(scratch, "SCRATCH_MIN_BYTES", 1)
    out = scratch.empty(x.shape, x.dtype)
    out[:] = x
    return out


def test_scratch_maps_large_arrays_and_keeps_small_ones_in_memory(monkeypatch):
    small = scratch.empty((10, 3), np.complex64)
    assert type(small) is np.ndarray and small.shape == (10, 3)
    monkeypatch.setattr(scratch, "SCRATCH_MIN_BYTES", 1000)
    big = scratch.empty((2, 1000), np.complex64)
    assert isinstance(big, np.memmap) and big.shape == (2, 1000) and big.dtype == np.complex64
    big[1, -1] = 3 + 4j
    assert big[1, -1] == 3 + 4j and not big[0].any()  # a new file reads as zeros


def _forked_sum(array, queue):
    queue.put(complex(array.sum()))


def test_a_forked_worker_reads_a_mapped_record(monkeypatch):
    """The checks' worker processes get the records by fork: a map of the unnamed file is shared."""
    x = mapped(record(5000), monkeypatch)
    context = multiprocessing.get_context("fork")
    queue = context.Queue()
    worker = context.Process(target=_forked_sum, args=(x, queue))
    worker.start()
    got = queue.get(timeout=60)
    worker.join(timeout=60)
    assert got == complex(np.asarray(x).sum())


@pytest.mark.parametrize("kind", ["complex64", "mapped"])
def test_block_passes_equal_whole_array_formulas(kind, monkeypatch):
    x = record(N, los=37.0)
    if kind == "mapped":
        x = mapped(x, monkeypatch)
    w = np.asarray(x).astype(np.complex128)  # the whole record, widened exactly
    p = w.real**2 + w.imag**2
    assert estimators.mean_power(x) == pytest.approx(np.mean(p), rel=1e-12)
    ga, gv2 = np.mean(p), np.mean(p * p) - np.mean(p) ** 2
    a2 = math.sqrt(ga * ga - gv2)
    assert estimators.k_factor_moments(x) == pytest.approx(a2 / (ga - a2), rel=1e-9)
    rot = np.exp(2j * np.pi * 37.0 / 1000.0 * np.arange(N))
    diffuse, amplitude = estimators.remove_direct(x, 1000.0, 37.0)
    assert amplitude == pytest.approx(np.mean(w * rot.conj()), rel=1e-12)
    np.testing.assert_allclose(diffuse, w - amplitude * rot, rtol=0, atol=1e-12)
    levels = [0.1, 0.5, 1.0, 1.5]
    np.testing.assert_array_equal(estimators.envelope_cdf(x, levels),
                                  np.searchsorted(np.sort(p), np.square(levels), side="left") / N)
    u = w / np.abs(w)
    np.testing.assert_allclose(estimators.circular_moments(x, (1, 2, 3)),
                               [np.mean(u), np.mean(u * u), np.mean(u**3)], rtol=0, atol=1e-13)
    y = record(N)
    want = np.vdot(y.astype(np.complex128), w) / math.sqrt(np.vdot(w, w).real * np.vdot(y, y.astype(complex)).real)
    assert abs(estimators.correlation_coefficient(x, y) - want) < 1e-12
    law = stats.rice(b=0.9 * math.sqrt(2.0), scale=math.sqrt(0.09 / 0.51 / 2))
    ranked = np.sort(np.abs(w) ** 2)  # the sort-based statistic on the same interpolated F
    grid = np.linspace(0.0, math.sqrt(ranked[-1]), 8193)
    d = np.interp(ranked, grid * grid, law.cdf(grid)) - np.arange(N) / N
    assert abs(estimators.envelope_ks_distance(x, law) - max(np.max(d), 1.0 / N - np.min(d))) < 1e-12


@pytest.mark.parametrize("periodic", [False, True])
@pytest.mark.parametrize("n_lags", [12, 300])  # the dot-product path and the FFT path
def test_autocorrelation_of_a_mapped_record(periodic, n_lags, monkeypatch):
    x = mapped(record(N), monkeypatch)
    w = np.asarray(x).astype(np.complex128)
    got = estimators.autocorrelation(x, n_lags, periodic=periodic)
    for k in (0, 1, n_lags // 2, n_lags - 1):
        want = (np.sum(np.roll(w, -k) * w.conj()) / N if periodic else np.sum(w[k:] * w[: N - k].conj()) / (N - k))
        assert abs(got[k] - want) < 1e-12


def _peak_traced(function, *args):
    tracemalloc.start()
    try:
        function(*args)
        return tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()


def test_memory_of_the_passes_does_not_grow_with_the_record(monkeypatch):
    """Each pass over a mapped complex64 record traces (numpy reports its allocations to tracemalloc) no
    more memory for 4x the record: a whole-record complex128 copy would add 16 bytes per added sample.
    (The KS distance's bins grow with the record up to KS_BINS, reached at 4 KS_BINS samples, and the
    autocorrelation's FFT batch up to _ACF_BATCH blocks: fewer of each here, so that both are at their caps.)"""
    monkeypatch.setattr(estimators, "KS_BINS", 1 << 12)
    monkeypatch.setattr(estimators, "_ACF_BATCH", 4)
    law = stats.rayleigh(scale=math.sqrt(0.5))
    short, long = (mapped(record(n, np.random.default_rng(5)), monkeypatch) for n in (1 << 19, 1 << 21))
    passes = [("mean_power", estimators.mean_power), ("k_factor", estimators.k_factor_moments),
              ("envelope_ks", lambda x: estimators.envelope_ks_distance(x, law)),
              ("remove_direct", lambda x: estimators.remove_direct(x, 1000.0, 5.0)),
              ("autocorrelation_direct", lambda x: estimators.autocorrelation(x, 20)),
              ("autocorrelation_fft", lambda x: estimators.autocorrelation(x, 200)),
              ("welch", lambda x: estimators.welch_psd(x, 1000.0, 256)),
              ("circular_moments", estimators.circular_moments),
              ("correlation", lambda x: estimators.correlation_coefficient(x, x)),
              ("envelope_cdf", lambda x: estimators.envelope_cdf(x, [0.5, 1.0]))]
    added = (long.size - short.size) * 16  # bytes of the added samples widened to complex128
    for name, function in passes:
        growth = _peak_traced(function, long) - _peak_traced(function, short)
        assert growth < 0.05 * added, (name, growth, added)


@pytest.mark.parametrize("periodic", [False, True])
@pytest.mark.parametrize("n_levels", [2, 40])  # level by level, and from sorts
def test_crossings_counted_block_by_block_equal_the_whole_dense_record(periodic, n_levels, monkeypatch):
    """The crossing checks count on the dense |g|^2 block by block; the counts and the samples below each
    level equal those of the whole dense record (power_upsampled), the crossing across a block's edge
    (and a periodic record's wrap) included."""
    from emucompile.models.theory import DopplerSpectrum
    from emucompile.verify import tap_checks
    from emucompile.verify.verdicts import TapModel

    monkeypatch.setattr(estimators, "_INTERPOLATOR_BLOCK", 100)  # many blocks, a partial last one
    model = TapModel(spectrum=DopplerSpectrum("classical", 10.0), mean_power=1.0, k_linear=0.0, los_doppler_hz=0.0)
    g = record(5003)
    plan = tap_checks._CrossingPlan(g, 100.0, model, periodic)
    levels = np.linspace(0.05, 2.0, n_levels)
    counts, below = plan.tally(levels)
    dense = estimators.power_upsampled(g, plan.up, plan.band, periodic=periodic)
    if periodic:
        dense = np.concatenate([dense, dense[:1]])
    else:
        dense = dense[plan.trim * plan.up: dense.size - plan.trim * plan.up]
    assert plan.up > 1 and counts.sum() > 10
    np.testing.assert_array_equal(counts, [estimators.level_crossings(dense, np.float32(v)) for v in levels])
    counted = dense[: plan.kept * plan.up]
    np.testing.assert_array_equal(below, [np.count_nonzero(counted < np.float32(v)) for v in levels])


@pytest.mark.parametrize("n", [2 * 3 * 5 * 7 * 11 * 13, 1 << 13, 4099 * 2])  # composite, a power of 2, 2 x a prime
def test_circular_autocorrelation_in_four_steps_equals_one_fft(n, monkeypatch):
    """A long periodic record's null autocorrelation is the same inverse DFT made in blocks (Bailey's four
    steps) in mapped files; small in-memory limits here make every n take that path (but 2 x a prime,
    whose factors are too uneven: one FFT)."""
    from emucompile.models.theory import DopplerSpectrum
    from emucompile.verify import reference

    spectrum = DopplerSpectrum("classical", 10.0)
    want = reference.circular_autocorrelation(spectrum, 100.0, n)
    monkeypatch.setattr(reference, "IN_MEMORY_LAGS", 1 << 10)
    monkeypatch.setattr(reference, "_FOUR_STEP_BLOCK", 1 << 9)
    monkeypatch.setattr(scratch, "SCRATCH_MIN_BYTES", 1)
    got = reference.circular_autocorrelation(spectrum, 100.0, n)
    assert isinstance(got, np.memmap) == (n != 4099 * 2)
    np.testing.assert_allclose(got, want, rtol=0, atol=1e-13 * abs(want[0]))
