"""Errors and problem reports shared by every stage.

Each error carries the exit code the command line gives it (docs/command-line.md):
0 success, 1 the run worked but a check or target failed, 2 bad input or usage.
The command line prints ``str(error)``; it never shows a traceback unless
``--debug`` is given.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass

EXIT_OK = 0
EXIT_CHECK_FAILED = 1
EXIT_BAD_INPUT = 2


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
