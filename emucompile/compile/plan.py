"""Planning a compile run: every choice settled and checked before anything is generated or written.

:func:`plan_compile` resolves each choice (command line first, then the
profile's ``compile:`` block, then :mod:`emucompile.compile.defaults`; the
rules of :mod:`emucompile.compile.rules`), chooses the FIR map (a moving
delay's, a target's fit, or the plain map at a sample rate), plans the
engine and lays the bundle out, refusing above the size limit, so that the
size estimate and every refusal come first. :func:`compile_findings` runs
the same planner without writing, for ``validate``.

Choices where neither the command line nor the profile's ``compile:`` block
says otherwise:

- update rate: :data:`~emucompile.compile.defaults.DEFAULT_UPDATE_FACTOR` x
  the largest Doppler of the profile (band edges and direct-part shifts), or
  :data:`~emucompile.compile.defaults.DEFAULT_UPDATE_RATE_NO_DOPPLER_HZ` for a
  channel that does not move; capped at the target's maximum update rate
  when a target gives one.
- duration: :data:`~emucompile.compile.defaults.DEFAULT_DURATION_S`.
- seed: drawn from the operating system's entropy and recorded (the summary
  prints it, so the run can be repeated with ``--seed``).
- method: the engine's default (:data:`emucompile.models.fading.DEFAULT_METHOD`).
- delay mapping: sinc (with a target, the fit chooses unless told).
"""

from __future__ import annotations

