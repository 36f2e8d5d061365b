"""Data formats of a bundle: streaming writers that hash as they write, and readers.

Every writer here takes the tap gains chunk by chunk, as complex64 arrays of
shape ``(m, n_rx, n_tx, n_taps)`` in sample order, writes its file(s) and
hashes the bytes in the same pass; ``close`` returns the manifest entries
``{name, role, dtype, shape, byte_order, data_offset, size_bytes, sha256, ...}``.
:mod:`emucompile.bundle.store` drives them and owns the directory; nothing here
knows about temporary names, renaming or the manifest as a whole.

Formats (the layout of each is also written into its manifest entry):

``npy``
    ``tap_gains.npy``: NumPy format 1.0 header (written here for the known
    final shape), then raw little-endian complex64 in C order over
    (sample, rx, tx, tap). ``data_offset`` is the header length.
``cf32``
    ``tap_gains.cf32``: the same bytes as the npy data, without a header:
    interleaved little-endian float32 I, Q; sample-major, then rx, tx, tap.
``ci16``
    ``tap_gains.ci16``: interleaved little-endian int16 I, Q in the same order;
    gain = (I + jQ) / ``scale_factor`` (see :func:`ci16_scaling`).
``csv``
    ``tap_gains.csv``: a header row, then one row per sample: time in
    seconds, then re and im of each (rx, tx, tap) in the order above,
    ``%.9e``, ``.`` as decimal separator (Python's %-formatting ignores the
    locale), ``\\n`` line ends.
``sigmf``
    ``sigmf/tapK_rxR_txT.sigmf-data`` and ``.sigmf-meta``: one SigMF recording
    per tap and link, ``cf32_le`` at the update rate, our own fields in the
    declared ``emucompile`` extension namespace [SigMF]_.
``fir``
    ``fir.npy``: the materialised FIR, tap_gains @ fir_map, complex64 of shape
    (n_samples, n_rx, n_tx, n_fir).
FIR coefficient codes (written whenever a target states ``coefficient_bits``)
    ``fir_coefficients.ci16`` (bits <= 16) or ``.ci32``: the integers the
    emulator loads, headerless little-endian two's complement, I then Q, over
    (sample, rx, tx, path, iq); path p is FIR column ``columns[p]`` of the
    entry; coefficient = (I + jQ) * ``step`` (see :class:`FirCodesWriter`
    and ``docs/fir-coefficients.md``).

References
----------
.. [SigMF] The GNU Radio Foundation, "Signal Metadata Format (SigMF)
   Specification", v1.2 (``sigmf-spec.md`` and ``sigmf-schema.json``): global
   ``core:datatype``, ``core:version``, ``core:sample_rate``, ``core:sha512``,
   ``core:extensions`` (objects ``{name, version, optional}``); ``captures``
   and ``annotations`` arrays sorted by ``core:sample_start``.
.. [NEP1] NumPy Enhancement Proposal 1, "A simple file format for NumPy
   arrays" (the ``.npy`` format, version 1.0 header).
.. [Widrow2008] B. Widrow and I. Kollár, Quantization Noise, Cambridge
   University Press, 2008: a uniform quantiser of step Δ adds noise of
   variance Δ²/12 per real component when the signal spans many steps.
"""

from __future__ import annotations

import contextlib
import hashlib
import io
import json
import math
import os
from dataclasses import dataclass

import numpy as np

SIGMF_VERSION = "1.2.0"
SIGMF_EXTENSION_NAME = "emucompile"
SIGMF_EXTENSION_VERSION = "1.0.0"
CI16_FULL_SCALE = 32767  # symmetric range: -32768 is never used, so |code| <= 32767
CSV_FLOAT_FORMAT = "%.9e"
DEFAULT_CSV_MAX_ROWS = 1_000_000
DEFAULT_CLIP_PROBABILITY = 1e-6
GAIN_AXES = ("sample", "rx", "tx", "tap")
FIR_AXES = ("sample", "rx", "tx", "fir_coefficient")
HASH_BLOCK_BYTES = 1 << 20


# -- the int16 scale ---------------------------------------------------------------


@dataclass(frozen=True)
class Ci16Scaling:
    """How tap gains map onto int16 codes: ``code = round_half_even(gain · scale_factor)``.

    Attributes
    ----------
    scale_factor : float
        Codes per unit of linear gain amplitude; gain = code / scale_factor.
    clip_level : float
        The gain amplitude mapped to full scale (``CI16_FULL_SCALE / scale_factor``).
    headroom_db : float
        20·log10(clip_level / RMS amplitude of the strongest tap).
    clip_probability : float
        Design probability that one sample's envelope |g| of any tap exceeds
        ``clip_level``; a clipped I or Q component needs that, so it bounds
        the per-component clipping probability too.
    strongest_tap : int
        The tap whose envelope law set the clip level.
    """

    scale_factor: float
    clip_level: float
    headroom_db: float
    clip_probability: float
    strongest_tap: int


