"""Compile speed and memory of the slower cases, as ratios to the plain SISO compile of the same bytes.

Every case compiles an invented 12-tap profile (not a standard model) in a
fresh child process, so its peak resident memory is its own
(``resource.getrusage(RUSAGE_SELF).ru_maxrss``: resident pages only; the
bundle's written file pages are page cache, not counted). In each round the
plain SISO compile of the same data-file bytes (the sum of the case's
manifest file sizes: its gains, extra formats, FIR and shadowing files) runs
too, and each case's time is printed as a ratio to that round's plain time; the table shows
the min and median of the ratios over the rounds, and the load average.

Cases: ``mimo2x2`` and ``mimo4x4`` (TS 36.101 medium correlation, n / links
samples), ``train`` (high-speed train on the first, static tap),
``shadowing`` (log-normal shadowing, which also writes ``shadowing_db.npy``),
``ci16`` (npy + ci16 files),
``fir`` and ``csv`` (extra formats; csv at most 10**6 rows), ``moving`` (a
moving delay, which writes ``fir.npy`` too, at 10**5 samples);
``shadow1tap`` and ``train1tap``: one tap, for peak memory at long records.

Usage::

    python benchmarks/bench_cases.py [--samples 2000000] [--rounds 3] [--cases mimo2x2,ci16]
    python benchmarks/bench_cases.py --memory 1000000,10000000 --cases shadowing
    python benchmarks/bench_cases.py --hashes FILE [--check]   # data-file SHA-256 of every case, short runs
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import subprocess
import sys
import tempfile
import textwrap
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
RATE_HZ = 10000.0
TAPS = [{"delay_ns": d, "power_db": p} for d, p in zip(
    (0, 50, 120, 200, 230, 500, 1600, 2300, 5000, 5100, 5300, 5600),
    (-1, -1, -1, 0, 0, 0, -3, -5, -7, -9, -11, -13))]


def _profile(name, **extra):
    taps = [dict(t) for t in TAPS]
    if extra.pop("static_first", False):
        taps[0].update(fading="static", los_phase_deg=0)
    return {"format_version": 1, "name": f"bench-{name}", "max_doppler_hz": 100.0,
            "description": "Invented 12-tap benchmark profile (not a standard model).", "taps": taps, **extra}


MIMO = {"correlation": {"level": "medium", "specification": "ts36101"}}
# name: (profile, links, compile options, samples override)
CASES = {
    "plain": (_profile("plain"), 1, {}, None),
    "mimo2x2": (_profile("mimo2", mimo={"n_tx": 2, "n_rx": 2, **MIMO}), 4, {}, None),
    "mimo4x4": (_profile("mimo4", mimo={"n_tx": 4, "n_rx": 4, **MIMO}), 16, {}, None),
    "train": (_profile("train", static_first=True, conditions={"high_speed_train": {
        "ds_m": 300, "dmin_m": 2, "speed_kmh": 300, "max_doppler_hz": 100, "taps": [0]}}), 1, {}, None),
    "shadowing": (_profile("shadow", conditions={"shadowing": {
        "sigma_db": 8, "decorrelation_distance_m": 20, "speed_mps": 30}}), 1, {}, None),
    "shadow1tap": ({**_profile("shadow1", conditions={"shadowing": {
        "sigma_db": 8, "decorrelation_distance_m": 20, "speed_mps": 30}}), "taps": TAPS[:1]}, 1, {}, None),
    "train1tap": ({**_profile("train1", static_first=True, conditions={"high_speed_train": {
        "ds_m": 300, "dmin_m": 2, "speed_kmh": 300, "max_doppler_hz": 100, "taps": [0]}}), "taps": [{**TAPS[0], "fading": "static", "los_phase_deg": 0}]},
        1, {}, None),
    "ci16": (_profile("ci16"), 1, {"formats": "ci16"}, None),
    "fir": (_profile("fir"), 1, {"formats": "fir", "sample_rate_hz": 30.72e6}, None),
    "csv": (_profile("csv"), 1, {"formats": "csv"}, 10**6),
    "moving": (_profile("moving", conditions={"moving_propagation": {"amplitude_us": 10, "angular_rate_per_s": 0.13}}),
               1, {"sample_rate_hz": 30.72e6}, 10**5),
}

CHILD = """
import json, resource, sys, time
sys.path.insert(0, {root!r})
from emucompile.compile import compiler
began = time.perf_counter()
result = compiler.compile_profile({profile!r}, {out!r}, update_rate_hz={rate!r}, duration_s={duration!r},
                                  seed=1, force=True, max_size_bytes=None, **{options!r})
