"""Figures of a verification: the measured statistics of each tap beside their theory.

:func:`make_figures` turns a verification result (see :mod:`emucompile.verify.run`)
into PNG images, each a ``(title, bytes)`` pair, for the HTML report
(:mod:`emucompile.report.html`). Only ``matplotlib.figure.Figure`` with the Agg
canvas is used: no pyplot, no global state, no display needed, safe in threads.

What is drawn (each tap in its own colour: measured as a wide pale line,
theory dashed on it in the same colour; up to :data:`TAPS_PER_AXES` taps per
panel, one figure per statistic):

* the power delay profile: the profile's tap powers as stems, the measured
  mean power of each record as crosses;
* per tap, the envelope CDF P(R < r) on a logarithmic probability axis against
  ``theory.envelope_distribution`` (``scipy.stats.rice`` / ``rayleigh``);
* the real part of the normalised autocorrelation against
  Re (K exp(j 2 pi f_los tau) + r(tau)) / (K + 1), r the spectrum's closed form;
* the Doppler power spectrum (``scipy.signal.welch``, two-sided) against the
  diffuse part's spectrum, the direct part drawn as a line at f_los;
* the level crossing rate against Rice's formula (``theory.level_crossing_rate``);
* a stretch of the envelope in dB re RMS, the panel's taps stacked, each on its own 0 dB line;
* with a FIR map, |H(f, t)| across the band, H(f, t) = sum_n FIR_n(t)
  exp(-j 2 pi f n / f_s), FIR(t) = gains(t) @ fir_map.

A 12-tap profile gives 7 images of 17 panels (one per tap per statistic was
60 panels; each costs about 0.1 s, mostly ticks and text). Static taps (no
Doppler spectrum) appear in the delay profile and |H(f, t)| only.

Levels are in dB relative to the RMS envelope the *profile* promises
(sqrt of the tap's expected mean power), so a tap with the wrong power shows
as a shifted curve rather than being normalised away.
"""

from __future__ import annotations

import io
import math

import numpy as np
from matplotlib import colormaps
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.transforms import ScaledTranslation
from matplotlib.ticker import FuncFormatter, LogLocator, NullLocator
from scipy import signal

from emucompile.models import theory

TAPS_PER_AXES = 4
TAPS_PER_FIGURE = 4 * TAPS_PER_AXES * 3  # 3 columns x 4 rows of panels at most
DPI = 100
MEASURED_COLOR = "#1f77b4"
# One colour per tap of a panel (matplotlib's tab10 blue, red, green, purple): distinct in print too.
TAP_COLORS = ("#1f77b4", "#d62728", "#2ca02c", "#9467bd")
MEASURED_STYLE = {"linewidth": 3.2, "alpha": 0.4, "solid_capstyle": "butt"}
THEORY_STYLE = {"linestyle": "--", "linewidth": 1.2}

_COLUMNS = 3
_PANEL_SIZE_IN = (4.6, 4.2)  # one panel with its legend of up to four taps below
_LEGEND_IN = 1.35  # room below each panel for the x label and the tap legend
_ENVELOPE_OFFSET_DB = 60.0  # between stacked envelope traces
_MAX_RECORD = 1 << 20  # samples per tap used for the CDF, autocorrelation and PSD
_MAX_LCR_RECORD = 1 << 17  # record samples (before upsampling) for the crossing count
_STRETCH_PERIODS = 20.0  # envelope stretch and |H(f, t)|: 20 / f_D
_LCR_OVERSAMPLE_HZ = 32.0  # upsample so the record rate is >= 32 x the largest Doppler


