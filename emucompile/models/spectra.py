"""The Doppler spectra: one registry, asked by every place that depends on the kind.

Each :class:`SpectrumKind` holds what the program needs of one shape of
Doppler spectrum S(f) (unit power, zero for |f| >= f_D): its density, its
autocorrelation (the engine's filter design and verify's reference), its
second moment (RMS Doppler spread, level-crossing rates), its spectral
distribution function and one-sided quantile (verify's binned PSD reference,
the sum-of-sinusoids frequencies), its parameters with their checks, and the
few design hints the engine reads (the narrowest feature for the lag window,
the default number of sinusoids). The profile's checks, the manifest's
records, the engine, the theory, the tolerances, verify and the report card
ask this registry instead of branching on the kind's name.

Adding a spectrum: define its functions, register a :class:`SpectrumKind`
in :data:`SPECTRA`, add its name to the profile schema's ``$defs/spectrum_kind``
(the tap, the tap override and the manifest schema refer to it; a test compares
it with :data:`KINDS`) and a new parameter to ``$defs/spectrum_parameters`` with a
``$ref`` to it in ``tap`` and ``tap_override`` (``emucompile/schemas/profile-v1.schema.json``),
document it in
``docs/profile-format.md`` and test it (density integrates to 1,
autocorrelation = Fourier transform of the density, moment, quantile).

Everything here takes the band edge f_D and the kind's parameters as a dict
(``{"sigma_hz": 20.0}``); :class:`emucompile.models.theory.DopplerSpectrum`
binds them. numpy and scipy.special are imported on first use.

References
----------
.. [Clarke1968] R. H. Clarke, "A statistical theory of mobile-radio reception",
   Bell Syst. Tech. J. 47(6), 1968 (the U-shaped spectrum).
.. [Jakes1974] W. C. Jakes (ed.), Microwave Mobile Communications, Wiley, 1974:
   r(tau) = J0(2 pi f_D tau) for the classical spectrum.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Callable

from emucompile._lazy import LazyModule

np = LazyModule("numpy")
special = LazyModule("scipy.special")

DEFAULT_SINUSOIDS = 256
"""Sinusoids per quadrature of the sum-of-sinusoids generator, unless a kind asks for more."""


@dataclass(frozen=True)
class Parameter:
    """One parameter of a spectrum kind: its key in a profile's tap and in the manifest, its unit and meaning."""

    name: str
    description: str
    unit: str = "Hz"
    label: str = ""
    """A short name for messages and tables (the key when empty)."""

    def __post_init__(self):
        if not self.label:
            object.__setattr__(self, "label", self.name)


@dataclass(frozen=True)
class SpectrumKind:
    """One kind of Doppler spectrum; the functions take (frequency or lag, f_D, parameters)."""

    name: str
    description: str
    psd: Callable
    autocorrelation: Callable
    second_moment: Callable
    cdf: Callable
    quantile: Callable
    autocorrelation_source: str
    parameters: tuple = ()
    symmetric: bool = True
    bounded_density: bool = True
    """False where the density is infinite at the band edges (the classical U-shape): plots clip it."""
    feature_width: Callable = field(default=lambda fd, p: None)
    """The width (Hz) of the spectrum's narrowest feature, when narrower than f_D (the lag window must span it)."""
    sinusoids: int = DEFAULT_SINUSOIDS
    example: dict = field(default_factory=dict)
    """Parameter values for a tap with f_D = 100 Hz (documentation and the registry's own tests)."""
    check: Callable = field(default=lambda fd, p, fmt: [])
    """``(parameter or None, severity, message, hint)`` for each problem of these parameters with this f_D
    (``fmt(value, unit)`` formats a number for the message)."""

    @property
    def parameter_names(self) -> tuple:
        return tuple(p.name for p in self.parameters)


# -- classical ---------------------------------------------------------------------------------


def _classical_psd(f, fd, p):
    f = np.asarray(f, dtype=float)
    out = np.zeros_like(f)
    inside = np.abs(f) < fd
    x = f[inside] / fd
    out[inside] = 1.0 / (np.pi * fd * np.sqrt(1.0 - x * x))
    return out


CLASSICAL = SpectrumKind(
    name="classical",
    description="Clarke/Jakes U-shape S(f) = 1/(pi f_D sqrt(1-(f/f_D)^2)) on |f| < f_D [Clarke1968]_",
    psd=_classical_psd,
    autocorrelation=lambda tau, fd, p: special.j0(2.0 * np.pi * fd * np.asarray(tau, dtype=float)),
    second_moment=lambda fd, p: fd * fd / 2.0,
    cdf=lambda f, fd, p: 0.5 + np.arcsin(f / fd) / np.pi,
    quantile=lambda u, fd, p: fd * np.sin(0.5 * np.pi * u),
    autocorrelation_source="Clarke 1968 / Jakes 1974: r = J0(2 pi f_D tau) (scipy.special.j0)",
    bounded_density=False,
)


