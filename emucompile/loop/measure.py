"""``measure``: a capture of the emulator's output, estimated and judged against the bundle and the profile.

:func:`measure_capture` runs :mod:`.estimate` then :mod:`.judge` and writes
(with ``outdir``) ``gains.npy`` (the estimated tap gains the profile checks
used, complex64 (n, n_rx, n_tx, n_taps) at ``profile_record_rate_hz``: what
``emucompile verify --gains`` reads), ``measurement.json`` and ``report.html``.
"""

from __future__ import annotations

import hashlib
import json
import math
import mmap
import os
import tempfile
import threading
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from emucompile._version import __version__
from emucompile.errors import InputError
from emucompile.loop import estimate as est
from emucompile.loop import judge
from emucompile.loop.page import write_page
from emucompile.loop.probe import channel_source, load_probe

CAUTIONS = (
    "Check the emulator's and every instrument's input and output power limits (generator, attenuators, "
    "cables, analyser) before connecting anything; the probe file says nothing about absolute levels.",
    "This is a check of the emulator against a bundle and a profile, not accredited conformance testing.",
    "Follow your lab's procedures and local regulations for conducted and radiated tests.",
)
DOPPLER_CHECKS = ("autocorrelation", "doppler_psd", "level_crossing_rate", "fade_duration")


@dataclass
class MeasureResult:
    status: str  # "pass", "fail" or "not enough data"
    faults: list
    estimate: object = field(repr=False)
    bundle: object | None = field(default=None, repr=False)
    profile_verification: object | None = field(default=None, repr=False)
    record: dict = field(default_factory=dict)
    files: list = field(default_factory=list)
    warnings: list = field(default_factory=list)

    @property
    def passed(self) -> bool:
        return self.status == "pass"

    def summary(self) -> str:
        r = self.record
        est = r["estimate"]
        lines = [f"probe found at sample {est['probe_start_sample']} (peak-to-sidelobe {_f(est['psr_db'], '.1f')} dB); "
                 f"{est['n_periods']} periods at {est['repetition_rate_hz']:g} Hz; SNR "
                 + ", ".join(f"{_f(s, '.1f')} dB" for s in est["snr_db"])
                 + f"; delay offset {_f(est['offset_samples'], '.2f')} samples; tap delay errors "
                 + ", ".join("n/a" if d is None else f"{d * 1e9:+.1f} ns" for d in est["tap_delay_error_s"])]
        if r.get("bundle"):
            b = r["bundle"]
            within = "below the noise" if b["within_db"] is None else f"{b['within_db']:.1f} dB"
            lines.append(f"bundle: offset {_f(b['bundle_offset_s'], '.6f')} s, "
                         f"frequency offset {_f(b['cfo_hz'], '.3f')} Hz"
                         f"{' (estimated)' if b['cfo_estimated'] else ''}, gain {_f(b['gain_db'], '.2f')} dB; "
                         f"error beyond noise {within} (limit {b['limit_db']:g} dB, {b['between_updates']}): "
                         + ("pass" if b["passed"] else "FAIL"))
        p = r.get("profile")
        if p:
            lines.append(f"profile: {p['n_failed']} of {p['n_checks']} check(s) failed, {p['n_not_applicable']} not "
                         f"applicable, at false-alarm {p['false_alarm']:g} (record {p['record_rate_hz']:g} Hz, "
                         f"{p['periods_averaged']} period(s) averaged)")
        if r.get("doppler_scale") is not None:
            lines.append(f"measured Doppler scale {r['doppler_scale']:.3f} x the profile's")
        if r.get("residual_drift_hz") is not None:
            lines.append(f"residual frequency drift {r['residual_drift_hz']:.3f} Hz (shared reference assumed)")
        for fault in self.faults:
            lines.append(f"fault: {fault['text']}")
        lines.append(f"verdict: {self.status}")
        return "\n".join(lines)


def _f(value, spec) -> str:
    return "n/a" if value is None else format(value, spec)


