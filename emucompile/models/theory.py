"""Closed forms of the fading theory: Doppler spectra, envelope laws, level crossings.

Nothing here knows of files, profiles or random numbers; everything is a pure
function of physical parameters in SI units (hertz, seconds, linear power).
The empirical side (estimating the same quantities from samples) lives in
:mod:`emucompile.verify.estimators`.

References
----------
.. [Clarke1968] R. H. Clarke, "A statistical theory of mobile-radio reception",
   Bell Syst. Tech. J. 47(6), 1968.
.. [Jakes1974] W. C. Jakes (ed.), Microwave Mobile Communications, Wiley, 1974.
.. [Rice1944] S. O. Rice, "Mathematical analysis of random noise", Bell Syst.
   Tech. J. 23 (1944) and 24 (1945): the level-crossing integral
   N(r) = integral of rdot * p(r, rdot) over rdot > 0.
.. [Stuber] G. L. Stüber, Principles of Mobile Communication (Rician
   level-crossing rate with a zero-Doppler direct component).
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass

from emucompile._lazy import LazyModule

# Imported on first use: a profile is read and checked without them (start-up).
np = LazyModule("numpy")
special = LazyModule("scipy.special")
stats = LazyModule("scipy.stats")

SPECTRUM_KINDS = ("classical", "flat", "gaussian")


@dataclass(frozen=True)
class DopplerSpectrum:
    """A Doppler power spectrum of unit total power.

    Parameters
    ----------
    kind : {"classical", "flat", "gaussian"}
        ``classical``: Clarke/Jakes U-shape S(f) = 1/(pi f_D sqrt(1-(f/f_D)^2))
        on |f| < f_D [Clarke1968]_. ``flat``: S(f) = 1/(2 f_D) on |f| < f_D.
        ``gaussian``: exp(-f^2/(2 sigma^2)) truncated to |f| <= f_D and
        renormalised to unit power; the truncation is part of the definition,
        so the autocorrelation below is that of the truncated spectrum.
    max_doppler_hz : float
        f_D, the band edge; > 0.
    sigma_hz : float, optional
        Standard deviation of the Gaussian spectrum before truncation
        (``gaussian`` only).
    """

    kind: str
    max_doppler_hz: float
    sigma_hz: float | None = None

    def __post_init__(self):
        if self.kind not in SPECTRUM_KINDS:
            raise ValueError(f"kind must be one of {SPECTRUM_KINDS}, got {self.kind!r}")
        if not (self.max_doppler_hz > 0 and math.isfinite(self.max_doppler_hz)):
            raise ValueError(f"max_doppler_hz must be finite and > 0, got {self.max_doppler_hz!r}")
        if self.kind == "gaussian":
            if self.sigma_hz is None or not (self.sigma_hz > 0 and math.isfinite(self.sigma_hz)):
                raise ValueError(f"a gaussian spectrum needs sigma_hz > 0, got {self.sigma_hz!r}")
        elif self.sigma_hz is not None:
            raise ValueError(f"sigma_hz applies to the gaussian spectrum only, not {self.kind!r}")

    # -- spectrum ---------------------------------------------------------
    def psd(self, frequency_hz):
        """Power spectral density in 1/Hz (integrates to 1); 0 outside |f| < f_D."""
        f = np.asarray(frequency_hz, dtype=float)
        fd = self.max_doppler_hz
        inside = np.abs(f) < fd
        out = np.zeros_like(f)
        if self.kind == "classical":
            x = f[inside] / fd
            out[inside] = 1.0 / (np.pi * fd * np.sqrt(1.0 - x * x))
        elif self.kind == "flat":
            out[inside] = 1.0 / (2.0 * fd)
        else:
            s = self.sigma_hz
            out[inside] = np.exp(-0.5 * (f[inside] / s) ** 2) / (
                math.sqrt(2.0 * math.pi) * s * self._gaussian_kept_fraction()
            )
        return out

    def autocorrelation(self, lag_s):
        """Normalised autocorrelation r(tau) = integral of S(f) exp(j 2 pi f tau) df (real).

        classical: J0(2 pi f_D tau) [Jakes1974]_ (``scipy.special.j0``);
        flat: sinc(2 f_D tau); gaussian (truncated at f_D):
        exp(-2 pi^2 sigma^2 tau^2) Re erf((f_D + j 2 pi sigma^2 tau)/(sigma sqrt 2))
        / erf(f_D/(sigma sqrt 2)), evaluated through the Faddeeva function so it
        stays finite at large lags; for f_D >> sigma it tends to the textbook
        exp(-2 pi^2 sigma^2 tau^2).
        """
        tau = np.asarray(lag_s, dtype=float)
        fd = self.max_doppler_hz
        if self.kind == "classical":
            return special.j0(2.0 * np.pi * fd * tau)
        if self.kind == "flat":
            return np.sinc(2.0 * fd * tau)
        s = self.sigma_hz
        c = 2.0 * np.pi * s * s * tau
        # erf(z) = 1 - exp(-z^2) w(i z); exp(-2 pi^2 s^2 tau^2 - z^2) simplifies to
        # exp(-f_D^2/(2 s^2)) exp(-j f_D c / s^2), which never overflows.
        z = (fd + 1j * c) / (s * math.sqrt(2.0))
        value = np.exp(-2.0 * np.pi**2 * s * s * tau * tau) - np.exp(
            -fd * fd / (2.0 * s * s)
        ) * np.exp(-1j * fd * c / (s * s)) * special.wofz(1j * z)
        return value.real / self._gaussian_kept_fraction()

    @property
    def second_moment_hz2(self) -> float:
        """Normalised second moment integral of f^2 S(f) df, in Hz^2."""
        fd = self.max_doppler_hz
        if self.kind == "classical":
            return fd * fd / 2.0
        if self.kind == "flat":
            return fd * fd / 3.0
        s = self.sigma_hz
        a = fd / s
        # Variance of a normal law truncated to [-a sigma, a sigma].
        density = math.exp(-0.5 * a * a) / math.sqrt(2.0 * math.pi)  # the standard normal density at a
        return s * s * (1.0 - 2.0 * a * density / self._gaussian_kept_fraction())

    @property
    def rms_doppler_hz(self) -> float:
        """RMS Doppler spread sqrt(second moment); f_D/sqrt(2) for the classical spectrum."""
        return math.sqrt(self.second_moment_hz2)

    @property
    def feature_width_hz(self) -> float | None:
        """The width of the spectrum's narrowest feature where it has one beyond f_D (the Gaussian's sigma)."""
        return self.sigma_hz if self.kind == "gaussian" else None

    @property
    def band_edge_hz(self) -> float:
        """The spectrum is zero for |f| >= this frequency."""
        return self.max_doppler_hz

    def _gaussian_kept_fraction(self) -> float:
        return math.erf(self.max_doppler_hz / (self.sigma_hz * math.sqrt(2.0)))


# -- envelope -----------------------------------------------------------------


@functools.lru_cache(maxsize=64)  # a frozen law costs ~0.4 ms to build (scipy formats its docstring)
def envelope_distribution(k_linear: float = 0.0, mean_power: float = 1.0):
    """Frozen ``scipy.stats`` law of the envelope |g| of a Rician (K > 0) or Rayleigh gain (shared: do not modify).

    With mean power Omega = E|g|^2 and K = nu^2/(2 sigma^2):
    sigma^2 = Omega/(2(K+1)), ``scipy.stats.rice(b=sqrt(2K), scale=sigma)``;
    K = 0 gives ``scipy.stats.rayleigh(scale=sqrt(Omega/2))``.
    """
    if not (k_linear >= 0 and math.isfinite(k_linear)):
        raise ValueError(f"k_linear must be finite and >= 0, got {k_linear!r}")
    if not mean_power > 0:
        raise ValueError(f"mean_power must be > 0, got {mean_power!r}")
    sigma = math.sqrt(mean_power / (2.0 * (k_linear + 1.0)))
    if k_linear == 0:
        return stats.rayleigh(scale=sigma)
    return stats.rice(b=math.sqrt(2.0 * k_linear), scale=sigma)


# -- level crossings ------------------------------------------------------------


def level_crossing_rate(
    rho,
    *,
    rms_doppler_hz: float,
    k_linear: float = 0.0,
    los_doppler_hz: float = 0.0,
):
    """Rate of positive-going crossings of the envelope at R = rho * R_rms, per second.

    ``rho`` is the level relative to the RMS envelope sqrt(E|g|^2). The diffuse
    part must have a Doppler spectrum symmetric about 0 Hz (all spectra here
    are); its RMS Doppler ``rms_doppler_hz`` is the only property of the
    spectrum that matters [Rice1944]_.

    Notes
    -----
    Evaluated as Rice's integral written over the phase of the gain relative to
    the direct component: with g = A + s (s circular Gaussian, per-quadrature
    variance sigma^2) and the direct part turning at w = 2 pi f_los, the
    envelope slope given (R, theta) is Gaussian with mean w A sin(theta) and
    standard deviation sigma_d = 2 pi f_rms sigma, so

        N(r) = int_0^{2 pi} p(r, theta) [sigma_d phi(mu/sigma_d) + mu Phi(mu/sigma_d)] dtheta,

    with p(r, theta) = r/(2 pi sigma^2) exp(-(r^2 + A^2 - 2 r A cos theta)/(2 sigma^2)).
    For K = 0 it reduces to sqrt(2 pi) sqrt(2) f_rms rho exp(-rho^2)
    (:func:`level_crossing_rate_rayleigh`); for f_los = 0 to Stüber's closed
    form (:func:`level_crossing_rate_rician_static_los`). A direct component
    with Doppler raises the rate (compare Xiao, Zheng & Beaulieu 2006).
    Cost: one fixed 256-point periodic trapezoid rule per level (spectrally
    accurate for this smooth periodic integrand).
    """
    rho = np.asarray(rho, dtype=float)
    if k_linear == 0:
        return level_crossing_rate_rayleigh(rho, rms_doppler_hz=rms_doppler_hz)
    sigma = math.sqrt(1.0 / (2.0 * (k_linear + 1.0)))  # unit mean power
    amplitude = math.sqrt(k_linear / (k_linear + 1.0))
    sigma_d = 2.0 * math.pi * rms_doppler_hz * sigma
    omega = 2.0 * math.pi * los_doppler_hz
    theta = np.linspace(0.0, 2.0 * math.pi, 256, endpoint=False)
    r = rho[..., None]
    # exp(-(r - A)^2/(2 s^2)) * exp(-r A (1 - cos)/s^2): keeps the exponent bounded.
    log_p = (
        np.log(np.maximum(r, 1e-300) / (2.0 * math.pi * sigma * sigma))
        - (r - amplitude) ** 2 / (2.0 * sigma * sigma)
        - r * amplitude * (1.0 - np.cos(theta)) / (sigma * sigma)
    )
    mu = omega * amplitude * np.sin(theta)
    if sigma_d > 0:
        slope = sigma_d * stats.norm.pdf(mu / sigma_d) + mu * stats.norm.cdf(mu / sigma_d)
    else:
        slope = np.maximum(mu, 0.0)
    integrand = np.exp(log_p) * slope
    return integrand.mean(axis=-1) * 2.0 * math.pi * (rho > 0)


def level_crossing_rate_rayleigh(rho, *, rms_doppler_hz: float):
    """Rice's closed form for a Rayleigh envelope: sqrt(2 pi) (sqrt(2) f_rms) rho exp(-rho^2).

    With the classical spectrum (f_rms = f_D/sqrt 2) this is Jakes'
    N_R = sqrt(2 pi) f_D rho exp(-rho^2) [Jakes1974]_.
    """
    rho = np.asarray(rho, dtype=float)
    return math.sqrt(2.0 * math.pi) * math.sqrt(2.0) * rms_doppler_hz * rho * np.exp(-rho * rho)


def level_crossing_rate_rician_static_los(rho, *, rms_doppler_hz: float, k_linear: float):
    """Stüber's closed form for a Rician envelope whose direct part has zero Doppler.

    N_R = sqrt(2 pi (K+1)) f_D rho exp(-K - (K+1) rho^2) I0(2 rho sqrt(K(K+1)))
    for the classical spectrum [Stuber]_; written here with f_D = sqrt(2) f_rms
    so that it holds for any symmetric spectrum. Uses ``scipy.special.i0e``
    to stay finite at large K.
    """
    rho = np.asarray(rho, dtype=float)
    k = float(k_linear)
    x = 2.0 * rho * math.sqrt(k * (k + 1.0))
    return (
        math.sqrt(2.0 * math.pi * (k + 1.0))
        * math.sqrt(2.0)
        * rms_doppler_hz
        * rho
        * np.exp(-k - (k + 1.0) * rho * rho + x)
        * special.i0e(x)
    )


def average_fade_duration(
    rho,
    *,
    rms_doppler_hz: float,
    k_linear: float = 0.0,
    los_doppler_hz: float = 0.0,
):
    """Mean time the envelope stays below rho * R_rms, in seconds: P(R <= r) / N(r).

    For Rayleigh fading with the classical spectrum this equals Jakes'
    (exp(rho^2) - 1)/(rho f_D sqrt(2 pi)) [Jakes1974]_.
    """
    rho = np.asarray(rho, dtype=float)
    cdf = envelope_distribution(k_linear).cdf(rho)
    rate = level_crossing_rate(
        rho, rms_doppler_hz=rms_doppler_hz, k_linear=k_linear, los_doppler_hz=los_doppler_hz
    )
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(rate > 0, cdf / rate, np.inf)


def doppler_from_speed(speed_mps: float, carrier_hz: float) -> float:
    """Maximum Doppler f_D = v f_c / c, with c = 299 792 458 m/s (exact, SI)."""
    return speed_mps * carrier_hz / SPEED_OF_LIGHT_MPS


SPEED_OF_LIGHT_MPS = 299_792_458.0

__all__ = [
    "SPECTRUM_KINDS",
    "DopplerSpectrum",
    "envelope_distribution",
    "level_crossing_rate",
    "level_crossing_rate_rayleigh",
    "level_crossing_rate_rician_static_los",
    "average_fade_duration",
    "doppler_from_speed",
    "SPEED_OF_LIGHT_MPS",
]

