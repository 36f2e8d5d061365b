"""The per-tap panels of a verification's figures: each statistic drawn from its check's own numbers.

One function per statistic (:data:`STATISTICS`), each drawing up to four taps
on one set of axes for :mod:`emucompile.report.figures`: the envelope CDF, the
autocorrelation, the Doppler spectrum, the level crossing rate and a stretch of
the envelope. Every measured curve comes from the estimator its check uses,
with the same parameters (:func:`emucompile.verify.tolerance.autocorrelation_curve`,
``psd_curve``, ``crossing_rates``, :func:`emucompile.verify.estimators.envelope_cdf`),
and every shaded band or error bar is the check's printed tolerance.
"""

from __future__ import annotations

import math

import numpy as np
from matplotlib.ticker import FuncFormatter, LogLocator, NullLocator
from scipy import signal

from emucompile.models import theory
from emucompile.verify import estimators, tolerance

MEASURED_STYLE = {"linewidth": 3.2, "alpha": 0.4, "solid_capstyle": "butt"}
THEORY_STYLE = {"linestyle": "--", "linewidth": 1.2}
_ENVELOPE_OFFSET_DB = 60.0  # between stacked envelope traces
_MAX_STRETCH_RECORD = 1 << 17  # record samples (before upsampling) for the envelope stretch
STRETCH_PERIODS = 20.0  # envelope stretch and |H(f, t)|: 20 / f_D
_LCR_OVERSAMPLE_HZ = 32.0  # upsample so the record rate is >= 32 x the largest Doppler


class TapData:
    """One tap's record and model, with the derived quantities the panels share."""

    def __init__(self, key, label, record, rate_hz, model, periodic=False, checks=None):
        self.key = key
        self.label = label
        self.rate_hz = float(rate_hz)
        self.x = np.asarray(record)  # the whole record, as the checks read it (passes over it work in blocks)
        self.model = model
        self.periodic = bool(periodic)
        self.checks = dict(checks or {})  # check name -> the check's result on this record
        self.spectrum = model.spectrum
        self.k = float(model.k_linear or 0.0)
        self.los_hz = float(model.los_doppler_hz or 0.0)
        self.mean_power = float(model.mean_power)
        self.rms = math.sqrt(self.mean_power)
        self.edge_hz = max(self.spectrum.band_edge_hz, abs(self.los_hz))

    def fine(self, duration_s):
        """The first ``duration_s`` of g / R_rms (at most :data:`_MAX_STRETCH_RECORD` record samples),
        upsampled (band-limited), and their rate; only what is drawn is made."""
        factor = max(1, min(8, math.ceil(_LCR_OVERSAMPLE_HZ * self.edge_hz / self.rate_hz)))
        # past the stretch, the interpolator's reach (resample_poly: 10 input samples each side) and some
        count = min(_MAX_STRETCH_RECORD, int(math.ceil(duration_s * self.rate_hz)) + 64)
        x = self.x[:count].astype(np.complex128)
        if factor > 1:
            x = signal.resample_poly(x, factor, 1)
        return x / self.rms, self.rate_hz * factor


def _draw_cdf(ax, taps, colors):
    levels_db = np.linspace(-40.0, 12.0, 261)
    floor, low = 1e-5, -40.0
    for tap, color in zip(taps, colors):
        # P(|g| <= r) as envelope_ks measures it (a sample exactly at a level is below it, by the right limit)
        measured = estimators.envelope_cdf(tap.x, np.nextafter(10.0 ** (levels_db / 20.0) * tap.rms, np.inf))
        expected = theory.envelope_distribution(tap.k, 1.0).cdf(10.0 ** (levels_db / 20.0))
        floor = max(floor, 1.0 / len(tap.x))
        shown = measured > 0
        ax.plot(levels_db[shown], measured[shown], color=color, **MEASURED_STYLE, label=tap.label)
        ax.plot(levels_db, np.maximum(expected, 1e-12), color=color, **THEORY_STYLE)
        band = _tolerance_of(tap, "envelope_ks")
        if band is not None:
            ax.fill_between(levels_db, np.maximum(expected - band, 1e-12), np.minimum(expected + band, 1.0),
                            color=color, alpha=0.12, linewidth=0)
        if np.any(expected > floor):
            low = max(low, levels_db[np.argmax(expected > floor)] - 3.0)
    ax.set_yscale("log")
    ax.set_ylim(floor, 1.5)
    log_axis(ax)
    low = min(low, -10.0)
    ax.set_xlim(low, 10.0)
    ax.set_xticks(np.arange(math.ceil(low / 10.0) * 10.0, 10.1, 10.0))
    ax.set_xlabel("level r (dB re RMS)")
    ax.set_ylabel("P(R < r)")
    return "lower right"


