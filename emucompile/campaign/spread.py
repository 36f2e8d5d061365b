"""One bundle, its blocks generated on several Dask workers and placed at their offsets.

The engine keys every block of every tap by (seed, link, tap, block), so any
range of samples can be generated alone with the same bits
(:meth:`emucompile.models.channel.ChannelPlan.block`). Here the record is cut into
ranges on the compile's own chunk grid; each worker plans the compile once
(the same plan, from the same resolved profile and options), generates its
ranges and writes their bytes at their offsets into the files of the one
temporary bundle directory (``tap_gains.npy``, and ``tap_gains.cf32`` when
asked for), with ``fsync`` before it reports. The process that opened the
:class:`emucompile.bundle.store.BundleWriter` then hashes each file as it stands
(:meth:`~emucompile.bundle.store.BundleWriter.adopt_placed`), writes the manifest
last and renames the directory into place, as an ordinary compile does:
the data files' bytes equal a single-process compile's (tested on a
two-worker LocalCluster by SHA-256). Formats re-encoded from the gains
(ci16, csv, SigMF, fir) are written in sample order only and are refused here.
"""

from __future__ import annotations

import hashlib
import json
import os
import time

import numpy as np

from emucompile._lazy import LazyModule
from emucompile.campaign import cluster
from emucompile.errors import InputError

compiler = LazyModule("emucompile.compile.compiler")
store = LazyModule("emucompile.bundle.store")
model = LazyModule("emucompile.profile.model")
target_module = LazyModule("emucompile.profile.target")

TASKS_PER_SLOT = 4
"""Ranges per worker thread (a few, so a slow worker does not hold the end back)."""
MAX_RANGE_CHUNKS = 16
"""Most compile chunks (of CHUNK_SAMPLES) in one task."""

_WORKER_PLANS: dict = {}  # on a worker: spec key -> CompilePlan (planned once per process)


def compile_spread(profile=None, outdir=None, *, plan=None, client=None, scheduler=None, workers=None,
                   progress=None, **options):
    """Compile one bundle with its blocks generated on Dask workers; bytes equal to ``compile_profile``.

    Parameters
    ----------
    profile, outdir, **options
        As for :func:`emucompile.compile.compiler.plan_compile` (or give ``plan``).
    plan : CompilePlan, optional
        A plan made by :func:`~emucompile.compile.compiler.plan_compile`.
    client : dask.distributed.Client, optional
        Use this cluster; otherwise one is opened from ``scheduler`` / ``workers``
        (:func:`emucompile.campaign.cluster.open_client`) and closed after.
    progress : callable(samples_done, samples_total), optional

    Returns
    -------
    emucompile.compile.compiler.CompileResult

    Raises
    ------
    InputError
        A format that cannot be placed (ci16, csv, sigmf, fir), or OUTDIR not
        reachable from every worker at the same path.
    """
    if plan is None:
        plan = compiler.plan_compile(profile, outdir, **options)
    if client is None:
        with cluster.open_client(scheduler, workers) as opened:
            return compile_spread(plan=plan, client=opened, progress=progress)
    distributed = cluster.dask_distributed()

    began = time.perf_counter()
    spec = _spec(plan)
    ranges = _ranges(plan.n_samples, compiler.CHUNK_SAMPLES, cluster.worker_slots(client))
    with store.BundleWriter(plan.outdir, plan.layout, force=plan.force, max_size_bytes=plan.max_size_bytes,
                      threaded=False) as writer:
        files = writer.placed_files()
        cluster.check_reachable(client, writer.temporary_path)
        futures = [client.submit(place_range, spec, start, stop, files, pure=False) for start, stop in ranges]
        try:
            done = 0
            for future in distributed.as_completed(futures):
                done += future.result()
                if progress is not None:
                    progress(done, plan.n_samples)
        except BaseException:
            client.cancel(futures)
            raise
        writer.adopt_placed()
        path = writer.finish(compiler.manifest_fields(plan))
    return compiler.CompileResult(path=path, manifest=store.open_bundle(path).manifest, plan=plan,
                                  elapsed_s=time.perf_counter() - began)


