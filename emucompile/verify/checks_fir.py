"""The FIR map's checks and the emulator fit's: deterministic comparisons with the manifest's record.

``fir_map_rebuilt`` rebuilds the map from the manifest alone
(:func:`rebuilt_map`: the recorded profile's delays and powers, the ``fir``
record's rate, mapping and parameters through
:func:`emucompile.models.grid.fir_map_from_record`, or the recorded target's
fit): no part of the compile planner runs. These checks have no false alarm
(p_value None) and are not in Holm's family. ``--delivered`` also checks the
integer FIR coefficients scaled back, column by column
(:func:`delivered_codes_checks`).
"""

from __future__ import annotations

import dataclasses

import numpy as np

from emucompile.models.grid import fir_map_from_record, rms_delay_spread
from emucompile.profile.model import profile_from_document
from emucompile.profile.target import DEFAULT_FIT_TOLERANCE_PCT, fit_record, fit_to_target, parse_target
from emucompile.verify import decimate
from emucompile.verify.tolerance import CheckResult
from emucompile.verify.describe import number

def fir_checks(manifest, matrix, root):
    """The FIR map against the profile: deterministic comparisons (no false alarm, not in Holm).

    ``fir_map_rebuilt``: the map the manifest describes, rebuilt from its
    closed form and recorded parameters (:func:`_rebuilt_map`; no part of the
    compile planner runs), against ``fir_map.npy`` (catches a map edited with
    its hash regenerated). ``fir_power``: energy
    kept, sum_i P_i sum_n m_in^2 / sum_i P_i, against 1 with the map's own
    worst-case loss (1 - G/pi^2 of a half-sample sinc row; 0 for nearest)
    and the target fit's dropped power as tolerance. ``fir_rms_delay_spread``:
    the grid's RMS delay spread (coefficient powers) against the fitted
    channel's (target) or the profile's (no target), the text naming both;
    for ``nearest`` every delay moves by at most half a grid step, so the
    spread moves by at most that (|sigma(x + e) - sigma(x)| <= max |e|, the
    triangle inequality for the weighted standard deviation); for ``sinc``
    each fractional tap's energy spreads over its window, which has no such
    bound, so the figure is reported, not judged.
    """
    fir = manifest["fir"]
    powers = np.array([t.get("power_linear") or (0.0 if t.get("power_db") is None else 10 ** (t["power_db"] / 10))
                       for t in manifest["taps"]])
    delays = np.array([t["delay_s"] for t in manifest["taps"]])
    rate = float(fir["sample_rate_hz"])
    coefficient_delays = (np.arange(matrix.shape[1]) - fir["bulk_delay_samples"]) / rate
    checks = []
    try:
        rebuilt = rebuilt_map(manifest, root)
    except Exception as error:  # noqa: BLE001 - a map we cannot rebuild is reported, not fatal
        rebuilt, why = None, f"could not rebuild the map from the manifest: {error}"
    if rebuilt is not None and rebuilt.matrix.shape == matrix.shape:
        difference = float(np.max(np.abs(rebuilt.matrix - matrix), initial=0.0))
        checks.append(deterministic("fir_map_rebuilt", difference, 0.0, 1e-12, "",
                                     "max |fir_map.npy - map rebuilt from the profile|"))
    else:
        why = why if rebuilt is None else (f"shape {list(matrix.shape)} differs from the rebuilt "
                                           f"{list(rebuilt.matrix.shape)}")
        checks.append(deterministic("fir_map_rebuilt", None, 0.0, 1e-12, "", why, passed=False))
    kept = float(powers @ np.sum(matrix * matrix, axis=1) / powers.sum())
    worst = (fir.get("parameters") or {}).get("energy_kept_worst")
    dropped_db = ((manifest.get("target") or {}).get("costs") or {}).get("power_dropped_db") or 0.0
    allowance = (1.0 - (worst if worst is not None else 1.0)) + (1.0 - 10 ** (-dropped_db / 10.0))
    checks.append(deterministic("fir_power", kept, 1.0, allowance + 1e-9, "",
                                 "power-weighted energy kept by the grid vs the profile's power"))
    grid_spread = rms_delay_spread(coefficient_delays, powers @ (matrix * matrix))
    profile_spread = rms_delay_spread(delays, powers)
    costs = (manifest.get("target") or {}).get("costs") or {}
    expected = costs.get("fit_rms_delay_spread_s", profile_spread)
    against = ("the fitted channel's" if "fit_rms_delay_spread_s" in costs else "the profile's")
    if "fit_rms_delay_spread_s" in costs:
        against += f" ({expected * 1e9:.4g} ns; the profile's: {profile_spread * 1e9:.4g} ns)"
    if fir["delay_mapping"] == "nearest":
        step = (fir.get("parameters") or {}).get("delay_step_samples") or 1
        checks.append(deterministic("fir_rms_delay_spread", grid_spread, expected, 0.5 * step / rate * (1 + 1e-9),
                                     "s", f"grid RMS delay spread vs {against} (nearest: half a grid step)"))
    else:
        checks.append(deterministic("fir_rms_delay_spread", grid_spread, expected, None, "s",
                                     f"grid RMS delay spread vs {against}; sinc mapping: each fractional tap spreads "
                                     "over its window; no bound to judge against (reported only)", passed=None))
    return checks


