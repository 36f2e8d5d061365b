"""Random streams keyed by (seed, purpose, link, tap, block), and small bounded caches.

Every random number the engine uses comes from a ``numpy.random.PCG64``
generator seeded by ``SeedSequence(seed, spawn_key=key)``, with ``key`` one of::

    (DIFFUSE_NOISE, link, tap, block)   white noise of one internal block
    (SINUSOIDS, link, tap)              angles and phases of a sum of sinusoids
    (DIRECT_PHASE, tap)                 initial phase of a direct component
    (SHADOWING,)                        log-normal shadowing (emucompile.models.channel)

so that any block can be drawn alone, taps and links never share a stream,
and the constants of one tap do not move when the record gets longer.
Negative block indices (the filter's run-in before sample 0) are folded onto
the non-negative integers (0, -1, 1, -2, ... -> 0, 1, 2, 3, ...), since a
spawn key holds non-negative integers only.
"""

from __future__ import annotations

import threading
from collections import OrderedDict

import numpy as np

DIFFUSE_NOISE = 1
SINUSOIDS = 2
DIRECT_PHASE = 3
SHADOWING = 4

BIT_GENERATOR = "PCG64"

#: Changes only when the numbers a seed produces change. 2: sum-of-sinusoids uses
#: GAUSSIAN_SINUSOIDS (1024) for a Gaussian spectrum by default (was 256). 3: sum-of-sinusoids
#: draws an independent angle offset per sinusoid for the classical spectrum too (one per tap
#: and link made taps and links correlate); the doppler-filter generator's numbers are unchanged.
#: 4: sum-of-sinusoids keeps each quadrature's lowest sinusoid >= G^-1(1/(2M)) from 0 Hz (a
#: near-0 Hz sinusoid is a constant offset over the record); doppler-filter numbers unchanged.
#: 5 (both for speed): a moving delay's per-update windowed sinc comes from piecewise
#: polynomials (``models/sinc_table.py``, within 5e-15 of the closed form): fir.npy of a
#: moving delay can differ in the last bit of a coefficient; and the MIMO correlation and
#: the diffuse amplitude of every profile that is not plain SISO (MIMO, train, shadowing,
#: moving delay) are worked in complex64, not complex128 (``models/channel.py``): those
#: gains move by about 1e-7 relative. Plain SISO gains keep their bytes.
GENERATOR_VERSION = 5


def generator(seed: int, *key: int) -> np.random.Generator:
    """The generator of one key (see the module docstring)."""
    sequence = np.random.SeedSequence(seed, spawn_key=tuple(_fold(k) for k in key))
    return np.random.Generator(np.random.PCG64(sequence))


def noise_block(seed: int, link: int, tap: int, block: int, size: int) -> np.ndarray:
    """``size`` unit-power circular complex Gaussian samples (complex64) of one block.

    float32 draws (numpy's float32 ziggurat): half the cost of float64, and
    far more resolution than the statistics can see.
    """
    rng = generator(seed, DIFFUSE_NOISE, link, tap, block)
    out = rng.standard_normal(2 * size, dtype=np.float32).view(np.complex64)
    out *= np.float32(np.sqrt(0.5))
    return out


class BoundedCache:
    """A tiny least-recently-used cache (thread-safe), so memory stays bounded.

    It holds ``size`` items per group named to :meth:`admit` (a MIMO link:
    links asked for in turn would otherwise push each other's blocks out and
    have them made again for every chunk), or ``size`` in all if none is.
    """

    def __init__(self, size: int, on_drop=None):
        self._size = size
        self._limit = size
        self._groups: set = set()
        self._items: OrderedDict = OrderedDict()
        self._lock = threading.Lock()
        self._on_drop = on_drop

    def admit(self, group) -> None:
        """Make room for ``size`` items of ``group`` (from its first call on)."""
        if group not in self._groups:
            with self._lock:
                self._groups.add(group)
                self._limit = self._size * len(self._groups)

    def get(self, key, make):
        with self._lock:
            if key in self._items:
                self._items.move_to_end(key)
                return self._items[key]
        value = make()
        with self._lock:
            self._items[key] = value
            self._items.move_to_end(key)
            while len(self._items) > self._limit:
                _, dropped = self._items.popitem(last=False)
                if self._on_drop is not None:
                    self._on_drop(dropped)
        return value

    def clear(self):
        with self._lock:
            self._items.clear()


def _fold(k: int) -> int:
    k = int(k)
    return 2 * k if k >= 0 else -2 * k - 1
