"""Emulator targets: the constraints of an FIR channel emulator and the fit of a profile to them.

A target (a stand-alone file or a profile's ``target:`` block, schema
``emucompile/schemas/target-v1.schema.json``) says what the emulator can hold: its
sample rate, how many FIR coefficients and non-zero paths, the delay grid
they sit on, how fast and how it updates coefficients, their bit width.
:func:`fit_to_target` maps a profile's taps onto that emulator and reports
what the fit costs; it refuses (:class:`emucompile.errors.InputError`) when
the target cannot hold the profile at all.

Reading files (with line numbers) belongs to the profile loader; here a target
arrives as a plain dict already parsed: :func:`check_target` lists every
problem, :func:`parse_target` returns a :class:`Target` or raises.

Fit rules (in this order)
-------------------------
1. Rates. The update rate must be at least 2x the largest frequency in any tap
   gain (band edges and direct-component shifts: Nyquist) and at most the
   target's ``max_update_rate_hz``; a target whose maximum is below that
   Nyquist minimum cannot hold the profile at all.
2. Mapping. ``sinc`` needs ``delay_step_samples = 1``; when it does not fit
   the FIR length or the path limit its half-length shrinks (Kaiser beta
   re-derived) down to :data:`MIN_SINC_HALF_LENGTH`. Left to choose
   (``delay_mapping=None``) the fit takes ``sinc`` when that works, else
   ``nearest``.
3. Merging (``nearest``). Taps whose delays round to the same grid point
   become one path: their gains add. For independent zero-mean taps the sum
   is again complex Gaussian with the summed power and the power-weighted
   mixture of the Doppler spectra, so Rayleigh stays Rayleigh (with a
   different spectrum if the members' spectra differ). With direct parts the
   merged path has K = sum of direct powers / sum of diffuse powers; two
   direct parts with different Doppler shifts beat, so the merged envelope is
   no longer Rician; static gains add coherently, so their merged power
   depends on their phases (the mean over phases is the sum of powers).
   Each merge is listed in the report.
4. Path limit. Beyond ``max_paths`` occupied grid points the weakest (by
   merged mean power; at equal power the later one) are dropped with all
   their taps; the power dropped is reported.
5. FIR length. What is kept must fit in ``max_fir_coefficients`` on the
   grid, counting the bulk delay; a profile that does not is refused, never
   cut (a late path cut off changes the channel more than any reported
   figure would convey).

Costs
-----
What a fit costs, its judgement and its record are in :mod:`emucompile.profile.fit_costs`
(re-exported here).

"""

from __future__ import annotations

import difflib
import json
import math
from dataclasses import asdict, dataclass, replace
from importlib import resources

import jsonschema
import numpy as np

from emucompile.errors import CheckFailed, InputError, Problem, ProfileError, TargetMissed  # noqa: F401
from emucompile.models import spectra
from emucompile.profile.reader import read_document
from emucompile.models.grid import (
    DEFAULT_HALF_LENGTH,
    DEFAULT_PASSBAND_FRACTION,
    FirMap,
    fir_map,
)

from emucompile.profile.fit_costs import (  # noqa: F401  (re-exported: what a fit costs, its judgement, its record)
    BETWEEN_UPDATES,
    DEFAULT_FIT_TOLERANCE_PCT,
    DEFAULT_HEADROOM_DB,
    CoefficientQuantisation,
    FitAcceptance,
    FitCosts,
    MergedPath,
    UpdateImages,
    _costs,
    coefficient_quantisation,
    fitted_channel_rms_delay_spread,
    granular_sqnr_db,
    judge_fit,
    missed_target_error,
    update_images,
)
MIN_SINC_HALF_LENGTH = 4

SCHEMA_NAME = "target-v1.schema.json"

