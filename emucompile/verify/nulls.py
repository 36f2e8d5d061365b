"""The null laws of the checks: sums over the model's exact autocorrelation, p-values, calibration.

Each check's spread under "the record is the process its model states" is a
sum over the lags of the model's exact autocorrelation r(k) (theory's closed
form, or the circular one of a periodic record,
:func:`emucompile.verify.reference.circular_autocorrelation`), cached per
spectrum, rate, length and mode (:func:`emucompile.verify.tolerance.clear_caches`
forgets them). The laws turn a standard score into a p-value and a level into
a tolerance; the calibration factors (``emucompile/data/tolerance_calibration.json``
and the MIMO correlation's own file) scale the nominal spreads so that a
perfect generator fails at the stated rate. Why each sum is what it is:
:mod:`emucompile.verify.tolerance`'s docstring.
"""

from __future__ import annotations

import functools
import json
import math
from importlib import resources

import numpy as np
from scipy import fft as sp_fft
from scipy import signal, special, stats

from emucompile.verify import estimators, reference

@functools.lru_cache(maxsize=8)  # a few records' lengths: 8 x 10 MB at 1.25e6 lags
def lags(spectrum, rate_hz, n, periodic):
    """The null autocorrelation r_k, k = 0..n-1 (cached per spectrum, rate, length and mode; read-only)."""
    if periodic:
        r = reference.circular_autocorrelation(spectrum, rate_hz, n)
        r = r / r[0]
    else:
        r = np.array(spectrum.autocorrelation(np.arange(n) / rate_hz), dtype=float)
    r.flags.writeable = False
    return r


@functools.lru_cache(maxsize=32)
def pair_sum(spectrum_a, spectrum_b, rate_hz, n, periodic=False):
    """sum_k w_k r_a(k) r_b(k): the variance sum of a cross-correlation estimate.

    Aperiodic: weights 1 - |k|/N over |k| < N; periodic: the circular
    autocorrelations of period-N processes over one period.
    """
    return float(weights(n, periodic) @ (lags(spectrum_a, rate_hz, n, periodic)
                                         * lags(spectrum_b, rate_hz, n, periodic)))


@functools.lru_cache(maxsize=32)
def weights(n, periodic):
    if periodic:
        return np.ones(n)
    w = 2.0 * (1.0 - np.arange(n) / n)
    w[0] = 1.0
    return w


@functools.lru_cache(maxsize=16)
def bartlett_sums(spectrum, rate_hz, n, periodic, n_lags):
    """S0 = sum w r^2, c1(k) = sum_j w_j r_j r_{j+k}, c2(k) = sum_j w_j r_{j+k} r_{j-k} ~ c1(2k)."""
    r = lags(spectrum, rate_hz, n, periodic)
    wt = weights(n, periodic)
    s0 = float(wt @ (r * r))
    n_corr = 2 * n_lags + 2
    if periodic:
        if n_corr * 8 < n:  # a few lags: direct sums over the wrapped sequence (O(n n_lags), no FFT)
            corr = estimators.lagged_sums(r, np.concatenate([r, r[:n_corr]]), n_corr)
        else:
            spec = sp_fft.rfft(r)
            corr = sp_fft.irfft(np.abs(spec) ** 2, n)
    else:
        two = np.concatenate([r[:0:-1], r])  # lags -(n-1)..n-1
        wtwo = np.concatenate([(1.0 - np.arange(n - 1, 0, -1) / n), 1.0 - np.arange(n) / n])
        weighted = two * wtwo
        if n_corr * 8 < n:  # corr[k] = sum_j weighted[j] two[j + k], directly (two ends in zeros)
            corr = estimators.lagged_sums(weighted, np.concatenate([two, np.zeros(n_corr)]), n_corr)
        else:
            size = estimators._fast_len(2 * two.size)
            a = sp_fft.rfft(weighted, size)
            b = sp_fft.rfft(two, size)
            corr = sp_fft.irfft(np.conj(a) * b, size)[:n_corr]
    c1 = corr[: n_lags]
    c2 = corr[: 2 * n_lags: 2]
    return s0, c1, c2