def ci16_scaling(tap_power_linear, tap_k_linear, *, clip_probability=DEFAULT_CLIP_PROBABILITY):
    """Choose the int16 scale before any data are seen, from the taps' envelope laws.

    For each tap of mean power Ω and Rician factor K the clip level is the
    envelope quantile with exceedance probability ``clip_probability``:
    Rician with ν² = Ω·K/(K+1), σ² = Ω/(2(K+1)), i.e.
    ``scipy.stats.rice.isf(p, b=sqrt(2K), scale=σ)`` (K = 0 is Rayleigh);
    a static tap (K = ∞) has the constant envelope √Ω. The largest level
    over the taps maps to full scale (32767), so no tap exceeds it with
    probability above ``clip_probability`` per sample.

    Parameters
    ----------
    tap_power_linear : sequence of float
        Mean power E|g|² of each tap (the same on every link).
    tap_k_linear : sequence of float
        K of each tap: 0 for Rayleigh, ``math.inf`` for static.
    clip_probability : float
        Per-sample exceedance probability of the envelope, in (0, 0.5).

    Returns
    -------
    Ci16Scaling

    References
    ----------
    Envelope law: S. O. Rice, Bell Syst. Tech. J. 23 (1944); the Rician
    parametrisation b = √(2K), σ² = Ω/(2(K+1)) is that of ``scipy.stats.rice``.
    """
    from scipy import stats

    powers = [float(p) for p in tap_power_linear]
    ks = [float(k) for k in tap_k_linear]
    if len(powers) != len(ks) or not powers:
        raise ValueError("tap_power_linear and tap_k_linear need one value per tap")
    if not 0.0 < clip_probability < 0.5:
        raise ValueError(f"clip_probability must be in (0, 0.5), got {clip_probability!r}")
    levels = []
    for power, k in zip(powers, ks):
        if not (power >= 0.0 and math.isfinite(power)) or not k >= 0.0:
            raise ValueError(f"tap power {power!r} and K {k!r} must be finite >= 0 (K may be inf)")
        if math.isinf(k):
            levels.append(math.sqrt(power))
        else:
            sigma = math.sqrt(power / (2.0 * (k + 1.0)))
            levels.append(float(stats.rice.isf(clip_probability, math.sqrt(2.0 * k), scale=sigma)) if power > 0 else 0.0)
    strongest = int(np.argmax(levels))
    clip_level = levels[strongest]
    if not clip_level > 0.0:
        raise ValueError("every tap has zero power: no int16 scale can be chosen")
    rms = math.sqrt(max(powers))
    return Ci16Scaling(
        scale_factor=CI16_FULL_SCALE / clip_level,
        clip_level=clip_level,
        headroom_db=20.0 * math.log10(clip_level / rms),
        clip_probability=float(clip_probability),
        strongest_tap=strongest,
    )


# -- readers -------------------------------------------------------------------------


MAX_JSON_DEPTH = 64  # as profiles (reader.MAX_DEPTH): nothing we write nests deeper
MAX_JSON_INT_DIGITS = 310  # as profiles: 10**309 already exceeds the largest float
SIGMF_META_MAX_BYTES = 16 * 1024**2  # one recording's metadata; ours take a few KiB


def read_capped(handle, max_bytes: int) -> bytes:
    """All of a small file's bytes, or (above ``max_bytes``) ``max_bytes + 1`` of them for the caller to refuse."""
    wanted = min(os.fstat(handle.fileno()).st_size, max_bytes) + 1
    chunks = []
    while wanted > 0:
        chunk = handle.read(min(wanted, 1 << 20))
        if not chunk:
            break
        chunks.append(chunk)
        wanted -= len(chunk)
    return b"".join(chunks)


def strict_json(data: bytes, *, max_bytes: int, max_depth: int = MAX_JSON_DEPTH):
    """Parse JSON read from outside (a manifest, SigMF metadata); ``ValueError`` with one line if hostile.

    Refuses, before or while parsing and without recursion: more than
    ``max_bytes``, text that is not UTF-8, nesting deeper than ``max_depth``,
    duplicate keys, NaN/Infinity and integers of more than 310 digits.
    """
    if len(data) > max_bytes:
        raise ValueError(f"larger than the limit of {max_bytes} bytes")
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as error:
        raise ValueError(f"not UTF-8 text (byte {error.start})") from None
    depth = _json_depth(text)
    if depth > max_depth:
        raise ValueError(f"nested deeper than {max_depth} levels")
    try:
        return json.loads(text, object_pairs_hook=_unique_pairs, parse_constant=_refuse_constant,
                          parse_int=_bounded_int)
    except json.JSONDecodeError as error:
        raise ValueError(f"not valid JSON: {error.msg} (line {error.lineno}, column {error.colno})") from None
    except RecursionError:  # unreachable after the depth check; kept as a last guard
        raise ValueError(f"nested deeper than {max_depth} levels") from None


def _json_depth(text: str) -> int:
    """Deepest bracket nesting outside strings (linear, no recursion)."""
    import re

    depth = deepest = 0
    # strings (with escapes) are skipped whole; only brackets outside them count
    for match in re.finditer(r'"(?:[^"\\]|\\.)*"|[\[{]|[\]}]', text):
        token = match.group()
        if token in "[{":
            depth += 1
            deepest = max(deepest, depth)
        elif token in "]}":
            depth -= 1
    return deepest


def _unique_pairs(pairs):
    result = {}
    for key, value in pairs:
        if key in result:
            raise ValueError(f"duplicate key {key!r}")
        result[key] = value
    return result


