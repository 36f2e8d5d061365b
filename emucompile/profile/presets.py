"""Channel models of open standards, as profile documents (docs/profile-format.md).

Twelve tapped-delay-line models, each stored in ``emucompile/data/presets/NAME.yaml``
with its source (document, table, and whether the values were transcribed from
a stored copy of the document or written from memory):

=========  ==========================================  ========================
name       model                                        source
=========  ==========================================  ========================
tdl-a..e   TDL-A ... TDL-E, normalised delays          3GPP TR 38.901 7.7.2
epa/eva/   Extended Pedestrian A, Vehicular A,          3GPP TS 36.101 B.2.1
etu        Typical Urban
ped-a/b,   Pedestrian A/B, Vehicular A/B                ITU-R M.1225 Annex 2
veh-a/b
=========  ==========================================  ========================

Public entry points: :func:`list_presets`, :func:`load_preset`,
:func:`preset_document` (a preset as a profile document, scaled and
overridden), :func:`resolve_extends` (what the profile loader calls for a
profile with ``extends:``).

Choices this module makes, and why
----------------------------------
* **Delay scaling.** A TR 38.901 model's delays are normalised; the profile
  gets ``delay_ns = tau_n * DS`` (TR 38.901 clause 7.7.3), DS the wanted delay
  spread, 100 ns ("nominal", Table 7.7.3-1) when none is asked for. The tables
  are normalised to an RMS delay spread of 1 (TDL-D to 0.994), so the scaled
  profile's RMS delay spread is DS within 1 %. Models with delays in
  nanoseconds (EPA ... Veh-B) are fixed by their standard and refuse
  ``delay_spread_ns``.
* **The line-of-sight tap of TDL-D and TDL-E.** The tables list a direct part
  and a Rayleigh part at the same delay, with the K-factor K1. The document
  gets one Rician tap of power P_direct + P_Rayleigh and
  K = P_direct / P_Rayleigh (``direct_part="rician"``, the default), or a
  static tap beside a Rayleigh tap (``direct_part="static-pair"``). The
  direct part has no Doppler shift unless overridden (``los_doppler_hz: 0``):
  the standard leaves it open.
* **Doppler.** A delay profile has no Doppler of its own, but a profile file
  needs one. Each preset states a default in its data, with the default's
  source: EPA 5 Hz, EVA 70 Hz, ETU 300 Hz (TS 36.104 Annex B.2); the M.1225
  environments' speeds (3 km/h, 120 km/h) at a 2 GHz carrier; 100 Hz for the
  TR 38.901 models (our choice: TR 38.901 gives none). The document's
  ``description`` and its ``preset.doppler`` field say which was used, so
  ``presets show`` prints a valid profile and says where its Doppler came
  from; the caller overrides it with ``max_doppler_hz`` or
  ``speed_kmh``/``speed_mps`` + ``carrier_hz``.
* **Checked against the standard's text.** Each preset's data records one of
  two states (:data:`CHECK_STATES`) in ``standard_check``: ``confirmed``
  (every delay and power compared with the standard's own table; the data
  names document, table and version and a figure the standard prints beside
  the table, recomputed from the rows by the tests) or ``recalled, not
  confirmed`` with the reason (what was searched, what was found).
  ``presets list`` and the README show the state. Simulators' code is never
  a source.
* **Provenance.** The document carries a ``preset`` block (name, data
  version, source, how the values were obtained, the delay spread and the
  Doppler used), which the resolved profile and the bundle manifest keep.

References
----------
.. [TR38901] 3GPP TR 38.901, "Study on channel model for frequencies from 0.5
   to 100 GHz", clause 7.7.2 (Tables 7.7.2-1 to 7.7.2-5) and 7.7.3 (scaling
   of delays, Table 7.7.3-1).
.. [TS36101] 3GPP TS 36.101, "E-UTRA; User Equipment (UE) radio transmission
   and reception", Annex B.2.1 (Tables B.2.1-1 to B.2.1-4).
.. [TS36104] 3GPP TS 36.104 V19.2.0 (2025-12), "E-UTRA; Base Station (BS)
   radio transmission and reception", Annex B.2 (Tables B.2-1 to B.2-3).
.. [M1225] ITU-R Recommendation M.1225 (1997), "Guidelines for evaluation of
   radio transmission technologies for IMT-2000", Annex 2, 1.2.2.
"""

