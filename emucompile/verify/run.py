"""Verify a bundle (or foreign tap gains) against the theory its profile promises.

``emucompile verify OUTDIR`` and :func:`verify_bundle` run, in order:

1. **Integrity** (bundles only): the manifest against its schema, every listed
   file's size, npy header (shape, dtype) and SHA-256
   (:func:`emucompile.bundle.store.verify_integrity`). Any mismatch raises
   :class:`IntegrityError` (exit 2) naming the file: "corrupted or edited after
   compiling". Foreign gains have no manifest: integrity is "not applicable".
2. **A decimated copy of every tap** (and link): a Kaiser-windowed low-pass FIR
   (passband to the largest frequency f_b in the gains, stopband from the
   record rate minus f_b, 80 dB by design) keeps every q-th sample, so the record rate is
   about :data:`RECORD_RATE_FACTOR` x that frequency. The statistics need only
   that band, so verify reads each sample once and works on q times fewer
   samples than compile wrote (the speed target: verify no slower than
   compile). Periodic bundles are filtered circularly, so the copy is periodic
   too and the checks look across the wrap; a non-periodic copy ends at the
   largest FFT-friendly length (a few samples dropped at the end).
3. **Checks** from :mod:`emucompile.verify.tolerance` (tolerances calibrated by Monte
   Carlo of an exact reference process): per tap and link ``check_tap`` (mean
   power, K-factor, envelope KS, autocorrelation, Doppler PSD and the power
   beyond f_D, level-crossing rate, average fade duration, phase);
   ``check_cross_correlation`` between taps (expected 0) and, for MIMO, between
   links of a tap (expected: the profile's spatial correlation); for a FIR map,
   the grid's RMS delay spread and power against the profile (deterministic
   comparisons, no false alarm). With ``delivered=True`` the same per-tap
   checks run again on what the emulator receives: the ci16 codes decoded with
   their scale, and each column of the materialised (target-fitted) FIR that
   one tap alone reaches (model: that tap with its weight squared as gain). A check that cannot be meaningful says so (``passed`` None and
   a ``reason``), never "pass".
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
    Tap index -> decimated complex128 1-D record of link 0 (shadowing removed
    when the bundle has shadowing and the components are available).
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
``write_outputs`` (and the command line) writes the HTML report, ``verification.json``
and the figures' PNGs into ``OUTDIR/verification/`` by default (for foreign
gains, ``GAINS.verification/`` beside the file). That directory is not in the
manifest's hashed file list; the integrity check reads only listed files, and
``compile --force`` accepts it as part of a bundle it may replace (the old
verification goes with the old numbers). With ``--report FILE`` the HTML goes
to FILE and ``verification.json`` beside it as ``STEM.verification.json``.
"""

from __future__ import annotations

import dataclasses
import functools
import json
import math
import os
import time
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import numpy as np

from emucompile._version import __version__
from emucompile.bundle.store import VERIFICATION_DIRECTORY
from emucompile.errors import InputError, IntegrityError, Problem  # noqa: F401  (IntegrityError: re-exported)

