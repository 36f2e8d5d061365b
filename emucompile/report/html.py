"""The verification report: one self-contained HTML file a reviewer can read, file and sign.

:func:`render_report` builds the page as a string; :func:`write_report` writes
it atomically. The page needs nothing else: the style sheet is inline, the
figures (:func:`emucompile.report.figures.make_figures`) are embedded as base64
``data:`` URIs, there is no script and no link to anything outside the file,
so it opens the same way offline, years later, on any browser. Every piece of
text that comes from the data (profile name and description, check names,
reasons, hashes) is HTML-escaped.

Sections, in order: the verdict with the linked list of failed checks; the
foreign-data note (when the gains were not made by emucompile); the profile
and its statistics; the emulator fit (bundles fitted to a target: taps merged
and dropped, delay spread and mean delay before and after, power dropped,
update images, coefficient SQNR and clip counts); the MIMO set-up (expected
and achieved correlation); the time-varying conditions; the checks as a
compact taps x checks matrix (one mark per cell, the numbers in the cell's
title, shown on hover) and a short table of the checks of no single tap, each
saying what it compared with what; the family-wise false-alarm rate and what
it means; the figures; the bundle's identity (hashes, seed, versions); the
cautions; a signature block. A print style sheet lays it out on A4.
"""

from __future__ import annotations

import base64
import datetime as _dt
from pathlib import Path

from emucompile._version import __version__
from emucompile.bundle import atomic
from emucompile.profile.blocks import correlation_text
from emucompile.report import html_text as fmt
from emucompile.verify.describe import check_matrix, comparison

#: The cautions printed in every report (common practice for lab test records).
CAUTIONS = (
    "Check the channel emulator's input and output power limits and the ratings of every "
    "piece of equipment in the set-up before replaying a compiled profile; the tap gains "
    "can reach several times their mean power.",
    "A compiled and verified profile is no substitute for accredited conformance testing: "
    "these checks show that the numbers follow the profile's statistics, not that a device "
    "under test meets a standard.",
    "Follow the laboratory's own procedures and the local regulations on radio transmission.",
)

FOREIGN_NOTE = (
    "These tap gains were not produced by emucompile; they are checked against the profile they "
    "claim to follow. Gains estimated from measurements carry measurement noise and estimator "
    "bias that these checks do not model: a failed check may reflect the estimator rather than "
    "the channel, and a passed check does not certify the measurement. Integrity checks that "
    "need a bundle manifest are not applicable."
)

# (key of profile_stats, label, unit) in reading order.
_STATISTICS = (
    ("n_taps", "taps", ""),
    ("total_power_db", "total power", "dB"),
    ("mean_excess_delay_s", "mean excess delay", "s"),
    ("rms_delay_spread_s", "RMS delay spread", "s"),
    ("max_excess_delay_s", "maximum excess delay", "s"),
    ("coherence_bandwidth_50_hz", "coherence bandwidth, 0.5 correlation (exact)", "Hz"),
    ("coherence_bandwidth_90_hz", "coherence bandwidth, 0.9 correlation (exact)", "Hz"),
    ("coherence_bandwidth_rule_hz", "coherence bandwidth, rule of thumb 1/(5 \u03c3\u03c4)", "Hz"),
    ("max_doppler_hz", "maximum Doppler f_D", "Hz"),
    ("rms_doppler_spread_hz", "RMS Doppler spread", "Hz"),
    ("coherence_time_rule_s", "coherence time, rule of thumb 0.423/f_D", "s"),
    ("coherence_time_strict_rule_s", "coherence time, rule of thumb 9/(16 \u03c0 f_D)", "s"),
)


