"""Emulator targets: the schema, the checks, the fit and its costs.

Independent references: the identities sum_m sinc^2(x+m) = 1 and
sum_m sinc^4(x+m) = (2 + cos 2 pi x)/3 (from sum_m (x+m)^-2 = pi^2/sin^2(pi x),
differentiated twice), Gauss-Chebyshev quadrature for integrals against the
classical spectrum (whose inverse CDF is f_D sin(pi (u - 1/2)), Clarke 1968),
a direct simulation of held / linearly interpolated samples, Bennett 1948's
6.02 b + 1.76 dB for a full-scale sine, and simulated Rayleigh quantisation.
"""

import json
import math
from pathlib import Path

import jsonschema
import numpy as np
import pytest
from scipy import integrate, stats

from emucompile.profile import fit_costs
from emucompile.profile import target as tg
from emucompile.errors import InputError, ProfileError
from emucompile.profile.model import Tap

ROOT = Path(__file__).resolve().parents[2]
FS = 30.72e6


def _db_to_linear(x):
    return 10 ** (x / 10)


# -- the schema ---------------------------------------------------------------------------


def test_schema_is_valid_draft_2020_12():
    packaged = ROOT / "emucompile" / "schemas" / "target-v1.schema.json"
    schema = json.loads(packaged.read_text(encoding="utf-8"))
    assert schema == tg.target_schema()
    jsonschema.Draft202012Validator.check_schema(schema)
    assert schema["$schema"] == "https://json-schema.org/draft/2020-12/schema"
    assert "v1" in schema["$id"]
    assert schema["additionalProperties"] is False
    for name, prop in schema["properties"].items():
        assert prop.get("description"), name
        assert prop.get("examples"), name
        for example in prop["examples"]:
            assert not list(jsonschema.Draft202012Validator(prop).iter_errors(example)), name
    for example in schema["examples"]:
        assert tg.check_target(example) == []


def test_schema_keys_are_the_target_fields():
    fields = set(tg.Target.__dataclass_fields__)
    assert set(tg.target_schema()["properties"]) == fields | {"format_version"}


# -- checking a document ------------------------------------------------------------------


def test_good_target_parses_with_defaults():
    t = tg.parse_target({"sample_rate_hz": 61.44e6, "max_paths": 12, "coefficient_bits": 16})
    assert t == tg.Target(sample_rate_hz=61.44e6, max_paths=12, coefficient_bits=16)
    assert t.delay_step_samples == 1 and t.between_updates == "hold" and t.headroom_db == 12.0
    assert tg.parse_target({"max_fir_coefficients": 8.0}).max_fir_coefficients == 8  # JSON 8.0 is an integer


def test_every_problem_is_reported_with_its_pointer():
    document = {
        "sample_rate_hz": "fast",
        "max_pahts": 4,
        "delay_step_samples": 0,
        "between_updates": "cubic",
        "max_update_rate_hz": math.inf,
    }
    problems = tg.check_target(document, file="bench.yaml", base_pointer="/target")
    by_pointer = {p.pointer: p for p in problems}
    assert set(by_pointer) == {
        "/target/sample_rate_hz",
        "/target/max_pahts",
        "/target/delay_step_samples",
        "/target/between_updates",
        "/target/max_update_rate_hz",
    }
    assert by_pointer["/target/max_pahts"].hint == "did you mean 'max_paths'?"
    assert "finite" in by_pointer["/target/max_update_rate_hz"].message
    assert all(p.severity == "error" and p.file == "bench.yaml" for p in problems)
    with pytest.raises(ProfileError) as caught:
        tg.parse_target(document, file="bench.yaml", base_pointer="/target")
    assert len(str(caught.value).splitlines()) == 5
    assert caught.value.exit_code == 2


def test_semantic_warnings_and_errors():
    warnings = tg.check_target({"max_paths": 9, "max_fir_coefficients": 4, "headroom_db": 6})
    assert [p.severity for p in warnings] == ["warning", "warning"]
    assert tg.parse_target({"max_paths": 9, "max_fir_coefficients": 4}).max_paths == 9  # warnings only
    problems = tg.check_target({"coefficient_bits": 4, "headroom_db": 30})
    assert [p.pointer for p in problems] == ["/headroom_db"]
    assert "no resolution" in problems[0].message
    assert [p.message for p in tg.check_target({})] == ["the target is empty"]
    assert tg.check_target([1, 2])[0].pointer == ""


