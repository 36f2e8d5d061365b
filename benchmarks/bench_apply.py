"""Throughput of the time-varying channel against a static FIR filter of the same length.

A 12-tap bundle (an invented profile: delays 0 to 2.52 us, fractional at the
sample rate, so the sinc map gives 109 coefficients at 30.72 MHz), seeded
complex Gaussian tap gains at the update rate, and a complex64 white input.
Printed: samples per second and the ratio of times against the baseline
``scipy.signal.oaconvolve`` of the same input with one static FIR of the same
length (the FIR at the bundle's first update), measured in the same run:

- ``channel``: :func:`emucompile.apply.replay.apply_channel` in memory (auto engine);
- ``channel + noise``: the same with the noise source added;
- ``file to file``: :func:`emucompile.apply.replay.apply_bundle` from an npy input
  to an npy output with SNR 20 dB (reads, scans, writes, hashes, fsyncs).

``--sweep`` times both engines against the samples per update interval
(sample rate / update rate), the figure behind ``INTERVAL_ENGINE_MIN_SAMPLES``.

Run:  python benchmarks/bench_apply.py [--samples 4194304] [--update-rate 2000] [--sweep] [--dir /tmp]
Set OPENBLAS_NUM_THREADS=1 on a shared machine.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import scipy.signal

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from emucompile.apply import replay as ap  # noqa: E402
from emucompile.bundle import store as bd  # noqa: E402
from emucompile.models import grid  # noqa: E402

SAMPLE_RATE_HZ = 30.72e6
DELAYS_S = np.array([0, 30, 150, 310, 370, 710, 1090, 1730, 2510, 2600, 2700, 2800]) * 1e-9 * 0.9
POWERS_DB = np.array([0, -1, -2, -3, -8, -17.2, -20.8, -12, -16, -18, -20, -22.0])


def best_of(function, repeats):
    best = float("inf")
    for _ in range(repeats):
        start = time.perf_counter()
        function()
        best = min(best, time.perf_counter() - start)
    return best


def gains_for(n_input, update_rate_hz, seed=5):
    n_updates = int(np.ceil(n_input * update_rate_hz / SAMPLE_RATE_HZ)) + 2
    rng = np.random.default_rng(seed)
    shape = (n_updates, 1, 1, len(DELAYS_S))
    scale = np.sqrt(10 ** (POWERS_DB / 10) / 2)
    return ((rng.standard_normal(shape) + 1j * rng.standard_normal(shape)) * scale).astype(np.complex64)


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--samples", type=int, default=1 << 22)
    parser.add_argument("--update-rate", type=float, default=2000.0)
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--sweep", action="store_true")
    parser.add_argument("--dir", default=None)
    options = parser.parse_args()

    powers = 10 ** (POWERS_DB / 10)
    fir = grid.fir_map(DELAYS_S, powers, SAMPLE_RATE_HZ)
    rng = np.random.default_rng(1)
    n = options.samples
    x = ((rng.standard_normal(n) + 1j * rng.standard_normal(n)) / np.sqrt(2)).astype(np.complex64)
    gains = gains_for(n, options.update_rate)
    static = (gains[0, 0, 0] @ fir.matrix).astype(np.complex64)
    print(f"{len(DELAYS_S)} taps, {fir.n_fir} FIR coefficients at {SAMPLE_RATE_HZ / 1e6:g} MHz, "
          f"update rate {options.update_rate:g} Hz ({SAMPLE_RATE_HZ / options.update_rate:g} samples per update), "
          f"{n} samples")

    baseline = best_of(lambda: scipy.signal.oaconvolve(x, static)[:n], options.repeats)
    rows = [("scipy.signal.oaconvolve, static FIR (baseline)", baseline)]

    def channel(engine="auto", update_rate=options.update_rate, g=gains):
        return ap.apply_channel(x, g, fir.matrix, update_rate_hz=update_rate, sample_rate_hz=SAMPLE_RATE_HZ,
                                engine=engine)

    rows.append((f"channel ({ap.TimeVaryingFir(gains, fir.matrix, update_rate_hz=options.update_rate, sample_rate_hz=SAMPLE_RATE_HZ).engine} engine)",
                 best_of(channel, options.repeats)))
    noise = ap.WhiteNoise(3, [0.01])

    def channel_and_noise():
        y = channel()
        for first in range(0, n, ap.BLOCK_SAMPLES):
            y[first:first + ap.BLOCK_SAMPLES] += noise.block(first, min(ap.BLOCK_SAMPLES, n - first))[:, 0]

    rows.append(("channel + noise", best_of(channel_and_noise, options.repeats)))
    with tempfile.TemporaryDirectory(dir=options.dir) as work:
        work = Path(work)
        layout = bd.BundleLayout(n_samples=gains.shape[0], n_taps=len(DELAYS_S), update_rate_hz=options.update_rate,
                                 fir_map=fir.matrix)
        taps = [{"delay_s": float(d), "power_db": float(p), "fading": "rayleigh", "k_db": None, "max_doppler_hz": 10.0,
                 "los_doppler_hz": None, "los_phase_deg": None, "spectrum": "classical"} for d, p in zip(DELAYS_S, POWERS_DB)]
        fields = {"generator_version": "bench", "profile_sha256": "a" * 64, "resolved_profile_sha256": "b" * 64,
                  "profile": {"name": "bench-invented"}, "seed": 5, "method": "doppler-filter", "generator": {},
                  "duration_s": gains.shape[0] / options.update_rate, "periodic": False, "taps": taps, "mimo": None,
                  "fir": fir.manifest_entry()}
        bd.write_bundle(work / "bundle", layout, [gains], fields)
        np.save(work / "input.npy", x)
        counter = iter(range(10**6))

        def file_to_file():
            ap.apply_bundle(work / "bundle", work / "input.npy", work / f"out{next(counter)}.npy", snr_db=20.0, seed=1,
                            sample_rate_hz=SAMPLE_RATE_HZ)

        rows.append(("file to file (npy, SNR 20 dB)", best_of(file_to_file, options.repeats)))

    width = max(len(r[0]) for r in rows)
    for name, seconds in rows:
        print(f"  {name:<{width}}  {n / seconds / 1e6:8.2f} Msamples/s  time ratio to baseline {seconds / baseline:6.2f}")

    if options.sweep:
        print("engine sweep (time ratio to the baseline):")
        print(f"  {'samples/update':>14}  {'interval':>9}  {'per-tap':>9}")
        for per_update in (2, 4, 8, 16, 32, 64, 128, 512, 2048, 15360):
            rate = SAMPLE_RATE_HZ / per_update
            g = gains_for(n, rate)
            times = [best_of(lambda e=e, rate=rate, g=g: channel(e, rate, g), 1) / baseline for e in ("interval", "per-tap")]
            print(f"  {per_update:>14}  {times[0]:9.2f}  {times[1]:9.2f}")


if __name__ == "__main__":
    main()
