"""Plan files: read and check a campaign plan, expand it into named cases.

A plan (``emucompile/schemas/campaign-plan-v1.schema.json``) is read by the same safe
reader as profiles (:func:`emucompile.profile.reader.read_document`) and every
problem is reported as ``FILE:LINE:COL: /pointer: message (hint)``. Each case
is checked as a whole before anything runs: its profile (the file's own
problems at their place in that file, a problem the axes make at the plan's
axis), its target file and the compile plan (update rate against the
Doppler, sizes), so a bad plan is refused with exit code 2 and nothing
started.
"""

from __future__ import annotations

import copy
import functools
import hashlib
import importlib.resources
import itertools
import json
from dataclasses import dataclass, field
from pathlib import Path

from emucompile._lazy import LazyModule
from emucompile.models.rates import size_text
from emucompile.errors import EmucompileError, InputError, PlanError, Problem  # noqa: F401  (PlanError: re-exported)

compiler = LazyModule("emucompile.compile.compiler")
fading = LazyModule("emucompile.models.fading")
model = LazyModule("emucompile.profile.model")
reader = LazyModule("emucompile.profile.reader")
target_module = LazyModule("emucompile.profile.target")
jsonschema = LazyModule("jsonschema")

SCHEMA_RESOURCE = "schemas/campaign-plan-v1.schema.json"
AXES = ("delay_spread_ns", "max_doppler_hz", "speed_kmh", "correlation", "target", "duration_s", "formats", "seed")
"""The axes, in the order they appear in case names (and vary slowest first)."""
COMPILE_SETTINGS = ("duration_s", "update_rate_hz", "sample_rate_hz", "delay_mapping", "method", "periodic")
DEFAULT_FALSE_ALARM = 0.01
RESERVED_NAMES = frozenset({"cases", "index.html", "campaign.json"})

# axis -> how its value reads in a case name
_NAME_PARTS = {
    "seed": lambda v: f"seed{v}",
    "delay_spread_ns": lambda v: f"ds{v:g}ns",
    "max_doppler_hz": lambda v: f"fd{v:g}hz",
    "speed_kmh": lambda v: f"v{v:g}kmh",
    "correlation": lambda v: f"corr-{v}",
    "target": lambda v: f"tgt-{_label(Path(v).stem)}",
    "duration_s": lambda v: f"t{v:g}s",
    "formats": lambda v: "fmt-" + (".".join(p.strip().lower() for p in v.split(",") if p.strip()) or "npy"),
}
_OWN = {"seed": "seed-own", "delay_spread_ns": "ds-own", "max_doppler_hz": "fd-own", "speed_kmh": "v-own",
        "correlation": "corr-own", "target": "tgt-own", "duration_s": "t-own", "formats": "fmt-npy"}


@dataclass(frozen=True)
class Case:
    """One case of a plan: a profile document, its compile and verify options, and its identity.

    ``key`` is the SHA-256 of everything that decides the case's bundle and
    verdict (the resolved profile's hash, the compile options, the target,
    the verify options, the generator version); a finished case is reused
    only when its record holds the same key.
    """

    name: str
    label: str
    source: str
    axes: dict
    document: dict
    compile_options: dict
    target: dict | None
    false_alarm: float
    plots: bool
    spread_blocks: bool
    key: str
    resolved_sha256: str
    n_samples: int = 0
    update_rate_hz: float = 0.0
    estimated_size_bytes: int = 0
    warnings: tuple = ()

    def to_dict(self) -> dict:
        """The case as listed by ``campaign --list --json`` (no profile document)."""
        return {
            "name": self.name, "profile": self.label, "source": self.source, "axes": dict(self.axes),
            "compile": dict(self.compile_options),
            "target": None if self.target is None else self.target.get("name", "given"),
            "false_alarm": self.false_alarm, "plots": self.plots, "spread_blocks": self.spread_blocks,
            "key": self.key, "resolved_profile_sha256": self.resolved_sha256, "n_samples": self.n_samples,
            "update_rate_hz": self.update_rate_hz, "estimated_size_bytes": self.estimated_size_bytes,
            "warnings": list(self.warnings),
        }


