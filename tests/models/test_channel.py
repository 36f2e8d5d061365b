"""The engine with MIMO links and time-varying conditions, measured from compiled bundles.

Sources named per test: the Kronecker model and its estimator's variance
(Isserlis' theorem, :func:`emucompile.models.mimo.estimate_variance`), Clarke's
autocorrelation J0(2 pi f_D tau) (scipy.special.j0), TS 36.104 V19.2.0
Annex B.3 (high-speed train, equations B.3.1-B.3.3 written out again here)
and B.4 (moving propagation, equation B.4-1), Gudmundson 1991 (exponential
autocorrelation of log-normal shadowing) with Bartlett's formula for the
variance of a sample autocorrelation. The profiles are invented for the tests.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from scipy import special, stats

from emucompile.apply import replay as ap
from emucompile.models import fading
from emucompile.models import grid
from emucompile.models import mimo
from emucompile.bundle.store import open_bundle, verify_integrity
from emucompile.models.channel import ChannelPlan
from emucompile.compile.compiler import compile_profile, reproduce_bundle
from emucompile.verify.components import open_components
from emucompile.profile.model import load_profile

MIMO_PROFILE = """\
format_version: 1
name: test-mimo-links
description: invented for the tests
max_doppler_hz: 100
taps:
  - {delay_ns: 0, power_db: 0, fading: rician, k_db: 3, los_angle_deg: 40, los_phase_deg: 10}
  - {delay_ns: 250, power_db: -2}
mimo:
  n_tx: 2
  n_rx: 2
  correlation: {level: medium, specification: ts36101}
  direct_part: {tx_spacing_wavelengths: 0.5, rx_spacing_wavelengths: 0.5, departure_deg: 20, arrival_deg: -35}
"""

HST = dict(ds_m=100.0, dmin_m=10.0, speed_mps=100.0, max_doppler_hz=200.0)  # period 2 s
HST_PROFILE = f"""\
format_version: 1
name: test-train
description: invented for the tests
max_doppler_hz: 200
taps:
  - {{delay_ns: 0, power_db: 0, fading: static, los_phase_deg: 0}}
  - {{delay_ns: 400, power_db: -12}}
conditions:
  high_speed_train: {{ds_m: {HST['ds_m']}, dmin_m: {HST['dmin_m']}, speed_mps: {HST['speed_mps']}, max_doppler_hz: {HST['max_doppler_hz']}, taps: [0]}}
"""

SHADOW = dict(sigma=6.0, d=10.0, v=40.0)
SHADOW_PROFILE = f"""\
format_version: 1
name: test-shadowing
description: invented for the tests
taps:
  - {{delay_ns: 0, power_db: 0, fading: static, los_phase_deg: 30}}
conditions:
  shadowing: {{sigma_db: {SHADOW['sigma']}, decorrelation_distance_m: {SHADOW['d']}, speed_mps: {SHADOW['v']}}}
"""

MOVING = dict(a_us=20.0, omega=200.0)
MOVING_PROFILE = f"""\
format_version: 1
name: test-moving-delay
description: invented for the tests
taps:
  - {{delay_ns: 0, power_db: 0, fading: static, los_phase_deg: 0}}
conditions:
  moving_propagation: {{amplitude_us: {MOVING['a_us']}, angular_rate_per_s: {MOVING['omega']}}}
