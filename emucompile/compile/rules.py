"""The rules a compile run applies to its choices: one copy, used by ``compile`` and ``validate``.

:func:`settle_choices` picks every choice of a compile run (command line
first, then the profile's ``compile:`` block, then the defaults of
:mod:`emucompile.compile.defaults`) and checks it against the profile: the update
rate against the largest Doppler of any tap gain (band edges, direct-part
shifts, the high-speed train's peak and a moving delay's carrier drift, see
:attr:`emucompile.profile.model.Profile.largest_doppler_hz`), the duration, the
sample rate against the update rate and the delays (the FIR length), and
the combinations not supported yet. Every finding is returned, errors and
warnings, each naming the choice it concerns, so that ``validate`` can point
at the key in the file and ``compile`` can refuse before anything is built.

:func:`emucompile.compile.plan.compile_findings` is what ``validate`` calls: these
rules, then the rest of :func:`emucompile.compile.plan.plan_compile` (the FIR map,
the target fit, the engine's plan, the size of the bundle) run without writing, so
a profile that validates is one that compiles with the same choices.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

from emucompile.errors import InputError

CHOICES = ("update_rate_hz", "duration_s", "seed", "sample_rate_hz", "method", "delay_mapping", "periodic")
"""The keys of a profile's ``compile:`` block, which are also the options of ``compile``."""

MAX_FIR_COLUMNS = 1 << 20
"""Most FIR coefficients a map may span (the largest delay times the sample rate): beyond it the
map alone takes gigabytes, and the cause is nearly always a unit slip."""
FIR_HALF_LENGTH_ALLOWANCE = 64
"""Coefficients beyond the largest delay allowed for in the FIR length estimate (a sinc row's
half length is 16 by default; 64 is a generous bound)."""


@dataclass(frozen=True)
class Finding:
    """One rule's verdict on a choice: ``key`` is the choice (a ``compile:`` key, ``"target"``,
    ``"formats"``, ``"size"``) or None; ``source`` says where the choice came from
    (``"option"``, ``"profile"``, ``"default"``, ...)."""

    key: str | None
    message: str
    hint: str | None = None
    severity: str = "error"
    source: str | None = None

    def text(self) -> str:
        return f"{self.message} ({self.hint})" if self.hint else self.message

    def pointer(self) -> str:
        """Where in a profile the finding belongs: the ``compile:`` key it came from, else the block."""
        if self.key in CHOICES and self.source == "profile":
            return f"/compile/{self.key}"
        if self.key in ("target", "expect") and self.source == "profile":
            return f"/{self.key}"
        return "/compile" if self.source == "profile" else ""


class CompileRefused(InputError):
    """The choices of a compile run break a rule; ``findings`` holds every finding (warnings too)."""

    def __init__(self, findings):
        self.findings = list(findings)
        errors = [f for f in self.findings if f.severity == "error"]
        more = f" (and {len(errors) - 1} more: {'; '.join(f.message for f in errors[1:])})" if len(errors) > 1 else ""
        super().__init__(errors[0].message + more, hint=errors[0].hint)


@dataclass(frozen=True)
class Choices:
    """Every choice of a compile run, settled; ``sources`` says where each came from."""

    update_rate_hz: float
    duration_s: float
    n_samples: int
    seed: int | None
    method: str
    periodic: bool
    delay_mapping: str | None
    sample_rate_hz: float | None
    sources: dict = field(default_factory=dict)


