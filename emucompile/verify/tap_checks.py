"""The checks of one tap's record, statistic by statistic, and the numbers a figure draws from them.

:func:`check_tap` runs every per-tap check (mean power, K-factor, envelope,
autocorrelation, Doppler PSD, out-of-band power, crossings, phase) of one
record against its :class:`~emucompile.verify.verdicts.TapModel`; the laws and
the null sums are :mod:`emucompile.verify.nulls`'s, the reasoning behind each
tolerance :mod:`emucompile.verify.tolerance`'s docstring. The ``*_curve`` /
``crossing_rates`` functions give the very estimates a check judges, with its
parameters, so that a figure shows the numbers its verdict used
(:mod:`emucompile.report.tap_panels`).
"""

from __future__ import annotations

import math

import numpy as np

from emucompile.models import spectra
from emucompile.models.theory import average_fade_duration, envelope_distribution, level_crossing_rate
from emucompile.verify import estimators, nulls
from emucompile.verify.verdicts import (
    AUTOCORRELATION_EFFECTIVE_LAGS,
    AUTOCORRELATION_SPAN_PERIODS,
    CHECK_NAMES,
    CROSSING_QUANTILES,
    CROSSING_RATE_DOPPLER,
    HANN_OVERLAP_CORRELATION,
    MAX_CROSSING_PERIODS,
    MIN_DOPPLER_PERIODS,
    MIN_EXPECTED_CROSSINGS,
    OUT_OF_BAND_FACTOR,
    OUT_OF_BAND_LIMIT_DB,
    PSD_MIN_RELATIVE,
    PSD_MIN_SEGMENTS,
    PSD_RESOLUTION_DOPPLER,
    STATIC_POWER_TOLERANCE,
    CheckResult,
    TapModel,
    db,
    diffuse,
    finite,
    label,
    na,
    within_tolerance,
)

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
        return [na(n, tap, f"rate {rate_hz:g} Hz is below 2 f_D = {2 * fd:g} Hz", level) for n in names]
    if duration * fd < MIN_DOPPLER_PERIODS:
        why = f"not enough data: T f_D = {duration * fd:.3g} < {MIN_DOPPLER_PERIODS:g}"
        return [na(n, tap, why, level) for n in names]
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


def null_sum_tasks(model: TapModel, rate_hz: float, n: int, periodic: bool = False) -> list:
    """The null sums :func:`check_tap` will read for this model, rate, length and mode.

    Returns zero-argument callables that compute and cache them, independent
    of each other (one for this model: :func:`nulls.prepare`, one pass over the
    lags for its sums and those of the models announced before it). Run them,
    in threads or before forking worker processes, so that the checks of many
    taps find them ready instead of each computing them. Nothing for a static
    tap or a record the checks will not judge.
    """
    spectrum = model.spectrum
    rate_hz, n, periodic = float(rate_hz), int(n), bool(periodic)
    if spectrum is None:
        return []
    fd = spectrum.band_edge_hz
    if rate_hz < 2.0 * fd or n / rate_hz * fd < MIN_DOPPLER_PERIODS:
        return []
    lag_count = _autocorrelation_lag_count(n, rate_hz, fd)
    return [nulls.prepare_task(spectrum, rate_hz, n, periodic, lag_count, model.diffuse_power, model.direct_power,
                               model.los_doppler_hz, model.k_linear == 0)]


