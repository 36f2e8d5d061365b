"""MIMO spatial correlation against the 3GPP annexes, checks, square root and estimation.

Sources: TS 36.104 V19.2.0 (2025-12) Annex B.5, transcribed from a stored copy
("TS 36.104 B.5" below); TS 36.101 Annex B.2.3, whose clause text (the
adjustment values) was transcribed from a stored copy of V19.6.0 but whose
tables were lost in that copy, so its alpha/beta are from memory.
"""

import numpy as np
import pytest
from scipy import signal, stats

from emucompile.errors import InputError
from emucompile.models.mimo import (
    adjust_psd,
    array_correlation,
    check_correlation_matrix,
    correlate_links,
    correlation_from_alpha_beta,
    correlation_from_coefficients,
    correlation_from_matrices,
    correlation_matrix_problems,
    direct_link_response,
    estimate_correlation,
    estimate_variance,
    gains_from_links,
    hermitian_sqrt,
    kronecker_correlation,
    link_index,
    links_from_gains,
    psd_adjustment,
    standard_coefficients,
    standard_correlation,
    ula_response,
)

# TS 36.104 B.5, Table B.5.2-3, 4x4 medium correlation (a = 0.00012), transcribed.
# The stored copy prints the 16x16 matrix as four distinct 4x4 blocks; the
# block arrangement [[B0 B1 B2 B3], [B1 B0 B1 B2], [B2 B1 B0 B1], [B3 B2 B1 B0]]
# is that of R_UE (x) R_eNB (Table B.5.1-3).
_B = {
    0: [1.0000, 0.9882, 0.9541, 0.8999],
    1: [0.8747, 0.8645, 0.8347, 0.7872],
    2: [0.5855, 0.5787, 0.5588, 0.5270],
    3: [0.3000, 0.2965, 0.2862, 0.2700],
}


def _toeplitz_block(row):
    return np.array([[row[abs(i - j)] for j in range(4)] for i in range(4)])


TABULATED_4X4_MEDIUM = np.block(
    [[_toeplitz_block(_B[abs(i - j)]) for j in range(4)] for i in range(4)]
)


def tabulated_4x4_medium():
    return TABULATED_4X4_MEDIUM


# -- the standard's matrices -----------------------------------------------------------


def test_side_matrices_have_the_standard_form():
    # TS 36.104 B.5 Table B.5.1-1/-2 (transcribed): [1 a; a* 1] and, for four
    # antennas, the powers a^(1/9), a^(4/9), a.
    a = 0.6 * np.exp(0.4j)
    np.testing.assert_allclose(array_correlation(2, a), [[1, a], [np.conj(a), 1]])
    r = array_correlation(4, 0.9)
    np.testing.assert_allclose(r[0], [1, 0.9 ** (1 / 9), 0.9 ** (4 / 9), 0.9])
    np.testing.assert_allclose(r[1], [0.9 ** (1 / 9), 1, 0.9 ** (1 / 9), 0.9 ** (4 / 9)])
    np.testing.assert_allclose(r, r.conj().T)
    assert array_correlation(1, 0.9).shape == (1, 1)


@pytest.mark.parametrize("specification", ["ts36101", "ts36104"])
def test_2x2_matrices_equal_the_standards(specification):
    # TS 36.104 B.5 Tables B.5.2-2/-3/-4 (transcribed) 2x2 high, medium, low.
    # TS 36.101 gives the same matrices (alpha = 0.3 at the transmitting base
    # station, beta = 0.9 at the UE, from memory): 0.3 on the tx side, 0.9 on rx.
    high = [[1, 0.9, 0.9, 0.81], [0.9, 1, 0.81, 0.9], [0.9, 0.81, 1, 0.9], [0.81, 0.9, 0.9, 1]]
    medium = [[1, 0.9, 0.3, 0.27], [0.9, 1, 0.27, 0.3], [0.3, 0.27, 1, 0.9], [0.27, 0.3, 0.9, 1]]
    np.testing.assert_allclose(standard_correlation(2, 2, "high", specification).matrix, high, atol=1e-12)
    np.testing.assert_allclose(standard_correlation(2, 2, "medium", specification).matrix, medium, atol=1e-12)
    np.testing.assert_allclose(standard_correlation(2, 2, "low", specification).matrix, np.eye(4))


