"""Verify a bundle (or foreign tap gains) against the theory its profile promises.

``emucompile verify OUTDIR`` and :func:`verify_bundle` run, in order:

1. **Integrity** (bundles only): the manifest against its schema, every listed
   file's size, npy header (shape, dtype) and SHA-256
   (:func:`emucompile.bundle.store.verify_integrity`). Any mismatch raises
   :class:`IntegrityError` (exit 2) naming the file: "corrupted or edited after
   compiling". Foreign gains have no manifest: integrity is "not applicable".
2. **A decimated copy of every tap** (and link): a Kaiser-windowed low-pass FIR
   (passband to the largest frequency f_b in the gains, stopband from the
   record rate minus f_b, 80 dB by design; :mod:`emucompile.verify.decimate`)
   keeps every q-th sample, so the record rate is about
   :data:`RECORD_RATE_FACTOR` x that frequency. The statistics need only
   that band, so verify reads each sample once and works on q times fewer
   samples than compile wrote (the speed target: verify no slower than
   compile). Periodic bundles are filtered circularly, so the copy is periodic
   too and the checks look across the wrap; a non-periodic copy ends at the
   largest FFT-friendly length (a few samples dropped at the end).
3. **Checks** (:mod:`emucompile.verify.checks`, :mod:`~emucompile.verify.checks_mimo`,
   :mod:`~emucompile.verify.checks_fir`) from :mod:`emucompile.verify.tolerance` (tolerances calibrated by Monte
   Carlo of an exact reference process): per tap and link ``check_tap`` (mean
   power, K-factor, envelope KS, autocorrelation, Doppler PSD and the power
   beyond f_D, level-crossing rate, average fade duration, phase);
   ``check_cross_correlation`` between taps (expected 0) and, for MIMO, between
   links of a tap (expected: the profile's spatial correlation); for a FIR map,
   the grid's RMS delay spread and power against the profile (deterministic
   comparisons, no false alarm). With ``delivered=True`` the same per-tap
   checks run again on what the emulator receives: the ci16 codes decoded with
   their scale, and each column of the materialised (target-fitted) FIR that
   one tap alone reaches (model: that tap with its weight squared as gain).
   A check that cannot be meaningful says so (``passed`` None and a
   ``reason``), never "pass".
4. **Verdict**: the p-values are combined by Holm's step-down method at the
   family-wise false-alarm rate ``false_alarm`` (default 0.01), so an intact
   bundle from a perfect generator fails with probability <= ``false_alarm``.

Result fields (the contract with :mod:`emucompile.report.figures` and :mod:`emucompile.report.html`)
--------------------------------------------------------------------------------------
:class:`Verification` has these attributes (all read-only by convention):

``checks`` : list[emucompile.verify.tolerance.CheckResult]
    Every check, after Holm (``passed`` True / False / None, ``reason``).
``passed`` : bool
    True when no check failed (checks with ``passed`` None do not fail).
``false_alarm`` : float
    The family-wise false-alarm rate the verdict was made at.
``identity`` : dict
    Strict-JSON: ``source`` ("bundle" or "foreign"), ``path``, ``manifest_sha256``,
    ``files`` (list of {name, role, sha256, size_bytes}), ``seed``, ``method``,
    ``generator_version``, ``tool_version`` (of the bundle), ``verify_tool_version``,
    ``profile_sha256``, ``resolved_profile_sha256``, ``platform`` (the bundle's),
    ``verify_platform``, ``created_utc``, ``periodic``, ``n_samples``, ``n_rx``,
    ``n_tx``, ``integrity`` ("intact" or "not applicable (foreign data)"),
    ``delivered`` (list of formats checked as delivered).
``profile`` : emucompile.profile.model.Profile
``profile_stats`` : dict
    :func:`emucompile.profile.stats.profile_statistics` of the profile (as ``stats --json``).
``update_rate_hz`` : float
    Rate of the gains as stored.
``duration_s`` : float
``records`` : dict[int, numpy.ndarray]
    Tap index -> decimated complex64 1-D record of link 0 (shadowing removed
    when the bundle has shadowing and the components are available); a long
    run's records are views of a mapped temporary file (:mod:`emucompile.verify.scratch`).
``link_records`` : dict[int, numpy.ndarray] or None
    MIMO only: tap index -> (m, n_links) decimated records of every link.
``record_rate_hz`` : float
    Sample rate of ``records``.
``models`` : dict[int, emucompile.verify.tolerance.TapModel]
    Tap index -> the theory the tap should follow (spectrum, mean power, K,
    direct-part Doppler); static taps included.
``fir_map`` : numpy.ndarray or None
    (n_taps, n_fir) map from tap gains to FIR coefficients, when the bundle has one.
``sample_rate_hz`` : float or None
    The FIR grid's sample rate.
``fir_delays_s`` : numpy.ndarray or None
    Delay of each FIR coefficient (bulk delay included), for the |H(f, t)| image.
``foreign`` : bool
    True for ``verify --gains`` (no manifest: integrity not applicable).
``cautions`` : list[str]
    Plain sentences the report prints (estimated gains carry noise, checks
    skipped and why, ...).
``elapsed_s`` : float
    Wall time of the verification.
``timings_s`` : dict
    Wall time of its stages (``integrity``, ``decimation``, ``checks``).

``to_dict()`` gives the strict-JSON ``verification.json`` (docs/json-output.md's
``verify --json`` keys ``passed``, ``false_alarm``, ``checks`` plus
``identity``, ``profile_stats``, ``update_rate_hz``, ``record_rate_hz``,
``cautions``).

Where the files go
------------------
:func:`emucompile.report.outputs.write_outputs` (and the command line) writes the HTML report, ``verification.json``
and the figures' PNGs into ``OUTDIR/verification/`` by default (for foreign
gains, ``GAINS.verification/`` beside the file). That directory is not in the
manifest's hashed file list; the integrity check reads only listed files, and
``compile --force`` accepts it as part of a bundle it may replace (the old
verification goes with the old numbers). With ``--report FILE`` the HTML goes
to FILE and ``verification.json`` beside it as ``STEM.verification.json``.
"""

