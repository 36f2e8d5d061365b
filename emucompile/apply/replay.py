"""Replay a bundle over an IQ recording, one import away: the channel, the recordings, ``apply``.

The names live in the modules of :mod:`emucompile.apply` by concern and are
gathered here for callers that want them all (``from emucompile.apply import replay``):

- :mod:`~emucompile.apply.channel`: :class:`TimeVaryingFir`, :func:`apply_channel`,
  :func:`channel_mean_power`, :class:`WhiteNoise` (numerics; the module notes define
  the channel, the time between updates, looping and the noise);
- :mod:`~emucompile.apply.recordings`: :class:`Recording`, :func:`read_recording`
  (npy, raw cf32, SigMF) and the output written atomically;
- :mod:`~emucompile.apply.run`: :func:`apply_bundle`, :class:`ApplyResult`.
"""

from __future__ import annotations

from emucompile.apply.channel import (
    BETWEEN_UPDATES,
    BLOCK_SAMPLES,
    ENGINES,
    INTERVAL_ENGINE_MIN_SAMPLES,
    NOISE_FRAME_SAMPLES,
    TimeVaryingFir,
    WhiteNoise,
    apply_channel,
    channel_mean_power,
)
from emucompile.apply.recordings import RAW_SUFFIXES, SIGMF_DATATYPES, Recording, read_recording
from emucompile.apply.run import MAX_ABS_SNR_DB, SIDECAR_FORMAT, SIDECAR_VERSION, ApplyResult, apply_bundle

__all__ = [
    "BETWEEN_UPDATES",
    "ENGINES",
    "INTERVAL_ENGINE_MIN_SAMPLES",
    "NOISE_FRAME_SAMPLES",
    "BLOCK_SAMPLES",
    "RAW_SUFFIXES",
    "SIGMF_DATATYPES",
    "MAX_ABS_SNR_DB",
    "SIDECAR_FORMAT",
    "SIDECAR_VERSION",
    "TimeVaryingFir",
    "apply_channel",
    "channel_mean_power",
    "WhiteNoise",
    "Recording",
    "read_recording",
    "ApplyResult",
    "apply_bundle",
]
