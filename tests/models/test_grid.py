"""The FIR map: exact-sample taps, nearest rounding, power, frequency response, delay spread.

References used as independent checks: the windowed-sinc fractional delay of
Laakso et al. 1996 (IEEE Signal Processing Magazine 13(1), "Splitting the
unit delay"), written out here with ``scipy.special.i0`` and ``np.sinc``;
the Kaiser window as sampled by ``numpy.kaiser``; Kaiser's order formula as
coded in ``scipy.signal.kaiserord``.
"""

import json
import math

import numpy as np
import pytest
from scipy import signal, special

from emucompile.models import grid

FS = 30.72e6  # an LTE-like sample rate (common practice)
L = grid.DEFAULT_HALF_LENGTH
BETA = grid.default_kaiser_beta(L)
FP = grid.DEFAULT_PASSBAND_FRACTION


def _reference_row(c, half, beta, n):
    """Laakso et al. 1996, windowed sinc: h[n] = w(n - c) sinc(n - c), |n - c| < L."""
    x = n - c
    w = special.i0(beta * np.sqrt(np.clip(1 - (x / half) ** 2, 0, None))) / special.i0(beta)
    return np.where(np.abs(x) < half, w * np.sinc(x), 0.0)


def _dtft(row, n, f):
    return np.exp(-2j * np.pi * np.outer(f, n)) @ row


def _rms(delays, powers):
    delays, powers = np.asarray(delays, float), np.asarray(powers, float)
    mean = np.sum(powers * delays) / powers.sum()
    return math.sqrt(np.sum(powers * (delays - mean) ** 2) / powers.sum())


# -- a tap on an exact sample ---------------------------------------------------------


@pytest.mark.parametrize("mapping", ["sinc", "nearest"])
def test_tap_on_exact_sample_is_one_coefficient_of_one(mapping):
    # 0, 3 and 17 samples written in seconds; 50 ns at 20 MHz is 1.0000000000000002
    # samples in binary, and must still count as on the sample.
    cases = [([0.0, 3 / FS, 17 / FS], FS), ([50e-9, 0.0], 20e6)]
    for delays, rate in cases:
        m = grid.fir_map(delays, [1.0] * len(delays), rate, mapping=mapping)
        assert m.bulk_delay_samples == 0
        for i, d in enumerate(delays):
            row = m.matrix[i]
            k = int(round(d * rate))
            assert row[k] == 1.0  # exactly
            assert np.count_nonzero(row) == 1  # exact zeros elsewhere
        assert m.energy_kept == 1.0
        assert m.passband_error_bound == 0.0
        assert m.n_fir == max(int(round(d * rate)) for d in delays) + 1


def test_exact_sample_tap_beside_a_fractional_one_still_exact():
    m = grid.fir_map([0.0, 2.5 / FS], [1.0, 1.0], FS)
    # the fractional row's first coefficient is the first n > 2.5 - 16, n = -13
    assert m.bulk_delay_samples == 13
    row = m.matrix[0]
    assert row[m.bulk_delay_samples] == 1.0 and np.count_nonzero(row) == 1


# -- nearest ------------------------------------------------------------------------------


def test_nearest_rounds_to_nearest_sample_and_reports_the_error():
    samples = np.array([0.4, 0.5, 0.6, 2.49, 7.0])
    m = grid.fir_map(samples / FS, np.ones(5), FS, mapping="nearest")
    columns = np.argmax(m.matrix != 0, axis=1)
    assert columns.tolist() == [0, 1, 1, 2, 7]  # a tie (0.5) goes to the later sample
    assert np.all(m.matrix.sum(axis=1) == 1.0)
    np.testing.assert_allclose(m.delay_error_s * FS, columns - samples, atol=1e-12)
    # worst passband error: 2 |sin(pi f_max err)| with err = 0.5 samples, f_max = 0.4 f_s
    assert m.passband_error_bound == pytest.approx(2 * math.sin(math.pi * 0.4 * 0.5))
    assert m.parameters()["max_abs_delay_error_s"] == pytest.approx(0.5 / FS)


