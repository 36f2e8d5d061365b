"""Compile a profile into a bundle (docs/bundle-format.md): plan, synthesise, write; and reproduce it.

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
- method: the engine's default (:data:`emucompile.models.fading.DEFAULT_METHOD`).
- delay mapping: sinc (with a target, the fit chooses unless told).
"""

from __future__ import annotations

import hashlib
import inspect
import math
import secrets
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from emucompile.models import fading, spectra
from emucompile.bundle.store import (
    DEFAULT_MAX_SIZE_BYTES,
    BundleLayout,
    BundleWriter,
    open_bundle,
    parse_formats,
)
from emucompile.models.channel import SHADOWING_FILE, SHADOWING_ROLE, ChannelPlan
from emucompile.errors import InputError
from emucompile.models.grid import FirMap, fir_map, moving_fir_map
from emucompile.profile.model import Profile, load_profile, profile_from_document

from emucompile.compile.rules import (  # noqa: F401  (the defaults are the rules' own)
    DEFAULT_DURATION_S,
    DEFAULT_UPDATE_FACTOR,
    DEFAULT_UPDATE_RATE_NO_DOPPLER_HZ,
    MIN_UPDATE_FACTOR,
    WARN_UPDATE_FACTOR,
    CompileRefused,
    expect_record,
    fit_target,
    refuse_oversized,
    resolve_target,
    settle_choices,
)
from emucompile.compile.rules import size_text as _size_text
CHUNK_SAMPLES = 1 << 16


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
    fit_acceptance: object | None = None  # emucompile.profile.target.FitAcceptance of a target fit
    findings: tuple = ()
    """Every rule's finding (:class:`emucompile.compile.rules.Finding`; warnings only, since errors refuse)."""
    expect: dict | None = None
    """The ``expect:`` targets checked before planning (:func:`expect_record`); None without targets."""
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
    fit_tolerance_pct: float | None = None,
    accept_fit: bool = False,
    accept_missed_targets: bool = False,
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
    target : emucompile.profile.target.Target, str or os.PathLike, optional
        Emulator constraints (a target file's path, or a parsed Target);
        overrides the profile's ``target:`` block.
    formats : str or sequence of str
        Extra formats (cf32, ci16, csv, sigmf, fir); npy is always written.
    force : bool
        Replace OUTDIR if it is a bundle.
    max_size_bytes : int or None
        Refuse to write more (None: no limit).
    fit_tolerance_pct : float, optional
        How far a target fit may move the RMS delay spread, in % of the
        profile's (default :data:`emucompile.profile.target.DEFAULT_FIT_TOLERANCE_PCT`).
    accept_fit : bool
        Accept a fit beyond that tolerance (recorded in the manifest).
    accept_missed_targets : bool
        Compile even when an ``expect:`` target of the profile is missed (the
        misses are recorded in the manifest's ``expect`` and the warnings).

    Raises
    ------
    emucompile.errors.CheckFailed
        An ``expect:`` target is missed (checked first) and not accepted; exit 1.
    emucompile.errors.InputError
        On any impossible request, with the limit and what would work.
    emucompile.profile.target.TargetMissed
        (exit 1) The fit moves the RMS delay spread beyond the tolerance and
        ``accept_fit`` is False; nothing is written.
    """
    profile, profile_sha256 = _profile_and_hash(profile)
    expect = expect_record(profile, accept_missed_targets)
    sources: dict = {}
    target_obj = resolve_target(target, profile, sources)
    choices, findings = settle_choices(
        profile, duration_s=duration_s, update_rate_hz=update_rate_hz, seed=seed, sample_rate_hz=sample_rate_hz,
        delay_mapping=delay_mapping, periodic=periodic, method=method, target=target_obj, sources=sources)
    if choices is None:
        raise CompileRefused(findings)
    warnings = [f.text() for f in findings if f.severity == "warning"]
    if expect and expect["missed"]:
        warnings.append(f"compiled although {len(expect['missed'])} expect: target(s) are missed "
                        f"(--accept-missed-targets): {', '.join(expect['missed'])}")
    rate, n_samples = choices.update_rate_hz, choices.n_samples
    seed_value = choices.seed
    if seed_value is None:
        seed_value = secrets.randbits(63)
        sources["seed"] = "drawn"
    seed_value = int(seed_value)
    method_value, periodic_value = choices.method, choices.periodic
    formats_value = parse_formats(formats or ())
    mapping, rate_fs = choices.delay_mapping, choices.sample_rate_hz

    refuse_oversized(profile, rate, n_samples, formats_value, rate_fs, target_obj, max_size_bytes)
    fit = None
    acceptance = None
    grid_map = None
    conditions = profile.conditions
    moving = getattr(conditions, "moving_propagation", None)
    if moving is not None:  # the rules have checked the sample rate, the mapping and the target
        mapping = "sinc"
        grid_map = moving_fir_map([t.delay_s for t in profile.taps], [t.power_linear for t in profile.taps],
                                  rate_fs, moving, rate)
        if "fir" not in formats_value:
            formats_value = formats_value + ("fir",)
            sources["formats"] = "fir added: a moving delay's FIR varies in time"
    elif target_obj is not None:
        fit, acceptance = fit_target(profile, target_obj, choices, fit_tolerance_pct, accept_fit)
        grid_map = fit.fir_map
    elif rate_fs is not None:
        grid_map = fir_map([t.delay_s for t in profile.taps], [t.power_linear for t in profile.taps],
                           rate_fs, mapping=mapping or "sinc")

    engine = fading.plan(profile, rate, n_samples, seed_value, method=method_value,
                         periodic=periodic_value)
    channel = ChannelPlan(profile, engine)
    extra = ()
    if channel.shadowing is not None:
        extra = ((SHADOWING_FILE, SHADOWING_ROLE, np.float64, (engine.n_samples,),
                  channel.shadowing_db, ("sample",)),)
    layout = BundleLayout.from_profile(
        profile,
        n_samples=engine.n_samples,
        update_rate_hz=rate,
        n_rx=profile.n_rx,
        n_tx=profile.n_tx,
        formats=formats_value,
        fir_map=None if grid_map is None else grid_map.matrix,
        fir_maps=grid_map.sparse if moving is not None else None,
        extra_arrays=extra,
        fir_codes=None if fit is None else _fir_codes(fit),
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
        fit_acceptance=acceptance,
        layout=layout,
        force=force,
        max_size_bytes=max_size_bytes,
        sources=sources,
        warnings=tuple(warnings),
        findings=tuple(findings),
        expect=expect,
        engine=engine,
        channel=channel,
    )


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
    choices = dict(duration_s=duration_s, update_rate_hz=update_rate_hz, seed=seed,
                   sample_rate_hz=sample_rate_hz, delay_mapping=delay_mapping, target=target,
                   formats=formats, periodic=periodic, method=method, force=force,
                   max_size_bytes=max_size_bytes, fit_tolerance_pct=fit_tolerance_pct,
                   accept_fit=accept_fit, accept_missed_targets=accept_missed_targets)
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
    with BundleWriter(plan.outdir, plan.layout, force=plan.force,
                      max_size_bytes=plan.max_size_bytes, progress=progress) as writer:
        for start, gains in plan.channel.chunks(CHUNK_SAMPLES):
            writer.write_chunk(start, gains, owned=True)  # fresh engine arrays, finite by construction
        path = writer.finish(manifest_fields(plan))
    manifest = open_bundle(path).manifest
    return CompileResult(path=Path(path), manifest=manifest, plan=plan,
                         elapsed_s=time.perf_counter() - began)


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


# -- reproduce -----------------------------------------------------------------------

IDENTICAL = "identical"
WITHIN_TOLERANCE = "within tolerance"
DIFFERENT = "different"


SAME_BYTES = "same bytes"
BYTES_DIFFER = "bytes differ"
EDITED = "edited after compiling"
MISSING = "missing"
NOT_REGENERATED = "not regenerated"


@dataclass(frozen=True)
class FileComparison:
    """One data file of the manifest: the recorded, the regenerated and the on-disk SHA-256.

    ``status`` is ``"same bytes"`` (all three equal), ``"bytes differ"`` (the
    regenerated bytes differ from what the manifest records), ``"edited after
    compiling"`` (regenerated = recorded, but the file on disk is neither),
    ``"missing"`` (listed, not on disk) or ``"not regenerated"`` (a file this
    version does not write from the manifest's choices).
    """

    name: str
    status: str
    recorded_sha256: str
    regenerated_sha256: str | None
    on_disk_sha256: str | None

    def to_dict(self) -> dict:
        return {"name": self.name, "status": self.status, "recorded_sha256": self.recorded_sha256,
                "regenerated_sha256": self.regenerated_sha256, "on_disk_sha256": self.on_disk_sha256}


@dataclass(frozen=True)
class ReproduceResult:
    """The verdict of :func:`reproduce_bundle` and the evidence behind it.

    ``status`` is ``"identical"`` (every data file regenerated with the bytes
    the manifest records and the disk holds), ``"within tolerance"`` (numbers
    equal within the engine's stated cross-platform tolerance, on another
    platform or library version) or ``"different"``. ``files`` holds one
    :class:`FileComparison` per data file the manifest lists, in its order.
    ``max_relative_error`` is the largest |regenerated - stored| gain relative
    to each tap's RMS gain; ``platform_differences`` lists what differs between
    the bundle's recorded platform and this one.
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

    @property
    def differing(self) -> tuple:
        """Names of the files whose status is not "same bytes"."""
        return tuple(f.name for f in self.files if f.status != SAME_BYTES)

    def to_dict(self) -> dict:
        """The JSON form (``reproduce --json``; docs/json-output.md)."""
        return {"status": self.status, "ok": self.ok, "message": self.message,
                "files": [f.to_dict() for f in self.files], "differing": list(self.differing),
                "max_relative_error": self.max_relative_error if math.isfinite(self.max_relative_error) else None,
                "tolerance": self.tolerance,
                "platform_differences": list(self.platform_differences)}


def reproduce_bundle(path, *, progress=None) -> ReproduceResult:
    """Regenerate every data file of a bundle from its manifest and compare, file by file.

    The embedded resolved profile, the seed, the method, the update rate, the
    record length, the FIR choices, the formats and the target are read from
    the manifest and planned again exactly as ``compile`` plans them; the
    whole bundle is written again into a temporary directory beside it (or in
    the system's temporary directory when that is not writable), chunk by
    chunk, and removed afterwards. Each data file the manifest lists is
    compared three ways: regenerated, recorded in the manifest and on disk
    (so a file edited after compiling is named as such). The stored gains are
    also compared numerically with the regenerated ones, so a mismatch says
    how large it is.
    """
    import shutil
    import tempfile

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
    worst = 0.0
    rms = np.sqrt(np.maximum([t.power_linear for t in plan.profile.taps], 1e-300))
    scratch = _scratch_directory(Path(path), tempfile)
    try:
        with BundleWriter(scratch / "bundle", plan.layout, max_size_bytes=None) as writer:
            for start, block in plan.channel.chunks(CHUNK_SAMPLES):
                writer.write_chunk(start, block)
                stop = min(start + len(block), stored.shape[0])
                if stop > start and stored.shape[1:] == block.shape[1:]:
                    difference = np.abs(block[:stop - start] - stored[start:stop]).max(axis=(0, 1, 2))
                    worst = max(worst, float((difference / rms).max()))
                if progress is not None:
                    progress(start + len(block), engine.n_samples)
            regenerated = {e["name"]: e["sha256"] for e in
                           open_bundle(writer.finish(manifest_fields(plan))).manifest["files"]}
    finally:
        shutil.rmtree(scratch, ignore_errors=True)
    if stored.shape != plan.layout.gains_shape:
        worst = math.inf
    files = tuple(_compare_file(Path(path), entry, regenerated.get(entry["name"])) for entry in manifest["files"])
    platform_differences = _platform_differences(manifest.get("platform") or {})
    tolerance = fading.CROSS_PLATFORM_TOLERANCE
    status, message = _reproduce_verdict(files, worst, tolerance, platform_differences)
    return ReproduceResult(status=status, files=files, max_relative_error=worst,
                           tolerance=tolerance, platform_differences=tuple(platform_differences),
                           message=message)


def _scratch_directory(bundle_path: Path, tempfile) -> Path:
    """A new private directory beside the bundle (same disk), else in the system's temporary directory."""
    for parent in (bundle_path.resolve().parent, None):
        try:
            return Path(tempfile.mkdtemp(prefix=".emucompile-reproduce-", dir=parent))
        except OSError:
            continue
    raise InputError(f"{bundle_path}: no writable directory to regenerate the bundle in")


def _compare_file(directory: Path, entry: dict, regenerated: str | None) -> FileComparison:
    recorded = entry["sha256"]
    on_disk = _file_sha256(directory / entry["name"])
    if on_disk is None:
        status = MISSING
    elif regenerated is None:
        status = NOT_REGENERATED
    elif regenerated != recorded:
        status = BYTES_DIFFER
    elif on_disk != recorded:
        status = EDITED
    else:
        status = SAME_BYTES
    return FileComparison(entry["name"], status, recorded, regenerated, on_disk)


def _file_sha256(path: Path) -> str | None:
    digest = hashlib.sha256()
    try:
        with open(path, "rb") as stream:
            for block in iter(lambda: stream.read(1 << 20), b""):
                digest.update(block)
    except OSError:
        return None
    return digest.hexdigest()


def _reproduce_verdict(files, worst, tolerance, platform_differences):
    """(status, message): one sentence naming what was compared and every file that differs."""
    n = len(files)
    made = sum(f.regenerated_sha256 is not None for f in files)
    compared = f"{made} of the {n} data file(s) the manifest lists regenerated and compared with it and the disk"
    by_status: dict = {}
    for f in files:
        by_status.setdefault(f.status, []).append(f.name)
    if set(by_status) == {SAME_BYTES}:
        return IDENTICAL, f"identical: {compared}; every one has the same bytes"
    detail = "; ".join(f"{status}: {', '.join(names)}" for status, names in by_status.items()
                       if status != SAME_BYTES)
    only_numbers = set(by_status) <= {SAME_BYTES, BYTES_DIFFER}
    if only_numbers and worst <= tolerance and platform_differences:
        return WITHIN_TOLERANCE, (
            f"within tolerance: {compared}; {detail}; largest gain difference {worst:.2e} x RMS gain "
            f"<= {tolerance:g}, on a different platform or library version ({'; '.join(platform_differences)})")
    why = "" if platform_differences else " on the same platform and library versions"
    return DIFFERENT, (f"different: {compared}; {detail}; largest gain difference {worst:.2e} x RMS gain "
                       f"between the regenerated gains and tap_gains.npy{why}")


def _replan(manifest: dict, path) -> CompilePlan:
    """The plan ``compile`` made for this manifest, rebuilt from the manifest alone."""
    profile = profile_from_document(manifest["profile"], source=f"{path}/manifest.json#/profile")
    fir = manifest.get("fir") or {}
    target = None
    if manifest.get("target"):
        from emucompile.profile.target import parse_target

        target = parse_target(manifest["target"]["constraints"], file=f"{path}/manifest.json",
                              base_pointer="/target/constraints")
    acceptance = (manifest.get("target") or {}).get("fit_acceptance") or {}
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
        formats=tuple(manifest.get("formats") or ()),
        accept_missed_targets=True,  # judged when it was compiled (manifest "expect")
        force=True,  # lifts the csv row limit a bundle with csv was written under
        max_size_bytes=None,
        fit_tolerance_pct=acceptance.get("tolerance_pct"),
        accept_fit=True,  # the bundle exists: its fit was judged when it was made (manifest target.fit_acceptance)
    )


# -- helpers -----------------------------------------------------------------------------


def _profile_and_hash(profile):
    if isinstance(profile, Profile):
        return profile, profile.resolved_sha256()
    path = Path(profile)
    loaded = load_profile(path)  # every problem of the file, or an error naming it
    return loaded, hashlib.sha256(path.read_bytes()).hexdigest()


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


def _fir_codes(fit) -> dict | None:
    """What the integer FIR coefficients' writer needs, when the target states a bit width."""
    quantisation = fit.costs.quantisation
    if quantisation is None:
        return None
    grid = fit.fir_map
    return {"columns": [int(c) for c in grid.nonzero_columns], "bits": quantisation.bits,
            "step": quantisation.step, "headroom_db": quantisation.headroom_db,
            "sample_rate_hz": grid.sample_rate_hz, "bulk_delay_samples": grid.bulk_delay_samples}


def _target_entry(fit) -> dict:
    return {"constraints": fit.target.to_dict(), "costs": fit.costs.to_dict()}


def _platform_differences(recorded: dict) -> list[str]:
    from emucompile.bundle.store import platform_info

    here = platform_info()
    return [f"{key}: {recorded.get(key)} -> {here.get(key)}" for key in sorted(here)
            if recorded.get(key) != here.get(key)]


__all__ = [
    "CompilePlan",
    "CompileResult",
    "ReproduceResult",
    "plan_compile",
    "compile_profile",
    "run_plan",
    "manifest_fields",
    "reproduce_bundle",
    "FileComparison",
    "expect_record",
    "DEFAULT_UPDATE_FACTOR",
    "WARN_UPDATE_FACTOR",
    "DEFAULT_DURATION_S",
    "IDENTICAL",
    "WITHIN_TOLERANCE",
    "DIFFERENT",
]
