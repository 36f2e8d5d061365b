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
"""Samples per chunk the engine hands to the bundle writer."""

__all__ = [
    "DEFAULT_UPDATE_FACTOR",
    "MIN_UPDATE_FACTOR",
    "WARN_UPDATE_FACTOR",
    "DEFAULT_UPDATE_RATE_NO_DOPPLER_HZ",
    "DEFAULT_DURATION_S",
    "CHUNK_SAMPLES",
]
