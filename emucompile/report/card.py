"""A profile card: one self-contained HTML page describing a profile, to attach to an e-mail.

``emucompile stats PROFILE --html FILE`` writes it (:func:`write_profile_card`).
What is on it: the profile's name, description and identity (SHA-256 of the
file and of the resolved profile), three figures, the statistics table of
``emucompile stats`` (with the ``expect:`` targets, met or missed), the taps
after power scaling, the optional blocks, and the profile's text as written
(with the resolved document, presets expanded, folded below it).

The figures (matplotlib's object API: ``Figure`` with the Agg canvas, no
pyplot, as in :mod:`emucompile.report.figures`), embedded as base64 PNG ``data:`` URIs:

* the power delay profile: each tap's power (after scaling) as a stem at its
  delay, the mean excess delay and +/- the RMS delay spread marked;
* each tap's Doppler spectrum S(f) (unit area, :meth:`emucompile.models.theory.DopplerSpectrum.psd`),
  taps of the same spectrum, f_D, sigma and direct part sharing a panel, the
  direct part drawn as a line at its Doppler with its share K/(K+1) of the
  tap's power; static taps, which have no spectrum, are listed instead;
* the frequency correlation |R(df)| = |sum_i P_i exp(-j 2 pi df tau_i)| / sum_i P_i
  (:func:`emucompile.profile.stats.frequency_correlation`) with both coherence
  bandwidths (|R| = 0.5 and 0.9, exact) marked, and the rules of thumb
  1/(5 sigma_tau) and 1/(50 sigma_tau) dotted.

No script, no URL, no external resource: every string from the profile is
HTML-escaped. The page is written to a temporary sibling and renamed into place.
"""

from __future__ import annotations

import base64
import hashlib
import html
import io
import json
from datetime import datetime, timezone
from pathlib import Path

import numpy as np

from emucompile._version import __version__
from emucompile.profile.model import Profile, load_profile
from emucompile.profile.stats import check_targets, format_statistics, frequency_correlation, profile_statistics
from emucompile.report.html import write_text_atomic
from emucompile.models import spectra

DPI = 100
PANEL_COLUMNS = 3
MAX_SPECTRUM_PANELS = 12
"""Panels of Doppler spectra at most; further groups are listed in the caption."""
TAP_COLOR = "#1f77b4"
DIRECT_COLOR = "#d62728"
MARK_COLOR = "#2ca02c"


def card_figures(profile, statistics: dict | None = None) -> list[tuple[str, bytes]]:
    """The card's figures as ``(title, PNG bytes)`` in reading order."""
    statistics = statistics if statistics is not None else profile_statistics(profile)
    figures = [("Power delay profile", _delay_profile(profile, statistics))]
    spectra = _doppler_spectra(profile)
    if spectra is not None:
        figures.append(("Doppler spectrum of each tap", spectra))
    figures.append(("Frequency correlation |R(\u0394f)|", _frequency_correlation(profile, statistics)))
    return figures


def render_profile_card(profile, *, text: str | None = None, source_name: str | None = None,
                        figures=None) -> str:
    """The card as one HTML string (see the module notes).

    ``text``: the profile file's text as written (shown, and hashed for the identity).
    """
    statistics = profile_statistics(profile)
    targets = check_targets(profile, statistics)
    figures = card_figures(profile, statistics) if figures is None else figures
    source_name = source_name or profile.source or profile.name
    identity = [("profile", profile.name), ("file", source_name)]
    if text is not None:
        identity.append(("file SHA-256", hashlib.sha256(text.encode("utf-8")).hexdigest()))
    identity += [("resolved profile SHA-256", profile.resolved_sha256()),
                 ("made by", f"emucompile {__version__}, "
                             f"{datetime.now(timezone.utc).strftime('%Y-%m-%d %H:%M UTC')}")]
    missed = [t for t in targets if not t.met]
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        f"<title>Profile card: {_e(profile.name)}</title>",
        f"<style>{_STYLE}</style></head><body>",
        f"<h1>Profile card: {_e(profile.name)}</h1>",
        f'<p class="description">{_e(profile.description) or "(no description)"}</p>',
        _table(["", ""], identity, cls="identity"),
    ]
    if targets:
        verdict = (f"{len(missed)} of {len(targets)} expect: target(s) missed" if missed
                   else f"all {len(targets)} expect: target(s) met")
        parts.append(f'<p class="{"missed" if missed else "met"}">{_e(verdict)}</p>')
    parts.append("<h2>Figures</h2>")
    for title, png in figures:
        data = base64.b64encode(png).decode("ascii")
        parts.append(f'<figure><img alt="{_e(title)}" src="data:image/png;base64,{data}">'
                     f"<figcaption>{_e(title)}</figcaption></figure>")
    parts += ["<h2>Statistics</h2>", f"<pre>{_e(format_statistics(statistics, targets))}</pre>",
              "<h2>Taps (after power scaling)</h2>", _taps_table(statistics)]
    blocks = _blocks(statistics)
    if blocks:
        parts += ["<h2>MIMO, conditions, target</h2>", blocks]
    parts.append("<h2>The profile as written</h2>")
    parts.append(f"<pre class=\"source\">{_e(text) if text is not None else '(not available)'}</pre>")
    parts.append("<details><summary>The resolved profile (presets expanded, defaults explicit)</summary>"
                 f"<pre class=\"source\">{_e(json.dumps(profile.document, indent=2, ensure_ascii=False))}</pre>"
                 "</details>")
    parts.append("<p class=\"note\">Made by emucompile from the profile alone: theory, not a measurement.</p>")
    parts.append("</body></html>")
    return "\n".join(parts) + "\n"