@dataclass(frozen=True)
class Plan:
    """An expanded plan: its name, where it came from, the axes that vary, and the cases in order."""

    name: str
    description: str
    source: str
    sha256: str
    cases: tuple
    axes: tuple = field(default=())
    warnings: tuple = ()


def expand_plan(source) -> Plan:
    """Read, check and expand a plan file into its cases.

    Parameters
    ----------
    source : str or os.PathLike
        The plan file (YAML 1.2 or JSON).

    Returns
    -------
    Plan

    Raises
    ------
    PlanError
        (exit 2) Listing every problem, one line each: the plan's own at
        ``PLAN:LINE:COL``, a profile file's at its place in that file.

    Examples
    --------
    >>> plan = expand_plan("profiles_demo/tdl-matrix-campaign.yml")  # doctest: +SKIP
    >>> [case.name for case in plan.cases][:2]                          # doctest: +SKIP
    """
    plan, problems = check_plan(source)
    if plan is None:
        raise PlanError(problems)
    return plan


def check_plan(source):
    """``(plan_or_None, problems)`` of a plan file, never raising for bad input."""
    document = reader.read_document(source)
    problems = list(document.problems)
    if not document.readable:
        return None, problems
    problems += _schema_problems(document)
    if any(p.severity == "error" for p in problems):
        return None, _ordered(problems)
    value = document.value
    base = Path(document.filename).parent
    settings = value.get("settings", {})
    cases, seen, axes_used = [], {}, set()
    for index, entry in enumerate(value["profiles"]):
        pointer = f"/profiles/{index}"
        found, made = _entry_cases(document, entry, pointer, value.get("axes", {}), settings, base)
        problems += found
        for case, _axes_pointer in made:
            axes_used |= {k for k, v in case.axes.items() if v is not None}
            if case.name in seen or case.name in RESERVED_NAMES:
                problems.append(document.problem(
                    pointer, f"case name {case.name!r} is made twice (also by {seen.get(case.name, 'the layout')})",
                    "give this entry a label of its own"))
                continue
            seen[case.name] = pointer
            cases.append(case)
    if any(p.severity == "error" for p in problems):
        return None, _ordered(problems)
    sha = hashlib.sha256(Path(document.filename).read_bytes()).hexdigest()
    plan = Plan(name=value["name"], description=value.get("description", ""), source=document.filename,
                sha256=sha, cases=tuple(cases), axes=tuple(a for a in AXES if a in axes_used),
                warnings=tuple(p for p in problems if p.severity == "warning"))
    return plan, _ordered(problems)


def list_text(plan: Plan) -> str:
    """The expansion as text: one line per case (samples, update rate, size), then the totals."""
    width = max(len(c.name) for c in plan.cases)
    lines = [f"plan {plan.name}: {len(plan.cases)} case(s) from {plan.source}"
             + (f"; axes {', '.join(plan.axes)}" if plan.axes else ""),
             f"{'case':<{width}}  {'samples':>9}  {'update rate':>11}  {'size':>9}  source"]
    for case in plan.cases:
        lines.append(f"{case.name:<{width}}  {case.n_samples:>9}  {case.update_rate_hz:>8g} Hz  "
                     f"{size_text(case.estimated_size_bytes):>9}  {case.source}"
                     + ("  (blocks spread over the workers)" if case.spread_blocks else ""))
    total = sum(c.estimated_size_bytes for c in plan.cases)
    lines.append(f"total about {size_text(total)} of bundles (reports and figures besides)")
    lines += [f"warning: {w.format()}" for w in plan.warnings]
    return "\n".join(lines)


# -- one profile entry --------------------------------------------------------------------------


CHANNEL_AXES = ("delay_spread_ns", "max_doppler_hz", "speed_kmh", "correlation")
"""Axes that change the channel itself (the others choose how it is compiled)."""


