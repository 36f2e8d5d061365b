"""Passing an IQ recording through a bundle's channel: ``emucompile apply`` (the module notes of
:mod:`emucompile.apply.channel` define the channel, the time and the noise).

:func:`apply_bundle` runs named steps: open the bundle (files checked against the
manifest) and the recording, resolve the sample rate and the FIR map, build the
channel, plan the noise, then stream the recording through it into the output
(:mod:`emucompile.apply.recordings`), with its metadata beside it.
"""

from __future__ import annotations

import hashlib
import json
import math
import os
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path

import numpy as np

from emucompile._version import __version__
from emucompile.apply.channel import (
    BETWEEN_UPDATES,
    BLOCK_SAMPLES,
    NOISE_FRAME_SAMPLES,
    TimeVaryingFir,
    WhiteNoise,
    channel_mean_power,
)
from emucompile.apply.recordings import (
    Recording,
    _OutputWriter,
    _check_recording,
    _output_paths,
    _refuse_inside,
    _scan,
    read_recording,
)
from emucompile.bundle import atomic
from emucompile.bundle import store as bd
from emucompile.errors import InputError
from emucompile.models import grid

SIDECAR_FORMAT = "emucompile-apply"
SIDECAR_VERSION = 1
MAX_ABS_SNR_DB = 300.0  # 1e30 in power: already beyond any float32 sample's dynamic range
_ROLES_USED = ("tap_gains", "fir_map", "fir")  # the bundle files apply reads
_RATE_RELATIVE_TOLERANCE = 1e-9


@dataclass
class ApplyResult:
    """What :func:`apply_bundle` wrote.

    Attributes
    ----------
    files : list of Path
        The output files: data first, then the SigMF metadata or the JSON sidecar.
    n_samples, n_rx : int
    sample_rate_hz : float
    channel_mean_power : float
        C of :func:`channel_mean_power`.
    noise_variance : list of float or None
        Per receive antenna.
    clipped_values : int
        ci16 output only: I or Q values clipped to full scale (0 otherwise).
    record : dict
        The metadata written beside the output (strict JSON values).
    """

    files: list
    n_samples: int
    n_rx: int
    sample_rate_hz: float
    channel_mean_power: float
    noise_variance: list | None
    clipped_values: int
    record: dict = field(repr=False)


def apply_bundle(
    bundle_path,
    input_path,
    output_path,
    *,
    snr_db: float | None = None,
    seed: int | None = None,
    loop: bool = False,
    sample_rate_hz: float | None = None,
    start_s: float = 0.0,
    between_updates: str | None = None,
    delay_mapping: str = "sinc",
    force: bool = False,
    progress=None,
    engine: str = "auto",
    block_samples: int = BLOCK_SAMPLES,
    hash_check: bool = True,
) -> ApplyResult:
    """Pass an IQ recording through a bundle's channel and write the output beside its metadata.

    Parameters
    ----------
    bundle_path : str or os.PathLike
        The bundle directory (docs/bundle-format.md).
    input_path : str or os.PathLike
        See :func:`read_recording`. One stream per transmit antenna.
    output_path : str or os.PathLike
        Written in the input's format: ``X.npy`` with ``X.npy.json``; ``X.cf32``
        with ``X.cf32.json``; ``X.sigmf-data`` with ``X.sigmf-meta`` (one
        channel per receive antenna, interleaved). A missing suffix is added.
    snr_db : float, optional
        Add noise at this SNR on the nominal output power (module notes).
    seed : int, optional
        Seed of the noise; drawn from the operating system and recorded when absent.
    loop : bool
        Loop the bundle when the input is longer than it.
    sample_rate_hz : float, optional
        Sample rate of an npy/raw input (SigMF says its own; a value that
        contradicts it is refused). Required for npy and cf32 input: it is
        checked against the bundle's FIR map's rate, never assumed.
    start_s : float
        Bundle time of the first output sample.
    between_updates : {"linear", "hold"}, optional
        Default: the bundle target's ``between_updates`` when it states one, else linear.
    delay_mapping : {"sinc", "nearest"}
        For a bundle without a FIR map: how to build one for the recording's rate.
    force : bool
        Replace existing output files.
    progress : callable(samples_done, samples_total), optional
    engine, block_samples
        See :class:`TimeVaryingFir` and :func:`apply_channel`.
    hash_check : bool
        Check the size, header and SHA-256 of every bundle file used (tap
        gains, FIR map, time-varying FIR) against the manifest first (default;
        one read of those files). False skips the hashes only.

    Returns
    -------
    ApplyResult

    Raises
    ------
    InputError
        (exit 2) Not a bundle, bad input (dtype, empty, truncated, NaN), a
        sample rate the FIR map was not made for, antenna counts that differ,
        an input longer than the bundle without ``loop``, an output that
        exists. Nothing is written then; a failure or interrupt while writing
        removes the partial output.
    """
    bundle, recording = _open_inputs(bundle_path, input_path, hash_check)
    rate_hz = _resolve_sample_rate(recording, sample_rate_hz, bundle.manifest, bundle_path)
    _check_noise_options(snr_db, seed)
    channel, fir, fir_record, tap_powers = _build_channel(
        bundle,
        recording,
        rate_hz,
        bundle_path,
        start_s=start_s,
        loop=loop,
        engine=engine,
        between_updates=between_updates,
        delay_mapping=delay_mapping,
    )
    paths = _output_paths(Path(output_path), recording, force)
    _refuse_inside(paths, bundle_path)
    powers, mean_power, nominal, seed, variances = _plan_noise(
        recording, channel, fir, tap_powers, snr_db, seed, block_samples
    )
    record = _record(
        bundle,
        recording,
        paths,
        rate_hz,
        fir_record,
        channel,
        powers,
        mean_power,
        nominal,
        snr_db,
        seed if snr_db is not None else None,
        variances,
    )
    noise = WhiteNoise(seed, variances, recording.dtype) if variances is not None else None
    with atomic.guarded_write(paths[0]), _OutputWriter(paths, recording, channel.n_rx, force=force) as writer:
        clipped = _stream(channel, recording, noise, writer, progress, block_samples)
        if recording.datatype == "ci16_le":
            record["output"]["clipped_values"] = clipped
        writer.finish(record)
    return ApplyResult(
        files=list(paths),
        n_samples=recording.n_samples,
        n_rx=channel.n_rx,
        sample_rate_hz=rate_hz,
        channel_mean_power=mean_power,
        noise_variance=variances,
        clipped_values=clipped,
        record=record,
    )


