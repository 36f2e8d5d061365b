"""The verification report (emucompile.report.html) and its figures (emucompile.report.figures), in Python.

The inputs are a stand-in verification (tests/verification_standin.py): records
from the fading engine, models from the profile, a few invented checks.
"""

from __future__ import annotations

import base64
import io
import os
import re

import numpy as np
import pytest
from matplotlib import image as mpimage

from emucompile.report import figures as plots

from emucompile.report import html as report
from emucompile.report import html_text
from emucompile.verify import estimators, tolerance
from verification_standin import StandInCheck, report_inputs, standin_verification

DATA_URI = re.compile(r"data:image/png;base64,([A-Za-z0-9+/=]+)")


@pytest.fixture(scope="module")
def inputs():
    return report_inputs()


@pytest.fixture(scope="module")
def page(inputs):
    verification, figures = inputs
    return report.render_report(verification, figures, created_utc="2026-01-01T00:00:00Z")


def _colour_count(pixels):
    rgb = np.round(pixels[..., :3] * 255).astype(np.uint32)
    return len(np.unique(rgb[..., 0] << 16 | rgb[..., 1] << 8 | rgb[..., 2]))


def _decoded_images(text):
    return [base64.b64decode(m) for m in DATA_URI.findall(text)]


def test_no_external_reference_and_no_script(page):
    # Base64 data may contain "//", so look at the page with the data URIs taken out.
    text = DATA_URI.sub("data:", page)
    for forbidden in ("http:", "https:", "//", "<script", "url(", "@import", "<link"):
        assert forbidden not in text.lower(), forbidden
    assert re.findall(r'src="([^"]*)"', text) == ["data:"] * len(re.findall(r"<img ", text))


def test_every_embedded_png_decodes_and_is_not_blank(inputs, page):
    _, figures = inputs
    images = _decoded_images(page)
    assert images == [png for _, png in figures]
    for png in images:
        assert png.startswith(b"\x89PNG\r\n\x1a\n")
        pixels = mpimage.imread(io.BytesIO(png), format="png")
        assert pixels.ndim == 3 and pixels.shape[0] > 200 and pixels.shape[1] > 400
        assert pixels[..., :3].var() > 0
        # More than a few colours: curves, text and grid, not one flat field.
        assert _colour_count(pixels) > 8
        assert len(png) < 400_000  # modest: a report of a dozen figures stays a few MB


def test_figures_cover_each_statistic(inputs):
    verification, figures = inputs
    titles = [t for t, _ in figures]
    assert titles[0] == "Power delay profile"
    for statistic in ("Envelope CDF", "Autocorrelation", "Doppler spectrum", "Level crossing rate",
                      "Envelope over time"):
        assert titles.count(statistic) == 1  # six fading taps: one figure, two panels of three
    assert titles[-1].startswith("Channel magnitude |H(f, t)|")
    assert len(titles) == 7


def test_twelve_taps_are_grouped_not_one_image_each(monkeypatch):
    drawn = []
    monkeypatch.setattr(plots, "_png", lambda figure: drawn.append(figure) or b"")  # the layout, without rendering
    verification = standin_verification("profiles_demo/port-crane-los.yaml", periods=50.0)
    from dataclasses import replace

    taps = verification.profile.taps
    twelve = tuple(replace(t, index=i) for i, t in enumerate(taps + taps))
    verification.profile = replace(verification.profile, taps=twelve)
    verification.records = {i: verification.records[i % 6] for i in range(12)}
    verification.models = {i: verification.models[i % 6] for i in range(12)}
    verification.fir_map = np.vstack([verification.fir_map, verification.fir_map])
    titles = [t for t, _ in plots.make_figures(verification)]  # drawn here, seen here
    # One figure per statistic, its panels holding up to four taps each (taps 0-3, 4-7, 8-11).
    assert len(titles) == 1 + 5 + 1
    for statistic, figure in zip(titles[1:6], drawn[1:6]):
        assert [ax.get_title() for ax in figure.axes] == ["taps 0-3", "taps 4-7", "taps 8-11"], statistic
        # Every tap is named in the key below its panel, and has a measured curve in it.
        named = [t.get_text() for ax in figure.axes for t in ax.texts if "tap " in t.get_text()]
        assert [int(re.search(r"tap (\d+):", n).group(1)) for n in named] == list(range(12)), statistic
        measured = [line for ax in figure.axes for line in ax.get_lines() if line.get_label().startswith("tap ")]
        assert len(measured) == 12, statistic