# -- images from hold / linear updating -----------------------------------------------------------


def test_image_kernels_match_the_closed_form_identities_and_small_x_limits():
    x = np.array([1e-6, 1e-3, 0.01, 0.1, 0.25, 0.4, 0.5])
    np.testing.assert_allclose(fit_costs._image_kernel(x, 1), 1 - np.sinc(x) ** 2, rtol=2e-9, atol=1e-15)
    np.testing.assert_allclose(
        fit_costs._image_kernel(x[2:], 2), (2 + np.cos(2 * np.pi * x[2:])) / 3 - np.sinc(x[2:]) ** 4, rtol=1e-7
    )
    # small x, where the identities cancel: (pi x)^2/3 and (pi x)^4/45
    small = np.array([1e-7, 1e-5])
    np.testing.assert_allclose(fit_costs._image_kernel(small, 1), (np.pi * small) ** 2 / 3, rtol=1e-6)
    np.testing.assert_allclose(fit_costs._image_kernel(small, 2), (np.pi * small) ** 4 / 45, rtol=1e-6)


def _simulated_images(line_freqs, line_powers, update_rate, mode, n_updates=2048, oversample=256):
    """Hold or linearly interpolate samples of a sum of lines on a fine grid; measure by FFT.

    Each line is moved to the nearest frequency bin of the record (so the
    record is periodic and the FFT has no leakage); the bin frequencies are
    returned with the measurement. Power within |f| < f_u/2 is wanted, the
    rest is image. The fine grid's discrete hold and interpolation differ
    from the continuous ones by a relative 1/oversample^2 (hold) and
    10/oversample^2 (linear) in the image power: 1.5e-5 and 1.5e-4 here.
    """
    bins = np.round(np.asarray(line_freqs) / update_rate * n_updates).astype(int)
    power = np.zeros(n_updates)
    np.add.at(power, bins % n_updates, line_powers)
    phases = np.random.default_rng(0).uniform(0, 2 * np.pi, n_updates)
    samples = np.fft.ifft(np.sqrt(power) * np.exp(1j * phases)) * n_updates
    if mode == "hold":
        fine = np.repeat(samples, oversample)
    else:
        r = np.arange(oversample) / oversample
        following = np.roll(samples, -1)
        fine = (samples[:, None] + r[None, :] * (following - samples)[:, None]).reshape(-1)
    fine_power = np.abs(np.fft.fft(fine) / fine.size) ** 2
    k = np.fft.fftfreq(fine.size, d=1.0 / fine.size)  # in units of update_rate / n_updates
    wanted = fine_power[np.abs(k) < n_updates / 2].sum()
    return (fine_power.sum() - wanted) / power.sum(), wanted / power.sum(), bins * update_rate / n_updates


def _kernel_sums(freqs, powers, update_rate, mode):
    order = 1 if mode == "hold" else 2
    x = np.asarray(freqs) / update_rate
    total = np.sum(powers)
    return (np.sum(powers * fit_costs._image_kernel(x, order)) / total,
            np.sum(powers * fit_costs._wanted_kernel(x, order)) / total)


def _check_against_simulation(tap, freqs, powers, update_rate, mode, n_updates=2048):
    """Two steps: the hold/linear kernels against the simulation (at the lines' bin
    frequencies), then the spectrum integral against the lines at the quantiles."""
    image, wanted, binned = _simulated_images(freqs, powers, update_rate, mode, n_updates)
    kernel_image, kernel_wanted = _kernel_sums(binned, powers, update_rate, mode)
    assert kernel_image == pytest.approx(image, rel=5e-4)  # discretisation <= 1.5e-4, margin 3x
    assert kernel_wanted == pytest.approx(wanted, rel=1e-6)  # (pi x / 256)^2 / 3 <= 5e-7
    images = tg.update_images(tap, update_rate, mode)
    # midpoint rule in the CDF variable: the integrand is smooth with zero slope
    # at both ends, so 4096 quantiles are accurate far below this tolerance
    quantile_image, quantile_wanted = _kernel_sums(freqs, powers, update_rate, mode)
    assert images.image_fraction == pytest.approx(quantile_image, rel=1e-7)
    assert images.wanted_fraction == pytest.approx(quantile_wanted, rel=1e-9)
    return images, image / wanted