from __future__ import annotations

import copy
import difflib
import math
from dataclasses import dataclass
from typing import Any, Mapping

from emucompile.errors import InputError, Problem, ProfileError
from emucompile.models import spectra
from emucompile.profile.preset_tables import (  # noqa: F401  (re-exported: the tables and their checks)
    CHECK_STATES,
    PRESET_NAMES,
    _CONFIRMED_KEYS,
    Preset,
    PresetRow,
    _check_rows,
    _check_standard_check,
    _load_preset,
    _rms_delay_spread,
    load_preset,
)


DIRECT_PART_FORMS = ("rician", "static-pair")
# Whether a table was compared, delay by delay and power by power, with the standard's own text.

TAP_OVERRIDE_KEYS = (
    "delay_ns",
    "power_db",
    "fading",
    "k_db",
    "los_angle_deg",
    "los_doppler_hz",
    "los_phase_deg",
    "spectrum",
    *spectra.PARAMETER_NAMES,
    "max_doppler_hz",
)

EXTENDS_KEYS = ("preset", "delay_spread_ns", "direct_part", "taps")

_DOPPLER_KEYS = ("max_doppler_hz", "speed_kmh", "speed_mps", "carrier_hz")

@dataclass(frozen=True)
class PresetRecord:
    """One line of :func:`list_presets`.

    ``rms_delay_spread_s`` is that of the profile :func:`preset_document`
    gives by default (normalised models: at ``default_delay_spread_ns``);
    ``normalised_rms_delay_spread`` is the table's own, unitless, for
    normalised models and None otherwise.
    """

    name: str
    title: str
    n_taps: int
    rms_delay_spread_s: float
    normalised: bool
    normalised_rms_delay_spread: float | None
    default_delay_spread_ns: float | None
    source: str
    values: str
    data_version: int
    check_state: str
    check_statement: str

    def to_dict(self) -> dict:
        return dict(self.__dict__)


def list_presets() -> list[PresetRecord]:
    """Every preset with its tap count, RMS delay spread and source.

    Returns
    -------
    list of PresetRecord
        In :data:`PRESET_NAMES` order.

    Examples
    --------
    >>> [r.name for r in list_presets()][:3]
    ['tdl-a', 'tdl-b', 'tdl-c']
    """
    records = []
    for name in PRESET_NAMES:
        preset = load_preset(name)
        rms = preset.rms_delay_spread()
        if preset.normalised:
            rms_s = rms * preset.default_delay_spread_ns * 1e-9
        else:
            rms_s = rms
        records.append(
            PresetRecord(
                name=preset.name,
                title=preset.title,
                n_taps=preset.n_taps,
                rms_delay_spread_s=rms_s,
                normalised=preset.normalised,
                normalised_rms_delay_spread=rms if preset.normalised else None,
                default_delay_spread_ns=preset.default_delay_spread_ns,
                source=preset.short_source,
                values=preset.source["values"],
                data_version=preset.data_version,
                check_state=preset.check_state,
                check_statement=preset.check_statement,
            )
        )
    return records