"""


def _write(tmp_path, text, name="p.yaml"):
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def _channel(path, rate, n, seed):
    profile = load_profile(path)
    return ChannelPlan(profile, fading.plan(profile, rate, n, seed))


# -- MIMO ---------------------------------------------------------------------------------


def test_mimo_gains_are_bit_identical_for_any_chunking_and_random_access(tmp_path):
    """Reproducibility promise (docs/bundle-format.md): chunking and offsets never change the bytes."""
    channel = _channel(_write(tmp_path, MIMO_PROFILE), 1000.0, 30000, 5)
    whole = channel.block(0, channel.n_samples)
    assert whole.shape == (30000, 2, 2, 2) and whole.dtype == np.complex64
    for size in (1, 777, 4096, 30000):
        if size == 1:
            pieces = [channel.block(n, n + 1) for n in range(0, 50)]
            assert np.array_equal(np.concatenate(pieces), whole[:50])
            continue
        joined = np.concatenate([g for _, g in channel.chunks(size)])
        assert np.array_equal(joined, whole)
    for a, b in ((12345, 12400), (29990, 30000), (3, 20003)):
        fresh = _channel(tmp_path / "p.yaml", 1000.0, 30000, 5)
        assert np.array_equal(fresh.block(a, b), whole[a:b])


def test_two_by_two_medium_correlation_is_achieved_within_the_isserlis_tolerance(tmp_path):
    """TS 36.101 medium (alpha 0.3, beta 0.9), Kronecker R = R_tx (x) R_rx; the estimator's
    variance from Isserlis' theorem with Clarke's autocorrelation J0(2 pi f_D k / F_u)."""
    path = _write(tmp_path, MIMO_PROFILE)
    result = compile_profile(path, tmp_path / "b", duration_s=100.0, update_rate_hz=1000.0, seed=11)
    parts = open_components(result.path)
    n = parts.n_samples
    fd, rate = 100.0, 1000.0
    rho = special.j0(2 * math.pi * fd * np.arange(n) / rate)
    # 12 real numbers per tap (6 off-diagonal complex entries), 2 taps: family-wise 0.1 %.
    z = stats.norm.isf(0.001 / (2 * 24))
    worst = 0.0
    for tap in range(2):
        expected = parts.expected_correlation(tap)
        # TS 36.101 B.2.3.2 medium 2x2 (from memory; see emucompile.models.mimo): R_eNB (x) R_UE,
        # alpha = 0.3 at the transmitting base station, beta = 0.9 at the UE.
        assert np.allclose(expected, np.kron([[1, 0.3], [0.3, 1]], [[1, 0.9], [0.9, 1]]))
        achieved = mimo.estimate_correlation(parts.link_streams(tap, 0, n))
        var_re, var_im = mimo.estimate_variance(expected, n, rho)
        off = ~np.eye(4, dtype=bool)
        error = achieved - expected
        worst = max(worst, float(np.abs(error[off]).max()))
        assert np.all(np.abs(error.real[off]) <= z * np.sqrt(var_re[off]))
        assert np.all(np.abs(error.imag[off]) <= z * np.sqrt(var_im[off]) + 1e-12)
    assert worst < 0.05  # the figure the report quotes; the binding check is the one above


def test_mimo_direct_part_carries_the_array_response_and_the_manifest_records_it(tmp_path):
    """The direct part of a Rician tap is a_tx (x) a_rx times the tap's direct phasor (mimo.direct_link_response)."""
    path = _write(tmp_path, MIMO_PROFILE)
    result = compile_profile(path, tmp_path / "b", duration_s=2.0, update_rate_hz=1000.0, seed=2)
    parts = open_components(result.path)
    direct = mimo.links_from_gains(parts.direct(0, 100))[:, :, 0]
    response = mimo.direct_link_response(2, 2, departure_deg=20, arrival_deg=-35)
    k = 10 ** 0.3
    power = result.manifest["taps"][0]["power_linear"]
    assert np.allclose(np.abs(direct), math.sqrt(power * k / (k + 1)), rtol=1e-6)
    ratio = direct / direct[:, :1]
    assert np.allclose(ratio, response[None, :] / response[0], atol=1e-6)
    assert np.allclose(parts.direct(0, 100)[..., 1], 0.0)
    total = parts.small_scale(0, 100)
    assert np.allclose(total, parts.direct(0, 100) + parts.diffuse(0, 100))
    manifest = result.manifest
    profile = load_profile(path)
    assert manifest["mimo"] == json.loads(json.dumps(profile.mimo.as_record()))
    assert (manifest["n_rx"], manifest["n_tx"]) == (2, 2)
    assert open_bundle(result.path).tap_gains.shape == (2000, 2, 2, 2)
    assert verify_integrity(result.path) == []
    assert reproduce_bundle(result.path).status == "identical"


