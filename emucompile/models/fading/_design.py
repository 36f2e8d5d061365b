"""Rate plan, Doppler filter and interpolation chain of the tap-gain generators.

Everything here is deterministic design work done once per plan (no random
numbers, no samples). The constants below fix the numbers a seed produces:
changing any of them changes the output, so it must come with a new
``GENERATOR_VERSION``.

The chain, per tap (f_D its band edge, F_u the update rate)::

    white noise ──► Doppler FIR h0 ──► ↑R1, polyphase low-pass h1 ──► ↑R2, linear ──► F_u
      at f_i          at f_i               at f_1 = R1 f_i               interpolation

with f_i = F_u / (R1 R2) a small multiple of f_D (3 to 12) and f_1 >= 32 f_D
whenever R2 > 1, so that the cheap linear stage runs where the signal is
already heavily oversampled. The sum-of-sinusoids generator reuses the same
chain with its sinusoids evaluated exactly at f_i in place of the first box.

References
----------
.. [YB2000] D. J. Young and N. C. Beaulieu, "The generation of correlated
   Rayleigh random variates by inverse discrete Fourier transform", IEEE
   Trans. Commun. 48(7), 2000: a Doppler filter whose squared magnitude is
   the Doppler spectrum applied to white complex Gaussian noise.
.. [Kaiser1974] J. F. Kaiser, "Nonrecursive digital filter design using the
   I0-sinh window function", Proc. IEEE ISCAS 1974 (length and beta formulas,
   as implemented by ``scipy.signal.kaiserord`` / ``kaiser_beta``; citation from memory).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from functools import lru_cache

import numpy as np
import scipy.fft as sfft
from scipy import signal

from emucompile.models.theory import DopplerSpectrum
from emucompile.models.rates import (  # noqa: F401  (the rate plan and the constants that fix the numbers)
    DOPPLER_FILTER_SPAN,
    DOPPLER_FILTER_TAPER,
    FINAL_STAGE_MIN,
    INTERNAL_RATE_MAX,
    INTERNAL_RATE_MIN,
    LAG_WINDOW_BETA,
    LAG_WINDOW_DOPPLER_PERIODS,
    LAG_WINDOW_SIGMA_PERIODS,
    MAX_DOPPLER_FILTER_LENGTH,
    MAX_OUTPUT_BLOCK,
    MAX_POLYPHASE_FACTOR,
    MIN_FFT_SIZE,
    MIN_INTERNAL_BLOCK,
    STAGE1_ATTENUATION_DB,
    RatePlan,
    choose_rate_plan,
    doppler_filter_half_length,
    lag_window_half_span,
)

# Lags compared against theory when a design is checked, in units of 1/f_D.
CHECK_LAGS_DOPPLER_PERIODS = 3.0


@dataclass(frozen=True)
class Chain:
    """The interpolation chain after the internal rate, with its exact filters.

    ``h1`` is the polyphase low-pass (float32, odd length 2*half1*R1 + 1,
    centred, DC gain ~R1, each polyphase component scaled so that the R1
    output phases carry the same power); the linear stage makes output
    R2 m + r as ``weights_a[r] x1[m] + weights_b[r] x1[m+1]`` (float32; the
    fractions 1 - r/R2 and r/R2 times a per-phase gain that evens out the
    power dip between f_1 samples). ``margin1`` is how many internal samples
    stage 1 needs on each side of a block.
    """

    rates: RatePlan
    h1: np.ndarray
    half1: int
    weights_a: np.ndarray
    weights_b: np.ndarray

    @property
    def margin1(self) -> int:
        return self.half1 if self.rates.up1 > 1 else 0

    @property
    def polyphase(self) -> np.ndarray:
        """h1 as an (R1, 2 half1 + 1) table: x1[m R1 + p] = sum_q P[p, q] y[m + q - half1]."""
        return _polyphase_table(self.h1, self.rates.up1, self.half1)

    def amplitude_response(self, frequency_hz):
        """Amplitude response of stages 1 and 2 at f (period-averaged, ~1 at DC)."""
        f = np.asarray(frequency_hz, dtype=float)
        rates = self.rates
        out = np.ones_like(f)
        if rates.up1 > 1:
            c = (len(self.h1) - 1) // 2
            k = np.arange(len(self.h1)) - c
            h = self.h1.astype(np.float64)
            phase = 2.0 * np.pi * np.outer(f.ravel(), k) / rates.stage1_rate_hz
            out = out * (np.cos(phase) @ h).reshape(f.shape) / rates.up1
        if rates.up2 > 1:
            out = out * _linear_response(f, self.weights_a, self.weights_b, rates.update_rate_hz)
        return out


@dataclass
class DopplerDesign:
    """A tap's complete doppler-filter design and its exact figures of merit."""

    spectrum: DopplerSpectrum
    chain: Chain
    h0: np.ndarray  # float64, odd length, centred, scaled for unit mean output power
    lag_window_half_span: int
    fft_size: int
    block: int  # internal samples per synthesis block
    _figures: dict | None = field(default=None, repr=False)

    @property
    def figures(self) -> dict:
        """Exact figures of the whole cascade (computed on first use; ~0.1-1 s)."""
        if self._figures is None:
            self._figures = analyse_design(self.h0, self.chain, self.spectrum)
        return self._figures

    @property
    def half0(self) -> int:
        return (len(self.h0) - 1) // 2

    @property
    def output_block(self) -> int:
        return self.block * self.chain.rates.total


