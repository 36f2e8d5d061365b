"""Channel estimate of a capture of the emulator's output: find the probe, least squares per period, project onto taps.

Per period of L samples (one probe period, after a whole period that serves
as cyclic prefix), with Y[k] the DFT of the window and X[k] the probe's:

* Z[k] = Y[k] / X[k] on the occupied bins (|X[k]| constant: least squares and
  periodic cross-correlation are the same estimate), the sum over transmit
  antennas m of H_m[k] exp(-j 2 pi k s_m / L) (cyclic shift s_m);
* the model Z = A g + noise with A[k, (m, i)] = F_i[k] exp(-j 2 pi k (s_m + d) / L),
  F_i the DFT of tap i's row of the band-limited FIR map at the capture's rate
  (:func:`emucompile.models.grid.fir_map`) and d the alignment (integer by circular
  correlation of the power delay profile with the map's expected one, then
  fractional by least squares); the tap gains g = pinv(A) Z, their noise
  covariance sigma_Z^2 (A^H A)^-1;
* sigma_Z^2 from the delay bins outside every antenna's support (the inverse
  DFT of Z over L bins: white noise of variance sigma_Z^2 per occupied bin
  gives K sigma_Z^2 / L^2 in every delay bin).

The estimate of a period is, to first order in the time variation over L
samples, the average of the channel over that period: it stands at the
period's centre.

Speed, memory and precision: g = pinv(A) Z is linear in the period's samples
y, g = y W with W (L x columns) the time-domain weights of pinv(A) Z
(:func:`_time_weights`); every block of periods is read by a file read and
projected by one complex64 matrix product, with no FFT of every period. The
FFT runs only on the alignment's first periods (complex128) and on the at
most :data:`NOISE_PERIODS` periods of the noise estimate (complex64: their
power to ~1e-7 relative; the fit subtracted there is the periods' own
estimates). Memory: a block of :data:`BLOCK_SAMPLES` samples per receive
antenna at a time, plus the estimates themselves (a few numbers per period
and tap). Error budget of the complex64 product, u = 2^-24: an estimate's
rounding error is at most (L + 5) u sum_n |y_n| |w_n| (a dot product's bound,
Higham, *Accuracy and Stability of Numerical Algorithms*, 2nd ed., 2002,
section 3.1, with the complex product's sqrt(2) gamma_2 of section 3.6, from
memory; the weights' own rounding adds u); as rounding errors add at random
it is about u sqrt(L (1 + SNR)) of the estimate's own noise standard
deviation: measured 1.0e-4 rms and 8.8e-4 at most over 12 000 estimates at
L = 4800 and 30 dB (a 2 s capture of ``benchmarks/bench_measure.py
--capture apply``), below -60 dB of the noise power that sets the tolerances
(``tests/test_loop.py`` checks both on its capture). A cf32 capture's samples
carry u of rounding already.
"""

from __future__ import annotations

import math
import mmap
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from scipy import fft as sp_fft
from scipy import optimize

from emucompile.apply.recordings import Recording, read_recording
from emucompile.errors import InputError, NoProbe  # noqa: F401  (NoProbe: re-exported)
from emucompile.loop.probe import PREAMBLE_PERIODS

BLOCK_SAMPLES = 1 << 20
"""Samples per processing block (whole periods; about 8 MiB of complex64 per receive antenna)."""
MIN_PSR_DB = 10.0
"""A preamble peak must stand this far above the largest correlation outside the channel's span."""
SEARCH_PERIODS = 16
SEARCH_SAMPLES = 1 << 20
"""The probe is looked for in windows of this many samples (or a preamble and 16 periods), in turn."""
MAX_SEARCH_SAMPLES = 1 << 26
ALIGN_PERIODS = 64
ALIGN_CANDIDATES = 16
NOISE_PERIODS = 2048
"""At most this many periods (evenly spread) feed the noise estimate: one inverse DFT each."""
CI16_FULL_SCALE = 32767
STEP_TABLE_ELEMENTS = 1 << 21
"""The step-response table (positions x columns^2) stays below this many complex numbers (32 MiB)."""


