"""The fading engine: complex tap-gain processes of a profile, streamable and reproducible.

Each tap's gain is sqrt(P) (sqrt(K/(K+1)) d(t) + sqrt(1/(K+1)) s(t)) with
d(t) = exp(j(2 pi f_los t + phi0)) its direct part and s(t) a unit-power
complex Gaussian process with the tap's Doppler spectrum (Rayleigh: K = 0;
static: d(t) alone, turning at f_los or constant).

Two generators of s(t):

``doppler-filter`` (default)
    White complex Gaussian noise at a low internal rate f_i (3-12 f_D),
    shaped by a Doppler FIR designed from the spectrum's exact
    autocorrelation, then interpolated to the update rate by a Kaiser
    polyphase stage and a final linear stage once the rate is >= 32 f_D
    (:mod:`emucompile.models.fading._design`; after Young & Beaulieu 2000).
``sum-of-sinusoids``
    Zheng & Xiao's 2002 model with random phases and random angles,
    evaluated exactly at f_i and interpolated by the same chain
    (:mod:`emucompile.models.fading._sos`).

Why ``doppler-filter`` is the default (measured: benchmarks/README.md, "Fading
engine"): it is Gaussian by construction, so the envelope law and level
crossings are right for any record length, its autocorrelation error is a
design figure (~2e-4 up to 3/f_D), and its cost does not grow with the
accuracy asked for. The sum of M sinusoids is non-Gaussian (envelope KS
bias ~0.1/M), so M = 256 per quadrature is needed already at T f_D = 5e4,
at a cost proportional to M; and its spectrum is M lines, so a Gaussian
spectrum's thin tails hold only a few of them: at M = 256 the calibrated
Doppler PSD check failed records of T f_D = 5e4 (0.66 dB off at 0.81 f_D),
so a Gaussian spectrum gets M = 1024 by default (GAUSSIAN_SINUSOIDS).

Random access and streaming: every tap's output is computed on a fixed grid
of synthesis blocks tied to the absolute sample index, each from its own
keyed noise only (no recursive state, no FFT aligned to the request), so
any chunking, any offset and any number of threads give bit-identical
complex64. Memory is bounded by a few blocks per tap whatever the length.

Notes
-----
The chain per fading tap, with f_D its band edge and F_u the update rate::

    white noise -> Doppler FIR h0 -> up R1 polyphase (Kaiser, 60 dB) -> up R2 linear -> F_u
      at f_i          at f_i              at f_1 = R1 f_i >= 32 f_D

* Rate plan: f_i = F_u / (R1 R2) in [3, 12] f_D, the cheapest (R1, R2) by a measured
  cost model (:mod:`emucompile.models.rates`); R = 1 when F_u < 6 f_D. At 100 f_D:
  R1 = 8, R2 = 3, f_i = 4.17 f_D. Each tap has its own chain.
* Doppler FIR: the exact autocorrelation of the spectrum times a lag window (the
  autocorrelation of a Kaiser window, beta 9, half-span 256/f_D, wider for narrow
  features), divided by the chain's power response in the band (droop compensation),
  zero-phase square root. Plain windowing of sqrt(S) was tried first: for the
  classical spectrum its autocorrelation error falls only as L^-1/2, because sqrt(S)
  is singular at f_D.
* Power equalisation: interpolating a stationary process gives a cyclostationary one
  (linear interpolation loses 2 w (1 - w)(1 - rho1) of the power at fraction w), which
  biases statistics taken at a stride that is a multiple of R. Each polyphase
  component and each linear phase carries a gain, from the exact autocorrelation,
  that gives every output phase the same power (residual <= 1e-4 dB by design).
* Unit power is exact by construction: h0 is scaled with the mean output power
  computed from the coefficients (checked against an impulse-response computation).
* Blocks: output is cut into synthesis blocks (<= 2^17 samples) on a grid tied to the
  absolute index; block s uses noise keyed ``SeedSequence(seed, spawn_key=(1, link,
  tap, block))`` only and one overlap-save FFT of fixed size.
* Direct part: exp(j 2 pi (q n + phi0)) with q = f_los / F_u held as an exact
  rational; each block starts from the exact fractional phase; phi0 from
  ``los_phase_deg`` or drawn from key (3, tap) and recorded.
* Periodic mode: R1 R2 must divide n (else R = 1); the noise index is taken mod n/R,
  so the chain is circular; the direct Doppler is rounded to k/T and reported;
  sinusoid frequencies are rounded to multiples of 1/T.
* Sum of sinusoids: Zheng & Xiao 2002's strata in the quantile form
  G^-1((n - 1/2 + theta_n / 2 pi) / M) with an independent offset per sinusoid,
  quadrature, tap and link (generator version 3; version 4 keeps the lowest sinusoid
  in the upper half of its stratum, off 0 Hz; the per-sinusoid random angles of Xiao,
  Zheng & Beaulieu 2006, recalled from memory). Phases on a 2^-52-cycle integer grid
  (exact at any index), summed at f_i, then the same chain.

Design figures at 100 f_D (exact, from the coefficients; ``tap_info()["design"]``):
autocorrelation error for tau <= 3/f_D 1.9e-4 (classical), 6e-5 (flat), 3e-5 (Gaussian
sigma = 0.3 f_D); power beyond 1.05 f_D -60.4 / -62.0 / -65.9 dB, set by the chain's
images; droop at f_D -0.014 dB (compensated). The lag window makes the autocorrelation
vanish beyond ~256/f_D, where J0 is below 0.02: estimators scatter a little less than on
an exact process, so tolerances calibrated on an exact reference are conservative here.

Reproducibility: :func:`reproducibility` lists what bit-identity depends on. Tested:
chunkings, blocks alone at offsets, 1-3 threads, a second process, the prefix of a longer
record. Elsewhere the promise is ``CROSS_PLATFORM_TOLERANCE`` = 1e-5 x RMS gain.
``GENERATOR_VERSION`` (in ``_streams.py``) must be bumped with any change to the design
constants, stream keys, draw order, block sizes or arithmetic order; then
``tools/record_demo_bytes.py`` re-records the demo bundles' hashes.

Examples
--------
>>> from emucompile.profile.model import Profile, Tap
>>> from emucompile.models import fading
>>> profile = Profile(name="demo", taps=(Tap(0.0, 1.0, max_doppler_hz=50.0),))
>>> gains = fading.generate(profile, 5000.0, 10000, seed=1)
>>> gains.shape, gains.dtype
((10000, 1), dtype('complex64'))
>>> p = fading.plan(profile, 5000.0, 10000, seed=1)
>>> bool((p.block(4000, 4100) == gains[4000:4100]).all())
True
"""

