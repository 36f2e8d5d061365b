"""Profiles: reading, checking and the frozen in-memory form (docs/profile-format.md).

A profile file (YAML 1.2 or JSON, ``format_version: 1``) becomes a
:class:`Profile` of :class:`Tap` objects in SI units: seconds, hertz, linear
power. Mean tap powers are already scaled to ``total_power_db`` (unless that
is ``null``). Every later stage reads only these dataclasses, never the file.

Public entry points: :func:`load_profile` (raise on any error) and
:func:`check_profile` (collect every problem, for ``emucompile validate``).

A profile with ``extends:`` is resolved first (:func:`emucompile.profile.presets.resolve_extends`):
the checks then apply to the resolved document, and a problem inside the
preset's data is reported at the ``extends`` key (or at the override that
touches it), its message naming the place in the resolved profile. The
optional blocks become frozen objects: ``mimo`` -> :class:`emucompile.profile.blocks.MimoSetup`,
``conditions`` -> :class:`emucompile.profile.blocks.Conditions`, ``target`` ->
:class:`emucompile.profile.target.Target`, ``preset`` -> :class:`emucompile.profile.blocks.PresetInfo`.
"""

from __future__ import annotations

import copy
import dataclasses
import difflib
import functools
import hashlib
import importlib.resources
import json
import math
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:  # the blocks' modules load only when a profile has the block
    from emucompile.profile.blocks import Conditions, MimoSetup, PresetInfo
    from emucompile.profile.target import Target

from emucompile._lazy import LazyModule
from emucompile.errors import Problem, ProfileError
from emucompile.profile.slips import slip_warnings
from emucompile.profile.reader import Document, parse_text, pointer_join, pointer_tokens, read_document
from emucompile.models import spectra
from emucompile.models.theory import DopplerSpectrum, doppler_from_speed

# Loaded when a profile has the block: a plain list of taps needs neither, and a target needs numpy.
blocks = LazyModule("emucompile.profile.blocks")
presets = LazyModule("emucompile.profile.presets")
target_module = LazyModule("emucompile.profile.target")

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


# -- reading and checking --------------------------------------------------------

MAX_TAPS = 1024
"""Most taps a profile may have."""

SCHEMA_RESOURCE = "schemas/profile-v1.schema.json"
SCHEMA_ID = "https://emucompile.invalid/schemas/profile-v1.schema.json"

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


def load_profile(source, *, format: str | None = None) -> Profile:
    """Read, check and convert a profile file; raise :class:`ProfileError` listing every error.

    Parameters
    ----------
    source : str or os.PathLike
        Path of a ``.yaml``/``.yml``/``.json`` file.
    format : {"yaml", "json"}, optional
        Overrides the guess from the file name.

    Returns
    -------
    Profile
        Frozen, in SI units, tap powers scaled to ``total_power_db``.

    Raises
    ------
    emucompile.errors.ProfileError
        With every problem found (``.problems``, warnings included), when any is an error.

    Examples
    --------
    >>> profile = load_profile("profiles_demo/warehouse-robot.yaml")
    >>> profile.taps[0].delay_s, round(profile.taps[0].power_linear, 4)
    (0.0, 0.4248)
    """
    return _raise_on_error(check_profile(source, format=format))


def check_profile(source, *, format: str | None = None):
    """Check a profile file and return ``(profile_or_None, problems)`` without raising.

    ``problems`` is the list of every :class:`emucompile.errors.Problem`,
    warnings included; ``profile`` is None when any problem is an error.
    Unreadable files (missing, a directory, empty, not UTF-8, over 1 MiB)
    give one problem and no profile.
    """
    return check_document(read_document(source, format=format))


def load_profile_text(text: str, *, filename: str = "<text>", format: str | None = "yaml") -> Profile:
    """:func:`load_profile` for text in memory; ``filename`` names it in messages."""
    return _raise_on_error(check_profile_text(text, filename=filename, format=format))


def check_profile_text(text: str, *, filename: str = "<text>", format: str | None = "yaml"):
    """:func:`check_profile` for text in memory; ``format=None`` guesses from the first character."""
    return check_document(parse_text(text, filename=filename, format=format))


def profile_from_document(document: dict, *, source: str = "<document>") -> Profile:
    """A Profile from a document already in memory (e.g. a bundle manifest's resolved profile).

    Raises :class:`ProfileError` like :func:`load_profile`; messages carry no line numbers.
    """
    parsed = Document(source, "json", value=copy.deepcopy(document))
    return _raise_on_error(check_document(parsed))


