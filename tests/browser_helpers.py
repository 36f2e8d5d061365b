"""Headless Chromium for the tests that open written pages (reports, campaign indexes)."""

from __future__ import annotations

import os
import shutil
import subprocess

import pytest

BROWSER_TIMEOUT_S = 60
FLAGS = ("--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
         "--disable-background-networking", "--disable-component-update", "--disable-sync",
         "--hide-scrollbars", "--mute-audio")


def chromium():
    fallback = "/usr/bin/chromium" if os.path.exists("/usr/bin/chromium") else None
    return required_tool("chromium", "chromium", fallback)


def required_tool(name, package, fallback=None):
    """The tool's path; skip without it, unless EMUCOMPILE_REQUIRE_BROWSER=1 (CI): then fail."""
    found = shutil.which(name) or fallback
    if found is None:
        message = f"{name} is not installed (apt-get install {package})"
        if os.environ.get("EMUCOMPILE_REQUIRE_BROWSER") == "1":
            pytest.fail(message + ", and EMUCOMPILE_REQUIRE_BROWSER=1 requires it")
        pytest.skip(message)
    return found


def run_browser(browser, profile_dir, *arguments):
    command = [browser, *FLAGS, f"--user-data-dir={profile_dir}", *arguments]
    result = subprocess.run(command, capture_output=True, timeout=BROWSER_TIMEOUT_S, text=True)
    assert result.returncode == 0, f"{command} exited {result.returncode}:\n{result.stderr[-3000:]}"
    return result
