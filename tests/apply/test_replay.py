"""Replaying a bundle over a recording: the channel, noise, MIMO, looping, files, bad input.

Independent references used here:

- the time-varying convolution (1) of emucompile.apply.replay written out directly in
  float64, sample by sample (``direct_output``: no FFT, no rewriting);
- delayed band-limited tones exp(j 2 pi f (t - tau)) and the two-path response
  a0 + a1 exp(-j 2 pi f tau) (textbook closed forms; Oppenheim & Schafer,
  Discrete-Time Signal Processing, 3rd ed., 2010);
- the windowed-sinc row of Laakso et al. 1996 (IEEE Signal Processing
  Magazine 13(1)), as emucompile.models.grid builds it and tests/test_grid.py checks;
- the Rayleigh law, ``scipy.stats.rayleigh``; the tone error of linear
  interpolation and hold, integrated by ``scipy.integrate.quad``.

Bundles come from tests/bundle_factory.py (invented scenarios).
"""

from __future__ import annotations

import errno
import hashlib
import json
import math
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from scipy import integrate, stats

import bundle_factory as bf
from emucompile.apply import replay as ap
from emucompile.bundle import store as bd
from emucompile.bundle import formats as fmt
from emucompile.models import grid
from emucompile.cli import cli
from emucompile.errors import InputError

ROOT = Path(__file__).resolve().parents[2]
FS = 1.0e6


def direct_output(x, gains, matrix, update_rate_hz, sample_rate_hz, *, start_s=0.0, hold=False, wrap=False):
    """y[n] = sum_k h_n[k] x[n - k], h_n = g(t_n) @ matrix, written out in float64.

    g(t_n) joins the gain samples linearly (or holds them); indices wrap
    modulo n_samples when ``wrap``, else the last sample is held.
    """
    x = np.asarray(x, dtype=np.complex128)
    x = x[:, None] if x.ndim == 1 else x
    g_all = np.asarray(gains, dtype=np.complex128)
    n_updates = g_all.shape[0]
    matrix = np.asarray(matrix, dtype=float)
    n_fir = matrix.shape[1]
    n = np.arange(x.shape[0])
    u = (start_s + n / sample_rate_hz) * update_rate_hz
    k = np.floor(u).astype(int)
    theta = np.zeros_like(u) if hold else u - k
    k1 = k + 1
    if wrap:
        k, k1 = k % n_updates, k1 % n_updates
    else:
        k1 = np.minimum(k1, n_updates - 1)
    g = g_all[k] * (1 - theta)[:, None, None, None] + g_all[k1] * theta[:, None, None, None]
    coefficients = g @ matrix  # (n, n_rx, n_tx, n_fir)
    padded = np.concatenate([np.zeros((n_fir - 1, x.shape[1])), x])
    window = padded[n[:, None] + n_fir - 1 - np.arange(n_fir)[None, :]]  # (n, n_fir, n_tx): x[n - j]
    return np.einsum("nrtj,njt->nr", coefficients, window)


def relative_error(y, reference):
    return float(np.linalg.norm(np.asarray(y) - reference) / np.linalg.norm(reference))


def complex_noise(rng, shape, dtype=np.complex64):
    return ((rng.standard_normal(shape) + 1j * rng.standard_normal(shape)) / math.sqrt(2)).astype(dtype)


def run_cli(*args):
    result = CliRunner().invoke(cli, [str(a) for a in args])
    return result


def listing(directory: Path):
    return sorted(p.name for p in directory.iterdir())


# -- static channels against closed forms -------------------------------------------------------


@pytest.mark.parametrize("engine", ["auto", "per-tap"])
def test_static_one_tap_at_an_integer_delay_returns_the_input_scaled_and_delayed_exactly(engine):
    rng = np.random.default_rng(1)
    x = complex_noise(rng, 5000)
    delay = 7
    fir = grid.fir_map([delay / FS], [1.0], FS)  # on the sample: one coefficient 1 at column 7
    for gain in (1.0, -0.5j, 0.25 - 2.0j):  # products by these are exact in float32
        gains = bf.static_gains(20, [gain])
        y = ap.apply_channel(x, gains, fir.matrix, update_rate_hz=1000.0, sample_rate_hz=FS, engine=engine)
        expected = np.concatenate([np.zeros(delay), gain * x[:-delay].astype(np.complex128)])
        np.testing.assert_array_equal(y, expected.astype(np.complex64))  # bit for bit
    gain = 0.6 - 0.3j  # any other gain: to the rounding of one complex64 product
    y = ap.apply_channel(x, bf.static_gains(20, [gain]), fir.matrix, update_rate_hz=1000.0, sample_rate_hz=FS,
                         engine=engine)
    expected = np.concatenate([np.zeros(delay), np.complex64(gain).astype(complex) * x[:-delay].astype(complex)])
    assert np.max(np.abs(y - expected) / np.maximum(np.abs(expected), 1e-30)[None]) < 2.5 * 2.0**-24


def test_static_one_tap_through_the_fft_engine_is_exact_to_float32_rounding():
    rng = np.random.default_rng(2)
    x = complex_noise(rng, 5000)
    fir = grid.fir_map([7 / FS], [1.0], FS)
    gains = bf.static_gains(20, [0.625 - 0.3125j])
    y = ap.apply_channel(x, gains, fir.matrix, update_rate_hz=1000.0, sample_rate_hz=FS, engine="interval")
    expected = np.concatenate([np.zeros(7), (0.625 - 0.3125j) * x[:-7].astype(complex)])
    assert np.max(np.abs(y - expected)) < 1e-6


