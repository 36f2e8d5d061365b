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

from emucompile.models.theory import DopplerSpectrum


def spectrum_cdf(spectrum: DopplerSpectrum, frequency_hz):
    """Integral of ``spectrum.psd`` from -inf to f (closed forms; 0 below -f_D, 1 above f_D).

    classical: 1/2 + arcsin(f/f_D)/pi; flat: (f + f_D)/(2 f_D); gaussian
    (truncated at f_D): (Phi(f/sigma) - Phi(-f_D/sigma)) / (2 Phi(f_D/sigma) - 1).
    """
    return spectrum.cdf(frequency_hz)  # the registry's closed form (emucompile.models.spectra)


def bin_powers(spectrum: DopplerSpectrum, rate_hz: float, n: int) -> np.ndarray:
    """Power of each DFT bin (``numpy.fft.fftfreq`` order), summing to 1 when rate_hz > 2 f_D.

    Bin m covers [f_m - rate/(2n), f_m + rate/(2n)); spectrum power beyond the
    Nyquist band (rate < 2 f_D) is dropped, not aliased.
    """
    f = np.fft.fftfreq(n, 1.0 / rate_hz)
    half = 0.5 * rate_hz / n
    return np.maximum(spectrum_cdf(spectrum, f + half) - spectrum_cdf(spectrum, f - half), 0.0)


def circular_autocorrelation(spectrum: DopplerSpectrum, rate_hz: float, n: int) -> np.ndarray:
    """Exact circular autocorrelation of the periodic reference process, lags 0..n-1 (real)."""
    return (np.fft.ifft(bin_powers(spectrum, rate_hz, n)) * n).real


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
