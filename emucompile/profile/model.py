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
frozen form lives in :mod:`emucompile.profile.types`, the checks in
:mod:`emucompile.profile.checker` and :mod:`emucompile.profile.schema_checks`. The
optional blocks become frozen objects: ``mimo`` -> :class:`emucompile.profile.blocks.MimoSetup`,
``conditions`` -> :class:`emucompile.profile.blocks.Conditions`, ``target`` ->
:class:`emucompile.profile.target.Target`, ``preset`` -> :class:`emucompile.profile.blocks.PresetInfo`.
"""

from __future__ import annotations

import copy
import dataclasses
import math
from dataclasses import dataclass

from emucompile._lazy import LazyModule
from emucompile.errors import Problem, ProfileError
from emucompile.profile.reader import Document, parse_text, pointer_join, pointer_tokens, read_document
from emucompile.profile.checker import _Checker, _fmt, _number  # noqa: F401  (the checks' helpers)
from emucompile.profile.schema_checks import (  # noqa: F401  (re-exported: campaign plans word schema errors alike)
    SCHEMA_ID,
    SCHEMA_RESOURCE,
    _describe_schema_error,
    _schema_problems,
    profile_schema,
)
from emucompile.profile.types import (  # noqa: F401  (re-exported: the profile's frozen form)
    DOPPLER_AGREEMENT,
    EXPECT_QUANTITIES,
    FADING_KINDS,
    FORMAT_VERSION,
    MAX_TAPS,
    MIN_DOPPLER_HZ,
    CompileDefaults,
    Expectation,
    Profile,
    Tap,
    canonical_json,
    expect_keys,
)

# Loaded when a profile extends a preset.
presets = LazyModule("emucompile.profile.presets")


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