def test_a_fractional_delay_matches_the_sinc_map_row_and_delays_band_limited_tones():
    delay_samples = 3.37
    fir = grid.fir_map([delay_samples / FS], [1.0], FS)  # windowed sinc, Laakso et al. 1996
    gains = bf.static_gains(50, [1.0])
    # an impulse returns the row itself
    impulse = np.zeros(200, np.complex64)
    impulse[10] = 1.0
    y = ap.apply_channel(impulse, gains, fir.matrix, update_rate_hz=1000.0, sample_rate_hz=FS)
    np.testing.assert_allclose(y[10:10 + fir.n_fir], fir.matrix[0], atol=2e-7)
    assert np.max(np.abs(y[:10])) < 1e-7 and np.max(np.abs(y[10 + fir.n_fir:])) < 1e-7
    # tones inside the passband come out delayed by tau + bulk, within the map's stated error bound
    n = np.arange(20000)
    frequencies = np.array([-0.39, -0.21, 0.013, 0.17, 0.33]) * FS
    tone = lambda t: np.exp(2j * np.pi * np.outer(t, frequencies)).sum(axis=1)  # noqa: E731
    x = tone(n / FS).astype(np.complex64)
    y = ap.apply_channel(x, gains, fir.matrix, update_rate_hz=1000.0, sample_rate_hz=FS)
    shift_s = (delay_samples + fir.bulk_delay_samples) / FS
    expected = tone(n / FS - shift_s)
    settled = slice(fir.n_fir, None)
    bound = fir.passband_error_bound * len(frequencies) + 1e-5  # per tone, plus float32 rounding
    assert np.max(np.abs(y[settled] - expected[settled])) < bound


def test_a_static_two_tap_channel_has_the_response_a0_plus_a1_exp():
    a0, a1 = 1.0, 0.55 * np.exp(0.9j)
    tau_s = 2.6 / FS
    fir = grid.fir_map([0.0, tau_s], [abs(a0) ** 2, abs(a1) ** 2], FS)
    gains = bf.static_gains(50, [a0, a1])
    period = 1024
    bins = np.arange(-int(0.4 * period), int(0.4 * period) + 1)  # the map's passband |f| <= 0.4 fs
    rng = np.random.default_rng(3)
    spectrum = np.zeros(period, complex)
    spectrum[bins % period] = np.exp(2j * np.pi * rng.random(bins.size))  # a periodic multitone
    one_period = np.fft.ifft(spectrum)
    x = np.tile(one_period, 8).astype(np.complex64)
    y = ap.apply_channel(x, gains, fir.matrix, update_rate_hz=1000.0, sample_rate_hz=FS)
    measured = np.fft.fft(y[-period:])[bins % period] / np.fft.fft(x[-period:])[bins % period]
    f = bins * FS / period
    analytic = a0 + a1 * np.exp(-2j * np.pi * f * tau_s)
    bound = (abs(a0) + abs(a1)) * fir.passband_error_bound + 1e-4  # map error + float32
    assert np.max(np.abs(np.abs(measured) - np.abs(analytic))) < bound
    # the phase too, once the bulk delay is taken out
    aligned = measured * np.exp(2j * np.pi * f * fir.bulk_delay_samples / FS)
    assert np.max(np.abs(aligned - analytic)) < bound


# -- time-varying channels against the direct convolution ----------------------------------------


@pytest.mark.parametrize("engine", ["interval", "per-tap"])
@pytest.mark.parametrize("samples_per_update,between,start_s", [
    (37.3, "linear", 0.0), (1234.5, "linear", 0.00071), (37.3, "hold", 0.0), (5.7, "linear", 0.0003),
])
def test_a_short_record_matches_the_direct_time_varying_convolution(engine, samples_per_update, between, start_s):
    rng = np.random.default_rng(4)
    update_rate = FS / samples_per_update
    fir = grid.fir_map([0.0, 1.3e-6, 4.75e-6], [1.0, 0.5, 0.25], FS)
    gains = complex_noise(rng, (int(6000 / samples_per_update + start_s * update_rate) + 40, 1, 1, 3))
    x = complex_noise(rng, 6000)
    y = ap.apply_channel(x, gains, fir.matrix, update_rate_hz=update_rate, sample_rate_hz=FS, start_s=start_s,
                         between_updates=between, engine=engine, block_samples=1000)
    reference = direct_output(x, gains, fir.matrix, update_rate, FS, start_s=start_s, hold=between == "hold")
    assert relative_error(y, reference[:, 0]) < 1e-5


def test_complex128_input_is_processed_in_double_precision():
    rng = np.random.default_rng(5)
    fir = grid.fir_map([0.0, 2.2e-6], [1.0, 0.3], FS)
    gains = complex_noise(rng, (300, 1, 1, 2))
    x = complex_noise(rng, 4000, np.complex128)
    y = ap.apply_channel(x, gains, fir.matrix, update_rate_hz=FS / 80, sample_rate_hz=FS)
    assert y.dtype == np.complex128
    assert relative_error(y, direct_output(x, gains, fir.matrix, FS / 80, FS)[:, 0]) < 1e-12


def test_the_output_does_not_depend_on_the_block_size():
    rng = np.random.default_rng(6)
    fir = grid.fir_map([0.0, 3.1e-6], [1.0, 0.3], FS)
    gains = complex_noise(rng, (200, 1, 1, 2))
    x = complex_noise(rng, 9000)
    outputs = [ap.apply_channel(x, gains, fir.matrix, update_rate_hz=FS / 50, sample_rate_hz=FS, block_samples=b)
               for b in (9000, 1000, 333, 1)]
    for y in outputs[1:]:
        assert relative_error(y, outputs[0]) < 1e-6