def test_static_taps_appear_in_the_delay_profile_only():
    verification = standin_verification("profiles_demo/bench-two-path.json", periods=50.0,
                                        sample_rate_hz=61.44e6)
    titles = [t for t, _ in plots.make_figures(verification)]
    assert titles == ["Power delay profile", "Channel magnitude |H(f, t)| across the band"]


def test_a_tap_without_a_model_is_left_out_of_the_statistics(monkeypatch):
    # verify gives no model (None) for a direct part on a Doppler trajectory.
    verification = standin_verification(periods=50.0)
    verification.models[0] = None
    drawn = []
    monkeypatch.setattr(plots, "_png", lambda figure: b"")
    original = plots._grid_figure
    monkeypatch.setattr(plots, "_grid_figure",
                        lambda group, draw, title: drawn.append([t.key for t in group]) or original(group, draw, title))
    titles = [t for t, _ in plots.make_figures(verification)]  # drawn here, seen here
    assert len(titles) == 7 and titles[-1].startswith("Channel magnitude")
    assert drawn == [[1, 2, 3, 4, 5]] * 5


def test_every_check_has_its_place_in_the_matrix_and_failed_ones_are_linked_at_the_top(inputs, page):
    # the taps x checks matrix replaced the flat table: one anchor per check, one mark per cell
    verification, _ = inputs
    anchors = re.findall(r'id="check-(\d+)"', page)
    assert sorted(map(int, anchors)) == list(range(1, len(verification.checks) + 1))
    failed = [i + 1 for i, c in enumerate(verification.checks) if c.passed is False]
    top = page[:page.index('id="checks"')]
    assert re.findall(r'<a href="#check-(\d+)">', top) == [str(i) for i in failed]
    assert "Failed checks (1)" in top and top.index("FAILED") < top.index("Failed checks")
    assert "\u2718" in page and "\u2714" in page and 'class="grid matrix"' in page
    # the numbers are in each cell's title (shown on hover): the failed K-factor's value and tolerance
    titles = re.findall(r'<td class="fail" title="([^"]*)"', page)
    assert titles and "measured 4.1 linear against 5.01 linear \u00b1 0.6" in titles[0]
    assert "FAILED" in page  # the stand-in has a failed check


def test_deviation_checks_say_what_was_measured_against_what():
    checks = [StandInCheck("autocorrelation", 0, 0.04, 0.0, 0.05, 0.2, True, unit="correlation")]
    page = report.render_report(standin_verification(periods=20.0, sample_rate_hz=None, checks=checks), [])
    assert "deviation 0.04 correlation, allowed up to 0.05" in page
    assert "closed form" in page and "expected 0" not in page


def test_not_enough_data_is_never_shown_as_pass():
    checks = [StandInCheck("autocorrelation", 3, None, None, None, None, None,
                           reason="not enough data: T f_D = 12 < 50")]
    verification = standin_verification(periods=20.0, sample_rate_hz=None, checks=checks)
    page = report.render_report(verification, [])
    cells = re.findall(r'<td class="(pass|fail|na)" title="([^"]*)"', page)
    assert cells == [("na", cells[0][1])] and "not enough data" in cells[0][1] and "<td class=\"pass\"" not in page
    assert 'class="verdict pass"' in page  # nothing failed


def test_text_from_the_data_is_escaped(inputs):
    verification, _ = inputs
    page = report.render_report(verification, [], title='<img src=x onerror="alert(1)">')
    assert "<img src=x" not in page
    assert "&lt;img src=x onerror=&quot;alert(1)&quot;&gt;" in page
    # The stand-in check name carries markup characters.
    assert "level_crossing_rate &lt;5 &amp; &#x27;x&#x27;&gt;" in page
    assert "<5 & 'x'>" not in page