def draw_autocorrelation(ax, taps, colors):
    end_ms = 0.0
    for tap, color in zip(taps, colors):
        curve = tolerance.autocorrelation_curve(tap.x, tap.rate_hz, tap.model, periodic=tap.periodic)
        lag_s = curve["lag_s"]
        if not lag_s.size:
            continue
        fine_s = np.linspace(0.0, lag_s[-1], 400)
        ax.plot(lag_s * 1e3, curve["measured"].real, color=color, **MEASURED_STYLE, label=tap.label)
        ax.plot(fine_s * 1e3, tap.spectrum.autocorrelation(fine_s).real, color=color, **THEORY_STYLE)
        check = tap.checks.get("autocorrelation")
        worst_sd = ((check.detail or {}).get("worst_part_sd") if check is not None else None)
        if check is not None and check.tolerance is not None and worst_sd:
            band = check.tolerance / worst_sd * curve["sd_real"]  # the critical score x each lag's spread
            ax.fill_between(lag_s * 1e3, curve["expected"].real - band, curve["expected"].real + band,
                            color=color, alpha=0.12, linewidth=0)
        end_ms = max(end_ms, lag_s[-1] * 1e3)
    ax.axhline(0.0, color="0.6", linewidth=0.8)
    ax.set_xlim(0.0, end_ms or 1.0)
    ax.set_ylim(-1.05, 1.05)
    ax.set_yticks([-1.0, -0.5, 0.0, 0.5, 1.0])
    ax.set_xlabel("lag \u03c4 (ms)")
    ax.set_ylabel("Re r(\u03c4), diffuse part")
    return "upper right"


def draw_psd(ax, taps, colors):
    top, span = -np.inf, 0.0
    for tap, color in zip(taps, colors):
        curve = tolerance.psd_curve(tap.x, tap.rate_hz, tap.model)
        edge = tap.spectrum.band_edge_hz
        if tap.k > 0:
            ax.axvline(tap.los_hz, color=color, linewidth=1.4, linestyle=":")
            ax.annotate("direct part (removed)\n%.0f %% of power" % (100.0 * tap.k / (tap.k + 1.0)),
                        (tap.los_hz, 0.97), xycoords=("data", "axes fraction"), xytext=(3, 0),
                        textcoords="offset points", va="top", fontsize=7, color=color)
        order = np.argsort(curve["frequency_hz"])
        f = curve["frequency_hz"][order]
        measured_db = 10.0 * np.log10(np.maximum(curve["measured"][order], 1e-30))
        expected = curve["expected"][order]
        expected_db = 10.0 * np.log10(np.maximum(expected, 1e-30))
        ax.plot(f, measured_db, color=color, **MEASURED_STYLE, label=tap.label)
        ax.plot(f, expected_db, color=color, **THEORY_STYLE)
        check = tap.checks.get("doppler_psd")
        if check is not None and check.tolerance is not None and curve["enough"]:
            # the check passes a bin while |cbrt(ratio) - (1 - 1/(9 nu))| sqrt(9 nu) <= its tolerance
            nu, judged = curve["nu"], curve["judged"][order]
            centre, half = 1.0 - 1.0 / (9.0 * nu), check.tolerance / math.sqrt(9.0 * nu)
            low = expected * np.maximum(centre - half, 1e-3) ** 3
            high = expected * (centre + half) ** 3
            ax.fill_between(f, 10.0 * np.log10(np.maximum(low, 1e-30)), 10.0 * np.log10(np.maximum(high, 1e-30)),
                            where=judged, color=color, alpha=0.12, linewidth=0)
        top = max(top, np.percentile(measured_db, 99.5) + 8.0, np.median(expected_db[expected_db > -290]) + 8.0)
        span = max(span, min(f[-1], max(2.5 * edge, 1.5 * abs(tap.los_hz))))
    if not math.isfinite(top):
        top = 0.0
    ax.set_ylim(top - 60.0, top)
    ax.set_xlim(-(span or 1.0), span or 1.0)
    ax.set_xlabel("Doppler frequency (Hz)")
    ax.set_ylabel("PSD (dB re diffuse power / Hz)")
    return "lower center"


def _draw_level_crossings(ax, taps, colors):
    levels_db = np.linspace(-30.0, 10.0, 161)
    rho = 10.0 ** (levels_db / 20.0)
    floor, peak = 0.0, 0.0
    for tap, color in zip(taps, colors):
        measured, duration_s = tolerance.crossing_rates(tap.x, tap.rate_hz, tap.model, rho, periodic=tap.periodic)
        expected = theory.level_crossing_rate(rho, rms_doppler_hz=tap.spectrum.rms_doppler_hz,
                                              k_linear=tap.k, los_doppler_hz=tap.los_hz)
        floor = max(floor, 1.0 / duration_s)
        shown = measured > 0
        ax.plot(levels_db[shown], measured[shown], color=color, **MEASURED_STYLE, label=tap.label)
        ax.plot(levels_db, np.maximum(expected, 1e-12), color=color, **THEORY_STYLE)
        _crossing_check_marks(ax, tap.checks.get("level_crossing_rate"), color)
        peak = max(peak, np.max(expected), np.max(measured))
    ax.set_yscale("log")
    ax.set_ylim(floor, 3.0 * peak)
    log_axis(ax)
    ax.set_xlim(levels_db[0], levels_db[-1])
    ax.set_xticks(np.arange(-30.0, 10.1, 10.0))
    ax.set_xlabel("level r (dB re RMS)")
    ax.set_ylabel("upward crossings per second")
    return "lower center"