@dataclass(frozen=True)
class Target:
    """An emulator's constraints; ``None`` means "no limit" (see the schema for each key).

    Attributes
    ----------
    sample_rate_hz : float or None
        Signal sample rate; sets the FIR grid.
    max_fir_coefficients : int or None
        Coefficients the FIR holds, counted on the delay grid.
    max_paths : int or None
        Non-zero coefficients it can place at once.
    delay_step_samples : int
        Spacing of the delay grid in samples.
    max_update_rate_hz : float or None
        Highest coefficient update rate.
    between_updates : {"hold", "linear"}
        What a coefficient does between updates.
    coefficient_bits : int or None
        Bits of each of the real and imaginary parts.
    headroom_db : float
        Full scale above the RMS of the strongest coefficient.
    """

    sample_rate_hz: float | None = None
    max_fir_coefficients: int | None = None
    max_paths: int | None = None
    delay_step_samples: int = 1
    max_update_rate_hz: float | None = None
    between_updates: str = "hold"
    coefficient_bits: int | None = None
    headroom_db: float = DEFAULT_HEADROOM_DB
    name: str | None = None
    description: str = ""

    def to_dict(self) -> dict:
        """The target as a document (keys of the schema; absent limits omitted)."""
        return {k: v for k, v in asdict(self).items() if v is not None and v != ""}


@dataclass(frozen=True, eq=False)
class TargetFit:
    """The fitted FIR map (the bundle's ``fir_map``, docs/bundle-format.md) and what the fit costs."""

    fir_map: FirMap
    costs: FitCosts
    target: Target


# -- reading -----------------------------------------------------------------------

def target_schema() -> dict:
    """The target JSON Schema (draft 2020-12) shipped in the package."""
    text = resources.files("emucompile").joinpath("schemas", SCHEMA_NAME).read_text(encoding="utf-8")
    return json.loads(text)


def check_target(document, *, file: str = "<target>", base_pointer: str = "") -> list[Problem]:
    """Every problem of a target document: schema errors, then semantic checks.

    Parameters
    ----------
    document : dict
        The parsed target (a target file's content or a profile's ``target:`` value).
    file : str
        Name used in the problems (the target file or the profile).
    base_pointer : str
        JSON pointer of the document inside its file, e.g. ``"/target"``.

    Returns
    -------
    list of emucompile.errors.Problem
        Errors and warnings, each with the JSON pointer of the value concerned;
        ``line``/``column`` are left for the loader to fill from its positions.
    """
    schema = target_schema()
    validator = jsonschema.Draft202012Validator(schema)
    problems = [
        _schema_problem(error, schema, file, base_pointer)
        for error in sorted(validator.iter_errors(document), key=lambda e: list(e.absolute_path))
    ]
    if isinstance(document, dict):
        problems.extend(_semantic_problems(document, file, base_pointer))
    return problems


def parse_target(document, *, file: str = "<target>", base_pointer: str = "") -> Target:
    """A :class:`Target` from a parsed document; raise ``ProfileError`` listing every error."""
    problems = check_target(document, file=file, base_pointer=base_pointer)
    if any(p.severity == "error" for p in problems):
        raise ProfileError(problems)
    d = document
    return Target(
        sample_rate_hz=_float_or_none(d.get("sample_rate_hz")),
        max_fir_coefficients=_int_or_none(d.get("max_fir_coefficients")),
        max_paths=_int_or_none(d.get("max_paths")),
        delay_step_samples=int(d.get("delay_step_samples", 1)),
        max_update_rate_hz=_float_or_none(d.get("max_update_rate_hz")),
        between_updates=d.get("between_updates", "hold"),
        coefficient_bits=_int_or_none(d.get("coefficient_bits")),
        headroom_db=float(d.get("headroom_db", DEFAULT_HEADROOM_DB)),
        name=d.get("name"),
        description=d.get("description", ""),
    )


# -- the fit -----------------------------------------------------------------------

