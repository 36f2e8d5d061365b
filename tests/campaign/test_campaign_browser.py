"""The campaign index in a real browser: headless Chromium loads DIR/index.html of a small run,
every case row is in the DOM, every report link resolves to a file, and the page is drawn with
its inline style sheet (a failing case's row tinted). Skips without Chromium unless
``EMUCOMPILE_REQUIRE_BROWSER=1`` (as ``.ci/run`` sets it), like ``test_report_browser``.
"""

from __future__ import annotations

import dataclasses
import io
import logging
import re
from pathlib import Path
from urllib.parse import unquote, urlparse

import numpy as np
import pytest
from matplotlib import image as mpimage
from browser_helpers import chromium as _chromium, run_browser as _run

distributed = pytest.importorskip("dask.distributed")

PLAN = """\
format_version: 1
name: browser-matrix
description: Invented test plan <with markup to escape>.
profiles:
  - preset: tdl-a
  - preset: epa
axes:
  max_doppler_hz: [50, 100]
  seed: [7]
settings:
  duration_s: 1.2
  plots: false
"""

# A copy of the page with this script appended (the page itself has none): the title then says
# how many case rows and report links the DOM holds.
COUNT_SCRIPT = (
    "<script>window.addEventListener('load', function () {"
    " var rows = document.querySelectorAll('#cases tr.case').length;"
    " var links = Array.prototype.map.call(document.querySelectorAll('#cases a'), function (a) { return a.href; });"
    " document.title = 'rows:' + rows + ' links:' + links.join('|'); });</script>"
)


@pytest.fixture(scope="module")
def campaign_directory(tmp_path_factory):
    from emucompile.verify import run as verify
    from emucompile.campaign import expand_plan, run_campaign

    root = tmp_path_factory.mktemp("campaign-browser")
    (root / "plan.yaml").write_text(PLAN, encoding="utf-8")
    plan = expand_plan(root / "plan.yaml")
    original = verify.verify_bundle

    def one_failure(path, **kwargs):  # one case fails a check, so the page shows a failing row
        result = original(path, **kwargs)
        if Path(path).name == plan.cases[0].name:
            result.checks[0] = dataclasses.replace(result.checks[0], passed=False)
        return result

    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=False,
                                       dashboard_address=None, silence_logs=logging.ERROR)
    client = distributed.Client(cluster)
    verify.verify_bundle = one_failure
    try:
        result = run_campaign(plan, root / "out", client=client)
    finally:
        verify.verify_bundle = original
        client.close()
        cluster.close()
    assert [r["status"] for r in result.records] == ["failed", "passed", "passed", "passed"]
    return root / "out"


def test_every_case_row_and_report_link_is_in_the_page_and_the_links_resolve(campaign_directory, tmp_path):
    browser = _chromium()
    page = (campaign_directory / "index.html").read_text(encoding="utf-8")
    assert "&lt;with markup to escape&gt;" in page and "<script" not in page
    probe = campaign_directory / "probe.html"  # beside the index, so relative links resolve the same
    probe.write_text(page.replace("</body>", COUNT_SCRIPT + "</body>"), encoding="utf-8")
    result = _run(browser, tmp_path / "profile", "--virtual-time-budget=5000", "--dump-dom", probe.as_uri())
    probe.unlink()
    titles = re.findall(r"<title>([^<]*)</title>", result.stdout)
    assert titles and titles[0].startswith("rows:4 links:"), result.stdout[:2000]
    links = titles[0].split("links:", 1)[1].split("|")
    assert len(links) == 4
    for link in links:
        target = Path(unquote(urlparse(link).path))
        assert target.is_file() and target.name == "report.html" and campaign_directory in target.parents


def test_the_index_draws_with_its_style_sheet(campaign_directory, tmp_path):
    browser = _chromium()
    shot = tmp_path / "index.png"
    _run(browser, tmp_path / "profile", f"--screenshot={shot}", "--window-size=1280,1200",
         (campaign_directory / "index.html").as_uri())
    rgb = np.round(mpimage.imread(io.BytesIO(shot.read_bytes()), format="png")[..., :3] * 255).astype(np.uint32)
    assert rgb.shape[:2] == (1200, 1280) and rgb.std() > 0
    # the failing row's tint (#fff0f0) and the table headers' grey (#eeeeee): the inline CSS applied
    assert np.any(np.all(rgb == (0xFF, 0xF0, 0xF0), axis=-1))
    assert np.any(np.all(rgb == (0xEE, 0xEE, 0xEE), axis=-1))