def settle_choices(profile, *, duration_s=None, update_rate_hz=None, seed=None, sample_rate_hz=None,
                   delay_mapping=None, periodic=None, method=None, target=None, sources=None):
    """``(choices_or_None, findings)``: the choices of a compile run and every rule's finding.

    ``target`` is a parsed :class:`emucompile.profile.target.Target` (or None); the
    seed stays None when neither the option nor the profile gives one (the
    caller draws it). ``choices`` is None when an error leaves a choice unknown.
    """
    from emucompile.models import fading
    from emucompile.compile.defaults import (
        DEFAULT_DURATION_S,
        DEFAULT_UPDATE_FACTOR,
        DEFAULT_UPDATE_RATE_NO_DOPPLER_HZ,
        MIN_UPDATE_FACTOR,
        WARN_UPDATE_FACTOR,
    )

    defaults = profile.compile
    sources = {} if sources is None else sources
    findings: list[Finding] = []

    def find(key, message, hint=None, severity="error"):
        findings.append(Finding(key, message, hint, severity, sources.get(key)))

    largest = profile.largest_doppler_hz
    rate = _pick(sources, "update_rate_hz", update_rate_hz, defaults.update_rate_hz)
    if rate is None:
        rate = DEFAULT_UPDATE_FACTOR * largest if largest > 0 else DEFAULT_UPDATE_RATE_NO_DOPPLER_HZ
        cap = getattr(target, "max_update_rate_hz", None)
        if cap is not None and rate > cap:
            rate = float(cap)
            sources["update_rate_hz"] = "target"
    rate = _in_range(find, "update_rate_hz", "update rate", _positive(find, "update_rate_hz", "update rate", rate, "Hz"))
    if rate is not None and largest > 0:
        minimum = MIN_UPDATE_FACTOR * largest
        if rate < minimum:
            find("update_rate_hz",
                 f"update rate {rate:g} Hz is below the minimum {minimum:g} Hz for the largest Doppler "
                 f"{largest:g} Hz{_doppler_origin(profile)} ({MIN_UPDATE_FACTOR:g} x, Nyquist with a guard band)",
                 f"use --update-rate {math.ceil(minimum)} or more")
        elif rate < WARN_UPDATE_FACTOR * largest:
            find("update_rate_hz",
                 f"update rate {rate:g} Hz is only {rate / largest:.1f} x the largest Doppler "
                 f"({largest:g} Hz{_doppler_origin(profile)}): an emulator that holds or linearly interpolates "
                 f"coefficients between updates will add images; {WARN_UPDATE_FACTOR} x "
                 f"({WARN_UPDATE_FACTOR * largest:g} Hz) or more avoids that", severity="warning")

    duration = _pick(sources, "duration_s", duration_s, defaults.duration_s)
    duration = DEFAULT_DURATION_S if duration is None else _positive(find, "duration_s", "duration", duration, "s")
    n_samples = None
    if duration is not None and rate is not None and not math.isfinite(duration * rate):
        find("duration_s", f"a duration of {duration:g} s at {rate:g} Hz is more samples than any bundle holds")
    elif duration is not None and rate is not None:
        n_samples = int(round(duration * rate))
        if n_samples < 1:
            find("duration_s", f"a duration of {duration:g} s at {rate:g} Hz gives no sample",
                 f"use at least {1.0 / rate:g} s")

    seed_value = _pick(sources, "seed", seed, defaults.seed)
    if seed_value is not None and (isinstance(seed_value, bool) or int(seed_value) != seed_value or seed_value < 0):
        find("seed", f"seed must be an integer >= 0, got {_short_number(seed_value)}")
        seed_value = None
    elif seed_value is not None and seed_value > MAX_SEED:
        find("seed", f"seed {_short_number(seed_value)} must be an integer from 0 to 2**64 - 1")
        seed_value = None
    method_value = _pick(sources, "method", method, defaults.method) or fading.DEFAULT_METHOD
    if method_value not in fading.METHODS:
        find("method", f"method must be one of {', '.join(fading.METHODS)}, got {method_value!r}")
    periodic_value = bool(_pick(sources, "periodic", periodic, defaults.periodic) or False)
    mapping = _pick(sources, "delay_mapping", delay_mapping, defaults.delay_mapping)
    rate_fs = _pick(sources, "sample_rate_hz", sample_rate_hz, defaults.sample_rate_hz)
    if rate_fs is not None:
        rate_fs = _in_range(find, "sample_rate_hz", "sample rate",
                            _positive(find, "sample_rate_hz", "sample rate", rate_fs, "Hz"))

    conditions = profile.conditions
    moving = getattr(conditions, "moving_propagation", None)
    if periodic_value and conditions is not None and any(
            getattr(conditions, name, None) is not None for name in ("high_speed_train", "moving_propagation", "shadowing")):
        find("periodic", "periodic mode is not supported yet with time-varying conditions",
             "drop --periodic, or the conditions block")
    if moving is not None:
        if target is not None:
            find("target", "a moving delay cannot be fitted to a target yet", "drop the target, or the moving delay")
        if sample_rate_hz is None and defaults.sample_rate_hz is None:
            find("sample_rate_hz", "a moving delay needs a sample rate: the FIR follows the delay",
                 "give --sample-rate (or compile: sample_rate_hz)")
        if mapping not in (None, "sinc"):
            find("delay_mapping", "a moving delay needs the sinc delay mapping (a nearest-sample map would jump)",
                 "use --delay-mapping sinc")
    if rate_fs is None and target is not None:
        rate_fs_target = getattr(target, "sample_rate_hz", None)
    else:
        rate_fs_target = rate_fs
    _sample_rate_rules(find, profile, rate, rate_fs_target, mapping)

    if any(f.severity == "error" for f in findings):
        return None, findings
    return Choices(update_rate_hz=rate, duration_s=duration, n_samples=n_samples, seed=seed_value,
                   method=method_value, periodic=periodic_value, delay_mapping=mapping,
                   sample_rate_hz=rate_fs, sources=sources), findings