def check_target_file(source, *, format: str | None = None):
    """Read and check a target file; ``(target_or_None, problems)``, never raising for bad input.

    The file is read by :func:`emucompile.profile.reader.read_document` (YAML 1.2 or
    JSON, safely, with positions), so every problem carries its line and column.
    """
    document = read_document(source, format=format)
    problems = list(document.problems)
    if not document.readable:
        return None, problems
    for problem in check_target(document.value, file=document.filename):
        if problem.pointer in document.replaced:
            continue  # the reader has said why that value is missing
        line, column = document.locate(problem.pointer, key=True)
        problems.append(replace(problem, line=line, column=column))
    problems.sort(key=lambda p: (p.line is None, p.line or 0, p.column or 0))
    if any(p.severity == "error" for p in problems):
        return None, problems
    return parse_target(document.value, file=document.filename), problems


def load_target(source, *, format: str | None = None) -> Target:
    """A :class:`Target` from a target file (``compile --target FILE``).

    Raises
    ------
    emucompile.errors.ProfileError
        Listing every error, one line each (``FILE:LINE:COL: /pointer: message``); exit code 2.

    Examples
    --------
    Not run as a doctest: it reads a target file of your own.

    >>> target = load_target("bench-fir-8.yaml")  # doctest: +SKIP
    """
    target, problems = check_target_file(source, format=format)
    if target is None:
        raise ProfileError(problems)
    return target


def fit_to_target(
    target: Target,
    taps,
    *,
    update_rate_hz: float,
    sample_rate_hz: float | None = None,
    delay_mapping: str | None = None,
    half_length: int = DEFAULT_HALF_LENGTH,
    passband_fraction: float = DEFAULT_PASSBAND_FRACTION,
) -> TargetFit:
    """Fit a profile's taps to an emulator and report what it costs.

    Parameters
    ----------
    target : Target
    taps : emucompile.profile.model.Profile or sequence of emucompile.profile.model.Tap
        The profile's taps (delays, powers after scaling, fading, Doppler);
        tap numbers in the report are positions in this sequence (= the last
        axis of ``tap_gains.npy``).
    update_rate_hz : float
        The chosen update rate of the tap gains (what the emulator is fed).
    sample_rate_hz : float, optional
        The command line's sample rate; must equal the target's when both are given.
    delay_mapping : {"sinc", "nearest"}, optional
        Honoured or refused; None lets the fit choose (rule 2 of the module docstring).
    half_length, passband_fraction
        The sinc window asked for (see :func:`emucompile.models.grid.fir_map`).

    Returns
    -------
    TargetFit

    Raises
    ------
    emucompile.errors.InputError
        When the target cannot hold the profile, or the request contradicts it;
        the message says the limit and what would be needed.
    """
    taps = tuple(getattr(taps, "taps", taps))  # a Profile or its taps
    if not taps:
        raise InputError("the profile has no taps to fit to the target")
    rate = _sample_rate(target, sample_rate_hz)
    _check_update_rate(target, taps, update_rate_hz)
    notes = []
    mapping = delay_mapping
    if mapping not in (None, "sinc", "nearest"):
        raise InputError(f"delay mapping must be 'sinc' or 'nearest', got {mapping!r}")
    step = target.delay_step_samples
    if mapping == "sinc" and step != 1:
        raise InputError(
            f"sinc delay mapping needs a delay step of 1 sample; the target's step is {step} samples",
            hint="use --delay-mapping nearest",
        )
    delays = [t.delay_s for t in taps]
    powers = [t.power_linear for t in taps]
    fitted = None
    if mapping in (None, "sinc") and step == 1:
        fitted, sinc_notes = _fit_sinc(target, delays, powers, rate, half_length, passband_fraction)
        if fitted is None and mapping == "sinc":
            raise InputError(sinc_notes[-1], hint="use --delay-mapping nearest or a target with a longer FIR")
        notes.extend(sinc_notes)
    if fitted is None:
        if mapping is None:
            why = f"the target's delay step is {step} samples" if step != 1 else "sinc does not fit the target"
            notes.append(f"delay mapping: nearest ({why})")
        base = fir_map(delays, powers, rate, mapping="nearest", delay_step_samples=step,
                       passband_fraction=passband_fraction)
        fitted, merged, dropped = _fit_nearest(target, taps, base)
    else:
        merged, dropped = (), ()
    return TargetFit(
        fir_map=fitted,
        costs=_costs(target, taps, fitted, merged, dropped, update_rate_hz, tuple(notes)),
        target=target,
    )


