"""Family-wise false-alarm rate of ``verify``, measured on bundles of one demo profile.

Compiles ``--bundles`` bundles (default 100) of a demo profile with seeds
1..N (every seed, none skipped), verifies each at ``--false-alarm`` (default
0.01) and counts the bundles with at least one failed check. The generator
is not an exact reference process, so this measures the whole chain: the
tolerances' calibration, Holm's combination and the generator's accuracy.
Prints the observed rate with its exact (Clopper-Pearson) 95 % binomial
confidence interval (``scipy.stats.binomtest``) and the checks that failed.
The rate is consistent with the stated one when the interval contains it or
lies below it (Holm bounds the rate from above).

Usage::

    python tools/calibrate_verify_false_alarm.py [--profile profiles_demo/port-crane-los.yaml]
        [--bundles 100] [--duration 5] [--false-alarm 0.01] [--jobs 2] [--scheduler tcp://HOST:PORT]

With ``--scheduler`` the bundles are made and verified on that Dask cluster; its
workers must import emucompile and write ``--work`` (default: a new temporary
directory here, so give a directory every worker mounts at the same path).
"""

from __future__ import annotations

import argparse
import collections
import os
import shutil
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")  # as the verify command sets it


def _one(args):
    profile, seed, duration, false_alarm, work = args
    from emucompile import compiler, verify

    out = Path(work) / f"seed-{seed}"
    compiler.compile_profile(profile, out, duration_s=duration, seed=seed, force=True)
    try:
        result = verify.verify_bundle(out, false_alarm=false_alarm)
        failed = [verify._check_label(c) for c in result.failed]
        return seed, failed, len(result.checks)
    finally:
        shutil.rmtree(out, ignore_errors=True)


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--profile", default=str(ROOT / "profiles_demo" / "port-crane-los.yaml"))
    parser.add_argument("--bundles", type=int, default=100)
    parser.add_argument("--duration", type=float, default=5.0, help="seconds per bundle (default 5)")
    parser.add_argument("--false-alarm", type=float, default=0.01)
    parser.add_argument("--jobs", type=int, default=2, help="local processes (without --scheduler)")
    parser.add_argument("--scheduler", metavar="ADDRESS", help="run on the Dask cluster at tcp://HOST:PORT")
    parser.add_argument("--work", help="directory for the bundles (default: a new temporary one)")
    args = parser.parse_args(argv)

    from scipy import stats

    from emucompile.campaign.cluster import map_tasks

    work = tempfile.mkdtemp(prefix="calibrate-verify-", dir=args.work)
    tasks = [(args.profile, seed, args.duration, args.false_alarm, work) for seed in range(1, args.bundles + 1)]
    failures, names, n_checks = 0, collections.Counter(), 0
    try:
        for seed, failed, checks in sorted(map_tasks(_one, tasks, scheduler=args.scheduler, processes=args.jobs,
                                                     paths=[str(ROOT)])):
            n_checks = checks
            if failed:
                failures += 1
                names.update(failed)
                print(f"seed {seed}: failed {', '.join(failed)}", flush=True)
    finally:
        shutil.rmtree(work, ignore_errors=True)
    interval = stats.binomtest(failures, args.bundles).proportion_ci(confidence_level=0.95, method="exact")
    print(f"profile {Path(args.profile).name}, {args.duration:g} s per bundle, {n_checks} checks per bundle, "
          f"seeds 1..{args.bundles}")
    print(f"bundles failing: {failures} of {args.bundles} = {failures / args.bundles:.3f}; "
          f"95 % CI [{interval.low:.3f}, {interval.high:.3f}] (Clopper-Pearson); stated false-alarm {args.false_alarm:g}")
    verdict = "consistent" if interval.low <= args.false_alarm else "NOT consistent (too many failures)"
    print(f"verdict: {verdict} with the stated rate")
    for name, count in names.most_common():
        print(f"  {count:3d}  {name}")


if __name__ == "__main__":
    main()
