"""Peak resident memory of each command at a short and a long record (target: long / short <= 1.2).

Runs the command line in a child process per command and size and reads the
child's peak resident set two ways: ``ru_maxrss`` from ``os.wait4`` (every
resident page, the pages of a mapped file included) and the largest
``RssAnon`` sampled every 10 ms (the process's own memory, without the
page cache of mapped files, which the kernel can drop: the measure the
target names). Sizes are samples per tap (compile, verify) or input samples
(apply). The profile is invented (one Rayleigh tap, f_D = 100 Hz, update rate
10 kHz), so a long record stays small on disk: 1e8 samples are 800 MB.
The 12-tap cases and the other compile options are in ``bench_cases.py --memory``.

- ``compile``: the bundle (tap_gains.npy, no FIR);
- ``verify``: that bundle, without figures (``--no-plots``);
- ``verify-report``: the same with its report and figures;
- ``verify-mimo``: a 2x2 bundle of two taps, one Rician with a turning direct part (the diffuse
  parts and the MIMO correlation), with figures;
- ``verify-periodic``: the one-tap profile compiled ``--periodic`` (circular estimates and null sums);
- ``verify-delivered``: the one-tap profile with ``--format ci16``, verified ``--delivered``;
- ``verify-twelve``: the 12-tap profile (9.6 GB at 1e8 samples), with figures;
- ``apply``: a 12-tap bundle with its FIR at 30.72 MHz (1 s at 2 kHz updates, looped) over a
  white npy input of the given length, to an npy output with noise.

Usage::

    python benchmarks/bench_memory.py [--sizes 1000000,100000000] [--only compile,verify,...,apply] [--dir /tmp]
    python benchmarks/bench_memory.py --only verify-twelve
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(Path(__file__).resolve().parent))
from bench_cases import TAPS  # noqa: E402

RATE_HZ = 10000.0
ONE_TAP = {"format_version": 1, "name": "bench-one-tap", "max_doppler_hz": 100.0,
           "description": "Invented one-tap benchmark profile (not a standard model).",
           "taps": [{"delay_ns": 0, "power_db": 0}]}
MIMO_TWO_TAPS = {"format_version": 1, "name": "bench-mimo-two-taps", "max_doppler_hz": 100.0,
                 "description": "Invented 2x2 benchmark profile (not a standard model).",
                 "taps": [{"delay_ns": 0, "power_db": 0, "fading": "rician", "k_db": 6, "los_doppler_hz": 70},
                          {"delay_ns": 300, "power_db": -3}],
                 "mimo": {"n_tx": 2, "n_rx": 2, "direct_part": "identical",
                          "correlation": {"level": "medium", "specification": "ts36101"}}}
# verify variants: (profile file, compile options, verify options)
VERIFY_CASES = {
    "verify": ("one.json", [], ["--no-plots"]),
    "verify-report": ("one.json", [], []),
    "verify-mimo": ("mimo.json", [], []),
    "verify-periodic": ("one.json", ["--periodic"], ["--no-plots"]),
    "verify-delivered": ("one.json", ["--format", "ci16"], ["--no-plots", "--delivered"]),
    "verify-twelve": ("twelve.json", [], []),
}
TWELVE_TAPS = {"format_version": 1, "name": "bench-twelve-taps", "max_doppler_hz": 100.0,
               "description": "Invented 12-tap benchmark profile (not a standard model).", "taps": TAPS}


def peak_mib(arguments) -> tuple[float, float]:
    """Run ``python -m emucompile ARGUMENTS`` to completion: (peak RSS, peak anonymous RSS) in MiB.

    The first is ``ru_maxrss`` (every resident page, mapped file pages
    included); the second the largest ``RssAnon`` of ``/proc/PID/status``
    sampled every 10 ms (memory that is the process's own: heap, arrays;
    not the page cache of a mapped file, which the kernel can drop). A
    sample can miss a peak shorter than 10 ms.
    """
    child = subprocess.Popen([sys.executable, "-m", "emucompile", *arguments], stdout=subprocess.DEVNULL,
                             stderr=subprocess.PIPE, env=dict(os.environ, PYTHONPATH=str(ROOT)))
    anon = 0
    while True:
        pid, status, usage = os.wait4(child.pid, os.WNOHANG)
        if pid:
            break
        try:
            with open(f"/proc/{child.pid}/status") as handle:
                anon = max(anon, next((int(line.split()[1]) for line in handle if line.startswith("RssAnon:")), 0))
        except OSError:  # exited between the two calls
            pass
        time.sleep(0.01)
    stderr = child.stderr.read().decode(errors="replace")
    child.stderr.close()
    if os.waitstatus_to_exitcode(status) not in (0, 1):  # 1: a verdict failed, still a full run
        raise SystemExit(f"emucompile {' '.join(arguments)}: {stderr[-2000:]}")
    return usage.ru_maxrss / 1024, anon / 1024


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", default="1000000,100000000", help="two sizes, comma-separated")
    parser.add_argument("--only", default="compile,verify,verify-report,verify-mimo,verify-periodic,verify-delivered,apply",
                        help="commands to measure (also: verify-twelve)")
    parser.add_argument("--dir", default=None, help="where to write (default: a temporary directory)")
    args = parser.parse_args()
    sizes = [int(float(s)) for s in args.sizes.split(",")]
    chosen = args.only.split(",")
    peaks = {name: [] for name in chosen}
    with tempfile.TemporaryDirectory(dir=args.dir) as work:
        work = Path(work)
        (work / "one.json").write_text(json.dumps(ONE_TAP))
        (work / "twelve.json").write_text(json.dumps(TWELVE_TAPS))
        (work / "mimo.json").write_text(json.dumps(MIMO_TWO_TAPS))
        if "apply" in chosen:
            bundle = work / "fir-bundle"
            subprocess.run([sys.executable, "-m", "emucompile", "compile", str(work / "twelve.json"), "-o", str(bundle),
                            "--duration", "1", "--update-rate", "2000", "--sample-rate", "30.72e6", "--seed", "1",
                            "--quiet"], check=True, env=dict(os.environ, PYTHONPATH=str(ROOT)))
        for n in sizes:
            out = work / f"bundle-{n}"

            def compile_bundle(profile, options, out=out, n=n):
                return peak_mib(["compile", str(work / profile), "-o", str(out), "--duration", repr(n / RATE_HZ),
                                 "--update-rate", repr(RATE_HZ), "--seed", "1", "--quiet", "--force",
                                 "--max-size", "100GB", *options])

            if "compile" in chosen:
                peaks["compile"].append(compile_bundle("one.json", []))
            for name, (profile, compile_options, verify_options) in VERIFY_CASES.items():
                if name in chosen:
                    if name != "verify" or "compile" not in chosen:  # else the bundle just compiled
                        compile_bundle(profile, compile_options)
                    peaks[name].append(peak_mib(["verify", str(out), *verify_options]))
            shutil.rmtree(out, ignore_errors=True)
            if "apply" in chosen:
                source = work / "input.npy"
                data = np.lib.format.open_memmap(source, mode="w+", dtype=np.complex64, shape=(n,))
                rng = np.random.default_rng(2)
                for first in range(0, n, 1 << 22):
                    m = min(1 << 22, n - first)
                    data[first:first + m].view(np.float32)[:] = rng.standard_normal(2 * m, dtype=np.float32)
                data.flush()
                del data
                peaks["apply"].append(peak_mib(["apply", str(bundle), str(source), "-o", str(work / "out.npy"),
                                                "--sample-rate", "30.72e6", "--loop", "--snr-db", "20",
                                                "--seed", "3", "--quiet", "--force"]))
                source.unlink()
                (work / "out.npy").unlink(missing_ok=True)
    print(f"load average {' / '.join(f'{x:.2f}' for x in os.getloadavg())}; peak RSS (ru_maxrss: every "
          "resident page, mapped file pages too) and peak anonymous RSS (RssAnon sampled every 10 ms: without "
          "the page cache of mapped files, which the kernel can drop), MiB")
    for name in chosen:
        for label, column in (("rss", 0), ("anon", 1)):
            values = [p[column] for p in peaks[name]]
            cells = "  ".join(f"{n:.0e}: {v:7.1f}" for n, v in zip(sizes, values))
            print(f"{name:16s} {label:4s} {cells}  ratio long/short {values[-1] / values[0]:.3f}")


if __name__ == "__main__":
    main()
