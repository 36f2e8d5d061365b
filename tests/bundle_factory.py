"""Valid bundles from gains the tests construct, for tests that need a bundle on disk.

The compile command is not needed: :func:`make_bundle` writes any complex
gains of shape (n_samples, n_rx, n_tx, n_taps) through
:func:`emucompile.bundle.store.write_bundle` with the manifest fields that
:meth:`emucompile.bundle.store.BundleWriter.finish` documents, and a FIR map from
:func:`emucompile.models.grid.fir_map` when a sample rate is given. The processes:

- :func:`static_gains`: constant gains;
- :func:`tone_gains`: one complex exponential per tap, exactly known at any time;
- :func:`circulant_gaussian_gains`: a seeded complex Gaussian process with a
  classical (Clarke 1968) or Gaussian Doppler spectrum, synthesised on the
  DFT grid of the record (Young & Beaulieu 2000, IEEE Trans. Commun. 48(7),
  the inverse-DFT method): periodic with the record's length, with the exact
  autocorrelation r[k] = sum_b p_b exp(j 2 pi b k / N) of its bin powers p_b.

The scenario is invented for the tests.
"""

from __future__ import annotations

import math

import numpy as np

from emucompile.bundle import store as bd
from emucompile.models import grid

PROFILE = {"format_version": 1, "name": "apply-test-scenario", "description": "invented for the tests"}


def make_bundle(path, gains, *, update_rate_hz, delays_s=None, powers_linear=None, fading="rayleigh",
                max_doppler_hz=10.0, sample_rate_hz=None, delay_mapping="sinc", fir_matrix=None,
                periodic=False, target=None, seed=1, chunk=4096):
    """Write ``gains`` (n_samples, n_rx, n_tx, n_taps) as a bundle at ``path``; return the path.

    Parameters
    ----------
    delays_s, powers_linear : sequence of float, optional
        The taps' delays (default 0 for all) and nominal mean powers (default
        the measured mean |g|^2 of each tap over all links).
    fading : str or sequence of str
        Fading kind written for each tap in the manifest.
    sample_rate_hz : float, optional
        Adds the FIR map made by :func:`emucompile.models.grid.fir_map` at this rate
        (``delay_mapping``), unless ``fir_matrix`` gives the matrix itself.
    target : dict, optional
        The manifest's ``target`` record (e.g. ``{"between_updates": "hold"}``).
    """
    gains = np.ascontiguousarray(gains, dtype=np.complex64)
    n, n_rx, n_tx, n_taps = gains.shape
    delays = [0.0] * n_taps if delays_s is None else [float(d) for d in delays_s]
    if powers_linear is None:
        powers = np.mean(np.abs(gains.astype(np.complex128)) ** 2, axis=(0, 1, 2)).tolist()
    else:
        powers = [float(p) for p in powers_linear]
    kinds = [fading] * n_taps if isinstance(fading, str) else list(fading)
    fir_entry = None
    matrix = None
    if fir_matrix is not None:
        matrix = np.asarray(fir_matrix, dtype=float)
        fir_entry = {
            "sample_rate_hz": float(sample_rate_hz), "n_fir": matrix.shape[1], "delay_mapping": "nearest",
            "bulk_delay_samples": 0, "energy_kept": 1.0, "rms_delay_spread_s": 0.0,
        }
    elif sample_rate_hz is not None:
        mapped = grid.fir_map(delays, powers if any(powers) else [1.0] * n_taps, sample_rate_hz, mapping=delay_mapping)
        matrix = mapped.matrix
        fir_entry = mapped.manifest_entry()
    layout = bd.BundleLayout(n_samples=n, n_taps=n_taps, update_rate_hz=update_rate_hz, n_rx=n_rx, n_tx=n_tx,
                             fir_map=matrix)
    taps = [
        {
            "delay_s": delays[i],
            "power_db": 10.0 * math.log10(powers[i]) if powers[i] > 0 else None,
            "fading": kinds[i], "k_db": None,
            "max_doppler_hz": None if kinds[i] == "static" else float(max_doppler_hz),
            "los_doppler_hz": 0.0 if kinds[i] == "static" else None,
            "los_phase_deg": 0.0 if kinds[i] == "static" else None,
            "spectrum": None if kinds[i] == "static" else "classical",
        }
        for i in range(n_taps)
    ]
    fields = {
        "generator_version": "test", "profile_sha256": "a" * 64, "resolved_profile_sha256": "b" * 64,
        "profile": PROFILE, "seed": seed, "method": "doppler-filter", "generator": {"note": "tests/bundle_factory.py"},
        "duration_s": n / update_rate_hz, "periodic": bool(periodic), "taps": taps,
        "mimo": None if n_rx * n_tx == 1 else {"model": "constructed by the test"}, "fir": fir_entry,
    }
    if target is not None:
        fields["target"] = target
    chunks = (gains[s:s + chunk] for s in range(0, n, chunk))
    return bd.write_bundle(path, layout, chunks, fields, threaded=False)