def render_report(verification, figures=(), *, title: str | None = None,
                  created_utc: str | None = None) -> str:
    """The report as one HTML document (a string).

    Parameters
    ----------
    verification : object
        A verification result (:class:`emucompile.verify.run.Verification` or an
        object with its attributes): ``checks``, ``passed``, ``false_alarm``,
        ``identity``, ``profile``, ``profile_stats``, ``update_rate_hz``,
        ``records``, ``record_rate_hz``, ``sample_rate_hz``, ``foreign``.
    figures : sequence of (str, bytes)
        Title and PNG bytes of each figure (:func:`emucompile.report.figures.make_figures`).
    title : str, optional
        Page title; default "Verification report: PROFILE-NAME".
    created_utc : str, optional
        Time stamp shown; default now (UTC, ISO 8601).

    Returns
    -------
    str
        The page: UTF-8 text with inline CSS and embedded images, no script,
        no external reference.
    """
    profile = verification.profile
    name = getattr(profile, "name", "profile")
    title = title or f"Verification report: {name}"
    created = created_utc or _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")
    checks = list(getattr(verification, "checks", None) or [])
    figures = list(figures or ())
    fit = getattr(verification, "fit", None)
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{fmt.e(title)}</title>",
        f"<style>{fmt.CSS}</style></head><body>",
        f"<h1>{fmt.e(title)}</h1>",
        f'<p class="meta">Written {fmt.e(created)} by emucompile {fmt.e(__version__)}.</p>',
        _verdict_section(verification, checks),
        _failed_section(checks, fit),
    ]
    if getattr(verification, "foreign", False):
        parts.append(f'<div class="note"><strong>Foreign data.</strong> {fmt.e(FOREIGN_NOTE)}</div>')
    section_figures, figures = _take_figures(figures, ("MIMO correlation", "Time-varying conditions",
                                                       "Emulator fit"))
    parts += [
        _profile_section(verification),
        _fit_section(fit, section_figures.get("Emulator fit")),
        _figure_section("MIMO set-up", "mimo", section_figures.get("MIMO correlation"), _mimo_text(verification)),
        _figure_section("Time-varying conditions", "conditions", section_figures.get("Time-varying conditions"),
                        _conditions_text(verification)),
        _checks_section(verification, checks),
        _figures_section(figures),
        _identity_section(getattr(verification, "identity", None) or {}),
        _cautions_section(getattr(verification, "cautions", None) or ()),
        _signature_section(),
        "</body></html>",
    ]
    return "\n".join(parts) + "\n"


def write_report(verification, figures, path, **options) -> Path:
    """Write :func:`render_report`'s page to ``path`` atomically; return the path.

    The page goes to a temporary sibling ``.NAME.emucompile-tmp-PID-TOKEN``,
    is flushed and fsync-ed, then renamed over ``path`` (``os.replace``), so a
    reader sees either the old file or the complete new one, never a part.
    On any error the temporary file is removed and ``path`` is untouched.
    ``options`` go to :func:`render_report`.
    """
    return write_text_atomic(path, render_report(verification, figures, **options))


def write_text_atomic(path, text: str) -> Path:
    """Write ``text`` (UTF-8) to ``path`` atomically; return the path.

    The same as :func:`emucompile.bundle.atomic.write_text_atomic`, kept here for the report's callers.
    """
    return atomic.write_text_atomic(path, text)


# -- sections ----------------------------------------------------------------------


def _verdict_section(verification, checks) -> str:
    counts = {True: 0, False: 0, None: 0}
    for check in checks:
        counts[fmt.get(check, "passed")] = counts.get(fmt.get(check, "passed"), 0) + 1
    passed = getattr(verification, "passed", None)
    if passed is True:
        banner, css = "PASSED: every applicable check passed", "pass"
    elif passed is False:
        banner, css = "FAILED: at least one check failed", "fail"
    else:
        banner, css = "NO VERDICT", "na"
    summary = (f"{len(checks)} checks: {counts[True]} passed, {counts[False]} failed, "
               f"{counts[None]} not applicable or without enough data.")
    return (f'<div class="verdict {css}">{fmt.e(banner)}</div>'
            f'<p class="summary">{fmt.e(summary)} {fmt.e(fmt.false_alarm_sentence(verification))}</p>')


