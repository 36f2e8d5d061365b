"""The direct (line-of-sight) phasor of a tap as a function of the absolute sample index.

This is the one place where the phase of a direct component is computed, so
that a time-varying Doppler (phase = 2 pi integral f(t) dt) can later replace
:class:`ConstantDopplerPhase` without touching the rest of the engine.
"""

from __future__ import annotations

import math
import threading
from fractions import Fraction

import numpy as np

from emucompile.models.fading._streams import BoundedCache

DIRECT_BLOCK = 16384  # samples per rotation block


class ConstantDopplerPhase:
    """exp(j (2 pi f n / F_u + phi0)) on a fixed block grid, exact from the absolute index.

    The phase in cycles is ``cycles_per_sample * n + phase0_cycles``; the
    rotation rate is held as an exact rational (the float64 ratio f/F_u, or
    k/N in periodic mode), so the start phase of every block is its exact
    fractional part, whatever n. Inside a block the phasor is that start
    phasor times a cached table exp(j 2 pi frac(q k)), k < ``DIRECT_BLOCK``:
    cheap, and the same numbers whatever the request.
    """

    def __init__(self, cycles_per_sample: Fraction, phase0_cycles: float):
        self.rate = Fraction(cycles_per_sample)
        self.phase0_cycles = float(phase0_cycles)
        self._q = float(self.rate)
        self._table = None
        self._blocks = BoundedCache(2)
        self._scratch = np.empty(DIRECT_BLOCK, np.complex64)
        self._lock = threading.Lock()

    @property
    def turning(self) -> bool:
        return self.rate != 0

    def constant(self) -> complex:
        """The phasor of a non-turning direct part."""
        return complex(np.exp(2j * np.pi * self.phase0_cycles))

    def phasors(self, start: int, stop: int) -> np.ndarray:
        """Unit phasors at samples [start, stop), complex64."""
        out = np.empty(stop - start, np.complex64)
        self.write(start, stop, out, 1.0, add=False)
        return out

    def write(self, start: int, stop: int, dest: np.ndarray, amplitude: float, *, add: bool) -> None:
        """dest (complex64, any stride) = or += amplitude * phasors[start:stop]."""
        factor = np.float32(amplitude)
        if not self.turning:
            value = np.complex64(self.constant()) * factor
            if add:
                dest += value
            else:
                dest[...] = value
            return
        with self._lock:
            scratch = self._scratch
            pos = start
            while pos < stop:
                index = pos // DIRECT_BLOCK
                first = pos - index * DIRECT_BLOCK
                take = min(stop - pos, DIRECT_BLOCK - first)
                data = self._blocks.get(index, lambda: self._block(index))
                part = dest[pos - start : pos - start + take]
                if add:
                    np.multiply(data[first : first + take], factor, out=scratch[:take])
                    part += scratch[:take]
                else:
                    np.multiply(data[first : first + take], factor, out=part)
                pos += take

    def _block(self, index: int) -> np.ndarray:
        if self._table is None:
            k = np.arange(DIRECT_BLOCK, dtype=np.float64)
            self._table = np.exp(2j * np.pi * np.mod(self._q * k, 1.0))
        start_cycles = float((self.rate * (index * DIRECT_BLOCK)) % 1) + self.phase0_cycles
        start_cycles = math.fmod(start_cycles, 1.0)
        return (np.exp(2j * np.pi * start_cycles) * self._table).astype(np.complex64)