from __future__ import annotations

import platform
import sys

import numpy as np
import scipy

from emucompile.models.fading._plan import (
    DEFAULT_CHUNK,
    DEFAULT_METHOD,
    DEFAULT_SINUSOIDS,
    GAUSSIAN_SINUSOIDS,
    METHODS,
    MIN_UPDATE_RATIO,
    SOS_EVALUATIONS,
    FadingPlan,
)
from emucompile.errors import InputError
from emucompile.models.fading._direct import RecordedDirect, direct_phase
from emucompile.models.fading._streams import BIT_GENERATOR, GENERATOR_VERSION

#: Largest difference, relative to a tap's RMS gain, promised between runs of the
#: same version on different machines or library versions (see :func:`reproducibility`):
#: the float32 engine differs from an independent float64 evaluation of the same
#: chain by < 5e-7 (measured, tests/test_fading.py), so 1e-5 leaves a factor 20.
CROSS_PLATFORM_TOLERANCE = 1e-5


def plan(profile, update_rate_hz, n_samples, seed, **options) -> FadingPlan:
    """Design the tap processes of ``profile``; cheap (no samples are generated).

    Parameters
    ----------
    profile : emucompile.profile.model.Profile
        Its taps, in order, are the columns of every output.
    update_rate_hz : float
        Rate of the tap-gain samples; at least 2.2 times each fading tap's f_D.
    n_samples : int
        Record length. In periodic mode the period.
    seed : int
        Non-negative; with the other arguments and :data:`GENERATOR_VERSION`
        it fixes every number.
    method : {"doppler-filter", "sum-of-sinusoids"}, keyword
    periodic : bool, keyword
        Exactly periodic with period ``n_samples`` (for emulators that loop
        the file): circular noise at the internal rate, interpolation factors
        that divide ``n_samples`` (falling back to filtering at the update
        rate itself when none do), direct-part Doppler rounded to a multiple
        of 1/T (reported by :meth:`FadingPlan.tap_info`).
    n_sinusoids : int, keyword
        Sinusoids per quadrature for ``sum-of-sinusoids`` (default: 256, the
        fewest that meet the statistics of a T f_D = 5e4 record, and 1024 for a
        Gaussian spectrum, whose tails need more lines; see DEVELOPERS.md).
    sos_evaluation : {"interpolated", "exact"}, keyword
        ``exact`` sums the sinusoids at the update rate itself (no
        interpolation, roughly R1*R2 times dearer).
    threads : int, keyword
        Worker threads over taps (default 1: measured, a second thread did
        not pay on a shared 2-core machine). The output does not depend on it.

    Raises
    ------
    emucompile.errors.InputError
        On any unusable argument or tap, naming the tap.
    """
    return FadingPlan(profile, update_rate_hz, n_samples, seed, **options)


