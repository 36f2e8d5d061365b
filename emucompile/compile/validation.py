"""``emucompile validate``: one verdict per file, profile or emulator target, with every problem.

A file is a *target file* when its content says so: a mapping with no
``taps`` and no ``extends`` but a key only a target has (``max_fir_coefficients``,
``max_paths``, ``coefficient_bits``, ...); everything else is read as a
profile. A profile is checked by :func:`emucompile.profile.model.check_document`
and then by every rule ``compile`` applies to its choices
(:func:`emucompile.compile.plan.compile_findings`, the same code), each finding
placed at the ``compile:`` key it concerns. With ``target`` (``validate
--target FILE``) each profile is judged together with that target, as
``compile --target FILE`` would judge the pair.
"""

from __future__ import annotations

from dataclasses import dataclass

from emucompile._lazy import LazyModule
from emucompile.compile.rules import compile_findings
from emucompile.errors import Problem
from emucompile.profile.model import check_document
from emucompile.profile.reader import read_document

# A target file's checks need numpy and jsonschema: loaded when a target file is read.
target_module = LazyModule("emucompile.profile.target")

TARGET_ONLY_KEYS = frozenset({
    "max_fir_coefficients", "max_paths", "delay_step_samples", "max_update_rate_hz",
    "between_updates", "coefficient_bits", "headroom_db",
})
"""Top-level keys of a target file that a profile never has at its top level (``sample_rate_hz``
is in both a target and a profile's ``compile:`` block, so a target with only it is still
recognised: a mapping with ``sample_rate_hz`` at the top and no taps)."""


@dataclass(frozen=True)
class FileVerdict:
    """The verdict on one file: ``kind`` is ``"profile"`` or ``"target"``; valid when no problem is an error."""

    file: str
    kind: str
    problems: tuple
    judged_with: str | None = None

    @property
    def errors(self) -> int:
        return sum(p.severity == "error" for p in self.problems)

    @property
    def warnings(self) -> int:
        return len(self.problems) - self.errors

    @property
    def valid(self) -> bool:
        return self.errors == 0

    def summary(self) -> str:
        """``FILE: valid`` / ``FILE: invalid, N error(s)``, warnings and the kind when not a profile."""
        verdict = "valid" if self.valid else f"invalid, {self.errors} error(s)"
        kind = " target file" if self.kind == "target" else ""
        pair = f" (with target {self.judged_with})" if self.judged_with else ""
        return (f"{self.file}:{kind} {verdict}" + (f", {self.warnings} warning(s)" if self.warnings else "")
                + pair)

    def to_dict(self) -> dict:
        return {"file": self.file, "kind": self.kind, "verdict": "valid" if self.valid else "invalid",
                "errors": self.errors, "warnings": self.warnings, "judged_with": self.judged_with,
                "problems": [p.to_dict() for p in self.problems]}


def is_target_document(value) -> bool:
    """True when a parsed document is an emulator target file rather than a profile."""
    if not isinstance(value, dict) or "taps" in value or "extends" in value:
        return False
    return bool(TARGET_ONLY_KEYS & set(value)) or ("sample_rate_hz" in value and "compile" not in value)


def validate_file(source, *, target=None, target_name: str | None = None) -> FileVerdict:
    """Check one file (profile or target file) and, for a profile, compile's rules; never raises for bad input.

    ``target``: a parsed :class:`emucompile.profile.target.Target` to judge a profile with;
    ``target_name`` names it in the verdict.
    """
    document = read_document(source)
    name = document.filename
    if document.readable and is_target_document(document.value):
        _, problems = target_module.check_target_file(source)
        return FileVerdict(name, "target", tuple(problems))
    profile, problems = check_document(document)
    problems = list(problems)
    if profile is not None:
        problems += compile_problems(profile, document, target=target)
    return FileVerdict(name, "profile", tuple(problems), judged_with=target_name if target is not None else None)


def compile_problems(profile, document, *, target=None) -> list[Problem]:
    """Compile's findings for this profile as problems placed in ``document`` (``/compile/KEY``)."""
    found = []
    for finding in compile_findings(profile, target=target):
        pointer = finding.pointer()
        found.append(document.problem(pointer, f"compile would refuse: {finding.message}"
                                      if finding.severity == "error" else finding.message,
                                      finding.hint, severity=finding.severity, key=True))
    return found


def validate_files(sources, *, target_file=None) -> list[FileVerdict]:
    """:func:`validate_file` for each source; with ``target_file``, its own verdict first, then
    each profile judged with it (when the target file is valid)."""
    verdicts = []
    target = None
    if target_file is not None:
        target, problems = target_module.check_target_file(target_file)
        verdicts.append(FileVerdict(str(target_file), "target", tuple(problems)))
    for source in sources:
        name = None if target_file is None else str(target_file)
        verdicts.append(validate_file(source, target=target, target_name=name))
    return verdicts


__all__ = ["FileVerdict", "TARGET_ONLY_KEYS", "is_target_document", "validate_file", "validate_files"]