def test_apply_replays_a_real_two_by_two_bundle_as_the_sum_of_its_links(tmp_path):
    """y_rx = sum_tx h_rx,tx * x_tx for a channel held constant (linear interpolation of equal gains)."""
    path = _write(tmp_path, MIMO_PROFILE)
    result = compile_profile(path, tmp_path / "b", duration_s=1.0, update_rate_hz=1000.0, seed=4,
                             sample_rate_hz=4e6)
    rng = np.random.default_rng(1)
    x = (rng.standard_normal((400, 2)) + 1j * rng.standard_normal((400, 2))).astype(np.complex64)
    np.save(tmp_path / "x.npy", x)
    ap.apply_bundle(result.path, tmp_path / "x.npy", tmp_path / "y.npy", sample_rate_hz=4e6)
    y = np.load(tmp_path / "y.npy")
    bundle = open_bundle(result.path)
    # 400 samples at 4 MHz lie inside the first update interval (1 ms): h between g[0] and g[1].
    t = np.arange(400) / 4e6 * 1000.0
    g = (1 - t)[:, None, None, None] * bundle.tap_gains[0] + t[:, None, None, None] * bundle.tap_gains[1]
    fir = np.asarray(bundle.fir_map)
    reference = np.zeros((400, 2), complex)
    for n in range(400):
        h = g[n] @ fir  # (n_rx, n_tx, n_fir)
        for i in range(min(fir.shape[1], n + 1)):
            reference[n] += h[:, :, i] @ x[n - i]
    assert y.shape == (400, 2)
    assert np.max(np.abs(y - reference)) <= 1e-4 * np.max(np.abs(reference))


# -- high-speed train -----------------------------------------------------------------------


def standard_doppler(t):
    """TS 36.104 B.3.1-B.3.4 written out directly (independent of emucompile.models.conditions)."""
    ds, dmin, v, fd = HST["ds_m"], HST["dmin_m"], HST["speed_mps"], HST["max_doppler_hz"]
    t = np.mod(t, 2 * ds / v)
    x = np.where(t <= ds / v, ds / 2 - v * t, -1.5 * ds + v * t)
    return fd * x / np.sqrt(dmin**2 + x**2)


def test_high_speed_train_doppler_measured_from_the_data_follows_ts36104_b3(tmp_path):
    """The static tap's phase step per update, over 2.5 periods, against f_s(t) of B.3.1-B.3.3."""
    path = _write(tmp_path, HST_PROFILE)
    rate = 2000.0
    result = compile_profile(path, tmp_path / "b", duration_s=5.0, update_rate_hz=rate, seed=8)
    gains = np.asarray(open_bundle(result.path).tap_gains[:, 0, 0, 0], dtype=np.complex128)
    n = gains.size
    measured = np.angle(gains[1:] * np.conj(gains[:-1])) * rate / (2 * math.pi)
    mid = (np.arange(n - 1) + 0.5) / rate
    expected = standard_doppler(mid)
    # f_s jumps from -f to +f at t = k D_s / v: skip the updates that straddle a jump.
    jump = HST["ds_m"] / HST["speed_mps"]
    edges = np.arange(0.0, n / rate + jump, jump)
    keep = np.min(np.abs(mid[:, None] - edges[None, :]), axis=1) > 1.0 / rate
    # The phase step is the mean of f_s over an update, the closed form its midpoint value:
    # they differ by <= max|f''| dt^2 / 24, max|f''| = 0.859 f_d v^2 / D_min^2 (max of
    # |d^2/dx^2 x/sqrt(D^2+x^2)| = 3 D^2 x / (D^2+x^2)^(5/2) at x = D/2); plus complex64
    # phase rounding, < 2 * 2^-24 rad per sample -> 2^-22 F_u / (2 pi) Hz.
    bound = 0.859 * HST["max_doppler_hz"] * HST["speed_mps"] ** 2 / HST["dmin_m"] ** 2 / (24 * rate**2)
    bound += 2.0**-22 * rate / (2 * math.pi) * 4
    error = np.abs(measured - expected)[keep]
    assert keep.sum() > 0.99 * keep.size and n / rate > 2 * (2 * jump)  # more than one period
    assert error.max() <= bound, (error.max(), bound)
    record = result.manifest["conditions"]["high_speed_train"]
    assert record["period_s"] == pytest.approx(2.0) and record["taps"] == [0]
    assert result.manifest["taps"][0]["los_trajectory"] == "high_speed_train"
    assert result.manifest["taps"][0]["los_doppler_hz"] is None
    assert reproduce_bundle(result.path).status == "identical"