# -- the steps -------------------------------------------------------------------------------


def _open_inputs(bundle_path, input_path, hash_check: bool):
    """The bundle (the files apply reads checked against the manifest) and the recording, one stream per tx."""
    bundle = bd.open_bundle(bundle_path)
    problems = bd.verify_members(bundle_path, bundle.manifest, _ROLES_USED, hashes=hash_check)
    if problems:
        raise bd.BundleError(problems)
    recording = read_recording(input_path, n_channels=bundle.manifest["n_tx"])
    _check_recording(recording, bundle.manifest)
    return bundle, recording


def _check_noise_options(snr_db, seed) -> None:
    if snr_db is not None and not (math.isfinite(snr_db) and abs(snr_db) <= MAX_ABS_SNR_DB):
        raise InputError(
            f"--snr-db must be a finite number from -{MAX_ABS_SNR_DB:g} to {MAX_ABS_SNR_DB:g} dB, got {snr_db!r}",
            hint="beyond that the noise power leaves the range of float32 samples",
        )
    if seed is not None and (isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0):
        raise InputError(f"--seed must be an integer >= 0, got {seed!r}")


def _build_channel(bundle, recording, rate_hz, bundle_path, *, start_s, loop, engine, between_updates, delay_mapping):
    """``(channel, fir_map, fir_record, tap_powers)``: the time-varying FIR the recording goes through.

    A moving delay's bundle replays its time-varying FIR (fir.npy) through the identity map.
    """
    manifest = bundle.manifest
    fir, fir_record = _resolve_fir_map(bundle, rate_hz, delay_mapping, bundle_path, recording.path)
    between_updates = between_updates or _target_between_updates(manifest) or "linear"
    duration_s = manifest["n_samples"] / manifest["update_rate_hz"]
    if not (math.isfinite(start_s) and 0.0 <= start_s < duration_s):
        raise InputError(f"--start {start_s!r} s lies outside the bundle, which lasts {duration_s:g} s")
    gains = bundle.tap_gains
    tap_powers = [0.0 if t["power_db"] is None else 10.0 ** (t["power_db"] / 10.0) for t in manifest["taps"]]
    if (manifest["fir"] or {}).get("moving") is not None:
        if bundle.fir is None:
            raise InputError(f"{bundle_path}: a moving-delay bundle needs its fir.npy (the time-varying FIR)")
        tap_powers = list(np.asarray(tap_powers) @ (np.asarray(fir) ** 2))
        gains, fir = bundle.fir, np.eye(fir.shape[1])
        fir_record["replayed"] = "fir.npy (time-varying FIR of a moving delay) through the identity map"
    channel = TimeVaryingFir(
        gains,
        fir,
        update_rate_hz=manifest["update_rate_hz"],
        sample_rate_hz=rate_hz,
        start_s=start_s,
        loop=loop,
        periodic=manifest["periodic"],
        between_updates=between_updates,
        engine=engine,
        dtype=recording.dtype,
    )
    _check_length(channel, recording, duration_s, start_s)
    return channel, fir, fir_record, tap_powers


