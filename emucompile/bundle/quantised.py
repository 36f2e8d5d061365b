"""Integer codes in a bundle: the int16 tap gains (``ci16``) and the emulator's integer FIR coefficients.

How a scale is chosen before any data exist (:func:`ci16_scaling`), the
writers that quantise as they stream (:class:`Ci16Writer`,
:class:`FirCodesWriter`) with their clip counts and measured SQNR, and the
one dequantiser (:func:`dequantise_ci16`).

References
----------
.. [Widrow2008] B. Widrow and I. Kollár, Quantization Noise, Cambridge
   University Press, 2008: a uniform quantiser of step Δ adds noise of
   variance Δ²/12 per real component when the signal spans many steps.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from emucompile._lazy import LazyModule
from emucompile.bundle.writers import GAIN_AXES, ArrayWriter, _db_ratio, _rounded

stats = LazyModule("scipy.stats")

CI16_FULL_SCALE = 32767  # symmetric range: -32768 is never used, so |code| <= 32767
DEFAULT_CLIP_PROBABILITY = 1e-6


# -- the int16 scale ---------------------------------------------------------------


@dataclass(frozen=True)
class Ci16Scaling:
    """How tap gains map onto int16 codes: ``code = round_half_even(gain · scale_factor)``.

    Attributes
    ----------
    scale_factor : float
        Codes per unit of linear gain amplitude; gain = code / scale_factor.
    clip_level : float
        The gain amplitude mapped to full scale (``CI16_FULL_SCALE / scale_factor``).
    headroom_db : float
        20·log10(clip_level / RMS amplitude of the strongest tap).
    clip_probability : float
        Design probability that one sample's envelope |g| of any tap exceeds
        ``clip_level``; a clipped I or Q component needs that, so it bounds
        the per-component clipping probability too.
    strongest_tap : int
        The tap whose envelope law set the clip level.
    """

    scale_factor: float
    clip_level: float
    headroom_db: float
    clip_probability: float
    strongest_tap: int


def ci16_scaling(tap_power_linear, tap_k_linear, *, clip_probability=DEFAULT_CLIP_PROBABILITY):
    """Choose the int16 scale before any data are seen, from the taps' envelope laws.

    For each tap of mean power Ω and Rician factor K the clip level is the
    envelope quantile with exceedance probability ``clip_probability``:
    Rician with ν² = Ω·K/(K+1), σ² = Ω/(2(K+1)), i.e.
    ``scipy.stats.rice.isf(p, b=sqrt(2K), scale=σ)`` (K = 0 is Rayleigh);
    a static tap (K = ∞) has the constant envelope √Ω. The largest level
    over the taps maps to full scale (32767), so no tap exceeds it with
    probability above ``clip_probability`` per sample.

    Parameters
    ----------
    tap_power_linear : sequence of float
        Mean power E|g|² of each tap (the same on every link).
    tap_k_linear : sequence of float
        K of each tap: 0 for Rayleigh, ``math.inf`` for static.
    clip_probability : float
        Per-sample exceedance probability of the envelope, in (0, 0.5).

    Returns
    -------
    Ci16Scaling

    References
    ----------
    Envelope law: S. O. Rice, Bell Syst. Tech. J. 23 (1944); the Rician
    parametrisation b = √(2K), σ² = Ω/(2(K+1)) is that of ``scipy.stats.rice``.
    """
    powers = [float(p) for p in tap_power_linear]
    ks = [float(k) for k in tap_k_linear]
    if len(powers) != len(ks) or not powers:
        raise ValueError("tap_power_linear and tap_k_linear need one value per tap")
    if not 0.0 < clip_probability < 0.5:
        raise ValueError(f"clip_probability must be in (0, 0.5), got {clip_probability!r}")
    levels = []
    for power, k in zip(powers, ks):
        if not (power >= 0.0 and math.isfinite(power)) or not k >= 0.0:
            raise ValueError(f"tap power {power!r} and K {k!r} must be finite >= 0 (K may be inf)")
        if math.isinf(k):
            levels.append(math.sqrt(power))
        else:
            sigma = math.sqrt(power / (2.0 * (k + 1.0)))
            levels.append(
                float(stats.rice.isf(clip_probability, math.sqrt(2.0 * k), scale=sigma)) if power > 0 else 0.0
            )
    strongest = int(np.argmax(levels))
    clip_level = levels[strongest]
    if not clip_level > 0.0:
        raise ValueError("every tap has zero power: no int16 scale can be chosen")
    rms = math.sqrt(max(powers))
    return Ci16Scaling(
        scale_factor=CI16_FULL_SCALE / clip_level,
        clip_level=clip_level,
        headroom_db=20.0 * math.log10(clip_level / rms),
        clip_probability=float(clip_probability),
        strongest_tap=strongest,
    )


def read_ci16(path, shape, scale_factor: float, *, offset: int = 0):
    """Read interleaved int16 I/Q and return complex64 gains (code / scale_factor).

    ``shape`` is the shape of the gains (without the trailing I/Q axis).
    """
    codes = np.memmap(path, dtype="<i2", mode="r", offset=offset, shape=(*shape, 2))
    return dequantise_ci16(codes, scale_factor)


def dequantise_ci16(codes, scale_factor: float):
    """int16 I/Q codes (..., 2) -> complex64 gains (code / scale_factor)."""
    gains = np.empty(codes.shape[:-1], dtype=np.complex64)
    gains.real = codes[..., 0] / scale_factor
    gains.imag = codes[..., 1] / scale_factor
    return gains


class Ci16Writer(ArrayWriter):
    """``tap_gains.ci16``: quantised gains, with clip counts and measured SQNR per tap.

    code = clip(round_half_even(gain · scale_factor), −32767, 32767) for I and Q.
    The measured SQNR of tap k is Σ|g|² / Σ|g − code/scale|² over all its
    samples and links, clipping included.
    """

    def __init__(self, scaling: Ci16Scaling, n_samples, n_rx, n_tx, n_taps, tap_power_linear):
        super().__init__(
            "tap_gains.ci16",
            "tap_gains_ci16",
            np.int16,
            (n_samples, n_rx, n_tx, n_taps, 2),
            (*GAIN_AXES, "iq"),
            header=False,
        )
        self.scaling = scaling
        self.tap_power_linear = [float(p) for p in tap_power_linear]
        self._signal = np.zeros(n_taps)
        self._error = np.zeros(n_taps)
        self._clipped = np.zeros(n_taps, dtype=np.int64)

    _block_elements = 1 << 15  # codes per block: float64 buffers of 256 KiB, kept in cache and reused

    def encode(self, chunk):
        # The same float64 arithmetic as ever (so the same codes: float32 -> float64 is exact,
        # one product, round half to even), in place in reused buffers; bytes unchanged.
        components = chunk.view(np.float32).reshape(*chunk.shape, 2)
        scaled, codes, square = self._buffers(components.shape)
        np.multiply(components, np.float64(self.scaling.scale_factor), out=scaled)
        np.rint(scaled, out=codes)
        if codes.max(initial=0.0) > CI16_FULL_SCALE or codes.min(initial=0.0) < -CI16_FULL_SCALE:
            self._clipped += _per_tap_sum(np.abs(codes) > CI16_FULL_SCALE)
            np.clip(codes, -CI16_FULL_SCALE, CI16_FULL_SCALE, out=codes)
        self._signal += _per_tap_sum(np.square(components, out=square, dtype=np.float64))
        error = np.subtract(scaled, codes, out=scaled)
        error /= self.scaling.scale_factor
        self._error += _per_tap_sum(np.square(error, out=square))
        return codes.astype("<i2")

    def _buffers(self, shape):
        """Three float64 work arrays of ``shape`` (views of one buffer reused from block to block)."""
        size = math.prod(shape)
        if getattr(self, "_work", None) is None or self._work.shape[1] < size:
            self._work = np.empty((3, size))
        return tuple(self._work[i, :size].reshape(shape) for i in range(3))

    def close(self, **context) -> list[dict]:
        entries = super().close()
        scale = self.scaling.scale_factor
        entries[0]["element"] = "int16 I then Q; gain = (I + jQ) / scale_factor"
        entries[0]["quantisation"] = {
            "scale_factor": scale,
            "full_scale_code": CI16_FULL_SCALE,
            "clip_level": self.scaling.clip_level,
            "headroom_db": _rounded(self.scaling.headroom_db),
            "clip_probability": self.scaling.clip_probability,
            "scale_rule": (
                "clip_level = max over taps of the envelope quantile exceeded with clip_probability "
                "(Rician/Rayleigh law, scipy.stats.rice.isf; static taps: sqrt(power)); "
                "scale_factor = full_scale_code / clip_level"
            ),
            "rounding": "round half to even, then clip to [-32767, 32767]",
            "clipped_values": int(self._clipped.sum()),
            "clipped_values_per_tap": [int(c) for c in self._clipped],
            "sqnr_db_per_tap": [_db_ratio(s, e) for s, e in zip(self._signal, self._error)],
            "sqnr_db_model_per_tap": [
                _db_ratio(6.0 * p * scale * scale, 1.0) if p > 0 else None for p in self.tap_power_linear
            ],
            "sqnr_note": (
                "sqnr_db_per_tap is measured (null when undefined: no signal or no error); the model is "
                "power / (2 * step^2 / 12), uniform quantisation noise of step 1/scale_factor per component"
            ),
        }
        return entries


FIR_CODES_ROLE = "fir_coefficients_int"
FIR_CODES_AXES = ("sample", "rx", "tx", "path", "iq")


class FirCodesWriter(ArrayWriter):
    """``fir_coefficients.ci16`` / ``.ci32``: the FIR coefficients as the emulator's integers.

    Coefficient c of path p at sample n is FIR column ``columns[p]`` of
    tap_gains(n) @ fir_map, accumulated in complex128 in tap order (as
    :class:`FirWriter`); each part becomes
    code = clip(round_half_even(part / step), -2^(b-1), 2^(b-1) - 1),
    two's complement on b = ``bits`` bits, stored in int16 (b <= 16) or int32,
    little-endian, I then Q. ``step`` = full_scale / 2^(b-1), full_scale the
    target fit's (10^(headroom/20) x the RMS of the strongest coefficient,
    :func:`emucompile.profile.target.coefficient_quantisation`). Only the columns
    some tap reaches are stored (the paths; the other columns are 0). Clipped
    parts are counted per path, and the SQNR measured per path (signal power
    over error power, clipping included). Elementwise arithmetic: the bytes
    do not depend on the chunking.
    """

    _block_elements = 1 << 20

    def __init__(
        self,
        fir_map,
        columns,
        bits,
        step,
        n_samples,
        n_rx,
        n_tx,
        *,
        headroom_db=None,
        sample_rate_hz=None,
        bulk_delay_samples=0,
    ):
        self.fir_map = np.asarray(fir_map, dtype=float)
        self.columns = [int(c) for c in columns]
        self.bits = int(bits)
        if not 2 <= self.bits <= 32:
            raise ValueError(f"bits must be in 2..32, got {bits!r}")
        self.step = float(step)
        if not (self.step > 0 and math.isfinite(self.step)):
            raise ValueError(f"step must be finite and > 0, got {step!r}")
        self.headroom_db = headroom_db
        self.sample_rate_hz = sample_rate_hz
        self.bulk_delay_samples = int(bulk_delay_samples)
        self.low, self.high = -(2 ** (self.bits - 1)), 2 ** (self.bits - 1) - 1
        dtype, suffix = (np.int16, "ci16") if self.bits <= 16 else (np.int32, "ci32")
        super().__init__(
            f"fir_coefficients.{suffix}",
            FIR_CODES_ROLE,
            dtype,
            (n_samples, n_rx, n_tx, len(self.columns), 2),
            FIR_CODES_AXES,
            header=False,
        )
        n_paths = len(self.columns)
        self._signal = np.zeros(n_paths)
        self._error = np.zeros(n_paths)
        self._clipped = np.zeros(n_paths, dtype=np.int64)

    def encode(self, chunk):
        weights = self.fir_map[:, self.columns]  # (n_taps, n_paths)
        accumulator = np.zeros((*chunk.shape[:3], len(self.columns)), dtype=np.complex128)
        for k in range(chunk.shape[3]):
            accumulator += chunk[..., k, None].astype(np.complex128) * weights[k]
        parts = accumulator.view(np.float64).reshape(*accumulator.shape, 2)
        scaled = parts / self.step
        codes = np.rint(scaled)
        over = (codes < self.low) | (codes > self.high)
        np.clip(codes, self.low, self.high, out=codes)
        samples_links_iq = (0, 1, 2, 4)
        self._clipped += over.sum(axis=samples_links_iq)
        self._signal += np.square(parts).sum(axis=samples_links_iq)
        self._error += np.square((scaled - codes) * self.step).sum(axis=samples_links_iq)
        return codes.astype(self.dtype)

    def close(self, **context) -> list[dict]:
        entries = super().close()
        entry = entries[0]
        entry["element"] = (
            f"int{self.dtype.itemsize * 8} I then Q, two's complement on {self.bits} bits; "
            "coefficient = (I + jQ) * step"
        )
        entry["coefficient_codes"] = {
            "bits": self.bits,
            "step": self.step,
            "full_scale": self.step * 2.0 ** (self.bits - 1),
            "headroom_db": self.headroom_db,
            "code_range": [self.low, self.high],
            "rounding": f"round half to even, then clip to [{self.low}, {self.high}]",
            "columns": list(self.columns),
            "sample_rate_hz": self.sample_rate_hz,
            "bulk_delay_samples": self.bulk_delay_samples,
            "delays_s": [
                (c - self.bulk_delay_samples) / self.sample_rate_hz if self.sample_rate_hz else None
                for c in self.columns
            ],
            "clipped_values": int(self._clipped.sum()),
            "clipped_values_per_path": [int(c) for c in self._clipped],
            "sqnr_db_per_path": [_db_ratio(s, e) for s, e in zip(self._signal, self._error)],
            "sqnr_db": _db_ratio(float(self._signal.sum()), float(self._error.sum())),
            "note": (
                "path p is FIR column columns[p] of tap_gains @ fir_map (delay (column - bulk_delay_samples) "
                "/ sample_rate_hz); columns no tap reaches are 0 and not stored; sqnr measured over every "
                "sample and link, clipping included (null when undefined)"
            ),
        }
        return entries


def _per_tap_sum(values):
    """Sums over (sample, rx, tx, iq) of an array (m, n_rx, n_tx, n_taps, 2), per tap; row sums run contiguous."""
    n_taps = values.shape[3]
    return values.reshape(-1, 2 * n_taps).sum(axis=0).reshape(n_taps, 2).sum(axis=1)


__all__ = [
    "CI16_FULL_SCALE",
    "DEFAULT_CLIP_PROBABILITY",
    "Ci16Scaling",
    "ci16_scaling",
    "read_ci16",
    "dequantise_ci16",
    "Ci16Writer",
    "FIR_CODES_ROLE",
    "FIR_CODES_AXES",
    "FirCodesWriter",
]