def test_nearest_on_a_coarse_grid_uses_only_multiples_of_the_step():
    samples = np.array([0.0, 1.9, 2.0, 5.9, 10.1])
    m = grid.fir_map(samples / FS, np.ones(5), FS, mapping="nearest", delay_step_samples=4)
    columns = np.argmax(m.matrix != 0, axis=1)
    assert columns.tolist() == [0, 0, 4, 4, 12]
    assert np.all(m.nonzero_columns % 4 == 0)
    np.testing.assert_allclose(m.mapped_delays_s * FS, columns)


def test_nearest_negative_delay_gets_a_bulk_delay():
    m = grid.fir_map(np.array([-2.2, 0.0]) / FS, [1, 1], FS, mapping="nearest")
    assert m.bulk_delay_samples == 2
    np.testing.assert_allclose(m.mapped_delays_s * FS, [-2.0, 0.0])


# -- the sinc rows ----------------------------------------------------------------------


def test_sinc_rows_are_the_windowed_sinc_of_laakso():
    rng = np.random.default_rng(1)
    samples = np.sort(rng.uniform(0, 40, 6))
    m = grid.fir_map(samples / FS, np.ones(6), FS)
    n = np.arange(m.n_fir)
    for i, d in enumerate(samples):
        expected = _reference_row(d + m.bulk_delay_samples, L, BETA, n)
        np.testing.assert_allclose(m.matrix[i], expected, rtol=0, atol=1e-14)
        assert np.count_nonzero(m.matrix[i]) == 2 * L
    assert m.bulk_delay_samples == L - 1 - math.floor(samples.min())


def test_default_beta_is_kaisers_formula_for_the_window_length():
    # scipy.signal.kaiserord inverts the same formula: for the attenuation our
    # beta stands for and a transition 0.2 f_s wide (0.4 of Nyquist) it asks
    # for 2L coefficients and the same beta.
    width = 2 * (1 - 2 * FP)
    attenuation = 7.95 + 2.285 * math.pi * width * (2 * L - 1)
    numtaps, beta = signal.kaiserord(attenuation, width)
    assert numtaps == 2 * L
    assert beta == pytest.approx(BETA, rel=1e-12)
    assert attenuation == pytest.approx(97.0, abs=0.05)


def test_kaiser_transform_closed_form_matches_numerical_fourier_transform():
    # Kaiser & Schafer 1980: the closed form used by the bound, against a
    # trapezoid Fourier transform of numpy.kaiser sampled finely on [-L, L].
    x = np.linspace(-L, L, 400001)
    w = np.kaiser(x.size, BETA)
    for nu in (0.0, 0.02, 0.05, 0.1, 0.23, 0.5, 1.7):
        numerical = np.trapezoid(w * np.cos(2 * np.pi * nu * x), x)
        closed = grid._kaiser_transform(np.array([nu]), L, BETA)[0]
        assert closed == pytest.approx(numerical, rel=1e-6, abs=1e-9)


# -- power ------------------------------------------------------------------------------


def _deficit_by_numpy_kaiser(half, beta):
    """G / pi^2 with G = 2/L + integral of (1 - w^2)/x^2 over [-L, L], w from numpy.kaiser."""
    x = np.linspace(-half, half, 2_000_001)
    w = np.kaiser(x.size, beta)
    with np.errstate(divide="ignore", invalid="ignore"):
        f = np.where(x == 0, 0.0, (1 - w * w) / (x * x))
    centre = x.size // 2  # (1 - w^2)/x^2 -> a finite limit at 0: take the neighbours' mean
    f[centre] = 0.5 * (f[centre - 1] + f[centre + 1])
    return (2 / half + np.trapezoid(f, x)) / math.pi**2