def measure_capture(capture, probe, *, bundle=None, profile=None, outdir=None, report_file=None,
                    sample_rate_hz: float | None = None, cfo_hz: float | None = None,
                    between_updates: str | None = None, limit_db: float | None = None,
                    false_alarm: float = 0.01, n_rx: int | None = None, force: bool = False,
                    progress=None) -> MeasureResult:
    """Estimate the channel in ``capture`` and judge it (see the package notes).

    Parameters
    ----------
    capture : path or list of paths
        SigMF, npy, raw cf32 or raw ci16 (``.ci16``); one file (channels = receive
        antennas) or one file per receive antenna.
    probe : path
        The probe's ``.probe.json`` (or its base name).
    bundle, profile
        Judge against the loaded bundle (and its profile), or against a profile only.
    sample_rate_hz : float, optional
        The capture's rate when its file cannot say; must equal the probe's.
    cfo_hz : float, optional
        A known frequency offset (removed first). Without it: with a bundle it is
        estimated, without one a shared reference is assumed and the residual
        drift is reported.
    """
    began = time.perf_counter()
    if (bundle is None) == (profile is None):
        raise InputError("give either --bundle B or --profile P")
    if not (0.0 < false_alarm < 1.0):
        raise InputError(f"--false-alarm {false_alarm!r}: a probability in (0, 1)")
    design, description, probe_sha = load_probe(probe)
    source = channel_source(design.sample_rate_hz, bundle=bundle, profile=profile)
    loaded = source.profile
    opened = est.open_capture(capture, n_rx=n_rx or loaded.n_rx, sample_rate_hz=sample_rate_hz)
    if opened.sample_rate_hz is not None and not math.isclose(opened.sample_rate_hz, design.sample_rate_hz,
                                                               rel_tol=1e-9):
        raise InputError(f"{opened.paths[0]}: captured at {opened.sample_rate_hz:g} Hz, but the probe runs at "
                         f"{design.sample_rate_hz:g} Hz: capture at the probe's rate")
    if opened.n_rx != loaded.n_rx:
        raise InputError(f"{opened.paths[0]}: {opened.n_rx} receive channel(s), the profile has {loaded.n_rx}")
    hashes = _Hashes(opened.paths)
    estimate = est.estimate_channel(opened, design, source, cfo_hz=cfo_hz, progress=progress)
    warnings = list(estimate.notes)
    bundle_result = None
    if source.bundle is not None:
        bundle_result = judge.judge_bundle(estimate, design, source.bundle, between_updates=between_updates,
                                           cfo_hz=cfo_hz, false_alarm=false_alarm,
                                           limit_db=judge.DEFAULT_LIMIT_DB if limit_db is None else limit_db)
    drift = None
    followed = bundle_result is not None and not any(f["fault"] == "unfollowed" for f in bundle_result.faults)
    gain = bundle_result.gain if followed else None  # else the taps' power sets the scale
    residual_cfo = bundle_result.cfo_hz - (cfo_hz or 0.0) if followed else 0.0
    record_gains, record_rate, record_noise, factor, _ = judge.profile_record(estimate, loaded, gain=gain,
                                                                              cfo_hz=residual_cfo)
    if bundle_result is None:
        drift = _drift_hz(record_gains, record_rate, loaded)
    workdir = None
    if outdir is not None:
        out = Path(outdir)
        if out.exists() and any(out.iterdir()) and not force and not (out / "measurement.json").exists():
            raise InputError(f"{out}: exists and is not a measurement directory (use another -o)")
        out.mkdir(parents=True, exist_ok=True)
        gains_path = out / "gains.npy"
    else:
        workdir = tempfile.TemporaryDirectory(prefix="emucompile-measure-")
        gains_path = Path(workdir.name) / "gains.npy"
    np.save(gains_path, record_gains)
    try:
        verification = judge.judge_profile(gains_path, loaded, record_rate, record_noise, false_alarm=false_alarm)
    finally:
        if workdir is not None:
            workdir.cleanup()
    checks = verification.checks
    failed = [c for c in checks if c.passed is False]
    not_applicable = [c for c in checks if c.passed is None]
    short = [c for c in not_applicable if (c.reason or "").startswith("not enough data")]
    scale = judge.doppler_scale(record_gains, record_rate, loaded)
    faults = [] if bundle_result is None else list(bundle_result.faults)
    for fault in faults:
        if fault["fault"] == "unfollowed":
            doppler_failed = [c.name for c in failed if c.name.split(" [")[0] in DOPPLER_CHECKS]
            off = scale is not None and abs(scale - 1.0) > judge.DOPPLER_SCALE_LIMIT
            if doppler_failed or off:
                fault.update(fault="doppler", text=(
                    "Doppler error: no tap follows its loaded gains and the measured Doppler is "
                    + (f"{scale:.3f} x" if scale is not None else "not")
                    + " the profile's" + (f" ({', '.join(doppler_failed[:3])} failed)" if doppler_failed else "")))
            else:
                fault.update(fault="wrong_bundle", text=(
                    "wrong bundle: the gains follow the profile's statistics but not the loaded bundle's samples "
                    "(another seed or file loaded)"))
    if failed and not faults:
        faults.append({"fault": "profile", "taps": sorted({c.tap for c in failed if isinstance(c.tap, int)}),
                       "text": "against the profile: " + ", ".join(c.name for c in failed[:6])
                               + (" ..." if len(failed) > 6 else "")})
    if (bundle_result is not None and not bundle_result.passed) or failed:
        status = "fail"
    elif short and not any(c.passed is not None for c in checks):
        status = "not enough data"  # never "pass" on a capture too short for the profile's checks
    else:
        status = "pass"
    identities = {"probe_description_sha256": probe_sha,
                  "probe_data_sha256": (description.get("file") or {}).get("sha256"),
                  "capture": [os.fspath(p) for p in opened.paths], **source.identity}
    record = {
        "format_version": 1, "kind": "emucompile-measurement", "tool_version": __version__, "status": status,
        "faults": faults,
        "estimate": {
            "probe_start_sample": int(estimate.probe_start), "psr_db": _finite(estimate.psr_db),
            "arrival_sample": float(estimate.arrival_sample), "offset_samples": float(estimate.offset_samples),
            "n_periods": int(estimate.gains.shape[0]), "repetition_rate_hz": float(estimate.rate_hz),
            "snr_db": estimate.snr_db, "noise_variance": estimate.noise_variance.tolist(),
            "model_residual_fraction": _finite(estimate.residual_fraction), "clipped_values": int(estimate.clipped),
            "cfo_hz_given": cfo_hz, "tap_delay_error_s": estimate.tap_delay_errors_s,
        },
        "bundle": None if bundle_result is None else bundle_result.to_dict(),
        "residual_drift_hz": drift,
        "doppler_scale": scale,
        "profile": {
            "false_alarm": false_alarm, "record_rate_hz": record_rate, "periods_averaged": factor,
            "noise_variance": record_noise.tolist(), "n_checks": len(checks), "n_failed": len(failed),
            "n_not_applicable": len(not_applicable), "checks": [c.to_dict() for c in checks],
            "gains_file": os.fspath(gains_path) if outdir is not None else None,
        },
        "identities": identities,
        "cautions": list(CAUTIONS),
        "warnings": warnings,
    }
    result = MeasureResult(status, faults, estimate, bundle_result, verification, record, [], warnings)
    record["identities"]["capture_sha256"] = hashes.result()
    record["elapsed_s"] = time.perf_counter() - began
    if outdir is not None or report_file is not None:
        if outdir is not None:
            json_path = Path(outdir) / "measurement.json"
            json_path.write_text(json.dumps(record, indent=2, allow_nan=False) + "\n")
            result.files += [gains_path, json_path]
        page = Path(report_file) if report_file is not None else Path(outdir) / "report.html"
        write_page(result, design, source, page)
        result.files.append(page)
    return result