def test_alpha_beta_sides_per_specification():
    # TS 36.104 B.5 Table B.5.2-1 (transcribed): medium alpha 0.9, beta 0.3.
    # TS 36.101 Table B.2.3.2-1 (from memory): medium alpha 0.3, beta 0.9.
    bs = standard_coefficients("medium", "ts36104")
    ue = standard_coefficients("medium", "ts36101")
    assert (bs["alpha"], bs["beta"], bs["base_station_side"]) == (0.9, 0.3, "rx")
    assert (ue["alpha"], ue["beta"], ue["base_station_side"]) == (0.3, 0.9, "tx")
    assert (bs["tx"], bs["rx"]) == (ue["tx"], ue["rx"]) == (0.3, 0.9)
    assert standard_coefficients("high", "ts36141") == standard_coefficients("high", "ts36104")


def test_kronecker_of_alpha_beta_matrices_equals_tabulated_4x4_medium():
    # TS 36.104 B.5 Table B.5.2-3: R = R_UE(beta 0.3) (x) R_eNB(alpha 0.9),
    # adjusted with a = 0.00012, printed to four digits.
    r = correlation_from_alpha_beta(4, 4, 0.9, 0.3, base_station="rx", adjustment=0.00012).matrix
    np.testing.assert_allclose(r.real, tabulated_4x4_medium(), atol=0.5e-4 + 1e-12)
    np.testing.assert_allclose(standard_correlation(4, 4, "medium", "ts36104").matrix, r)
    # Without the adjustment the four-digit table is not reproduced (0.9884 vs 0.9882).
    unadjusted = correlation_from_alpha_beta(4, 4, 0.9, 0.3, base_station="rx").matrix
    assert np.max(np.abs(np.round(unadjusted.real, 4) - tabulated_4x4_medium())) > 1e-4


def test_first_rows_of_other_tabulated_matrices():
    # TS 36.104 B.5 Table B.5.2-2 (transcribed): first rows of 2x4 high (a = 0.00010)
    # and 4x4 high (a = 0.00012); Table B.5.2-3: 2x4 medium (no adjustment).
    high_2x4 = [1.0000, 0.9883, 0.9542, 0.8999, 0.8999, 0.8894, 0.8587, 0.8099]
    high_4x4 = [1.0000, 0.9882, 0.9541, 0.8999, 0.9882, 0.9767, 0.9430, 0.8894,
                0.9541, 0.9430, 0.9105, 0.8587, 0.8999, 0.8894, 0.8587, 0.8099]
    medium_2x4 = [1.0000, 0.9884, 0.9543, 0.9000, 0.3000, 0.2965, 0.2863, 0.2700]
    for (n_tx, n_rx, level), row in [((2, 4, "high"), high_2x4), ((4, 4, "high"), high_4x4),
                                     ((2, 4, "medium"), medium_2x4)]:
        r = standard_correlation(n_tx, n_rx, level, "ts36104").matrix
        np.testing.assert_allclose(r.real[0], row, atol=0.5e-4 + 1e-12)


@pytest.mark.parametrize(
    "specification, level, n_tx, n_rx, a",
    [
        # TS 36.104 B.5.2 (transcribed), cases named UE x eNB = n_tx x n_rx.
        ("ts36104", "high", 2, 4, 0.00010), ("ts36104", "high", 4, 4, 0.00012),
        ("ts36104", "medium", 4, 4, 0.00012), ("ts36104", "medium", 2, 4, 0.0),
        ("ts36104", "high", 2, 2, 0.0), ("ts36141", "high", 2, 4, 0.00010),
        # TS 36.101 B.2.3.2 (clause text transcribed), cases named eNB x UE = n_tx x n_rx.
        ("ts36101", "high", 4, 2, 0.00010), ("ts36101", "high", 4, 4, 0.00012),
        ("ts36101", "medium", 2, 4, 0.00010), ("ts36101", "medium", 4, 4, 0.00012),
        ("ts36101", "high", 2, 4, 0.0), ("ts36101", "low", 4, 4, 0.0),
    ],
)
def test_psd_adjustment_values(specification, level, n_tx, n_rx, a):
    assert psd_adjustment(specification, level, n_tx, n_rx) == a
    assert standard_correlation(n_tx, n_rx, level, specification).adjustment == a


