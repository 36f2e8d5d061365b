"""Generators of valid profiles and of hostile mutations of them (hypothesis strategies), and the judge.

Used by tests/test_properties.py (a bounded number of examples, fixed seeds)
and tools/fuzz_hostile.py (thousands). A profile goes through ``validate``,
``stats`` and, when valid, a tiny ``compile``; the tool must answer with
exit 0, 1 or 2 and one-line messages: never a traceback or "internal error".
"""

from __future__ import annotations

import json

from hypothesis import strategies as st

EXTREME_NUMBERS = [1e308, -1e308, 1e-320, -1e-320, 2**70, -(2**70), 0, -1, 1e-9, 5e-324, 10**400, -0.0,
                   float("nan"), float("inf"), 1e15, 123456789012345678901234567890]
FADINGS = ["rayleigh", "rician", "static"]
SPECTRA = ["classical", "flat", "gaussian"]
TOP_KEYS = ["format_version", "name", "description", "max_doppler_hz", "speed_kmh", "carrier_hz", "total_power_db",
            "taps", "compile", "expect", "mimo", "conditions", "target", "extends"]


@st.composite
def taps(draw):
    fading = draw(st.sampled_from(FADINGS))
    tap = {"delay_ns": draw(st.floats(0, 5000, allow_nan=False).map(lambda x: round(x, 1))),
           "power_db": draw(st.floats(-40, 0).map(lambda x: round(x, 2)))}
    if fading != "rayleigh":
        tap["fading"] = fading
    if fading == "rician":
        tap["k_db"] = draw(st.floats(-10, 20).map(lambda x: round(x, 1)))
        tap["los_angle_deg"] = draw(st.floats(0, 180).map(lambda x: round(x, 1)))
    if fading == "static" and draw(st.booleans()):
        tap["los_doppler_hz"] = draw(st.floats(-5, 5).map(lambda x: round(x, 2)))
    if fading != "static" and draw(st.booleans()):
        spectrum = draw(st.sampled_from(SPECTRA))
        tap["spectrum"] = spectrum
        if spectrum == "gaussian":
            tap["sigma_hz"] = draw(st.floats(1, 10).map(lambda x: round(x, 2)))
    return tap


@st.composite
def valid_profiles(draw):
    """Profiles meant to be valid (a few may not be: the checks decide; never a crash)."""
    document = {"format_version": 1, "name": draw(st.from_regex(r"[a-z][a-z0-9._-]{0,12}", fullmatch=True)),
                "max_doppler_hz": draw(st.floats(10, 300).map(lambda x: round(x, 1))),
                "taps": draw(st.lists(taps(), min_size=1, max_size=6))}
    if draw(st.booleans()):
        document["compile"] = {"seed": draw(st.integers(0, 2**64 - 1)),
                               "update_rate_hz": draw(st.sampled_from([None, 2000, 5000]))}
        if document["compile"]["update_rate_hz"] is None:
            del document["compile"]["update_rate_hz"]
    if draw(st.booleans()):
        document["expect"] = {"rms_delay_spread_ns": {"value": draw(st.floats(0, 2000).map(round)),
                                                      "tolerance_pct": draw(st.sampled_from([1, 50, 1e308]))}}
    if draw(st.integers(0, 4)) == 0:
        document["mimo"] = {"n_tx": 2, "n_rx": 2, "correlation": {"level": draw(st.sampled_from(["low", "medium"])),
                                                                  "specification": "ts36101"}}
    return document


def _paths(value, prefix=()):
    """Every (path, value) inside a document."""
    yield prefix, value
    if isinstance(value, dict):
        for key, item in value.items():
            yield from _paths(item, (*prefix, key))
    elif isinstance(value, list):
        for index, item in enumerate(value):
            yield from _paths(item, (*prefix, index))


def _replace(document, path, value):
    if not path:
        return value
    where = document
    for key in path[:-1]:
        where = where[key]
    where[path[-1]] = value
    return document


def _deep(depth):
    value = 1
    for _ in range(depth):
        value = [value]
    return value


