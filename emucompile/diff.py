"""What changed between two profiles (or two bundles' profiles and generation settings).

Both sides are compared *resolved*: presets expanded, powers scaled to the
total, Doppler from speed and carrier worked out, units in SI
(:class:`emucompile.profile.model.Profile`). So a profile built with ``extends:``
and the ``presets show`` expansion of the same preset describe the same
channel even though their texts differ.

What is compared, and what counts:

* **channel** changes (they decide "same channel"): taps added, removed or
  changed (delay, power, fading, K, spectrum, sigma, maximum Doppler, the
  direct part's Doppler and phase, its trajectory), the MIMO links and their
  correlation matrices and direct-part responses, the time-varying conditions.
* **label** changes (listed, never a different channel): name, description,
  how the Doppler was written (speed and carrier or a number), the preset's
  provenance, how a correlation was specified when the matrix is the same.
* **settings** changes: the ``compile:`` block, the ``target:`` block and the
  ``expect:`` targets; for bundles the generation settings (seed, method,
  generator version, rates, length, formats), which decide whether two
  bundles hold the same bytes.

Taps are matched by delay (an optimal assignment minimising the total delay
difference, :func:`scipy.optimize.linear_sum_assignment`); a matched pair
further apart than half the spacing to the tap's nearest neighbour is
reported as one tap removed and one added instead of a move.

Numbers are equal within :data:`DEFAULT_TOLERANCES` (each overridable):
0.01 ns of delay, 0.01 dB of power or K, 0.001 Hz of Doppler, 0.01 degree of
phase, 1e-9 in a correlation coefficient, 1e-9 relative elsewhere. These are
far below what an emulator can set (common practice: delay steps of a
nanosecond or more, power steps of 0.1 dB), and far above the round-off of
resolving the same profile two ways.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, field
from pathlib import Path

from emucompile._lazy import LazyModule
from emucompile.errors import InputError
from emucompile.models import spectra
from emucompile.profile.model import Profile, load_profile, profile_from_document

store = LazyModule("emucompile.bundle.store")  # only for a bundle directory
stats = LazyModule("emucompile.profile.stats")  # numpy: only when statistics are compared

DEFAULT_TOLERANCES = {
    "delay_ns": 0.01,
    "power_db": 0.01,
    "k_db": 0.01,
    "doppler_hz": 0.001,
    "phase_deg": 0.01,
    "correlation": 1e-9,
    "relative": 1e-9,
}
"""Absolute tolerances by quantity (``relative`` for any other number); see the module notes."""

CHANNEL, LABEL, SETTINGS = "channel", "label", "settings"

STATISTICS = (
    ("mean_excess_delay_s", "mean excess delay", "ns", 1e9),
    ("rms_delay_spread_s", "RMS delay spread", "ns", 1e9),
    ("max_excess_delay_s", "max excess delay", "ns", 1e9),
    ("coherence_bandwidth_50_hz", "coherence bandwidth (0.5)", "kHz", 1e-3),
    ("coherence_bandwidth_90_hz", "coherence bandwidth (0.9)", "kHz", 1e-3),
    ("max_doppler_hz", "max Doppler", "Hz", 1.0),
    ("largest_doppler_hz", "largest Doppler (with conditions)", "Hz", 1.0),
    ("rms_doppler_spread_hz", "RMS Doppler spread", "Hz", 1.0),
    ("coherence_time_rule_s", "coherence time (0.423/f_D rule)", "ms", 1e3),
)
"""The statistics shown side by side: key of :func:`emucompile.profile.stats.profile_statistics`, label, unit,
factor."""

BYTES_SETTINGS = ("resolved_profile_sha256", "seed", "method", "generator_version", "update_rate_hz",
                  "n_samples", "periodic", "fir.sample_rate_hz", "fir.delay_mapping", "formats", "target")
"""What must agree for two bundles to hold the same data bytes (on the same platform)."""


@dataclass(frozen=True)
class Change:
    """One difference: ``where`` (``taps[1] delay``, ``mimo correlation[0][1]``, ``compile.seed``),
    ``old`` / ``new`` as text (None for added / removed), ``kind`` channel / label / settings."""

    where: str
    old: str | None
    new: str | None
    kind: str

    def text(self) -> str:
        if self.old is None:
            return f"{self.where}: added: {self.new}"
        if self.new is None:
            return f"{self.where}: removed: {self.old}"
        return f"{self.where}: {self.old} -> {self.new}"

    def to_dict(self) -> dict:
        return {"where": self.where, "old": self.old, "new": self.new, "kind": self.kind}


@dataclass(frozen=True)
class Side:
    """One side of a comparison: the file, whether it is a bundle, its profile, and a bundle's manifest."""

    source: str
    profile: object
    manifest: dict | None = None

    @property
    def kind(self) -> str:
        return "bundle" if self.manifest is not None else "profile"


