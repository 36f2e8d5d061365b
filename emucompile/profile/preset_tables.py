"""The standards' delay tables behind the presets, as stored in ``emucompile/data/presets/NAME.yaml``.

:func:`load_preset` reads one table with its provenance (document, table,
version, how the values were obtained, :data:`CHECK_STATES`) and checks its rows;
:mod:`emucompile.profile.presets` turns a table into a profile document. The
sources and the choices made are in that module's notes and References.
"""

from __future__ import annotations

import difflib
import functools
from dataclasses import dataclass
from importlib import resources

from emucompile._lazy import LazyModule
from emucompile.errors import InputError

# numpy on first use: reading a preset's table needs none, its statistics do.
delays_module = LazyModule("emucompile.models.delays")


PRESET_NAMES = (
    "tdl-a",
    "tdl-b",
    "tdl-c",
    "tdl-d",
    "tdl-e",
    "epa",
    "eva",
    "etu",
    "ped-a",
    "ped-b",
    "veh-a",
    "veh-b",
)

CHECK_STATES = ("confirmed", "recalled, not confirmed")

_CONFIRMED_KEYS = ("document", "table", "version", "compared", "published_figure")

# The per-tap keys of the profile format (docs/profile-format.md) that an override may set.

@dataclass(frozen=True)
class PresetRow:
    """One row of a standard's table, as printed.

    ``tap`` is the table's tap number (1-based); ``delay`` is normalised
    (TR 38.901) or in nanoseconds; ``part`` is ``"rayleigh"`` or ``"direct"``
    (the line-of-sight part of TDL-D/TDL-E tap 1).
    """

    tap: int
    delay: float
    power_db: float
    part: str


@dataclass(frozen=True)
class Preset:
    """A standard's delay profile as stored in ``emucompile/data/presets/NAME.yaml``.

    Attributes
    ----------
    name, title : str
    data_version : int
        Changes whenever the stored numbers change.
    source : dict
        ``document``, ``table``, ``values`` ("transcribed", "transcribed at
        second hand" or "from memory"), ``values_note``, optionally ``clause``.
    normalised : bool
        True when delays are normalised (multiply by the wanted delay spread).
    spectrum : str
        Doppler spectrum of every tap.
    rows : tuple of PresetRow
        The table, in its own order (delays not sorted).
    k1_db : float or None
        The table's K-factor of tap 1 (TDL-D, TDL-E).
    default_delay_spread_ns : float or None
        Normalised models only.
    default_doppler : dict
        ``max_doppler_hz`` or ``speed_kmh`` + ``carrier_hz``, and ``source``.
    printed_rms_delay_spread_s : float or None
        The RMS delay spread the standard prints, where it prints one.
    reference_rms_delay_spread_s : float or None
        A recomputed reference value where the standard prints none (M.1225).
    standard_check : dict
        ``state`` (one of :data:`CHECK_STATES`), ``searched`` (date); for
        ``confirmed``: ``document``, ``table``, ``version``, ``compared``,
        ``published_figure`` (``quantity``, ``value``, ``unit``, ``source``);
        otherwise ``reason``.
    """

    name: str
    title: str
    data_version: int
    source: dict
    normalised: bool
    spectrum: str
    rows: tuple[PresetRow, ...]
    k1_db: float | None
    default_delay_spread_ns: float | None
    default_doppler: dict
    printed_rms_delay_spread_s: float | None
    reference_rms_delay_spread_s: float | None
    standard_check: dict

    @property
    def check_state(self) -> str:
        """``"confirmed"`` or ``"recalled, not confirmed"`` (:data:`CHECK_STATES`)."""
        return self.standard_check["state"]

    @property
    def check_statement(self) -> str:
        """``confirmed against DOCUMENT, TABLE, VERSION`` or ``recalled, not confirmed: REASON``."""
        check = self.standard_check
        if check["state"] == "confirmed":
            return f"confirmed against {check['document']}, {check['table']}, {check['version']}"
        return f"recalled, not confirmed: {check['reason']}"

    @property
    def n_taps(self) -> int:
        """Number of taps (the direct and Rayleigh parts of a LOS tap count once)."""
        return len({row.tap for row in self.rows})

    @property
    def has_direct_part(self) -> bool:
        return any(row.part == "direct" for row in self.rows)

    @property
    def short_source(self) -> str:
        """``3GPP TR 38.901 Table 7.7.2-3 (from memory)`` and the like."""
        document = self.source["document"].split(",")[0].replace("Recommendation ", "")
        return f"{document} {self.source['table']} ({self.source['values']})"

    def rms_delay_spread(self) -> float:
        """RMS delay spread of the table: normalised units, or seconds.

        The direct and Rayleigh parts of a line-of-sight tap both count at
        their delay (they are one path's power).
        """
        scale = 1.0 if self.normalised else 1e-9
        return _rms_delay_spread(
            [row.delay * scale for row in self.rows],
            [10.0 ** (row.power_db / 10.0) for row in self.rows],
        )


