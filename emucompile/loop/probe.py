"""The probe: a periodic, band-limited Zadoff-Chu waveform for the signal generator, and its description.

Design (every number is in the JSON description, ``PROBE.probe.json``):

* **Sequence.** A Zadoff-Chu sequence x_u(m) = exp(-j pi u m (m + 1) / N_ZC),
  m = 0 .. N_ZC - 1, N_ZC the largest prime not above the number of occupied
  DFT bins, cyclically extended to fill them (Chu 1972, IEEE Trans. Inf.
  Theory 18(4); the reference-signal construction of 3GPP TS 36.211
  §5.5.1.1). It is placed on the occupied bins |f| <= bandwidth / 2 of one
  period of L samples and brought to the time domain by an inverse DFT: every
  occupied bin has magnitude 1, so the periodic autocorrelation within the
  band is ideal and a least-squares estimate H[k] = Y[k] / X[k] divides by a
  constant-magnitude number (no noise enhancement). The DFT of a prime-length
  ZC is again a ZC, so the waveform is a band-limited (periodic-sinc
  interpolated) ZC of near-constant envelope.
* **Period.** L covers, per transmit antenna, the FIR span at the probe's rate
  (the profile's largest excess delay plus the fractional-delay filter's
  length) plus a guard that leaves delay bins free of signal for the noise
  estimate: L >= n_tx (span + guard), rounded up to an FFT-friendly length.
* **Repetition rate.** f_s / L must be at least 2 x the largest Doppler times
  :data:`DOPPLER_MARGIN` (sampling the time variation: Molisch, *Wireless
  Communications*, 2nd ed., §8.2); where the delays allow, L is lengthened
  until the rate is about :data:`TARGET_RATE_DOPPLER` x the Doppler (more
  energy per estimate, fewer estimates). A channel with tau_max 2 nu_max >= 1 (an
  overspread channel) cannot be sounded by any such probe, and one whose
  delay needs a period too long for its Doppler cannot be sounded at this
  rate and antenna count: both are refused (exit 2) with the reason.
* **Several transmitters.** Antenna m sends the same sequence cyclically
  shifted by m L / n_tx samples, so its impulse response lands in its own
  part of the delay axis (the same root keeps the responses exactly apart).
* **Preamble.** :data:`PREAMBLE_PERIODS` periods of a different root (N_ZC - u:
  cross-correlation 1/sqrt(N_ZC) against the probe's) sent from antenna 0 alone
  before the periodic part; the analysis finds the probe's phase by correlation
  (reporting the peak-to-sidelobe ratio) and its start where the preamble root's
  share of the power ends (a ratio independent of the channel's fading). The
  first probe period after it acts as the cyclic prefix of the rest.

Files: ``PROBE.sigmf-meta``/``PROBE.sigmf-data`` (cf32_le, one channel per
transmit antenna), ``PROBE.cf32`` or ``PROBE.ci16`` (raw little-endian, antennas
interleaved sample by sample), and always ``PROBE.probe.json`` (schema
``emucompile/schemas/probe-v1.schema.json``) with the data file's SHA-256; the waveform is
regenerated from the description for the analysis, and the description's own
SHA-256 names the probe in a measurement.
"""

from __future__ import annotations

import datetime as _dt
import hashlib
import json
import math
import os
from dataclasses import dataclass, field
from importlib import resources
from pathlib import Path

import numpy as np
from scipy import fft as sp_fft

from emucompile._version import __version__
from emucompile.bundle import atomic
from emucompile.bundle.store import Bundle, open_bundle
from emucompile.errors import InputError, UnsoundableChannel  # noqa: F401  (UnsoundableChannel: re-exported)
from emucompile.models import grid
from emucompile.profile.model import Profile, load_profile, profile_from_document
from emucompile.profile.stats import delay_statistics

