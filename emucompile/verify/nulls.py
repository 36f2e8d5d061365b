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

Memory: an aperiodic record's sums take r(k) from the closed form
(``spectrum.autocorrelation(k / rate)``) :data:`BLOCK_LAGS` lags at a time and
accumulate, so they hold O(block + lags) values whatever the record's length;
one pass over the lags (:func:`prepare`) computes every sum a tap's checks read.
A periodic record's r is the inverse DFT of all its bin powers, so its sums
read one cached n-long r (:func:`lags_head` gives its first lags), block by block;
a long one is made in blocks in a mapped temporary file
(:func:`emucompile.verify.reference.circular_autocorrelation`).
"""

from __future__ import annotations

import functools
import json
import math
import threading
from collections import OrderedDict
from importlib import resources

import numpy as np
from scipy import fft as sp_fft
from scipy import signal, special, stats

from emucompile.verify import estimators, reference

BLOCK_LAGS = 1 << 15
"""Lags per block of the sums' passes: 256 KiB of float64 per array, so a block's temporaries stay in a
core's L2 cache (benchmarks/README.md: 2^15 was the fastest of 2^14..2^17 at n = 1e7)."""


@functools.lru_cache(maxsize=32)
def lags_head(spectrum, rate_hz, n, periodic, count):
    """The first ``min(count, n)`` lags of the null autocorrelation r_k (cached; read-only).

    The same values as every sum reads: the closed form at k / rate_hz, or a
    periodic record's circular autocorrelation normalised to r_0 = 1.
    """
    count = min(int(count), int(n))
    if periodic:
        r = _circular_lags(spectrum, rate_hz, n)[:count].copy()
    else:
        r = _closed_form(spectrum, rate_hz, 0, count)
    r.flags.writeable = False
    return r


def prepare_task(spectrum, rate_hz, n, periodic, n_lags, pd, a2, los_doppler_hz, phase):
    """:func:`prepare` of these arguments as a zero-argument callable, its sums announced now.

    Whichever task of the same spectrum, rate, length and mode runs first
    computes the sums every task announced so far in its one pass over the
    lags (a Rician and a Rayleigh tap of one spectrum: one pass, not two).
    """
    entry = _entry(spectrum, rate_hz, n, periodic)
    with entry.lock:
        entry.wanted_corr.add(_corr_count(n_lags))
        entry.wanted_omegas.update(_omegas(rate_hz, a2, los_doppler_hz))
        entry.wanted_phase = entry.wanted_phase or bool(phase)
    return functools.partial(prepare, spectrum, rate_hz, n, periodic, n_lags, pd, a2, los_doppler_hz, phase)


def prepare(spectrum, rate_hz, n, periodic, n_lags, pd, a2, los_doppler_hz, phase):
    """Compute, in one pass over the lags, and cache every null sum of one tap's checks.

    Fills the caches of :func:`bartlett_sums` (``n_lags``),
    :func:`power_covariance_sum` (``pd``, ``a2``, ``los_doppler_hz``),
    :func:`phase_variances` (when ``phase``) and :func:`lags_head` (``n_lags``),
    which alone would each evaluate r(k) over every lag again (and the sums
    other taps announced with :func:`prepare_task`).
    """
    _sums(spectrum, rate_hz, n, periodic, n_corr=_corr_count(n_lags), omegas=_omegas(rate_hz, a2, los_doppler_hz),
          phase=phase)
    lags_head(spectrum, rate_hz, n, periodic, n_lags)
    bartlett_sums(spectrum, rate_hz, n, periodic, n_lags)
    power_covariance_sum(spectrum, rate_hz, n, periodic, pd, a2, los_doppler_hz)
    if phase:
        phase_variances(spectrum, rate_hz, n, periodic)