def _entry_cases(document, entry, pointer, plan_axes, settings, base):
    """``(problems, [(case, axes_pointer)])`` for one entry of ``profiles``."""
    problems = []
    if "file" in entry:
        path = base / entry["file"]
        read = reader.read_document(path)
        profile, found = model.check_document(read)
        if profile is None:
            # The file's own problems, at their place in the file, and where the plan names it.
            problems += found
            problems.append(document.problem(f"{pointer}/file", f"profile file {entry['file']!r} is not valid "
                                             "(its problems above)"))
            return problems, []
        base_document = copy.deepcopy(read.value)
        label = entry.get("label") or _label(path.stem)
        source = str(path)
    else:
        base_document = {"format_version": 1, "name": entry["preset"], "extends": {"preset": entry["preset"]}}
        label = entry.get("label") or _label(entry["preset"])
        source = f"preset {entry['preset']}"
    for key, value in (entry.get("overrides") or {}).items():
        base_document[key] = copy.deepcopy(value)
    axes = dict(plan_axes)
    axes.update(entry.get("axes") or {})
    axis_pointers = {name: (f"{pointer}/axes/{name}" if name in (entry.get("axes") or {}) else f"/axes/{name}")
                     for name in axes}
    names = [name for name in AXES if name in axes]
    made = []
    targets = {}
    for combination in itertools.product(*(axes[name] for name in names)):
        chosen = dict(zip(names, combination))
        name = "_".join([label] + [_NAME_PARTS[a](v) if v is not None else _OWN[a]
                                   for a, v in chosen.items() if len(axes[a]) > 1 or v is not None])
        case, found = _make_case(document, name, label, source, base_document, chosen, settings, entry, pointer,
                                 axis_pointers, base, targets)
        problems += found
        if case is not None:
            made.append((case, pointer))
    return problems, made


def _make_case(document, name, label, source, base_document, chosen, settings, entry, pointer, axis_pointers,
               base, targets):
    where = pointer  # a case's problem is placed at its entry; the case's name says its axes
    profile_document = copy.deepcopy(base_document)
    profile_document["name"] = name
    found = _apply_axes(document, profile_document, chosen, axis_pointers, name)
    if found:
        return None, found
    if any(chosen.get(axis) is not None for axis in CHANNEL_AXES):
        # The profile's expect: targets describe the channel as written; an axis that changes the
        # channel makes them another channel's (compile would refuse the case as a missed target).
        profile_document.pop("expect", None)
    try:
        profile = model.profile_from_document(profile_document, source=f"case {name}")
    except EmucompileError as error:
        lines = [p.format() for p in getattr(error, "problems", [])] or [str(error)]
        return None, [document.problem(where, f"case {name}: {line}") for line in lines[:5]]
    target = None
    if chosen.get("target") is not None:
        target, problem = _target(document, chosen["target"], axis_pointers["target"], base, targets)
        if problem is not None:
            return None, problem
    options = {key: settings[key] for key in COMPILE_SETTINGS if key in settings}
    for axis in ("seed", "duration_s"):
        if chosen.get(axis) is not None:
            options[axis] = chosen[axis]
    if chosen.get("formats"):
        options["formats"] = chosen["formats"]
    if "seed" not in options and profile.compile.seed is None:
        return None, [document.problem(pointer, f"case {name}: no seed (the plan's seed axis or the profile's "
                                       "compile.seed); a campaign's cases must be repeatable",
                                       "add axes: {seed: [1]}")]
    try:
        compile_plan = compiler.plan_compile(profile, Path("campaign-check") / name, target=target, **options)
    except EmucompileError as error:
        return None, [document.problem(where, f"case {name}: {error}")]
    false_alarm = float(settings.get("false_alarm", DEFAULT_FALSE_ALARM))
    plots = bool(settings.get("plots", True))
    target_record = None if target is None else target.to_dict()
    identity = {
        "resolved_profile_sha256": profile.resolved_sha256(), "compile": options, "target": target_record,
        "false_alarm": false_alarm, "plots": plots, "generator_version": fading.GENERATOR_VERSION,
        "spread_blocks": bool(entry.get("spread_blocks", False)),
    }
    key = hashlib.sha256(json.dumps(identity, sort_keys=True, allow_nan=False).encode()).hexdigest()
    case = Case(name=name, label=label, source=source, axes=dict(chosen), document=profile_document,
                compile_options=options, target=target_record, false_alarm=false_alarm, plots=plots,
                spread_blocks=bool(entry.get("spread_blocks", False)), key=key,
                resolved_sha256=profile.resolved_sha256(), n_samples=compile_plan.n_samples,
                update_rate_hz=compile_plan.update_rate_hz,
                estimated_size_bytes=compile_plan.estimated_size_bytes, warnings=compile_plan.warnings)
    return case, []