from __future__ import annotations

import dataclasses
import math
import os
import threading
import time
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import numpy as np

from emucompile._version import __version__
from emucompile.bundle import store as bd
from emucompile.bundle import formats
from emucompile.bundle.formats import sha256_file
from emucompile.errors import InputError, IntegrityError, Problem  # noqa: F401  (IntegrityError: re-exported)
from emucompile.profile.model import Profile, load_profile, profile_from_document
from emucompile.profile.stats import profile_statistics
from emucompile.profile.target import fit_lines
from emucompile.verify import checks_fir, checks_mimo, decimate
from emucompile.verify.checks import (
    Session,
    holm,
    largest_frequency_hz,
    tap_model,
    tap_model_from_profile,
)
from emucompile.verify.components import open_components
from emucompile.verify.decimate import RECORD_RATE_FACTOR
from emucompile.verify.describe import check_matrix, comparison, number

DEFAULT_FALSE_ALARM = 0.01
REPORT_DIRECTORY = bd.VERIFICATION_DIRECTORY
FOREIGN_INTEGRITY = "not applicable (foreign data: no manifest to check against)"
MEASURED_GAINS_CAUTION = (
    "Gains estimated from measurements carry measurement noise and estimator bias that these "
    "checks do not model: a failed check may be the estimate's, not the channel's."
)