FORMAT_VERSION = 1
KIND = "emucompile-probe"
DEFAULT_BANDWIDTH_FRACTION = 0.8
"""Occupied bandwidth / sample rate by default: the FIR map's stated passband (|f| <= 0.4 f_s)."""
DOPPLER_MARGIN = 2.0
"""The repetition rate must reach DOPPLER_MARGIN x 2 x the largest Doppler (2x oversampling of the Nyquist rate)."""
MIN_GUARD_SAMPLES = 16
GUARD_FRACTION = 0.25
MIN_PERIOD_SAMPLES = 64
MIN_ZC_LENGTH = 7
PREAMBLE_PERIODS = 8
"""Periods of the preamble root before the probe (antenna 0 only)."""
TARGET_RATE_DOPPLER = 64.0
"""The period is lengthened (never shortened) until the repetition rate is about this many times the largest
Doppler: far above the sampling condition, and the estimate's leak within a period stays small."""
DEFAULT_DOPPLER_PERIODS = 200.0
"""Default duration: this many periods of the largest Doppler (4x the statistical checks' 50)."""
DEFAULT_STATIC_DURATION_S = 1.0
CI16_PEAK = 0.9 * 32767
SOURCE = "Chu 1972, IEEE Trans. Inf. Theory 18(4); 3GPP TS 36.211 §5.5.1.1 (Zadoff-Chu sequences)"
FORMATS = ("sigmf", "cf32", "ci16")


@dataclass(frozen=True)
class ChannelSource:
    """What the probe and the analysis need of the channel: the profile, its FIR map at a rate, identities."""

    profile: object
    fir_matrix: np.ndarray = field(repr=False)
    sample_rate_hz: float
    bulk_delay_samples: int
    bundle: object | None = None
    identity: dict = field(default_factory=dict)

    @property
    def span_samples(self) -> int:
        return int(self.fir_matrix.shape[1])


def channel_source(sample_rate_hz: float, *, bundle=None, profile=None) -> ChannelSource:
    """The profile (given, or the bundle's) and its band-limited FIR map at ``sample_rate_hz``.

    The bundle's own FIR map is used when it is at this rate (target-fitted
    maps included); otherwise the profile's tap delays are mapped onto this
    rate's grid (Kaiser-windowed sinc, :func:`emucompile.models.grid.fir_map`).
    """
    if (bundle is None) == (profile is None):
        raise InputError("give either a bundle or a profile")
    rate = _positive(sample_rate_hz, "sample rate")
    identity = {}
    opened = None
    if bundle is not None:
        opened = bundle if isinstance(bundle, Bundle) else open_bundle(bundle)
        manifest = opened.manifest
        loaded = profile_from_document(manifest["profile"], source=f"{opened.path}/manifest.json#/profile")
        identity = {"bundle": os.fspath(opened.path),
                    "bundle_manifest_sha256": _sha256_file(opened.path / "manifest.json")}
        fir = manifest.get("fir") or {}
        if opened.fir_map is not None and math.isclose(float(fir.get("sample_rate_hz", 0.0)), rate, rel_tol=1e-9):
            return ChannelSource(loaded, np.asarray(opened.fir_map, dtype=float), rate,
                                 int(fir["bulk_delay_samples"]), opened, dict(identity, fir="bundle"))
    else:
        loaded = profile if isinstance(profile, Profile) else load_profile(profile)
    identity.update(profile_name=loaded.name, resolved_profile_sha256=loaded.resolved_sha256())
    mapped = grid.fir_map([t.delay_s for t in loaded.taps], [t.power_linear for t in loaded.taps], rate)
    return ChannelSource(loaded, np.asarray(mapped.matrix, dtype=float), rate, int(mapped.bulk_delay_samples),
                         opened, dict(identity, fir="sinc map at the probe's rate"))


