"""The profile card (stats --html): one self-contained page; images decode and are not blank,
in Python and in headless Chromium."""

from __future__ import annotations

import base64
import io
import re
from pathlib import Path

import numpy as np
import pytest

from profile_helpers import DEMO_PROFILES
from click.testing import CliRunner
from matplotlib import image as mpimage

from emucompile.report.card import card_figures, render_profile_card, write_profile_card
from emucompile.cli import cli
from emucompile.profile.model import load_profile, load_profile_text

ROOT = Path(__file__).resolve().parents[2]
DEMOS = DEMO_PROFILES
DATA_URI = re.compile(r'src="data:image/png;base64,([A-Za-z0-9+/=]+)"')

HOSTILE = """\
format_version: 1
name: card-escaping
description: "Invented. <script>alert(1)</script> & <b>bold</b>"
max_doppler_hz: 30
taps:
  - {delay_ns: 0, power_db: 0}
  - {delay_ns: 200, power_db: -6, fading: static, los_doppler_hz: 5}
"""


def _images(page):
    found = DATA_URI.findall(page)
    return [mpimage.imread(io.BytesIO(base64.b64decode(data)), format="png") for data in found]


def _not_blank(pixels):
    rgb = np.round(pixels[..., :3] * 255).astype(np.uint32)
    return len(np.unique(rgb[..., 0] << 16 | rgb[..., 1] << 8 | rgb[..., 2])) > 20


@pytest.mark.parametrize("demo", DEMOS, ids=[d.stem for d in DEMOS])
def test_every_demo_card_is_self_contained_and_its_images_decode(demo):
    profile = load_profile(demo)
    page = render_profile_card(profile, text=demo.read_text(encoding="utf-8"))
    images = _images(page)
    expected = 3 if any(t.fading != "static" for t in profile.taps) else 2
    assert len(images) == expected and all(_not_blank(p) for p in images)
    assert not re.search(r"(?i)https?:|ftp:|//[a-z]|<script|<link|@import|src=\"(?!data:)", DATA_URI.sub("", page))
    for heading in ("Power delay profile", "Frequency correlation", "<h2>Statistics</h2>", "Taps (after power scaling)",
                    "The profile as written", "resolved profile SHA-256"):
        assert heading in page, heading
    assert f"{profile.resolved_sha256()}" in page
    assert "coherence bandwidth" in page.lower()


def test_the_figures_are_the_three_named_ones():
    titles = [t for t, _ in card_figures(load_profile(ROOT / "profiles_demo" / "port-crane-los.yaml"))]
    assert titles == ["Power delay profile", "Doppler spectrum of each tap", "Frequency correlation |R(\u0394f)|"]


def test_every_string_from_the_profile_is_escaped():
    profile = load_profile_text(HOSTILE, filename="hostile.yaml")
    page = render_profile_card(profile, text=HOSTILE)
    assert "<script>alert(1)" not in page and "&lt;script&gt;alert(1)&lt;/script&gt; &amp; &lt;b&gt;" in page
    assert len(_images(page)) == 3


def test_stats_html_writes_the_card_atomically_even_when_a_target_is_missed(tmp_path):
    source = ROOT / "profiles_demo" / "warehouse-robot.yaml"
    card = tmp_path / "robot.html"
    result = CliRunner().invoke(cli, ["stats", str(source), "--html", str(card)])
    assert result.exit_code == 0 and f"wrote the profile card {card}" in result.stdout
    assert sorted(p.name for p in tmp_path.iterdir()) == ["robot.html"]
    page = card.read_text(encoding="utf-8")
    assert "expect: target(s) met" in page and source.read_text(encoding="utf-8").splitlines()[0] in page
    missed = tmp_path / "missed.yaml"
    missed.write_text(source.read_text(encoding="utf-8").replace(
        "\nexpect:", "\nexpect:\n  max_doppler_hz: {value: 1, tolerance: 0.01}", 1), encoding="utf-8")
    result = CliRunner().invoke(cli, ["stats", str(missed), "--html", str(tmp_path / "missed.html"), "--json"])
    assert result.exit_code == 1
    assert "expect: target(s) missed" in (tmp_path / "missed.html").read_text(encoding="utf-8")
    bad = CliRunner().invoke(cli, ["stats", str(source), "--html", str(tmp_path / "no" / "dir" / "x.html")])
    assert bad.exit_code == 2 and "cannot write the profile card" in bad.stderr


def test_write_profile_card_from_a_path_and_the_python_api(tmp_path):
    import emucompile

    path = emucompile.write_profile_card(ROOT / "profiles_demo" / "campus-eva-2x2.yaml", tmp_path / "c.html")
    assert path == tmp_path / "c.html" and write_profile_card is emucompile.write_profile_card
    assert "mimo" in path.read_text(encoding="utf-8")


# -- in a real browser (skips without Chromium unless EMUCOMPILE_REQUIRE_BROWSER=1) ------------------


def test_the_card_s_images_decode_in_chromium_and_its_screenshot_is_not_blank(tmp_path):
    from test_report_browser import COUNT_SCRIPT, _chromium, _run

    browser = _chromium()
    card = write_profile_card(ROOT / "profiles_demo" / "port-crane-los.yaml", tmp_path / "card.html")
    probe = tmp_path / "probe.html"
    probe.write_text(card.read_text(encoding="utf-8").replace("</body>", COUNT_SCRIPT + "</body>"), encoding="utf-8")
    result = _run(browser, tmp_path / "profile", "--virtual-time-budget=5000", "--dump-dom", probe.as_uri())
    titles = re.findall(r"<title>([^<]*)</title>", result.stdout)
    assert titles and titles[0] == "images-decoded:3/3", (titles, result.stderr[-2000:])
    shot = tmp_path / "card.png"
    _run(browser, tmp_path / "profile", f"--screenshot={shot}", "--window-size=1200,3000", card.as_uri())
    pixels = mpimage.imread(io.BytesIO(shot.read_bytes()), format="png")
    assert pixels.shape[:2] == (3000, 1200) and _not_blank(pixels)
    rgb = np.round(pixels[..., :3] * 255).astype(np.uint32)
    assert np.any(np.all(rgb == (0x2E, 0x7D, 0x32), axis=-1))  # the "targets met" banner: the style sheet applied
