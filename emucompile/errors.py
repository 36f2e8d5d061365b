"""Every error the program reports, its exit codes, and the problem reports shared by every stage.

Each error carries the exit code the command line gives it (docs/command-line.md):
0 success, 1 the run worked but a check or target failed, 2 bad input or usage,
3 a bug (an unexpected exception: the command line says so and asks for a report),
130 / 143 a write interrupted by SIGINT / SIGTERM (nothing left behind), 141 a
closed output pipe. The command line prints ``str(error)``; it never shows a
traceback unless ``--debug`` is given. The stages raise the classes below (one
home: a stage that needs a new kind of error adds it here).
"""

from __future__ import annotations

from dataclasses import asdict, dataclass

EXIT_OK = 0
EXIT_CHECK_FAILED = 1
EXIT_BAD_INPUT = 2
EXIT_INTERNAL = 3
EXIT_INTERRUPTED = 130  # 128 + SIGINT
EXIT_BROKEN_PIPE = 141  # 128 + SIGPIPE, what a shell shows for a tool that stopped on a closed pipe
EXIT_TERMINATED = 143  # 128 + SIGTERM


class EmucompileError(Exception):
    """Base class of every error the program reports to its user.

    Parameters
    ----------
    message : str
        One line saying what is wrong, naming the file and place where known.
    hint : str, optional
        What to do about it; printed in parentheses after the message.
    """

    exit_code = EXIT_BAD_INPUT

    def __init__(self, message: str, *, hint: str | None = None):
        super().__init__(message)
        self.message = message
        self.hint = hint

    def __str__(self) -> str:
        return f"{self.message} ({self.hint})" if self.hint else self.message


class InputError(EmucompileError):
    """Bad input or an impossible request (exit code 2)."""


class CheckFailed(EmucompileError):
    """The run worked, but a check or a target failed (exit code 1)."""

    exit_code = EXIT_CHECK_FAILED


@dataclass(frozen=True)
class Problem:
    """One problem found in an input file, with its location.

    ``line`` and ``column`` are 1-based; either may be ``None`` when the place
    in the text is unknown (for example a value missing altogether).
    ``pointer`` is the JSON pointer of the value concerned (``/taps/3/k_db``),
    ``""`` for the whole document.
    """

    file: str
    pointer: str
    message: str
    hint: str | None = None
    line: int | None = None
    column: int | None = None
    severity: str = "error"  # "error" or "warning"

    def format(self) -> str:
        """``FILE:LINE:COL: /json/pointer: message (hint)``, one line."""
        where = self.file
        if self.line is not None:
            where += f":{self.line}"
            if self.column is not None:
                where += f":{self.column}"
        text = f"{where}: {self.pointer or '/'}: "
        if self.severity == "warning":
            text += "warning: "
        text += self.message
        if self.hint:
            text += f" ({self.hint})"
        return text

    def to_dict(self) -> dict:
        return asdict(self)


class ProfileError(InputError):
    """A profile that cannot be used; ``problems`` lists every error found."""

    def __init__(self, problems: list[Problem]):
        self.problems = list(problems)
        errors = [p for p in self.problems if p.severity == "error"]
        first = errors[0].format() if errors else "invalid profile"
        more = f" (and {len(errors) - 1} more)" if len(errors) > 1 else ""
        super().__init__(first + more)

    def __str__(self) -> str:
        return "\n".join(p.format() for p in self.problems if p.severity == "error")


# -- the stages' errors ---------------------------------------------------------------------------


class CompileRefused(InputError):
    """The choices of a compile run break a rule; ``findings`` holds every finding (warnings too)
    (:class:`emucompile.compile.rules.Finding`)."""

    def __init__(self, findings):
        self.findings = list(findings)
        errors = [f for f in self.findings if f.severity == "error"]
        more = f" (and {len(errors) - 1} more: {'; '.join(f.message for f in errors[1:])})" if len(errors) > 1 else ""
        super().__init__(errors[0].message + more, hint=errors[0].hint)


class TargetMissed(CheckFailed):
    """The fit moved the RMS delay spread beyond the stated tolerance and was not accepted (exit 1)."""


class BundleError(InputError):
    """A directory that is not a usable bundle; ``problems`` lists every problem found."""

    missing = False

    def __init__(self, problems: list[Problem]):
        self.problems = list(problems)
        super().__init__("\n".join(p.format() for p in self.problems) or "not a bundle")


class MemberError(BundleError):
    """A listed file or folder of a bundle that may not be read: missing, a link, not regular, outside."""

    def __init__(self, shown, message: str, *, missing: bool = False):
        super().__init__([Problem(str(shown), "", message)])
        self.missing = missing


class IntegrityError(InputError):
    """The bundle's files disagree with its manifest (exit 2); one line per problem, naming the file."""

    def __init__(self, problems: list[Problem]):
        self.problems = list(problems)
        super().__init__("\n".join(p.format() for p in self.problems))


class WriteInterrupted(EmucompileError, KeyboardInterrupt):
    """The write was interrupted (SIGINT or SIGTERM); nothing was left behind.

    Both an :class:`EmucompileError` (the command line prints one line and
    exits 130, or 143 for SIGTERM) and a :class:`KeyboardInterrupt` (so Python
    callers that stop on Ctrl-C still do).
    """

    exit_code = EXIT_INTERRUPTED


class Terminated(KeyboardInterrupt):
    """SIGTERM during a write, raised in the main thread like Ctrl-C."""


class PlanError(InputError):
    """A campaign plan that cannot run; ``problems`` lists every error found (exit code 2)."""

    def __init__(self, problems: list[Problem]):
        self.problems = list(problems)
        super().__init__("\n".join(p.format() for p in self.problems if p.severity == "error") or "invalid plan")


class NoProbe(InputError):
    """No probe preamble in the capture (exit 2)."""


class UnsoundableChannel(InputError):
    """The channel cannot be sounded with a periodic probe (exit 2)."""