@dataclasses.dataclass
class Verification:
    """The outcome of :func:`verify_bundle` / :func:`verify_gains`; see the module docstring."""

    checks: list
    false_alarm: float
    identity: dict
    profile: object
    profile_stats: dict
    update_rate_hz: float
    duration_s: float
    records: dict
    link_records: dict | None
    record_rate_hz: float
    models: dict
    fir_map: np.ndarray | None
    sample_rate_hz: float | None
    fir_delays_s: np.ndarray | None
    foreign: bool
    cautions: list
    elapsed_s: float = 0.0
    timings_s: dict = dataclasses.field(default_factory=dict)
    fit: dict | None = None  # the "emulator fit" section (bundles fitted to a target)
    mimo: dict | None = None  # {"links": labels, "taps": {tap: {"expected", "achieved"}}} correlation matrices
    conditions: dict | None = None  # trajectories of the time-varying conditions, for the report

    @property
    def passed(self) -> bool:
        """True when no check failed (a check that could not be made does not fail)."""
        return not any(c.passed is False for c in self.checks)

    @property
    def failed(self) -> list:
        """The checks that failed."""
        return [c for c in self.checks if c.passed is False]

    def to_dict(self) -> dict:
        """Strict-JSON record (``verification.json``; ``verify --json`` prints it)."""
        return _strict({
            "passed": self.passed,
            "false_alarm": self.false_alarm,
            "checks": [dict(c.to_dict(), **comparison(c, self.fit)) for c in self.checks],
            "counts": {
                "passed": sum(c.passed is True for c in self.checks),
                "failed": sum(c.passed is False for c in self.checks),
                "not_applicable": sum(c.passed is None for c in self.checks),
            },
            "identity": self.identity,
            "profile_stats": self.profile_stats,
            "update_rate_hz": self.update_rate_hz,
            "duration_s": self.duration_s,
            "record_rate_hz": self.record_rate_hz,
            "foreign": self.foreign,
            "cautions": list(self.cautions),
            "elapsed_s": self.elapsed_s,
            "timings_s": self.timings_s,
            "emulator_fit": self.fit,
            "mimo_correlation_matrices": self.mimo,
            "conditions": self.conditions,
            "check_matrix": check_matrix(self.checks),
        })

    def summary(self) -> str:
        """A few readable lines: the verdict, the counts, every failed check."""
        counts = self.to_dict()["counts"]
        verdict = "PASSED" if self.passed else "FAILED"
        lines = [
            f"{verdict}: {counts['passed']} check(s) passed, {counts['failed']} failed, "
            f"{counts['not_applicable']} not applicable, at a family-wise false-alarm rate of {self.false_alarm:g}",
            f"integrity   {self.identity.get('integrity')}",
        ]
        for check in self.failed:
            lines.append(f"  FAIL {_check_label(check)}: value {number(check.value)}, expected "
                         f"{number(check.expected)} +- {number(check.tolerance)}"
                         + (f" ({check.reason})" if check.reason else ""))
        if self.fit is not None:
            lines.append("emulator fit  " + "\n              ".join(fit_lines(self.fit)))
        if counts["passed"] == 0 and counts["failed"] == 0:
            lines.append("caution: no check could be made on this record (see the reasons); nothing is verified")
        lines += [f"caution: {c}" for c in self.cautions]
        return "\n".join(lines)


# -- public entry points --------------------------------------------------------------------------


def verify_bundle(path, *, false_alarm: float = DEFAULT_FALSE_ALARM, delivered: bool = False,
                  progress=None, workers: int | None = None) -> Verification:
    """Check a bundle's integrity, then its statistics against its profile's theory.

    Parameters
    ----------
    path : str or os.PathLike
        The bundle directory.
    false_alarm : float
        Family-wise false-alarm rate of the whole verdict (Holm), in (0, 1).
    delivered : bool
        Also check what the emulator receives: the ci16 data decoded with its
        scale, and the materialised FIR (``fir.npy``, the target-fitted
        coefficients when the bundle was fitted to a target), when the bundle
        holds them.
    progress : callable(done, total), optional
    workers : int, optional
        Forked processes for the per-tap and cross-tap checks (the same results
        either way). Default: no processes, the checks run in
        :data:`CHECK_THREADS` threads (two processes did not pay on this
        2-core machine: 1e7 x 12 taps, checks 16.0 s with one, 18.3 s with
        two, measured with ``benchmarks/bench_verify.py --workers``; nor did
        two threads).

    Returns
    -------
    Verification

    Raises
    ------
    IntegrityError
        (exit 2) A file is missing, or its size, header or SHA-256 differs from the manifest.

    Notes
    -----
    Cost: one pass over ``tap_gains.npy`` (hash) and one over the data
    (decimation, O(N_h / q) per sample with an N_h-tap filter) reading just
    behind the hash (:class:`HashFront`: the file comes from disk once), then the
    statistics on records q times shorter. Memory: nothing of the gains file
    stays resident (rows read with ``preadv``); the decimated records (complex64,
    8 bytes per q input samples, tap and link) and the checks' copies of a record
    (a Rician tap's diffuse part, complex128) of a long run are kept in mapped
    temporary files (``TMPDIR``), and every pass over a record works in blocks,
    so the memory verify holds does not grow with the duration; the null sums
    are computed lag block by lag block.
    """
    began = time.perf_counter()
    false_alarm = _check_false_alarm(false_alarm)
    root = Path(path)
    problems = bd.verify_integrity(root, hashes=False)  # structure first: a bundle we can read
    if problems:
        raise IntegrityError(problems)
    # The SHA-256 pass runs beside the statistics (hashlib and file reads release the GIL);
    # its answer is awaited before anything is reported, and a mismatch wins over any result.
    front = HashFront(_gains_name(root))
    with ThreadPoolExecutor(max_workers=1) as hasher:
        hashing = hasher.submit(_timed, front.hash_bundle, root)
        try:
            result = _verify_intact(root, began, false_alarm=false_alarm, delivered=delivered,
                                    progress=progress, workers=workers, front=front)
        except Exception:
            problems, _ = hashing.result()
            if problems:
                raise IntegrityError(problems) from None
            raise
        problems, integrity_s = hashing.result()
    if problems:
        raise IntegrityError(problems)
    result.timings_s["integrity"] = integrity_s
    result.elapsed_s = time.perf_counter() - began
    return result


