"""The README's two set-up commands and .ci/run stay in agreement."""

import re
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent


def _readme_commands():
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    return re.findall(r"^```\n(.+?)\n```", text, flags=re.M | re.S)


def test_readme_has_exactly_two_setup_commands_before_anything_else():
    blocks = _readme_commands()
    assert len(blocks) >= 2
    demo, tests = blocks[0], blocks[1]
    assert "\n" not in demo and "\n" not in tests, "each set-up command is one line"
    assert "emucompile" in demo
    assert "pytest" in tests


def test_ci_runs_the_readme_test_command_verbatim():
    test_command = _readme_commands()[1]
    ci_lines = (ROOT / ".ci" / "run").read_text(encoding="utf-8").splitlines()
    assert test_command in ci_lines