@pytest.mark.parametrize("mode", ["hold", "linear"])
@pytest.mark.parametrize("ratio", [0.1, 0.03])
def test_update_images_agree_with_direct_simulation_classical(mode, ratio):
    fu, fd = 1000.0, 1000.0 * ratio
    n_lines = 4096
    u = (np.arange(n_lines) + 0.5) / n_lines
    freqs = fd * np.sin(np.pi * (u - 0.5))  # quantiles of the classical spectrum (Clarke 1968)
    tap = Tap(0.0, 1.0, max_doppler_hz=fd)
    images, simulated = _check_against_simulation(tap, freqs, np.full(n_lines, 1.0 / n_lines), fu, mode)
    # the bin rounding of the lines moves the simulated ratio by < 0.5 % here
    assert images.image_to_wanted == pytest.approx(simulated, rel=5e-3)


def test_update_images_of_a_rician_tap_with_a_turning_direct_part():
    fu, fd, f_los, k = 800.0, 40.0, 25.0, 4.0
    n_lines = 4096
    u = (np.arange(n_lines) + 0.5) / n_lines
    freqs = np.append(fd * np.sin(np.pi * (u - 0.5)), f_los)
    powers = np.append(np.full(n_lines, 1 / (k + 1) / n_lines), k / (k + 1))
    tap = Tap(0.0, 1.0, fading="rician", k_linear=k, max_doppler_hz=fd, los_doppler_hz=f_los)
    _check_against_simulation(tap, freqs, powers, fu, "linear", n_updates=3200)


def test_update_images_hold_is_power_preserving_and_static_taps_have_none():
    tap = Tap(0.0, 2.0, spectrum="gaussian", max_doppler_hz=100.0, sigma_hz=10.0)
    images = tg.update_images(tap, 2000.0, "hold")
    # hold keeps the mean power: sum over all m of sinc^2(x+m) = 1
    assert images.wanted_fraction + images.image_fraction == pytest.approx(1.0, abs=1e-12)
    # narrow gaussian: image ~ (pi x_rms)^2 / 3 with x_rms = sigma_rms / f_u (small-x limit)
    x2 = tap.doppler_spectrum.second_moment_hz2 / 2000.0**2
    assert images.image_fraction == pytest.approx(np.pi**2 * x2 / 3, rel=1e-3)
    still = tg.update_images(Tap(0.0, 1.0, fading="static", los_doppler_hz=0.0), 1000.0, "linear")
    assert still.image_fraction == 0.0 and still.wanted_fraction == 1.0
    assert still.image_to_wanted_db == -math.inf


# -- quantisation ------------------------------------------------------------------------------


@pytest.mark.parametrize("bits", [8, 12, 16])
def test_granular_sqnr_is_the_textbook_full_scale_sine_figure(bits):
    # Bennett 1948: 6.02 b + 1.76 dB for a full-scale sine (the rounded
    # constants differ from 20 log10 2 = 6.0206 by 0.01 dB at 16 bits).
    assert tg.granular_sqnr_db(bits, 0.0) == pytest.approx(6.02 * bits + 1.76, abs=0.02)
    # and a simulated sine, rounded to b bits, measures the same: its peak is
    # placed at 8 offsets across the last step below full scale, because the
    # arcsine law piles samples at the peak and the formula's uniform error
    # holds on average over where the peak falls (one offset alone moves it
    # by up to 0.2 dB at 8 bits)
    n = np.arange(125_000)
    step = 1.0 / 2 ** (bits - 1)
    x = np.concatenate([
        (1.0 - step * (0.5 + j / 8)) * np.sin(2 * np.pi * (math.sqrt(2) / 10) * n + j) for j in range(8)
    ])
    q = np.clip(np.round(x / step), -(2 ** (bits - 1)), 2 ** (bits - 1) - 1) * step
    measured = 10 * np.log10(np.mean(x**2) / np.mean((q - x) ** 2))
    assert measured == pytest.approx(6.02 * bits + 1.76, abs=0.1)