@functools.lru_cache(maxsize=32)
def pair_sum(spectrum_a, spectrum_b, rate_hz, n, periodic=False):
    """sum_k w_k r_a(k) r_b(k): the variance sum of a cross-correlation estimate.

    Aperiodic: weights 1 - |k|/N over |k| < N; periodic: the circular
    autocorrelations of period-N processes over one period.
    """
    if spectrum_a == spectrum_b:
        return _sums(spectrum_a, rate_hz, n, periodic).s0
    total = 0.0
    for s, e, w, ra, _ in _blocks(spectrum_a, rate_hz, n, periodic):
        rb = _circular_lags(spectrum_b, rate_hz, n)[s:e] if periodic else _closed_form(spectrum_b, rate_hz, s, e)
        total += _weighted(w, ra * rb)
    return float(total)


@functools.lru_cache(maxsize=16)
def bartlett_sums(spectrum, rate_hz, n, periodic, n_lags):
    """S0 = sum w r^2, c1(k) = sum_j w_j r_j r_{j+k}, c2(k) = sum_j w_j r_{j+k} r_{j-k} ~ c1(2k).

    Aperiodic: the sums over the two-sided lags t = -(n-1)..n-1 with weights
    1 - |t|/n; periodic: over one period of the circular r.
    """
    sums = _sums(spectrum, rate_hz, n, periodic, n_corr=_corr_count(n_lags))
    corr = sums.corr[_corr_count(n_lags)]
    return sums.s0, corr[: n_lags], corr[: 2 * n_lags: 2]


@functools.lru_cache(maxsize=16)
def phase_variances(spectrum, rate_hz, n, periodic):
    """Variances of the first two circular moments of a circular Gaussian record's phase.

    With x = r_k^2 at each lag: E[e^{j(th_0 - th_k)}] = (pi/4) r 2F1(1/2, 1/2; 2; x) and
    E[e^{2j(th_0 - th_k)}] = (x/2) 2F1(1, 1; 3; x); summed with the lag weights, / n.
    Where x < 2.5e-3 (|r| < 0.05, most lags of a long record) the hypergeometric
    series itself, 8 terms (remainder < 1e-20), instead of ``scipy.special.hyp2f1``.
    """
    sums = _sums(spectrum, rate_hz, n, periodic, phase=True)
    return sums.phase[0] / n, sums.phase[1] / n


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
    omegas = _omegas(rate_hz, a2, los_doppler_hz)
    sums = _sums(spectrum, rate_hz, n, periodic, omegas=omegas)
    total = pd * pd * sums.s0
    if omegas:
        total += 2.0 * a2 * pd * sums.cos[omegas[0]]
    return total


# -- the passes over the lags ----------------------------------------------------------


class _Sums:
    """The sums computed so far for one (spectrum, rate, length, mode): S0, c(k) per count, cos sums, phase."""

    def __init__(self):
        self.lock = threading.Lock()
        self.s0 = None
        self.corr = {}  # n_corr -> c(k), k < n_corr
        self.cos = {}  # omega -> sum_k w_k r_k cos(omega k)
        self.phase = None  # (sum w E1, sum w E2)
        self.wanted_corr, self.wanted_omegas, self.wanted_phase = set(), set(), False  # announced by prepare_task


_SUMS: OrderedDict = OrderedDict()
_SUMS_LOCK = threading.Lock()
_SUMS_KEPT = 32  # (spectrum, rate, length, mode) entries; each holds a few lag-count-long arrays


def _entry(spectrum, rate_hz, n, periodic) -> _Sums:
    key = (spectrum, float(rate_hz), int(n), bool(periodic))
    with _SUMS_LOCK:
        entry = _SUMS.get(key)
        if entry is None:
            entry = _SUMS[key] = _Sums()
            while len(_SUMS) > _SUMS_KEPT:
                _SUMS.popitem(last=False)
        _SUMS.move_to_end(key)
    return entry