# -- flat --------------------------------------------------------------------------------------


def _flat_psd(f, fd, p):
    f = np.asarray(f, dtype=float)
    out = np.zeros_like(f)
    out[np.abs(f) < fd] = 1.0 / (2.0 * fd)
    return out


FLAT = SpectrumKind(
    name="flat",
    description="flat S(f) = 1/(2 f_D) on |f| < f_D",
    psd=_flat_psd,
    autocorrelation=lambda tau, fd, p: np.sinc(2.0 * fd * np.asarray(tau, dtype=float)),
    second_moment=lambda fd, p: fd * fd / 3.0,
    cdf=lambda f, fd, p: (f + fd) / (2.0 * fd),
    quantile=lambda u, fd, p: fd * u,
    autocorrelation_source="flat spectrum: r = sinc(2 f_D tau)",
)


# -- gaussian (truncated at f_D) ----------------------------------------------------------------


def _kept(fd, p):
    """The share of the untruncated Gaussian's power inside |f| < f_D."""
    return math.erf(fd / (p["sigma_hz"] * math.sqrt(2.0)))


def _gaussian_psd(f, fd, p):
    f = np.asarray(f, dtype=float)
    out = np.zeros_like(f)
    inside = np.abs(f) < fd
    s = p["sigma_hz"]
    out[inside] = np.exp(-0.5 * (f[inside] / s) ** 2) / (math.sqrt(2.0 * math.pi) * s * _kept(fd, p))
    return out


def _gaussian_autocorrelation(tau, fd, p):
    """exp(-2 pi^2 s^2 tau^2) Re erf((f_D + j 2 pi s^2 tau)/(s sqrt 2)) / erf(f_D/(s sqrt 2)).

    Evaluated through the Faddeeva function so that it stays finite at large lags:
    erf(z) = 1 - exp(-z^2) w(i z), and exp(-2 pi^2 s^2 tau^2 - z^2) simplifies to
    exp(-f_D^2/(2 s^2)) exp(-j f_D c / s^2), which never overflows. For f_D >> s it
    tends to the textbook exp(-2 pi^2 s^2 tau^2).
    """
    tau = np.asarray(tau, dtype=float)
    s = p["sigma_hz"]
    c = 2.0 * np.pi * s * s * tau
    z = (fd + 1j * c) / (s * math.sqrt(2.0))
    value = np.exp(-2.0 * np.pi**2 * s * s * tau * tau) - np.exp(
        -fd * fd / (2.0 * s * s)
    ) * np.exp(-1j * fd * c / (s * s)) * special.wofz(1j * z)
    return value.real / _kept(fd, p)


def _gaussian_second_moment(fd, p):
    """Variance of a normal law truncated to [-a sigma, a sigma], a = f_D / sigma."""
    s = p["sigma_hz"]
    a = fd / s
    density = math.exp(-0.5 * a * a) / math.sqrt(2.0 * math.pi)  # the standard normal density at a
    return s * s * (1.0 - 2.0 * a * density / _kept(fd, p))


def _gaussian_cdf(f, fd, p):
    """(Phi(f/sigma) - Phi(-f_D/sigma)) / (2 Phi(f_D/sigma) - 1)."""
    s = p["sigma_hz"]
    lo = special.ndtr(-fd / s)
    return (special.ndtr(f / s) - lo) / (1.0 - 2.0 * lo)


def _gaussian_quantile(u, fd, p):
    s = p["sigma_hz"] * math.sqrt(2.0)
    return s * special.erfinv(u * math.erf(fd / s))


def _gaussian_check(fd, p, fmt):
    sigma = p["sigma_hz"]
    if sigma > fd:
        return [("sigma_hz", "error", f"sigma_hz {fmt(sigma, 'Hz')} exceeds the tap's maximum Doppler {fmt(fd, 'Hz')}",
                 "the Gaussian spectrum is truncated at f_D; keep sigma_hz <= f_D")]
    if fd < 3.0 * sigma:
        removed = 1.0 - math.erf(fd / (sigma * math.sqrt(2.0)))
        return [("sigma_hz", "warning",
                 f"the Gaussian spectrum (sigma {fmt(sigma, 'Hz')}) is truncated at f_D = {fmt(fd, 'Hz')} = "
                 f"{fd / sigma:.3g} sigma, which removes {removed * 100:.3g} % of its power",
                 "the truncated spectrum is used as is, renormalised to unit power")]
    return []


