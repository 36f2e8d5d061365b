"""docs/command-line.md is generated from the command tree and must be current.

The page is written by ``tools/make_cli_doc.py`` from every command's own
``--help``; a command or option added without rerunning the script fails here.
"""

import importlib.util
import re
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def _tool():
    spec = importlib.util.spec_from_file_location("make_cli_doc", ROOT / "tools" / "make_cli_doc.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def test_committed_page_is_what_the_script_writes():
    committed = (ROOT / "docs" / "command-line.md").read_text(encoding="utf-8")
    assert _tool().is_current(committed), "docs/command-line.md is stale: run python tools/make_cli_doc.py"


def test_every_command_is_on_the_page_with_an_example():
    tool = _tool()
    from emucompile.cli import cli

    page = (ROOT / "docs" / "command-line.md").read_text(encoding="utf-8")
    contexts = list(tool._contexts(cli, "emucompile"))
    assert {"emucompile validate", "emucompile compile", "emucompile verify", "emucompile presets show"} <= {
        ctx.command_path for ctx in contexts}
    for ctx in contexts:
        assert f"## `{ctx.command_path}`" in page, ctx.command_path
        help_text = ctx.command.get_help(ctx)
        # An example is a line of the help that runs the program (the Usage line does not count).
        assert re.search(r"^\s*(Example: )?emucompile \S", help_text, re.MULTILINE), f"{ctx.command_path} has no example"
        for param in ctx.command.params:
            for flag in param.opts if param.param_type_name == "option" else []:
                assert flag in help_text, (ctx.command_path, flag)


def test_page_lists_every_exit_code_the_program_uses():
    from emucompile.cli import EXIT_INTERNAL
    from emucompile.errors import EXIT_BAD_INPUT, EXIT_CHECK_FAILED, EXIT_OK

    section = _tool().exit_code_section()
    for code in (EXIT_OK, EXIT_CHECK_FAILED, EXIT_BAD_INPUT, EXIT_INTERNAL, 130):
        assert f"| {code} |" in section
