"""The verification report: one self-contained HTML file a reviewer can read, file and sign.

:func:`render_report` builds the page as a string; :func:`write_report` writes
it atomically. The page needs nothing else: the style sheet is inline, the
figures (:func:`emucompile.plots.make_figures`) are embedded as base64
``data:`` URIs, there is no script and no link to anything outside the file,
so it opens the same way offline, years later, on any browser. Every piece of
text that comes from the data (profile name and description, check names,
reasons, hashes) is HTML-escaped.

Sections, in order: the verdict; the foreign-data note (when the gains were
not made by emucompile); the profile and its statistics; the checks table
(verdict, value, expected, tolerance, smallest detectable deviation, unit,
p-value and the level it was tested at); the family-wise false-alarm rate
and what it means; the figures; the bundle's identity (hashes, seed,
versions); the cautions; a signature block.
"""

from __future__ import annotations

import base64
import datetime as _dt
import html
import math
import os
import secrets
from pathlib import Path

from emucompile._version import __version__
from emucompile.bundle import fsync_directory

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
        A verification result (:class:`emucompile.verify.Verification` or an
        object with its attributes): ``checks``, ``passed``, ``false_alarm``,
        ``identity``, ``profile``, ``profile_stats``, ``update_rate_hz``,
        ``records``, ``record_rate_hz``, ``sample_rate_hz``, ``foreign``.
    figures : sequence of (str, bytes)
        Title and PNG bytes of each figure (:func:`emucompile.plots.make_figures`).
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
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{_e(title)}</title>",
        f"<style>{_CSS}</style></head><body>",
        f"<h1>{_e(title)}</h1>",
        f'<p class="meta">Written {_e(created)} by emucompile {_e(__version__)}.</p>',
        _verdict_section(verification, checks),
    ]
    if getattr(verification, "foreign", False):
        parts.append(f'<div class="note"><strong>Foreign data.</strong> {_e(FOREIGN_NOTE)}</div>')
    parts += [
        _profile_section(verification),
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
    """Write ``text`` (UTF-8) to ``path`` through a fsync-ed temporary sibling and a rename; return the path."""
    path = Path(path)
    temporary = path.with_name(f".{path.name}.emucompile-tmp-{os.getpid()}-{secrets.token_hex(4)}")
    try:
        with open(temporary, "w", encoding="utf-8", newline="\n") as stream:
            stream.write(text)
            stream.flush()
            os.fsync(stream.fileno())
        os.replace(temporary, path)
    except BaseException:
        temporary.unlink(missing_ok=True)
        raise
    fsync_directory(path.parent)
    return path


# -- sections ----------------------------------------------------------------------


def _verdict_section(verification, checks) -> str:
    counts = {True: 0, False: 0, None: 0}
    for check in checks:
        counts[_get(check, "passed")] = counts.get(_get(check, "passed"), 0) + 1
    passed = getattr(verification, "passed", None)
    if passed is True:
        banner, css = "PASSED: every applicable check passed", "pass"
    elif passed is False:
        banner, css = "FAILED: at least one check failed", "fail"
    else:
        banner, css = "NO VERDICT", "na"
    summary = (f"{len(checks)} checks: {counts[True]} passed, {counts[False]} failed, "
               f"{counts[None]} not applicable or without enough data.")
    return (f'<div class="verdict {css}">{_e(banner)}</div>'
            f'<p class="summary">{_e(summary)} {_e(_false_alarm_sentence(verification))}</p>')


def _profile_section(verification) -> str:
    profile = verification.profile
    stats = getattr(verification, "profile_stats", None) or {}
    reasons = stats.get("reasons", {}) or {}
    rows = [("profile", getattr(profile, "name", "")),
            ("description", getattr(profile, "description", "") or "")]
    update = getattr(verification, "update_rate_hz", None)
    rows.append(("update rate of the tap gains", _si(update, "Hz")))
    record_rate = getattr(verification, "record_rate_hz", None)
    records = getattr(verification, "records", None) or {}
    if records and record_rate:
        length = max(len(r) for r in records.values())
        rows.append(("records checked", f"{len(records)} at {_si(record_rate, 'Hz')}, "
                                        f"{_si(length / record_rate, 's')} each"))
    sample_rate = getattr(verification, "sample_rate_hz", None)
    rows.append(("signal sample rate (FIR grid)", _si(sample_rate, "Hz") if sample_rate else "none (no FIR map)"))
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
            text = _si(value, unit)
        rows.append((label, text))
    out = ["<h2>Profile</h2>", '<table class="kv">']
    out += [f"<tr><th>{_e(k)}</th><td>{_e(v)}</td></tr>" for k, v in rows]
    out.append("</table>")
    taps = stats.get("taps") or []
    if taps:
        out.append('<h3>Taps</h3><table class="grid"><tr><th>#</th><th>delay</th><th>power (dB)</th>'
                   "<th>fading</th><th>K (dB)</th></tr>")
        for i, tap in enumerate(taps):
            k_db = tap.get("k_db")
            out.append(f"<tr><td>{i}</td><td>{_e(_si(tap.get('delay_s'), 's'))}</td>"
                       f"<td>{_e(_number(tap.get('power_db')))}</td><td>{_e(tap.get('fading', ''))}</td>"
                       f"<td>{_e(_number(k_db)) if k_db is not None else '&ndash;'}</td></tr>")
        out.append("</table>")
    return "\n".join(out)


def _checks_section(verification, checks) -> str:
    head = ("<tr><th>#</th><th>check</th><th>tap</th><th>verdict</th><th>value</th><th>expected</th>"
            "<th>tolerance</th><th>smallest detectable</th><th>unit</th><th>p-value</th>"
            "<th>tested at</th><th>note</th></tr>")
    out = ["<h2>Checks</h2>", f'<p class="explain">{_e(_holm_explanation(verification))}</p>',
           '<table class="grid checks">', head]
    for i, check in enumerate(checks, start=1):
        passed = _get(check, "passed")
        reason = _get(check, "reason") or ""
        if passed is True:
            mark, css = "\u2714 pass", "pass"
        elif passed is False:
            mark, css = "\u2718 FAIL", "fail"
        elif "not enough data" in reason.lower():
            mark, css = "\u2013 not enough data", "na"
        else:
            mark, css = "\u2013 not applicable", "na"
        cells = [
            str(i), _get(check, "name") or "", _tap_text(_get(check, "tap")), mark,
            _number(_get(check, "value")), _number(_get(check, "expected")),
            _number(_get(check, "tolerance"), plus_minus=True), _number(_get(check, "min_detectable")),
            _get(check, "unit") or "", _number(_get(check, "p_value")), _number(_get(check, "level")),
            reason,
        ]
        row = "".join(
            f'<td class="{css}">{_e(c)}</td>' if j == 3 else f"<td>{_e(c)}</td>" for j, c in enumerate(cells)
        )
        out.append(f'<tr class="row-{css}">{row}</tr>')
    out.append("</table>")
    if not checks:
        out.append("<p>No checks were run.</p>")
    return "\n".join(out)


def _figures_section(figures) -> str:
    figures = list(figures or ())
    if not figures:
        return "<h2>Figures</h2><p>No figures (plots were not asked for).</p>"
    out = ["<h2>Figures</h2>",
           '<p class="explain">Measured statistics in colour, theory in black dashes; levels in dB '
           "relative to the RMS envelope the profile promises for the tap.</p>"]
    for title, png in figures:
        data = base64.b64encode(png).decode("ascii")
        out.append(f'<figure><img src="data:image/png;base64,{data}" alt="{_e(title)}">'
                   f"<figcaption>{_e(title)}</figcaption></figure>")
    return "\n".join(out)


def _identity_section(identity) -> str:
    """Scalars and nested dicts as key/value rows; a list of records (the files) as its own table."""
    out = ["<h2>Identity of the checked data</h2>", '<table class="kv mono">']
    tables = {k: v for k, v in identity.items() if _is_records(v)}
    rows = list(_flatten({k: v for k, v in identity.items() if k not in tables}))
    if not rows and not tables:
        rows = [("identity", "not recorded")]
    out += [f"<tr><th>{_e(k)}</th><td>{_e(v)}</td></tr>" for k, v in rows]
    out.append("</table>")
    for key, records in tables.items():
        columns = list(dict.fromkeys(c for record in records for c in record))
        out.append(f"<h3>{_e(key)}</h3><table class=\"grid mono\"><tr>"
                   + "".join(f"<th>{_e(c)}</th>" for c in columns) + "</tr>")
        for record in records:
            out.append("<tr>" + "".join(f"<td>{_e(_plain(record.get(c)))}</td>" for c in columns) + "</tr>")
        out.append("</table>")
    return "\n".join(out)


def _is_records(value) -> bool:
    return isinstance(value, (list, tuple)) and bool(value) and all(isinstance(v, dict) for v in value)


def _cautions_section(run_cautions) -> str:
    out = ["<h2>Cautions</h2>"]
    if run_cautions:
        items = "".join(f"<li>{_e(c)}</li>" for c in run_cautions)
        out.append(f'<h3>From this verification</h3><ul class="cautions run">{items}</ul>')
        out.append("<h3>Always</h3>")
    out.append('<ul class="cautions">' + "".join(f"<li>{_e(c)}</li>" for c in CAUTIONS) + "</ul>")
    return "".join(out)


def _signature_section() -> str:
    line = '<span class="line"></span>'
    return ('<h2>Review</h2><div class="signature">'
            "<p>I have reviewed this report and the data it identifies.</p>"
            f"<p>Name: {line}</p><p>Role: {line}</p><p>Date: {line}</p><p>Signature: {line}</p>"
            "</div>")


# -- text --------------------------------------------------------------------------


def _false_alarm_sentence(verification) -> str:
    rate = getattr(verification, "false_alarm", None)
    if rate is None:
        return ""
    return f"Family-wise false-alarm rate: {_percent(rate)} (Holm)."


def _holm_explanation(verification) -> str:
    rate = getattr(verification, "false_alarm", None)
    rate_text = _percent(rate) if rate is not None else "the stated rate"
    return (
        f"The checks are combined so that the family-wise false-alarm rate is {rate_text}: if the "
        "data follow the profile exactly, the chance that any check in this table fails is at most "
        f"{rate_text}. Holm's step-down method (Holm 1979): the m p-values are sorted from the "
        "smallest; the i-th smallest is compared with the rate divided by (m - i + 1), and testing "
        "stops at the first that is not below its level; every check from there on passes. "
        "\"Tested at\" is the level a check's p-value was compared with. \"Smallest detectable\" "
        "is the deviation this record length can reveal. Checks that cannot be meaningful are "
        "marked not applicable or not enough data, never pass."
    )


def _tap_text(tap) -> str:
    """A check's tap: "all", "3", or "0, 1" for a pair (cross-correlation) or a link."""
    if tap is None:
        return "all"
    if isinstance(tap, (list, tuple)):
        return ", ".join(str(t) for t in tap)
    return str(tap)


def _e(value) -> str:
    return html.escape(str(value), quote=True)


def _get(check, name):
    if isinstance(check, dict):
        return check.get(name)
    return getattr(check, name, None)


def _number(value, *, plus_minus: bool = False) -> str:
    if value is None:
        return "\u2013"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, (list, tuple)):
        return ", ".join(_number(v) for v in value)
    try:
        x = float(value)
    except (TypeError, ValueError):
        return str(value)
    if math.isnan(x):
        return "undefined"
    if math.isinf(x):
        return "\u221e" if x > 0 else "-\u221e"
    text = f"{x:.4g}"
    return f"\u00b1{text}" if plus_minus and x >= 0 else text


