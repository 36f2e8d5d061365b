"""Campaign speed-up: a plan on 1 worker against 2 (or more) workers of a Dask LocalCluster.

Every round runs the whole plan into a new directory (nothing reused), first on a
LocalCluster of one worker (the baseline, same process, same plan), then on N workers,
and prints the wall times and the speed-up (target >= 1.7 x on 2 cores). The clusters are
started before the clock starts (their start-up is printed apart). ``--threads`` runs the
workers as threads of one process instead of processes, to compare the two.

    python benchmarks/bench_campaign.py [--plan profiles_demo/tdl-matrix-campaign.yml]
        [--workers 2] [--rounds 1] [--threads] [--no-plots]

The load average is printed before and after: on a shared machine the figure is noisy.
"""

from __future__ import annotations

import argparse
import dataclasses
import logging
import os
import shutil
import statistics
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))


def _run(plan, workers, processes):
    from dask import distributed

    from emucompile.campaign import run_campaign

    began = time.perf_counter()
    cluster = distributed.LocalCluster(n_workers=workers, threads_per_worker=1, processes=processes,
                                       dashboard_address=None, silence_logs=logging.ERROR,
                                       **({"host": "127.0.0.1"} if processes else {}))
    client = distributed.Client(cluster)
    started = time.perf_counter() - began
    directory = tempfile.mkdtemp(prefix="bench-campaign-")
    try:
        began = time.perf_counter()
        result = run_campaign(plan, directory, client=client)
        elapsed = time.perf_counter() - began
    finally:
        client.close()
        cluster.close()
        shutil.rmtree(directory, ignore_errors=True)
    assert result.ran == len(plan.cases), "every case must run in every round"
    return elapsed, started, result.counts()


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--plan", default=str(ROOT / "profiles_demo" / "tdl-matrix-campaign.yml"))
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--rounds", type=int, default=1)
    parser.add_argument("--threads", action="store_true", help="workers as threads of one process")
    parser.add_argument("--no-plots", action="store_true", help="skip the report figures of every case")
    args = parser.parse_args(argv)

    from emucompile.campaign import expand_plan

    plan = expand_plan(args.plan)
    if args.no_plots:
        plan = dataclasses.replace(plan, cases=tuple(dataclasses.replace(c, plots=False) for c in plan.cases))
    kind = "threads" if args.threads else "processes"
    print(f"plan {plan.name}: {len(plan.cases)} cases; workers as {kind}; {os.cpu_count()} cores; "
          f"load average before {os.getloadavg()}", flush=True)
    one, many = [], []
    for round_number in range(1, args.rounds + 1):
        for workers, times in ((1, one), (args.workers, many)):
            elapsed, started, counts = _run(plan, workers, not args.threads)
            times.append(elapsed)
            print(f"round {round_number}: {workers} worker(s) {elapsed:.1f} s (cluster start {started:.1f} s, "
                  f"not counted); {counts}", flush=True)
    ratios = [a / b for a, b in zip(one, many)]
    print(f"speed-up {args.workers} workers vs 1: min {min(ratios):.2f} x, median {statistics.median(ratios):.2f} x "
          f"over {len(ratios)} round(s) (target >= 1.7 x on 2 cores); load average after {os.getloadavg()}")


if __name__ == "__main__":
    main()
