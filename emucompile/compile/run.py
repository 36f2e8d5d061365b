"""Running a compile plan: the engine's chunks into the bundle writer, the manifest, the summary.

The pipeline of ``emucompile compile``::

    Profile --plan_compile--> CompilePlan --run_plan--> bundle directory
                              (rates, sizes,   (engine chunks -> BundleWriter)
                               seed, FIR map,
                               target fit)

:func:`compile_profile` is both steps in one call; :class:`CompileResult`
says what was made (:meth:`CompileResult.summary` is what the command line prints).
"""

from __future__ import annotations

import inspect
import time
from dataclasses import dataclass
from pathlib import Path

from emucompile.bundle.store import DEFAULT_MAX_SIZE_BYTES, BundleWriter, open_bundle
from emucompile.compile.defaults import chunk_samples
from emucompile.compile.plan import CompilePlan, plan_compile
from emucompile.models.rates import size_text
from emucompile.models import fading, spectra
from emucompile.models.grid import FirMap
from emucompile.profile.blocks import correlation_text
from emucompile.profile.target import fit_lines, fit_record


@dataclass(frozen=True)
class CompileResult:
    """What :func:`compile_profile` made: the bundle's path and manifest, the plan, the time taken."""

    path: Path
    manifest: dict
    plan: CompilePlan
    elapsed_s: float

    def summary(self) -> str:
        """The lines ``emucompile compile`` prints: bundle, profile, samples, seed, FIR, fit, files, time."""
        plan, manifest = self.plan, self.manifest
        seed_note = " (drawn; repeat with --seed)" if plan.sources.get("seed") == "drawn" else ""
        lines = [
            f"bundle      {self.path}",
            f"profile     {plan.profile.name}  ({plan.profile.n_taps} taps, sha256 {plan.profile_sha256[:16]}...)",
            f"samples     {plan.n_samples} per tap at {plan.update_rate_hz:g} Hz = {plan.duration_s:g} s"
            + ("  (periodic)" if plan.periodic else ""),
            f"method      {plan.method}, generator version {manifest['generator_version']}",
            f"seed        {plan.seed}{seed_note}",
        ]
        mimo_setup = plan.profile.mimo
        if mimo_setup is not None:
            lines.append(
                f"links       {mimo_setup.n_rx} rx x {mimo_setup.n_tx} tx, correlation "
                + correlation_text(mimo_setup.correlation)
            )
        conditions = {name: entry for name, entry in (manifest.get("conditions") or {}).items() if entry}
        if conditions:
            lines.append(
                "conditions  "
                + ", ".join(name.replace("_", " ") for name in conditions)
                + " (trajectories in manifest.json)"
            )
        expect = manifest.get("expect")
        if expect:
            lines.append(
                f"expect      {expect['checked'] - len(expect['missed'])} of {expect['checked']} target(s) met"
                + (
                    f"; missed, accepted with --accept-missed-targets: {', '.join(expect['missed'])}"
                    if expect["missed"]
                    else ""
                )
            )
        fir = manifest.get("fir")
        if fir:
            lines.append(
                f"FIR         {fir['n_fir']} coefficients at {fir['sample_rate_hz']:g} Hz, {fir['delay_mapping']} "
                f"mapping, bulk delay {fir['bulk_delay_samples']} samples, energy kept {fir['energy_kept']:.4f}, "
                f"RMS delay spread {fir['rms_delay_spread_s'] * 1e9:.1f} ns"
            )
        record = fit_record(manifest)
        if record is not None:
            lines.append("emulator fit  " + "\n              ".join(fit_lines(record)))
        files = manifest["files"]
        lines.append(f"files       {len(files)} ({size_text(sum(entry['size_bytes'] for entry in files))}):")
        lines += [f"              {entry['name']}  {size_text(entry['size_bytes'])}" for entry in files[:12]]
        if len(files) > 12:
            lines.append(f"              ... and {len(files) - 12} more (see manifest.json)")
        lines.append(f"time        {self.elapsed_s:.1f} s")
        return "\n".join(lines)

    def to_dict(self) -> dict:
        """``compile --json``: the summary's facts (docs/json-output.md)."""
        plan, manifest = self.plan, self.manifest
        target = manifest.get("target") or {}
        return {
            "bundle": str(self.path),
            "profile": plan.profile.name,
            "profile_sha256": plan.profile_sha256,
            "resolved_profile_sha256": manifest["resolved_profile_sha256"],
            "n_taps": plan.profile.n_taps,
            "n_rx": manifest["n_rx"],
            "n_tx": manifest["n_tx"],
            "n_samples": plan.n_samples,
            "update_rate_hz": plan.update_rate_hz,
            "duration_s": plan.duration_s,
            "periodic": plan.periodic,
            "method": plan.method,
            "generator_version": manifest["generator_version"],
            "seed": plan.seed,
            "sources": dict(plan.sources),
            "warnings": list(plan.warnings),
            "expect": manifest.get("expect"),
            "fir": manifest.get("fir"),
            "target_costs": target.get("costs"),
            "fit_acceptance": target.get("fit_acceptance"),
            "files": [
                {"name": e["name"], "size_bytes": e["size_bytes"], "sha256": e["sha256"]} for e in manifest["files"]
            ],
            "elapsed_s": self.elapsed_s,
        }