def static_gains(n_samples, amplitudes, *, n_rx=1, n_tx=1):
    """Constant gains: tap i is ``amplitudes[i]`` on every link."""
    values = np.asarray(amplitudes, dtype=np.complex128)
    return np.broadcast_to(values, (n_samples, n_rx, n_tx, values.size)).astype(np.complex64)


def tone_gains(n_samples, update_rate_hz, frequency_hz, *, amplitude=1.0):
    """One tap, g[k] = amplitude exp(j 2 pi f k / update_rate): (n_samples, 1, 1, 1)."""
    k = np.arange(n_samples)
    return (amplitude * np.exp(2j * np.pi * frequency_hz * k / update_rate_hz)).astype(np.complex64)[:, None, None, None]


def doppler_bin_powers(n_samples, update_rate_hz, max_doppler_hz, spectrum="classical", sigma_hz=None):
    """Power p_b of each DFT bin (numpy FFT order) of a unit-power Doppler spectrum; sum p_b = 1.

    ``classical``: the exact integral of S(f) = 1 / (pi f_D sqrt(1 - (f/f_D)^2))
    over each bin, (asin(f_hi/f_D) - asin(f_lo/f_D)) / pi (Clarke 1968).
    ``gaussian``: exp(-f^2 / (2 sigma^2)) at the bin centres, normalised.
    """
    width = update_rate_hz / n_samples
    centre = np.fft.fftfreq(n_samples, d=1.0 / update_rate_hz)
    if spectrum == "classical":
        low = np.clip((centre - width / 2) / max_doppler_hz, -1.0, 1.0)
        high = np.clip((centre + width / 2) / max_doppler_hz, -1.0, 1.0)
        powers = (np.arcsin(high) - np.arcsin(low)) / math.pi
    elif spectrum == "gaussian":
        powers = np.exp(-centre**2 / (2.0 * sigma_hz**2))
    else:
        raise ValueError(spectrum)
    return powers / powers.sum()


def circulant_gaussian_gains(n_samples, update_rate_hz, max_doppler_hz, seed, *, shape=(1, 1, 1), power=1.0,
                             spectrum="classical", sigma_hz=None):
    """A periodic complex Gaussian process per (rx, tx, tap), independent across them.

    g[k] = sqrt(power) sum_b sqrt(p_b) W_b exp(j 2 pi b k / N), W_b iid CN(0, 1)
    from ``numpy.random.default_rng(seed)``: E|g|^2 = power, autocorrelation
    E[g[k + l] conj(g[k])] = power sum_b p_b exp(j 2 pi b l / N) exactly.

    Returns
    -------
    gains : complex64 (n_samples, *shape)
    bin_powers : float64 (n_samples,)
    """
    p = doppler_bin_powers(n_samples, update_rate_hz, max_doppler_hz, spectrum, sigma_hz)
    rng = np.random.default_rng(seed)
    size = (n_samples, *shape)
    w = (rng.standard_normal(size) + 1j * rng.standard_normal(size)) / math.sqrt(2.0)
    amplitude = np.sqrt(p * power).reshape((n_samples,) + (1,) * len(shape))
    gains = np.fft.ifft(amplitude * w, axis=0) * n_samples
    return gains.astype(np.complex64), p


def effective_independent_samples(bin_powers):
    """N_eff = 1 / sum_b p_b^2 = N / sum_l |r[l]|^2 (Parseval): independent samples the record is worth.

    The squared envelope of a circular complex Gaussian process has
    autocovariance |r[l]|^2, so a mean over the record has the variance of a
    mean of N_eff independent samples.
    """
    return 1.0 / float(np.sum(np.asarray(bin_powers) ** 2))