def preset_document(
    name: str,
    *,
    delay_spread_ns: float | None = None,
    max_doppler_hz: float | None = None,
    speed_kmh: float | None = None,
    speed_mps: float | None = None,
    carrier_hz: float | None = None,
    tap_overrides: Mapping[int, Mapping[str, Any]] | None = None,
    direct_part: str = "rician",
    document_name: str | None = None,
) -> dict:
    """A preset as a profile document (docs/profile-format.md, ``format_version: 1``).

    Parameters
    ----------
    name : str
        Preset name, e.g. ``"tdl-c"``.
    delay_spread_ns : float, optional
        Wanted RMS delay spread of a normalised (TR 38.901) model:
        ``delay_ns = tau_n * delay_spread_ns`` ([TR38901]_ 7.7.3). Defaults to
        the preset's ``default_delay_spread_ns``. Refused for models whose
        delays are fixed in nanoseconds.
    max_doppler_hz : float, optional
        Maximum Doppler of every tap; replaces the preset's default Doppler.
    speed_kmh, speed_mps, carrier_hz : float, optional
        Instead of ``max_doppler_hz``: a speed (one of the two units) and a
        carrier. ``carrier_hz`` alone keeps the preset's default speed.
    tap_overrides : mapping of int to mapping, optional
        Per-tap changes, keyed by the tap's index (0-based) in the returned
        document's ``taps`` list, which keeps the table's order (with
        ``direct_part="rician"``, index = table tap number - 1). Keys are
        those of the profile format's taps (:data:`TAP_OVERRIDE_KEYS`). Changing
        ``fading`` drops the keys that no longer apply (``k_db`` and ``los_*``
        when a tap stops being Rician, ``spectrum`` when it becomes static);
        setting ``los_angle_deg`` drops ``los_doppler_hz`` and the reverse.
    direct_part : {"rician", "static-pair"}
        How the line-of-sight tap of TDL-D/TDL-E is written (module notes).
    document_name : str, optional
        The document's ``name``; the preset's name by default.

    Returns
    -------
    dict
        ``format_version``, ``name``, ``description``, the Doppler keys,
        ``total_power_db`` (0), ``taps`` and the provenance block ``preset``.

    Raises
    ------
    emucompile.errors.InputError
        One line per problem found (unknown preset, bad number, bad override).

    Examples
    --------
    >>> doc = preset_document("tdl-c", delay_spread_ns=300)
    >>> doc["taps"][1]["delay_ns"], doc["max_doppler_hz"]
    (62.97, 100)
    """
    preset = load_preset(name)
    request = {
        "delay_spread_ns": delay_spread_ns,
        "max_doppler_hz": max_doppler_hz,
        "speed_kmh": speed_kmh,
        "speed_mps": speed_mps,
        "carrier_hz": carrier_hz,
    }
    document, problems = _build_document(
        preset,
        request,
        tap_overrides or {},
        direct_part,
        document_name,
        pointers=_ARGUMENT_POINTERS,
    )
    if problems:
        raise InputError("; ".join(f"{where}: {message}" for where, message, _ in problems))
    return document


def resolve_extends(document: Mapping[str, Any], *, source: str = "<profile>") -> dict:
    """Resolve a profile document's ``extends:`` block into a full profile document.

    Parameters
    ----------
    document : mapping
        A parsed profile with an ``extends`` key, either a preset name or a
        mapping ``{preset, delay_spread_ns, direct_part, taps}`` where
        ``taps`` is a list of overrides ``{index: i, <tap keys>...}``. The
        Doppler keys (``max_doppler_hz`` or ``speed_kmh``/``speed_mps`` +
        ``carrier_hz``) stay at the top level, as in any profile, and replace
        the preset's default. Every other top-level key (``name``,
        ``description``, ``total_power_db``, ``compile``, ``mimo``, ...) is
        kept as written. A top-level ``taps`` is an error.
    source : str
        The file's name, for the problems reported.

    Returns
    -------
    dict
        The resolved document: the user's keys, the preset's taps with the
        overrides applied, and the provenance block ``preset``; no
        ``extends``. Feeding it back to the loader gives the same profile.

    Raises
    ------
    emucompile.errors.ProfileError
        Listing every problem with its JSON pointer (``/extends/taps/1/k_db``).
    """
    problems: list[Problem] = []

    def report(pointer, message, hint=None):
        problems.append(Problem(file=source, pointer=pointer, message=message, hint=hint))

    extends = document.get("extends")
    if isinstance(extends, str):
        extends = {"preset": extends}
    if not isinstance(extends, Mapping):
        report("/extends", "extends must be a preset name or a mapping with 'preset'")
        raise ProfileError(problems)
    for key in extends:
        if key not in EXTENDS_KEYS:
            report(f"/extends/{key}", f"unknown key {key!r}", hint=f"allowed: {', '.join(EXTENDS_KEYS)}")
    if "taps" in document:
        report("/taps", "a profile with extends takes its taps from the preset",
               hint="change taps with extends: {taps: [{index: 0, ...}]}")
    name = extends.get("preset")
    if name not in PRESET_NAMES:
        close = difflib.get_close_matches(str(name), PRESET_NAMES, n=3)
        report("/extends/preset", f"unknown preset {name!r}",
               hint=f"did you mean {', '.join(close)}?" if close else f"known: {', '.join(PRESET_NAMES)}")
    overrides: dict[int, Mapping[str, Any]] = {}
    override_pointers: dict[int, str] = {}
    raw_overrides = extends.get("taps", [])
    if not isinstance(raw_overrides, list):
        report("/extends/taps", "taps must be a list of {index: i, ...} overrides")
        raw_overrides = []
    for position, entry in enumerate(raw_overrides):
        pointer = f"/extends/taps/{position}"
        if not isinstance(entry, Mapping) or "index" not in entry:
            report(pointer, "an override needs 'index' (the tap's position, 0-based)")
            continue
        index = entry["index"]
        if not isinstance(index, int) or isinstance(index, bool):
            report(f"{pointer}/index", f"index must be an integer, got {index!r}")
            continue
        if index in overrides:
            report(f"{pointer}/index", f"tap {index} is overridden twice")
            continue
        overrides[index] = {k: v for k, v in entry.items() if k != "index"}
        override_pointers[index] = pointer
    if problems:
        raise ProfileError(problems)

    request = {key: document.get(key) for key in _DOPPLER_KEYS}
    request["delay_spread_ns"] = extends.get("delay_spread_ns")
    pointers = dict(_DOCUMENT_POINTERS)
    pointers.update({("tap", i): p for i, p in override_pointers.items()})
    resolved_preset, found = _build_document(
        load_preset(name),
        request,
        overrides,
        extends.get("direct_part", "rician"),
        document.get("name"),
        pointers=pointers,
    )
    for pointer, message, hint in found:
        report(pointer, message, hint)
    if problems:
        raise ProfileError(problems)

    resolved = {key: copy.deepcopy(value) for key, value in document.items() if key != "extends"}
    for key in _DOPPLER_KEYS:
        resolved.pop(key, None)
    for key in ("description", "total_power_db"):
        if key not in resolved:
            resolved[key] = resolved_preset[key]
    for key in _DOPPLER_KEYS + ("taps", "preset"):
        if key in resolved_preset:
            resolved[key] = resolved_preset[key]
    return resolved