def check_document(document: Document):
    """Schema and semantic checks of a document read by :mod:`emucompile.profile.reader`.

    Returns ``(profile_or_None, problems)``, problems sorted by place in the file.
    A document with ``extends:`` is resolved first; see the module notes.
    """
    problems = list(document.problems)
    if not document.readable:
        return None, problems
    value, origin = document.value, None
    if isinstance(value, dict) and "extends" in value:
        value, found, origin = _resolve_extends(document)
        problems += found
        if value is None:
            return None, _in_file_order(problems)
    profile, found = _check_value(document, value, failed=any(p.severity == "error" for p in problems),
                                  standard_keys=origin.standard_keys(value) if origin else None)
    if origin is not None:
        found = [origin.relocate(p, document) for p in found]
    return profile, _in_file_order(problems + found)


def _check_value(document: Document, value, *, failed: bool, standard_keys=None):
    """Non-finite numbers, the schema, then the semantic checks of ``value`` (positions from ``document``).

    ``failed``: an error was found before (reading), so no Profile is built.
    ``standard_keys``: tap index -> keys a preset set (no warnings about its own design).
    """
    flagged = set(document.replaced)
    problems = _non_finite_problems(document, value, "", flagged)
    flagged |= {p.pointer for p in problems}
    # The target block is checked by emucompile.profile.target (its own messages), not twice.
    schema_skip = flagged | ({"/target"} if isinstance(value, dict) and "target" in value else set())
    problems += _schema_problems(document, value, schema_skip)
    if not isinstance(value, dict):
        return None, problems
    broken = {pointer_tokens(p.pointer)[0] for p in problems
              if p.severity == "error" and p.pointer} | {pointer_tokens(p)[0] for p in flagged if p}
    checker = _Checker(document, value, broken_blocks=broken, standard_keys=standard_keys,
                       flagged=flagged | {p.pointer for p in problems if p.severity == "error"})
    profile = checker.run(build=not failed and not any(p.severity == "error" for p in problems))
    return profile, problems + checker.problems


def _in_file_order(problems):
    return sorted(problems, key=lambda p: (p.line is None, p.line or 0, p.column or 0))


# -- extends: ------------------------------------------------------------------------------

_EXTENDS_INPUTS = ("extends", "taps", "preset", "max_doppler_hz", "speed_kmh", "speed_mps", "carrier_hz")
"""Top-level keys that resolving ``extends`` reads (or refuses)."""


def _resolve_extends(document: Document):
    """``(resolved_value or None, problems, origin)`` of a document with ``extends:``.

    The keys resolution reads are checked against the schema first; when they
    are in error, the document's own problems are all that is reported.
    """
    root = document.value
    flagged = set(document.replaced)
    problems = _non_finite_problems(document, root, "", flagged)
    flagged |= {p.pointer for p in problems}
    problems += _schema_problems(document, root, flagged)
    if "preset" in root:
        problems.append(document.problem(
            "/preset", "'preset' is the provenance block that resolving extends writes; do not give both",
            "remove the preset block", key=True))
    touched = {pointer_tokens(p.pointer)[0] for p in problems if p.severity == "error" and p.pointer}
    touched |= {pointer_tokens(p)[0] for p in flagged if p}
    if touched & set(_EXTENDS_INPUTS):
        return None, problems, None
    try:
        resolved = presets.resolve_extends(root, source=document.filename)
    except ProfileError as error:
        return None, [document.problem(p.pointer, p.message, p.hint, key=p.message.startswith("unknown"))
                      for p in error.problems], None
    return resolved, [], _ExtendsOrigin.of(root, resolved)


@dataclass(frozen=True)
class _ExtendsOrigin:
    """Which parts of a resolved document came from the preset, for placing problems in the user's file."""

    preset: str
    derived: frozenset  # top-level keys the preset supplied
    overrides: dict  # tap index -> (pointer of the override, keys it sets)

    @classmethod
    def of(cls, root, resolved):
        extends = root["extends"]
        extends = {"preset": extends} if isinstance(extends, str) else extends
        overrides = {entry["index"]: (f"/extends/taps/{position}", frozenset(entry) - {"index"})
                     for position, entry in enumerate(extends.get("taps", []))}
        derived = frozenset({"taps", "preset"} | {key for key in resolved if key not in root})
        return cls(extends["preset"], derived, overrides)

    def standard_keys(self, resolved) -> dict[int, frozenset]:
        """Tap index -> the keys of that resolved tap that are the preset's own (no override sets them)."""
        return {i: frozenset(tap) - self.overrides.get(i, ("", frozenset()))[1]
                for i, tap in enumerate(resolved.get("taps", [])) if isinstance(tap, dict)}

    def relocate(self, problem: Problem, document: Document) -> Problem:
        """The problem placed in the user's file: at the override that touches it, else at ``extends``."""
        tokens = pointer_tokens(problem.pointer)
        if not tokens or tokens[0] not in self.derived:
            return problem
        where, key = "/extends", True
        if tokens[0] == "taps" and len(tokens) > 1 and tokens[1].isdigit() and int(tokens[1]) in self.overrides:
            where, keys = self.overrides[int(tokens[1])]
            if len(tokens) > 2 and tokens[2] in keys:
                where = f"{where}/{tokens[2]}"
            else:
                key = False
        line, column = document.locate(where, key=key)
        return dataclasses.replace(
            problem, pointer=where, line=line, column=column,
            message=f"{problem.pointer} of the profile resolved from preset {self.preset}: {problem.message}")


