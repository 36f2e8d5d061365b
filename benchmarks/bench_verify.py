"""Verify speed against compile speed of the same bundle (target: verify no slower than compile).

Compiles an invented 12-tap profile (f_D = 100 Hz, update rate 6.4 kHz = 64 f_D,
``--samples`` samples per tap) and then verifies that bundle, both in this
process, and prints both wall times and their ratio verify / compile (target
<= 1.0). Verify runs without figures (``--no-plots``): the figures are the
report's cost, not the statistics'; ``--plots`` adds them as a third time.

Usage::

    python benchmarks/bench_verify.py [--samples 1000000] [--repeat 1] [--dir /tmp] [--plots]
"""

from __future__ import annotations

import argparse
import json
import shutil
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

PROFILE = {
    "format_version": 1,
    "name": "bench-twelve-taps",
    "description": "Invented 12-tap benchmark profile (not a standard model).",
    "max_doppler_hz": 100.0,
    "taps": [{"delay_ns": d, "power_db": p} for d, p in zip(
        (0, 50, 120, 200, 230, 500, 1600, 2300, 5000, 5100, 5300, 5600),
        (-1, -1, -1, 0, 0, 0, -3, -5, -7, -9, -11, -13))],
}
UPDATE_RATE_HZ = 6400.0


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--samples", type=float, default=1e6, help="samples per tap (default 1e6)")
    parser.add_argument("--repeat", type=int, default=1)
    parser.add_argument("--dir", default=None, help="where to write the bundle (default: a temporary directory)")
    parser.add_argument("--plots", action="store_true", help="also time verify with the figures and report")
    args = parser.parse_args(argv)

    from emucompile import compiler, verify

    n = int(args.samples)
    work = Path(tempfile.mkdtemp(prefix="bench-verify-", dir=args.dir))
    profile = work / "bench.json"
    profile.write_text(json.dumps(PROFILE))
    out = work / "bundle"
    try:
        for repeat in range(args.repeat):
            began = time.perf_counter()
            compiler.compile_profile(profile, out, update_rate_hz=UPDATE_RATE_HZ, duration_s=n / UPDATE_RATE_HZ,
                                     seed=1 + repeat, force=True, max_size_bytes=None)
            compile_s = time.perf_counter() - began
            began = time.perf_counter()
            result = verify.verify_bundle(out)
            verify_s = time.perf_counter() - began
            line = (f"n = {n:.3g} x 12 taps: compile {compile_s:.2f} s, verify {verify_s:.2f} s "
                    f"({len(result.checks)} checks, record rate {result.record_rate_hz:g} Hz, "
                    f"{'passed' if result.passed else 'FAILED'}), ratio verify/compile {verify_s / compile_s:.2f}")
            if args.plots:
                began = time.perf_counter()
                verify.write_outputs(result, directory=work / "report", plots=True)
                line += f"; figures + report {time.perf_counter() - began:.2f} s more"
            print(line, flush=True)
    finally:
        shutil.rmtree(work, ignore_errors=True)


if __name__ == "__main__":
    main()