@pytest.mark.parametrize("bits, headroom_db", [(8, 12.0), (12, 3.0), (10, 6.0)])
def test_quantisation_sqnr_matches_simulated_rayleigh_coefficients(bits, headroom_db):
    """Complex Gaussian coefficients of unit power, each part rounded to b bits and clipped.

    (8, 12): granular noise only; (12, 3): clipping dominates (4.6 % of parts
    clip); (10, 6): both. Tolerance: 5 standard errors of the measured error
    power (its sample standard deviation / sqrt(n)), so a correct formula
    fails with probability below 1e-6.
    """
    rng = np.random.default_rng(2024)
    n = 400_000
    g = (rng.normal(size=n) + 1j * rng.normal(size=n)) / math.sqrt(2)
    figures = tg.coefficient_quantisation([1.0], bits, headroom_db)
    top = 2 ** (bits - 1)

    def quantise(v):
        return np.clip(np.round(v / figures.step), -top, top - 1) * figures.step

    error = np.abs(quantise(g.real) + 1j * quantise(g.imag) - g) ** 2
    standard_error = error.std() / math.sqrt(n)
    predicted = 10 ** (-figures.strongest_sqnr_db / 10)
    assert abs(error.mean() - predicted) <= 5 * standard_error
    clipped = np.mean(np.abs(g.real) > figures.full_scale)
    assert clipped == pytest.approx(figures.clip_probability, abs=5 * math.sqrt(figures.clip_probability / n) + 1e-6)


def test_quantisation_of_weak_coefficients_costs_their_own_power():
    # a coefficient far below one step is rounded to zero: its error is itself
    figures = tg.coefficient_quantisation([1.0, 1e-12], 12, 12.0)
    noise = fit_costs._quantisation_error_power(np.array([1.0, 1e-12]), figures.full_scale, figures.step)
    assert noise[1] == pytest.approx(1e-12)
    assert figures.sqnr_db == pytest.approx(10 * math.log10((1 + 1e-12) / noise.sum()))


# -- the fit: the acceptance case -------------------------------------------------------------


def _demo_taps():
    """Invented scenario (not from any standard): seven taps, one Rician, 100 Hz classical Doppler."""
    spec = [(0e-9, 0.0), (30e-9, -1.0), (150e-9, -3.0), (310e-9, -6.0), (370e-9, -8.0), (600e-9, -12.0), (850e-9, -17.0)]
    taps = []
    for i, (delay, power_db) in enumerate(spec):
        if i == 0:
            taps.append(Tap(delay, _db_to_linear(power_db), fading="rician", k_linear=_db_to_linear(6.0),
                            max_doppler_hz=100.0, los_doppler_hz=60.0, index=i))
        else:
            taps.append(Tap(delay, _db_to_linear(power_db), max_doppler_hz=100.0, index=i))
    return taps


ACCEPTANCE_TARGET = {
    "sample_rate_hz": FS,
    "max_fir_coefficients": 8,
    "delay_step_samples": 4,
    "max_paths": 5,
    "max_update_rate_hz": 10_000,
    "between_updates": "linear",
    "coefficient_bits": 12,
    "headroom_db": 12,
}


def _gauss_chebyshev_classical(fd, g, n=4000):
    """integral S(f) g(f) df for the classical spectrum: (1/n) sum g(f_D cos((2j-1) pi / 2n))."""
    t = np.cos((2 * np.arange(1, n + 1) - 1) * np.pi / (2 * n))
    return np.mean(g(fd * t))