def _percent(rate) -> str:
    return f"{100.0 * float(rate):.3g} %"


_PREFIXES = ((1e9, "G"), (1e6, "M"), (1e3, "k"), (1.0, ""), (1e-3, "m"), (1e-6, "\u00b5"), (1e-9, "n"),
             (1e-12, "p"))


def _si(value, unit: str) -> str:
    """4 significant digits with an SI prefix: 157.3 ns, 3.47 MHz; an en dash for None."""
    if value is None:
        return "\u2013"
    value = float(value)
    if value == 0 or not math.isfinite(value):
        return f"{_number(value)} {unit}"
    for scale, prefix in _PREFIXES:
        if abs(value) >= scale * 0.9995:
            return f"{value / scale:.4g} {prefix}{unit}"
    return f"{value:.4g} {unit}"


def _flatten(value, prefix=""):
    """(dotted key, text) pairs of a nested dict, in its order."""
    if isinstance(value, dict):
        for key, item in value.items():
            yield from _flatten(item, f"{prefix}.{key}" if prefix else str(key))
    elif _is_records(value):
        for i, item in enumerate(value):
            yield from _flatten(item, f"{prefix}[{i}]")
    else:
        yield prefix, _plain(value)


def _plain(value) -> str:
    if value is None:
        return "\u2013"
    if isinstance(value, (list, tuple)):
        return ", ".join(map(str, value)) if value else "none"
    return str(value)




