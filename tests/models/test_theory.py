"""The closed forms of :mod:`emucompile.models.theory` against independent references.

The spectra's own closed forms are checked in ``test_spectra.py``; the engine against
these closed forms in ``test_fading_statistics.py``. Here each envelope and level-crossing
formula is compared with a reference computed another way:

* envelope laws: the Rician density written out (Rice 1944; Proakis, *Digital
  Communications*, 4th ed., eq. 2.1-141 — equation number from memory) integrated by
  ``scipy.integrate.quad``, and the moments E|g|^2 = Omega;
* level-crossing rate: Rice's formula N(r) = integral of rdot p(r, rdot) drdot evaluated by
  two-dimensional quadrature over the joint density of a Gaussian gain and its derivative
  (Rice 1944, §3.3), against Jakes' Rayleigh form sqrt(2 pi) f_D rho exp(-rho^2) (Jakes 1974)
  and Stüber's Rician form (Stüber, *Principles of Mobile Communication*, 2nd ed., §2.1.4);
* average fade duration: P(R <= r) / N(r) against Jakes' (exp(rho^2) - 1) / (rho f_D sqrt(2 pi));
* Doppler from speed: f_D = v f_c / c with c exact (SI definition of the metre).

Tolerances: quadrature to 1e-9 relative where the integrand is smooth (quad's requested
accuracy is 1e-11; the margin is common practice); the 256-point trapezoid rule of
``level_crossing_rate`` is spectrally accurate for its periodic integrand, so it is held to
1e-8 relative against the two-dimensional reference.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate, special

from emucompile.models import theory

FD = 100.0
RMS_CLASSICAL = FD / math.sqrt(2.0)  # the classical spectrum's RMS Doppler: f_D / sqrt 2 (Jakes 1974)


def _rician_pdf(r, k, omega=1.0):
    """The Rician density written out: 2 (K+1) r / Omega exp(-K - (K+1) r^2 / Omega) I0(2 r sqrt(K (K+1) / Omega))."""
    x = 2.0 * r * math.sqrt(k * (k + 1.0) / omega)
    return 2.0 * (k + 1.0) * r / omega * math.exp(-k - (k + 1.0) * r * r / omega + x) * special.i0e(x)


@pytest.mark.parametrize("k", [0.0, 0.5, 3.0, 20.0])
@pytest.mark.parametrize("omega", [1.0, 0.25])
def test_the_envelope_law_is_the_rician_density_with_mean_power_omega(k, omega):
    law = theory.envelope_distribution(k, omega)
    for r in (0.05, 0.4, 1.0, 1.7):
        level = r * math.sqrt(omega)
        assert float(law.pdf(level)) == pytest.approx(_rician_pdf(level, k, omega), rel=1e-9)
        expected_cdf, _ = integrate.quad(_rician_pdf, 0.0, level, args=(k, omega), epsabs=1e-14, epsrel=1e-11)
        assert float(law.cdf(level)) == pytest.approx(expected_cdf, rel=1e-9)
    assert float(law.moment(2)) == pytest.approx(omega, rel=1e-9)


def _rice_reference(rho, k, rms_doppler_hz, los_doppler_hz):
    """N(r) by quadrature of Rice's formula over the phase of the gain and the envelope slope.

    g = A e^{j w t} + s(t), s circular Gaussian of per-quadrature variance sigma^2 and
    derivative variance sigma_d^2 = (2 pi f_rms sigma)^2 per quadrature. Given the envelope r
    and the phase theta against the direct part, the slope rdot is Gaussian with mean
    w A sin(theta) and standard deviation sigma_d; N(r) = int p(r, theta) E[rdot+ | r, theta] dtheta,
    the inner expectation integrated numerically over rdot here (not in closed form).
    """
    sigma = math.sqrt(1.0 / (2.0 * (k + 1.0)))
    amplitude = math.sqrt(k / (k + 1.0))
    sigma_d = 2.0 * math.pi * rms_doppler_hz * sigma
    omega = 2.0 * math.pi * los_doppler_hz
    r = rho

    def inner(theta):
        density = r / (2.0 * math.pi * sigma**2) * math.exp(
            -(r * r + amplitude**2 - 2.0 * r * amplitude * math.cos(theta)) / (2.0 * sigma**2))
        mean = omega * amplitude * math.sin(theta)
        positive, _ = integrate.quad(
            lambda v: v * math.exp(-((v - mean) ** 2) / (2.0 * sigma_d**2)) / (math.sqrt(2.0 * math.pi) * sigma_d),
            0.0, math.inf, epsabs=1e-14, epsrel=1e-11)
        return density * positive

    value, _ = integrate.quad(inner, 0.0, 2.0 * math.pi, limit=200, epsabs=1e-14, epsrel=1e-11)
    return value


@pytest.mark.parametrize("rho", [0.1, 0.5, 1.0, 1.6])
def test_the_rayleigh_crossing_rate_is_jakes_form(rho):
    jakes = math.sqrt(2.0 * math.pi) * FD * rho * math.exp(-rho * rho)
    assert float(theory.level_crossing_rate(rho, rms_doppler_hz=RMS_CLASSICAL)) == pytest.approx(jakes, rel=1e-12)
    assert _rice_reference(rho, 0.0, RMS_CLASSICAL, 0.0) == pytest.approx(jakes, rel=1e-8)


@pytest.mark.parametrize("k", [0.5, 3.0, 10.0])
@pytest.mark.parametrize("rho", [0.3, 1.0, 1.4])
def test_a_static_direct_part_gives_stubers_form(k, rho):
    computed = float(theory.level_crossing_rate(rho, rms_doppler_hz=RMS_CLASSICAL, k_linear=k))
    stuber = float(theory.level_crossing_rate_rician_static_los(rho, rms_doppler_hz=RMS_CLASSICAL, k_linear=k))
    x = 2.0 * rho * math.sqrt(k * (k + 1.0))
    written_out = math.sqrt(2.0 * math.pi * (k + 1.0)) * FD * rho * math.exp(-k - (k + 1.0) * rho**2) * special.i0(x)
    assert stuber == pytest.approx(written_out, rel=1e-12)
    assert computed == pytest.approx(stuber, rel=1e-8)


@pytest.mark.parametrize("k", [1.0, 5.0])
@pytest.mark.parametrize("los_fraction", [0.3, 0.9])
def test_a_turning_direct_part_matches_rices_integral(k, los_fraction):
    for rho in (0.5, 1.0, 1.3):
        computed = float(theory.level_crossing_rate(rho, rms_doppler_hz=RMS_CLASSICAL, k_linear=k,
                                                    los_doppler_hz=los_fraction * FD))
        assert computed == pytest.approx(_rice_reference(rho, k, RMS_CLASSICAL, los_fraction * FD), rel=1e-8)
    # a turning direct part raises the rate over a static one (Xiao, Zheng & Beaulieu 2006)
    turning = theory.level_crossing_rate(1.0, rms_doppler_hz=RMS_CLASSICAL, k_linear=k, los_doppler_hz=0.9 * FD)
    static = theory.level_crossing_rate(1.0, rms_doppler_hz=RMS_CLASSICAL, k_linear=k)
    assert turning > static


@pytest.mark.parametrize("rho", [0.1, 0.5, 1.0])
def test_the_rayleigh_fade_duration_is_jakes_form(rho):
    jakes = (math.exp(rho * rho) - 1.0) / (rho * FD * math.sqrt(2.0 * math.pi))
    assert float(theory.average_fade_duration(rho, rms_doppler_hz=RMS_CLASSICAL)) == pytest.approx(jakes, rel=1e-12)


def test_doppler_from_speed_uses_the_exact_speed_of_light():
    assert theory.SPEED_OF_LIGHT_MPS == 299_792_458.0
    # 120 km/h at 2 GHz: 222.4 Hz (v f_c / c)
    assert theory.doppler_from_speed(120 / 3.6, 2e9) == pytest.approx(120 / 3.6 * 2e9 / 299_792_458.0, rel=1e-15)


def test_bad_arguments_are_refused():
    with pytest.raises(ValueError):
        theory.envelope_distribution(-1.0)
    with pytest.raises(ValueError):
        theory.envelope_distribution(1.0, 0.0)
    assert np.all(theory.level_crossing_rate(np.array([0.0]), rms_doppler_hz=RMS_CLASSICAL, k_linear=2.0) == 0.0)
