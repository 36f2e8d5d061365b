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

Also printed: the largest |rho_hat| between taps (``cross_correlation``) and
between links whose expected correlation is 0 (``mimo_correlation``), over
every bundle, for the generator's cross-correlation study.

Usage::

    python tools/calibrate_verify_false_alarm.py [--profile profiles_demo/port-crane-los.yaml]
        [--bundles 100] [--first-seed 1] [--duration 5] [--false-alarm 0.01] [--jobs 2]
        [--method doppler-filter|sum-of-sinusoids] [--update-rate HZ]

The profiles of the MIMO and sum-of-sinusoids studies are in
``tools/false_alarm_profiles/`` (invented).
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
    profile, seed, duration, false_alarm, work, options = args
    from emucompile.compile import compiler
    from emucompile.verify import run as verify

    out = Path(work) / f"seed-{seed}"
    compiler.compile_profile(profile, out, duration_s=duration, seed=seed, force=True, **options)
    try:
        result = verify.verify_bundle(out, false_alarm=false_alarm)
        failed = [verify._check_label(c) for c in result.failed]
        largest = {"taps": 0.0, "links": 0.0}
        for check in result.checks:
            detail = check.detail if isinstance(check.detail, dict) else {}
            if "estimate" not in detail or detail.get("expected") not in ([0.0, 0.0], None):
                continue
            kind = "taps" if check.name.startswith("cross_correlation") else "links"
            largest[kind] = max(largest[kind], abs(complex(*detail["estimate"])))
        return seed, failed, len(result.checks), largest
    finally:
        shutil.rmtree(out, ignore_errors=True)


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--profile", default=str(ROOT / "profiles_demo" / "port-crane-los.yaml"))
    parser.add_argument("--bundles", type=int, default=100)
    parser.add_argument("--first-seed", type=int, default=1,
                        help="seeds first..first+bundles-1 (default 1), to split a long run in parts")
    parser.add_argument("--duration", type=float, default=5.0, help="seconds per bundle (default 5)")
    parser.add_argument("--false-alarm", type=float, default=0.01)
    parser.add_argument("--jobs", type=int, default=2, help="local processes (without --scheduler)")
    parser.add_argument("--scheduler", metavar="ADDRESS", help="run on the Dask cluster at tcp://HOST:PORT "
                        "(the bundles' temporary folder must be on storage its workers share)")
    parser.add_argument("--method", default=None, help="tap-gain generator (default: the profile's or compile's)")
    parser.add_argument("--update-rate", type=float, default=None, help="update rate in Hz (default: compile's)")
    args = parser.parse_args(argv)
    options = {key: value for key, value in (("method", args.method), ("update_rate_hz", args.update_rate))
               if value is not None}

    from scipy import stats

    work = tempfile.mkdtemp(prefix="calibrate-verify-")
    tasks = [(args.profile, seed, args.duration, args.false_alarm, work, options)
             for seed in range(args.first_seed, args.first_seed + args.bundles)]
    failures, names, n_checks = 0, collections.Counter(), 0
    largest = {"taps": 0.0, "links": 0.0}
    try:
        from emucompile.campaign.cluster import map_tasks

        results = map_tasks(_one, tasks, scheduler=args.scheduler, processes=args.jobs, paths=[str(ROOT)])
        for seed, failed, checks, found in sorted(results, key=lambda r: r[0]):
            n_checks = checks
            largest = {k: max(v, found[k]) for k, v in largest.items()}
            if failed:
                failures += 1
                names.update(failed)
                print(f"seed {seed}: failed {', '.join(failed)}", flush=True)
            else:
                print(f"seed {seed}: passed", flush=True)
    finally:
        shutil.rmtree(work, ignore_errors=True)
    interval = stats.binomtest(failures, args.bundles).proportion_ci(confidence_level=0.95, method="exact")
    print(f"profile {Path(args.profile).name}, {args.duration:g} s per bundle, {n_checks} checks per bundle, "
          f"seeds {args.first_seed}..{args.first_seed + args.bundles - 1}" + "".join(f", {k} {v}" for k, v in options.items()))
    print(f"largest |rho_hat| between taps {largest['taps']:.4f}, between links expected uncorrelated "
          f"{largest['links']:.4f} (0 when there are none)")
    print(f"bundles failing: {failures} of {args.bundles} = {failures / args.bundles:.3f}; "
          f"95 % CI [{interval.low:.3f}, {interval.high:.3f}] (Clopper-Pearson); stated false-alarm {args.false_alarm:g}")
    verdict = "consistent" if interval.low <= args.false_alarm else "NOT consistent (too many failures)"
    print(f"verdict: {verdict} with the stated rate")
    for name, count in names.most_common():
        print(f"  {count:3d}  {name}")


if __name__ == "__main__":
    main()