def _refuse_constant(name):
    raise ValueError(f"{name} is not JSON")


def _bounded_int(digits: str) -> int:
    if len(digits.lstrip("-0")) > MAX_JSON_INT_DIGITS:
        raise ValueError(f"an integer of {len(digits)} digits (more than {MAX_JSON_INT_DIGITS})")
    return int(digits)



def read_npy(path, *, mmap: bool = True):
    """Read an npy file, memory-mapped read-only by default."""
    return np.load(path, mmap_mode="r" if mmap else None, allow_pickle=False)


def read_cf32(path, shape, *, offset: int = 0):
    """Memory-map a headerless little-endian interleaved float32 I/Q file as complex64."""
    return np.memmap(path, dtype="<c8", mode="r", offset=offset, shape=tuple(shape))


def read_ci16(path, shape, scale_factor: float, *, offset: int = 0):
    """Read interleaved int16 I/Q and return complex64 gains (code / scale_factor).

    ``shape`` is the shape of the gains (without the trailing I/Q axis).
    """
    codes = np.memmap(path, dtype="<i2", mode="r", offset=offset, shape=(*shape, 2))
    return dequantise_ci16(codes, scale_factor)


def dequantise_ci16(codes, scale_factor: float):
    """int16 I/Q codes (..., 2) -> complex64 gains (code / scale_factor)."""
    gains = np.empty(codes.shape[:-1], dtype=np.complex64)
    gains.real = codes[..., 0] / scale_factor
    gains.imag = codes[..., 1] / scale_factor
    return gains


def read_csv(path):
    """Read a tap-gain csv: returns ``(time_s, gains, column_names)``.

    ``gains`` is complex128 of shape (n_rows, n_links·n_taps), the columns in
    the file's (rx, tx, tap) order; ``column_names`` are the complex columns'
    names without the ``_re``/``_im`` suffix.
    """
    with (open(path, encoding="ascii", newline="") if isinstance(path, (str, os.PathLike)) else path) as handle:
        header = handle.readline().rstrip("\n").split(",")
        values = np.loadtxt(handle, delimiter=",", dtype=np.float64, ndmin=2)
    if header[0] != "time_s" or len(header) % 2 != 1:
        raise ValueError(f"{path}: not a tap-gain csv (header {header[:3]}...)")
    names = [h[: -len("_re")] for h in header[1::2]]
    if values.shape[1] != len(header):
        raise ValueError(f"{path}: {values.shape[1]} columns of numbers, {len(header)} in the header")
    return values[:, 0], values[:, 1::2] + 1j * values[:, 2::2], names


def read_sigmf(meta_path):
    """Read one SigMF recording: returns ``(metadata, samples)``.

    Only ``cf32_le`` datasets (what bundles hold) are mapped; the data file is
    the one named like the metadata file with ``.sigmf-data`` [SigMF]_.
    """
    meta_path = os.fspath(meta_path)
    with open(meta_path, encoding="utf-8") as handle:
        metadata = json.load(handle)
    datatype = metadata["global"]["core:datatype"]
    if datatype != "cf32_le":
        raise ValueError(f"{meta_path}: datatype {datatype!r}; only cf32_le is read here")
    data_path = meta_path[: -len(".sigmf-meta")] + ".sigmf-data"
    samples = np.memmap(data_path, dtype="<c8", mode="r") if os.path.getsize(data_path) else np.zeros(0, "<c8")
    return metadata, samples


def sha256_file(path, *, block_bytes: int = HASH_BLOCK_BYTES) -> str:
    """SHA-256 of a file's bytes, read in blocks (bounded memory)."""
    digest = hashlib.sha256()
    with (open(path, "rb", buffering=0) if isinstance(path, (str, os.PathLike)) else contextlib.nullcontext(path)) as handle:
        block = bytearray(block_bytes)
        view = memoryview(block)
        while True:
            n = handle.readinto(block)
            if not n:
                break
            digest.update(view[:n])
    return digest.hexdigest()


# -- streaming writers -----------------------------------------------------------------