def _timed(function, *args):
    start = time.perf_counter()
    return function(*args), time.perf_counter() - start


class HashFront:
    """How far the SHA-256 pass has read the gains file, so that the decimator reads behind it.

    The file is then read from disk once, not twice: the rows the decimator
    asks for were just read by the hash and come from the page cache (at
    10^8 x 12 taps, 9.6 GB, a cold file was read twice: 99 s against 49 s
    warm). A read more than :data:`HASH_LEAD_BYTES` ahead of the hash (the wrap of
    a periodic record: the file's last rows first) does not wait; nothing waits
    once the hash pass has ended, whatever its outcome.
    """

    def __init__(self, name):
        self.name = name
        self.done = 0
        self.finished = False
        self._changed = threading.Condition()

    def hash_bundle(self, root):
        """:func:`emucompile.bundle.store.verify_integrity` of ``root``, telling readers how far it got."""
        try:
            return bd.verify_integrity(root, progress=self._progress)
        finally:
            with self._changed:
                self.finished = True
                self._changed.notify_all()

    def _progress(self, name, done):
        if name == self.name:
            with self._changed:
                self.done = done
                self._changed.notify_all()

    def wait(self, start, stop):
        """Return once the hash has read bytes start .. stop - 1 of the gains file (or ended, or lags far)."""
        with self._changed:
            self._changed.wait_for(lambda: self.finished or self.done >= stop or start > self.done + HASH_LEAD_BYTES)


HASH_LEAD_BYTES = 1 << 26  # 64 MiB: a read further ahead of the hash than this does not wait for it


def _gains_name(root):
    try:
        entry = bd.open_bundle(root).entry("tap_gains")
    except Exception:  # noqa: BLE001 - the structure was checked; a bundle that will not open fails below
        return None
    return None if entry is None else entry["name"]


