"""What fitting a profile to an emulator target costs, how that is judged, and how it reads.

:func:`emucompile.profile.target.fit_to_target` makes a fit; this module says what
it costs: RMS delay-spread change (grid minus profile, from the fitted map's
coefficient powers), power dropped, image level and droop from hold/linear
updating (:func:`update_images`), coefficient quantisation SQNR
(:func:`coefficient_quantisation`); :func:`judge_fit` judges the delay-spread
change against a tolerance.

References
----------
.. [Bennett1948] W. R. Bennett, "Spectra of quantized signals", Bell Syst.
   Tech. J. 27, 446-472, 1948: granular noise Delta^2/12 for a uniform
   quantiser with a busy input; 6.02 b + 1.76 dB for a full-scale sine.
.. [Widrow1961] B. Widrow, "Statistical analysis of amplitude-quantized
   sampled-data systems", AIEE Trans. 79(II), 555-568, 1961: when the
   uniform-noise model holds.
.. [OppenheimSchafer] A. V. Oppenheim, R. W. Schafer, Discrete-Time Signal
   Processing (zero-order hold response T sinc(f T) exp(-j pi f T); linear
   interpolation as a triangle kernel with response T sinc^2(f T)).
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field

import numpy as np

from emucompile._lazy import LazyModule
from emucompile.errors import InputError, TargetMissed
from emucompile.models.grid import rms_delay_spread

# Imported on first use: checking a profile's target: block does not integrate (start-up).
integrate = LazyModule("scipy.integrate")
special = LazyModule("scipy.special")
stats = LazyModule("scipy.stats")


BETWEEN_UPDATES = ("hold", "linear")

DEFAULT_HEADROOM_DB = 12.0

DEFAULT_FIT_TOLERANCE_PCT = 10.0
"""How far (in % of the profile's) a fit may move the RMS delay spread before compile calls the
target missed (our choice, stated; ``compile --fit-tolerance-pct``). Ordinary fits move it 0-4 %
(sinc and nearest maps of TDL-A/C at 100 ns and EVA at 30.72 and 61.44 MHz); dropping paths
moves it far more (TDL-C at 100 ns into 8 paths at 30.72 MHz: -37 %)."""

@dataclass(frozen=True)
class UpdateImages:
    """What hold/linear updating does to one tap gain, as fractions of its mean power.

    ``wanted_fraction``: power left in the original band (below 1: the droop
    of the hold/interpolation response); ``image_fraction``: power moved to
    the images around multiples of the update rate.
    """

    wanted_fraction: float
    image_fraction: float

    @property
    def image_to_wanted(self) -> float:
        return self.image_fraction / self.wanted_fraction

    @property
    def image_to_wanted_db(self) -> float:
        return _db(self.image_to_wanted)

    @property
    def droop_db(self) -> float:
        return _db(self.wanted_fraction)


@dataclass(frozen=True)
class CoefficientQuantisation:
    """Quantisation of the FIR coefficients to ``bits`` per real and imaginary part.

    ``full_scale`` is per part, in the units of the coefficients:
    10^(headroom/20) times the RMS of the strongest coefficient. ``sqnr_db``
    is the total coefficient power over the total error power (what a white
    input sees); ``strongest_sqnr_db`` that of the strongest coefficient;
    ``clip_probability`` the chance that a part of the strongest coefficient
    exceeds full scale (per update).
    """

    bits: int
    headroom_db: float
    full_scale: float
    step: float
    sqnr_db: float
    strongest_sqnr_db: float
    granular_sqnr_db: float
    clip_probability: float


@dataclass(frozen=True)
class MergedPath:
    """Taps that the fit put on one grid point (their gains add).

    ``taps`` are positions in the fitted tap sequence; ``power_linear`` the
    merged mean power (taps independent); ``fading``/``k_linear`` describe the
    sum's mean composition (module docstring, rule 3); ``remark`` says where
    the sum is not what ``fading`` suggests.
    """

    delay_s: float
    taps: tuple
    power_linear: float
    fading: str  # "rayleigh", "rician" or "static" (of the sum's mean composition)
    k_linear: float | None
    remark: str = ""


@dataclass(frozen=True)
class FitCosts:
    """What fitting a profile to a target costs. SI units; ratios linear unless ``_db``.

    Attributes
    ----------
    delay_mapping, sample_rate_hz, delay_step_samples, half_length
        The map chosen (``half_length`` None for ``nearest``).
    n_paths : int
        Non-zero FIR columns (paths the emulator places).
    n_fir : int
        FIR length in samples (the map's columns, bulk delay included).
    n_coefficients : int
        FIR length counted on the target's grid: (n_fir - 1) // step + 1.
    profile_rms_delay_spread_s, fit_rms_delay_spread_s, rms_delay_spread_change_s
        The profile's RMS delay spread, the fitted grid's (from coefficient
        powers), and fit minus profile.
    power_dropped_fraction : float
        Mean power of the dropped taps over the total (``power_dropped_db``: the loss in dB).
    dropped_taps : tuple of int
    merged : tuple of MergedPath
    max_abs_delay_error_s : float
        Largest |mapped - true delay| over the kept taps (0 for ``sinc``).
    energy_kept : float
        The map's power-weighted energy kept (dropping included).
    passband_error_bound : float
        The map's frequency-response error bound per unit tap gain (see ``FirMap``).
    update_rate_hz, between_updates
    image_to_wanted : float
        Power of the update images over the wanted power, summed over the kept
        taps weighted by their kept power (``image_to_wanted_db``); NaN when
        nothing is kept.
    droop_db : float
        Wanted power after hold/interpolation over the kept power, in dB (<= 0).
    tap_images : tuple of UpdateImages
        Per tap (dropped ones included), from :func:`update_images`.
    quantisation : CoefficientQuantisation or None
        None when the target gives no ``coefficient_bits``.
    notes : tuple of str
        Choices the fit made on its own (mapping chosen, window shortened).
    profile_mean_delay_s, fit_mean_delay_s
        Power-weighted mean delay of the profile's taps and of the fitted
        grid (coefficient powers at their delays), from the profile's zero.
    """

    delay_mapping: str
    sample_rate_hz: float
    delay_step_samples: int
    half_length: int | None
    n_paths: int
    n_fir: int
    n_coefficients: int
    profile_rms_delay_spread_s: float
    fit_rms_delay_spread_s: float
    rms_delay_spread_change_s: float
    power_dropped_fraction: float
    dropped_taps: tuple
    merged: tuple
    max_abs_delay_error_s: float
    energy_kept: float
    passband_error_bound: float
    update_rate_hz: float
    between_updates: str
    image_to_wanted: float
    droop_db: float
    tap_images: tuple
    quantisation: CoefficientQuantisation | None
    notes: tuple = field(default_factory=tuple)
    profile_mean_delay_s: float = math.nan
    fit_mean_delay_s: float = math.nan

    @property
    def power_dropped_db(self) -> float:
        """Loss of mean power from dropping taps, in dB (>= 0)."""
        return 0.0 - _db(1.0 - self.power_dropped_fraction)

    @property
    def image_to_wanted_db(self) -> float:
        return _db(self.image_to_wanted)

    def to_dict(self) -> dict:
        """Strict-JSON form: infinite or undefined figures are null with a reason."""
        out = {}
        for key, value in asdict(self).items():
            if key in ("tap_images", "merged", "quantisation"):
                continue
            out[key] = list(value) if isinstance(value, tuple) else _json_value(value)
        out["power_dropped_db"] = _json_value(self.power_dropped_db)
        out["image_to_wanted_db"] = _json_value(self.image_to_wanted_db)
        if out["image_to_wanted_db"] is None:
            out["image_to_wanted_db_reason"] = "no tap gain changes with time: updating adds no image"
        out["tap_images"] = [
            {
                "wanted_fraction": _json_value(t.wanted_fraction),
                "image_fraction": _json_value(t.image_fraction),
                "image_to_wanted_db": _json_value(t.image_to_wanted_db),
            }
            for t in self.tap_images
        ]
        out["merged"] = [{k: _json_value(v) for k, v in asdict(m).items()} for m in self.merged]
        for m in out["merged"]:
            m["taps"] = list(m["taps"])
        out["quantisation"] = (
            None if self.quantisation is None else {k: _json_value(v) for k, v in asdict(self.quantisation).items()}
        )
        if self.quantisation is None:
            out["quantisation_reason"] = "the target gives no coefficient_bits"
        return out


@dataclass(frozen=True)
class FitAcceptance:
    """Whether a fit kept the RMS delay spread within the stated tolerance, and whether it was accepted.

    ``fit_rms_delay_spread_s`` is the fitted channel's
    (:func:`fitted_channel_rms_delay_spread`). ``bound_s`` is
    ``tolerance_pct`` % of the profile's RMS delay spread (half
    a grid step, ``delay_step_samples / (2 sample_rate_hz)``, for a profile
    whose spread is 0). ``within_tolerance``: |fit - profile| <= bound_s.
    ``accepted``: the user accepted the fit anyway (``compile --accept-fit``).
    """

    tolerance_pct: float
    profile_rms_delay_spread_s: float
    fit_rms_delay_spread_s: float
    bound_s: float
    within_tolerance: bool
    accepted: bool

    @property
    def change_s(self) -> float:
        return self.fit_rms_delay_spread_s - self.profile_rms_delay_spread_s

    @property
    def change_pct(self) -> float | None:
        if not self.profile_rms_delay_spread_s > 0:
            return None
        return 100.0 * self.change_s / self.profile_rms_delay_spread_s

    @property
    def missed(self) -> bool:
        """Beyond the tolerance and not accepted: compile refuses (exit 1)."""
        return not self.within_tolerance and not self.accepted

    def sentence(self) -> str:
        """One line: the move, the tolerance, the outcome."""
        pct = self.change_pct
        moved = (f"the fit moves the RMS delay spread from {self.profile_rms_delay_spread_s * 1e9:.1f} ns to "
                 f"{self.fit_rms_delay_spread_s * 1e9:.1f} ns"
                 + ("" if pct is None else f" ({pct:+.1f} %)"))
        bound = f"the fit tolerance of {self.tolerance_pct:g} % ({self.bound_s * 1e9:.3g} ns)"
        if self.within_tolerance:
            return f"{moved}, within {bound}"
        return f"{moved}, beyond {bound}" + ("; accepted with --accept-fit" if self.accepted else "")

    def to_dict(self) -> dict:
        return {
            "rule": ("|fitted channel - profile RMS delay spread| <= tolerance_pct % of the profile's (half a grid "
                     "step when the profile's spread is 0); the fitted channel's spread is the grid's for nearest, "
                     "the profile's for sinc (every delay kept in band); beyond it compile refuses unless accepted "
                     "(--accept-fit)"),
            "tolerance_pct": self.tolerance_pct,
            "bound_s": _json_value(self.bound_s),
            "profile_rms_delay_spread_s": _json_value(self.profile_rms_delay_spread_s),
            "fit_rms_delay_spread_s": _json_value(self.fit_rms_delay_spread_s),
            "change_s": _json_value(self.change_s),
            "change_pct": _json_value(self.change_pct),
            "within_tolerance": self.within_tolerance,
            "accepted": self.accepted,
        }


def fitted_channel_rms_delay_spread(costs: "FitCosts") -> float:
    """The fitted channel's RMS delay spread: what the fit tolerance judges.

    ``nearest``: the kept taps at their grid delays, merged taps' powers added
    (the spread of the coefficient powers, ``fit_rms_delay_spread_s``).
    ``sinc``: the profile's own, as that map keeps every tap at its delay within
    the passband (and never drops one); the coefficient powers' spread there
    includes each window's interpolation tails (e.g. one tap 10 ns late at
    30.72 MHz: 25.9 ns), a property of the map, not of the channel.
    """
    if costs.delay_mapping == "sinc" and not costs.dropped_taps:
        return float(costs.profile_rms_delay_spread_s)
    return float(costs.fit_rms_delay_spread_s)


def missed_target_error(costs: "FitCosts", acceptance: FitAcceptance) -> TargetMissed:
    """The error compile raises for a missed target: the move, what the fit did, what to do."""
    dropped = list(costs.dropped_taps)
    did = [f"{costs.n_paths} path(s)"]
    if dropped:
        did.append(f"{len(dropped)} tap(s) dropped ({', '.join(map(str, dropped))}), "
                   f"power dropped {costs.power_dropped_db:.3g} dB")
    if costs.merged:
        did.append(f"{len(costs.merged)} group(s) of taps merged")
    return TargetMissed(
        f"target missed: {acceptance.sentence()}; {'; '.join(did)}; nothing written",
        hint="accept the fit with --accept-fit (recorded in the manifest), widen --fit-tolerance-pct, "
             "or use a target with more paths or a finer delay grid",
    )


def judge_fit(costs: "FitCosts", tolerance_pct: float = DEFAULT_FIT_TOLERANCE_PCT, *,
              accepted: bool = False) -> FitAcceptance:
    """Judge a fit's RMS delay-spread change against ``tolerance_pct`` (see :class:`FitAcceptance`).

    Raises
    ------
    emucompile.errors.InputError
        For a tolerance that is not a finite number >= 0.
    """
    try:
        tolerance = float(tolerance_pct)
    except (TypeError, ValueError):
        tolerance = math.nan
    if not (math.isfinite(tolerance) and tolerance >= 0):
        raise InputError(f"the fit tolerance must be a finite percentage >= 0, got {tolerance_pct!r}")
    profile = float(costs.profile_rms_delay_spread_s)
    fit = fitted_channel_rms_delay_spread(costs)
    if profile > 0:
        bound = tolerance / 100.0 * profile
    else:
        bound = 0.5 * costs.delay_step_samples / costs.sample_rate_hz
    within = math.isfinite(fit) and abs(fit - profile) <= bound * (1 + 1e-12)
    return FitAcceptance(tolerance_pct=tolerance, profile_rms_delay_spread_s=profile, fit_rms_delay_spread_s=fit,
                         bound_s=bound, within_tolerance=bool(within), accepted=bool(accepted))


# -- costs -------------------------------------------------------------------------

def update_images(tap, update_rate_hz: float, between_updates: str = "hold") -> UpdateImages:
    """Power of the images that hold or linear updating at ``update_rate_hz`` adds to one tap.

    Parameters
    ----------
    tap : emucompile.profile.model.Tap
        Its diffuse part has the Doppler spectrum ``tap.doppler_spectrum``;
        its direct part (Rician, or a turning static tap) is a line at
        ``tap.los_doppler_hz``.
    update_rate_hz : float
        f_u, with the tap's largest frequency at most f_u / 2.
    between_updates : {"hold", "linear"}

    Returns
    -------
    UpdateImages

    Notes
    -----
    Samples g(k/f_u) held for 1/f_u (or joined by straight lines) form
    y(t) = sum_k g(k/f_u) r(t f_u - k) with r a unit box (or triangle), whose
    transform is sinc(f/f_u) (or sinc^2) [OppenheimSchafer]_. The samples'
    spectrum repeats S(f) at every multiple of f_u, so

        S_y(f) = sum_m S(f - m f_u) sinc^{2q}(f/f_u),   q = 1 (hold), 2 (linear),

    and with x = f/f_u the power kept in band and moved to images is

        wanted = integral S(f) sinc^{2q}(x) df,
        image  = integral S(f) sum_{m != 0} sinc^{2q}(x + m) df
               = integral S(f) (sin(pi x)/pi)^{2q} [zeta(2q, 1+x) + zeta(2q, 1-x)] df,

    the Hurwitz zeta (``scipy.special.zeta``) summing the images without
    cancellation. (Equivalently sum_{m != 0} sinc^2(x+m) = 1 - sinc^2(x) and
    sum_{m != 0} sinc^4(x+m) = (2 + cos 2 pi x)/3 - sinc^4(x).) For small x the
    image is (pi x)^2/3 (hold) and (pi x)^4/45 (linear) of the power at x. The
    integrals over the Doppler spectrum use f = f_D sin(phi), which turns the
    classical spectrum's edge singularities into a constant, and
    ``scipy.integrate.quad`` on ``DopplerSpectrum.psd``.
    """
    if between_updates not in BETWEEN_UPDATES:
        raise ValueError(f"between_updates must be one of {BETWEEN_UPDATES}, got {between_updates!r}")
    if not (update_rate_hz > 0 and math.isfinite(update_rate_hz)):
        raise ValueError(f"update_rate_hz must be finite and > 0, got {update_rate_hz!r}")
    if tap.largest_doppler_hz > update_rate_hz / 2:
        raise ValueError(
            f"tap {tap.index}: its largest frequency {tap.largest_doppler_hz:g} Hz is above "
            f"half the update rate {update_rate_hz:g} Hz"
        )
    order = 1 if between_updates == "hold" else 2
    power = tap.power_linear
    if power <= 0:
        return UpdateImages(1.0, 0.0)
    direct = tap.direct_power_linear / power
    los_x = (tap.los_doppler_hz or 0.0) / update_rate_hz
    wanted = direct * _wanted_kernel(los_x, order)
    image = direct * _image_kernel(los_x, order)
    spectrum = tap.doppler_spectrum
    if spectrum is not None and tap.diffuse_power_linear > 0:
        diffuse = tap.diffuse_power_linear / power
        wanted += diffuse * _spectrum_integral(spectrum, update_rate_hz, lambda x: _wanted_kernel(x, order))
        image += diffuse * _spectrum_integral(spectrum, update_rate_hz, lambda x: _image_kernel(x, order))
    return UpdateImages(float(wanted), float(image))


def coefficient_quantisation(coefficient_powers, bits: int,
                             headroom_db: float = DEFAULT_HEADROOM_DB) -> CoefficientQuantisation:
    """SQNR of FIR coefficients quantised to ``bits`` per part, full scale set by ``headroom_db``.

    Parameters
    ----------
    coefficient_powers : array_like
        Mean power E|c_n|^2 of each coefficient (e.g. ``FirMap.coefficient_powers``).
    bits : int
        Bits of each of the real and imaginary parts: two's complement codes
        -2^(b-1) ... 2^(b-1) - 1 times the step Delta = full_scale / 2^(b-1),
        rounded to nearest.
    headroom_db : float
        full_scale = 10^(headroom/20) * sqrt(max power).

    Notes
    -----
    Each part of a coefficient of power p is modelled as Gaussian with variance
    s^2 = p/2 (exact for Rayleigh taps and sums of them; a direct part makes the
    tail lighter at large headroom). Per part, with a = full_scale / s and
    Q the Gaussian tail (``scipy.stats.norm.sf``):

    - granular error Delta^2/12 where the part is not clipped [Bennett1948]_,
      applied as min(Delta^2/12, s^2) so that a coefficient far below one step
      (which the quantiser mostly sets to zero) costs its own power, not more
      (common practice; the uniform-noise model needs s >> Delta [Widrow1961]_);
    - clipping error E[(|x| - A)^2; |x| > A] = 2 [(s^2 + A^2) Q(a) - s A phi(a)].

    The strongest coefficient's granular SQNR is 10 log10(1.5 4^b) - headroom
    = 6.02 b + 1.76 - headroom dB, so headroom 0 dB is the full-scale-sine
    reference of [Bennett1948]_ (each part of a unit-power complex exponential
    is a sine of amplitude full_scale). The probability that one part of the
    strongest coefficient clips is 2 Q(a) = erfc(10^(headroom/20)).
    """
    powers = np.asarray(coefficient_powers, dtype=float)
    if not (isinstance(bits, (int, np.integer)) and 2 <= bits <= 32):
        raise ValueError(f"bits must be an integer in 2..32, got {bits!r}")
    if not (np.all(np.isfinite(powers)) and np.all(powers >= 0) and powers.max(initial=0.0) > 0):
        raise ValueError("coefficient_powers must be finite, >= 0 and not all 0")
    strongest = float(powers.max())
    full_scale = 10.0 ** (headroom_db / 20.0) * math.sqrt(strongest)
    step = full_scale / 2.0 ** (bits - 1)
    noise = _quantisation_error_power(powers, full_scale, step)
    index = int(np.argmax(powers))
    s = math.sqrt(strongest / 2.0)
    return CoefficientQuantisation(
        bits=int(bits),
        headroom_db=float(headroom_db),
        full_scale=full_scale,
        step=step,
        sqnr_db=_db(powers.sum() / noise.sum()),
        strongest_sqnr_db=_db(strongest / noise[index]),
        granular_sqnr_db=granular_sqnr_db(bits, headroom_db),
        clip_probability=float(2.0 * stats.norm.sf(full_scale / s)),
    )


def granular_sqnr_db(bits: int, headroom_db: float = 0.0) -> float:
    """10 log10(1.5 * 4^bits) - headroom_db: the strongest coefficient's SQNR without clipping."""
    return 10.0 * math.log10(1.5) + 20.0 * bits * math.log10(2.0) - headroom_db


