"""Likely slips in a profile: values that are legal but more often a unit or typing mistake.

Each finding is a warning (``validate`` still exits 0) with the number, why it
looks wrong and the value probably meant. The thresholds:

* a tap delay more than :data:`DELAY_SPACING_FACTOR` x the median spacing of
  the profile's distinct delays: a ns/us slip (a 180 us tap among taps 50 ns
  apart). The standard models stay below 45 x (computed on the presets:
  TDL-A 44 x, TDL-C 41 x, ETU 29 x, EVA 10 x; tests/test_slips.py).
* a maximum Doppler above :data:`MAX_PLAUSIBLE_DOPPLER_HZ` (10 kHz): a
  vehicle at 500 km/h on a 20 GHz carrier gives 9.3 kHz (f_D = v f_c / c);
  satellite links in low orbit do reach tens of kHz, so it is only a warning.
* a speed above :data:`MAX_PLAUSIBLE_SPEED_KMH` (600 km/h), above the fastest
  trains (from memory: the maglev speed record is 603 km/h, 2015; trains in
  service run at up to ~430 km/h): usually m/s and km/h swapped.
* a K-factor above :data:`MAX_PLAUSIBLE_K_DB` (40 dB, a direct part 10^4 x
  the diffuse one): usually a linear K written as k_db.
* a carrier below 1 MHz or above 300 GHz (the edges of the radio bands a
  fading profile is used for; ITU-R names 3 MHz-300 GHz HF to EHF): usually a
  value in MHz or GHz written as Hz.
"""

from __future__ import annotations

import math
import statistics

DELAY_SPACING_FACTOR = 100.0
MAX_PLAUSIBLE_DOPPLER_HZ = 10e3
MAX_PLAUSIBLE_SPEED_KMH = 600.0
MAX_PLAUSIBLE_K_DB = 40.0
MIN_PLAUSIBLE_CARRIER_HZ = 1e6
MAX_PLAUSIBLE_CARRIER_HZ = 300e9


def slip_warnings(root: dict, taps: list, standard_keys: dict | None = None) -> list[tuple[str, str, str]]:
    """``(pointer, message, hint)`` for each likely slip of a profile document.

    ``root`` is the document (values as written); ``taps`` the checker's
    resolved taps (dicts with ``index``, ``delay_s``, ``max_doppler_hz``,
    ``k_db``; None for a tap that is not a mapping); ``standard_keys`` maps a
    tap index to the keys a preset set (not judged: the standard's own values).
    """
    standard_keys = standard_keys or {}
    found = []
    raw_taps = root.get("taps") if isinstance(root.get("taps"), list) else []
    known = [t for t in taps if t and _finite(t.get("delay_s"))]
    found += _delay_slips(known, raw_taps, standard_keys)
    found += _doppler_slips(root, raw_taps, standard_keys)
    found += _speed_slips(root)
    for tap in taps:
        if tap and _finite(tap.get("k_db")) and tap["k_db"] > MAX_PLAUSIBLE_K_DB \
                and "k_db" not in standard_keys.get(tap["index"], ()):
            k = tap["k_db"]
            found.append((f"/taps/{tap['index']}/k_db",
                          f"K = {k:g} dB is above {MAX_PLAUSIBLE_K_DB:g} dB: the direct part would be "
                          f"{_power_ratio(k)} x the diffuse one, practically a static tap",
                          f"a linear K written as dB? K = {k:g} linear is k_db: {10 * math.log10(k):.3g}"
                          if k > 0 else "check the value"))
    found += _carrier_slips(root)
    return found


def _delay_slips(known, raw_taps, standard_keys):
    distinct = sorted({round(t["delay_s"] * 1e15) for t in known})
    if len(distinct) < 3:
        return []
    spacing_s = statistics.median(b - a for a, b in zip(distinct, distinct[1:])) * 1e-15
    found = []
    for tap in known:
        index = tap["index"]
        raw = raw_taps[index] if index < len(raw_taps) and isinstance(raw_taps[index], dict) else {}
        key = "delay_ns" if "delay_ns" in raw else "delay_us"
        if key in standard_keys.get(index, ()) or tap["delay_s"] <= DELAY_SPACING_FACTOR * spacing_s:
            continue
        written = raw.get(key)
        if key == "delay_us":
            likely = f"delay_ns: {written:g}, not delay_us"
        else:
            likely = f"delay_ns: {written / 1000:g}"
        found.append((f"/taps/{index}/{key}",
                      f"tap delay {_time_text(tap['delay_s'])} is {tap['delay_s'] / spacing_s:.0f} x the median "
                      f"spacing of the profile's delays ({_time_text(spacing_s)})",
                      f"a ns/us slip? likely {likely}"))
    return found