def _profile_section(verification) -> str:
    profile = verification.profile
    stats = getattr(verification, "profile_stats", None) or {}
    reasons = stats.get("reasons", {}) or {}
    rows = [("profile", getattr(profile, "name", "")),
            ("description", getattr(profile, "description", "") or "")]
    update = getattr(verification, "update_rate_hz", None)
    rows.append(("update rate of the tap gains", fmt.si(update, "Hz")))
    record_rate = getattr(verification, "record_rate_hz", None)
    records = getattr(verification, "records", None) or {}
    if records and record_rate:
        length = max(len(r) for r in records.values())
        rows.append(("records checked", f"{len(records)} at {fmt.si(record_rate, 'Hz')}, "
                                        f"{fmt.si(length / record_rate, 's')} each"))
    sample_rate = getattr(verification, "sample_rate_hz", None)
    rows.append(("signal sample rate (FIR grid)", fmt.si(sample_rate, "Hz") if sample_rate else "none (no FIR map)"))
    for key, label, unit in _STATISTICS:
        if key not in stats:
            continue
        value = stats[key]
        if value is None:
            text = "undefined" + (f": {reasons[key]}" if key in reasons else "")
        elif key == "n_taps":
            text = str(value)
        elif unit == "dB":
            text = f"{value:.4g} dB"
        else:
            text = fmt.si(value, unit)
        rows.append((label, text))
    out = ["<h2>Profile</h2>", '<table class="kv">']
    out += [f"<tr><th>{fmt.e(k)}</th><td>{fmt.e(v)}</td></tr>" for k, v in rows]
    out.append("</table>")
    taps = stats.get("taps") or []
    fit_notes = _fit_per_tap(getattr(verification, "fit", None))
    if taps:
        out.append('<h3>Taps</h3><table class="grid"><tr><th>#</th><th>delay</th><th>power (dB)</th>'
                   "<th>fading</th><th>K (dB)</th>" + ("" if fit_notes is None else "<th>emulator fit</th>") + "</tr>")
        for i, tap in enumerate(taps):
            k_db = tap.get("k_db")
            note = "" if fit_notes is None else f"<td>{fmt.e(fit_notes.get(i, 'kept'))}</td>"
            out.append(f"<tr><td>{i}</td><td>{fmt.e(fmt.si(tap.get('delay_s'), 's'))}</td>"
                       f"<td>{fmt.e(fmt.number(tap.get('power_db')))}</td><td>{fmt.e(tap.get('fading', ''))}</td>"
                       f"<td>{fmt.e(fmt.number(k_db)) if k_db is not None else '&ndash;'}</td>{note}</tr>")
        out.append("</table>")
    return "\n".join(out)


def _fit_per_tap(fit) -> dict | None:
    """Tap index -> what the fit did to it ("dropped", "merged with ... at ..."); None without a fit."""
    if not fit:
        return None
    notes = {tap: "dropped" for tap in fit.get("taps_dropped") or ()}
    for merged in fit.get("taps_merged") or ():
        for tap in merged["taps"]:
            others = [str(t) for t in merged["taps"] if t != tap]
            notes[tap] = f"merged with {', '.join(others)} at {fmt.si(merged['delay_s'], 's')}"
    return notes


