"""Compile a profile into a bundle (contract 3): plan, synthesise, write; and reproduce it.

The pipeline of ``emucompile compile``::

    Profile --plan_compile--> CompilePlan --compile_profile--> bundle directory
                              (rates, sizes,    (engine chunks -> BundleWriter)
                               seed, FIR map,
                               target fit)

:func:`plan_compile` settles every choice and checks it before anything is
generated or written (so the size estimate and every refusal come first);
:func:`compile_profile` runs the plan; :func:`reproduce_bundle` regenerates a
bundle from its own manifest and says whether the numbers are identical,
equal within the stated tolerance, or different.

Choices where neither the command line nor the profile's ``compile:`` block
says otherwise (command line first, then the profile, then these):

- update rate: :data:`DEFAULT_UPDATE_FACTOR` x the largest Doppler of the
  profile (band edges and direct-part shifts), or
  :data:`DEFAULT_UPDATE_RATE_NO_DOPPLER_HZ` for a channel that does not move;
  capped at the target's maximum update rate when a target gives one.
- duration: :data:`DEFAULT_DURATION_S`.
- seed: drawn from the operating system's entropy and recorded (the summary
  prints it, so the run can be repeated with ``--seed``).
- method: the engine's default (:data:`emucompile.fading.DEFAULT_METHOD`).
- delay mapping: sinc (with a target, the fit chooses unless told).
"""

from __future__ import annotations

import hashlib
import math
import secrets
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from emucompile import fading
from emucompile.bundle import (
    DEFAULT_MAX_SIZE_BYTES,
    MAX_UPDATE_TO_DOPPLER,
    RATE_RANGE_HZ,
    BundleLayout,
    BundleWriter,
    open_bundle,
    parse_formats,
)
from emucompile.channel import SHADOWING_FILE, SHADOWING_ROLE, ChannelPlan
from emucompile.errors import InputError
from emucompile.grid import FirMap, fir_map, moving_fir_map
from emucompile.profile import Profile, load_profile, profile_from_document

DEFAULT_UPDATE_FACTOR = 64
"""Default update rate as a multiple of the largest Doppler (contract: >= 32)."""
MIN_UPDATE_FACTOR = fading.MIN_UPDATE_RATIO
"""Below this multiple of the largest Doppler the gains cannot carry the spectrum
(Nyquist, 2x, with the engine's 10 % guard band)."""
WARN_UPDATE_FACTOR = 16
"""Below this multiple, emulators that hold or linearly interpolate coefficients add images."""
DEFAULT_UPDATE_RATE_NO_DOPPLER_HZ = 1000.0
DEFAULT_DURATION_S = 10.0
CHUNK_SAMPLES = 1 << 16
MAX_SEED = 2**64 - 1  # as the profile's compile.seed
MAX_FIR_COEFFICIENTS = 1 << 20
"""Longest FIR map (delay span x sample rate): 8 MiB per tap; no emulator takes more."""


@dataclass(frozen=True)
class CompilePlan:
    """Every choice of one compile run, checked; nothing generated or written yet.

    Build it with :func:`plan_compile`. ``sources`` says where each choice came
    from (``"option"``, ``"profile"``, ``"target"``, ``"default"`` or
    ``"drawn"`` for a seed drawn from the system's entropy).
    """

    profile: Profile
    profile_sha256: str
    outdir: Path
    update_rate_hz: float
    n_samples: int
    seed: int
    method: str
    periodic: bool
    formats: tuple
    fir: FirMap | None
    target_fit: object | None
    layout: BundleLayout
    force: bool
    max_size_bytes: int | None
    sources: dict = field(default_factory=dict)
    warnings: tuple = ()
    engine: fading.FadingPlan = field(default=None, repr=False, compare=False)
    channel: ChannelPlan = field(default=None, repr=False, compare=False)

    @property
    def duration_s(self) -> float:
        return self.n_samples / self.update_rate_hz

    @property
    def estimated_size_bytes(self) -> int:
        return self.layout.estimated_size_bytes


@dataclass(frozen=True)
class CompileResult:
    """What :func:`compile_profile` made: the bundle's path and manifest, the plan, the time taken."""

    path: Path
    manifest: dict
    plan: CompilePlan
    elapsed_s: float