@pytest.mark.parametrize(
    "specification, level, n_tx, n_rx",
    [("ts36104", "high", 2, 4), ("ts36104", "high", 4, 4), ("ts36104", "medium", 4, 4),
     ("ts36101", "high", 4, 2), ("ts36101", "medium", 2, 4)],
)
def test_adjustment_makes_the_four_digit_matrix_positive_semidefinite(specification, level, n_tx, n_rx):
    # The standards' stated reason (TS 36.104 B.5.2, TS 36.101 B.2.3.2): after
    # rounding to four digits, the unadjusted matrix has a negative eigenvalue,
    # the adjusted one does not.
    adjusted = standard_correlation(n_tx, n_rx, level, specification).matrix.real
    plain = standard_correlation(n_tx, n_rx, level, specification, adjust=False).matrix.real
    assert np.linalg.eigvalsh(np.round(plain, 4))[0] < 0
    assert np.linalg.eigvalsh(np.round(adjusted, 4))[0] >= 0


def test_adjust_psd_keeps_unit_diagonal_and_lifts_eigenvalues():
    r = standard_correlation(4, 4, "high", "ts36104", adjust=False).matrix
    a = 0.00012
    lifted = adjust_psd(r, a)
    np.testing.assert_allclose(np.diag(lifted), 1.0)
    np.testing.assert_allclose(np.linalg.eigvalsh(lifted), (np.linalg.eigvalsh(r) + a) / (1 + a))


def test_bad_levels_and_coefficients():
    with pytest.raises(InputError, match="specification"):
        standard_correlation(2, 2, "medium", "36.101")
    with pytest.raises(InputError, match="level"):
        standard_correlation(2, 2, "moderate", "ts36101")
    with pytest.raises(InputError, match="magnitude <= 1"):
        array_correlation(2, 1.2)
    with pytest.raises(InputError, match="base_station"):
        correlation_from_alpha_beta(2, 2, 0.9, 0.3, base_station="enb")


# -- user matrices -----------------------------------------------------------------------


def test_user_matrix_not_hermitian_says_so_and_by_how_much():
    bad = [[1, 0.5], [0.4, 1]]
    problems = correlation_matrix_problems(bad, name="rx_matrix")
    assert len(problems) == 1
    assert "rx_matrix is not Hermitian" in problems[0] and "off by 0.1" in problems[0]
    with pytest.raises(InputError, match="not Hermitian"):
        correlation_from_matrices(1, 2, tx_matrix=[[1]], rx_matrix=bad)


def test_user_matrix_not_psd_reports_smallest_eigenvalue_and_cure():
    # Three antennas pairwise correlated 0.9, 0.9 and -0.9: eigenvalues of
    # [[1,.9,.9],[.9,1,-.9],[.9,-.9,1]] are 1.9, 1.9, -0.8 (closed form).
    bad = np.array([[1, 0.9, 0.9], [0.9, 1, -0.9], [0.9, -0.9, 1]])
    problems = correlation_matrix_problems(bad)
    assert len(problems) == 1
    assert "not positive semidefinite" in problems[0] and "-0.8" in problems[0]
    assert "a >= 0.8" in problems[0]
    cured = adjust_psd(bad, 0.8)
    assert correlation_matrix_problems(cured) == []


def test_user_matrix_other_problems():
    assert "square" in correlation_matrix_problems([[1, 0]])[0]
    assert "unit diagonal" in correlation_matrix_problems([[2, 0], [0, 1]])[0]
    assert "expected 4x4" in correlation_matrix_problems(np.eye(2), size=4)[0]
    assert "not finite" in correlation_matrix_problems([[1, np.nan], [np.nan, 1]])[0]
    assert correlation_matrix_problems(np.eye(3)) == []
    with pytest.raises(InputError, match="either a full"):
        correlation_from_matrices(2, 2, matrix=np.eye(4), tx_matrix=np.eye(2))


def test_user_full_matrix_and_factors():
    full = standard_correlation(2, 2, "medium", "ts36101").matrix
    assert np.array_equal(correlation_from_matrices(2, 2, matrix=full).matrix, full)
    factors = correlation_from_matrices(2, 2, tx_matrix=[[1, 0.3], [0.3, 1]], rx_matrix=[[1, 0.9], [0.9, 1]])
    np.testing.assert_allclose(factors.matrix, full)
    np.testing.assert_allclose(check_correlation_matrix(full), full)


# -- square root ----------------------------------------------------------------------------


@pytest.mark.parametrize("level", ["low", "medium", "high"])
def test_hermitian_sqrt_squares_back(level):
    r = standard_correlation(4, 4, level, "ts36101").matrix
    s = hermitian_sqrt(r)
    np.testing.assert_allclose(s, s.conj().T, atol=1e-14)
    np.testing.assert_allclose(s @ s.conj().T, r, atol=1e-12)
    assert np.array_equal(hermitian_sqrt(r), s)  # deterministic