# -- shadowing ---------------------------------------------------------------------------------


def _bartlett_variance(rho, lag, n):
    """Bartlett's formula for Var(r_hat(lag)) of a Gaussian series with autocorrelation rho."""
    j = np.arange(-(len(rho) - 1 - lag), len(rho) - lag)
    r = lambda k: rho[np.abs(k)]  # noqa: E731
    terms = r(j) ** 2 + r(j + lag) * r(j - lag) - 4 * rho[lag] * r(j) * r(j - lag) + 2 * rho[lag] ** 2 * r(j) ** 2
    return float(np.sum(terms)) / n


def test_shadowing_has_the_stated_sigma_mean_and_gudmundson_autocorrelation(tmp_path):
    """Gudmundson 1991: S ~ N(mu, sigma^2), corr exp(-|dx|/d); mean power held (mu = -sigma^2 ln10/20).

    The update rate puts one sample on each node of the generator's exact AR(1) grid
    (32 nodes per decorrelation distance), so the stored series is exactly that process;
    the tolerances are its estimators' standard deviations (exact sums over the
    autocorrelation) times z for a family-wise 0.1 % over the 6 checks.
    """
    sigma, d, v = SHADOW["sigma"], SHADOW["d"], SHADOW["v"]
    rate = v * 32 / d  # 128 Hz: one node per sample
    path = _write(tmp_path, SHADOW_PROFILE)
    result = compile_profile(path, tmp_path / "b", duration_s=2000.0, update_rate_hz=rate, seed=21)
    parts = open_components(result.path)
    n = parts.n_samples
    s = parts.shadowing_db(0, n)
    mu = -(sigma**2) * math.log(10) / 20
    k = np.arange(n)
    rho = np.exp(-k * (v / rate) / d)
    z = stats.norm.isf(0.001 / (2 * 6))
    sum_rho = 1 + 2 * np.sum((1 - k[1:] / n) * rho[1:])
    sum_rho2 = 1 + 2 * np.sum((1 - k[1:] / n) * rho[1:] ** 2)
    assert abs(s.mean() - mu) <= z * sigma * math.sqrt(sum_rho / n)
    var_hat = np.mean((s - mu) ** 2)
    assert abs(var_hat / sigma**2 - 1) <= z * math.sqrt(2 * sum_rho2 / n)
    centred = s - s.mean()
    for distance in (d / 4, d, 2 * d):
        lag = int(round(distance / (v / rate)))
        r_hat = np.mean(centred[:-lag] * centred[lag:]) / np.mean(centred**2)
        bound = z * math.sqrt(_bartlett_variance(rho[: 40 * lag], lag, n))
        assert abs(r_hat - math.exp(-distance / d)) <= bound, (distance, r_hat, bound)
    # Applied to tap_gains: |g| = sqrt(P) 10^(S/20) for the static tap (float32 rounding).
    gains = np.abs(np.asarray(open_bundle(result.path).tap_gains[:, 0, 0, 0], dtype=np.complex128))
    assert np.allclose(20 * np.log10(gains), s, atol=1e-5)
    assert np.allclose(np.abs(parts.small_scale(0, n)[:, 0, 0, 0]), 1.0, atol=1e-6)
    record = parts.shadowing()
    assert (record["sigma_db"], record["decorrelation_distance_m"], record["speed_mps"], record["hold"]) == (
        sigma, d, v, "mean")
    entry = open_bundle(result.path).entry("shadowing_db")
    assert entry["name"] == "shadowing_db.npy" and entry["shape"] == [n] and entry["dtype"] == "float64"
    assert verify_integrity(result.path) == []
    assert reproduce_bundle(result.path).status == "identical"


# -- moving propagation -----------------------------------------------------------------------