def plan_compile(
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
) -> CompilePlan:
    """Settle and check every choice of a compile run (see the module notes for defaults).

    Parameters
    ----------
    profile : Profile, str or os.PathLike
        A loaded profile, or the path of a profile file (its bytes are hashed
        into ``profile_sha256``; for a Profile object the hash is that of its
        canonical resolved document).
    outdir : str or os.PathLike
        The bundle directory to create.
    duration_s, update_rate_hz, seed, sample_rate_hz, delay_mapping, periodic, method
        Override the profile's ``compile:`` block.
    target : emucompile.target.Target, str or os.PathLike, optional
        Emulator constraints (a target file's path, or a parsed Target);
        overrides the profile's ``target:`` block.
    formats : str or sequence of str
        Extra formats (cf32, ci16, csv, sigmf, fir); npy is always written.
    force : bool
        Replace OUTDIR if it is a bundle.
    max_size_bytes : int or None
        Refuse to write more (None: no limit).

    Raises
    ------
    emucompile.errors.InputError
        On any impossible request, with the limit and what would work.
    """
    profile, profile_sha256 = _profile_and_hash(profile)
    defaults = profile.compile
    sources: dict = {}
    warnings: list[str] = []

    target_obj = _target(target, profile, sources)
    largest_doppler = profile.largest_doppler_hz

    rate = _pick(sources, "update_rate_hz", update_rate_hz, defaults.update_rate_hz)
    if rate is None:
        if largest_doppler > 0:
            rate = DEFAULT_UPDATE_FACTOR * largest_doppler
        else:
            rate = DEFAULT_UPDATE_RATE_NO_DOPPLER_HZ
        cap = getattr(target_obj, "max_update_rate_hz", None)
        if cap is not None and rate > cap:
            rate = float(cap)
            sources["update_rate_hz"] = "target"
    rate = _in_rate_range("update rate", _positive("update rate", rate, "Hz"))
    _check_update_rate(rate, largest_doppler, warnings)

    duration = _pick(sources, "duration_s", duration_s, defaults.duration_s)
    duration = DEFAULT_DURATION_S if duration is None else _positive("duration", duration, "s")
    if not math.isfinite(duration * rate):
        raise InputError(f"a duration of {duration:g} s at {rate:g} Hz is more samples than any bundle holds")
    n_samples = int(round(duration * rate))
    if n_samples < 1:
        raise InputError(
            f"a duration of {duration:g} s at {rate:g} Hz gives no sample",
            hint=f"use at least {1.0 / rate:g} s",
        )

    seed_value = _pick(sources, "seed", seed, defaults.seed)
    if seed_value is None:
        seed_value = secrets.randbits(63)
        sources["seed"] = "drawn"
    seed_value = int(seed_value)
    if not 0 <= seed_value <= MAX_SEED:
        raise InputError(f"seed {_short_number(seed_value)} must be an integer from 0 to 2**64 - 1")

    method_value = _pick(sources, "method", method, defaults.method) or fading.DEFAULT_METHOD
    periodic_value = bool(_pick(sources, "periodic", periodic, defaults.periodic) or False)
    formats_value = parse_formats(formats or ())
    mapping = _pick(sources, "delay_mapping", delay_mapping, defaults.delay_mapping)
    rate_fs = _pick(sources, "sample_rate_hz", sample_rate_hz, defaults.sample_rate_hz)

    _refuse_oversized(profile, rate, n_samples, formats_value, rate_fs, target_obj, max_size_bytes)
    fit = None
    grid_map = None
    conditions = profile.conditions
    moving = getattr(conditions, "moving_propagation", None)
    if moving is not None and target_obj is not None:
        raise InputError("a moving delay cannot be fitted to a target yet", hint="drop the target, or the moving delay")
    if moving is not None:
        if rate_fs is None:
            raise InputError("a moving delay needs a sample rate: the FIR follows the delay",
                             hint="give --sample-rate (or compile: sample_rate_hz)")
        if mapping not in (None, "sinc"):
            raise InputError("a moving delay needs the sinc delay mapping (a nearest-sample map would jump)",
                             hint="use --delay-mapping sinc")
        rate_fs = _positive("sample rate", rate_fs, "Hz")
        mapping = "sinc"
        grid_map = moving_fir_map([t.delay_s for t in profile.taps], [t.power_linear for t in profile.taps],
                                  rate_fs, moving, rate)
        if "fir" not in formats_value:
            formats_value = formats_value + ("fir",)
            sources["formats"] = "fir added: a moving delay's FIR varies in time"
    elif target_obj is not None:
        from emucompile.target import fit_to_target

        fit = fit_to_target(target_obj, profile, update_rate_hz=rate, sample_rate_hz=rate_fs,
                            delay_mapping=mapping)
        grid_map = fit.fir_map
    elif rate_fs is not None:
        rate_fs = _positive("sample rate", rate_fs, "Hz")
        grid_map = fir_map([t.delay_s for t in profile.taps], [t.power_linear for t in profile.taps],
                           rate_fs, mapping=mapping or "sinc")

    engine = fading.plan(profile, rate, n_samples, seed_value, method=method_value,
                         periodic=periodic_value)
    channel = ChannelPlan(profile, engine)
    extra = ()
    if channel.shadowing is not None:
        extra = ((SHADOWING_FILE, SHADOWING_ROLE, np.float64, (engine.n_samples,),
                  lambda: channel.shadowing_db(0, engine.n_samples), ("sample",)),)
    layout = BundleLayout.from_profile(
        profile,
        n_samples=engine.n_samples,
        update_rate_hz=rate,
        n_rx=profile.n_rx,
        n_tx=profile.n_tx,
        formats=formats_value,
        fir_map=None if grid_map is None else grid_map.matrix,
        fir_maps=grid_map.maps if moving is not None else None,
        extra_arrays=extra,
        csv_max_rows=None if force else BundleLayout.__dataclass_fields__["csv_max_rows"].default,
    )
    if max_size_bytes is not None and layout.estimated_size_bytes > max_size_bytes:
        raise InputError(
            f"the bundle would take about {_size_text(layout.estimated_size_bytes)}, above the limit "
            f"of {_size_text(max_size_bytes)}",
            hint="shorten --duration, lower --update-rate, drop formats, or raise --max-size",
        )
    return CompilePlan(
        profile=profile,
        profile_sha256=profile_sha256,
        outdir=Path(outdir),
        update_rate_hz=rate,
        n_samples=engine.n_samples,
        seed=seed_value,
        method=method_value,
        periodic=periodic_value,
        formats=formats_value,
        fir=grid_map,
        target_fit=fit,
        layout=layout,
        force=force,
        max_size_bytes=max_size_bytes,
        sources=sources,
        warnings=tuple(warnings),
        engine=engine,
        channel=channel,
    )