@dataclass
class Capture:
    """A capture opened for reading: one or more recordings whose channels are the receive antennas."""

    paths: list
    recordings: list = field(repr=False)
    sample_rate_hz: float | None
    clipped: int = 0

    @property
    def n_samples(self) -> int:
        return min(r.n_samples for r in self.recordings)

    @property
    def n_rx(self) -> int:
        return sum(r.n_channels for r in self.recordings)

    maps: dict = field(default_factory=dict, repr=False)

    def read(self, start: int, stop: int) -> np.ndarray:
        """Samples start .. stop - 1, (m, n_rx) as :meth:`Recording.read` gives them; a view of the file's map
        where the recording is one (complex64): :meth:`release` lets its pages go once used."""
        parts = [self._rows(index, start, stop) for index in range(len(self.recordings))]
        return parts[0] if len(parts) == 1 else np.concatenate(parts, axis=1)

    def release(self, start: int, stop: int) -> None:
        """Let the map's pages of samples start .. stop - 1 go: the process's memory stays a block whatever the
        capture's length (the pages stay in the page cache; a later read maps them again)."""
        for index, mapped in self.maps.items():
            samples = self.recordings[index].samples
            if mapped is None or not hasattr(mapped, "madvise"):
                continue
            first = (samples.offset + max(0, start) * samples.strides[0]) // mmap.PAGESIZE * mmap.PAGESIZE
            last = min(len(mapped), samples.offset + max(0, stop) * samples.strides[0])
            if last > first:
                mapped.madvise(mmap.MADV_DONTNEED, first, last - first)

    def _rows(self, index: int, start: int, stop: int) -> np.ndarray:
        """One recording's samples start .. stop - 1 through a map of its file the capture keeps (a numpy
        memory map cannot let its pages go); a recording that is not a C-ordered map of a file through
        :meth:`Recording.read`."""
        recording = self.recordings[index]
        samples = recording.samples
        if index not in self.maps:
            self.maps[index] = None
            if isinstance(samples, np.memmap) and samples.filename and samples.flags.c_contiguous:
                with open(samples.filename, "rb") as handle:
                    self.maps[index] = mmap.mmap(handle.fileno(), 0, access=mmap.ACCESS_READ)
        mapped = self.maps[index]
        if mapped is None:
            return recording.read(start, stop)
        start, stop = max(0, start), max(0, min(stop, samples.shape[0]))
        count = max(0, stop - start)
        try:
            out = np.frombuffer(mapped, samples.dtype, count * int(np.prod(samples.shape[1:])),
                                samples.offset + start * samples.strides[0]).reshape((count,) + samples.shape[1:])
        except ValueError:
            raise InputError(f"{recording.data_path or recording.path}: shorter than its header says (truncated "
                             "while being read?)") from None
        if recording.datatype == "ci16_le":
            codes, out = out, np.empty(out.shape[:2], np.complex64)
            out.real = codes[..., 0]
            out.imag = codes[..., 1]
            return out
        return out.astype(recording.dtype, copy=False)


