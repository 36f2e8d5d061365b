"""The decimated copy of a record: band-limit every tap and link, keep every q-th sample.

verify's statistics need only the band the gains occupy, so each sample of the
stored data is read once through a Kaiser-windowed low-pass and the checks work
on q times fewer samples (:class:`Decimator`). The sources read (m, n_links,
n_taps) link vectors from what a bundle stores or delivers: the npy gains
(:class:`MappedSource`), the ci16 codes with their scale (:class:`Ci16Source`),
the integer FIR coefficients scaled back (:class:`FirCodesSource`) and the
deterministic direct part of the bundle's components (:class:`ComponentsDirect`).
"""

from __future__ import annotations

import mmap
import os
from concurrent.futures import ThreadPoolExecutor

import numpy as np
from scipy import fft, signal

from emucompile.bundle import quantised
from emucompile.models.mimo import links_from_gains
from emucompile.verify import scratch

RECORD_RATE_FACTOR = 8.0
"""The decimated record's rate is at least this multiple of the largest frequency in the gains."""
DECIMATOR_ATTENUATION_DB = 80.0
"""Stopband attenuation of the decimating low-pass (Kaiser window, Kaiser's formula)."""
CHUNK_SAMPLES = 1 << 16
# decimator segments of ~256 KiB of complex64 rows, cache-sized (1e7 x 12 taps: 5x faster than 1.5 MiB)
SEGMENT_BYTES = 1 << 18
SEGMENTS_PER_TASK = 16  # consecutive segments one thread works through per task (fewer hand-offs)
RELEASE_MARGIN_BYTES = 1 << 21
# a fault maps the whole page-cache folio around it (up to 2 MiB on Linux with large folios; 16 pages of
# fault-around otherwise): so much more is let go each side of the rows read
DECIMATOR_THREADS = 2  # threads sharing the decimator's chunks (numpy's loops release the GIL)