def write_profile_card(profile, path) -> Path:
    """Write the card of ``profile`` (a Profile, or a profile file's path) to ``path`` atomically."""
    text = None
    if not isinstance(profile, Profile):
        source = Path(profile)
        profile = load_profile(source)
        text = source.read_text(encoding="utf-8")
    elif profile.source and Path(profile.source).is_file():
        text = Path(profile.source).read_text(encoding="utf-8")
    return write_text_atomic(path, render_profile_card(profile, text=text))


# -- figures ------------------------------------------------------------------------------------------


def _figure(width_in, height_in):
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    figure = Figure(figsize=(width_in, height_in), dpi=DPI, layout="constrained")
    FigureCanvasAgg(figure)
    return figure


def _png(figure) -> bytes:
    buffer = io.BytesIO()
    figure.canvas.print_png(buffer)
    return buffer.getvalue()


def _delay_unit(largest_s):
    return (1e6, "\u00b5s") if largest_s >= 2e-6 else (1e9, "ns")


def _delay_profile(profile, statistics) -> bytes:
    delays = np.array([t.delay_s for t in profile.taps])
    powers_db = np.array([t.power_db for t in profile.taps])
    scale, unit = _delay_unit(float(np.max(np.abs(delays))))
    figure = _figure(8.0, 3.6)
    ax = figure.add_subplot()
    floor = float(np.min(powers_db[np.isfinite(powers_db)], initial=0.0)) - 6.0
    shown = np.where(np.isfinite(powers_db), powers_db, floor)
    ax.vlines(delays * scale, floor, shown, color=TAP_COLOR, linewidth=2)
    ax.plot(delays * scale, shown, "o", color=TAP_COLOR, markersize=5)
    for tap, x, y in zip(profile.taps, delays * scale, shown):
        if tap.fading != "rayleigh":
            ax.annotate(tap.fading if tap.fading == "static" else f"K {tap.k_db:.3g} dB", (x, y),
                        textcoords="offset points", xytext=(4, 4), fontsize=8, color=DIRECT_COLOR)
    mean, spread = statistics.get("mean_excess_delay_s"), statistics.get("rms_delay_spread_s")
    first = statistics.get("first_delay_s") or 0.0
    if mean is not None and spread is not None:
        centre = (first + mean) * scale
        ax.axvline(centre, color=MARK_COLOR, linestyle="--", linewidth=1)
        ax.axvspan(centre - spread * scale, centre + spread * scale, color=MARK_COLOR, alpha=0.12)
        ax.text(centre, 0.98, f" mean {mean * 1e9:.4g} ns, RMS spread {spread * 1e9:.4g} ns",
                transform=ax.get_xaxis_transform(), va="top", fontsize=8, color=MARK_COLOR)
    ax.set_ylim(floor, max(float(np.max(shown)), 0.0) + 3.0)
    ax.set_xlabel(f"delay ({unit})")
    ax.set_ylabel("tap power (dB)")
    total_db = 10 * np.log10(sum(t.power_linear for t in profile.taps))
    ax.set_title(f"Power delay profile: {len(profile.taps)} taps, total {total_db:.3g} dB")
    ax.grid(alpha=0.3)
    return _png(figure)


def _spectrum_key(tap):
    direct = None
    if tap.fading == "rician":
        direct = (round(tap.k_db, 9), None if tap.los_doppler_hz is None else round(tap.los_doppler_hz, 9),
                  tap.los_trajectory)
    parameters = tuple((k, round(v, 9)) for k, v in sorted(spectra.parameters_of(tap).items()))
    return (tap.spectrum, round(tap.max_doppler_hz, 9), parameters, direct)


