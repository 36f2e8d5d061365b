"""The rules a compile run applies to its choices: one copy, used by ``compile`` and ``validate``.

:func:`settle_choices` picks every choice of a compile run (command line
first, then the profile's ``compile:`` block, then the defaults of
:mod:`emucompile.compile.compiler`) and checks it against the profile: the update
rate against the largest Doppler of any tap gain (band edges, direct-part
shifts, the high-speed train's peak and a moving delay's carrier drift, see
:attr:`emucompile.profile.model.Profile.largest_doppler_hz`), the duration, the
sample rate against the update rate and the delays (the FIR length), and
the combinations not supported yet. Every finding is returned, errors and
warnings, each naming the choice it concerns, so that ``validate`` can point
at the key in the file and ``compile`` can refuse before anything is built.

:func:`compile_findings` is what ``validate`` calls: these rules, then the
planner's other refusals in closed form, with the functions the planner calls
itself (:func:`refuse_oversized`, :func:`fit_target`, :func:`expect_record`,
and :func:`emucompile.models.rates.doppler_filter_problem`, which the engine's
filter design shares): no filter is designed and no number drawn, so
``validate`` imports neither the engine nor scipy's filters. A profile that
validates is one that compiles with the same choices, except that the bundle's
size is checked against its lower bound (:func:`emucompile.models.rates.least_bundle_bytes`:
the tap gains and the FIR map, without the file headers and the manifest, a
few KiB), where compile also checks the exact size of the layout.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass, field

from emucompile._lazy import LazyModule
from emucompile.bundle import formats as bundle_formats
from emucompile.compile.defaults import (  # noqa: F401  (read here by the planner and the tests)
    DEFAULT_DURATION_S,
    DEFAULT_UPDATE_FACTOR,
    DEFAULT_UPDATE_RATE_NO_DOPPLER_HZ,
    MIN_UPDATE_FACTOR,
    WARN_UPDATE_FACTOR,
)
from emucompile.errors import CheckFailed, CompileRefused, InputError  # noqa: F401  (CompileRefused: re-exported)
from emucompile.models import rates as limits
from emucompile.models.rates import size_text

# Loaded on first use: expect: targets need the profile's statistics (numpy), a target its fit.
stats = LazyModule("emucompile.profile.stats")
target_module = LazyModule("emucompile.profile.target")

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
    rate = _positive(find, "update_rate_hz", "update rate", rate, "Hz")
    rate = _in_range(find, "update_rate_hz", "update rate", rate)
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
    method_value = _pick(sources, "method", method, defaults.method) or limits.DEFAULT_METHOD
    if method_value not in limits.METHODS:
        find("method", f"method must be one of {', '.join(limits.METHODS)}, got {method_value!r}")
    periodic_value = bool(_pick(sources, "periodic", periodic, defaults.periodic) or False)
    mapping = _pick(sources, "delay_mapping", delay_mapping, defaults.delay_mapping)
    rate_fs = _pick(sources, "sample_rate_hz", sample_rate_hz, defaults.sample_rate_hz)
    if rate_fs is not None:
        rate_fs = _in_range(find, "sample_rate_hz", "sample rate",
                            _positive(find, "sample_rate_hz", "sample rate", rate_fs, "Hz"))

    conditions = profile.conditions
    moving = getattr(conditions, "moving_propagation", None)
    if periodic_value and conditions is not None and any(
            getattr(conditions, name, None) is not None
            for name in ("high_speed_train", "moving_propagation", "shadowing")):
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


def compile_findings(profile, *, target=None, max_size_bytes=None) -> list[Finding]:
    """Every finding ``compile`` would make for this profile with no options (``validate``'s check).

    The rules of :func:`settle_choices`, then the planner's other refusals in
    closed form (size, target fit, Doppler filter lengths: see the module
    notes), in the planner's order; an error there becomes one finding.
    ``target``: a Target or a target file's path (judged with the profile, as
    ``compile --target FILE`` would).
    """
    max_size_bytes = limits.DEFAULT_MAX_SIZE_BYTES if max_size_bytes is None else max_size_bytes
    # A missed expect: target stops compile with exit 1; for a file's validity it is a warning.
    found = []
    try:
        expect_record(profile)
    except CheckFailed as missed:
        found.append(Finding("expect", f"compile will stop here: {missed.message}", missed.hint, "warning", "profile"))
    sources: dict = {}
    try:
        target_obj = resolve_target(target, profile, sources)
        choices, findings = settle_choices(profile, target=target_obj, sources=sources)
        if choices is None:
            return found + findings
        refuse_oversized(profile, choices.update_rate_hz, choices.n_samples, (), choices.sample_rate_hz,
                         target_obj, max_size_bytes)
        if getattr(profile.conditions, "moving_propagation", None) is None and target_obj is not None:
            fit_target(profile, target_obj, choices)
        refuse_long_filters(profile, choices)
    except InputError as error:  # the target file, the size, the target fit, the engine's filters
        return [*found, Finding(None, error.message, error.hint)]
    return found + findings


def resolve_target(target, profile, sources):
    """The target a compile run uses: ``target`` (a Target or a target file's path), else the profile's block."""
    if target is None:
        found = getattr(profile, "target", None)
        if found is not None:
            sources["target"] = "profile"
        return found
    sources["target"] = "option"
    if isinstance(target, (str, os.PathLike)):
        return target_module.load_target(target)
    return target


def expect_record(profile, accept_missed: bool = False) -> dict | None:
    """The profile's ``expect:`` targets checked as ``stats`` checks them (None without targets).

    Raises :class:`~emucompile.errors.CheckFailed` (exit 1) when one is missed
    and ``accept_missed`` is false: a bundle is not made from a profile that
    fails its own targets unless that is asked for, and then it is recorded.
    """
    if not profile.expect:
        return None
    results = stats.check_targets(profile)
    missed = [t.quantity for t in results if not t.met]
    if missed and not accept_missed:
        detail = "; ".join(_missed_text(t) for t in results if not t.met)
        raise CheckFailed(f"{profile.source or profile.name}: {len(missed)} of {len(results)} expect: target(s) "
                          f"missed, nothing compiled: {detail}",
                          hint="fix the profile or its targets, which emucompile stats shows, "
                               "or compile anyway with --accept-missed-targets")
    return {"checked": len(results), "missed": missed, "accepted_missed": bool(missed),
            "targets": [t.to_dict() for t in results]}


def refuse_oversized(profile, rate, n_samples, formats, rate_fs, target, max_size_bytes) -> None:
    """Closed-form sizes, checked before anything is designed or allocated (refused, never clamped).

    The rate plan grows with update rate / Doppler; the FIR map with delay span x
    sample rate; the bundle at least by its tap gains, each extra format's copy and
    the FIR map (:func:`emucompile.models.rates.least_bundle_bytes`; the exact
    estimate follows once the map exists).
    """
    edges = [t.max_doppler_hz for t in profile.taps
             if t.fading != "static" and t.max_doppler_hz is not None and t.max_doppler_hz > 0]
    most = limits.MAX_UPDATE_TO_DOPPLER
    if edges and rate / min(edges) > most:
        raise InputError(
            f"update rate {rate:g} Hz is {rate / min(edges):.3g} x the smallest maximum Doppler "
            f"{min(edges):g} Hz, above the limit of {most:g} x of the interpolation design",
            hint=f"use --update-rate {most * min(edges):g} or less; an emulator interpolates between updates",
        )
    n_fir = 0
    if rate_fs is not None and target is None:  # its length is checked by settle_choices
        n_fir = limits.fir_span_columns([t.delay_s for t in profile.taps], rate_fs)
    copies = sum(bundle_formats.FORMATS[name].copy_factor for name in formats)
    least = limits.least_bundle_bytes(n_samples, profile.n_rx * profile.n_tx, profile.n_taps, copies, n_fir,
                                      fir_file="fir" in formats)
    if max_size_bytes is not None and least > max_size_bytes:
        raise InputError(
            f"the bundle would take at least {size_text(int(least))}, above the limit of {size_text(max_size_bytes)}",
            hint="shorten --duration, lower --update-rate, drop formats, or raise --max-size",
        )


def fit_target(profile, target, choices, tolerance_pct=None, accept_fit=False):
    """``(fit, acceptance)``: the profile's taps fitted to ``target`` and the fit's delay-spread judgement.

    Raises the fit's InputError when the target cannot hold the profile, and
    :class:`~emucompile.profile.target.TargetMissed` (exit 1) when the fit
    moves the RMS delay spread beyond ``tolerance_pct`` and ``accept_fit`` is false.
    """
    fit = target_module.fit_to_target(target, profile, update_rate_hz=choices.update_rate_hz,
                                      sample_rate_hz=choices.sample_rate_hz, delay_mapping=choices.delay_mapping)
    tolerance = target_module.DEFAULT_FIT_TOLERANCE_PCT if tolerance_pct is None else tolerance_pct
    acceptance = target_module.judge_fit(fit.costs, tolerance, accepted=accept_fit)
    if acceptance.missed:
        raise target_module.missed_target_error(fit.costs, acceptance)
    return fit, acceptance


def refuse_long_filters(profile, choices) -> None:
    """Refuse a tap whose Doppler filter the engine could not design (closed form, no design made)."""
    if choices.method != limits.DEFAULT_METHOD:
        return  # the sum of sinusoids designs no Doppler filter
    period = choices.n_samples if choices.periodic else None
    for j, tap in enumerate(profile.taps):
        if tap.fading == "static":
            continue
        problem = limits.doppler_filter_problem(choices.update_rate_hz, tap.doppler_spectrum, period)
        if problem is not None:
            raise InputError(f"tap {j}: {problem}",
                             hint="choose a record length with small prime factors" if period else None)


def _missed_text(t) -> str:
    value = "undefined" if t.value is None else f"{t.value:.6g}"
    low = "-inf" if t.low is None else f"{t.low:.6g}"
    high = "inf" if t.high is None else f"{t.high:.6g}"
    return f"{t.quantity} = {value}, wanted [{low}, {high}]"


MAX_SEED = 2**64 - 1
"""Largest seed (as the profile's compile.seed): numpy's SeedSequence takes any size, a file need not."""


def _in_range(find, key, what, rate):
    """``rate`` inside :data:`emucompile.models.rates.RATE_RANGE_HZ`, else a finding and None."""
    low, high = limits.RATE_RANGE_HZ
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


__all__ = ["CHOICES", "Finding", "CompileRefused", "Choices", "settle_choices", "compile_findings", "resolve_target",
           "expect_record", "refuse_oversized", "fit_target", "refuse_long_filters"]