@functools.lru_cache(maxsize=1)
def _schema_text() -> str:
    return importlib.resources.files("emucompile").joinpath(SCHEMA_RESOURCE).read_text("utf-8")


def profile_schema() -> dict:
    """The JSON Schema (draft 2020-12) of format_version 1, read from the installed package."""
    return json.loads(_schema_text())


# -- helpers: reading ----------------------------------------------------------------


def _raise_on_error(result) -> Profile:
    profile, problems = result
    if profile is None:
        raise ProfileError(problems)
    return profile


def _non_finite_problems(document, value, pointer, flagged) -> list[Problem]:
    if isinstance(value, float) and not math.isfinite(value):
        if pointer in flagged:
            return []
        return [document.problem(pointer, f"{value} is not a finite number", "write a finite number")]
    if isinstance(value, dict):
        items = ((pointer_join(pointer, k), v) for k, v in value.items())
    elif isinstance(value, list):
        items = ((pointer_join(pointer, i), v) for i, v in enumerate(value))
    else:
        return []
    return [p for child, v in items for p in _non_finite_problems(document, v, child, flagged)]


# -- helpers: schema -------------------------------------------------------------------


@functools.lru_cache(maxsize=1)
def _validator():
    import jsonschema

    # Built once a process. The shipped schema is checked against the metaschema by
    # tests/test_schema.py, not on every run (that check cost ~0.3 s of each command).
    return jsonschema.Draft202012Validator(profile_schema())


def _schema_problems(document, value, flagged) -> list[Problem]:
    problems, seen = [], set()
    for error in _validator().iter_errors(value):
        pointer = "".join(pointer_join("", t) for t in error.absolute_path)
        if any(pointer == f or pointer.startswith(f + "/") for f in flagged):
            continue
        for problem in _describe_schema_error(document, error, pointer):
            identity = (problem.pointer, problem.message)
            if identity not in seen:
                seen.add(identity)
                problems.append(problem)
    return problems


_TYPE_WORDS = {
    "object": "a mapping", "array": "a list", "string": "text", "number": "a number",
    "integer": "a whole number", "boolean": "true or false", "null": "null",
}


def _describe_schema_error(document, error, pointer):
    kind, instance, expected = error.validator, error.instance, error.validator_value
    where = _field_name(pointer)
    if kind == "additionalProperties":
        allowed = sorted(error.schema.get("properties", {}))
        for key in instance:
            if key not in allowed:
                yield document.problem(pointer_join(pointer, key), f"unknown key {key!r}",
                                       _did_you_mean(key, allowed), key=True)
        return
    if kind == "required":
        for key in expected:
            if key not in instance:
                hint = "or build on a preset: extends: NAME (see emucompile presets list)" \
                    if key == "taps" and not pointer else None
                yield document.problem(pointer, f"missing required key {key!r}", hint)
        return
    if kind == "type":
        types = [expected] if isinstance(expected, str) else expected
        wanted = " or ".join(_TYPE_WORDS.get(t, t) for t in types)
        got = _describe_value(instance)
        message = f"{where} must be {wanted}, not {got}"
        hint = None
        if isinstance(instance, str) and ("number" in types or "integer" in types):
            hint = "write the number without quotes or units"
        yield document.problem(pointer, message, hint)
        return
    if kind == "enum":
        choices = [str(c) for c in expected]
        yield document.problem(
            pointer,
            f"{where} must be one of {', '.join(choices)}, not {_describe_value(instance)}",
            _did_you_mean(str(instance), choices, list_all=False),
        )
        return
    if kind == "const":
        hint = "this program reads format_version 1" if where == "format_version" else None
        yield document.problem(pointer, f"{where} must be {expected!r}, not {_describe_value(instance)}", hint)
        return
    bounds = {"minimum": ">=", "maximum": "<=", "exclusiveMinimum": ">", "exclusiveMaximum": "<"}
    if kind in bounds:
        yield document.problem(pointer, f"{where} must be {bounds[kind]} {_number_text(expected)}, "
                               f"not {_number_text(instance)}")
        return
    if kind == "minItems":
        yield document.problem(pointer, f"{where} needs at least {expected} item(s)")
        return
    if kind == "pattern" and where == "name":
        yield document.problem(pointer, f"{instance!r} is not a valid name",
                               "use lower-case letters, digits, '.', '_' and '-', starting with "
                               "a letter or digit")
        return
    if kind == "maxLength":
        yield document.problem(pointer, f"{where} is longer than {expected} characters")
        return
    yield document.problem(pointer, f"{where}: {error.message}")  # pragma: no cover - fallback


