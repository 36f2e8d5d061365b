"""The defaults of a compile run where neither the command line nor the profile says otherwise.

Read by the rules (:mod:`emucompile.compile.rules`) and the planner
(:mod:`emucompile.compile.plan`); light (no numpy), so that ``validate`` may read them.
"""

from __future__ import annotations

from emucompile.models import rates

DEFAULT_UPDATE_FACTOR = 64
"""Default update rate as a multiple of the largest Doppler (at least 32)."""
MIN_UPDATE_FACTOR = rates.MIN_UPDATE_RATIO
"""Below this multiple of the largest Doppler the gains cannot carry the spectrum
(Nyquist, 2x, with the engine's 10 % guard band)."""
WARN_UPDATE_FACTOR = 16
"""Below this multiple, emulators that hold or linearly interpolate coefficients add images."""
DEFAULT_UPDATE_RATE_NO_DOPPLER_HZ = 1000.0
DEFAULT_DURATION_S = 10.0
CHUNK_SAMPLES = 1 << 16
"""Most samples per chunk the engine hands to the bundle writer."""
CHUNK_BYTES = 24 << 20
"""Most bytes of complex64 gains per chunk (24 MiB)."""


def chunk_samples(n_links: int, n_taps: int) -> int:
    """Samples per chunk: at most :data:`CHUNK_SAMPLES`, and at most :data:`CHUNK_BYTES` of gains.

    A 4x4 MIMO chunk of CHUNK_SAMPLES would be 96 MiB; above the C library's
    largest mmap threshold (32 MiB in glibc, from memory) every such chunk is
    fresh pages to fault in again. The chunking changes no bit of the gains.

    >>> chunk_samples(1, 12), chunk_samples(4, 12), chunk_samples(16, 12)
    (65536, 65536, 16384)
    """
    return max(1, min(CHUNK_SAMPLES, CHUNK_BYTES // (8 * max(1, n_links * n_taps))))

__all__ = [
    "DEFAULT_UPDATE_FACTOR",
    "MIN_UPDATE_FACTOR",
    "WARN_UPDATE_FACTOR",
    "DEFAULT_UPDATE_RATE_NO_DOPPLER_HZ",
    "DEFAULT_DURATION_S",
    "CHUNK_SAMPLES",
    "CHUNK_BYTES",
    "chunk_samples",
]