import hashlib
import secrets
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from emucompile.bundle import formats as bundle_formats
from emucompile.bundle.store import DEFAULT_MAX_SIZE_BYTES, BundleLayout, parse_formats
from emucompile.compile.rules import (
    CompileRefused,
    expect_record,
    fit_target,
    refuse_oversized,
    resolve_target,
    settle_choices,
)
from emucompile.errors import InputError
from emucompile.models.rates import size_text
from emucompile.models import fading
from emucompile.models.channel import SHADOWING_FILE, SHADOWING_ROLE, ChannelPlan
from emucompile.models.grid import FirMap, fir_map, moving_fir_map
from emucompile.profile.model import Profile, load_profile


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
class _FirChoice:
    """The FIR map a run writes and where it came from (a target's fit and its judgement, or none)."""

    grid_map: FirMap | None
    fit: object | None = None
    acceptance: object | None = None
    formats: tuple = ()


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
    csv_any_size: bool = False,
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
    csv_any_size : bool
        Lift the csv format's row limit (:data:`emucompile.bundle.formats.DEFAULT_CSV_MAX_ROWS`).
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
    choices, findings, warnings = _resolve_choices(
        profile,
        target_obj,
        sources,
        expect,
        duration_s=duration_s,
        update_rate_hz=update_rate_hz,
        seed=seed,
        sample_rate_hz=sample_rate_hz,
        delay_mapping=delay_mapping,
        periodic=periodic,
        method=method,
    )
    seed_value = _seed(choices.seed, sources)
    requested = parse_formats(formats or ())
    refuse_oversized(
        profile,
        choices.update_rate_hz,
        choices.n_samples,
        requested,
        choices.sample_rate_hz,
        target_obj,
        max_size_bytes,
    )
    fir = _choose_fir_map(profile, choices, target_obj, requested, sources, fit_tolerance_pct, accept_fit)
    engine = fading.plan(
        profile, choices.update_rate_hz, choices.n_samples, seed_value, method=choices.method, periodic=choices.periodic
    )
    channel = ChannelPlan(profile, engine)
    layout = _lay_out(profile, choices.update_rate_hz, engine, channel, fir, csv_any_size, max_size_bytes)
    return CompilePlan(
        profile=profile,
        profile_sha256=profile_sha256,
        outdir=Path(outdir),
        update_rate_hz=choices.update_rate_hz,
        n_samples=engine.n_samples,
        seed=seed_value,
        method=choices.method,
        periodic=choices.periodic,
        formats=fir.formats,
        fir=fir.grid_map,
        target_fit=fir.fit,
        fit_acceptance=fir.acceptance,
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


# -- the steps -----------------------------------------------------------------------------------


def _resolve_choices(profile, target, sources, expect, **given):
    """``(choices, findings, warnings)``: the rules' choices, or :class:`CompileRefused` with every error."""
    choices, findings = settle_choices(profile, target=target, sources=sources, **given)
    if choices is None:
        raise CompileRefused(findings)
    warnings = [f.text() for f in findings if f.severity == "warning"]
    if expect and expect["missed"]:
        warnings.append(
            f"compiled although {len(expect['missed'])} expect: target(s) are missed "
            f"(--accept-missed-targets): {', '.join(expect['missed'])}"
        )
    return choices, findings, warnings


def _seed(seed, sources) -> int:
    """The seed chosen, or one drawn from the system's entropy (recorded as ``drawn``)."""
    if seed is None:
        sources["seed"] = "drawn"
        return secrets.randbits(63)
    return int(seed)


def _choose_fir_map(profile, choices, target, formats, sources, tolerance_pct, accept_fit) -> _FirChoice:
    """The FIR map: a moving delay's (time-varying; adds ``fir``), a target's fit (judged), the plain map, or none.

    The rules have checked the sample rate, the mapping and the target of a moving delay.
    """
    delays = [t.delay_s for t in profile.taps]
    powers = [t.power_linear for t in profile.taps]
    rate, rate_fs, mapping = choices.update_rate_hz, choices.sample_rate_hz, choices.delay_mapping
    moving = getattr(profile.conditions, "moving_propagation", None)
    if moving is not None:
        if "fir" not in formats:
            formats = formats + ("fir",)
            sources["formats"] = "fir added: a moving delay's FIR varies in time"
        return _FirChoice(moving_fir_map(delays, powers, rate_fs, moving, rate), formats=formats)
    if target is not None:
        fit, acceptance = fit_target(profile, target, choices, tolerance_pct, accept_fit)
        return _FirChoice(fit.fir_map, fit, acceptance, formats)
    if rate_fs is not None:
        return _FirChoice(fir_map(delays, powers, rate_fs, mapping=mapping or "sinc"), formats=formats)
    return _FirChoice(None, formats=formats)


def _lay_out(profile, rate, engine, channel, fir: _FirChoice, csv_any_size: bool, max_size_bytes) -> BundleLayout:
    """The bundle's layout (files, shapes, formats), refused above ``max_size_bytes``."""
    extra = ()
    if channel.shadowing is not None:
        extra = ((SHADOWING_FILE, SHADOWING_ROLE, np.float64, (engine.n_samples,), channel.shadowing_db, ("sample",)),)
    moving = getattr(profile.conditions, "moving_propagation", None)
    grid_map = fir.grid_map
    layout = BundleLayout.from_profile(
        profile,
        n_samples=engine.n_samples,
        update_rate_hz=rate,
        n_rx=profile.n_rx,
        n_tx=profile.n_tx,
        formats=fir.formats,
        fir_map=None if grid_map is None else grid_map.matrix,
        fir_maps=grid_map.sparse if moving is not None else None,
        extra_arrays=extra,
        fir_codes=None if fir.fit is None else _fir_codes(fir.fit),
        csv_max_rows=None if csv_any_size else bundle_formats.DEFAULT_CSV_MAX_ROWS,
    )
    if max_size_bytes is not None and layout.estimated_size_bytes > max_size_bytes:
        raise InputError(
            f"the bundle would take about {size_text(layout.estimated_size_bytes)}, above the limit "
            f"of {size_text(max_size_bytes)}",
            hint="shorten --duration, lower --update-rate, drop formats, or raise --max-size",
        )
    return layout


# -- helpers -----------------------------------------------------------------------------


def _profile_and_hash(profile):
    if isinstance(profile, Profile):
        return profile, profile.resolved_sha256()
    path = Path(profile)
    loaded = load_profile(path)  # every problem of the file, or an error naming it
    return loaded, hashlib.sha256(path.read_bytes()).hexdigest()


def _fir_codes(fit) -> dict | None:
    """What the integer FIR coefficients' writer needs, when the target states a bit width."""
    quantisation = fit.costs.quantisation
    if quantisation is None:
        return None
    grid = fit.fir_map
    return {
        "columns": [int(c) for c in grid.nonzero_columns],
        "bits": quantisation.bits,
        "step": quantisation.step,
        "headroom_db": quantisation.headroom_db,
        "sample_rate_hz": grid.sample_rate_hz,
        "bulk_delay_samples": grid.bulk_delay_samples,
    }


__all__ = ["CompilePlan", "plan_compile"]
