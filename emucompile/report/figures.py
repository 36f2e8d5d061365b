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
  ``theory.envelope_distribution`` (``scipy.stats.rice`` / ``rayleigh``), the
  shaded band the ``envelope_ks`` check's tolerance (its largest allowed gap);
* the real part of the normalised autocorrelation of the diffuse part against
  the spectrum's closed form r(tau), over the lags the ``autocorrelation``
  check reads, shaded: its tolerance at each lag;
* the Doppler power spectrum of the diffuse part (the ``doppler_psd`` check's
  Welch estimate) against the exact spectrum seen through the same window,
  shaded: the check's tolerance over the bins it judges; the direct part
  (removed before the check) marked at f_los;
* the level crossing rate, counted as the ``level_crossing_rate`` check counts,
  against Rice's formula (``theory.level_crossing_rate``); the check's levels
  marked with its tolerance;

Every measured curve comes from the estimator its check uses, with the same
parameters (:mod:`emucompile.verify.estimators` through
:func:`emucompile.verify.tolerance.autocorrelation_curve`, ``psd_curve`` and
``crossing_rates``), and every band is the check's printed tolerance, so a
figure shows the numbers its verdict used.
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

from emucompile.report import tap_panels
from emucompile.verify import estimators

TAPS_PER_AXES = 4
TAPS_PER_FIGURE = 4 * TAPS_PER_AXES * 3  # 3 columns x 4 rows of panels at most
DPI = 100
MEASURED_COLOR = "#1f77b4"
# One colour per tap of a panel (matplotlib's tab10 blue, red, green, purple): distinct in print too.
TAP_COLORS = ("#1f77b4", "#d62728", "#2ca02c", "#9467bd")

_COLUMNS = 3
_PANEL_SIZE_IN = (4.6, 4.2)  # one panel with its legend of up to four taps below
_LEGEND_IN = 1.35  # room below each panel for the x label and the tap legend


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
    Cost: per tap, the estimates its checks made, once more (the null sums
    are cached): an autocorrelation, a Welch estimate, a sort of |g|^2 and the
    crossing count's interpolation; making the axes and rendering their text
    dominate (about 0.1 s per panel, 5 panels per 4 taps), see
    ``benchmarks/bench_plots.py``.
    """
    profile = verification.profile
    records = dict(getattr(verification, "records", None) or {})
    models = dict(getattr(verification, "models", None) or {})
    rate = getattr(verification, "record_rate_hz", None)
    tasks = [("Power delay profile", lambda: _delay_profile_figure(profile, records))]

    fading = [key for key in records if _spectrum(models.get(key)) is not None and rate]
    periodic = bool((getattr(verification, "identity", None) or {}).get("periodic"))
    checks = tap_panels.first_source_checks(getattr(verification, "checks", None) or ())
    taps = [tap_panels.TapData(key, _tap_label(key, profile), records[key], rate, models[key], periodic,
                           checks.get(key, {})) for key in fading]
    for start in range(0, len(taps), TAPS_PER_FIGURE):
        group = taps[start : start + TAPS_PER_FIGURE]
        suffix = _group_suffix(group, len(taps))
        for title, draw in tap_panels.STATISTICS:
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
    key = ("measured: wide pale line; theory: dashed; shaded: the check's tolerance"
           if draw is not tap_panels.draw_envelope
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
        if ax.get_yscale() == "linear" and draw is not tap_panels.draw_envelope:
            ax.locator_params(axis="y", nbins=6)
        if draw in (tap_panels.draw_psd, tap_panels.draw_autocorrelation, tap_panels.draw_envelope):
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
            power = estimators.mean_power(record)
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
    n = length if edge <= 0 else min(length, max(2, int(tap_panels.STRETCH_PERIODS / edge * rate_hz)))
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
    scale, unit = tap_panels.time_unit(max(t_s[-1], 1.0 / rate_hz))
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
        scale, unit = tap_panels.time_unit(max(float(np.max(t)), 1e-9))
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
