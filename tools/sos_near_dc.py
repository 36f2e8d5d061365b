"""The near-0 Hz sinusoid of the sum-of-sinusoids generator: how often, how large, what it costs verify.

A sum of M sinusoids per quadrature puts each quadrature's lowest sinusoid in
the lowest stratum u in (0, 1/M] of the one-sided Doppler law G (frequency
G^-1(u)). A sinusoid at f with f T <~ 1 is a constant offset over a record of
T seconds: its time average is A (sin(2 pi (f T + p)) - sin(2 pi p)) / (2 pi f T)
(A = 1/sqrt(M) in g, phase p cycles), up to A, where a Gaussian process with
the same spectrum has a mean of standard deviation sqrt(E_F[sinc^2(F T)] / 2)
per quadrature (F ~ G; for the classical spectrum ~ sqrt(1 / (2 pi f_D T))).
``verify``'s ``phase_uniformity`` reads that mean: C1 = mean e^{j theta}
~ (sqrt(pi)/2) mean(g) / sigma, var C1 ~ (pi/4) var(mean g) / sigma^2 for a
long record, so its standard score is ~ |mean g| / sd(mean g).

This script prints, for each spectrum's default M and a few T f_D:

* the exact probability per quadrature that the lowest |frequency| is below
  c/T: M G(c/T) when u_1 is uniform on (0, 1/M] (generator version 3), and
  max(0, 2M G(c/T) - 1) when u_1 is uniform on [1/(2M), 1/M] (version 4),
  i.e. 0 for c/T < G^-1(1/(2M));
* by Monte Carlo over the generator's own draws (``_sos.draw_sinusoids``, or
  version 3's law), the standard score z of |mean g| (every sinusoid's exact
  time average summed) and the fraction of taps with z above the score that
  fails ``phase_uniformity`` in a bundle of ``--checks`` checks at a
  family-wise 1 % (Holm's first step, alpha / checks, the check's Gamma(2, 1)
  law with the second circular moment's part drawn as Exp(1)); for a Gaussian
  process that fraction is the Gamma(2, 1) tail itself;
* the predicted rate of bundles (12 taps; 16 links) failing that way, beside
  the one measured on version 3 (3 of 12 bundles: 2 of 6 twelve-tap and 1 of 6
  4x4, T f_D = 5e4, DEVELOPERS.md);
* what version 4 changes in the ensemble spectrum: a fraction 1/(2M) of each
  quadrature's power moves from |f| < G^-1(1/(2M)) to G^-1(1/(2M)) <= |f| <
  G^-1(1/M); the largest change of the normalised autocorrelation over all
  lags is printed.

Usage::

    python tools/sos_near_dc.py [--draws 20000] [--checks 174] [--kinds classical,flat,gaussian]
        [--products 1e3,5e3,5e4] [--plot near_dc.png]

Deterministic (fixed seeds); ~5 s of CPU per 100 draws of one spectrum at 3 lengths.
"""

from __future__ import annotations

import argparse
import itertools
import math
import sys
from pathlib import Path

import numpy as np
from scipy import integrate, optimize, stats

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from emucompile.models.fading import _sos
from emucompile.models.fading._plan import DEFAULT_SINUSOIDS, GAUSSIAN_SINUSOIDS
from emucompile.models.theory import DopplerSpectrum

FD = 1.0  # Hz: every figure here depends on T f_D only


def spectra():
    """Each spectrum with its default M; the Gaussian with sigma = f_D / 2 (an example: sigma_hz is required)."""
    return [(DopplerSpectrum("classical", FD), DEFAULT_SINUSOIDS), (DopplerSpectrum("flat", FD), DEFAULT_SINUSOIDS),
            (DopplerSpectrum("gaussian", FD, FD / 2.0), GAUSSIAN_SINUSOIDS)]


def cdf(spectrum, f):
    """G(f), the one-sided Doppler law, by inverting the generator's own quantile."""
    return optimize.brentq(lambda u: float(_sos.quantile(spectrum, u)) - f, 0.0, 1.0, xtol=1e-15, rtol=1e-14)


def mean_sd(spectrum, duration):
    """sd of the time average of one quadrature (power 1/2) of a Gaussian process: sqrt(E[sinc^2(F T)]/2)."""
    def integrand(u):
        return np.sinc(float(_sos.quantile(spectrum, u)) * duration) ** 2
    # sharp near u = 0: split the range where the sinc's first zeros fall
    edges = sorted({0.0, *(min(cdf(spectrum, k / duration), 1.0) for k in (1, 4, 16, 64, 256)
                           if k / duration < FD), 1.0})
    total = sum(integrate.quad(integrand, a, b, limit=400)[0] for a, b in itertools.pairwise(edges))
    return math.sqrt(total / 2.0)


def draw(spectrum, m, rng, version):
    """Frequencies (Hz) and phases (cycles) of both quadratures, as the generator draws them."""
    _, (fc, pc), (fs, ps) = _sos.draw_sinusoids(spectrum, m, rng)
    if version == 3:  # version 3: u_1 uniform on (0, 1/M]; the other strata are the same
        fc[0], fs[0] = (float(_sos.quantile(spectrum, rng.uniform() / m)) for _ in range(2))
    return (fc, pc), (fs, ps)


def time_average(freq, phase, duration):
    x = 2.0 * np.pi * freq * duration
    return np.sum((np.sin(x + 2.0 * np.pi * phase) - np.sin(2.0 * np.pi * phase)) / x) / math.sqrt(freq.size)