def load_preset(name: str) -> Preset:
    """The stored table of preset ``name`` (see :data:`PRESET_NAMES`).

    Raises
    ------
    emucompile.errors.InputError
        For an unknown name; the message suggests the closest known ones.
    """
    if name not in PRESET_NAMES:
        close = difflib.get_close_matches(str(name), PRESET_NAMES, n=3)
        hint = f"did you mean {', '.join(close)}?" if close else None
        raise InputError(
            f"unknown preset {name!r} (known: {', '.join(PRESET_NAMES)})", hint=hint
        )
    return _load_preset(name)


def _rms_delay_spread(delays, powers_linear) -> float:
    """The second central moment of the PDP (:func:`emucompile.models.delays.delay_statistics`)."""
    return delays_module.delay_statistics(delays, powers_linear)["rms_delay_spread_s"]


@functools.lru_cache(maxsize=None)
def _load_preset(name: str) -> Preset:
    from ruamel.yaml import YAML

    text = resources.files("emucompile").joinpath("data", "presets", f"{name}.yaml").read_text("utf-8")
    data = YAML(typ="safe", pure=True).load(text)
    rows = tuple(
        PresetRow(tap=int(r["tap"]), delay=r["delay"], power_db=float(r["power_db"]), part=r["part"])
        for r in data["rows"]
    )
    _check_rows(name, rows, data.get("k1_db"))
    _check_standard_check(name, data.get("standard_check"))
    printed = data.get("printed_rms_delay_spread")
    reference = data.get("recomputed_rms_delay_spread")
    return Preset(
        name=data["name"],
        title=data["title"],
        data_version=int(data["data_version"]),
        source=dict(data["source"]),
        normalised=data["delays"] == "normalised",
        spectrum=data["spectrum"],
        rows=rows,
        k1_db=data.get("k1_db"),
        default_delay_spread_ns=data.get("default_delay_spread_ns"),
        default_doppler=dict(data["default_doppler"]),
        printed_rms_delay_spread_s=printed["value_ns"] * 1e-9 if printed else None,
        reference_rms_delay_spread_s=reference["value_ns"] * 1e-9 if reference else None,
        standard_check=dict(data["standard_check"]),
    )


def _check_rows(name, rows, k1_db):
    """Structural checks of a stored table; a failure is a packaging bug, not user input."""
    numbers = [row.tap for row in rows]
    if sorted(set(numbers)) != list(range(1, max(numbers) + 1)):
        raise RuntimeError(f"preset data {name}: tap numbers are not 1..N")
    for number in set(numbers):
        parts = sorted(row.part for row in rows if row.tap == number)
        if parts not in (["rayleigh"], ["direct", "rayleigh"]):
            raise RuntimeError(f"preset data {name}: tap {number} has parts {parts}")
        delays = {row.delay for row in rows if row.tap == number}
        if len(delays) != 1:
            raise RuntimeError(f"preset data {name}: the parts of tap {number} differ in delay")
    if any(row.part == "direct" for row in rows) != (k1_db is not None):
        raise RuntimeError(f"preset data {name}: a direct part needs k1_db and the reverse")


def _check_standard_check(name, check):
    """A preset's ``standard_check`` must say one state and what backs it (packaging bug otherwise)."""
    if not isinstance(check, dict) or check.get("state") not in CHECK_STATES or not check.get("searched"):
        raise RuntimeError(f"preset data {name}: standard_check needs state {CHECK_STATES} and searched")
    needed = _CONFIRMED_KEYS if check["state"] == "confirmed" else ("reason",)
    missing = [key for key in needed if not check.get(key)]
    if missing:
        raise RuntimeError(f"preset data {name}: standard_check {check['state']!r} lacks {', '.join(missing)}")
