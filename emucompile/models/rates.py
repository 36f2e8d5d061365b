"""Rates, lengths and sizes in closed form: what the engine will design and the bundle will take.

One home for the formulas the compile planner and ``validate`` share
(:mod:`emucompile.compile.rules`): the limits on rates, the rate plan of a
tap's generator (how the update rate is reached from the internal rate), the
length of its Doppler filter and the least size of a bundle. Nothing here
draws a number or designs a filter, and numpy is imported only when a rate
plan has to be chosen, so ``validate`` stays light; the engine
(:mod:`emucompile.models.fading`) designs with these same functions, so the
planner and the rules cannot disagree.

The constants below fix the numbers a seed produces (they choose the rate plan
and the filter lengths): changing any of them changes the output, so it must
come with a new ``GENERATOR_VERSION``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from emucompile._lazy import LazyModule

# numpy on first use: the rate plan is vectorised over its candidates, the limits need none.
np = LazyModule("numpy")

METHODS = ("doppler-filter", "sum-of-sinusoids")
DEFAULT_METHOD = "doppler-filter"
MIN_UPDATE_RATIO = 2.2  # update rate / f_D: Nyquist with a 10 % guard band
RATE_RANGE_HZ = (1e-6, 1e15)  # update and sample rates a bundle may have (compile refuses others too)
MAX_UPDATE_TO_DOPPLER = 1e6
"""Largest update rate / a fading tap's maximum Doppler (compile's rate plan limit; readers check it too:
verify's decimation and reproduce's design grow with it)."""
DEFAULT_MAX_SIZE_BYTES = 8 * 1024**3
"""The largest bundle compile writes unless told otherwise (``--max-size``)."""
"""Bytes of each extra format's copy of the tap gains per byte of ``tap_gains.npy`` (a lower bound for csv)."""

# -- constants that fix the generated numbers (bump GENERATOR_VERSION on change) --
INTERNAL_RATE_MIN = 3.0  # f_i / f_D, lowest internal rate considered
INTERNAL_RATE_MAX = 12.0  # f_i / f_D, highest internal rate considered
FINAL_STAGE_MIN = 32.0  # f_1 / f_D required before the linear stage
STAGE1_ATTENUATION_DB = 60.0  # stop-band attenuation of the polyphase low-pass h1
LAG_WINDOW_DOPPLER_PERIODS = 256.0  # half-span of the lag window, in units of 1/f_D
LAG_WINDOW_SIGMA_PERIODS = 40.0  # ... and at least this many 1/sigma for a Gaussian spectrum
LAG_WINDOW_BETA = 9.0  # Kaiser beta of the window whose autocorrelation is the lag window
DOPPLER_FILTER_SPAN = 1.25  # h0 length / lag-window half-span
DOPPLER_FILTER_TAPER = 0.2  # Tukey taper fraction at the ends of h0
MAX_DOPPLER_FILTER_LENGTH = 1 << 20
MAX_POLYPHASE_FACTOR = 64  # R1 when a linear stage follows
MIN_FFT_SIZE = 4096
MAX_OUTPUT_BLOCK = 1 << 17  # update-rate samples per synthesis block (bounds the caches)
MIN_INTERNAL_BLOCK = 16
# Cost model used only to choose (R1, R2): nanoseconds, measured on the
# development machine (noise + FFT convolution per internal sample, one
# real multiply-add of the polyphase filter, linear stage per output sample).
_COST_NOISE_NS = 25.0
_COST_FFT_NS_PER_LOG2 = 4.0
_COST_MAC_NS = 0.75
_COST_LINEAR_NS = 2.0



@dataclass(frozen=True)
class RatePlan:
    """Integer interpolation factors from the internal rate to the update rate."""

    update_rate_hz: float
    up1: int  # R1, polyphase stage
    up2: int  # R2, linear stage

    @property
    def total(self) -> int:
        return self.up1 * self.up2

    @property
    def internal_rate_hz(self) -> float:
        return self.update_rate_hz / self.total

    @property
    def stage1_rate_hz(self) -> float:
        return self.update_rate_hz / self.up2


def choose_rate_plan(update_rate_hz: float, band_edge_hz: float, period: int | None = None) -> RatePlan:
    """Pick (R1, R2) for a tap: cheapest plan with f_i in [3, 12] f_D (or R = 1).

    Candidates: R = 1 (Doppler filter at the update rate itself); one
    polyphase stage (R1 = R, R2 = 1); or a polyphase stage with R1 <= 64
    followed by the linear stage, which needs f_1 = F_u/R2 >= 32 f_D.
    ``period`` (periodic mode) requires R1*R2 to divide the record length, so
    that the internal noise is circular with a whole number of samples.
    Notes: the choice minimises a cost model measured on the development
    machine (vectorised over R2, so it stays instant for F_u/f_D ~ 1e6); it
    is part of what fixes the generated numbers.
    """
    ratio = update_rate_hz / band_edge_hz
    best = (_plan_cost(ratio, 1, 1), 1, 1)
    families = [(None, 1)] + [(up1, None) for up1 in range(2, MAX_POLYPHASE_FACTOR + 1)]
    for up1, up2 in families:
        # the free factor runs over the totals whose f_i lies in [3, 12] f_D
        fixed = up2 if up1 is None else up1
        lo = max(2 if up1 is None else 1, math.ceil(ratio / (INTERNAL_RATE_MAX * fixed) - 1e-9))
        hi = math.floor(ratio / (INTERNAL_RATE_MIN * fixed) + 1e-9)
        if hi < lo:
            continue
        free = np.arange(lo, hi + 1, dtype=np.int64)
        if up1 is None:
            u1, u2 = free, np.ones_like(free)
        else:
            u1, u2 = np.full_like(free, up1), free
            keep = (u2 == 1) | (ratio / u2 >= FINAL_STAGE_MIN)
            u1, u2 = u1[keep], u2[keep]
        if period is not None:
            keep = (period % (u1 * u2)) == 0
            u1, u2 = u1[keep], u2[keep]
        if len(u1) == 0:
            continue
        cost = _plan_cost(ratio, u1, u2)
        i = int(np.argmin(cost))
        key = (float(cost[i]), int(u1[i]), int(u2[i]))
        if key < best:
            best = key
    return RatePlan(float(update_rate_hz), best[1], best[2])