# -- the fit in plain view --------------------------------------------------------

def fit_record(manifest: dict) -> dict | None:
    """The "emulator fit" section of a bundle (compile's summary, verification.json, the report).

    Built from the manifest alone: ``target.costs`` (the fitted figures),
    ``target.fit_acceptance`` (the delay-spread judgement; absent in bundles
    made before it existed) and the integer FIR coefficients' entry (clip
    counts and measured SQNR). None when the bundle was not fitted to a target.
    Strict JSON; SI units.
    """
    entry = (manifest or {}).get("target") or {}
    costs = entry.get("costs")
    if not costs:
        return None
    codes_entry = next((f for f in manifest.get("files") or () if f.get("role") == "fir_coefficients_int"), None)
    codes = (codes_entry or {}).get("coefficient_codes") or {}
    quantisation = costs.get("quantisation") or {}
    profile_spread, grid_spread = costs.get("profile_rms_delay_spread_s"), costs.get("fit_rms_delay_spread_s")
    fit_spread = grid_spread
    if costs.get("delay_mapping") == "sinc" and not costs.get("dropped_taps"):
        fit_spread = profile_spread  # fitted_channel_rms_delay_spread: sinc keeps every delay in band
    change_pct = (100.0 * (fit_spread - profile_spread) / profile_spread
                  if profile_spread and fit_spread is not None else None)
    return {
        "constraints": entry.get("constraints") or {},
        "delay_mapping": costs.get("delay_mapping"),
        "sample_rate_hz": costs.get("sample_rate_hz"),
        "delay_step_samples": costs.get("delay_step_samples"),
        "n_paths": costs.get("n_paths"),
        "n_coefficients": costs.get("n_coefficients"),
        "taps_merged": [{k: m.get(k) for k in ("taps", "delay_s", "fading", "remark")}
                        for m in costs.get("merged") or ()],
        "taps_dropped": list(costs.get("dropped_taps") or ()),
        "power_dropped_db": costs.get("power_dropped_db"),
        "power_dropped_fraction": costs.get("power_dropped_fraction"),
        "rms_delay_spread_s": {"profile": profile_spread, "fitted": fit_spread, "change_pct": change_pct,
                               "coefficient_powers": grid_spread},
        "mean_delay_s": {"profile": costs.get("profile_mean_delay_s"), "fitted": costs.get("fit_mean_delay_s")},
        "max_abs_delay_error_s": costs.get("max_abs_delay_error_s"),
        "update_images": {
            "between_updates": costs.get("between_updates"), "update_rate_hz": costs.get("update_rate_hz"),
            "image_to_wanted_db": costs.get("image_to_wanted_db"), "droop_db": costs.get("droop_db"),
        },
        "coefficients": None if not quantisation else {
            "bits": quantisation.get("bits"), "headroom_db": quantisation.get("headroom_db"),
            "sqnr_db_model": quantisation.get("sqnr_db"),
            "clip_probability_model": quantisation.get("clip_probability"),
            "file": (codes_entry or {}).get("name"),
            "sqnr_db_measured": codes.get("sqnr_db"),
            "clipped_values": codes.get("clipped_values"),
            "clipped_values_per_path": codes.get("clipped_values_per_path"),
        },
        "acceptance": entry.get("fit_acceptance"),
        "notes": list(costs.get("notes") or ()),
    }