@pytest.mark.parametrize("between,expected_db", [("linear", -37.06), ("hold", -12.92)])
def test_interpolation_error_of_a_tone_at_one_sixteenth_of_the_update_rate(between, expected_db):
    # A tap turning at f = update_rate / 16, a constant input: the output is the
    # interpolated gain; its error against the exact exp(j 2 pi f t) is the
    # interpolation's. Closed form: the mean over theta of
    # |(1 - theta) + theta e^{j 2 pi x} - e^{j 2 pi x theta}|^2 (hold: |1 - e^{j 2 pi x theta}|^2).
    update_rate, ratio = 1000.0, 1 / 16
    x_ratio = 2 * math.pi * ratio

    def integrand(theta):
        held = 1.0 if between == "hold" else (1 - theta) + theta * np.exp(1j * x_ratio)
        return abs(held - np.exp(1j * x_ratio * theta)) ** 2

    closed_form_db = 10 * math.log10(integrate.quad(integrand, 0, 1)[0])
    assert closed_form_db == pytest.approx(expected_db, abs=0.01)  # the figures in emucompile.apply.replay's notes
    samples_per_update = 256
    gains = bf.tone_gains(400, update_rate, ratio * update_rate)
    n = np.arange(300 * samples_per_update)
    y = ap.apply_channel(np.ones(n.size, np.complex64), gains, [[1.0]], update_rate_hz=update_rate,
                         sample_rate_hz=update_rate * samples_per_update, between_updates=between)
    exact = np.exp(2j * np.pi * ratio * n / samples_per_update)
    measured_db = 10 * math.log10(np.mean(np.abs(y - exact) ** 2))
    assert measured_db == pytest.approx(closed_form_db, abs=0.05)  # theta sampled at 256 points per interval


# -- MIMO ------------------------------------------------------------------------------------------


def test_mimo_shapes_one_output_per_receive_antenna():
    rng = np.random.default_rng(7)
    fir = grid.fir_map([0.0, 1.5e-6], [1.0, 0.5], FS)
    gains = complex_noise(rng, (50, 3, 2, 2))  # 3 rx, 2 tx
    y = ap.apply_channel(complex_noise(rng, (2000, 2)), gains, fir.matrix, update_rate_hz=FS / 100, sample_rate_hz=FS)
    assert y.shape == (2000, 3)
    with pytest.raises(ValueError, match="n_tx=2"):
        ap.apply_channel(complex_noise(rng, 2000), gains, fir.matrix, update_rate_hz=FS / 100, sample_rate_hz=FS)


@pytest.mark.parametrize("engine", ["interval", "per-tap"])
def test_a_two_by_two_channel_matches_the_sum_of_its_links(engine):
    rng = np.random.default_rng(8)
    update_rate = FS / 61.7
    fir = grid.fir_map([0.0, 0.8e-6, 2.45e-6], [1.0, 0.6, 0.3], FS)
    gains = complex_noise(rng, (120, 2, 2, 3))
    x = complex_noise(rng, (6000, 2))
    y = ap.apply_channel(x, gains, fir.matrix, update_rate_hz=update_rate, sample_rate_hz=FS, engine=engine)
    for rx in range(2):
        # y_rx = sum_tx channel(rx, tx) applied to x_tx, each link on its own (SISO reference)
        reference = sum(
            direct_output(x[:, tx], gains[:, rx:rx + 1, tx:tx + 1], fir.matrix, update_rate, FS)[:, 0]
            for tx in range(2)
        )
        assert relative_error(y[:, rx], reference) < 1e-5


# -- the end of the bundle and --loop ---------------------------------------------------------------


def test_loop_over_a_periodic_bundle_is_seamless(tmp_path):
    gains, _ = bf.circulant_gaussian_gains(200, 1000.0, 30.0, seed=9)
    bf.make_bundle(tmp_path / "b", gains, update_rate_hz=1000.0, fir_matrix=[[1.0]], sample_rate_hz=64000.0, periodic=True)
    period = 200 * 64  # output samples per bundle period
    x = np.ones(int(2.5 * period), np.complex64)
    np.save(tmp_path / "x.npy", x)
    with pytest.raises(InputError, match="past the end of the bundle"):
        ap.apply_bundle(tmp_path / "b", tmp_path / "x.npy", tmp_path / "y.npy", sample_rate_hz=64000.0)
    assert listing(tmp_path) == ["b", "x.npy"]
    result = ap.apply_bundle(tmp_path / "b", tmp_path / "x.npy", tmp_path / "y.npy", loop=True, sample_rate_hz=64000.0)
    y = np.load(tmp_path / "y.npy")
    np.testing.assert_array_equal(y[period:2 * period], y[:period])  # each lap is the same
    np.testing.assert_allclose(y, direct_output(x, gains, [[1.0]], 1000.0, 64000.0, wrap=True)[:, 0], atol=1e-6)
    assert result.record["bundle_wraps"] == 2 and "seamless" in result.record["join"]
    # the join of the laps: sample 199 runs straight to sample 0 across the last interval
    join = y[period - 64:period + 1]
    line = gains[199, 0, 0, 0] + np.arange(65) / 64 * (gains[0, 0, 0, 0] - gains[199, 0, 0, 0])
    np.testing.assert_allclose(join, line, atol=1e-6)


