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

from emucompile.models.fading._design import Chain, DopplerDesign
from emucompile.models.fading._streams import BoundedCache, noise_block

SYNTHESIS_CACHE_BLOCKS = 2  # synthesis blocks kept per (tap, link) (BoundedCache.admit)
NOISE_CACHE_BLOCKS = 6  # noise blocks kept per (tap, link)
BROADCAST_MIN_FACTOR = 32  # linear stages with R2 >= this loop over the block, not over r


def apply_chain(chain: Chain, y: np.ndarray, block: int, work: "Workspace", out: np.ndarray) -> np.ndarray:
    """Stages 1 and 2 on internal samples ``y`` -> ``out`` (``block * R`` complex64 samples).

    ``y`` (complex) holds internal indices [s B - m1, (s+1) B + m1] with
    m1 = ``chain.margin1``: exactly what the centred filters need. The real
    and imaginary parts are filtered as two real float32 rows (the filters
    are real). Stage 1 is a polyphase sum, one broadcast multiply-add per
    tap of a phase over all phases and both rows at once; every numpy call
    runs along a long axis, into reused buffers (fresh large arrays would
    cost more in page faults than in arithmetic).
    """
    rates = chain.rates
    up1, up2 = rates.up1, rates.up2
    n1 = block * up1
    x1 = work.get("x1", ((block + 1) * up1,), np.complex64)  # stage-1 output, + 1 sample
    if up1 > 1:
        planar = work.get("planar", (2, len(y)), np.float32)
        planar[0] = y.real
        planar[1] = y.imag
        table = work.constant("polyphase", chain, lambda: chain.polyphase)
        count = block + 1
        acc = work.get("acc", (2, up1, count), np.float32)
        term = work.get("term", (2, up1, count), np.float32)
        np.multiply(table[None, :, 0, None], planar[:, None, 0:count], out=acc)
        for q in range(1, table.shape[1]):
            np.multiply(table[None, :, q, None], planar[:, None, q : q + count], out=term)
            acc += term
        x1.real.reshape(count, up1)[...] = acc[0].T
        x1.imag.reshape(count, up1)[...] = acc[1].T
    else:
        x1[:] = y[: block + 1]
    low, high = x1[:n1], x1[1 : n1 + 1]
    if up2 == 1:
        out[...] = low
        return out
    # a_r x1[m] + b_r x1[m+1] (a complex64 times a real weight is exact per
    # part); only the loop order depends on R2: numpy runs its inner loop
    # along the last axis, keep that one long.
    grid = out.reshape(n1, up2)
    if up2 < BROADCAST_MIN_FACTOR:
        term = work.get("term2", (n1,), np.complex64)
        for r in range(up2):
            dest = grid[:, r]
            np.multiply(low, chain.weights_a[r], out=dest)
            if r:
                np.multiply(high, chain.weights_b[r], out=term)
                dest += term
    else:
        term = work.get("term2", (n1, up2), np.complex64)
        np.multiply(low[:, None], chain.weights_a[None, :], out=grid)
        np.multiply(high[:, None], chain.weights_b[None, :], out=term)
        grid += term
    return out


class Workspace:
    """Scratch arrays reused from block to block (one per source, used under its lock)."""

    def __init__(self):
        self._arrays: dict = {}
        self._constants: dict = {}

    def get(self, name, shape, dtype) -> np.ndarray:
        array = self._arrays.get(name)
        if array is None or array.shape != tuple(shape) or array.dtype != dtype:
            array = self._arrays[name] = np.empty(shape, dtype)
        return array

    def constant(self, name, owner, make):
        entry = self._constants.get(name)
        if entry is None or entry[0] is not owner:
            entry = self._constants[name] = (owner, make())
        return entry[1]


class BlockSource:
    """Base of a tap's diffuse process on its synthesis-block grid.

    Subclasses provide ``output_block`` (samples per block) and
    ``_synthesise(index, link, out)``; this class adds the bounded per-link
    cache (recycling the arrays it drops) and writes any range into a
    destination.
    """

    output_block: int

    def __init__(self):
        self._blocks = BoundedCache(SYNTHESIS_CACHE_BLOCKS, on_drop=self._recycle)
        self._spare: list[np.ndarray] = []
        self._lock = threading.Lock()
        self.work = Workspace()

    def write(self, start: int, stop: int, link: int, dest: np.ndarray, scale: float) -> None:
        """dest[:] = scale * diffuse[start:stop]; ``dest`` a complex64 1-D view (any stride).

        Each block is copied out before the next one is made, so a dropped
        block's array can be reused at once.
        """
        size = self.output_block
        factor = np.float32(scale)
        self._blocks.admit(link)
        with self._lock:
            pos = start
            while pos < stop:
                index = pos // size
                first = pos - index * size
                take = min(stop - pos, size - first)
                data = self._blocks.get((link, index), lambda index=index, link=link: self._make(index, link))
                np.multiply(data[first : first + take], factor, out=dest[pos - start : pos - start + take])
                pos += take

    def _make(self, index: int, link: int) -> np.ndarray:
        out = self._spare.pop() if self._spare else np.empty(self.output_block, np.complex64)
        return self._synthesise(index, link, out)

    def _recycle(self, array: np.ndarray) -> None:
        if len(self._spare) < 2:
            self._spare.append(array)

    def _synthesise(self, index: int, link: int, out: np.ndarray) -> np.ndarray:  # pragma: no cover
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

    def _synthesise(self, index: int, link: int, out: np.ndarray) -> np.ndarray:
        d = self.design
        block = d.block
        m1 = d.chain.margin1
        n_y = block + 2 * m1 + 1
        first = index * block - m1 - d.half0
        w = self._gather(first, d.fft_size, link, self.work.get("noise", (d.fft_size,), np.complex128))
        spectrum = sfft.fft(w, overwrite_x=True)
        spectrum *= self._h0_spectrum
        y = sfft.ifft(spectrum, overwrite_x=True)[len(d.h0) - 1 : len(d.h0) - 1 + n_y]
        return apply_chain(d.chain, y, block, self.work, out)

    def _gather(self, first: int, count: int, link: int, out: np.ndarray | None = None) -> np.ndarray:
        """Noise at internal indices [first, first + count) (circular in periodic mode)."""
        block = self.design.block
        period = self.internal_period
        if out is None:
            out = np.empty(count, np.complex128)
        self._noise.admit(link)
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
                (link, nb), lambda link=link, nb=nb, block=block: noise_block(self.seed, link, self.tap, nb, block)
            )
            out[pos : pos + take] = data[offset : offset + take]
            pos += take
        return out