def test_report_states_the_rate_identity_note_cautions_and_signature(inputs, page):
    verification, _ = inputs
    assert "1 %" in page and "Holm" in page
    for digest in verification.identity["hashes"].values():
        assert digest in page
    assert f"<td>{verification.identity['seed']}</td>" in page
    assert "estimator bias" in page  # the stand-in is marked foreign
    for caution in report.CAUTIONS:
        assert html_text.e(caution) in page
    assert "Signature:" in page and "Date:" in page and "Name:" in page
    assert "157.3 ns" in page  # RMS delay spread of the port-crane demo (its expect: block)


def test_foreign_note_only_for_foreign_data():
    verification = standin_verification(periods=20.0, sample_rate_hz=None)
    assert "estimator bias" not in report.render_report(verification, [])


def test_write_report_is_atomic(tmp_path, inputs, monkeypatch):
    verification, figures = inputs
    target = tmp_path / "report.html"
    target.write_text("old report")
    written = report.write_report(verification, figures[:1], target, created_utc="2026-01-01T00:00:00Z")
    assert written == target
    assert target.read_text(encoding="utf-8") == report.render_report(
        verification, figures[:1], created_utc="2026-01-01T00:00:00Z")
    assert sorted(os.listdir(tmp_path)) == ["report.html"]

    def failing_replace(source, destination):
        raise OSError("disk went away")

    monkeypatch.setattr(os, "replace", failing_replace)
    with pytest.raises(OSError, match="disk went away"):
        report.write_report(verification, figures[:1], target)
    assert target.read_text(encoding="utf-8").startswith("<!DOCTYPE html>")  # the previous one, whole
    assert sorted(os.listdir(tmp_path)) == ["report.html"]  # no temporary left behind


# -- the numerics behind the figures -----------------------------------------------------


def test_the_crossing_figure_counts_as_its_check_counts():
    # One estimator per quantity: the figure's rates at the check's own levels are the check's rates.
    verification = standin_verification(periods=400.0)
    tap, standin = 1, verification.models[1]
    model = tolerance.TapModel(standin.spectrum, standin.mean_power, standin.k_linear, standin.los_doppler_hz)
    record = verification.records[tap]
    check = {c.name: c for c in tolerance.check_tap(record, verification.record_rate_hz, model, tap=tap)}
    detail = check["level_crossing_rate"].detail
    rates, _ = tolerance.crossing_rates(record, verification.record_rate_hz, model, detail["levels_rho"])
    assert rates.tolist() == detail["measured_per_s"]


def test_the_autocorrelation_and_spectrum_figures_draw_the_numbers_their_checks_judged():
    verification = standin_verification(periods=400.0)
    tap, standin = 0, verification.models[0]  # the crane's Rician tap: its direct part is removed first
    model = tolerance.TapModel(standin.spectrum, standin.mean_power, standin.k_linear, standin.los_doppler_hz)
    record, rate = verification.records[tap], verification.record_rate_hz
    check = {c.name: c for c in tolerance.check_tap(record, rate, model, tap=tap)}
    curve = tolerance.autocorrelation_curve(record, rate, model)
    detail = check["autocorrelation"].detail
    worst = int(np.argmin(np.abs(curve["lag_s"] - detail["worst_lag_s"])))
    assert [curve["measured"][worst].real, curve["measured"][worst].imag] == detail["worst_estimate"]
    assert curve["expected"][worst] == detail["worst_expected"]
    psd = tolerance.psd_curve(record, rate, model)
    ratio = psd["psd"][psd["judged"]] / (psd["power"] * psd["expected"][psd["judged"]])
    nu = psd["nu"]
    z = np.abs((np.cbrt(ratio) - (1.0 - 1.0 / (9.0 * nu))) * np.sqrt(9.0 * nu))
    assert float(z.max()) == check["doppler_psd"].value
    assert int(psd["judged"].sum()) == check["doppler_psd"].detail["bins"]


def test_upward_crossing_counts_equal_the_level_by_level_count():
    x = np.random.default_rng(3).random(2000).astype(np.float32)
    levels = np.linspace(0.0, 1.0, 37)
    assert estimators.upward_crossing_counts(x, levels).tolist() == [
        estimators.level_crossings(x, np.float32(level)) for level in levels]
    # a rise from 0.2 to 0.8 crosses 0.5 once, a fall never upwards
    assert estimators.upward_crossing_counts(np.array([0.2, 0.8, 0.2]), [0.5]).tolist() == [1]