@dataclass(frozen=True)
class ProbeDesign:
    """Everything that defines a probe waveform (the JSON description minus the file entry)."""

    sample_rate_hz: float
    bandwidth_hz: float
    period_samples: int
    n_periods: int
    n_tx: int
    zc_length: int
    root: int
    preamble_root: int
    occupied_bins: int
    span_samples: int
    guard_samples: int
    channel: dict = field(default_factory=dict)

    @property
    def repetition_rate_hz(self) -> float:
        return self.sample_rate_hz / self.period_samples

    @property
    def preamble_samples(self) -> int:
        return PREAMBLE_PERIODS * self.period_samples

    @property
    def n_samples(self) -> int:
        return self.preamble_samples + self.n_periods * self.period_samples

    @property
    def duration_s(self) -> float:
        return self.n_samples / self.sample_rate_hz

    @property
    def cyclic_shifts(self) -> list[int]:
        return [m * self.period_samples // self.n_tx for m in range(self.n_tx)]

    def bins(self) -> np.ndarray:
        """DFT indices (0 .. L-1) of the occupied bins, ordered from the lowest frequency up."""
        half = (self.occupied_bins - 1) // 2
        return np.arange(-half, half + 1) % self.period_samples

    def spectrum(self, root: int | None = None) -> np.ndarray:
        """Values on the occupied bins (unit magnitude): the cyclically extended ZC sequence."""
        u = self.root if root is None else root
        m = np.arange(self.zc_length, dtype=np.int64)
        zc = np.exp(-1j * np.pi * u * ((m * (m + 1)) % (2 * self.zc_length)) / self.zc_length)
        return zc[np.arange(self.occupied_bins) % self.zc_length]

    def period(self, tx: int = 0, root: int | None = None) -> np.ndarray:
        """One period (L samples, complex128, unit mean power) as antenna ``tx`` sends it."""
        full = np.zeros(self.period_samples, complex)
        k = self.bins()
        shift = self.cyclic_shifts[tx] if root is None else 0
        full[k] = self.spectrum(root) * np.exp(-2j * np.pi * k * shift / self.period_samples)
        return sp_fft.ifft(full) * (self.period_samples / math.sqrt(self.occupied_bins))

    def preamble_period(self) -> np.ndarray:
        return self.period(root=self.preamble_root)

    def waveform(self) -> np.ndarray:
        """The whole file's samples, (n_samples, n_tx) complex64: preamble (antenna 0) then the periods."""
        out = np.zeros((self.n_samples, self.n_tx), np.complex64)
        out[: self.preamble_samples, 0] = np.tile(self.preamble_period(), PREAMBLE_PERIODS)
        for tx in range(self.n_tx):
            out[self.preamble_samples:, tx] = np.tile(self.period(tx), self.n_periods)
        return out

    def to_dict(self) -> dict:
        return {
            "format_version": FORMAT_VERSION, "kind": KIND,
            "sample_rate_hz": float(self.sample_rate_hz), "bandwidth_hz": float(self.bandwidth_hz),
            "period_samples": int(self.period_samples), "repetition_rate_hz": float(self.repetition_rate_hz),
            "n_periods": int(self.n_periods), "preamble_samples": int(self.preamble_samples),
            "n_samples": int(self.n_samples), "duration_s": float(self.duration_s), "n_tx": int(self.n_tx),
            "sequence": {"family": "zadoff-chu", "length": int(self.zc_length), "root": int(self.root),
                         "preamble_root": int(self.preamble_root), "occupied_bins": int(self.occupied_bins),
                         "cyclic_shifts": self.cyclic_shifts, "source": SOURCE},
            "span_samples": int(self.span_samples), "guard_samples": int(self.guard_samples),
            "channel": self.channel,
        }

    @classmethod
    def from_dict(cls, document: dict) -> ProbeDesign:
        seq = document["sequence"]
        return cls(float(document["sample_rate_hz"]), float(document["bandwidth_hz"]),
                   int(document["period_samples"]), int(document["n_periods"]), int(document["n_tx"]),
                   int(seq["length"]), int(seq["root"]), int(seq["preamble_root"]), int(seq["occupied_bins"]),
                   int(document["span_samples"]), int(document["guard_samples"]), dict(document.get("channel") or {}))


def design_probe(source: ChannelSource, *, duration_s: float | None = None, bandwidth_hz: float | None = None,
                 n_tx: int | None = None) -> ProbeDesign:
    """Choose period, sequence and length for a channel; refuse channels that cannot be sounded.

    Raises
    ------
    UnsoundableChannel
        tau_max 2 nu_max >= 1, or the period the delays need is longer than
        the Doppler allows at this rate and antenna count.
    InputError
        A bandwidth outside (0, f_s], too few occupied bins, a bad duration.
    """
    profile = source.profile
    rate = source.sample_rate_hz
    n_tx = int(profile.n_tx if n_tx is None else n_tx)
    if n_tx < 1:
        raise InputError(f"--transmitters {n_tx}: at least 1")
    if n_tx != profile.n_tx:
        raise InputError(f"--transmitters {n_tx}, but the profile has {profile.n_tx} transmit antenna(s)")
    bandwidth = rate * DEFAULT_BANDWIDTH_FRACTION if bandwidth_hz is None else _positive(bandwidth_hz, "bandwidth")
    if bandwidth > rate:
        raise InputError(f"--bandwidth {bandwidth:g} Hz exceeds the sample rate {rate:g} Hz")
    delays = delay_statistics([t.delay_s for t in profile.taps], [max(t.power_linear, 1e-300) for t in profile.taps])
    tau = float(delays["max_excess_delay_s"])
    nu = float(profile.largest_doppler_hz)
    product = tau * 2.0 * nu
    channel = {"max_excess_delay_s": tau, "largest_doppler_hz": nu, "spread_product": product, **source.identity}
    if product >= 1.0:
        raise UnsoundableChannel(
            f"the channel cannot be sounded: tau_max x 2 nu_max = {tau:.3g} s x 2 x {nu:.3g} Hz = {product:.3g} >= 1 "
            "(an overspread channel: no probe period is both longer than the delay spread and shorter than the "
            "time variation; Molisch, Wireless Communications, 2nd ed., §8.2)")
    span = source.span_samples
    guard = max(MIN_GUARD_SAMPLES, int(math.ceil(GUARD_FRACTION * span)))
    need = n_tx * (span + guard)
    period = max(MIN_PERIOD_SAMPLES, need)
    if nu > 0:  # no faster than needed: a longer period has more energy per estimate and fewer estimates
        period = max(period, int(rate / (TARGET_RATE_DOPPLER * nu)))
    period = sp_fft.next_fast_len(period)
    while period % n_tx:
        period = sp_fft.next_fast_len(period + 1)
    if nu > 0 and rate / period < 2.0 * nu * DOPPLER_MARGIN:
        raise UnsoundableChannel(
            f"the channel cannot be sounded at {rate:g} Hz with {n_tx} transmitter(s): a period of {period} samples "
            f"({period / rate * 1e6:.4g} us, for {span} samples of FIR span + {guard} of guard per transmitter) "
            f"repeats at {rate / period:.4g} Hz, below {DOPPLER_MARGIN:g} x 2 x {nu:.4g} Hz "
            "(sampling the time variation; Molisch, Wireless Communications, 2nd ed., §8.2)",
            hint="a higher sample rate does not help: the span in samples grows with it; fewer transmitters do")
    half = int(math.floor(bandwidth * period / (2.0 * rate) + 1e-9))
    half = min(half, (period - 1) // 2)
    occupied = 2 * half + 1
    zc = _largest_prime_at_most(occupied)
    if zc < MIN_ZC_LENGTH:
        raise InputError(f"--bandwidth {bandwidth:g} Hz leaves {occupied} occupied bin(s) in a {period}-sample period; "
                         f"at least {MIN_ZC_LENGTH} are needed")
    if duration_s is None:
        duration_s = DEFAULT_DOPPLER_PERIODS / nu if nu > 0 else DEFAULT_STATIC_DURATION_S
        if source.bundle is not None:  # the whole bundle once
            manifest = source.bundle.manifest
            duration_s = manifest["n_samples"] / manifest["update_rate_hz"]
    duration = _positive(duration_s, "duration")
    n_periods = int(math.ceil(duration * rate / period))
    if n_periods < 3:
        raise InputError(f"--duration {duration:g} s holds fewer than 3 probe periods of {period / rate:g} s")
    return ProbeDesign(rate, float(occupied * rate / period), period, n_periods, n_tx, zc, 1, zc - 1, occupied,
                       span, guard, channel)


@dataclass(frozen=True)
class ProbeFiles:
    design: ProbeDesign
    description_path: Path
    data_paths: list
    description: dict


def write_probe(output, sample_rate_hz: float, *, bundle=None, profile=None, duration_s: float | None = None,
                output_format: str = "sigmf", bandwidth_hz: float | None = None, n_tx: int | None = None,
                force: bool = False) -> ProbeFiles:
    """Write the probe for the signal generator: ``OUTPUT.probe.json`` and the data file(s).

    Parameters
    ----------
    output : path
        Base name: ``OUTPUT.sigmf-meta`` + ``.sigmf-data``, ``OUTPUT.cf32`` or ``OUTPUT.ci16``,
        and ``OUTPUT.probe.json`` (a trailing extension of the format is dropped).
    sample_rate_hz : float
        The generator's (and the capture's) sample rate.
    bundle, profile
        The channel to be sounded (exactly one).
    output_format : {"sigmf", "cf32", "ci16"}

    Examples
    --------
    >>> files = write_probe("out/probe", 30.72e6, bundle="out/robot")  # doctest: +SKIP
    """
    if output_format not in FORMATS:
        raise InputError(f"--format {output_format!r}: choose from {', '.join(FORMATS)}")
    source = channel_source(sample_rate_hz, bundle=bundle, profile=profile)
    design = design_probe(source, duration_s=duration_s, bandwidth_hz=bandwidth_hz, n_tx=n_tx)
    base = _base_path(output)
    description_path = Path(str(base) + ".probe.json")
    if output_format == "sigmf":
        data_path = Path(str(base) + ".sigmf-data")
        meta_path = Path(str(base) + ".sigmf-meta")
        paths = [data_path, meta_path, description_path]
    else:
        data_path = Path(str(base) + "." + output_format)
        paths = [data_path, description_path]
    for path in paths:
        if path.exists() and not force:
            raise InputError(f"{path}: exists (use --force to replace it)")
    base.parent.mkdir(parents=True, exist_ok=True)
    samples = design.waveform()
    scale = None
    if output_format == "ci16":
        peak = float(max(np.max(np.abs(samples.real)), np.max(np.abs(samples.imag))))
        scale = CI16_PEAK / peak
        codes = np.empty(samples.shape + (2,), "<i2")
        codes[..., 0] = np.round(samples.real * scale)
        codes[..., 1] = np.round(samples.imag * scale)
        data = codes.tobytes()
        datatype = "ci16_le"
    else:
        data = samples.astype("<c8").tobytes()
        datatype = "cf32_le"
    description = design.to_dict()
    description.update(
        tool_version=__version__,
        created_utc=_dt.datetime.now(_dt.UTC).strftime("%Y-%m-%dT%H:%M:%SZ"),
        file={"format": output_format, "name": data_path.name, "datatype": datatype, "channels": design.n_tx,
              "sha256": hashlib.sha256(data).hexdigest(), "size_bytes": len(data),
              "scale": scale, "mean_power": 1.0 if scale is None else float(scale) ** 2},
    )
    _check_description(description, description_path)
    written = []
    try:
        _write_atomic(data_path, data, force)
        written.append(data_path)
        if output_format == "sigmf":
            meta = {"global": {"core:datatype": datatype, "core:sample_rate": design.sample_rate_hz,
                               "core:version": "1.2.0", "core:num_channels": design.n_tx,
                               "core:sha512": hashlib.sha512(data).hexdigest(),
                               "core:recorder": f"emucompile {__version__} (probe)",
                               "core:description": f"channel-sounding probe (Zadoff-Chu, period "
                                                   f"{design.period_samples} samples) for {description_path.name}",
                               "core:extensions": [{"name": "emucompile", "version": "1.0.0", "optional": True}],
                               "emucompile:probe": {"description": description_path.name}},
                    "captures": [{"core:sample_start": 0}], "annotations": []}
            _write_atomic(meta_path, (json.dumps(meta, indent=2) + "\n").encode(), force)
            written.append(meta_path)
        _write_atomic(description_path, (json.dumps(description, indent=2, allow_nan=False) + "\n").encode(), force)
        written.append(description_path)
    except BaseException:
        for path in written:
            path.unlink(missing_ok=True)
        raise
    return ProbeFiles(design, description_path, [p for p in written if p != description_path], description)


def load_probe(path) -> tuple[ProbeDesign, dict, str]:
    """Read a probe description (``.probe.json``, or the base name / data file beside it).

    Returns the design, the document and the description's SHA-256.
    """
    candidates = [Path(path)]
    base = _base_path(path)
    candidates.append(Path(str(base) + ".probe.json"))
    for candidate in candidates:
        if candidate.is_file() and candidate.name.endswith(".json"):
            break
    else:
        raise InputError(f"{path}: no probe description (expected {base}.probe.json, written by emucompile probe)")
    raw = candidate.read_bytes()
    try:
        document = json.loads(raw)
    except (UnicodeDecodeError, ValueError) as error:
        raise InputError(f"{candidate}: not a probe description ({error})") from None
    _check_description(document, candidate)
    return ProbeDesign.from_dict(document), document, hashlib.sha256(raw).hexdigest()


def probe_schema() -> dict:
    return json.loads(resources.files("emucompile").joinpath("schemas/probe-v1.schema.json").read_text("utf-8"))


def _check_description(document, path) -> None:
    import jsonschema

    errors = sorted(jsonschema.Draft202012Validator(probe_schema()).iter_errors(document), key=lambda e: e.path)
    if errors:
        first = errors[0]
        pointer = "/" + "/".join(str(p) for p in first.absolute_path)
        raise InputError(f"{path}: {pointer}: {first.message} (not a valid probe description)")
    seq = document["sequence"]
    if not (_is_prime(seq["length"]) and seq["length"] <= seq["occupied_bins"] < document["period_samples"]
            and document["period_samples"] % document["n_tx"] == 0):
        raise InputError(f"{path}: /sequence: inconsistent with the period (not written by emucompile probe?)")


def _base_path(path) -> Path:
    text = os.fspath(path)
    for suffix in (".probe.json", ".sigmf-meta", ".sigmf-data", ".sigmf", ".cf32", ".ci16"):
        if text.endswith(suffix):
            return Path(text[: -len(suffix)])
    return Path(text)


def _write_atomic(path: Path, data: bytes, force: bool) -> None:
    """The one atomic writer (:func:`emucompile.bundle.atomic.write_bytes_atomic`); no clobbering without force."""
    try:
        atomic.write_bytes_atomic(path, data, replace=force)
    except FileExistsError:
        raise InputError(f"{path}: exists (use --force to replace it)") from None


def _sha256_file(path: Path) -> str:
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def _positive(value, what) -> float:
    try:
        number = float(value)
    except (TypeError, ValueError):
        raise InputError(f"{what} {value!r} is not a number") from None
    if not (math.isfinite(number) and number > 0):
        raise InputError(f"{what} {value!r} must be a finite number > 0")
    return number


def _is_prime(n: int) -> bool:
    if n < 2:
        return False
    return all(n % d for d in range(2, math.isqrt(n) + 1))


def _largest_prime_at_most(n: int) -> int:
    while n >= 2 and not _is_prime(n):
        n -= 1
    return n