@lru_cache(maxsize=64)
def design_chain(rates: RatePlan, spectrum: DopplerSpectrum) -> Chain:
    """Polyphase low-pass h1 (Kaiser window) and the linear-stage weights, for one spectrum.

    h1 passes |f| <= f_D and stops the images of the band from f_i - f_D
    on, with ``STAGE1_ATTENUATION_DB``; its length follows Kaiser's formula
    [Kaiser1974]_ rounded up to whole phases (2*half1*R1 + 1 taps, centred).

    Power equalisation (ours): an interpolator fed with a stationary process
    gives a cyclostationary one. Linear interpolation between f_1 samples of
    correlation rho1 loses 2 w (1 - w)(1 - rho1) of the power at fraction w
    (0.4 % at f_1 = 33 f_D), and the polyphase components of h1 differ
    slightly: any statistic taken at a stride that is a multiple of R would
    see a biased power. With the input's exact autocorrelation (the
    spectrum's, at f_i) each polyphase component of h1, then each linear
    phase r, gets the gain that gives every output phase the same power
    (the residual, from the small variation of rho1 across stage-1 phases,
    is in the design figures: <= 1e-4 dB).
    """
    up1, up2 = rates.up1, rates.up2
    fi = rates.internal_rate_hz
    band_edge_hz = spectrum.max_doppler_hz
    if up1 == 1:
        h1 = np.ones(1, np.float32)
        half1 = 0
    else:
        f1 = rates.stage1_rate_hz
        width = (fi - 2.0 * band_edge_hz) / f1  # normalised to f1 (cycles/sample)
        n_est = (STAGE1_ATTENUATION_DB - 7.95) / (14.36 * width) + 1
        half1 = max(1, int(math.ceil(n_est / (2 * up1))))
        n1 = 2 * half1 * up1 + 1
        beta = signal.kaiser_beta(STAGE1_ATTENUATION_DB)
        h1 = signal.firwin(n1, fi / 2.0, window=("kaiser", beta), fs=f1) * up1
    n_taps = 2 * half1 + 1
    lags = np.arange(-(n_taps + 1), n_taps + 2)
    rho = dict(zip(lags.tolist(), spectrum.autocorrelation(lags / fi)))
    q = np.arange(n_taps)
    same = np.vectorize(rho.__getitem__)(q[None, :] - q[:, None])  # E y[m+q] y[m+q']
    nxt = np.vectorize(rho.__getitem__)(q[None, :] + 1 - q[:, None])  # E y[m+q] y[m+1+q']
    if up1 > 1:
        table = _polyphase_table(h1, up1, half1).astype(np.float64)
        powers = np.einsum("pq,qr,pr->p", table, same, table)
        gains = np.sqrt(powers.mean() / powers)
        h1 = h1 * _component_gains(gains, up1, half1, len(h1))
    h1 = h1.astype(np.float32)
    w = np.arange(up2) / up2
    if up2 == 1:
        return Chain(rates, h1, half1, np.ones(1, np.float32), np.zeros(1, np.float32))
    table = _polyphase_table(h1, up1, half1).astype(np.float64)
    c0 = np.einsum("pq,qr,pr->p", table, same, table)
    # E x1[j] x1[j+1] by stage-1 phase p of j (p + 1 wraps to the next m)
    c1 = np.array([table[p] @ same @ table[p + 1] for p in range(up1 - 1)]
                  + [table[up1 - 1] @ nxt @ table[0]])
    c0_next = np.roll(c0, -1)
    dip = ((1 - w)[None, :] ** 2 * c0[:, None] + w[None, :] ** 2 * c0_next[:, None]
           + 2 * (w * (1 - w))[None, :] * c1[:, None]).mean(axis=0)
    gain = np.sqrt(dip.mean() / dip)
    return Chain(rates, h1, half1, (gain * (1 - w)).astype(np.float32), (gain * w).astype(np.float32))