# -- helpers ---------------------------------------------------------------------

_ARGUMENT_POINTERS = {
    "delay_spread_ns": "delay_spread_ns",
    "max_doppler_hz": "max_doppler_hz",
    "speed_kmh": "speed_kmh",
    "speed_mps": "speed_mps",
    "carrier_hz": "carrier_hz",
    "direct_part": "direct_part",
    "taps": "tap_overrides",
}

_DOCUMENT_POINTERS = {
    "delay_spread_ns": "/extends/delay_spread_ns",
    "max_doppler_hz": "/max_doppler_hz",
    "speed_kmh": "/speed_kmh",
    "speed_mps": "/speed_mps",
    "carrier_hz": "/carrier_hz",
    "direct_part": "/extends/direct_part",
    "taps": "/extends/taps",
}

def _build_document(preset, request, overrides, direct_part, document_name, *, pointers):
    """The profile document of ``preset`` and the list of (pointer, message, hint) problems."""
    problems = []

    def where(key):
        return pointers.get(key, key)

    for key, value in request.items():
        if value is not None and not _positive_number(value):
            problems.append((where(key), f"{key} must be a finite number > 0, got {value!r}", None))
    if direct_part not in DIRECT_PART_FORMS:
        problems.append((where("direct_part"), f"direct_part must be one of {DIRECT_PART_FORMS}, got {direct_part!r}",
                         None))
        direct_part = "rician"

    # -- delays
    delay_spread_ns = request["delay_spread_ns"]
    if preset.normalised:
        if delay_spread_ns is None or not _positive_number(delay_spread_ns):
            delay_spread_ns = preset.default_delay_spread_ns
        scale_ns = float(delay_spread_ns)
    else:
        if request["delay_spread_ns"] is not None:
            problems.append((
                where("delay_spread_ns"),
                f"preset {preset.name} has delays fixed in nanoseconds by {preset.short_source}; "
                "delay_spread_ns scales the normalised TR 38.901 models only",
                "use tdl-a ... tdl-e for a scalable model",
            ))
        delay_spread_ns = None
        scale_ns = 1.0

    taps = _taps_from_rows(preset, scale_ns, direct_part)
    taps = _apply_overrides(taps, overrides, problems, pointers)

    # -- Doppler
    doppler, doppler_note = _doppler_keys(preset, request, problems, where)

    description = f"{preset.title}: {preset.short_source}."
    if preset.normalised:
        description += (
            f" Normalised delays scaled to an RMS delay spread of {delay_spread_ns:g} ns"
            " (tau = tau_n * DS, TR 38.901 clause 7.7.3)."
        )
    description += f" Doppler: {doppler_note}."
    if preset.has_direct_part:
        description += (
            " Tap 1 is the table's line-of-sight tap: "
            + ("one Rician tap (power of both parts, K = K1)." if direct_part == "rician"
               else "a static tap beside a Rayleigh tap at the same delay.")
        )
    document = {
        "format_version": 1,
        "name": document_name if document_name is not None else preset.name,
        "description": description,
        **doppler,
        "total_power_db": 0,
        "taps": taps,
        "preset": {
            "name": preset.name,
            "data_version": preset.data_version,
            "source": preset.short_source,
            "values": preset.source["values"],
            "delay_spread_ns": delay_spread_ns,
            "direct_part": direct_part if preset.has_direct_part else None,
            "doppler": doppler_note,
        },
    }
    return document, problems