def compile_profile(profile, outdir, *, progress=None, **options) -> CompileResult:
    """Compile ``profile`` into the bundle directory ``outdir``; all of it or nothing.

    Parameters
    ----------
    profile, outdir, **options
        As for :func:`plan_compile`.
    progress : callable(samples_done, samples_total), optional
        Called as the record is written (the command line draws a bar with it).

    Returns
    -------
    CompileResult

    Examples
    --------
    >>> import emucompile
    >>> result = emucompile.compile_profile("profiles_demo/warehouse-robot.yaml",
    ...                                     "out/robot", duration_s=5, seed=7)  # doctest: +SKIP
    >>> bundle = emucompile.open_bundle(result.path)                            # doctest: +SKIP
    """
    plan = options.pop("plan", None) or plan_compile(profile, outdir, **options)
    return run_plan(plan, progress=progress)


def run_plan(plan: CompilePlan, *, progress=None) -> CompileResult:
    """Generate and write the bundle a :class:`CompilePlan` describes."""
    began = time.perf_counter()
    engine = plan.engine
    with BundleWriter(plan.outdir, plan.layout, force=plan.force,
                      max_size_bytes=plan.max_size_bytes, progress=progress) as writer:
        for start, gains in plan.channel.chunks(CHUNK_SAMPLES):
            writer.write_chunk(start, gains)
        path = writer.finish(manifest_fields(plan))
    manifest = open_bundle(path).manifest
    return CompileResult(path=Path(path), manifest=manifest, plan=plan,
                         elapsed_s=time.perf_counter() - began)