def make_figures(verification) -> list[tuple[str, bytes]]:
    """PNG figures of a verification result, in reading order.

    Parameters
    ----------
    verification : object
        A verification result (:class:`emucompile.verify.run.Verification` or
        anything with the same attributes): ``profile``, ``records`` (tap ->
        complex 1-D array at ``record_rate_hz``), ``record_rate_hz``,
        ``models`` (tap -> object with ``spectrum``, ``mean_power``,
        ``k_linear``, ``los_doppler_hz``), ``fir_map`` (ndarray (n_taps,
        n_fir) or None) and ``sample_rate_hz``.
    Returns
    -------
    list of (str, bytes)
        Title and PNG bytes of each figure (DPI :data:`DPI`).

    Notes
    -----
    Cost: one FFT of at most 2^21 points per tap (autocorrelation), a Welch
    estimate, a histogram, and a polyphase upsampling of at most 2^17 samples
    for the crossing count; making the axes and rendering their text
    dominate (about 0.1 s per panel, 5 panels per 4 taps), see
    ``benchmarks/bench_plots.py``.
    """
    profile = verification.profile
    records = dict(getattr(verification, "records", None) or {})
    models = dict(getattr(verification, "models", None) or {})
    rate = getattr(verification, "record_rate_hz", None)
    tasks = [("Power delay profile", lambda: _delay_profile_figure(profile, records))]

    fading = [key for key in records if _spectrum(models.get(key)) is not None and rate]
    panels = [_TapData(key, _tap_label(key, profile), records[key], rate, models[key]) for key in fading]
    for start in range(0, len(panels), TAPS_PER_FIGURE):
        group = panels[start : start + TAPS_PER_FIGURE]
        suffix = _group_suffix(group, len(panels))
        for title, draw in _STATISTICS:
            tasks.append((f"{title}{suffix}",
                          lambda group=group, draw=draw, title=title + suffix: _grid_figure(group, draw, title)))

    fir = getattr(verification, "fir_map", None)
    if fir is not None and records and rate:
        tasks.append(("Channel magnitude |H(f, t)| across the band",
                      lambda: _transfer_figure(profile, records, rate, np.asarray(fir),
                                               getattr(verification, "sample_rate_hz", None), models)))
    fit = getattr(verification, "fit", None)
    if fit and fir is not None and getattr(verification, "fir_delays_s", None) is not None:
        tasks.append(("Emulator fit: the profile's taps and the fitted paths",
                      lambda: _fit_figure(profile, fit, np.asarray(fir), np.asarray(verification.fir_delays_s))))
    mimo = getattr(verification, "mimo", None)
    if mimo and mimo.get("taps"):
        tasks.append((f"MIMO correlation: expected and achieved, {len(mimo['links'])} links",
                      lambda: _mimo_figure(mimo)))
    conditions = getattr(verification, "conditions", None)
    if conditions:
        tasks.append(("Time-varying conditions over the record", lambda: _conditions_figure(conditions)))
    pngs = [_render(make) for _, make in tasks]
    return [(title, png) for (title, _), png in zip(tasks, pngs) if png is not None]


def _render(make):
    """PNG bytes of one figure maker's figure, or None when it has nothing to draw.

    One process, one thread: matplotlib's Python-side work (axes, ticks, text
    layout) holds the GIL, so threads do not overlap it, and a forked second
    process measured 1.1-1.4 x slower inside a loaded ``verify``.
    """
    figure = make()
    return None if figure is None else _png(figure)


# -- per-tap data ------------------------------------------------------------------


class _TapData:
    """One tap's record and model, with the derived quantities the panels share."""

    def __init__(self, key, label, record, rate_hz, model):
        self.key = key
        self.label = label
        self.rate_hz = float(rate_hz)
        x = np.asarray(record)[:_MAX_RECORD]
        self.x = x.astype(np.complex128, copy=False)
        self.spectrum = model.spectrum
        self.k = float(model.k_linear or 0.0)
        self.los_hz = float(model.los_doppler_hz or 0.0)
        self.mean_power = float(model.mean_power)
        self.rms = math.sqrt(self.mean_power)
        self.edge_hz = max(self.spectrum.band_edge_hz, abs(self.los_hz))
        self._fine = None

    def fine(self):
        """The first samples of g / R_rms, upsampled (band-limited), and their rate."""
        if self._fine is None:
            factor = max(1, min(8, math.ceil(_LCR_OVERSAMPLE_HZ * self.edge_hz / self.rate_hz)))
            x = self.x[:_MAX_LCR_RECORD]
            if factor > 1:
                x = signal.resample_poly(x, factor, 1)
            self._fine = (x / self.rms, self.rate_hz * factor)
        return self._fine