def _sums(spectrum, rate_hz, n, periodic, *, n_corr=None, omegas=(), phase=False) -> _Sums:
    """The entry of (spectrum, rate, length, mode), with whatever is asked computed in one pass where missing.

    A pass computes what was announced for the entry (:func:`prepare_task`) along with what is asked.
    """
    entry = _entry(spectrum, rate_hz, n, periodic)
    with entry.lock:  # a second caller of the same entry waits, then finds its sums
        n_corr = None if n_corr is None or n_corr in entry.corr else n_corr
        omegas = tuple(w for w in omegas if w not in entry.cos)
        phase = phase and entry.phase is None
        if entry.s0 is None or n_corr is not None or omegas or phase:
            omegas += tuple(sorted(entry.wanted_omegas - set(omegas) - set(entry.cos)))
            phase = phase or (entry.wanted_phase and entry.phase is None)
            if n_corr is None:
                n_corr = min(entry.wanted_corr - set(entry.corr), default=None)
            s0, corr, cos, phase_sums = _pass(spectrum, float(rate_hz), int(n), bool(periodic), n_corr, omegas, phase)
            entry.s0 = s0 if entry.s0 is None else entry.s0
            if corr is not None:
                corr.flags.writeable = False
                entry.corr[n_corr] = corr
            entry.cos.update(cos)
            entry.phase = phase_sums if phase_sums is not None else entry.phase
    return entry


def forget_sums():
    """Forget the sums of every (spectrum, rate, length, mode) and the periodic records' cached r."""
    with _SUMS_LOCK:
        _SUMS.clear()
    _circular_lags.cache_clear()


def _pass(spectrum, rate_hz, n, periodic, n_corr, omegas, phase):
    """One pass over the lags in blocks: S0, c(k) for k < n_corr (None: not asked), cos sums, phase sums."""
    direct = n_corr is not None and n_corr * 8 < n  # a few lags: direct sums block by block (O(n n_corr))
    reach = n_corr - 1 if direct else 0
    s0 = 0.0
    cos = dict.fromkeys(omegas, 0.0)
    phase_sums = [0.0, 0.0] if phase else None
    corr = np.zeros(n_corr) if direct else None
    head = None
    for s, e, w, r, ahead in _blocks(spectrum, rate_hz, n, periodic, reach):
        s0 += _weighted(w, r * r)
        k = np.arange(s, e)
        for omega in omegas:
            cos[omega] += _weighted(w, r * np.cos(omega * k)) if omega else _weighted(w, r)
        if phase:
            e1, e2 = _phase_terms(r)
            phase_sums[0] += _weighted(w, e1)
            phase_sums[1] += _weighted(w, e2)
        if direct:
            if periodic:  # circular: r_{j+k} wraps to the record's start
                corr += estimators.lagged_sums(r, ahead, n_corr)
            else:
                window_v = ahead * (1.0 - np.arange(s, s + ahead.size) / n)
                corr += estimators.lagged_sums(window_v[: e - s], ahead, n_corr)
                corr += estimators.lagged_sums(r, window_v, n_corr)
                if s == 0:
                    head = ahead[:n_corr], window_v[:n_corr]
    if n_corr is not None and not direct:
        corr = _corr_whole(spectrum, rate_hz, n, periodic, n_corr)
    elif direct and not periodic:
        corr += _negative_lags(*head)
    phase_sums = None if phase_sums is None else tuple(float(x) for x in phase_sums)
    return float(s0), corr, {w: float(x) for w, x in cos.items()}, phase_sums


def _blocks(spectrum, rate_hz, n, periodic, reach=0):
    """(s, e, w, r, ahead) per block of :data:`BLOCK_LAGS` lags s..e-1.

    ``w``: the lag weights (None: all 1, a periodic record); ``r``: r over the
    block; ``ahead``: r over s..e-1+reach, zeros past the record's end (a
    periodic record wraps to its start; ``reach`` < n). An aperiodic block
    evaluates only the lags the previous one did not reach.
    """
    whole = _circular_lags(spectrum, rate_hz, n) if periodic else None
    tail = np.empty(0)
    for s in range(0, n, BLOCK_LAGS):
        e = min(n, s + BLOCK_LAGS)
        if periodic:
            w = None
            ahead = whole[s: e + reach]
            if e + reach > n:
                ahead = np.concatenate([ahead, whole[: e + reach - n]])
        else:
            w = 2.0 * (1.0 - np.arange(s, e) / n)
            if s == 0:
                w[0] = 1.0
            stop = min(n, e + reach)
            fresh = _closed_form(spectrum, rate_hz, s + tail.size, stop)
            ahead = np.concatenate([tail, fresh]) if tail.size else fresh
            tail = ahead[e - s:]
            if stop < e + reach:
                ahead = np.concatenate([ahead, np.zeros(e + reach - stop)])
        yield s, e, w, ahead[: e - s], ahead