def _checks_section(verification, checks) -> str:
    """The per-tap checks as a taps x checks matrix, then the checks of no single tap."""
    fit = getattr(verification, "fit", None)
    matrix = check_matrix(checks)
    out = ['<h2 id="checks">Checks</h2>', f'<p class="explain">{fmt.e(fmt.holm_explanation(verification))}</p>',
           '<p class="explain">One mark per tap and check: \u2714 every link passed, \u2718 at least one failed, '
           "\u2013 not applicable or not enough data. Hover over a mark (or read verification.json, "
           "<code>check_matrix</code> and <code>checks</code>) for the numbers: value, expected, tolerance, "
           "what was compared with what.</p>"]
    placed = set()
    if matrix["rows"]:
        columns = matrix["columns"]
        out.append('<table class="grid matrix"><thead><tr><th>source</th><th>tap</th>'
                   + "".join(f'<th class="rot"><span>{fmt.e(_short(c))}</span></th>' for c in columns)
                   + "</tr></thead><tbody>")
        for row in matrix["rows"]:
            cells = []
            for column in columns:
                cell = row["cells"].get(column)
                if cell is None:
                    cells.append('<td class="empty"></td>')
                    continue
                indices = cell["checks"]
                placed.update(indices)
                mark, css = _mark(cell["passed"], [checks[i] for i in indices])
                anchors = "".join(f'<span id="check-{i + 1}"></span>' for i in indices)
                title = "\n".join(_check_line(checks[i], fit) for i in indices)
                cells.append(f'<td class="{css}" title="{fmt.e(title)}">{anchors}{mark}</td>')
            source = row["source"] or "gains as stored"
            out.append(f'<tr class="row-{_row_css(row)}"><td>{fmt.e(source)}</td>'
                       f'<td>{fmt.e(fmt.tap_text(row["tap"]))}</td>'
                       + "".join(cells) + "</tr>")
        out.append("</tbody></table>")
    others = [i for i in range(len(checks)) if i not in placed]
    if others:
        out.append('<h3>Checks of no single tap</h3>')
        groups = {}
        for i in others:
            groups.setdefault(_base_name(fmt.get(checks[i], "name") or ""), []).append(i)
        out.append('<table class="grid others"><tr><th>check</th><th>verdict</th><th>what was compared</th>'
                   "<th>result</th></tr>")
        for base, indices in groups.items():
            if len(indices) == 1:
                check = checks[indices[0]]
                mark, css = _mark(fmt.get(check, "passed"), [check])
                out.append(f'<tr id="check-{indices[0] + 1}"><td>{fmt.e(base)}</td><td class="{css}">{mark}</td>'
                           f"<td>{fmt.e(_comparison(check, fit)['comparison'])}</td>"
                           f"<td>{fmt.e(_result_text(check))}</td></tr>")
                continue
            passed = [fmt.get(checks[i], "passed") for i in indices]
            verdict = False if False in passed else True if True in passed else None
            mark, css = _mark(verdict, [checks[i] for i in indices])
            worst = _worst(checks, indices)
            anchors = "".join(f'<span id="check-{i + 1}"></span>' for i in indices)
            summary = (f"{len(indices)} checks: {passed.count(True)} passed, {passed.count(False)} failed, "
                       f"{passed.count(None)} not applicable"
                       + (f"; closest to its bound: {_check_line(checks[worst], words=False)}"
                          if worst is not None else ""))
            out.append(f"<tr><td>{anchors}{fmt.e(base)}</td><td class=\"{css}\">{mark}</td>"
                       f"<td>{fmt.e(_comparison(checks[indices[0]], fit)['comparison'])}</td>"
                       f"<td>{fmt.e(summary)}</td></tr>")
        out.append("</table>")
    if not checks:
        out.append("<p>No checks were run.</p>")
    return "\n".join(out)


def _failed_section(checks, fit) -> str:
    """The failed checks, each linked to its place in the checks section; the fit if it was accepted."""
    out = []
    acceptance = (fit or {}).get("acceptance") or {}
    if acceptance and not acceptance.get("within_tolerance"):
        spread = fit["rms_delay_spread_s"]
        out.append('<div class="note"><strong>Emulator fit beyond its tolerance.</strong> '
                   + fmt.e(f"The fit moves the RMS delay spread from {fmt.si(spread['profile'], 's')} to "
                        f"{fmt.si(spread['fitted'], 's')} ({fmt.number(spread['change_pct'])} %), beyond the "
                        f"{fmt.number(acceptance.get('tolerance_pct'))} % tolerance")
                   + (fmt.e("; accepted at compile with --accept-fit (recorded in the manifest).")
                      if acceptance.get("accepted") else ".")
                   + ' <a href="#fit">See the emulator fit.</a></div>')
    failed = [(i, c) for i, c in enumerate(checks) if fmt.get(c, "passed") is False]
    if failed:
        items = "".join(f'<li><a href="#check-{i + 1}">{fmt.e(_check_label(c))}</a>: '
                        f"{fmt.e(_comparison(c, fit)['comparison'])}: {fmt.e(_result_text(c))}</li>" for i, c in failed)
        out.append(f'<div class="failed"><h2 id="failed">Failed checks ({len(failed)})</h2><ol>{items}</ol></div>')
    return "\n".join(out)