def _doppler_spectra(profile) -> bytes | None:
    groups: dict = {}
    for index, tap in enumerate(profile.taps):
        if tap.fading != "static":
            groups.setdefault(_spectrum_key(tap), []).append(index)
    if not groups:
        return None
    items = list(groups.items())[:MAX_SPECTRUM_PANELS]
    columns = min(PANEL_COLUMNS, len(items))
    rows = -(-len(items) // columns)
    figure = _figure(3.6 * columns, 2.9 * rows)
    static = [i for i, t in enumerate(profile.taps) if t.fading == "static"]
    moving = [f"{i} turns on the {t.los_trajectory.replace('_', ' ')} trajectory, peak {t.los_peak_doppler_hz:.4g} Hz"
              for i, t in enumerate(profile.taps) if t.fading == "static" and t.los_trajectory]
    note = (f"static taps (no Doppler spectrum): {_index_list(static)}" + (f" ({'; '.join(moving)})" if moving else "")
            if static else "")
    if len(groups) > MAX_SPECTRUM_PANELS:
        note += f"{'; ' if note else ''}{len(groups) - MAX_SPECTRUM_PANELS} more spectra not drawn (see the taps table)"
    if note:
        figure.suptitle(note, fontsize=9)
    for panel, (_, members) in enumerate(items):
        tap = profile.taps[members[0]]
        ax = figure.add_subplot(rows, columns, panel + 1)
        spectrum = tap.doppler_spectrum
        fd = tap.max_doppler_hz
        f = np.linspace(-fd, fd, 801)[1:-1]
        density = spectrum.psd(f)
        top = float(density.max()) * 1.15 if spectrum.spec.bounded_density else float(np.quantile(density, 0.9)) * 2.5
        ax.plot(f, np.minimum(density, top * 0.98), color=TAP_COLOR, linewidth=1.5)
        ax.fill_between(f, 0, np.minimum(density, top * 0.98), color=TAP_COLOR, alpha=0.15)
        ax.set_ylim(0, top)
        ax.set_xlim(-1.15 * fd, 1.15 * fd)
        label = f"{tap.spectrum}, f_D {fd:.4g} Hz" + "".join(
            f", {p.label} {getattr(spectrum, p.name):.3g}{' ' + p.unit if p.unit else ''}"
            for p in spectrum.spec.parameters)
        if tap.fading == "rician":
            share = tap.k_linear / (tap.k_linear + 1.0)
            if tap.los_trajectory:
                label += f"\ndirect part on a {tap.los_trajectory.replace('_', ' ')} trajectory, K {tap.k_db:.3g} dB"
            else:
                ax.axvline(tap.los_doppler_hz, color=DIRECT_COLOR, linewidth=2)
                ax.text(tap.los_doppler_hz, 0.95 * top, f" direct {share:.0%}", color=DIRECT_COLOR, fontsize=8,
                        va="top")
                label += f"\ndirect part at {tap.los_doppler_hz:.4g} Hz, K {tap.k_db:.3g} dB"
        ax.set_title(f"tap{'s' if len(members) > 1 else ''} {_index_list(members)}", fontsize=9)
        ax.text(0.02, 0.98, label, transform=ax.transAxes, fontsize=7, va="top")
        ax.set_xlabel("Doppler frequency (Hz)", fontsize=8)
        ax.set_ylabel("S(f) (1/Hz, unit area)", fontsize=8)
        ax.tick_params(labelsize=7)
    return _png(figure)


def _frequency_correlation(profile, statistics) -> bytes:
    delays = [t.delay_s for t in profile.taps]
    powers = [t.power_linear for t in profile.taps]
    b50, b90 = statistics.get("coherence_bandwidth_50_hz"), statistics.get("coherence_bandwidth_90_hz")
    spread = statistics.get("rms_delay_spread_s") or 0.0
    span = max(v for v in (3.0 * (b50 or 0.0), 2.0 / spread if spread > 0 else 0.0, 1e6) if v)
    f = np.linspace(0.0, span, 1500)
    r = np.abs(frequency_correlation(delays, powers, f))
    scale, unit = (1e-6, "MHz") if span >= 2e6 else (1e-3, "kHz")
    figure = _figure(8.0, 3.6)
    ax = figure.add_subplot()
    ax.plot(f * scale, r, color=TAP_COLOR, linewidth=1.5, label="|R(\u0394f)|")
    for level, value, style in ((0.5, b50, "-"), (0.9, b90, "-")):
        ax.axhline(level, color="0.6", linewidth=0.8, linestyle=":")
        if value is not None:
            ax.axvline(value * scale, color=MARK_COLOR, linestyle=style, linewidth=1.2)
            ax.text(value * scale, level, f" B_c({level:g}) = {_hz(value)}", fontsize=8, color=MARK_COLOR,
                    va="bottom")
    for key, text in (("coherence_bandwidth_rule_hz", "1/(5 \u03c3_\u03c4)"),
                      ("coherence_bandwidth_90_rule_hz", "1/(50 \u03c3_\u03c4)")):
        value = statistics.get(key)
        if value is not None and value <= span:
            ax.axvline(value * scale, color="0.4", linestyle=":", linewidth=1)
            ax.text(value * scale, 0.03, f" {text} (rule)", fontsize=7, color="0.3", rotation=90, va="bottom")
    if b50 is None and b90 is None:
        ax.text(0.5, 0.5, "|R| stays above 0.9: coherence bandwidths beyond the plotted span",
                transform=ax.transAxes, ha="center", fontsize=9)
    ax.set_ylim(0, 1.05)
    ax.set_xlim(0, span * scale)
    ax.set_xlabel(f"frequency separation \u0394f ({unit})")
    ax.set_ylabel("|R(\u0394f)|")
    ax.set_title("Frequency correlation with the coherence bandwidths at 0.5 and 0.9")
    ax.grid(alpha=0.3)
    return _png(figure)


# -- tables -------------------------------------------------------------------------------------------


def _taps_table(statistics) -> str:
    header = ["#", "delay (ns)", "power (dB)", "fading", "K (dB)", "spectrum", "f_D (Hz)",
              *(f"{p.label} ({p.unit})" if p.unit else p.label for p in spectra.PARAMETERS),
              "direct Doppler (Hz)", "direct phase (deg)"]
    rows = []
    for tap in statistics["taps"]:
        rows.append([tap["index"], _num(tap["delay_s"] * 1e9), _num(tap["power_db"]), tap["fading"],
                     _num(tap["k_db"]), tap["spectrum"] or "", _num(tap["max_doppler_hz"]),
                     *(_num(tap.get(p.name)) for p in spectra.PARAMETERS),
                     tap["los_trajectory"] or _num(tap["los_doppler_hz"]), _num(tap["los_phase_deg"])])
    return _table(header, rows, cls="taps")


def _blocks(statistics) -> str:
    found = [(name, statistics.get(name)) for name in ("preset", "mimo", "conditions", "target")]
    rows = [(name, json.dumps(value, indent=1, ensure_ascii=False, default=str)) for name, value in found if value]
    if not rows:
        return ""
    return "".join(f"<h3>{_e(name)}</h3><pre>{_e(text)}</pre>" for name, text in rows)


def _table(header, rows, *, cls="") -> str:
    head = "".join(f"<th>{_e(h)}</th>" for h in header) if any(header) else ""
    body = "".join("<tr>" + "".join(f"<td>{_e(c)}</td>" for c in row) + "</tr>" for row in rows)
    thead = f"<thead><tr>{head}</tr></thead>" if head else ""
    return f'<table class="{cls}">{thead}<tbody>{body}</tbody></table>'


def _num(value) -> str:
    if value is None:
        return ""
    return f"{value:.6g}"


def _hz(value) -> str:
    for factor, unit in ((1e6, "MHz"), (1e3, "kHz")):
        if value >= factor:
            return f"{value / factor:.4g} {unit}"
    return f"{value:.4g} Hz"


def _index_list(indices) -> str:
    if len(indices) > 8:
        return ", ".join(str(i) for i in indices[:8]) + f", ... ({len(indices)})"
    return ", ".join(str(i) for i in indices)


def _e(value) -> str:
    return html.escape("" if value is None else str(value), quote=True)


_STYLE = (
    "body{font-family:system-ui,sans-serif;margin:2em auto;max-width:1100px;color:#222;line-height:1.4}"
    "h1{font-size:1.6em;margin-bottom:.2em}h2{border-bottom:1px solid #ccc;margin-top:1.6em}"
    "table{border-collapse:collapse;margin:.6em 0}td,th{border:1px solid #ccc;padding:.2em .6em;text-align:left;"
    "font-size:.9em}th{background:#f0f0f0}table.taps td{text-align:right}"
    "figure{margin:1em 0}img{max-width:100%;border:1px solid #ddd}figcaption{font-size:.9em;color:#555}"
    "pre{background:#f7f7f7;border:1px solid #ddd;padding:.6em;overflow-x:auto;font-size:.85em}"
    "p.missed{background:#c62828;color:#fff;padding:.4em .8em;display:inline-block}"
    "p.met{background:#2e7d32;color:#fff;padding:.4em .8em;display:inline-block}"
    ".description{font-style:italic}.note{color:#666;font-size:.85em}"
)


__all__ = ["card_figures", "render_profile_card", "write_profile_card"]
