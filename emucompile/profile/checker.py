"""The checks of a profile the schema cannot express, and its conversion to a :class:`Profile`.

:class:`_Checker` walks a schema-checked document once: Doppler sources that
agree, delays and powers, Rician direct parts, each tap's spectrum (asked of the
registry, :mod:`emucompile.models.spectra`), the optional blocks (parsed by
:mod:`emucompile.profile.blocks` and :mod:`emucompile.profile.target`), the
``expect:`` targets and the warnings (unit slips, weak taps); then it builds the
frozen :class:`~emucompile.profile.types.Profile`. Every check guards against values of the
wrong type (the schema has reported those), so all problems come out in one pass.
"""

from __future__ import annotations

import copy
import math

from emucompile._lazy import LazyModule
from emucompile.errors import Problem
from emucompile.models import spectra
from emucompile.models.theory import doppler_from_speed
from emucompile.profile.reader import Document, pointer_join
from emucompile.profile.slips import slip_warnings
from emucompile.profile.types import (
    DOPPLER_AGREEMENT,
    FADING_KINDS,
    MAX_TAPS,
    MIN_DOPPLER_HZ,
    CompileDefaults,
    Expectation,
    Profile,
    Tap,
    expect_keys,
)

# Loaded when a profile has the block: a plain list of taps needs neither, and a target needs numpy.
blocks = LazyModule("emucompile.profile.blocks")
target_module = LazyModule("emucompile.profile.target")


# -- helpers: semantic checks and conversion ----------------------------------------------


def _number(mapping, key):
    """The value of ``key`` when it is a finite real number, else None (the schema reports it)."""
    value = mapping.get(key) if isinstance(mapping, dict) else None
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return None
    value = float(value)
    return value if math.isfinite(value) else None


def _fmt(value: float, unit: str = "") -> str:
    """A number for messages: 6 significant digits, the unit after it."""
    text = f"{value:.6g}"
    return f"{text} {unit}" if unit else text