class HashedFile:
    """A new file written unbuffered, hashed (SHA-256, optionally SHA-512) as it is written.

    The file is created exclusively (never overwrites). ``close`` fsyncs before
    closing, so the bytes are on disk when it returns. An ``OSError`` keeps
    the file name in ``error.filename``.
    """

    # Every this many bytes, ask the kernel to start writing back what was written
    # and to drop the pages already on disk (posix_fadvise DONTNEED). Without it a
    # large write piles up dirty pages until the final fsync, and the writer is
    # throttled; measured by benchmarks/bench_bundle_write.py.
    WRITEBACK_BYTES = 32 << 20

    def __init__(self, path, *, sha512: bool = False):
        self.path = os.fspath(path)
        self.size = 0
        self._sha256 = hashlib.sha256()
        self._sha512 = hashlib.sha512() if sha512 else None
        self._fd = _open_new_file(self.path)
        self._writeback = [0, 0]  # start of the previous window, start of the current one

    def write(self, data) -> None:
        view = memoryview(data).cast("B")
        self._sha256.update(view)
        if self._sha512 is not None:
            self._sha512.update(view)
        try:
            while view:
                n = os.write(self._fd, view)
                view = view[n:]
                self.size += n
        except OSError as error:
            error.filename = error.filename or self.path
            raise
        if self.size - self._writeback[1] >= self.WRITEBACK_BYTES:
            self._start_writeback()

    def _start_writeback(self) -> None:
        previous, current = self._writeback
        if hasattr(os, "posix_fadvise"):
            # starts writeback of the current window; drops the previous one, clean by now
            os.posix_fadvise(self._fd, previous, self.size - previous, os.POSIX_FADV_DONTNEED)
        self._writeback = [current, self.size]

    def close(self) -> str:
        """fsync and close; return the SHA-256 hex digest."""
        try:
            os.fsync(self._fd)
        except OSError as error:
            error.filename = error.filename or self.path
            raise
        finally:
            self.discard()
        return self._sha256.hexdigest()

    def adopt(self, size: int) -> None:
        """Take the file as it stands on disk as written: hash it from its start, check its size.

        For bytes placed at their offsets by other processes (a distributed
        compile); ``close`` then fsyncs and returns this hash as usual.
        """
        self._sha256 = hashlib.sha256()
        self._sha512 = hashlib.sha512() if self._sha512 is not None else None
        self.size = 0
        with open(self.path, "rb") as stream:
            while block := stream.read(HASH_BLOCK_BYTES):
                self._sha256.update(block)
                if self._sha512 is not None:
                    self._sha512.update(block)
                self.size += len(block)
        if self.size != size:
            raise ValueError(f"{self.path}: holds {self.size} bytes after the placed writes, expected {size}")

    @property
    def sha512(self) -> str | None:
        return self._sha512.hexdigest() if self._sha512 is not None else None

    def discard(self) -> None:
        """Close without fsync (after a failure); safe to call twice."""
        if self._fd is not None:
            fd, self._fd = self._fd, None
            try:
                os.close(fd)
            except OSError:
                pass


def npy_header(dtype, shape) -> bytes:
    """The bytes of an npy format 1.0 header for a C-ordered array [NEP1]_."""
    buffer = io.BytesIO()
    header = {"descr": np.lib.format.dtype_to_descr(np.dtype(dtype)), "fortran_order": False, "shape": tuple(int(s) for s in shape)}
    np.lib.format.write_array_header_1_0(buffer, header)
    return buffer.getvalue()


def write_npy_file(directory, name, role, array, axes) -> dict:
    """Write a small whole array as ``directory/name`` (npy, little-endian) and return its entry."""
    array = np.ascontiguousarray(array, dtype=np.dtype(array.dtype).newbyteorder("<"))
    writer = ArrayWriter(name, role, array.dtype, array.shape, axes, header=True)
    writer.open(directory)
    writer.write_encoded(array)
    return writer.close()[0]


class StreamWriter:
    """Base of the single-file writers: a header (possibly empty), then streamed chunks.

    Subclasses set ``name`` and ``_header`` and implement ``write`` and ``close``.
    """

    name = ""
    _header = b""
    _file = None

    def open(self, directory) -> None:
        self._file = HashedFile(os.path.join(directory, self.name))
        self._file.write(self._header)

    def discard(self) -> None:
        if self._file is not None:
            self._file.discard()