def _drift_hz(gains, rate_hz, profile) -> float | None:
    """Mean frequency of the measured gains (power-weighted lag-1 phase): a residual frequency offset, the
    profile's spectra being symmetric except for direct parts (whose Doppler is taken out of the figure)."""
    total, weight = 0.0, 0.0
    flat = gains.reshape(gains.shape[0], -1)
    for col in range(flat.shape[1]):
        tap = profile.taps[col % len(profile.taps)]
        g = flat[:, col].astype(np.complex128)
        if tap.fading != "rayleigh" or g.size < 3:
            continue
        product = np.vdot(g[:-1], g[1:])
        total += np.angle(product) * abs(product)
        weight += abs(product)
    if weight == 0:
        return None
    return float(total / weight * rate_hz / (2 * math.pi))


class _Hashes:
    """SHA-256 of the capture's files, computed in a thread beside the estimate."""

    def __init__(self, paths):
        self.paths = [Path(p) for p in paths]
        self.values = {}
        self.thread = threading.Thread(target=self._run, daemon=True)
        self.thread.start()

    def _run(self):
        for path in self.paths:
            data_path = path
            if path.suffix == ".sigmf-meta":
                data_path = path.with_suffix(".sigmf-data")
            try:
                self.values[os.fspath(data_path)] = _sha256(data_path)
            except (OSError, ValueError) as error:
                self.values[os.fspath(data_path)] = f"unreadable: {error}"

    def result(self) -> dict:
        self.thread.join()
        return dict(self.values)


def _sha256(path, chunk: int = 1 << 24) -> str:
    """SHA-256 of a file through a memory map, a chunk at a time: no copy of the bytes into the process (a
    file read copies them: ~15 % of the hash's time), and each chunk's pages are let go once hashed, so the
    process's memory stays a chunk whatever the file's size."""
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        size = os.fstat(handle.fileno()).st_size
        if size == 0:
            return digest.hexdigest()
        with mmap.mmap(handle.fileno(), 0, access=mmap.ACCESS_READ) as mapped:
            for start in range(0, size, chunk):
                length = min(chunk, size - start)
                with memoryview(mapped)[start:start + length] as view:
                    digest.update(view)
                if hasattr(mapped, "madvise"):
                    mapped.madvise(mmap.MADV_DONTNEED, start, length)
    return digest.hexdigest()


def _finite(value):
    return float(value) if value is not None and math.isfinite(value) else None