@pytest.mark.parametrize("half", [4, 8, 16])
def test_sinc_row_energy_follows_the_window(half):
    """1 - sum h^2 = sin^2(pi c) G / pi^2 within the Poisson remainder 1/(I0(beta)^2 L^2).

    The identity sum_n sinc^2(n - c) = 1 makes the sinc map power-preserving
    apart from the window's loss; G comes from the window alone (here through
    numpy.kaiser, independently of the module's quadrature).
    """
    beta = grid.default_kaiser_beta(half)
    deficit = _deficit_by_numpy_kaiser(half, beta)
    assert grid.sinc_energy_deficit(half, beta) == pytest.approx(deficit, rel=1e-6)
    remainder = 1.0 / (special.i0(beta) ** 2 * half**2)
    fractions = np.linspace(0, 1, 41)
    m = grid.fir_map((10 + fractions) / FS, np.ones(fractions.size), FS, half_length=half)
    kept = m.energy_kept_per_tap
    np.testing.assert_allclose(1 - kept, np.sin(np.pi * fractions) ** 2 * deficit, rtol=0, atol=remainder)
    assert np.all(kept <= 1.0 + 1e-15)
    assert kept.min() >= 1 - deficit - remainder
    assert m.energy_kept_worst == pytest.approx(1 - deficit, rel=1e-6)


def test_sinc_map_preserves_total_power_of_independent_taps():
    # For independent taps E|FIR_n|^2 = sum_i P_i h_i[n]^2, so the FIR's total
    # mean power is sum_i P_i e_i: within the window's worst deficit of the
    # profile's total (defaults: 6.86 %), the loss lying above 0.4 f_s.
    rng = np.random.default_rng(7)
    samples = rng.uniform(0, 60, 9)
    powers = 10 ** (-rng.uniform(0, 20, 9) / 10)
    m = grid.fir_map(samples / FS, powers, FS)
    total = np.sum(m.coefficient_powers)
    deficit = grid.sinc_energy_deficit(L, BETA)
    assert total == pytest.approx(np.sum(powers * m.energy_kept_per_tap), rel=1e-12)
    assert (1 - deficit) * powers.sum() <= total <= powers.sum()
    expected = np.sum(powers * (1 - np.sin(np.pi * (samples % 1)) ** 2 * deficit)) / powers.sum()
    assert m.energy_kept == pytest.approx(expected, abs=1e-9)


# -- frequency response -------------------------------------------------------------------


def test_sinc_row_error_is_within_the_window_bound_at_every_fractional_delay():
    """|H(f) e^{j2 pi f c} - 1| <= bound over |f| <= 0.4 f_s, for c across one sample.

    The bound comes from the window's transform (grid.sinc_passband_error_bound);
    it must hold and be tight (within 20 % of the worst measured error), else it
    would say little about the map.
    """
    f = np.linspace(-FP, FP, 1601)
    worst = 0.0
    for c in np.linspace(0, 1, 51):
        n = np.arange(-L - 1, L + 3)
        row = _reference_row(c, L, BETA, n)
        worst = max(worst, np.max(np.abs(_dtft(row, n, f) * np.exp(2j * np.pi * f * c) - 1)))
    bound = grid.sinc_passband_error_bound(L, BETA, FP)
    assert worst <= bound <= 1.2 * worst
    assert 2.5e-5 < worst < 3.0e-5  # measured 2.74e-5 for the defaults


def test_static_profile_frequency_response_is_reproduced_within_the_bound():
    # An invented static profile with fractional delays: the FIR's response
    # (bulk delay removed) against sum_i a_i exp(-j 2 pi f tau_i), |f| <= 0.4 f_s.
    rng = np.random.default_rng(3)
    delays = np.array([0.0, 37e-9, 95e-9, 210e-9, 640e-9])
    gains = rng.normal(size=5) + 1j * rng.normal(size=5)
    m = grid.fir_map(delays, np.abs(gains) ** 2, FS)
    f = np.linspace(-FP, FP, 2001) * FS
    profile = np.exp(-2j * np.pi * np.outer(f, delays)) @ gains
    error = np.max(np.abs(m.frequency_response(gains, f) - profile))
    assert error <= np.sum(np.abs(gains)) * m.passband_error_bound
    # the nearest map of the same profile is far worse: the bound means something
    nearest = grid.fir_map(delays, np.abs(gains) ** 2, FS, mapping="nearest")
    assert np.max(np.abs(nearest.frequency_response(gains, f) - profile)) > 100 * error


# -- delay spread -------------------------------------------------------------------------