def test_hermitian_sqrt_of_a_singular_matrix_where_cholesky_fails():
    r = correlation_from_coefficients(2, 2, 1.0, 0.5).matrix  # tx antennas fully correlated
    with pytest.raises(np.linalg.LinAlgError):
        np.linalg.cholesky(r)
    s = hermitian_sqrt(r)
    np.testing.assert_allclose(s @ s.conj().T, r, atol=1e-12)


def test_complex_coefficients_give_a_valid_matrix():
    r = correlation_from_coefficients(4, 2, 0.8 * np.exp(1j * 0.7), 0.5j).matrix
    assert correlation_matrix_problems(r) == []
    s = hermitian_sqrt(r)
    np.testing.assert_allclose(s @ s.conj().T, r, atol=1e-12)


# -- link order -------------------------------------------------------------------------------


def test_link_order_round_trip_and_index():
    rng = np.random.default_rng(1)
    gains = rng.standard_normal((5, 3, 2, 4)) + 1j * rng.standard_normal((5, 3, 2, 4))
    links = links_from_gains(gains)
    assert links.shape == (5, 6, 4)
    assert links[2, link_index(rx=1, tx=1, n_rx=3), 3] == gains[2, 1, 1, 3]
    assert np.array_equal(gains_from_links(links, 3, 2), gains)


def test_vec_of_h_has_the_kronecker_correlation():
    # vec(A X B) = (B^T (x) A) vec(X): with H = S_rx G S_tx^T, G white,
    # vec(H) has correlation R_tx (x) R_rx (Horn & Johnson, Topics in Matrix
    # Analysis, 4.3). Checked exactly on the second moments.
    tx, rx = array_correlation(2, 0.3), array_correlation(3, 0.9)
    s_tx, s_rx = hermitian_sqrt(tx), hermitian_sqrt(rx)
    # E[vec(H) vec(H)^H] = (S_tx (x) S_rx)(S_tx (x) S_rx)^H when E[vec G vec G^H] = I.
    operator = np.kron(s_tx, s_rx)
    np.testing.assert_allclose(operator @ operator.conj().T, kronecker_correlation(tx, rx).matrix, atol=1e-12)
    # And the operator is what maps G to vec(H), with vec = links order.
    g = np.arange(6).reshape(3, 2) + 1j  # (n_rx, n_tx)
    h = s_rx @ g @ s_tx.T
    vec = lambda m: m.T.reshape(-1)  # noqa: E731 - column-major stacking
    np.testing.assert_allclose(operator @ vec(g), vec(h), atol=1e-12)
    assert np.array_equal(links_from_gains(h[None, :, :, None])[0, :, 0], vec(h))


# -- correlating streams and estimating the result ----------------------------------------------


def _white(rng, n, n_links):
    return (rng.standard_normal((n, n_links)) + 1j * rng.standard_normal((n, n_links))) / np.sqrt(2)


def _max_z(estimate, target, var_re, var_im):
    iu = np.triu_indices(target.shape[0])
    z_re = (estimate.real - target.real)[iu] / np.sqrt(var_re[iu])
    off = np.triu_indices(target.shape[0], 1)
    z_im = (estimate.imag - target.imag)[off] / np.sqrt(var_im[off])
    return max(np.max(np.abs(z_re)), np.max(np.abs(z_im))), z_re.size + z_im.size


def _family_z(n_statistics, false_alarm=1e-3):
    # Bonferroni: every |z| below this with probability >= 1 - false_alarm.
    return stats.norm.isf(false_alarm / (2 * n_statistics))


def test_correlating_white_streams_gives_the_target():
    # Tolerance: the exact variance of each estimated entry (Isserlis 1918,
    # estimate_variance), Bonferroni over all 256 real statistics at a 0.1 %
    # family-wise false-alarm rate, so an exact generator passes >= 99.9 % of
    # seeds (CLT at N = 20000: skewness of a product of Gaussians averages out).
    correlation = standard_correlation(4, 4, "medium", "ts36101")
    n = 20000
    rng = np.random.default_rng(20240611)
    y = correlation.correlate(_white(rng, n, 16))
    estimate = estimate_correlation(y, power=1.0)
    var_re, var_im = estimate_variance(correlation.matrix, n)
    z, count = _max_z(estimate, correlation.matrix, var_re, var_im)
    assert count == 256
    assert z < _family_z(count)
    # The same statistic sees a swapped link order (R_rx (x) R_tx) at once.
    swapped = kronecker_correlation(correlation.rx_matrix, correlation.tx_matrix).matrix
    z_wrong, _ = _max_z(estimate, swapped, *estimate_variance(swapped, n))
    assert z_wrong > 10 * _family_z(count)


