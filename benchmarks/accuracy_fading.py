"""How accurate are the two generators on records of T f_D = 5e4? (measurement, not a test)

For each configuration, independent records (12 taps x several seeds) of
T f_D = 5e4 at an update rate of 32 f_D are drawn and three statistics are
measured on each record:

* ``acf``: largest |r_hat(tau) - r(tau)| for tau <= 3/f_D (complex, time average);
* ``ks``: Kolmogorov-Smirnov distance of the envelope to Rayleigh
  (``scipy.stats.rayleigh``, every 8th sample);
* ``lcr@rho``: positive crossings of the envelope at rho = 0.1, 0.3, 1
  counted on the samples, divided by Rice's rate (``theory.level_crossing_rate``);
  counting on samples undercounts at low levels, identically for every
  generator, so compare with the reference row, not with 1.

The reference is an exact stationary Gaussian process with the same
spectrum, drawn by inverse DFT (Young & Beaulieu 2000, IEEE Trans. Commun.
48(7): X[k] = sqrt(S_k) (A_k + j B_k), power per bin from the spectrum's
CDF), independent of the engine's code. A generator "meets" the statistical
accuracy when the mean of every statistic is within half the reference's
record-to-record standard deviation of the reference mean (for the two
error statistics, acf and ks, only an increase counts: being closer to
theory than a Gaussian record never fails a check): a shift of 0.5 sd
raises the failure rate of a check calibrated at 99.9 % for a perfect
generator to about 0.3 %. With 36 records per row the standard error of a
mean shift is ~0.33 sd, so rows near the threshold need more seeds.

Before the records, the script prints the error of a single realisation's
infinite-time average autocorrelation, (1/M) sum_n cos(2 pi f_n tau)
averaged over both quadratures, against r(tau) for tau <= 3/f_D, over 200
draws of the sinusoids per M: what a sum of sinusoids gives even with an
endless record.

Run from the repository root (takes a few minutes on 2 cores)::

    python benchmarks/accuracy_fading.py            # classical spectrum, M sweep
    python benchmarks/accuracy_fading.py --quick    # fewer records
"""

from __future__ import annotations

import argparse
import math
import sys
import time
from pathlib import Path

import numpy as np
from scipy import stats

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from emucompile.models import fading  # noqa: E402
from emucompile.profile.model import Profile, Tap  # noqa: E402
from emucompile.models.theory import DopplerSpectrum, level_crossing_rate  # noqa: E402

DOPPLER_HZ = 10.0
RATE_RATIO = 32
T_FD = 5e4
LEVELS = (0.1, 0.3, 1.0)
N_TAPS = 12


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="one seed (12 records) per row")
    parser.add_argument("--seeds", type=int, default=3, help="seeds per row (12 records each)")
    parser.add_argument("--spectrum", default="classical", choices=["classical", "flat", "gaussian"])
    parser.add_argument("--sinusoids", default="8,16,32,64,128,256", help="comma-separated M values")
    args = parser.parse_args(argv)
    seeds = (1,) if args.quick else tuple(range(1, args.seeds + 1))
    sigma = 0.3 * DOPPLER_HZ if args.spectrum == "gaussian" else None
    spectrum = DopplerSpectrum(args.spectrum, DOPPLER_HZ, sigma)
    rate = RATE_RATIO * DOPPLER_HZ
    n = int(T_FD * RATE_RATIO)
    _time_average_table(spectrum)
    print(f"spectrum {args.spectrum}, f_D = {DOPPLER_HZ:g} Hz, update rate {rate:g} Hz, "
          f"T f_D = {T_FD:g}, {N_TAPS * len(seeds)} records per row")
    print(f"{'generator':28s} {'acf mean':>9s} {'acf sd':>8s} {'ks mean':>8s} {'ks sd':>7s} "
          + " ".join(f"{'lcr@' + str(r):>9s} {'sd':>6s}" for r in LEVELS) + "   s/record")
    rows = {}
    t0 = time.perf_counter()
    rows["reference (inverse DFT)"] = _measure(
        [_reference(spectrum, rate, n, seed * 100 + j) for seed in seeds for j in range(N_TAPS)],
        spectrum, rate)
    _print("reference (inverse DFT)", rows["reference (inverse DFT)"], t0)
    profile = Profile(name="accuracy", taps=tuple(
        Tap(j * 1e-7, 1.0, spectrum=args.spectrum, max_doppler_hz=DOPPLER_HZ, sigma_hz=sigma)
        for j in range(N_TAPS)))
    configs = [("doppler-filter", {})] + [
        (f"sum-of-sinusoids M={m}", {"method": "sum-of-sinusoids", "n_sinusoids": int(m)})
        for m in args.sinusoids.split(",")
    ]
    for label, kw in configs:
        t0 = time.perf_counter()
        records = []
        for seed in seeds:
            g = fading.generate(profile, rate, n, seed, **kw)
            records.extend(g[:, j].astype(np.complex128) for j in range(N_TAPS))
        rows[label] = _measure(records, spectrum, rate)
        _print(label, rows[label], t0)
    ref = rows["reference (inverse DFT)"]
    print("\nwithin half a reference sd on every statistic? (mean shift / reference sd, "
          "+- its standard error)")
    for label, row in rows.items():
        if row is ref:
            continue
        parts, ok = [], True
        for k in ref:
            sd = ref[k].std(ddof=1)
            shift = (row[k].mean() - ref[k].mean()) / sd
            se = math.sqrt(row[k].var(ddof=1) / len(row[k]) + ref[k].var(ddof=1) / len(ref[k])) / sd
            ok &= (shift if k in ("acf", "ks") else abs(shift)) <= 0.5
            parts.append(f"{k} {shift:+.2f}+-{se:.2f}")
        print(f"  {label:28s} {'yes' if ok else 'NO ':3s}  ({', '.join(parts)})")


