"""Speed and memory of ``measure``: a capture at 30.72 MHz against reading it plus one FFT pass, same run.

An invented six-tap scenario (delays to 2.5 us, f_D = 100 Hz) is compiled at
30.72 MHz; its probe is written and sent through the bundle's channel frozen
at t = 0 (``--capture static``, the default: quick to make; measure's work does
not depend on the channel's values) or through the bundle by ``apply``
(``--capture apply``), 30 dB SNR, into a raw cf32 capture of ``--seconds`` seconds.
Then, alternately for ``--rounds`` rounds: the baseline (read the capture in
blocks and FFT it in blocks of one probe period: the least any analysis of
it must do) and :func:`emucompile.loop.measure.measure_capture` against the
bundle. Printed: min and median of each and their ratio (target <= 2). Then,
in a fresh interpreter, the peak resident memory (VmHWM) of one measure
against the same after the imports: what measure holds whatever the capture's
length is a block of periods plus the estimates at the repetition rate (run at
two ``--seconds`` to see it bounded). Times are taken without any memory
tracing (tracemalloc slows every allocation).

    PYTHONPATH=. nice python benchmarks/bench_measure.py --seconds 10 --rounds 3

With ``PYTHONPATH`` pointing at another tree (``git archive REV`` unpacked)
the same script times that code's measure (the API it calls is unchanged).
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")  # as the measure command sets it (BLAS threads only contend)
if not os.environ.get("PYTHONPATH"):  # this checkout, unless PYTHONPATH names another tree (see above)
    sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

import numpy as np
from scipy import fft as sp_fft

RATE = 30.72e6
PROFILE = """# Invented six-tap scenario for the measure benchmark (not a measurement).
format_version: 1
name: bench-measure-six-taps
max_doppler_hz: 100
taps:
  - {delay_ns: 0, power_db: 0}
  - {delay_ns: 310, power_db: -1.5}
  - {delay_ns: 710, power_db: -3.4}
  - {delay_ns: 1090, power_db: -6.0}
  - {delay_ns: 1730, power_db: -9.1}
  - {delay_ns: 2510, power_db: -14.0}
"""


def baseline(path: Path, period: int, block: int) -> float:
    """Read the capture in blocks of whole periods and FFT every period once."""
    began = time.perf_counter()
    size = path.stat().st_size // 8
    with open(path, "rb") as handle:
        done = 0
        while done < size:
            count = min(block, size - done) // period * period
            if count == 0:
                break
            data = np.fromfile(handle, dtype="<c8", count=count)
            sp_fft.fft(data.reshape(-1, period), axis=-1, workers=2)
            done += count
    return time.perf_counter() - began


PEAK_CHILD = """
import json, os, sys
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
import emucompile.loop.judge, emucompile.verify.run  # measure's own imports, made before the first mark
from emucompile.loop.measure import measure_capture


def peak_kib():
    with open("/proc/self/status") as handle:
        return next(int(line.split()[1]) for line in handle if line.startswith("VmHWM:"))


