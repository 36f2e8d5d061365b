"""The frozen in-memory form of a profile: :class:`Profile`, :class:`Tap` and their parts (SI units).

Every later stage reads only these dataclasses, never the file; they are made by
:mod:`emucompile.profile.model` (reading) and :mod:`emucompile.profile.checker`
(checking and conversion). The names are importable from :mod:`emucompile.profile.model` too.
"""

from __future__ import annotations

import hashlib
import json
import math
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:  # the blocks' modules load only when a profile has the block
    from emucompile.profile.blocks import Conditions, MimoSetup, PresetInfo
    from emucompile.profile.target import Target

from emucompile.models.theory import DopplerSpectrum

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
    spectrum : str
        Doppler spectrum of the diffuse part, a kind of :data:`emucompile.models.spectra.KINDS`
        (ignored for static taps).
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
    los_trajectory : str or None
        ``"high_speed_train"`` when that condition drives the direct part's
        Doppler over time (``los_doppler_hz`` is then None; the phase comes
        from ``Profile.conditions.high_speed_train``); None for a constant shift.
    los_peak_doppler_hz : float or None
        Largest |Doppler| the direct part reaches on its trajectory.
    drift_doppler_hz : float
        Largest |frequency shift| of the whole gain from a moving delay whose
        carrier phase follows it (0 otherwise).
    spectrum_parameters : tuple
        (name, value) pairs of the spectrum's parameters other than ``sigma_hz``
        (see :mod:`emucompile.models.spectra`); empty for the built-in kinds.
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
    los_trajectory: str | None = None
    los_peak_doppler_hz: float | None = None
    drift_doppler_hz: float = 0.0
    spectrum_parameters: tuple = ()

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
        return DopplerSpectrum(self.spectrum, self.max_doppler_hz, self.sigma_hz, **dict(self.spectrum_parameters))

    @property
    def largest_doppler_hz(self) -> float:
        """Largest frequency in this tap's gain: band edge, direct-part shift or trajectory peak,
        plus the shift of a moving delay that the carrier follows."""
        edge = self.max_doppler_hz if self.fading != "static" else 0.0
        direct = max(abs(self.los_doppler_hz or 0.0), self.los_peak_doppler_hz or 0.0)
        return max(edge or 0.0, direct) + self.drift_doppler_hz


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
    and the bounds are converted to SI using the key's unit suffix; an open
    bound is -inf / +inf (``value_si`` is None for a {min, max} target).
    """

    quantity: str
    value_si: float | None
    low_si: float
    high_si: float
    pointer: str = ""
    statistic: str = ""
    """The key of :func:`emucompile.profile.stats.profile_statistics` it checks (SI unit)."""
    unit: str = ""
    """The unit suffix of ``quantity`` (``ns``, ``khz``, ``db``, ...)."""
    unit_factor: float = 1.0
    """SI value = value in ``unit`` times this factor."""

    def in_unit(self, value_si: float | None) -> float | None:
        """A value of the statistic converted from SI to the key's unit."""
        return None if value_si is None else value_si / self.unit_factor

    def contains(self, value_si: float | None) -> bool:
        """True when the statistic lies in the target range (round-off of 1e-9 in the key's unit allowed)."""
        if value_si is None or not math.isfinite(value_si):
            return False
        value = value_si / self.unit_factor
        low, high = self.low_si / self.unit_factor, self.high_si / self.unit_factor
        slack = 1e-9 * max(1.0, abs(low) if math.isfinite(low) else 0.0,
                           abs(high) if math.isfinite(high) else 0.0)
        return low - slack <= value <= high + slack


@dataclass(frozen=True)
class Profile:
    """A checked profile in SI units. Build it with :func:`load_profile`.

    ``document`` is the resolved profile document (presets merged, defaults
    explicit, values as written): loading it again gives an equal Profile, and
    :meth:`resolved_sha256` hashes its canonical JSON form.

    The optional blocks, None when absent:

    * ``mimo`` : :class:`emucompile.profile.blocks.MimoSetup` (None for SISO, 1x1
      included): ``mimo.correlation`` (:class:`emucompile.models.mimo.SpatialCorrelation`
      of the diffuse parts), ``mimo.direct_response`` (per-link factor of the
      direct parts), ``mimo.as_record()`` (the manifest's ``mimo``, docs/bundle-format.md).
    * ``conditions`` : :class:`emucompile.profile.blocks.Conditions`.
    * ``target`` : :class:`emucompile.profile.target.Target` (the ``target:`` block).
    * ``preset`` : :class:`emucompile.profile.blocks.PresetInfo` (provenance of taps
      made from a preset).
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
    mimo: MimoSetup | None = None
    conditions: Conditions | None = None
    preset: PresetInfo | None = None
    target: Target | None = None
    document: dict = field(default_factory=dict, compare=False, hash=False, repr=False)
    source: str | None = field(default=None, compare=False)

    @property
    def n_taps(self) -> int:
        return len(self.taps)

    @property
    def all_static(self) -> bool:
        return all(t.fading == "static" for t in self.taps)

    @property
    def n_tx(self) -> int:
        return 1 if self.mimo is None else self.mimo.n_tx

    @property
    def n_rx(self) -> int:
        return 1 if self.mimo is None else self.mimo.n_rx

    @property
    def largest_doppler_hz(self) -> float:
        """Largest frequency in any tap gain: band edges, direct-part shifts and trajectories
        (what the update rate must resolve; see :attr:`Tap.largest_doppler_hz`)."""
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


MAX_TAPS = 1024
"""Most taps a profile may have."""

MIN_DOPPLER_HZ = 1e-6
"""Smallest maximum Doppler accepted (a coherence time of days): guards the numerics."""

DOPPLER_AGREEMENT = 1e-3
"""max_doppler_hz and speed + carrier may differ by at most this fraction (0.1 %)."""

_DELAY_UNITS = {"s": 1.0, "ms": 1e-3, "us": 1e-6, "ns": 1e-9}
_FREQUENCY_UNITS = {"hz": 1.0, "khz": 1e3, "mhz": 1e6}
EXPECT_QUANTITIES = {
    "mean_excess_delay": ("mean_excess_delay_s", _DELAY_UNITS),
    "rms_delay_spread": ("rms_delay_spread_s", _DELAY_UNITS),
    "max_excess_delay": ("max_excess_delay_s", _DELAY_UNITS),
    "coherence_bandwidth_50": ("coherence_bandwidth_50_hz", _FREQUENCY_UNITS),
    "coherence_bandwidth_90": ("coherence_bandwidth_90_hz", _FREQUENCY_UNITS),
    "coherence_bandwidth_rule": ("coherence_bandwidth_rule_hz", _FREQUENCY_UNITS),
    "max_doppler": ("max_doppler_hz", {"hz": 1.0}),
    "rms_doppler_spread": ("rms_doppler_spread_hz", {"hz": 1.0}),
    "coherence_time_rule": ("coherence_time_rule_s", {"s": 1.0, "ms": 1e-3}),
    "total_power": ("total_power_db", {"db": 1.0}),
}
"""``expect:`` quantities: base name -> (statistic key in SI, {unit suffix: factor to SI})."""


def expect_keys() -> dict[str, tuple[str, str, float]]:
    """Every key allowed in ``expect:`` -> (statistic key, unit suffix, factor to SI)."""
    return {
        f"{base}_{unit}": (statistic, unit, factor)
        for base, (statistic, units) in EXPECT_QUANTITIES.items()
        for unit, factor in units.items()
    }