@dataclass(frozen=True)
class DiffResult:
    """The comparison of two profiles or bundles (:func:`diff_profiles`).

    ``changes`` lists every difference (:class:`Change`); ``same_channel`` is
    true when none is a channel change; ``statistics`` holds
    ``(key, label, unit, a, b)`` rows in SI units; ``same_bytes`` is None
    unless both sides are bundles, then whether they would hold the same
    data bytes, with ``bytes_differences`` naming what stops them.
    """

    a: Side
    b: Side
    changes: tuple
    statistics: tuple
    tolerances: dict
    same_bytes: bool | None = None
    bytes_differences: tuple = ()
    notes: tuple = field(default=())

    @property
    def channel_changes(self) -> tuple:
        return tuple(c for c in self.changes if c.kind == CHANNEL)

    @property
    def same_channel(self) -> bool:
        return not self.channel_changes

    def as_dict(self) -> dict:
        """The JSON form (``diff --json``; docs/json-output.md)."""
        rows = []
        for key, label, _, a, b in self.statistics:
            rows.append({"key": key, "label": label, "a": a, "b": b,
                         "difference": None if a is None or b is None else b - a})
        return {
            "a": {"source": self.a.source, "kind": self.a.kind, "name": self.a.profile.name},
            "b": {"source": self.b.source, "kind": self.b.kind, "name": self.b.profile.name},
            "same_channel": self.same_channel,
            "changes": [c.to_dict() for c in self.changes],
            "statistics": rows,
            "tolerances": dict(self.tolerances),
            "same_bytes": self.same_bytes,
            "bytes_differences": list(self.bytes_differences),
            "notes": list(self.notes),
        }

    to_dict = as_dict

    def summary(self) -> str:
        """The plain-text report of ``emucompile diff``."""
        lines = [f"A: {self.a.source} ({self.a.kind} {self.a.profile.name})",
                 f"B: {self.b.source} ({self.b.kind} {self.b.profile.name})"]
        if self.changes:
            lines.append(f"changes ({len(self.changes)}; {len(self.channel_changes)} of the channel):")
            lines += [f"  [{c.kind}] {c.text()}" for c in self.changes]
        else:
            lines.append("changes: none")
        lines.append(f"{'statistics':<42}{'A':>14}{'B':>14}{'B - A':>14}")
        for key, label, unit, a, b in self.statistics:
            factor = next(f for k, _, _, f in STATISTICS if k == key)
            lines.append(f"  {label + ' (' + unit + ')':<40}{_number(a, factor):>14}{_number(b, factor):>14}"
                         f"{_number(None if a is None or b is None else b - a, factor, signed=True):>14}")
        lines += [f"note: {n}" for n in self.notes]
        if self.same_bytes is not None:
            lines.append("bytes: the two bundles would hold the same data bytes" if self.same_bytes else
                         "bytes: the two bundles would not hold the same data bytes: "
                         + "; ".join(self.bytes_differences))
        tolerance = ", ".join(f"{k} {v:g}" for k, v in self.tolerances.items())
        lines.append(("same channel" if self.same_channel else
                      f"different channel ({len(self.channel_changes)} change(s))")
                     + f" (tolerances: {tolerance})")
        return "\n".join(lines)


