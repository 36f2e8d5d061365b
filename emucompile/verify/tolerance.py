"""How far each statistic of a tap-gain record may stray: checks with p-values, shared by tests and verify.

Every check turns an estimate (:mod:`emucompile.verify.estimators`) into a p-value
under the null hypothesis "the record is the process its :class:`TapModel`
states". The null spread follows the record length and the spectrum: each
variance is a sum over the lags of the model's exact autocorrelation r(k)
(theory's closed form, or for ``periodic=True`` the circular autocorrelation
of a period-N process with the same spectrum, :mod:`emucompile.verify.reference`),
so the effective number of independent samples differs between spectra and
between statistics. Each spread is then multiplied by a calibration factor
``c`` fitted by Monte Carlo of the exact reference process
(``tools/calibrate_tolerances.py``; result in
``emucompile/data/tolerance_calibration.json``) so that a perfect generator
fails each check at level 1e-3 in at most 0.1 % of seeds.

The printed-tolerance rule: a check passes exactly when |value - expected|
<= tolerance (value <= tolerance where expected is None;
:func:`within_tolerance`), ``tolerance`` being the calibrated null law
inverted at the check's level (after :func:`holm`, the level that decides
that check). For that, each value is on the scale on which its statistic is
symmetric and linear (|value - expected| = z x the nominal spread): mean
power as a ratio, the fade duration as a log ratio, the Doppler PSD and the
phase as standard scores, the MIMO correlation as a Mahalanobis distance
(docs/verdicts.md has the table).

Why each tolerance is what it is (N samples, model power P = A^2 + P_d, direct
amplitude A turning at w = 2 pi f_los / rate, diffuse power P_d, normalised
diffuse autocorrelation r(k); sums over all lags |k| < N with weights 1 - |k|/N,
or over one period for periodic records):

``mean_power``
    var(mean|g|^2) = (1/N) sum_k (1-|k|/N) [P_d^2 r(k)^2 + 2 A^2 P_d r(k) cos(w k)]
    (exact for a Gaussian diffuse part: Isserlis); two-sided normal test.
``k_factor``
    Greenstein's moment estimate; delta-method variance from the Rician
    moments E|g|^{2n} (``scipy.stats.ncx2``), with the record's effective size
    N_eff = N / sum_k (1-|k|/N) rho_u(k), rho_u the exact correlation of |g|^2.
    Rician taps only.
``envelope_ks``
    KS distance of |g| against ``theory.envelope_distribution``; the
    Kolmogorov law with the same N_eff.
``autocorrelation``
    r_hat(k) = R_hat(k)/R_hat(0) of the diffuse part (direct part fitted out
    at its known Doppler), lags 1..3/f_D; Bartlett's large-sample variance for
    a complex Gaussian process, real and imaginary parts separately, written
    with the exact r(k); max |z| over lags, Bonferroni over an effective 2 x 24
    lags (common practice: deviations decorrelate over ~1/(8 f_D)).
``doppler_psd``
    Welch PSD (Hann, 50 % overlap, resolution f_D/16) of the diffuse part
    normalised by its sample power, against the *expected* Welch estimate
    (the exact spectrum seen through the window: sum_k r(k) W2(k) e^{-j2 pi f k});
    each bin is a mean of n_seg exponentials, a Gamma law with
    nu = n_seg / (1 + 2 * 0.167^2) (Welch 1967, Hann at 50 % overlap);
    bins where the expected PSD is >= 1e-2 of its peak; Bonferroni over bins.
``out_of_band_power``
    Not a hypothesis test (p_value None): the engine's spectral-purity requirement that the
    power beyond 1.05 f_D is >= 40 dB below the in-band power, estimated with a
    Kaiser (beta 14, sidelobes near -100 dB) Welch PSD at resolution f_D/256.
``level_crossing_rate`` / ``fade_duration``
    Levels at the model envelope's 10 % and 50 % quantiles; upward crossings
    counted on the envelope of a band-limited (FFT) interpolation to >= 64 f_D
    (over at most 5e4 Doppler periods, the longest calibrated record, to bound memory); expected rate from
    Rice's integral (``theory``).
    Nominal spread Poisson (sqrt of the expected count) for the count, and
    sqrt(1/count + var F/F^2) (var F from N_eff) for log of the fade duration;
    the calibration factor carries the departure from Poisson. Bonferroni over
    the levels; a level needs >= 100 expected crossings.
``phase_uniformity``
    Rayleigh taps: first two circular moments C_m = mean e^{j m theta};
    E[e^{j m (theta_0 - theta_k)}] = Gamma(1+m/2)^2/Gamma(1+m) r^m
    2F1(m/2, m/2; m+1; r^2) for a circular Gaussian pair (recalled from
    memory; it is 1 at r = 1 and its use is checked by the calibration);
    sum of |C_m|^2/var C_m is Gamma(2, 1).
``cross_correlation`` / ``mimo_correlation``
    Complex coefficient of the diffuse parts of two taps (or links) against
    the expected one; radial and tangential variances g (1-|rho|^2)^2 / 2 and
    g (1-|rho|^2) / 2, g = (1/N) sum_k (1-|k|/N) r_a(k) r_b(k) (Isserlis and
    the delta method; exact at rho = 0 for Gaussian processes); the squared
    Mahalanobis distance / 2 is Exp(1). See :func:`check_cross_correlation`.

Checks need T f_D >= 50 (``passed=None``, "not enough data", below).

Calibration: ``python tools/calibrate_tolerances.py`` runs a Monte Carlo of
:mod:`emucompile.verify.reference` over 3 spectra x {Rayleigh, K = 3 fixed, K = 3 turning
direct part} x T f_D 5e2..5e4 x rates 8 and 30 f_D x aperiodic/periodic (about 10^4
records, 11-16 min on 2 processes); the JSON records its settings, seeds, false-alarm
counts with Clopper-Pearson bounds, runtime and library versions. The fit (the maximum
over configurations of an order-statistic bound) is conservative: 0 false alarms at 1e-3
in every check. CI only reads the JSON; rerun the script after changing any check.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np

from emucompile.verify import estimators, nulls
from emucompile.verify.nulls import MIMO_CALIBRATION_FILE
from emucompile.verify.tap_checks import autocorrelation_curve, check_tap, crossing_rates, null_sum_tasks, psd_curve
from emucompile.verify.verdicts import (  # the settings tests and tools read here too
    CHECK_NAMES,
    MAX_CROSSING_PERIODS,
    MIN_DOPPLER_PERIODS,
    OUT_OF_BAND_LIMIT_DB,
    CheckResult,
    TapModel,
    diffuse,
    finite,
    label,
    na,
    within_tolerance,
)

def check_cross_correlation(
    g_a, g_b, rate_hz, model_a: TapModel, model_b: TapModel, *, taps=None, expected=0.0, level=1e-3,
    estimate=None, name="cross_correlation", periodic=False,
) -> CheckResult:
    """Complex correlation coefficient of the diffuse parts of two records against ``expected``.

    The deviation d = rho_hat - expected is judged with its 2 x 2 covariance
    (real and imaginary parts). For zero-mean jointly circular Gaussian
    records with separable space-time correlation (E[a_t conj(b_s)] = rho r(t - s),
    both of autocorrelation r), Isserlis' theorem and the delta method for
    the normalised estimate give, with g = (1/N) sum_k (1-|k|/N) r_a(k) r_b(k)
    (``nulls.pair_sum`` / N),

        var(radial part)     = g (1 - |rho|^2)^2 / 2   (along rho)
        var(tangential part) = g (1 - |rho|^2) / 2     (across rho), uncorrelated,

    i.e. E|d|^2 = g (1 - |rho|^2)(1 - |rho|^2/2) (derived here; it agrees with
    the large-sample variances of a coherence estimate's magnitude,
    (1-|rho|^2)^2/(2N), and phase, (1-|rho|^2)/(2N|rho|^2), from memory). At
    |rho| = 0.99 the radial sd is 7x the tangential's smaller, which one
    common spread cannot judge. The statistic is the Mahalanobis distance
    D = sqrt(d^T C^-1 d), chi with 2 degrees of freedom: P(D > x) = exp(-x^2/2)
    (law "exp" in z = D / sqrt 2), times a calibration factor from Monte Carlo
    of the exact reference (``tools/calibrate_mimo_correlation.py`` for
    ``name="mimo_correlation"``, ``tools/calibrate_tolerances.py`` at rho = 0).

    ``value``: |d| for ``name="cross_correlation"`` (``expected`` must be 0:
    the covariance is then circular and D = sqrt 2 |d| / sqrt(E|d|^2), so |d|
    is on the statistic's scale, unit "correlation"); the Mahalanobis distance
    D for ``name="mimo_correlation"`` (unit "Mahalanobis distance"). Either way
    the check passes exactly when value <= tolerance. The estimate is in
    ``detail["estimate"]`` as [re, im]. ``estimate``, when given, is the
    coefficient already computed (an entry of :func:`correlation_matrix`, the
    same number to rounding); the records then serve only for their length.
    A non-zero ``expected`` needs the same spectrum for both records.
    ``periodic``: the records are one period of periodic processes (g from
    their circular autocorrelations).
    """
    if name not in ("cross_correlation", "mimo_correlation"):
        raise ValueError(f"name must be cross_correlation or mimo_correlation, got {name!r}")
    expected = complex(expected)
    if name == "cross_correlation" and expected != 0:
        raise ValueError("a cross_correlation check expects 0; use name='mimo_correlation' for a target correlation")
    g_a = estimators._record(g_a)
    g_b = estimators._record(g_b)
    if g_a.size != g_b.size:
        raise ValueError(f"records differ in length: {g_a.size} and {g_b.size}")
    if model_a.spectrum is None or model_b.spectrum is None:
        return na(name, taps, "a static tap has no diffuse part", level)
    if expected != 0 and model_a.spectrum != model_b.spectrum:
        raise ValueError("a non-zero expected correlation needs both records to have the same spectrum")
    rate_hz = float(rate_hz)
    n = g_a.size
    fd = max(model_a.spectrum.band_edge_hz, model_b.spectrum.band_edge_hz)
    if n / rate_hz * min(model_a.spectrum.band_edge_hz, model_b.spectrum.band_edge_hz) < MIN_DOPPLER_PERIODS:
        return na(name, taps, "not enough data: T f_D < 50", level)
    if rate_hz < 2.0 * fd:
        return na(name, taps, f"rate {rate_hz:g} Hz is below 2 f_D", level)
    if estimate is None:
        rho = estimators.correlation_coefficient(diffuse(g_a, rate_hz, model_a), diffuse(g_b, rate_hz, model_b))
    else:
        rho = complex(estimate)
    g = nulls.pair_sum(model_a.spectrum, model_b.spectrum, rate_hz, n, bool(periodic)) / n
    distance, deviation, sd_radial, sd_tangential = correlation_distance(rho, expected, g)
    c = nulls.factor(name)
    if name == "cross_correlation":  # circular covariance: |d| = D sqrt(E|d|^2 / 2), the same scale
        total_sd = math.hypot(sd_radial, sd_tangential)
        value, scale, unit = abs(rho - expected), total_sd, "correlation"
    else:
        value, scale, unit = distance, math.sqrt(2.0), "Mahalanobis distance"
    z = distance / math.sqrt(2.0)
    null = {"law": "exp", "m": 1, "z": finite(z), "scale": c * scale, "calibration_factor": c}
    p = nulls.pvalue("exp", z / c, 1) if math.isfinite(z) else 0.0
    tol = nulls.tolerance_at(null, level)
    return CheckResult(
        name, label(taps), value, 0.0, tol, p, within_tolerance(value, 0.0, tol), None, level, tol, unit,
        {"estimate": [rho.real, rho.imag], "expected": [expected.real, expected.imag],
         "deviation_radial": deviation.real, "deviation_tangential": deviation.imag,
         "sd_radial": sd_radial, "sd_tangential": sd_tangential, "sd": math.hypot(sd_radial, sd_tangential),
         "null": null, "n_samples": n, "periodic": bool(periodic),
         "measured": ("|rho_hat - expected|" if name == "cross_correlation" else
                      "Mahalanobis distance of rho_hat - expected (radial and tangential parts)"),
         "source": "complex correlation of jointly Gaussian records (Isserlis, delta method): radial var "
                   "g (1-|rho|^2)^2/2, tangential var g (1-|rho|^2)/2, g = sum (1-|k|/N) r_a r_b / N"},
    )


def correlation_distance(estimate, expected, g):
    """Mahalanobis distance of a correlation estimate from ``expected`` (see :func:`check_cross_correlation`).

    ``g`` = (1/N) sum_k (1-|k|/N) r_a(k) r_b(k). Returns (distance, deviation
    turned so that its real part is radial (along ``expected``) and its
    imaginary part tangential, radial sd, tangential sd). At |expected| = 1
    the spreads are floored (1e-6 of g / 2 in variance) to stay positive.
    """
    estimate, expected = complex(estimate), complex(expected)
    q = 1.0 - min(abs(expected) ** 2, 1.0)
    floor = 1e-6
    sd_radial, sd_tangential = math.sqrt(max(q * q, floor) * g / 2.0), math.sqrt(max(q, floor) * g / 2.0)
    turn = expected / abs(expected) if expected != 0 else 1.0
    deviation = (estimate - expected) / turn
    return math.hypot(deviation.real / sd_radial, deviation.imag / sd_tangential), deviation, sd_radial, sd_tangential


def correlation_matrix(records, rate_hz, models) -> np.ndarray:
    """rho[a, b] = estimators.correlation_coefficient(diffuse_a, diffuse_b) for every pair, in one pass.

    ``records`` is a sequence of equal-length 1-D complex records and
    ``models`` their TapModels (fading taps only). Each diffuse part is formed
    once and the Gram matrix sum_n d_a d_b* is summed over blocks of samples
    (one matrix product per block): O(N T^2) in one sweep instead of T^2 / 2
    sweeps, bounded memory.
    """
    parts = [diffuse(estimators._record(g), float(rate_hz), m) for g, m in zip(records, models)]
    n = parts[0].size if parts else 0
    if any(d.size != n for d in parts):
        raise ValueError("records differ in length")
    gram = np.zeros((len(parts), len(parts)), np.complex128)
    for start in range(0, n, _GRAM_BLOCK):
        block = np.stack([d[start:start + _GRAM_BLOCK] for d in parts]).astype(np.complex128, copy=False)
        gram += block @ block.conj().T
    norm = np.sqrt(np.real(np.diag(gram)))
    with np.errstate(divide="ignore", invalid="ignore"):
        return gram / np.outer(norm, norm)


_GRAM_BLOCK = 1 << 15


def clear_caches() -> None:
    """Forget the cached null sums (per spectrum, rate, length and mode), as in a new process."""
    for cached in (nulls.lags_head, nulls.pair_sum, nulls.bartlett_sums, nulls.phase_variances,
                   nulls.power_covariance_sum, nulls.critical):
        cached.cache_clear()
    nulls.forget_sums()


def holm(results, family_wise=0.01) -> list[CheckResult]:
    """Holm's step-down over the results with a p-value (Holm 1979, Scand. J. Statist. 6).

    Sorted by p ascending, the i-th (0-based) of m is rejected at
    family_wise/(m - i) while every earlier one was; the first acceptance
    stops it. Each check's tolerance is then restated at the level that
    decides *its* verdict, every other p-value held as it is: with the others'
    p-values sorted q_0 <= ... <= q_{m-2} and R the number of leading q_j <=
    family_wise/(m - j), the check is rejected by Holm exactly when its own
    p <= family_wise/(m - R) (it can rank at most R-th before the procedure
    stops). For a check Holm accepted, R is the step where Holm stopped, so
    its level is that step's level; for a rejected one it is at least its
    rank's level. Inverting the calibrated null law at that level gives the
    tolerance, so ``passed`` is exactly :func:`within_tolerance` of the
    printed value, expected value and tolerance (the same verdict as Holm's;
    the rule decides at a floating-point tie).

    Returns new results, in the input order, with ``passed``, ``level``,
    ``tolerance`` and ``min_detectable`` at that level, and
    ``detail["holm"]`` (``rank``, ``rank_level``, ``level``, ``rejections``);
    results without a p-value (or with ``passed`` None) are returned unchanged.
    """
    results = list(results)
    idx = [i for i, r in enumerate(results) if r.p_value is not None and r.passed is not None]
    m = len(idx)
    order = sorted(idx, key=lambda i: results[i].p_value)
    p = np.array([results[i].p_value for i in order], dtype=float)
    steps = family_wise / (m - np.arange(m)) if m else np.zeros(0)
    rejected = p <= steps
    stop = int(np.argmin(rejected)) if m and not rejected.all() else m  # Holm's number of rejections
    # run[j]: how many consecutive j' >= j have p_(j'+1) <= alpha / (m - j') (the others shifted one place)
    shifted = (p[1:] <= steps[:-1]) if m > 1 else np.zeros(0, bool)
    run = np.zeros(m + 1, int)
    for j in range(m - 2, -1, -1):
        run[j] = run[j + 1] + 1 if shifted[j] else 0
    out = list(results)
    for rank, i in enumerate(order):
        others_rejected = rank + run[rank] if rank <= stop else stop
        lv = family_wise / (m - others_rejected)
        r = results[i]
        null = r.detail.get("null") if isinstance(r.detail, dict) else None
        tol = nulls.tolerance_at(null, lv) if null else r.tolerance
        detail = dict(r.detail)
        detail["holm"] = {"family_wise": family_wise, "rank": rank, "of": m, "rank_level": float(steps[rank]),
                          "level": lv, "rejections": stop}
        out[i] = replace(r, passed=within_tolerance(r.value, r.expected, tol), level=lv, tolerance=tol,
                         min_detectable=tol, detail=detail)
    return out


def calibration() -> dict:
    """The committed calibration (``emucompile/data/tolerance_calibration.json``)."""
    return dict(nulls.calibration_record())

__all__ = [
    "CHECK_NAMES", "TapModel", "CheckResult", "check_tap", "null_sum_tasks", "check_cross_correlation",
    "correlation_distance", "correlation_matrix", "holm", "within_tolerance", "calibration", "clear_caches",
    "autocorrelation_curve", "psd_curve", "crossing_rates", "MIN_DOPPLER_PERIODS", "OUT_OF_BAND_LIMIT_DB",
    "MAX_CROSSING_PERIODS", "MIMO_CALIBRATION_FILE",
]