def fit_lines(record: dict) -> list[str]:
    """The fit section as short lines of text (compile's summary and verify's)."""
    def ns(value):
        return "undefined" if value is None else f"{value * 1e9:.1f} ns"

    def db(value, unit="dB"):
        return "none" if value is None else f"{value:.3g} {unit}"

    spread, mean = record["rms_delay_spread_s"], record["mean_delay_s"]
    change = "" if spread["change_pct"] is None else f" ({spread['change_pct']:+.1f} %)"
    merged = "; ".join(f"taps {', '.join(map(str, m['taps']))} at {ns(m['delay_s'])}" for m in record["taps_merged"])
    dropped = record["taps_dropped"]
    images = record["update_images"]
    lines = [
        f"{record['delay_mapping']} mapping, delay step {record['delay_step_samples']} sample(s) at "
        f"{(record['sample_rate_hz'] or 0) / 1e6:g} MHz: {record['n_paths']} path(s)",
        f"taps merged: {merged or 'none'}",
        f"taps dropped: {', '.join(map(str, dropped)) or 'none'}",
        f"RMS delay spread {ns(spread['profile'])} -> {ns(spread['fitted'])}{change}"
        + ("" if spread.get("coefficient_powers") in (None, spread["fitted"]) else
           f" (coefficient powers: {ns(spread['coefficient_powers'])}, interpolation tails included)")
        + f"; mean delay {ns(mean['profile'])} -> {ns(mean['fitted'])}",
        f"power dropped {db(record['power_dropped_db'])}; largest delay error {ns(record['max_abs_delay_error_s'])}",
        f"update images {db(images['image_to_wanted_db'])} ({images['between_updates']} at "
        f"{images['update_rate_hz']:g} Hz), droop {db(images['droop_db'])}",
    ]
    coefficients = record["coefficients"]
    if coefficients:
        clipped = coefficients["clipped_values"]
        lines.append(
            f"coefficients {coefficients['bits']} bits, headroom {coefficients['headroom_db']:g} dB: SQNR "
            f"{db(coefficients['sqnr_db_model'])} (model)"
            + ("" if coefficients["sqnr_db_measured"] is None else f", {db(coefficients['sqnr_db_measured'])} measured")
            + ("" if clipped is None else f", {clipped} value(s) clipped")
            + ("" if not coefficients["file"] else f" ({coefficients['file']})"))
    acceptance = record.get("acceptance")
    if acceptance:
        outcome = ("within the fit tolerance" if acceptance["within_tolerance"] else
                   "BEYOND the fit tolerance, accepted with --accept-fit" if acceptance["accepted"] else
                   "BEYOND the fit tolerance")
        lines.append(f"fit tolerance {acceptance['tolerance_pct']:g} % of the profile's RMS delay spread: {outcome}")
    lines += [f"note: {note}" for note in record["notes"]]
    return lines


# -- helpers -------------------------------------------------------------------------

def _sample_rate(target, sample_rate_hz):
    if target.sample_rate_hz is not None and sample_rate_hz is not None:
        if not math.isclose(target.sample_rate_hz, sample_rate_hz, rel_tol=1e-12):
            raise InputError(
                f"the sample rate {sample_rate_hz:g} Hz differs from the target's "
                f"sample_rate_hz {target.sample_rate_hz:g} Hz",
                hint="drop --sample-rate or make them agree",
            )
    rate = target.sample_rate_hz if target.sample_rate_hz is not None else sample_rate_hz
    if rate is None:
        raise InputError("fitting to a target needs a sample rate",
                         hint="give --sample-rate or sample_rate_hz in the target")
    if not (rate > 0 and math.isfinite(rate)):
        raise InputError(f"the sample rate must be finite and > 0, got {rate!r}")
    return float(rate)


def _check_update_rate(target, taps, update_rate_hz):
    largest = max(t.largest_doppler_hz for t in taps)
    needed = 2.0 * largest
    limit = target.max_update_rate_hz
    if limit is not None and limit < needed:
        raise InputError(
            f"the target cannot hold this profile: its max_update_rate_hz {limit:g} Hz is below "
            f"{needed:g} Hz, twice the largest Doppler {largest:g} Hz (Nyquist)"
        )
    if not (update_rate_hz > 0 and math.isfinite(update_rate_hz)):
        raise InputError(f"the update rate must be finite and > 0, got {update_rate_hz!r}")
    if update_rate_hz < needed:
        raise InputError(
            f"the update rate {update_rate_hz:g} Hz is below {needed:g} Hz, twice the largest "
            f"Doppler {largest:g} Hz (Nyquist)"
        )
    if limit is not None and update_rate_hz > limit:
        raise InputError(
            f"the update rate {update_rate_hz:g} Hz exceeds the target's max_update_rate_hz {limit:g} Hz",
            hint=f"use --update-rate between {needed:g} and {limit:g}",
        )