class Decimator:
    """Band-limit and keep every q-th sample: y[m] = sum_k h[k] x[m q + D - k], D = (N - 1)/2.

    The low-pass is a Kaiser-windowed sinc (``scipy.signal.firwin`` with
    ``kaiserord``; Kaiser 1974): passband to the largest frequency f_b of the
    gains, stopband from F_out - f_b (F_out = F_u / q), so nothing aliases
    into |f| <= f_b, and the band f_b < |f| < F_out - f_b folds onto the
    out-of-band part of the record (what the out-of-band check measures).
    Zero phase: y[m] is centred on input sample m q. Without ``periodic``,
    only outputs whose window lies inside the record are kept; with it, the
    input wraps (q must divide n, else the nearest smaller divisor is taken).
    """

    def __init__(self, update_rate_hz, band_hz, n_samples, periodic):
        self.n_samples, self.periodic = n_samples, periodic
        self.update_rate_hz = update_rate_hz
        band = band_hz if band_hz > 0 else update_rate_hz / (8 * RECORD_RATE_FACTOR)
        q = max(1, int(update_rate_hz // (RECORD_RATE_FACTOR * band)))
        if periodic:
            while q > 1 and n_samples % q:
                q -= 1
        self.q = q
        self.record_rate_hz = update_rate_hz / q
        self.h = None
        self.half = 0
        self.band_hz = band
        self.passband_power_deviation = 0.0
        if q > 1:
            stop = self.record_rate_hz - band
            width = (stop - band) / (update_rate_hz / 2.0)
            numtaps, beta = signal.kaiserord(DECIMATOR_ATTENUATION_DB, width)
            numtaps += 1 - numtaps % 2
            self.h = signal.firwin(numtaps, (band + stop) / 2.0, window=("kaiser", beta), fs=update_rate_hz)
            phases = -(-numtaps // q)  # hr = h reversed, zero-padded to phases * q taps, as (phases, q)
            reversed_padded = np.zeros(phases * q, np.float32)
            reversed_padded[:numtaps] = self.h[::-1]
            self.phases = reversed_padded.reshape(phases, q)
            grid = np.linspace(0.0, band, 512)
            response = np.abs(np.exp(-2j * np.pi * np.outer(grid, np.arange(numtaps)) / update_rate_hz) @ self.h) ** 2
            self.passband_power_deviation = float(np.max(np.abs(response - 1.0)))
            self.half = (numtaps - 1) // 2
        if periodic:
            self.first, self.last = 0, n_samples // q - 1
        else:
            self.first = -(-self.half // q)
            self.last = (n_samples - 1 - self.half) // q
        self.n_out = max(0, self.last - self.first + 1)
        if not periodic:
            # the checks FFT whole records: a length with a large prime factor costs ~10x
            # (124993 = 11^2 1033: 2.6 s against 0.2 s for an 8x interpolation); drop the last few
            self.n_out = fast_length_at_most(self.n_out)
            self.last = self.first + self.n_out - 1

    def response(self, frequency_hz):
        """Complex gain of the centred filter at one frequency: sum_k h[k] exp(-j 2 pi f (k - D) / F_u)."""
        if self.h is None:
            return 1.0
        k = np.arange(self.h.size) - self.half
        return complex(np.sum(self.h * np.exp(-2j * np.pi * frequency_hz * k / self.update_rate_hz)))

    def run(self, source, n_links, n_taps, progress):
        """Decimated records of a source: complex64 (n_taps, n_links, n_out), each record contiguous.

        The decimator's sums are complex64, so the records hold them exactly; a
        long run's records live in a mapped temporary file (:mod:`emucompile.verify.scratch`).

        Also sets :attr:`full_power`, mean |x|^2 per link and tap over the
        input samples the outputs stand for (output m for [m q - q/2, m q + q/2)),
        at the full rate: the power the band-limited copy would lack is
        ``full_power - mean |y|^2``.
        """
        out = scratch.empty((n_taps, n_links, self.n_out), np.complex64)
        power = np.zeros((n_links, n_taps))
        q = self.q
        rows = max(16 * q, SEGMENT_BYTES // (8 * max(1, n_links * n_taps)))
        step = max(1, min(rows, CHUNK_SAMPLES) // q)
        end = self.first + self.n_out
        starts = range(self.first, end, step * SEGMENTS_PER_TASK)
        release = getattr(source, "release", None)

        def task(t0):
            part = np.zeros((n_links, n_taps))
            t1 = min(t0 + step * SEGMENTS_PER_TASK, end)
            for m0 in range(t0, t1, step):
                m1 = min(m0 + step, t1)
                y, segment_power = self._chunk(source, m0, m1, n_links, n_taps)
                if release is not None:  # the rows read, let go: memory does not grow with the file
                    release(max(0, m0 * q - self.half), min(self.n_samples, (m1 - 1) * q + self.half + 1))
                out[:, :, m0 - self.first:m1 - self.first] = y.reshape(m1 - m0, n_links, n_taps).transpose(2, 1, 0)
                part += segment_power
            return t1, part

        # Tasks are independent and numpy's loops and BLAS release the GIL: two threads share
        # them, the parts of the power summed in task order (the same numbers for any thread count).
        with ThreadPoolExecutor(max_workers=DECIMATOR_THREADS) as pool:
            for t1, part in pool.map(task, starts):
                power += part
                if progress is not None:
                    progress(min(t1 * q, self.n_samples), self.n_samples)
        self.full_power = power / max(1, self.n_out * q)
        return out

    def _chunk(self, source, m0, m1, n_links, n_taps):
        """Outputs m0..m1-1, (m1 - m0, n_links, n_taps) complex64, and the float64 power of their input samples.

        Polyphase form of y[m] = sum_j hr[j] x[m q - D + j] (hr the reversed
        filter, zero-padded to L q taps): with the segment cut into blocks of q
        rows, S[b, p] = x[(m0 + b) q - D + p], y[m0 + i] = sum_l P[l, i + l] for
        P[l, b] = sum_p hr[l q + p] S[b, p] -- one float32 matrix product
        (L x q) @ (q x blocks) over every link and tap, then L shifted sums.
        """
        q, half = self.q, self.half
        width = n_links * n_taps
        if self.h is None:
            block = source.read(m0, m1)
            return block, np.sum(np.abs(block.astype(np.complex128)) ** 2, axis=0)
        count = m1 - m0
        a, b = m0 * q - half, (m1 - 1) * q + half + 1
        blocks = count + self.phases.shape[0] - 1
        s = np.empty((blocks, q, 2 * width), np.float32)
        flat = s.reshape(blocks * q, 2 * width)
        segment = np.asarray(self._segment(source, a, b), dtype=np.complex64)
        flat[: b - a] = segment.reshape(b - a, width).view(np.float32)
        flat[b - a:] = 0.0  # rows past the segment meet only the zero padding of hr
        # |x|^2 summed in float64 (re^2 + im^2 per link and tap; a float64 copy first: 2x faster than einsum casting)
        mid = flat[half - q // 2: half - q // 2 + count * q].astype(np.float64)
        power = np.einsum("ic,ic->c", mid, mid).reshape(n_links, n_taps, 2).sum(axis=2)
        products = (self.phases @ s.transpose(1, 0, 2).reshape(q, -1)).reshape(-1, blocks, 2 * width)
        y = products[0, :count].copy()
        for lag in range(1, products.shape[0]):
            y += products[lag, lag: lag + count]
        return y.view(np.complex64).reshape(count, n_links, n_taps), power

    def _segment(self, source, a, b):
        n = self.n_samples
        if 0 <= a and b <= n:
            return source.read(a, b)
        if not self.periodic:
            return source.read(max(a, 0), min(b, n))
        pieces, position = [], a
        while position < b:
            start = position % n
            stop = min(n, start + (b - position))
            pieces.append(source.read(start, stop))
            position += stop - start
        return np.concatenate(pieces, axis=0)


class MappedSource:
    """Rows of a (n, n_rx, n_tx, n_taps) array as (m, n_links, n_taps) link vectors, complex64.

    With ``handle`` (the open file the array maps, a C-ordered ``numpy.memmap``
    with its ``offset``), rows are read from the file with ``os.preadv`` into a
    fresh block (after ``before_read(first_byte, end_byte)``, when given: verify
    waits there for its SHA-256 pass to read those bytes first): no page of the
    map is touched, so nothing of the file stays resident (and no page faults:
    15-25 % less decimation time than through the map, 1e7 x 12 taps on the
    benchmark machine). Otherwise, when the array is a
    map of a file, :meth:`release` lets the map's pages of rows already used go
    (``madvise(MADV_DONTNEED)``; they stay in the page cache and a later read
    maps them again), so resident memory does not grow with the file either.
    """

    def __init__(self, array, divide_by=None, handle=None, before_read=None):
        self.array = array
        self.divide_by = divide_by
        self.before_read = before_read  # called with (first byte, end byte) of the file before each read
        self._fd = None
        if handle is not None and hasattr(os, "preadv") and isinstance(array, np.memmap) \
                and array.flags.c_contiguous and array.ndim >= 1:
            self._fd = handle.fileno()
        self._release = None if self._fd is not None else _page_releaser(array)

    def rows(self, start, stop):
        """Rows start .. stop - 1 of the array as stored (a fresh array when read from the file)."""
        if self._fd is None:
            return np.asarray(self.array[start:stop])
        block = np.empty((stop - start,) + self.array.shape[1:], self.array.dtype)
        view = memoryview(block).cast("B")
        position, done = self.array.offset + start * self.array.strides[0], 0
        if self.before_read is not None:
            self.before_read(position, position + view.nbytes)
        while done < view.nbytes:  # preadv may return fewer bytes than asked
            got = os.preadv(self._fd, [view[done:]], position + done)
            if got <= 0:
                raise OSError(f"{self.array.filename or 'the gains file'}: ended early (truncated while read?)")
            done += got
        return block

    def read(self, start, stop):
        block = self.rows(start, stop)
        if self.divide_by is not None:
            block = block / self.divide_by(start, stop)[:, None, None, None]
        return links_from_gains(block)

    def release(self, start, stop):
        """Let the pages of rows start .. stop - 1 go, when the array is a map of a file read through it."""
        if self._release is not None and stop > start:
            self._release(start, stop)


ArraySource = MappedSource


class Ci16Source(MappedSource):
    """The ci16 codes decoded with their scale (what an emulator fed the ci16 file receives)."""

    def __init__(self, codes, scale, divide_by=None):
        super().__init__(codes, divide_by)
        self.scale = scale

    def read(self, start, stop):
        block = quantised.dequantise_ci16(np.asarray(self.array[start:stop]), self.scale)  # the one dequantiser
        if self.divide_by is not None:
            block = block / self.divide_by(start, stop)[:, None, None, None]
        return links_from_gains(block)


class FirCodesSource(Ci16Source):
    """Integer FIR coefficients scaled back: (I + jQ) * step, in float64 (int32 codes exceed float32)."""

    def read(self, start, stop):
        codes = np.asarray(self.array[start:stop], dtype=np.float64)
        block = (codes[..., 0] + 1j * codes[..., 1]) / self.scale
        if self.divide_by is not None:
            block = block / self.divide_by(start, stop)[:, None, None, None]
        return links_from_gains(block.astype(np.complex64))


class ComponentsDirect:
    """The deterministic direct part of a bundle's components, as a source."""

    def __init__(self, components):
        self.components = components

    def read(self, start, stop):
        return links_from_gains(self.components.direct(start, stop))


def _page_releaser(array):
    """A function letting the pages of rows start .. stop - 1 of a C-ordered ``numpy.memmap`` go, or None."""
    mapped = getattr(array, "_mmap", None)  # where numpy.memmap keeps its map
    if mapped is None or not hasattr(mapped, "madvise") or not getattr(array, "flags", None) \
            or not array.flags.c_contiguous or array.ndim == 0:
        return None
    first = array.ctypes.data - np.frombuffer(mapped, np.uint8).ctypes.data  # row 0's byte in the map
    row, size = array.strides[0], len(mapped)

    def release(start, stop):
        # RELEASE_MARGIN_BYTES more each side: the kernel maps the pages around each fault (a neighbour's
        # pages, which it may have let go already); one still in use maps again from the page cache
        begin = max(0, first + start * row - RELEASE_MARGIN_BYTES) // mmap.PAGESIZE * mmap.PAGESIZE
        end = min(size, first + stop * row + RELEASE_MARGIN_BYTES)
        if end > begin:
            mapped.madvise(mmap.MADV_DONTNEED, begin, end - begin)

    return release


def fast_length_at_most(n):
    """The largest m <= n whose FFT is fast (factors 2, 3, 5, 7, 11: ``scipy.fft.next_fast_len``)."""
    m = n
    while m > 1 and fft.next_fast_len(m) != m:
        m -= 1
    return m


__all__ = ["Decimator", "MappedSource", "ArraySource", "Ci16Source", "FirCodesSource", "ComponentsDirect",
           "fast_length_at_most", "RECORD_RATE_FACTOR", "DECIMATOR_ATTENUATION_DB", "CHUNK_SAMPLES"]
