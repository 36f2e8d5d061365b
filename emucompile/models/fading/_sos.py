"""The sum-of-sinusoids generator (random phases, random angles).

Zheng & Xiao's improved model [ZX2002]_ (their eqs. (8)-(9) as numbered in
secondary sources; we did not have the letter itself to check the numbers)
builds a Rayleigh process with M sinusoids per quadrature::

    X_c(t) = sqrt(2/M) sum_n cos(w_d t cos(a_n) + phi_n)
    X_s(t) = sqrt(2/M) sum_n cos(w_d t sin(a_n) + psi_n),
    a_n = (2 pi n - pi + theta) / (4 M),  n = 1..M,

with theta, phi_n, psi_n independent and uniform on [-pi, pi). We scale by
1/sqrt(2) for unit mean power (g = (X_c + j X_s)/sqrt 2). Its ensemble
autocorrelation is J0(w_d tau) for any M; a single realisation's time
average approaches it as M grows, and its envelope is Rayleigh only as M
grows (the sum of M sinusoids is not Gaussian).

Generalisation to any symmetric spectrum (ours): f_D cos(a_n) and
f_D sin(a_n) are the quantiles G^-1(u) of the one-sided Doppler law
G(x) = 2 int_0^x S(f) df at stratified points (for the classical spectrum
G^-1(u) = f_D sin(pi u / 2), which gives the frequencies above).

Angles (generator version 3): every sinusoid of every quadrature, tap and
link has its own offset theta_n (u_n = (n - 1/2 + theta_n/(2 pi))/M,
stratified sampling), the per-sinusoid random angles of Xiao, Zheng &
Beaulieu's improved model [XZB2006]_ (recalled from memory, not checked
against the paper) kept inside Zheng & Xiao's strata. Up to version 2 the
classical spectrum had one theta per tap and link, as in [ZX2002]_: two taps
whose theta happened to be close had nearly the same frequency set, and
same-frequency terms do not average out over a record, so "uncorrelated"
taps and links correlated at ~1/sqrt(M) (measured: up to 0.085 between 4x4
links at T f_D = 5e4 with M = 256). With independent offsets two streams share
no frequency but by chance, and their time-average cross-correlation falls as
for independent Gaussian processes, ~ (int S^2 df / T)^(1/2) (tested). The
flat and Gaussian spectra always had independent offsets (with one common
theta the flat spectrum's frequencies lie on an arithmetic grid: periodic
realisation, envelope KS 0.02 at M = 128). The ensemble autocorrelation
stays exact for every spectrum and M; a single realisation's time-average
autocorrelation now errs like the flat spectrum's, ~M^-1.5, instead of the
single-theta classical quadrature's rounding-level error.

The lowest stratum (generator version 4): u_1 is uniform on [1/(2M), 1/M],
the stratum's upper half, so each quadrature's lowest sinusoid is at least
G^-1(1/(2M)) from 0 Hz (classical: f_D sin(pi/(4M)), the lowest line of
Patzold's method of exact Doppler spread [P2002]_, recalled from memory;
0.0031 f_D at M = 256). Up to version 3 u_1 was uniform on (0, 1/M]: a
quadrature then had a sinusoid within c/T of 0 Hz with probability M G(c/T)
(classical ~2 M c/(pi T f_D): 1 % at M = 256, T f_D = 5e4, c = 3), a
constant offset over the record of up to 1/sqrt(M) = 0.0625 where a
Gaussian process's mean has sd ~(2 pi f_D T)^-1/2 = 0.0018; verify's
``phase_uniformity`` failed such taps (3 of 12 bundles of 12 taps or 16
links at T f_D = 5e4). No placement with the exact ensemble spectrum can
avoid it: the expected number of lines below c/T is M G(c/T) whatever the
placement. What version 4 changes, exactly: in each quadrature a fraction
1/(2M) of the power moves from |f| < G^-1(1/(2M)) to [G^-1(1/(2M)),
G^-1(1/M)) (the ensemble spectrum is 0 near 0 Hz, twice the law's density
in the rest of the lowest stratum, exact elsewhere); the normalised
ensemble autocorrelation moves by <= 0.67/M at any lag (2.6e-3 at M = 256,
at lags ~1/(2 G^-1(1/(2M)))) and by < 1e-5 over the lags <= 3/f_D that
verify checks; a record's mean varies less than a Gaussian process's (at
T f_D = 5e4, M = 256 its variance is ~1e-3 of the Gaussian's) instead of
having a heavy tail. Figures: ``tools/sos_near_dc.py``. Measured with
version 4 (``tools/calibrate_verify_false_alarm.py``, T f_D = 5e4, 80 Hz,
f_D 10 Hz): 0 of 130 twelve-tap bundles failed verify (95 % CI [0, 0.028]),
1 of 70 4x4 (CI [0.0004, 0.077]; an autocorrelation check, failed by
version 3 on that seed too); largest |rho_hat| 0.0165 between taps, 0.0187
between links.

Evaluation: exactly (float64 phase arithmetic on an integer grid of 2^-52
cycles per sample, so the phase at any absolute index is exact) at the
chain's internal rate, on a fixed block grid, with each amplitude divided by
the chain's response at its frequency; then the same interpolation chain as
the doppler-filter generator. With ``evaluation="exact"`` the sinusoids are
summed at the update rate itself (no interpolation; ~R times dearer).

References
----------
.. [ZX2002] Y. R. Zheng and C. Xiao, "Improved models for the generation of
   multiple uncorrelated Rayleigh fading waveforms", IEEE Commun. Letters
   6(6), pp. 256-258, 2002.
.. [XZB2006] C. Xiao, Y. R. Zheng and N. C. Beaulieu, "Novel sum-of-sinusoids
   simulation models for Rayleigh and Rician fading channels", IEEE Trans.
   Wireless Commun. 5(12), 2006.
.. [P2002] M. Patzold, "Mobile Fading Channels", Wiley, 2002 (method of exact
   Doppler spread: f_n = f_D sin(pi (n - 1/2) / (2N)); recalled from memory).
"""