def _fit_sinc(target, delays, powers, rate, half_length, passband_fraction):
    """The longest sinc window (<= half_length) that the target holds, or (None, [reason])."""
    shortest = min(int(half_length), MIN_SINC_HALF_LENGTH)
    for half in range(int(half_length), shortest - 1, -1):
        candidate = fir_map(delays, powers, rate, mapping="sinc", half_length=half,
                            passband_fraction=passband_fraction)
        limits = []
        if target.max_fir_coefficients is not None and candidate.n_fir > target.max_fir_coefficients:
            limits.append(f"{candidate.n_fir} coefficients > max_fir_coefficients {target.max_fir_coefficients}")
        if target.max_paths is not None and candidate.nonzero_columns.size > target.max_paths:
            limits.append(f"{candidate.nonzero_columns.size} paths > max_paths {target.max_paths}")
        if not limits:
            notes = []
            if half < half_length:
                notes.append(
                    f"sinc half-length shortened from {half_length} to {half} samples to fit the target; "
                    f"passband error bound {candidate.passband_error_bound:.3g}"
                )
            return candidate, notes
    return None, [f"sinc mapping does not fit the target even with half-length {shortest}: " + ", ".join(limits)]


def _fit_nearest(target, taps, base):
    """Merge taps sharing a grid point, drop the weakest paths beyond max_paths, check the length."""
    columns = np.argmax(base.matrix != 0.0, axis=1)
    powers = np.array([t.power_linear for t in taps])
    occupied = sorted(set(columns.tolist()))
    path_power = {c: float(powers[columns == c].sum()) for c in occupied}
    dropped_columns = set()
    if target.max_paths is not None and len(occupied) > target.max_paths:
        # strongest first; at equal power the earlier path wins
        ranked = sorted(occupied, key=lambda c: (-path_power[c], c))
        dropped_columns = set(ranked[target.max_paths:])
    dropped = tuple(int(i) for i in np.flatnonzero(np.isin(columns, list(dropped_columns))))
    fitted = base.without_taps(dropped) if dropped else base
    kept_columns = [c for c in occupied if c not in dropped_columns]
    if target.max_fir_coefficients is not None:
        step = base.delay_step_samples
        needed = max(kept_columns) // step + 1
        if needed > target.max_fir_coefficients:
            reach_s = (target.max_fir_coefficients - 1) * step / base.sample_rate_hz
            latest = max(kept_columns)
            raise InputError(
                f"the target cannot hold this profile: a kept path lies at "
                f"{base.coefficient_delays_s[latest] * 1e9:.6g} ns (grid point {latest // step}), beyond the "
                f"target's FIR of {target.max_fir_coefficients} coefficients every {step} samples "
                f"(reach {reach_s * 1e9:.6g} ns)",
                hint=f"needs max_fir_coefficients >= {needed}",
            )
    merged = tuple(
        _merged_path(taps, [int(i) for i in np.flatnonzero(columns == c)], base.coefficient_delays_s[c])
        for c in kept_columns
        if np.count_nonzero(columns == c) > 1
    )
    return fitted, merged, dropped