def compile_profile(
    profile,
    outdir,
    *,
    duration_s: float | None = None,
    update_rate_hz: float | None = None,
    seed: int | None = None,
    sample_rate_hz: float | None = None,
    delay_mapping: str | None = None,
    target=None,
    formats=(),
    periodic: bool | None = None,
    method: str | None = None,
    force: bool = False,
    max_size_bytes: int | None = DEFAULT_MAX_SIZE_BYTES,
    fit_tolerance_pct: float | None = None,
    accept_fit: bool = False,
    accept_missed_targets: bool = False,
    csv_any_size: bool = False,
    progress=None,
    plan: CompilePlan | None = None,
) -> CompileResult:
    """Compile ``profile`` into the bundle directory ``outdir``; all of it or nothing.

    The keywords are those of ``emucompile compile`` (a test keeps the two
    sets equal); a choice left at None comes from the profile's ``compile:``
    block, then from the defaults (module notes).

    Parameters
    ----------
    profile : Profile, str or os.PathLike
        A loaded profile, or the path of a profile file (its bytes are hashed
        into ``profile_sha256``).
    outdir : str or os.PathLike
        The bundle directory to create (``-o``).
    duration_s : float, optional
        Length of the record in seconds (``--duration``).
    update_rate_hz : float, optional
        Rate of the tap-gain samples (``--update-rate``).
    seed : int, optional
        Seed of the random streams; drawn from the system and recorded when
        neither given nor in the profile (``--seed``).
    sample_rate_hz : float, optional
        Emulator signal sample rate: adds the FIR map (``--sample-rate``).
    delay_mapping : {"sinc", "nearest"}, optional
        How tap delays map onto the FIR grid (``--delay-mapping``).
    target : emucompile.profile.target.Target, str or os.PathLike, optional
        Emulator constraints, parsed or a target file's path (``--target``);
        overrides the profile's ``target:`` block.
    formats : str or sequence of str
        Extra formats (cf32, ci16, csv, sigmf, fir), a comma-separated string
        or a sequence; npy is always written (``--format``).
    periodic : bool, optional
        Make the record loop seamlessly, period = record length (``--periodic``).
    method : {"doppler-filter", "sum-of-sinusoids"}, optional
        Tap-gain generator (``--method``).
    force : bool
        Replace ``outdir`` if it is a bundle (``--force``).
    csv_any_size : bool
        Lift the csv format's row limit (``--csv-any-size``).
    max_size_bytes : int or None
        Refuse to write more; None: no limit (``--max-size``).
    fit_tolerance_pct : float, optional
        How far the target fit may move the RMS delay spread, in % of the
        profile's, before the target counts as missed (``--fit-tolerance-pct``).
    accept_fit : bool
        Write the bundle even when the fit moves it further, recording the
        acceptance in the manifest (``--accept-fit``).
    accept_missed_targets : bool
        Compile even when an ``expect:`` target is missed, recording the misses
        in the manifest (``--accept-missed-targets``).
    progress : callable(samples_done, samples_total), optional
        Called as the record is written (the command line draws its bar with
        it; ``--quiet`` passes none).
    plan : CompilePlan, optional
        A plan from :func:`plan_compile` to run as it is; then no other choice
        may be given.

    Returns
    -------
    CompileResult

    Raises
    ------
    emucompile.errors.InputError
        On any impossible request (before anything is written).
    TypeError
        When ``plan`` is given together with a choice.

    Examples
    --------
    Not run as a doctest: it writes a bundle directory and takes seconds.

    >>> import emucompile
    >>> result = emucompile.compile_profile("profiles_demo/warehouse-robot.yaml",
    ...                                     "out/robot", duration_s=5, seed=7)  # doctest: +SKIP
    >>> bundle = emucompile.open_bundle(result.path)                            # doctest: +SKIP
    """
    choices = dict(
        duration_s=duration_s,
        update_rate_hz=update_rate_hz,
        seed=seed,
        sample_rate_hz=sample_rate_hz,
        delay_mapping=delay_mapping,
        target=target,
        formats=formats,
        periodic=periodic,
        method=method,
        force=force,
        max_size_bytes=max_size_bytes,
        fit_tolerance_pct=fit_tolerance_pct,
        accept_fit=accept_fit,
        accept_missed_targets=accept_missed_targets,
        csv_any_size=csv_any_size,
    )
    if plan is None:
        plan = plan_compile(profile, outdir, **choices)
    else:
        defaults = inspect.signature(compile_profile).parameters
        given = [name for name, value in choices.items() if value != defaults[name].default]
        if given:
            raise TypeError(f"compile_profile: give plan or choices, not both ({', '.join(given)})")
    return run_plan(plan, progress=progress)