def diff_profiles(a, b, *, tolerances: dict | None = None) -> DiffResult:
    """Compare two profiles, bundles, or one of each; see the module notes.

    Parameters
    ----------
    a, b : str, os.PathLike or Profile
        A profile file, a bundle directory (its embedded resolved profile and
        generation settings), or a loaded :class:`~emucompile.profile.model.Profile`.
    tolerances : dict, optional
        Overrides of :data:`DEFAULT_TOLERANCES` by name.

    Raises
    ------
    emucompile.errors.InputError
        A side cannot be read (exit 2), or an unknown tolerance name.

    Examples
    --------
    >>> result = diff_profiles("profiles_demo/port-crane-los.yaml", "profiles_demo/warehouse-robot.yaml")
    >>> result.same_channel, result.changes[0].text()
    (False, 'name: port-crane-los -> warehouse-robot')
    """
    tol = dict(DEFAULT_TOLERANCES)
    for name, value in (tolerances or {}).items():
        if name not in tol:
            raise InputError(f"unknown tolerance {name!r}", hint=f"choose from {', '.join(tol)}")
        if not (isinstance(value, (int, float)) and math.isfinite(value) and value >= 0):
            raise InputError(f"tolerance {name} must be a finite number >= 0, got {value!r}")
        tol[name] = float(value)
    left, right = _side(a), _side(b)
    changes = _Comparer(tol).profiles(left.profile, right.profile)
    notes = []
    same_bytes, bytes_differences = None, ()
    if left.manifest is not None and right.manifest is not None:
        bytes_differences = tuple(_bytes_differences(left.manifest, right.manifest))
        same_bytes = not bytes_differences
        changes += _settings_changes(left.manifest, right.manifest)
    elif left.manifest is not None or right.manifest is not None:
        notes.append("one side is a bundle, the other a profile: only the profiles are compared")
    return DiffResult(a=left, b=right, changes=tuple(changes), statistics=_statistics(left.profile, right.profile),
                      tolerances=tol, same_bytes=same_bytes, bytes_differences=bytes_differences, notes=tuple(notes))


# -- reading a side -------------------------------------------------------------------------------


def _side(source) -> Side:
    if isinstance(source, Profile):
        return Side(source.source or f"<profile {source.name}>", source)
    path = Path(source)
    if path.is_dir():
        manifest = store.open_bundle(path, verify=False).manifest
        profile = profile_from_document(manifest["profile"], source=f"{path}/manifest.json#/profile")
        return Side(str(source), profile, manifest)
    return Side(str(source), load_profile(path))


# -- the comparison -------------------------------------------------------------------------------