class _Context:
    def __init__(self, g, rate_hz, model, periodic, tap, level):
        self.g = g
        self.rate = rate_hz
        self.model = model
        self.periodic = bool(periodic)
        self.tap = label(tap)
        self.level = level
        self.n = g.size
        self.fd = model.spectrum.band_edge_hz
        self.r = nulls.lags_head(model.spectrum, rate_hz, self.n, self.periodic,
                                 _autocorrelation_lag_count(self.n, rate_hz, self.fd))
        self.k = model.k_linear
        self.pd = model.diffuse_power
        self.a2 = model.direct_power
        # Covariance of |g|^2 at lag k: P_d^2 r^2 + 2 A^2 P_d r cos(w k) (Isserlis).
        self.cov_u_sum = nulls.power_covariance_sum(
            model.spectrum, rate_hz, self.n, self.periodic, self.pd, self.a2, model.los_doppler_hz
        )
        self.n_eff = self.n * (self.pd**2 + 2.0 * self.a2 * self.pd) / self.cov_u_sum
        self._diffuse = None

    @property
    def diffuse(self):
        if self._diffuse is None:
            self._diffuse = diffuse(self.g, self.rate, self.model)
        return self._diffuse

    def result(self, name, value, expected, unit, detail, *, law, z, m=1, scale=1.0, **null_extra):
        """A CheckResult whose p-value is law_sf(z / c, m), c the calibration factor of ``name``."""
        c = nulls.factor(name)
        null = {"law": law, "m": int(m), "z": finite(z), "scale": c * scale, "calibration_factor": c}
        null.update(null_extra)
        p = nulls.pvalue(law, z / c, m)
        tol = nulls.tolerance_at(null, self.level)
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
                       "measured_db": db(m), "expected_db": db(p_model),
                       "source": "Isserlis: var mean|g|^2 = (1/N) sum (1-|k|/N) cov(|g0|^2, |gk|^2)"},
                      law="normal", z=abs(m - p_model) / sd, scale=sd / p_model)


def _check_k_factor(ctx):
    name = "k_factor"
    if ctx.k == 0:
        return na(name, ctx.tap, "not applicable: Rayleigh tap (K = 0)", ctx.level)
    k_hat = estimators.k_factor_moments(ctx.g)
    sd = nulls.k_sd(ctx.k, ctx.model.mean_power) / math.sqrt(ctx.n_eff)
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


def autocorrelation_curve(g, rate_hz, model: TapModel, *, periodic=False) -> dict:
    """The numbers the ``autocorrelation`` check judges, for a figure to draw.

    ``lag_s`` (lags 1 .. 3/f_D), ``measured`` (complex r_hat(k) of the diffuse
    part, normalised), ``expected`` (the model's r(k)) and the standard
    deviations ``sd_real`` and ``sd_imag`` of their parts (Bartlett, with the
    exact r); the check's tolerance at a lag is its critical score times these.
    """
    g = estimators._record(g)
    rate_hz, n = float(rate_hz), g.size
    r = nulls.lags_head(model.spectrum, rate_hz, n, bool(periodic),
                        _autocorrelation_lag_count(n, rate_hz, model.spectrum.band_edge_hz))
    k, rho, rk, sd_re, sd_im = _autocorrelation_numbers(diffuse(g, rate_hz, model), rate_hz, model.spectrum, r,
                                                        bool(periodic))
    return {"lag_s": k / rate_hz, "measured": rho[k], "expected": rk, "sd_real": sd_re, "sd_imag": sd_im}


def _autocorrelation_numbers(record, rate, spectrum, r, periodic):
    n = record.size
    n_lags = _autocorrelation_lag_count(n, rate, spectrum.band_edge_hz)
    rh = estimators.autocorrelation(record, n_lags, periodic=periodic)
    rho = rh / rh[0].real
    k = np.arange(1, n_lags)
    s0, c1, c2 = nulls.bartlett_sums(spectrum, rate, n, periodic, n_lags)
    rk = r[k]
    total = s0 * (1.0 + rk**2) - 2.0 * rk * c1[k]
    pseudo = c2[k] - 2.0 * rk * c1[k] + rk**2 * s0
    sd_re = np.sqrt(np.maximum((total + pseudo) / (2.0 * n), 1e-300))
    sd_im = np.sqrt(np.maximum((total - pseudo) / (2.0 * n), 1e-300))
    return k, rho, rk, sd_re, sd_im


def _check_autocorrelation(ctx):
    k, rho, rk, sd_re, sd_im = _autocorrelation_numbers(ctx.diffuse, ctx.rate, ctx.model.spectrum, ctx.r, ctx.periodic)
    n_lags = k.size + 1
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