def _taps_from_rows(preset, scale_ns, direct_part):
    """Profile-format taps (docs/profile-format.md) from the table rows, in the table's order."""
    taps = []
    by_tap: dict[int, list[PresetRow]] = {}
    for row in preset.rows:
        by_tap.setdefault(row.tap, []).append(row)
    for rows in by_tap.values():  # first-appearance order = the table's order
        delay_ns = _delay_ns(rows[0].delay, scale_ns, preset.normalised)
        direct = [r for r in rows if r.part == "direct"]
        diffuse = [r for r in rows if r.part == "rayleigh"]
        if not direct:
            taps.append(_rayleigh_tap(delay_ns, diffuse[0].power_db, preset.spectrum))
        elif direct_part == "rician":
            p_direct = 10.0 ** (direct[0].power_db / 10.0)
            p_diffuse = 10.0 ** (diffuse[0].power_db / 10.0)
            taps.append({
                "delay_ns": delay_ns,
                "power_db": round(10.0 * math.log10(p_direct + p_diffuse), 10),
                "fading": "rician",
                "k_db": round(direct[0].power_db - diffuse[0].power_db, 10),
                "los_doppler_hz": 0.0,
                "spectrum": preset.spectrum,
            })
        else:
            taps.append({"delay_ns": delay_ns, "power_db": direct[0].power_db,
                         "fading": "static", "los_doppler_hz": 0.0})
            taps.append(_rayleigh_tap(delay_ns, diffuse[0].power_db, preset.spectrum))
    return taps


def _rayleigh_tap(delay_ns, power_db, spectrum):
    return {"delay_ns": delay_ns, "power_db": power_db, "fading": "rayleigh", "spectrum": spectrum}


def _delay_ns(delay, scale_ns, normalised):
    if not normalised:
        return delay
    # Round to a femtosecond: keeps printed files clean (62.97, not 62.970000000000006)
    # and changes no delay statistic measurably.
    return round(delay * scale_ns, 6)


# Keys that belong to one fading kind only; dropped when an override changes the kind.


_FADING_ONLY_KEYS = {
    "rayleigh": ("k_db", "los_angle_deg", "los_doppler_hz", "los_phase_deg"),
    "static": ("k_db", "spectrum", *spectra.PARAMETER_NAMES),
    "rician": (),
}