def manifest_fields(plan: CompilePlan) -> dict:
    """The contract-3 manifest fields that the compile run knows (the writer adds the rest)."""
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
    return fields


# -- reproduce -----------------------------------------------------------------------

IDENTICAL = "identical"
WITHIN_TOLERANCE = "within tolerance"
DIFFERENT = "different"


@dataclass(frozen=True)
class ReproduceResult:
    """The verdict of :func:`reproduce_bundle` and the evidence behind it.

    ``status`` is ``"identical"`` (every regenerated data byte equal),
    ``"within tolerance"`` (numbers equal within the engine's stated
    cross-platform tolerance, on another platform or library version) or
    ``"different"``. ``max_relative_error`` is the largest |difference|
    relative to each tap's RMS gain; ``platform_differences`` lists what
    differs between the bundle's recorded platform and this one.
    """

    status: str
    files: tuple
    max_relative_error: float
    tolerance: float
    platform_differences: tuple
    message: str

    @property
    def ok(self) -> bool:
        return self.status != DIFFERENT


def reproduce_bundle(path, *, progress=None) -> ReproduceResult:
    """Regenerate a bundle's tap gains and FIR map from its manifest and compare.

    The embedded resolved profile, the seed, the method, the update rate, the
    record length, the FIR choices and the target are read from the manifest
    and planned again exactly as ``compile`` plans them; the gains are
    regenerated chunk by chunk (bounded memory), their npy bytes hashed and
    compared with the recorded SHA-256 of ``tap_gains.npy`` (likewise
    ``fir_map.npy``), and compared numerically with the stored gains, so a
    mismatch says how large it is. The other data formats are written from
    the same gains by deterministic writers; ``emucompile verify`` checks
    their hashes.
    """
    bundle = open_bundle(path, verify=False)
    manifest = bundle.manifest
    if manifest.get("generator_version") != fading.GENERATOR_VERSION:
        raise InputError(
            f"{path}: made by generator version {manifest.get('generator_version')}, this program "
            f"has version {fading.GENERATOR_VERSION}",
            hint="regenerate with the emucompile release that made the bundle",
        )
    plan = _replan(manifest, path)
    engine = plan.engine
    stored = bundle.tap_gains
    digest = hashlib.sha256(_npy_header(np.complex64, stored.shape))
    worst = 0.0
    rms = np.sqrt(np.maximum([t.power_linear for t in plan.profile.taps], 1e-300))
    for start, block in plan.channel.chunks(CHUNK_SAMPLES):
        gains = block
        digest.update(np.ascontiguousarray(block).tobytes())
        difference = np.abs(block - stored[start:start + len(block)]).max(axis=(0, 1, 2))
        worst = max(worst, float((difference / rms).max()))
        if progress is not None:
            progress(start + len(gains), engine.n_samples)
    files = [("tap_gains.npy", digest.hexdigest() == bundle.entry("tap_gains")["sha256"])]
    if plan.fir is not None:
        matrix = np.ascontiguousarray(plan.fir.matrix)
        fir_digest = hashlib.sha256(_npy_header(matrix.dtype, matrix.shape) + matrix.tobytes())
        entry = bundle.entry("fir_map")
        files.append(("fir_map.npy", entry is not None and fir_digest.hexdigest() == entry["sha256"]))
    if plan.channel.shadowing is not None:
        values = np.ascontiguousarray(plan.channel.shadowing_db(0, engine.n_samples), dtype="<f8")
        shadow_digest = hashlib.sha256(_npy_header(values.dtype, values.shape) + values.tobytes())
        entry = bundle.entry(SHADOWING_ROLE)
        files.append((SHADOWING_FILE, entry is not None and shadow_digest.hexdigest() == entry["sha256"]))
    platform_differences = _platform_differences(manifest.get("platform") or {})
    tolerance = fading.CROSS_PLATFORM_TOLERANCE
    fir_same = all(ok for name, ok in files if name != "tap_gains.npy")
    if all(ok for _, ok in files) and worst == 0.0:
        status, message = IDENTICAL, "identical: every regenerated data byte equals the bundle's"
    elif worst <= tolerance and fir_same and platform_differences:
        status = WITHIN_TOLERANCE
        message = (f"within tolerance: largest difference {worst:.2e} x RMS gain <= {tolerance:g}, "
                   f"on a different platform or library version ({'; '.join(platform_differences)})")
    else:
        status = DIFFERENT
        where = ", ".join(name for name, ok in files if not ok)
        why = "" if platform_differences else " on the same platform and library versions"
        message = f"different ({where}): largest difference {worst:.2e} x RMS gain{why}"
    return ReproduceResult(status=status, files=tuple(files), max_relative_error=worst,
                           tolerance=tolerance, platform_differences=tuple(platform_differences),
                           message=message)