def open_capture(paths, *, n_rx: int = 1, sample_rate_hz: float | None = None) -> Capture:
    """Open a capture: SigMF (cf32/cf64/ci16), npy, raw cf32 or raw ci16 (``.ci16``); one file or one per antenna."""
    if isinstance(paths, (str, Path)):
        paths = [paths]
    paths = [Path(p) for p in paths]
    recordings = []
    per_file = n_rx if len(paths) == 1 else 1
    for path in paths:
        if path.suffix.lower() == ".ci16":
            if not path.is_file():
                raise InputError(f"{path}: no such file")
            size = path.stat().st_size
            frame = 4 * per_file
            if size == 0 or size % frame:
                raise InputError(f"{path}: {size} bytes is not a whole number of ci16 samples "
                                 f"({frame} bytes each for {per_file} channel(s))")
            codes = np.memmap(path, dtype="<i2", mode="r", shape=(size // frame, per_file, 2))
            recordings.append(Recording(path, "ci16", "ci16_le", codes, data_path=path))
        else:
            recordings.append(read_recording(path, n_channels=per_file))
    capture = Capture(paths, recordings, None)
    for index, recording in enumerate(recordings):
        if recording.datatype == "ci16_le":  # one pass over the codes, in blocks
            for first in range(0, recording.n_samples, BLOCK_SAMPLES):
                values = capture._rows(index, first, first + BLOCK_SAMPLES).view(np.float32)
                capture.clipped += int(np.count_nonzero(np.abs(values) >= CI16_FULL_SCALE))
                capture.release(first, first + BLOCK_SAMPLES)
    rates = {r.sample_rate_hz for r in recordings if r.sample_rate_hz is not None}
    if len(rates) > 1:
        raise InputError(f"the capture's files disagree on the sample rate: {sorted(rates)}")
    rate = rates.pop() if rates else None
    if sample_rate_hz is not None:
        if rate is not None and not math.isclose(rate, sample_rate_hz, rel_tol=1e-9):
            raise InputError(f"--sample-rate {sample_rate_hz:g} Hz, but {paths[0]} says {rate:g} Hz")
        rate = float(sample_rate_hz)
    capture.sample_rate_hz = rate
    return capture


@dataclass
class Estimate:
    """Tap gains estimated from a capture, per probe period, with what they rest on.

    ``gains`` (n, n_rx, n_tx, n_taps) complex128 at ``rate_hz`` (the probe's
    repetition rate), ``times_s`` the capture time of each period's centre;
    ``noise_variance`` (n_rx, n_tx, n_taps) the variance of one estimate's
    noise; ``noise_delay_power`` (n_rx,) sigma_Z^2 K / L^2 per delay bin;
    ``pdp`` (n_rx, L) the mean |z|^2 per delay bin (delay 0 = the aligned FIR's
    column 0 of antenna 0); ``offset_samples`` the alignment d;
    ``arrival_sample`` the capture sample where the preamble's first sample
    arrives through the FIR map's column 0.
    """

    gains: np.ndarray
    times_s: np.ndarray
    rate_hz: float
    noise_variance: np.ndarray
    noise_delay_power: np.ndarray
    pdp: np.ndarray
    offset_samples: float
    arrival_sample: float
    probe_start: int
    psr_db: float
    residual_fraction: float
    snr_db: list
    clipped: int
    notes: list
    ramp_response: np.ndarray = field(default=None, repr=False)
    step_response: np.ndarray = field(default=None, repr=False)
    step_samples: np.ndarray = field(default=None, repr=False)
    tap_delay_errors_s: list = field(default_factory=list)


def estimate_channel(capture: Capture, design, source, *, cfo_hz: float | None = None,
                     progress=None) -> Estimate:
    """Find the probe in ``capture`` and estimate the tap gains of every period (see the module notes)."""
    rate = design.sample_rate_hz
    L = design.period_samples
    n = capture.n_samples
    notes = []
    if n < design.preamble_samples + 4 * L:
        raise InputError(f"{capture.paths[0]}: not enough data: {n} samples hold fewer than the preamble and "
                         f"3 probe periods ({design.preamble_samples + 4 * L} samples)")
    s0, psr_db, preamble_start = find_probe(capture, design, source.span_samples)
    seen = preamble_start is not None
    first = s0 + L  # one whole period after the first probe period: a cyclic prefix and a margin
    n_est = (n - first) // L
    if seen:
        n_est = min(n_est, design.n_periods - 3)
    else:
        notes.append(f"no preamble seen in the first {min(n, MAX_SEARCH_SAMPLES) / rate:.4g} s: the capture began "
                     "inside the probe; its periods are taken from the first whole one to the end of the capture")
    if n_est < 3:
        raise InputError(f"{capture.paths[0]}: not enough data: {max(0, n_est)} whole probe period(s) after the "
                         f"probe's start at sample {s0}")
    bins = design.bins()
    signed = np.where(bins > L // 2, bins - L, bins).astype(float)
    x0 = sp_fft.fft(design.period(0))[bins]
    # a known frequency offset, removed: exp(-j 2 pi f (first + p L + n) / rate) = (per period) x (within it)
    rotation = float(cfo_hz) if cfo_hz else 0.0
    within = np.exp(-2j * np.pi * rotation * np.arange(L) / rate)

    def per_period(index):
        return np.exp(-2j * np.pi * rotation * (first + np.asarray(index) * L) / rate)

    def frames(p0, count):
        """Periods p0 .. p0 + count - 1 as read, (count, n_rx, L) complex64 (not rotated)."""
        block = capture.read(first + p0 * L, first + (p0 + count) * L).astype(np.complex64, copy=False)
        return block.reshape(count, L, capture.n_rx).transpose(0, 2, 1)

    def rotated(periods, index):
        """The given periods (index: their numbers) with the known frequency offset removed."""
        if not rotation:
            return periods
        return periods * (within * per_period(index)[:, None])[:, None, :].astype(np.complex64)

    def spectra(periods, index):
        """Z = FFT(y)[bins] / X of the given periods, rotated: (count, n_rx, K) complex128."""
        return sp_fft.fft(rotated(periods, index), axis=-1)[..., bins] / x0

    # alignment on the first periods: integer by the delay profile, fractional by least squares
    count = min(ALIGN_PERIODS, n_est)
    head = spectra(frames(0, count), np.arange(count))
    pdp_head = np.mean(np.abs(_delay_domain(head, bins, L)) ** 2, axis=(0, 1))
    rows = source.fir_matrix
    powers = np.array([t.power_linear for t in source.profile.taps])
    expected = np.zeros(L)
    for shift in design.cyclic_shifts:
        expected[(shift + np.arange(rows.shape[1])) % L] += powers @ rows ** 2
    score = np.real(sp_fft.ifft(sp_fft.fft(pdp_head) * np.conj(sp_fft.fft(expected))))
    # antenna 0's response starts near delay 0 of the windows (find_probe placed them so): search within
    # +-L / (2 n_tx), which keeps the antennas apart when their responses look alike
    reach = L // (2 * design.n_tx)
    candidates = np.arange(-reach, reach) % L

    tap_spectra = _tap_spectra(rows, signed, L)

    def misfit(shift):
        return _misfit(head, _design_matrix(tap_spectra, design.cyclic_shifts, shift, signed, L))

    # the delay profile's correlation is broad (fading weighs the taps unevenly over a few periods): its best
    # few shifts are shortlisted and the least-squares misfit decides
    shortlist = candidates[np.argsort(score[candidates])[::-1][:ALIGN_CANDIDATES]]
    d0 = int(min(shortlist, key=misfit))

    def residual(delta):
        return misfit(d0 + delta)

    found = optimize.minimize_scalar(residual, bounds=(-1.0, 1.0), method="bounded", options={"xatol": 1e-3})
    offset = d0 + float(found.x)
    if offset >= L / 2:
        offset -= L
    # a tap at the wrong delay pulls the common fit: each tap's delay fitted, the common offset their median
    delay_errors, offset = _tap_delay_errors(head, rows, design, offset, signed, L, source.profile)
    a = _design_matrix(tap_spectra, design.cyclic_shifts, offset, signed, L)
    pinv_t = np.linalg.pinv(a).T  # (K, n_tx * n_taps)
    gram_inverse = np.linalg.inv(a.conj().T @ a)
    weights = _time_weights(pinv_t, bins, x0, L)
    ramp, steps, step_samples = _time_response(a, weights, design, bins, x0)
    energy_head = float(np.sum(np.abs(head) ** 2))
    residual_fraction = residual(offset - d0) / energy_head if energy_head > 0 else math.nan

    support = np.zeros(L, bool)
    for shift in design.cyclic_shifts:
        support[(int(math.floor(offset)) + shift + np.arange(-2, rows.shape[1] + 3)) % L] = True
    if support.all():
        raise InputError("the probe's period leaves no delay bins outside the channel's support for the noise estimate")
    # noise: the residual of the tap model in the delay bins outside every support; white noise of
    # variance sigma_Z^2 per occupied bin leaves sigma_Z^2 (||M||^2 - ||M Q||^2) there (M the inverse DFT's
    # rows of those bins, ||M||^2 = |outside| K / L^2; Q an orthonormal basis of the model's columns, which
    # the fit removes: M Q by inverse DFTs of Q's columns)
    basis, _ = np.linalg.qr(a)
    outside_factor = float(np.count_nonzero(~support) * bins.size / L ** 2
                           - np.sum(np.abs(_delay_domain(basis.T, bins, L)[:, ~support]) ** 2))
    outside = np.flatnonzero(~support)
    outside_columns = _delay_domain(a.T, bins, L)[:, outside].astype(np.complex64)  # (columns, outside bins)
    inverse_probe = np.zeros(L, np.complex64)  # 1 / X on the occupied bins, 0 elsewhere
    inverse_probe[bins] = 1.0 / x0
    n_taps = rows.shape[0]
    gains = np.empty((n_est, capture.n_rx, design.n_tx, n_taps), np.complex128)
    noise_sum = np.zeros(capture.n_rx)
    noise_count = 0
    pdp = np.zeros((capture.n_rx, L))
    pdp_count = 0
    noise_step = max(1, n_est // NOISE_PERIODS)
    per_block = max(1, BLOCK_SAMPLES // L)
    # the projection g = pinv(A) FFT(y)[bins] / X as one matrix product with its time-domain weights per block
    # (the same linear map, without the FFT); the rotation within a period folded into the weights; complex64
    # (the module notes give the error budget)
    projection = (weights * within[:, None]).astype(np.complex64)
    for p0 in range(0, n_est, per_block):
        count = min(per_block, n_est - p0)
        y = frames(p0, count)
        block = (y.reshape(count * capture.n_rx, L) @ projection).reshape(count, capture.n_rx, design.n_tx, n_taps)
        if rotation:
            block *= per_period(p0 + np.arange(count))[:, None, None, None]
        gains[p0:p0 + count] = block
        pick = np.arange((-p0) % noise_step, count, noise_step)
        if pick.size:  # complex64: the noise's power to ~1e-7 (the fit it subtracts: see the module notes)
            spectrum = sp_fft.fft(rotated(y[pick], p0 + pick), axis=-1)
            spectrum *= inverse_probe
            delay = sp_fft.ifft(spectrum, axis=-1)  # (picked, n_rx, L): the delay domain of Z
            # the fit's delay domain outside the support: the period's estimates times the columns' there
            residual = delay[..., outside]
            residual -= (block[pick].reshape(-1, design.n_tx * n_taps) @ outside_columns).reshape(residual.shape)
            noise_sum += np.sum(residual.real ** 2 + residual.imag ** 2, axis=(0, 2), dtype=np.float64)
            noise_count += pick.size
            pdp += np.sum(delay.real ** 2 + delay.imag ** 2, axis=0, dtype=np.float64)
            pdp_count += pick.size
        capture.release(first + p0 * L, first + (p0 + count) * L)
        if progress is not None:
            progress(p0 + count, n_est)
    sigma_z2 = noise_sum / (max(1, noise_count) * outside_factor)
    noise_delay = sigma_z2 * bins.size / L ** 2
    diag = np.real(np.diag(gram_inverse)).reshape(design.n_tx, n_taps)
    noise_variance = sigma_z2[:, None, None] * diag[None]
    pdp /= max(1, pdp_count)
    times = (first + np.arange(n_est) * L + L / 2.0) / rate
    # output power of the unit-power probe: (1/K) sum_k |H_k|^2 = (L/K) sum_n |h_n|^2 (support, noise removed)
    signal_power = (np.sum(pdp[:, support], axis=1) - noise_delay * np.count_nonzero(support)) * L / bins.size
    # noise per capture sample sigma_w^2 = sigma_Z^2 L / K (the probe's DFT has magnitude L / sqrt(K)): SNR over the
    # whole sample-rate band against the channel's output power for the unit-power probe
    sigma_w2 = sigma_z2 * L / bins.size
    snr = [None if not (s > 0 and v > 0) else 10 * math.log10(s / v) for s, v in zip(signal_power, sigma_w2)]
    if capture.clipped:
        notes.append(f"{capture.clipped} I/Q values at the int16 full scale in the ci16 capture (clipped: "
                     "lower the capture level)")
    anchor = preamble_start if seen else s0
    probe_start = anchor + ((s0 + offset - anchor) % L + L / 2) % L - L / 2
    return Estimate(gains, times, rate / L, noise_variance, noise_delay, np.roll(pdp, -int(round(offset)), axis=1),
                    offset, probe_start, s0, psr_db, residual_fraction, snr, capture.clipped, notes, ramp, steps,
                    step_samples, delay_errors)


def find_probe(capture: Capture, design, span: int) -> tuple[int, float, int | None]:
    """Where the probe's periods start: (sample, peak-to-sidelobe ratio in dB, the preamble's first period or None).

    Fading-robust: the capture is correlated with one period of the preamble's
    root and one of the probe's; the sum of both powers folded modulo L (over
    every period of the search window, summed over the channel's span) peaks
    at the channel's arrival phase (its peak-to-sidelobe ratio is reported;
    below :data:`MIN_PSR_DB` there is no probe: :class:`NoProbe`). At that
    phase each period is classified by the share of the preamble root's
    power, a ratio that does not depend on the channel's gain: the probe
    starts after the last period of the first preamble run. When no preamble
    period is seen (the capture began inside the probe), the first whole
    period is taken and the caller says so.
    """
    L = design.period_samples
    size = max(SEARCH_SAMPLES, design.preamble_samples + SEARCH_PERIODS * L)
    start, last = 0, None
    while True:  # windows of the capture in turn (overlapping by a preamble), up to MAX_SEARCH_SAMPLES
        window = min(capture.n_samples - start, size)
        try:
            found = _find_in_window(capture, design, span, start, window)
        except NoProbe as error:
            last = error
            found = None
        if found is not None and found[0] + 3 * L <= start + window:
            return found
        step = size - design.preamble_samples - 2 * L
        if found is not None:  # the probe begins at the window's end: look again from its preamble
            step = max(L, (found[2] if found[2] is not None else found[0]) - L - start)
        start += step
        if start + 3 * L > min(capture.n_samples, MAX_SEARCH_SAMPLES):
            if found is not None:
                return found
            raise last


def _find_in_window(capture, design, span, start, window):
    """find_probe on capture samples start .. start + window - 1 (indices returned in capture samples)."""
    L = design.period_samples
    y = capture.read(start, start + window).astype(np.complex64)  # a copy: the map's pages go
    capture.release(start, start + window)
    usable = window - L + 1
    if usable < 2 * L:
        raise NoProbe(f"{capture.paths[0]}: no probe found: the capture holds fewer than 3 probe periods")
    size = sp_fft.next_fast_len(window)
    spectrum = sp_fft.fft(y, size, axis=0)
    powers = []
    for reference in (design.preamble_period(), design.period(0)):
        kernel = np.conj(sp_fft.fft(reference.astype(np.complex64), size))  # corr[n] = sum_m conj(p[m]) y[n + m]
        corr = sp_fft.ifft(spectrum * kernel[:, None], axis=0)[:usable]
        powers.append(np.sum(np.abs(corr) ** 2, axis=1))
    pre, pro = powers
    rows = usable // L
    folded = pro[: rows * L].reshape(rows, L).sum(axis=0) + pre[: rows * L].reshape(rows, L).sum(axis=0)
    width = min(span + 1, L)
    smoothed = np.convolve(np.concatenate([folded, folded[: width - 1]]), np.ones(width), "valid")[:L]
    # where the responses begin (modulo L): the sum over the antennas' shifts peaks at any antenna's
    combined = sum(np.roll(smoothed, -shift) for shift in design.cyclic_shifts)
    phase = int(np.argmax(combined))
    inside = np.zeros(L, bool)
    margin = max(2, design.guard_samples // 4)  # the band-limited response's own sidelobes stay inside
    for shift in design.cyclic_shifts:  # every transmitter's response, L / n_tx apart
        inside[(phase + shift + np.arange(-margin, width + margin)) % L] = True
    peak = float(np.max(folded[inside]))
    side = float(np.max(folded[~inside])) if (~inside).any() else 0.0
    psr = math.inf if side <= 0 else 10 * math.log10(peak / side)
    if not psr >= MIN_PSR_DB:
        searched_s = (start + window) / design.sample_rate_hz
        raise NoProbe(f"{capture.paths[0]}: no probe found (searched up to {searched_s:.4g} s): "
                      f"the probe's correlation peak stands {psr:.1f} dB above its largest sidelobe "
                      f"(at least {MIN_PSR_DB:g} dB needed); wrong probe, wrong rate, or no signal")
    # per period, the share of the preamble root's correlation energy within one response's span: about 1 in a
    # preamble period (antenna 0 alone sends it; the share does not depend on the channel's gain), about
    # width / L in a probe period (the other root spreads it); the preamble also tells antenna 0's phase
    best = None
    for candidate in sorted({(phase + shift) % L for shift in design.cyclic_shifts}):
        starts = candidate + L * np.arange((usable - candidate - L) // L + 1)
        lags = starts[:, None] + np.arange(L)[None]
        share = np.sum(pre[lags[:, :width]], axis=1) / np.maximum(np.sum(pre[lags], axis=1), 1e-300)
        if best is None or share.max() > best[1].max():
            best = (starts, share)
    starts, share = best
    threshold = (1.0 + width / L) / 2.0
    is_pre = np.flatnonzero(share > threshold)
    if is_pre.size == 0:
        return start + int(starts[0]), psr, None
    # the preamble's last period: the last one above the threshold within a preamble's length of the first
    # (a period in a fade may dip below it)
    run_end = int(is_pre[is_pre <= is_pre[0] + PREAMBLE_PERIODS].max())
    return start + int(starts[min(run_end + 1, starts.size - 1)]), psr, start + int(starts[is_pre[0]])


def _tap_delay_errors(head, rows, design, offset, signed, L, profile, sweeps: int = 2):
    """Per tap, the shift of its FIR row (samples, within +-1) that best fits the first periods; the common offset.

    Coordinate descent on the least-squares misfit over the alignment
    periods: each tap's shift in turn with the others' kept, ``sweeps`` times;
    after each sweep the common offset takes the median shift (the taps that
    sit where they should). Returns (shifts in seconds, None for a tap of zero
    power; the common offset in samples).
    """
    spectra = _tap_spectra(rows, signed, L)
    k = rows.shape[0]
    shifts = np.zeros(k)
    if len(profile.taps) == k:
        active = [tap for tap in range(k) if profile.taps[tap].power_linear > 0]
    else:
        active = list(range(k))

    z = head.reshape(-1, head.shape[-1])
    energy = float(np.vdot(z, z).real)

    def design_at(values, common):
        shifted = spectra * np.exp(-2j * np.pi * np.outer(values, signed) / L)
        return _design_matrix(shifted, design.cyclic_shifts, common, signed, L)

    for _ in range(sweeps):
        for tap in active:
            # only this tap's columns (one per transmitter) move: their products with the periods are formed
            # again, the others' kept (the same misfit as _misfit, without the whole matrix product)
            kept = z @ design_at(shifts, offset).conj()
            moved = tap + k * np.arange(design.n_tx)

            def one(delta, tap=tap, kept=kept, moved=moved, shifts=shifts, offset=offset):
                values = shifts.copy()
                values[tap] = delta
                a = design_at(values, offset)
                b = kept.copy()
                b[:, moved] = z @ a[:, moved].conj()
                return _misfit_from(energy, a, b)

            shifts[tap] = optimize.minimize_scalar(one, bounds=(-1.0, 1.0), method="bounded",
                                                   options={"xatol": 1e-3}).x
        centre = float(np.median(shifts[active])) if active else 0.0
        offset += centre
        shifts -= centre
    seconds = [float(shifts[tap]) / design.sample_rate_hz if tap in active else None for tap in range(k)]
    return seconds, offset


def _time_weights(pinv_t, bins, x0, L):
    """W (L, columns): the estimate g = pinv(A) Z, Z = FFT(y)[bins] / X, as g = y W (sum over the period's samples)."""
    spectrum = np.zeros((pinv_t.shape[1], L), np.complex128)
    spectrum[:, bins] = pinv_t.T / x0
    return sp_fft.fft(spectrum, axis=-1).T


def _time_response(a, weights, design, bins, x0):
    """How the estimate weighs the gain at each sample of the period, and what that gives for ramps and steps.

    A gain that changes within the period leaks into the other taps (as
    Doppler does between subcarriers). The estimate is linear in the gains
    h_n at the period's samples n: g_hat_i = sum_n sum_j h_n[j] r_j[n] q_i[n],
    r_j the period of column j's static response (the probe through it), q_i
    the inverse-DFT weights of output i (one FFT each). Returned: ``ramp``
    (columns x columns), the estimate of a unit ramp n - (L - 1) / 2 on each
    column (row j: column j's ramp), and ``steps`` (G, columns, columns): row j
    of ``steps[s]`` the estimate of a unit step on column j from sample
    ``step_samples[s]`` on (sum_{n >= tau} of the weights), on a grid of G
    positions bounded in memory.
    """
    L = design.period_samples
    full = np.zeros((a.shape[1], L), np.complex128)
    full[:, bins] = (a * x0[:, None]).T  # the received period of each column's static response
    r = sp_fft.ifft(full, axis=-1)
    q = weights.T  # g_hat_i = sum_k P[i, k] FFT(y)[k] / x0[k] = sum_n y[n] q_i[n]
    centred = np.arange(L) - (L - 1) / 2.0
    ramp = (r * centred) @ q.T
    cols = a.shape[1]
    grid = int(min(L, max(2, STEP_TABLE_ELEMENTS // max(1, cols * cols))))
    taus = np.unique(np.round(np.linspace(0, L, grid + 1)[:-1]).astype(int))
    steps = np.empty((taus.size, cols, cols), np.complex128)
    for j in range(cols):  # sum over n >= tau of r_j[n] q_i[n], one column at a time (bounded memory)
        tail = np.cumsum((r[j] * q)[:, ::-1], axis=-1)[:, ::-1]
        steps[:, j, :] = tail[:, taus].T
    return ramp, steps, taus


def _misfit(z, a) -> float:
    """sum ||z_p - A pinv(A) z_p||^2 = ||z||^2 - sum_p b_p^H (A^H A)^-1 b_p, b_p = A^H z_p (no K x K product)."""
    z = z.reshape(-1, z.shape[-1])  # periods (and antennas) as rows: one matrix product, not one per period
    return _misfit_from(float(np.vdot(z, z).real), a, z @ a.conj())


def _misfit_from(energy, a, b) -> float:
    """_misfit from ||z||^2 and b (rows, columns) = z conj(A)."""
    solved = np.linalg.solve(a.conj().T @ a, b.T)
    return float(energy - np.real(np.sum(b.conj().T * solved)))


def _tap_spectra(rows, signed, L):
    """F_i[k]: the DFT of each tap's FIR row on the occupied (signed) bins, (n_taps, K)."""
    return rows @ np.exp(-2j * np.pi * np.outer(np.arange(rows.shape[1]), signed) / L)


def _design_matrix(spectra, shifts, offset, signed, L):
    """A[k, m * n_taps + i] = F_i[k] exp(-j 2 pi k (s_m + offset) / L) on the occupied (signed) bins."""
    columns = [spectra * np.exp(-2j * np.pi * signed * (shift + offset) / L) for shift in shifts]
    return np.concatenate(columns, axis=0).T


def _delay_domain(z, bins, L):
    full = np.zeros(z.shape[:-1] + (L,), np.complex128)
    full[..., bins] = z
    return sp_fft.ifft(full, axis=-1)