def design_doppler_filter(spectrum: DopplerSpectrum, chain: Chain) -> DopplerDesign:
    """Doppler FIR h0 at the internal rate for ``spectrum``, compensating ``chain``.

    Design (ours, after the spectral-shaping idea of [YB2000]_): take the
    exact autocorrelation r(k/f_i) of the spectrum (``DopplerSpectrum.
    autocorrelation``), multiply it by a lag window v = (w * w)/|w|^2 built
    from a Kaiser window w of half-span M (so its transform |W|^2/|w|^2 is
    non-negative and the windowed spectrum P = S (*) V stays a valid,
    slightly smoothed spectrum), divide P by the chain's power response in
    the band (droop compensation), and take h0 = the zero-phase square root
    sqrt(P) in time, truncated to 1.25 M with a short Tukey taper. The
    output autocorrelation is then r(tau) v(tau) to a very good
    approximation: with M = 256 f_i/f_D the error at lags up to 3/f_D is
    ~2e-4, and the U-shaped peaks are resolved to f_D/256. The exact figures
    of the whole cascade are in ``figures``; h0 is scaled so that the mean
    output power is exactly 1 (computed from the coefficients, not samples).

    Notes
    -----
    Windowing sqrt(S) directly (the plain frequency-sampling design) converges
    only as (f_i/(L f_D))^(1/2) for the classical spectrum, whose square root
    is singular at f_D: ~2e-2 autocorrelation error even at L = 2049. The lag
    window makes the error fall as 1/M^2 instead.
    """
    rates = chain.rates
    fi = rates.internal_rate_hz
    fd = spectrum.max_doppler_hz
    half_span = lag_window_half_span(fi, spectrum)
    half0 = doppler_filter_half_length(half_span)
    length0 = 2 * half0 + 1
    if length0 > MAX_DOPPLER_FILTER_LENGTH:
        raise ValueError(
            f"the Doppler filter would need {length0} taps at {fi:g} Hz "
            f"(max {MAX_DOPPLER_FILTER_LENGTH})"
        )
    n_grid = 1 << int(math.ceil(math.log2(8 * max(length0, 2 * half_span + 1))))
    window = signal.windows.kaiser(half_span + 1, LAG_WINDOW_BETA, sym=True)
    lag_window = signal.fftconvolve(window, window[::-1])  # lags -half_span..half_span
    lag_window /= lag_window[half_span]
    lags = np.arange(-half_span, half_span + 1)
    rho = spectrum.autocorrelation(lags / fi) * lag_window
    buf = np.zeros(n_grid)
    buf[lags % n_grid] = rho
    power = np.maximum(sfft.fft(buf).real, 0.0)  # spectrum on the grid k fi / n_grid
    freqs = sfft.fftfreq(n_grid, 1.0 / fi)
    band = np.abs(freqs) <= 1.1 * fd
    droop = np.ones(n_grid)
    coarse = np.linspace(0.0, 1.1 * fd, 1025)  # the response is smooth in the band
    droop[band] = np.interp(np.abs(freqs[band]), coarse, chain.amplitude_response(coarse) ** 2)
    power /= np.maximum(droop, 0.5)
    amplitude = np.sqrt(power)
    h_full = sfft.ifft(amplitude).real
    h0 = np.concatenate([h_full[-half0:], h_full[: half0 + 1]])
    h0 *= signal.windows.tukey(length0, DOPPLER_FILTER_TAPER)
    mean_power = _LinearStageAlgebra(_stage1_cascade(h0, chain), chain).mean_power()
    h0 = h0 / math.sqrt(mean_power)
    fft_size, block = _block_geometry(length0, chain)
    return DopplerDesign(spectrum, chain, h0, half_span, fft_size, block)


