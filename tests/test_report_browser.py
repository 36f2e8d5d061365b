"""The verification report in a real browser: headless Chromium loads it, decodes every image
and draws a page that is not blank.

Chromium comes from Debian's packages (``.ci/run`` installs it when missing).
Without it the tests skip, unless ``EMUCOMPILE_REQUIRE_BROWSER=1`` (set by
``.ci/run``), then they fail: CI must not pass by skipping.
"""

from __future__ import annotations

import io
import os
import re
import shutil
import subprocess

import numpy as np
import pytest
from matplotlib import image as mpimage

from emucompile import report
from verification_standin import report_inputs

BROWSER_TIMEOUT_S = 60
FLAGS = ("--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
         "--disable-background-networking", "--disable-component-update", "--disable-sync",
         "--hide-scrollbars", "--mute-audio")

# Appended to a copy of the report only (the report itself has no script): once the page has
# loaded, the title says how many images decoded (complete, with a natural width) out of all.
COUNT_SCRIPT = (
    "<script>window.addEventListener('load', function () {"
    " var all = Array.prototype.slice.call(document.images);"
    " var ok = all.filter(function (i) { return i.complete && i.naturalWidth > 0; });"
    " document.title = 'images-decoded:' + ok.length + '/' + all.length; });</script>"
)


def _chromium():
    found = shutil.which("chromium") or ("/usr/bin/chromium" if os.path.exists("/usr/bin/chromium") else None)
    if found is None:
        message = "Chromium is not installed (apt-get install chromium)"
        if os.environ.get("EMUCOMPILE_REQUIRE_BROWSER") == "1":
            pytest.fail(message + ", and EMUCOMPILE_REQUIRE_BROWSER=1 requires it")
        pytest.skip(message)
    return found


@pytest.fixture(scope="module")
def written(tmp_path_factory):
    verification, figures = report_inputs()
    directory = tmp_path_factory.mktemp("browser")
    path = report.write_report(verification, figures, directory / "report.html")
    return path, len(figures)


def _run(browser, profile_dir, *arguments):
    command = [browser, *FLAGS, f"--user-data-dir={profile_dir}", *arguments]
    result = subprocess.run(command, capture_output=True, timeout=BROWSER_TIMEOUT_S, text=True)
    assert result.returncode == 0, f"{command} exited {result.returncode}:\n{result.stderr[-3000:]}"
    return result


def test_every_image_decodes_in_chromium(written, tmp_path):
    browser = _chromium()
    path, n_figures = written
    text = path.read_text(encoding="utf-8")
    probe = tmp_path / "probe.html"
    probe.write_text(text.replace("</body>", COUNT_SCRIPT + "</body>"), encoding="utf-8")
    result = _run(browser, tmp_path / "profile", "--virtual-time-budget=5000", "--dump-dom", probe.as_uri())
    titles = re.findall(r"<title>([^<]*)</title>", result.stdout)
    assert titles, f"no title in the dumped DOM:\n{result.stdout[:2000]}\n{result.stderr[-2000:]}"
    assert titles[0] == f"images-decoded:{n_figures}/{n_figures}"
    assert n_figures >= 7


def test_screenshot_is_not_blank(written, tmp_path):
    browser = _chromium()
    path, _ = written
    shot = tmp_path / "report.png"
    _run(browser, tmp_path / "profile", f"--screenshot={shot}", "--window-size=1280,4000", path.as_uri())
    pixels = mpimage.imread(io.BytesIO(shot.read_bytes()), format="png")
    assert pixels.shape[:2] == (4000, 1280)
    rgb = np.round(pixels[..., :3] * 255).astype(np.uint32)
    assert rgb.std() > 0
    colours = np.unique(rgb[..., 0] << 16 | rgb[..., 1] << 8 | rgb[..., 2])
    assert len(colours) > 50  # text, tables, the verdict banner and figures, not a flat page
    # The failed check's cell (background #c62828) was drawn: the inline style sheet applied.
    assert np.any(np.all(rgb == (0xC6, 0x28, 0x28), axis=-1))