def _verify_intact(root, began, *, false_alarm, delivered, progress, workers, front=None):
    """verify_bundle's statistics of a bundle whose structure was checked (hashes checked alongside)."""
    opened = bd.open_bundle(root)
    manifest = opened.manifest
    profile = profile_from_document(manifest["profile"], source=f"{root}/manifest.json#/profile")
    models = {i: tap_model(entry) for i, entry in enumerate(manifest["taps"])}
    cautions = []
    # the gains' rows are read from the file (preadv), not through its map: nothing of it stays resident
    with bd.open_member(root, opened.entry("tap_gains")["name"]) as gains_file:
        source, shadowing = _small_scale_source(root, opened, cautions, gains_file,
                                                None if front is None else front.wait)
        sources = [("npy", source)]
        if delivered:
            entry = opened.entry("tap_gains_ci16")
            if entry is None:
                cautions.append("--delivered: the bundle holds no ci16 data; the npy gains are what it delivers")
            else:
                sources.append(("ci16", _ci16_source(root, entry, opened.tap_gains.shape, shadowing)))
        session = Session(
            profile=profile, models=models, update_rate_hz=float(manifest["update_rate_hz"]),
            n_samples=int(manifest["n_samples"]), n_rx=int(manifest["n_rx"]), n_tx=int(manifest["n_tx"]),
            periodic=bool(manifest["periodic"]), false_alarm=false_alarm, cautions=cautions, progress=progress,
            mimo=manifest.get("mimo"), components=open_components(root) if manifest.get("mimo") else None,
            workers=workers,
        )
        checks, records, link_records = session.run(sources)
    if delivered and opened.fir is not None:
        divide = None if shadowing is None else shadowing.shadowing_amplitude
        checks += session.delivered_fir(decimate.MappedSource(opened.fir, divide),
                                        np.asarray(opened.fir_map, dtype=float))
        identity_delivered = [name for name, _ in sources[1:]] + ["fir"]
    else:
        identity_delivered = [name for name, _ in sources[1:]]
    codes_entry = opened.entry("fir_coefficients_int") if delivered else None
    if codes_entry is not None:
        checks += checks_fir.delivered_codes_checks(session, root, codes_entry, opened, shadowing)
        identity_delivered.append("fir_coefficients")
    fir_matrix = opened.fir_map
    fir = manifest.get("fir")
    fir_checks = [] if fir is None else checks_fir.fir_checks(manifest, np.asarray(fir_matrix, dtype=float), root)
    fit = checks_fir.fit_section(manifest)
    if fit is not None:
        fir_checks.append(fit.pop("check"))
    if shadowing is not None:
        cautions.append("shadowing is divided out before the small-scale checks; the shadowing trajectory "
                        "itself (its sigma and correlation) is not checked yet")
    checks = holm(checks, false_alarm) + fir_checks
    identity = _bundle_identity(root, manifest, delivered=identity_delivered)
    return Verification(
        checks=checks, false_alarm=false_alarm, identity=identity, profile=profile,
        profile_stats=_profile_stats(profile), update_rate_hz=session.update_rate_hz,
        duration_s=session.n_samples / session.update_rate_hz, records=records, link_records=link_records,
        record_rate_hz=session.record_rate_hz, models=models,
        fir_map=None if fir_matrix is None else np.asarray(fir_matrix, dtype=float),
        sample_rate_hz=None if fir is None else float(fir["sample_rate_hz"]),
        fir_delays_s=(None if fir is None
                      else (np.arange(fir["n_fir"]) - fir["bulk_delay_samples"]) / fir["sample_rate_hz"]),
        foreign=False, cautions=cautions, elapsed_s=time.perf_counter() - began,
        timings_s=dict(session.timings_s), fit=fit, mimo=checks_mimo.mimo_section(session, link_records),
        conditions=_conditions_section(profile, opened, root, session.n_samples / session.update_rate_hz),
    )


def verify_gains(gains_file, profile, update_rate_hz: float, *, false_alarm: float = DEFAULT_FALSE_ALARM,
                 periodic: bool = False, progress=None, workers: int | None = None, models: dict | None = None,
                 cautions: list | None = None) -> Verification:
    """Check foreign tap gains (npy or cf32, columns = taps in profile order) against a profile.

    Parameters
    ----------
    gains_file : str or os.PathLike
        ``.npy``: complex, shape (n,), (n, n_taps) or (n, n_rx, n_tx, n_taps).
        ``.cf32`` (or any other name): headerless little-endian interleaved
        float32 I/Q, taps interleaved sample by sample, shape (n, n_taps).
    profile : str, os.PathLike or Profile
        The profile the gains claim to follow.
    update_rate_hz : float
        Rate of the gain samples.
    models : dict, optional
        Tap index -> :class:`emucompile.verify.tolerance.TapModel` replacing the
        profile's (estimated gains: the theory with the estimation noise in it).
    cautions : list of str, optional
        Replace the generic caution on measured gains (for a caller that
        models the estimation noise and says how).

    Notes
    -----
    Integrity checks need a manifest and are marked not applicable. Gains
    estimated from measurements carry noise and estimator bias that the
    checks do not model.
    """
    began = time.perf_counter()
    false_alarm = _check_false_alarm(false_alarm)
    loaded = profile if isinstance(profile, Profile) else load_profile(profile)
    rate = _positive_rate(update_rate_hz)
    gains = _read_foreign(Path(gains_file), loaded.n_taps)
    n, n_rx, n_tx, n_taps = gains.shape
    if models is None:
        models = {i: tap_model_from_profile(tap) for i, tap in enumerate(loaded.taps)}
    cautions = list(cautions or []) or [MEASURED_GAINS_CAUTION]
    session = Session(
        profile=loaded, models=models, update_rate_hz=rate, n_samples=n, n_rx=n_rx, n_tx=n_tx,
        periodic=periodic, false_alarm=false_alarm, cautions=cautions, progress=progress,
        mimo=None if n_rx * n_tx == 1 else {"foreign": True}, components=None, workers=workers,
    )
    source = decimate.ArraySource(gains)
    checks, records, link_records = session.run([("foreign", source)])
    checks = holm(checks, false_alarm)
    identity = {
        "source": "foreign", "path": os.fspath(gains_file), "sha256": sha256_file(Path(gains_file)),
        "size_bytes": Path(gains_file).stat().st_size, "profile_source": getattr(loaded, "source", None),
        "resolved_profile_sha256": loaded.resolved_sha256(), "n_samples": n, "n_rx": n_rx, "n_tx": n_tx,
        "periodic": periodic, "integrity": FOREIGN_INTEGRITY, "verify_tool_version": __version__,
        "verify_platform": bd.platform_info(), "delivered": [],
    }
    return Verification(
        checks=checks, false_alarm=false_alarm, identity=identity, profile=loaded,
        profile_stats=_profile_stats(loaded), update_rate_hz=rate, duration_s=n / rate, records=records,
        link_records=link_records, record_rate_hz=session.record_rate_hz, models=models, fir_map=None,
        sample_rate_hz=None, fir_delays_s=None, foreign=True, cautions=cautions,
        elapsed_s=time.perf_counter() - began, timings_s=dict(session.timings_s),
    )