def _draw_cdf(ax, taps, colors):
    levels_db = np.linspace(-40.0, 12.0, 261)
    floor, low = 1e-5, -40.0
    for tap, color in zip(taps, colors):
        envelope_db = 20.0 * np.log10(np.maximum(np.abs(tap.x) / tap.rms, 1e-30))
        counts, _ = np.histogram(envelope_db, bins=np.concatenate(([-np.inf], levels_db)))
        measured = np.cumsum(counts) / len(envelope_db)
        expected = theory.envelope_distribution(tap.k, 1.0).cdf(10.0 ** (levels_db / 20.0))
        floor = max(floor, 1.0 / len(envelope_db))
        shown = measured > 0
        ax.plot(levels_db[shown], measured[shown], color=color, **MEASURED_STYLE, label=tap.label)
        ax.plot(levels_db, np.maximum(expected, 1e-12), color=color, **THEORY_STYLE)
        if np.any(expected > floor):
            low = max(low, levels_db[np.argmax(expected > floor)] - 3.0)
    ax.set_yscale("log")
    ax.set_ylim(floor, 1.5)
    _log_axis(ax)
    low = min(low, -10.0)
    ax.set_xlim(low, 10.0)
    ax.set_xticks(np.arange(math.ceil(low / 10.0) * 10.0, 10.1, 10.0))
    ax.set_xlabel("level r (dB re RMS)")
    ax.set_ylabel("P(R < r)")
    return "lower right"


