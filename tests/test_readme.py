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


def test_readme_python_example_runs(tmp_path, monkeypatch):
    # The README's Python block, run as written from a directory holding the demos.
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    block = re.search(r"^```python\n(.+?)\n```", text, flags=re.M | re.S).group(1)
    (tmp_path / "profiles_demo").symlink_to(ROOT / "profiles_demo")
    monkeypatch.chdir(tmp_path)
    namespace: dict = {}
    exec(compile(block, "README.md", "exec"), namespace)
    assert namespace["verification"].passed is True
    assert namespace["gains"].shape == (10_000, 7)
    assert (tmp_path / "out" / "robot" / "manifest.json").is_file()