class _Comparer:
    def __init__(self, tolerances):
        self.tol = tolerances
        self.changes: list[Change] = []

    def add(self, where, old, new, kind=CHANNEL):
        self.changes.append(Change(where, old, new, kind))

    def number(self, where, old, new, tolerance_name, unit="", scale=1.0, kind=CHANNEL, digits=6):
        """Record a change of a number (None allowed) beyond its tolerance, shown in ``unit`` (value x ``scale``)."""
        if old is None and new is None:
            return
        if old is not None and new is not None:
            if math.isinf(old) or math.isinf(new):
                if old == new:
                    return
            elif abs(new - old) * scale <= self._tolerance(tolerance_name, old, new, scale):
                return
        self.add(where, _value(old, scale, unit, digits), _value(new, scale, unit, digits), kind)

    def _tolerance(self, name, old, new, scale):
        if name == "relative":
            return self.tol["relative"] * max(abs(old), abs(new)) * scale
        return self.tol[name]

    def text(self, where, old, new, kind=CHANNEL):
        if old != new:
            self.add(where, None if old is None else _short(old), None if new is None else _short(new), kind)

    # -- whole profiles --------------------------------------------------------------------------
    def profiles(self, a, b) -> list[Change]:
        self.text("name", a.name, b.name, LABEL)
        self.text("description", a.description, b.description, LABEL)
        self.number("max_doppler_hz (profile)", a.max_doppler_hz, b.max_doppler_hz, "doppler_hz", "Hz", kind=LABEL)
        self.number("speed", a.speed_mps, b.speed_mps, "relative", "km/h", 3.6, kind=LABEL)
        self.number("carrier", a.carrier_hz, b.carrier_hz, "relative", "Hz", kind=LABEL)
        self.number("total_power_db", a.total_power_db, b.total_power_db, "power_db", "dB", kind=LABEL)
        self.taps(a.taps, b.taps)
        self.mimo(a.mimo, b.mimo)
        self.blocks("conditions", _record(a.conditions), _record(b.conditions), CHANNEL)
        self.blocks("preset", _record(a.preset), _record(b.preset), LABEL)
        self.blocks("compile", _plain(a.compile), _plain(b.compile), SETTINGS)
        self.blocks("target", _record(a.target, "to_dict"), _record(b.target, "to_dict"), SETTINGS)
        self.blocks("expect", a.document.get("expect"), b.document.get("expect"), SETTINGS)
        return self.changes

    # -- taps ---------------------------------------------------------------------------------------
    def taps(self, taps_a, taps_b):
        pairs, removed, added = _match_taps(taps_a, taps_b)
        events = [(taps_a[i].delay_s, 0, i, j) for i, j in pairs]
        events += [(taps_a[i].delay_s, 1, i, None) for i in removed]
        events += [(taps_b[j].delay_s, 2, None, j) for j in added]
        for _, what, i, j in sorted(events, key=lambda e: (e[0], e[1])):
            if what == 1:
                self.add(f"taps[{i}] at {_value(taps_a[i].delay_s, 1e9, 'ns')}", _tap_text(taps_a[i]), None)
            elif what == 2:
                self.add(f"taps[{j}] at {_value(taps_b[j].delay_s, 1e9, 'ns')}", None, _tap_text(taps_b[j]))
            else:
                self.tap(taps_a[i], taps_b[j], i, j)

    def tap(self, a, b, i, j):
        name = f"taps[{i}]" if i == j else f"taps[{i}] (B taps[{j}])"
        self.number(f"{name} delay", a.delay_s, b.delay_s, "delay_ns", "ns", 1e9)
        self.number(f"{name} power", a.power_db, b.power_db, "power_db", "dB")
        self.text(f"{name} fading", a.fading, b.fading)
        self.number(f"{name} K", a.k_db, b.k_db, "k_db", "dB")
        if a.fading != "static" or b.fading != "static":
            self.text(f"{name} spectrum", a.spectrum, b.spectrum)
            pa, pb = spectra.parameters_of(a), spectra.parameters_of(b)
            for parameter in spectra.PARAMETERS:  # a Hz parameter within the Doppler tolerance, others relative
                self.number(f"{name} {parameter.label}", pa.get(parameter.name), pb.get(parameter.name),
                            "doppler_hz" if parameter.unit == "Hz" else "relative", parameter.unit)
            self.number(f"{name} max Doppler", a.max_doppler_hz, b.max_doppler_hz, "doppler_hz", "Hz")
        self.number(f"{name} direct-part Doppler", a.los_doppler_hz, b.los_doppler_hz, "doppler_hz", "Hz")
        self.number(f"{name} direct-part phase", a.los_phase_deg, b.los_phase_deg, "phase_deg", "deg")
        self.text(f"{name} direct-part trajectory", a.los_trajectory, b.los_trajectory)
        self.number(f"{name} moving-delay Doppler", a.drift_doppler_hz, b.drift_doppler_hz, "doppler_hz", "Hz")

    # -- MIMO -----------------------------------------------------------------------------------------
    def mimo(self, a, b):
        if a is None and b is None:
            return
        if a is None or b is None:
            self.add("mimo", _links(a), _links(b))
            return
        if (a.n_tx, a.n_rx) != (b.n_tx, b.n_rx):
            self.add("mimo links", _links(a), _links(b))
            return
        ra, rb = a.as_record(), b.as_record()
        for part in ("matrix_real", "matrix_imag"):
            for r, (row_a, row_b) in enumerate(zip(ra["correlation"][part], rb["correlation"][part])):
                for c, (x, y) in enumerate(zip(row_a, row_b)):
                    self.number(f"mimo correlation {part[7:]}[{r}][{c}]", x, y, "correlation", digits=9)
        for part in ("direct_response_real", "direct_response_imag"):
            for link, (x, y) in enumerate(zip(ra[part], rb[part])):
                self.number(f"mimo direct part {part[16:]}[{link}]", x, y, "correlation", digits=9)
        self.blocks("mimo correlation (as written)", ra["correlation"].get("origin"), rb["correlation"].get("origin"),
                    LABEL)

    # -- any block, deeply ------------------------------------------------------------------------------
    def blocks(self, where, a, b, kind):
        if isinstance(a, dict) and isinstance(b, dict):
            for key in sorted(set(a) | set(b), key=str):
                self.blocks(f"{where}.{key}", a.get(key), b.get(key), kind)
        elif isinstance(a, list) and isinstance(b, list) and len(a) == len(b):
            for index, (x, y) in enumerate(zip(a, b)):
                self.blocks(f"{where}[{index}]", x, y, kind)
        elif _is_number(a) and _is_number(b):
            self.number(where, a, b, "relative", kind=kind)
        elif a != b:
            self.add(where, None if a is None else _short(a), None if b is None else _short(b), kind)


