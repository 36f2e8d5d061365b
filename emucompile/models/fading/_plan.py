"""FadingPlan: per-tap processes of a profile, ready to produce any block of samples."""

from __future__ import annotations

import math
from concurrent.futures import ThreadPoolExecutor
from functools import lru_cache

import numpy as np

from emucompile.errors import InputError
from emucompile.models.fading import _design
from emucompile.models.fading._direct import ConstantDopplerPhase, direct_phase
from emucompile.models.fading._sos import SumOfSinusoidsSource
from emucompile.models.fading._streams import DIRECT_PHASE, GENERATOR_VERSION, generator
from emucompile.models.fading._synthesis import DopplerFilterSource
from emucompile.models import spectra
from emucompile.models.rates import DEFAULT_METHOD, METHODS, MIN_UPDATE_RATIO

SOS_EVALUATIONS = ("interpolated", "exact")
DEFAULT_SINUSOIDS = spectra.DEFAULT_SINUSOIDS
#: Sinusoids per quadrature for a Gaussian spectrum (the registry's: its thin tails need more lines).
GAUSSIAN_SINUSOIDS = spectra.GAUSSIAN.sinusoids
DEFAULT_CHUNK = 65536
_PARALLEL_MIN_WORK = 1 << 15  # samples x taps below which threads do not pay
# One thread by default: on the 2-core development machine two threads gave
# the same wall time for 1.5x the CPU (the per-sample passes are bound by
# memory traffic, not arithmetic); see DEVELOPERS.md, "Fading engine".
DEFAULT_THREADS = 1