def _costs(target, taps, fitted, merged, dropped, update_rate_hz, notes):
    powers = np.array([t.power_linear for t in taps])
    profile_spread = rms_delay_spread([t.delay_s for t in taps], powers)
    fit_spread = fitted.rms_delay_spread_s
    kept_energy = powers * fitted.energy_kept_per_tap
    images = tuple(update_images(t, update_rate_hz, target.between_updates) for t in taps)
    wanted = float(sum(e * i.wanted_fraction for e, i in zip(kept_energy, images)))
    image = float(sum(e * i.image_fraction for e, i in zip(kept_energy, images)))
    quantisation = None
    if target.coefficient_bits is not None:
        quantisation = coefficient_quantisation(fitted.coefficient_powers, target.coefficient_bits, target.headroom_db)
    errors = fitted.delay_error_s
    return FitCosts(
        delay_mapping=fitted.delay_mapping,
        sample_rate_hz=fitted.sample_rate_hz,
        delay_step_samples=fitted.delay_step_samples,
        half_length=fitted.half_length,
        n_paths=int(fitted.nonzero_columns.size),
        n_fir=fitted.n_fir,
        n_coefficients=(fitted.n_fir - 1) // fitted.delay_step_samples + 1,
        profile_rms_delay_spread_s=profile_spread,
        fit_rms_delay_spread_s=fit_spread,
        rms_delay_spread_change_s=fit_spread - profile_spread,
        power_dropped_fraction=float(powers[list(dropped)].sum() / powers.sum()) if dropped else 0.0,
        dropped_taps=tuple(dropped),
        merged=merged,
        max_abs_delay_error_s=float(np.nanmax(np.abs(errors), initial=0.0)),
        energy_kept=fitted.energy_kept,
        passband_error_bound=fitted.passband_error_bound,
        update_rate_hz=float(update_rate_hz),
        between_updates=target.between_updates,
        image_to_wanted=image / wanted if wanted > 0 else math.nan,
        droop_db=_db(wanted / kept_energy.sum()) if kept_energy.sum() > 0 else math.nan,
        tap_images=images,
        quantisation=quantisation,
        profile_mean_delay_s=_mean_delay([t.delay_s for t in taps], powers),
        fit_mean_delay_s=_mean_delay(fitted.coefficient_delays_s, fitted.coefficient_powers),
        notes=notes,
    )