def _plan_noise(recording, channel, fir, tap_powers, snr_db, seed, block_samples):
    """``(input powers, channel mean power, nominal output powers, seed, noise variances or None)``.

    Reads the whole input once (refusing NaN and infinity before anything is written).
    """
    powers = _scan(recording, block_samples)
    mean_power = channel_mean_power(fir, tap_powers)
    nominal = [mean_power * float(np.sum(powers))] * channel.n_rx
    if snr_db is None:
        return powers, mean_power, nominal, seed, None
    if not nominal[0] > 0:
        raise InputError(
            f"{recording.path}: the nominal output power is 0 (silent input or channel); an SNR is undefined"
        )
    seed = int(np.random.SeedSequence().entropy) if seed is None else int(seed)
    return powers, mean_power, nominal, seed, [p / 10.0 ** (snr_db / 10.0) for p in nominal]


def _stream(channel, recording, noise, writer, progress, block_samples) -> int:
    """The recording through the channel (plus noise) into the writer, block by block; return the values clipped."""
    clipped = 0
    n = recording.n_samples
    if progress is not None:
        progress(0, n)
    for first in range(0, n, block_samples):
        last = min(n, first + block_samples)
        y = channel.process(recording.read(first, last))
        if noise is not None:
            y += noise.block(first, last - first)
        clipped += writer.write(y)
        if progress is not None:
            progress(last, n)
    return clipped


def _resolve_sample_rate(recording: Recording, given, manifest: dict, bundle_path) -> float:
    fir = manifest["fir"]
    if given is not None and not (math.isfinite(given) and given > 0):
        raise InputError(f"--sample-rate must be a rate > 0 in Hz, got {given!r}")
    if recording.sample_rate_hz is not None:
        if given is not None and not _same_rate(given, recording.sample_rate_hz):
            raise InputError(
                f"{recording.path}: the metadata says {recording.sample_rate_hz:g} Hz, --sample-rate says {given:g} Hz",
                hint="leave --sample-rate out for a SigMF recording",
            )
        rate = recording.sample_rate_hz
    elif given is not None:
        rate = float(given)
    else:
        # A headerless recording (npy, cf32) does not say its rate: assuming the bundle's
        # would replay a waveform of another rate through the wrong channel without a word.
        stated = f" (the bundle's FIR map was made for {fir['sample_rate_hz']:g} Hz)" if fir is not None else ""
        raise InputError(
            f"{recording.path}: the recording does not state its sample rate{stated}",
            hint="give --sample-rate HZ; only SigMF metadata with core:sample_rate may leave it out",
        )
    if fir is not None and not _same_rate(rate, fir["sample_rate_hz"]):
        raise InputError(
            f"{recording.path}: sample rate {rate:g} Hz, but the FIR map of {bundle_path} was made for "
            f"{fir['sample_rate_hz']:g} Hz",
            hint=f"compile the bundle again with --sample-rate {rate:g}, or resample the recording",
        )
    return rate


def _same_rate(a: float, b: float) -> bool:
    return math.isclose(a, b, rel_tol=_RATE_RELATIVE_TOLERANCE)


def _resolve_fir_map(bundle, rate_hz: float, delay_mapping: str, bundle_path, input_path):
    """The bundle's FIR map, or one built for the recording's rate from the manifest's taps."""
    fir = bundle.manifest["fir"]
    if fir is not None:
        return np.asarray(bundle.fir_map), {"source": "bundle", **fir}
    taps = bundle.manifest["taps"]
    delays = [t["delay_s"] for t in taps]
    powers = [0.0 if t["power_db"] is None else 10.0 ** (t["power_db"] / 10.0) for t in taps]
    try:
        built = grid.fir_map(delays, powers if any(powers) else [1.0] * len(taps), rate_hz, mapping=delay_mapping)
    except ValueError as error:
        raise InputError(
            f"{bundle_path}: cannot map the taps onto the {rate_hz:g} Hz grid of {input_path}: {error}"
        ) from None
    return built.matrix, {
        "source": "built for the recording's sample rate",
        **built.manifest_entry(),
        **built.parameters(),
    }


def _target_between_updates(manifest: dict) -> str | None:
    """``between_updates`` of the bundle's target record, where it states one."""
    constraints = (manifest.get("target") or {}).get("constraints") or {}
    value = constraints.get("between_updates")
    return value if value in BETWEEN_UPDATES else None


def _check_length(channel: TimeVaryingFir, recording: Recording, duration_s: float, start_s: float) -> None:
    covered = channel.covered_samples
    if covered is not None and recording.n_samples > covered:
        needed = recording.n_samples / channel.sample_rate_hz
        raise InputError(
            f"{recording.path}: {recording.n_samples} samples ({needed:g} s at {channel.sample_rate_hz:g} Hz) "
            f"run past the end of the bundle ({duration_s:g} s from --start {start_s:g} s covers {covered} samples)",
            hint="pass --loop to loop the bundle, or compile a longer one",
        )