_CSS = """
body{font-family:system-ui,-apple-system,"Segoe UI",Roboto,"DejaVu Sans",sans-serif;max-width:1320px;
margin:1.5em auto;padding:0 1em;color:#1a1a1a;line-height:1.45;background:#fff}
h1{font-size:1.6em;margin-bottom:.2em}h2{border-bottom:2px solid #ccd;padding-bottom:.15em;margin-top:1.6em}
.meta{color:#555;margin-top:0}
.verdict{font-size:1.35em;font-weight:bold;padding:.5em .8em;border-radius:6px;margin:.8em 0}
.verdict.pass{background:#e3f4e6;color:#125c24;border:2px solid #2e9e4a}
.verdict.fail{background:#fbe4e4;color:#8b1111;border:2px solid #d03030}
.verdict.na{background:#eee;color:#444;border:2px solid #999}
.note{background:#fff6dc;border-left:5px solid #e0a800;padding:.6em .9em;margin:1em 0}
table{border-collapse:collapse;margin:.6em 0;font-size:.92em}
th,td{border:1px solid #c9cbd3;padding:.28em .55em;text-align:left;vertical-align:top}
th{background:#eef0f5}
table.kv th{width:22em;font-weight:600}
table.mono td{font-family:ui-monospace,"DejaVu Sans Mono",monospace;word-break:break-all}
table.checks{width:100%}
table.checks td:nth-child(n+5):nth-child(-n+11){font-variant-numeric:tabular-nums;text-align:right}
table.checks td:nth-child(3){white-space:nowrap}
table.checks td:last-child{min-width:16em}
td.pass{color:#125c24;font-weight:bold;white-space:nowrap}
td.fail{color:#fff;background:#c62828;font-weight:bold;white-space:nowrap}
td.na{color:#666;white-space:nowrap}
tr.row-fail td{background:#fdecec}tr.row-fail td.fail{background:#c62828}
.explain{color:#333;max-width:70em}
figure{margin:1.2em 0;page-break-inside:avoid}
figure img{max-width:100%;height:auto;border:1px solid #ddd}
figcaption{color:#444;font-size:.92em;margin-top:.2em}
.cautions li{margin:.3em 0}
.signature{border:1px solid #999;padding:.6em 1em;max-width:44em;margin-top:.6em}
.signature p{margin:1.1em 0}
.line{display:inline-block;width:26em;border-bottom:1px solid #333;height:1em;vertical-align:bottom}
@media print{body{max-width:none}h2{page-break-after:avoid}}
""".strip()
