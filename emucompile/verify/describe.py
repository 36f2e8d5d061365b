"""Checks in words and as a matrix: what each check compared, the taps x checks table, plain numbers.

Read by the report (:mod:`emucompile.report.html`) and by ``verification.json``
(:meth:`emucompile.verify.run.Verification.to_dict`); light (no numpy), so the
report's page can be rendered from a record.
"""

from __future__ import annotations

def check_matrix(checks) -> dict:
    """Per-tap checks as a taps x checks matrix (the report's compact table and ``check_matrix`` in the JSON).

    Rows: one per source ("" for the stored gains, "delivered ci16", "delivered fir codes[5]", ...) and
    tap; columns: check names; a cell lists its checks (one per link) by index into ``checks`` and
    their values, with ``passed`` False when any failed, True when every applicable one passed, None
    when none applied.
    Checks of no single tap (cross-correlation, MIMO, FIR, fit) are not in the matrix.
    """
    rows, columns = {}, []
    for index, check in enumerate(checks):
        name = _get_name(check)
        tap = check.get("tap") if isinstance(check, dict) else getattr(check, "tap", None)
        source, _, base = name.rpartition(": ") if name.startswith("delivered ") else ("", "", name)
        base = base.split(" [")[0]
        if tap is None or base in ("cross_correlation", "mimo_correlation"):
            continue
        key = (source, tuple(tap) if isinstance(tap, (list, tuple)) else (tap,))
        if base not in columns:
            columns.append(base)
        cell = rows.setdefault(key, {}).setdefault(base, {"checks": [], "values": [], "passed": None})
        cell["checks"].append(index)
        cell["values"].append(check.get("value") if isinstance(check, dict) else getattr(check, "value", None))
        passed = check.get("passed") if isinstance(check, dict) else getattr(check, "passed", None)
        if passed is False:
            cell["passed"] = False
        elif passed is True and cell["passed"] is None:
            cell["passed"] = True
    return {"columns": columns,
            "rows": [{"source": source, "tap": list(tap) if len(tap) > 1 else tap[0], "cells": cells}
                     for (source, tap), cells in rows.items()]}


def comparison(check, fit=None) -> dict:
    """What a check compared, in words: ``compared_with`` (the profile, the fitted channel, the rebuilt map)
    and ``comparison`` (what was measured against what)."""
    name = _get_name(check)
    label, _, base = name.rpartition(": ") if name.startswith("delivered ") else ("", "", name)
    base = base.split(" [")[0]
    words = _COMPARISONS.get(base, "the measured statistic against the profile's theory")
    compared_with = "profile"
    spread = (fit or {}).get("rms_delay_spread_s") or {}
    if base == "fir_rms_delay_spread":
        if fit is not None:
            compared_with = "fitted channel"
            words = (f"RMS delay spread of the FIR grid's coefficient powers against the fitted channel's "
                     f"{_ns(spread.get('fitted'))} (the profile's: {_ns(spread.get('profile'))})")
        else:
            words = "RMS delay spread of the FIR grid's coefficient powers against the profile's"
    elif base == "fir_map_rebuilt":
        compared_with = "rebuilt map"
    if label.startswith("delivered fir"):
        compared_with = "fitted channel"
        words = (f"{words} — here of {label[len('delivered '):]} (what the emulator receives), against the "
                 "profile's tap(s) through the fitted map (power: weight squared times tap power, summed over "
                 "merged taps)")
    elif label.startswith("delivered"):
        words = f"{words} — here of the {label[len('delivered '):]} data (what the emulator receives)"
    return {"compared_with": compared_with, "comparison": words}


_COMPARISONS = {
    "mean_power": "measured mean power of the tap against the profile's tap power",
    "k_factor": "measured Rician K-factor against the profile's",
    "envelope_ks": "largest gap between the measured envelope distribution and the profile's envelope law "
                   "(Kolmogorov-Smirnov distance; 0 = identical)",
    "autocorrelation": "largest gap between the measured normalised autocorrelation and the profile's closed "
                       "form over the checked lags (0 = identical)",
    "doppler_psd": "largest deviation in dB of the measured Doppler spectrum from the profile's spectrum "
                   "inside the band (0 = identical)",
    "out_of_band_power": "measured power beyond 1.05 f_D against the profile's (none) and the stated limit",
    "level_crossing_rate": "measured level-crossing rate against Rice's formula for the profile's tap",
    "fade_duration": "measured average fade duration against the theory for the profile's tap",
    "phase_uniformity": "|mean of exp(j phase)| of the measured phase: its distance from a uniform phase (0)",
    "power_beyond_record_band": "power the band-limited copy lacks, against the full-rate power of the same "
                                "samples (0 = nothing beyond the band)",
    "cross_correlation": "measured correlation between two taps against 0 (the profile's taps are independent)",
    "mimo_correlation": "measured correlation between two links against the profile's spatial correlation",
    "fir_map_rebuilt": "largest |fir_map.npy - the map rebuilt from the manifest's profile and target| (0 = same)",
    "fir_power": "power-weighted energy the FIR grid keeps against the profile's total power (1), less the "
                 "sinc window's loss and the power the fit dropped",
    "fit_rms_delay_spread": "the fitted channel's RMS delay spread against the profile's (the fit tolerance)",
    "column": "the coefficient sums several taps of different kinds",
}


def _get_name(check):
    return (check.get("name") if isinstance(check, dict) else getattr(check, "name", "")) or ""


def _ns(value):
    return "undefined" if value is None else f"{value * 1e9:.4g} ns"


def number(value):
    """A value as short text: 4 significant digits for floats, "n/a" for None."""
    if value is None:
        return "n/a"
    if isinstance(value, float):
        return f"{value:.4g}"
    return str(value)


__all__ = ["check_matrix", "comparison", "number"]