def default_output_directory(path, *, foreign: bool = False) -> Path:
    """Where the report goes without ``--report``: ``OUTDIR/verification`` or ``GAINS.verification``."""
    path = Path(path)
    return path.with_name(path.name + ".verification") if foreign else path / REPORT_DIRECTORY



def _small_scale_source(root, opened, cautions, handle=None, before_read=None):
    """The npy source (rows read from ``handle``, the open gains file, when given, each read after
    ``before_read(first_byte, end_byte)``), with the shadowing divided out when the bundle has shadowing."""
    reading = dict(handle=handle, before_read=before_read)
    if opened.entry("shadowing_db") is None and not _has_shadowing(opened.manifest):
        return decimate.MappedSource(opened.tap_gains, **reading), None
    components = open_components(root)
    if components is None or components.shadowing_amplitude(0, 1) is None:
        cautions.append("the bundle has shadowing but its trajectory could not be read: the small-scale "
                        "checks see the large-scale variation too")
        return decimate.MappedSource(opened.tap_gains, **reading), None
    return decimate.MappedSource(opened.tap_gains, components.shadowing_amplitude, **reading), components


def _has_shadowing(manifest):
    return bool((manifest.get("conditions") or {}).get("shadowing"))


def _ci16_source(root, entry, shape, shadowing):
    codes = formats.get("ci16").reader(root, [entry], shape)  # the registry's reader: the stored int16 codes
    divide = None if shadowing is None else shadowing.shadowing_amplitude
    return decimate.Ci16Source(codes, float(entry["quantisation"]["scale_factor"]), divide)


def _check_label(check):
    return check.name + ("" if check.tap is None else f" (tap {check.tap})")

CONDITION_POINTS = 2001  # points of each trajectory in the report and verification.json