DEFAULT_FALSE_ALARM = 0.01
RECORD_RATE_FACTOR = 8.0
"""The decimated record's rate is at least this multiple of the largest frequency in the gains."""
DECIMATOR_ATTENUATION_DB = 80.0
"""Stopband attenuation of the decimating low-pass (Kaiser window, Kaiser's formula)."""
CHUNK_SAMPLES = 1 << 16
SEGMENT_BYTES = 1 << 18  # decimator segments of ~256 KiB of complex64 rows, cache-sized (1e7 x 12 taps: 5x faster than 1.5 MiB)
SEGMENTS_PER_TASK = 16  # consecutive segments one thread works through per task (fewer hand-offs)
CHECK_THREADS = 2  # threads for the per-tap and cross-tap checks without worker processes
DECIMATOR_THREADS = 2  # threads sharing the decimator's chunks (numpy's loops release the GIL)
# Measured on an idle 2-core machine, 1e7 x 12 taps (benchmarks/bench_verify.py): see DEVELOPERS.md "Verify".
REPORT_DIRECTORY = VERIFICATION_DIRECTORY
JSON_NAME = "verification.json"
REPORT_NAME = "report.html"
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
            lines.append(f"  FAIL {_check_label(check)}: value {_number(check.value)}, expected "
                         f"{_number(check.expected)} +- {_number(check.tolerance)}"
                         + (f" ({check.reason})" if check.reason else ""))
        if self.fit is not None:
            from emucompile.profile.target import fit_lines

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
    (decimation, O(N_h / q) per sample with an N_h-tap filter), then the
    statistics on records q times shorter.
    """
    from emucompile.bundle import store as bd

    began = time.perf_counter()
    false_alarm = _check_false_alarm(false_alarm)
    root = Path(path)
    problems = bd.verify_integrity(root, hashes=False)  # structure first: a bundle we can read
    if problems:
        raise IntegrityError(problems)
    # The SHA-256 pass runs beside the statistics (hashlib and file reads release the GIL);
    # its answer is awaited before anything is reported, and a mismatch wins over any result.
    with ThreadPoolExecutor(max_workers=1) as hasher:
        hashing = hasher.submit(_timed, bd.verify_integrity, root)
        try:
            result = _verify_intact(root, began, false_alarm=false_alarm, delivered=delivered,
                                    progress=progress, workers=workers)
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


def _verify_intact(root, began, *, false_alarm, delivered, progress, workers):
    """verify_bundle's statistics of a bundle whose structure was checked (hashes checked alongside)."""
    from emucompile.bundle import store as bd
    from emucompile.profile.model import profile_from_document

    opened = bd.open_bundle(root)
    manifest = opened.manifest
    profile = profile_from_document(manifest["profile"], source=f"{root}/manifest.json#/profile")
    models = {i: _tap_model(entry) for i, entry in enumerate(manifest["taps"])}
    cautions = []
    source, shadowing = _small_scale_source(root, opened, cautions)
    sources = [("npy", source)]
    if delivered:
        entry = opened.entry("tap_gains_ci16")
        if entry is None:
            cautions.append("--delivered: the bundle holds no ci16 data; the npy gains are what it delivers")
        else:
            sources.append(("ci16", _ci16_source(root, entry, opened.tap_gains.shape, shadowing)))
    session = _Session(
        profile=profile, models=models, update_rate_hz=float(manifest["update_rate_hz"]),
        n_samples=int(manifest["n_samples"]), n_rx=int(manifest["n_rx"]), n_tx=int(manifest["n_tx"]),
        periodic=bool(manifest["periodic"]), false_alarm=false_alarm, cautions=cautions, progress=progress,
        mimo=manifest.get("mimo"), components=_components_or_none(root, cautions) if manifest.get("mimo") else None,
        workers=workers,
    )
    checks, records, link_records = session.run(sources)
    if delivered and opened.fir is not None:
        divide = None if shadowing is None else shadowing.shadowing_amplitude
        checks += session.delivered_fir(_MappedSource(opened.fir, divide), np.asarray(opened.fir_map, dtype=float))
        identity_delivered = [name for name, _ in sources[1:]] + ["fir"]
    else:
        identity_delivered = [name for name, _ in sources[1:]]
    codes_entry = opened.entry("fir_coefficients_int") if delivered else None
    if codes_entry is not None:
        checks += _delivered_codes_checks(session, root, codes_entry, opened, shadowing)
        identity_delivered.append("fir_coefficients")
    fir_matrix = opened.fir_map
    fir = manifest.get("fir")
    fir_checks = [] if fir is None else _fir_checks(manifest, np.asarray(fir_matrix, dtype=float), root)
    fit = _fit_section(manifest)
    if fit is not None:
        fir_checks.append(fit.pop("check"))
    if shadowing is not None:
        cautions.append("shadowing is divided out before the small-scale checks; the shadowing trajectory "
                        "itself (its sigma and correlation) is not checked yet")
    checks = _holm(checks, false_alarm) + fir_checks
    identity = _bundle_identity(root, manifest, delivered=identity_delivered)
    return Verification(
        checks=checks, false_alarm=false_alarm, identity=identity, profile=profile,
        profile_stats=_profile_stats(profile), update_rate_hz=session.update_rate_hz,
        duration_s=session.n_samples / session.update_rate_hz, records=records, link_records=link_records,
        record_rate_hz=session.record_rate_hz, models=models,
        fir_map=None if fir_matrix is None else np.asarray(fir_matrix, dtype=float),
        sample_rate_hz=None if fir is None else float(fir["sample_rate_hz"]),
        fir_delays_s=None if fir is None else (np.arange(fir["n_fir"]) - fir["bulk_delay_samples"]) / fir["sample_rate_hz"],
        foreign=False, cautions=cautions, elapsed_s=time.perf_counter() - began,
        timings_s=dict(session.timings_s), fit=fit, mimo=_mimo_section(session, link_records),
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
    from emucompile.profile.model import Profile, load_profile

    began = time.perf_counter()
    false_alarm = _check_false_alarm(false_alarm)
    loaded = profile if isinstance(profile, Profile) else load_profile(profile)
    rate = _positive_rate(update_rate_hz)
    gains = _read_foreign(Path(gains_file), loaded.n_taps)
    n, n_rx, n_tx, n_taps = gains.shape
    if models is None:
        models = {i: _tap_model_from_profile(tap) for i, tap in enumerate(loaded.taps)}
    cautions = list(cautions or []) or [MEASURED_GAINS_CAUTION]
    session = _Session(
        profile=loaded, models=models, update_rate_hz=rate, n_samples=n, n_rx=n_rx, n_tx=n_tx,
        periodic=periodic, false_alarm=false_alarm, cautions=cautions, progress=progress,
        mimo=None if n_rx * n_tx == 1 else {"foreign": True}, components=None, workers=workers,
    )
    source = _ArraySource(gains)
    checks, records, link_records = session.run([("foreign", source)])
    checks = _holm(checks, false_alarm)
    identity = {
        "source": "foreign", "path": os.fspath(gains_file), "sha256": _sha256(Path(gains_file)),
        "size_bytes": Path(gains_file).stat().st_size, "profile_source": getattr(loaded, "source", None),
        "resolved_profile_sha256": loaded.resolved_sha256(), "n_samples": n, "n_rx": n_rx, "n_tx": n_tx,
        "periodic": periodic, "integrity": FOREIGN_INTEGRITY, "verify_tool_version": __version__,
        "verify_platform": _platform(), "delivered": [],
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


def write_outputs(verification: Verification, *, directory=None, report_file=None, plots: bool = True) -> list[Path]:
    """Write ``verification.json``, the HTML report and (in a directory) the figures' PNGs.

    Parameters
    ----------
    directory : path, optional
        Write ``report.html``, ``verification.json`` and ``figure-NN.png`` here.
    report_file : path, optional
        Write the HTML report to this file and ``STEM.verification.json`` beside it.
    plots : bool
        Draw the figures (``--no-plots`` turns them off).

    Returns
    -------
    list of Path
        The files written. When the plots or report modules are not part of
        this build, only the JSON is written (and a caution says so).
    """
    if report_file is not None:
        report_path = Path(report_file)
        json_path = report_path.with_name(report_path.stem + ".verification.json")
        figure_dir = None
    else:
        directory = Path(directory)
        if directory.is_symlink() or (directory.exists() and not directory.is_dir()):
            # a bundle from elsewhere may carry verification -> somewhere else: never written through
            raise InputError(f"{directory}: is a symbolic link or not a directory; the report is not written there",
                             hint="remove it, or give --report FILE")
        directory.mkdir(parents=True, exist_ok=True)
        report_path, json_path, figure_dir = directory / REPORT_NAME, directory / JSON_NAME, directory
    figures = []
    written = []
    if plots:
        try:
            from emucompile.report.figures import make_figures
        except ImportError:
            verification.cautions.append("figures not drawn: emucompile.report.figures is not part of this build")
        else:
            figures = make_figures(verification)
    if figure_dir is not None:
        for old in figure_dir.glob("figure-*.png"):
            old.unlink()
        for index, (_, png) in enumerate(figures, start=1):
            target = figure_dir / f"figure-{index:02d}.png"
            _write_atomic(target, png)
            written.append(target)
    try:
        from emucompile.report.html import write_report
    except ImportError:
        verification.cautions.append("HTML report not written: emucompile.report.html is not part of this build")
    else:
        report_path.parent.mkdir(parents=True, exist_ok=True)
        write_report(verification, figures, report_path)
        written.append(report_path)
    json_path.parent.mkdir(parents=True, exist_ok=True)
    _write_atomic(json_path, (json.dumps(verification.to_dict(), indent=2, allow_nan=False) + "\n").encode())
    written.append(json_path)
    return written


# -- the checks of one set of records ------------------------------------------------------------


class _Session:
    """Decimates each source and runs the per-tap, cross-tap and MIMO checks on the copies."""

    def __init__(self, *, profile, models, update_rate_hz, n_samples, n_rx, n_tx, periodic, false_alarm,
                 cautions, progress, mimo, components, workers=None):
        self.profile = profile
        self.models = models
        self.update_rate_hz = update_rate_hz
        self.n_samples = n_samples
        self.n_rx, self.n_tx = n_rx, n_tx
        self.n_links = n_rx * n_tx
        self.periodic = periodic
        self.false_alarm = false_alarm
        self.cautions = cautions
        self.progress = progress
        self.mimo = mimo
        self.components = components
        self.workers = workers
        self.timings_s = {}
        self.band_hz = _largest_frequency_hz(profile, models)
        self.decimator = _Decimator(update_rate_hz, self.band_hz, n_samples, periodic)
        self.record_rate_hz = self.decimator.record_rate_hz
        self._direct = None

    def run(self, sources):
        """Checks of every source; records (tap -> link 0 record) and MIMO link records of the first."""
        checks, records, link_records = [], {}, None
        for position, (label, source) in enumerate(sources):
            began = time.perf_counter()
            decimated = self.decimator.run(source, self.n_links, len(self.models), self.progress)  # (taps, links, m)
            self.timings_s["decimation"] = self.timings_s.get("decimation", 0.0) + time.perf_counter() - began
            began = time.perf_counter()
            for tap, model in self.models.items():
                if model is not None and model.spectrum is None:
                    # a static tap is one tone: undo the decimator's passband ripple at its frequency exactly
                    decimated[tap] /= self.decimator.response(model.los_doppler_hz)
            prefix = "" if position == 0 else f"delivered {label}: "
            # the cross-tap correlations of the first source are computed beside the taps' checks
            cross = functools.partial(self._cross_tap_checks, decimated) if position == 0 else None
            tap_checks, cross = self._tap_checks(decimated, prefix, alongside=cross)
            checks += tap_checks
            checks += self._beyond_band_checks(decimated, prefix)
            if position == 0:
                records = {i: decimated[i, 0] for i in range(decimated.shape[0])}
                if self.n_links > 1:
                    link_records = {i: decimated[i].T for i in range(decimated.shape[0])}
                checks += cross
                if self.n_links > 1:
                    checks += self._mimo_checks(decimated)
            self.timings_s["checks"] = self.timings_s.get("checks", 0.0) + time.perf_counter() - began
        return checks, records, link_records

    def _tap_checks(self, decimated, prefix, alongside=None):
        """The per-tap checks of every link, and the result of ``alongside()`` (run beside them)."""
        tol = _tolerance()
        found, jobs = [], []
        for tap, model in self.models.items():
            if model is None:
                found += [tol.CheckResult(prefix + name, tap, None, None, None, None, None,
                                          "not applicable: the direct part follows a Doppler trajectory "
                                          "(no stationary model)", self.false_alarm)
                          for name in tol.CHECK_NAMES if name != "cross_correlation"]
                continue
            jobs += [(tap, link, model) for link in range(self.n_links)]
        prepare = {}  # the null sums the jobs share, once each (keyed by function and arguments)
        for tap, link, model in jobs:
            for task in tol.null_sum_tasks(model, self.record_rate_hz, decimated.shape[-1], self.periodic):
                prepare.setdefault((task.func, task.args), task)
        outcomes, extra = _map_jobs(_tap_job, (decimated, self.record_rate_hz, self.periodic, self.false_alarm), jobs,
                                    self._workers(decimated), prepare=list(prepare.values()), alongside=alongside)
        for (tap, link, _), results in zip(jobs, outcomes):
            found += [_renamed(r, prefix, self._link_label(link)) for r in results]
        return found, extra

    def _workers(self, decimated):
        return 1 if self.workers is None else max(1, int(self.workers))

    def delivered_fir(self, source, matrix, *, label="fir", columns=None):
        """Per-tap checks on the materialised FIR (``fir.npy``), column by column.

        A column that one tap alone reaches carries that tap's gain times its
        weight w: the tap's model with power w^2 P. A column that sums several
        taps has no single-tap model; it is marked not applicable (its taps are
        checked one by one on the gains). ``columns`` names the FIR column of
        each of ``matrix``'s columns (default: the same index); ``label`` goes
        into the check names ("delivered LABEL[COLUMN]: ...").
        """
        tol = _tolerance()
        n_fir = matrix.shape[1]
        columns = list(range(n_fir)) if columns is None else list(columns)
        decimated = self.decimator.run(source, self.n_links, n_fir, None)  # (columns, links, m)
        found = []
        for column in range(n_fir):
            contributors = np.flatnonzero(matrix[:, column])
            if contributors.size == 0:
                continue
            prefix = f"delivered {label}[{columns[column]}]: "
            merged = _merged_model([self.models[int(i)] for i in contributors], matrix[contributors, column])
            if merged is not None:
                # independent Rayleigh taps of one Doppler spectrum add to a Rayleigh tap of the summed power
                records = decimated[column]
                for link in range(self.n_links):
                    results = tol.check_tap(records[link], self.record_rate_hz, merged, periodic=self.periodic,
                                            tap=tuple(int(i) for i in contributors), level=self.false_alarm)
                    found += [_renamed(r, prefix, self._link_label(link)) for r in results]
                continue
            if contributors.size > 1:
                found.append(tol.CheckResult(
                    prefix + "column", tuple(int(i) for i in contributors), None, None, None, None, None,
                    f"not applicable: the coefficient sums {contributors.size} taps (no single-tap model; "
                    "the taps are checked one by one)", self.false_alarm))
                continue
            tap = int(contributors[0])
            model = self.models[tap]
            if model is None:
                continue
            weight = float(matrix[tap, column])
            scaled = dataclasses.replace(model, mean_power=model.mean_power * weight * weight)
            records = decimated[column]
            if model.spectrum is None:
                records = records / self.decimator.response(model.los_doppler_hz)
            for link in range(self.n_links):
                results = tol.check_tap(records[link], self.record_rate_hz, scaled, periodic=self.periodic,
                                        tap=tap, level=self.false_alarm)
                found += [_renamed(r, prefix, self._link_label(link)) for r in results]
        return found

    def _beyond_band_checks(self, decimated, prefix):
        """Power the band-limited copy lacks, from the full-rate power of the same samples.

        (P_full - P_record) / P_full against 0, within OUT_OF_BAND_LIMIT_DB
        (-40 dB, the tolerance module's requirement on the power beyond f_D)
        plus the decimator's largest passband power deviation plus 1 / N_record
        for a non-periodic record (the midpoint-rule end effect of comparing a
        sampled mean with the full-rate mean, ~0.1 / N for 8 samples per period
        of |g|^2; taken 10x larger). It sees images and noise anywhere up to the
        update rate's Nyquist frequency, which the record's own PSD checks cannot.
        A bound, not a hypothesis test (p_value None, not in Holm).
        """
        decimator = self.decimator
        if decimator.h is None:
            return []
        tol = _tolerance()
        allowance = 10 ** (tol.OUT_OF_BAND_LIMIT_DB / 10) + decimator.passband_power_deviation
        allowance += 0.0 if self.periodic else 1.0 / max(1, decimator.n_out)
        found = []
        for tap, model in self.models.items():
            if model is None or model.spectrum is None:
                continue
            for link in range(self.n_links):
                full = float(decimator.full_power[link, tap])
                if not full > 0:
                    continue
                kept = float(np.mean(np.abs(decimated[tap, link]) ** 2))
                value = (full - kept) / full
                name = prefix + "power_beyond_record_band" + ("" if self.n_links == 1 else f" [{self._link_label(link)}]")
                passed = abs(value) <= allowance
                found.append(tol.CheckResult(
                    name, tap, value, 0.0, allowance, None, passed,
                    None if passed else f"{_db_text(value)} of the tap's power lies beyond the record band",
                    None, allowance, "fraction of power",
                    {"record_band_hz": decimator.record_rate_hz - decimator.band_hz,
                     "full_rate_power": full, "record_power": kept,
                     "source": "full-rate mean |g|^2 against the decimated copy's (same samples)"}))
        return found

    def _cross_tap_checks(self, decimated):
        fading = [i for i, m in self.models.items() if m is not None and _is_fading(m)]
        if len(fading) < 2:
            return []
        tol = _tolerance()
        rho = tol.correlation_matrix([decimated[i, 0] for i in fading], self.record_rate_hz,
                                     [self.models[i] for i in fading])
        return [tol.check_cross_correlation(decimated[a, 0], decimated[b, 0], self.record_rate_hz, self.models[a],
                                            self.models[b], taps=(a, b), expected=0.0, level=self.false_alarm,
                                            estimate=rho[i, j], periodic=self.periodic)
                for i, a in enumerate(fading) for j, b in enumerate(fading) if j > i]

    def _mimo_checks(self, decimated):
        tol = _tolerance()
        if self.components is None:
            self.cautions.append("the achieved MIMO correlation is not checked: the expected correlation "
                                 "of the links needs the bundle's components (not available for this input)")
            return []
        found = []
        for tap, model in self.models.items():
            if model is None or not _is_fading(model):
                continue
            # expected[a, b] = E[h_a conj(h_b)] / P of the diffuse parts (components' convention)
            expected = np.asarray(self.components.expected_correlation(tap))
            diffuse_model = _diffuse_model(model)
            diffuse = self._diffuse_links(decimated[tap], tap)
            for a in range(self.n_links):
                for b in range(a + 1, self.n_links):
                    result = tol.check_cross_correlation(
                        diffuse[a], diffuse[b], self.record_rate_hz, diffuse_model, diffuse_model,
                        taps=(tap, tap), expected=complex(expected[a, b]), level=self.false_alarm,
                        name="mimo_correlation", periodic=self.periodic)
                    found.append(dataclasses.replace(
                        result, name=f"mimo_correlation [links {self._link_label(a)}~{self._link_label(b)}]"))
        return found

    def _diffuse_links(self, links, tap):
        """The links' records minus the (decimated) direct part, which is deterministic."""
        model = self.models[tap]
        if not (model.k_linear and model.k_linear > 0):
            return links
        if self._direct is None:
            self._direct = self.decimator.run(_ComponentsDirect(self.components), self.n_links, len(self.models), None)
        return links - self._direct[tap]

    def _link_label(self, link):
        if self.n_links == 1:
            return None
        tx, rx = divmod(link, self.n_rx)
        return f"rx{rx}-tx{tx}"


class _Decimator:
    """Band-limit and keep every q-th sample: y[m] = sum_k h[k] x[m q + D - k], D = (N - 1)/2.

    The low-pass is a Kaiser-windowed sinc (``scipy.signal.firwin`` with
    ``kaiserord``; Kaiser 1974): passband to the largest frequency f_b of the
    gains, stopband from F_out - f_b (F_out = F_u / q), so nothing aliases
    into |f| <= f_b, and the band f_b < |f| < F_out - f_b folds onto the
    out-of-band part of the record (what the out-of-band check measures).
    Zero phase: y[m] is centred on input sample m q. Without ``periodic``,
    only outputs whose window lies inside the record are kept; with it, the
    input wraps (q must divide n, else the nearest smaller divisor is taken).
    """

    def __init__(self, update_rate_hz, band_hz, n_samples, periodic):
        from scipy import signal

        self.n_samples, self.periodic = n_samples, periodic
        self.update_rate_hz = update_rate_hz
        band = band_hz if band_hz > 0 else update_rate_hz / (8 * RECORD_RATE_FACTOR)
        q = max(1, int(update_rate_hz // (RECORD_RATE_FACTOR * band)))
        if periodic:
            while q > 1 and n_samples % q:
                q -= 1
        self.q = q
        self.record_rate_hz = update_rate_hz / q
        self.h = None
        self.half = 0
        self.band_hz = band
        self.passband_power_deviation = 0.0
        if q > 1:
            stop = self.record_rate_hz - band
            width = (stop - band) / (update_rate_hz / 2.0)
            numtaps, beta = signal.kaiserord(DECIMATOR_ATTENUATION_DB, width)
            numtaps += 1 - numtaps % 2
            self.h = signal.firwin(numtaps, (band + stop) / 2.0, window=("kaiser", beta), fs=update_rate_hz)
            phases = -(-numtaps // q)  # hr = h reversed, zero-padded to phases * q taps, as (phases, q)
            reversed_padded = np.zeros(phases * q, np.float32)
            reversed_padded[:numtaps] = self.h[::-1]
            self.phases = reversed_padded.reshape(phases, q)
            grid = np.linspace(0.0, band, 512)
            response = np.abs(np.exp(-2j * np.pi * np.outer(grid, np.arange(numtaps)) / update_rate_hz) @ self.h) ** 2
            self.passband_power_deviation = float(np.max(np.abs(response - 1.0)))
            self.half = (numtaps - 1) // 2
        if periodic:
            self.first, self.last = 0, n_samples // q - 1
        else:
            self.first = -(-self.half // q)
            self.last = (n_samples - 1 - self.half) // q
        self.n_out = max(0, self.last - self.first + 1)
        if not periodic:
            # the checks FFT whole records: a length with a large prime factor costs ~10x
            # (124993 = 11^2 1033: 2.6 s against 0.2 s for an 8x interpolation); drop the last few
            self.n_out = _fast_length_at_most(self.n_out)
            self.last = self.first + self.n_out - 1

    def response(self, frequency_hz):
        """Complex gain of the centred filter at one frequency: sum_k h[k] exp(-j 2 pi f (k - D) / F_u)."""
        if self.h is None:
            return 1.0
        k = np.arange(self.h.size) - self.half
        return complex(np.sum(self.h * np.exp(-2j * np.pi * frequency_hz * k / self.update_rate_hz)))

    def run(self, source, n_links, n_taps, progress):
        """Decimated records of a source: complex128 (n_taps, n_links, n_out), each record contiguous.

        Also sets :attr:`full_power`, mean |x|^2 per link and tap over the
        input samples the outputs stand for (output m for [m q - q/2, m q + q/2)),
        at the full rate: the power the band-limited copy would lack is
        ``full_power - mean |y|^2``.
        """
        out = np.empty((n_taps, n_links, self.n_out), dtype=np.complex128)
        power = np.zeros((n_links, n_taps))
        q = self.q
        rows = max(16 * q, SEGMENT_BYTES // (8 * max(1, n_links * n_taps)))
        step = max(1, min(rows, CHUNK_SAMPLES) // q)
        end = self.first + self.n_out
        starts = range(self.first, end, step * SEGMENTS_PER_TASK)

        def task(t0):
            part = np.zeros((n_links, n_taps))
            t1 = min(t0 + step * SEGMENTS_PER_TASK, end)
            for m0 in range(t0, t1, step):
                m1 = min(m0 + step, t1)
                y, segment_power = self._chunk(source, m0, m1, n_links, n_taps)
                out[:, :, m0 - self.first:m1 - self.first] = y.reshape(m1 - m0, n_links, n_taps).transpose(2, 1, 0)
                part += segment_power
            return t1, part

        # Tasks are independent and numpy's loops and BLAS release the GIL: two threads share
        # them, the parts of the power summed in task order (the same numbers for any thread count).
        with ThreadPoolExecutor(max_workers=DECIMATOR_THREADS) as pool:
            for t1, part in pool.map(task, starts):
                power += part
                if progress is not None:
                    progress(min(t1 * q, self.n_samples), self.n_samples)
        self.full_power = power / max(1, self.n_out * q)
        return out

    def _chunk(self, source, m0, m1, n_links, n_taps):
        """Outputs m0..m1-1, (m1 - m0, n_links, n_taps) complex64, and the float64 power of their input samples.

        Polyphase form of y[m] = sum_j hr[j] x[m q - D + j] (hr the reversed
        filter, zero-padded to L q taps): with the segment cut into blocks of q
        rows, S[b, p] = x[(m0 + b) q - D + p], y[m0 + i] = sum_l P[l, i + l] for
        P[l, b] = sum_p hr[l q + p] S[b, p] -- one float32 matrix product
        (L x q) @ (q x blocks) over every link and tap, then L shifted sums.
        """
        q, half = self.q, self.half
        width = n_links * n_taps
        if self.h is None:
            block = source.read(m0, m1)
            return block, np.sum(np.abs(block.astype(np.complex128)) ** 2, axis=0)
        count = m1 - m0
        a, b = m0 * q - half, (m1 - 1) * q + half + 1
        blocks = count + self.phases.shape[0] - 1
        s = np.empty((blocks, q, 2 * width), np.float32)
        flat = s.reshape(blocks * q, 2 * width)
        flat[: b - a] = np.asarray(self._segment(source, a, b), dtype=np.complex64).reshape(b - a, width).view(np.float32)
        flat[b - a:] = 0.0  # rows past the segment meet only the zero padding of hr
        # |x|^2 summed in float64 (re^2 + im^2 per link and tap; a float64 copy first: 2x faster than einsum casting)
        mid = flat[half - q // 2: half - q // 2 + count * q].astype(np.float64)
        power = np.einsum("ic,ic->c", mid, mid).reshape(n_links, n_taps, 2).sum(axis=2)
        products = (self.phases @ s.transpose(1, 0, 2).reshape(q, -1)).reshape(-1, blocks, 2 * width)
        y = products[0, :count].copy()
        for lag in range(1, products.shape[0]):
            y += products[lag, lag: lag + count]
        return y.view(np.complex64).reshape(count, n_links, n_taps), power

    def _segment(self, source, a, b):
        n = self.n_samples
        if 0 <= a and b <= n:
            return source.read(a, b)
        if not self.periodic:
            return source.read(max(a, 0), min(b, n))
        pieces, position = [], a
        while position < b:
            start = position % n
            stop = min(n, start + (b - position))
            pieces.append(source.read(start, stop))
            position += stop - start
        return np.concatenate(pieces, axis=0)


class _MappedSource:
    """Rows of a (n, n_rx, n_tx, n_taps) array as (m, n_links, n_taps) link vectors, complex64."""

    def __init__(self, array, divide_by=None):
        self.array = array
        self.divide_by = divide_by

    def read(self, start, stop):
        from emucompile.models.mimo import links_from_gains

        block = np.asarray(self.array[start:stop])
        if self.divide_by is not None:
            block = block / self.divide_by(start, stop)[:, None, None, None]
        return links_from_gains(block)


_ArraySource = _MappedSource


class _Ci16Source(_MappedSource):
    """The ci16 codes decoded with their scale (what an emulator fed the ci16 file receives)."""

    def __init__(self, codes, scale, divide_by=None):
        super().__init__(codes, divide_by)
        self.scale = scale

    def read(self, start, stop):
        from emucompile.models.mimo import links_from_gains

        codes = np.asarray(self.array[start:stop], dtype=np.float32)
        block = (codes[..., 0] + 1j * codes[..., 1]) / self.scale
        if self.divide_by is not None:
            block = block / self.divide_by(start, stop)[:, None, None, None]
        return links_from_gains(block)


class _FirCodesSource(_Ci16Source):
    """Integer FIR coefficients scaled back: (I + jQ) * step, in float64 (int32 codes exceed float32)."""

    def read(self, start, stop):
        from emucompile.models.mimo import links_from_gains

        codes = np.asarray(self.array[start:stop], dtype=np.float64)
        block = (codes[..., 0] + 1j * codes[..., 1]) / self.scale
        if self.divide_by is not None:
            block = block / self.divide_by(start, stop)[:, None, None, None]
        return links_from_gains(block.astype(np.complex64))


class _ComponentsDirect:
    def __init__(self, components):
        self.components = components

    def read(self, start, stop):
        from emucompile.models.mimo import links_from_gains

        return links_from_gains(self.components.direct(start, stop))


# -- helpers: sources, models, checks --------------------------------------------------------------


def _fast_length_at_most(n):
    """The largest m <= n whose FFT is fast (factors 2, 3, 5, 7, 11: ``scipy.fft.next_fast_len``)."""
    from scipy import fft

    m = n
    while m > 1 and fft.next_fast_len(m) != m:
        m -= 1
    return m


def _tap_job(shared, tap, link, model):
    decimated, rate_hz, periodic, level = shared
    return _tolerance().check_tap(decimated[tap, link], rate_hz, model, periodic=periodic, tap=tap, level=level)


_SHARED = None


def _run_shared(index):
    function, shared, jobs = _SHARED
    return function(shared, *jobs[index])


def _map_jobs(function, shared, jobs, workers, prepare=(), alongside=None):
    """``([function(shared, *job) for job in jobs], alongside())``, in forked worker processes when ``workers`` > 1.

    ``prepare``: zero-argument callables run first (in threads), which fill the
    caches the jobs share (the tolerance module's null sums), so that no two
    jobs compute the same one. ``alongside``: one more zero-argument callable,
    run beside the jobs (its result second; None without it). The records reach
    worker processes by fork (copy-on-write), with the caches filled, not by
    pickling; only the results travel back. Same results in the same order
    either way.
    """
    global _SHARED
    threads = min(CHECK_THREADS, os.cpu_count() or 1)
    if threads > 1 and len(prepare) > 1:
        with ThreadPoolExecutor(max_workers=threads) as pool:
            list(pool.map(lambda task: task(), prepare))
    else:
        for task in prepare:
            task()
    if workers <= 1 or len(jobs) < 3:
        if threads <= 1 or len(jobs) < 3:
            return [function(shared, *job) for job in jobs], None if alongside is None else alongside()
        # the FFTs, sorts and array passes release the GIL; results in job order either way
        with ThreadPoolExecutor(max_workers=threads) as pool:
            beside = None if alongside is None else pool.submit(alongside)  # queued first: no core waits at the end
            results = list(pool.map(lambda job: function(shared, *job), jobs))
            return results, None if beside is None else beside.result()
    import multiprocessing
    from concurrent.futures import ProcessPoolExecutor

    _SHARED = (function, shared, jobs)
    try:
        with ProcessPoolExecutor(max_workers=workers, mp_context=multiprocessing.get_context("fork")) as pool:
            pending = pool.map(_run_shared, range(len(jobs)))  # the workers are forked here, before any thread starts
            extra = None if alongside is None else alongside()  # this process would only wait
            return list(pending), extra
    finally:
        _SHARED = None


def _tolerance():
    from emucompile.verify import tolerance

    return tolerance


def _small_scale_source(root, opened, cautions):
    """The npy source, with the shadowing divided out when the bundle has shadowing."""
    if opened.entry("shadowing_db") is None and not _has_shadowing(opened.manifest):
        return _MappedSource(opened.tap_gains), None
    components = _components_or_none(root, cautions)
    if components is None or components.shadowing_amplitude(0, 1) is None:
        cautions.append("the bundle has shadowing but its trajectory could not be read: the small-scale "
                        "checks see the large-scale variation too")
        return _MappedSource(opened.tap_gains), None
    return _MappedSource(opened.tap_gains, components.shadowing_amplitude), components


def _has_shadowing(manifest):
    return bool((manifest.get("conditions") or {}).get("shadowing"))


def _components_or_none(root, cautions):
    try:
        from emucompile.verify.components import open_components
    except ImportError:
        cautions.append("bundle components (shadowing, MIMO correlation) are not part of this build")
        return None
    return open_components(root)


def _ci16_source(root, entry, shape, shadowing):
    from emucompile.bundle import store as bd

    codes = bd.member_raw(root, entry, "<i2", (*shape, 2))
    divide = None if shadowing is None else shadowing.shadowing_amplitude
    return _Ci16Source(codes, float(entry["quantisation"]["scale_factor"]), divide)


def _tap_model(entry):
    """The theory of one tap from its manifest entry (values as compiled: rounded Doppler, drawn phase).

    Returns None for a direct part whose Doppler follows a trajectory (no
    stationary model: its checks are marked not applicable).
    """
    from emucompile.models.theory import DopplerSpectrum

    tol = _tolerance()
    power = entry.get("power_linear")
    if power is None:
        power = 0.0 if entry.get("power_db") is None else 10.0 ** (entry["power_db"] / 10.0)
    k = _k_linear(entry["fading"], entry.get("k_db"))
    los = entry.get("los_doppler_hz")
    if k > 0 and los is None:
        return None
    spectrum = None
    if entry["fading"] != "static":
        spectrum = DopplerSpectrum.of(entry)
    return tol.TapModel(spectrum=spectrum, mean_power=float(power), k_linear=k,
                        los_doppler_hz=float(los) if k > 0 else 0.0)


def _tap_model_from_profile(tap):
    try:
        return _tolerance().TapModel.from_tap(tap)
    except ValueError:  # a direct part on a Doppler trajectory
        return None


def _k_linear(fading, k_db):
    if fading == "rician":
        return 10.0 ** (float(k_db) / 10.0)
    if fading == "static":
        return math.inf
    return 0.0


def _is_fading(model):
    return model.spectrum is not None


def _diffuse_model(model):
    """The model of a tap's diffuse part alone: Rayleigh with power P / (K + 1)."""
    return dataclasses.replace(model, mean_power=model.diffuse_power, k_linear=0.0, los_doppler_hz=0.0)


def _largest_frequency_hz(profile, models):
    band = 0.0
    for model in models.values():
        if model is None:
            continue
        if model.spectrum is not None:
            band = max(band, model.spectrum.band_edge_hz)
        band = max(band, abs(model.los_doppler_hz))
    largest = getattr(profile, "largest_doppler_hz", None)
    if largest is not None and math.isfinite(largest):
        band = max(band, float(largest))
    return band


def _renamed(result, prefix, link):
    name = prefix + result.name + ("" if link is None else f" [{link}]")
    return dataclasses.replace(result, name=name) if name != result.name else result


def _holm(checks, false_alarm):
    return _tolerance().holm(checks, family_wise=false_alarm) if checks else []


def _db_text(fraction):
    return f"{10 * math.log10(fraction):.1f} dB" if fraction > 0 else f"{fraction:.2g}"


def _check_label(check):
    return check.name + ("" if check.tap is None else f" (tap {check.tap})")


def _fir_checks(manifest, matrix, root):
    """The FIR map against the profile: deterministic comparisons (no false alarm, not in Holm).

    ``fir_map_rebuilt``: the map compile makes for this manifest's profile and
    options (target fit included), rebuilt here, against ``fir_map.npy``
    (catches a map edited with its hash regenerated). ``fir_power``: energy
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
    from emucompile.compile.compiler import _replan
    from emucompile.models.grid import rms_delay_spread

    tol = _tolerance()
    fir = manifest["fir"]
    powers = np.array([t.get("power_linear") or (0.0 if t.get("power_db") is None else 10 ** (t["power_db"] / 10))
                       for t in manifest["taps"]])
    delays = np.array([t["delay_s"] for t in manifest["taps"]])
    rate = float(fir["sample_rate_hz"])
    coefficient_delays = (np.arange(matrix.shape[1]) - fir["bulk_delay_samples"]) / rate
    checks = []
    try:
        rebuilt = _replan(manifest, root).fir
    except Exception as error:  # noqa: BLE001 - a map we cannot rebuild is reported, not fatal
        rebuilt, why = None, f"could not rebuild the map from the manifest: {error}"
    if rebuilt is not None and rebuilt.matrix.shape == matrix.shape:
        difference = float(np.max(np.abs(rebuilt.matrix - matrix), initial=0.0))
        checks.append(_deterministic(tol, "fir_map_rebuilt", difference, 0.0, 1e-12, "",
                                     "max |fir_map.npy - map rebuilt from the profile|"))
    else:
        why = why if rebuilt is None else f"shape {list(matrix.shape)} differs from the rebuilt {list(rebuilt.matrix.shape)}"
        checks.append(_deterministic(tol, "fir_map_rebuilt", None, 0.0, 1e-12, "", why, passed=False))
    kept = float(powers @ np.sum(matrix * matrix, axis=1) / powers.sum())
    worst = (fir.get("parameters") or {}).get("energy_kept_worst")
    dropped_db = ((manifest.get("target") or {}).get("costs") or {}).get("power_dropped_db") or 0.0
    allowance = (1.0 - (worst if worst is not None else 1.0)) + (1.0 - 10 ** (-dropped_db / 10.0))
    checks.append(_deterministic(tol, "fir_power", kept, 1.0, allowance + 1e-9, "",
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
        checks.append(_deterministic(tol, "fir_rms_delay_spread", grid_spread, expected, 0.5 * step / rate * (1 + 1e-9),
                                     "s", f"grid RMS delay spread vs {against} (nearest: half a grid step)"))
    else:
        checks.append(_deterministic(tol, "fir_rms_delay_spread", grid_spread, expected, None, "s",
                                     f"grid RMS delay spread vs {against}; sinc mapping: each fractional tap spreads "
                                     "over its window; no bound to judge against (reported only)", passed=None))
    return checks


def _merged_model(models, weights):
    """The model of a FIR column that sums several taps, when it has one: every tap Rayleigh (K = 0) with
    the same Doppler spectrum; the sum of independent zero-mean complex Gaussian processes with one
    spectrum is one of the summed power, sum w_i^2 P_i (common practice). None otherwise."""
    if len(models) < 2 or any(m is None or m.spectrum is None or m.k_linear for m in models):
        return None
    if any(m.spectrum != models[0].spectrum for m in models[1:]):
        return None
    power = float(sum(w * w * m.mean_power for m, w in zip(models, weights)))
    return dataclasses.replace(models[0], mean_power=power)


def _delivered_codes_checks(session, root, entry, opened, shadowing):
    """Per-tap checks on the integer FIR coefficients scaled back (``coefficient = code * step``)."""
    codes = entry["coefficient_codes"]
    dtype = "<i2" if entry["dtype"] == "int16" else "<i4"
    array = np.memmap(root / entry["name"], dtype=dtype, mode="r", offset=entry["data_offset"],
                      shape=tuple(entry["shape"]))
    divide = None if shadowing is None else shadowing.shadowing_amplitude
    columns = [int(c) for c in codes["columns"]]
    matrix = np.asarray(opened.fir_map, dtype=float)[:, columns]
    return session.delivered_fir(_FirCodesSource(array, 1.0 / float(codes["step"]), divide), matrix,
                                 label="fir codes", columns=columns)


def _fit_section(manifest):
    """The "emulator fit" record and its check: the fitted channel's RMS delay spread against the profile's.

    The bound is the fit tolerance recorded at compile (the default for a
    bundle made before it was recorded). A fit beyond it that the user
    accepted (``compile --accept-fit``) is not judged again (passed None, the
    acceptance said); one that was not accepted fails.
    """
    from emucompile.profile.target import DEFAULT_FIT_TOLERANCE_PCT, fit_record

    record = fit_record(manifest)
    if record is None:
        return None
    tol = _tolerance()
    spread = record["rms_delay_spread_s"]
    acceptance = record["acceptance"] or {}
    percent = acceptance.get("tolerance_pct", DEFAULT_FIT_TOLERANCE_PCT)
    bound = acceptance.get("bound_s")
    if bound is None:
        bound = percent / 100.0 * spread["profile"]
    text = (f"the fitted channel's RMS delay spread against the profile's, within {percent:g} % of the "
            "profile's (the fit tolerance)")
    check = _deterministic(tol, "fit_rms_delay_spread", spread["fitted"], spread["profile"], bound, "s", text)
    if check.passed is False and acceptance.get("accepted"):
        check = dataclasses.replace(
            check, passed=None,
            reason=(f"beyond the fit tolerance of {percent:g} % ({_number(spread['change_pct'])} %): accepted at "
                    "compile with --accept-fit (manifest target.fit_acceptance); not judged again"))
    record["check"] = check
    return record


def _mimo_section(session, link_records):
    """Expected and achieved correlation of the links' diffuse parts, per fading tap (MIMO bundles)."""
    if session.components is None or not link_records or session.n_links < 2:
        return None
    taps = {}
    for tap, model in session.models.items():
        if model is None or not _is_fading(model) or tap not in link_records:
            continue
        diffuse = np.asarray(session._diffuse_links(np.asarray(link_records[tap]).T, tap), dtype=np.complex128)
        gram = diffuse @ diffuse.conj().T / diffuse.shape[1]
        scale = np.sqrt(np.maximum(np.real(np.diag(gram)), 1e-300))
        taps[tap] = {"expected": np.asarray(session.components.expected_correlation(tap)),
                     "achieved": gram / np.outer(scale, scale)}
    if not taps:
        return None
    return {"links": [session._link_label(link) for link in range(session.n_links)], "taps": taps,
            "convention": "rho[a, b] = E[h_a conj(h_b)] / sqrt(P_a P_b) of the diffuse parts (shadowing divided out)"}


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


def _deterministic(tol, name, value, expected, tolerance, unit, detail, *, passed="judge"):
    if passed == "judge":
        passed = value is not None and abs(value - expected) <= tolerance
    reason = None if passed is not False or value is None else f"differs by {abs(value - expected):.3g} {unit}".strip()
    if passed is None:
        reason = detail
    return tol.CheckResult(name=name, tap=None, value=value, expected=expected, tolerance=tolerance,
                           p_value=None, passed=passed, reason=reason, level=None, min_detectable=tolerance,
                           unit=unit, detail=detail)


# -- helpers: identity, input, output ------------------------------------------------------------------


def _bundle_identity(root, manifest, *, delivered):
    files = [{k: e.get(k) for k in ("name", "role", "sha256", "size_bytes")} for e in manifest["files"]]
    keys = ("seed", "method", "generator_version", "tool_version", "profile_sha256", "resolved_profile_sha256",
            "platform", "created_utc", "periodic", "n_samples", "n_rx", "n_tx")
    identity = {"source": "bundle", "path": os.fspath(root), "manifest_sha256": _sha256(root / "manifest.json"),
                "files": files}
    identity.update({k: manifest.get(k) for k in keys})
    identity.update(integrity="intact (manifest valid; every file's size, header and SHA-256 match)",
                    verify_tool_version=__version__, verify_platform=_platform(), delivered=list(delivered),
                    profile_name=(manifest.get("profile") or {}).get("name"))
    return identity


def _profile_stats(profile):
    from emucompile.profile.stats import profile_statistics

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
            raise InputError(f"{path}: shape {list(array.shape)}; expected (n,), (n, n_taps) or (n, n_rx, n_tx, n_taps)")
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


def _sha256(path: Path) -> str:
    from emucompile.bundle.formats import sha256_file

    return sha256_file(path)


def _platform():
    from emucompile.bundle.store import platform_info

    return platform_info()


def _write_atomic(path: Path, data: bytes) -> None:
    temporary = path.with_name(f".{path.name}.tmp-{os.getpid()}")
    temporary.write_bytes(data)
    os.replace(temporary, path)


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


def _number(value):
    if value is None:
        return "n/a"
    if isinstance(value, float):
        return f"{value:.4g}"
    return str(value)


__all__ = ["Verification", "IntegrityError", "verify_bundle", "verify_gains", "write_outputs",
           "default_output_directory", "DEFAULT_FALSE_ALARM"]