def test_grid_rms_delay_spread_comes_from_coefficient_energies():
    delays = np.array([0.0, 40e-9, 100e-9, 333e-9])
    powers = np.array([1.0, 0.6, 0.3, 0.05])
    for mapping in ("sinc", "nearest"):
        m = grid.fir_map(delays, powers, FS, mapping=mapping)
        energies = powers @ (m.matrix**2)
        tau = (np.arange(m.n_fir) - m.bulk_delay_samples) / FS
        assert m.rms_delay_spread_s == pytest.approx(_rms(tau, energies), rel=1e-12)
        assert m.profile_rms_delay_spread_s == pytest.approx(_rms(delays, powers), rel=1e-12)
        assert m.manifest_entry()["rms_delay_spread_s"] == m.rms_delay_spread_s
    # on-sample delays: the grid's spread is the profile's (two equal taps 10 samples apart: 5 samples)
    m = grid.fir_map([0.0, 10 / FS], [1.0, 1.0], FS)
    assert m.rms_delay_spread_s == pytest.approx(5 / FS, rel=1e-12)


# -- applying the map -----------------------------------------------------------------------


def test_apply_is_a_matrix_product_that_keeps_the_dtype():
    rng = np.random.default_rng(5)
    m = grid.fir_map([0.0, 60e-9, 130e-9], [1.0, 0.5, 0.2], FS)
    gains = (rng.normal(size=(100, 1, 1, 3)) + 1j * rng.normal(size=(100, 1, 1, 3))).astype(np.complex64)
    fir = m.apply(gains)
    assert fir.dtype == np.complex64 and fir.shape == (100, 1, 1, m.n_fir)
    explicit = sum(gains[..., i, None].astype(complex) * m.matrix[i] for i in range(3))
    np.testing.assert_allclose(fir, explicit, rtol=0, atol=2e-6)
    assert m.apply(gains.astype(np.complex128)).dtype == np.complex128
    # chunks give what the whole does (streaming)
    np.testing.assert_array_equal(np.concatenate([m.apply(gains[:40]), m.apply(gains[40:])]), fir)
    with pytest.raises(ValueError, match=r"\(\.\.\., 3\)"):
        m.apply(np.zeros((4, 2), np.complex64))


def test_matrix_is_read_only_and_dropping_taps_zeroes_rows():
    m = grid.fir_map([0.0, 1 / FS, 2 / FS], [1.0, 1.0, 2.0], FS, mapping="nearest")
    with pytest.raises(ValueError):
        m.matrix[0, 0] = 2.0
    d = m.without_taps([2])
    assert np.all(d.matrix[2] == 0) and m.matrix[2, 2] == 1.0
    assert d.energy_kept == pytest.approx(0.5)
    assert np.isnan(d.mapped_delays_s[2])


def test_manifest_entry_has_the_contract_fields_in_strict_json():
    m = grid.fir_map([0.0, 100e-9], [1.0, 0.5], FS)
    entry = m.manifest_entry()
    assert set(entry) == {"sample_rate_hz", "n_fir", "delay_mapping", "bulk_delay_samples",
                          "energy_kept", "rms_delay_spread_s"}
    json.dumps(entry, allow_nan=False)
    json.dumps(m.parameters(), allow_nan=False)
    assert entry["n_fir"] == m.matrix.shape[1]


@pytest.mark.parametrize(
    "kwargs, match",
    [
        (dict(delays_s=[], powers_linear=[]), "at least one tap"),
        (dict(delays_s=[0.0, math.nan], powers_linear=[1, 1]), "finite"),
        (dict(delays_s=[0.0], powers_linear=[0.0]), "not all 0"),
        (dict(delays_s=[0.0], powers_linear=[1, 2]), "2 values for 1 delays"),
        (dict(delays_s=[0.0], powers_linear=[1], sample_rate_hz=-1.0), "sample_rate_hz"),
        (dict(delays_s=[0.0], powers_linear=[1], mapping="linear"), "mapping"),
        (dict(delays_s=[0.0], powers_linear=[1], passband_fraction=0.5), "passband_fraction"),
        (dict(delays_s=[0.0], powers_linear=[1], delay_step_samples=4), "delay_step_samples = 1"),
    ],
)
def test_bad_arguments_are_refused_with_the_parameter_named(kwargs, match):
    kwargs.setdefault("sample_rate_hz", FS)
    with pytest.raises(ValueError, match=match):
        grid.fir_map(**kwargs)