def _doppler_slips(root, raw_taps, standard_keys):
    found = []
    places = [("/max_doppler_hz", root.get("max_doppler_hz"))]
    places += [(f"/taps/{i}/max_doppler_hz", tap.get("max_doppler_hz")) for i, tap in enumerate(raw_taps)
               if isinstance(tap, dict) and "max_doppler_hz" not in standard_keys.get(i, ())]
    for pointer, value in places:
        if _finite(value) and value > MAX_PLAUSIBLE_DOPPLER_HZ:
            found.append((pointer, f"maximum Doppler {value:g} Hz is above {MAX_PLAUSIBLE_DOPPLER_HZ:g} Hz "
                          f"(500 km/h at 20 GHz gives 9.3 kHz)",
                          f"a value in mHz, or kHz written as Hz? likely max_doppler_hz: {value / 1000:g}; "
                          "right for a low-orbit satellite link"))
    speed = _speed_kmh(root)
    carrier = root.get("carrier_hz")
    if speed is not None and _finite(carrier) and carrier > 0 and "max_doppler_hz" not in root:
        doppler = speed / 3.6 * carrier / 299_792_458.0
        if doppler > MAX_PLAUSIBLE_DOPPLER_HZ:
            found.append(("/carrier_hz", f"the speed and carrier give a maximum Doppler of {doppler:g} Hz, "
                          f"above {MAX_PLAUSIBLE_DOPPLER_HZ:g} Hz", "check the speed's and the carrier's units"))
    return found


def _speed_slips(root):
    for key, to_kmh in (("speed_kmh", 1.0), ("speed_mps", 3.6)):
        value = root.get(key)
        if _finite(value) and value * to_kmh > MAX_PLAUSIBLE_SPEED_KMH:
            if key == "speed_mps":
                likely = f"speed_kmh: {value:g}, i.e. {value / 3.6:.4g} m/s"
            else:
                likely = f"speed_kmh: {value / 3.6:.4g} (km/h converted twice?) or speed_mps: {value / 3.6:.4g}"
            return [(f"/{key}", f"speed {value * to_kmh:g} km/h is above the fastest trains "
                     f"({MAX_PLAUSIBLE_SPEED_KMH:g} km/h)", f"m/s and km/h swapped? likely {likely}")]
    return []


def _carrier_slips(root):
    value = root.get("carrier_hz")
    if not _finite(value) or value <= 0:
        return []
    if value < MIN_PLAUSIBLE_CARRIER_HZ:
        scale, unit = (1e9, "GHz") if value < 100 else (1e6, "MHz")
        return [("/carrier_hz", f"carrier {value:g} Hz is below 1 MHz",
                 f"a value in {unit} written as Hz? likely carrier_hz: {value * scale:g}, i.e. {value:g} {unit}")]
    if value > MAX_PLAUSIBLE_CARRIER_HZ:
        return [("/carrier_hz", f"carrier {value:g} Hz is above 300 GHz",
                 f"three zeros too many? likely carrier_hz: {value / 1000:g}")]
    return []


def _speed_kmh(root):
    if _finite(root.get("speed_kmh")):
        return root["speed_kmh"]
    if _finite(root.get("speed_mps")):
        return root["speed_mps"] * 3.6
    return None


def _power_ratio(db: float) -> str:
    """10^(dB/10) as text, without overflowing a float for absurd values."""
    return f"{10 ** (db / 10):.3g}" if db < 3000 else f"1e{db / 10:.0f}"


def _finite(value) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(value)


def _time_text(seconds: float) -> str:
    if seconds >= 1e-6:
        return f"{seconds * 1e6:.4g} us"
    return f"{seconds * 1e9:.4g} ns"


__all__ = ["slip_warnings", "DELAY_SPACING_FACTOR", "MAX_PLAUSIBLE_DOPPLER_HZ", "MAX_PLAUSIBLE_SPEED_KMH",
           "MAX_PLAUSIBLE_K_DB", "MIN_PLAUSIBLE_CARRIER_HZ", "MAX_PLAUSIBLE_CARRIER_HZ"]