def _draw_autocorrelation(ax, taps, colors):
    end_ms = 0.0
    for tap, color in zip(taps, colors):
        max_lag = max(1, min(len(tap.x) // 4, int(round(4.0 / tap.spectrum.band_edge_hz * tap.rate_hz))))
        measured = _autocorrelation(tap.x, max_lag)
        lag_s = np.arange(max_lag + 1) / tap.rate_hz
        fine_s = np.linspace(0.0, lag_s[-1], 400)
        expected = (tap.k * np.cos(2.0 * np.pi * tap.los_hz * fine_s)
                    + tap.spectrum.autocorrelation(fine_s).real) / (tap.k + 1.0)
        ax.plot(lag_s * 1e3, measured.real, color=color, **MEASURED_STYLE, label=tap.label)
        ax.plot(fine_s * 1e3, expected, color=color, **THEORY_STYLE)
        end_ms = max(end_ms, lag_s[-1] * 1e3)
    ax.axhline(0.0, color="0.6", linewidth=0.8)
    ax.set_xlim(0.0, end_ms)
    ax.set_ylim(-1.05, 1.05)
    ax.set_yticks([-1.0, -0.5, 0.0, 0.5, 1.0])
    ax.set_xlabel("lag \u03c4 (ms)")
    ax.set_ylabel("Re R(\u03c4) / R(0)")
    return "upper right"


def _draw_psd(ax, taps, colors):
    top, span = -np.inf, 0.0
    for tap, color in zip(taps, colors):
        resolution_hz = tap.spectrum.band_edge_hz / 32.0
        nperseg = int(min(len(tap.x), 2 ** math.ceil(math.log2(tap.rate_hz / resolution_hz))))
        f, s = signal.welch(tap.x, fs=tap.rate_hz, window="hann", nperseg=nperseg,
                            return_onesided=False, detrend=False, scaling="density")
        order = np.argsort(f)
        f, s = f[order], s[order] / tap.mean_power
        measured_db = 10.0 * np.log10(np.maximum(s, 1e-30))
        edge = tap.spectrum.band_edge_hz
        inside = np.linspace(-edge, edge, 401)[1:-1]
        expected_db = 10.0 * np.log10(np.maximum(tap.spectrum.psd(inside) / (tap.k + 1.0), 1e-30))
        ax.plot(f, measured_db, color=color, **MEASURED_STYLE, label=tap.label)
        ax.plot(inside, expected_db, color=color, **THEORY_STYLE)
        if tap.k > 0:
            ax.axvline(tap.los_hz, color=color, linewidth=1.4, linestyle=":")
            ax.annotate("direct part\n%.0f %% of power" % (100.0 * tap.k / (tap.k + 1.0)),
                        (tap.los_hz, 0.97), xycoords=("data", "axes fraction"), xytext=(3, 0),
                        textcoords="offset points", va="top", fontsize=7, color=color)
        top = max(top, np.percentile(measured_db, 99.5) + 8.0, np.median(expected_db) + 8.0)
        span = max(span, min(f[-1], max(2.5 * edge, 1.5 * abs(tap.los_hz))))
    ax.set_ylim(top - 60.0, top)
    ax.set_xlim(-span, span)
    ax.set_xlabel("Doppler frequency (Hz)")
    ax.set_ylabel("PSD (dB re tap power / Hz)")
    return "lower center"


def _draw_level_crossings(ax, taps, colors):
    levels_db = np.linspace(-30.0, 10.0, 161)
    rho = 10.0 ** (levels_db / 20.0)
    floor, peak = 0.0, 0.0
    for tap, color in zip(taps, colors):
        gains, fine_rate = tap.fine()
        duration_s = len(gains) / fine_rate
        measured = _upward_crossings(gains, rho) / duration_s
        expected = theory.level_crossing_rate(rho, rms_doppler_hz=tap.spectrum.rms_doppler_hz,
                                              k_linear=tap.k, los_doppler_hz=tap.los_hz)
        floor = max(floor, 1.0 / duration_s)
        shown = measured > 0
        ax.plot(levels_db[shown], measured[shown], color=color, **MEASURED_STYLE, label=tap.label)
        ax.plot(levels_db, np.maximum(expected, 1e-12), color=color, **THEORY_STYLE)
        peak = max(peak, np.max(expected), np.max(measured))
    ax.set_yscale("log")
    ax.set_ylim(floor, 3.0 * peak)
    _log_axis(ax)
    ax.set_xlim(levels_db[0], levels_db[-1])
    ax.set_xticks(np.arange(-30.0, 10.1, 10.0))
    ax.set_xlabel("level r (dB re RMS)")
    ax.set_ylabel("upward crossings per second")
    return "lower center"


def _draw_envelope(ax, taps, colors):
    """The taps' envelopes stacked, each trace offset so its 0 dB sits on its own line."""
    fastest = max(tap.edge_hz for tap in taps)
    stretches = []
    for tap in taps:
        gains, fine_rate = tap.fine()
        n = min(len(gains), max(2, int(_STRETCH_PERIODS / fastest * fine_rate)))
        stretches.append((gains[:n], fine_rate))
    end_s = min((len(g) - 1) / rate for g, rate in stretches)
    scale, unit = _time_unit(end_s)
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


_STATISTICS = (
    ("Envelope CDF", _draw_cdf),
    ("Autocorrelation", _draw_autocorrelation),
    ("Doppler spectrum", _draw_psd),
    ("Level crossing rate", _draw_level_crossings),
    ("Envelope over time", _draw_envelope),
)


# -- figures -----------------------------------------------------------------------


def _split(taps):
    """Taps into panels of at most :data:`TAPS_PER_AXES`, as even as the count allows."""
    n_axes = max(1, math.ceil(len(taps) / TAPS_PER_AXES))
    size = math.ceil(len(taps) / n_axes)
    return [taps[i : i + size] for i in range(0, len(taps), size)]


def _grid_figure(group, draw, title):
    """One statistic for a group of taps: up to :data:`TAPS_PER_AXES` taps per panel."""
    panels = _split(group)
    columns = min(_COLUMNS, len(panels))
    rows = math.ceil(len(panels) / columns)
    width_in = _PANEL_SIZE_IN[0] * columns + 0.6
    header_in = 0.75 if columns > 1 else 1.0  # one column: the key goes on a line of its own
    height_in = _PANEL_SIZE_IN[1] * rows + header_in
    figure = Figure(figsize=(width_in, height_in), dpi=DPI)
    figure.text(0.5 / width_in, 1.0 - 0.3 / height_in, title, fontsize=13, fontweight="bold", va="center")
    key = ("measured: wide pale line; theory: dashed, in the tap's colour" if draw is not _draw_envelope
           else "each tap's trace on its own 0 dB line")
    if columns > 1:
        figure.text(1.0 - 0.2 / width_in, 1.0 - 0.3 / height_in, key, fontsize=9, ha="right", va="center",
                    color="0.3")
    else:  # one panel is too narrow for the title and the key on one line: the key goes below the title
        figure.text(0.5 / width_in, 1.0 - 0.55 / height_in, key, fontsize=8, ha="left", va="center", color="0.3")
    # Fixed margins in inches (tight_layout measures every label: slow and not needed).
    figure.subplots_adjust(left=0.8 / width_in, right=1.0 - 0.2 / width_in,
                           bottom=_LEGEND_IN / height_in, top=1.0 - header_in / height_in,
                           wspace=0.35 / (_PANEL_SIZE_IN[0] - 1.0),
                           hspace=(_LEGEND_IN + 0.3) / (_PANEL_SIZE_IN[1] - _LEGEND_IN - 0.3))
    for i, taps in enumerate(panels):
        ax = figure.add_subplot(rows, columns, i + 1)
        ax.set_autoscale_on(False)  # every panel sets its limits; autoscaling each curve costs
        colors = TAP_COLORS[: len(taps)]
        draw(ax, taps, colors)
        # An explicit y turns off matplotlib's automatic title placement (a costly measurement).
        ax.set_title(_panel_title(taps), fontsize=10, y=1.0, pad=4.0)
        if ax.get_yscale() == "linear" and draw is not _draw_envelope:
            ax.locator_params(axis="y", nbins=6)
        if draw in (_draw_psd, _draw_autocorrelation, _draw_envelope):
            ax.locator_params(axis="x", nbins=6)
        ax.grid(True, which="major", color="0.88", linewidth=0.7)
        _tap_key(figure, ax, taps, colors)
    # One y range per figure, labelled in the first column only: panels compare at a glance,
    # and the labels not drawn (text is most of the rendering time) are not paid for.
    low = min(ax.get_ylim()[0] for ax in figure.axes)
    high = max(ax.get_ylim()[1] for ax in figure.axes)
    for i, ax in enumerate(figure.axes):
        ax.set_ylim(low, high)
        if i % columns:
            ax.tick_params(labelleft=False)
            ax.set_ylabel("")
    return figure


def _tap_key(figure, ax, taps, colors):
    """The panel's taps named below it, each in its colour after a short bar of it.

    Plain text lines rather than ``ax.legend``: a legend's box layout cost as
    much as the rest of the panel, and below the axes no curve is hidden.
    """
    for j, (tap, color) in enumerate(zip(taps, colors)):
        shift = ScaledTranslation(0.0, -(0.55 + 0.17 * j), figure.dpi_scale_trans)
        ax.text(0.02, 0.0, "\u2501\u2501 " + tap.label, transform=ax.transAxes + shift, fontsize=8,
                color=color, va="top", ha="left")


def _delay_profile_figure(profile, records):
    delays = np.array([t.delay_s for t in profile.taps], dtype=float)
    powers_db = np.array([10.0 * math.log10(t.power_linear) for t in profile.taps])
    scale, unit = (1e9, "ns") if np.max(delays, initial=0.0) < 2e-6 else (1e6, "\u00b5s")
    figure = Figure(figsize=(8.0, 3.8), dpi=DPI)
    ax = figure.add_subplot(1, 1, 1)
    bottom = math.floor((powers_db.min() - 10.0) / 5.0) * 5.0
    markers, stems, base = ax.stem(delays * scale, powers_db, bottom=bottom, label="profile")
    stems.set_color(MEASURED_COLOR)
    markers.set_color(MEASURED_COLOR)
    base.set_color("0.6")
    measured = []
    for key, record in records.items():
        index = _tap_index(key)
        if index is not None and index < len(delays) and len(record):
            power = float(np.mean(np.abs(np.asarray(record, dtype=np.complex128)) ** 2))
            if power > 0:
                measured.append((delays[index] * scale, 10.0 * math.log10(power)))
    if measured:
        x, y = zip(*measured)
        ax.plot(x, y, "x", color="#d62728", markersize=9, markeredgewidth=2, label="measured mean power")
    span = max(np.ptp(delays * scale), 1.0)
    level, previous = 0, None
    for i, (d, p) in enumerate(zip(delays * scale, powers_db)):
        # labels of taps closer than 3 % of the axis are stacked, so they never overlap
        level = level + 1 if previous is not None and d - previous < 0.03 * span else 0
        previous = d
        ax.annotate(str(i), (d, p), textcoords="offset points", xytext=(0, 7 + 10 * level), ha="center", fontsize=8)
    ax.set_xlim(delays.min() * scale - 0.05 * span, delays.max() * scale + 0.05 * span)
    ax.set_ylim(bottom, max(powers_db.max(), max((m[1] for m in measured), default=-np.inf)) + 4.0)
    ax.set_xlabel(f"excess delay ({unit})")
    ax.set_ylabel("mean tap power (dB)")
    ax.set_title(f"Power delay profile: {profile.name} ({profile.n_taps} taps)", fontsize=12)
    ax.grid(True, color="0.88", linewidth=0.7)
    ax.legend(fontsize=9, loc="upper right")  # powers fall with delay: the top right is free
    figure.subplots_adjust(left=0.9 / 8.0, right=1.0 - 0.2 / 8.0, bottom=0.6 / 3.8, top=1.0 - 0.4 / 3.8)
    return figure


def _transfer_figure(profile, records, rate_hz, fir, sample_rate_hz, models):
    """|H(f, t)| over a stretch of ~20 / f_D, or None without the rows it needs."""
    n_taps, n_fir = fir.shape
    columns = {}
    for key, record in records.items():
        index = _tap_index(key)
        if index is not None and index < n_taps and index not in columns:
            columns[index] = np.asarray(record)
    if not columns or not sample_rate_hz:
        return None
    edges = [max(m.spectrum.band_edge_hz if m.spectrum is not None else 0.0, abs(m.los_doppler_hz or 0.0))
             for m in models.values() if m is not None]
    edge = max(edges, default=0.0)
    length = min(len(c) for c in columns.values())
    n = length if edge <= 0 else min(length, max(2, int(_STRETCH_PERIODS / edge * rate_hz)))
    stride = max(1, n // 300)
    gains = np.zeros((len(range(0, n, stride)), n_taps), np.complex128)
    for index, record in columns.items():
        gains[:, index] = record[:n:stride]
    coefficients = gains @ fir
    n_fft = max(256, 1 << math.ceil(math.log2(max(n_fir, 1))))
    spectrum = np.fft.fftshift(np.fft.fft(coefficients, n_fft, axis=1), axes=1)
    magnitude_db = 20.0 * np.log10(np.maximum(np.abs(spectrum), 1e-12))
    top = float(np.max(magnitude_db))
    frequency_mhz = np.fft.fftshift(np.fft.fftfreq(n_fft, 1.0 / sample_rate_hz)) / 1e6
    t_s = np.arange(0, n, stride) / rate_hz
    scale, unit = _time_unit(max(t_s[-1], 1.0 / rate_hz))
    figure = Figure(figsize=(10.0, 4.6), dpi=DPI)
    figure.subplots_adjust(left=0.9 / 10.0, right=1.0 - 1.2 / 10.0, bottom=0.6 / 4.6, top=1.0 - 0.4 / 4.6)
    ax = figure.add_subplot(1, 1, 1)
    # 2 dB colour steps without interpolation: readable as contours, and the PNG stays small.
    palette = colormaps["viridis"].resampled(20)
    image = ax.imshow(magnitude_db.T, origin="lower", aspect="auto", cmap=palette, interpolation="nearest",
                      vmin=top - 40.0, vmax=top,
                      extent=(t_s[0] * scale, t_s[-1] * scale, frequency_mhz[0], frequency_mhz[-1]))
    colorbar = figure.colorbar(image, cax=figure.add_axes((1.0 - 1.05 / 10.0, 0.6 / 4.6, 0.2 / 10.0, 1.0 - 1.0 / 4.6)))
    colorbar.set_label("|H(f, t)| (dB)")
    ax.set_xlabel(f"time ({unit})")
    ax.set_ylabel("frequency offset in the band (MHz)")
    missing = n_taps - len(columns)
    note = f"; {missing} tap(s) without a record left out" if missing else ""
    ax.set_title(f"|H(f, t)| at {sample_rate_hz / 1e6:.6g} MHz sampling, {n_fir} FIR coefficients{note}",
                 fontsize=11)
    return figure


def _fit_figure(profile, fit, fir, coefficient_delays_s):
    """The profile's taps (dropped ones marked) beside the fitted grid's paths (coefficient powers)."""
    delays = np.array([t.delay_s for t in profile.taps], dtype=float)
    powers = np.array([t.power_linear for t in profile.taps], dtype=float)
    path_powers = powers @ (fir * fir)
    used = path_powers > 0
    scale, unit = (1e9, "ns") if max(delays.max(initial=0.0), coefficient_delays_s.max(initial=0.0)) < 2e-6 \
        else (1e6, "\u00b5s")
    figure = Figure(figsize=(8.0, 3.8), dpi=DPI, layout="constrained")
    ax = figure.add_subplot(1, 1, 1)
    profile_db = 10.0 * np.log10(powers)
    path_db = 10.0 * np.log10(path_powers[used])
    bottom = math.floor((min(profile_db.min(), path_db.min(initial=0.0)) - 8.0) / 5.0) * 5.0
    dropped = np.zeros(len(delays), bool)
    dropped[list(fit.get("taps_dropped") or ())] = True
    ax.vlines(delays[~dropped] * scale, bottom, profile_db[~dropped], color="0.55", linewidth=1.0)
    ax.plot(delays[~dropped] * scale, profile_db[~dropped], "o", color="0.55", markersize=4, label="profile tap")
    if dropped.any():
        ax.plot(delays[dropped] * scale, profile_db[dropped], "x", color="#d62728", markersize=8,
                markeredgewidth=2, label="profile tap dropped by the fit")
    ax.plot(coefficient_delays_s[used] * scale, path_db, "s", markerfacecolor="none", color=MEASURED_COLOR,
            markersize=9, markeredgewidth=1.6, label="fitted path (coefficient power)")
    spread = fit["rms_delay_spread_s"]
    ax.set_title(f"RMS delay spread {spread['profile'] * scale:.4g} \u2192 {spread['fitted'] * scale:.4g} {unit}",
                 fontsize=11)
    ax.set_xlabel(f"delay ({unit})")
    ax.set_ylabel("mean power (dB)")
    ax.set_ylim(bottom, max(profile_db.max(), path_db.max(initial=-np.inf)) + 3.0)
    ax.grid(True, color="0.88", linewidth=0.7)
    ax.legend(fontsize=8, loc="upper right")
    return figure


def _mimo_figure(mimo):
    """|expected| and |achieved| correlation of one tap's links as heat maps, and the largest deviation."""
    taps = mimo["taps"]
    tap = next(iter(taps))
    expected = np.abs(np.asarray(taps[tap]["expected"]))
    achieved = np.abs(np.asarray(taps[tap]["achieved"]))
    deviation = np.max([np.abs(np.asarray(t["achieved"]) - np.asarray(t["expected"])) for t in taps.values()], axis=0)
    labels = list(mimo["links"])
    n = len(labels)
    side = min(5.0, max(3.0, 0.42 * n + 1.6))  # 16 links: labels at 0.3 in, still readable in print
    figure = Figure(figsize=(3 * side + 1.2, side + 1.1), dpi=DPI, layout="constrained")
    panels = ((expected, "expected |\u03c1| (profile)", 0.0, 1.0),
              (achieved, f"achieved |\u03c1|, tap {tap}", 0.0, 1.0),
              (deviation, f"max |achieved \u2212 expected|, {len(taps)} taps", 0.0, max(0.05, float(deviation.max()))))
    for k, (values, title, low, high) in enumerate(panels):
        ax = figure.add_subplot(1, 3, k + 1)
        image = ax.imshow(values, cmap="viridis", vmin=low, vmax=high, interpolation="nearest")
        ax.set_xticks(range(n), labels, rotation=90, fontsize=7)
        ax.set_yticks(range(n), labels, fontsize=7)
        ax.set_title(title, fontsize=9, pad=6)
        if n <= 8:
            for i in range(n):
                for j in range(n):
                    shade = "black" if values[i, j] > low + 0.6 * (high - low) else "white"
                    ax.text(j, i, f"{values[i, j]:.2f}", ha="center", va="center", fontsize=7, color=shade)
        figure.colorbar(image, ax=ax, fraction=0.046, pad=0.03).ax.tick_params(labelsize=7)
    return figure


def _conditions_figure(conditions):
    """The trajectories of the time-varying conditions, one panel each, stacked."""
    panels = []
    if "high_speed_train" in conditions:
        entry = conditions["high_speed_train"]
        panels.append((entry["time_s"], entry["doppler_hz"], "Doppler (Hz)", "high-speed train: direct-part Doppler"))
    if "moving_delay" in conditions:
        entry = conditions["moving_delay"]
        panels.append((entry["time_s"], np.asarray(entry["delay_offset_s"]) * 1e6, "delay offset (\u00b5s)",
                       "moving delay: offset of every tap"))
    if "shadowing" in conditions:
        entry = conditions["shadowing"]
        panels.append((entry["time_s"], entry["gain_db"], "gain (dB)", "log-normal shadowing: gain as written"))
    if not panels:
        return None
    figure = Figure(figsize=(9.0, 2.4 * len(panels) + 0.4), dpi=DPI, layout="constrained")
    for k, (t, y, label, title) in enumerate(panels):
        ax = figure.add_subplot(len(panels), 1, k + 1)
        scale, unit = _time_unit(max(float(np.max(t)), 1e-9))
        ax.plot(np.asarray(t) * scale, y, color=MEASURED_COLOR, linewidth=1.2)
        ax.set_ylabel(label, fontsize=9)
        ax.set_xlabel(f"time ({unit})", fontsize=9)
        ax.set_title(title, fontsize=10, loc="left", pad=4)
        ax.grid(True, color="0.88", linewidth=0.7)
        ax.tick_params(labelsize=8)
    return figure


# -- helpers -----------------------------------------------------------------------


def _png(figure) -> bytes:
    buffer = io.BytesIO()
    FigureCanvasAgg(figure).print_png(buffer)
    return buffer.getvalue()


def _log_axis(ax):
    """Decade ticks labelled as plain numbers (1e-3), no minor ticks.

    The default minor ticks (eight per decade, each an artist) and mathtext
    labels were most of a log panel's rendering time.
    """
    ax.yaxis.set_major_locator(LogLocator(base=10.0, numticks=12))
    ax.yaxis.set_major_formatter(FuncFormatter(lambda value, _: f"{value:.0e}".replace("e+00", "").replace("e-0", "e-")
                                               .replace("e+0", "e")))
    ax.yaxis.set_minor_locator(NullLocator())


def _autocorrelation(x, max_lag):
    """Unbiased normalised autocorrelation R[m] = mean(x[n+m] conj x[n]) / mean|x|^2, m <= max_lag."""
    n = len(x)
    size = 1 << math.ceil(math.log2(n + max_lag + 1))
    spectrum = np.fft.fft(x, size)
    r = np.fft.ifft(np.abs(spectrum) ** 2)[: max_lag + 1]
    r = r / (n - np.arange(max_lag + 1))  # ifft(|X|^2)[m] = sum_n x[n+m] conj x[n]
    return r / r[0].real


def _upward_crossings(gains, levels):
    """Upward crossings of |g| through each level, g joined by straight lines in the complex plane.

    On a segment g(t) = a + t (b - a), t in [0, 1], |g(t)| is convex, so it
    crosses a level r upwards at most once: exactly when its minimum m < r <= |b|.
    Counting against the segment minimum (not only the end points) keeps the
    short, deep fades that fall between samples. O(N log N) for all levels.
    """
    a, b = gains[:-1], gains[1:]
    step = b - a
    power = np.abs(step) ** 2
    with np.errstate(divide="ignore", invalid="ignore"):
        t = np.clip(-(np.conj(a) * step).real / power, 0.0, 1.0)
    t = np.where(power > 0, t, 0.0)
    lowest = np.abs(a + t * step)
    end = np.abs(b)
    rises = lowest < end
    starts = np.sort(lowest[rises])
    ends = np.sort(end[rises])
    # count of segments with lowest < r <= end = #(lowest < r) - #(end < r)
    return np.searchsorted(starts, levels, side="left") - np.searchsorted(ends, levels, side="left")


def _spectrum(model):
    return None if model is None else getattr(model, "spectrum", None)


def _tap_index(key):
    """Tap index of a record key: an int, the last element of a tuple, or 'tap N'."""
    if isinstance(key, (int, np.integer)):
        return int(key)
    if isinstance(key, tuple) and key and isinstance(key[-1], (int, np.integer)):
        return int(key[-1])
    if isinstance(key, str):
        tail = key.rsplit(" ", 1)[-1].rsplit("_", 1)[-1]
        if tail.isdigit():
            return int(tail)
    return None


def _tap_label(key, profile):
    index = _tap_index(key)
    if index is None or index >= profile.n_taps:
        return str(key)
    tap = profile.taps[index]
    delay = tap.delay_s
    delay_text = f"{delay * 1e9:.4g} ns" if delay < 2e-6 else f"{delay * 1e6:.4g} \u00b5s"
    kind = tap.fading if tap.fading != "rician" else f"rician K {tap.k_db:.3g} dB"
    prefix = f"{key}" if not isinstance(key, (int, np.integer)) else f"tap {index}"
    return f"{prefix}: {delay_text}, {10 * math.log10(tap.power_linear):.3g} dB, {kind}"


def _group_suffix(group, total):
    if total <= len(group):
        return ""
    first, last = _tap_index(group[0].key), _tap_index(group[-1].key)
    if first is None or last is None:
        return f" ({group[0].key} to {group[-1].key})"
    return f", taps {first}-{last}" if first != last else f", tap {first}"


def _panel_title(taps):
    indices = [_tap_index(tap.key) for tap in taps]
    if None in indices:
        return ", ".join(str(tap.key) for tap in taps)
    if len(indices) == 1:
        return f"tap {indices[0]}"
    if indices == list(range(indices[0], indices[-1] + 1)):
        return f"taps {indices[0]}-{indices[-1]}"
    return "taps " + ", ".join(map(str, indices))


def _time_unit(span_s):
    if span_s < 2e-3:
        return 1e6, "\u00b5s"
    if span_s < 2.0:
        return 1e3, "ms"
    return 1.0, "s"
