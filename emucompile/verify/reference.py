"""An exact reference Gaussian fading process, for Monte Carlo calibration of the tolerances.

Inverse-DFT shaping after Young & Beaulieu [YoungBeaulieu2000]_: independent
circular complex Gaussians X_m, one per DFT bin, of variance equal to the
Doppler spectrum's power *integrated over that bin* (from the spectrum's
closed-form distribution function, so the U-shaped classical spectrum's
integrable edge singularities are handled exactly), summed by one inverse
FFT. The result is periodic by construction; its circular autocorrelation is
the inverse DFT of the bin powers, which :func:`circular_autocorrelation`
returns, so every statistic of the process is known exactly. A Rician direct
part is added as in the engine.

References
----------
.. [YoungBeaulieu2000] D. J. Young, N. C. Beaulieu, "The generation of
   correlated Rayleigh random variates by inverse discrete Fourier transform
   techniques", IEEE Trans. Commun. 48(7), 2000.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import fft as sp_fft

from emucompile.models.theory import DopplerSpectrum
from emucompile.verify import scratch


def spectrum_cdf(spectrum: DopplerSpectrum, frequency_hz):
    """Integral of ``spectrum.psd`` from -inf to f (closed forms; 0 below -f_D, 1 above f_D).

    classical: 1/2 + arcsin(f/f_D)/pi; flat: (f + f_D)/(2 f_D); gaussian
    (truncated at f_D): (Phi(f/sigma) - Phi(-f_D/sigma)) / (2 Phi(f_D/sigma) - 1).
    """
    return spectrum.cdf(frequency_hz)  # the registry's closed form (emucompile.models.spectra)


def bin_powers(spectrum: DopplerSpectrum, rate_hz: float, n: int, start: int = 0, stop: int | None = None):
    """Power of each DFT bin (``numpy.fft.fftfreq`` order), summing to 1 when rate_hz > 2 f_D.

    Bin m covers [f_m - rate/(2n), f_m + rate/(2n)); spectrum power beyond the
    Nyquist band (rate < 2 f_D) is dropped, not aliased. ``start``, ``stop``:
    only bins start..stop-1 of the n.
    """
    m = np.arange(start, n if stop is None else stop)
    f = np.where(m < (n + 1) // 2, m, m - n) * (1.0 / (n * (1.0 / rate_hz)))  # numpy.fft.fftfreq's values
    half = 0.5 * rate_hz / n
    return np.maximum(spectrum_cdf(spectrum, f + half) - spectrum_cdf(spectrum, f - half), 0.0)


def circular_autocorrelation(spectrum: DopplerSpectrum, rate_hz: float, n: int) -> np.ndarray:
    """Exact circular autocorrelation of the periodic reference process, lags 0..n-1 (real).

    r_k = sum_m P_m exp(j 2 pi m k / n), the bin powers' inverse DFT times n.
    Up to :data:`IN_MEMORY_LAGS` lags, one FFT; beyond, when n = n1 n2 has
    factors that keep each below :data:`IN_MEMORY_LAGS` (a long periodic
    record), the four-step form of the same DFT (Bailey 1990, "FFTs in
    external or hierarchical memory", J. Supercomputing 4): n2-point
    transforms of the bin powers taken as an (n2, n1) array, column block by
    column block, the twiddles exp(j 2 pi j1 k2 / n), then n1-point
    transforms row block by row block, the input and result in mapped
    temporary files (:func:`emucompile.verify.scratch.empty`) and the memory
    one block's, whatever n (a test checks it against the one FFT).
    """
    n = int(n)
    n1 = _middle_factor(n)
    if n <= IN_MEMORY_LAGS or n // n1 > IN_MEMORY_LAGS:
        return (np.fft.ifft(bin_powers(spectrum, rate_hz, n)) * n).real
    n2 = n // n1
    powers = scratch.empty(n, np.float64)
    for start in range(0, n, _FOUR_STEP_BLOCK):
        stop = min(n, start + _FOUR_STEP_BLOCK)
        powers[start:stop] = bin_powers(spectrum, rate_hz, n, start, stop)
    q = powers.reshape(n2, n1)  # q[j2, j1] = P[j1 + n1 j2]
    inner = scratch.empty((n2, n1), np.complex128)
    k2 = np.arange(n2, dtype=np.int64)[:, None]
    columns = max(1, _FOUR_STEP_BLOCK // n2)
    for c0 in range(0, n1, columns):  # A[k2, j1] = sum_j2 q[j2, j1] e^{j 2 pi j2 k2 / n2}, times the twiddle
        j1 = np.arange(c0, min(n1, c0 + columns), dtype=np.int64)[None, :]
        block = sp_fft.ifft(np.asarray(q[:, c0:c0 + j1.size]), axis=0) * n2
        block *= np.exp((2j * np.pi / n) * ((k2 * j1) % n))
        inner[:, c0:c0 + j1.size] = block
    out = scratch.empty(n, np.float64)
    result = out.reshape(n1, n2)  # r[k2 + n2 k1] = result[k1, k2]
    rows = max(1, _FOUR_STEP_BLOCK // n1)
    for r0 in range(0, n2, rows):  # r[k2 + n2 k1] = sum_j1 A[k2, j1] e^{j 2 pi j1 k1 / n1}
        block = sp_fft.ifft(np.asarray(inner[r0:r0 + rows]), axis=1) * n1
        result[:, r0:r0 + block.shape[0]] = block.real.T
    return out


IN_MEMORY_LAGS = 1 << 22
"""Longest circular autocorrelation made by one in-memory FFT (4.2e6 lags: about 200 MB of temporaries)."""
_FOUR_STEP_BLOCK = 1 << 18  # values per block of the four-step transform (4 MiB of complex128)


def _middle_factor(n):
    """The largest divisor of n not above sqrt(n) (1 for a prime)."""
    for d in range(math.isqrt(n), 0, -1):
        if n % d == 0:
            return d
    return 1


def diffuse(spectrum: DopplerSpectrum, rate_hz: float, n: int, rng: np.random.Generator, *, oversize: int = 1):
    """Unit-power complex Gaussian record with ``spectrum``.

    ``oversize=1``: exactly periodic with period ``n``. ``oversize=q > 1``:
    the first ``n`` samples of a period-``q n`` process (its wrap lies
    outside the record, so the record behaves as an aperiodic one).
    """
    m = int(n) * int(oversize)
    amp = np.sqrt(bin_powers(spectrum, rate_hz, m) / 2.0)
    x = (rng.standard_normal(m) + 1j * rng.standard_normal(m)) * amp
    return np.fft.ifft(x)[:n] * m


def tap_record(
    spectrum: DopplerSpectrum | None,
    rate_hz: float,
    n: int,
    rng: np.random.Generator,
    *,
    mean_power: float = 1.0,
    k_linear: float = 0.0,
    los_doppler_hz: float = 0.0,
    los_phase_rad: float | None = None,
    periodic: bool = True,
):
    """A reference tap record sqrt(P)(sqrt(K/(K+1)) e^{j(2 pi f_los t + phi0)} + sqrt(1/(K+1)) s(t)).

    ``periodic=True`` rounds f_los to a multiple of rate/n (as the engine's
    periodic mode does) so the whole record is periodic; otherwise the
    diffuse part is drawn with ``oversize=2``. ``phi0`` is drawn from ``rng``
    when not given. ``k_linear=inf`` (static) gives the direct part alone.
    """
    t = np.arange(n) / rate_hz
    if periodic and los_doppler_hz:
        los_doppler_hz = round(los_doppler_hz * n / rate_hz) * rate_hz / n
    phi0 = rng.uniform(0.0, 2.0 * math.pi) if los_phase_rad is None else los_phase_rad
    direct = np.exp(1j * (2.0 * math.pi * los_doppler_hz * t + phi0))
    if math.isinf(k_linear):
        return math.sqrt(mean_power) * direct
    s = diffuse(spectrum, rate_hz, n, rng, oversize=1 if periodic else 2)
    a = math.sqrt(k_linear / (k_linear + 1.0))
    b = math.sqrt(1.0 / (k_linear + 1.0))
    return math.sqrt(mean_power) * (a * direct + b * s) if k_linear else math.sqrt(mean_power) * s


__all__ = ["spectrum_cdf", "bin_powers", "circular_autocorrelation", "diffuse", "tap_record"]