GAUSSIAN = SpectrumKind(
    name="gaussian",
    description="exp(-f^2/(2 sigma^2)) truncated to |f| <= f_D and renormalised to unit power",
    psd=_gaussian_psd,
    autocorrelation=_gaussian_autocorrelation,
    second_moment=_gaussian_second_moment,
    cdf=_gaussian_cdf,
    quantile=_gaussian_quantile,
    autocorrelation_source="Gaussian spectrum truncated at f_D: theory.DopplerSpectrum.autocorrelation "
                           "(Faddeeva form)",
    parameters=(Parameter("sigma_hz", "its standard deviation in Hz", "Hz", "sigma"),),
    feature_width=lambda fd, p: p["sigma_hz"],
    # Its thin tails need more lines (measured, tests/models/test_fading_statistics.py: at 256 the Doppler PSD
    # check fails records of T f_D = 5e4, at 1024 it passes).
    sinusoids=1024,
    example={"sigma_hz": 30.0},
    check=_gaussian_check,
)


SPECTRA: dict[str, SpectrumKind] = {kind.name: kind for kind in (CLASSICAL, FLAT, GAUSSIAN)}
"""Every spectrum kind by name; the first is the default."""
KINDS = tuple(SPECTRA)
DEFAULT_KIND = KINDS[0]
PARAMETERS = tuple({p.name: p for kind in SPECTRA.values() for p in kind.parameters}.values())
"""Every kind's parameters, each once (a tap of a profile or of the manifest may hold them)."""
PARAMETER_NAMES = tuple(p.name for p in PARAMETERS)


def kind(name: str) -> SpectrumKind:
    """The registered kind ``name``; ValueError naming the kinds otherwise."""
    try:
        return SPECTRA[name]
    except (KeyError, TypeError):
        raise ValueError(f"kind must be one of {KINDS}, got {name!r}") from None


def check_parameters(name: str, max_doppler_hz: float | None, parameters: dict, fmt=None) -> list:
    """Every problem of a tap's spectrum parameters, as ``(parameter or None, severity, message, hint, at_key)``.

    ``parameters`` holds the keys the tap gives (a value None: present but not a
    usable number, already reported). A parameter the kind needs and lacks, one
    it does not take (``at_key``: the problem is the key itself), then, when every
    value is usable and f_D is known, the kind's own checks. ``fmt(value, unit)``
    formats numbers in messages.
    """
    spec = kind(name)
    fmt = fmt or (lambda value, unit: f"{value:g} {unit}")
    problems = [(None, "error", f"a {name} spectrum needs {p.name} ({p.description})", None, False)
                for p in spec.parameters if p.name not in parameters]
    problems += [(key, "error", f"{key} applies to the {_takers(key)} spectrum only, not {name}",
                  f"remove {key}, or set spectrum: {_takers(key)}", True)
                 for key in PARAMETER_NAMES if key not in spec.parameter_names and key in parameters]
    values = {key: parameters.get(key) for key in spec.parameter_names}
    if not problems and max_doppler_hz is not None and None not in values.values():
        problems += [(*problem, False) for problem in spec.check(max_doppler_hz, values, fmt)]
    return problems


def record(name: str | None, parameters: dict) -> dict:
    """A tap's spectrum as the manifest and ``stats --json`` hold it: ``spectrum``, ``sigma_hz`` (null unless
    Gaussian: kept in every record of format 1) and any other parameter of the kind."""
    out = {"spectrum": name, "sigma_hz": parameters.get("sigma_hz")}
    if name is not None:
        out.update({key: parameters.get(key) for key in kind(name).parameter_names})
    return out


def parameters_of(source) -> dict:
    """The spectrum parameters a tap holds (a profile's Tap, or a manifest or document mapping); None dropped."""
    if isinstance(source, dict):
        found = {key: source.get(key) for key in PARAMETER_NAMES}
    else:
        found = dict(getattr(source, "spectrum_parameters", None) or {})
        found.update({key: getattr(source, key) for key in PARAMETER_NAMES if hasattr(source, key)})
    return {key: float(value) for key, value in found.items() if value is not None}


def _takers(key: str) -> str:
    return " or ".join(k.name for k in SPECTRA.values() if key in k.parameter_names)


__all__ = ["Parameter", "SpectrumKind", "SPECTRA", "KINDS", "DEFAULT_KIND", "PARAMETERS", "PARAMETER_NAMES",
           "DEFAULT_SINUSOIDS",
           "kind", "check_parameters", "record", "parameters_of"]
