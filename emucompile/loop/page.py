"""One self-contained HTML page for a measurement (figures inline as PNG), written atomically.

Kept apart from :mod:`emucompile.report.html` (which a later change may call
:func:`render_page` from): measured power delay profile against the
profile's, measured against loaded tap magnitude over time, the error per tap
against its tolerance, every check, the identities and the cautions.
"""

from __future__ import annotations

import base64
import html
import io
import json
import os
from pathlib import Path

import numpy as np

MAX_TAPS_SHOWN = 6


def render_page(result, design, source) -> str:
    record = result.record
    esc = html.escape
    parts = [
        "<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'>",
        "<title>emucompile measurement</title><style>body{font-family:sans-serif;max-width:70em;margin:auto;"
        "padding:1em}table{border-collapse:collapse}td,th{border:1px solid #bbb;padding:2px 6px;text-align:left}"
        ".fail{color:#a00;font-weight:bold}.pass{color:#060}.na{color:#666}</style></head><body>",
        f"<h1>Closed-loop measurement: <span class='{_cls(result.status)}'>{esc(result.status)}</span></h1>",
    ]
    if result.faults:
        parts.append("<h2>Faults</h2><ul>" + "".join(f"<li class='fail'>{esc(f['text'])}</li>" for f in result.faults)
                     + "</ul>")
    parts.append("<h2>Summary</h2><pre>" + esc(result.summary()) + "</pre>")
    for title, png in _figures(result, design, source):
        parts.append(f"<h3>{esc(title)}</h3><img alt='{esc(title)}' src='data:image/png;base64,"
                     f"{base64.b64encode(png).decode()}'>")
    if result.bundle is not None:
        parts.append("<h2>Against the bundle</h2><table><tr><th>tap</th><th>link</th><th>error dB</th>"
                     "<th>noise explains dB</th><th>tolerance dB</th><th>correlation</th><th>relative gain dB</th>"
                     "<th>verdict</th></tr>")
        for row in result.bundle.per_tap:
            parts.append("<tr>" + "".join(f"<td>{esc(_text(v))}</td>" for v in (
                row["tap"], f"rx{row['rx']} tx{row['tx']}", row["normalised_error_db"], row["noise_explains_db"],
                row["tolerance_db"], row["correlation"], row["relative_gain_db"]))
                + f"<td class='{_cls('pass' if row['passed'] else 'fail')}'>"
                + f"{'pass' if row['passed'] else 'FAIL'}</td></tr>")
        parts.append("</table>")
    parts.append("<h2>Against the profile</h2><table><tr><th>check</th><th>tap</th><th>value</th><th>expected</th>"
                 "<th>tolerance</th><th>unit</th><th>verdict</th><th>note</th></tr>")
    for check in record["profile"]["checks"]:
        verdict = "n/a" if check["passed"] is None else ("pass" if check["passed"] else "FAIL")
        parts.append("<tr>" + "".join(f"<td>{esc(_text(check[k]))}</td>" for k in (
            "name", "tap", "value", "expected", "tolerance", "unit"))
            + f"<td class='{_cls(verdict)}'>{verdict}</td><td>{esc(check['reason'] or '')}</td></tr>")
    parts.append("</table><h2>Identities</h2><pre>" + esc(json.dumps(record["identities"], indent=2)) + "</pre>")
    parts.append("<h2>Cautions</h2><ul>" + "".join(f"<li>{esc(c)}</li>" for c in record["cautions"])
                 + "".join(f"<li>{esc(w)}</li>" for w in record["warnings"]) + "</ul></body></html>")
    return "\n".join(parts)


def write_page(result, design, source, path) -> Path:
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    temporary = path.with_name(f".{path.name}.emucompile-tmp-{os.getpid()}")
    temporary.write_text(render_page(result, design, source), encoding="utf-8")
    os.replace(temporary, path)
    return path