def test_four_sample_grid_with_eight_coefficients_reports_its_fit_costs():
    taps = _demo_taps()
    fit = tg.fit_to_target(tg.parse_target(ACCEPTANCE_TARGET), taps, update_rate_hz=2000.0)
    costs = fit.costs
    delays = np.array([t.delay_s for t in taps])
    powers = np.array([t.power_linear for t in taps])

    # grid points by hand: 4 samples = 130.2 ns; 30 ns joins 0 ns, 850 ns (point 7) is the 6th path
    cells = np.floor(delays * FS / 4 + 0.5).astype(int)
    assert cells.tolist() == [0, 0, 1, 2, 3, 5, 7]
    assert costs.delay_mapping == "nearest" and costs.delay_step_samples == 4
    assert costs.dropped_taps == (6,)  # the weakest of six paths, limit five
    assert costs.n_paths == 5 and costs.n_coefficients == 6 and costs.n_fir == 21
    assert [m.taps for m in costs.merged] == [(0, 1)]
    merged = costs.merged[0]
    direct = powers[0] * 4 / 5 * _db_to_linear(6) / (1 + _db_to_linear(6)) * 5 / 4
    assert merged.power_linear == pytest.approx(powers[0] + powers[1])
    assert merged.k_linear == pytest.approx(direct / (powers[0] + powers[1] - direct))
    assert merged.fading == "rician"

    # power dropped: the -17 dB tap over the total
    assert costs.power_dropped_fraction == pytest.approx(powers[6] / powers.sum())
    assert costs.power_dropped_db == pytest.approx(-10 * math.log10(1 - powers[6] / powers.sum()))
    assert costs.energy_kept == pytest.approx(1 - powers[6] / powers.sum())

    # delay spread: the kept paths at their grid delays, against the taps as written
    def rms(d, p):
        mean = np.sum(p * d) / p.sum()
        return math.sqrt(np.sum(p * (d - mean) ** 2) / p.sum())

    kept = slice(0, 6)
    grid_delays = cells * 4 / FS
    assert costs.profile_rms_delay_spread_s == pytest.approx(rms(delays, powers), rel=1e-12)
    assert costs.fit_rms_delay_spread_s == pytest.approx(rms(grid_delays[kept], powers[kept]), rel=1e-12)
    assert costs.rms_delay_spread_change_s == pytest.approx(
        rms(grid_delays[kept], powers[kept]) - rms(delays, powers), rel=1e-9
    )
    assert costs.max_abs_delay_error_s == pytest.approx(np.max(np.abs(grid_delays - delays)[kept]))

    # images of linear interpolation at 2 kHz: sum_{m != 0} sinc^4(x + m) = (2 + cos 2 pi x)/3 - sinc^4 x,
    # integrated over the classical spectrum by Gauss-Chebyshev; the direct part a line at 60 Hz
    fu = 2000.0

    def image(f):
        return (2 + np.cos(2 * np.pi * f / fu)) / 3 - np.sinc(f / fu) ** 4

    def wanted(f):
        return np.sinc(f / fu) ** 4

    k = _db_to_linear(6)
    share_direct = np.array([k / (k + 1)] + [0.0] * 6)
    img = share_direct * image(60.0) + (1 - share_direct) * _gauss_chebyshev_classical(100.0, image)
    wnt = share_direct * wanted(60.0) + (1 - share_direct) * _gauss_chebyshev_classical(100.0, wanted)
    ratio = np.sum(powers[kept] * img[kept]) / np.sum(powers[kept] * wnt[kept])
    assert costs.image_to_wanted == pytest.approx(ratio, rel=1e-6)
    assert -60 < costs.image_to_wanted_db < -50  # (pi x)^4/45 with x ~ 100/2000 / sqrt 2: about -54 dB
    assert costs.droop_db == pytest.approx(10 * math.log10(np.sum(powers[kept] * wnt[kept]) / powers[kept].sum()))

    # quantisation: five coefficients well above one step; at 12 dB headroom the
    # strongest still clips a little: E[(|x| - A)^2; |x| > A] per part, by quadrature
    q = costs.quantisation
    strongest = powers[0] + powers[1]
    full_scale = 10 ** (12 / 20) * math.sqrt(strongest)
    step = full_scale / 2**11
    assert q.step == pytest.approx(step)
    part = stats.norm(scale=math.sqrt(strongest / 2))
    clip = 2 * integrate.quad(lambda v: (v - full_scale) ** 2 * part.pdf(v), full_scale, np.inf)[0]
    assert 0 < clip < 0.01 * step**2 / 12
    assert q.strongest_sqnr_db == pytest.approx(10 * math.log10(strongest / (step**2 / 6 + 2 * clip)), abs=1e-6)
    assert q.strongest_sqnr_db == pytest.approx(6.0206 * 12 + 1.7609 - 12, abs=0.01)  # Bennett 1948
    path_powers = np.array([strongest, *powers[2:6]])
    assert q.sqnr_db == pytest.approx(10 * math.log10(path_powers.sum() / (5 * step**2 / 6 + 2 * clip)), abs=1e-6)
    assert q.clip_probability == pytest.approx(math.erfc(10 ** (12 / 20)), rel=1e-9)

    # the fitted map: one 1 per kept tap, on the 4-sample grid; nothing for the dropped one
    columns = np.argmax(fit.fir_map.matrix != 0, axis=1)
    assert columns[:6].tolist() == (cells[:6] * 4).tolist()
    assert not fit.fir_map.matrix[6].any()
    report = costs.to_dict()
    json.dumps(report, allow_nan=False)
    assert report["quantisation"]["bits"] == 12 and report["dropped_taps"] == [6]