def autocorrelation_change(spectrum, m, duration):
    """max over lags < T of |r_4(tau) - r(tau)|, one quadrature's normalised ensemble autocorrelation."""
    tau = np.concatenate([np.linspace(0.0, 3.0 / FD, 301), np.linspace(3.0 / FD, duration, 20001)])
    u = (np.arange(4000) + 0.5) / 4000.0
    old = np.mean(np.cos(2 * np.pi * np.outer(tau, _sos.quantile(spectrum, u / m))), axis=1)
    new = np.mean(np.cos(2 * np.pi * np.outer(tau, _sos.quantile(spectrum, (1.0 + u) / (2.0 * m)))), axis=1)
    change = np.abs(new - old) / m
    return float(np.max(change)), float(np.max(change[:301]))


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--draws", type=int, default=20000, help="taps drawn per spectrum, T f_D and version")
    parser.add_argument("--checks", type=int, default=174, help="checks per bundle (Holm's first step: 0.01 / checks)")
    parser.add_argument("--kinds", default="classical,flat,gaussian", help="spectra (comma-separated)")
    parser.add_argument("--products", default="1e3,5e3,5e4", help="record lengths T f_D (comma-separated)")
    parser.add_argument("--plot", default=None, help="write a figure of the tails to this PNG")
    args = parser.parse_args(argv)

    limit = stats.gamma(2).isf(0.01 / args.checks)  # the phase statistic's failing value
    print(f"phase_uniformity fails a bundle of {args.checks} checks (Holm, 1 %) when z^2 > {limit:.2f} "
          f"(Gamma(2,1) tail {0.01 / args.checks:.1e})")
    tails = {}
    for spectrum, m in (s for s in spectra() if s[0].kind in args.kinds.split(",")):
        print(f"\n{spectrum.kind} spectrum, M = {m} per quadrature; lowest frequency of version 4 "
              f">= G^-1(1/(2M)) = {_sos.lowest_frequency(spectrum, m) / FD:.3e} f_D")
        for tfd in (float(x) for x in args.products.split(",")):
            duration = tfd / FD
            sd = mean_sd(spectrum, duration)
            probs = []
            for c in (1.0, 3.0, 10.0):
                g = cdf(spectrum, c / duration) if c / duration < FD else 1.0
                probs.append(f"c={c:g}: v3 {min(1.0, m * g):.4f}, v4 {max(0.0, min(1.0, 2 * m * g - 1)):.4f}")
            print(f"  T f_D = {tfd:g}: P(lowest |f| < c/T) per quadrature: " + "; ".join(probs))
            print(f"    Gaussian sd of the mean per quadrature {sd:.3e} "
                  f"(classical large-T form sqrt(1/(2 pi f_D T)) = {math.sqrt(1 / (2 * math.pi * tfd)):.3e}); "
                  f"lowest v4 sinusoid's largest mean / sd = "
                  f"{1 / math.sqrt(m) / (math.pi * _sos.lowest_frequency(spectrum, m) * duration) / sd:.3f}")
            for version in (3, 4):
                rng = np.random.default_rng([int(tfd), version, m])
                z2 = np.empty(args.draws)
                for i in range(args.draws):
                    (fc, pc), (fs, ps) = draw(spectrum, m, rng, version)
                    z2[i] = (time_average(fc, pc, duration) ** 2 + time_average(fs, ps, duration) ** 2) / sd**2 / 2
                stat = z2 + rng.exponential(size=args.draws)  # + the second moment's share
                per_tap = float(np.mean(stat > limit))
                ci = stats.binomtest(int(np.sum(stat > limit)), args.draws).proportion_ci(method="exact")
                print(f"    v{version}: mean z^2 {np.mean(z2):.3f} (Gaussian 1), P(z^2 > 10) {np.mean(z2 > 10):.2e} "
                      f"(Gaussian {math.exp(-10):.1e}), taps failing {per_tap:.2e} [{ci.low:.1e}, {ci.high:.1e}] "
                      f"(Gaussian {0.01 / args.checks:.1e}); bundles failing: 12 taps "
                      f"{1 - (1 - per_tap) ** 12:.3f}, 16 links {1 - (1 - per_tap) ** 16:.3f}")
                tails[(spectrum.kind, tfd, version)] = np.sort(z2)
            every, checked = autocorrelation_change(spectrum, m, duration)
            print(f"    v4's largest autocorrelation change: {every:.2e} over lags < T, "
                  f"{checked:.2e} over lags <= 3/f_D (verify's)")
    if args.plot:
        import matplotlib
        matplotlib.use("Agg")
        import matplotlib.pyplot as plt
        fig, ax = plt.subplots(figsize=(6, 4))
        for (kind, tfd, version), z2 in tails.items():
            if tfd == 5e4:
                ax.semilogy(z2, 1.0 - np.arange(z2.size) / z2.size, label=f"{kind}, v{version}",
                            ls="-" if version == 4 else "--")
        x = np.linspace(0, 40, 200)
        ax.semilogy(x, np.exp(-x), "k:", label="Gaussian process: Exp(1)")
        ax.set_xlabel("|mean g|^2 / var (T f_D = 5e4)")
        ax.set_ylabel("P(exceeds)")
        ax.set_xlim(0, 40)
        ax.set_ylim(1.0 / args.draws, 1)
        ax.legend(fontsize=7)
        fig.tight_layout()
        fig.savefig(args.plot, dpi=100)
        print(f"\nwrote {args.plot}")


if __name__ == "__main__":
    main()
