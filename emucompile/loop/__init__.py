"""The closed loop: sound the emulator with a known probe, estimate what it delivers, judge it.

This subpackage owns the probe waveform and its JSON description (:mod:`.probe`:
a band-limited Zadoff-Chu sequence, cyclic shifts per transmit antenna, a
preamble), the channel estimate of a capture of the emulator's output
(:mod:`.estimate`: find the probe, per-period least squares in the frequency
domain, noise from the delay bins outside the channel's support, projection onto
the profile's taps through the band-limited FIR map), the verdicts (:mod:`.judge`:
against the loaded bundle sample by sample, naming the fault; against the
profile with the estimation noise in the theory) and a small HTML page
(:mod:`.page`). It may import the numerics (``theory``, ``grid``, ``stats``,
``estimators``, ``tolerance``), ``profile``, ``bundle``, ``formats``, ``apply``'s
readers and ``verify``; never ``cli`` or the internals of ``report``/``plots``.
"""

from __future__ import annotations

from emucompile.loop.estimate import estimate_channel, open_capture
from emucompile.loop.probe import ProbeDesign, design_probe, load_probe, write_probe

__all__ = ["ProbeDesign", "design_probe", "estimate_channel", "load_probe", "open_capture", "write_probe"]