def test_a_bundle_that_is_not_periodic_holds_its_last_sample_and_joins_by_a_line_when_looped(tmp_path):
    gains = bf.tone_gains(100, 1000.0, 37.0)
    bf.make_bundle(tmp_path / "b", gains, update_rate_hz=1000.0, fir_matrix=[[1.0]], sample_rate_hz=10000.0)
    covered = ap.TimeVaryingFir(gains, [[1.0]], update_rate_hz=1000.0, sample_rate_hz=10000.0).covered_samples
    assert covered == 1000  # the whole duration, 100 / 1000 Hz, at 10 kHz
    np.save(tmp_path / "x.npy", np.ones(covered, np.complex64))
    ap.apply_bundle(tmp_path / "b", tmp_path / "x.npy", tmp_path / "y.npy", sample_rate_hz=10000.0)
    y = np.load(tmp_path / "y.npy")
    np.testing.assert_allclose(y[990:], np.full(10, gains[99, 0, 0, 0]), atol=1e-7)  # held over the last interval
    np.save(tmp_path / "x2.npy", np.ones(covered + 10, np.complex64))
    with pytest.raises(InputError, match="--loop"):
        ap.apply_bundle(tmp_path / "b", tmp_path / "x2.npy", tmp_path / "y2.npy", sample_rate_hz=10000.0)
    result = ap.apply_bundle(tmp_path / "b", tmp_path / "x2.npy", tmp_path / "y2.npy", loop=True, sample_rate_hz=10000.0)
    y2 = np.load(tmp_path / "y2.npy")
    line = gains[99, 0, 0, 0] + np.arange(11) / 10 * (gains[0, 0, 0, 0] - gains[99, 0, 0, 0])
    np.testing.assert_allclose(y2[990:1000], line[:10], atol=1e-6)
    np.testing.assert_allclose(y2[1000:], direct_output(np.ones(10), gains, [[1.0]], 1000.0, 10000.0)[:10, 0], atol=1e-6)
    assert "straight line" in result.record["join"]


# -- noise -------------------------------------------------------------------------------------------


def test_measured_snr_matches_the_request_on_a_long_record(tmp_path):
    # Static taps, one at a half-sample delay: its row keeps about 0.93 of the
    # power, so an SNR defined without the FIR map's energy would be 0.3 dB off.
    fir = grid.fir_map([0.0, 1.5 / FS], [1.0, 0.5], FS)
    gains = bf.static_gains(120, [1.0, math.sqrt(0.5) * 1j])
    bf.make_bundle(tmp_path / "b", gains, update_rate_hz=100.0, delays_s=[0.0, 1.5 / FS], powers_linear=[1.0, 0.5],
                   sample_rate_hz=FS, fading="static")
    n = 1 << 20
    x = complex_noise(np.random.default_rng(10), n) * np.float32(0.7)
    np.save(tmp_path / "x.npy", x)
    clean = ap.apply_bundle(tmp_path / "b", tmp_path / "x.npy", tmp_path / "clean.npy", sample_rate_hz=FS)
    noisy = ap.apply_bundle(tmp_path / "b", tmp_path / "x.npy", tmp_path / "noisy.npy", snr_db=12.5, seed=11, sample_rate_hz=FS,
                            block_samples=50000)
    y_clean, y_noisy = np.load(tmp_path / "clean.npy"), np.load(tmp_path / "noisy.npy")
    noise = (y_noisy.astype(complex) - y_clean)[fir.n_fir:]
    signal_power = np.mean(np.abs(y_clean[fir.n_fir:]) ** 2)
    measured_snr_db = 10 * math.log10(signal_power / np.mean(np.abs(noise) ** 2))
    assert measured_snr_db == pytest.approx(12.5, abs=0.2)  # the tolerance
    # Tighter, from the record length: the noise power of N samples has a relative
    # standard deviation 1/sqrt(N) (|n|^2 is exponential), 0.0042 dB here; the
    # signal's mean power for this white input deviates from C P_x by less than
    # 1/sqrt(N) as well. 6 sigma of both: 0.036 dB.
    sigma_db = 10 / math.log(10) / math.sqrt(noise.size)
    assert abs(measured_snr_db - 12.5) < 6 * math.sqrt(2) * sigma_db
    energy = np.sum(fir.matrix**2, axis=1)
    assert clean.channel_mean_power == pytest.approx(1.0 * energy[0] + 0.5 * energy[1], rel=1e-6)
    assert energy[1] < 0.95
    assert noisy.record["noise"]["snr_db"] == 12.5 and noisy.record["noise"]["seed"] == 11


def test_noise_depends_on_the_seed_and_the_sample_only_and_is_independent_across_antennas():
    variances = [1.0, 4.0]
    whole = ap.WhiteNoise(5, variances).block(0, 200000)
    cuts = [0, 1, 70001, 123456, 131072, 200000]
    source = ap.WhiteNoise(5, variances)
    parts = np.concatenate([source.block(a, b - a) for a, b in zip(cuts[:-1], cuts[1:])][::-1][::-1])
    np.testing.assert_array_equal(whole, parts)
    np.testing.assert_array_equal(ap.WhiteNoise(5, variances).block(123456, 10), whole[123456:123466])
    assert np.mean(np.abs(whole) ** 2, axis=0) == pytest.approx(variances, rel=5 * 1 / math.sqrt(200000))
    correlation = np.mean(whole[:, 0] * np.conj(whole[:, 1])) / 2.0
    assert abs(correlation) < 5 / math.sqrt(200000)  # 5 sigma of a zero correlation estimate
    assert not np.array_equal(ap.WhiteNoise(6, variances).block(0, 100), whole[:100])


# -- the envelope of a Rayleigh bundle over a constant-envelope QPSK burst ----------------------