def analyse_design(h0: np.ndarray, chain: Chain, spectrum: DopplerSpectrum) -> dict:
    """Exact figures of a whole chain (h0, stage 1, linear stage), from its coefficients.

    The output of an interpolator driven by white noise is cyclostationary
    with period R = R1 R2; figures are averages over that period (the
    spread across phases is reported separately). Returns the mean power
    (for unit-variance complex noise), the largest |r_out(tau) - r(tau)| for
    tau <= 3/f_D (on up to 1024 lags), the power beyond 1.05 f_D relative to
    the power below f_D (dB), and the spread of the power across the R
    output phases (dB). Cost: FFTs at the stage-1 rate only, whatever R2.
    """
    rates = chain.rates
    g1 = _stage1_cascade(h0, chain)
    algebra = _LinearStageAlgebra(g1, chain)
    power = algebra.mean_power()
    fu, fd = rates.update_rate_hz, spectrum.max_doppler_hz
    max_lag = int(math.ceil(CHECK_LAGS_DOPPLER_PERIODS * fu / fd))
    lags = np.unique(np.linspace(0, max_lag, min(max_lag + 1, 1024)).round().astype(np.int64))
    acf = algebra.autocorrelation(lags) / power
    acf_error = float(np.max(np.abs(acf - spectrum.autocorrelation(lags / fu))))
    # Parseval: integral of |G|^2 over the whole band = F_u R mean power; the
    # in-band parts are integrated on a fine grid of the baseband response
    # G(f) = G1(f) R2 H2(f) (G1: stage-1 cascade at f_1, H2: linear stage, 1 at DC).
    f1 = rates.stage1_rate_hz
    n_fft = sfft.next_fast_len(max(16 * len(g1), int(4096 * f1 / fd)))
    spectrum1 = np.abs(sfft.fft(g1, n_fft)) ** 2
    freqs = sfft.fftfreq(n_fft, 1.0 / f1)
    near = np.abs(freqs) <= 1.05 * fd
    density = spectrum1[near] * _linear_response(freqs[near], chain.weights_a, chain.weights_b, fu) ** 2
    df = f1 / n_fft
    whole = fu * rates.total * power
    below = float(np.sum(density[np.abs(freqs[near]) < fd])) * df * rates.up2**2
    inside = float(np.sum(density)) * df * rates.up2**2
    beyond = max(whole - inside, 1e-300 * whole)
    phases = algebra.phase_powers()
    return {
        "mean_power": power,
        "acf_max_error": acf_error,
        "acf_max_lag_s": CHECK_LAGS_DOPPLER_PERIODS / fd,
        "out_of_band_db": 10.0 * math.log10(beyond / below),
        "phase_power_spread_db": 10.0 * math.log10(phases.max() / phases.min()),
    }