def _match_taps(taps_a, taps_b):
    """``(pairs, removed, added)``: taps matched by delay (see the module notes).

    An assignment over A's taps, B's taps and one "unmatched" place for each:
    a pair further apart than half the gap to the tap's nearest neighbour may
    not be made; leaving a tap unmatched costs more than any allowed pair, so
    as many taps as possible are matched, then with the least total delay
    difference; equal delays prefer the same fading, then the same position.
    """
    import numpy as np
    from scipy.optimize import linear_sum_assignment

    n_a, n_b = len(taps_a), len(taps_b)
    if not n_a or not n_b:
        return [], list(range(n_a)), list(range(n_b))
    da = np.array([t.delay_s for t in taps_a])
    db = np.array([t.delay_s for t in taps_b])
    distance = np.abs(da[:, None] - db[None, :])
    window = 0.5 * np.maximum(np.array([_neighbour_gap(da, i) for i in range(n_a)])[:, None],
                              np.array([_neighbour_gap(db, j) for j in range(n_b)])[None, :])
    unit = max(float(distance.max()), 1e-12)
    same_fading = np.array([[ta.fading == tb.fading for tb in taps_b] for ta in taps_a])
    order = np.abs(np.arange(n_a)[:, None] - np.arange(n_b)[None, :])
    cost = distance / unit + np.where(same_fading, 0.0, 1e-6) + order * 1e-9
    forbidden, unmatched = 1e6, 1e3  # a forbidden pair never beats two unmatched taps; any allowed pair does
    cost = np.where(distance <= window, cost, forbidden)
    full = np.zeros((n_a + n_b, n_b + n_a))
    full[:n_a, :n_b] = cost
    full[:n_a, n_b:] = np.where(np.eye(n_a, dtype=bool), unmatched, forbidden)
    full[n_a:, :n_b] = np.where(np.eye(n_b, dtype=bool), unmatched, forbidden)
    rows, cols = linear_sum_assignment(full)
    pairs = [(i, j) for i, j in zip(rows.tolist(), cols.tolist()) if i < n_a and j < n_b and cost[i, j] < forbidden]
    matched_a, matched_b = {i for i, _ in pairs}, {j for _, j in pairs}
    return (sorted(pairs), [i for i in range(n_a) if i not in matched_a], [j for j in range(n_b) if j not in matched_b])


