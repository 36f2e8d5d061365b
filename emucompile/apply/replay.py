"""Replay a bundle over an IQ recording: the time-varying FIR channel, with optional noise.

The channel of one link at output sample n is the FIR of docs/bundle-format.md at the
output instant, h_n = g(t_n) @ fir_map, and the output is

    y[n] = sum_k h_n[k] x[n - k]                                  (1)

with x[m] = 0 before the recording starts. Because the rows m_i of the FIR
map are fixed, (1) is the same as

    y[n] = sum_i g_i(t_n) (x * m_i)[n],                           (2)

one static filter per tap followed by a multiplication by that tap's gain
at the sample rate. With gains joined linearly between update instants
(below), (2) is in turn the same as

    y[n] = (x * h_k)[n] + theta_n (x * (h_{k+1} - h_k))[n]        (3)

inside the update interval k (h_k = g[k] @ fir_map): two static filters per
update interval. Both are exact rewritings of (1); the engine uses (3) when
the intervals are long and (2) when they are short (:data:`ENGINES`).

Time
    Gain sample k is at t = k / update_rate_hz (bundle time). Output sample n
    is at t_n = start_s + n / sample_rate_hz, so u_n = t_n update_rate_hz is
    a position in gain samples, k_n = floor(u_n), theta_n = u_n - k_n. The
    output has as many samples as the input; y[n] holds the paths that leave
    the input at m = n - bulk_delay_samples - tau_i sample_rate_hz (the FIR
    map's bulk delay is recorded in the output's metadata).
Between updates
    ``linear`` (default): g(t_n) = (1 - theta_n) g[k_n] + theta_n g[k_n + 1],
    what an emulator that interpolates its coefficients does; exact at the
    update instants. ``hold``: g(t_n) = g[k_n], what one that holds them does.
    The bundle's ``target`` decides when it states one. Against the
    band-limited (ideal) reconstruction of the gains, linear interpolation of
    a tone at f/update_rate = x errs by
    e(x) = integral_0^1 |1 - theta + theta e^{j 2 pi x} - e^{j 2 pi x theta}|^2 d theta
    of its power: -37.1 dB at x = 1/16, -49.1 dB at 1/32 (12 dB per octave:
    e ~ (2 pi x)^4 / 120 for small x); averaged over a classical Doppler
    spectrum with f_D = update_rate / 16, -41.3 dB (f_D = update_rate / 32:
    -53.3 dB). Hold errs by -12.9 dB for the tone at x = 1/16 (-15.9 dB over
    the classical spectrum). ``tests/test_apply.py`` measures the tone figures
    through the engine and checks them against the integral.
End of the bundle and --loop
    A bundle covers 0 <= t < duration_s = n_samples / update_rate_hz. Past it
    the run is refused unless ``loop``: then gain indices are taken modulo
    n_samples. A periodic bundle (``periodic: true``) joins seamlessly: its
    sample n_samples is sample 0. A bundle that is not periodic joins its
    last sample to its first with one straight line over 1/update_rate (no
    jump, but the join's Doppler statistics are not the profile's), and
    without ``loop`` holds its last sample over its last update interval.
Noise
    Complex white Gaussian noise, independent per receive antenna, of variance
    sigma_rx^2 = P_rx / 10^(snr_db / 10) per complex sample over the whole band
    |f| < sample_rate_hz / 2, where P_rx is the *nominal* output power
    P_rx = C sum_tx P_x,tx: P_x,tx the measured mean |x|^2 of transmit stream
    tx over the whole input, and C = sum_i P_i sum_n fir_map[i, n]^2 the
    channel's mean power (P_i the manifest's mean tap power; sum_n m_i[n]^2
    the power gain of row i for a white input filling the band, 1 for a tap on
    the sample grid). The noise of output sample n is fixed by the seed and n
    alone (frames of :data:`NOISE_FRAME_SAMPLES` from ``SeedSequence(seed,
    spawn_key=(frame,))``), whatever the block size.

References
----------
.. [OppenheimSchafer] A. V. Oppenheim, R. W. Schafer, Discrete-Time Signal
   Processing, 3rd ed., Prentice Hall, 2010: section 8.7 (linear convolution
   by the DFT, overlap-save) and section 4.6 (zero-order hold and linear
   interpolation, responses sinc and sinc^2).
.. [Laakso1996] T. I. Laakso et al., "Splitting the unit delay", IEEE Signal
   Processing Magazine 13(1), 1996 (the windowed-sinc rows of the FIR map).
.. [SigMF] The GNU Radio Foundation, "Signal Metadata Format (SigMF)
   Specification" v1.2: ``core:datatype`` (cf32_le, cf64_le, ci16_le),
   ``core:sample_rate``, ``core:num_channels`` (channels interleaved sample
   by sample), ``core:sha512``, captures' ``core:header_bytes``.
"""

from __future__ import annotations

import contextlib
import errno
import json
import math
import numbers
import os
import secrets
import signal
import threading
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path

import numpy as np
import scipy.fft

from emucompile.bundle import store as bd
from emucompile.bundle import formats as fmt
from emucompile.models import grid
from emucompile._version import __version__
from emucompile.errors import InputError

BETWEEN_UPDATES = ("linear", "hold")
ENGINES = ("auto", "interval", "per-tap")
# "auto" takes the interval engine, (3), when an update interval spans at least
# this many samples and the per-tap engine, (2), below: the crossover measured by
# benchmarks/bench_apply.py --sweep (12 taps, 109 coefficients).
INTERVAL_ENGINE_MIN_SAMPLES = 16
# The interval engine filters pieces of at most this many samples (plus the
# FIR's memory) per FFT: long enough that the overlap wastes little, short
# enough that the FFTs stay in cache.
INTERVAL_PIECE_SAMPLES = 2048
BLOCK_SAMPLES = 1 << 16
NOISE_FRAME_SAMPLES = 1 << 16
SIDECAR_FORMAT = "emucompile-apply"
SIDECAR_VERSION = 1
RAW_SUFFIXES = (".cf32", ".cfile", ".fc32")
SIGMF_DATATYPES = {"cf32_le": np.dtype("<c8"), "cf64_le": np.dtype("<c16"), "ci16_le": np.dtype("<i2")}
CI16_FULL_SCALE = fmt.CI16_FULL_SCALE
_RATE_RELATIVE_TOLERANCE = 1e-9
_SUB_BLOCK_SAMPLES = 4096  # gains gathered per sample in pieces of this size (cache-sized)
_PER_TAP_ELEMENTS = 1 << 20  # bound of the per-tap engine's filtered streams per pass
_INTERVAL_ELEMENTS = 1 << 20  # bound of the interval engine's spectra per group of pieces


# -- the channel ---------------------------------------------------------------------