def _fit_section(fit, figure=None) -> str:
    if not fit:
        return ""
    spread, mean = fit["rms_delay_spread_s"], fit["mean_delay_s"]
    images = fit["update_images"]
    rows = [
        ("delay mapping", f"{fit['delay_mapping']}, delay step {fit['delay_step_samples']} sample(s) at "
                          f"{fmt.si(fit['sample_rate_hz'], 'Hz')}; {fit['n_paths']} path(s)"),
        ("RMS delay spread", f"profile {fmt.si(spread['profile'], 's')} \u2192 fitted {fmt.si(spread['fitted'], 's')}"
                             + ("" if spread["change_pct"] is None else f" ({spread['change_pct']:+.1f} %)")
                             + ("" if spread.get("coefficient_powers") in (None, spread["fitted"]) else
                                f"; coefficient powers {fmt.si(spread['coefficient_powers'], 's')} (the sinc "
                                "windows' interpolation tails included)")),
        ("mean delay", f"profile {fmt.si(mean['profile'], 's')} \u2192 fitted {fmt.si(mean['fitted'], 's')}"),
        ("taps merged", "; ".join(f"taps {', '.join(map(str, m['taps']))} at {fmt.si(m['delay_s'], 's')}"
                                  + (f" ({m['remark']})" if m.get("remark") else "")
                                  for m in fit["taps_merged"]) or "none"),
        ("taps dropped", ", ".join(map(str, fit["taps_dropped"])) or "none"),
        ("power dropped", f"{fmt.number(fit['power_dropped_db'])} dB"),
        ("largest delay error", fmt.si(fit["max_abs_delay_error_s"], "s")),
        ("update images", f"{fmt.number(images['image_to_wanted_db'])} dB of the wanted power "
                          f"({images['between_updates']} at {fmt.si(images['update_rate_hz'], 'Hz')}); droop "
                          f"{fmt.number(images['droop_db'])} dB"),
    ]
    coefficients = fit.get("coefficients")
    if coefficients:
        rows.append(("coefficients", f"{coefficients['bits']} bits per part, "
                                     f"headroom {fmt.number(coefficients['headroom_db'])} dB; "
                                     f"SQNR {fmt.number(coefficients['sqnr_db_model'])} dB (model), "
                                     f"{fmt.number(coefficients['sqnr_db_measured'])} dB measured; "
                                     f"{fmt.number(coefficients['clipped_values'])} value(s) clipped"
                                     + (f" (file {coefficients['file']})" if coefficients.get("file") else "")))
    acceptance = fit.get("acceptance")
    if acceptance:
        verdict = ("within" if acceptance["within_tolerance"] else
                   "beyond it, accepted with --accept-fit" if acceptance["accepted"] else "beyond it")
        rows.append(("fit tolerance", f"{fmt.number(acceptance['tolerance_pct'])} % of the profile's RMS delay "
                                      f"spread: {verdict}"))
    rows += [("note", note) for note in fit.get("notes") or ()]
    out = ['<h2 id="fit">Emulator fit</h2>',
           '<p class="explain">What fitting the profile to the emulator target changed. Checks on the tap gains '
           "compare with the profile; checks on the FIR (its grid, the delivered coefficients) compare with the "
           "fitted channel, and say so.</p>", '<table class="kv">']
    out += [f"<tr><th>{fmt.e(k)}</th><td>{fmt.e(v)}</td></tr>" for k, v in rows]
    out.append("</table>")
    if figure is not None:
        out.append(_figure_html(*figure))
    return "\n".join(out)


def _figure_section(heading, anchor, figure, text) -> str:
    if figure is None and not text:
        return ""
    out = [f'<div class="keep"><h2 id="{anchor}">{fmt.e(heading)}</h2>']
    if text:
        out.append(f'<p class="explain">{fmt.e(text)}</p>')
    if figure is not None:
        out.append(_figure_html(*figure))
    return "\n".join(out) + "</div>"


def _mimo_text(verification) -> str:
    mimo = getattr(verification, "mimo", None)
    if not mimo:
        return ""
    setup = getattr(getattr(verification, "profile", None), "mimo", None)
    described = ""
    if setup is not None:
        try:
            described = f"{setup.n_rx} rx x {setup.n_tx} tx, correlation {correlation_text(setup.correlation)}. "
        except AttributeError:
            described = ""
    return (described + f"{len(mimo['links'])} links ({', '.join(mimo['links'])}). Left: the correlation the "
            "profile asks for; middle: the correlation achieved by one tap's links; right: the largest "
            "|achieved - expected| over every fading tap. " + mimo.get("convention", ""))