def _wanted_kernel(x, order):
    return np.sinc(x) ** (2 * order)


def _image_kernel(x, order):
    """sum over m != 0 of sinc^{2q}(x + m) for |x| < 1, by the Hurwitz zeta function."""
    x = np.asarray(x, dtype=float)
    s = 2 * order
    return (np.sin(np.pi * x) / np.pi) ** s * (special.zeta(s, 1.0 + x) + special.zeta(s, 1.0 - x))


def _spectrum_integral(spectrum, update_rate_hz, kernel):
    """integral of S(f) kernel(f / f_u) df over |f| < f_D, with f = f_D sin(phi)."""
    fd = spectrum.band_edge_hz

    def integrand(phi):
        f = fd * math.sin(phi)
        return float(spectrum.psd(f)) * fd * math.cos(phi) * float(kernel(f / update_rate_hz))

    points = None
    if spectrum.feature_width_hz is not None:
        points = [0.0]  # the peak, narrow when its width << f_D
    value, _ = integrate.quad(integrand, -math.pi / 2, math.pi / 2, points=points, limit=200,
                              epsabs=0.0, epsrel=1e-10)
    return value


def _quantisation_error_power(powers, full_scale, step):
    """Mean |error|^2 per coefficient: two parts, each granular plus clipping (Gaussian parts)."""
    variance = powers / 2.0
    s = np.sqrt(variance)
    with np.errstate(divide="ignore", invalid="ignore"):
        a = np.where(s > 0, full_scale / s, np.inf)
    tail = stats.norm.sf(a)
    clip = 2.0 * ((variance + full_scale**2) * tail - s * full_scale * stats.norm.pdf(a))
    clip = np.maximum(np.nan_to_num(clip, nan=0.0), 0.0)
    granular = np.minimum(step * step / 12.0, variance) * (1.0 - 2.0 * tail)
    return 2.0 * (granular + clip)


def _db(ratio):
    ratio = float(ratio)
    if ratio > 0:
        return 10.0 * math.log10(ratio)
    return -math.inf if ratio == 0 else math.nan


def _mean_delay(delays_s, powers) -> float:
    powers = np.asarray(powers, dtype=float)
    total = powers.sum()
    return float(np.dot(np.asarray(delays_s, dtype=float), powers) / total) if total > 0 else math.nan


def _json_value(value):
    if isinstance(value, (float, np.floating)):
        value = float(value)
        return value if math.isfinite(value) else None
    if isinstance(value, np.integer):
        return int(value)
    return value