def _time_average_table(spectrum):
    from emucompile.models.fading._sos import draw_sinusoids

    tau = np.linspace(0.0, 3.0, 301) / spectrum.max_doppler_hz
    theory = spectrum.autocorrelation(tau)
    print("single realisation, endless record: max |time-average acf - r| for tau <= 3/f_D")
    for m in (4, 8, 16, 32, 64, 128, 256, 512):
        errors = []
        for draw in range(200):
            _, (fc, _), (fs, _) = draw_sinusoids(spectrum, m, np.random.default_rng([draw, m]))
            r = 0.5 * (np.cos(2 * np.pi * np.outer(tau, fc)).mean(1) + np.cos(2 * np.pi * np.outer(tau, fs)).mean(1))
            errors.append(np.max(np.abs(r - theory)))
        errors = np.array(errors)
        print(f"  M = {m:4d}: mean {errors.mean():.1e}, 99.9 % point {np.quantile(errors, 0.999):.1e}")
    print()


def _reference(spectrum: DopplerSpectrum, rate: float, n: int, seed: int) -> np.ndarray:
    """Exact circular Gaussian process by inverse DFT (Young & Beaulieu 2000)."""
    rng = np.random.default_rng([seed, 2000])
    edges = (np.arange(n + 1) - n // 2 - 0.5) * rate / n
    cdf = _spectrum_cdf(spectrum, edges)
    power = np.fft.ifftshift(np.diff(cdf))  # per bin, sums to 1
    coeffs = (rng.standard_normal(n) + 1j * rng.standard_normal(n)) * np.sqrt(power / 2.0)
    return np.fft.ifft(coeffs) * n  # x[t] = sum_k X_k exp(j 2 pi k t / n), unit power


def _spectrum_cdf(spectrum, f):
    fd = spectrum.max_doppler_hz
    x = np.clip(f / fd, -1.0, 1.0)
    if spectrum.kind == "classical":
        return 0.5 + np.arcsin(x) / np.pi
    if spectrum.kind == "flat":
        return 0.5 * (1.0 + x)
    from scipy.special import erf

    s = spectrum.sigma_hz * math.sqrt(2.0)
    return 0.5 * (1.0 + erf(x * fd / s) / math.erf(fd / s))


def _measure(records, spectrum, rate):
    out = {"acf": [], "ks": []} | {f"lcr@{r}": [] for r in LEVELS}
    n_lags = int(3 * rate / spectrum.max_doppler_hz) + 1
    lags = np.arange(n_lags)
    theory_acf = spectrum.autocorrelation(lags / rate)
    rayleigh = stats.rayleigh(scale=math.sqrt(0.5))
    for x in records:
        x = x / math.sqrt(np.mean(np.abs(x) ** 2))
        n = len(x)
        spec = np.fft.fft(x, 2 * n)
        acf = np.fft.ifft(np.abs(spec) ** 2)[:n_lags].real / np.arange(n, n - n_lags, -1)
        out["acf"].append(np.max(np.abs(acf / acf[0] - theory_acf)))
        env = np.abs(x)
        out["ks"].append(stats.kstest(env[::8], rayleigh.cdf).statistic)
        for r in LEVELS:
            count = np.count_nonzero((env[:-1] < r) & (env[1:] >= r))
            expected = level_crossing_rate(r, rms_doppler_hz=spectrum.rms_doppler_hz) * n / rate
            out[f"lcr@{r}"].append(count / expected)
    return {k: np.array(v) for k, v in out.items()}


def _print(label, row, t0):
    n_records = len(row["acf"])
    cells = (f"{row['acf'].mean():9.5f} {row['acf'].std(ddof=1):8.5f} "
             f"{row['ks'].mean():8.5f} {row['ks'].std(ddof=1):7.5f} ")
    cells += " ".join(f"{row[f'lcr@{r}'].mean():9.4f} {row[f'lcr@{r}'].std(ddof=1):6.4f}" for r in LEVELS)
    print(f"{label:28s} {cells}   {(time.perf_counter() - t0) / n_records:.2f}", flush=True)


if __name__ == "__main__":
    main()
