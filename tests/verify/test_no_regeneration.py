"""Verify never regenerates: the FIR map and the direct part come from the manifest's record.

The compile planner (``plan_compile`` and its replay ``_replan``), the fading engine's
planning (filter design, drawn constants) and the filter design itself are wrapped to
raise while verify runs on bundles compiled beforehand; verify must still pass (same
checks as without the wrapper) and never call them. The pieces verify uses instead
(:class:`emucompile.models.fading.RecordedDirect` through
:func:`emucompile.models.channel.recorded_channel`, and
:func:`emucompile.models.grid.fir_map_from_record`) are compared bit for bit with what
compile made.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from emucompile.bundle.store import open_bundle
from emucompile.compile import compiler
from emucompile.models import fading
from emucompile.models.channel import ChannelPlan
from emucompile.models.fading import _design, _plan
from emucompile.profile.model import profile_from_document
from emucompile.verify import checks_fir
from emucompile.verify import run as verifier
from emucompile.verify.components import open_components
from profile_helpers import FIT_EXAMPLE

DEMOS = Path(__file__).resolve().parents[2] / "profiles_demo"

MIMO_PROFILE = """\
format_version: 1
name: verify-no-regeneration-2x2
description: invented for the tests (2x2, TS 36.104 medium correlation, a Rician tap, 6 dB shadowing)
max_doppler_hz: 50
speed_kmh: 30
carrier_hz: 1.8e9
taps:
  - {delay_ns: 0, power_db: 0, fading: rician, k_db: 6, los_angle_deg: 45}
  - {delay_ns: 200, power_db: -6}
mimo:
  n_tx: 2
  n_rx: 2
  correlation: {level: medium, specification: ts36104}
  direct_part: {tx_spacing_wavelengths: 0.5, rx_spacing_wavelengths: 0.5, departure_deg: 20, arrival_deg: -35}
conditions: {shadowing: {sigma_db: 6, decorrelation_distance_m: 20}}
"""


MOVING_PROFILE = """\
format_version: 1
name: verify-no-regeneration-moving
description: invented for the tests (a moving delay, which the FIR follows)
max_doppler_hz: 20
taps:
  - {delay_ns: 0, power_db: 0}
  - {delay_ns: 900, power_db: -3}
conditions:
  moving_propagation: {amplitude_us: 2, angular_rate_per_s: 5}
"""


@pytest.fixture(scope="module")
def bundles(tmp_path_factory):
    """A SISO bundle with a FIR map (crane demo, Rician tap, ci16), a 2x2 one, a target-fitted one, a moving delay."""
    root = tmp_path_factory.mktemp("noregen")
    (root / "mimo.yaml").write_text(MIMO_PROFILE)
    (root / "fit.yaml").write_text(FIT_EXAMPLE)
    (root / "moving.yaml").write_text(MOVING_PROFILE)
    out = {
        "siso": compiler.compile_profile(DEMOS / "port-crane-los.yaml", root / "siso", duration_s=5.0,
                                         formats="ci16").path,
        "mimo": compiler.compile_profile(root / "mimo.yaml", root / "mimo", duration_s=6.0, seed=5).path,
        "fit": compiler.compile_profile(root / "fit.yaml", root / "fit", duration_s=2.0, seed=3,
                                        accept_fit=True).path,
        "moving": compiler.compile_profile(root / "moving.yaml", root / "moving", duration_s=2.0, seed=4,
                                           sample_rate_hz=2e6).path,
    }
    return out


@pytest.fixture()
def planner_refused(monkeypatch):
    """Every entry to the compile planner and the engine's design raises; the calls are counted."""
    calls = []

    def refuse(name):
        def raising(*args, **kwargs):
            calls.append(name)
            raise AssertionError(f"verify called {name}")
        return raising

    monkeypatch.setattr(compiler, "plan_compile", refuse("plan_compile"))
    monkeypatch.setattr(compiler, "_replan", refuse("_replan"))
    monkeypatch.setattr(fading, "plan", refuse("fading.plan"))
    monkeypatch.setattr(_plan.FadingPlan, "__init__", refuse("FadingPlan"))
    monkeypatch.setattr(_design, "design_chain", refuse("design_chain"))
    monkeypatch.setattr(_plan, "generator", refuse("drawn constants"))
    return calls