def _neighbour_gap(delays, index):
    """Distance from a tap to its nearest other delay (inf when alone)."""
    others = [abs(d - delays[index]) for k, d in enumerate(delays) if k != index and d != delays[index]]
    return min(others, default=math.inf)


def _statistics(a, b) -> tuple:
    sa, sb = stats.profile_statistics(a), stats.profile_statistics(b)
    return tuple((key, label, unit, sa.get(key), sb.get(key)) for key, label, unit, _ in STATISTICS)


def _settings_changes(ma: dict, mb: dict) -> list[Change]:
    changes = []
    for key in ("seed", "method", "generator_version", "update_rate_hz", "n_samples", "periodic", "formats",
                "tool_version"):
        if ma.get(key) != mb.get(key):
            changes.append(Change(f"bundle {key}", _short(ma.get(key)), _short(mb.get(key)), SETTINGS))
    for key in ("sample_rate_hz", "delay_mapping", "n_fir"):
        x, y = (ma.get("fir") or {}).get(key), (mb.get("fir") or {}).get(key)
        if x != y:
            changes.append(Change(f"bundle fir.{key}", _short(x), _short(y), SETTINGS))
    return changes


def _bytes_differences(ma: dict, mb: dict) -> list[str]:
    """What stops two bundles from holding the same data bytes (empty: they would)."""
    found = []
    for key in BYTES_SETTINGS:
        if key.startswith("fir."):
            x, y = (ma.get("fir") or {}).get(key[4:]), (mb.get("fir") or {}).get(key[4:])
        elif key == "target":
            x, y = (ma.get("target") or {}).get("constraints"), (mb.get("target") or {}).get("constraints")
        else:
            x, y = ma.get(key), mb.get(key)
        if x != y:
            what = "resolved profile" if key == "resolved_profile_sha256" else key
            shown = (f"{str(x)[:12]}... -> {str(y)[:12]}..." if key == "resolved_profile_sha256"
                     else f"{_short(x)} -> {_short(y)}")
            found.append(f"{what} {shown}")
    if (ma.get("platform") or {}) != (mb.get("platform") or {}):
        found.append("made on different platforms or library versions (equal only within the stated tolerance)")
    return found


# -- text ---------------------------------------------------------------------------------------------


def _tap_text(tap) -> str:
    parts = [f"{_value(tap.delay_s, 1e9, 'ns')}", f"{tap.power_db:.4g} dB", tap.fading]
    if tap.fading == "rician":
        parts.append(f"K {tap.k_db:.4g} dB")
    if tap.fading != "static":
        parts.append(f"{tap.spectrum} {_value(tap.max_doppler_hz, 1.0, 'Hz')}")
    return ", ".join(parts)


def _links(setup) -> str:
    return "SISO" if setup is None else f"{setup.n_rx} rx x {setup.n_tx} tx"


def _value(value, scale=1.0, unit="", digits=6) -> str | None:
    if value is None:
        return None
    number = value * scale
    text = f"{number:.{digits}g}"
    return f"{text} {unit}" if unit else text


def _number(value, factor, signed=False) -> str:
    if value is None:
        return "undefined"
    return f"{value * factor:+.5g}" if signed else f"{value * factor:.5g}"


def _short(value) -> str:
    text = value if isinstance(value, str) else json.dumps(value, sort_keys=True, default=str)
    return text if len(text) <= 80 else text[:77] + "..."


def _is_number(value) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool)


def _record(block, method="as_record"):
    return None if block is None else getattr(block, method)()


def _plain(defaults) -> dict:
    from dataclasses import asdict

    return {k: v for k, v in asdict(defaults).items() if v is not None}


__all__ = ["DEFAULT_TOLERANCES", "CHANNEL", "LABEL", "SETTINGS", "Change", "Side", "DiffResult", "diff_profiles"]
