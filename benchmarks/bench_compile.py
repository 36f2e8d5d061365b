"""End-to-end compile speed and memory, against drawing iid noise and np.save-ing it.

Compiles a 12-tap profile (invented) into a bundle holding ``--samples``
samples per tap (default 10**7: about 1 GB of complex64), and in the same run
draws the same (n, 1, 1, 12) complex64 array of iid Gaussians with numpy and
writes it with ``np.save`` (then fsync, as the bundle writer does), timing the
draw and the save apart. Two ratios: compile / (draw + save) (target <= 0.2)
and compile / save, the save of a ready array being the page-cache write floor
of the same bytes (target <= 1.0). A third line times what no compile can skip:
the SHA-256 and the write of the same bytes in 4 MiB pieces, one thread (the
bundle writer does both; the array is drawn before the clock starts). Each case runs in its own child process so
its peak resident memory (``ru_maxrss``) is its own; the rounds alternate the
two, and the ratios are taken within a round; min and median over the rounds.

Usage::

    python benchmarks/bench_compile.py [--samples 10000000] [--repeat 3] [--dir /tmp]
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
drawn = time.perf_counter()
with open({out!r}, "wb") as f:
    np.save(f, gains)
    f.flush()
    os.fsync(f.fileno())
elapsed = time.perf_counter() - began
print(json.dumps({{"seconds": elapsed, "save_seconds": elapsed - (drawn - began),
                  "peak_mib": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024}}))
"""


CHILD_FLOOR = """
import hashlib, json, os, time
import numpy as np
rng = np.random.default_rng(1)
data = memoryview(rng.standard_normal(({n} * 12 * 2,), dtype=np.float32).view(np.uint8))
began = time.perf_counter()
digest = hashlib.sha256()
with open({out!r}, "wb") as f:
    for first in range(0, len(data), 1 << 22):
        piece = data[first : first + (1 << 22)]
        digest.update(piece)
        f.write(piece)
    f.flush()
    os.fsync(f.fileno())
print(json.dumps({{"seconds": time.perf_counter() - began}}))
"""


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--samples", type=int, default=10**7, help="samples per tap (default 1e7)")
    parser.add_argument("--repeat", type=int, default=3, help="rounds (each runs both cases)")
    parser.add_argument("--dir", default=None, help="where to write (default: a temporary directory)")
    args = parser.parse_args()

    rate = 100.0 * PROFILE["max_doppler_hz"]
    duration = args.samples / rate
    rounds = []
    with tempfile.TemporaryDirectory(dir=args.dir) as work:
        work = Path(work)
        profile = work / "bench.json"
        profile.write_text(json.dumps(PROFILE))
        for _ in range(args.repeat):
            ours = _run(CHILD_OURS.format(root=str(ROOT), profile=str(profile), out=str(work / "bundle"),
                                          rate=rate, duration=duration))
            shutil.rmtree(work / "bundle", ignore_errors=True)
            base = _run(CHILD_BASELINE.format(n=args.samples, out=str(work / "iid.npy")))
            (work / "iid.npy").unlink()
            floor = _run(CHILD_FLOOR.format(n=args.samples, out=str(work / "floor.bin")))
            (work / "floor.bin").unlink()
            rounds.append((ours, base, floor))
    size_gb = args.samples * 12 * 8 / 1e9
    print(f"12 taps x {args.samples:.3g} samples per tap ({size_gb:.2f} GB of complex64), "
          f"update rate {rate:g} Hz (100 x f_D), {args.repeat} rounds, load average {_load()}")

    def row(label, values, unit="s"):
        print(f"  {label:42s} min {min(values):7.2f} {unit}  median {statistics.median(values):7.2f} {unit}")

    row("emucompile compile", [o["seconds"] for o, *_ in rounds])
    row("numpy draw + np.save (+ fsync)", [b["seconds"] for _, b, _ in rounds])
    row("np.save of the ready array (+ fsync)", [b["save_seconds"] for _, b, _ in rounds])
    row("SHA-256 + write in 4 MiB pieces (+ fsync)", [f["seconds"] for *_, f in rounds])
    row("compile / (draw + save)  [<= 0.2]", [o["seconds"] / b["seconds"] for o, b, _ in rounds], " ")
    row("compile / save           [<= 1.0]", [o["seconds"] / b["save_seconds"] for o, b, _ in rounds], " ")
    row("compile / (SHA-256 + write)", [o["seconds"] / f["seconds"] for o, _, f in rounds], " ")
    row("peak memory compile", [o["peak_mib"] for o, *_ in rounds], "MiB")
    row("peak memory draw + save", [b["peak_mib"] for _, b, _ in rounds], "MiB")


def _load() -> str:
    return " / ".join(f"{x:.2f}" for x in os.getloadavg())


def _run(code):
    done = subprocess.run([sys.executable, "-c", textwrap.dedent(code)], capture_output=True,
                          text=True, check=True, env=dict(os.environ, PYTHONPATH=str(ROOT)))
    return json.loads(done.stdout.strip().splitlines()[-1])


if __name__ == "__main__":
    main()
