"""The verification report in a real browser: headless Chromium loads it, decodes every image
and draws a page that is not blank.

Chromium comes from Debian's packages (``.ci/run`` installs it when missing).
Without it the tests skip, unless ``EMUCOMPILE_REQUIRE_BROWSER=1`` (set by
``.ci/run``), then they fail: CI must not pass by skipping.
"""

from __future__ import annotations

import io
import re
import subprocess

import numpy as np
import pytest
from matplotlib import image as mpimage

from emucompile.report import html as report
from browser_helpers import BROWSER_TIMEOUT_S, chromium as _chromium, required_tool as _required_tool, run_browser as _run
from verification_standin import report_inputs

# Appended to a copy of the report only (the report itself has no script): once the page has
# loaded, the title says how many images decoded (complete, with a natural width) out of all.
COUNT_SCRIPT = (
    "<script>window.addEventListener('load', function () {"
    " var all = Array.prototype.slice.call(document.images);"
    " var ok = all.filter(function (i) { return i.complete && i.naturalWidth > 0; });"
    " document.title = 'images-decoded:' + ok.length + '/' + all.length; });</script>"
)


@pytest.fixture(scope="module")
def written(tmp_path_factory):
    verification, figures = report_inputs()
    directory = tmp_path_factory.mktemp("browser")
    path = report.write_report(verification, figures, directory / "report.html")
    return path, len(figures)


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


def _pdftoppm():
    return _required_tool("pdftoppm", "poppler-utils")


@pytest.fixture(scope="module")
def demo_reports(tmp_path_factory):
    """Reports of the 2x2 campus-shuttle demo (MIMO) and of the viaduct demo (high-speed train, shadowing)."""
    from emucompile.compile import compiler
    from emucompile.report import figures as plots
    from emucompile.verify import run as verifier

    directory = tmp_path_factory.mktemp("demos")
    written = {}
    for name, duration in (("campus-eva-2x2", 10.0), ("viaduct-high-speed-train", 4.0)):
        bundle = compiler.compile_profile(f"profiles_demo/{name}.yaml", directory / name, duration_s=duration).path
        verification = verifier.verify_bundle(bundle)
        written[name] = report.write_report(verification, plots.make_figures(verification),
                                            directory / f"{name}.html")
    return written


@pytest.mark.parametrize("name, section", [("campus-eva-2x2", "MIMO set-up"),
                                           ("viaduct-high-speed-train", "Time-varying conditions")])
def test_printed_to_pdf_the_report_gives_a4_pages_neither_blank_nor_cut(demo_reports, name, section, tmp_path):
    browser = _chromium()
    renderer = _pdftoppm()
    path = demo_reports[name]
    assert f">{section}</h2>" in path.read_text(encoding="utf-8")
    pdf = tmp_path / "report.pdf"
    _run(browser, tmp_path / "profile", "--no-pdf-header-footer", f"--print-to-pdf={pdf}", path.as_uri())
    assert pdf.read_bytes()[:5] == b"%PDF-"
    # pdftoppm renders every page: at 30 dpi an A4 page (210 x 297 mm) is 248 x 351 pixels
    result = subprocess.run([renderer, "-r", "30", "-png", str(pdf), str(tmp_path / "page")],
                            capture_output=True, timeout=BROWSER_TIMEOUT_S, text=True)
    assert result.returncode == 0, result.stderr
    pages = sorted(tmp_path.glob("page-*.png"))
    assert len(pages) >= 3
    for page in pages:
        pixels = mpimage.imread(page)[..., :3]
        assert abs(pixels.shape[1] - 248) <= 1 and abs(pixels.shape[0] - 351) <= 1, f"{page.name}: not A4"
        ink = pixels.mean(axis=-1) < 0.9
        assert ink.mean() > 0.003, f"{page.name} is blank"
        # the style sheet's page margins are 12 mm at the sides, 14 mm at top and bottom: nothing is drawn
        # in the outer 8 mm (9 pixels), so nothing runs off the page (a cut table or figure would)
        edge = 9
        assert not ink[:, :edge].any() and not ink[:, -edge:].any(), f"{page.name}: content at a side edge"
        assert not ink[:edge].any() and not ink[-edge:].any(), f"{page.name}: content at the top or bottom edge"