def place_range(spec: dict, start: int, stop: int, files: list) -> int:
    """On a worker: generate samples [start, stop) and write them into every placed file; return their count."""
    plan = _worker_plan(spec)
    step = compiler.chunk_samples(plan.channel.n_links, plan.channel.n_taps)  # at most 24 MiB of gains
    for first in range(start, stop, step):
        last = min(first + step, stop)
        gains = np.ascontiguousarray(plan.channel.block(first, last), dtype="<c8")
        if not np.isfinite(gains).all():
            raise ValueError(f"the block at sample {first} holds NaN or infinity")
        data = memoryview(gains).cast("B")
        for entry in files:
            _write_at(entry["path"], entry["data_offset"] + first * entry["row_bytes"], data)
    for entry in files:
        descriptor = os.open(entry["path"], os.O_WRONLY)
        try:
            os.fsync(descriptor)
        finally:
            os.close(descriptor)
    return stop - start


def _write_at(path: str, offset: int, data) -> None:
    descriptor = os.open(path, os.O_WRONLY)  # never creates: the bundle writer made the file
    try:
        while data:
            written = os.pwrite(descriptor, data, offset)
            data, offset = data[written:], offset + written
    finally:
        os.close(descriptor)


def _spec(plan) -> dict:
    """What a worker needs to make the same plan: the resolved profile and every settled choice."""
    target = None if plan.target_fit is None else plan.target_fit.target.to_dict()
    fir = plan.fir
    spec = {
        "profile": plan.profile.document, "duration_s": plan.n_samples / plan.update_rate_hz,
        "update_rate_hz": plan.update_rate_hz, "seed": plan.seed, "method": plan.method,
        "periodic": plan.periodic, "target": target,
        "sample_rate_hz": None if fir is None else fir.manifest_entry()["sample_rate_hz"],
        "delay_mapping": None if fir is None else fir.manifest_entry()["delay_mapping"],
        "n_samples": plan.n_samples, "resolved_profile_sha256": plan.profile.resolved_sha256(),
    }
    spec["key"] = hashlib.sha256(json.dumps(spec, sort_keys=True, default=str).encode()).hexdigest()
    return spec


def _worker_plan(spec: dict):
    plan = _WORKER_PLANS.get(spec["key"])
    if plan is not None:
        return plan
    profile = model.profile_from_document(spec["profile"], source="spread compile")
    target = None
    if spec["target"] is not None:
        target = target_module.parse_target(spec["target"], file="spread compile target")
    plan = compiler.plan_compile(profile, "spread-worker", duration_s=spec["duration_s"],
                                 update_rate_hz=spec["update_rate_hz"], seed=spec["seed"], method=spec["method"],
                                 periodic=spec["periodic"], target=target, sample_rate_hz=spec["sample_rate_hz"],
                                 delay_mapping=spec["delay_mapping"], max_size_bytes=None)
    if plan.n_samples != spec["n_samples"] or profile.resolved_sha256() != spec["resolved_profile_sha256"]:
        raise InputError("a worker planned a different record than the compile asked for (a version mismatch "
                         "between the workers' emucompile and this one?)")
    _WORKER_PLANS.clear()  # one plan at a time: its filters and caches are not small
    _WORKER_PLANS[spec["key"]] = plan
    return plan


def _ranges(n_samples: int, chunk: int, slots: int) -> list[tuple[int, int]]:
    """[start, stop) ranges on the chunk grid: about TASKS_PER_SLOT per slot, at most MAX_RANGE_CHUNKS chunks."""
    n_chunks = -(-n_samples // chunk)
    per_task = max(1, min(MAX_RANGE_CHUNKS, -(-n_chunks // (slots * TASKS_PER_SLOT))))
    step = per_task * chunk
    return [(start, min(start + step, n_samples)) for start in range(0, n_samples, step)]


__all__ = ["compile_spread", "place_range"]