def test_the_moving_fir_follows_the_delay_of_ts36104_b4_and_apply_uses_it(tmp_path):
    """Delta tau(t) = (A/2) sin(Delta omega t) (B.4-1): the DC group delay sum n h[n] / sum h[n]
    of each update's FIR equals bulk + Delta tau f_s, and an impulse through apply comes out there."""
    fs, rate = 1e6, 20000.0
    path = _write(tmp_path, MOVING_PROFILE)
    with pytest.raises(Exception, match="sample rate"):
        compile_profile(path, tmp_path / "none", duration_s=0.05, update_rate_hz=rate, seed=1)
    result = compile_profile(path, tmp_path / "b", duration_s=0.05, update_rate_hz=rate, seed=1, sample_rate_hz=fs)
    bundle = open_bundle(result.path)
    fir_entry = result.manifest["fir"]
    bulk = fir_entry["bulk_delay_samples"]
    assert fir_entry["moving"]["max_offset_s"] == pytest.approx(10e-6)
    assert result.manifest["conditions"]["moving_propagation"]["carrier_phase_follows"] is False
    fir = np.asarray(bundle.fir[:, 0, 0, :], dtype=np.complex128)
    gains = np.asarray(bundle.tap_gains[:, 0, 0, 0], dtype=np.complex128)
    h = (fir / gains[:, None]).real
    index = np.arange(h.shape[1])
    delay = h @ index / h.sum(axis=1)
    t = np.arange(h.shape[0]) / rate
    expected = bulk + (MOVING["a_us"] * 1e-6 / 2) * np.sin(MOVING["omega"] * t) * fs
    assert np.ptp(expected) > 15  # the delay moves by most of its +-10 samples
    # Reference: the static map of emucompile.models.grid (tested on its own against the windowed
    # sinc) at each update's delay on the same grid: the same row, to rounding.
    for n in (0, 123, 517, 999):
        ref = grid.fir_map([(expected[n] - bulk) / fs], [1.0], fs)
        shift = bulk - ref.bulk_delay_samples  # index i of ref is index i + shift here
        assert shift >= 0 and shift + ref.n_fir <= h.shape[1]
        assert np.allclose(h[n, shift:shift + ref.n_fir], ref.matrix[0], atol=1e-6)
        assert np.allclose(np.delete(h[n], np.arange(shift, shift + ref.n_fir)), 0.0, atol=1e-6)
    # The DC group delay of a windowed sinc differs from its centre by a few 1e-5 samples,
    # depending on the fraction: allowed what the static map shows over a sweep of fractions.
    sweep = np.linspace(0.0, 1.0, 101)
    static_error = max(abs((row := grid.fir_map([f / fs], [1.0], fs)).matrix[0] @ np.arange(row.n_fir)
                           / row.matrix[0].sum() - (row.bulk_delay_samples + f)) for f in sweep)
    error = np.max(np.abs(delay - expected))
    assert error <= 1.01 * static_error + 1e-6, (error, static_error)
    assert np.max(np.abs(np.diff(h, axis=0))) < 0.2  # smooth: no coefficient jumps
    # apply: impulses every 500 samples come out at the delay of their instant; the FIR
    # moves < (A/2) dw fs * n_fir / fs samples across one response, which bounds the error.
    x = np.zeros(40000, np.complex64)
    x[100::500] = 1.0
    np.save(tmp_path / "x.npy", x)
    ap.apply_bundle(result.path, tmp_path / "x.npy", tmp_path / "y.npy", sample_rate_hz=fs)
    y = np.load(tmp_path / "y.npy")[:, 0] if np.load(tmp_path / "y.npy").ndim == 2 else np.load(tmp_path / "y.npy")
    n_fir = h.shape[1]
    drift = (MOVING["a_us"] * 1e-6 / 2) * MOVING["omega"] * n_fir
    for start in range(100, 40000 - n_fir, 500):
        response = y[start:start + n_fir].real
        centre = response @ np.arange(n_fir) / response.sum()
        tau = bulk + (MOVING["a_us"] * 1e-6 / 2) * np.sin(MOVING["omega"] * start / fs) * fs
        assert abs(centre - tau) <= drift + 1.01 * static_error + 1e-6, (start, centre, tau)
    assert verify_integrity(result.path) == []
    assert reproduce_bundle(result.path).status == "identical"


