"""What a check is about and what it returns: the tap model, the check result, the printed-tolerance rule.

:class:`TapModel` is the theory one tap's record should follow; :class:`CheckResult`
the outcome of one check (strict-JSON :meth:`CheckResult.to_dict`);
:func:`within_tolerance` the rule every numeric verdict follows. The
constants are the checks' settings (record length, levels, resolutions), read
by :mod:`emucompile.verify.tap_checks` and re-exported by
:mod:`emucompile.verify.tolerance`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from emucompile.models.theory import DopplerSpectrum
from emucompile.verify import estimators

CHECK_NAMES = (
    "mean_power",
    "k_factor",
    "envelope_ks",
    "autocorrelation",
    "doppler_psd",
    "out_of_band_power",
    "level_crossing_rate",
    "fade_duration",
    "phase_uniformity",
    "cross_correlation",
)

#: Shortest record, in Doppler periods, on which the statistical checks run.
MIN_DOPPLER_PERIODS = 50.0
#: Required suppression of the power beyond 1.05 f_D (the engine's spectral-purity requirement), in dB.
OUT_OF_BAND_LIMIT_DB = -40.0
OUT_OF_BAND_FACTOR = 1.05
#: Envelope quantiles at which crossings are counted, and the fewest expected crossings.
CROSSING_QUANTILES = (0.1, 0.5)
MIN_EXPECTED_CROSSINGS = 100.0
#: Crossings are counted on the envelope interpolated to at least this many times f_D
#: (measured on the reference process: at 64 f_D the count at the 10 % quantile is
#: 0.2 % low, at 16 f_D 3 % low), over at most this many Doppler periods: the longest
#: record length the calibration covers (T f_D = 5e4), which also bounds memory and time.
CROSSING_RATE_DOPPLER = 64.0
MAX_CROSSING_PERIODS = 50_000.0
#: Autocorrelation lags up to this many Doppler periods.
AUTOCORRELATION_SPAN_PERIODS = 3.0
AUTOCORRELATION_EFFECTIVE_LAGS = 24
#: Welch resolution of the PSD check, in units of f_D.
PSD_RESOLUTION_DOPPLER = 1.0 / 16.0
PSD_MIN_RELATIVE = 1e-2
PSD_MIN_SEGMENTS = 20
#: Relative tolerance on a static tap's power (float32 rounding is ~1e-7).
STATIC_POWER_TOLERANCE = 1e-4
HANN_OVERLAP_CORRELATION = 0.167  # Welch 1967, Table 1: Hann window at 50 % overlap


@dataclass(frozen=True)
class TapModel:
    """What one tap's gain record should be.

    Attributes
    ----------
    spectrum : theory.DopplerSpectrum or None
        Doppler spectrum of the diffuse part; None for a static tap.
    mean_power : float
        E|g|^2 (linear).
    k_linear : float
        Rician K (direct/diffuse power); 0 for Rayleigh, ``math.inf`` for a
        static tap (direct part only).
    los_doppler_hz : float
        Doppler of the direct part (0 when it does not turn).
    """

    spectrum: DopplerSpectrum | None
    mean_power: float
    k_linear: float = 0.0
    los_doppler_hz: float = 0.0

    @classmethod
    def from_tap(cls, tap) -> "TapModel":
        """From an :class:`emucompile.profile.model.Tap`.

        Static taps give ``spectrum=None, k_linear=inf``; Rayleigh taps K = 0.
        A direct part on a time-varying trajectory (``los_trajectory``) is not
        a stationary model: ValueError.
        """
        if getattr(tap, "los_trajectory", None):
            raise ValueError(f"tap {tap.index}: a direct part on a Doppler trajectory has no stationary model")
        los = float(tap.los_doppler_hz or 0.0)
        if tap.fading == "static":
            return cls(None, float(tap.power_linear), math.inf, los)
        spec = DopplerSpectrum.of(tap)
        k = float(tap.k_linear) if tap.fading == "rician" else 0.0
        return cls(spec, float(tap.power_linear), k, los if k > 0 else 0.0)

    @property
    def direct_power(self) -> float:
        if math.isinf(self.k_linear):
            return self.mean_power
        return self.mean_power * self.k_linear / (self.k_linear + 1.0)

    @property
    def diffuse_power(self) -> float:
        if math.isinf(self.k_linear):
            return 0.0
        return self.mean_power / (self.k_linear + 1.0)


@dataclass(frozen=True)
class CheckResult:
    """The outcome of one check.

    ``passed`` is True/False, or None when the check does not apply or the
    record is too short (``reason`` says which). ``tolerance`` is the
    acceptance half-width around ``expected`` at ``level`` and
    ``min_detectable`` the smallest deviation that reaches p = ``level``
    on this record, both in ``unit``. ``detail`` is JSON-able and carries,
    under ``"null"``, what :func:`holm` needs to restate the tolerance.
    """

    name: str
    tap: int | tuple | None
    value: float | None
    expected: float | None
    tolerance: float | None
    p_value: float | None
    passed: bool | None
    reason: str | None = None
    level: float | None = None
    min_detectable: float | None = None
    unit: str = ""
    detail: dict = field(default_factory=dict)

    def to_dict(self) -> dict:
        """Strict JSON: non-finite numbers become None and say so in ``reason``."""
        out = {}
        notes = []
        for key in ("name", "tap", "value", "expected", "tolerance", "p_value", "passed", "reason", "level",
                    "min_detectable", "unit"):
            v = getattr(self, key)
            clean, bad = json_value(v)
            if bad:
                notes.append(f"{key} is {bad}")
            out[key] = clean
        detail, _ = json_value(self.detail)
        out["detail"] = detail
        if notes:
            out["reason"] = "; ".join(([out["reason"]] if out["reason"] else []) + notes)
        return out


def within_tolerance(value, expected, tolerance) -> bool:
    """The rule every numeric verdict follows: |value - expected| <= tolerance (value <= tolerance without expected).

    A missing or non-finite value or tolerance does not pass.
    """
    if value is None or tolerance is None:
        return False
    if expected is None:
        return bool(value <= tolerance)
    return bool(abs(value - expected) <= tolerance)


def diffuse(g, rate_hz, model):
    if model.k_linear == 0:
        return g
    return estimators.remove_direct(g, rate_hz, model.los_doppler_hz)[0]


def na(name, tap, reason, level):
    return CheckResult(name, label(tap), None, None, None, None, None, reason, level, None, "", {})


def label(tap):
    if isinstance(tap, (list, tuple)):
        return tuple(int(t) for t in tap)
    return None if tap is None else int(tap)


def finite(x):
    return float(x) if math.isfinite(x) else None


def db(x):
    return 10.0 * math.log10(x) if x > 0 else -math.inf


def json_value(v):
    """(clean, what_was_bad) for strict JSON."""
    if isinstance(v, bool) or v is None or isinstance(v, str):
        return v, None
    if isinstance(v, (int, np.integer)):
        return int(v), None
    if isinstance(v, (float, np.floating)):
        f = float(v)
        if math.isfinite(f):
            return f, None
        return None, "nan" if math.isnan(f) else ("inf" if f > 0 else "-inf")
    if isinstance(v, complex):
        return json_value([v.real, v.imag])
    if isinstance(v, dict):
        return {str(k): json_value(x)[0] for k, x in v.items()}, None
    if isinstance(v, (list, tuple, np.ndarray)):
        return [json_value(x)[0] for x in list(v)], None
    return str(v), None


__all__ = ["CHECK_NAMES", "TapModel", "CheckResult", "within_tolerance", "MIN_DOPPLER_PERIODS",
           "OUT_OF_BAND_LIMIT_DB"]
