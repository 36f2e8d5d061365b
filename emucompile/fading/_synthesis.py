"""Block synthesis of the diffuse (scattered) part: the doppler-filter generator.

A tap's output is cut into fixed synthesis blocks of ``B*R`` samples at the
update rate (R = R1 R2). Block s is computed from white noise at internal
indices [s B - m, (s+1) B + m] only, by one fixed sequence of operations
(FFT overlap-save Doppler filter, polyphase stage, linear stage) whose
sizes never depend on the request, so the same block always comes out
bit-identical: whatever the chunking, the offset or the thread.
"""

from __future__ import annotations

import threading

import numpy as np
import scipy.fft as sfft
from scipy import signal

from emucompile.fading._design import Chain, DopplerDesign
from emucompile.fading._streams import BoundedCache, noise_block

SYNTHESIS_CACHE_BLOCKS = 2  # synthesis blocks kept per (tap, link)
NOISE_CACHE_BLOCKS = 6  # noise blocks kept per (tap, link)
BROADCAST_MIN_FACTOR = 32  # linear stages with R2 >= this loop over the block, not over r


def apply_chain(chain: Chain, y: np.ndarray, block: int) -> np.ndarray:
    """Stages 1 and 2 on internal samples ``y`` -> ``block * R`` complex64 output samples.

    ``y`` (complex) holds internal indices [s B - m1, (s+1) B + m1] with
    m1 = ``chain.margin1``: exactly what the centred filters need. The real
    and imaginary parts are filtered as two real float32 rows (the filters
    are real), and every numpy call runs along a long axis.
    """
    rates = chain.rates
    planar = np.empty((2, len(y)), np.float32)
    planar[0] = y.real
    planar[1] = y.imag
    if rates.up1 > 1:
        z = signal.upfirdn(chain.h1, planar, up=rates.up1, axis=1)
        first = 2 * chain.half1 * rates.up1  # filter delay plus the left margin
        x1 = z[:, first : first + block * rates.up1 + 1]
    else:
        x1 = planar[:, : block + 1]
    up2 = rates.up2
    n1 = x1.shape[1] - 1
    out = np.empty(n1 * up2, np.complex64)
    parts = out.view(np.float32).reshape(n1, up2, 2)
    low = x1[:, :-1]
    if up2 == 1:
        parts[:, 0, 0] = low[0]
        parts[:, 0, 1] = low[1]
        return out
    step = x1[:, 1:] - low
    # The same float32 x + w (x1 - x) either way; only the loop order differs
    # (numpy runs its inner loop along the last axis: keep that one long).
    if up2 < BROADCAST_MIN_FACTOR:
        for r, weight in enumerate(chain.weights2):
            for c in (0, 1):
                dest = parts[:, r, c]
                np.multiply(step[c], weight, out=dest)
                dest += low[c]
    else:
        for c in (0, 1):
            dest = parts[:, :, c]
            np.multiply(step[c][:, None], chain.weights2[None, :], out=dest)
            dest += low[c][:, None]
    return out


class BlockSource:
    """Base of a tap's diffuse process on its synthesis-block grid.

    Subclasses provide ``output_block`` (samples per block) and
    ``_synthesise(index, link)``; this class adds the bounded per-link
    cache and writes any range into a destination.
    """

    output_block: int

    def __init__(self):
        self._blocks = BoundedCache(SYNTHESIS_CACHE_BLOCKS)
        self._lock = threading.Lock()

    def segments(self, start: int, stop: int, link: int) -> list[np.ndarray]:
        """Views (complex64, unit power) that concatenated give diffuse[start:stop].

        The views keep their synthesis blocks alive after the cache lets
        them go, so a caller may hold them while it writes its output.
        """
        size = self.output_block
        out = []
        with self._lock:
            pos = start
            while pos < stop:
                index = pos // size
                first = pos - index * size
                take = min(stop - pos, size - first)
                data = self._blocks.get((link, index), lambda: self._synthesise(index, link))
                out.append(data[first : first + take])
                pos += take
        return out

    def _synthesise(self, index: int, link: int) -> np.ndarray:  # pragma: no cover
        raise NotImplementedError


class DopplerFilterSource(BlockSource):
    """White noise -> Doppler FIR (FFT overlap-save) -> interpolation chain, per tap."""

    def __init__(self, design: DopplerDesign, seed: int, tap: int, internal_period: int | None):
        super().__init__()
        self.design = design
        self.seed = seed
        self.tap = tap
        self.internal_period = internal_period
        self.output_block = design.output_block
        self._noise = BoundedCache(NOISE_CACHE_BLOCKS)
        self._h0_spectrum = sfft.fft(design.h0, design.fft_size)

    def _synthesise(self, index: int, link: int) -> np.ndarray:
        d = self.design
        block = d.block
        m1 = d.chain.margin1
        n_y = block + 2 * m1 + 1
        first = index * block - m1 - d.half0
        w = self._gather(first, d.fft_size, link)
        spectrum = sfft.fft(w)
        spectrum *= self._h0_spectrum
        y = sfft.ifft(spectrum)[len(d.h0) - 1 : len(d.h0) - 1 + n_y]
        return apply_chain(d.chain, y, block)

    def _gather(self, first: int, count: int, link: int) -> np.ndarray:
        """Noise at internal indices [first, first + count) (circular in periodic mode)."""
        block = self.design.block
        period = self.internal_period
        out = np.empty(count, np.complex128)
        pos = 0
        while pos < count:
            i = first + pos
            limit = count - pos
            if period is not None:
                i %= period
                limit = min(limit, period - i)
            nb = i // block
            offset = i - nb * block
            take = min(limit, block - offset)
            data = self._noise.get(
                (link, nb), lambda: noise_block(self.seed, link, self.tap, nb, block)
            )
            out[pos : pos + take] = data[offset : offset + take]
            pos += take
        return out