def _apply_axes(document, profile_document, chosen, axis_pointers, name) -> list[Problem]:
    problems = []
    if chosen.get("delay_spread_ns") is not None:
        extends = profile_document.get("extends")
        if extends is None:
            problems.append(document.problem(
                axis_pointers["delay_spread_ns"], f"case {name}: delay_spread_ns scales a TR 38.901 preset, "
                "and this profile has no extends: block", "give the entry delay_spread_ns: [null]"))
        else:
            extends = {"preset": extends} if isinstance(extends, str) else dict(extends)
            extends["delay_spread_ns"] = chosen["delay_spread_ns"]
            profile_document["extends"] = extends
    if chosen.get("max_doppler_hz") is not None:
        for key in ("speed_kmh", "speed_mps"):
            profile_document.pop(key, None)
        profile_document["max_doppler_hz"] = chosen["max_doppler_hz"]
    if chosen.get("speed_kmh") is not None:
        for key in ("max_doppler_hz", "speed_mps"):
            profile_document.pop(key, None)
        profile_document["speed_kmh"] = chosen["speed_kmh"]
    if chosen.get("correlation") is not None:
        mimo = profile_document.get("mimo")
        if not isinstance(mimo, dict):
            problems.append(document.problem(
                axis_pointers["correlation"], f"case {name}: a correlation level needs a MIMO profile (mimo: block)",
                "add mimo: in the entry's overrides, or give it correlation: [null]"))
        else:
            old = mimo.get("correlation") if isinstance(mimo.get("correlation"), dict) else {}
            mimo = dict(mimo)
            mimo["correlation"] = {"level": chosen["correlation"],
                                   "specification": old.get("specification", "ts36101")}
            profile_document["mimo"] = mimo
    return problems


def _target(document, name, pointer, base, cache):
    """``(Target, None)`` or ``(None, problems)`` for a target file named in the plan."""
    if name not in cache:
        target, found = target_module.check_target_file(base / name)
        if target is None:
            found = list(found) + [document.problem(pointer, f"target file {name!r} is not valid (its problems above)")]
        cache[name] = (target, None if target is not None else found)
    return cache[name]


def _label(text: str) -> str:
    cleaned = "".join(c if c.isalnum() or c in "._-" else "-" for c in text.lower())
    return cleaned.strip("-._") or "profile"


def _ordered(problems):
    return sorted(problems, key=lambda p: (p.file, p.line is None, p.line or 0, p.column or 0))


# -- schema ----------------------------------------------------------------------------------------


def plan_schema() -> dict:
    """The JSON Schema (draft 2020-12) of plan format_version 1, read from the installed package."""
    return json.loads(importlib.resources.files("emucompile").joinpath(SCHEMA_RESOURCE).read_text("utf-8"))


@functools.lru_cache(maxsize=1)
def _validator():
    schema = plan_schema()
    jsonschema.Draft202012Validator.check_schema(schema)
    return jsonschema.Draft202012Validator(schema)


def _schema_problems(document) -> list[Problem]:
    """The schema's errors, worded as the profile checker words them."""
    problems, seen = [], set()
    for error in _validator().iter_errors(document.value):
        pointer = "".join(reader.pointer_join("", t) for t in error.absolute_path)
        if pointer in document.replaced:
            continue
        if error.validator == "oneOf" and isinstance(error.instance, dict):
            given = [k for k in ("file", "preset") if k in error.instance]
            message = ("give exactly one of file or preset, not both" if len(given) == 2
                       else "give file (a profile) or preset (a standard model)")
            described = [document.problem(pointer, message)]
        else:
            described = model._describe_schema_error(document, error, pointer)
        for problem in described:
            if (problem.pointer, problem.message) not in seen:
                seen.add((problem.pointer, problem.message))
                problems.append(problem)
    return problems


__all__ = ["Case", "Plan", "PlanError", "expand_plan", "check_plan", "plan_schema", "list_text", "AXES"]