def _conditions_section(profile, opened, root, duration_s):
    """The time-varying conditions over the record: HST Doppler, moving delay, shadowing (as written)."""
    conditions = getattr(profile, "conditions", None)
    out = {}
    times = np.linspace(0.0, duration_s, CONDITION_POINTS)
    train = getattr(conditions, "high_speed_train", None)
    if train is not None:
        out["high_speed_train"] = {"time_s": times, "doppler_hz": train.doppler_hz(times),
                                   "taps": list(getattr(conditions, "high_speed_train_taps", ()) or ())}
    moving = getattr(conditions, "moving_propagation", None)
    if moving is not None:
        out["moving_delay"] = {"time_s": times, "delay_offset_s": moving.delay_offset_s(times)}
    entry = opened.entry("shadowing_db")
    if entry is not None:
        values = np.load(root / entry["name"], mmap_mode="r")
        stride = max(1, -(-values.shape[0] // CONDITION_POINTS))
        rate = float(opened.manifest["update_rate_hz"])
        spec = getattr(conditions, "shadowing", None)
        out["shadowing"] = {"time_s": np.arange(0, values.shape[0], stride) / rate,
                            "gain_db": np.array(values[::stride], dtype=float),
                            "sigma_db": getattr(spec, "sigma_db", None), "hold": getattr(spec, "hold", None),
                            "source": f"{entry['name']} (every {stride}th sample)"}
    return out or None

# -- helpers: identity, input, output ------------------------------------------------------------------


def _bundle_identity(root, manifest, *, delivered):
    files = [{k: e.get(k) for k in ("name", "role", "sha256", "size_bytes")} for e in manifest["files"]]
    keys = ("seed", "method", "generator_version", "tool_version", "profile_sha256", "resolved_profile_sha256",
            "platform", "created_utc", "periodic", "n_samples", "n_rx", "n_tx")
    identity = {"source": "bundle", "path": os.fspath(root), "manifest_sha256": sha256_file(root / "manifest.json"),
                "files": files}
    identity.update({k: manifest.get(k) for k in keys})
    identity.update(integrity="intact (manifest valid; every file's size, header and SHA-256 match)",
                    verify_tool_version=__version__, verify_platform=bd.platform_info(), delivered=list(delivered),
                    profile_name=(manifest.get("profile") or {}).get("name"))
    return identity


def _profile_stats(profile):
    return _strict(profile_statistics(profile))


def _read_foreign(path: Path, n_taps: int) -> np.ndarray:
    """Foreign gains as complex (n, n_rx, n_tx, n_taps)."""
    if not path.is_file():
        raise InputError(f"{path}: no such file")
    if path.suffix == ".npy":
        try:
            array = np.load(path, mmap_mode="r", allow_pickle=False)
        except (OSError, ValueError) as error:
            raise InputError(f"{path}: not a readable npy file: {error}") from None
        if not np.iscomplexobj(array):
            raise InputError(f"{path}: holds {array.dtype}, expected complex tap gains")
        if array.ndim == 1:
            array = array[:, None]
        if array.ndim == 2:
            array = array[:, None, None, :]
        if array.ndim != 4:
            raise InputError(f"{path}: shape {list(array.shape)}; expected (n,), (n, n_taps) "
                             "or (n, n_rx, n_tx, n_taps)")
    else:
        size = path.stat().st_size
        if size % (8 * n_taps):
            raise InputError(f"{path}: {size} bytes is not a whole number of cf32 samples x {n_taps} taps",
                             hint="cf32 is interleaved float32 I/Q, taps interleaved sample by sample")
        array = np.memmap(path, dtype="<c8", mode="r", shape=(size // (8 * n_taps), 1, 1, n_taps))
    if array.shape[-1] != n_taps:
        raise InputError(f"{path}: {array.shape[-1]} tap column(s), the profile has {n_taps}",
                         hint="columns are the profile's taps in order")
    if array.shape[0] < 2:
        raise InputError(f"{path}: holds {array.shape[0]} sample(s); nothing to verify")
    return array


def _check_false_alarm(value):
    try:
        number = float(value)
    except (TypeError, ValueError):
        raise InputError(f"--false-alarm must be a number, got {value!r}") from None
    if not 0.0 < number < 1.0:
        raise InputError(f"--false-alarm must lie in (0, 1), got {value!r}")
    return number


def _positive_rate(value):
    if value is None:
        raise InputError("--update-rate HZ is required with --gains")
    number = float(value)
    if not (number > 0 and math.isfinite(number)):
        raise InputError(f"--update-rate must be finite and > 0 Hz, got {value!r}")
    return number


def _strict(value):
    """A deep copy with numpy values made plain and non-finite floats made null."""
    if isinstance(value, dict):
        return {str(k): _strict(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_strict(v) for v in value]
    if isinstance(value, np.ndarray):
        return _strict(value.tolist())
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, complex):
        return {"real": _strict(value.real), "imag": _strict(value.imag)}
    if isinstance(value, Path):
        return os.fspath(value)
    return value


_largest_frequency_hz = largest_frequency_hz  # read by emucompile.loop.judge (with RECORD_RATE_FACTOR)

__all__ = ["Verification", "IntegrityError", "verify_bundle", "verify_gains", "default_output_directory",
           "DEFAULT_FALSE_ALARM", "RECORD_RATE_FACTOR", "check_matrix", "comparison"]