def _apply_overrides(taps, overrides, problems, pointers):
    taps = [dict(tap) for tap in taps]
    for index in sorted(overrides):
        changes = overrides[index]
        base = pointers.get(("tap", index), f"{pointers.get('taps', 'taps')}[{index}]")
        if not 0 <= index < len(taps):
            problems.append((base, f"tap index {index} is out of range (the preset has taps 0 to {len(taps) - 1})",
                             None))
            continue
        if not isinstance(changes, Mapping):
            problems.append((base, "an override must be a mapping of tap keys", None))
            continue
        unknown = [k for k in changes if k not in TAP_OVERRIDE_KEYS]
        for key in unknown:
            problems.append((f"{base}/{key}", f"unknown tap key {key!r}", f"allowed: {', '.join(TAP_OVERRIDE_KEYS)}"))
        if unknown:
            continue
        tap = taps[index]
        new_fading = changes.get("fading", tap.get("fading", "rayleigh"))
        if new_fading in _FADING_ONLY_KEYS and new_fading != tap.get("fading"):
            for key in _FADING_ONLY_KEYS[new_fading]:
                if key not in changes:
                    tap.pop(key, None)
        if "los_angle_deg" in changes:
            tap.pop("los_doppler_hz", None)
        if "los_doppler_hz" in changes:
            tap.pop("los_angle_deg", None)
        if "spectrum" in changes:  # drop the parameters the new kind does not take
            kind = spectra.SPECTRA.get(changes["spectrum"])
            for key in spectra.PARAMETER_NAMES:
                if key not in changes and (kind is None or key not in kind.parameter_names):
                    tap.pop(key, None)
        tap.update(copy.deepcopy(dict(changes)))
        if tap.get("fading") == "rician":
            if "k_db" not in tap:
                problems.append((base, f"tap {index} is Rician but has no k_db", "add k_db to the override"))
            if "los_angle_deg" not in tap and "los_doppler_hz" not in tap:
                problems.append((base, f"tap {index} is Rician but has neither los_angle_deg nor los_doppler_hz", None))
            tap.setdefault("spectrum", spectra.DEFAULT_KIND)
        elif tap.get("fading") == "rayleigh":
            tap.setdefault("spectrum", spectra.DEFAULT_KIND)
        kind = spectra.SPECTRA.get(tap.get("spectrum"))
        for key in kind.parameter_names if kind is not None and tap.get("fading") != "static" else ():
            if key not in tap:
                problems.append((base, f"tap {index} has a {kind.name} spectrum but no {key}", None))
        taps[index] = tap
    return taps


def _doppler_keys(preset, request, problems, where):
    """The document's Doppler keys and a sentence saying where they came from."""
    given = {k: request[k] for k in ("max_doppler_hz", "speed_kmh", "speed_mps", "carrier_hz")
             if request[k] is not None}
    default = preset.default_doppler
    if not given:
        keys = {k: v for k, v in default.items() if k != "source"}
        return keys, f"{_doppler_phrase(keys)}, the preset's default ({default['source']})"
    if "max_doppler_hz" in given:
        clash = [k for k in given if k != "max_doppler_hz"]
        if clash:
            problems.append((where(clash[0]),
                             f"give max_doppler_hz or speed + carrier_hz, not both ({', '.join(given)})", None))
        requested = given["max_doppler_hz"]
        return {"max_doppler_hz": requested}, f"max_doppler_hz {requested:g} Hz as requested"
    if "speed_kmh" in given and "speed_mps" in given:
        problems.append((where("speed_mps"), "give speed_kmh or speed_mps, not both", None))
    speed_key = "speed_kmh" if "speed_kmh" in given else ("speed_mps" if "speed_mps" in given else None)
    if speed_key is None:
        # carrier_hz alone: keep the preset's own speed, if it has one.
        speed_key = next((k for k in ("speed_kmh", "speed_mps") if k in default), None)
        if speed_key is None:
            problems.append((where("carrier_hz"), "carrier_hz needs speed_kmh or speed_mps", None))
            return {"carrier_hz": given["carrier_hz"]}, "incomplete"
        keys = {speed_key: default[speed_key], "carrier_hz": given["carrier_hz"]}
        return keys, f"{_doppler_phrase(keys)} (the preset's default speed, the requested carrier)"
    if "carrier_hz" not in given:
        problems.append((where(speed_key), f"{speed_key} needs carrier_hz", None))
        return {speed_key: given[speed_key]}, "incomplete"
    keys = {speed_key: given[speed_key], "carrier_hz": given["carrier_hz"]}
    return keys, f"{_doppler_phrase(keys)} as requested"


def _doppler_phrase(keys):
    if "max_doppler_hz" in keys:
        return f"max_doppler_hz {keys['max_doppler_hz']:g} Hz"
    speed_key = "speed_kmh" if "speed_kmh" in keys else "speed_mps"
    unit = "km/h" if speed_key == "speed_kmh" else "m/s"
    return f"{keys[speed_key]:g} {unit} at carrier {keys['carrier_hz']:g} Hz"


def _positive_number(value) -> bool:
    return (
        isinstance(value, (int, float))
        and not isinstance(value, bool)
        and math.isfinite(value)
        and value > 0
    )


__all__ = [
    "PRESET_NAMES",
    "CHECK_STATES",
    "DIRECT_PART_FORMS",
    "TAP_OVERRIDE_KEYS",
    "EXTENDS_KEYS",
    "Preset",
    "PresetRow",
    "PresetRecord",
    "list_presets",
    "load_preset",
    "preset_document",
    "resolve_extends",
]
