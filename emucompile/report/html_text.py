"""Text of the verification report: numbers, SI prefixes, escaped strings, the Holm sentence, the style sheet.

The small formatting rules the report's sections (:mod:`emucompile.report.html`)
share, so that every number is printed the same way everywhere on the page.
"""

from __future__ import annotations

import html
import math

def false_alarm_sentence(verification) -> str:
    rate = getattr(verification, "false_alarm", None)
    if rate is None:
        return ""
    return f"Family-wise false-alarm rate: {percent(rate)} (Holm)."


def holm_explanation(verification) -> str:
    rate = getattr(verification, "false_alarm", None)
    rate_text = percent(rate) if rate is not None else "the stated rate"
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


def tap_text(tap) -> str:
    """A check's tap: "all", "3", or "0, 1" for a pair (cross-correlation); a pair of one tap (MIMO) is "3"."""
    if tap is None:
        return "all"
    if isinstance(tap, (list, tuple)):
        return str(tap[0]) if len(tap) == 2 and tap[0] == tap[1] else ", ".join(str(t) for t in tap)
    return str(tap)


def e(value) -> str:
    return html.escape(str(value), quote=True)


def get(check, name):
    if isinstance(check, dict):
        return check.get(name)
    return getattr(check, name, None)


def number(value, *, plus_minus: bool = False) -> str:
    if value is None:
        return "\u2013"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, (list, tuple)):
        return ", ".join(number(v) for v in value)
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


def percent(rate) -> str:
    return f"{100.0 * float(rate):.3g} %"


PREFIXES = ((1e9, "G"), (1e6, "M"), (1e3, "k"), (1.0, ""), (1e-3, "m"), (1e-6, "\u00b5"), (1e-9, "n"),
             (1e-12, "p"))


def si(value, unit: str) -> str:
    """4 significant digits with an SI prefix: 157.3 ns, 3.47 MHz; an en dash for None."""
    if value is None:
        return "\u2013"
    value = float(value)
    if value == 0 or not math.isfinite(value):
        return f"{number(value)} {unit}"
    for scale, prefix in PREFIXES:
        if abs(value) >= scale * 0.9995:
            return f"{value / scale:.4g} {prefix}{unit}"
    return f"{value:.4g} {unit}"


def is_records(value) -> bool:
    return isinstance(value, (list, tuple)) and bool(value) and all(isinstance(v, dict) for v in value)


def flatten(value, prefix=""):
    """(dotted key, text) pairs of a nested dict, in its order."""
    if isinstance(value, dict):
        for key, item in value.items():
            yield from flatten(item, f"{prefix}.{key}" if prefix else str(key))
    elif is_records(value):
        for i, item in enumerate(value):
            yield from flatten(item, f"{prefix}[{i}]")
    else:
        yield prefix, plain(value)


def plain(value) -> str:
    if value is None:
        return "\u2013"
    if isinstance(value, (list, tuple)):
        return ", ".join(map(str, value)) if value else "none"
    return str(value)




CSS = """
body{font-family:system-ui,-apple-system,"Segoe UI",Roboto,"DejaVu Sans",sans-serif;max-width:1180px;
margin:1.5em auto;padding:0 1em;color:#1a1a1a;line-height:1.45;background:#fff}
h1{font-size:1.6em;margin-bottom:.2em}h2{border-bottom:2px solid #ccd;padding-bottom:.15em;margin-top:1.6em}
.meta{color:#555;margin-top:0}
.verdict{font-size:1.35em;font-weight:bold;padding:.5em .8em;border-radius:6px;margin:.8em 0}
.verdict.pass{background:#e3f4e6;color:#125c24;border:2px solid #2e9e4a}
.verdict.fail{background:#fbe4e4;color:#8b1111;border:2px solid #d03030}
.verdict.na{background:#eee;color:#444;border:2px solid #999}
.failed{border:2px solid #d03030;border-radius:6px;padding:.2em 1em;margin:.8em 0;background:#fff8f8}
.failed h2{border:none;margin:.4em 0;font-size:1.15em;color:#8b1111}
.failed li{margin:.2em 0;overflow-wrap:anywhere}
.note{background:#fff6dc;border-left:5px solid #e0a800;padding:.6em .9em;margin:1em 0}
table{border-collapse:collapse;margin:.6em 0;font-size:.92em}
th,td{border:1px solid #c9cbd3;padding:.28em .55em;text-align:left;vertical-align:top}
th{background:#eef0f5}
table.kv{max-width:100%}table.kv th{width:16em;font-weight:600}table.kv td{overflow-wrap:anywhere}
table.mono td{font-family:ui-monospace,"DejaVu Sans Mono",monospace;word-break:break-all}
table.matrix{font-size:.85em}
table.matrix td{text-align:center;padding:.15em .35em;min-width:1.6em}
table.matrix td:first-child,table.matrix td:nth-child(2){text-align:left;white-space:nowrap}
table.matrix th.rot{vertical-align:bottom;padding:.3em .2em;height:9.5em}
table.matrix th.rot span{writing-mode:vertical-rl;transform:rotate(180deg);white-space:nowrap;display:inline-block}
table.matrix td.empty{background:#f6f6f8}
table.others{width:100%;table-layout:fixed}
table.others th:first-child{width:13em}table.others th:nth-child(2){width:4.5em}
table.others td{overflow-wrap:anywhere}
td.pass{color:#125c24;font-weight:bold}
td.fail{color:#fff;background:#c62828;font-weight:bold}
td.na{color:#666}
tr.row-fail td:first-child{background:#fdecec}
.explain{color:#333;max-width:70em}
figure{margin:1.2em 0;break-inside:avoid;page-break-inside:avoid}
figure img{max-width:100%;height:auto;border:1px solid #ddd}
figcaption{color:#444;font-size:.92em;margin-top:.2em}
.cautions li{margin:.3em 0}
.signature{border:1px solid #999;padding:.6em 1em;max-width:44em;margin-top:.6em;break-inside:avoid}
.signature p{margin:1.1em 0}
.line{display:inline-block;width:26em;max-width:70%;border-bottom:1px solid #333;height:1em;vertical-align:bottom}
@page{size:A4;margin:14mm 12mm}
@media print{
body{max-width:none;margin:0;padding:0;font-size:10pt}
h2{break-after:avoid;page-break-after:avoid}h3{break-after:avoid}
.verdict,.note,.keep{break-inside:avoid}
tr{break-inside:avoid}thead{display:table-header-group}
figure img{max-height:245mm;width:auto;max-width:100%}figure.narrow img{max-height:112mm}
a{color:inherit;text-decoration:none}
table.mono td{font-size:8pt}
}
""".strip()


__all__ = ["e", "number", "percent", "si", "plain", "flatten", "tap_text", "CSS"]
