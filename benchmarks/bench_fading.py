"""Throughput and peak memory of the fading engine beside numpy's iid Gaussians (not a test).

A 12-tap profile (invented: 11 Rayleigh taps and a Rician first tap, all
classical with f_D = 100 Hz) is streamed at an update rate of 100 f_D in
chunks of 65 536 samples, for 10^6 and 10^7 samples per tap. In the same
process, right after, numpy draws the same number of iid complex64
Gaussians in the same chunks (``Generator.standard_normal(dtype=float32)``
viewed as complex64): the baseline. Printed: our throughput in complex
samples per second, the baseline's, and their ratio (target >= 1.0), over
several repeats (the machine is shared: min / median / max). Wall-clock
ratios depend on what else runs; the CPU-time ratio (process time, summed
over our threads, against the baseline's) is printed beside them: with one
thread it is the ratio of the work done, whatever the load.

Peak memory is measured in a separate subprocess per length (so that one
case cannot inherit another's heap): ``tracemalloc`` peak of everything
allocated from planning to the end of the stream (numpy reports its buffers
to tracemalloc), and ``ru_maxrss``, the process's peak resident set (which
includes the interpreter and libraries, ~100 MB). Gate: the tracemalloc
peak at 10^7 is at most 1.2 x the peak at 10^6.

Run from the repository root::

    python benchmarks/bench_fading.py                 # both methods, 1 and 2 threads, 3 repeats
    python benchmarks/bench_fading.py --repeats 5 --methods doppler-filter --threads 1
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

DOPPLER_HZ = 100.0
RATE_HZ = 100 * DOPPLER_HZ
N_TAPS = 12
CHUNK = 65536
LENGTHS = (10**6, 10**7)


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--methods", default="doppler-filter,sum-of-sinusoids")
    parser.add_argument("--threads", default="1,2", help="comma-separated thread counts ('auto' = the engine's default)")
    parser.add_argument("--worker", help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.worker:
        print(json.dumps(_work(json.loads(args.worker))))
        return
    from emucompile.models import fading

    print(f"fading engine benchmark: {N_TAPS} taps, f_D = {DOPPLER_HZ:g} Hz, update rate "
          f"{RATE_HZ:g} Hz (100 f_D), chunks of {CHUNK}, CPUs: {os.cpu_count()}")
    print(f"generator_version {fading.GENERATOR_VERSION}; {_platform_line()}")
    for method in args.methods.split(","):
        for threads in args.threads.split(","):
            print(f"\n[{method}, threads={threads}]")
            for n in LENGTHS:
                runs = [_run({"case": "time", "method": method, "n": n, "threads": threads})
                        for _ in range(args.repeats)]
                ratios = [r["ours_per_s"] / r["iid_per_s"] for r in runs]
                cpu = [r["iid_cpu_s"] / r["ours_cpu_s"] for r in runs]
                ours = statistics.median(r["ours_per_s"] for r in runs)
                iid = statistics.median(r["iid_per_s"] for r in runs)
                print(f"  n = {n:>10,d}/tap: ours {ours / 1e6:6.1f} M complex/s, iid {iid / 1e6:6.1f} M/s; "
                      f"ratio ours/iid wall min {min(ratios):.2f} median {statistics.median(ratios):.2f} "
                      f"max {max(ratios):.2f}; cpu-time ratio median {statistics.median(cpu):.2f} "
                      f"(plan {statistics.median(r['plan_s'] for r in runs):.2f} s, load {runs[-1]['load']:.1f})")
        peaks = {n: _run({"case": "memory", "method": method, "n": n, "threads": "auto"}) for n in LENGTHS}
        print("  (memory with the default thread count)")
        small, large = (peaks[n] for n in LENGTHS)
        ratio = large["traced_peak_bytes"] / small["traced_peak_bytes"]
        for n in LENGTHS:
            print(f"  peak memory n = {n:>9,d}/tap: traced {peaks[n]['traced_peak_bytes'] / 2**20:7.1f} MiB, "
                  f"ru_maxrss {peaks[n]['maxrss_bytes'] / 2**20:7.1f} MiB")
        verdict = "PASS" if ratio <= 1.2 else "FAIL"
        print(f"  memory gate: traced peak at 10^7 / at 10^6 = {ratio:.3f} (<= 1.2): {verdict}")


def _run(job: dict) -> dict:
    out = subprocess.run([sys.executable, __file__, "--worker", json.dumps(job)], cwd=ROOT,
                         capture_output=True, text=True, check=True)
    return json.loads(out.stdout)


def _profile():
    from emucompile.profile.model import Profile, Tap

    first = Tap(0.0, 0.3, fading="rician", k_linear=10.0, max_doppler_hz=DOPPLER_HZ,
                los_doppler_hz=0.7 * DOPPLER_HZ)
    rest = tuple(Tap(j * 50e-9, 0.7 / 11, max_doppler_hz=DOPPLER_HZ) for j in range(1, N_TAPS))
    return Profile(name="bench-twelve-taps", taps=(first, *rest))


def _work(job: dict) -> dict:
    import resource
    import tracemalloc

    import numpy as np

    from emucompile.models import fading

    n = job["n"]
    threads = None if job["threads"] == "auto" else int(job["threads"])
    if job["case"] == "memory":
        tracemalloc.start()
    t0 = time.perf_counter()
    p = fading.plan(_profile(), RATE_HZ, n, 20261202, method=job["method"], threads=threads)
    plan_s = time.perf_counter() - t0
    t0, c0 = time.perf_counter(), time.process_time()
    for _ in p.chunks(CHUNK):
        pass
    ours_s, ours_cpu = time.perf_counter() - t0, time.process_time() - c0
    if job["case"] == "memory":
        peak = tracemalloc.get_traced_memory()[1]
        tracemalloc.stop()
        return {"traced_peak_bytes": peak,
                "maxrss_bytes": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024}
    rng = np.random.default_rng(1)
    t0, c0 = time.perf_counter(), time.process_time()
    for start in range(0, n, CHUNK):
        m = min(CHUNK, n - start)
        rng.standard_normal((m, 2 * N_TAPS), dtype=np.float32).view(np.complex64)
    iid_s, iid_cpu = time.perf_counter() - t0, time.process_time() - c0
    count = n * N_TAPS
    return {"ours_per_s": count / ours_s, "iid_per_s": count / iid_s, "plan_s": plan_s,
            "ours_cpu_s": ours_cpu, "iid_cpu_s": iid_cpu, "load": os.getloadavg()[0]}


def _platform_line():
    from emucompile.models import fading

    r = fading.reproducibility()
    return f"numpy {r['numpy']}, scipy {r['scipy']}, Python {r['python']}, {r['machine']}"


if __name__ == "__main__":
    main()
