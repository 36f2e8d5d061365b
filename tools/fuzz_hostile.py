"""Fuzz the command line with hostile profiles and bundles; print the counts; keep what broke it.

    PYTHONPATH=.:tests nice python tools/fuzz_hostile.py --profiles 2000 --bundles 60

Profiles: ``--profiles`` examples of tests/profile_fuzz.py's generator (valid
profiles, mutated: types swapped, keys dropped or misspelt, numbers at +-1e308,
1e-320, 2**70, negative delays, huge lists, deep nesting, corrupt bytes, BOMs),
each through validate, stats and (when valid) a tiny compile, in this process
with a limit of 30 s of CPU time (600 s of wall time) per example (a hang counts). Bundles: every mutation of
tests/hostile.py (links, FIFOs, lying headers and manifests, ...) once, then
random combinations of two or three up to ``--bundles`` in all, each through
verify, reproduce and apply in child processes with a 60 s limit; the bundle
and the folder outside it are hashed before and after.

Profiles that broke the tool are written to tests/corpus/profiles/; broken
mutations are printed for tests/corpus/bundles.txt. Exit 1 when anything broke.
Deterministic: hypothesis with derandomize=True, combinations from a fixed seed.
"""

from __future__ import annotations

import argparse
import hashlib
import random
import shutil
import signal
import sys
import tempfile
import time
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import numpy as np
from click.testing import CliRunner
from hypothesis import HealthCheck, given, settings

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT / "tests"))

import hostile  # noqa: E402
import profile_fuzz  # noqa: E402
from emucompile.cli import cli  # noqa: E402

CORPUS = ROOT / "tests" / "corpus"


CPU_LIMIT_S = 30.0  # per profile (validate + stats + compile): CPU time, so that a loaded machine is no hang
WALL_LIMIT_S = 600.0


class Hang(BaseException):
    """Not an Exception: the command line's last line of defence must not turn it into exit 3."""


def _alarm(signum, frame):
    raise Hang()


def _arm(seconds_cpu, seconds_wall):
    signal.setitimer(signal.ITIMER_PROF, seconds_cpu)
    signal.setitimer(signal.ITIMER_REAL, seconds_wall)


def invoke(args):
    result = CliRunner().invoke(cli, [str(a) for a in args])  # a Hang passes through (BaseException)
    return result.exit_code, result.stdout, result.stderr


def fuzz_profiles(count: int) -> dict:
    stats = {"profiles": 0, "valid": 0, "commands": 0, "exit codes": {}, "broken": []}
    signal.signal(signal.SIGALRM, _alarm)
    signal.signal(signal.SIGPROF, _alarm)

    def counted(args):
        code, out, err = invoke(args)
        stats["commands"] += 1
        stats["exit codes"][f"{args[0]} {code}"] = stats["exit codes"].get(f"{args[0]} {code}", 0) + 1
        if args[0] == "validate" and code == 0:
            stats["valid"] += 1
        return code, out, err

    @settings(derandomize=True, database=None, deadline=None, max_examples=count,
              suppress_health_check=list(HealthCheck))
    @given(profile_fuzz.hostile_profile_texts())
    def one(case):
        suffix, data = case
        stats["profiles"] += 1
        if stats["profiles"] % 200 == 0:
            print(f"  ... {stats['profiles']} profiles, {len(stats['broken'])} broken", flush=True)
        with tempfile.TemporaryDirectory() as scratch:
            path = Path(scratch) / f"p{suffix}"
            path.write_bytes(data)
            _arm(CPU_LIMIT_S, WALL_LIMIT_S)
            try:
                problems = profile_fuzz.check_profile_text(path, Path(scratch), counted)
            except Hang:
                problems = [f"hang (over {CPU_LIMIT_S:g} s of CPU or {WALL_LIMIT_S:g} s)"]
            finally:
                _arm(0, 0)
        if problems:
            digest = hashlib.sha256(data).hexdigest()[:12]
            keep = CORPUS / "profiles" / f"fuzz-{digest}{suffix}"
            keep.write_bytes(data)
            stats["broken"].append((keep.name, problems))

    one()
    return stats


def fuzz_bundles(count: int, workers: int) -> dict:
    stats = {"bundles": 0, "runs": 0, "exit codes": {}, "hangs": 0, "changed": 0, "broken": []}
    names = list(hostile.MUTATIONS)
    rng = random.Random(20261203)
    plans = [[name] for name in names]
    safe = [n for n in names if "64 MiB" not in n]
    while len(plans) < count:
        plans.append(rng.sample(safe, rng.randint(2, 3)))
    with tempfile.TemporaryDirectory() as scratch:
        scratch = Path(scratch)
        hostile.compile_intact(scratch)
        np.save(scratch / "rec.npy", np.ones(300, np.complex64))

        def one(index_plan):
            index, plan = index_plan
            where = scratch / f"case{index}"
            where.mkdir()
            bundle, outside = hostile.apply_mutations(scratch / "b", where, plan)
            before, outside_before = hostile.digest_tree(bundle), hostile.digest_tree(outside)
            results = []
            for command, args in hostile.commands(bundle, where, scratch / "rec.npy").items():
                outcome = hostile.run_cli(args, cwd=where, timeout=60)
                results.append((command, outcome[0], hostile.judge(outcome)))
            changed = hostile.digest_tree(bundle) != before or hostile.digest_tree(outside) != outside_before
            shutil.rmtree(where, ignore_errors=True)
            return plan, results, changed

        with ThreadPoolExecutor(workers) as pool:
            for plan, results, changed in pool.map(one, enumerate(plans)):
                stats["bundles"] += 1
                if stats["bundles"] % 10 == 0:
                    print(f"  ... {stats['bundles']} bundles, {len(stats['broken'])} broken", flush=True)
                for command, code, problem in results:
                    stats["runs"] += 1
                    key = f"{command} {code}"
                    stats["exit codes"][key] = stats["exit codes"].get(key, 0) + 1
                    stats["hangs"] += code == "hang"
                    if problem:
                        stats["broken"].append((" + ".join(plan), command, problem))
                if changed:
                    stats["changed"] += 1
                    stats["broken"].append((" + ".join(plan), "any", "a file of the bundle or outside changed"))
    return stats


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--profiles", type=int, default=2000)
    parser.add_argument("--bundles", type=int, default=60)
    parser.add_argument("--workers", type=int, default=2)
    options = parser.parse_args(argv)
    broken = 0
    if options.profiles:
        began = time.perf_counter()
        result = fuzz_profiles(options.profiles)
        print(f"profiles: {result['profiles']} generated, {result['valid']} valid, {result['commands']} commands "
              f"in {time.perf_counter() - began:.0f} s; exit codes {dict(sorted(result['exit codes'].items()))}")
        for name, problems in result["broken"]:
            print(f"  BROKEN {name}: {problems}")
        broken += len(result["broken"])
    if options.bundles:
        began = time.perf_counter()
        result = fuzz_bundles(options.bundles, options.workers)
        print(f"bundles: {result['bundles']} hostile bundles, {result['runs']} runs in "
              f"{time.perf_counter() - began:.0f} s; hangs {result['hangs']}, changed {result['changed']}; "
              f"exit codes {dict(sorted(result['exit codes'].items()))}")
        for plan, command, problem in result["broken"]:
            print(f"  BROKEN [{plan}] {command}: {problem}")
        broken += len(result["broken"])
    print("nothing broke" if not broken else f"{broken} breakage(s)")
    return 1 if broken else 0


if __name__ == "__main__":
    sys.exit(main())