def _replan(manifest: dict, path) -> CompilePlan:
    """The plan ``compile`` made for this manifest, rebuilt from the manifest alone."""
    profile = profile_from_document(manifest["profile"], source=f"{path}/manifest.json#/profile")
    fir = manifest.get("fir") or {}
    target = None
    if manifest.get("target"):
        from emucompile.target import parse_target

        target = parse_target(manifest["target"]["constraints"], file=f"{path}/manifest.json",
                              base_pointer="/target/constraints")
    return plan_compile(
        profile,
        Path(path),
        duration_s=manifest["n_samples"] / manifest["update_rate_hz"],
        update_rate_hz=manifest["update_rate_hz"],
        seed=manifest["seed"],
        sample_rate_hz=fir.get("sample_rate_hz"),
        delay_mapping=fir.get("delay_mapping"),
        target=target,
        periodic=manifest["periodic"],
        method=manifest["method"],
        max_size_bytes=None,
    )


# -- helpers -----------------------------------------------------------------------------


def _profile_and_hash(profile):
    if isinstance(profile, Profile):
        return profile, profile.resolved_sha256()
    path = Path(profile)
    loaded = load_profile(path)  # every problem of the file, or an error naming it
    return loaded, hashlib.sha256(path.read_bytes()).hexdigest()


def _target(target, profile, sources):
    if target is None:
        found = getattr(profile, "target", None)
        if found is not None:
            sources["target"] = "profile"
        return found
    sources["target"] = "option"
    if isinstance(target, (str, Path)):
        from emucompile import target as target_module

        return target_module.load_target(target)
    return target


def _pick(sources, name, option, from_profile):
    if option is not None:
        sources[name] = "option"
        return option
    if from_profile is not None:
        sources[name] = "profile"
        return from_profile
    sources[name] = "default"
    return None


def _refuse_oversized(profile, rate, n_samples, formats, rate_fs, target, max_size_bytes) -> None:
    """Closed-form sizes, checked before anything is designed or allocated (refused, never clamped).

    The rate plan grows with update rate / Doppler; the FIR map with delay span x
    sample rate; the bundle at least by its tap gains, each extra format's copy and
    the FIR map (lower bounds: the exact estimate follows once the map exists).
    """
    edges = [t.max_doppler_hz for t in profile.taps
             if t.fading != "static" and t.max_doppler_hz is not None and t.max_doppler_hz > 0]
    if edges and rate / min(edges) > MAX_UPDATE_TO_DOPPLER:
        raise InputError(
            f"update rate {rate:g} Hz is {rate / min(edges):.3g} x the smallest maximum Doppler "
            f"{min(edges):g} Hz, above the limit of {MAX_UPDATE_TO_DOPPLER:g} x of the interpolation design",
            hint=f"use --update-rate {MAX_UPDATE_TO_DOPPLER * min(edges):g} or less; an emulator "
                 "interpolates between updates",
        )
    n_fir = 0
    if rate_fs is not None and target is None:
        rate_fs = _in_rate_range("sample rate", _positive("sample rate", rate_fs, "Hz"))
        delays = [t.delay_s for t in profile.taps]
        n_fir = math.floor((max(delays) - min(delays)) * rate_fs) + 1
        if n_fir > MAX_FIR_COEFFICIENTS:
            raise InputError(
                f"the FIR map would have {n_fir} coefficients per tap (delay span {max(delays) - min(delays):g} s "
                f"x sample rate {rate_fs:g} Hz), above the limit of {MAX_FIR_COEFFICIENTS}",
                hint="lower --sample-rate, or shorten the delay span",
            )
    gains = n_samples * profile.n_rx * profile.n_tx * profile.n_taps * 8
    copies = {"cf32": 1.0, "ci16": 0.5, "csv": 1.0, "sigmf": 1.0}
    least = gains * (1 + sum(copies.get(name, 0.0) for name in formats)) + profile.n_taps * n_fir * 8
    if "fir" in formats:
        least += n_samples * profile.n_rx * profile.n_tx * n_fir * 8
    if max_size_bytes is not None and least > max_size_bytes:
        raise InputError(
            f"the bundle would take at least {_size_text(int(least))}, above the limit of {_size_text(max_size_bytes)}",
            hint="shorten --duration, lower --update-rate, drop formats, or raise --max-size",
        )


