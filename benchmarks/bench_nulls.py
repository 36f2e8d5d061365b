"""The null sums of one tap's checks: blockwise (this tree) against the whole-record arrays of a baseline.

For each record length, spectrum and mode, computes from cold caches every
null sum ``check_tap`` reads for a Rayleigh tap (Bartlett sums, power
covariance, phase variances, the first lags) and for a Rician tap with a
direct part at 0.3 f_D (no phase variances), once with this tree's
``emucompile.verify.nulls`` (``nulls.prepare``: one pass over the lags) and
once with the baseline's module, loaded from git (``--baseline``, default the
last commit with the whole-record ``lags``; its own sums, each reading one
cached n-long r). Both run in this process, in one thread, alternately; each
line gives the min and median wall time over ``--rounds`` and the ratio
new / baseline of each (below 1: faster), then the peak traced allocation
(``tracemalloc``) of one more untimed run of each. The profile is invented:
f_D = 100 Hz, record rate 8 f_D (what verify's decimated records have).

Usage::

    python benchmarks/bench_nulls.py [--sizes 1e6,1e7] [--rounds 3] [--kinds classical,gaussian]
        [--modes aperiodic,periodic] [--baseline REV]
"""

from __future__ import annotations

import argparse
import importlib.util
import os
import statistics
import subprocess
import sys
import tempfile
import time
import tracemalloc
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")  # as the verify command sets it

from emucompile.models.theory import DopplerSpectrum  # noqa: E402
from emucompile.verify import nulls, tolerance  # noqa: E402
from emucompile.verify.verdicts import AUTOCORRELATION_SPAN_PERIODS  # noqa: E402

BASELINE = "11822aa"  # the last commit whose nulls held whole-record arrays
FD_HZ = 100.0
RATE_HZ = 8 * FD_HZ
KINDS = {"classical": {}, "flat": {}, "gaussian": {"sigma_hz": 30.0}}
TAPS = {"rayleigh": (1.0, 0.0, 0.0), "rician": (0.25, 0.75, 0.3 * FD_HZ)}  # (P_d, A^2, f_los)


def load_baseline(rev):
    """The baseline's ``emucompile/verify/nulls.py`` as a module of its own (this tree's estimators and reference)."""
    text = subprocess.run(["git", "-C", str(ROOT), "show", f"{rev}:emucompile/verify/nulls.py"], check=True,
                          capture_output=True, text=True).stdout
    path = Path(tempfile.mkdtemp()) / "nulls_baseline.py"
    path.write_text(text, "utf-8")
    spec = importlib.util.spec_from_file_location("nulls_baseline", path)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def run_new(spectrum, n, periodic, n_lags, tap):
    pd, a2, los = tap
    tolerance.clear_caches()
    nulls.prepare(spectrum, RATE_HZ, n, periodic, n_lags, pd, a2, los, a2 == 0)


def run_baseline(old, spectrum, n, periodic, n_lags, tap):
    """What the baseline's null_sum_tasks and check_tap computed: r and the weights, then each sum."""
    pd, a2, los = tap
    for cached in (old.lags, old.weights, old.bartlett_sums, old.phase_variances, old.power_covariance_sum):
        cached.cache_clear()
    old.lags(spectrum, RATE_HZ, n, periodic)
    old.weights(n, periodic)
    old.bartlett_sums(spectrum, RATE_HZ, n, periodic, n_lags)
    old.power_covariance_sum(spectrum, RATE_HZ, n, periodic, pd, a2, los)
    if a2 == 0:
        old.phase_variances(spectrum, RATE_HZ, n, periodic)


def peak_mib(function):
    tracemalloc.start()
    try:
        function()
        return tracemalloc.get_traced_memory()[1] / 2**20
    finally:
        tracemalloc.stop()


def measure(old, spectrum, n, periodic, n_lags, tap, rounds, line):
    """Time both alternately over ``rounds``, then trace one more run of each; print one line."""
    functions = {"new": lambda: run_new(spectrum, n, periodic, n_lags, tap),
                 "baseline": lambda: run_baseline(old, spectrum, n, periodic, n_lags, tap)}
    times = {name: [] for name in functions}
    for _ in range(rounds):
        for name, function in functions.items():
            began = time.perf_counter()
            function()
            times[name].append(time.perf_counter() - began)
    low = {name: min(t) for name, t in times.items()}
    mid = {name: statistics.median(t) for name, t in times.items()}
    peaks = {name: peak_mib(function) for name, function in functions.items()}
    print(f"{line} new {low['new']:.3f}/{mid['new']:.3f} s, baseline {low['baseline']:.3f}/{mid['baseline']:.3f} s "
          f"(min/median): ratio {low['new'] / low['baseline']:.2f}/{mid['new'] / mid['baseline']:.2f}; "
          f"peak traced {peaks['new']:.1f} MiB vs {peaks['baseline']:.1f} MiB", flush=True)


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", default="1e6,1e7")
    parser.add_argument("--rounds", type=int, default=3)
    parser.add_argument("--kinds", default="classical,gaussian")
    parser.add_argument("--modes", default="aperiodic,periodic")
    parser.add_argument("--taps", default="rayleigh,rician")
    parser.add_argument("--baseline", default=BASELINE)
    args = parser.parse_args()
    old = load_baseline(args.baseline)
    print(f"load: {os.getloadavg()}; baseline {args.baseline}; block {nulls.BLOCK_LAGS} lags")
    n_lags = int(AUTOCORRELATION_SPAN_PERIODS * RATE_HZ / FD_HZ) + 1
    for n in (int(float(x)) for x in args.sizes.split(",")):
        for kind in args.kinds.split(","):
            spectrum = DopplerSpectrum(kind, FD_HZ, **KINDS[kind])
            for mode in args.modes.split(","):
                periodic = mode == "periodic"
                for tap_name in args.taps.split(","):
                    tap = TAPS[tap_name]
                    measure(old, spectrum, n, periodic, n_lags, tap, args.rounds,
                            f"n={n:.0e} {kind:9s} {mode:9s} {tap_name:8s}")
    print(f"load: {os.getloadavg()}")


if __name__ == "__main__":
    main()
