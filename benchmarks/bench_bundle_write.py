"""Bundle writing throughput: with and without the writer thread, against np.save.

Every variant handles the same bytes: seeded complex64 chunks of shape
(m, 1, 1, n_taps), drawn with numpy (a stand-in for the fading engine's
work per chunk). Printed per variant: wall time, MB/s of tap-gain data
(10^6 bytes), the ratio to the baseline, and the peak of traced memory
(tracemalloc, which numpy reports its buffers to), and the process CPU time
(all threads: the writer thread overlaps work, it does not remove any).

Baseline (same run): draw the whole array in memory, then ``np.save`` it
(and the same followed by an fsync, since the bundle writer fsyncs).

Run:  python benchmarks/bench_bundle_write.py [--samples 2000000] [--taps 12] [--dir /tmp]
"""

from __future__ import annotations

import argparse
import os
import shutil
import sys
import tempfile
import time
import tracemalloc
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from emucompile.bundle import store as bd  # noqa: E402

CHUNK = 65536


def chunks(n_samples, n_taps, seed=1):
    rng = np.random.default_rng(seed)
    for start in range(0, n_samples, CHUNK):
        m = min(CHUNK, n_samples - start)
        shape = (m, 1, 1, n_taps)
        yield (rng.standard_normal(shape, dtype=np.float32) + 1j * rng.standard_normal(shape, dtype=np.float32)).astype(np.complex64)


def draw_only(n_samples, n_taps, workdir):
    for _ in chunks(n_samples, n_taps):
        pass


def numpy_save(n_samples, n_taps, workdir, *, fsync=False):
    whole = np.concatenate(list(chunks(n_samples, n_taps)))
    path = workdir / "baseline.npy"
    with open(path, "wb") as handle:
        np.save(handle, whole)
        if fsync:
            handle.flush()
            os.fsync(handle.fileno())


def bundle_write(n_samples, n_taps, workdir, *, threaded, formats=()):
    layout = bd.BundleLayout(n_samples=n_samples, n_taps=n_taps, update_rate_hz=1000.0, formats=formats)
    taps = [dict(delay_s=0.0, power_db=0.0, fading="rayleigh", k_db=None, max_doppler_hz=10.0,
                 los_doppler_hz=None, los_phase_deg=None, spectrum="classical")] * n_taps
    fields = dict(generator_version="bench", profile_sha256="0" * 64, resolved_profile_sha256="0" * 64,
                  profile={"name": "benchmark"}, seed=1, method="doppler-filter", generator={},
                  duration_s=n_samples / 1000.0, periodic=False, taps=taps, mimo=None, fir=None)
    bd.write_bundle(workdir / "bundle", layout, chunks(n_samples, n_taps), fields, threaded=threaded, max_size_bytes=None)


def measure(function, n_samples, n_taps, root, **options):
    workdir = Path(tempfile.mkdtemp(dir=root, prefix="bench-bundle-"))
    try:
        tracemalloc.start()
        start, cpu_start = time.perf_counter(), time.process_time()
        function(n_samples, n_taps, workdir, **options)
        elapsed, cpu = time.perf_counter() - start, time.process_time() - cpu_start
        _, peak = tracemalloc.get_traced_memory()
        tracemalloc.stop()
    finally:
        shutil.rmtree(workdir, ignore_errors=True)
    return elapsed, peak, cpu


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--samples", type=int, default=2_000_000)
    parser.add_argument("--taps", type=int, default=12)
    parser.add_argument("--dir", default=tempfile.gettempdir())
    parser.add_argument("--repeat", type=int, default=5, help="rounds; the best time of each variant is printed")
    args = parser.parse_args(argv)
    data_mb = args.samples * args.taps * 8 / 1e6
    variants = [
        ("draw only (no writing)", draw_only, {}),
        ("baseline: draw all, np.save", numpy_save, {}),
        ("baseline: draw all, np.save, fsync", numpy_save, {"fsync": True}),
        ("bundle, writer thread", bundle_write, {"threaded": True}),
        ("bundle, no thread", bundle_write, {"threaded": False}),
        ("bundle + cf32, writer thread", bundle_write, {"threaded": True, "formats": ("cf32",)}),
        ("bundle + cf32, no thread", bundle_write, {"threaded": False, "formats": ("cf32",)}),
    ]
    print(f"{args.samples} samples x {args.taps} taps = {data_mb:.0f} MB of tap gains, chunks of {CHUNK}, in {args.dir}")
    # Rounds over all variants, in a new order each round, best time per variant:
    # on a shared machine the others' load comes and goes, and this spreads it.
    order = np.random.default_rng(0)
    runs = {name: [] for name, _, _ in variants}
    for _ in range(args.repeat):
        for index in order.permutation(len(variants)):
            name, function, options = variants[index]
            runs[name].append(measure(function, args.samples, args.taps, args.dir, **options))
    results = {name: (min(r[0] for r in runs[name]), max(r[1] for r in runs[name]), min(r[2] for r in runs[name])) for name, _, _ in variants}
    base = results["baseline: draw all, np.save, fsync"][0]
    print(f"{'variant':38s} {'time s':>8s} {'MB/s':>8s} {'x baseline+fsync':>17s} {'CPU s':>7s} {'peak MiB':>9s}")
    for name, (elapsed, peak, cpu) in results.items():
        print(f"{name:38s} {elapsed:8.2f} {data_mb / elapsed:8.0f} {elapsed / base:17.2f} {cpu:7.2f} {peak / 2**20:9.1f}")


if __name__ == "__main__":
    main()