def test_fit_chooses_sinc_when_the_target_holds_it_and_shortens_the_window_to_fit():
    taps = _demo_taps()
    wide = tg.fit_to_target(tg.Target(sample_rate_hz=FS), taps, update_rate_hz=4000.0)
    assert wide.costs.delay_mapping == "sinc" and wide.costs.half_length == 16
    assert wide.costs.notes == ()
    # 850 ns is 26.1 samples: a 48-coefficient FIR cannot take L = 16 (58 needed) but takes a shorter window
    short = tg.fit_to_target(tg.Target(sample_rate_hz=FS, max_fir_coefficients=48), taps, update_rate_hz=4000.0)
    assert short.costs.delay_mapping == "sinc"
    assert short.fir_map.n_fir <= 48 and short.costs.half_length < 16
    assert "shortened" in short.costs.notes[0]
    assert short.costs.passband_error_bound > wide.costs.passband_error_bound
    # too short for any sinc of half-length >= 4: nearest, said so; or refused if sinc was asked for
    tiny = tg.Target(sample_rate_hz=FS, max_fir_coefficients=30)
    assert tg.fit_to_target(tiny, taps, update_rate_hz=4000.0).costs.delay_mapping == "nearest"
    with pytest.raises(InputError, match="sinc mapping does not fit"):
        tg.fit_to_target(tiny, taps, update_rate_hz=4000.0, delay_mapping="sinc")


def test_path_limit_drops_weakest_paths_and_ties_keep_the_earlier():
    taps = [Tap(i * 1e-6, p, max_doppler_hz=10.0, index=i) for i, p in enumerate([1.0, 0.25, 0.5, 0.25])]
    fit = tg.fit_to_target(tg.Target(sample_rate_hz=1e6, max_paths=2), taps, update_rate_hz=100.0)
    assert fit.costs.dropped_taps == (1, 3)
    fit = tg.fit_to_target(tg.Target(sample_rate_hz=1e6, max_paths=3), taps, update_rate_hz=100.0)
    assert fit.costs.dropped_taps == (3,)
    assert fit.costs.power_dropped_fraction == pytest.approx(0.25 / 2.0)


def test_merged_static_and_beating_direct_parts_are_flagged():
    taps = [
        Tap(0.0, 1.0, fading="static", los_doppler_hz=0.0, los_phase_deg=0.0, index=0),
        Tap(10e-9, 1.0, fading="static", los_doppler_hz=0.0, los_phase_deg=90.0, index=1),
        Tap(500e-9, 1.0, fading="rician", k_linear=2.0, max_doppler_hz=50.0, los_doppler_hz=20.0, index=2),
        Tap(510e-9, 1.0, fading="rician", k_linear=2.0, max_doppler_hz=50.0, los_doppler_hz=-30.0, index=3),
    ]
    fit = tg.fit_to_target(tg.Target(sample_rate_hz=FS, delay_step_samples=4), taps, update_rate_hz=1000.0)
    first, second = fit.costs.merged
    assert first.fading == "static" and "coherently" in first.remark
    assert second.fading == "rician" and second.k_linear == pytest.approx(2.0)
    assert "beat" in second.remark


# -- refusals ------------------------------------------------------------------------------------