def _field_name(pointer: str) -> str:
    tokens = pointer_tokens(pointer)
    return tokens[-1] if tokens and not tokens[-1].isdigit() else (pointer or "the document")


def _describe_value(value) -> str:
    if value is None:
        return "null"
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        return f"the text {value[:40]!r}" + ("..." if len(value) > 40 else "")
    if isinstance(value, dict):
        return "a mapping"
    if isinstance(value, list):
        return "a list"
    return _number_text(value)


def _number_text(value) -> str:
    if isinstance(value, float) and value.is_integer() and abs(value) < 1e16:
        return str(int(value))
    return repr(value) if isinstance(value, float) else str(value)


def _did_you_mean(key: str, allowed, *, list_all: bool = True) -> str | None:
    if key == "<<":
        return "YAML merge keys are not part of YAML 1.2; write the keys out"
    close = difflib.get_close_matches(key, allowed, n=1, cutoff=0.6)
    if close:
        return f"did you mean {close[0]!r}?"
    if list_all and len(allowed) <= 30:
        return "allowed here: " + ", ".join(allowed)
    return None


# -- helpers: semantic checks and conversion ----------------------------------------------


def _number(mapping, key):
    """The value of ``key`` when it is a finite real number, else None (the schema reports it)."""
    value = mapping.get(key) if isinstance(mapping, dict) else None
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return None
    value = float(value)
    return value if math.isfinite(value) else None


def _fmt(value: float, unit: str = "") -> str:
    """A number for messages: 6 significant digits, the unit after it."""
    text = f"{value:.6g}"
    return f"{text} {unit}" if unit else text