def test_estimated_correlation_with_sample_powers_is_close_too():
    correlation = standard_correlation(2, 2, "high", "ts36104")
    rng = np.random.default_rng(7)
    y = correlate_links(_white(rng, 20000, 4), correlation.square_root())
    estimate = estimate_correlation(y)  # normalised by the sample powers: smaller variance
    z, count = _max_z(estimate, correlation.matrix, *estimate_variance(correlation.matrix, 20000))
    assert z < _family_z(count)
    np.testing.assert_allclose(np.diag(estimate), 1.0)


@pytest.mark.parametrize("pole", [0.0, 0.95])
def test_estimate_variance_matches_monte_carlo(pole):
    # The variance formula itself, against 400 independent records of an exact
    # reference process: white (pole 0) or complex AR(1) streams with
    # r(k) = pole^k, correlated with the 2x2 medium matrix. The empirical
    # variance of Re and Im of entry [0, 1] over 400 records has a relative
    # standard error sqrt(2/399) = 7 %; accept within 4 standard errors
    # (chi-square with 399 degrees of freedom is close to normal here).
    correlation = standard_correlation(2, 2, "medium", "ts36101")
    s = correlation.square_root()
    n, records = 2000, 400
    rng = np.random.default_rng(99)
    if pole:
        # Stationary complex AR(1): x_0 ~ CN(0, 1), x_t = pole x_(t-1) + sqrt(1 - pole^2) w_t.
        x0 = _white(rng, records, 4)
        innovations = _white(rng, records * (n - 1), 4).reshape(records, n - 1, 4)
        rest, _ = signal.lfilter([np.sqrt(1 - pole**2)], [1, -pole], innovations, axis=1,
                                 zi=(pole * x0)[:, None, :])
        w = np.concatenate([x0[:, None, :], rest], axis=1)
    else:
        w = _white(rng, records * n, 4).reshape(records, n, 4)
    estimates = np.array([estimate_correlation(correlate_links(w[i], s), power=1.0)[0, 1] for i in range(records)])
    rho = pole ** np.arange(n) if pole else None
    var_re, var_im = estimate_variance(correlation.matrix, n, rho)
    se = np.sqrt(2 / (records - 1))
    assert np.var(estimates.real, ddof=1) / var_re[0, 1] == pytest.approx(1.0, abs=4 * se)
    assert np.var(estimates.imag, ddof=1) / var_im[0, 1] == pytest.approx(1.0, abs=4 * se)
    assert np.mean(estimates.real) == pytest.approx(correlation.matrix[0, 1].real, abs=4 * np.sqrt(var_re[0, 1] / records))


# -- the direct part --------------------------------------------------------------------------


def test_ula_response_phase_progression():
    # Uniform linear array, phase 2 pi d n sin(theta) (TR 38.901 7.5 sign convention).
    a = ula_response(4, 0.5, 30.0)
    np.testing.assert_allclose(np.abs(a), 1.0)
    np.testing.assert_allclose(np.angle(a[1] / a[0]), 2 * np.pi * 0.5 * 0.5)
    np.testing.assert_allclose(ula_response(3, 0.5, 0.0), 1.0)


def test_direct_link_response_order_and_identical():
    h = direct_link_response(2, 3, departure_deg=10, arrival_deg=-40, tx_spacing_wavelengths=1.0)
    a_tx, a_rx = ula_response(2, 1.0, 10), ula_response(3, 0.5, -40)
    for tx in range(2):
        for rx in range(3):
            assert h[link_index(rx, tx, 3)] == pytest.approx(a_rx[rx] * a_tx[tx])
    assert np.array_equal(direct_link_response(2, 2, identical=True), np.ones(4))


def test_record_is_json_ready():
    import json

    record = standard_correlation(2, 4, "high", "ts36104").as_record()
    text = json.dumps(record, allow_nan=False)
    assert '"adjustment": 0.0001' in text and "tx * n_rx + rx" in text
