"""A stand-in verification result for the plot and report tests.

It has the attributes :mod:`emucompile.report.figures` and :mod:`emucompile.report.html`
read from a verification (``emucompile.verify.run``), filled from the fading
engine's own output, so the figures and the report can be tested without
running the checks. The checks listed are invented rows covering each
verdict (pass, fail, not applicable); their numbers mean nothing.
"""

from __future__ import annotations

import functools

from dataclasses import asdict, dataclass, field
from types import SimpleNamespace

import numpy as np

from emucompile.models import fading

from emucompile.models import grid

from emucompile.profile import stats
from emucompile.models.channel import generate_channel_gains
from emucompile.profile.model import load_profile


@dataclass
class StandInCheck:
    name: str
    tap: int | None
    value: float | None
    expected: float | None
    tolerance: float | None
    p_value: float | None
    passed: bool | None
    reason: str = ""
    level: float | None = None
    min_detectable: float | None = None
    unit: str = ""
    detail: dict = field(default_factory=dict)

    def to_dict(self):
        return asdict(self)


@dataclass(frozen=True)
class StandInModel:
    spectrum: object
    mean_power: float
    k_linear: float
    los_doppler_hz: float


def standin_verification(profile_path="profiles_demo/port-crane-los.yaml", *, periods=2000.0,
                         rate_per_doppler=10.0, sample_rate_hz=30.72e6, seed=7, foreign=False,
                         checks=None):
    """A verification-like object: records of T f_D = ``periods`` at ``rate_per_doppler`` f_D."""
    profile = load_profile(profile_path)
    doppler = max(t.largest_doppler_hz for t in profile.taps)
    rate = rate_per_doppler * doppler
    n = int(periods * rate_per_doppler)
    # the first link of the whole channel (conditions included): generate_tap_gains refuses those
    gains = generate_channel_gains(profile, rate, n, seed)[:, 0, 0, :]
    records = {i: gains[:, i] for i in range(profile.n_taps)}
    models = {
        i: StandInModel(t.doppler_spectrum, t.power_linear, t.k_linear or 0.0, t.los_doppler_hz or 0.0)
        for i, t in enumerate(profile.taps)
    }
    fir = None
    if sample_rate_hz:
        fir = grid.fir_map([t.delay_s for t in profile.taps], [t.power_linear for t in profile.taps],
                           sample_rate_hz).matrix
    if checks is None:
        checks = [
            StandInCheck("mean_power", 0, 1.01, 1.0, 0.05, 0.62, True, level=0.01 / 3,
                         min_detectable=0.04, unit="linear"),
            StandInCheck("k_factor", 0, 4.1, 5.01, 0.6, 0.001, False, level=0.01 / 4,
                         min_detectable=0.5, unit="linear"),
            StandInCheck("k_factor", 1, None, None, None, None, None,
                         reason="not applicable: Rayleigh tap", unit="linear"),
            StandInCheck("level_crossing_rate <5 & 'x'>", 2, 12.0, 11.5, 1.5, 0.3, True,
                         level=0.01 / 2, min_detectable=1.2, unit="Hz"),
        ]
    return SimpleNamespace(
        checks=checks,
        passed=all(c.passed is not False for c in checks),
        false_alarm=0.01,
        identity={
            "tool_version": "0.0-test",
            "seed": seed,
            "hashes": {"tap_gains.npy": "ab" * 32, "manifest.json": "cd" * 32},
            "versions": {"numpy": np.__version__, "generator_version": fading.GENERATOR_VERSION},
        },
        profile=profile,
        profile_stats=stats.profile_statistics(profile),
        update_rate_hz=rate,
        records=records,
        record_rate_hz=rate,
        models=models,
        fir_map=fir,
        sample_rate_hz=sample_rate_hz,
        foreign=foreign,
        to_dict=lambda: {"passed": all(c.passed is not False for c in checks)},
    )




@functools.lru_cache(maxsize=None)
def report_inputs():
    """One stand-in verification of the port-crane demo (T f_D = 500) and its figures, shared by tests."""
    from emucompile.report.figures import make_figures

    verification = standin_verification(periods=500.0, foreign=True)
    return verification, tuple(make_figures(verification))