@functools.lru_cache(maxsize=16)
def phase_variances(spectrum, rate_hz, n, periodic):
    """Variances of the first two circular moments of a circular Gaussian record's phase.

    With x = r_k^2 at each lag: E[e^{j(th_0 - th_k)}] = (pi/4) r 2F1(1/2, 1/2; 2; x) and
    E[e^{2j(th_0 - th_k)}] = (x/2) 2F1(1, 1; 3; x); summed with the lag weights, / n.
    Where x < 2.5e-3 (|r| < 0.05, most lags of a long record) the hypergeometric
    series itself, 8 terms (remainder < 1e-20), instead of ``scipy.special.hyp2f1``.
    """
    r = np.clip(lags(spectrum, rate_hz, n, periodic), -1.0, 1.0)
    wt = weights(n, periodic)
    r2 = r * r
    f1, f2 = np.empty_like(r2), np.empty_like(r2)
    small = r2 < PHASE_SERIES_X
    x = r2[small]
    f1[small] = series(x, 0.5, 0.5, 2.0)
    f2[small] = series(x, 1.0, 1.0, 3.0)
    big = ~small
    f1[big] = special.hyp2f1(0.5, 0.5, 2.0, r2[big])
    f2[big] = special.hyp2f1(1.0, 1.0, 3.0, np.minimum(r2[big], 1.0 - 1e-15))
    e1 = (math.pi / 4.0) * r * f1
    e2 = 0.5 * r2 * f2
    e2[r2 >= 1.0 - 1e-15] = 1.0
    return float(wt @ e1) / n, float(wt @ e2) / n


PHASE_SERIES_X = 2.5e-3


def series(x, a, b, c, terms=8):
    """sum_{k < terms} (a)_k (b)_k / ((c)_k k!) x^k, the series of 2F1(a, b; c; x), by Horner's rule."""
    coefficients = [1.0]
    for k in range(terms - 1):
        coefficients.append(coefficients[-1] * (a + k) * (b + k) / ((c + k) * (k + 1)))
    out = np.full_like(x, coefficients[-1])
    for coefficient in coefficients[-2::-1]:
        out *= x
        out += coefficient
    return out


@functools.lru_cache(maxsize=32)
def power_covariance_sum(spectrum, rate_hz, n, periodic, pd, a2, los_doppler_hz):
    """sum_k w_k cov(|g_0|^2, |g_k|^2) = sum_k w_k [P_d^2 r_k^2 + 2 A^2 P_d r_k cos(w k)]."""
    r = lags(spectrum, rate_hz, n, periodic)
    wt = weights(n, periodic)
    total = pd * pd * float(wt @ (r * r))
    if a2 > 0:
        w = 2.0 * math.pi * los_doppler_hz / rate_hz
        cos_w = np.cos(w * np.arange(n)) if w else 1.0
        total += 2.0 * a2 * pd * float(wt @ (r * cos_w))
    return total


def expected_welch(spectrum, rate_hz, nperseg):
    """E[Welch PSD] of a unit-power process: sum_k r(k) W2(k) e^{-j 2 pi f k}/(fs sum w^2), ascending f."""
    w = signal.get_window("hann", nperseg)
    w2 = np.correlate(w, w, mode="full")  # lags -(L-1)..L-1
    k = np.arange(-(nperseg - 1), nperseg)
    seq = spectrum.autocorrelation(k / rate_hz) * w2
    size = 2 * nperseg
    buf = np.zeros(size)
    buf[: nperseg] = seq[nperseg - 1:]
    buf[size - nperseg + 1:] = seq[: nperseg - 1]
    spec = np.fft.fft(buf).real[::2] / (rate_hz * float(w @ w))
    f = np.fft.fftfreq(nperseg, 1.0 / rate_hz)
    return spec[np.argsort(f)]