def test_conditions_gains_are_bit_identical_for_any_chunking_and_random_access(tmp_path):
    """The reproducibility promise of docs/bundle-format.md with a train, shadowing and a moving delay whose carrier follows."""
    text = HST_PROFILE + (
        "  shadowing: {sigma_db: 5, decorrelation_distance_m: 3, speed_mps: 30}\n"
        "  moving_propagation: {amplitude_us: 1, angular_rate_per_s: 3, carrier_follows: true, carrier_hz: 1.0e6}\n"
        "mimo:\n  n_tx: 1\n  n_rx: 2\n  correlation: {tx: 0, rx: 0.6}\n  direct_part: identical\n")
    path = _write(tmp_path, text)
    channel = _channel(path, 2000.0, 20000, 9)
    assert channel.shadowing is not None and channel.train_taps == (0,)
    whole = channel.block(0, 20000)
    for size in (333, 8192):
        assert np.array_equal(np.concatenate([g for _, g in channel.chunks(size)]), whole)
    fresh = _channel(path, 2000.0, 20000, 9)
    assert np.array_equal(fresh.block(15000, 15077), whole[15000:15077])
    assert np.array_equal(fresh.block(7, 8), whole[7:8])
    # The gains are the documented parts combined, bit for bit (block works link by link in
    # sub-blocks; small_scale_links and shadowing_amplitude are what verify reads).
    parts = channel.small_scale_links(0, 20000) * channel.shadowing_amplitude(0, 20000)[:, None, None]
    assert np.array_equal(channel.to_axes(parts.astype(np.complex64)), whole)
    # The carrier follows: every tap turns by -2 pi f_c delta_tau(t) (TS 36.104 B.4 with the
    # carrier, see emucompile.models.conditions); the static tap's phase is the train's plus that.
    n = np.arange(20000)
    train = channel.train.phase_at_samples(n, 2000.0)
    drift = -2 * math.pi * 1e6 * channel.moving.delay_offset_at_samples(n, 2000.0)
    residual = np.angle(whole[:, 0, 0, 0] * np.exp(-1j * (train + drift)))
    assert np.max(np.abs(residual)) < 1e-5


def test_the_moving_fir_from_sparse_coefficients_has_the_bits_of_the_dense_map(tmp_path):
    """fir.npy of a moving delay is sum_k g_k(n) map_k(n) (bundle notes): the writer adds only each
    tap's 2L + 1 coefficients; the dense sum over every column gives the same bytes."""
    from emucompile.bundle import formats as fmt
    from emucompile.models.grid import moving_fir_map

    moving = load_profile(_write(tmp_path, MOVING_PROFILE)).conditions.moving_propagation
    grid = moving_fir_map([0.0, 130e-9, 410e-9], [1.0, 0.5, 0.25], 1e6, moving, 20000.0)
    start, stop = 12345, 12345 + 700
    index, values = grid.sparse(start, stop)
    dense = grid.maps(start, stop)
    rebuilt = np.zeros_like(dense)
    for n, k, o in np.ndindex(index.shape):
        rebuilt[n, k, index[n, k, o]] += values[n, k, o]
    np.testing.assert_array_equal(rebuilt, dense)
    assert np.count_nonzero(dense, axis=-1).max() <= index.shape[2] < dense.shape[2]
    rng = np.random.default_rng(3)
    gains = (rng.standard_normal((700, 2, 1, 3)) + 1j * rng.standard_normal((700, 2, 1, 3))).astype(np.complex64)
    outputs = []
    for maps in (lambda a, b: grid.maps(a + start, b + start), lambda a, b: grid.sparse(a + start, b + start)):
        writer = fmt.FirWriter(grid.matrix, 700, 2, 1, maps=maps)
        outputs.append(np.concatenate([writer.encode(gains[:300]), writer.encode(gains[300:])]))
    assert outputs[0].tobytes() == outputs[1].tobytes()