class _Checker:
    """The checks the schema cannot express, and the conversion to a :class:`Profile`.

    Every check guards against values of the wrong type (the schema has
    reported those already), so that all problems come out in one pass.
    """

    def __init__(self, document: Document, root: dict, *, broken_blocks=frozenset(), flagged=frozenset(),
                 standard_keys=None):
        self.document = document
        self.root = root
        self.problems: list[Problem] = []
        self.doppler_source_broken = False
        self.broken_blocks = set(broken_blocks)  # top-level keys with schema errors: no semantic checks
        self.flagged = set(flagged)  # pointers whose value was replaced or is not finite (reported)
        self.trajectory_taps: set[int] = set()
        self.standard_keys = dict(standard_keys or {})  # tap index -> keys a preset set, unchanged

    def report(self, pointer, message, hint=None, *, severity="error", key=False):
        """Record a problem at ``pointer``; also the callback the parsers of :mod:`emucompile.profile.blocks` use."""
        self.problems.append(self.document.problem(pointer, message, hint, severity=severity, key=key))

    def error(self, pointer, message, hint=None, *, key=False):
        self.report(pointer, message, hint, key=key)

    def warning(self, pointer, message, hint=None, *, key=False):
        self.report(pointer, message, hint, severity="warning", key=key)

    def run(self, *, build: bool) -> Profile | None:
        """Make every check; return the Profile when ``build`` and nothing is in error."""
        root = self.root
        taps_value = root.get("taps")
        if isinstance(taps_value, list) and len(taps_value) > MAX_TAPS:
            self.error("/taps", f"{len(taps_value)} taps: at most {MAX_TAPS} are allowed")
        global_doppler_hz, speed_mps = self._global_doppler()
        raw_taps = taps_value if isinstance(taps_value, list) else []
        conditions = self._conditions(raw_taps, speed_mps)
        taps = []
        missing_doppler = []
        for index, tap in enumerate(raw_taps):
            if isinstance(tap, dict):
                resolved = self._tap(index, tap, global_doppler_hz)
                taps.append(resolved)
                if resolved and resolved["fading"] in ("rayleigh", "rician") and resolved["max_doppler_hz"] is None:
                    missing_doppler.append(index)
            else:
                taps.append(None)
        if missing_doppler and not self.doppler_source_broken:
            which = ", ".join(str(i) for i in missing_doppler[:10])
            more = ", ..." if len(missing_doppler) > 10 else ""
            self.error("", f"no maximum Doppler for the fading tap(s) {which}{more}",
                       "give max_doppler_hz, or speed_kmh (or speed_mps) with carrier_hz, "
                       "or a max_doppler_hz on each fading tap; only static taps need none")
        self._tap_warnings(taps)
        self._slip_warnings(taps)
        scale_db = self._power_scale(taps)
        expectations = self._expectations()
        blocks = {"conditions": conditions, "mimo": self._mimo(raw_taps), "target": self._target(),
                  "preset": self._preset()}
        if not build or any(p.severity == "error" for p in self.problems):
            return None
        return self._build(taps, global_doppler_hz, speed_mps, scale_db, expectations, blocks)

    # -- the optional blocks (emucompile.profile.blocks, emucompile.profile.target) ----------------
    def _block(self, key, *, needs_taps=False):
        """The block's value when present and free of schema errors, else None.

        ``needs_taps``: the block's checks refer to the taps, so they wait for a list of them.
        """
        if key not in self.root or key in self.broken_blocks:
            return None
        if needs_taps and not isinstance(self.root.get("taps"), list):
            return None
        return self.root[key]

    def _conditions(self, raw_taps, speed_mps):
        if "conditions" in self.root:
            # Known even when the block is broken: spares its taps a misleading "needs los_*".
            self.trajectory_taps = blocks.high_speed_train_taps(self.root["conditions"], raw_taps)
        block = self._block("conditions", needs_taps=True)
        if block is None:
            return None
        conditions = blocks.parse_conditions(block, self.report, taps=raw_taps, speed_mps=speed_mps,
                                      carrier_hz=_number(self.root, "carrier_hz"))
        if conditions is not None:
            self.trajectory_taps = set(conditions.high_speed_train_taps)
        return conditions

    def _mimo(self, raw_taps):
        block = self._block("mimo", needs_taps=True)
        if block is None:
            return None
        direct = [i for i, tap in enumerate(raw_taps)
                  if isinstance(tap, dict) and tap.get("fading") in blocks.DIRECT_FADINGS]
        return blocks.parse_mimo(block, self.report, direct_taps=direct)

    def _target(self):
        block = self._block("target")
        if block is None:
            return None
        found = [p for p in target_module.check_target(block, file=self.document.filename, base_pointer="/target")
                 if p.pointer not in self.flagged]
        for problem in found:
            self.report(problem.pointer, problem.message, problem.hint, severity=problem.severity, key=True)
        if isinstance(block, dict) and "format_version" in block:
            self.warning("/target/format_version", "ignored: a target block takes the profile's format_version",
                         key=True)
        if any(p.severity == "error" for p in found):
            return None
        return target_module.parse_target(block, file=self.document.filename, base_pointer="/target")

    def _preset(self):
        block = self._block("preset")
        if block is None:
            return None
        return blocks.parse_preset_info(block, self.report)

    # -- Doppler -----------------------------------------------------------------
    def _global_doppler(self):
        root = self.root
        direct = _number(root, "max_doppler_hz")
        kmh, mps, carrier = (_number(root, k) for k in ("speed_kmh", "speed_mps", "carrier_hz"))
        # A Doppler key present but unusable has been reported; do not also call it missing.
        if any(k in root and _number(root, k) is None
               for k in ("max_doppler_hz", "speed_kmh", "speed_mps", "carrier_hz")):
            self.doppler_source_broken = True
        if "speed_kmh" in root and "speed_mps" in root:
            self.error("/speed_mps", "give speed_kmh or speed_mps, not both", key=True)
            self.doppler_source_broken = True
        speed_mps = mps if mps is not None else (kmh / 3.6 if kmh is not None else None)
        speed_key = "speed_mps" if "speed_mps" in root else "speed_kmh"
        has_speed = "speed_kmh" in root or "speed_mps" in root
        if has_speed and "carrier_hz" not in root:
            self.error(f"/{speed_key}", "a speed needs carrier_hz to give a Doppler",
                       "add carrier_hz (f_D = v f_c / c), or give max_doppler_hz instead", key=True)
            self.doppler_source_broken = True
        if "carrier_hz" in root and not has_speed:
            self.error("/carrier_hz", "carrier_hz is used only with speed_kmh or speed_mps",
                       "add the speed, or remove carrier_hz", key=True)
        from_speed = None
        if speed_mps is not None and carrier is not None:
            from_speed = doppler_from_speed(speed_mps, carrier)
            if from_speed < MIN_DOPPLER_HZ:
                self.error(f"/{speed_key}", f"the speed and carrier give f_D = {_fmt(from_speed, 'Hz')}, "
                           f"below the {_fmt(MIN_DOPPLER_HZ, 'Hz')} a fading tap needs",
                           "check the units: speed_kmh or speed_mps, carrier_hz in Hz")
                self.doppler_source_broken = True
                from_speed = None
        if direct is not None and from_speed is not None:
            if abs(direct - from_speed) > DOPPLER_AGREEMENT * from_speed:
                self.error(
                    "/max_doppler_hz",
                    f"max_doppler_hz {_fmt(direct, 'Hz')} disagrees with the speed and carrier, "
                    f"which give {_fmt(from_speed, 'Hz')} "
                    f"({abs(direct / from_speed - 1) * 100:.3g} % apart)",
                    "give one of them, or make them agree within 0.1 %; f_D = v f_c / c",
                )
        return (direct if direct is not None else from_speed), speed_mps

    # -- one tap ---------------------------------------------------------------
    def _tap(self, index: int, tap: dict, global_doppler_hz):
        here = f"/taps/{index}"
        delay_s = None
        if "delay_ns" in tap and "delay_us" in tap:
            self.error(f"{here}/delay_us", "give delay_ns or delay_us, not both", key=True)
        elif "delay_ns" not in tap and "delay_us" not in tap:
            self.error(here, "a tap needs its delay: delay_ns or delay_us")
        elif "delay_ns" in tap:
            # Division by an exact power of ten rounds once: 100 ns and 0.1 us give one float.
            delay_s = None if _number(tap, "delay_ns") is None else _number(tap, "delay_ns") / 1e9
        else:
            delay_s = None if _number(tap, "delay_us") is None else _number(tap, "delay_us") / 1e6
        fading = tap.get("fading", "rayleigh")
        if fading not in FADING_KINDS:
            fading = None
        own_doppler = _number(tap, "max_doppler_hz")
        max_doppler_hz = own_doppler if own_doppler is not None else global_doppler_hz
        resolved = {
            "index": index, "delay_s": delay_s, "power_db": _number(tap, "power_db"),
            "fading": fading, "max_doppler_hz": max_doppler_hz,
            "k_db": _number(tap, "k_db"), "los_angle_deg": _number(tap, "los_angle_deg"),
            "los_phase_deg": _number(tap, "los_phase_deg"), "los_doppler_hz": None,
            "spectrum": tap.get("spectrum", spectra.DEFAULT_KIND), "sigma_hz": _number(tap, "sigma_hz"),
            "spectrum_parameters": tuple((k, _number(tap, k)) for k in spectra.PARAMETER_NAMES
                                         if k != "sigma_hz" and k in tap),
        }
        if fading is None:
            return resolved
        self._tap_k_factor(here, tap, fading)
        if index in self.trajectory_taps and fading != "rayleigh":
            self._tap_on_trajectory(index, here, tap)
            resolved["los_angle_deg"] = None
        else:
            resolved["los_doppler_hz"] = self._tap_direct_doppler(here, tap, fading, max_doppler_hz)
        self._tap_spectrum(here, tap, fading, max_doppler_hz)
        return resolved

    def _tap_k_factor(self, here, tap, fading):
        if fading == "rician" and "k_db" not in tap:
            self.error(here, "a rician tap needs k_db (direct power / diffuse power, in dB)")
        if fading != "rician" and "k_db" in tap:
            self.error(f"{here}/k_db", f"k_db applies to rician taps only; this tap is {fading}",
                       "remove k_db, or set fading: rician", key=True)

    def _tap_on_trajectory(self, index, here, tap):
        for key in ("los_angle_deg", "los_doppler_hz"):
            if key in tap and key not in self.standard_keys.get(index, ()):
                self.warning(f"{here}/{key}", f"{key} is ignored: the high-speed-train trajectory sets the "
                             "Doppler of this tap's direct part", "remove it, or leave the tap out of "
                             "conditions.high_speed_train.taps", key=True)

    def _tap_direct_doppler(self, here, tap, fading, max_doppler_hz):
        has_angle, has_doppler = "los_angle_deg" in tap, "los_doppler_hz" in tap
        if fading == "rayleigh":
            for key in ("los_angle_deg", "los_doppler_hz", "los_phase_deg"):
                if key in tap:
                    self.error(f"{here}/{key}", f"{key} applies to rician and static taps only; "
                               "a rayleigh tap has no direct part", "remove it, or set fading: rician",
                               key=True)
            return None
        if has_angle and has_doppler:
            self.error(f"{here}/los_doppler_hz", "give los_angle_deg or los_doppler_hz, not both",
                       key=True)
            return None
        if fading == "rician" and not (has_angle or has_doppler):
            self.error(here, "a rician tap needs the Doppler of its direct part: los_angle_deg "
                       "or los_doppler_hz", "los_angle_deg: 90 gives no Doppler shift")
            return None
        if has_angle:
            angle = _number(tap, "los_angle_deg")
            if max_doppler_hz is None:
                if fading == "static":
                    self.error(f"{here}/los_angle_deg", "los_angle_deg needs a maximum Doppler to "
                               "turn into a frequency (f_D cos angle)",
                               "give max_doppler_hz (the profile's or the tap's), or los_doppler_hz",
                               key=True)
                return None
            return None if angle is None else max_doppler_hz * math.cos(math.radians(angle))
        if not has_doppler:
            return 0.0  # a static tap that does not turn
        doppler = _number(tap, "los_doppler_hz")
        if doppler is not None and max_doppler_hz is not None and abs(doppler) > max_doppler_hz:
            self.error(f"{here}/los_doppler_hz",
                       f"the direct part's Doppler {_fmt(doppler, 'Hz')} exceeds the tap's maximum "
                       f"Doppler {_fmt(max_doppler_hz, 'Hz')}",
                       "|los_doppler_hz| = f_D |cos angle| is at most f_D")
        return doppler

    def _tap_spectrum(self, here, tap, fading, max_doppler_hz):
        spectrum = tap.get("spectrum", spectra.DEFAULT_KIND)
        if fading == "static":
            for key in ("spectrum", *spectra.PARAMETER_NAMES):
                if key in tap:
                    self.warning(f"{here}/{key}", f"{key} is ignored: a static tap has no diffuse "
                                 "part and so no Doppler spectrum")
            return
        if spectrum not in spectra.KINDS:
            return  # the schema has reported it
        given = {key: _number(tap, key) for key in spectra.PARAMETER_NAMES if key in tap}
        for key, severity, message, hint, at_key in spectra.check_parameters(spectrum, max_doppler_hz, given, _fmt):
            self.report(here if key is None else f"{here}/{key}", message, hint, severity=severity, key=at_key)

    # -- across taps -------------------------------------------------------------
    def _taps_without_errors(self, taps):
        """The resolved taps none of whose values failed: a value that already failed
        (delay_ns: -1e308) says nothing more, and the warning passes must not trip on it."""
        failed = {pointer.split("/")[2] for pointer in self.flagged | {p.pointer for p in self.problems if p.severity == "error"}
                  if pointer.startswith("/taps/")}
        return [t for t in taps if t and t["delay_s"] is not None and str(t["index"]) not in failed]

    def _tap_warnings(self, taps):
        known = self._taps_without_errors(taps)
        first_at = {}
        previous = None
        for tap in known:
            key = "delay_ns" if "delay_ns" in self.root["taps"][tap["index"]] else "delay_us"
            here = f"/taps/{tap['index']}/{key}"
            delay = tap["delay_s"]
            # A preset keeps its standard's table order (and TDL-D/E pairs at one delay) by design.
            ordered_by_standard = key in self.standard_keys.get(tap["index"], ())
            if previous is not None and delay < previous["delay_s"] and not ordered_by_standard:
                self.warning(here, f"delay {_fmt(delay * 1e9, 'ns')} is smaller than the previous "
                             f"tap's {_fmt(previous['delay_s'] * 1e9, 'ns')}: taps are not in "
                             "delay order", "allowed; the taps keep the order written")
            femtoseconds = round(delay * 1e15)  # "one delay" up to round-off
            if femtoseconds in first_at and not ordered_by_standard:
                self.warning(here, f"same delay as tap {first_at[femtoseconds]} "
                             f"({_fmt(delay * 1e9, 'ns')})",
                             "legitimate, e.g. a direct and a diffuse part at one delay")
            first_at.setdefault(femtoseconds, tap["index"])
            previous = tap
        powers = [t for t in taps if t and t["power_db"] is not None]
        if powers:
            strongest = max(t["power_db"] for t in powers)
            for tap in powers:
                below = strongest - tap["power_db"]
                if below > 40.0:
                    self.warning(f"/taps/{tap['index']}/power_db",
                                 f"the tap is {below:.3g} dB below the strongest tap",
                                 "check the power; a tap this weak barely changes the channel")

    def _slip_warnings(self, taps):
        for pointer, message, hint in slip_warnings(self.root, self._taps_without_errors(taps), self.standard_keys):
            if pointer.split("/")[1] not in self.broken_blocks:
                self.warning(pointer, message, hint)

    def _power_scale(self, taps) -> float:
        powers = [t["power_db"] for t in taps if t and t["power_db"] is not None]
        total_db = self.root.get("total_power_db", 0)
        if not powers or total_db is None or _number({"t": total_db}, "t") is None:
            return 0.0
        written_db = _sum_db(powers)
        scale_db = float(total_db) - written_db
        if abs(scale_db) > 10.0:
            where = "/total_power_db" if "total_power_db" in self.root else "/taps"
            self.warning(where, f"the tap powers are scaled by {scale_db:+.3g} dB to add up to "
                         f"total_power_db {_fmt(float(total_db), 'dB')}",
                         "check the powers, or set total_power_db: null to keep them as written")
        return scale_db

    # -- expect: ----------------------------------------------------------------------
    def _expectations(self) -> list[Expectation]:
        block = self.root.get("expect")
        if not isinstance(block, dict):
            return []
        table = expect_keys()
        found = []
        for key, spec in block.items():
            here = pointer_join("/expect", key)
            if key not in table or not isinstance(spec, dict):
                continue
            statistic, unit, factor = table[key]
            value = _number(spec, "value")
            shape = frozenset(spec)
            if not shape <= {"value", "tolerance_pct", "tolerance", "min", "max"}:
                continue  # the schema has reported the unknown key
            if shape in ({"value", "tolerance_pct"}, {"value", "tolerance"}):
                if value is None:
                    continue
                if "tolerance_pct" in spec:
                    width = abs(value) * (_number(spec, "tolerance_pct") or 0.0) / 100.0
                else:
                    width = _number(spec, "tolerance") or 0.0
                low, high = value - width, value + width
            elif shape and shape <= {"min", "max"}:
                low = _number(spec, "min") if "min" in spec else -math.inf
                high = _number(spec, "max") if "max" in spec else math.inf
                if low is None or high is None:
                    continue
                if low > high:
                    self.error(here, f"min {_fmt(low)} is larger than max {_fmt(high)}")
                    continue
            else:
                self.error(here, f"a target is {{value, tolerance_pct}}, {{value, tolerance}} or "
                           f"{{min, max}}; got {{{', '.join(sorted(spec)) or 'nothing'}}}",
                           "e.g. {value: 300, tolerance_pct: 3}")
                continue
            found.append(Expectation(
                quantity=key, value_si=None if value is None else value * factor,
                low_si=low * factor, high_si=high * factor, pointer=here,
                statistic=statistic, unit=unit, unit_factor=factor,
            ))
        return found

    # -- conversion ---------------------------------------------------------------------
    def _build(self, taps, global_doppler_hz, speed_mps, scale_db, expectations, blocks) -> Profile:
        root = self.root
        factor = 10.0 ** (scale_db / 10.0)
        conditions = blocks["conditions"]
        train = conditions.high_speed_train if conditions is not None else None
        drift_hz = conditions.drift_doppler_hz if conditions is not None else 0.0
        built = []
        for tap in taps:
            fading = tap["fading"]
            on_train = train is not None and tap["index"] in conditions.high_speed_train_taps
            built.append(Tap(
                delay_s=tap["delay_s"],
                power_linear=10.0 ** (tap["power_db"] / 10.0) * factor,
                fading=fading,
                k_linear=10.0 ** (tap["k_db"] / 10.0) if fading == "rician" else None,
                spectrum=tap["spectrum"] if fading != "static" else "classical",
                max_doppler_hz=tap["max_doppler_hz"],
                sigma_hz=tap["sigma_hz"] if fading != "static" else None,
                spectrum_parameters=tap["spectrum_parameters"] if fading != "static" else (),
                los_doppler_hz=tap["los_doppler_hz"],
                los_angle_deg=tap["los_angle_deg"],
                los_phase_deg=tap["los_phase_deg"],
                index=tap["index"],
                los_trajectory="high_speed_train" if on_train else None,
                los_peak_doppler_hz=train.peak_doppler_hz if on_train else None,
                drift_doppler_hz=drift_hz,
            ))
        compile_block = dict(root.get("compile") or {})
        if "seed" in compile_block:
            compile_block["seed"] = int(compile_block["seed"])
        for key in ("update_rate_hz", "duration_s", "sample_rate_hz"):
            if key in compile_block:
                compile_block[key] = float(compile_block[key])
        total_db = root.get("total_power_db", 0)
        return Profile(
            name=root["name"],
            taps=tuple(built),
            description=root.get("description", ""),
            max_doppler_hz=global_doppler_hz,
            speed_mps=speed_mps,
            carrier_hz=_number(root, "carrier_hz"),
            total_power_db=None if total_db is None else float(total_db),
            power_scale_db=scale_db,
            compile=CompileDefaults(**compile_block),
            expect=tuple(expectations),
            mimo=blocks["mimo"],
            conditions=conditions,
            preset=blocks["preset"],
            target=blocks["target"],
            document=_resolved_document(root),
            source=self.document.filename,
        )


def _sum_db(powers_db) -> float:
    """10 log10 of the sum of powers given in dB, without overflow (log-sum-exp)."""
    top = max(powers_db)
    return top + 10.0 * math.log10(math.fsum(10.0 ** ((p - top) / 10.0) for p in powers_db))


def _resolved_document(root: dict) -> dict:
    """The document with its defaults made explicit, values and unit keys as written."""
    document = copy.deepcopy(root)
    document.setdefault("description", "")
    document.setdefault("total_power_db", 0)
    for tap in document["taps"]:
        tap.setdefault("fading", "rayleigh")
        if tap["fading"] != "static":
            tap.setdefault("spectrum", spectra.DEFAULT_KIND)
    return document


__all__ = [
    "FORMAT_VERSION",
    "FADING_KINDS",
    "MAX_TAPS",
    "EXPECT_QUANTITIES",
    "Tap",
    "CompileDefaults",
    "Expectation",
    "Profile",
    "canonical_json",
    "expect_keys",
    "load_profile",
    "check_profile",
    "load_profile_text",
    "check_profile_text",
    "profile_from_document",
    "check_document",
    "profile_schema",
]