def _closed_form(spectrum, rate_hz, start, stop):
    return np.array(spectrum.autocorrelation(np.arange(start, stop) / rate_hz), dtype=float)


@functools.lru_cache(maxsize=8)  # a few records' lengths: 8 x 10 MB at 1.25e6 lags
def _circular_lags(spectrum, rate_hz, n):
    """A periodic record's whole null autocorrelation r_k, k = 0..n-1, r_0 = 1 (read-only)."""
    r = reference.circular_autocorrelation(spectrum, rate_hz, n)  # a long one in a mapped temporary file
    np.divide(r, r[0], out=r)  # in place: no second n-long array
    r.flags.writeable = False
    return r


def _weighted(w, x):
    return float(np.sum(x)) if w is None else float(w @ x)


def _corr_count(n_lags):
    return 2 * n_lags + 2


def _omegas(rate_hz, a2, los_doppler_hz):
    """The direct part's angular frequency per sample, as a 1-tuple (empty without a direct part)."""
    return (2.0 * math.pi * los_doppler_hz / rate_hz,) if a2 > 0 else ()


def _negative_lags(r, v):
    """What the one-sided lagged sums miss of the aperiodic c(k): sum_{s=1}^{k-1} v_s r_{k-s}, less v_0 r_0 at k = 0.

    c(k) = sum_t v_t u_{t+k} over t = -(n-1)..n-1 (u_t = r_|t|, v_t = (1 - |t|/n) u_t) splits into
    sum_{j>=0} v_j r_{j+k} + sum_{j>=0} r_j v_{j+k} (t >= 0, and t <= -k read backwards) and the
    terms with -k < t < 0; the second sum counts t = 0 once more at k = 0.
    """
    inner = np.convolve(np.concatenate([[0.0], v[1:]]), np.concatenate([[0.0], r[1:]]))[: r.size]
    inner[0] -= v[0] * r[0]
    return inner


def _corr_whole(spectrum, rate_hz, n, periodic, n_corr):
    """c(k), k < n_corr, by FFT over the whole record: only where n <= 8 n_corr (memory bounded by the lags)."""
    if periodic:
        r = _circular_lags(spectrum, rate_hz, n)
        spec = sp_fft.rfft(r)
        return sp_fft.irfft(np.abs(spec) ** 2, n)[: n_corr]
    r = _closed_form(spectrum, rate_hz, 0, n)
    two = np.concatenate([r[:0:-1], r])  # lags -(n-1)..n-1
    weighted = two * np.concatenate([(1.0 - np.arange(n - 1, 0, -1) / n), 1.0 - np.arange(n) / n])
    size = estimators._fast_len(2 * two.size)
    a = sp_fft.rfft(weighted, size)
    b = sp_fft.rfft(two, size)
    return sp_fft.irfft(np.conj(a) * b, size)[: n_corr]


def _phase_terms(r):
    """E[e^{j(th_0 - th_k)}] and E[e^{2j(th_0 - th_k)}] at each lag of ``r`` (see :func:`phase_variances`)."""
    r = np.clip(r, -1.0, 1.0)
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
    return e1, e2


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


__all__ = ["lags_head", "prepare", "prepare_task", "forget_sums", "pair_sum", "bartlett_sums", "phase_variances",
           "power_covariance_sum", "expected_welch", "k_sd", "pvalue", "critical", "tolerance_at",
           "calibration_record", "factor", "MIMO_CALIBRATION_FILE", "PHASE_SERIES_X", "BLOCK_LAGS"]