def rebuilt_map(manifest, root):
    """The FIR map the manifest records, from its closed form: the recorded profile's delays and powers,
    the ``fir`` record's rate, mapping and parameters, the moving delay or the target fit as at compile."""
    profile = profile_from_document(manifest["profile"], source=f"{root}/manifest.json#/profile")
    record, rate = manifest["fir"], float(manifest["update_rate_hz"])
    moving = getattr(profile.conditions, "moving_propagation", None)
    if moving is None and manifest.get("target"):
        target = parse_target(manifest["target"]["constraints"], file=f"{root}/manifest.json",
                              base_pointer="/target/constraints")
        return fit_to_target(target, profile, update_rate_hz=rate, sample_rate_hz=record["sample_rate_hz"],
                             delay_mapping=record["delay_mapping"]).fir_map
    return fir_map_from_record(record, [t.delay_s for t in profile.taps], [t.power_linear for t in profile.taps],
                               moving=moving, update_rate_hz=rate)


def delivered_codes_checks(session, root, entry, opened, shadowing):
    """Per-tap checks on the integer FIR coefficients scaled back (``coefficient = code * step``)."""
    codes = entry["coefficient_codes"]
    dtype = "<i2" if entry["dtype"] == "int16" else "<i4"
    array = np.memmap(root / entry["name"], dtype=dtype, mode="r", offset=entry["data_offset"],
                      shape=tuple(entry["shape"]))
    divide = None if shadowing is None else shadowing.shadowing_amplitude
    columns = [int(c) for c in codes["columns"]]
    matrix = np.asarray(opened.fir_map, dtype=float)[:, columns]
    return session.delivered_fir(decimate.FirCodesSource(array, 1.0 / float(codes["step"]), divide), matrix,
                                 label="fir codes", columns=columns)


def fit_section(manifest):
    """The "emulator fit" record and its check: the fitted channel's RMS delay spread against the profile's.

    The bound is the fit tolerance recorded at compile (the default for a
    bundle made before it was recorded). A fit beyond it that the user
    accepted (``compile --accept-fit``) is not judged again (passed None, the
    acceptance said); one that was not accepted fails.
    """
    record = fit_record(manifest)
    if record is None:
        return None
    spread = record["rms_delay_spread_s"]
    acceptance = record["acceptance"] or {}
    percent = acceptance.get("tolerance_pct", DEFAULT_FIT_TOLERANCE_PCT)
    bound = acceptance.get("bound_s")
    if bound is None:
        bound = percent / 100.0 * spread["profile"]
    text = (f"the fitted channel's RMS delay spread against the profile's, within {percent:g} % of the "
            "profile's (the fit tolerance)")
    check = deterministic("fit_rms_delay_spread", spread["fitted"], spread["profile"], bound, "s", text)
    if check.passed is False and acceptance.get("accepted"):
        check = dataclasses.replace(
            check, passed=None,
            reason=(f"beyond the fit tolerance of {percent:g} % ({number(spread['change_pct'])} %): accepted at "
                    "compile with --accept-fit (manifest target.fit_acceptance); not judged again"))
    record["check"] = check
    return record


def deterministic(name, value, expected, tolerance, unit, detail, *, passed="judge"):
    if passed == "judge":
        passed = value is not None and abs(value - expected) <= tolerance
    reason = None if passed is not False or value is None else f"differs by {abs(value - expected):.3g} {unit}".strip()
    if passed is None:
        reason = detail
    return CheckResult(name=name, tap=None, value=value, expected=expected, tolerance=tolerance,
                           p_value=None, passed=passed, reason=reason, level=None, min_detectable=tolerance,
                           unit=unit, detail=detail)
