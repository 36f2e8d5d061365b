"""Profiles: reading, checking and the frozen in-memory form (contract 2).

A profile file (YAML 1.2 or JSON, ``format_version: 1``) becomes a
:class:`Profile` of :class:`Tap` objects in SI units: seconds, hertz, linear
power. Mean tap powers are already scaled to ``total_power_db`` (unless that
is ``null``). Every later stage reads only these dataclasses, never the file.

Public entry points: :func:`load_profile` (raise on any error) and
:func:`check_profile` (collect every problem, for ``emucompile validate``).
"""

from __future__ import annotations

import hashlib
import json
import math
from dataclasses import dataclass, field
from typing import Any

from emucompile.theory import DopplerSpectrum

FORMAT_VERSION = 1
FADING_KINDS = ("rayleigh", "rician", "static")


@dataclass(frozen=True)
class Tap:
    """One path of the tapped delay line, in SI units, power already scaled.

    Attributes
    ----------
    delay_s : float
        Excess delay of the path.
    power_linear : float
        Mean power E|g|^2 of the tap after scaling to the profile's total.
    fading : {"rayleigh", "rician", "static"}
    k_linear : float or None
        Rician K = direct power / diffuse power (linear); None unless Rician.
    spectrum : {"classical", "flat", "gaussian"}
        Doppler spectrum of the diffuse part (ignored for static taps).
    max_doppler_hz : float or None
        This tap's maximum Doppler f_D (its own override, else the profile's);
        None only for a static tap when the profile gives no Doppler.
    sigma_hz : float or None
        Standard deviation of a Gaussian spectrum.
    los_doppler_hz : float or None
        Doppler shift of the direct component (Rician), or of the rotation of
        a static tap (0.0 when it does not turn). None for Rayleigh.
    los_angle_deg : float or None
        The arrival angle the direct Doppler came from, when given that way.
    los_phase_deg : float or None
        Initial phase of the direct component / static gain; None means "draw
        it from the seed" (the compiled bundle records the value drawn).
    index : int
        Position of the tap in the file (0-based), kept for messages.
    """

    delay_s: float
    power_linear: float
    fading: str = "rayleigh"
    k_linear: float | None = None
    spectrum: str = "classical"
    max_doppler_hz: float | None = None
    sigma_hz: float | None = None
    los_doppler_hz: float | None = None
    los_angle_deg: float | None = None
    los_phase_deg: float | None = None
    index: int = 0

    @property
    def power_db(self) -> float:
        return 10.0 * math.log10(self.power_linear) if self.power_linear > 0 else -math.inf

    @property
    def k_db(self) -> float | None:
        if self.k_linear is None:
            return None
        return 10.0 * math.log10(self.k_linear) if self.k_linear > 0 else -math.inf

    @property
    def direct_power_linear(self) -> float:
        """Power of the deterministic part: K/(K+1) of the tap (all of a static tap)."""
        if self.fading == "static":
            return self.power_linear
        if self.fading == "rician":
            return self.power_linear * self.k_linear / (self.k_linear + 1.0)
        return 0.0

    @property
    def diffuse_power_linear(self) -> float:
        """Power of the random (scattered) part."""
        return self.power_linear - self.direct_power_linear

    @property
    def doppler_spectrum(self) -> DopplerSpectrum | None:
        """The diffuse part's Doppler spectrum; None for a static tap."""
        if self.fading == "static":
            return None
        return DopplerSpectrum(self.spectrum, self.max_doppler_hz, self.sigma_hz)

    @property
    def largest_doppler_hz(self) -> float:
        """Largest frequency in this tap's gain: band edge or direct-part shift."""
        edge = self.max_doppler_hz if self.fading != "static" else 0.0
        return max(edge or 0.0, abs(self.los_doppler_hz or 0.0))


@dataclass(frozen=True)
class CompileDefaults:
    """The profile's optional ``compile:`` block; the command line overrides it."""

    update_rate_hz: float | None = None
    duration_s: float | None = None
    seed: int | None = None
    sample_rate_hz: float | None = None
    method: str | None = None
    delay_mapping: str | None = None
    periodic: bool | None = None


@dataclass(frozen=True)
class Expectation:
    """One ``expect:`` target: a quantity of ``stats`` and the range it must fall in.

    ``quantity`` is the key as written (``rms_delay_spread_ns``); ``value_si``
    and the bounds are converted to SI using the key's unit suffix.
    """

    quantity: str
    value_si: float | None
    low_si: float
    high_si: float
    pointer: str = ""


@dataclass(frozen=True)
class Profile:
    """A checked profile in SI units. Build it with :func:`load_profile`.

    ``document`` is the resolved profile document (presets merged, defaults
    explicit, values as written): loading it again gives an equal Profile, and
    :meth:`resolved_sha256` hashes its canonical JSON form.
    """

    name: str
    taps: tuple[Tap, ...]
    description: str = ""
    max_doppler_hz: float | None = None
    speed_mps: float | None = None
    carrier_hz: float | None = None
    total_power_db: float | None = 0.0
    power_scale_db: float = 0.0
    compile: CompileDefaults = field(default_factory=CompileDefaults)
    expect: tuple[Expectation, ...] = ()
    mimo: Any = None
    conditions: Any = None
    preset: Any = None
    target: Any = None
    document: dict = field(default_factory=dict, compare=False, hash=False, repr=False)
    source: str | None = field(default=None, compare=False)

    @property
    def n_taps(self) -> int:
        return len(self.taps)

    @property
    def all_static(self) -> bool:
        return all(t.fading == "static" for t in self.taps)

    @property
    def largest_doppler_hz(self) -> float:
        """Largest frequency in any tap gain (band edges and direct-part shifts)."""
        return max((t.largest_doppler_hz for t in self.taps), default=0.0)

    def canonical_json(self) -> bytes:
        """The resolved document as canonical JSON bytes (sorted keys, no spaces, UTF-8)."""
        return canonical_json(self.document)

    def resolved_sha256(self) -> str:
        return hashlib.sha256(self.canonical_json()).hexdigest()


def canonical_json(document: Any) -> bytes:
    """Canonical JSON: sorted keys, compact separators, UTF-8, no NaN/Infinity."""
    return json.dumps(
        document, sort_keys=True, separators=(",", ":"), ensure_ascii=False, allow_nan=False
    ).encode("utf-8")


# -- reading and checking (issue: profile format, validation and statistics) --


def load_profile(source, *, format: str | None = None) -> Profile:
    """Read, check and convert a profile file; raise :class:`ProfileError` listing every error.

    Parameters
    ----------
    source : str or os.PathLike
        Path of a ``.yaml``/``.yml``/``.json`` file.
    format : {"yaml", "json"}, optional
        Overrides the guess from the file name.
    """
    raise NotImplementedError("load_profile is not built yet")


def check_profile(source, *, format: str | None = None):
    """Check a profile file and return ``(profile_or_None, problems)`` without raising.

    ``problems`` is the list of every :class:`emucompile.errors.Problem`,
    warnings included; ``profile`` is None when any problem is an error.
    """
    raise NotImplementedError("check_profile is not built yet")