class FadingPlan:
    """The tap-gain processes of one profile at one update rate, for one seed.

    Build it with :func:`emucompile.models.fading.plan`. Building designs the
    filters and draws the per-tap constants; no sample is generated until
    :meth:`block` (any range, computed without what comes before) or
    :meth:`chunks` (the record in order) is called. Samples are complex64,
    shape (n, n_taps), and bit-identical for any chunking, offset or number
    of threads.
    """

    def __init__(
        self,
        profile,
        update_rate_hz,
        n_samples,
        seed,
        *,
        method=DEFAULT_METHOD,
        periodic=False,
        n_sinusoids=None,
        sos_evaluation="interpolated",
        threads=None,
    ):
        self.update_rate_hz = _positive_float(update_rate_hz, "update_rate_hz")
        self.n_samples = _positive_int(n_samples, "n_samples")
        self.seed = _seed(seed)
        if method not in METHODS:
            raise InputError(f"method must be one of {', '.join(METHODS)}, got {method!r}")
        self.method = method
        self.periodic = bool(periodic)
        if sos_evaluation not in SOS_EVALUATIONS:
            raise InputError(
                f"sos_evaluation must be one of {', '.join(SOS_EVALUATIONS)}, got {sos_evaluation!r}"
            )
        self.sos_evaluation = sos_evaluation
        # None: by spectrum (DEFAULT_SINUSOIDS, or GAUSSIAN_SINUSOIDS for a Gaussian spectrum)
        self.n_sinusoids = None if n_sinusoids is None else _positive_int(n_sinusoids, "n_sinusoids")
        if threads is not None and (isinstance(threads, bool) or not isinstance(threads, (int, np.integer))):
            raise InputError(f"threads must be an integer, got {threads!r}")
        self.threads = max(1, int(threads)) if threads is not None else DEFAULT_THREADS
        taps = tuple(getattr(profile, "taps", ()) or ())
        if not taps:
            raise InputError("the profile has no taps")
        self.profile_name = getattr(profile, "name", "")
        self._taps = [self._build_tap(j, tap) for j, tap in enumerate(taps)]

    # -- shape ---------------------------------------------------------------
    @property
    def n_taps(self) -> int:
        return len(self._taps)

    # -- samples ---------------------------------------------------------------
    def block(self, start: int, stop: int) -> np.ndarray:
        """Tap gains at samples [start, stop): complex64, shape (stop - start, n_taps).

        sqrt(P) (sqrt(K/(K+1)) direct + sqrt(1/(K+1)) diffuse) per tap
        (static: sqrt(P) direct; Rayleigh: sqrt(P) diffuse). In periodic mode
        any index >= 0 is allowed and sample n equals sample n mod n_samples.
        """
        return self._assemble(start, stop, "gain", 0)

    def diffuse(self, start: int, stop: int, link: int = 0) -> np.ndarray:
        """Unit-power diffuse processes of every tap, complex64 (stop - start, n_taps).

        Each link draws its own independent streams with the taps' spectra
        (for MIMO correlation later). A static tap's column is zero.
        """
        return self._assemble(start, stop, "diffuse", _link(link))

    def diffuse_rows(self, start: int, stop: int, link: int = 0) -> np.ndarray:
        """:meth:`diffuse` tap-major: complex64 (n_taps, stop - start), the same values, not transposed."""
        return self._assemble(start, stop, "diffuse", _link(link), transpose=False)

    def direct(self, start: int, stop: int) -> np.ndarray:
        """Unit-modulus direct phasors exp(j(2 pi f_los n / F_u + phi0)), complex64.

        Rician and static taps only; a Rayleigh tap has no direct part and
        its column is 1 (its weight in :meth:`block` is zero).
        """
        return self._assemble(start, stop, "direct", 0)

    def direct_rows(self, start: int, stop: int, taps) -> np.ndarray:
        """:meth:`direct` of the taps listed, tap-major: complex64 (len(taps), stop - start), the same values."""
        return self._assemble(start, stop, "direct", 0, transpose=False, taps=list(taps))

    def chunks(self, chunk_size: int = DEFAULT_CHUNK, *, start: int = 0, stop: int | None = None):
        """Yield ``(first_index, gains)`` over [start, stop) (default: the record) in order."""
        chunk_size = _positive_int(chunk_size, "chunk_size")
        stop = self.n_samples if stop is None else stop
        pos = start
        while pos < stop:
            end = min(pos + chunk_size, stop)
            yield pos, self.block(pos, end)
            pos = end

    # -- description for the manifest ------------------------------------------
    def tap_info(self) -> list[dict]:
        """Per tap: what was actually used (direct Doppler after rounding, drawn phase, designs)."""
        return [dict(t["info"], **self._design_info(t)) for t in self._taps]

    def parameters(self) -> dict:
        """The method's parameters, for the manifest (JSON-ready)."""
        out = {
            "method": self.method,
            "generator_version": GENERATOR_VERSION,
            "periodic": self.periodic,
            "update_rate_hz": self.update_rate_hz,
            "n_samples": self.n_samples,
            "interpolation": {
                "internal_rate_range_doppler": [_design.INTERNAL_RATE_MIN, _design.INTERNAL_RATE_MAX],
                "linear_stage_min_rate_doppler": _design.FINAL_STAGE_MIN,
                "stage1_attenuation_db": _design.STAGE1_ATTENUATION_DB,
                "stage1_window": "kaiser",
            },
        }
        if self.method == "doppler-filter":
            out["doppler_filter"] = {
                "design": "windowed-autocorrelation square root (zero phase)",
                "lag_window_half_span_doppler_periods": _design.LAG_WINDOW_DOPPLER_PERIODS,
                "lag_window_min_sigma_periods": _design.LAG_WINDOW_SIGMA_PERIODS,
                "lag_window_kaiser_beta": _design.LAG_WINDOW_BETA,
                "filter_span": _design.DOPPLER_FILTER_SPAN,
                "tukey_taper": _design.DOPPLER_FILTER_TAPER,
                "noise": "circular complex Gaussian, numpy float32 ziggurat, one keyed stream per internal block",
            }
        else:
            out["sum_of_sinusoids"] = {
                "model": "Zheng-Xiao 2002 (random phases, random angles), quantile form",
                "n_sinusoids_per_quadrature": self.n_sinusoids or {
                    name: kind.sinusoids for name, kind in spectra.SPECTRA.items()},
                "evaluation": self.sos_evaluation,
                "phase_resolution_cycles": 2.0**-52,
            }
        return out

    # -- construction -------------------------------------------------------------
    def _build_tap(self, j: int, tap) -> dict:
        where = f"tap {j}"
        fading = tap.fading
        if fading not in ("rayleigh", "rician", "static"):
            raise InputError(f"{where}: unknown fading {fading!r}")
        power = float(tap.power_linear)
        if not (power >= 0 and math.isfinite(power)):
            raise InputError(f"{where}: power_linear must be finite and >= 0, got {power!r}")
        k = 0.0
        if fading == "rician":
            k = float(tap.k_linear) if tap.k_linear is not None else math.nan
            if not (k >= 0 and math.isfinite(k)):
                raise InputError(f"{where}: a Rician tap needs a finite K >= 0, got {tap.k_linear!r}")
        if fading == "static":
            direct_amp, diffuse_amp = math.sqrt(power), 0.0
        else:
            direct_amp = math.sqrt(power * k / (k + 1.0))
            diffuse_amp = math.sqrt(power / (k + 1.0))
        info = {
            "index": j,
            "fading": fading,
            "power_linear": power,
            "k_linear": k if fading == "rician" else None,
            "spectrum": tap.spectrum if fading != "static" else None,
            "max_doppler_hz": tap.max_doppler_hz if fading != "static" else None,
            "sigma_hz": tap.sigma_hz if fading != "static" else None,
        }
        entry = {"fading": fading, "direct_amp": direct_amp, "diffuse_amp": diffuse_amp,
                 "source": None, "phase": None, "info": info}
        if fading != "static":
            entry["source"] = self._diffuse_source(j, tap, where)
        if fading in ("rician", "static"):
            entry["phase"] = self._direct_phase(j, tap, where, info)
        return entry

    def _diffuse_source(self, j, tap, where):
        fd = tap.max_doppler_hz
        if fd is None or not (fd > 0 and math.isfinite(fd)):
            raise InputError(f"{where}: a {tap.fading} tap needs max_doppler_hz > 0, got {fd!r}")
        if self.update_rate_hz < MIN_UPDATE_RATIO * fd:
            raise InputError(
                f"{where}: update rate {self.update_rate_hz:g} Hz is too low for a maximum Doppler "
                f"of {fd:g} Hz",
                hint=f"use at least {MIN_UPDATE_RATIO:g} x f_D = {MIN_UPDATE_RATIO * fd:g} Hz; "
                "8 x f_D or more is usual",
            )
        try:
            spectrum = tap.doppler_spectrum
        except ValueError as error:
            raise InputError(f"{where}: {error}") from None
        period = self.n_samples if self.periodic else None
        if self.method == "sum-of-sinusoids" and self.sos_evaluation == "exact":
            rates = _design.RatePlan(self.update_rate_hz, 1, 1)
        else:
            rates = _design.choose_rate_plan(self.update_rate_hz, fd, period)
        chain = _design.design_chain(rates, spectrum)
        internal_period = self.n_samples // rates.total if self.periodic else None
        if self.method == "sum-of-sinusoids":
            count = self.n_sinusoids or spectrum.spec.sinusoids
            return SumOfSinusoidsSource(spectrum, chain, count, self.seed, j, internal_period)
        try:
            design = _doppler_design(spectrum, rates)
        except ValueError as error:
            hint = "choose a record length with small prime factors" if self.periodic else None
            raise InputError(f"{where}: {error}", hint=hint) from None
        return DopplerFilterSource(design, self.seed, j, internal_period)

    def _direct_phase(self, j, tap, where, info) -> ConstantDopplerPhase:
        requested = float(tap.los_doppler_hz) if tap.los_doppler_hz is not None else 0.0
        if not (math.isfinite(requested) and abs(requested) < self.update_rate_hz / 2.0):
            raise InputError(
                f"{where}: direct-part Doppler {requested:g} Hz must be below half the update "
                f"rate ({self.update_rate_hz / 2.0:g} Hz)"
            )
        if tap.los_phase_deg is None:
            phase_deg = float(generator(self.seed, DIRECT_PHASE, j).uniform(0.0, 360.0))
            source = "drawn from the seed"
        else:
            phase_deg = float(tap.los_phase_deg)
            source = "profile"
        phase, used = direct_phase(requested, phase_deg, self.update_rate_hz, self.n_samples, self.periodic)
        info.update({
            "los_doppler_requested_hz": requested,
            "los_doppler_hz": used,
            "los_doppler_rounding_hz": used - requested,
            "los_phase_deg": phase_deg,
            "los_phase_source": source,
        })
        return phase

    def _design_info(self, t) -> dict:
        source = t["source"]
        if source is None:
            return {}
        chain = source.design.chain if isinstance(source, DopplerFilterSource) else source.chain
        rates = chain.rates
        fd = t["info"]["max_doppler_hz"]
        out = {
            "internal_rate_hz": rates.internal_rate_hz,
            "interpolation_factors": [rates.up1, rates.up2],
            "stage1_filter_length": len(chain.h1) if rates.up1 > 1 else 0,
            "synthesis_block_samples": source.output_block,
        }
        out.update(_design.chain_figures(chain, fd))
        if isinstance(source, DopplerFilterSource):
            d = source.design
            out["doppler_filter_length"] = len(d.h0)
            out["lag_window_half_span"] = d.lag_window_half_span
            out["design"] = dict(d.figures)
        else:
            out["n_sinusoids"] = source.n_sinusoids
            out["sinusoid_evaluation"] = self.sos_evaluation
        return out

    # -- assembly -------------------------------------------------------------------
    def _assemble(self, start, stop, what, link, transpose=True, taps=None):
        """Fill (n, n_taps), one task per tap (threads over taps when it pays).

        Each tap is written into its own contiguous row of a (n_taps, n) array,
        then the whole is transposed once (the same values; a strided column per
        tap cost a third of the plain compile).
        """
        pieces = self._pieces(start, stop)
        n = stop - start
        taps = range(self.n_taps) if taps is None else taps
        rows = np.empty((len(taps), n), np.complex64)

        def fill(i):
            self._fill_column(self._taps[taps[i]], rows[i], pieces, what, link)

        if self.threads > 1 and len(taps) > 1 and n * len(taps) >= _PARALLEL_MIN_WORK:
            list(_executor(self.threads).map(fill, range(len(taps))))
        else:
            for i in range(len(taps)):
                fill(i)
        return np.ascontiguousarray(rows.T) if transpose else rows

    def _fill_column(self, t, column, pieces, what, link):
        source, phase = t["source"], t["phase"]
        for offset, a, b in pieces:
            dest = column[offset : offset + (b - a)]
            if what == "direct":
                if phase is None:
                    dest[...] = 1.0
                else:
                    phase.write(a, b, dest, 1.0, add=False)
                continue
            if what == "diffuse":
                if source is None:
                    dest[...] = 0.0
                else:
                    source.write(a, b, link, dest, 1.0)
                continue
            if source is not None:
                source.write(a, b, link, dest, t["diffuse_amp"])
            if phase is not None:
                phase.write(a, b, dest, t["direct_amp"], add=source is not None)

    def _pieces(self, start, stop):
        """[(offset in the request, a, b)] with 0 <= a < b <= n_samples (wraps if periodic)."""
        if not (isinstance(start, (int, np.integer)) and isinstance(stop, (int, np.integer))):
            raise TypeError(f"start and stop must be integers, got {start!r}, {stop!r}")
        start, stop = int(start), int(stop)
        if start < 0 or stop < start:
            raise ValueError(f"need 0 <= start <= stop, got start={start}, stop={stop}")
        n = self.n_samples
        if not self.periodic:
            if stop > n:
                raise ValueError(f"stop={stop} is beyond the record ({n} samples)")
            return [(0, start, stop)] if stop > start else []
        pieces = []
        pos = start
        while pos < stop:
            a = pos % n
            take = min(stop - pos, n - a)
            pieces.append((pos - start, a, a + take))
            pos += take
        return pieces


# -- helpers ---------------------------------------------------------------------------


@lru_cache(maxsize=32)
def _doppler_design(spectrum, rates):
    return _design.design_doppler_filter(spectrum, _design.design_chain(rates, spectrum))


@lru_cache(maxsize=4)
def _executor(threads: int) -> ThreadPoolExecutor:
    return ThreadPoolExecutor(max_workers=threads, thread_name_prefix="emucompile-fading")


def _positive_float(value, name):
    try:
        out = float(value)
    except (TypeError, ValueError):
        raise InputError(f"{name} must be a number, got {value!r}") from None
    if not (out > 0 and math.isfinite(out)):
        raise InputError(f"{name} must be finite and > 0, got {value!r}")
    return out


def _positive_int(value, name):
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < 1:
        raise InputError(f"{name} must be an integer >= 1, got {value!r}")
    return int(value)


def _seed(value):
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < 0:
        raise InputError(f"seed must be an integer >= 0, got {value!r}")
    return int(value)


def _link(value):
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < 0:
        raise ValueError(f"link must be an integer >= 0, got {value!r}")
    return int(value)