def chain_figures(chain: Chain, band_edge_hz: float) -> dict:
    """Droop at f_D and worst image of the band |f| <= f_D through the chain (dB, amplitude).

    Images of the band lie at k f_i + [-f_D, f_D]; the worst are the first
    ones of stage 1 (k < R1) and of the linear stage (k = R1, 2 R1, ...), so
    k runs up to 3 R1 (and F_u / 2).
    """
    rates = chain.rates
    droop = float(chain.amplitude_response(np.array([band_edge_hz]))[0])
    out = {"droop_at_band_edge_db": 20.0 * math.log10(droop)}
    if rates.total > 1:
        fi = rates.internal_rate_hz
        top = min(3 * rates.up1, int((rates.update_rate_hz / 2.0 + band_edge_hz) // fi))
        offsets = np.linspace(-band_edge_hz, band_edge_hz, 129)
        f = (np.arange(1, max(top, 1) + 1)[:, None] * fi + offsets[None, :]).ravel()
        f = f[f <= rates.update_rate_hz / 2.0]
        worst = float(np.max(np.abs(chain.amplitude_response(f)))) if len(f) else 0.0
        out["worst_image_db"] = 20.0 * math.log10(max(worst, 1e-300))
    return out


class _LinearStageAlgebra:
    """Second-order statistics of the linear stage's output from the f_1-rate cascade.

    Output R2 j + r is a_r x1[j] + b_r x1[j+1] (the float32 weights as
    applied), with x1 = g1 * (noise zero-stuffed by R1):
    E x1[j] x1[j+l], averaged over j, is A(l) = sum_k g1[k] g1[k+l] / R1, so
    every phase-averaged moment is a short sum over r; no filter at F_u is
    ever formed.
    """

    def __init__(self, g1: np.ndarray, chain: Chain):
        self.g1 = g1
        self.up1 = chain.rates.up1
        self.up2 = chain.rates.up2
        self.a = chain.weights_a.astype(np.float64)
        self.b = chain.weights_b.astype(np.float64)

    def _a_of(self, lags):
        lags = np.abs(np.asarray(lags, dtype=np.int64))
        n = len(self.g1)
        n_fft = sfft.next_fast_len(2 * n)
        acf = sfft.irfft(np.abs(sfft.rfft(self.g1, n_fft)) ** 2, n_fft)[:n] / self.up1
        out = np.zeros(lags.shape)
        inside = lags < n
        out[inside] = acf[lags[inside]]
        return out

    def autocorrelation(self, lags) -> np.ndarray:
        """Phase-averaged E out[n] out*[n + tau] at output lags tau >= 0 (noise of power 1)."""
        lags = np.asarray(lags, dtype=np.int64)
        r = np.arange(self.up2)
        a, b = self.a, self.b
        first = -1
        values = self._a_of(np.arange(first, int(lags.max()) // self.up2 + 3))
        out = np.empty(len(lags))
        group = max(1, (1 << 22) // self.up2)  # bounds the (lags x R2) temporaries
        for i in range(0, len(lags), group):
            shifted = r[None, :] + lags[i : i + group, None]
            d, r2 = shifted // self.up2 - first, shifted % self.up2
            value = ((a[r] * a[r2] + b[r] * b[r2]) * values[d] + a[r] * b[r2] * values[d + 1]
                     + b[r] * a[r2] * values[d - 1])
            out[i : i + group] = value.mean(axis=1)
        return out

    def mean_power(self) -> float:
        return float(self.autocorrelation(np.array([0]))[0])

    def phase_powers(self) -> np.ndarray:
        """Power at each of the R1 R2 output phases."""
        g1, up1 = self.g1, self.up1
        n = len(g1)
        c0, c1 = np.zeros(up1), np.zeros(up1)
        for p in range(up1):
            c0[p] = np.sum(g1[p::up1] ** 2)
            # C_p(1) = sum_m g1[p - R1 m] g1[p + 1 - R1 m]
            nxt = g1[p + 1 :: up1] if p + 1 < n else np.zeros(0)
            m = min(len(g1[p::up1]), len(nxt))
            c1[p] = np.sum(g1[p::up1][:m] * nxt[:m])
        c0_next = np.roll(c0, -1)
        a, b = self.a[None, :], self.b[None, :]
        return (a * a * c0[:, None] + b * b * c0_next[:, None] + 2 * a * b * c1[:, None]).ravel()


# -- helpers ---------------------------------------------------------------------


def _stage1_cascade(h0: np.ndarray, chain: Chain) -> np.ndarray:
    """h0 zero-stuffed by R1 and filtered by h1: the whole chain up to f_1 (float64)."""
    g = np.asarray(h0, dtype=np.float64)
    if chain.rates.up1 > 1:
        g = np.convolve(_upsample(g, chain.rates.up1), chain.h1.astype(np.float64))
    return g


def _upsample(h: np.ndarray, factor: int) -> np.ndarray:
    out = np.zeros((len(h) - 1) * factor + 1)
    out[::factor] = h
    return out


def _linear_response(f, weights_a, weights_b, update_rate_hz):
    """Period-averaged amplitude response of the linear stage, ~1 at DC.

    Output R2 m + r = a_r x[m] + b_r x[m+1]: on the zero-stuffed input the
    phase-r kernel is a_r at delay r and b_r at delay r - R2, so the average
    response is (1/R2) sum_r (a_r e^{-j th r} + b_r e^{j th (R2 - r)}),
    th = 2 pi f / F_u.
    """
    a = np.asarray(weights_a, dtype=np.float64)
    b = np.asarray(weights_b, dtype=np.float64)
    up2 = len(a)
    r = np.arange(up2)
    theta = 2.0 * np.pi * np.ravel(np.asarray(f, dtype=float))[:, None] / update_rate_hz
    out = np.empty(theta.shape[0])
    step = max(1, (1 << 22) // up2)  # bounds the (frequencies x R2) temporaries
    for i in range(0, len(out), step):
        t = theta[i : i + step]
        value = (a * np.exp(-1j * t * r) + b * np.exp(1j * t * (up2 - r))).sum(axis=1) / up2
        out[i : i + step] = np.abs(value)
    return out.reshape(np.shape(f))


def _polyphase_table(h1, up1, half1):
    table = np.zeros((up1, 2 * half1 + 1), np.float32)
    centre = half1 * up1
    for p in range(up1):
        for q in range(2 * half1 + 1):
            index = p + centre - up1 * (q - half1)
            if 0 <= index < len(h1):
                table[p, q] = h1[index]
    return table


def _component_gains(gains, up1, half1, length):
    """Per-coefficient factors of h1 that scale polyphase row p of the table by gains[p]."""
    index = np.arange(length)
    row = (index - half1 * up1) % up1  # table[p, q] = h1[p + c1 - R1 (q - half1)]
    return gains[row]


def _block_geometry(length0: int, chain: Chain) -> tuple[int, int]:
    """FFT size and internal block length of the overlap-save Doppler filter."""
    # 2x the filter: overlap-save wastes under half of each transform while the
    # cached blocks stay small (the FFT is a minor cost next to stage 1).
    fft_size = max(MIN_FFT_SIZE, 1 << int(math.ceil(math.log2(2 * length0))))
    # n_w = (length0 - 1) + n_y noise samples give n_y = block + 2 margin1 + 1
    # filtered ones (the +1 feeds the linear stage's last interval). At very
    # high F_u/f_D the block is cut so that its output stays bounded; the
    # transform is then mostly wasted, but it runs at a tiny internal rate.
    block = fft_size - (length0 - 1) - 2 * chain.margin1 - 1
    return fft_size, min(block, internal_block_limit(chain.rates))


def internal_block_limit(rates: RatePlan) -> int:
    """Largest internal block whose output fits in ``MAX_OUTPUT_BLOCK`` samples."""
    return max(MIN_INTERNAL_BLOCK, MAX_OUTPUT_BLOCK // rates.total)