@pytest.mark.parametrize("name", ["siso", "mimo", "fit", "moving"])
def test_verify_passes_without_the_planner_and_never_calls_it(bundles, planner_refused, name):
    result = verifier.verify_bundle(bundles[name], delivered=True)
    assert planner_refused == []
    assert result.passed, [c.to_dict() for c in result.failed]
    names = {c.name for c in result.checks}
    if name != "mimo":
        rebuilt = [c for c in result.checks if c.name == "fir_map_rebuilt"]
        assert len(rebuilt) == 1 and rebuilt[0].passed and rebuilt[0].value == 0.0
    if name == "mimo":
        mimo = [c for c in result.checks if c.name.startswith("mimo_correlation")]
        assert len(mimo) == 2 * 6 and all(c.passed for c in mimo)
        assert result.mimo is not None
    assert "mean_power" in names or any(n.startswith("mean_power [") for n in names)


def test_verify_imports_nothing_from_compile():
    package = Path(__file__).resolve().parents[2] / "emucompile" / "verify"
    for path in package.glob("*.py"):
        text = path.read_text("utf-8")
        assert "emucompile.compile" not in text.replace(":mod:`emucompile.compile", ""), path.name


def _engine_channel(path):
    manifest = open_bundle(path).manifest
    profile = profile_from_document(manifest["profile"])
    engine = fading.plan(profile, manifest["update_rate_hz"], manifest["n_samples"], manifest["seed"],
                         method=manifest["method"], periodic=manifest["periodic"])
    return ChannelPlan(profile, engine)


@pytest.mark.parametrize("name", ["siso", "mimo"])
def test_the_recorded_direct_part_is_the_engines_bit_for_bit(bundles, name):
    parts = open_components(bundles[name])
    channel = _engine_channel(bundles[name])
    n = parts.n_samples
    for start, stop in ((0, n), (n // 3, n // 3 + 55), (n - 7, n)):
        assert np.array_equal(parts.direct(start, stop), channel.to_axes(channel.direct_links(start, stop)))
    assert np.array_equal(parts.expected_correlation(0), channel.correlation)


def test_the_recorded_direct_part_of_a_periodic_record_keeps_its_rounded_doppler(tmp_path):
    """Periodic records round the direct-part Doppler to whole turns per period; the manifest's value gives it back."""
    (tmp_path / "p.yaml").write_text(MIMO_PROFILE.replace("conditions: {shadowing: {sigma_db: 6, "
                                                          "decorrelation_distance_m: 20}}\n", ""))
    path = compiler.compile_profile(tmp_path / "p.yaml", tmp_path / "b", duration_s=1.37, update_rate_hz=1000.0,
                                    seed=2, periodic=True).path
    manifest = json.loads((path / "manifest.json").read_text())
    assert manifest["taps"][0]["generator"]["los_doppler_rounding_hz"] != 0.0  # 50 cos 45 Hz: not whole turns
    parts = open_components(path)
    channel = _engine_channel(path)
    assert np.array_equal(parts.direct(0, parts.n_samples),
                          channel.to_axes(channel.direct_links(0, parts.n_samples)))


@pytest.mark.parametrize("name", ["siso", "fit", "moving"])
def test_the_map_rebuilt_from_the_manifest_is_the_stored_map(bundles, name):
    opened = open_bundle(bundles[name])
    rebuilt = checks_fir.rebuilt_map(opened.manifest, bundles[name])
    assert np.array_equal(rebuilt.matrix, np.asarray(opened.fir_map))