class TimeVaryingFir:
    """The time-varying FIR channel of a bundle, applied block by block (streaming).

    Parameters
    ----------
    tap_gains : array (n_samples, n_rx, n_tx, n_taps), complex
        The bundle's gains (a memory map is fine: only the rows a block needs are read).
    fir_matrix : array (n_taps, n_fir), real
        The FIR map: FIR(t) = tap_gains(t) @ fir_matrix.
    update_rate_hz, sample_rate_hz : float
        Rate of the gains and of the signal.
    start_s : float
        Bundle time of output sample 0, in [0, duration).
    loop : bool
        Take gain indices modulo n_samples (see the module notes); without it,
        :meth:`process` refuses samples past the bundle's end.
    periodic : bool
        The bundle is periodic: its sample n_samples is its sample 0.
    between_updates : {"linear", "hold"}
    engine : {"auto", "interval", "per-tap"}
        How (1) is computed: ``interval`` by (3), ``per-tap`` by (2); ``auto``
        picks ``interval`` when sample_rate / update_rate >=
        :data:`INTERVAL_ENGINE_MIN_SAMPLES` and some row of the map has more
        than one coefficient, else ``per-tap`` (with every tap on the grid it
        filters nothing: y[n] = sum_i g_i(t_n) c_i x[n - d_i], one rounding per
        product). The engines agree to rounding.
    dtype : complex64 or complex128
        Working precision, and the dtype of the output blocks.

    Notes
    -----
    Cost per output sample, with L = n_fir. Interval engine: the block is cut
    into pieces of one update interval (at most ``max(2048, 8 L)`` samples);
    per piece one FFT of its input window (piece + L - 1 samples) per
    transmit stream and two inverse FFTs (one for hold) per receive antenna,
    the transmit streams summed in the frequency domain: O(log(piece + L))
    per sample and link, times the overlap (piece + L - 1) / piece; plus
    O(n_links n_taps size) per update interval to form the filters' spectra.
    Per-tap engine: one FFT filter per tap whose row has more than one
    coefficient (a row with one coefficient is a shift), plus O(n_links
    n_taps) to interpolate and sum the gains. Memory: O(block + L) per
    stream; the input's last L - 1 samples carry over between blocks.
    ``benchmarks/bench_apply.py`` measures both against a static filter.

    References
    ----------
    Overlap-save and FFT convolution: [OppenheimSchafer]_ section 8.7.
    """

    def __init__(self, tap_gains, fir_matrix, *, update_rate_hz: float, sample_rate_hz: float,
                 start_s: float = 0.0, loop: bool = False, periodic: bool = False,
                 between_updates: str = "linear", engine: str = "auto", dtype=np.complex64):
        gains = tap_gains
        if getattr(gains, "ndim", None) != 4 or gains.shape[0] < 1:
            raise ValueError(f"tap_gains must have shape (n_samples, n_rx, n_tx, n_taps), got {getattr(gains, 'shape', None)}")
        matrix = np.asarray(fir_matrix)
        if matrix.dtype.kind == "c" and not np.any(matrix.imag):
            matrix = matrix.real
        matrix = matrix.astype(np.complex128 if matrix.dtype.kind == "c" else np.float64)
        if matrix.ndim != 2 or matrix.shape[0] != gains.shape[3] or matrix.shape[1] < 1:
            raise ValueError(f"fir_matrix must have shape (n_taps={gains.shape[3]}, n_fir), got {matrix.shape}")
        for name, rate in (("update_rate_hz", update_rate_hz), ("sample_rate_hz", sample_rate_hz)):
            if isinstance(rate, bool) or not (isinstance(rate, numbers.Real) and math.isfinite(rate) and rate > 0):
                raise ValueError(f"{name} must be finite and > 0, got {rate!r}")
        if between_updates not in BETWEEN_UPDATES:
            raise ValueError(f"between_updates must be one of {BETWEEN_UPDATES}, got {between_updates!r}")
        if engine not in ENGINES:
            raise ValueError(f"engine must be one of {ENGINES}, got {engine!r}")
        self.dtype = np.dtype(dtype)
        if self.dtype not in (np.complex64, np.complex128):
            raise ValueError(f"dtype must be complex64 or complex128, got {self.dtype}")
        self.tap_gains = gains
        self.fir_matrix = matrix
        self.update_rate_hz = float(update_rate_hz)
        self.sample_rate_hz = float(sample_rate_hz)
        self.n_updates, self.n_rx, self.n_tx, self.n_taps = (int(s) for s in gains.shape)
        self.n_fir = matrix.shape[1]
        self.loop = bool(loop)
        self.periodic = bool(periodic)
        self.between_updates = between_updates
        duration = self.n_updates / self.update_rate_hz
        if not (math.isfinite(start_s) and 0.0 <= start_s < duration):
            raise ValueError(f"start_s must lie in [0, {duration:g}) s (the bundle's duration), got {start_s!r}")
        self.start_s = float(start_s)
        self.samples_per_update = self.sample_rate_hz / self.update_rate_hz
        self._shift_rows, self._fft_rows = _classify_rows(matrix)
        if engine == "auto":
            # Every tap on the grid (one coefficient per row): (2) needs no filter at all
            # and gives g(t_n) c x[n - d] with one rounding per product.
            shifts_only = self._fft_rows.size == 0
            fast = self.samples_per_update >= INTERVAL_ENGINE_MIN_SAMPLES
            engine = "interval" if fast and not shifts_only else "per-tap"
        self.engine = engine
        self._u0 = self.start_s * self.update_rate_hz
        self._ratio = self.update_rate_hz / self.sample_rate_hz
        self._real = np.float32 if self.dtype == np.complex64 else np.float64
        self._row_spectra = {}
        self._piece_samples = max(INTERVAL_PIECE_SAMPLES, 8 * self.n_fir)
        self.reset()

    @property
    def covered_samples(self) -> int | None:
        """Output samples the bundle covers from ``start_s`` on (None with ``loop``).

        Sample n is covered when u_n = (start_s + n / sample_rate_hz) update_rate_hz < n_samples.
        """
        if self.loop:
            return None
        return int(math.ceil((self.n_updates - self._u0) / self._ratio - 1e-9))

    def reset(self) -> None:
        """Start again at output sample 0 with an empty filter memory."""
        self.samples_done = 0
        self._history = np.zeros((self.n_tx, self.n_fir - 1), dtype=self.dtype)

    def process(self, block) -> np.ndarray:
        """Filter the next ``block`` of input, shape (m, n_tx); return the output (m, n_rx).

        Successive calls continue one stream: the filter memory and the time
        carry over, so any split of the input gives the same output (to rounding).
        """
        x = np.asarray(block)
        if x.ndim != 2 or x.shape[1] != self.n_tx:
            raise ValueError(f"a block must have shape (m, n_tx={self.n_tx}), got {x.shape}")
        m = x.shape[0]
        covered = self.covered_samples
        if covered is not None and self.samples_done + m > covered:
            raise ValueError(
                f"output sample {self.samples_done + m - 1} lies past the bundle's end "
                f"(it covers {covered} samples from start_s = {self.start_s:g} s); pass loop=True"
            )
        if m == 0:
            return np.zeros((0, self.n_rx), dtype=self.dtype)
        span = np.concatenate([self._history, np.asarray(x.T, dtype=self.dtype)], axis=1)
        n = self.samples_done + np.arange(m, dtype=np.int64)
        u = self._u0 + n * self._ratio
        k = np.floor(u).astype(np.int64)
        theta = (u - k).astype(self._real) if self.between_updates == "linear" else None
        first = int(k[0])
        gains = self._gains(first, int(k[-1]) + 2)  # rows first .. last + 1
        if self.engine == "interval":
            y = self._interval_engine(span, k - first, theta, gains)
        else:
            y = self._per_tap_engine(span, k - first, theta, gains)
        if self.n_fir > 1:
            self._history = span[:, span.shape[1] - (self.n_fir - 1):].copy()
        self.samples_done += m
        return np.ascontiguousarray(y.T)

    # -- engines -------------------------------------------------------------------------

    def _interval_engine(self, span, local_k, theta, gains):
        """(3): per update interval, two static filters h_k and h_{k+1} - h_k, by FFT.

        The block is cut into pieces of constant k (intervals, split to at most
        ``_piece_samples``); all pieces are filtered at once by overlap-save
        with one FFT size, the filters' spectra formed from the rows' spectra
        by linearity: FFT(h_k) = g[k] @ FFT(rows).
        """
        m = local_k.size
        lead = self.n_fir - 1
        starts, ends = _pieces(local_k, self._piece_samples)
        longest = int(np.max(ends - starts))
        size = scipy.fft.next_fast_len(longest + lead, real=False)
        spectra = np.matmul(gains.astype(self.dtype), self._spectra(size))  # (K, n_rx, n_tx, size)
        steps = spectra[1:] - spectra[:-1] if theta is not None else None
        short = int(starts[-1]) + longest + lead - span.shape[1]  # the last piece's window runs past the span
        if short > 0:
            span = np.concatenate([span, np.zeros((self.n_tx, short), dtype=self.dtype)], axis=1)
        windows = np.lib.stride_tricks.sliding_window_view(span, longest + lead, axis=-1)
        y = np.empty((self.n_rx, m), dtype=self.dtype)
        done = 0
        per_group = max(1, _INTERVAL_ELEMENTS // (size * self.n_tx * self.n_rx))
        for g0 in range(0, starts.size, per_group):
            first, stop = starts[g0:g0 + per_group], ends[g0:g0 + per_group]
            rows = local_k[first]
            transformed = scipy.fft.fft(windows[:, first], size, axis=-1).transpose(1, 0, 2)[:, None]  # (p, 1, n_tx, size)
            # the pieces tile the block in order: their valid outputs, concatenated, are y's samples
            keep = np.arange(longest)[None, :] < (stop - first)[:, None]
            count = int(stop[-1] - first[0])
            part = _filtered(transformed, spectra[rows], lead, longest)[:, keep]
            if steps is not None:
                part += theta[done:done + count] * _filtered(transformed, steps[rows], lead, longest)[:, keep]
            y[:, done:done + count] = part
            done += count
        return y

    def _per_tap_engine(self, span, local_k, theta, gains):
        """(2): each tap's static row filters the input once; its interpolated gain weighs it."""
        m = local_k.size
        gains = gains.astype(self.dtype)
        steps = gains[1:] - gains[:-1] if theta is not None else None
        y = np.empty((self.n_rx, m), dtype=self.dtype)
        per_pass = max(_SUB_BLOCK_SAMPLES, _PER_TAP_ELEMENTS // (self.n_tx * self.n_taps))
        for first in range(0, m, per_pass):
            last = min(m, first + per_pass)
            streams = self._tap_streams(span[:, first:last + self.n_fir - 1], last - first)
            for s in range(first, last, _SUB_BLOCK_SAMPLES):
                e = min(last, s + _SUB_BLOCK_SAMPLES)
                z = streams[:, :, s - first:e - first].transpose(2, 0, 1)[:, None]  # (b, 1, n_tx, n_taps)
                rows = local_k[s:e]
                g = gains[rows]  # (b, n_rx, n_tx, n_taps): g(t_n) = g[k] + theta (g[k+1] - g[k])
                if steps is not None:
                    g += theta[s:e, None, None, None] * steps[rows]
                product = z * g
                y[:, s:e] = product.reshape(e - s, self.n_rx, -1).sum(axis=-1).T
        return y

    def _tap_streams(self, span, m):
        """(x * m_i)[n] for every transmit stream and tap: (n_tx, n_taps, m)."""
        lead = self.n_fir - 1
        streams = np.empty((self.n_tx, self.n_taps, m), dtype=self.dtype)
        for i, column, value in self._shift_rows:
            streams[:, i] = value * span[:, lead - column:lead - column + m]
        if self._fft_rows.size:
            size = scipy.fft.next_fast_len(span.shape[1], real=False)
            transformed = scipy.fft.fft(span, size, axis=-1)
            filtered = scipy.fft.ifft(transformed[:, None, :] * self._spectra(size)[self._fft_rows][None], axis=-1)
            streams[:, self._fft_rows] = filtered[:, :, lead:lead + m]
        return streams

    def _spectra(self, size: int) -> np.ndarray:
        """FFT of every row of the FIR map at ``size`` points (n_taps, size), cached."""
        spectra = self._row_spectra.get(size)
        if spectra is None:
            if len(self._row_spectra) >= 4:  # block lengths vary little; keep the cache small
                self._row_spectra.clear()
            spectra = scipy.fft.fft(self.fir_matrix, size, axis=-1).astype(self.dtype)
            self._row_spectra[size] = spectra
        return spectra

    def _gains(self, first: int, stop: int) -> np.ndarray:
        """Gain rows ``first`` .. ``stop - 1`` (as complex128), wrapped or held at the end."""
        index = np.arange(first, stop)
        if self.loop or self.periodic:
            index %= self.n_updates
        else:
            np.minimum(index, self.n_updates - 1, out=index)  # hold over the last interval
        return np.asarray(self.tap_gains[index], dtype=np.complex128)


def apply_channel(x, tap_gains, fir_matrix, *, update_rate_hz: float, sample_rate_hz: float,
                  start_s: float = 0.0, loop: bool = False, periodic: bool = False,
                  between_updates: str = "linear", engine: str = "auto",
                  block_samples: int = BLOCK_SAMPLES) -> np.ndarray:
    """Pass a whole array through the time-varying FIR channel (no noise).

    Parameters
    ----------
    x : array (n,) or (n, n_tx), complex
        The input; 1-D for one transmit antenna.
    tap_gains, fir_matrix, update_rate_hz, sample_rate_hz, start_s, loop, periodic, between_updates, engine
        See :class:`TimeVaryingFir`.
    block_samples : int
        Processing block (any value gives the same output to rounding).

    Returns
    -------
    numpy.ndarray
        (n, n_rx), or (n,) for a 1-D input and one receive antenna;
        complex128 for a complex128 input, else complex64.

    Examples
    --------
    One static tap of gain 1 delayed by one sample:

    >>> g = np.ones((10, 1, 1, 1), np.complex64)
    >>> apply_channel(np.arange(4, dtype=np.complex64), g, [[0.0, 1.0]], update_rate_hz=10, sample_rate_hz=4)
    array([0.+0.j, 0.+0.j, 1.+0.j, 2.+0.j], dtype=complex64)
    """
    array = np.asarray(x)
    one_dimensional = array.ndim == 1
    array = array[:, None] if one_dimensional else array
    dtype = np.complex128 if array.dtype in (np.complex128, np.float64) else np.complex64
    channel = TimeVaryingFir(tap_gains, fir_matrix, update_rate_hz=update_rate_hz, sample_rate_hz=sample_rate_hz,
                             start_s=start_s, loop=loop, periodic=periodic, between_updates=between_updates,
                             engine=engine, dtype=dtype)
    out = np.empty((array.shape[0], channel.n_rx), dtype=dtype)
    for first in range(0, array.shape[0], block_samples):
        out[first:first + block_samples] = channel.process(array[first:first + block_samples])
    return out[:, 0] if one_dimensional and channel.n_rx == 1 else out


def channel_mean_power(fir_matrix, tap_power_linear) -> float:
    """C = sum_i P_i sum_n fir_matrix[i, n]^2: one link's mean power gain for a white input.

    The mean output power of a link is C times the input's mean power when the
    input is white over the whole band and the taps are uncorrelated (the
    module notes: the SNR's nominal power).
    """
    matrix = np.asarray(fir_matrix)
    powers = np.asarray(tap_power_linear, dtype=float)
    return float(powers @ np.sum(np.abs(matrix) ** 2, axis=1))


class WhiteNoise:
    """Complex white Gaussian noise whose sample n depends on the seed and n only.

    Sample n of receive antenna r is (a + jb) sqrt(variance_r / 2) with a, b
    standard normal drawn by PCG64 from ``SeedSequence(seed, spawn_key=(n // F,))``,
    F = :data:`NOISE_FRAME_SAMPLES`, in the order (sample, rx, I/Q); float32
    draws for complex64 output, float64 for complex128.
    """

    def __init__(self, seed: int, variances, dtype=np.complex64):
        self.seed = int(seed)
        self.scales = np.sqrt(np.asarray(variances, dtype=float) / 2.0)
        self.dtype = np.dtype(dtype)
        self._real = np.float32 if self.dtype == np.complex64 else np.float64
        self._frame = (None, None)

    def block(self, start: int, count: int) -> np.ndarray:
        """Noise of output samples start .. start + count - 1: (count, n_rx)."""
        out = np.empty((count, self.scales.size), dtype=self.dtype)
        done = 0
        while done < count:
            n = start + done
            frame, offset = divmod(n, NOISE_FRAME_SAMPLES)
            take = min(count - done, NOISE_FRAME_SAMPLES - offset)
            out[done:done + take] = self._draw(frame)[offset:offset + take]
            done += take
        return out

    def _draw(self, frame: int) -> np.ndarray:
        if self._frame[0] != frame:
            rng = np.random.Generator(np.random.PCG64(np.random.SeedSequence(self.seed, spawn_key=(frame,))))
            parts = rng.standard_normal((NOISE_FRAME_SAMPLES, self.scales.size, 2), dtype=self._real)
            noise = parts.view(self.dtype)[..., 0] * self.scales.astype(self._real)
            self._frame = (frame, noise)
        return self._frame[1]


# -- recordings ----------------------------------------------------------------------


@dataclass
class Recording:
    """An IQ recording opened for reading (nothing is loaded until read).

    Attributes
    ----------
    path : Path
        The file named by the user (the ``.sigmf-meta`` for SigMF).
    format : {"npy", "cf32", "sigmf"}
    datatype : str
        ``complex64``/``complex128`` (npy), ``cf32_le`` (raw), or the SigMF datatype.
    samples : numpy.ndarray
        Memory-mapped, (n_samples, n_channels) complex, or (n_samples, n_channels, 2)
        int16 for ``ci16_le``.
    sample_rate_hz : float or None
        From the SigMF metadata; None for npy and raw files.
    metadata : dict or None
        The SigMF metadata.
    one_dimensional : bool
        An npy input of shape (n,).
    data_path : Path
        The file holding the samples.
    """

    path: Path
    format: str
    datatype: str
    samples: np.ndarray = field(repr=False)
    sample_rate_hz: float | None = None
    metadata: dict | None = field(default=None, repr=False)
    one_dimensional: bool = False
    data_path: Path | None = None

    @property
    def n_samples(self) -> int:
        return int(self.samples.shape[0])

    @property
    def n_channels(self) -> int:
        return int(self.samples.shape[1])

    @property
    def dtype(self) -> np.dtype:
        """The working precision: complex128 for 64-bit floats, else complex64."""
        return np.dtype(np.complex128 if self.datatype in ("complex128", "cf64_le") else np.complex64)

    def read(self, start: int, stop: int) -> np.ndarray:
        """Samples start .. stop - 1 as (m, n_channels) in :attr:`dtype` (int16 codes as numbers)."""
        part = self.samples[start:stop]
        if self.datatype == "ci16_le":
            out = np.empty(part.shape[:2], dtype=np.complex64)
            out.real = part[..., 0]
            out.imag = part[..., 1]
            return out
        return np.asarray(part, dtype=self.dtype)


def read_recording(path, *, n_channels: int = 1) -> Recording:
    """Open an IQ recording: ``.npy``, raw cf32 (``.cf32``/``.cfile``/``.fc32``) or SigMF.

    Parameters
    ----------
    path : str or os.PathLike
        A ``.npy`` file (complex64 or complex128, shape (n,) or (n, n_channels));
        a raw file of little-endian interleaved float32 I/Q, channels
        interleaved sample by sample; or a SigMF recording (its
        ``.sigmf-meta``, ``.sigmf-data`` or the base name) of datatype
        ``cf32_le``, ``cf64_le`` or ``ci16_le`` with ``core:num_channels``
        channels interleaved sample by sample [SigMF]_.
    n_channels : int
        Channels of a raw file (a raw file cannot say).

    Raises
    ------
    InputError
        One line naming the file: unknown format, wrong dtype or shape, empty,
        truncated, unreadable metadata.
    """
    path = Path(path)
    kind = _input_format(path)
    if kind == "sigmf":
        return _read_sigmf(path)
    if not path.is_file():
        raise InputError(f"{path}: no such file")
    if kind == "npy":
        return _read_npy(path)
    size = path.stat().st_size
    frame = 8 * n_channels
    if size == 0:
        raise InputError(f"{path}: empty (no samples)")
    if size % frame:
        raise InputError(
            f"{path}: {size} bytes is not a whole number of samples ({frame} bytes each: "
            f"float32 I and Q for {n_channels} channel(s)); the file is truncated or not cf32"
        )
    samples = np.memmap(path, dtype="<c8", mode="r", shape=(size // frame, n_channels))
    return Recording(path, "cf32", "cf32_le", samples, data_path=path)


# -- bundle over a file ----------------------------------------------------------------


@dataclass
class ApplyResult:
    """What :func:`apply_bundle` wrote.

    Attributes
    ----------
    files : list of Path
        The output files: data first, then the SigMF metadata or the JSON sidecar.
    n_samples, n_rx : int
    sample_rate_hz : float
    channel_mean_power : float
        C of :func:`channel_mean_power`.
    noise_variance : list of float or None
        Per receive antenna.
    clipped_values : int
        ci16 output only: I or Q values clipped to full scale (0 otherwise).
    record : dict
        The metadata written beside the output (strict JSON values).
    """

    files: list
    n_samples: int
    n_rx: int
    sample_rate_hz: float
    channel_mean_power: float
    noise_variance: list | None
    clipped_values: int
    record: dict = field(repr=False)


def apply_bundle(bundle_path, input_path, output_path, *, snr_db: float | None = None, seed: int | None = None,
                 loop: bool = False, sample_rate_hz: float | None = None, start_s: float = 0.0,
                 between_updates: str | None = None, delay_mapping: str = "sinc", force: bool = False,
                 progress=None, engine: str = "auto", block_samples: int = BLOCK_SAMPLES,
                 hash_check: bool = True) -> ApplyResult:
    """Pass an IQ recording through a bundle's channel and write the output beside its metadata.

    Parameters
    ----------
    bundle_path : str or os.PathLike
        The bundle directory (docs/bundle-format.md).
    input_path : str or os.PathLike
        See :func:`read_recording`. One stream per transmit antenna.
    output_path : str or os.PathLike
        Written in the input's format: ``X.npy`` with ``X.npy.json``; ``X.cf32``
        with ``X.cf32.json``; ``X.sigmf-data`` with ``X.sigmf-meta`` (one
        channel per receive antenna, interleaved). A missing suffix is added.
    snr_db : float, optional
        Add noise at this SNR on the nominal output power (module notes).
    seed : int, optional
        Seed of the noise; drawn from the operating system and recorded when absent.
    loop : bool
        Loop the bundle when the input is longer than it.
    sample_rate_hz : float, optional
        Sample rate of an npy/raw input (SigMF says its own; a value that
        contradicts it is refused). Required for npy and cf32 input: it is
        checked against the bundle's FIR map's rate, never assumed.
    start_s : float
        Bundle time of the first output sample.
    between_updates : {"linear", "hold"}, optional
        Default: the bundle target's ``between_updates`` when it states one, else linear.
    delay_mapping : {"sinc", "nearest"}
        For a bundle without a FIR map: how to build one for the recording's rate.
    force : bool
        Replace existing output files.
    progress : callable(samples_done, samples_total), optional
    engine, block_samples
        See :class:`TimeVaryingFir` and :func:`apply_channel`.
    hash_check : bool
        Check the size, header and SHA-256 of every bundle file used (tap
        gains, FIR map, time-varying FIR) against the manifest first (default;
        one read of those files). False skips the hashes only.

    Returns
    -------
    ApplyResult

    Raises
    ------
    InputError
        (exit 2) Not a bundle, bad input (dtype, empty, truncated, NaN), a
        sample rate the FIR map was not made for, antenna counts that differ,
        an input longer than the bundle without ``loop``, an output that
        exists. Nothing is written then; a failure or interrupt while writing
        removes the partial output.
    """
    bundle = bd.open_bundle(bundle_path)
    manifest = bundle.manifest
    problems = bd.verify_members(bundle_path, manifest, _ROLES_USED, hashes=hash_check)
    if problems:
        raise bd.BundleError(problems)
    recording = read_recording(input_path, n_channels=manifest["n_tx"])
    _check_recording(recording, manifest)
    rate_hz = _resolve_sample_rate(recording, sample_rate_hz, manifest, bundle_path)
    fir, fir_record = _resolve_fir_map(bundle, rate_hz, delay_mapping, bundle_path, recording.path)
    between_updates = between_updates or _target_between_updates(manifest) or "linear"
    if snr_db is not None and not (math.isfinite(snr_db) and abs(snr_db) <= MAX_ABS_SNR_DB):
        raise InputError(f"--snr-db must be a finite number from -{MAX_ABS_SNR_DB:g} to {MAX_ABS_SNR_DB:g} dB, got {snr_db!r}",
                         hint="beyond that the noise power leaves the range of float32 samples")
    if seed is not None and (isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0):
        raise InputError(f"--seed must be an integer >= 0, got {seed!r}")
    duration_s = manifest["n_samples"] / manifest["update_rate_hz"]
    if not (math.isfinite(start_s) and 0.0 <= start_s < duration_s):
        raise InputError(f"--start {start_s!r} s lies outside the bundle, which lasts {duration_s:g} s")
    gains = bundle.tap_gains
    tap_powers = [0.0 if t["power_db"] is None else 10.0 ** (t["power_db"] / 10.0) for t in manifest["taps"]]
    if (manifest["fir"] or {}).get("moving") is not None:
        # A moving delay: the FIR itself varies (fir.npy); replay it through the identity map.
        if bundle.fir is None:
            raise InputError(f"{bundle_path}: a moving-delay bundle needs its fir.npy (the time-varying FIR)")
        tap_powers = list(np.asarray(tap_powers) @ (np.asarray(fir) ** 2))
        gains, fir = bundle.fir, np.eye(fir.shape[1])
        fir_record["replayed"] = "fir.npy (time-varying FIR of a moving delay) through the identity map"
    channel = TimeVaryingFir(
        gains, fir, update_rate_hz=manifest["update_rate_hz"], sample_rate_hz=rate_hz,
        start_s=start_s, loop=loop, periodic=manifest["periodic"], between_updates=between_updates,
        engine=engine, dtype=recording.dtype,
    )
    _check_length(channel, recording, duration_s, start_s)
    paths = _output_paths(Path(output_path), recording, force)
    _refuse_inside(paths, bundle_path)

    powers = _scan(recording, block_samples)
    mean_power = channel_mean_power(fir, tap_powers)
    nominal = [mean_power * float(np.sum(powers))] * channel.n_rx
    variances = None
    if snr_db is not None:
        if not nominal[0] > 0:
            raise InputError(f"{recording.path}: the nominal output power is 0 (silent input or channel); an SNR is undefined")
        seed = int(np.random.SeedSequence().entropy) if seed is None else int(seed)
        variances = [p / 10.0 ** (snr_db / 10.0) for p in nominal]
    record = _record(
        bundle, recording, paths, rate_hz, fir_record, channel, powers, mean_power, nominal,
        snr_db, seed if snr_db is not None else None, variances,
    )
    noise = WhiteNoise(seed, variances, recording.dtype) if variances is not None else None
    writer = _OutputWriter(paths, recording, channel.n_rx, force=force)
    clipped = 0
    with _guarded_write(paths[0]), writer:
        n = recording.n_samples
        if progress is not None:
            progress(0, n)
        for first in range(0, n, block_samples):
            last = min(n, first + block_samples)
            y = channel.process(recording.read(first, last))
            if noise is not None:
                y += noise.block(first, last - first)
            clipped += writer.write(y)
            if progress is not None:
                progress(last, n)
        if recording.datatype == "ci16_le":
            record["output"]["clipped_values"] = clipped
        writer.finish(record)
    return ApplyResult(
        files=list(paths), n_samples=recording.n_samples, n_rx=channel.n_rx, sample_rate_hz=rate_hz,
        channel_mean_power=mean_power, noise_variance=variances, clipped_values=clipped, record=record,
    )


# -- helpers: recordings ---------------------------------------------------------------------


def _input_format(path: Path) -> str:
    name = path.name.lower()
    if name.endswith(".npy"):
        return "npy"
    if name.endswith((".sigmf-meta", ".sigmf-data", ".sigmf")) or (
        not path.suffix and Path(f"{path}.sigmf-meta").exists()
    ):
        return "sigmf"
    if name.endswith(RAW_SUFFIXES):
        return "cf32"
    raise InputError(
        f"{path}: cannot tell the recording's format from its name",
        hint="use .npy (complex), .cf32 (raw little-endian float32 I/Q) or a SigMF .sigmf-meta",
    )


def _read_npy(path: Path) -> Recording:
    try:
        samples = fmt.read_npy(path)
    except (OSError, ValueError) as error:
        raise InputError(f"{path}: not a readable npy file ({error})") from None
    if samples.dtype.kind != "c" or samples.dtype.itemsize not in (8, 16):
        raise InputError(f"{path}: dtype {samples.dtype}; an IQ recording must be complex64 or complex128")
    if samples.ndim not in (1, 2):
        raise InputError(f"{path}: shape {samples.shape}; expected (n_samples,) or (n_samples, n_tx)")
    if samples.size == 0:
        raise InputError(f"{path}: empty (shape {samples.shape}, no samples)")
    one_dimensional = samples.ndim == 1
    name = "complex64" if samples.dtype.itemsize == 8 else "complex128"
    return Recording(path, "npy", name, samples[:, None] if one_dimensional else samples,
                     one_dimensional=one_dimensional, data_path=path)


def _sigmf_paths(path: Path) -> tuple[Path, Path]:
    text = str(path)
    for suffix in (".sigmf-meta", ".sigmf-data", ".sigmf"):
        if text.lower().endswith(suffix):
            text = text[: -len(suffix)]
            break
    return Path(text + ".sigmf-meta"), Path(text + ".sigmf-data")


def _read_sigmf(path: Path) -> Recording:
    meta_path, data_path = _sigmf_paths(path)
    try:
        with open(meta_path, "rb") as handle:
            metadata = fmt.strict_json(fmt.read_capped(handle, fmt.SIGMF_META_MAX_BYTES),
                                       max_bytes=fmt.SIGMF_META_MAX_BYTES)
    except FileNotFoundError:
        raise InputError(f"{meta_path}: no such file (a SigMF recording needs its .sigmf-meta)") from None
    except (OSError, ValueError) as error:
        raise InputError(f"{meta_path}: not readable SigMF metadata ({getattr(error, 'strerror', None) or error})") from None
    top = metadata.get("global") if isinstance(metadata, dict) else None
    if not isinstance(top, dict):
        raise InputError(f"{meta_path}: /global: missing; not SigMF metadata")
    datatype = top.get("core:datatype")
    if datatype not in SIGMF_DATATYPES:
        raise InputError(f"{meta_path}: /global/core:datatype: {datatype!r} is not read here",
                         hint=f"use one of {', '.join(SIGMF_DATATYPES)}")
    channels = top.get("core:num_channels", 1)
    if isinstance(channels, bool) or not isinstance(channels, int) or channels < 1:
        raise InputError(f"{meta_path}: /global/core:num_channels: {channels!r} is not a count >= 1")
    rate = top.get("core:sample_rate")
    if isinstance(rate, int) and not isinstance(rate, bool) and rate > bd.RATE_RANGE_HZ[1]:
        rate = math.inf  # an integer beyond any rate (400 digits would not even make a float)
    if rate is not None and not (isinstance(rate, (int, float)) and math.isfinite(rate) and rate > 0):
        raise InputError(f"{meta_path}: /global/core:sample_rate: {rate!r} is not a rate > 0")
    if top.get("core:dataset"):
        data_path = meta_path.parent / top["core:dataset"]
    captures = metadata.get("captures") or []
    header = captures[0].get("core:header_bytes", 0) if captures and isinstance(captures[0], dict) else 0
    if any(isinstance(c, dict) and c.get("core:header_bytes") for c in captures[1:]):
        raise InputError(f"{meta_path}: /captures: header bytes inside the data are supported before the first capture only")
    trailing = top.get("core:trailing_bytes", 0)
    if not data_path.is_file():
        raise InputError(f"{data_path}: no such file (the samples of {meta_path.name})")
    size = data_path.stat().st_size - header - trailing
    item = SIGMF_DATATYPES[datatype]
    frame = (2 if datatype == "ci16_le" else 1) * item.itemsize * channels
    if size <= 0:
        raise InputError(f"{data_path}: empty (no samples)")
    if size % frame:
        raise InputError(
            f"{data_path}: {size} bytes of samples is not a whole number of samples ({frame} bytes each: "
            f"{datatype} for {channels} channel(s)); the file is truncated"
        )
    shape = (size // frame, channels, 2) if datatype == "ci16_le" else (size // frame, channels)
    samples = np.memmap(data_path, dtype=item, mode="r", offset=header, shape=shape)
    return Recording(meta_path, "sigmf", datatype, samples, float(rate) if rate is not None else None,
                     metadata, data_path=data_path)


def _check_recording(recording: Recording, manifest: dict) -> None:
    n_tx = manifest["n_tx"]
    if recording.n_channels != n_tx:
        where = {"npy": "columns", "sigmf": "channels (core:num_channels)", "cf32": "channels"}[recording.format]
        hint = "shape (n_samples, n_tx) is expected; transpose it" if (
            recording.format == "npy" and recording.samples.shape[0] == n_tx) else None
        raise InputError(
            f"{recording.path}: {recording.n_channels} {where}, one per transmit antenna, "
            f"but the bundle has n_tx = {n_tx}", hint=hint,
        )


def _scan(recording: Recording, block_samples: int) -> list[float]:
    """Mean |x|^2 per transmit stream; refuses NaN and infinity (before anything is written)."""
    totals = np.zeros(recording.n_channels)
    for first in range(0, recording.n_samples, block_samples):
        block = recording.read(first, first + block_samples)
        if not np.isfinite(block).all():
            bad = first + int(np.flatnonzero(~np.isfinite(block).all(axis=1))[0])
            raise InputError(f"{recording.path}: sample {bad} is NaN or infinite")
        totals += np.sum(block.real.astype(float) ** 2 + block.imag.astype(float) ** 2, axis=0)
    return (totals / recording.n_samples).tolist()


def _resolve_sample_rate(recording: Recording, given, manifest: dict, bundle_path) -> float:
    fir = manifest["fir"]
    if given is not None and not (math.isfinite(given) and given > 0):
        raise InputError(f"--sample-rate must be a rate > 0 in Hz, got {given!r}")
    if recording.sample_rate_hz is not None:
        if given is not None and not _same_rate(given, recording.sample_rate_hz):
            raise InputError(
                f"{recording.path}: the metadata says {recording.sample_rate_hz:g} Hz, --sample-rate says {given:g} Hz",
                hint="leave --sample-rate out for a SigMF recording",
            )
        rate = recording.sample_rate_hz
    elif given is not None:
        rate = float(given)
    else:
        # A headerless recording (npy, cf32) does not say its rate: assuming the bundle's
        # would replay a waveform of another rate through the wrong channel without a word.
        stated = f" (the bundle's FIR map was made for {fir['sample_rate_hz']:g} Hz)" if fir is not None else ""
        raise InputError(
            f"{recording.path}: the recording does not state its sample rate{stated}",
            hint="give --sample-rate HZ; only SigMF metadata with core:sample_rate may leave it out",
        )
    if fir is not None and not _same_rate(rate, fir["sample_rate_hz"]):
        raise InputError(
            f"{recording.path}: sample rate {rate:g} Hz, but the FIR map of {bundle_path} was made for "
            f"{fir['sample_rate_hz']:g} Hz",
            hint=f"compile the bundle again with --sample-rate {rate:g}, or resample the recording",
        )
    return rate


def _same_rate(a: float, b: float) -> bool:
    return math.isclose(a, b, rel_tol=_RATE_RELATIVE_TOLERANCE)


def _resolve_fir_map(bundle, rate_hz: float, delay_mapping: str, bundle_path, input_path):
    """The bundle's FIR map, or one built for the recording's rate from the manifest's taps."""
    fir = bundle.manifest["fir"]
    if fir is not None:
        return np.asarray(bundle.fir_map), {"source": "bundle", **fir}
    taps = bundle.manifest["taps"]
    delays = [t["delay_s"] for t in taps]
    powers = [0.0 if t["power_db"] is None else 10.0 ** (t["power_db"] / 10.0) for t in taps]
    try:
        built = grid.fir_map(delays, powers if any(powers) else [1.0] * len(taps), rate_hz, mapping=delay_mapping)
    except ValueError as error:
        raise InputError(f"{bundle_path}: cannot map the taps onto the {rate_hz:g} Hz grid of {input_path}: {error}") from None
    return built.matrix, {"source": "built for the recording's sample rate", **built.manifest_entry(), **built.parameters()}


def _target_between_updates(manifest: dict) -> str | None:
    """``between_updates`` of the bundle's target record, where it states one."""
    constraints = (manifest.get("target") or {}).get("constraints") or {}
    value = constraints.get("between_updates")
    return value if value in BETWEEN_UPDATES else None


def _check_length(channel: TimeVaryingFir, recording: Recording, duration_s: float, start_s: float) -> None:
    covered = channel.covered_samples
    if covered is not None and recording.n_samples > covered:
        needed = recording.n_samples / channel.sample_rate_hz
        raise InputError(
            f"{recording.path}: {recording.n_samples} samples ({needed:g} s at {channel.sample_rate_hz:g} Hz) "
            f"run past the end of the bundle ({duration_s:g} s from --start {start_s:g} s covers {covered} samples)",
            hint="pass --loop to loop the bundle, or compile a longer one",
        )


# -- helpers: output ----------------------------------------------------------------------------


def _output_paths(output: Path, recording: Recording, force: bool) -> list[Path]:
    """[data file, metadata file] in the input's format; refuses clashes before anything is written."""
    try:
        named = _input_format(output)
    except InputError:
        named = None  # no suffix of ours: the input's is added
    if named is not None and named != recording.format and output.suffix:
        raise InputError(
            f"{output}: the output keeps the input's format ({recording.format})",
            hint=f"name it *{_FORMAT_SUFFIX[recording.format]} or leave the suffix out",
        )
    if recording.format == "sigmf":
        meta, data = _sigmf_paths(output)
        paths = [data, meta]
    else:
        if named != recording.format:
            output = Path(f"{output}{_FORMAT_SUFFIX[recording.format]}")
        paths = [output, Path(f"{output}.json")]
    if not paths[0].parent.is_dir():
        raise InputError(f"{paths[0]}: the directory {paths[0].parent} does not exist")
    inputs = {recording.path.resolve(), (recording.data_path or recording.path).resolve()}
    for path in paths:
        if path.resolve() in inputs:
            raise InputError(f"{path}: is the input recording; choose another OUTPUT")
        if os.path.lexists(path):
            if not force:
                raise InputError(f"{path}: already exists", hint="use --force to replace it, or choose another OUTPUT")
            if path.is_dir() or path.is_symlink():
                raise InputError(f"{path}: exists and is a directory or a link; not replaced, even with --force")
    return paths


_FORMAT_SUFFIX = {"npy": ".npy", "cf32": ".cf32", "sigmf": ".sigmf-meta"}
MAX_ABS_SNR_DB = 300.0  # 1e30 in power: already beyond any float32 sample's dynamic range
_ROLES_USED = ("tap_gains", "fir_map", "fir")  # the bundle files apply reads


def _refuse_inside(paths: list[Path], bundle_path) -> None:
    """Refuse an output or metadata file inside the bundle directory (it would change what it reads)."""
    bundle = Path(bundle_path).resolve()
    for path in paths:
        where = path.parent.resolve() / path.name
        if where == bundle or bundle in where.parents:
            raise InputError(f"{path}: is inside the bundle {bundle_path}; apply never writes into the bundle it reads",
                             hint="choose an OUTPUT outside the bundle directory")


class _OutputWriter:
    """Writes the output data and its metadata under temporary names, then renames them into place."""

    def __init__(self, paths: list[Path], recording: Recording, n_rx: int, *, force: bool):
        self.paths = paths
        self.recording = recording
        self.n_rx = n_rx
        self.force = force
        self._temps = [p.parent / f".{p.name}{bd.TEMP_MARKER}{os.getpid()}-{secrets.token_hex(4)}" for p in paths]
        self._data = None
        self._shape = (recording.n_samples,) if recording.one_dimensional and n_rx == 1 else (recording.n_samples, n_rx)
        self._disk_dtype = {"complex64": "<c8", "complex128": "<c16", "cf32_le": "<c8", "cf64_le": "<c16", "ci16_le": "<i2"}[recording.datatype]

    def __enter__(self):
        try:  # an interrupt here (the file made, the header not yet written) reaches no __exit__
            self._data = fmt.HashedFile(self._temps[0], sha512=self.recording.format == "sigmf")
            if self.recording.format == "npy":
                self._data.write(fmt.npy_header(self._disk_dtype, self._shape))
        except BaseException:
            self.abort()
            raise
        return self

    def __exit__(self, exc_type, exc, tb):
        if exc is not None or self._data is not None:
            self.abort()
        return False

    def write(self, y: np.ndarray) -> int:
        """Append an output block (m, n_rx); return the values clipped (ci16 only)."""
        if self._disk_dtype != "<i2":
            self._data.write(np.ascontiguousarray(y, dtype=self._disk_dtype))
            return 0
        parts = np.rint(y.view(np.float32).reshape(y.shape[0], self.n_rx, 2))
        over = int(np.count_nonzero(np.abs(parts) > CI16_FULL_SCALE))
        np.clip(parts, -CI16_FULL_SCALE, CI16_FULL_SCALE, out=parts)
        self._data.write(parts.astype("<i2"))
        return over

    def finish(self, record: dict) -> None:
        """Close and hash the data, write the metadata, rename both into place (data first)."""
        data, self._data = self._data, None
        sha256 = data.close()
        record["output"]["sha256"] = sha256
        if self.recording.format == "sigmf":
            record["output"]["sha512"] = data.sha512
            document = _sigmf_output_metadata(self.recording, record, self.n_rx, data.sha512)
        else:
            document = record
        meta = fmt.HashedFile(self._temps[1])
        try:
            meta.write((json.dumps(document, indent=2, ensure_ascii=False, allow_nan=False) + "\n").encode("utf-8"))
        finally:
            meta.close()
        placed = []
        try:
            for temp, path in zip(self._temps, self.paths):
                _place(temp, path, self.force)
                placed.append(path)
        except BaseException:
            for path in placed:
                with contextlib.suppress(OSError):
                    os.unlink(path)
            raise
        with contextlib.suppress(OSError):
            bd.fsync_directory(self.paths[0].parent)

    def abort(self) -> None:
        if self._data is not None:
            self._data.discard()
            self._data = None
        for temp in self._temps:
            with contextlib.suppress(FileNotFoundError):
                os.unlink(temp)


def _place(temp: Path, path: Path, force: bool) -> None:
    """Rename ``temp`` to ``path``: replacing only with ``force``, else refusing if it appeared."""
    if force:
        os.replace(temp, path)
        return
    try:
        os.link(temp, path)  # fails if ``path`` exists: no window between check and rename
    except FileExistsError:
        raise InputError(f"{path}: appeared while the output was written; not replaced") from None
    except OSError as error:
        if error.errno not in (errno.EPERM, errno.ENOTSUP, errno.EOPNOTSUPP, errno.EMLINK, errno.EXDEV):
            raise
        if os.path.lexists(path):
            raise InputError(f"{path}: appeared while the output was written; not replaced") from None
        os.rename(temp, path)
        return
    os.unlink(temp)


@contextlib.contextmanager
def _guarded_write(shown: Path):
    """SIGTERM and SIGXFSZ handled while writing; failures become one-line errors (the writer cleans up)."""
    saved = {}
    if threading.current_thread() is threading.main_thread():
        if hasattr(signal, "SIGXFSZ"):  # past `ulimit -f`: fail with EFBIG instead of dying
            saved[signal.SIGXFSZ] = signal.signal(signal.SIGXFSZ, signal.SIG_IGN)
        if signal.getsignal(signal.SIGTERM) == signal.SIG_DFL:
            saved[signal.SIGTERM] = signal.signal(signal.SIGTERM, bd.raise_terminated)
    removed = "nothing was written (the partial output was removed)"
    try:
        yield
    except KeyboardInterrupt as error:
        terminated = isinstance(error, bd.Terminated)
        interrupted = bd.WriteInterrupted(f"{shown}: {'terminated (SIGTERM)' if terminated else 'interrupted'}; {removed}")
        interrupted.exit_code = 143 if terminated else 130
        raise interrupted from None
    except OSError as error:
        if error.errno in (errno.ENOSPC, errno.EDQUOT):
            raise InputError(f"{shown}: no space left on the device; {removed}") from None
        if error.errno == errno.EFBIG:
            raise InputError(f"{shown}: file size limit reached (ulimit -f); {removed}") from None
        raise InputError(f"{shown}: cannot write: {error.strerror or error}; {removed}") from None
    finally:
        for number, handler in saved.items():
            signal.signal(number, handler)


def _record(bundle, recording, paths, rate_hz, fir_record, channel, powers, mean_power, nominal,
            snr_db, seed, variances) -> dict:
    """The metadata of the output: bundle, offsets, channel power, noise (strict JSON)."""
    manifest = bundle.manifest
    manifest_bytes = (Path(bundle.path) / bd.MANIFEST_NAME).read_bytes()
    gains_entry = bundle.entry("tap_gains")
    n = recording.n_samples
    last_u = channel._u0 + (n - 1) * channel._ratio
    wraps = int(last_u // channel.n_updates)
    if wraps == 0:
        join = None
    elif manifest["periodic"]:
        join = "seamless: the bundle is periodic (its sample n_samples is its sample 0)"
    else:
        join = ("the bundle is not periodic: its last gain sample is joined to its first by one straight "
                "line over 1/update_rate_hz" if channel.between_updates == "linear" else
                "the bundle is not periodic: its last gain sample is held, then its first follows")
    record = {
        "format": SIDECAR_FORMAT,
        "format_version": SIDECAR_VERSION,
        "tool_version": __version__,
        "created_utc": datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ"),
        "bundle": {
            "path": os.path.abspath(bundle.path),
            "manifest_sha256": _sha256_bytes(manifest_bytes),
            "tap_gains_sha256": gains_entry["sha256"],
            "profile_sha256": manifest["profile_sha256"],
            "resolved_profile_sha256": manifest["resolved_profile_sha256"],
            "profile_name": (manifest.get("profile") or {}).get("name"),
            "seed": manifest["seed"],
            "generator_version": manifest["generator_version"],
            "update_rate_hz": manifest["update_rate_hz"],
            "n_samples": manifest["n_samples"],
            "periodic": manifest["periodic"],
            "n_rx": manifest["n_rx"], "n_tx": manifest["n_tx"], "n_taps": manifest["n_taps"],
        },
        "fir_map": fir_record,
        "offsets": {
            "start_s": channel.start_s,
            "start_update_index": channel._u0,
            "bulk_delay_samples": fir_record["bulk_delay_samples"],
            "alignment": (
                "output sample n is at bundle time start_s + n / sample_rate_hz, where gain sample k is at "
                "k / update_rate_hz; a path of delay tau carries input sample m to output sample "
                "m + bulk_delay_samples + tau * sample_rate_hz; the output has the input's length"
            ),
        },
        "between_updates": channel.between_updates,
        "loop": channel.loop,
        "bundle_wraps": wraps,
        "join": join,
        "input": {
            "path": os.path.abspath(recording.path), "format": recording.format, "datatype": recording.datatype,
            "n_samples": n, "n_tx": recording.n_channels, "sample_rate_hz": rate_hz,
            "power_linear_per_tx": powers,
        },
        "output": {
            "files": [os.path.abspath(p) for p in paths], "format": recording.format, "datatype": recording.datatype,
            "n_samples": n, "n_rx": channel.n_rx, "sample_rate_hz": rate_hz,
            "axes": ["sample", "rx"] if not (recording.one_dimensional and channel.n_rx == 1) else ["sample"],
        },
        "channel": {
            "mean_power_linear": mean_power,
            "mean_power_db": 10.0 * math.log10(mean_power) if mean_power > 0 else None,
            "definition": (
                "sum over taps i of P_i * sum_n fir_map[i, n]^2, P_i the manifest's mean tap power: "
                "a link's mean power gain for an input white over the sample-rate band"
            ),
        },
        "noise": None,
    }
    if snr_db is not None:
        record["noise"] = {
            "snr_db": snr_db,
            "seed": seed,
            "definition": (
                "complex white Gaussian, independent per receive antenna, over the whole band "
                "|f| < sample_rate_hz / 2; variance per complex sample = nominal output power / 10^(snr_db/10); "
                "nominal output power = channel mean power * sum over tx of the input's mean |x|^2"
            ),
            "nominal_signal_power_linear_per_rx": nominal,
            "noise_power_linear_per_rx": variances,
            "generator": (
                f"numpy PCG64 seeded by SeedSequence(seed, spawn_key=(n // {NOISE_FRAME_SAMPLES},)) for output "
                "sample n; standard normal I and Q, scaled by sqrt(variance / 2)"
            ),
        }
    return json.loads(json.dumps(record, allow_nan=False))


def _sigmf_output_metadata(recording: Recording, record: dict, n_rx: int, sha512: str) -> dict:
    """The output's .sigmf-meta: the input's global fields and captures, our record in the extension."""
    source = recording.metadata or {}
    kept = {k: v for k, v in (source.get("global") or {}).items() if k not in (
        "core:sha512", "core:dataset", "core:trailing_bytes", "core:metadata_only", "core:num_channels",
        "core:sample_rate", "core:datatype", "core:version", "core:recorder", "core:extensions",
    )}
    extensions = [e for e in (source.get("global") or {}).get("core:extensions") or []
                  if isinstance(e, dict) and e.get("name") != fmt.SIGMF_EXTENSION_NAME]
    extensions.append({"name": fmt.SIGMF_EXTENSION_NAME, "version": fmt.SIGMF_EXTENSION_VERSION, "optional": True})
    captures = [{k: v for k, v in c.items() if k != "core:header_bytes"}
                for c in source.get("captures") or [] if isinstance(c, dict)] or [{"core:sample_start": 0}]
    noise = record["noise"]
    what = f"through the bundle {record['bundle']['path']}" + (f", SNR {noise['snr_db']:g} dB" if noise else "")
    description = kept.pop("core:description", None)
    return {
        "global": {
            "core:datatype": recording.datatype,
            "core:sample_rate": record["output"]["sample_rate_hz"],
            "core:version": fmt.SIGMF_VERSION,
            "core:num_channels": n_rx,
            "core:sha512": sha512,
            "core:recorder": f"emucompile {__version__} (apply)",
            "core:description": f"{description} ({what})" if description else f"IQ recording {what}",
            **kept,
            "core:extensions": extensions,
            f"{fmt.SIGMF_EXTENSION_NAME}:apply": record,
        },
        "captures": captures,
        "annotations": [],
    }


def _filtered(transformed, spectra, lead: int, count: int) -> np.ndarray:
    """Overlap-save: the ``count`` valid outputs of each piece, summed over tx: (n_rx, pieces, count)."""
    product = transformed * spectra  # (pieces, n_rx, n_tx, size)
    combined = product[:, :, 0] if product.shape[2] == 1 else product.sum(axis=2)
    return scipy.fft.ifft(combined, axis=-1, overwrite_x=True)[..., lead:lead + count].transpose(1, 0, 2)


def _pieces(local_k: np.ndarray, longest: int):
    """Start and end of each run of equal ``local_k``, runs split to at most ``longest`` samples."""
    edges = np.flatnonzero(np.diff(local_k)) + 1
    starts = np.concatenate([[0], edges])
    ends = np.concatenate([edges, [local_k.size]])
    counts = -(-(ends - starts) // longest)
    if np.any(counts > 1):
        within = np.arange(int(counts.sum())) - np.repeat(np.cumsum(counts) - counts, counts)
        starts = np.repeat(starts, counts) + within * longest
        ends = np.minimum(starts + longest, np.repeat(ends, counts))
    return starts, ends


def _classify_rows(matrix: np.ndarray):
    """Rows with one coefficient (a shift: (row, column, value)) and the rows that need a filter."""
    shifts, filtered = [], []
    for i, row in enumerate(matrix):
        nonzero = np.flatnonzero(row)
        if nonzero.size == 1:
            shifts.append((i, int(nonzero[0]), row[nonzero[0]].item()))
        elif nonzero.size == 0:
            shifts.append((i, 0, 0.0))
        else:
            filtered.append(i)
    return shifts, np.asarray(filtered, dtype=np.intp)


def _sha256_bytes(data: bytes) -> str:
    import hashlib

    return hashlib.sha256(data).hexdigest()


__all__ = [
    "BETWEEN_UPDATES", "ENGINES", "INTERVAL_ENGINE_MIN_SAMPLES", "NOISE_FRAME_SAMPLES", "BLOCK_SAMPLES",
    "TimeVaryingFir", "apply_channel", "channel_mean_power", "WhiteNoise",
    "Recording", "read_recording", "ApplyResult", "apply_bundle",
]