class _Checker:
    """The checks the schema cannot express, and the conversion to a :class:`Profile`.

    Every check guards against values of the wrong type (the schema has
    reported those already), so that all problems come out in one pass.
    """

    def __init__(self, document: Document, root: dict, *, broken_blocks=frozenset(), flagged=frozenset(),
                 standard_keys=None):
        self.document = document
        self.root = root
        self.problems: list[Problem] = []
        self.doppler_source_broken = False
        self.broken_blocks = set(broken_blocks)  # top-level keys with schema errors: no semantic checks
        self.flagged = set(flagged)  # pointers whose value was replaced or is not finite (reported)
        self.trajectory_taps: set[int] = set()
        self.standard_keys = dict(standard_keys or {})  # tap index -> keys a preset set, unchanged

    def report(self, pointer, message, hint=None, *, severity="error", key=False):
        """Record a problem at ``pointer``; also the callback the parsers of :mod:`emucompile.profile.blocks` use."""
        self.problems.append(self.document.problem(pointer, message, hint, severity=severity, key=key))

    def error(self, pointer, message, hint=None, *, key=False):
        self.report(pointer, message, hint, key=key)

    def warning(self, pointer, message, hint=None, *, key=False):
        self.report(pointer, message, hint, severity="warning", key=key)

    def run(self, *, build: bool) -> Profile | None:
        """Make every check; return the Profile when ``build`` and nothing is in error."""
        root = self.root
        taps_value = root.get("taps")
        if isinstance(taps_value, list) and len(taps_value) > MAX_TAPS:
            self.error("/taps", f"{len(taps_value)} taps: at most {MAX_TAPS} are allowed")
        global_doppler_hz, speed_mps = self._global_doppler()
        raw_taps = taps_value if isinstance(taps_value, list) else []
        conditions = self._conditions(raw_taps, speed_mps)
        taps = []
        missing_doppler = []
        for index, tap in enumerate(raw_taps):
            if isinstance(tap, dict):
                resolved = self._tap(index, tap, global_doppler_hz)
                taps.append(resolved)
                if resolved and resolved["fading"] in ("rayleigh", "rician") and resolved["max_doppler_hz"] is None:
                    missing_doppler.append(index)
            else:
                taps.append(None)
        if missing_doppler and not self.doppler_source_broken:
            which = ", ".join(str(i) for i in missing_doppler[:10])
            more = ", ..." if len(missing_doppler) > 10 else ""
            self.error("", f"no maximum Doppler for the fading tap(s) {which}{more}",
                       "give max_doppler_hz, or speed_kmh (or speed_mps) with carrier_hz, "
                       "or a max_doppler_hz on each fading tap; only static taps need none")
        self._tap_warnings(taps)
        self._slip_warnings(taps)
        scale_db = self._power_scale(taps)
        expectations = self._expectations()
        blocks = {"conditions": conditions, "mimo": self._mimo(raw_taps), "target": self._target(),
                  "preset": self._preset()}
        if not build or any(p.severity == "error" for p in self.problems):
            return None
        return self._build(taps, global_doppler_hz, speed_mps, scale_db, expectations, blocks)

    # -- the optional blocks (emucompile.profile.blocks, emucompile.profile.target) ----------------
    def _block(self, key, *, needs_taps=False):
        """The block's value when present and free of schema errors, else None.

        ``needs_taps``: the block's checks refer to the taps, so they wait for a list of them.
        """
        if key not in self.root or key in self.broken_blocks:
            return None
        if needs_taps and not isinstance(self.root.get("taps"), list):
            return None
        return self.root[key]

    def _conditions(self, raw_taps, speed_mps):
        if "conditions" in self.root:
            # Known even when the block is broken: spares its taps a misleading "needs los_*".
            self.trajectory_taps = blocks.high_speed_train_taps(self.root["conditions"], raw_taps)
        block = self._block("conditions", needs_taps=True)
        if block is None:
            return None
        conditions = blocks.parse_conditions(block, self.report, taps=raw_taps, speed_mps=speed_mps,
                                      carrier_hz=_number(self.root, "carrier_hz"))
        if conditions is not None:
            self.trajectory_taps = set(conditions.high_speed_train_taps)
        return conditions

    def _mimo(self, raw_taps):
        block = self._block("mimo", needs_taps=True)
        if block is None:
            return None
        direct = [i for i, tap in enumerate(raw_taps)
                  if isinstance(tap, dict) and tap.get("fading") in blocks.DIRECT_FADINGS]
        return blocks.parse_mimo(block, self.report, direct_taps=direct)

    def _target(self):
        block = self._block("target")
        if block is None:
            return None
        found = [p for p in target_module.check_target(block, file=self.document.filename, base_pointer="/target")
                 if p.pointer not in self.flagged]
        for problem in found:
            self.report(problem.pointer, problem.message, problem.hint, severity=problem.severity, key=True)
        if isinstance(block, dict) and "format_version" in block:
            self.warning("/target/format_version", "ignored: a target block takes the profile's format_version",
                         key=True)
        if any(p.severity == "error" for p in found):
            return None
        return target_module.parse_target(block, file=self.document.filename, base_pointer="/target")

    def _preset(self):
        block = self._block("preset")
        if block is None:
            return None
        return blocks.parse_preset_info(block, self.report)

    # -- Doppler -----------------------------------------------------------------
    def _global_doppler(self):
        root = self.root
        direct = _number(root, "max_doppler_hz")
        kmh, mps, carrier = (_number(root, k) for k in ("speed_kmh", "speed_mps", "carrier_hz"))
        # A Doppler key present but unusable has been reported; do not also call it missing.
        if any(k in root and _number(root, k) is None
               for k in ("max_doppler_hz", "speed_kmh", "speed_mps", "carrier_hz")):
            self.doppler_source_broken = True
        if "speed_kmh" in root and "speed_mps" in root:
            self.error("/speed_mps", "give speed_kmh or speed_mps, not both", key=True)
            self.doppler_source_broken = True
        speed_mps = mps if mps is not None else (kmh / 3.6 if kmh is not None else None)
        speed_key = "speed_mps" if "speed_mps" in root else "speed_kmh"
        has_speed = "speed_kmh" in root or "speed_mps" in root
        if has_speed and "carrier_hz" not in root:
            self.error(f"/{speed_key}", "a speed needs carrier_hz to give a Doppler",
                       "add carrier_hz (f_D = v f_c / c), or give max_doppler_hz instead", key=True)
            self.doppler_source_broken = True
        if "carrier_hz" in root and not has_speed:
            self.error("/carrier_hz", "carrier_hz is used only with speed_kmh or speed_mps",
                       "add the speed, or remove carrier_hz", key=True)
        from_speed = None
        if speed_mps is not None and carrier is not None:
            from_speed = doppler_from_speed(speed_mps, carrier)
            if from_speed < MIN_DOPPLER_HZ:
                self.error(f"/{speed_key}", f"the speed and carrier give f_D = {_fmt(from_speed, 'Hz')}, "
                           f"below the {_fmt(MIN_DOPPLER_HZ, 'Hz')} a fading tap needs",
                           "check the units: speed_kmh or speed_mps, carrier_hz in Hz")
                self.doppler_source_broken = True
                from_speed = None
        if direct is not None and from_speed is not None:
            if abs(direct - from_speed) > DOPPLER_AGREEMENT * from_speed:
                self.error(
                    "/max_doppler_hz",
                    f"max_doppler_hz {_fmt(direct, 'Hz')} disagrees with the speed and carrier, "
                    f"which give {_fmt(from_speed, 'Hz')} "
                    f"({abs(direct / from_speed - 1) * 100:.3g} % apart)",
                    "give one of them, or make them agree within 0.1 %; f_D = v f_c / c",
                )
        return (direct if direct is not None else from_speed), speed_mps

    # -- one tap ---------------------------------------------------------------
    def _tap(self, index: int, tap: dict, global_doppler_hz):
        here = f"/taps/{index}"
        delay_s = None
        if "delay_ns" in tap and "delay_us" in tap:
            self.error(f"{here}/delay_us", "give delay_ns or delay_us, not both", key=True)
        elif "delay_ns" not in tap and "delay_us" not in tap:
            self.error(here, "a tap needs its delay: delay_ns or delay_us")
        elif "delay_ns" in tap:
            # Division by an exact power of ten rounds once: 100 ns and 0.1 us give one float.
            delay_s = None if _number(tap, "delay_ns") is None else _number(tap, "delay_ns") / 1e9
        else:
            delay_s = None if _number(tap, "delay_us") is None else _number(tap, "delay_us") / 1e6
        fading = tap.get("fading", "rayleigh")
        if fading not in FADING_KINDS:
            fading = None
        own_doppler = _number(tap, "max_doppler_hz")
        max_doppler_hz = own_doppler if own_doppler is not None else global_doppler_hz
        resolved = {
            "index": index, "delay_s": delay_s, "power_db": _number(tap, "power_db"),
            "fading": fading, "max_doppler_hz": max_doppler_hz,
            "k_db": _number(tap, "k_db"), "los_angle_deg": _number(tap, "los_angle_deg"),
            "los_phase_deg": _number(tap, "los_phase_deg"), "los_doppler_hz": None,
            "spectrum": tap.get("spectrum", spectra.DEFAULT_KIND), "sigma_hz": _number(tap, "sigma_hz"),
            "spectrum_parameters": tuple((k, _number(tap, k)) for k in spectra.PARAMETER_NAMES
                                         if k != "sigma_hz" and k in tap),
        }
        if fading is None:
            return resolved
        self._tap_k_factor(here, tap, fading)
        if index in self.trajectory_taps and fading != "rayleigh":
            self._tap_on_trajectory(index, here, tap)
            resolved["los_angle_deg"] = None
        else:
            resolved["los_doppler_hz"] = self._tap_direct_doppler(here, tap, fading, max_doppler_hz)
        self._tap_spectrum(here, tap, fading, max_doppler_hz)
        return resolved

    def _tap_k_factor(self, here, tap, fading):
        if fading == "rician" and "k_db" not in tap:
            self.error(here, "a rician tap needs k_db (direct power / diffuse power, in dB)")
        if fading != "rician" and "k_db" in tap:
            self.error(f"{here}/k_db", f"k_db applies to rician taps only; this tap is {fading}",
                       "remove k_db, or set fading: rician", key=True)

    def _tap_on_trajectory(self, index, here, tap):
        for key in ("los_angle_deg", "los_doppler_hz"):
            if key in tap and key not in self.standard_keys.get(index, ()):
                self.warning(f"{here}/{key}", f"{key} is ignored: the high-speed-train trajectory sets the "
                             "Doppler of this tap's direct part", "remove it, or leave the tap out of "
                             "conditions.high_speed_train.taps", key=True)

    def _tap_direct_doppler(self, here, tap, fading, max_doppler_hz):
        has_angle, has_doppler = "los_angle_deg" in tap, "los_doppler_hz" in tap
        if fading == "rayleigh":
            for key in ("los_angle_deg", "los_doppler_hz", "los_phase_deg"):
                if key in tap:
                    self.error(f"{here}/{key}", f"{key} applies to rician and static taps only; "
                               "a rayleigh tap has no direct part", "remove it, or set fading: rician",
                               key=True)
            return None
        if has_angle and has_doppler:
            self.error(f"{here}/los_doppler_hz", "give los_angle_deg or los_doppler_hz, not both",
                       key=True)
            return None
        if fading == "rician" and not (has_angle or has_doppler):
            self.error(here, "a rician tap needs the Doppler of its direct part: los_angle_deg "
                       "or los_doppler_hz", "los_angle_deg: 90 gives no Doppler shift")
            return None
        if has_angle:
            angle = _number(tap, "los_angle_deg")
            if max_doppler_hz is None:
                if fading == "static":
                    self.error(f"{here}/los_angle_deg", "los_angle_deg needs a maximum Doppler to "
                               "turn into a frequency (f_D cos angle)",
                               "give max_doppler_hz (the profile's or the tap's), or los_doppler_hz",
                               key=True)
                return None
            return None if angle is None else max_doppler_hz * math.cos(math.radians(angle))
        if not has_doppler:
            return 0.0  # a static tap that does not turn
        doppler = _number(tap, "los_doppler_hz")
        if doppler is not None and max_doppler_hz is not None and abs(doppler) > max_doppler_hz:
            self.error(f"{here}/los_doppler_hz",
                       f"the direct part's Doppler {_fmt(doppler, 'Hz')} exceeds the tap's maximum "
                       f"Doppler {_fmt(max_doppler_hz, 'Hz')}",
                       "|los_doppler_hz| = f_D |cos angle| is at most f_D")
        return doppler

    def _tap_spectrum(self, here, tap, fading, max_doppler_hz):
        spectrum = tap.get("spectrum", spectra.DEFAULT_KIND)
        if fading == "static":
            for key in ("spectrum", *spectra.PARAMETER_NAMES):
                if key in tap:
                    self.warning(f"{here}/{key}", f"{key} is ignored: a static tap has no diffuse "
                                 "part and so no Doppler spectrum")
            return
        if spectrum not in spectra.KINDS:
            return  # the schema has reported it
        given = {key: _number(tap, key) for key in spectra.PARAMETER_NAMES if key in tap}
        for key, severity, message, hint, at_key in spectra.check_parameters(spectrum, max_doppler_hz, given, _fmt):
            self.report(here if key is None else f"{here}/{key}", message, hint, severity=severity, key=at_key)

    # -- across taps -------------------------------------------------------------
    def _taps_without_errors(self, taps):
        """The resolved taps none of whose values failed: a value that already failed
        (delay_ns: -1e308) says nothing more, and the warning passes must not trip on it."""
        errors = {p.pointer for p in self.problems if p.severity == "error"}
        failed = {pointer.split("/")[2] for pointer in self.flagged | errors
                  if pointer.startswith("/taps/")}
        return [t for t in taps if t and t["delay_s"] is not None and str(t["index"]) not in failed]

    def _tap_warnings(self, taps):
        known = self._taps_without_errors(taps)
        first_at = {}
        previous = None
        for tap in known:
            key = "delay_ns" if "delay_ns" in self.root["taps"][tap["index"]] else "delay_us"
            here = f"/taps/{tap['index']}/{key}"
            delay = tap["delay_s"]
            # A preset keeps its standard's table order (and TDL-D/E pairs at one delay) by design.
            ordered_by_standard = key in self.standard_keys.get(tap["index"], ())
            if previous is not None and delay < previous["delay_s"] and not ordered_by_standard:
                self.warning(here, f"delay {_fmt(delay * 1e9, 'ns')} is smaller than the previous "
                             f"tap's {_fmt(previous['delay_s'] * 1e9, 'ns')}: taps are not in "
                             "delay order", "allowed; the taps keep the order written")
            femtoseconds = round(delay * 1e15)  # "one delay" up to round-off
            if femtoseconds in first_at and not ordered_by_standard:
                self.warning(here, f"same delay as tap {first_at[femtoseconds]} "
                             f"({_fmt(delay * 1e9, 'ns')})",
                             "legitimate, e.g. a direct and a diffuse part at one delay")
            first_at.setdefault(femtoseconds, tap["index"])
            previous = tap
        powers = [t for t in taps if t and t["power_db"] is not None]
        if powers:
            strongest = max(t["power_db"] for t in powers)
            for tap in powers:
                below = strongest - tap["power_db"]
                if below > 40.0:
                    self.warning(f"/taps/{tap['index']}/power_db",
                                 f"the tap is {below:.3g} dB below the strongest tap",
                                 "check the power; a tap this weak barely changes the channel")

    def _slip_warnings(self, taps):
        for pointer, message, hint in slip_warnings(self.root, self._taps_without_errors(taps), self.standard_keys):
            if pointer.split("/")[1] not in self.broken_blocks:
                self.warning(pointer, message, hint)

    def _power_scale(self, taps) -> float:
        powers = [t["power_db"] for t in taps if t and t["power_db"] is not None]
        total_db = self.root.get("total_power_db", 0)
        if not powers or total_db is None or _number({"t": total_db}, "t") is None:
            return 0.0
        written_db = _sum_db(powers)
        scale_db = float(total_db) - written_db
        if abs(scale_db) > 10.0:
            where = "/total_power_db" if "total_power_db" in self.root else "/taps"
            self.warning(where, f"the tap powers are scaled by {scale_db:+.3g} dB to add up to "
                         f"total_power_db {_fmt(float(total_db), 'dB')}",
                         "check the powers, or set total_power_db: null to keep them as written")
        return scale_db

    # -- expect: ----------------------------------------------------------------------
    def _expectations(self) -> list[Expectation]:
        block = self.root.get("expect")
        if not isinstance(block, dict):
            return []
        table = expect_keys()
        found = []
        for key, spec in block.items():
            here = pointer_join("/expect", key)
            if key not in table or not isinstance(spec, dict):
                continue
            statistic, unit, factor = table[key]
            value = _number(spec, "value")
            shape = frozenset(spec)
            if not shape <= {"value", "tolerance_pct", "tolerance", "min", "max"}:
                continue  # the schema has reported the unknown key
            if shape in ({"value", "tolerance_pct"}, {"value", "tolerance"}):
                if value is None:
                    continue
                if "tolerance_pct" in spec:
                    width = abs(value) * (_number(spec, "tolerance_pct") or 0.0) / 100.0
                else:
                    width = _number(spec, "tolerance") or 0.0
                low, high = value - width, value + width
            elif shape and shape <= {"min", "max"}:
                low = _number(spec, "min") if "min" in spec else -math.inf
                high = _number(spec, "max") if "max" in spec else math.inf
                if low is None or high is None:
                    continue
                if low > high:
                    self.error(here, f"min {_fmt(low)} is larger than max {_fmt(high)}")
                    continue
            else:
                self.error(here, f"a target is {{value, tolerance_pct}}, {{value, tolerance}} or "
                           f"{{min, max}}; got {{{', '.join(sorted(spec)) or 'nothing'}}}",
                           "e.g. {value: 300, tolerance_pct: 3}")
                continue
            found.append(Expectation(
                quantity=key, value_si=None if value is None else value * factor,
                low_si=low * factor, high_si=high * factor, pointer=here,
                statistic=statistic, unit=unit, unit_factor=factor,
            ))
        return found

    # -- conversion ---------------------------------------------------------------------
    def _build(self, taps, global_doppler_hz, speed_mps, scale_db, expectations, blocks) -> Profile:
        root = self.root
        factor = 10.0 ** (scale_db / 10.0)
        conditions = blocks["conditions"]
        train = conditions.high_speed_train if conditions is not None else None
        drift_hz = conditions.drift_doppler_hz if conditions is not None else 0.0
        built = []
        for tap in taps:
            fading = tap["fading"]
            on_train = train is not None and tap["index"] in conditions.high_speed_train_taps
            built.append(Tap(
                delay_s=tap["delay_s"],
                power_linear=10.0 ** (tap["power_db"] / 10.0) * factor,
                fading=fading,
                k_linear=10.0 ** (tap["k_db"] / 10.0) if fading == "rician" else None,
                spectrum=tap["spectrum"] if fading != "static" else "classical",
                max_doppler_hz=tap["max_doppler_hz"],
                sigma_hz=tap["sigma_hz"] if fading != "static" else None,
                spectrum_parameters=tap["spectrum_parameters"] if fading != "static" else (),
                los_doppler_hz=tap["los_doppler_hz"],
                los_angle_deg=tap["los_angle_deg"],
                los_phase_deg=tap["los_phase_deg"],
                index=tap["index"],
                los_trajectory="high_speed_train" if on_train else None,
                los_peak_doppler_hz=train.peak_doppler_hz if on_train else None,
                drift_doppler_hz=drift_hz,
            ))
        compile_block = dict(root.get("compile") or {})
        if "seed" in compile_block:
            compile_block["seed"] = int(compile_block["seed"])
        for key in ("update_rate_hz", "duration_s", "sample_rate_hz"):
            if key in compile_block:
                compile_block[key] = float(compile_block[key])
        total_db = root.get("total_power_db", 0)
        return Profile(
            name=root["name"],
            taps=tuple(built),
            description=root.get("description", ""),
            max_doppler_hz=global_doppler_hz,
            speed_mps=speed_mps,
            carrier_hz=_number(root, "carrier_hz"),
            total_power_db=None if total_db is None else float(total_db),
            power_scale_db=scale_db,
            compile=CompileDefaults(**compile_block),
            expect=tuple(expectations),
            mimo=blocks["mimo"],
            conditions=conditions,
            preset=blocks["preset"],
            target=blocks["target"],
            document=_resolved_document(root),
            source=self.document.filename,
        )


def _sum_db(powers_db) -> float:
    """10 log10 of the sum of powers given in dB, without overflow (log-sum-exp)."""
    top = max(powers_db)
    return top + 10.0 * math.log10(math.fsum(10.0 ** ((p - top) / 10.0) for p in powers_db))


def _resolved_document(root: dict) -> dict:
    """The document with its defaults made explicit, values and unit keys as written."""
    document = copy.deepcopy(root)
    document.setdefault("description", "")
    document.setdefault("total_power_db", 0)
    for tap in document["taps"]:
        tap.setdefault("fading", "rayleigh")
        if tap["fading"] != "static":
            tap.setdefault("spectrum", spectra.DEFAULT_KIND)
    return document
