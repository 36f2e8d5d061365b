"""Verdicts on estimated tap gains: against the loaded bundle (naming the fault) and against the profile.

**Against the bundle.** The loaded gains are what the emulator should apply
at each output sample (``hold`` or ``linear`` between update instants, as
:mod:`emucompile.apply.replay` does); a period's estimate is their average over the
period's L samples (the exact integral of the piecewise-constant or linear
gain). Alignment: the bundle time of the capture's start, coarse by
correlating the measured and loaded power envelopes of every tap (immune to a
frequency offset), fine by the largest |sum_t z(t) exp(-j 2 pi df t)| over a
grid of offsets, z the sum over taps of measured x conj(expected): that peak
gives the frequency offset df jointly (unless it is given), and the common
complex gain c (the set-up's gain and phase) follows. Per tap and link the
normalised error NE = sum |g_hat - c e|^2 / sum |c e|^2 is compared with what
the estimation noise alone gives: n sigma^2 chi^2_{2n} / 2 (independent
complex Gaussian errors of the measured variance sigma^2 in each of n
periods), its 1 - alpha quantile (alpha = false alarm / number of taps and
links, Bonferroni), plus the limit the lab allows (``limit_db``, default
-30 dB: 16-bit coefficients and the right interpolation reproduce a bundle
far better; every fault below costs more). A failed comparison is explained
by the first hypothesis that fits: taps swapped (the measured tap follows
another's loaded gains), a missing tap (its gain under -15 dB of the
loaded), a halved update rate or the other interpolation (the alternative
passes where the nominal fails), a power error (one scale per tap makes it
pass), a Doppler error or a wrong bundle (no tap follows its loaded gains;
Doppler when the measured Doppler scale or the profile's Doppler checks
disagree with the profile).

**Against the profile.** :func:`emucompile.verify.run.verify_gains` on the
estimated gains averaged over M periods (M chosen so that the record rate
lies in [8, 16) x the largest Doppler: verify then uses it as it is, and the
estimation noise stays white at that rate, variance sigma^2 / M), with each
tap's theory carrying that noise: mean power P + sigma^2, K = direct /
(diffuse + sigma^2), the envelope law Rician with diffuse sigma_d^2 + sigma^2,
the autocorrelation raised at lag 0 only and the Doppler spectrum plus a flat
floor (:class:`NoisySpectrum`). The crossing checks are not applicable where
the noise is above 1e-4 of the diffuse power (crossings of a noisy envelope
through the checks' interpolator are not modelled). The set-up's gain is
divided out first (c from the bundle; without a bundle the power of the
taps, less the noise, scaled to the profile's total), so mean-power checks
judge the taps' relative powers.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy import fft as sp_fft
from scipy import optimize, stats

from emucompile.errors import InputError
from emucompile.verify import run as verify
from emucompile.verify.tolerance import CheckResult, TapModel

DEFAULT_LIMIT_DB = -30.0
MISSING_TAP_DB = -15.0
UNCORRELATED = 0.5
"""A tap whose measured gains correlate with its loaded ones below this (|rho|) does not follow them."""
CROSSING_NOISE_LIMIT = 1e-4
COARSE_PERIODS = 4096
COARSE_KEEP = 3
"""The bundle's alignment grid is scored on about COARSE_PERIODS evenly spread periods, its COARSE_KEEP best
points on all of them (:func:`_coarse_to_fine`)."""
DOPPLER_SCALE_LIMIT = 0.05
"""|measured Doppler scale - 1| beyond which an unfollowed bundle is called a Doppler error. A choice between the
fit's spread on correct captures and the 10 % error the acceptance run must name (tools/acceptance_loop.py prints
the measured scales of both); with the Doppler checks against the profile it only names the fault, the verdict
is already a fail."""


# -- the bundle -------------------------------------------------------------------------------------------


class _Integral:
    """Running integral of a gain record (rows at k / rate) held or linear between rows; averages over windows."""

    def __init__(self, gains, rate_hz: float, mode: str):
        g = np.asarray(gains, dtype=np.complex128)
        self.g, self.rate, self.mode = g, float(rate_hz), mode
        if mode == "hold":
            steps = g / self.rate
        else:
            steps = (g[:-1] + g[1:]) / (2.0 * self.rate)
        self.c = np.concatenate([np.zeros((1,) + g.shape[1:], g.dtype), np.cumsum(steps, axis=0)])

    def _locate(self, t):
        n = self.g.shape[0]
        x = np.clip(np.asarray(t, float) * self.rate, 0.0, n - 1.0)
        m = np.minimum(np.floor(x).astype(int), n - (1 if self.mode == "hold" else 2))
        return m, (x - m)[(...,) + (None,) * (self.g.ndim - 1)]

    def ends(self, t):
        """(integral from 0 to t, value at t) at the times t (n,): (n, columns) each, one look-up for both.

        Computed column by column over time, (columns, n) in memory, returned as
        its transpose: element-wise work on long rows, not on n rows of a few
        columns (numpy's inner loop would run over the columns)."""
        if self.g.ndim != 2:
            return self.at(t), self.value(t)
        if not hasattr(self, "_rows"):
            self._rows = np.ascontiguousarray(self.g.T), np.ascontiguousarray(self.c.T)
        g_rows, c_rows = self._rows
        n = self.g.shape[0]
        x = np.clip(np.asarray(t, float) * self.rate, 0.0, n - 1.0)
        m = np.minimum(np.floor(x).astype(int), n - (1 if self.mode == "hold" else 2))
        u = (x - m).astype(complex)  # complex x complex: no casting inside the loops
        g = np.take(g_rows, m, axis=1)
        integral = np.take(c_rows, m, axis=1)
        if self.mode == "hold":
            integral += g * (u / self.rate)
            return integral.T, g.T
        d = np.take(g_rows, m + 1, axis=1)
        d -= g  # the change over the update interval
        part = d * (0.5 * u)
        part += g
        part *= u / self.rate
        integral += part
        d *= u
        d += g
        return integral.T, d.T

    def at(self, t):
        m, u = self._locate(t)
        if self.mode == "hold":
            return self.c[m] + u / self.rate * self.g[m]
        return self.c[m] + (u * self.g[m] + 0.5 * u ** 2 * (self.g[m + 1] - self.g[m])) / self.rate

    def value(self, t):
        m, u = self._locate(t)
        if self.mode == "hold":
            return self.g[m]
        return self.g[m] + u * (self.g[m + 1] - self.g[m])

    def mean(self, t0, t1):
        return (self.at(t1) - self.at(t0)) / (np.asarray(t1) - np.asarray(t0))[(...,) + (None,) * (self.g.ndim - 1)]


@dataclass
class BundleJudgement:
    checks: list
    passed: bool
    faults: list
    offset_s: float
    envelope_correlation: float
    cfo_hz: float
    cfo_estimated: bool
    gain: complex
    between_updates: str
    within_db: float | None
    limit_db: float
    per_tap: list
    expected: np.ndarray = field(repr=False)
    corrected: np.ndarray = field(repr=False)
    doppler_scale: float | None = None
    notes: list = field(default_factory=list)

    def to_dict(self) -> dict:
        return {
            "passed": self.passed, "faults": self.faults, "within_db": self.within_db, "limit_db": self.limit_db,
            "bundle_offset_s": self.offset_s, "envelope_correlation": self.envelope_correlation,
            "cfo_hz": self.cfo_hz, "cfo_estimated": self.cfo_estimated,
            "gain_db": _db(abs(self.gain) ** 2), "gain_phase_deg": math.degrees(np.angle(self.gain)),
            "between_updates": self.between_updates, "doppler_scale": self.doppler_scale,
            "per_tap": self.per_tap, "checks": [c.to_dict() for c in self.checks], "notes": self.notes,
        }


def judge_bundle(estimate, design, bundle, *, between_updates: str | None = None, cfo_hz: float | None = None,
                 limit_db: float = DEFAULT_LIMIT_DB, false_alarm: float = 0.01) -> BundleJudgement:
    """Compare estimated gains with the loaded ones (see the module notes); faults named in ``faults``."""
    manifest = bundle.manifest
    rate_u = float(manifest["update_rate_hz"])
    loaded = np.asarray(bundle.tap_gains)
    if loaded.shape[1:] != estimate.gains.shape[1:]:
        raise _input_error(f"the capture gives {estimate.gains.shape[1]} rx x {estimate.gains.shape[2]} tx x "
                           f"{estimate.gains.shape[3]} taps, the bundle {list(loaded.shape[1:])}")
    target = (manifest.get("target") or {}).get("between_updates") if isinstance(manifest.get("target"), dict) else None
    mode = between_updates or target or "linear"
    n, n_rx, n_tx, n_taps = estimate.gains.shape
    g_hat = estimate.gains.reshape(n, -1)
    t = estimate.times_s
    half = design.period_samples / design.sample_rate_hz / 2.0
    if t[-1] - t[0] > loaded.shape[0] / rate_u:
        raise _input_error(f"the capture ({t[-1] - t[0]:.3g} s of probe) is longer than the bundle "
                           f"({loaded.shape[0] / rate_u:.3g} s): a looping bundle is not aligned here")
    integral = _Integral(loaded.reshape(loaded.shape[0], -1), rate_u, mode)
    offset, rho_env = _coarse_offset(g_hat, t, loaded.reshape(loaded.shape[0], -1), rate_u)

    ramp = estimate.ramp_response
    period = design.period_samples
    links = n_rx

    steps, step_samples = estimate.step_response, estimate.step_samples
    sample_rate = design.sample_rate_hz

    abutting = n > 1 and np.allclose(np.diff(t), 2.0 * half, rtol=1e-9, atol=0.0)

    def expected_at(shift, source=integral, rows=slice(None)):
        """What the estimator gives for the loaded gains over each period (estimate.py, _time_response):
        linear between updates, their mean plus the leak of their slope; held, the value at the period's start
        plus the estimate of each step inside it. ``rows``: the periods (all by default)."""
        start, stop = t[rows] - half + shift, t[rows] + half + shift
        n = start.size
        if source.mode == "hold" and steps is not None:
            out = source.value(start).reshape(n, links, -1).copy()
            first = np.ceil(np.clip(start, 0.0, None) * source.rate).astype(int)
            for k in range(int(math.ceil(period / sample_rate * source.rate)) + 1):
                index = first + k
                inside = (index / source.rate < stop) & (index > 0) & (index < source.g.shape[0])
                if not inside.any():
                    continue
                rows = np.flatnonzero(inside)
                tau = (index[rows] / source.rate - start[rows]) * sample_rate
                position = np.clip(np.searchsorted(step_samples, tau), 0, step_samples.size - 1)
                delta = (source.g[index[rows]] - source.g[index[rows] - 1]).reshape(rows.size, links, -1)
                out[rows] += np.einsum("rlj,rji->rli", delta, steps[position])
            return out.reshape(n, -1)
        if abutting and (rows.step or 1) == 1:  # each period ends where the next begins: one look-up per edge
            at, value = source.ends(np.append(start, stop[-1:]))
            at_start, at_stop, value_start, value_stop = at[:-1], at[1:], value[:-1], value[1:]
        else:
            (at_start, value_start), (at_stop, value_stop) = source.ends(start), source.ends(stop)
        mean = (at_stop - at_start) / (stop - start)[:, None]
        if ramp is None:
            return mean
        slope = (value_stop - value_start) / period
        return mean + (slope.reshape(n * links, -1) @ ramp).reshape(n, -1)  # one 2-D product, not n small ones

    if cfo_hz is not None:
        g_hat = g_hat * np.exp(-2j * np.pi * cfo_hz * t)[:, None]
    sigma2 = estimate.noise_variance.reshape(-1)
    alpha = false_alarm / g_hat.shape[1]
    limit = 10.0 ** (limit_db / 10.0)
    quantile = stats.chi2.ppf(1.0 - alpha, 2 * n) / 2.0

    def fit(source):
        """Offset, frequency offset and common gain for one hypothesis of the update behaviour; the errors."""
        def products(shift, rows=slice(None)):
            """g_hat conj(e) per tap, weighted so that sum |.|^2 is the likelihood of a free gain per tap:
            |<g, e>|^2 / (||e||^2 sigma^2) (a tap that does not follow adds about 1, one that does ~ n P / sigma^2)."""
            e = expected_at(shift, source, rows)
            weight = 1.0 / np.sqrt(np.maximum(np.sum(np.abs(e) ** 2, axis=0) * sigma2, 1e-300))
            return g_hat[rows] * np.conj(e) * weight

        # the frequency offset by one line search at the coarse offset, the offset then at that frequency
        # (one FFT per fit, not one per trial offset), the frequency once more at the offset found
        rotation = np.ones(n) if cfo_hz is not None else np.exp(
            -2j * np.pi * _line_peak(products(offset), estimate.rate_hz)[1] * t)

        turned = np.conj(rotation[:, None] * g_hat)

        def score(shift, rows=slice(None)):
            """sum over taps of |sum_t rotation g_hat conj(e)|^2 / (||e||^2 sigma^2): products summed, unformed."""
            e = expected_at(shift, source, rows)
            inner = np.einsum("tc,tc->c", turned[rows], e)
            energy = np.einsum("tc,tc->c", e.real, e.real) + np.einsum("tc,tc->c", e.imag, e.imag)
            return float(np.sum(np.abs(inner) ** 2 / np.maximum(energy * sigma2, 1e-300)))

        grid = offset + np.linspace(-2.0, 2.0, 41) / rate_u
        best = _coarse_to_fine(score, grid, n)
        found = optimize.minimize_scalar(lambda shift: -score(shift), method="bounded",
                                         bounds=(grid[max(best - 1, 0)], grid[min(best + 1, grid.size - 1)]),
                                         options={"xatol": 1e-3 / rate_u})
        shift = float(found.x)
        expected = expected_at(shift, source)
        df = 0.0 if cfo_hz is not None else _line_peak(products(shift), estimate.rate_hz)[1]
        g = g_hat * np.exp(-2j * np.pi * df * t)[:, None]
        energy = np.sum(np.abs(expected) ** 2, axis=0)
        product = np.sum(g * np.conj(expected), axis=0)
        a = product / np.where(energy > 0, energy, np.inf)
        rho = np.abs(product) / np.sqrt(np.maximum(np.sum(np.abs(g) ** 2, axis=0) * energy, 1e-300))
        follows = rho > UNCORRELATED
        magnitude = float(np.median(np.abs(a[follows] if follows.any() else a)))
        gain = magnitude * np.exp(1j * np.angle(np.sum(a * energy))) if magnitude > 0 else 1.0
        reference = gain * expected
        ref_energy = np.maximum(np.sum(np.abs(reference) ** 2, axis=0), 1e-300)
        ne = np.sum(np.abs(g - reference) ** 2, axis=0) / ref_energy
        bound = sigma2 * quantile / ref_energy + limit
        return {"offset": shift, "df": df, "g": g, "expected": expected, "a": a, "rho": rho, "follows": follows,
                "gain": gain, "reference": reference, "ref_energy": ref_energy, "ne": ne, "tolerance": bound,
                "passed": ne <= bound}

    nominal = fit(integral)
    offset, df, g_hat, expected, a, rho, follows, gain, reference, ref_energy, ne = (
        nominal[k] for k in ("offset", "df", "g", "expected", "a", "rho", "follows", "gain", "reference",
                             "ref_energy", "ne"))
    noise_mean = n * sigma2 / ref_energy
    noise_bound = sigma2 * quantile / ref_energy
    passed = nominal["passed"]
    checks, per_tap = [], []
    for col in range(g_hat.shape[1]):
        rx, tx, tap = np.unravel_index(col, (n_rx, n_tx, n_taps))
        label = f"tap {tap}" + ("" if n_rx * n_tx == 1 else f" rx{rx} tx{tx}")
        excess = ne[col] - noise_mean[col]
        record = {"tap": int(tap), "rx": int(rx), "tx": int(tx), "normalised_error_db": _db(ne[col]),
                  "noise_explains_db": _db(noise_mean[col]), "excess_db": _db(excess),
                  "tolerance_db": _db(noise_bound[col] + limit), "correlation": float(rho[col]),
                  "relative_gain_db": _db(abs(a[col] / gain) ** 2) if gain else None, "passed": bool(passed[col])}
        per_tap.append(record)
        checks.append(CheckResult(
            f"bundle error [{label}]", int(tap), float(ne[col]), float(noise_mean[col]),
            float(noise_bound[col] + limit), None, bool(passed[col]),
            None if passed[col] else f"{_db(ne[col]):.1f} dB error against the loaded gains, "
                                     f"tolerance {_db(noise_bound[col] + limit):.1f} dB",
            alpha, None, "fraction of tap power",
            {"noise_quantile": float(noise_bound[col]), "limit": limit, "periods": int(n),
             "source": "noise alone: sigma^2 chi^2_2n / 2 (independent complex Gaussian errors), Bonferroni"}))
    excess = np.maximum(ne - noise_mean, 0.0)
    within = _db(float(np.max(excess))) if excess.max() > 0 else None
    judgement = BundleJudgement(checks, bool(passed.all()), [], float(offset), float(rho_env),
                                float(df if cfo_hz is None else cfo_hz),
                                cfo_hz is None, complex(gain), mode, within, float(limit_db), per_tap,
                                expected.reshape(n, n_rx, n_tx, n_taps), g_hat.reshape(n, n_rx, n_tx, n_taps))
    if not judgement.passed:
        judgement.faults = _name_faults(
            g_hat, reference, ne, noise_bound + limit, a / gain if gain else a, rho, follows, (n_rx, n_tx, n_taps),
            fit, loaded.reshape(loaded.shape[0], -1), rate_u, mode)
    return judgement


def _name_faults(g_hat, reference, ne, tolerance, relative, rho, follows, shape, fit, loaded, rate_u, mode):
    n_rx, n_tx, n_taps = shape
    failing = set(np.flatnonzero(ne > tolerance).tolist())
    faults = []
    if not follows.any():
        return [{"fault": "unfollowed", "taps": sorted(failing),
                 "text": "no tap follows its loaded gains (|correlation| <= "
                         f"{UNCORRELATED:g} everywhere): a wrong bundle or a Doppler error"}]
    # alternative update behaviour (alignment, offset and gain fitted again): every tap passes under it
    for alt_mode, factor in ((mode, 2), ("hold" if mode == "linear" else "linear", 1),
                             ("hold" if mode == "linear" else "linear", 2)):
        if np.all(fit(_Integral(loaded[::factor], rate_u / factor, alt_mode))["passed"]):
            what = (f"coefficients updated at half the rate ({rate_u / 2:g} Hz, {alt_mode} between updates)"
                    if factor == 2 else f"{alt_mode} between updates instead of {mode}")
            return [{"fault": "update_rate" if factor == 2 else "interpolation", "taps": sorted(failing),
                     "text": f"the emulator's gains fit the bundle with {what}"}]
    explained = set()
    for link in range(n_rx * n_tx):
        cols = link * n_taps + np.arange(n_taps)
        gh = g_hat[:, cols]
        ref = reference[:, cols]
        cross = np.abs(gh.conj().T @ ref) ** 2 / np.maximum(
            np.outer(np.sum(np.abs(gh) ** 2, 0), np.sum(np.abs(ref) ** 2, 0)), 1e-300)
        for i in range(n_taps):
            j = int(np.argmax(cross[i]))
            if j > i and int(np.argmax(cross[j])) == i and cols[i] in failing and cols[j] in failing \
                    and cross[i, j] > UNCORRELATED ** 2 and cross[j, i] > UNCORRELATED ** 2:
                faults.append({"fault": "swapped", "taps": [i, j], "link": link,
                               "text": f"taps {i} and {j} swapped" + _link_text(link, shape)})
                explained |= {cols[i], cols[j]}
    if explained:  # fit again with the swapped taps' gains where the emulator put them: the rest judged then
        order = np.arange(g_hat.shape[1])
        for fault in faults:
            i, j = (fault["link"] * n_taps + t for t in fault["taps"])
            order[i], order[j] = order[j], order[i]
        again = fit(_Integral(loaded[:, order], rate_u, mode))
        if np.all(again["passed"]):
            return faults
        g_hat, reference, ne, tolerance = again["g"], again["reference"], again["ne"], again["tolerance"]
        relative = again["a"] / again["gain"] if again["gain"] else again["a"]
        rho = again["rho"]
        failing = set(np.flatnonzero(~again["passed"]).tolist()) - explained
    for col in sorted(failing - explained):
        tap, link = col % n_taps, col // n_taps
        level = _db(abs(relative[col]) ** 2)
        residual = np.sum(np.abs(g_hat[:, col] - relative[col] * reference[:, col]) ** 2) / max(
            np.sum(np.abs(relative[col] * reference[:, col]) ** 2), 1e-300)
        if level is None or level < MISSING_TAP_DB:
            shown = level if level is not None else -math.inf
            faults.append({"fault": "missing", "taps": [tap], "link": link, "level_db": level,
                           "text": f"tap {tap} missing" + _link_text(link, shape)
                                   + f" (measured {shown:.1f} dB of its loaded power)"})
        elif residual <= tolerance[col]:
            faults.append({"fault": "power", "taps": [tap], "link": link, "level_db": level,
                           "text": f"tap {tap} power error {level:+.2f} dB" + _link_text(link, shape)})
        else:
            faults.append({"fault": "unexplained", "taps": [tap], "link": link,
                           "text": f"tap {tap}" + _link_text(link, shape) + f": {_db(ne[col]):.1f} dB error "
                                   f"(correlation {rho[col]:.2f}, gain {level:+.2f} dB), cause not identified"})
    return faults


def _coarse_to_fine(score, grid, n):
    """The grid point of the largest score(shift) over all n periods, searched coarse to fine.

    Every grid point is scored on every ``n // COARSE_PERIODS``-th period (the
    score is a sum over periods of a product that varies over the channel's
    coherence time, many periods: a regular subset ranks the shifts as the
    whole does); the :data:`COARSE_KEEP` best are scored on all periods and
    the best of those is returned (index into ``grid``). With n <=
    COARSE_PERIODS it is the exhaustive search.
    """
    stride = max(1, n // COARSE_PERIODS)
    if stride == 1:
        return int(np.argmax([score(shift) for shift in grid]))
    coarse = np.array([score(shift, slice(None, None, stride)) for shift in grid])
    shortlist = np.argsort(coarse)[::-1][:COARSE_KEEP]
    return int(max(shortlist, key=lambda i: score(grid[i])))


def _link_text(link, shape):
    n_rx, n_tx, _ = shape
    return "" if n_rx * n_tx == 1 else f" on rx{link // n_tx} tx{link % n_tx}"


def _coarse_offset(g_hat, t, loaded, rate_u):
    """Bundle time minus capture time, to one update interval, and the envelope correlation at it."""
    step = 1.0 / rate_u
    grid = np.arange(t[0], t[-1], step)
    if grid.size < 4:
        return 0.0, math.nan
    total = np.zeros(loaded.shape[0] - grid.size + 1 if loaded.shape[0] >= grid.size else 1)
    columns = 0
    for col in range(g_hat.shape[1]):
        m = np.interp(grid, t, np.abs(g_hat[:, col]) ** 2)
        p = np.abs(loaded[:, col]) ** 2
        m = m - m.mean()
        if not (np.std(m) > 0 and np.std(p) > 0):
            continue
        m /= np.linalg.norm(m)
        size = sp_fft.next_fast_len(p.size + m.size)
        corr = np.real(sp_fft.ifft(sp_fft.fft(p, size) * np.conj(sp_fft.fft(m, size))))[: total.size]
        # local normalisation of the loaded side: sqrt(sum over the window of (p - local mean)^2)
        c1 = np.concatenate([[0.0], np.cumsum(p)])
        c2 = np.concatenate([[0.0], np.cumsum(p * p)])
        w = m.size
        s1 = c1[w:w + total.size] - c1[:total.size]
        s2 = c2[w:w + total.size] - c2[:total.size]
        norm = np.sqrt(np.maximum(s2 - s1 ** 2 / w, 1e-300))
        total += corr / norm
        columns += 1
    if not columns:
        return 0.0, math.nan
    total /= columns
    best = int(np.argmax(total))
    return best * step - grid[0], float(total[best])


def _line_peak(z, rate_hz):
    """(sum over columns of |sum_t z exp(-j 2 pi f t)|^2 at its largest, f), |f| < rate / 2, between FFT bins."""
    size = sp_fft.next_fast_len(8 * z.shape[0])
    # complex64, one column at a time (memory: one padded column): the peak's place from float32 powers
    # (relative error ~1e-7) moves by far less than a bin
    spectrum = np.zeros(size)
    for column in np.asarray(z, np.complex64).T:
        line = sp_fft.fft(column, size)
        spectrum += line.real.astype(np.float64) ** 2 + line.imag.astype(np.float64) ** 2
    k = int(np.argmax(spectrum))
    shift = _parabola(spectrum, k)
    f = (k + shift) * rate_hz / size
    if f >= rate_hz / 2:
        f -= rate_hz
    return float(spectrum[k]), float(f)


def _parabola(values, k):
    if 0 < k < len(values) - 1:
        a, b, c = values[k - 1], values[k], values[k + 1]
        denominator = a - 2 * b + c
        if denominator < 0:
            return float(np.clip(0.5 * (a - c) / denominator, -0.5, 0.5))
    return 0.0


# -- Doppler scale --------------------------------------------------------------------------------------


def doppler_scale(gains, rate_hz: float, profile, noise_variance=None) -> float | None:
    """The factor a that best fits the measured autocorrelation of the Rayleigh taps to r(a tau) of the profile.

    Lags 1 .. rate / f_D (one Doppler period; lag 0, raised by the noise, is left
    out); least squares pooled over taps and links. None without a Rayleigh tap.
    """
    n = gains.shape[0]
    flat = gains.reshape(n, -1)
    n_taps = len(profile.taps)
    series = []
    for col in range(flat.shape[1]):
        tap = profile.taps[col % n_taps]
        if tap.fading != "rayleigh" or not tap.max_doppler_hz:
            continue
        spectrum = tap.doppler_spectrum
        lags = np.arange(1, max(2, int(rate_hz / tap.max_doppler_hz)))
        if lags[-1] >= n // 4:
            continue
        g = flat[:, col] - flat[:, col].mean()
        power = np.mean(np.abs(g) ** 2)
        if not power > 0:
            continue
        acf = np.array([np.real(np.vdot(g[:-k], g[k:])) / (n - k) for k in lags]) / power
        series.append((acf, lags / rate_hz, spectrum))
    if not series:
        return None

    def cost(scale):
        total = 0.0
        for acf, tau, spectrum in series:
            shape = np.asarray(spectrum.autocorrelation(scale * tau), float)
            # the noise lowers every lag > 0 by the same factor: fit that factor too (least squares, closed form)
            factor = max(float(np.dot(acf, shape) / max(np.dot(shape, shape), 1e-300)), 0.0)
            total += float(np.sum((acf - factor * shape) ** 2))
        return total

    found = optimize.minimize_scalar(cost, bounds=(0.5, 2.0), method="bounded", options={"xatol": 1e-4})
    return float(found.x)


# -- the profile -------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class NoisySpectrum:
    """A Doppler spectrum plus a flat floor of white estimation noise (fraction ``floor`` of the total)."""

    base: object
    floor: float
    rate_hz: float

    @property
    def kind(self) -> str:
        return self.base.kind

    @property
    def band_edge_hz(self) -> float:
        return self.base.band_edge_hz

    @property
    def rms_doppler_hz(self) -> float:
        return math.sqrt((1.0 - self.floor) * self.base.rms_doppler_hz ** 2 + self.floor * self.rate_hz ** 2 / 12.0)

    def autocorrelation(self, lag_s):
        lag = np.asarray(lag_s, dtype=float)
        at_zero = (np.abs(lag) * self.rate_hz < 0.5).astype(float)
        return (1.0 - self.floor) * np.asarray(self.base.autocorrelation(lag)) + self.floor * at_zero

    def psd(self, frequency_hz):
        f = np.asarray(frequency_hz, dtype=float)
        flat = self.floor / self.rate_hz * (np.abs(f) <= self.rate_hz / 2)
        return (1.0 - self.floor) * np.asarray(self.base.psd(f)) + flat


def noisy_models(profile, noise_variance, rate_hz):
    """Tap index -> TapModel with the estimation noise (variance per tap) in it; static taps None."""
    models = {}
    for i, tap in enumerate(profile.taps):
        try:
            model = TapModel.from_tap(tap)
        except ValueError:
            models[i] = None
            continue
        if model.spectrum is None:
            models[i] = None
            continue
        sigma2 = float(noise_variance[i])
        diffuse = model.diffuse_power + sigma2
        models[i] = TapModel(NoisySpectrum(model.spectrum, sigma2 / diffuse, float(rate_hz)),
                             model.mean_power + sigma2, model.direct_power / diffuse, model.los_doppler_hz)
    return models


def profile_record(estimate, profile, *, gain=None, cfo_hz: float = 0.0):
    """Estimated gains for the profile's checks: set-up gain divided out, M periods averaged.

    Returns (gains (m, n_rx, n_tx, n_taps) complex64, rate, noise variance per tap (n_taps,), M, gain used).
    """
    n = estimate.gains.shape[0]
    g = estimate.gains * np.exp(-2j * np.pi * cfo_hz * estimate.times_s)[:, None, None, None]
    sigma2 = estimate.noise_variance
    if gain is None:
        measured = np.sum(np.mean(np.abs(g) ** 2, axis=0) - sigma2, axis=-1)  # (n_rx, n_tx)
        wanted = sum(t.power_linear for t in profile.taps)
        scale = np.sqrt(np.maximum(measured, 1e-300) / wanted)[..., None]
    else:
        scale = np.full(g.shape[1:3] + (1,), complex(gain))
    g = g / scale
    sigma2 = sigma2 / np.abs(scale) ** 2
    models = noisy_models(profile, np.zeros(len(profile.taps)), estimate.rate_hz)
    band = verify._largest_frequency_hz(profile, models)
    factor = max(1, int(estimate.rate_hz // (verify.RECORD_RATE_FACTOR * band))) if band > 0 else 1
    m = n // factor
    averaged = g[: m * factor].reshape(m, factor, *g.shape[1:]).mean(axis=1)
    noise = np.mean(sigma2, axis=(0, 1)) / factor
    return averaged.astype(np.complex64), estimate.rate_hz / factor, noise, factor, scale


def judge_profile(gains_file, profile, rate_hz, noise, *, false_alarm: float = 0.01):
    """verify's checks on a measured record with the noise in the theory; crossing checks n/a above the limit."""
    models = noisy_models(profile, noise, rate_hz)
    cautions = ["Gains estimated from a capture: the estimation noise (measured from the delay bins outside the "
                "channel's support) is in each check's theory; the set-up's gain is divided out, so mean power "
                "judges the taps' relative powers."]
    result = verify.verify_gains(gains_file, profile, rate_hz, false_alarm=false_alarm, models=models,
                                 cautions=cautions)
    kept = []
    for check in result.checks:
        base = check.name.split(" [")[0]
        model = models.get(check.tap) if isinstance(check.tap, int) else None
        if base in ("level_crossing_rate", "fade_duration") and model is not None \
                and model.spectrum.floor > CROSSING_NOISE_LIMIT and check.passed is not None:
            check = CheckResult(check.name, check.tap, check.value, check.expected, None, None, None,
                                f"not applicable: estimation noise {_db(model.spectrum.floor):.1f} dB of the diffuse "
                                f"power (> {_db(CROSSING_NOISE_LIMIT):.0f} dB): crossings of a noisy envelope are "
                                "not modelled", check.level, None, check.unit, check.detail)
        elif isinstance(check.tap, int) and model is None and profile.taps[check.tap].fading == "static":
            check = CheckResult(check.name, check.tap, None, None, None, None, None,
                                "not applicable: a static tap measured through noise is judged against the "
                                "bundle, sample by sample", check.level, None, check.unit, {})
        kept.append(check)
    result.checks[:] = kept
    return result


def _db(x):
    if x is None or not (x > 0) or not math.isfinite(x):
        return None
    return 10.0 * math.log10(x)


def _input_error(message):
    return InputError(message)
