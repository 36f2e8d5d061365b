"""Acceptance run of the closed loop: 20 seeds, the correct emulator and each faulty one, counts printed.

For each seed s the invented three-tap scenario of ``tests/test_loop.py``
(f_D = 100 Hz, 200 kHz, updates at 1600 Hz, 2 s of probe) is compiled with seed
s; :func:`emucompile.loop.software.play` plays the emulator (30 dB SNR, 3
samples of bulk delay, 3 Hz offset, -6 dB gain, noise seed s) and
:func:`emucompile.loop.measure.measure_capture` judges it. Cases: correct (must
pass), tap 1 3 dB low (power), tap 2 missing, taps 0 and 1 swapped, half the
update rate with hold, another seed's bundle (wrong bundle), a bundle at
1.1 f_D (Doppler), and the 2x2 scenario (must pass). A case counts as right
when the correct ones pass and the faulty ones fail naming exactly their fault.

    PYTHONPATH=. nice python tools/acceptance_loop.py --seeds 20 [--out DIR]
"""

from __future__ import annotations

import argparse
import collections
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "tests"))

from test_loop import MIMO, PROFILE, RATE, _bundle

from emucompile.bundle.store import open_bundle
from emucompile.loop import probe as pr
from emucompile.loop import software
from emucompile.loop.measure import measure_capture


def _case(directory, design, probe, bundle, against, name, expect, **changes):
    capture = directory / f"{name}.npy"
    np.save(capture, software.play(design, bundle, **changes))
    result = measure_capture(capture, probe, bundle=against, between_updates=changes.get("between"))
    faults = [f["fault"] for f in result.faults]
    right = result.status == "pass" if expect is None else (result.status == "fail" and faults == [expect])
    capture.unlink()
    SCALES.setdefault(name, []).append(result.record["doppler_scale"])
    return right, result.status, faults


SCALES = {}
ONLY = False


def run_seed(seed: int, root: Path) -> list:
    directory = root / f"seed-{seed}"
    directory.mkdir()
    bundle, _ = _bundle(directory, PROFILE.format(fd=100), seed, "b")
    files = pr.write_probe(directory / "probe", RATE, bundle=bundle, duration_s=2.0, output_format="cf32")
    design, probe = files.design, files.description_path
    gains = np.array(open_bundle(bundle).tap_gains)
    low, missing, swapped, half = gains.copy(), gains.copy(), gains.copy(), gains.copy()
    low[..., 1] *= 10 ** (-3 / 20)
    missing[..., 2] = 0
    swapped[..., [0, 1]] = swapped[..., [1, 0]]
    half[1::2] = gains[0:-1:2][: half[1::2].shape[0]]
    common = {"seed": seed}
    if ONLY:
        return [("taps swapped", *_case(directory, design, probe, bundle, bundle, "swapped", "swapped", gains=swapped,
                                        **common))]
    other, _ = _bundle(directory, PROFILE.format(fd=100), seed + 1000, "other")
    fast, _ = _bundle(directory, PROFILE.format(fd=110), seed, "fast")
    out = [
        ("correct", *_case(directory, design, probe, bundle, bundle, "correct", None, **common)),
        ("tap 3 dB low", *_case(directory, design, probe, bundle, bundle, "low", "power", gains=low, **common)),
        ("tap missing", *_case(directory, design, probe, bundle, bundle, "missing", "missing", gains=missing, **common)),
        ("taps swapped", *_case(directory, design, probe, bundle, bundle, "swapped", "swapped", gains=swapped, **common)),
        ("half update rate", *_case(directory, design, probe, bundle, bundle, "half", "update_rate", gains=half,
                                    between="hold", **common)),
        ("another seed", *_case(directory, design, probe, other, bundle, "other", "wrong_bundle", **common)),
        ("Doppler 1.1 f_D", *_case(directory, design, probe, fast, bundle, "fast", "doppler", **common)),
    ]
    mimo, _ = _bundle(directory, MIMO, seed, "mimo")
    files = pr.write_probe(directory / "probe2", RATE, bundle=mimo, duration_s=2.0, output_format="cf32")
    out.append(("2x2 correct", *_case(directory, files.design, files.description_path, mimo, mimo, "mimo", None,
                                      **common)))
    return out


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seeds", type=int, default=20)
    parser.add_argument("--first", type=int, default=1)
    parser.add_argument("--only-swapped", action="store_true", help="run only the swapped-taps case")
    args = parser.parse_args(argv)
    global ONLY
    ONLY = args.only_swapped
    counts = collections.defaultdict(lambda: [0, 0])
    misses = []
    began = time.perf_counter()
    with tempfile.TemporaryDirectory(prefix="emucompile-acceptance-") as root:
        for seed in range(args.first, args.first + args.seeds):
            for case, right, status, faults in run_seed(seed, Path(root)):
                counts[case][0] += right
                counts[case][1] += 1
                if not right:
                    misses.append((seed, case, status, faults))
            print(f"seed {seed}: done ({time.perf_counter() - began:.0f} s)", flush=True)
    print(f"\n{'case':<18} right / runs")
    for case, (right, runs) in counts.items():
        print(f"{case:<18} {right} / {runs}")
    for seed, case, status, faults in misses:
        print(f"miss: seed {seed} {case}: {status} {faults}")
    for name in ("correct", "other", "fast"):
        values = np.array([v for v in SCALES.get(name, []) if v is not None])
        if values.size:
            print(f"measured Doppler scale, {name}: mean {values.mean():.4f}, std {values.std(ddof=1) if values.size > 1 else 0:.4f}, "
                  f"min {values.min():.4f}, max {values.max():.4f}")


if __name__ == "__main__":
    main()