def test_autocorrelation_sign_convention_matches_theory():
    # R(m) = E[g(n + m) conj g(n)]: a tone exp(j w n) gives exp(j w m), as
    # (K exp(j 2 pi f_los tau) + r(tau)) / (K + 1) does for a direct part alone.
    w = 0.3
    x = np.exp(1j * w * np.arange(4096))
    r = estimators.autocorrelation(x, 11)
    np.testing.assert_allclose(r / r[0].real, np.exp(1j * w * np.arange(11)), atol=1e-9)


# -- with a real verification ------------------------------------------------------------


def test_report_of_a_real_verification(tmp_path):
    from emucompile.compile import compiler
    from emucompile.verify import run as verifier

    bundle = tmp_path / "crane"
    compiler.compile_profile("profiles_demo/port-crane-los.yaml", bundle, duration_s=10.0, seed=5)
    verification = verifier.verify_bundle(bundle)
    figures = plots.make_figures(verification)
    path = report.write_report(verification, figures, tmp_path / "report.html")
    page = path.read_text(encoding="utf-8")
    assert len(set(re.findall(r'id="check-(\d+)"', page))) == len(verification.checks)
    assert len(_decoded_images(page)) == len(figures) == 7
    for entry in verification.identity["files"]:
        assert entry["sha256"] in page
    assert "http" not in DATA_URI.sub("data:", page)


def test_the_package_root_exposes_the_report_api():
    import emucompile

    assert emucompile.render_report is report.render_report
    assert emucompile.write_report is report.write_report
    assert emucompile.make_figures is plots.make_figures


# -- figure text never overlaps ----------------------------------------------------------------------


def _overlapping_texts(figure):
    """Pairs of visible titles and figure-level texts whose drawn boxes intersect."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    renderer = FigureCanvasAgg(figure).get_renderer()
    figure.draw(renderer)
    texts = [t for t in figure.texts if t.get_text()]
    for ax in figure.axes:
        texts += [t for t in (ax.title, ax._left_title, ax._right_title) if t.get_text()]
    boxes = [(t.get_text(), t.get_window_extent(renderer)) for t in texts]
    return [(a, b) for i, (a, box_a) in enumerate(boxes) for b, box_b in boxes[i + 1:] if box_a.overlaps(box_b)]


@pytest.mark.parametrize("profile_path", ["profiles_demo/port-crane-los.yaml",
                                          "profiles_demo/viaduct-high-speed-train.yaml"])
def test_figure_titles_never_overlap(profile_path, monkeypatch):
    # the viaduct demo has one fading tap: a one-panel figure, where title and key once overlapped
    from types import SimpleNamespace

    figures = []
    monkeypatch.setattr(plots, "_png", lambda figure: figures.append(figure) or b"png")
    verification = standin_verification(profile_path, periods=100.0)
    links = ["rx0-tx0", "rx1-tx0", "rx0-tx1", "rx1-tx1"]
    matrix = np.eye(4) * 0.1 + 0.9
    taps = {0: {"expected": matrix, "achieved": matrix + 0.01}, 1: {"expected": matrix, "achieved": matrix}}
    verification = SimpleNamespace(**vars(verification), mimo={"links": links, "taps": taps}, conditions={
        "high_speed_train": {"time_s": np.linspace(0, 10, 50), "doppler_hz": np.cos(np.linspace(0, 3, 50)), "taps": [0]},
        "moving_delay": {"time_s": np.linspace(0, 10, 50), "delay_offset_s": np.linspace(0, 1e-6, 50)},
        "shadowing": {"time_s": np.linspace(0, 10, 50), "gain_db": np.zeros(50)}})
    plots.make_figures(verification)
    assert len(figures) >= 5
    titles = [t.get_text() for f in figures for t in f.texts]
    assert any(t.startswith("Envelope CDF") for t in titles)
    for figure in figures:
        assert _overlapping_texts(figure) == []
