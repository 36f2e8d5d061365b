"""Calibrate the tolerance checks by Monte Carlo of the exact reference process.

For every configuration (spectrum x fading x record length x rate x periodic)
draws ``seeds`` records of :func:`emucompile.verify.reference.tap_record` (exact
statistics by construction), runs :func:`emucompile.verify.tolerance.check_tap` on
each and keeps every check's uncalibrated statistic z with its null law.
Each check's calibration factor c is then the largest, over configurations,
of

    (upper 90 % confidence bound of the 0.9 quantile of z) / (z at which the nominal law gives p = 0.1),

(configurations with too few seeds for that bound to exist, 0.9^seeds > 0.1,
are left out of the fit but counted in the false alarms), so the
calibrated p-value law_sf(z / c) is stochastically no smaller than
uniform near the 10 % point in every configuration; the shape of the tail is
then checked, not assumed: the script reports, with the factors applied, the
pooled false-alarm counts at levels 1e-1, 1e-2 and 1e-3 with exact
(Clopper-Pearson) 95 % bounds. The cross-correlation check is calibrated on
pairs of independent records.

Writes ``emucompile/data/tolerance_calibration.json``. CI only reads it.

    python tools/calibrate_tolerances.py            # ~15 min on 2 otherwise idle cores
    python tools/calibrate_tolerances.py --quick    # a smoke run, writes nothing
    python tools/calibrate_tolerances.py --scheduler tcp://HOST:PORT   # on a Dask cluster
        (its workers must import emucompile: installed, or this checkout at the same path)
"""

from __future__ import annotations

import argparse
import datetime
import json
import math
import os
import platform
import sys
import time
from pathlib import Path

import numpy as np
import scipy
from scipy import stats

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from emucompile.verify import reference  # noqa: E402

from emucompile.verify import nulls  # noqa: E402
from emucompile.verify import tolerance  # noqa: E402
from emucompile.models.theory import DopplerSpectrum  # noqa: E402

BASE_SEED = 20261202
FIT_QUANTILE = 0.9
FIT_CONFIDENCE = 0.9
LEVELS = (1e-1, 1e-2, 1e-3)
FADINGS = (("rayleigh", 0.0, 0.0), ("rician_static_los", 3.0, 0.0), ("rician_moving_los", 3.0, 0.7))
SPECTRA = (("classical", None), ("flat", None), ("gaussian", 0.3))

# (doppler periods T f_D, rate / f_D, periodic, seeds)
PLAN = (
    (500.0, 8.0, False, 300),
    (500.0, 30.0, False, 200),
    (5000.0, 8.0, False, 300),
    (5000.0, 8.0, True, 150),
    (5000.0, 30.0, False, 60),
    (50000.0, 8.0, False, 40),
    (50000.0, 8.0, True, 24),
)
QUICK_PLAN = ((500.0, 8.0, False, 8), (5000.0, 8.0, True, 4), (50000.0, 8.0, False, 2))


def configurations(plan):
    out = []
    for periods, ratio, periodic, seeds in plan:
        for kind, sigma in SPECTRA:
            for fading, k, los in FADINGS:
                out.append(dict(periods=periods, rate_doppler=ratio, periodic=periodic, seeds=seeds,
                                spectrum=kind, sigma_doppler=sigma, fading=fading, k=k, los_doppler=los))
    return out


def run_one(task):
    index, cfg, seed = task
    fd = 1.0
    spec = DopplerSpectrum(cfg["spectrum"], fd, cfg["sigma_doppler"] * fd if cfg["sigma_doppler"] else None)
    rate = cfg["rate_doppler"] * fd
    n = int(round(cfg["periods"] * cfg["rate_doppler"]))
    rng = np.random.default_rng(np.random.SeedSequence(BASE_SEED, spawn_key=(index, seed)))
    los = cfg["los_doppler"] * fd
    if cfg["periodic"] and los:
        los = round(los * n / rate) * rate / n
    model = tolerance.TapModel(spec, 1.0, cfg["k"], los)
    g = reference.tap_record(spec, rate, n, rng, k_linear=cfg["k"], los_doppler_hz=los, periodic=cfg["periodic"])
    out = []
    for r in tolerance.check_tap(g, rate, model, periodic=cfg["periodic"]):
        null = r.detail.get("null")
        if null is not None:
            out.append((r.name, null["law"], null["m"], null["z"]))
        elif r.name == "out_of_band_power" and r.value is not None:
            out.append((r.name, "limit", 0, r.value))
    if not cfg["periodic"] and cfg["k"] == 0:
        h = reference.tap_record(spec, rate, n, rng, periodic=False)
        c = tolerance.check_cross_correlation(g, h, rate, model, model, taps=(0, 1))
        null = c.detail["null"]
        out.append((c.name, null["law"], null["m"], null["z"]))
    return index, out


def order_statistic_bound(z, q, confidence):
    """Upper confidence bound of the q-quantile of the sample z (order statistic, exact binomial)."""
    z = np.sort(np.asarray(z, float))
    n = z.size
    j = int(stats.binom.ppf(confidence, n, q))  # P(#below quantile <= j) >= confidence
    return float(z[min(j, n - 1)])