@st.composite
def mutations(draw, document):
    """One to three hostile changes of ``document`` (a deep copy is changed)."""
    document = json.loads(json.dumps(document))
    for _ in range(draw(st.integers(1, 3))):
        places = list(_paths(document))
        path, value = draw(st.sampled_from(places))
        kind = draw(st.sampled_from(["extreme", "type", "drop", "misspell", "huge list", "deep", "negative delay",
                                     "string number", "unknown key"]))
        if kind == "extreme":
            document = _replace(document, path, draw(st.sampled_from(EXTREME_NUMBERS)))
        elif kind == "type":
            document = _replace(document, path, draw(st.sampled_from([None, True, "text", [], {}, [1, 2], {"a": 1}])))
        elif kind == "drop" and path:
            parent = _replace(document, (), document)
            for key in path[:-1]:
                parent = parent[key]
            del parent[path[-1]]
        elif kind == "misspell" and path and isinstance(path[-1], str):
            parent = document
            for key in path[:-1]:
                parent = parent[key]
            parent[path[-1][:-1] + "x" if len(path[-1]) > 1 else "x"] = parent.pop(path[-1])
        elif kind == "huge list":
            document = _replace(document, path, [value] * draw(st.sampled_from([1025, 5000])))
        elif kind == "deep":
            document = _replace(document, path, _deep(draw(st.sampled_from([50, 70, 1000]))))
        elif kind == "negative delay" and isinstance(document, dict) and isinstance(document.get("taps"), list):
            for tap in document["taps"]:
                if isinstance(tap, dict):
                    tap["delay_ns"] = draw(st.sampled_from([-1, -1e308, -1e-320]))
        elif kind == "string number" and isinstance(value, (int, float)) and not isinstance(value, bool):
            document = _replace(document, path, str(value))
        elif kind == "unknown key" and isinstance(value, dict):
            value[draw(st.sampled_from(["taps", "delay_ns", "speed", "k_db", "x" * 2000]))] = 1
    return document


def _text(document, form):
    """The document as JSON or YAML-flow text; numbers JSON has no spelling for are written as YAML does."""
    def default(value):
        raise TypeError

    text = json.dumps(document, allow_nan=True, default=default)
    if form == "yaml":
        text = text.replace("NaN", ".nan").replace("-Infinity", "-.inf").replace("Infinity", ".inf")
    return text


@st.composite
def hostile_profile_texts(draw):
    """``(suffix, bytes)``: a valid profile, possibly mutated, possibly with corrupt bytes or a BOM."""
    document = draw(valid_profiles())
    if draw(st.integers(0, 3)) > 0:
        document = draw(mutations(document))
    form = draw(st.sampled_from(["yaml", "json"]))
    data = _text(document, form).encode("utf-8")
    corruption = draw(st.sampled_from(["none", "none", "bom", "bytes", "truncate", "utf16", "nul"]))
    if corruption == "bom":
        data = b"\xef\xbb\xbf" + data
    elif corruption == "bytes" and data:
        at = draw(st.integers(0, len(data) - 1))
        data = data[:at] + draw(st.binary(min_size=1, max_size=4)) + data[at + 1:]
    elif corruption == "truncate":
        data = data[: draw(st.integers(0, len(data)))]
    elif corruption == "utf16":
        data = data.decode("utf-8").encode("utf-16")
    elif corruption == "nul":
        data = data + b"\x00"
    return "." + form, data


def judge_result(command, code, stderr) -> str | None:
    """What is wrong with one command's answer (None: fine)."""
    if code not in (0, 1, 2):
        return f"{command}: exit {code}: {stderr.strip().splitlines()[-1:] if stderr else ''}"
    if "Traceback" in stderr or "internal error" in stderr:
        return f"{command}: {stderr.strip().splitlines()[-1:]}"
    return None


def check_profile_text(path, scratch, invoke) -> list[str]:
    """validate, stats, and (when valid) a tiny compile of the profile at ``path``: every problem found.

    ``invoke(args) -> (code, stdout, stderr)`` runs the command line (in process or not).
    """
    problems = []
    code, _, stderr = invoke(["validate", path])
    problems.append(judge_result("validate", code, stderr))
    valid = code == 0
    code, _, stderr = invoke(["stats", path])
    problems.append(judge_result("stats", code, stderr))
    if valid:
        out = scratch / "bundle"
        code, _, stderr = invoke(["compile", path, "-o", out, "--duration", "0.02", "--max-size", "20MiB",
                                  "--quiet", "--force"])
        problems.append(judge_result("compile", code, stderr))
    return [p for p in problems if p]


__all__ = ["valid_profiles", "mutations", "hostile_profile_texts", "judge_result", "check_profile_text",
           "EXTREME_NUMBERS"]