class ArrayWriter(StreamWriter):
    """Streams a C-ordered little-endian array file, with or without an npy header.

    Parameters
    ----------
    name, role : str
        File name inside the bundle and its manifest role.
    dtype : numpy dtype
        Element type on disk (stored little-endian).
    shape : tuple of int
        Final shape of the array; chunks add to the first axis.
    axes : sequence of str
        Names of the axes, written to the manifest entry.
    header : bool
        True for ``.npy``, False for a headerless raw file.
    note : str, optional
        How the data were derived, for the manifest entry.
    """

    # Subclasses whose encoding makes large temporaries work through the chunk in
    # blocks of about this many output elements (bounded memory); None: whole chunks.
    _block_elements: int | None = None

    def __init__(self, name, role, dtype, shape, axes, *, header: bool, note: str | None = None):
        self.name = name
        self.role = role
        self.dtype = np.dtype(dtype).newbyteorder("<")
        self.shape = tuple(int(s) for s in shape)
        self.axes = list(axes)
        self.note = note
        self._header = npy_header(self.dtype, self.shape) if header else b""

    @property
    def size_bytes(self) -> int:
        return len(self._header) + math.prod(self.shape) * self.dtype.itemsize

    def write(self, chunk) -> None:
        """Encode one chunk of tap gains (complex64, sample axis first) and append it."""
        if self._block_elements is None:
            self.write_encoded(self.encode(chunk))
            return
        rows = max(1, self._block_elements // max(1, math.prod(self.shape[1:])))
        for first in range(0, chunk.shape[0], rows):
            self.write_encoded(self.encode(chunk[first:first + rows]))

    def encode(self, chunk):
        return chunk

    def write_encoded(self, array) -> None:
        array = np.ascontiguousarray(array, dtype=self.dtype)
        if array.shape[1:] != self.shape[1:]:
            raise ValueError(f"{self.name}: chunk of shape {array.shape}, file rows are {self.shape[1:]}")
        self._file.write(array)

    def close(self, **context) -> list[dict]:
        sha256 = self._file.close()
        expected = self.size_bytes
        if self._file.size != expected:
            raise ValueError(f"{self.name}: wrote {self._file.size} bytes, the shape needs {expected}")
        entry = _entry(self.name, self.role, _dtype_name(self.dtype), list(self.shape), "little", len(self._header), self._file.size, sha256)
        entry["axes"] = list(self.axes)
        if self.dtype.kind == "c":
            entry["element"] = "complex: real (I) then imaginary (Q) part"
        if self.note:
            entry["note"] = self.note
        return [entry]


class FirWriter(ArrayWriter):
    """``fir.npy``: FIR(t) = tap_gains(t) @ fir_map, streamed chunk by chunk.

    Each coefficient is accumulated in complex128 over the taps in index
    order, then rounded once to complex64. The arithmetic is elementwise (no
    BLAS), so the bytes do not depend on how the samples are chunked.
    Cost O(n_samples · n_links · n_taps · n_fir).
    """

    _block_elements = 1 << 20  # bounds the complex128 accumulator (16 MiB)

    def __init__(self, fir_map, n_samples, n_rx, n_tx, *, maps=None):
        self.fir_map = np.asarray(fir_map)
        self.maps = maps
        self._position = 0
        n_fir = self.fir_map.shape[1]
        note = "tap_gains @ fir_map, accumulated in complex128 in tap order, rounded to complex64"
        if maps is not None:
            note = ("sum_k tap_gains[n, ..., k] * moving_map(n)[k] (the map at each update's delay offset), "
                    "accumulated in complex128 in tap order, rounded to complex64")
        super().__init__(
            "fir.npy", "fir", np.complex64, (n_samples, n_rx, n_tx, n_fir), FIR_AXES, header=True, note=note,
        )

    def encode(self, chunk):
        accumulator = np.zeros((*chunk.shape[:3], self.fir_map.shape[1]), dtype=np.complex128)
        if self.maps is not None:
            # A time-varying map: this writer sees the chunks in sample order.
            first = self._position
            self._position += chunk.shape[0]
            maps = self.maps(first, self._position)
            if isinstance(maps, tuple):
                self._add_sparse(accumulator, chunk, *maps)
            else:  # dense (m, n_taps, n_fir)
                for k in range(chunk.shape[3]):
                    accumulator += chunk[..., k, None].astype(np.complex128) * maps[:, None, None, k, :]
            return accumulator.astype(np.complex64)
        for k in range(chunk.shape[3]):
            accumulator += chunk[..., k, None].astype(np.complex128) * self.fir_map[k]
        return accumulator.astype(np.complex64)


    @staticmethod
    def _add_sparse(accumulator, chunk, index, values):
        """The dense sum with only each tap's 2L + 1 coefficients (index, values: (m, n_taps, 2L + 1)).

        A zero coefficient adds a signed zero, which leaves every sum as it was, so
        each column gets the same terms in the same tap order: the same bits.
        """
        m, n_rx, n_tx, n_fir = accumulator.shape
        flat = accumulator.reshape(m, n_rx * n_tx, n_fir)
        rows = np.arange(m)
        for k in range(chunk.shape[3]):
            gains = chunk[..., k].reshape(m, n_rx * n_tx).astype(np.complex128)
            for o in range(index.shape[2]):  # distinct columns: each row gets one term per o
                flat[rows, :, index[:, k, o]] += gains * values[:, k, o, None]


class Ci16Writer(ArrayWriter):
    """``tap_gains.ci16``: quantised gains, with clip counts and measured SQNR per tap.

    code = clip(round_half_even(gain · scale_factor), −32767, 32767) for I and Q.
    The measured SQNR of tap k is Σ|g|² / Σ|g − code/scale|² over all its
    samples and links, clipping included.
    """

    def __init__(self, scaling: Ci16Scaling, n_samples, n_rx, n_tx, n_taps, tap_power_linear):
        super().__init__("tap_gains.ci16", "tap_gains_ci16", np.int16, (n_samples, n_rx, n_tx, n_taps, 2), (*GAIN_AXES, "iq"), header=False)
        self.scaling = scaling
        self.tap_power_linear = [float(p) for p in tap_power_linear]
        self._signal = np.zeros(n_taps)
        self._error = np.zeros(n_taps)
        self._clipped = np.zeros(n_taps, dtype=np.int64)

    _block_elements = 1 << 15  # codes per block: float64 buffers of 256 KiB, kept in cache and reused

    def encode(self, chunk):
        # The same float64 arithmetic as ever (so the same codes: float32 -> float64 is exact,
        # one product, round half to even), in place in reused buffers; bytes unchanged.
        components = chunk.view(np.float32).reshape(*chunk.shape, 2)
        scaled, codes, square = self._buffers(components.shape)
        np.multiply(components, np.float64(self.scaling.scale_factor), out=scaled)
        np.rint(scaled, out=codes)
        if codes.max(initial=0.0) > CI16_FULL_SCALE or codes.min(initial=0.0) < -CI16_FULL_SCALE:
            self._clipped += _per_tap_sum(np.abs(codes) > CI16_FULL_SCALE)
            np.clip(codes, -CI16_FULL_SCALE, CI16_FULL_SCALE, out=codes)
        self._signal += _per_tap_sum(np.square(components, out=square, dtype=np.float64))
        error = np.subtract(scaled, codes, out=scaled)
        error /= self.scaling.scale_factor
        self._error += _per_tap_sum(np.square(error, out=square))
        return codes.astype("<i2")

    def _buffers(self, shape):
        """Three float64 work arrays of ``shape`` (views of one buffer reused from block to block)."""
        size = math.prod(shape)
        if getattr(self, "_work", None) is None or self._work.shape[1] < size:
            self._work = np.empty((3, size))
        return tuple(self._work[i, :size].reshape(shape) for i in range(3))

    def close(self, **context) -> list[dict]:
        entries = super().close()
        scale = self.scaling.scale_factor
        entries[0]["element"] = "int16 I then Q; gain = (I + jQ) / scale_factor"
        entries[0]["quantisation"] = {
            "scale_factor": scale,
            "full_scale_code": CI16_FULL_SCALE,
            "clip_level": self.scaling.clip_level,
            "headroom_db": _rounded(self.scaling.headroom_db),
            "clip_probability": self.scaling.clip_probability,
            "scale_rule": (
                "clip_level = max over taps of the envelope quantile exceeded with clip_probability "
                "(Rician/Rayleigh law, scipy.stats.rice.isf; static taps: sqrt(power)); "
                "scale_factor = full_scale_code / clip_level"
            ),
            "rounding": "round half to even, then clip to [-32767, 32767]",
            "clipped_values": int(self._clipped.sum()),
            "clipped_values_per_tap": [int(c) for c in self._clipped],
            "sqnr_db_per_tap": [_db_ratio(s, e) for s, e in zip(self._signal, self._error)],
            "sqnr_db_model_per_tap": [
                _db_ratio(6.0 * p * scale * scale, 1.0) if p > 0 else None for p in self.tap_power_linear
            ],
            "sqnr_note": (
                "sqnr_db_per_tap is measured (null when undefined: no signal or no error); the model is "
                "power / (2 * step^2 / 12), uniform quantisation noise of step 1/scale_factor per component"
            ),
        }
        return entries


class CsvWriter(StreamWriter):
    """``tap_gains.csv``: time_s, then re/im of each (rx, tx, tap), one row per sample."""

    name = "tap_gains.csv"
    _FIELD_BYTES_MAX = 17  # "-1.234567890e-05" plus a separator; float32 exponents have 2 digits
    _ROWS_PER_WRITE = 4096

    def __init__(self, n_samples, n_rx, n_tx, n_taps, update_rate_hz):
        self.n_samples = int(n_samples)
        self.update_rate_hz = float(update_rate_hz)
        self.columns = ["time_s"]
        digits = len(str(n_taps - 1))
        for r in range(n_rx):
            for t in range(n_tx):
                for k in range(n_taps):
                    base = f"tap{k:0{digits}d}_rx{r}_tx{t}"
                    self.columns += [f"{base}_re", f"{base}_im"]
        self._header = (",".join(self.columns) + "\n").encode("ascii")
        self._row_format = ",".join([CSV_FLOAT_FORMAT] * len(self.columns)) + "\n"
        self._rows = 0

    @property
    def size_bytes(self) -> int:
        """An upper bound: every number at its longest."""
        return len(self._header) + self.n_samples * len(self.columns) * self._FIELD_BYTES_MAX

    def write(self, chunk) -> None:
        m = chunk.shape[0]
        for first in range(0, m, self._ROWS_PER_WRITE):
            block = chunk[first:first + self._ROWS_PER_WRITE]
            rows = np.empty((block.shape[0], len(self.columns)))
            rows[:, 0] = (self._rows + np.arange(block.shape[0])) / self.update_rate_hz
            rows[:, 1:] = np.ascontiguousarray(block).reshape(block.shape[0], -1).view(np.float32)
            text = "".join(self._row_format % tuple(row) for row in rows.tolist())
            self._file.write(text.encode("ascii"))
            self._rows += block.shape[0]

    def close(self, **context) -> list[dict]:
        sha256 = self._file.close()
        entry = _entry(self.name, "tap_gains_csv", "text", [self.n_samples, len(self.columns)], None, len(self._header), self._file.size, sha256)
        entry["axes"] = ["sample", "column"]
        entry["element"] = (
            f"header row, then time_s and re/im per (rx, tx, tap) in that order; {CSV_FLOAT_FORMAT}, "
            "'.' decimal separator, comma-separated, LF line ends; data_offset is the header row's length"
        )
        return [entry]


class SigmfWriter:
    """One SigMF recording per tap and link under ``sigmf/`` [SigMF]_.

    Data files are written as the chunks come; the metadata files, which
    carry the data's SHA-512 and the taps' descriptions, at ``close``. All
    n_rx·n_tx·n_taps data files are open at once.
    """

    directory = "sigmf"
    name = "sigmf/"  # as listed by BundleLayout.planned_files

    def __init__(self, n_samples, n_rx, n_tx, n_taps, update_rate_hz):
        self.n_samples = int(n_samples)
        self.update_rate_hz = float(update_rate_hz)
        digits = len(str(n_taps - 1))
        self.recordings = [
            (r, t, k, f"{self.directory}/tap{k:0{digits}d}_rx{r}_tx{t}")
            for r in range(n_rx) for t in range(n_tx) for k in range(n_taps)
        ]
        self._files = {}
        self._root = None

    @property
    def size_bytes(self) -> int:
        """Data exactly; metadata estimated at 4 KiB per recording."""
        return len(self.recordings) * (self.n_samples * 8 + 4096)

    def open(self, directory) -> None:
        self._root = directory
        os.mkdir(os.path.join(directory, self.directory))
        for r, t, k, base in self.recordings:
            self._files[base] = HashedFile(os.path.join(directory, base + ".sigmf-data"), sha512=True)

    def write(self, chunk) -> None:
        for r, t, k, base in self.recordings:
            self._files[base].write(np.ascontiguousarray(chunk[:, r, t, k]))

    def close(self, *, taps=None, recorder: str = "emucompile", description: str = "", **context) -> list[dict]:
        """Close the data files, write the metadata files; return all entries.

        ``taps`` is the manifest's tap list (delay, power, fading, ...), copied
        into each recording's ``emucompile:`` fields.
        """
        entries = []
        for r, t, k, base in self.recordings:
            data = self._files[base]
            sha256 = data.close()
            entry = _entry(base + ".sigmf-data", "sigmf_data", "complex64", [self.n_samples], "little", 0, data.size, sha256)
            entry.update(axes=["sample"], element="cf32_le: float32 I then Q", tap=k, rx=r, tx=t)
            entries.append(entry)
            meta = self._metadata(r, t, k, data.sha512, (taps or [None] * (k + 1))[k], recorder, description)
            text = (json.dumps(meta, indent=2, ensure_ascii=False, allow_nan=False) + "\n").encode("utf-8")
            meta_file = HashedFile(os.path.join(self._root, base + ".sigmf-meta"))
            meta_file.write(text)
            entries.append(_entry(base + ".sigmf-meta", "sigmf_meta", "json", None, None, 0, meta_file.size, meta_file.close()))
        return entries

    def _metadata(self, r, t, k, sha512, tap, recorder, description):
        ns = SIGMF_EXTENSION_NAME
        what = f"complex gain of tap {k} on the link rx {r} / tx {t}"
        fields = {f"{ns}:quantity": "tap gain (complex amplitude, linear)", f"{ns}:tap_index": k, f"{ns}:rx_index": r, f"{ns}:tx_index": t}
        if tap is not None:
            for key in ("delay_s", "power_db", "fading", "k_db", "max_doppler_hz", "los_doppler_hz", "spectrum"):
                if key in tap:
                    fields[f"{ns}:{key}"] = tap[key]
        return {
            "global": {
                "core:datatype": "cf32_le",
                "core:sample_rate": self.update_rate_hz,
                "core:version": SIGMF_VERSION,
                "core:sha512": sha512,
                "core:description": f"{description}: {what}" if description else what,
                "core:recorder": recorder,
                "core:extensions": [{"name": ns, "version": SIGMF_EXTENSION_VERSION, "optional": True}],
                **fields,
            },
            "captures": [{"core:sample_start": 0}],
            "annotations": [{"core:sample_start": 0, "core:sample_count": self.n_samples, "core:label": f"tap{k} rx{r} tx{t}", "core:comment": what}],
        }

    def discard(self) -> None:
        for handle in self._files.values():
            handle.discard()


FIR_CODES_ROLE = "fir_coefficients_int"
FIR_CODES_AXES = ("sample", "rx", "tx", "path", "iq")


class FirCodesWriter(ArrayWriter):
    """``fir_coefficients.ci16`` / ``.ci32``: the FIR coefficients as the emulator's integers.

    Coefficient c of path p at sample n is FIR column ``columns[p]`` of
    tap_gains(n) @ fir_map, accumulated in complex128 in tap order (as
    :class:`FirWriter`); each part becomes
    code = clip(round_half_even(part / step), -2^(b-1), 2^(b-1) - 1),
    two's complement on b = ``bits`` bits, stored in int16 (b <= 16) or int32,
    little-endian, I then Q. ``step`` = full_scale / 2^(b-1), full_scale the
    target fit's (10^(headroom/20) x the RMS of the strongest coefficient,
    :func:`emucompile.profile.target.coefficient_quantisation`). Only the columns
    some tap reaches are stored (the paths; the other columns are 0). Clipped
    parts are counted per path, and the SQNR measured per path (signal power
    over error power, clipping included). Elementwise arithmetic: the bytes
    do not depend on the chunking.
    """

    _block_elements = 1 << 20

    def __init__(self, fir_map, columns, bits, step, n_samples, n_rx, n_tx, *, headroom_db=None,
                 sample_rate_hz=None, bulk_delay_samples=0):
        self.fir_map = np.asarray(fir_map, dtype=float)
        self.columns = [int(c) for c in columns]
        self.bits = int(bits)
        if not 2 <= self.bits <= 32:
            raise ValueError(f"bits must be in 2..32, got {bits!r}")
        self.step = float(step)
        if not (self.step > 0 and math.isfinite(self.step)):
            raise ValueError(f"step must be finite and > 0, got {step!r}")
        self.headroom_db = headroom_db
        self.sample_rate_hz = sample_rate_hz
        self.bulk_delay_samples = int(bulk_delay_samples)
        self.low, self.high = -(2 ** (self.bits - 1)), 2 ** (self.bits - 1) - 1
        dtype, suffix = (np.int16, "ci16") if self.bits <= 16 else (np.int32, "ci32")
        super().__init__(f"fir_coefficients.{suffix}", FIR_CODES_ROLE, dtype,
                         (n_samples, n_rx, n_tx, len(self.columns), 2), FIR_CODES_AXES, header=False)
        n_paths = len(self.columns)
        self._signal = np.zeros(n_paths)
        self._error = np.zeros(n_paths)
        self._clipped = np.zeros(n_paths, dtype=np.int64)

    def encode(self, chunk):
        weights = self.fir_map[:, self.columns]  # (n_taps, n_paths)
        accumulator = np.zeros((*chunk.shape[:3], len(self.columns)), dtype=np.complex128)
        for k in range(chunk.shape[3]):
            accumulator += chunk[..., k, None].astype(np.complex128) * weights[k]
        parts = accumulator.view(np.float64).reshape(*accumulator.shape, 2)
        scaled = parts / self.step
        codes = np.rint(scaled)
        over = (codes < self.low) | (codes > self.high)
        np.clip(codes, self.low, self.high, out=codes)
        samples_links_iq = (0, 1, 2, 4)
        self._clipped += over.sum(axis=samples_links_iq)
        self._signal += np.square(parts).sum(axis=samples_links_iq)
        self._error += np.square((scaled - codes) * self.step).sum(axis=samples_links_iq)
        return codes.astype(self.dtype)

    def close(self, **context) -> list[dict]:
        entries = super().close()
        entry = entries[0]
        entry["element"] = (f"int{self.dtype.itemsize * 8} I then Q, two's complement on {self.bits} bits; "
                            "coefficient = (I + jQ) * step")
        entry["coefficient_codes"] = {
            "bits": self.bits,
            "step": self.step,
            "full_scale": self.step * 2.0 ** (self.bits - 1),
            "headroom_db": self.headroom_db,
            "code_range": [self.low, self.high],
            "rounding": f"round half to even, then clip to [{self.low}, {self.high}]",
            "columns": list(self.columns),
            "sample_rate_hz": self.sample_rate_hz,
            "bulk_delay_samples": self.bulk_delay_samples,
            "delays_s": [(c - self.bulk_delay_samples) / self.sample_rate_hz if self.sample_rate_hz else None
                         for c in self.columns],
            "clipped_values": int(self._clipped.sum()),
            "clipped_values_per_path": [int(c) for c in self._clipped],
            "sqnr_db_per_path": [_db_ratio(s, e) for s, e in zip(self._signal, self._error)],
            "sqnr_db": _db_ratio(float(self._signal.sum()), float(self._error.sum())),
            "note": ("path p is FIR column columns[p] of tap_gains @ fir_map (delay (column - bulk_delay_samples) "
                     "/ sample_rate_hz); columns no tap reaches are 0 and not stored; sqnr measured over every "
                     "sample and link, clipping included (null when undefined)"),
        }
        return entries


# -- helpers ---------------------------------------------------------------------------


def _open_new_file(path: str) -> int:
    """Create ``path`` exclusively for writing; a seam the tests use to simulate a full disk."""
    return os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL | getattr(os, "O_CLOEXEC", 0), 0o644)


