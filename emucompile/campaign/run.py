"""Running a plan: each case compiled and verified as one Dask task, resumable, then the index.

Layout of the campaign directory ``DIR``::

    DIR/NAME/                 the case's bundle (compile), with verification/ (verify's report)
    DIR/cases/NAME.json       the case's record, written last (atomically) when the case is done
    DIR/campaign.json         every case's record and the summary per axis
    DIR/index.html            the same as one self-contained page

A case is *done* when its record exists with the case's key (resolved
profile, compile and verify options, target, generator version), and the
bundle's ``manifest.json`` and ``verification/verification.json`` both have
the SHA-256 of the manifest the record names (the manifest holds every data
file's SHA-256; the files' sizes are checked, and with ``recheck`` their
hashes too). A rerun skips done cases without starting a cluster and redoes
the rest. Bundles are written atomically by :class:`emucompile.bundle.store.BundleWriter`
(a killed task leaves a hidden temporary sibling, removed by the next write
of that case), so an interrupted run leaves every finished case whole.
"""

from __future__ import annotations

import contextlib
import hashlib
import json
import math
import secrets
import signal
import sys
import threading
import time
from dataclasses import dataclass
from pathlib import Path

from emucompile._lazy import LazyModule
from emucompile.bundle import atomic
from emucompile.campaign import cluster, index
from emucompile.campaign.plan import Plan, expand_plan
from emucompile.errors import EmucompileError, InputError

compiler = LazyModule("emucompile.compile.compiler")
verifier = LazyModule("emucompile.verify.run")
model = LazyModule("emucompile.profile.model")
target_module = LazyModule("emucompile.profile.target")
store = LazyModule("emucompile.bundle.store")
spread_module = LazyModule("emucompile.campaign.spread")
outputs = LazyModule("emucompile.report.outputs")

CASES_DIRECTORY = "cases"
RECORD_FORMAT = "emucompile-campaign-case"
PASSED, FAILED, ERROR, NOT_RUN = "passed", "failed", "error", "not run"


@dataclass(frozen=True)
class CampaignResult:
    """What :func:`run_campaign` did: every case's record in plan order, and where the index went."""

    plan: object
    directory: Path
    records: tuple
    ran: int
    skipped: int
    elapsed_s: float
    index_html: Path
    campaign_json: Path

    @property
    def passed(self) -> bool:
        return all(r["status"] == PASSED for r in self.records)

    def counts(self) -> dict:
        statuses = [r["status"] for r in self.records]
        return {s: statuses.count(s) for s in (PASSED, FAILED, ERROR, NOT_RUN)}

    def summary(self) -> str:
        counts = self.counts()
        verdict = "PASSED" if self.passed else "NOT PASSED"
        lines = [(f"{verdict}: {len(self.records)} case(s): {counts[PASSED]} passed, {counts[FAILED]} failed a "
                  f"check, {counts[ERROR]} in error, {counts[NOT_RUN]} not run; {self.ran} run, {self.skipped} "
                  f"already done; {self.elapsed_s:.1f} s"),
                 f"index       {self.index_html}"]
        lines += [f"  {r['status'].upper():6} {r['name']}: {r.get('message') or _failed_text(r)}"
                  for r in self.records if r["status"] != PASSED][:20]
        return "\n".join(lines)


def run_campaign(plan, directory, *, scheduler: str | None = None, workers: int | None = None,
                 progress=None, recheck: bool = False, client=None) -> CampaignResult:
    """Compile and verify every case of a plan on Dask; skip the cases already done.

    Parameters
    ----------
    plan : Plan, str or os.PathLike
        An expanded plan (:func:`emucompile.campaign.expand_plan`) or a plan file.
    directory : str or os.PathLike
        The campaign directory (made if missing; reused to resume).
    scheduler : str, optional
        Address of a running Dask scheduler; the workers must reach
        ``directory`` at the same path (checked before anything starts).
    workers : int, optional
        Processes of the local cluster (default: the machine's cores).
    progress : callable(event: dict), optional
        Called as cases finish (``ProgressPrinter`` draws it on stderr).
    recheck : bool
        Hash every data file of a done case again before reusing it.
    client : dask.distributed.Client, optional
        Use this client (its cluster) instead of opening one.

    Returns
    -------
    CampaignResult
        ``passed`` is True when every case passed; a failing case never stops the others.

    Examples
    --------
    >>> result = run_campaign("profiles_demo/tdl-matrix-campaign.yml", "out/matrix", workers=2)  # doctest: +SKIP
    >>> result.passed, result.counts()                                                          # doctest: +SKIP
    """
    began = time.perf_counter()
    plan = plan if isinstance(plan, Plan) else expand_plan(plan)
    root = Path(directory)
    _prepare_directory(root)
    records = {case.name: _done_record(case, root, recheck=recheck) for case in plan.cases}
    todo = [case for case in plan.cases if records[case.name] is None]
    skipped = len(plan.cases) - len(todo)
    emit = progress or (lambda event: None)
    emit({"event": "start", "total": len(plan.cases), "todo": len(todo), "skipped": skipped})
    try:
        if todo:
            with _terminate_as_interrupt():
                _run_cases(todo, root, records, scheduler=scheduler, workers=workers, client=client,
                           emit=emit, total=len(plan.cases), skipped=skipped)
    finally:
        # after an interruption, cases the workers finished but did not report yet count too
        ordered = tuple(records[c.name] or _done_record(c, root, recheck=False) or _not_run(c) for c in plan.cases)
        index_html, campaign_json = index.write_index(plan, root, ordered)
    return CampaignResult(plan=plan, directory=root, records=ordered, ran=len(todo), skipped=skipped,
                          elapsed_s=time.perf_counter() - began, index_html=index_html,
                          campaign_json=campaign_json)


