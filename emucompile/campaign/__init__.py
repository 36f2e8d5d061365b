"""Campaigns: test plans of many profiles, seeds and settings, run as Dask tasks, and their index.

This subpackage owns the plan format (``emucompile/schemas/campaign-plan-v1.schema.json``,
read by the same safe reader as profiles), its expansion into named cases
(:func:`expand_plan`), running them -- each case compiled and verified as one
task on a ``dask.distributed`` cluster, a local one by default --, resuming a
run that stopped (:func:`run_campaign`), the campaign index (``index.html``
and ``campaign.json``), one bundle's blocks generated on several workers
(:func:`compile_spread`), and the Dask clients the calibration tools use. It
may import compile, verify and report (and what they stand on); nothing in
the package imports it except the command line. Dask itself is imported only
when a cluster is opened.

Notes
-----
A case task (``run.run_case``) compiles with ``force=True`` into ``DIR/NAME``,
verifies, writes the report, then its record ``DIR/cases/NAME.json`` (atomic)
last; it never raises for a failing case. Its key: SHA-256 of the resolved
profile, compile options, target, verify options and generator version; a case is
reused only when record, manifest and ``verification.json`` agree (sizes checked;
``recheck`` hashes). The cluster: ``LocalCluster(n_workers,
threads_per_worker=1, processes=True)``; processes because compile and verify
hold the GIL for much of their work. The spread compile: workers ``pwrite``
ranges of the plain array files on the compile chunk grid and fsync; the writer
then hashes each file as it stands and writes the manifest last as usual.
"""

from __future__ import annotations

import importlib

_API = {
    "expand_plan": "emucompile.campaign.plan",
    "check_plan": "emucompile.campaign.plan",
    "plan_schema": "emucompile.campaign.plan",
    "Plan": "emucompile.campaign.plan",
    "Case": "emucompile.campaign.plan",
    "PlanError": "emucompile.campaign.plan",
    "list_text": "emucompile.campaign.plan",
    "run_campaign": "emucompile.campaign.run",
    "run_case": "emucompile.campaign.run",
    "CampaignResult": "emucompile.campaign.run",
    "ProgressPrinter": "emucompile.campaign.run",
    "compile_spread": "emucompile.campaign.spread",
    "open_client": "emucompile.campaign.cluster",
    "map_tasks": "emucompile.campaign.cluster",
}


def __getattr__(name):
    module = _API.get(name)
    if module is None:
        raise AttributeError(f"module 'emucompile.campaign' has no attribute {name!r}")
    return getattr(importlib.import_module(module), name)


def __dir__():
    return sorted(list(globals()) + list(_API))


__all__ = list(_API)