def _entry(name, role, dtype, shape, byte_order, data_offset, size_bytes, sha256) -> dict:
    return {
        "name": name, "role": role, "dtype": dtype, "shape": shape, "byte_order": byte_order,
        "data_offset": int(data_offset), "size_bytes": int(size_bytes), "sha256": sha256,
    }


def _dtype_name(dtype) -> str:
    return np.dtype(dtype).newbyteorder("=").name


def _per_tap_sum(values):
    """Sums over (sample, rx, tx, iq) of an array (m, n_rx, n_tx, n_taps, 2), per tap; row sums run contiguous."""
    n_taps = values.shape[3]
    return values.reshape(-1, 2 * n_taps).sum(axis=0).reshape(n_taps, 2).sum(axis=1)


def _db_ratio(numerator: float, denominator: float) -> float | None:
    if not (numerator > 0 and denominator > 0):
        return None
    return _rounded(10.0 * math.log10(numerator / denominator))


def _rounded(value: float) -> float:
    # Sums over chunks round differently in the last bits with another chunking;
    # a millidecibel keeps the manifest's figures stable across chunkings.
    return round(float(value), 3)


__all__ = [
    "CI16_FULL_SCALE", "CSV_FLOAT_FORMAT", "DEFAULT_CLIP_PROBABILITY", "DEFAULT_CSV_MAX_ROWS",
    "SIGMF_VERSION", "Ci16Scaling", "ci16_scaling", "read_npy", "read_cf32", "read_ci16", "dequantise_ci16",
    "read_csv", "read_sigmf", "strict_json", "read_capped", "SIGMF_META_MAX_BYTES", "sha256_file", "HashedFile", "npy_header", "write_npy_file",
    "StreamWriter", "ArrayWriter", "FirWriter", "Ci16Writer", "CsvWriter", "SigmfWriter",
    "FirCodesWriter", "FIR_CODES_ROLE",
]
