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
from emucompile.models import spectra

# Imported on first use: a profile is read and checked without them (start-up).
np = LazyModule("numpy")
special = LazyModule("scipy.special")
stats = LazyModule("scipy.stats")

SPECTRUM_KINDS = spectra.KINDS


@dataclass(frozen=True, init=False)
class DopplerSpectrum:
    """A Doppler power spectrum of unit total power: a kind of :mod:`emucompile.models.spectra` bound to its values.

    Parameters
    ----------
    kind : str
        One of :data:`emucompile.models.spectra.KINDS`: ``classical`` (Clarke/Jakes
        U-shape [Clarke1968]_), ``flat``, ``gaussian`` (truncated at f_D and
        renormalised to unit power; the truncation is part of the definition,
        so the autocorrelation is that of the truncated spectrum).
    max_doppler_hz : float
        f_D, the band edge; > 0.
    sigma_hz : float, optional
        Standard deviation of the Gaussian spectrum before truncation
        (``gaussian`` only).
    **parameters
        The parameters of other kinds, by name (see the registry).

    Every parameter of every kind reads as an attribute (``spectrum.sigma_hz``),
    None when this kind has no such parameter.
    """

    kind: str
    max_doppler_hz: float
    parameters: tuple
    """The kind's parameters as sorted (name, value) pairs."""

    def __init__(self, kind, max_doppler_hz, sigma_hz=None, **parameters):
        if sigma_hz is not None:
            parameters["sigma_hz"] = sigma_hz
        spec = spectra.kind(kind)
        if not (max_doppler_hz > 0 and math.isfinite(max_doppler_hz)):
            raise ValueError(f"max_doppler_hz must be finite and > 0, got {max_doppler_hz!r}")
        for key in parameters:
            if key not in spec.parameter_names:
                raise ValueError(f"{key} applies to the {spectra._takers(key) or 'no'} spectrum only, not {kind!r}")
        for key in spec.parameter_names:
            value = parameters.get(key)
            if value is None or not (value > 0 and math.isfinite(value)):
                raise ValueError(f"a {kind} spectrum needs {key} > 0, got {value!r}")
        object.__setattr__(self, "kind", kind)
        object.__setattr__(self, "max_doppler_hz", max_doppler_hz)
        object.__setattr__(self, "parameters", tuple(sorted(parameters.items())))

    def __getattr__(self, name):
        if name in spectra.PARAMETER_NAMES:
            return dict(self.parameters).get(name)
        raise AttributeError(name)

    @property
    def spec(self) -> spectra.SpectrumKind:
        """The kind's registry entry."""
        return spectra.SPECTRA[self.kind]

    # -- spectrum ---------------------------------------------------------
    def psd(self, frequency_hz):
        """Power spectral density in 1/Hz (integrates to 1); 0 outside |f| < f_D."""
        return self.spec.psd(np.asarray(frequency_hz, dtype=float), self.max_doppler_hz, dict(self.parameters))

    def autocorrelation(self, lag_s):
        """Normalised autocorrelation r(tau) = integral of S(f) exp(j 2 pi f tau) df (real).

        classical: J0(2 pi f_D tau) [Jakes1974]_ (``scipy.special.j0``);
        flat: sinc(2 f_D tau); gaussian (truncated at f_D): the Faddeeva form of
        :func:`emucompile.models.spectra._gaussian_autocorrelation`.
        """
        return self.spec.autocorrelation(np.asarray(lag_s, dtype=float), self.max_doppler_hz, dict(self.parameters))

    def cdf(self, frequency_hz):
        """Integral of the density from -inf to f (closed forms; 0 below -f_D, 1 above f_D)."""
        fd = self.max_doppler_hz
        f = np.clip(np.asarray(frequency_hz, dtype=float), -fd, fd)
        return self.spec.cdf(f, fd, dict(self.parameters))

    def quantile(self, u):
        """G^-1(u): the frequency below which a fraction u of the one-sided power lies."""
        return self.spec.quantile(np.asarray(u, dtype=float), self.max_doppler_hz, dict(self.parameters))

    @property
    def second_moment_hz2(self) -> float:
        """Normalised second moment integral of f^2 S(f) df, in Hz^2."""
        return self.spec.second_moment(self.max_doppler_hz, dict(self.parameters))

    @property
    def rms_doppler_hz(self) -> float:
        """RMS Doppler spread sqrt(second moment); f_D/sqrt(2) for the classical spectrum."""
        return math.sqrt(self.second_moment_hz2)

    @property
    def feature_width_hz(self) -> float | None:
        """The width of the spectrum's narrowest feature where it has one beyond f_D (the Gaussian's sigma)."""
        return self.spec.feature_width(self.max_doppler_hz, dict(self.parameters))

    @property
    def band_edge_hz(self) -> float:
        """The spectrum is zero for |f| >= this frequency."""
        return self.max_doppler_hz

    def record(self) -> dict:
        """The spectrum as a manifest's tap holds it (:func:`emucompile.models.spectra.record`)."""
        return spectra.record(self.kind, dict(self.parameters))

    @classmethod
    def of(cls, source, max_doppler_hz=None) -> "DopplerSpectrum":
        """The spectrum a tap holds: a profile's Tap or a manifest tap (``spectrum`` null means the default)."""
        if isinstance(source, dict):
            name, fd = source.get("spectrum") or spectra.DEFAULT_KIND, source.get("max_doppler_hz")
        else:
            name, fd = source.spectrum, source.max_doppler_hz
        fd = float(fd if max_doppler_hz is None else max_doppler_hz)
        wanted = spectra.kind(name).parameter_names
        return cls(name, fd, **{k: v for k, v in spectra.parameters_of(source).items() if k in wanted})


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

