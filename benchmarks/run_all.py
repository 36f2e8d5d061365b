"""Every speed ratio of the project in one command: each benchmark script in turn, its output as it prints.

    python benchmarks/run_all.py --quick      # small sizes, about 5 minutes on 2 cores
    python benchmarks/run_all.py              # the sizes benchmarks/README.md reports

Each script measures its own baseline in the same run and prints its ratios (see its
docstring); this runner only chooses the sizes, runs the scripts one after another in
child processes (so one's memory does not weigh on the next), and prints the machine's
load before and after each, since the machines are shared and the ratios move with the
load. It asserts nothing: a benchmark is read, not passed.
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent

# (script, arguments for --quick, arguments for the full run)
RUNS = [
    ("bench_startup.py", ["--rounds", "5"], ["--rounds", "7"]),
    ("bench_compile.py", ["--samples", "1000000", "--repeat", "3"], ["--samples", "10000000", "--repeat", "3"]),
    ("bench_cases.py", ["--samples", "200000", "--rounds", "3"], ["--samples", "2000000", "--rounds", "3"]),
    ("bench_cases.py", ["--cases", "shadowing", "--memory", "100000,1000000", "--rounds", "1"],
     ["--cases", "shadowing", "--memory", "1000000,100000000", "--rounds", "1"]),
    ("bench_memory.py", ["--sizes", "100000,1000000"], ["--sizes", "1000000,100000000"]),
    ("bench_apply.py", ["--samples", "1048576", "--repeats", "3"], ["--samples", "4194304", "--repeats", "3"]),
    ("bench_verify.py", ["--samples", "1e6", "--repeat", "3"], ["--samples", "1e7", "--repeat", "3"]),
    ("bench_measure.py", ["--seconds", "1", "--rounds", "3"], ["--seconds", "10", "--rounds", "3"]),
]


def _load() -> str:
    try:
        return " / ".join(f"{x:.2f}" for x in os.getloadavg())
    except OSError:  # not on every platform
        return "n/a"


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="small sizes (about 5 minutes on 2 cores)")
    parser.add_argument("--only", default=None, help="comma-separated script names to run (default: all)")
    args = parser.parse_args(argv)
    chosen = set(args.only.split(",")) if args.only else None
    summary = []
    print(f"{time.strftime('%Y-%m-%d %H:%M UTC', time.gmtime())}, {os.cpu_count()} cores, "
          f"{'quick' if args.quick else 'full'} sizes", flush=True)
    for script, quick, full in RUNS:
        if chosen and script not in chosen:
            continue
        arguments = quick if args.quick else full
        print(f"\n=== {script} {' '.join(arguments)}   (load before: {_load()})", flush=True)
        started = time.perf_counter()
        code = subprocess.call([sys.executable, str(HERE / script), *arguments])
        seconds = time.perf_counter() - started
        print(f"=== {script}: exit {code}, {seconds:.0f} s, load after: {_load()}", flush=True)
        summary.append((script, " ".join(arguments), code, seconds))
    print("\nscript | arguments | exit | wall s")
    for script, arguments, code, seconds in summary:
        print(f"{script} | {arguments} | {code} | {seconds:.0f}")
    return max((row[2] for row in summary), default=0)


if __name__ == "__main__":
    sys.exit(main())
