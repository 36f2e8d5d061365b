"""End-to-end compile speed and memory, against drawing iid noise and np.save-ing it.

Compiles a 12-tap profile (invented) into a bundle holding ``--samples``
samples per tap (default 10**7: about 1 GB of complex64), and in the same run
draws the same (n, 1, 1, 12) complex64 array of iid Gaussians with numpy and
writes it with ``np.save`` (then fsync, as the bundle writer does). Each case
runs in its own child process so its peak resident memory (``ru_maxrss``) is
its own. Prints both times, their ratio (ours / baseline; target <= 1.0) and
both peak memories.

Usage::

    python benchmarks/bench_compile.py [--samples 10000000] [--repeat 2] [--dir /tmp]
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import textwrap
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent

PROFILE = {
    "format_version": 1,
    "name": "bench-twelve-taps",
    "description": "Invented 12-tap benchmark profile (not a standard model).",
    "max_doppler_hz": 100.0,
    "taps": [{"delay_ns": d, "power_db": p} for d, p in zip(
        (0, 50, 120, 200, 230, 500, 1600, 2300, 5000, 5100, 5300, 5600),
        (-1, -1, -1, 0, 0, 0, -3, -5, -7, -9, -11, -13))],
}

CHILD_OURS = """
import json, resource, shutil, sys, time
sys.path.insert(0, {root!r})
import emucompile
from emucompile.compile import compiler
began = time.perf_counter()
compiler.compile_profile({profile!r}, {out!r}, update_rate_hz={rate!r}, duration_s={duration!r},
                         seed=1, force=True, max_size_bytes=None)
elapsed = time.perf_counter() - began
print(json.dumps({{"seconds": elapsed, "peak_mib": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024}}))
"""

CHILD_BASELINE = """
import json, os, resource, time
import numpy as np
began = time.perf_counter()
rng = np.random.default_rng(1)
gains = rng.standard_normal(({n} * 12 * 2,), dtype=np.float32).view(np.complex64).reshape({n}, 1, 1, 12)
with open({out!r}, "wb") as f:
    np.save(f, gains)
    f.flush()
    os.fsync(f.fileno())
elapsed = time.perf_counter() - began
print(json.dumps({{"seconds": elapsed, "peak_mib": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024}}))
"""


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--samples", type=int, default=10**7, help="samples per tap (default 1e7)")
    parser.add_argument("--repeat", type=int, default=2, help="runs of each case; the best is kept")
    parser.add_argument("--dir", default=None, help="where to write (default: a temporary directory)")
    args = parser.parse_args()

    rate = 100.0 * PROFILE["max_doppler_hz"]
    duration = args.samples / rate
    with tempfile.TemporaryDirectory(dir=args.dir) as work:
        work = Path(work)
        profile = work / "bench.json"
        profile.write_text(json.dumps(PROFILE))
        ours = _best(args.repeat, CHILD_OURS.format(root=str(ROOT), profile=str(profile),
                                                     out=str(work / "bundle"), rate=rate,
                                                     duration=duration))
        base = _best(args.repeat, CHILD_BASELINE.format(n=args.samples, out=str(work / "iid.npy")))
    size_gb = args.samples * 12 * 8 / 1e9
    print(f"12 taps x {args.samples:.3g} samples per tap ({size_gb:.2f} GB of complex64), "
          f"update rate {rate:g} Hz (100 x f_D)")
    print(f"  emucompile compile        {ours['seconds']:8.2f} s   peak memory {ours['peak_mib']:8.0f} MiB")
    print(f"  numpy iid + np.save       {base['seconds']:8.2f} s   peak memory {base['peak_mib']:8.0f} MiB")
    print(f"  time ratio ours/baseline  {ours['seconds'] / base['seconds']:8.2f}   (target <= 1.0)")
    print(f"  memory ratio ours/baseline {ours['peak_mib'] / base['peak_mib']:7.3f}")


def _best(repeat, code):
    runs = []
    for _ in range(repeat):
        done = subprocess.run([sys.executable, "-c", textwrap.dedent(code)], capture_output=True,
                              text=True, check=True, env=dict(os.environ, PYTHONPATH=str(ROOT)))
        runs.append(json.loads(done.stdout.strip().splitlines()[-1]))
    return min(runs, key=lambda r: r["seconds"])


if __name__ == "__main__":
    main()
