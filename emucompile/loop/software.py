"""A software stand-in for the emulator and its RF path, for tests, the acceptance run and the benchmark.

:func:`play` passes the probe through a bundle with :func:`emucompile.apply.replay.apply_channel`
(or through gains the caller changed, to play a faulty emulator), then adds what
a lab set-up adds: a bulk delay of whole samples, a frequency offset, a complex
gain and white Gaussian noise at an SNR over the whole sample-rate band against
the output's power.
"""

from __future__ import annotations

import math

import numpy as np

from emucompile.apply.replay import apply_channel
from emucompile.bundle.store import open_bundle

SET_UP_GAIN = 0.5 * np.exp(0.7j)
"""-6.02 dB at 40.1 degrees: the set-up's gain the tests give the emulator's path."""


def play(design, bundle, *, gains=None, fir_matrix=None, between="linear", snr_db=30.0, bulk=3, cfo_hz=3.0,
         gain=SET_UP_GAIN, seed=5) -> np.ndarray:
    """The capture, (n, n_rx) complex64; ``gains`` or ``fir_matrix`` replace the bundle's to play a fault."""
    opened = open_bundle(bundle)
    rate = design.sample_rate_hz
    g = opened.tap_gains if gains is None else gains
    y = apply_channel(design.waveform(), g, opened.fir_map if fir_matrix is None else fir_matrix,
                      update_rate_hz=opened.manifest["update_rate_hz"],
                      sample_rate_hz=rate, between_updates=between)
    y = np.concatenate([np.zeros((bulk, y.shape[1]), y.dtype), y])
    n = np.arange(y.shape[0])
    y = y * gain * np.exp(2j * np.pi * cfo_hz * n / rate)[:, None]
    rng = np.random.default_rng(seed)
    sigma = math.sqrt(np.mean(np.abs(y) ** 2) / 10 ** (snr_db / 10) / 2)
    return (y + sigma * (rng.standard_normal(y.shape) + 1j * rng.standard_normal(y.shape))).astype(np.complex64)