def _figures(result, design, source):
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    out = []
    estimate = result.estimate
    rate = design.sample_rate_hz
    figure = Figure(figsize=(8, 3.2))
    axes = figure.add_subplot()
    L = estimate.pdp.shape[1]
    delays = (np.arange(L) - source.bulk_delay_samples) / rate * 1e6
    for rx in range(estimate.pdp.shape[0]):
        axes.plot(delays, 10 * np.log10(np.maximum(estimate.pdp[rx], 1e-30)), label=f"measured rx{rx}")
    powers = np.array([t.power_linear for t in source.profile.taps])
    expected = (powers @ source.fir_matrix ** 2) * estimate.pdp.shape[1] ** 0
    scale = np.max(estimate.pdp) / max(np.max(expected), 1e-300)
    axes.plot(delays[: expected.size], 10 * np.log10(np.maximum(expected * scale, 1e-30)), "k--",
              label="profile through the FIR map (scaled)")
    axes.axhline(10 * np.log10(max(float(np.mean(estimate.noise_delay_power)), 1e-30)), color="grey", lw=0.8,
                 label="noise per delay bin")
    axes.set_xlabel("delay (us, FIR column 0 of antenna 0 at the aligned origin)")
    axes.set_ylabel("power (dB)")
    axes.legend(fontsize=7)
    out.append(("Power delay profile", _png(figure, FigureCanvasAgg)))
    if result.bundle is not None:
        b = result.bundle
        n_taps = b.expected.shape[-1]
        figure = Figure(figsize=(8, 1.6 * min(n_taps, MAX_TAPS_SHOWN) + 0.6))
        for i in range(min(n_taps, MAX_TAPS_SHOWN)):
            axes = figure.add_subplot(min(n_taps, MAX_TAPS_SHOWN), 1, i + 1)
            t = estimate.times_s
            axes.plot(t, 20 * np.log10(np.maximum(np.abs(b.corrected[:, 0, 0, i]), 1e-6)), lw=0.7, label="measured")
            axes.plot(t, 20 * np.log10(np.maximum(np.abs(b.gain * b.expected[:, 0, 0, i]), 1e-6)), lw=0.7,
                      label="loaded (x set-up gain)")
            axes.set_ylabel(f"tap {i} dB", fontsize=7)
            axes.tick_params(labelsize=7)
        axes.set_xlabel("capture time (s)")
        figure.axes[0].legend(fontsize=7)
        out.append(("Measured against loaded tap magnitude (link rx0 tx0)", _png(figure, FigureCanvasAgg)))
        figure = Figure(figsize=(8, 3))
        axes = figure.add_subplot()
        rows = b.per_tap
        x = np.arange(len(rows))
        errors = [r["normalised_error_db"] if r["normalised_error_db"] is not None else -80 for r in rows]
        axes.scatter(x, errors, c=["#292" if r["passed"] else "#c22" for r in rows], zorder=3, label="error")
        axes.plot(x, [r["noise_explains_db"] for r in rows], "x", color="grey", label="noise explains")
        axes.plot(x, [r["tolerance_db"] for r in rows], "k_", markersize=20, label="tolerance")
        axes.set_xticks(x, [f"{r['tap']}" + ("" if len(rows) == len(set(r['tap'] for r in rows)) else
                                             f"\nrx{r['rx']}tx{r['tx']}") for r in rows], fontsize=7)
        axes.set_ylabel("normalised error (dB)")
        axes.legend(fontsize=7)
        out.append(("Residual error per tap against its tolerance", _png(figure, FigureCanvasAgg)))
    return out


def _png(figure, canvas_class) -> bytes:
    buffer = io.BytesIO()
    canvas_class(figure).print_png(buffer)
    return buffer.getvalue()


def _cls(verdict):
    return {"pass": "pass", "fail": "fail", "FAIL": "fail"}.get(verdict, "na")


def _text(value):
    if isinstance(value, float):
        return f"{value:.4g}"
    return "" if value is None else str(value)
