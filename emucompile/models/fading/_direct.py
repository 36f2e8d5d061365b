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
                data = self._blocks.get(index, lambda index=index: self._block(index))
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


def direct_phase(doppler_hz: float, phase_deg: float, update_rate_hz: float, n_samples: int,
                 periodic: bool) -> tuple[ConstantDopplerPhase, float]:
    """The phase of a direct part turning at ``doppler_hz`` from ``phase_deg``, and the Doppler it uses.

    Periodic records round the Doppler to whole turns per period (k / N
    cycles per sample, exact); otherwise the rate is the float64 ratio
    f / F_u. Applied to the Doppler a manifest records (already rounded), it
    gives the same rate again, so a record's direct part follows from its
    manifest alone.
    """
    if periodic:
        turns = round(doppler_hz * n_samples / update_rate_hz)
        rate = Fraction(turns, n_samples)
        used = turns * update_rate_hz / n_samples
    else:
        rate = Fraction(doppler_hz / update_rate_hz)
        used = doppler_hz
    return ConstantDopplerPhase(rate, phase_deg / 360.0), used


class RecordedDirect:
    """The direct phasors of a compiled record, from its manifest's per-tap record: no design, no draw.

    Stands in for :class:`emucompile.models.fading.FadingPlan` where only the
    deterministic direct part is wanted (``verify``): :meth:`direct` gives the
    same complex64 as the plan that made the record, bit for bit, from each
    tap's recorded ``los_doppler_hz`` (as used) and ``los_phase_deg`` (as
    drawn or given). It has no diffuse part.

    Parameters
    ----------
    taps : sequence of dict
        A manifest's ``taps`` (``fading``, ``los_doppler_hz``, ``los_phase_deg``).
    update_rate_hz, n_samples, seed, periodic
        As recorded in the manifest.
    """

    def __init__(self, taps, update_rate_hz: float, n_samples: int, seed: int, periodic: bool):
        self.update_rate_hz = float(update_rate_hz)
        self.n_samples = int(n_samples)
        self.seed = int(seed)
        self.periodic = bool(periodic)
        self._info, self._phases = [], []
        for tap in taps:
            if tap["fading"] in ("rician", "static"):
                doppler = float(tap.get("los_doppler_hz") or 0.0)  # None: a trajectory (its phase is the channel's)
                phase_deg = float(tap.get("los_phase_deg") or 0.0)
                self._phases.append(direct_phase(doppler, phase_deg, self.update_rate_hz, self.n_samples,
                                                 self.periodic)[0])
                self._info.append({"los_doppler_hz": doppler, "los_phase_deg": phase_deg})
            else:
                self._phases.append(None)
                self._info.append({})

    @property
    def n_taps(self) -> int:
        return len(self._phases)

    def tap_info(self) -> list[dict]:
        return [dict(info) for info in self._info]

    def direct(self, start: int, stop: int) -> np.ndarray:
        """Unit-modulus direct phasors at samples [start, stop) of the record, complex64 (m, n_taps)."""
        return np.ascontiguousarray(self.direct_rows(start, stop, range(self.n_taps)).T)

    def direct_rows(self, start: int, stop: int, taps) -> np.ndarray:
        """:meth:`direct` of the taps listed, tap-major: complex64 (len(taps), stop - start)."""
        if not 0 <= start <= stop <= self.n_samples:
            raise ValueError(f"need 0 <= start <= stop <= {self.n_samples}, got [{start}, {stop})")
        taps = list(taps)
        rows = np.empty((len(taps), stop - start), np.complex64)
        for i, j in enumerate(taps):
            phase = self._phases[j]
            if phase is None:
                rows[i] = 1.0
            else:
                phase.write(start, stop, rows[i], 1.0, add=False)
        return rows