def k_sd(k, p):
    """Delta-method sd of Greenstein's K estimate for one Rician sample (iid)."""
    sigma2 = p / (2.0 * (k + 1.0))
    law = stats.ncx2(df=2, nc=2.0 * k)
    mom = [sigma2**i * law.moment(i) for i in range(1, 5)]
    m1, m2 = mom[0], mom[1]
    a2 = math.sqrt(max(2 * m1 * m1 - m2, 1e-300))
    dk_da2 = m1 / (m1 - a2) ** 2
    g1 = dk_da2 * (2.0 * m1 / a2) - a2 / (m1 - a2) ** 2
    g2 = dk_da2 * (-1.0 / (2.0 * a2))
    var_u = m2 - m1 * m1
    var_u2 = mom[3] - m2 * m2
    cov = mom[2] - m1 * m2
    return math.sqrt(max(g1 * g1 * var_u + g2 * g2 * var_u2 + 2 * g1 * g2 * cov, 0.0))


# -- laws --------------------------------------------------------------------------


def pvalue(law, z, m):
    """Survival function of the statistic ``z`` under ``law``, Bonferroni over ``m``."""
    if not math.isfinite(z):
        return 0.0
    if law == "normal":
        single = 2.0 * float(special.ndtr(-z))
    elif law == "exp":
        single = math.exp(-z * z)
    elif law == "kolmogorov":
        single = float(special.kolmogorov(z))  # scipy.stats.kstwobign.sf
    elif law == "gamma2":
        single = float(special.gammaincc(2.0, z * z))  # scipy.stats.gamma(2).sf
    else:
        raise ValueError(law)
    return float(min(1.0, m * single))


@functools.lru_cache(maxsize=1024)
def critical(law, level, m=1):
    """The z at which :func:`pvalue` equals ``level`` (the special functions behind scipy.stats' isf)."""
    a = level / m
    if law == "normal":
        return float(-special.ndtri(a / 2.0))  # scipy.stats.norm.isf
    if law == "exp":
        return math.sqrt(-math.log(a))
    if law == "kolmogorov":
        return float(special.kolmogi(a))  # scipy.stats.kstwobign.isf
    if law == "gamma2":
        return math.sqrt(float(special.gammainccinv(2.0, a)))  # scipy.stats.gamma(2).isf
    raise ValueError(law)


def tolerance_at(null, level):
    """Acceptance half-width at ``level`` in the check's unit, from the null descriptor."""
    if not null:
        return None
    # Every check's value is on the scale on which its statistic is symmetric and linear:
    # |value - expected| = z x nominal scale, so this bound holds for the verdict exactly.
    return null["scale"] * critical(null["law"], level, null.get("m", 1))


# -- calibration -------------------------------------------------------------------


@functools.lru_cache(maxsize=1)
def calibration_record():
    """The committed calibration, with the MIMO correlation factor of its own file merged in."""
    data = resources.files("emucompile").joinpath("data")
    doc = json.loads(data.joinpath("tolerance_calibration.json").read_text("utf-8"))
    mimo = json.loads(data.joinpath(MIMO_CALIBRATION_FILE).read_text("utf-8"))
    doc["factors"] = dict(doc["factors"], mimo_correlation=mimo["factor"])
    doc["mimo_correlation"] = mimo
    return doc


MIMO_CALIBRATION_FILE = "mimo_correlation_calibration.json"


def factor(name) -> float:
    return float(calibration_record()["factors"][name])


__all__ = ["lags", "pair_sum", "weights", "bartlett_sums", "phase_variances", "power_covariance_sum",
           "expected_welch", "k_sd", "pvalue", "critical", "tolerance_at", "calibration_record", "factor",
           "MIMO_CALIBRATION_FILE", "PHASE_SERIES_X"]