def _crossing_check_marks(ax, check, color):
    """The check's own levels, counts and tolerance: its measured rates as dots with the tolerance as bars.

    The tolerance applies to the level the check judged worst; at the other
    level it scales with the Poisson spread sqrt(expected count).
    """
    detail = getattr(check, "detail", None) or {}
    if check is None or check.tolerance is None or not detail.get("levels_rho"):
        return
    rho = np.asarray(detail["levels_rho"], dtype=float)
    measured = np.asarray(detail["measured_per_s"], dtype=float)
    expected = np.asarray(detail["expected_per_s"], dtype=float)
    bars = check.tolerance * np.sqrt(expected / check.expected) if check.expected else np.zeros_like(expected)
    ax.errorbar(20.0 * np.log10(rho), measured, yerr=bars, fmt="o", color=color, markersize=4, capsize=3,
                linewidth=1.0)


def _tolerance_of(tap, name):
    check = tap.checks.get(name)
    return None if check is None else check.tolerance


def first_source_checks(checks):
    """{tap: {check name: result}} of the stored gains' first link (the checks of the records drawn)."""
    out = {}
    for check in checks:
        name = getattr(check, "name", "") or ""
        if name.startswith("delivered "):
            continue
        base, _, link = name.partition(" [")
        if link and not link.startswith("rx0-tx0"):
            continue
        tap = getattr(check, "tap", None)
        if isinstance(tap, (int, np.integer)):
            out.setdefault(int(tap), {})[base] = check
    return out


def draw_envelope(ax, taps, colors):
    """The taps' envelopes stacked, each trace offset so its 0 dB sits on its own line."""
    fastest = max(tap.edge_hz for tap in taps)
    stretches = []
    for tap in taps:
        gains, fine_rate = tap.fine(STRETCH_PERIODS / fastest)
        n = min(len(gains), max(2, int(STRETCH_PERIODS / fastest * fine_rate)))
        stretches.append((gains[:n], fine_rate))
    end_s = min((len(g) - 1) / rate for g, rate in stretches)
    scale, unit = time_unit(end_s)
    ticks, labels = [], []
    for j, ((gains, fine_rate), tap, color) in enumerate(zip(stretches, taps, colors)):
        offset = -_ENVELOPE_OFFSET_DB * j
        level_db = np.clip(20.0 * np.log10(np.maximum(np.abs(gains), 1e-6)), -40.0, 12.0)
        ax.plot(np.arange(len(gains)) * (scale / fine_rate), level_db + offset, color=color,
                linewidth=0.9, label=tap.label)
        ax.axhline(offset, color="0.6", linewidth=0.7)
        ticks += [offset, offset - 20.0]
        labels += ["0", "\u221220"]
    ax.set_xlim(0.0, end_s * scale)
    ax.set_ylim(-_ENVELOPE_OFFSET_DB * (len(taps) - 1) - 42.0, 14.0)
    ax.set_yticks(ticks, labels, fontsize=7)
    ax.set_xlabel(f"time ({unit})")
    ax.set_ylabel("|g| (dB re RMS), one trace per tap")
    return None


STATISTICS = (
    ("Envelope CDF", _draw_cdf),
    ("Autocorrelation", draw_autocorrelation),
    ("Doppler spectrum", draw_psd),
    ("Level crossing rate", _draw_level_crossings),
    ("Envelope over time", draw_envelope),
)


def log_axis(ax):
    """Decade ticks labelled as plain numbers (1e-3), no minor ticks.

    The default minor ticks (eight per decade, each an artist) and mathtext
    labels were most of a log panel's rendering time.
    """
    ax.yaxis.set_major_locator(LogLocator(base=10.0, numticks=12))
    ax.yaxis.set_major_formatter(FuncFormatter(lambda value, _: f"{value:.0e}".replace("e+00", "").replace("e-0", "e-")
                                               .replace("e+0", "e")))
    ax.yaxis.set_minor_locator(NullLocator())


def time_unit(span_s):
    if span_s < 2e-3:
        return 1e6, "\u00b5s"
    if span_s < 2.0:
        return 1e3, "ms"
    return 1.0, "s"
