"""Verify speed against compile speed of the same bundle (target: verify <= 0.5 x compile).

Compiles an invented 12-tap profile (f_D = 100 Hz, update rate 6.4 kHz = 64 f_D,
``--samples`` samples per tap) and then verifies that bundle, both in this
process, and prints both wall times and their ratio verify / compile (target
<= 0.5), with OPENBLAS_NUM_THREADS=1 for both (what the verify command
sets; the compile engine is single-threaded by default). Verify runs without figures (``--no-plots``): the figures are the
report's cost, not the statistics'; ``--plots`` adds them as a third time. After the rounds, the min and
median of the ratio over them (the machine may be shared: say so, with ``uptime``). Each line also
gives the process's CPU time (user + system, every thread) of each step and their ratio: on a
loaded machine wall time stretches with the load, CPU time much less.

``--memory`` also verifies each round's bundle once more in a child process
and prints that child's peak resident memory (``getrusage(RUSAGE_CHILDREN).ru_maxrss``,
the kernel's high-water mark of the child's resident pages; file pages that
verify maps count while mapped, so this is an upper bound of the memory
that counts, where mapped pages the kernel can drop do not).

Usage::

    python benchmarks/bench_verify.py [--samples 1000000] [--repeat 1] [--dir /tmp] [--plots] [--memory]
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")  # as the verify command sets it; compile runs under the same

sys.path.insert(0, str(ROOT / "benchmarks"))
from bench_compile import PROFILE  # noqa: E402 - the same invented 12-tap profile as the compile benchmark

UPDATE_RATE_HZ = 6400.0


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--samples", type=float, default=1e6, help="samples per tap (default 1e6)")
    parser.add_argument("--repeat", type=int, default=1)
    parser.add_argument("--dir", default=None, help="where to write the bundle (default: a temporary directory)")
    parser.add_argument("--plots", action="store_true", help="also time verify with the figures and report")
    parser.add_argument("--workers", type=int, default=None, help="processes for the checks (default: verify's rule)")
    parser.add_argument("--memory", action="store_true",
                        help="also verify each bundle in a child process and print its peak resident memory")
    args = parser.parse_args(argv)

    from emucompile.compile import compiler

    from emucompile.verify import tolerance

    from emucompile.report import outputs
    from emucompile.verify import run as verify

    n = int(args.samples)
    work = Path(tempfile.mkdtemp(prefix="bench-verify-", dir=args.dir))
    profile = work / "bench.json"
    profile.write_text(json.dumps(PROFILE))
    out = work / "bundle"
    ratios, cpu_ratios = [], []
    try:
        for repeat in range(args.repeat):
            shutil.rmtree(out, ignore_errors=True)  # each compile writes a new bundle (no replace cost)
            tolerance.clear_caches()  # each verify computes its null sums afresh, as in a new process
            cpu = _cpu_s()
            began = time.perf_counter()
            compiler.compile_profile(profile, out, update_rate_hz=UPDATE_RATE_HZ, duration_s=n / UPDATE_RATE_HZ,
                                     seed=1 + repeat, force=True, max_size_bytes=None)
            compile_s = time.perf_counter() - began
            compile_cpu, cpu = _cpu_s() - cpu, _cpu_s()
            began = time.perf_counter()
            result = verify.verify_bundle(out, workers=args.workers)
            verify_s = time.perf_counter() - began
            verify_cpu = _cpu_s() - cpu
            line = (f"n = {n:.3g} x 12 taps: compile {compile_s:.2f} s, verify {verify_s:.2f} s "
                    f"({len(result.checks)} checks, record rate {result.record_rate_hz:g} Hz, "
                    f"{'passed' if result.passed else 'FAILED'}; "
                    + ", ".join(f"{k} {v:.2f} s" for k, v in sorted(result.timings_s.items()))
                    + f"), ratio verify/compile {verify_s / compile_s:.2f}; CPU time (every thread) compile "
                    f"{compile_cpu:.2f} s, verify {verify_cpu:.2f} s, ratio {verify_cpu / compile_cpu:.2f}")
            cpu_ratios.append(verify_cpu / compile_cpu)
            ratios.append(verify_s / compile_s)
            if args.memory:
                line += f"; verify alone in a child process: peak RSS {child_peak_rss_mib(out):.0f} MiB"
            if args.plots:
                began = time.perf_counter()
                outputs.write_outputs(result, directory=work / "report", plots=True)
                line += f"; figures + report {time.perf_counter() - began:.2f} s more"
            print(line, flush=True)
        print(f"ratio verify/compile over {len(ratios)} round(s): min {min(ratios):.2f}, "
              f"median {statistics.median(ratios):.2f}; CPU-time ratio min {min(cpu_ratios):.2f}, "
              f"median {statistics.median(cpu_ratios):.2f}", flush=True)
    finally:
        shutil.rmtree(work, ignore_errors=True)


def _cpu_s():
    """User + system CPU seconds of this process, every thread (less sensitive to a shared machine's load)."""
    times = os.times()
    return times.user + times.system


def child_peak_rss_mib(bundle):
    """Peak resident memory (MiB) of a fresh process that imports emucompile and verifies ``bundle``."""
    import resource

    before = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
    code = "import sys; from emucompile.verify import run; run.verify_bundle(sys.argv[1])"
    subprocess.run([sys.executable, "-c", code, str(bundle)], check=True,
                   env=dict(os.environ, PYTHONPATH=str(ROOT)))
    peak = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss  # the largest child's so far (KiB on Linux)
    if peak <= before:
        print("caution: an earlier child peaked higher; this figure is that one's", file=sys.stderr)
    return peak / 1024.0


if __name__ == "__main__":
    main()