def test_refuses_a_target_whose_update_rate_cannot_reach_nyquist():
    taps = _demo_taps()
    with pytest.raises(InputError, match=r"cannot hold.*150 Hz is below 200 Hz"):
        tg.fit_to_target(tg.Target(sample_rate_hz=FS, max_update_rate_hz=150.0), taps, update_rate_hz=150.0)
    with pytest.raises(InputError, match="below 200 Hz"):
        tg.fit_to_target(tg.Target(sample_rate_hz=FS), taps, update_rate_hz=150.0)
    with pytest.raises(InputError, match="exceeds the target's max_update_rate_hz 1000") as caught:
        tg.fit_to_target(tg.Target(sample_rate_hz=FS, max_update_rate_hz=1000.0), taps, update_rate_hz=3200.0)
    assert "between 200 and 1000" in str(caught.value)


def test_refuses_a_profile_longer_than_the_fir():
    taps = _demo_taps() + [Tap(1050e-9, 0.5, max_doppler_hz=100.0, index=7)]  # 32.3 samples: grid point 8
    target = tg.parse_target({**ACCEPTANCE_TARGET, "max_paths": 8})
    with pytest.raises(InputError, match=r"grid point 8.*8 coefficients every 4 samples") as caught:
        tg.fit_to_target(target, taps, update_rate_hz=2000.0)
    assert "max_fir_coefficients >= 9" in str(caught.value)
    # the path limit may drop the late tap first; then it fits
    weak = _demo_taps() + [Tap(1050e-9, 1e-4, max_doppler_hz=100.0, index=7)]
    fit = tg.fit_to_target(tg.parse_target({**ACCEPTANCE_TARGET, "max_paths": 6}), weak, update_rate_hz=2000.0)
    assert fit.costs.dropped_taps == (7,)


def test_refuses_contradictory_requests():
    taps = _demo_taps()
    coarse = tg.Target(sample_rate_hz=FS, delay_step_samples=4)
    with pytest.raises(InputError, match="delay step of 1 sample"):
        tg.fit_to_target(coarse, taps, update_rate_hz=2000.0, delay_mapping="sinc")
    with pytest.raises(InputError, match="differs from the target's"):
        tg.fit_to_target(coarse, taps, update_rate_hz=2000.0, sample_rate_hz=FS / 2)
    with pytest.raises(InputError, match="needs a sample rate"):
        tg.fit_to_target(tg.Target(max_paths=4), taps, update_rate_hz=2000.0)
    assert tg.fit_to_target(tg.Target(max_paths=8), taps, update_rate_hz=2000.0,
                            sample_rate_hz=FS).costs.sample_rate_hz == FS


# -- the fit tolerance on the RMS delay spread ----------------------------------------------------


def test_the_fit_tolerance_judges_the_fitted_channel_not_the_sinc_windows_tails():
    one = [Tap(10e-9, 1.0, max_doppler_hz=50.0, index=0)]
    sinc = tg.fit_to_target(tg.Target(sample_rate_hz=30.72e6), one, update_rate_hz=3200.0)
    assert sinc.costs.delay_mapping == "sinc" and sinc.costs.fit_rms_delay_spread_s > 20e-9  # the window's tails
    judged = tg.judge_fit(sinc.costs)
    assert judged.fit_rms_delay_spread_s == 0.0 and judged.within_tolerance
    assert judged.bound_s == pytest.approx(0.5 / 30.72e6)  # a spread of 0: half a grid step
    # two taps 10 ns apart land on one grid point at 30.72 MHz (32.6 ns): the spread vanishes, a missed target
    two = [Tap(0.0, 1.0, max_doppler_hz=50.0, index=0), Tap(10e-9, 0.5, max_doppler_hz=50.0, index=1)]
    nearest = tg.fit_to_target(tg.Target(sample_rate_hz=30.72e6), two, update_rate_hz=3200.0, delay_mapping="nearest")
    judged = tg.judge_fit(nearest.costs, 10.0)
    assert judged.change_pct == pytest.approx(-100.0) and judged.missed
    assert not tg.judge_fit(nearest.costs, 10.0, accepted=True).missed
    assert tg.judge_fit(nearest.costs, 100.0).within_tolerance
    error = tg.missed_target_error(nearest.costs, judged)
    assert error.exit_code == 1 and "from 4.7 ns to 0.0 ns (-100.0 %)" in str(error) and "--accept-fit" in str(error)
    with pytest.raises(InputError, match="fit tolerance"):
        tg.judge_fit(nearest.costs, -1.0)
