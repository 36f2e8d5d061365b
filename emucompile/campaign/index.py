"""The campaign's index: ``campaign.json`` and ``index.html`` (one self-contained page).

The page has inline CSS only: no script, no image, no external URL; its only
links are relative ones to each case's report (``NAME/verification/report.html``).
Every string from the plan or the records is HTML-escaped. Both files are
written atomically (temporary sibling, fsync, rename).
"""

from __future__ import annotations

import html
import json
from datetime import datetime, timezone
from pathlib import Path

from emucompile._version import __version__
from emucompile.bundle import atomic

INDEX_NAME = "index.html"
JSON_NAME = "campaign.json"
_STATUSES = ("passed", "failed", "error", "not run")
_STATISTICS = (  # record key, column title, scale, format
    ("rms_delay_spread_s", "RMS delay spread (ns)", 1e9, "{:.1f}"),
    ("max_doppler_hz", "max Doppler (Hz)", 1.0, "{:g}"),
)


def write_index(plan, root, records) -> tuple[Path, Path]:
    """Write ``root/campaign.json`` and ``root/index.html`` from the cases' records; return both paths."""
    root = Path(root)
    document = campaign_document(plan, records)
    json_path = root / JSON_NAME
    write_atomic(json_path, json.dumps(document, indent=2, allow_nan=False) + "\n")
    html_path = root / INDEX_NAME
    write_atomic(html_path, render_index(document))
    return html_path, json_path


def campaign_document(plan, records) -> dict:
    """The strict-JSON content of ``campaign.json``: the plan, the summary per axis and every record."""
    counts = {s: sum(r["status"] == s for r in records) for s in _STATUSES}
    return {
        "format": "emucompile-campaign", "format_version": 1, "tool_version": __version__,
        "written_utc": datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ"),
        "plan": {"name": plan.name, "description": plan.description, "source": plan.source,
                 "sha256": plan.sha256, "axes": list(plan.axes)},
        "passed": all(r["status"] == "passed" for r in records), "counts": counts,
        "by_axis": summary_by_axis(plan, records), "cases": list(records),
    }


def summary_by_axis(plan, records) -> dict:
    """Axis -> list of ``{value, cases, passed, failed, error, not run}``, values in plan order."""
    summary = {}
    for axis in ("profile", *plan.axes):
        rows = {}
        for record in records:
            value = record["profile"] if axis == "profile" else record["axes"].get(axis)
            row = rows.setdefault(json.dumps(value), {"value": value, "cases": 0, **{s: 0 for s in _STATUSES}})
            row["cases"] += 1
            row[record["status"]] += 1
        summary[axis] = list(rows.values())
    return summary


def render_index(document: dict) -> str:
    """One self-contained HTML page from :func:`campaign_document`'s content."""
    e = html.escape
    plan, counts, cases = document["plan"], document["counts"], document["cases"]
    verdict = "PASSED" if document["passed"] else "NOT PASSED"
    axes = plan["axes"]
    parts = [
        "<!DOCTYPE html>", '<html lang="en"><head><meta charset="utf-8">',
        f"<title>campaign {e(plan['name'])}: {verdict}</title>", f"<style>{_CSS}</style></head><body>",
        f"<h1>Campaign {e(plan['name'])}</h1>",
        f"<p class=\"{'ok' if document['passed'] else 'bad'}\" id=\"verdict\">{verdict}: {len(cases)} case(s), "
        + ", ".join(f"{counts[s]} {s}" for s in _STATUSES) + "</p>",
        f"<p>{e(plan['description'])}</p>" if plan["description"] else "",
        (f"<p class=\"small\">plan {e(plan['source'])} (sha256 {e(plan['sha256'][:16])}...), written "
         f"{e(document['written_utc'])} by emucompile {e(document['tool_version'])}</p>"),
        "<h2>Summary per axis</h2>",
    ]
    for axis, rows in document["by_axis"].items():
        parts.append(f'<table class="axis"><caption>{e(axis)}</caption><tr><th>value</th><th>cases</th>'
                     + "".join(f"<th>{s}</th>" for s in _STATUSES) + "</tr>")
        for row in rows:
            bad = row["failed"] + row["error"]
            row_class = ' class="badrow"' if bad else ""
            parts.append(f"<tr{row_class}><td>{e(_value_text(row['value']))}</td>"
                         f"<td>{row['cases']}</td>" + "".join(f"<td>{row[s]}</td>" for s in _STATUSES) + "</tr>")
        parts.append("</table>")
    parts.append('<h2>Cases</h2><table id="cases"><tr><th>case</th><th>profile</th>'
                 + "".join(f"<th>{e(a)}</th>" for a in axes)
                 + "<th>verdict</th><th>checks passed / failed / n.a.</th>"
                 + "".join(f"<th>{e(title)}</th>" for _, title, _, _ in _STATISTICS)
                 + "<th>time (s)</th><th>report</th></tr>")
    for record in cases:
        status = record["status"]
        count = record.get("counts")
        checks = f"{count['passed']} / {count['failed']} / {count['not_applicable']}" if count else ""
        statistics = record.get("statistics") or {}
        cells = [f'<td class="name">{e(record["name"])}</td>', f"<td>{e(record['profile'])}</td>"]
        cells += [f"<td>{e(_value_text(record['axes'].get(a)))}</td>" for a in axes]
        note = record.get("message") or ", ".join(record.get("failed_checks") or [])
        cells.append(f'<td class="{_CLASSES[status]}">{e(status)}'
                     + (f'<div class="small">{e(note[:300])}</div>' if note else "") + "</td>")
        cells.append(f"<td>{checks}</td>")
        for key, _, scale, form in _STATISTICS:
            value = statistics.get(key)
            cells.append(f"<td>{'' if value is None else e(form.format(value * scale))}</td>")
        cells.append(f"<td>{record.get('elapsed_s') or 0:.1f}</td>")
        link = record.get("report")
        cells.append(f'<td><a href="{e(link, quote=True)}">report</a></td>' if link else "<td></td>")
        parts.append(f'<tr class="case {_CLASSES[status]}row">' + "".join(cells) + "</tr>")
    parts.append("</table></body></html>\n")
    return "\n".join(p for p in parts if p)


def write_atomic(path: Path, text: str) -> None:
    """Write ``text`` to ``path`` (parents made) atomically (:func:`emucompile.bundle.atomic.write_text_atomic`)."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    atomic.write_text_atomic(path, text)


def _value_text(value) -> str:
    if value is None:
        return "profile's own"
    if isinstance(value, float):
        return f"{value:g}"
    return str(value) if value != "" else "(none)"


_CLASSES = {"passed": "ok", "failed": "bad", "error": "err", "not run": "idle"}
_CSS = """
body{font-family:system-ui,sans-serif;margin:1.5em;color:#222;background:#fff}
table{border-collapse:collapse;margin:0 1.5em 1.2em 0;font-size:.9em}
table.axis{display:inline-table;vertical-align:top}
caption{font-weight:bold;text-align:left;padding:.2em 0}
th,td{border:1px solid #bbb;padding:.25em .5em;text-align:left;vertical-align:top}
th{background:#eee}
.ok{color:#1a6b1a;font-weight:bold}.bad{color:#b00000;font-weight:bold}
.err{color:#8a4b00;font-weight:bold}.idle{color:#666}
tr.badrow td,tr.case.badrow td,tr.case.errrow td{background:#fff0f0}
.small{font-size:.8em;font-weight:normal;color:#444}
td.name{font-family:monospace;white-space:nowrap}
"""


__all__ = ["write_index", "campaign_document", "summary_by_axis", "render_index", "write_atomic"]
