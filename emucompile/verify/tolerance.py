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
"""

from __future__ import annotations

import functools
import json
import math
from dataclasses import dataclass, field, replace
from importlib import resources

import numpy as np
from scipy import fft as sp_fft
from scipy import signal, special, stats

from emucompile.verify import estimators

from emucompile.verify import reference
from emucompile.models import spectra
from emucompile.models.theory import (
    DopplerSpectrum,
    average_fade_duration,
    envelope_distribution,
    level_crossing_rate,
)

CHECK_NAMES = (
    "mean_power",
    "k_factor",
    "envelope_ks",
    "autocorrelation",
    "doppler_psd",
    "out_of_band_power",
    "level_crossing_rate",
    "fade_duration",
    "phase_uniformity",
    "cross_correlation",
)

#: Shortest record, in Doppler periods, on which the statistical checks run.
MIN_DOPPLER_PERIODS = 50.0
#: Required suppression of the power beyond 1.05 f_D (the engine's spectral-purity requirement), in dB.
OUT_OF_BAND_LIMIT_DB = -40.0
OUT_OF_BAND_FACTOR = 1.05
#: Envelope quantiles at which crossings are counted, and the fewest expected crossings.
CROSSING_QUANTILES = (0.1, 0.5)
MIN_EXPECTED_CROSSINGS = 100.0
#: Crossings are counted on the envelope interpolated to at least this many times f_D
#: (measured on the reference process: at 64 f_D the count at the 10 % quantile is
#: 0.2 % low, at 16 f_D 3 % low), over at most this many Doppler periods: the longest
#: record length the calibration covers (T f_D = 5e4), which also bounds memory and time.
CROSSING_RATE_DOPPLER = 64.0
MAX_CROSSING_PERIODS = 50_000.0
#: Autocorrelation lags up to this many Doppler periods.
AUTOCORRELATION_SPAN_PERIODS = 3.0
AUTOCORRELATION_EFFECTIVE_LAGS = 24
#: Welch resolution of the PSD check, in units of f_D.
PSD_RESOLUTION_DOPPLER = 1.0 / 16.0
PSD_MIN_RELATIVE = 1e-2
PSD_MIN_SEGMENTS = 20
#: Relative tolerance on a static tap's power (float32 rounding is ~1e-7).
STATIC_POWER_TOLERANCE = 1e-4
_HANN_OVERLAP_CORRELATION = 0.167  # Welch 1967, Table 1: Hann window at 50 % overlap


@dataclass(frozen=True)
class TapModel:
    """What one tap's gain record should be.

    Attributes
    ----------
    spectrum : theory.DopplerSpectrum or None
        Doppler spectrum of the diffuse part; None for a static tap.
    mean_power : float
        E|g|^2 (linear).
    k_linear : float
        Rician K (direct/diffuse power); 0 for Rayleigh, ``math.inf`` for a
        static tap (direct part only).
    los_doppler_hz : float
        Doppler of the direct part (0 when it does not turn).
    """

    spectrum: DopplerSpectrum | None
    mean_power: float
    k_linear: float = 0.0
    los_doppler_hz: float = 0.0

    @classmethod
    def from_tap(cls, tap) -> "TapModel":
        """From an :class:`emucompile.profile.model.Tap`.

        Static taps give ``spectrum=None, k_linear=inf``; Rayleigh taps K = 0.
        A direct part on a time-varying trajectory (``los_trajectory``) is not
        a stationary model: ValueError.
        """
        if getattr(tap, "los_trajectory", None):
            raise ValueError(f"tap {tap.index}: a direct part on a Doppler trajectory has no stationary model")
        los = float(tap.los_doppler_hz or 0.0)
        if tap.fading == "static":
            return cls(None, float(tap.power_linear), math.inf, los)
        spec = DopplerSpectrum.of(tap)
        k = float(tap.k_linear) if tap.fading == "rician" else 0.0
        return cls(spec, float(tap.power_linear), k, los if k > 0 else 0.0)

    @property
    def direct_power(self) -> float:
        if math.isinf(self.k_linear):
            return self.mean_power
        return self.mean_power * self.k_linear / (self.k_linear + 1.0)

    @property
    def diffuse_power(self) -> float:
        if math.isinf(self.k_linear):
            return 0.0
        return self.mean_power / (self.k_linear + 1.0)


@dataclass(frozen=True)
class CheckResult:
    """The outcome of one check.

    ``passed`` is True/False, or None when the check does not apply or the
    record is too short (``reason`` says which). ``tolerance`` is the
    acceptance half-width around ``expected`` at ``level`` and
    ``min_detectable`` the smallest deviation that reaches p = ``level``
    on this record, both in ``unit``. ``detail`` is JSON-able and carries,
    under ``"null"``, what :func:`holm` needs to restate the tolerance.
    """

    name: str
    tap: int | tuple | None
    value: float | None
    expected: float | None
    tolerance: float | None
    p_value: float | None
    passed: bool | None
    reason: str | None = None
    level: float | None = None
    min_detectable: float | None = None
    unit: str = ""
    detail: dict = field(default_factory=dict)

    def to_dict(self) -> dict:
        """Strict JSON: non-finite numbers become None and say so in ``reason``."""
        out = {}
        notes = []
        for key in ("name", "tap", "value", "expected", "tolerance", "p_value", "passed", "reason", "level",
                    "min_detectable", "unit"):
            v = getattr(self, key)
            clean, bad = _json_value(v)
            if bad:
                notes.append(f"{key} is {bad}")
            out[key] = clean
        detail, _ = _json_value(self.detail)
        out["detail"] = detail
        if notes:
            out["reason"] = "; ".join(([out["reason"]] if out["reason"] else []) + notes)
        return out


# -- public checks -------------------------------------------------------------


def check_tap(g, rate_hz, model: TapModel, *, periodic=False, tap=None, level=1e-3) -> list[CheckResult]:
    """Run every check for one tap's record ``g`` (1-D complex) sampled at ``rate_hz``.

    Parameters
    ----------
    g : array_like, complex
    rate_hz : float
        Sample rate; at least ~2.2 f_D (a band-limited decimated copy will do).
    model : TapModel
    periodic : bool
        The record is one period of a periodic process: circular estimates
        and circular null autocorrelations (the wrap is checked).
    tap : int or tuple, optional
        Label copied into the results.
    level : float
        Per-check false-alarm level.

    Returns
    -------
    list of CheckResult
        One per name in :data:`CHECK_NAMES` except ``cross_correlation``
        (see :func:`check_cross_correlation`), in that order.

    Notes
    -----
    Cost O(N log N); the null sums are cached per spectrum, rate, N and mode.
    """
    g = estimators._record(g)
    rate_hz = float(rate_hz)
    names = [n for n in CHECK_NAMES if n != "cross_correlation"]
    if model.spectrum is None:
        return _static_checks(g, model, tap, names)
    fd = model.spectrum.band_edge_hz
    duration = g.size / rate_hz
    if rate_hz < 2.0 * fd:
        return [_na(n, tap, f"rate {rate_hz:g} Hz is below 2 f_D = {2 * fd:g} Hz", level) for n in names]
    if duration * fd < MIN_DOPPLER_PERIODS:
        why = f"not enough data: T f_D = {duration * fd:.3g} < {MIN_DOPPLER_PERIODS:g}"
        return [_na(n, tap, why, level) for n in names]
    ctx = _Context(g, rate_hz, model, periodic, tap, level)
    out = [
        _check_mean_power(ctx),
        _check_k_factor(ctx),
        _check_envelope(ctx),
        _check_autocorrelation(ctx),
        _check_psd(ctx),
        _check_out_of_band(ctx),
    ]
    out.extend(_check_crossings(ctx))
    out.append(_check_phase(ctx))
    return out


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
    (``_pair_sum`` / N),

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
        return _na(name, taps, "a static tap has no diffuse part", level)
    if expected != 0 and model_a.spectrum != model_b.spectrum:
        raise ValueError("a non-zero expected correlation needs both records to have the same spectrum")
    rate_hz = float(rate_hz)
    n = g_a.size
    fd = max(model_a.spectrum.band_edge_hz, model_b.spectrum.band_edge_hz)
    if n / rate_hz * min(model_a.spectrum.band_edge_hz, model_b.spectrum.band_edge_hz) < MIN_DOPPLER_PERIODS:
        return _na(name, taps, "not enough data: T f_D < 50", level)
    if rate_hz < 2.0 * fd:
        return _na(name, taps, f"rate {rate_hz:g} Hz is below 2 f_D", level)
    if estimate is None:
        rho = estimators.correlation_coefficient(_diffuse(g_a, rate_hz, model_a), _diffuse(g_b, rate_hz, model_b))
    else:
        rho = complex(estimate)
    g = _pair_sum(model_a.spectrum, model_b.spectrum, rate_hz, n, bool(periodic)) / n
    distance, deviation, sd_radial, sd_tangential = correlation_distance(rho, expected, g)
    c = _factor(name)
    if name == "cross_correlation":  # circular covariance: |d| = D sqrt(E|d|^2 / 2), the same scale
        total_sd = math.hypot(sd_radial, sd_tangential)
        value, scale, unit = abs(rho - expected), total_sd, "correlation"
    else:
        value, scale, unit = distance, math.sqrt(2.0), "Mahalanobis distance"
    z = distance / math.sqrt(2.0)
    null = {"law": "exp", "m": 1, "z": _finite(z), "scale": c * scale, "calibration_factor": c}
    p = _pvalue("exp", z / c, 1) if math.isfinite(z) else 0.0
    tol = _tolerance(null, level)
    return CheckResult(
        name, _label(taps), value, 0.0, tol, p, within_tolerance(value, 0.0, tol), None, level, tol, unit,
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
    diffuse = [_diffuse(estimators._record(g), float(rate_hz), m) for g, m in zip(records, models)]
    n = diffuse[0].size if diffuse else 0
    if any(d.size != n for d in diffuse):
        raise ValueError("records differ in length")
    gram = np.zeros((len(diffuse), len(diffuse)), np.complex128)
    for start in range(0, n, _GRAM_BLOCK):
        block = np.stack([d[start:start + _GRAM_BLOCK] for d in diffuse])
        gram += block @ block.conj().T
    norm = np.sqrt(np.real(np.diag(gram)))
    with np.errstate(divide="ignore", invalid="ignore"):
        return gram / np.outer(norm, norm)


_GRAM_BLOCK = 1 << 15


def null_sum_tasks(model: TapModel, rate_hz: float, n: int, periodic: bool = False) -> list:
    """The null sums :func:`check_tap` will read for this model, rate, length and mode.

    Returns zero-argument callables that compute and cache them, independent
    of each other (the null autocorrelation they all read is computed here,
    first). Run them, in threads or before forking worker processes, so that
    the checks of many taps find them ready instead of each computing them.
    Nothing for a static tap or a record the checks will not judge.
    """
    spectrum = model.spectrum
    rate_hz, n, periodic = float(rate_hz), int(n), bool(periodic)
    if spectrum is None:
        return []
    fd = spectrum.band_edge_hz
    if rate_hz < 2.0 * fd or n / rate_hz * fd < MIN_DOPPLER_PERIODS:
        return []
    _lags(spectrum, rate_hz, n, periodic)
    _weights(n, periodic)
    tasks = [functools.partial(_bartlett_sums, spectrum, rate_hz, n, periodic, _autocorrelation_lag_count(n, rate_hz, fd)),
             functools.partial(_power_covariance_sum, spectrum, rate_hz, n, periodic, model.diffuse_power,
                               model.direct_power, model.los_doppler_hz)]
    if model.k_linear == 0:
        tasks.append(functools.partial(_phase_variances, spectrum, rate_hz, n, periodic))
    return tasks


def clear_caches() -> None:
    """Forget the cached null sums (per spectrum, rate, length and mode), as in a new process."""
    for cached in (_lags, _pair_sum, _weights, _bartlett_sums, _phase_variances, _power_covariance_sum, _critical):
        cached.cache_clear()


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
        tol = _tolerance(null, lv) if null else r.tolerance
        detail = dict(r.detail)
        detail["holm"] = {"family_wise": family_wise, "rank": rank, "of": m, "rank_level": float(steps[rank]),
                          "level": lv, "rejections": stop}
        out[i] = replace(r, passed=within_tolerance(r.value, r.expected, tol), level=lv, tolerance=tol,
                         min_detectable=tol, detail=detail)
    return out


def within_tolerance(value, expected, tolerance) -> bool:
    """The rule every numeric verdict follows: |value - expected| <= tolerance (value <= tolerance without expected).

    A missing or non-finite value or tolerance does not pass.
    """
    if value is None or tolerance is None:
        return False
    if expected is None:
        return bool(value <= tolerance)
    return bool(abs(value - expected) <= tolerance)


def calibration() -> dict:
    """The committed calibration (``emucompile/data/tolerance_calibration.json``)."""
    return dict(_calibration())


# -- checks ------------------------------------------------------------------------


class _Context:
    def __init__(self, g, rate_hz, model, periodic, tap, level):
        self.g = g
        self.rate = rate_hz
        self.model = model
        self.periodic = bool(periodic)
        self.tap = _label(tap)
        self.level = level
        self.n = g.size
        self.fd = model.spectrum.band_edge_hz
        self.r = _lags(model.spectrum, rate_hz, self.n, self.periodic)
        self.wt = _weights(self.n, self.periodic)
        self.k = model.k_linear
        self.pd = model.diffuse_power
        self.a2 = model.direct_power
        # Covariance of |g|^2 at lag k: P_d^2 r^2 + 2 A^2 P_d r cos(w k) (Isserlis).
        self.cov_u_sum = _power_covariance_sum(
            model.spectrum, rate_hz, self.n, self.periodic, self.pd, self.a2, model.los_doppler_hz
        )
        self.n_eff = self.n * (self.pd**2 + 2.0 * self.a2 * self.pd) / self.cov_u_sum
        self._diffuse = None

    @property
    def diffuse(self):
        if self._diffuse is None:
            self._diffuse = _diffuse(self.g, self.rate, self.model)
        return self._diffuse

    def result(self, name, value, expected, unit, detail, *, law, z, m=1, scale=1.0, **null_extra):
        """A CheckResult whose p-value is law_sf(z / c, m), c the calibration factor of ``name``."""
        c = _factor(name)
        null = {"law": law, "m": int(m), "z": _finite(z), "scale": c * scale, "calibration_factor": c}
        null.update(null_extra)
        p = _pvalue(law, z / c, m)
        tol = _tolerance(null, self.level)
        detail = dict(detail, null=null, n_samples=self.n, doppler_periods=self.n / self.rate * self.fd)
        return CheckResult(name, self.tap, value, expected, tol, p, within_tolerance(value, expected, tol), None,
                           self.level, tol, unit, detail)


def _check_mean_power(ctx):
    m = estimators.mean_power(ctx.g)
    p_model = ctx.model.mean_power
    sd = math.sqrt(ctx.cov_u_sum / ctx.n)
    # The test is on m / P - 1 (normal); the value is on that scale so that the printed tolerance
    # is symmetric and exact (in dB it would not be: 10 log10(1 - t) != -10 log10(1 + t)).
    return ctx.result("mean_power", m / p_model, 1.0, "ratio to the model's mean power",
                      {"sd_relative": sd / p_model, "effective_samples": ctx.n_eff,
                       "measured_db": _db(m), "expected_db": _db(p_model),
                       "source": "Isserlis: var mean|g|^2 = (1/N) sum (1-|k|/N) cov(|g0|^2, |gk|^2)"},
                      law="normal", z=abs(m - p_model) / sd, scale=sd / p_model)


def _check_k_factor(ctx):
    name = "k_factor"
    if ctx.k == 0:
        return _na(name, ctx.tap, "not applicable: Rayleigh tap (K = 0)", ctx.level)
    k_hat = estimators.k_factor_moments(ctx.g)
    sd = _k_sd(ctx.k, ctx.model.mean_power) / math.sqrt(ctx.n_eff)
    z = abs(k_hat - ctx.k) / sd if math.isfinite(k_hat) else math.inf
    return ctx.result(name, k_hat, ctx.k, "linear K",
                      {"sd": sd, "effective_samples": ctx.n_eff,
                       "source": "Greenstein, Michelson & Erceg 1999 moment method; delta method"},
                      law="normal", z=z, scale=sd)


def _check_envelope(ctx):
    dist = envelope_distribution(ctx.k, ctx.model.mean_power)
    d = estimators.envelope_ks_distance(ctx.g, dist)
    scale = 1.0 / math.sqrt(ctx.n_eff)
    law = "scipy.stats.rayleigh" if ctx.k == 0 else "scipy.stats.rice (b = sqrt(2K), sigma^2 = P/(2(K+1)))"
    return ctx.result("envelope_ks", d, 0.0, "KS distance",
                      {"effective_samples": ctx.n_eff, "source": law + "; Kolmogorov law at N_eff"},
                      law="kolmogorov", z=d / scale, scale=scale)


def _autocorrelation_lag_count(n, rate_hz, fd):
    return int(min(n // 2, math.ceil(AUTOCORRELATION_SPAN_PERIODS * rate_hz / fd) + 1))


def _check_autocorrelation(ctx):
    n_lags = _autocorrelation_lag_count(ctx.n, ctx.rate, ctx.fd)
    rh = estimators.autocorrelation(ctx.diffuse, n_lags, periodic=ctx.periodic)
    rho = rh / rh[0].real
    k = np.arange(1, n_lags)
    s0, c1, c2 = _bartlett_sums(ctx.model.spectrum, ctx.rate, ctx.n, ctx.periodic, n_lags)
    rk = ctx.r[k]
    total = s0 * (1.0 + rk**2) - 2.0 * rk * c1[k]
    pseudo = c2[k] - 2.0 * rk * c1[k] + rk**2 * s0
    sd_re = np.sqrt(np.maximum((total + pseudo) / (2.0 * ctx.n), 1e-300))
    sd_im = np.sqrt(np.maximum((total - pseudo) / (2.0 * ctx.n), 1e-300))
    z_re = np.abs(rho[k].real - rk) / sd_re
    z_im = np.abs(rho[k].imag) / sd_im
    zk = np.maximum(z_re, z_im)
    worst = int(np.argmax(zk))
    m = 2 * min(len(k), AUTOCORRELATION_EFFECTIVE_LAGS)
    # The verdict is set by the largest z over lags and parts: the value is that lag's and part's
    # deviation, the tolerance that part's sd times the critical z, so value <= tolerance is the verdict.
    real_part = bool(z_re[worst] >= z_im[worst])
    part_sd = float(sd_re[worst] if real_part else sd_im[worst])
    deviation = float(abs(rho[k[worst]].real - rk[worst]) if real_part else abs(rho[k[worst]].imag))
    return ctx.result("autocorrelation", deviation, 0.0, "correlation",
                      {"measured": "|r_hat - r| of the real or imaginary part at the lag and part with the "
                                   "largest standard score",
                       "max_lag_s": (n_lags - 1) / ctx.rate, "worst_lag_s": float(k[worst] / ctx.rate),
                       "worst_part": "real" if real_part else "imaginary", "worst_part_sd": part_sd,
                       "worst_estimate": [float(rho[k[worst]].real), float(rho[k[worst]].imag)],
                       "worst_expected": float(rk[worst]), "sd_max": float(sd_re.max()),
                       "max_abs_error": float(np.max(np.abs(rho[k] - rk))),
                       "source": _autocorrelation_source(ctx.model.spectrum)},
                      law="normal", z=float(zk[worst]), m=m, scale=part_sd)


def _check_psd(ctx):
    name = "doppler_psd"
    duration = ctx.n / ctx.rate
    seg_s = min(1.0 / (PSD_RESOLUTION_DOPPLER * ctx.fd), duration / 10.0)
    nperseg = max(16, int(round(seg_s * ctx.rate)))
    n_seg = (ctx.n - nperseg) // (nperseg - nperseg // 2) + 1
    if n_seg < PSD_MIN_SEGMENTS:
        return _na(name, ctx.tap, f"not enough data: {n_seg} Welch segments < {PSD_MIN_SEGMENTS}", ctx.level)
    s = ctx.diffuse
    f, p_hat = estimators.welch_psd(s, ctx.rate, nperseg)
    power = float(np.mean(s.real**2 + s.imag**2))
    expected = _expected_welch(ctx.model.spectrum, ctx.rate, nperseg)
    keep = (expected >= PSD_MIN_RELATIVE * expected.max()) & (np.abs(f) <= ctx.fd)
    ratio = p_hat[keep] / (power * expected[keep])
    nu = n_seg / (1.0 + 2.0 * _HANN_OVERLAP_CORRELATION**2)
    # Wilson-Hilferty: the cube root of a Gamma(nu, 1/nu) variable is nearly normal.
    z = np.abs((np.cbrt(ratio) - (1.0 - 1.0 / (9.0 * nu))) * math.sqrt(9.0 * nu))
    worst = int(np.argmax(z))
    # The test is symmetric in the cube root of the bin ratio, not in dB (a Gamma law is skewed):
    # the value is the worst bin's Wilson-Hilferty standard score, so that the tolerance (the
    # critical score) is symmetric and exact; the deviation in dB is in the detail.
    return ctx.result(name, float(z[worst]), 0.0, "standard score (Wilson-Hilferty, worst bin)",
                      {"measured": "Wilson-Hilferty standard score of the worst bin's measured / expected "
                                   "Welch PSD: |cbrt(ratio) - (1 - 1/(9 nu))| sqrt(9 nu)",
                       "resolution_hz": ctx.rate / nperseg, "segments": n_seg, "bins": int(keep.sum()),
                       "nu": nu, "worst_frequency_hz": float(f[keep][worst]),
                       "worst_deviation_db": _db(float(ratio[worst])),
                       "max_abs_deviation_db": float(np.max(np.abs(10 * np.log10(ratio)))),
                       "source": "Welch 1967 (Hann, 50 %), expected = exact spectrum through the window; "
                                 + _autocorrelation_source(ctx.model.spectrum)},
                      law="normal", z=float(z[worst]), m=int(keep.sum()))


def _check_out_of_band(ctx):
    name = "out_of_band_power"
    edge = OUT_OF_BAND_FACTOR * ctx.fd
    if ctx.rate / 2.0 <= edge * 1.01:
        return _na(name, ctx.tap, f"not applicable: no band beyond 1.05 f_D below Nyquist ({ctx.rate / 2:g} Hz)",
                   ctx.level)
    seg = int(round(256.0 * ctx.rate / ctx.fd))
    seg = min(seg, ctx.n // 4)
    df = ctx.rate / seg
    if (edge - ctx.fd) < 8 * df:
        return _na(name, ctx.tap, "not enough data: Welch resolution too coarse for the 1.05 f_D edge", ctx.level)
    f, p_hat = estimators.welch_psd(ctx.diffuse, ctx.rate, seg, window=("kaiser", 14.0))
    ratio = estimators.out_of_band_ratio(f, p_hat, ctx.fd, factor=OUT_OF_BAND_FACTOR)
    value = _db(ratio)
    passed = bool(value <= OUT_OF_BAND_LIMIT_DB)
    return CheckResult(name, ctx.tap, value, None, OUT_OF_BAND_LIMIT_DB, None, passed,
                       None if passed else f"out-of-band power {value:.1f} dB > {OUT_OF_BAND_LIMIT_DB} dB",
                       None, None, "dB",
                       {"resolution_hz": df, "limit": "required: >= 40 dB below in-band beyond 1.05 f_D",
                        "window": "kaiser(14)", "kind": "limit check, not a hypothesis test"})


def _check_crossings(ctx):
    names = ("level_crossing_rate", "fade_duration")
    dist = envelope_distribution(ctx.k, ctx.model.mean_power)
    r_rms = math.sqrt(ctx.model.mean_power)
    levels = dist.ppf(CROSSING_QUANTILES)
    rho = levels / r_rms
    kw = dict(rms_doppler_hz=ctx.model.spectrum.rms_doppler_hz, k_linear=ctx.k,
              los_doppler_hz=ctx.model.los_doppler_hz)
    up = int(max(1, math.ceil(CROSSING_RATE_DOPPLER * ctx.fd / ctx.rate)))
    g = ctx.g
    periodic = ctx.periodic
    limit = int(MAX_CROSSING_PERIODS * ctx.rate / ctx.fd)
    if g.size > limit:  # bounded memory: count on the first MAX_CROSSING_PERIODS periods
        g, periodic = g[:limit], False
    band = max(ctx.fd, abs(ctx.model.los_doppler_hz)) / ctx.rate
    trim = 0 if periodic else max(int(math.ceil(4.0 * ctx.rate / ctx.fd)), estimators.interpolator_reach(up, band))
    kept = g.size - 2 * trim
    n_exp = level_crossing_rate(rho, **kw) * kept / ctx.rate
    use = n_exp >= MIN_EXPECTED_CROSSINGS
    if not use.any():
        why = f"not enough data: fewer than {MIN_EXPECTED_CROSSINGS:g} expected crossings at every level"
        return [_na(n, ctx.tap, why, ctx.level) for n in names]
    power = estimators.power_upsampled(g, up, band, periodic=periodic)  # |g|^2: compared with level^2
    if periodic:
        power = np.concatenate([power, power[:1]])  # the crossing across the wrap counts
    else:
        power = power[trim * up: power.size - trim * up]
    duration = kept / ctx.rate
    levels, rho, n_exp = levels[use], rho[use], n_exp[use]
    counts, below = np.zeros(levels.size), np.zeros(levels.size)
    for i, lv in enumerate(levels):  # one comparison pass per level for both counts
        under = power < np.float32(lv * lv)
        counts[i] = np.count_nonzero(under[:-1] & ~under[1:])  # upward crossings (estimators.level_crossings)
        below[i] = np.count_nonzero(under[: kept * up]) / (kept * up)
    rate_hat = counts / duration
    m = int(use.sum())
    common = {"levels_rho": rho.tolist(), "quantiles": [q for q, u in zip(CROSSING_QUANTILES, use) if u],
              "upsampling": up, "counted_samples": kept, "expected_counts": n_exp.tolist(), "counts": counts.tolist()}
    # Level-crossing rate: nominal Poisson spread of the count.
    sd = np.sqrt(n_exp)
    z = np.abs(counts - n_exp) / sd
    w = int(np.argmax(z))
    lcr_exp = n_exp / duration
    out = [ctx.result(names[0], float(rate_hat[w]), float(lcr_exp[w]), "1/s",
                      dict(common, measured_per_s=rate_hat.tolist(), expected_per_s=lcr_exp.tolist(),
                           source=_lcr_source(ctx)),
                      law="normal", z=float(z[w]), m=m, scale=float(sd[w] / duration))]
    # Fade duration: log AFD = log F - log N, the two spreads added (their positive
    # correlation would only shrink the spread, so this errs wide).
    afd = average_fade_duration(rho, **kw)
    frac = dist.cdf(levels)
    var_f = frac * (1.0 - frac) / (ctx.n_eff * kept / ctx.n)
    sd_log = np.sqrt(1.0 / n_exp + var_f / frac**2)
    with np.errstate(divide="ignore"):
        afd_hat = np.where(counts > 0, below / np.maximum(rate_hat, 1e-300), np.inf)
        zl = np.abs(np.log(afd_hat / afd)) / sd_log
    w = int(np.argmax(zl))
    # The test is on log(measured / expected): the value is that log ratio (symmetric tolerance).
    with np.errstate(divide="ignore"):
        log_ratio = float(np.log(afd_hat[w] / afd[w]))
    out.append(ctx.result(names[1], log_ratio, 0.0, "ln(measured / expected fade duration)",
                          dict(common, measured_s=afd_hat.tolist(), expected_s=afd.tolist(),
                               worst_level_measured_s=float(afd_hat[w]), worst_level_expected_s=float(afd[w]),
                               fraction_below=below.tolist(),
                               source="AFD = P(R <= r)/N(r); " + _lcr_source(ctx)),
                          law="normal", z=float(zl[w]), m=m, scale=float(sd_log[w])))
    return out


def _check_phase(ctx):
    name = "phase_uniformity"
    if ctx.k != 0:
        return _na(name, ctx.tap, "not applicable: the phase of a Rician tap is not uniform", ctx.level)
    c1, c2 = estimators.circular_moments(ctx.g, (1, 2))
    v1, v2 = _phase_variances(ctx.model.spectrum, ctx.rate, ctx.n, ctx.periodic)
    stat = abs(c1) ** 2 / v1 + abs(c2) ** 2 / v2
    # Two moments make one statistic: the value is its square root (a standard score), so
    # that value <= tolerance is the verdict; |C1| and |C2| are in the detail.
    return ctx.result(name, math.sqrt(stat), 0.0, "standard score sqrt(|C1|^2/var C1 + |C2|^2/var C2)",
                      {"circular_moment_1": [c1.real, c1.imag], "circular_moment_2": [c2.real, c2.imag],
                       "abs_circular_moment_1": abs(c1), "abs_circular_moment_2": abs(c2),
                       "sd_1": math.sqrt(v1), "sd_2": math.sqrt(v2),
                       "source": "uniform phase of a circular Gaussian; circular moments (Rayleigh test)"},
                      law="gamma2", z=math.sqrt(stat), scale=1.0)


def _static_checks(g, model, tap, names):
    tap = _label(tap)
    out = []
    for n in names:
        if n == "mean_power":
            m = estimators.mean_power(g)
            ratio = m / model.mean_power
            tol = STATIC_POWER_TOLERANCE
            ok = within_tolerance(ratio, 1.0, tol)
            out.append(CheckResult(n, tap, ratio, 1.0, tol, None, ok,
                                   None if ok else f"static power off by {ratio - 1.0:.3g} (relative)", None, tol,
                                   "ratio to the model's mean power",
                                   {"measured_db": _db(m), "expected_db": _db(model.mean_power),
                                    "source": "static tap: |g|^2 is constant; float32 rounding ~1e-7"}))
        else:
            out.append(_na(n, tap, "not applicable: static tap (no fading)", None))
    return out


# -- null sums ---------------------------------------------------------------------


@functools.lru_cache(maxsize=8)  # a few records' lengths: 8 x 10 MB at 1.25e6 lags
def _lags(spectrum, rate_hz, n, periodic):
    """The null autocorrelation r_k, k = 0..n-1 (cached per spectrum, rate, length and mode; read-only)."""
    if periodic:
        r = reference.circular_autocorrelation(spectrum, rate_hz, n)
        r = r / r[0]
    else:
        r = np.array(spectrum.autocorrelation(np.arange(n) / rate_hz), dtype=float)
    r.flags.writeable = False
    return r


@functools.lru_cache(maxsize=32)
def _pair_sum(spectrum_a, spectrum_b, rate_hz, n, periodic=False):
    """sum_k w_k r_a(k) r_b(k): the variance sum of a cross-correlation estimate.

    Aperiodic: weights 1 - |k|/N over |k| < N; periodic: the circular
    autocorrelations of period-N processes over one period.
    """
    return float(_weights(n, periodic) @ (_lags(spectrum_a, rate_hz, n, periodic)
                                         * _lags(spectrum_b, rate_hz, n, periodic)))


@functools.lru_cache(maxsize=32)
def _weights(n, periodic):
    if periodic:
        return np.ones(n)
    w = 2.0 * (1.0 - np.arange(n) / n)
    w[0] = 1.0
    return w


@functools.lru_cache(maxsize=16)
def _bartlett_sums(spectrum, rate_hz, n, periodic, n_lags):
    """S0 = sum w r^2, c1(k) = sum_j w_j r_j r_{j+k}, c2(k) = sum_j w_j r_{j+k} r_{j-k} ~ c1(2k)."""
    r = _lags(spectrum, rate_hz, n, periodic)
    wt = _weights(n, periodic)
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
def _phase_variances(spectrum, rate_hz, n, periodic):
    """Variances of the first two circular moments of a circular Gaussian record's phase.

    With x = r_k^2 at each lag: E[e^{j(th_0 - th_k)}] = (pi/4) r 2F1(1/2, 1/2; 2; x) and
    E[e^{2j(th_0 - th_k)}] = (x/2) 2F1(1, 1; 3; x); summed with the lag weights, / n.
    Where x < 2.5e-3 (|r| < 0.05, most lags of a long record) the hypergeometric
    series itself, 8 terms (remainder < 1e-20), instead of ``scipy.special.hyp2f1``.
    """
    r = np.clip(_lags(spectrum, rate_hz, n, periodic), -1.0, 1.0)
    wt = _weights(n, periodic)
    r2 = r * r
    f1, f2 = np.empty_like(r2), np.empty_like(r2)
    small = r2 < _PHASE_SERIES_X
    x = r2[small]
    f1[small] = _series(x, 0.5, 0.5, 2.0)
    f2[small] = _series(x, 1.0, 1.0, 3.0)
    big = ~small
    f1[big] = special.hyp2f1(0.5, 0.5, 2.0, r2[big])
    f2[big] = special.hyp2f1(1.0, 1.0, 3.0, np.minimum(r2[big], 1.0 - 1e-15))
    e1 = (math.pi / 4.0) * r * f1
    e2 = 0.5 * r2 * f2
    e2[r2 >= 1.0 - 1e-15] = 1.0
    return float(wt @ e1) / n, float(wt @ e2) / n


_PHASE_SERIES_X = 2.5e-3


def _series(x, a, b, c, terms=8):
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
def _power_covariance_sum(spectrum, rate_hz, n, periodic, pd, a2, los_doppler_hz):
    """sum_k w_k cov(|g_0|^2, |g_k|^2) = sum_k w_k [P_d^2 r_k^2 + 2 A^2 P_d r_k cos(w k)]."""
    r = _lags(spectrum, rate_hz, n, periodic)
    wt = _weights(n, periodic)
    total = pd * pd * float(wt @ (r * r))
    if a2 > 0:
        w = 2.0 * math.pi * los_doppler_hz / rate_hz
        cos_w = np.cos(w * np.arange(n)) if w else 1.0
        total += 2.0 * a2 * pd * float(wt @ (r * cos_w))
    return total


def _expected_welch(spectrum, rate_hz, nperseg):
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


def _k_sd(k, p):
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


def _pvalue(law, z, m):
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
def _critical(law, level, m=1):
    """The z at which :func:`_pvalue` equals ``level`` (the special functions behind scipy.stats' isf)."""
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


def _tolerance(null, level):
    """Acceptance half-width at ``level`` in the check's unit, from the null descriptor."""
    if not null:
        return None
    # Every check's value is on the scale on which its statistic is symmetric and linear:
    # |value - expected| = z x nominal scale, so this bound holds for the verdict exactly.
    return null["scale"] * _critical(null["law"], level, null.get("m", 1))


# -- calibration -------------------------------------------------------------------


@functools.lru_cache(maxsize=1)
def _calibration():
    """The committed calibration, with the MIMO correlation factor of its own file merged in."""
    data = resources.files("emucompile").joinpath("data")
    doc = json.loads(data.joinpath("tolerance_calibration.json").read_text("utf-8"))
    mimo = json.loads(data.joinpath(MIMO_CALIBRATION_FILE).read_text("utf-8"))
    doc["factors"] = dict(doc["factors"], mimo_correlation=mimo["factor"])
    doc["mimo_correlation"] = mimo
    return doc


MIMO_CALIBRATION_FILE = "mimo_correlation_calibration.json"


def _factor(name) -> float:
    return float(_calibration()["factors"][name])


# -- small helpers -------------------------------------------------------------


def _diffuse(g, rate_hz, model):
    if model.k_linear == 0:
        return g
    return estimators.remove_direct(g, rate_hz, model.los_doppler_hz)[0]


def _na(name, tap, reason, level):
    return CheckResult(name, _label(tap), None, None, None, None, None, reason, level, None, "", {})


def _label(tap):
    if isinstance(tap, (list, tuple)):
        return tuple(int(t) for t in tap)
    return None if tap is None else int(tap)


def _finite(x):
    return float(x) if math.isfinite(x) else None


def _db(x):
    return 10.0 * math.log10(x) if x > 0 else -math.inf


def _autocorrelation_source(spectrum):
    return spectra.kind(spectrum.kind).autocorrelation_source


def _lcr_source(ctx):
    if ctx.k == 0:
        if ctx.model.spectrum.kind == "classical":
            return "Rice 1944; Jakes' form sqrt(2 pi) f_D rho exp(-rho^2)"
        return "Rice 1944 with the spectrum's second moment: sqrt(2 pi) sqrt(2) f_rms rho exp(-rho^2)"
    if ctx.model.los_doppler_hz == 0:
        return "Rice 1944; Stueber's Rician form (zero-Doppler direct part)"
    return "Rice 1944: numerical Rice integral with a turning direct part (theory.level_crossing_rate)"


def _json_value(v):
    """(clean, what_was_bad) for strict JSON."""
    if isinstance(v, bool) or v is None or isinstance(v, str):
        return v, None
    if isinstance(v, (int, np.integer)):
        return int(v), None
    if isinstance(v, (float, np.floating)):
        f = float(v)
        if math.isfinite(f):
            return f, None
        return None, "nan" if math.isnan(f) else ("inf" if f > 0 else "-inf")
    if isinstance(v, complex):
        return _json_value([v.real, v.imag])
    if isinstance(v, dict):
        return {str(k): _json_value(x)[0] for k, x in v.items()}, None
    if isinstance(v, (list, tuple, np.ndarray)):
        return [_json_value(x)[0] for x in list(v)], None
    return str(v), None


__all__ = [
    "CHECK_NAMES",
    "TapModel",
    "CheckResult",
    "check_tap",
    "null_sum_tasks",
    "check_cross_correlation",
    "correlation_distance",
    "holm",
    "within_tolerance",
    "calibration",
    "MIN_DOPPLER_PERIODS",
    "OUT_OF_BAND_LIMIT_DB",
]