def generate(profile, update_rate_hz, n_samples, seed, **kw) -> np.ndarray:
    """The whole record at once: complex64, shape (n_samples, n_taps). See :func:`plan`.

    The taps of one SISO link without time-varying conditions. A profile with
    a ``mimo`` block, or conditions that change the gains (high-speed train,
    a moving delay whose carrier follows, shadowing), is refused: its gains
    come from :func:`emucompile.models.channel.generate_channel_gains`.

    Raises
    ------
    emucompile.errors.InputError
        For such a profile, naming the block and the function that honours it.
    """
    _refuse_channel_blocks(profile, "generate_tap_gains", "generate_channel_gains")
    p = plan(profile, update_rate_hz, n_samples, seed, **kw)
    out = np.empty((p.n_samples, p.n_taps), np.complex64)
    for start, gains in p.chunks(DEFAULT_CHUNK):
        out[start : start + len(gains)] = gains
    return out


def stream(profile, update_rate_hz, n_samples, seed, *, chunk_size=DEFAULT_CHUNK, **kw):
    """Iterate ``(first_index, gains)`` over the record in chunks; memory stays bounded.

    The concatenated chunks equal :func:`generate`'s output bit for bit,
    whatever ``chunk_size``. A MIMO profile, or one with conditions that
    change the gains, is refused as by :func:`generate` (use
    :func:`emucompile.models.channel.stream_channel_gains`).
    """
    _refuse_channel_blocks(profile, "stream_tap_gains", "stream_channel_gains")
    return plan(profile, update_rate_hz, n_samples, seed, **kw).chunks(chunk_size)


def reproducibility() -> dict:
    """What bit-identity depends on, recorded in one place for the bundle manifest.

    Same profile, seed, options and ``generator_version`` with the same
    entries below give bit-identical complex64. numpy's ``Generator``
    methods may change between numpy versions (NEP 19; only the bit
    generators' raw streams are frozen), and FFT, polyphase filtering and
    elementwise maths may round differently elsewhere; the engine's
    arithmetic is well conditioned, so on another machine or library version
    with the same Gaussian sampler the gains agree within
    ``cross_platform_tolerance`` times each tap's RMS gain (tested against an
    independent float64 evaluation), and a changed sampler gives different
    numbers, to be reported as such.
    """
    return {
        "generator_version": GENERATOR_VERSION,
        "bit_generator": BIT_GENERATOR,
        "seeding": "numpy.random.SeedSequence(seed, spawn_key=(purpose, link, tap[, block]))",
        "samplers": "numpy.random.Generator.standard_normal(dtype=float32) for the noise, "
        ".uniform (float64) for phases and angles",
        "numpy": np.__version__,
        "scipy": scipy.__version__,
        "python": platform.python_version(),
        "python_implementation": platform.python_implementation(),
        "machine": platform.machine(),
        "system": platform.system(),
        "byte_order": sys.byteorder,
        "dtype": "complex64",
        "guarantee": "bit-identical on the same platform and library versions; "
        "elsewhere equal within cross_platform_tolerance x RMS gain",
        "cross_platform_tolerance": CROSS_PLATFORM_TOLERANCE,
        "threads_affect_output": False,
        "chunking_affects_output": False,
    }


def _refuse_channel_blocks(profile, name, instead):
    """Refuse a profile whose gains need more than the engine: a silent SISO answer would be wrong."""
    blocks = _channel_blocks(profile)
    if blocks:
        raise InputError(
            f"{name} gives the taps of one SISO link without conditions, and profile "
            f"{profile.name!r} has {' and '.join(blocks)}; emucompile.{instead} honours "
            "them (gains in the bundle's axes: sample, rx, tx, tap)",
            hint=f"call emucompile.{instead}(profile, update_rate_hz, n_samples, seed), "
            "or compile_profile for a bundle",
        )


def _channel_blocks(profile) -> list[str]:
    """The blocks of ``profile`` that change its gains beyond the engine's SISO taps."""
    blocks = []
    if getattr(profile, "mimo", None) is not None:
        blocks.append(f"a mimo block ({profile.n_rx}x{profile.n_tx})")
    conditions = getattr(profile, "conditions", None)
    if conditions is not None:
        if conditions.high_speed_train is not None and conditions.high_speed_train_taps:
            blocks.append("conditions.high_speed_train")
        moving = conditions.moving_propagation
        if moving is not None and moving.carrier_follows:
            blocks.append("conditions.moving_propagation (its carrier follows the delay)")
        if conditions.shadowing is not None:
            blocks.append("conditions.shadowing")
    return blocks


# Names under which the package root exposes these (``emucompile.generate_tap_gains``).
plan_fading = plan
generate_tap_gains = generate
stream_tap_gains = stream

__all__ = [
    "GENERATOR_VERSION",
    "CROSS_PLATFORM_TOLERANCE",
    "MIN_UPDATE_RATIO",
    "METHODS",
    "DEFAULT_METHOD",
    "DEFAULT_SINUSOIDS",
    "GAUSSIAN_SINUSOIDS",
    "SOS_EVALUATIONS",
    "FadingPlan",
    "RecordedDirect",
    "direct_phase",
    "plan",
    "generate",
    "stream",
    "reproducibility",
    "plan_fading",
    "generate_tap_gains",
    "stream_tap_gains",
]