def test_a_rayleigh_bundle_gives_a_qpsk_burst_a_rayleigh_envelope(tmp_path):
    # A unit-power classical-spectrum process, 20 s at 1600 Hz, f_D = 50 Hz:
    # N_eff = 1 / sum p_b^2 = 962 independent samples (bundle_factory).
    # Tolerance: tools/calibrate_apply_envelope.py, KS distance of the exact
    # reference process's envelope against the Rayleigh law: in two runs of 4000
    # seeds the 99.9 % quantile is 0.0445 and 0.0460; none of the second run and
    # at most 4 of the first (max 0.0549) exceed 0.05, <= 0.05 %. The Kolmogorov rule with N_eff independent samples,
    # scipy.stats.kstwobign.isf(1e-3) / sqrt(N_eff) = 0.063, is conservative
    # (the envelope's correlation is not that of a mean). Seed 7 was not tuned.
    update_rate, doppler, n_updates, fs = 1600.0, 50.0, 32000, 100e3
    gains, p = bf.circulant_gaussian_gains(n_updates, update_rate, doppler, seed=7)
    n_eff = bf.effective_independent_samples(p)
    assert 900 < n_eff < 1000
    bf.make_bundle(tmp_path / "rayleigh", gains, update_rate_hz=update_rate, delays_s=[0.0], powers_linear=[1.0],
                   max_doppler_hz=doppler, sample_rate_hz=fs, periodic=True)
    rng = np.random.default_rng(12)
    symbols = np.exp(1j * (np.pi / 4 + np.pi / 2 * rng.integers(0, 4, int(20 * fs) // 4)))
    burst = np.repeat(symbols, 4).astype(np.complex64)  # rectangular pulses: constant envelope
    np.save(tmp_path / "burst.npy", burst)
    ap.apply_bundle(tmp_path / "rayleigh", tmp_path / "burst.npy", tmp_path / "faded.npy", sample_rate_hz=fs)
    envelope = np.abs(np.load(tmp_path / "faded.npy")) / np.abs(burst)
    distance = stats.kstest(envelope, "rayleigh", args=(0.0, math.sqrt(0.5))).statistic
    assert distance < 0.05
    # mean power 1: its estimate has the standard deviation 1/sqrt(N_eff); 5 sigma
    assert np.mean(envelope**2) == pytest.approx(1.0, abs=5 / math.sqrt(n_eff))
    # at the update instants the envelope is the gains' own
    # (output sample 125 m is at update instant 2 m: 125 / 100 kHz = 2 / 1600 Hz)
    np.testing.assert_allclose(envelope[::125], np.abs(gains[::2, 0, 0, 0]), rtol=1e-5)


# -- files: formats, metadata, SigMF round trip ------------------------------------------------------


def _siso_bundle(path, *, fs=FS, n_updates=400, update_rate=1000.0, with_fir=True, **options):
    rng = np.random.default_rng(13)
    gains = complex_noise(rng, (n_updates, 1, 1, 2))
    bf.make_bundle(path, gains, update_rate_hz=update_rate, delays_s=[0.0, 2.5 / fs], powers_linear=[0.8, 0.2],
                   sample_rate_hz=fs if with_fir else None, **options)
    return gains


def _write_sigmf(base: Path, samples, rate, datatype="cf32_le", **global_fields):
    samples = np.asarray(samples)
    channels = 1 if samples.ndim == 1 else samples.shape[1]
    if datatype == "ci16_le":
        data = np.stack([samples.real, samples.imag], axis=-1).astype("<i2").tobytes()
    else:
        data = samples.astype("<c8").tobytes()
    Path(f"{base}.sigmf-data").write_bytes(data)
    meta = {"global": {"core:datatype": datatype, "core:version": "1.2.0", "core:num_channels": channels,
                       "core:author": "test", **({"core:sample_rate": rate} if rate else {}), **global_fields},
            "captures": [{"core:sample_start": 0, "core:frequency": 2.45e9}], "annotations": []}
    Path(f"{base}.sigmf-meta").write_text(json.dumps(meta))
    return Path(f"{base}.sigmf-meta")


def test_sigmf_round_trip_keeps_the_format_and_names_the_bundle(tmp_path):
    gains = _siso_bundle(tmp_path / "b")
    rng = np.random.default_rng(14)
    x = complex_noise(rng, 50000)
    _write_sigmf(tmp_path / "in", x, FS)
    result = run_cli("apply", tmp_path / "b", tmp_path / "in.sigmf-meta", "-o", tmp_path / "out", "--quiet")
    assert result.exit_code == 0, result.output
    meta = json.loads((tmp_path / "out.sigmf-meta").read_text())
    top = meta["global"]
    assert top["core:datatype"] == "cf32_le" and top["core:sample_rate"] == FS and top["core:num_channels"] == 1
    data = (tmp_path / "out.sigmf-data").read_bytes()
    assert top["core:sha512"] == hashlib.sha512(data).hexdigest()
    assert top["core:author"] == "test" and meta["captures"][0]["core:frequency"] == 2.45e9
    assert {"name": "emucompile", "version": fmt.SIGMF_EXTENSION_VERSION, "optional": True} in top["core:extensions"]
    record = top["emucompile:apply"]
    manifest_bytes = (tmp_path / "b" / "manifest.json").read_bytes()
    assert record["bundle"]["manifest_sha256"] == hashlib.sha256(manifest_bytes).hexdigest()
    assert record["bundle"]["path"] == str((tmp_path / "b").resolve())
    fir = grid.fir_map([0.0, 2.5 / FS], [0.8, 0.2], FS)
    assert record["offsets"]["bulk_delay_samples"] == fir.bulk_delay_samples and record["offsets"]["start_s"] == 0.0
    assert record["noise"] is None and record["between_updates"] == "linear"
    back = ap.read_recording(tmp_path / "out.sigmf-meta")
    expected = ap.apply_channel(x, gains, fir.matrix, update_rate_hz=1000.0, sample_rate_hz=FS)
    assert relative_error(back.read(0, back.n_samples)[:, 0], expected) < 1e-6
    assert listing(tmp_path) == ["b", "in.sigmf-data", "in.sigmf-meta", "out.sigmf-data", "out.sigmf-meta"]


def test_sigmf_with_two_channels_and_noise(tmp_path):
    rng = np.random.default_rng(15)
    fir = grid.fir_map([0.0, 1.2e-6], [0.7, 0.3], FS)
    gains = complex_noise(rng, (300, 2, 2, 2))
    bf.make_bundle(tmp_path / "b", gains, update_rate_hz=1000.0, delays_s=[0.0, 1.2e-6], powers_linear=[0.7, 0.3],
                   sample_rate_hz=FS)
    x = complex_noise(rng, (40000, 2))
    _write_sigmf(tmp_path / "in", x, FS)
    result = run_cli("apply", tmp_path / "b", tmp_path / "in", "-o", tmp_path / "out.sigmf-meta",
                     "--snr-db", "10", "--seed", "4")
    assert result.exit_code == 0, result.output
    assert "SNR 10 dB" in result.stdout and "seed 4" in result.stdout
    back = ap.read_recording(tmp_path / "out.sigmf-meta")
    assert back.n_channels == 2 and back.metadata["global"]["core:num_channels"] == 2
    clean = ap.apply_channel(x, gains, fir.matrix, update_rate_hz=1000.0, sample_rate_hz=FS)
    noise = back.read(0, back.n_samples) - clean
    record = back.metadata["global"]["emucompile:apply"]["noise"]
    np.testing.assert_allclose(np.mean(np.abs(noise) ** 2, axis=0), record["noise_power_linear_per_rx"],
                               rtol=5 / math.sqrt(40000))
    nominal = ap.channel_mean_power(fir.matrix, [0.7, 0.3]) * np.sum(np.mean(np.abs(x.astype(complex)) ** 2, axis=0))
    np.testing.assert_allclose(record["nominal_signal_power_linear_per_rx"], [nominal] * 2, rtol=1e-6)


def test_ci16_sigmf_stays_ci16_with_the_same_code_scale_and_counts_clipping(tmp_path):
    gains = _siso_bundle(tmp_path / "b")
    rng = np.random.default_rng(16)
    codes = np.round(complex_noise(rng, 20000) * 3000)
    _write_sigmf(tmp_path / "in", codes, FS, datatype="ci16_le")
    assert run_cli("apply", tmp_path / "b", tmp_path / "in.sigmf-meta", "-o", tmp_path / "out", "--quiet").exit_code == 0
    back = ap.read_recording(tmp_path / "out.sigmf-meta")
    assert back.datatype == "ci16_le"
    fir = grid.fir_map([0.0, 2.5 / FS], [0.8, 0.2], FS)
    expected = ap.apply_channel(codes.astype(np.complex64), gains, fir.matrix, update_rate_hz=1000.0, sample_rate_hz=FS)
    got = back.read(0, back.n_samples)[:, 0]
    assert np.max(np.abs(got.real - expected.real)) <= 0.5 + 1e-2  # rounded to the nearest code
    assert back.metadata["global"]["emucompile:apply"]["output"]["clipped_values"] == 0
    loud = np.clip(codes.real * 9, -32767, 32767) + 1j * np.clip(codes.imag * 9, -32767, 32767)
    _write_sigmf(tmp_path / "loud", loud, FS, datatype="ci16_le")
    result = run_cli("apply", tmp_path / "b", tmp_path / "loud.sigmf-meta", "-o", tmp_path / "loud-out")
    assert result.exit_code == 0 and "clipped" in result.stderr
    clipped = ap.read_recording(tmp_path / "loud-out.sigmf-meta").metadata["global"]["emucompile:apply"]["output"]["clipped_values"]
    assert clipped > 0


def test_npy_and_cf32_outputs_carry_a_json_sidecar(tmp_path):
    gains = _siso_bundle(tmp_path / "b", with_fir=False)
    rng = np.random.default_rng(17)
    x = complex_noise(rng, 30000)
    x.astype("<c8").tofile(tmp_path / "in.cf32")
    np.save(tmp_path / "in.npy", x)
    result = run_cli("apply", tmp_path / "b", tmp_path / "in.cf32", "-o", tmp_path / "out", "--sample-rate", 2e6,
                     "--start", "0.05", "--between-updates", "hold")
    assert result.exit_code == 0, result.output
    record = json.loads((tmp_path / "out.cf32.json").read_text())
    assert record["fir_map"]["source"].startswith("built") and record["fir_map"]["delay_mapping"] == "sinc"
    assert record["offsets"]["start_s"] == 0.05 and record["between_updates"] == "hold"
    fir = grid.fir_map([0.0, 2.5 / FS], [0.8, 0.2], 2e6)  # the taps' delays on the recording's own grid
    expected = direct_output(x, gains, fir.matrix, 1000.0, 2e6, start_s=0.05, hold=True)[:, 0]
    assert relative_error(np.fromfile(tmp_path / "out.cf32", dtype="<c8"), expected) < 1e-5
    assert record["output"]["sha256"] == hashlib.sha256((tmp_path / "out.cf32").read_bytes()).hexdigest()
    result = run_cli("apply", tmp_path / "b", tmp_path / "in.npy", "-o", tmp_path / "out.npy", "--sample-rate", 2e6,
                     "--quiet")
    assert result.exit_code == 0 and result.stdout == ""
    assert np.load(tmp_path / "out.npy").shape == (30000,)
    assert json.loads((tmp_path / "out.npy.json").read_text())["output"]["axes"] == ["sample"]


def test_the_bundle_target_decides_between_hold_and_linear(tmp_path):
    gains = _siso_bundle(tmp_path / "b", target={"constraints": {"between_updates": "hold", "name": "bench-emulator"}, "costs": {}})
    np.save(tmp_path / "x.npy", complex_noise(np.random.default_rng(18), 1000))
    assert ap.apply_bundle(tmp_path / "b", tmp_path / "x.npy", tmp_path / "y.npy", sample_rate_hz=FS).record["between_updates"] == "hold"
    override = ap.apply_bundle(tmp_path / "b", tmp_path / "x.npy", tmp_path / "z.npy", between_updates="linear",
                             sample_rate_hz=FS)
    assert override.record["between_updates"] == "linear"
    assert gains.shape[0] == 400


def test_force_replaces_an_output_and_nothing_is_replaced_without_it(tmp_path):
    _siso_bundle(tmp_path / "b")
    np.save(tmp_path / "x.npy", complex_noise(np.random.default_rng(19), 1000))
    (tmp_path / "y.npy").write_bytes(b"keep me")
    result = run_cli("apply", tmp_path / "b", tmp_path / "x.npy", "-o", tmp_path / "y.npy", "--sample-rate", FS)
    assert result.exit_code == 2 and "already exists" in result.stderr
    assert (tmp_path / "y.npy").read_bytes() == b"keep me"
    assert run_cli("apply", tmp_path / "b", tmp_path / "x.npy", "-o", tmp_path / "y.npy", "--force", "--sample-rate", FS).exit_code == 0
    assert np.load(tmp_path / "y.npy").shape == (1000,)


def test_memory_stays_bounded_whatever_the_length_and_progress_is_reported(tmp_path):
    import tracemalloc

    _siso_bundle(tmp_path / "b", n_updates=2200)  # 2.2 s at 1 MHz
    peaks = []
    for n in (1 << 18, 1 << 21):
        np.save(tmp_path / f"x{n}.npy", complex_noise(np.random.default_rng(24), n))
        calls = []
        tracemalloc.start()
        ap.apply_bundle(tmp_path / "b", tmp_path / f"x{n}.npy", tmp_path / f"y{n}.npy", snr_db=30.0, seed=1, sample_rate_hz=FS,
                        progress=lambda done, total, calls=calls: calls.append((done, total)))
        peaks.append(tracemalloc.get_traced_memory()[1])
        tracemalloc.stop()
        assert calls[0] == (0, n) and calls[-1] == (n, n)
        assert all(b[0] > a[0] for a, b in zip(calls, calls[1:]))
    # numpy reports its buffers to tracemalloc; the memory-mapped input and output are not held
    assert peaks[1] < 1.5 * peaks[0] and peaks[1] < 64 * 2**20, peaks


# -- bad input: exit 2, one line, nothing written -------------------------------------------------


def _bad_cases(tmp_path):
    """(name, input path, extra arguments, words of the message)."""
    rng = np.random.default_rng(20)
    good = complex_noise(rng, 1000)
    np.save(tmp_path / "float.npy", good.real.astype(np.float64))
    np.save(tmp_path / "int16.npy", np.zeros((1000, 2), np.int16))
    np.save(tmp_path / "empty.npy", np.zeros(0, np.complex64))
    np.save(tmp_path / "two_tx.npy", complex_noise(rng, (1000, 2)))
    np.save(tmp_path / "transposed.npy", complex_noise(rng, (1, 1000)))
    bad = good.copy()
    bad[123] = np.nan
    np.save(tmp_path / "nan.npy", bad)
    np.save(tmp_path / "long.npy", complex_noise(rng, 500000))
    np.save(tmp_path / "good.npy", good)
    (tmp_path / "truncated.cf32").write_bytes(good.tobytes()[:8 * 999 + 4])
    (tmp_path / "empty.cf32").write_bytes(b"")
    (tmp_path / "good.dat").write_bytes(good.tobytes())
    _write_sigmf(tmp_path / "other_rate", good, 2e6)
    _write_sigmf(tmp_path / "two_channels", complex_noise(rng, (1000, 2)), FS)
    _write_sigmf(tmp_path / "real", good.real.astype(np.float32), FS, datatype="rf32_le")
    (tmp_path / "not_json.sigmf-meta").write_text("{not json")
    (tmp_path / "not_json.sigmf-data").write_bytes(good.tobytes())
    (tmp_path / "not_a_bundle").mkdir()
    return [
        ("float dtype", "float.npy", [], "complex64 or complex128"),
        ("int16 dtype", "int16.npy", [], "int16"),
        ("empty npy", "empty.npy", [], "empty"),
        ("empty raw", "empty.cf32", [], "empty"),
        ("truncated raw", "truncated.cf32", [], "truncated"),
        ("two tx on SISO", "two_tx.npy", [], "n_tx = 1"),
        ("samples along the wrong axis", "transposed.npy", [], "transpose it"),
        ("two SigMF channels on SISO", "two_channels.sigmf-meta", [], "n_tx = 1"),
        ("sample rate of SigMF", "other_rate.sigmf-meta", [], "was made for"),
        ("sample rate given", "good.npy", ["--sample-rate", "2e6"], "was made for"),
        ("sample rate not given", "good.npy", ["--no-rate"], "does not state its sample rate"),
        ("SigMF datatype", "real.sigmf-meta", [], "rf32_le"),
        ("SigMF metadata", "not_json.sigmf-meta", [], "not readable SigMF metadata"),
        ("NaN", "nan.npy", [], "sample 123 is NaN"),
        ("unknown suffix", "good.dat", [], "cannot tell"),
        ("missing input", "missing.npy", [], "no such file"),
        ("longer than the bundle", "long.npy", [], "--loop"),
        ("start outside", "good.npy", ["--start", "5"], "outside the bundle"),
        ("output in another format", "good.npy", ["-o", "OUT.sigmf-meta"], "keeps the input's format"),
        ("output is the input", "good.npy", ["-o", "good.npy", "--force"], "is the input"),
        ("SNR not finite", "good.npy", ["--snr-db", "nan"], "finite"),
        ("not a bundle", "good.npy", ["--bundle", "not_a_bundle"], "manifest.json is missing"),
    ]


def test_every_bad_input_exits_2_with_one_line_and_writes_nothing(tmp_path):
    _siso_bundle(tmp_path / "b", n_updates=400)  # 0.4 s at 1 MHz: 400000 samples
    cases = _bad_cases(tmp_path)
    before = listing(tmp_path)
    for name, input_name, extra, words in cases:
        bundle = tmp_path / "b"
        output = tmp_path / "OUT"
        if "--bundle" in extra:
            bundle = tmp_path / extra[1]
            extra = []
        if "-o" in extra:
            output = tmp_path / extra[1]
            extra = extra[2:]
        if extra == ["--no-rate"]:
            extra = []
        elif not input_name.endswith(".sigmf-meta") and "--sample-rate" not in extra:
            extra = [*extra, "--sample-rate", str(FS)]  # headerless input states no rate
        result = run_cli("apply", bundle, tmp_path / input_name, "-o", output, *extra)
        assert result.exit_code == 2, (name, result.output)
        lines = result.stderr.strip().splitlines()
        assert len(lines) == 1 and lines[0].startswith("emucompile: error: "), (name, result.stderr)
        assert words in lines[0], (name, lines[0])
        assert "Traceback" not in result.output
        assert listing(tmp_path) == before, name


def test_a_bundle_without_fir_map_needs_a_rate_for_raw_input(tmp_path):
    _siso_bundle(tmp_path / "b", with_fir=False)
    np.save(tmp_path / "x.npy", complex_noise(np.random.default_rng(21), 1000))
    result = run_cli("apply", tmp_path / "b", tmp_path / "x.npy", "-o", tmp_path / "y")
    assert result.exit_code == 2 and "--sample-rate" in result.stderr
    assert listing(tmp_path) == ["b", "x.npy"]


def test_an_interrupt_as_the_output_file_is_made_leaves_nothing(tmp_path, monkeypatch):
    """Ctrl-C between creating the temporary file and writing its header (what a SIGINT sent
    the moment the file appears can hit): the file is still removed."""
    _siso_bundle(tmp_path / "b")
    np.save(tmp_path / "x.npy", complex_noise(np.random.default_rng(24), 1000))

    def interrupted(self, data):
        raise KeyboardInterrupt

    monkeypatch.setattr(fmt.HashedFile, "write", interrupted)
    with pytest.raises(bd.WriteInterrupted, match="interrupted; nothing was written"):
        ap.apply_bundle(tmp_path / "b", tmp_path / "x.npy", tmp_path / "y.npy", sample_rate_hz=FS)
    assert listing(tmp_path) == ["b", "x.npy"]


def test_an_interrupt_or_a_full_disk_while_writing_leaves_nothing(tmp_path, monkeypatch):
    _siso_bundle(tmp_path / "b")
    np.save(tmp_path / "x.npy", complex_noise(np.random.default_rng(22), 300000))

    def interrupt(done, total):
        if done > 100000:
            raise KeyboardInterrupt

    with pytest.raises(bd.WriteInterrupted, match="interrupted; nothing was written") as caught:
        ap.apply_bundle(tmp_path / "b", tmp_path / "x.npy", tmp_path / "y.npy", progress=interrupt, sample_rate_hz=FS)
    assert caught.value.exit_code == 130
    assert listing(tmp_path) == ["b", "x.npy"]
    written = {"bytes": 0}
    original = fmt.HashedFile.write

    def fill_up(self, data):
        written["bytes"] += memoryview(data).nbytes
        if written["bytes"] > 1 << 20:
            raise OSError(errno.ENOSPC, "No space left on device", self.path)
        original(self, data)

    monkeypatch.setattr(fmt.HashedFile, "write", fill_up)
    result = run_cli("apply", tmp_path / "b", tmp_path / "x.npy", "-o", tmp_path / "y.npy", "--sample-rate", FS)
    assert result.exit_code == 2 and "no space left" in result.stderr
    assert listing(tmp_path) == ["b", "x.npy"]


@pytest.mark.slow
def test_sigint_to_the_command_leaves_no_output(tmp_path):
    _siso_bundle(tmp_path / "b", n_updates=4000)  # 4 s at 1 MHz
    np.save(tmp_path / "x.npy", complex_noise(np.random.default_rng(23), 4_000_000))
    child = subprocess.Popen(
        [sys.executable, "-m", "emucompile", "apply", str(tmp_path / "b"), str(tmp_path / "x.npy"),
         "-o", str(tmp_path / "y.npy"), "--snr-db", "20", "--quiet", "--sample-rate", str(FS)],
        cwd=ROOT, stderr=subprocess.PIPE, text=True,
    )
    deadline = time.monotonic() + 60
    while not any(bd.TEMP_MARKER in name for name in listing(tmp_path)):
        assert child.poll() is None and time.monotonic() < deadline, "the write never started"
        time.sleep(0.01)
    child.send_signal(signal.SIGINT)
    _, stderr = child.communicate(timeout=60)
    assert child.returncode == 130, stderr
    assert "interrupted" in stderr
    assert listing(tmp_path) == ["b", "x.npy"]


def test_the_api_is_exported():
    import emucompile

    assert emucompile.apply_bundle is ap.apply_bundle
    assert emucompile.apply_channel is ap.apply_channel