before = peak_kib()
result = measure_capture(sys.argv[1], sys.argv[2], bundle=sys.argv[3], sample_rate_hz=float(sys.argv[4]))
print(json.dumps({"after_imports_kib": before, "peak_kib": peak_kib(), "status": result.status}))
"""


def peak_memory(capture: Path, probe: Path, bundle: Path) -> dict:
    """Peak resident memory (VmHWM, Linux) of one measure in a fresh interpreter, and after its imports."""
    # the code the benchmark itself runs: PYTHONPATH when set (another tree, e.g. the code before a change),
    # else this checkout
    env = dict(os.environ, PYTHONPATH=os.environ.get("PYTHONPATH") or str(Path(__file__).resolve().parent.parent))
    done = subprocess.run([sys.executable, "-c", PEAK_CHILD, str(capture), str(probe), str(bundle), str(RATE)],
                          capture_output=True, text=True, env=env, check=True)
    return json.loads(done.stdout.strip().splitlines()[-1])


def static_capture(design, bundle, path: Path) -> None:
    """The probe through the bundle's channel frozen at t = 0, with 30 dB of noise, written in blocks.

    A periodic input through a fixed FIR gives a periodic output: one period of
    it, tiled, is the whole probe part. measure does the same work whatever the
    channel's values (its verdict on this capture is a fail: the gains do not move).
    """
    from emucompile.bundle.store import open_bundle

    opened = open_bundle(bundle)
    fir = np.asarray(opened.tap_gains[0, 0, 0]) @ np.asarray(opened.fir_map)
    L = design.period_samples
    x = design.waveform()[:, 0]
    head = np.convolve(x[: design.preamble_samples + 2 * L], fir)[: design.preamble_samples + 2 * L]
    period = head[design.preamble_samples + L: design.preamble_samples + 2 * L]
    rng = np.random.default_rng(1)
    sigma = np.sqrt(np.mean(np.abs(period) ** 2) / 1e3 / 2)
    with open(path, "wb") as handle:
        handle.write(head[: design.preamble_samples + L].astype("<c8").tobytes())
        remaining = design.n_periods - 1
        per_block = max(1, (1 << 22) // L)
        while remaining > 0:
            count = min(per_block, remaining)
            block = np.tile(period, count)
            block = block + sigma * (rng.standard_normal(block.size) + 1j * rng.standard_normal(block.size))
            handle.write(block.astype("<c8").tobytes())
            remaining -= count


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seconds", type=float, default=10.0)
    parser.add_argument("--rounds", type=int, default=3)
    parser.add_argument("--capture", choices=["static", "apply"], default="static",
                        help="static: the channel frozen at t = 0, tiled (fast to make); apply: the bundle through "
                             "emucompile apply (realistic, slow to make at 30.72 MHz)")
    parser.add_argument("--keep", metavar="DIR", help="work in DIR (kept) instead of a temporary directory")
    args = parser.parse_args(argv)

    from emucompile.apply.replay import apply_bundle
    from emucompile.compile.compiler import compile_profile
    from emucompile.loop.estimate import BLOCK_SAMPLES
    from emucompile.loop.measure import measure_capture
    from emucompile.loop.probe import write_probe

    work = Path(args.keep) if args.keep else Path(tempfile.mkdtemp(prefix="emucompile-bench-measure-"))
    work.mkdir(parents=True, exist_ok=True)
    try:
        (work / "p.yaml").write_text(PROFILE)
        bundle = work / "bundle"
        if not (bundle / "manifest.json").exists():
            compile_profile(str(work / "p.yaml"), str(bundle), duration_s=args.seconds + 0.5, seed=1,
                            sample_rate_hz=RATE, force=True)
        files = write_probe(work / "probe", RATE, bundle=bundle, duration_s=args.seconds, output_format="cf32",
                            force=True)
        capture = work / "capture.cf32"
        made = work / "capture.made"  # what the kept capture is, so that a later run with --keep reuses it
        began = time.perf_counter()
        if made.exists() and capture.exists() and made.read_text() == f"{args.capture} {args.seconds!r}":
            pass
        elif args.capture == "apply":
            apply_bundle(bundle, files.data_paths[0], capture, snr_db=30.0, seed=1, sample_rate_hz=RATE, force=True)
        else:
            static_capture(files.design, bundle, capture)
        made.write_text(f"{args.capture} {args.seconds!r}")
        print(f"capture: {capture.stat().st_size / 2**30:.2f} GiB ({args.seconds:g} s at {RATE / 1e6:g} MHz), "
              f"made in {time.perf_counter() - began:.1f} s; probe period {files.design.period_samples} samples")
        base_times, measure_times = [], []
        baseline(capture, files.design.period_samples, BLOCK_SAMPLES)  # warm the page cache
        # and the imports measure makes on its first call (scipy.stats, verify: paid once per process)
        measure_capture(capture, files.description_path, bundle=bundle, sample_rate_hz=RATE)
        loads = [os.getloadavg()]
        for _ in range(args.rounds):
            base_times.append(baseline(capture, files.design.period_samples, BLOCK_SAMPLES))
            began = time.perf_counter()
            result = measure_capture(capture, files.description_path, bundle=bundle, sample_rate_hz=RATE)
            measure_times.append(time.perf_counter() - began)
        loads.append(os.getloadavg())
        print(f"load average before / after the rounds: {' / '.join(f'{a:.2f} {b:.2f} {c:.2f}' for a, b, c in loads)} "
              f"({os.cpu_count()} cores); verdict {result.status}")
        print(f"baseline (read + one FFT pass): min {min(base_times):.2f} s, median {statistics.median(base_times):.2f} s")
        print(f"measure:                       min {min(measure_times):.2f} s, median {statistics.median(measure_times):.2f} s")
        print(f"ratio measure / baseline: min {min(measure_times) / min(base_times):.2f}, "
              f"median {statistics.median(measure_times) / statistics.median(base_times):.2f} (target <= 2)")
        peak = peak_memory(capture, files.description_path, bundle)
        print(f"peak resident memory of measure in a fresh interpreter: {peak['peak_kib'] / 2**10:.0f} MiB, "
              f"{peak['after_imports_kib'] / 2**10:.0f} MiB after its imports "
              f"(capture {capture.stat().st_size / 2**20:.0f} MiB; processing block {BLOCK_SAMPLES * 8 / 2**20:.0f} MiB "
              f"per receive antenna; estimates {result.estimate.gains.nbytes / 2**20:.1f} MiB)")
    finally:
        if not args.keep:
            for path in sorted(work.rglob("*"), reverse=True):
                path.unlink() if path.is_file() else path.rmdir()
            work.rmdir()


if __name__ == "__main__":
    main()
