"""The time-varying FIR channel of a bundle, and the noise apply adds: numerics only, no files.

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

import math
import numbers

import numpy as np
import scipy.fft

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

    def __init__(
        self,
        tap_gains,
        fir_matrix,
        *,
        update_rate_hz: float,
        sample_rate_hz: float,
        start_s: float = 0.0,
        loop: bool = False,
        periodic: bool = False,
        between_updates: str = "linear",
        engine: str = "auto",
        dtype=np.complex64,
    ):
        gains = tap_gains
        if getattr(gains, "ndim", None) != 4 or gains.shape[0] < 1:
            raise ValueError(
                f"tap_gains must have shape (n_samples, n_rx, n_tx, n_taps), got {getattr(gains, 'shape', None)}"
            )
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
            self._history = span[:, span.shape[1] - (self.n_fir - 1) :].copy()
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
            first, stop = starts[g0 : g0 + per_group], ends[g0 : g0 + per_group]
            rows = local_k[first]
            transformed = scipy.fft.fft(windows[:, first], size, axis=-1).transpose(1, 0, 2)[
                :, None
            ]  # (p, 1, n_tx, size)
            # the pieces tile the block in order: their valid outputs, concatenated, are y's samples
            keep = np.arange(longest)[None, :] < (stop - first)[:, None]
            count = int(stop[-1] - first[0])
            part = _filtered(transformed, spectra[rows], lead, longest)[:, keep]
            if steps is not None:
                part += theta[done : done + count] * _filtered(transformed, steps[rows], lead, longest)[:, keep]
            y[:, done : done + count] = part
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
            streams = self._tap_streams(span[:, first : last + self.n_fir - 1], last - first)
            for s in range(first, last, _SUB_BLOCK_SAMPLES):
                e = min(last, s + _SUB_BLOCK_SAMPLES)
                z = streams[:, :, s - first : e - first].transpose(2, 0, 1)[:, None]  # (b, 1, n_tx, n_taps)
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
            streams[:, i] = value * span[:, lead - column : lead - column + m]
        if self._fft_rows.size:
            size = scipy.fft.next_fast_len(span.shape[1], real=False)
            transformed = scipy.fft.fft(span, size, axis=-1)
            filtered = scipy.fft.ifft(transformed[:, None, :] * self._spectra(size)[self._fft_rows][None], axis=-1)
            streams[:, self._fft_rows] = filtered[:, :, lead : lead + m]
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


def apply_channel(
    x,
    tap_gains,
    fir_matrix,
    *,
    update_rate_hz: float,
    sample_rate_hz: float,
    start_s: float = 0.0,
    loop: bool = False,
    periodic: bool = False,
    between_updates: str = "linear",
    engine: str = "auto",
    block_samples: int = BLOCK_SAMPLES,
) -> np.ndarray:
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
    channel = TimeVaryingFir(
        tap_gains,
        fir_matrix,
        update_rate_hz=update_rate_hz,
        sample_rate_hz=sample_rate_hz,
        start_s=start_s,
        loop=loop,
        periodic=periodic,
        between_updates=between_updates,
        engine=engine,
        dtype=dtype,
    )
    out = np.empty((array.shape[0], channel.n_rx), dtype=dtype)
    for first in range(0, array.shape[0], block_samples):
        out[first : first + block_samples] = channel.process(array[first : first + block_samples])
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
            out[done : done + take] = self._draw(frame)[offset : offset + take]
            done += take
        return out

    def _draw(self, frame: int) -> np.ndarray:
        if self._frame[0] != frame:
            rng = np.random.Generator(np.random.PCG64(np.random.SeedSequence(self.seed, spawn_key=(frame,))))
            parts = rng.standard_normal((NOISE_FRAME_SAMPLES, self.scales.size, 2), dtype=self._real)
            noise = parts.view(self.dtype)[..., 0] * self.scales.astype(self._real)
            self._frame = (frame, noise)
        return self._frame[1]


def _filtered(transformed, spectra, lead: int, count: int) -> np.ndarray:
    """Overlap-save: the ``count`` valid outputs of each piece, summed over tx: (n_rx, pieces, count)."""
    product = transformed * spectra  # (pieces, n_rx, n_tx, size)
    combined = product[:, :, 0] if product.shape[2] == 1 else product.sum(axis=2)
    return scipy.fft.ifft(combined, axis=-1, overwrite_x=True)[..., lead : lead + count].transpose(1, 0, 2)


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


__all__ = [
    "BETWEEN_UPDATES",
    "ENGINES",
    "INTERVAL_ENGINE_MIN_SAMPLES",
    "NOISE_FRAME_SAMPLES",
    "BLOCK_SAMPLES",
    "TimeVaryingFir",
    "apply_channel",
    "channel_mean_power",
    "WhiteNoise",
]