def psd_curve(g, rate_hz, model: TapModel) -> dict:
    """The numbers the ``doppler_psd`` check judges, for a figure to draw.

    ``frequency_hz``, ``measured`` (Welch PSD of the diffuse part over its
    sample power, Hann at 50 %), ``expected`` (the exact spectrum through the
    window), ``judged`` (the bins the check reads), ``segments`` and ``nu``
    (the Gamma law's shape); ``enough`` is False when the record has fewer
    than :data:`PSD_MIN_SEGMENTS` segments (the check does not apply; the
    estimate is still given, for a figure to show unjudged).
    """
    g = estimators._record(g)
    return _psd_numbers(diffuse(g, float(rate_hz), model), float(rate_hz), model.spectrum)


def _psd_numbers(s, rate, spectrum):
    n, fd = s.size, spectrum.band_edge_hz
    seg_s = min(1.0 / (PSD_RESOLUTION_DOPPLER * fd), n / rate / 10.0)
    nperseg = max(16, int(round(seg_s * rate)))
    n_seg = (n - nperseg) // (nperseg - nperseg // 2) + 1
    out = {"segments": n_seg, "nperseg": nperseg, "nu": n_seg / (1.0 + 2.0 * HANN_OVERLAP_CORRELATION**2),
           "enough": n_seg >= PSD_MIN_SEGMENTS}
    f, p_hat = estimators.welch_psd(s, rate, nperseg)
    power = estimators.mean_power(s)
    expected = nulls.expected_welch(spectrum, rate, nperseg)
    keep = (expected >= PSD_MIN_RELATIVE * expected.max()) & (np.abs(f) <= fd)
    out.update(frequency_hz=f, measured=p_hat / power, expected=expected, judged=keep, psd=p_hat, power=power)
    return out


def _check_psd(ctx):
    name = "doppler_psd"
    curve = _psd_numbers(ctx.diffuse, ctx.rate, ctx.model.spectrum)
    n_seg, nperseg, nu = curve["segments"], curve["nperseg"], curve["nu"]
    if not curve["enough"]:
        return na(name, ctx.tap, f"not enough data: {n_seg} Welch segments < {PSD_MIN_SEGMENTS}", ctx.level)
    f, keep = curve["frequency_hz"], curve["judged"]
    ratio = curve["psd"][keep] / (curve["power"] * curve["expected"][keep])
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
                       "worst_deviation_db": db(float(ratio[worst])),
                       "max_abs_deviation_db": float(np.max(np.abs(10 * np.log10(ratio)))),
                       "source": "Welch 1967 (Hann, 50 %), expected = exact spectrum through the window; "
                                 + _autocorrelation_source(ctx.model.spectrum)},
                      law="normal", z=float(z[worst]), m=int(keep.sum()))