def _merged_path(taps, members, delay_s):
    group = [taps[i] for i in members]
    direct = sum(t.direct_power_linear for t in group)
    diffuse = sum(t.diffuse_power_linear for t in group)
    remarks = []
    if direct == 0:
        fading, k = "rayleigh", None
    elif diffuse == 0:
        fading, k = "static", None
        remarks.append("static gains add coherently: the merged power depends on their phases")
    else:
        fading, k = "rician", direct / diffuse
    shifts = {t.los_doppler_hz or 0.0 for t in group if t.direct_power_linear > 0}
    if len(shifts) > 1:
        remarks.append("direct parts with different Doppler shifts beat: the envelope is not Rician")
    kinds = {(t.spectrum, t.max_doppler_hz, tuple(sorted(spectra.parameters_of(t).items())))
             for t in group if t.diffuse_power_linear > 0}
    if len(kinds) > 1:
        remarks.append("the diffuse parts' Doppler spectra differ: the sum has their power-weighted mixture")
    return MergedPath(
        delay_s=float(delay_s),
        taps=tuple(members),
        power_linear=float(direct + diffuse),
        fading=fading,
        k_linear=k,
        remark="; ".join(remarks),
    )


def _schema_problem(error, schema, file, base_pointer):
    path = [str(p) for p in error.absolute_path]
    if error.validator == "additionalProperties":
        known = sorted(schema["properties"])
        extra = sorted(set(error.instance) - set(known))
        key = extra[0] if extra else ""
        close = difflib.get_close_matches(key, known, n=1)
        hint = f"did you mean {close[0]!r}?" if close else "known keys: " + ", ".join(known)
        message = "unknown key " + ", ".join(repr(k) for k in extra)
        return Problem(file, _pointer(base_pointer, path + [key]), message, hint=hint)
    if error.validator == "minProperties":
        return Problem(file, _pointer(base_pointer, path), "the target is empty", hint="give at least one constraint")
    return Problem(file, _pointer(base_pointer, path), error.message)


def _semantic_problems(document, file, base_pointer):
    problems = []
    for key in ("sample_rate_hz", "max_update_rate_hz", "headroom_db"):
        value = document.get(key)
        if isinstance(value, float) and not math.isfinite(value):
            problems.append(Problem(file, _pointer(base_pointer, [key]), f"{key} must be finite, got {value!r}"))
    paths, length = document.get("max_paths"), document.get("max_fir_coefficients")
    if _is_int(paths) and _is_int(length) and paths > length:
        problems.append(Problem(
            file, _pointer(base_pointer, ["max_paths"]),
            f"max_paths {paths} exceeds max_fir_coefficients {length}: the path limit never applies",
            severity="warning",
        ))
    bits = document.get("coefficient_bits")
    headroom = document.get("headroom_db")
    if headroom is not None and bits is None:
        problems.append(Problem(
            file, _pointer(base_pointer, ["headroom_db"]),
            "headroom_db has no effect without coefficient_bits", severity="warning",
        ))
    usable_headroom = isinstance(headroom, (int, float)) and not isinstance(headroom, bool) and math.isfinite(headroom)
    if _is_int(bits) and usable_headroom:
        if granular_sqnr_db(bits, headroom) <= 0:
            problems.append(Problem(
                file, _pointer(base_pointer, ["headroom_db"]),
                f"headroom {headroom:g} dB leaves no resolution with {bits} bits "
                f"(SQNR {granular_sqnr_db(bits, headroom):.1f} dB)",
                hint=f"use less than {granular_sqnr_db(bits, 0.0):.1f} dB",
            ))
    return problems


def _pointer(base, parts):
    escaped = [p.replace("~", "~0").replace("/", "~1") for p in parts]
    return base + "".join("/" + p for p in escaped)


def _is_int(value):
    return isinstance(value, (int, float)) and not isinstance(value, bool) and float(value).is_integer()


def _int_or_none(value):
    return None if value is None else int(value)


def _float_or_none(value):
    return None if value is None else float(value)


__all__ = [
    "BETWEEN_UPDATES",
    "DEFAULT_HEADROOM_DB",
    "MIN_SINC_HALF_LENGTH",
    "Target",
    "TargetFit",
    "FitCosts",
    "MergedPath",
    "UpdateImages",
    "CoefficientQuantisation",
    "target_schema",
    "check_target",
    "parse_target",
    "check_target_file",
    "load_target",
    "fit_to_target",
    "update_images",
    "coefficient_quantisation",
    "granular_sqnr_db",
]