def run_plan(plan: CompilePlan, *, progress=None) -> CompileResult:
    """Generate and write the bundle a :class:`CompilePlan` describes."""
    began = time.perf_counter()
    with BundleWriter(
        plan.outdir, plan.layout, force=plan.force, max_size_bytes=plan.max_size_bytes, progress=progress
    ) as writer:
        for start, gains in plan.channel.chunks(chunk_samples(plan.channel.n_links, plan.channel.n_taps)):
            writer.write_chunk(start, gains, owned=True)  # fresh engine arrays, finite by construction
        path = writer.finish(manifest_fields(plan))
    manifest = open_bundle(path).manifest
    return CompileResult(path=Path(path), manifest=manifest, plan=plan, elapsed_s=time.perf_counter() - began)


def manifest_fields(plan: CompilePlan) -> dict:
    """The manifest fields (docs/bundle-format.md) that the compile run knows (the writer adds the rest)."""
    engine = plan.engine
    generator = dict(engine.parameters())
    generator["reproducibility"] = fading.reproducibility()
    generator["choices"] = dict(plan.sources)
    fields = {
        "generator_version": fading.GENERATOR_VERSION,
        "profile_sha256": plan.profile_sha256,
        "resolved_profile_sha256": plan.profile.resolved_sha256(),
        "profile": plan.profile.document,
        "seed": plan.seed,
        "method": plan.method,
        "generator": generator,
        "duration_s": plan.duration_s,
        "periodic": plan.periodic,
        "taps": _manifest_taps(plan.profile, engine.tap_info()),
        "mimo": None if plan.profile.mimo is None else plan.profile.mimo.as_record(),
        "conditions": plan.channel.conditions_record(),
        "fir": None if plan.fir is None else _fir_entry(plan.fir),
    }
    if plan.target_fit is not None:
        fields["target"] = _target_entry(plan.target_fit)
        if plan.fit_acceptance is not None:
            fields["target"]["fit_acceptance"] = plan.fit_acceptance.to_dict()
    if plan.expect is not None:
        fields["expect"] = plan.expect
    return fields


def _manifest_taps(profile, info):
    taps = []
    for tap, used in zip(profile.taps, info):
        entry = {
            "delay_s": tap.delay_s,
            "power_db": tap.power_db,
            "power_linear": tap.power_linear,
            "fading": tap.fading,
            "k_db": tap.k_db if tap.fading == "rician" else None,
            "max_doppler_hz": tap.max_doppler_hz if tap.fading != "static" else None,
            "los_doppler_hz": used.get("los_doppler_hz", tap.los_doppler_hz),
            "los_phase_deg": used.get("los_phase_deg", tap.los_phase_deg),
            **spectra.record(tap.spectrum if tap.fading != "static" else None, spectra.parameters_of(tap)),
        }
        if tap.los_trajectory is not None:
            entry["los_doppler_hz"] = None
            entry["los_trajectory"] = tap.los_trajectory
            entry["los_peak_doppler_hz"] = tap.los_peak_doppler_hz
        entry["generator"] = {k: v for k, v in used.items() if k not in entry and k != "index"}
        taps.append(entry)
    return taps


def _fir_entry(grid_map: FirMap) -> dict:
    entry = dict(grid_map.manifest_entry())
    entry["parameters"] = grid_map.parameters()
    return entry


def _target_entry(fit) -> dict:
    return {"constraints": fit.target.to_dict(), "costs": fit.costs.to_dict()}


__all__ = ["CompileResult", "compile_profile", "run_plan", "manifest_fields"]