def _check_out_of_band(ctx):
    name = "out_of_band_power"
    edge = OUT_OF_BAND_FACTOR * ctx.fd
    if ctx.rate / 2.0 <= edge * 1.01:
        return na(name, ctx.tap, f"not applicable: no band beyond 1.05 f_D below Nyquist ({ctx.rate / 2:g} Hz)",
                   ctx.level)
    seg = int(round(256.0 * ctx.rate / ctx.fd))
    seg = min(seg, ctx.n // 4)
    df = ctx.rate / seg
    if (edge - ctx.fd) < 8 * df:
        return na(name, ctx.tap, "not enough data: Welch resolution too coarse for the 1.05 f_D edge", ctx.level)
    f, p_hat = estimators.welch_psd(ctx.diffuse, ctx.rate, seg, window=("kaiser", 14.0))
    ratio = estimators.out_of_band_ratio(f, p_hat, ctx.fd, factor=OUT_OF_BAND_FACTOR)
    value = db(ratio)
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
    plan = _CrossingPlan(ctx.g, ctx.rate, ctx.model, ctx.periodic)
    up, kept = plan.up, plan.kept
    n_exp = level_crossing_rate(rho, **kw) * kept / ctx.rate
    use = n_exp >= MIN_EXPECTED_CROSSINGS
    if not use.any():
        why = f"not enough data: fewer than {MIN_EXPECTED_CROSSINGS:g} expected crossings at every level"
        return [na(n, ctx.tap, why, ctx.level) for n in names]
    duration = kept / ctx.rate
    levels, rho, n_exp = levels[use], rho[use], n_exp[use]
    counts, below = plan.tally(levels * levels)
    below = below / (kept * up)
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


class _CrossingPlan:
    """Where crossings are counted: |g|^2 interpolated to >= 64 f_D, the ends an aperiodic record's
    interpolation cannot see dropped, at most MAX_CROSSING_PERIODS Doppler periods (bounded memory)."""

    def __init__(self, g, rate, model, periodic):
        fd = model.spectrum.band_edge_hz
        self.up = int(max(1, math.ceil(CROSSING_RATE_DOPPLER * fd / rate)))
        limit = int(MAX_CROSSING_PERIODS * rate / fd)
        if g.size > limit:
            g, periodic = g[:limit], False
        self.g, self.periodic = g, periodic
        self.band = max(fd, abs(model.los_doppler_hz)) / rate
        self.trim = 0 if periodic else max(int(math.ceil(4.0 * rate / fd)),
                                           estimators.interpolator_reach(self.up, self.band))
        self.kept = g.size - 2 * self.trim
        self.duration_s = self.kept / rate

    def tally(self, squared_levels):
        """Upward crossings of each level^2 by |g|^2 on the dense grid (float32), and its samples below each.

        The dense |g|^2 is made and counted block by block
        (:func:`emucompile.verify.estimators.power_upsampled_blocks`), each
        block's count starting from the previous block's last sample (and, for
        a periodic record, the last sample's step to the first: the crossing
        across the wrap counts), so the memory is one block's.
        """
        levels = np.asarray(squared_levels, dtype=np.float32)
        counts, below = np.zeros(levels.shape), np.zeros(levels.shape)
        first = last = None
        for part in estimators.power_upsampled_blocks(self.g, self.up, self.band, periodic=self.periodic,
                                                      start=self.trim, stop=self.g.size - self.trim):
            if levels.size <= estimators.DIRECT_CROSSING_LEVELS:
                below += [np.count_nonzero(part < level) for level in levels.ravel()]
            else:
                below += np.searchsorted(np.sort(part), levels, side="left")
            steps = part if last is None else np.concatenate([last, part])
            counts += estimators.upward_crossing_counts(steps, levels)
            first = part[:1] if first is None else first
            last = part[-1:]
        if self.periodic and last is not None:
            counts += estimators.upward_crossing_counts(np.concatenate([last, first]), levels)
        return counts, below


def crossing_rates(g, rate_hz, model: TapModel, levels_rho, *, periodic=False):
    """Upward crossings per second of |g| through ``levels_rho`` x the model's RMS envelope, counted as the
    ``level_crossing_rate`` check counts them (same interpolation, same samples); and the counted duration (s)."""
    g = estimators._record(g)
    plan = _CrossingPlan(g, float(rate_hz), model, bool(periodic))
    levels = np.asarray(levels_rho, dtype=float) * math.sqrt(model.mean_power)
    return plan.tally(levels * levels)[0] / plan.duration_s, plan.duration_s


def _check_phase(ctx):
    name = "phase_uniformity"
    if ctx.k != 0:
        return na(name, ctx.tap, "not applicable: the phase of a Rician tap is not uniform", ctx.level)
    c1, c2 = estimators.circular_moments(ctx.g, (1, 2))
    v1, v2 = nulls.phase_variances(ctx.model.spectrum, ctx.rate, ctx.n, ctx.periodic)
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
    tap = label(tap)
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
                                   {"measured_db": db(m), "expected_db": db(model.mean_power),
                                    "source": "static tap: |g|^2 is constant; float32 rounding ~1e-7"}))
        else:
            out.append(na(n, tap, "not applicable: static tap (no fading)", None))
    return out


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


__all__ = ["check_tap", "null_sum_tasks", "autocorrelation_curve", "psd_curve", "crossing_rates"]