def _conditions_text(verification) -> str:
    conditions = getattr(verification, "conditions", None)
    if not conditions:
        return ""
    parts = []
    if "high_speed_train" in conditions:
        taps = conditions["high_speed_train"].get("taps") or []
        parts.append("high-speed train: the direct part's Doppler over the record"
                     + (f" (taps {', '.join(map(str, taps))})" if taps else ""))
    if "moving_delay" in conditions:
        parts.append("moving delay: the common delay offset of every tap")
    if "shadowing" in conditions:
        shadowing = conditions["shadowing"]
        parts.append(f"log-normal shadowing: the gain as written ({shadowing.get('source')}), sigma "
                     f"{fmt.number(shadowing.get('sigma_db'))} dB, hold {shadowing.get('hold')}")
    text = "; ".join(parts)
    return text[:1].upper() + text[1:] + "."


def _take_figures(figures, prefixes):
    """The figures whose title starts with one of ``prefixes`` (one each), and the rest."""
    taken, rest = {}, []
    for title, png in figures:
        prefix = next((p for p in prefixes if title.startswith(p) and p not in taken), None)
        if prefix is None:
            rest.append((title, png))
        else:
            taken[prefix] = (title, png)
    return taken, rest


def _figure_html(title, png) -> str:
    data = base64.b64encode(png).decode("ascii")
    # a narrow figure (one panel) prints two to a page rather than one page each
    narrow = ' class="narrow"' if _png_width(png) < 700 else ""
    return (f'<figure{narrow}><img src="data:image/png;base64,{data}" alt="{fmt.e(title)}">'
            f"<figcaption>{fmt.e(title)}</figcaption></figure>")


def _png_width(png) -> int:
    """Width in pixels from the PNG header (IHDR: bytes 16-19, big-endian); 0 when not a PNG."""
    if len(png) < 24 or png[:8] != b"\x89PNG\r\n\x1a\n":
        return 0
    return int.from_bytes(png[16:20], "big")


def _comparison(check, fit) -> dict:
    return comparison(check, fit)


def _check_line(check, fit=None, *, words=True) -> str:
    """One check in words: label, verdict, the numbers and (``words``) what was compared with what."""
    passed = fmt.get(check, "passed")
    verdict = "pass" if passed is True else "FAIL" if passed is False else "not applicable"
    line = f"{_check_label(check)}: {verdict}; {_result_text(check)}"
    if not words:
        return line
    compared = _comparison(check, fit)
    return f"{line} [compared with the {compared['compared_with']}: {compared['comparison']}]"


def _result_text(check) -> str:
    """Value against expected and tolerance in words; a deviation (expected 0) as a deviation."""
    value, expected = fmt.get(check, "value"), fmt.get(check, "expected")
    tolerance, unit = fmt.get(check, "tolerance"), fmt.get(check, "unit") or ""
    reason = fmt.get(check, "reason") or ""
    unit_text = f" {unit}" if unit else ""
    if value is None:
        return reason or "no value"
    if _is_deviation(check):
        text = f"deviation {fmt.number(value)}{unit_text}, allowed up to {fmt.number(tolerance)}{unit_text}"
    elif expected is None:
        text = f"value {fmt.number(value)}{unit_text}" + (f", allowed up to {fmt.number(tolerance)}{unit_text}"
                                                       if tolerance is not None else "")
    else:
        text = (f"measured {fmt.number(value)}{unit_text} against {fmt.number(expected)}{unit_text}"
                + (f" \u00b1 {fmt.number(tolerance)}" if tolerance is not None else " (not judged)"))
    p_value, level = fmt.get(check, "p_value"), fmt.get(check, "level")
    if p_value is not None:
        text += f"; p = {fmt.number(p_value)} tested at {fmt.number(level)}"
    return text + (f" ({reason})" if reason else "")


def _is_deviation(check) -> bool:
    expected = fmt.get(check, "expected")
    return isinstance(expected, (int, float)) and not isinstance(expected, bool) and expected == 0


def _mark(passed, checks):
    if passed is True:
        return "\u2714", "pass"
    if passed is False:
        return "\u2718", "fail"
    reasons = " ".join((fmt.get(c, "reason") or "") for c in checks).lower()
    return ("\u2013", "na") if "not enough data" not in reasons else ("\u2026", "na")