elapsed = time.perf_counter() - began
print(json.dumps({{"seconds": elapsed, "peak_mib": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024,
                  "files": {{f["name"]: f["sha256"] for f in result.manifest["files"]}},
                  "bytes": sum(f["size_bytes"] for f in result.manifest["files"])}}))
"""


def run_case(work: Path, name: str, n_samples: int, *, links=None, profile=None, options=None) -> dict:
    """Compile one case in a child process; ``{"seconds", "peak_mib", "files"}``."""
    profile_doc, _links, case_options, _ = CASES[name]
    path = work / f"{name}.json"
    path.write_text(json.dumps(profile if profile is not None else profile_doc))
    code = CHILD.format(root=str(ROOT), profile=str(path), out=str(work / f"{name}-bundle"), rate=RATE_HZ,
                        duration=n_samples / RATE_HZ, options=case_options if options is None else options)
    done = subprocess.run([sys.executable, "-c", textwrap.dedent(code)], capture_output=True, text=True, check=False,
                          env=dict(os.environ, PYTHONPATH=str(ROOT)))
    if done.returncode != 0:
        raise SystemExit(f"{name}: {done.stderr.strip()[-2000:]}")
    return json.loads(done.stdout.strip().splitlines()[-1])


def _load() -> str:
    return " / ".join(f"{x:.2f}" for x in os.getloadavg())


def speed(work: Path, names, n_samples: int, rounds: int) -> None:
    ratios = {name: [] for name in names}
    plain_seconds = {}
    for _ in range(rounds):
        for name in names:
            _, links, _, override = CASES[name]
            n = override or n_samples
            ours = run_case(work, name, n // links)
            # the plain compile of the same data-file bytes (12 complex64 gains a sample)
            plain = run_case(work, "plain", max(1, round(ours["bytes"] / (12 * 8))))
            ratios[name].append(ours["seconds"] / plain["seconds"])
            plain_seconds.setdefault(name, []).append(plain["seconds"])
    print(f"load average {_load()} (2 cores, shared: provisional figures)")
    print(f"{'case':10s} {'samples':>9s} {'min ratio':>9s} {'median':>7s} {'plain s (median)':>16s}  (ratio = case / plain)")
    for name in names:
        _, links, _, override = CASES[name]
        print(f"{name:10s} {(override or n_samples) // links:9d} {min(ratios[name]):9.2f} "
              f"{statistics.median(ratios[name]):7.2f} {statistics.median(plain_seconds[name]):16.2f}")


def memory(work: Path, names, sizes) -> None:
    print(f"load average {_load()}; peak RSS = ru_maxrss of a fresh child process (resident pages only)")
    for name in names:
        peaks = [run_case(work, name, n)["peak_mib"] for n in sizes]
        cells = "  ".join(f"{n:.0e}: {p:7.1f} MiB" for n, p in zip(sizes, peaks))
        print(f"{name:10s} {cells}  ratio last/first {peaks[-1] / peaks[0]:.3f}")


def hashes(work: Path, names, record: Path, check: bool) -> int:
    now = {}
    for name in names:
        _, links, _, _ = CASES[name]
        now[name] = run_case(work, name, 150000 // links + 123)["files"]  # not a multiple of the chunk
    if not check:
        record.write_text(json.dumps(now, indent=1, sort_keys=True) + "\n")
        print(f"wrote {record}")
        return 0
    old = json.loads(record.read_text())
    changed = [f"{c}/{f}" for c in now for f in now[c] if old.get(c, {}).get(f) != now[c][f]]
    print("changed:", ", ".join(changed) if changed else "none")
    return 1 if changed else 0


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--samples", type=int, default=2 * 10**6, help="gain samples per tap of the plain case")
    parser.add_argument("--rounds", type=int, default=3)
    parser.add_argument("--cases", default=",".join(c for c in CASES if c != "plain" and "1tap" not in c))
    parser.add_argument("--memory", default=None, help="comma-separated sample counts: peak RSS per case")
    parser.add_argument("--hashes", default=None, help="record (or --check) the data-file hashes of every case")
    parser.add_argument("--check", action="store_true")
    parser.add_argument("--dir", default=None, help="where to write (default: a temporary directory)")
    args = parser.parse_args()
    names = [c for c in args.cases.split(",") if c]
    with tempfile.TemporaryDirectory(dir=args.dir) as work:
        work = Path(work)
        if args.hashes:
            return hashes(work, list(CASES), Path(args.hashes), args.check)
        if args.memory:
            memory(work, names, [int(float(s)) for s in args.memory.split(",")])
        else:
            speed(work, names, args.samples, args.rounds)
    return 0


if __name__ == "__main__":
    sys.exit(main())