def _run_cases(todo, root, records, *, scheduler, workers, client, emit, total, skipped):
    if client is None:
        with cluster.open_client(scheduler, workers) as opened:
            return _run_cases(todo, root, records, scheduler=scheduler, workers=workers, client=opened,
                              emit=emit, total=total, skipped=skipped)
    distributed = cluster.dask_distributed()
    if scheduler is not None:
        cluster.check_reachable(client, root)
    slots = cluster.worker_slots(client)
    began = time.perf_counter()
    futures = {}
    spread = [case for case in todo if case.spread_blocks]
    run_token = secrets.token_hex(4)  # task keys unique to this run: a shared cluster may run the same plan twice
    for case in todo:
        if not case.spread_blocks:
            key = f"case-{case.name}-{run_token}"
            futures[client.submit(run_case, case, str(root.resolve()), pure=False, key=key)] = case
    done = failed = 0
    durations = []

    def finished(case, record):
        nonlocal done, failed
        records[case.name] = record
        done += 1
        failed += record["status"] != PASSED
        durations.append(record.get("elapsed_s") or 0.0)
        remaining = len(todo) - done
        mean = sum(durations) / len(durations)
        emit({"event": "case", "name": case.name, "status": record["status"], "done": done + skipped,
              "total": total, "running": min(slots, remaining), "failed": failed,
              "left_s": mean * remaining / slots, "elapsed_s": time.perf_counter() - began,
              "message": record.get("message") or _failed_text(record)})

    for case in spread:  # one bundle's blocks over every worker, then its verify, here
        finished(case, run_case(case, str(root.resolve()), client=client))
    for future in distributed.as_completed(list(futures)):
        case = futures[future]
        try:
            record = future.result()
        except Exception as error:  # noqa: BLE001 - a worker died or the task could not run: this case only
            record = _error_record(case, f"the task did not complete: {type(error).__name__}: {error}")
            _write_record(root, record)
        finished(case, record)


def run_case(case, directory: str, *, client=None) -> dict:
    """Compile and verify one case into ``directory/NAME``; its record, also written to ``cases/NAME.json``.

    Runs on a Dask worker (or here, with ``client`` for a case whose blocks
    are spread over the workers). Never raises for a failing case: a check
    that fails gives status ``failed``, an error status ``error`` with its message.
    """
    root = Path(directory)
    bundle_path = root / case.name
    began = time.perf_counter()
    try:
        profile = model.profile_from_document(case.document, source=f"case {case.name}")
        target = None
        if case.target is not None:
            target = target_module.parse_target(case.target, file=f"case {case.name} target")
        options = dict(case.compile_options, target=target, force=True)
        if client is not None:
            spread_module.compile_spread(profile, bundle_path, client=client, **options)
        else:
            compiler.compile_profile(profile, bundle_path, **options)
        verification = verifier.verify_bundle(bundle_path, false_alarm=case.false_alarm)
        outputs.write_outputs(verification, directory=verifier.default_output_directory(bundle_path),
                              plots=case.plots)
        record = _case_record(case, verification, time.perf_counter() - began)
    except EmucompileError as error:
        record = _error_record(case, str(error), time.perf_counter() - began)
    except Exception as error:  # noqa: BLE001 - one case's bug must not stop the campaign
        record = _error_record(case, f"internal error: {type(error).__name__}: {error} (a bug; please report it)",
                               time.perf_counter() - began)
    _write_record(root, record)
    return record


# -- records -------------------------------------------------------------------------------------