MAX_SEED = 2**64 - 1
"""Largest seed (as the profile's compile.seed): numpy's SeedSequence takes any size, a file need not."""


def _in_range(find, key, what, rate):
    """``rate`` inside :data:`emucompile.bundle.store.RATE_RANGE_HZ`, else a finding and None."""
    from emucompile.bundle.store import RATE_RANGE_HZ

    low, high = RATE_RANGE_HZ
    if rate is not None and not low <= rate <= high:
        find(key, f"{what} {rate:g} Hz lies outside {low:g} to {high:g} Hz")
        return None
    return rate


def _short_number(value) -> str:
    """A number for a message: a 5000-digit integer is shown by its head and its length."""
    if isinstance(value, int) and not isinstance(value, bool) and value.bit_length() > 128:
        return f"an integer of about {int(value.bit_length() * 0.30103) + 1} digits"  # repr may refuse it
    text = repr(value)
    return text if len(text) <= 40 else f"{text[:20]}... ({len(text)} characters)"


def _sample_rate_rules(find, profile, rate, rate_fs, mapping):
    """The sample rate against the update rate and the tap delays."""
    if rate_fs is None:
        return
    if rate is not None and rate > rate_fs:
        find("update_rate_hz", f"update rate {rate:g} Hz is above the sample rate {rate_fs:g} Hz: "
             "the FIR cannot change more often than once a sample",
             f"use an update rate of at most {rate_fs:g} Hz")
    delays = sorted(t.delay_s for t in profile.taps)
    n_fir = math.ceil((delays[-1] - min(delays[0], 0.0)) * rate_fs) + FIR_HALF_LENGTH_ALLOWANCE
    limit = MAX_FIR_COLUMNS
    if n_fir > limit:
        find("sample_rate_hz",
             f"at {rate_fs:g} Hz the largest delay {delays[-1] * 1e6:g} us spans about {n_fir} FIR coefficients, "
             f"above the {limit} this program builds",
             "check the delays' units (delay_ns / delay_us) and the sample rate")
    if mapping == "nearest":
        period = 1.0 / rate_fs
        close = [(a, b) for a, b in zip(delays, delays[1:]) if 0 < b - a < period]
        if close:
            a, b = close[0]
            find("delay_mapping",
                 f"{len(close)} pair(s) of taps closer than one sample ({period * 1e9:.4g} ns at {rate_fs:g} Hz), "
                 f"e.g. {a * 1e9:.4g} and {b * 1e9:.4g} ns: the nearest mapping may put them on one coefficient",
                 "the sinc mapping keeps them apart; or raise the sample rate", severity="warning")


def _doppler_origin(profile) -> str:
    """`` (the high-speed train's peak)`` and the like, when a condition sets the largest Doppler."""
    top = max(profile.taps, key=lambda t: t.largest_doppler_hz)
    if top.los_peak_doppler_hz and top.los_peak_doppler_hz >= (top.max_doppler_hz or 0.0):
        return ", the high-speed train's peak"
    if top.drift_doppler_hz:
        return ", a moving delay's carrier drift included"
    return ""


def _pick(sources, name, option, from_profile):
    if option is not None:
        sources[name] = "option"
        return option
    if from_profile is not None:
        sources[name] = "profile"
        return from_profile
    sources[name] = "default"
    return None


def _positive(find, key, what, value, unit):
    try:
        number = float(value)
    except (TypeError, ValueError, OverflowError):
        find(key, f"{what} must be a finite number, got {_short_number(value)}")
        return None
    if not (number > 0 and math.isfinite(number)):
        find(key, f"{what} must be finite and > 0 {unit}, got {_short_number(value)}")
        return None
    return number


__all__ = ["CHOICES", "Finding", "CompileRefused", "Choices", "settle_choices"]
