"""Start-up time of light commands, against ``python -c pass`` measured in the same run.

    python benchmarks/bench_startup.py [--rounds 7] [--no-bytecode] [--compare DIR]

Each command runs in a fresh interpreter (``subprocess``), rounds interleaved
so that a change of load hits every command alike; the table gives the min and
median wall time over the rounds, the ratio of the medians to ``python -c
pass``, and the targets (``--version`` <= 0.3 s, ``validate`` of a demo profile
<= 0.6 s). The load average is printed before and after: on a shared machine
the medians move with it, the mins much less.

By default the interpreters keep their compiled bytecode in a temporary
``PYTHONPYCACHEPREFIX`` (warmed by one untimed round), as an installed package
does; ``--no-bytecode`` sets ``PYTHONDONTWRITEBYTECODE=1`` and clears the
prefix, so every module is compiled from source each time (what a checkout run
with that variable set pays). ``--compare DIR`` times the same commands in
another checkout (e.g. ``git archive REV | tar -x -C DIR``) in the same rounds,
for a before/after under the same load.
"""

from __future__ import annotations

import argparse
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent

# (label, argv after the interpreter, target in seconds or None)
CASES = (
    ("python -c pass", ["-c", "pass"], None),
    ("emucompile --version", ["-m", "emucompile", "--version"], 0.3),
    ("validate warehouse-robot.yaml", ["-m", "emucompile", "validate", "profiles_demo/warehouse-robot.yaml"], 0.6),
    ("validate bench-two-path.json", ["-m", "emucompile", "validate", "profiles_demo/bench-two-path.json"], 0.6),
    ("validate campus-eva-2x2.yaml", ["-m", "emucompile", "validate", "profiles_demo/campus-eva-2x2.yaml"], 0.6),
    ("validate viaduct-high-speed-train", ["-m", "emucompile", "validate",
                                           "profiles_demo/viaduct-high-speed-train.yaml"], 0.6),
    ("presets list", ["-m", "emucompile", "presets", "list"], None),
)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rounds", type=int, default=7, help="timed rounds (at least 5 for the README)")
    parser.add_argument("--no-bytecode", action="store_true", help="compile every module from source each run")
    parser.add_argument("--compare", metavar="DIR", help="another checkout to time in the same rounds")
    args = parser.parse_args()
    roots = {"": ROOT} if not args.compare else {"": ROOT, "compared: ": Path(args.compare).resolve()}

    with tempfile.TemporaryDirectory(prefix="emucompile-pycache-") as cache:
        load_before = os.getloadavg()
        runs = [(prefix + label, argv, target, root, _environment(cache, args.no_bytecode, root))
                for prefix, root in roots.items() for label, argv, target in CASES
                if not (prefix and label == CASES[0][0])]
        for _, argv, _, root, env in runs:  # untimed: fills the bytecode cache, warms the page cache
            _run(argv, env, root)
        times = {label: [] for label, *_ in runs}
        for _ in range(args.rounds):
            for label, argv, _, root, env in runs:
                times[label].append(_run(argv, env, root))
        load_after = os.getloadavg()

    baseline = statistics.median(times[CASES[0][0]])
    print(f"start-up, {args.rounds} rounds, {'no bytecode' if args.no_bytecode else 'bytecode cached'}, "
          f"python {sys.version.split()[0]}, {time.strftime('%Y-%m-%d %H:%M UTC', time.gmtime())}")
    print(f"load average before: {_load(load_before)}; after: {_load(load_after)} ({os.cpu_count()} cores)")
    if args.compare:
        print(f"compared: {roots['compared: ']}")
    print(f"{'command':<46} {'min s':>7} {'median s':>9} {'x pass':>7}  target")
    for label, _, target, _, _ in runs:
        values = times[label]
        median = statistics.median(values)
        verdict = "" if target is None else f"<= {target:g} s: " + (
            "met" if median <= target else ("met at min only" if min(values) <= target else "missed"))
        print(f"{label:<46} {min(values):7.3f} {median:9.3f} {median / baseline:7.1f}  {verdict}")


def _environment(cache: str, no_bytecode: bool, root: Path) -> dict:
    env = dict(os.environ)
    env["PYTHONPATH"] = str(root) + (os.pathsep + env["PYTHONPATH"] if env.get("PYTHONPATH") else "")
    if no_bytecode:
        env["PYTHONDONTWRITEBYTECODE"] = "1"
        env.pop("PYTHONPYCACHEPREFIX", None)
    else:
        env.pop("PYTHONDONTWRITEBYTECODE", None)
        env["PYTHONPYCACHEPREFIX"] = cache  # nothing written into the source tree
    return env


def _run(argv, env, root) -> float:
    start = time.perf_counter()
    result = subprocess.run([sys.executable, *argv], cwd=root, env=env, check=False,
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    elapsed = time.perf_counter() - start
    if result.returncode != 0:
        raise SystemExit(f"{' '.join(argv)} exited {result.returncode}")
    return elapsed


def _load(values) -> str:
    return " ".join(f"{v:.2f}" for v in values)


if __name__ == "__main__":
    main()