def _case_record(case, verification, elapsed_s) -> dict:
    # from the Verification's fields: its to_dict() (a deep strict-JSON copy of every check) costs
    # more than the rest of the record, and write_outputs has just made it once
    checks = verification.checks
    identity, stats = verification.identity, verification.profile_stats
    statistics = {k: stats.get(k) for k in ("n_taps", "rms_delay_spread_s", "max_doppler_hz",
                                             "rms_doppler_spread_hz", "coherence_bandwidth_50_hz")}
    return {
        "format": RECORD_FORMAT, "format_version": 1, "name": case.name, "key": case.key,
        "status": PASSED if verification.passed else FAILED, "profile": case.label, "source": case.source,
        "axes": dict(case.axes),
        "counts": {"passed": sum(c.passed is True for c in checks), "failed": sum(c.passed is False for c in checks),
                   "not_applicable": sum(c.passed is None for c in checks)},
        "failed_checks": [c.name + ("" if c.tap is None else f"[tap {c.tap}]") for c in checks if c.passed is False],
        "statistics": {k: _finite(v) for k, v in statistics.items()},
        "seed": identity.get("seed"), "n_samples": identity.get("n_samples"),
        "update_rate_hz": float(verification.update_rate_hz), "duration_s": float(verification.duration_s),
        "manifest_sha256": identity["manifest_sha256"],
        "resolved_profile_sha256": identity.get("resolved_profile_sha256"),
        "generator_version": identity.get("generator_version"),
        "report": f"{case.name}/verification/report.html",
        "elapsed_s": elapsed_s, "message": None,
    }


def _finite(value):
    """A plain number for strict JSON; None for a missing, infinite or NaN value."""
    if value is None or isinstance(value, (bool, str)):
        return value
    value = float(value) if not isinstance(value, int) else value
    return value if math.isfinite(value) else None


def _error_record(case, message, elapsed_s=0.0) -> dict:
    return {"format": RECORD_FORMAT, "format_version": 1, "name": case.name, "key": case.key, "status": ERROR,
            "profile": case.label, "source": case.source, "axes": dict(case.axes), "counts": None,
            "failed_checks": [], "statistics": {}, "seed": case.compile_options.get("seed"),
            "report": None, "elapsed_s": elapsed_s, "message": message}


def _not_run(case) -> dict:
    record = _error_record(case, "not run (interrupted)")
    record["status"] = NOT_RUN
    return record


def _failed_text(record) -> str:
    names = record.get("failed_checks") or []
    if not names:
        return ""
    return f"{len(names)} check(s) failed: " + ", ".join(names[:6]) + (" ..." if len(names) > 6 else "")


def _write_record(root: Path, record: dict) -> None:
    index.write_atomic(root / CASES_DIRECTORY / f"{record['name']}.json",
                 json.dumps(record, indent=2, allow_nan=False) + "\n")


def _done_record(case, root: Path, *, recheck: bool) -> dict | None:
    """The case's record when the case is done and whole (see the module notes), else None."""
    try:
        record = json.loads((root / CASES_DIRECTORY / f"{case.name}.json").read_text("utf-8"))
        if record.get("key") != case.key or record.get("status") not in (PASSED, FAILED):
            return None
        bundle = root / case.name
        manifest_sha = hashlib.sha256((bundle / store.MANIFEST_NAME).read_bytes()).hexdigest()
        verification = json.loads((bundle / store.VERIFICATION_DIRECTORY / "verification.json").read_text("utf-8"))
        verified_sha = verification["identity"]["manifest_sha256"]
    except (OSError, ValueError, KeyError, TypeError):
        return None
    if not (manifest_sha == record.get("manifest_sha256") == verified_sha):
        return None
    if store.verify_integrity(bundle, hashes=recheck):
        return None
    return record


@contextlib.contextmanager
def _terminate_as_interrupt():
    """SIGTERM raises KeyboardInterrupt here (main thread only), so the cluster is closed and the index written."""
    if threading.current_thread() is not threading.main_thread() or signal.getsignal(signal.SIGTERM) != signal.SIG_DFL:
        yield
        return
    signal.signal(signal.SIGTERM, atomic.raise_terminated)
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, signal.SIG_DFL)


def _prepare_directory(root: Path) -> None:
    if root.exists() and not root.is_dir():
        raise InputError(f"{root}: is not a directory", hint="give -o a directory for the campaign")
    try:
        (root / CASES_DIRECTORY).mkdir(parents=True, exist_ok=True)
    except OSError as error:
        raise InputError(f"{root}: cannot make the campaign directory: {error.strerror or error}") from None


# -- progress on stderr ----------------------------------------------------------------------------


class ProgressPrinter:
    """Prints a campaign's progress, one line per finished case, on a stream (stderr)."""

    def __init__(self, stream=None):
        self.stream = stream or sys.stderr

    def __call__(self, event: dict) -> None:
        if event["event"] == "start":
            line = (f"campaign: {event['total']} case(s), {event['skipped']} already done, "
                    f"{event['todo']} to run")
        else:
            left = event["left_s"]
            line = (f"[{event['done']}/{event['total']} done, {event['running']} running, {event['failed']} failed, "
                    f"~{_duration_text(left)} left] {event['name']}: {event['status']}"
                    + (f" ({event['message']})" if event["message"] else ""))
        print(line, file=self.stream, flush=True)


def _duration_text(seconds: float) -> str:
    seconds = max(0, round(seconds))
    return f"{seconds // 60}m{seconds % 60:02d}s" if seconds >= 60 else f"{seconds}s"


__all__ = ["CampaignResult", "run_campaign", "run_case", "ProgressPrinter", "PASSED", "FAILED", "ERROR", "NOT_RUN"]