from __future__ import annotations

import math

import numpy as np

from emucompile.models.fading._design import Chain, internal_block_limit
from emucompile.models.fading._streams import SINUSOIDS, BoundedCache, generator
from emucompile.models.fading._synthesis import BlockSource, apply_chain
from emucompile.models.theory import DopplerSpectrum

SOS_BLOCK = 1024  # internal samples per synthesis block
PHASE_BITS = 52
_PHASE_MASK = np.uint64((1 << PHASE_BITS) - 1)
_PHASE_SCALE = 2.0**-PHASE_BITS
#: u_1 >= LOWEST_POINT / M: the lowest sinusoid of each quadrature is at least G^-1(1/(2M)) from
#: 0 Hz (f_D sin(pi/(4M)) for the classical spectrum, the lowest line of Patzold's MEDS).
LOWEST_POINT = 0.5


def quantile(spectrum: DopplerSpectrum, u):
    """G^-1(u): the frequency below which a fraction u of the one-sided power lies."""
    return spectrum.quantile(u)


def draw_sinusoids(spectrum: DopplerSpectrum, n_sinusoids: int, rng: np.random.Generator):
    """Frequencies (Hz) and initial phases (cycles) of both quadratures [ZX2002]_, [XZB2006]_.

    Draw order, fixed (generator version 3): theta (drawn and reported, no
    longer used for the angles), the M phases of X_c, the M of X_s, then the
    2M per-sinusoid angle offsets, for every spectrum.
    """
    theta = rng.uniform(-np.pi, np.pi)
    phase_c = rng.uniform(-np.pi, np.pi, n_sinusoids) / (2.0 * np.pi)
    phase_s = rng.uniform(-np.pi, np.pi, n_sinusoids) / (2.0 * np.pi)
    freq_c = quantile(spectrum, stratified_points(0.5 - rng.uniform(-0.5, 0.5, n_sinusoids)))
    freq_s = quantile(spectrum, stratified_points(0.5 - rng.uniform(-0.5, 0.5, n_sinusoids)))
    return theta, (freq_c, phase_c), (freq_s, phase_s)


def stratified_points(position: np.ndarray) -> np.ndarray:
    """The points u_n in (0, 1] of one quadrature, from each sinusoid's position in its stratum.

    u_n = (n - 1 + position_n)/M (``position`` in [0, 1], uniform), except the lowest stratum,
    which keeps to its upper half: u_1 = (1 + position_1)/(2M) >= 1/(2M) (generator version 4,
    :data:`LOWEST_POINT`; see the module's docstring). Classical spectrum: Zheng & Xiao's a_n [ZX2002]_ with an offset
    per sinusoid [XZB2006]_.
    """
    m = position.size
    u = (np.arange(m) + position) / m
    u[0] = (LOWEST_POINT + (1.0 - LOWEST_POINT) * position[0]) / m
    return u