def lag_window_half_span(internal_rate_hz: float, spectrum) -> int:
    """Half-span M of the Doppler filter's lag window, in internal samples.

    ``LAG_WINDOW_DOPPLER_PERIODS`` periods of f_D, and at least
    ``LAG_WINDOW_SIGMA_PERIODS`` over the spectrum's narrowest feature where
    its kind has one (the Gaussian's sigma: see
    :attr:`emucompile.models.spectra.SpectrumKind.feature_width`).
    """
    half_span = int(math.ceil(LAG_WINDOW_DOPPLER_PERIODS * internal_rate_hz / spectrum.max_doppler_hz))
    width = spectrum.feature_width_hz
    if width is not None:
        half_span = max(half_span, int(math.ceil(LAG_WINDOW_SIGMA_PERIODS * internal_rate_hz / width)))
    return half_span


def doppler_filter_half_length(half_span: int) -> int:
    """Half length of the Doppler FIR h0 (2 half + 1 taps) for a lag window of half-span ``half_span``."""
    return int(round(DOPPLER_FILTER_SPAN * half_span / 2.0))


def doppler_filter_problem(update_rate_hz: float, spectrum, period: int | None = None) -> str | None:
    """Why the engine cannot design this tap's Doppler filter (too long), or None.

    The filter grows with the internal rate f_i = F_u / (R1 R2) <= F_u: when
    even f_i = F_u gives a short enough filter no rate plan is chosen (no numpy);
    otherwise the plan the engine would choose is (the same function).
    """
    def problem(fi):
        length = 2 * doppler_filter_half_length(lag_window_half_span(fi, spectrum)) + 1
        if length > MAX_DOPPLER_FILTER_LENGTH:
            return f"the Doppler filter would need {length} taps at {fi:g} Hz (max {MAX_DOPPLER_FILTER_LENGTH})"
        return None

    if problem(update_rate_hz) is None:
        return None
    return problem(choose_rate_plan(update_rate_hz, spectrum.max_doppler_hz, period).internal_rate_hz)


def fir_span_columns(delays_s, sample_rate_hz: float) -> int:
    """Columns of a FIR map spanning the delays at ``sample_rate_hz`` (nearest grid, no sinc tails)."""
    return math.floor((max(delays_s) - min(delays_s)) * sample_rate_hz) + 1


def size_text(n_bytes: int) -> str:
    """Bytes for a message: ``8.0 GiB``, ``512.0 MiB``, ``12.0 KiB`` or ``100 B``."""
    for unit, size in (("GiB", 1024**3), ("MiB", 1024**2), ("KiB", 1024)):
        if n_bytes >= size:
            return f"{n_bytes / size:.1f} {unit}"
    return f"{n_bytes} B"


def least_bundle_bytes(n_samples: int, n_links: int, n_taps: int, copies: float = 0.0, n_fir: int = 0,
                       fir_file: bool = False) -> float:
    """A lower bound of a bundle's size: its tap gains, the extra formats' copies and the FIR map(s).

    ``copies``: the extra formats' sizes as multiples of the complex64 gains (the formats
    registry's ``copy_factor``, summed); ``fir_file``: the time series of FIR coefficients
    is written. The exact size (headers, manifest) follows from the bundle's layout; this
    bound is what compile and ``validate`` refuse on before anything is designed.
    """
    gains = n_samples * n_links * n_taps * 8
    least = gains * (1 + copies) + n_taps * n_fir * 8
    if fir_file:
        least += n_samples * n_links * n_fir * 8
    return least


def _plan_cost(ratio, up1, up2):
    """Modelled nanoseconds per output sample (scalars or arrays; only used to compare plans)."""
    up1 = np.asarray(up1, dtype=np.float64)
    up2 = np.asarray(up2, dtype=np.float64)
    total = up1 * up2
    internal = ratio / total  # f_i / f_D
    span = LAG_WINDOW_DOPPLER_PERIODS * internal * DOPPLER_FILTER_SPAN
    cost = (_COST_NOISE_NS + _COST_FFT_NS_PER_LOG2 * np.log2(4 * span)) / total
    with np.errstate(divide="ignore", invalid="ignore"):
        width = (internal - 2.0) / (ratio / up2)
        taps_per_phase = (STAGE1_ATTENUATION_DB - 7.95) / (14.36 * width) / up1
    cost = cost + np.where(up1 > 1, 2.0 * _COST_MAC_NS * taps_per_phase / up2, 0.0)
    cost = cost + np.where(up2 > 1, _COST_LINEAR_NS, 0.0)
    return cost