def clopper_pearson(k, n, conf=0.95):
    lo = 0.0 if k == 0 else float(stats.beta.ppf((1 - conf) / 2, k, n - k + 1))
    hi = 1.0 if k == n else float(stats.beta.ppf(1 - (1 - conf) / 2, k + 1, n - k))
    return lo, hi


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--quick", action="store_true", help="tiny smoke run; writes nothing")
    ap.add_argument("--processes", type=int, default=2, help="local processes (without --scheduler)")
    ap.add_argument("--scheduler", metavar="ADDRESS", help="run on the Dask cluster at tcp://HOST:PORT")
    ap.add_argument("--output", default=str(ROOT / "emucompile" / "data" / "tolerance_calibration.json"))
    args = ap.parse_args(argv)
    plan = QUICK_PLAN if args.quick else PLAN
    cfgs = configurations(plan)
    tasks = [(i, c, s) for i, c in enumerate(cfgs) for s in range(c["seeds"])]
    # Longest records first so the pool ends evenly.
    tasks.sort(key=lambda t: -t[1]["periods"] * t[1]["rate_doppler"])
    t0 = time.time()
    samples: dict = {}
    from emucompile.campaign.cluster import map_tasks

    results = map_tasks(run_one, tasks, scheduler=args.scheduler, processes=args.processes, chunksize=4,
                        paths=[str(ROOT)])
    for done, (index, out) in enumerate(results, 1):
        for name, law, m, z in out:
            samples.setdefault(name, {}).setdefault(index, []).append((law, m, z))
        if done % 500 == 0:
            print(f"{done}/{len(tasks)} records, {time.time() - t0:.0f} s", flush=True)
    runtime = time.time() - t0

    factors, per_check = {}, {}
    for name in tolerance.CHECK_NAMES:
        if name == "out_of_band_power" or name not in samples:
            continue
        ratios = []
        for rows in samples[name].values():
            law, m = rows[0][0], rows[0][1]
            z = [math.inf if r[2] is None else r[2] for r in rows]
            ms = {r[1] for r in rows}
            m = max(ms)  # the Bonferroni count may differ little between seeds; take the largest
            if FIT_QUANTILE ** len(z) > 1.0 - FIT_CONFIDENCE:
                continue  # too few seeds for the bound to exist; still counted in the false alarms
            ub = order_statistic_bound(z, FIT_QUANTILE, FIT_CONFIDENCE)
            ratios.append((ub / nulls.critical(law, 1.0 - FIT_QUANTILE, m), index))
        c, worst = max(ratios)
        factors[name] = round(float(c), 4)
        # False alarms with the factor applied, pooled over configurations.
        counts = {lv: 0 for lv in LEVELS}
        total = 0
        for rows in samples[name].values():
            for law, m, z in rows:
                p = 0.0 if z is None else nulls.pvalue(law, z / c, m)
                total += 1
                for lv in LEVELS:
                    counts[lv] += p <= lv
        per_check[name] = {
            "factor": factors[name],
            "worst_configuration": cfgs[worst],
            "factor_range": [round(min(r for r, _ in ratios), 4), round(c, 4)],
            "records": total,
            "false_alarms": {
                f"{lv:g}": {"count": int(counts[lv]), "rate": counts[lv] / total,
                            "clopper_pearson_95": clopper_pearson(int(counts[lv]), total)}
                for lv in LEVELS
            },
        }
        fa = per_check[name]["false_alarms"]["0.001"]
        print(f"{name:22s} c = {c:.3f}  (range {per_check[name]['factor_range'][0]:.3f}..{c:.3f})  "
              f"false alarms at 1e-3: {fa['count']}/{total} (95 % CI {fa['clopper_pearson_95'][0]:.1e}"
              f"..{fa['clopper_pearson_95'][1]:.1e}); at 1e-2: "
              f"{per_check[name]['false_alarms']['0.01']['count']}/{total}", flush=True)
    raw = {f"{name}/{index}": np.array([np.inf if r[2] is None else r[2] for r in rows])
           for name, d in samples.items() for index, rows in d.items()}
    if not args.quick:
        np.savez_compressed(Path(args.output).with_suffix(".samples.npz"), **raw)
    oob = [z for rows in samples.get("out_of_band_power", {}).values() for _, _, z in rows]
    if oob:
        print(f"out_of_band_power (limit {tolerance.OUT_OF_BAND_LIMIT_DB} dB): worst {max(oob):.1f} dB "
              f"over {len(oob)} reference records")
    print(f"runtime {runtime:.0f} s on {args.processes} processes, {len(tasks)} records")
    if args.quick:
        return 0
    doc = {
        "placeholder": False,
        "note": "Written by tools/calibrate_tolerances.py; calibration factors multiply each check's "
                "nominal null spread (see emucompile/tolerance.py).",
        "factors": factors,
        "checks": per_check,
        "out_of_band_worst_db": max(oob) if oob else None,
        "settings": {
            "base_seed": BASE_SEED,
            "fit": f"max over configurations of the upper {FIT_CONFIDENCE:g} confidence bound of the "
                   f"{FIT_QUANTILE:g} quantile of z over the nominal critical z at p = {1 - FIT_QUANTILE:g}",
            "plan": [dict(doppler_periods=p, rate_over_doppler=r, periodic=q, seeds=s) for p, r, q, s in plan],
            "spectra": [dict(kind=k, sigma_over_doppler=s) for k, s in SPECTRA],
            "fadings": [dict(name=n, k_linear=k, los_doppler_over_doppler=f) for n, k, f in FADINGS],
            "reference": "inverse-DFT shaping with bin-integrated exact spectra (emucompile.verify.reference); "
                         "aperiodic records are the first N samples of a period-2N process",
            "levels_reported": list(LEVELS),
        },
        "runtime_s": round(runtime, 1),
        "processes": args.processes,
        "records": len(tasks),
        "date_utc": datetime.datetime.now(datetime.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ"),
        "versions": {"python": platform.python_version(), "numpy": np.__version__, "scipy": scipy.__version__},
        "machine": {"cpu_count": os.cpu_count(), "machine": platform.machine()},
    }
    Path(args.output).write_text(json.dumps(doc, indent=1, allow_nan=False) + "\n", encoding="utf-8")
    print(f"wrote {args.output}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