def _record(
    bundle, recording, paths, rate_hz, fir_record, channel, powers, mean_power, nominal, snr_db, seed, variances
) -> dict:
    """The metadata of the output: bundle, offsets, channel power, noise (strict JSON)."""
    manifest = bundle.manifest
    manifest_bytes = (Path(bundle.path) / bd.MANIFEST_NAME).read_bytes()
    gains_entry = bundle.entry("tap_gains")
    n = recording.n_samples
    last_u = channel._u0 + (n - 1) * channel._ratio
    wraps = int(last_u // channel.n_updates)
    if wraps == 0:
        join = None
    elif manifest["periodic"]:
        join = "seamless: the bundle is periodic (its sample n_samples is its sample 0)"
    else:
        join = (
            "the bundle is not periodic: its last gain sample is joined to its first by one straight "
            "line over 1/update_rate_hz"
            if channel.between_updates == "linear"
            else "the bundle is not periodic: its last gain sample is held, then its first follows"
        )
    record = {
        "format": SIDECAR_FORMAT,
        "format_version": SIDECAR_VERSION,
        "tool_version": __version__,
        "created_utc": datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ"),
        "bundle": {
            "path": os.path.abspath(bundle.path),
            "manifest_sha256": hashlib.sha256(manifest_bytes).hexdigest(),
            "tap_gains_sha256": gains_entry["sha256"],
            "profile_sha256": manifest["profile_sha256"],
            "resolved_profile_sha256": manifest["resolved_profile_sha256"],
            "profile_name": (manifest.get("profile") or {}).get("name"),
            "seed": manifest["seed"],
            "generator_version": manifest["generator_version"],
            "update_rate_hz": manifest["update_rate_hz"],
            "n_samples": manifest["n_samples"],
            "periodic": manifest["periodic"],
            "n_rx": manifest["n_rx"],
            "n_tx": manifest["n_tx"],
            "n_taps": manifest["n_taps"],
        },
        "fir_map": fir_record,
        "offsets": {
            "start_s": channel.start_s,
            "start_update_index": channel._u0,
            "bulk_delay_samples": fir_record["bulk_delay_samples"],
            "alignment": (
                "output sample n is at bundle time start_s + n / sample_rate_hz, where gain sample k is at "
                "k / update_rate_hz; a path of delay tau carries input sample m to output sample "
                "m + bulk_delay_samples + tau * sample_rate_hz; the output has the input's length"
            ),
        },
        "between_updates": channel.between_updates,
        "loop": channel.loop,
        "bundle_wraps": wraps,
        "join": join,
        "input": {
            "path": os.path.abspath(recording.path),
            "format": recording.format,
            "datatype": recording.datatype,
            "n_samples": n,
            "n_tx": recording.n_channels,
            "sample_rate_hz": rate_hz,
            "power_linear_per_tx": powers,
        },
        "output": {
            "files": [os.path.abspath(p) for p in paths],
            "format": recording.format,
            "datatype": recording.datatype,
            "n_samples": n,
            "n_rx": channel.n_rx,
            "sample_rate_hz": rate_hz,
            "axes": ["sample", "rx"] if not (recording.one_dimensional and channel.n_rx == 1) else ["sample"],
        },
        "channel": {
            "mean_power_linear": mean_power,
            "mean_power_db": 10.0 * math.log10(mean_power) if mean_power > 0 else None,
            "definition": (
                "sum over taps i of P_i * sum_n fir_map[i, n]^2, P_i the manifest's mean tap power: "
                "a link's mean power gain for an input white over the sample-rate band"
            ),
        },
        "noise": None,
    }
    if snr_db is not None:
        record["noise"] = {
            "snr_db": snr_db,
            "seed": seed,
            "definition": (
                "complex white Gaussian, independent per receive antenna, over the whole band "
                "|f| < sample_rate_hz / 2; variance per complex sample = nominal output power / 10^(snr_db/10); "
                "nominal output power = channel mean power * sum over tx of the input's mean |x|^2"
            ),
            "nominal_signal_power_linear_per_rx": nominal,
            "noise_power_linear_per_rx": variances,
            "generator": (
                f"numpy PCG64 seeded by SeedSequence(seed, spawn_key=(n // {NOISE_FRAME_SAMPLES},)) for output "
                "sample n; standard normal I and Q, scaled by sqrt(variance / 2)"
            ),
        }
    return json.loads(json.dumps(record, allow_nan=False))


__all__ = ["ApplyResult", "apply_bundle", "MAX_ABS_SNR_DB"]