def _row_css(row) -> str:
    verdicts = [cell["passed"] for cell in row["cells"].values()]
    return "fail" if False in verdicts else "pass" if True in verdicts else "na"


def _worst(checks, indices):
    """The check of ``indices`` closest to its bound (|value - expected| / tolerance), or None."""
    best, worst = -1.0, None
    for i in indices:
        value, expected, tolerance = (fmt.get(checks[i], k) for k in ("value", "expected", "tolerance"))
        if not all(isinstance(x, (int, float)) and not isinstance(x, bool) for x in (value, expected, tolerance)):
            continue
        if tolerance > 0 and abs(value - expected) / tolerance > best:
            best, worst = abs(value - expected) / tolerance, i
    return worst


def _base_name(name: str) -> str:
    return (name.rpartition(": ")[2] if name.startswith("delivered ") else name).split(" [")[0]


_SHORT = {"mean_power": "mean power", "k_factor": "K-factor", "envelope_ks": "envelope (KS)",
          "autocorrelation": "autocorrelation", "doppler_psd": "Doppler PSD", "out_of_band_power": "power beyond f_D",
          "level_crossing_rate": "level crossings", "fade_duration": "fade duration",
          "phase_uniformity": "phase uniformity", "power_beyond_record_band": "power beyond record band"}


def _short(name: str) -> str:
    return _SHORT.get(name, name.replace("_", " "))


def _check_label(check) -> str:
    tap = fmt.get(check, "tap")
    return (fmt.get(check, "name") or "") + ("" if tap is None else f" (tap {fmt.tap_text(tap)})")


def _figures_section(figures) -> str:
    figures = list(figures or ())
    if not figures:
        return '<h2 id="figures">Figures</h2><p>No figures (plots were not asked for).</p>'
    out = ['<h2 id="figures">Figures</h2>',
           '<p class="explain">Measured statistics in colour, theory in black dashes; levels in dB '
           "relative to the RMS envelope the profile promises for the tap.</p>"]
    out += [_figure_html(title, png) for title, png in figures]
    return "\n".join(out)


def _identity_section(identity) -> str:
    """Scalars and nested dicts as key/value rows; a list of records (the files) as its own table."""
    out = ["<h2>Identity of the checked data</h2>", '<table class="kv mono">']
    tables = {k: v for k, v in identity.items() if fmt.is_records(v)}
    rows = list(fmt.flatten({k: v for k, v in identity.items() if k not in tables}))
    if not rows and not tables:
        rows = [("identity", "not recorded")]
    out += [f"<tr><th>{fmt.e(k)}</th><td>{fmt.e(v)}</td></tr>" for k, v in rows]
    out.append("</table>")
    for key, records in tables.items():
        columns = list(dict.fromkeys(c for record in records for c in record))
        out.append(f"<h3>{fmt.e(key)}</h3><table class=\"grid mono\"><tr>"
                   + "".join(f"<th>{fmt.e(c)}</th>" for c in columns) + "</tr>")
        for record in records:
            out.append("<tr>" + "".join(f"<td>{fmt.e(fmt.plain(record.get(c)))}</td>" for c in columns) + "</tr>")
        out.append("</table>")
    return "\n".join(out)


def _cautions_section(run_cautions) -> str:
    out = ["<h2>Cautions</h2>"]
    if run_cautions:
        items = "".join(f"<li>{fmt.e(c)}</li>" for c in run_cautions)
        out.append(f'<h3>From this verification</h3><ul class="cautions run">{items}</ul>')
        out.append("<h3>Always</h3>")
    out.append('<ul class="cautions">' + "".join(f"<li>{fmt.e(c)}</li>" for c in CAUTIONS) + "</ul>")
    return "".join(out)


def _signature_section() -> str:
    line = '<span class="line"></span>'
    return ('<h2>Review</h2><div class="signature">'
            "<p>I have reviewed this report and the data it identifies.</p>"
            f"<p>Name: {line}</p><p>Role: {line}</p><p>Date: {line}</p><p>Signature: {line}</p>"
            "</div>")