def _short_number(value: int) -> str:
    text = str(value) if abs(value) < 10**40 else f"{str(value)[:20]}... ({len(str(abs(value)))} digits)"
    return text


def _in_rate_range(what, rate):
    low, high = RATE_RANGE_HZ
    if not low <= rate <= high:
        raise InputError(f"{what} {rate:g} Hz lies outside {low:g} to {high:g} Hz")
    return rate


def _positive(what, value, unit):
    try:
        number = float(value)
    except (TypeError, ValueError):
        raise InputError(f"{what} must be a number, got {value!r}") from None
    if not (number > 0 and math.isfinite(number)):
        raise InputError(f"{what} must be finite and > 0 {unit}, got {value!r}")
    return number


def _check_update_rate(rate, largest_doppler, warnings):
    if largest_doppler <= 0:
        return
    minimum = MIN_UPDATE_FACTOR * largest_doppler
    if rate < minimum:
        raise InputError(
            f"update rate {rate:g} Hz is below the minimum {minimum:g} Hz for the largest Doppler "
            f"{largest_doppler:g} Hz ({MIN_UPDATE_FACTOR:g} x, Nyquist with a guard band)",
            hint=f"use --update-rate {math.ceil(minimum)} or more",
        )
    if rate < WARN_UPDATE_FACTOR * largest_doppler:
        warnings.append(
            f"update rate {rate:g} Hz is only {rate / largest_doppler:.1f} x the largest Doppler "
            f"({largest_doppler:g} Hz): an emulator that holds or linearly interpolates coefficients "
            f"between updates will add images; {WARN_UPDATE_FACTOR} x ({WARN_UPDATE_FACTOR * largest_doppler:g} Hz) "
            "or more avoids that"
        )


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
            "spectrum": tap.spectrum if tap.fading != "static" else None,
            "sigma_hz": tap.sigma_hz,
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


def _npy_header(dtype, shape) -> bytes:
    from emucompile.formats import npy_header

    return npy_header(dtype, tuple(shape))


def _platform_differences(recorded: dict) -> list[str]:
    from emucompile.bundle import platform_info

    here = platform_info()
    return [f"{key}: {recorded.get(key)} -> {here.get(key)}" for key in sorted(here)
            if recorded.get(key) != here.get(key)]


def _size_text(n_bytes: int) -> str:
    for unit, size in (("GiB", 1024**3), ("MiB", 1024**2), ("KiB", 1024)):
        if n_bytes >= size:
            return f"{n_bytes / size:.1f} {unit}"
    return f"{n_bytes} B"


__all__ = [
    "CompilePlan",
    "CompileResult",
    "ReproduceResult",
    "plan_compile",
    "compile_profile",
    "run_plan",
    "manifest_fields",
    "reproduce_bundle",
    "DEFAULT_UPDATE_FACTOR",
    "WARN_UPDATE_FACTOR",
    "DEFAULT_DURATION_S",
    "IDENTICAL",
    "WITHIN_TOLERANCE",
    "DIFFERENT",
]