def lowest_frequency(spectrum: DopplerSpectrum, n_sinusoids: int) -> float:
    """The least |frequency| (Hz) a sinusoid of either quadrature can have: G^-1(1/(2M))."""
    return float(quantile(spectrum, LOWEST_POINT / n_sinusoids))


class SumOfSinusoidsSource(BlockSource):
    """A tap's diffuse process as a sum of sinusoids, evaluated on a block grid."""

    def __init__(
        self,
        spectrum: DopplerSpectrum,
        chain: Chain,
        n_sinusoids: int,
        seed: int,
        tap: int,
        internal_period: int | None,
    ):
        super().__init__()
        self.spectrum = spectrum
        self.chain = chain
        self.n_sinusoids = n_sinusoids
        self.seed = seed
        self.tap = tap
        self.internal_period = internal_period
        self.block = min(SOS_BLOCK, internal_block_limit(chain.rates))
        self.output_block = self.block * chain.rates.total
        self._links = BoundedCache(2)

    def _constants(self, link: int) -> dict:
        self._links.admit(link)
        return self._links.get(link, lambda: self._make_constants(link))

    def _make_constants(self, link: int) -> dict:
        rng = generator(self.seed, SINUSOIDS, link, self.tap)
        theta, quad_c, quad_s = draw_sinusoids(self.spectrum, self.n_sinusoids, rng)
        rate = self.chain.rates.internal_rate_hz
        n_y = self.block + 2 * self.chain.margin1 + 1
        k = np.arange(n_y, dtype=np.uint64)
        steps, phases, amplitudes, tables = [], [], [], []
        for freq, phase in (quad_c, quad_s):
            step = self._phase_steps(freq / rate)
            used_freq = step.astype(np.float64) * _PHASE_SCALE * rate
            response = self.chain.amplitude_response(used_freq)
            steps.append(step)
            phases.append(phase)
            amplitudes.append(1.0 / (math.sqrt(self.n_sinusoids) * response))
            cycles = ((k[:, None] * step[None, :]) & _PHASE_MASK).astype(np.float64) * _PHASE_SCALE
            angle = 2.0 * np.pi * cycles
            tables.append(np.concatenate([np.cos(angle), np.sin(angle)], axis=1).astype(np.float32))
        return {"theta": theta, "steps": steps, "phases": phases, "amplitudes": amplitudes,
                "tables": tables}

    def _phase_steps(self, cycles_per_sample: np.ndarray) -> np.ndarray:
        """Phase increments as integers of 2^-52 cycles (periodic: whole cycles per period)."""
        period = self.internal_period
        if period is None:
            return np.round(cycles_per_sample * 2.0**PHASE_BITS).astype(np.uint64)
        turns = np.round(cycles_per_sample * period).astype(np.int64)
        return np.array([((int(t) << PHASE_BITS) + period // 2) // period for t in turns], np.uint64)

    def _synthesise(self, index: int, link: int, out: np.ndarray) -> np.ndarray:
        c = self._constants(link)
        m1 = self.chain.margin1
        start = index * self.block - m1
        if self.internal_period is not None:
            start %= self.internal_period
        start_u = np.uint64(start % (1 << 64))
        y = self.work.get("sum", (self.block + 2 * m1 + 1,), np.complex64)
        for part, step, phase, amplitude, table in zip(
            (y.real, y.imag), c["steps"], c["phases"], c["amplitudes"], c["tables"]
        ):
            cycles = ((step * start_u) & _PHASE_MASK).astype(np.float64) * _PHASE_SCALE + phase
            angle = 2.0 * np.pi * cycles
            coef = np.concatenate([amplitude * np.cos(angle), -amplitude * np.sin(angle)])
            # cos(2 pi (psi + t)) = cos 2 pi psi cos 2 pi t - sin 2 pi psi sin 2 pi t, summed
            # over the sinusoids by einsum's own loop (no BLAS, whose threads could
            # change the rounding).
            np.einsum("kn,n->k", table, coef.astype(np.float32), out=part)
        return apply_chain(self.chain, y, self.block, self.work, out)
