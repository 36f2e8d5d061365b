"""Reading the files a bundle or a lab holds: capped strict JSON, npy, raw I/Q, csv, SigMF, hashes.

One reader per file format, with one set of rules, used by the bundle reader
(:mod:`emucompile.bundle.reader`), the formats registry
(:mod:`emucompile.bundle.formats`) and apply's recordings
(:mod:`emucompile.apply.recordings`). Errors of the recording readers are
one-line :class:`~emucompile.errors.InputError` s naming the file.

References
----------
.. [SigMF] The GNU Radio Foundation, "Signal Metadata Format (SigMF)
   Specification", v1.2: global ``core:datatype``, ``core:sample_rate``,
   ``core:num_channels`` (channels interleaved sample by sample),
   ``core:dataset``, ``core:trailing_bytes``; captures' ``core:header_bytes``.
.. [NEP1] NumPy Enhancement Proposal 1, "A simple file format for NumPy
   arrays" (the ``.npy`` format).
"""

from __future__ import annotations

import contextlib
import hashlib
import json
import math
import os
import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from emucompile.errors import InputError

HASH_BLOCK_BYTES = 1 << 20


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
        return json.loads(
            text, object_pairs_hook=_unique_pairs, parse_constant=_refuse_constant, parse_int=_bounded_int
        )
    except json.JSONDecodeError as error:
        raise ValueError(f"not valid JSON: {error.msg} (line {error.lineno}, column {error.colno})") from None
    except RecursionError:  # unreachable after the depth check; kept as a last guard
        raise ValueError(f"nested deeper than {max_depth} levels") from None


def _json_depth(text: str) -> int:
    """Deepest bracket nesting outside strings (linear, no recursion)."""
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


def read_csv(path):
    """Read a tap-gain csv: returns ``(time_s, gains, column_names)``.

    ``gains`` is complex128 of shape (n_rows, n_links·n_taps), the columns in
    the file's (rx, tx, tap) order; ``column_names`` are the complex columns'
    names without the ``_re``/``_im`` suffix.
    """
    with open(path, encoding="ascii", newline="") if isinstance(path, (str, os.PathLike)) else path as handle:
        header = handle.readline().rstrip("\n").split(",")
        values = np.loadtxt(handle, delimiter=",", dtype=np.float64, ndmin=2)
    if header[0] != "time_s" or len(header) % 2 != 1:
        raise ValueError(f"{path}: not a tap-gain csv (header {header[:3]}...)")
    names = [h[: -len("_re")] for h in header[1::2]]
    if values.shape[1] != len(header):
        raise ValueError(f"{path}: {values.shape[1]} columns of numbers, {len(header)} in the header")
    return values[:, 0], values[:, 1::2] + 1j * values[:, 2::2], names


SIGMF_DATATYPES = {"cf32_le": np.dtype("<c8"), "cf64_le": np.dtype("<c16"), "ci16_le": np.dtype("<i2")}
"""The SigMF datatypes read (complex float32/float64, or int16 I/Q codes), little-endian [SigMF]_."""
SIGMF_SUFFIXES = (".sigmf-meta", ".sigmf-data", ".sigmf")


@dataclass
class SigmfRecording:
    """One SigMF recording opened for reading: its metadata and its samples, memory-mapped.

    ``samples`` is (n_samples, n_channels) complex, or (n_samples, n_channels, 2)
    int16 codes for ``ci16_le``; ``sample_rate_hz`` is None when the metadata give none.
    """

    meta_path: Path
    data_path: Path
    metadata: dict = field(repr=False)
    datatype: str
    samples: np.ndarray = field(repr=False)
    sample_rate_hz: float | None


def sigmf_paths(path) -> tuple[Path, Path]:
    """``(X.sigmf-meta, X.sigmf-data)`` of a recording named by either file or by its base name."""
    text = str(path)
    for suffix in SIGMF_SUFFIXES:
        if text.lower().endswith(suffix):
            text = text[: -len(suffix)]
            break
    return Path(text + ".sigmf-meta"), Path(text + ".sigmf-data")


def open_sigmf(path, *, datatypes=tuple(SIGMF_DATATYPES), rate_limit_hz: float = 1e15) -> SigmfRecording:
    """Open a SigMF recording (its ``.sigmf-meta``, ``.sigmf-data`` or base name) [SigMF]_.

    The metadata are read strictly (:func:`strict_json`, at most
    :data:`SIGMF_META_MAX_BYTES`); ``core:datatype`` must be one of
    ``datatypes``; ``core:num_channels`` (default 1) channels interleaved
    sample by sample; header bytes before the first capture and trailing
    bytes are skipped. Raises :class:`~emucompile.errors.InputError` with
    one line naming the file and the JSON pointer.
    """
    meta_path, data_path = sigmf_paths(path)
    try:
        with open(meta_path, "rb") as handle:
            metadata = strict_json(read_capped(handle, SIGMF_META_MAX_BYTES), max_bytes=SIGMF_META_MAX_BYTES)
    except FileNotFoundError:
        raise InputError(f"{meta_path}: no such file (a SigMF recording needs its .sigmf-meta)") from None
    except (OSError, ValueError) as error:
        raise InputError(
            f"{meta_path}: not readable SigMF metadata ({getattr(error, 'strerror', None) or error})"
        ) from None
    top = metadata.get("global") if isinstance(metadata, dict) else None
    if not isinstance(top, dict):
        raise InputError(f"{meta_path}: /global: missing; not SigMF metadata")
    datatype = top.get("core:datatype")
    if datatype not in datatypes:
        raise InputError(
            f"{meta_path}: /global/core:datatype: {datatype!r} is not read here",
            hint=f"use one of {', '.join(datatypes)}",
        )
    channels = top.get("core:num_channels", 1)
    if isinstance(channels, bool) or not isinstance(channels, int) or channels < 1:
        raise InputError(f"{meta_path}: /global/core:num_channels: {channels!r} is not a count >= 1")
    rate = top.get("core:sample_rate")
    if isinstance(rate, int) and not isinstance(rate, bool) and rate > rate_limit_hz:
        rate = math.inf  # an integer beyond any rate (400 digits would not even make a float)
    if rate is not None and not (isinstance(rate, (int, float)) and math.isfinite(rate) and rate > 0):
        raise InputError(f"{meta_path}: /global/core:sample_rate: {rate!r} is not a rate > 0")
    if top.get("core:dataset"):
        data_path = meta_path.parent / top["core:dataset"]
    captures = metadata.get("captures") or []
    header = captures[0].get("core:header_bytes", 0) if captures and isinstance(captures[0], dict) else 0
    if any(isinstance(c, dict) and c.get("core:header_bytes") for c in captures[1:]):
        raise InputError(
            f"{meta_path}: /captures: header bytes inside the data are supported before the first capture only"
        )
    trailing = top.get("core:trailing_bytes", 0)
    if not data_path.is_file():
        raise InputError(f"{data_path}: no such file (the samples of {meta_path.name})")
    item = SIGMF_DATATYPES[datatype]
    parts = 2 if datatype == "ci16_le" else 1
    samples = open_raw(
        data_path,
        item,
        (channels, 2) if parts == 2 else (channels,),
        offset=header,
        trailing=trailing,
        what=f"{datatype} for {channels} channel(s)",
    )
    return SigmfRecording(meta_path, data_path, metadata, datatype, samples, float(rate) if rate is not None else None)


def open_raw(path, dtype, frame_shape, *, offset: int = 0, trailing: int = 0, what: str = ""):
    """Memory-map a headerless file of whole frames ``frame_shape`` of ``dtype`` (e.g. cf32: (n_channels,)).

    Refuses (one-line InputError) a missing, empty or truncated file.
    """
    path = Path(path)
    if not path.is_file():
        raise InputError(f"{path}: no such file")
    dtype = np.dtype(dtype)
    frame = dtype.itemsize * math.prod(frame_shape)
    size = path.stat().st_size - offset - trailing
    if size <= 0:
        raise InputError(f"{path}: empty (no samples)")
    if size % frame:
        raise InputError(
            f"{path}: {size} bytes of samples is not a whole number of samples ({frame} bytes each"
            + (f": {what}" if what else "")
            + "); the file is truncated"
        )
    return np.memmap(path, dtype=dtype, mode="r", offset=offset, shape=(size // frame, *frame_shape))


def open_npy(path):
    """Memory-map an npy file read-only (no pickles); one-line InputError when it is not one."""
    path = Path(path)
    if not path.is_file():
        raise InputError(f"{path}: no such file")
    try:
        return read_npy(path)
    except (OSError, ValueError) as error:
        raise InputError(f"{path}: not a readable npy file ({error})") from None


def read_sigmf(meta_path):
    """One recording of a bundle's ``sigmf/`` folder: returns ``(metadata, samples)`` (cf32_le, one channel).

    :func:`open_sigmf` with the datatype bundles write; ``samples`` is 1-D.
    """
    recording = open_sigmf(meta_path, datatypes=("cf32_le",))
    return recording.metadata, recording.samples[:, 0]


def sha256_file(path, *, block_bytes: int = HASH_BLOCK_BYTES, progress=None) -> str:
    """SHA-256 of a file's bytes, read in blocks (bounded memory).

    ``progress(done)``, when given, is called with the bytes hashed so far after each block.
    """
    digest = hashlib.sha256()
    with (
        open(path, "rb", buffering=0) if isinstance(path, (str, os.PathLike)) else contextlib.nullcontext(path)
    ) as handle:
        block = bytearray(block_bytes)
        view = memoryview(block)
        done = 0
        while True:
            n = handle.readinto(block)
            if not n:
                break
            digest.update(view[:n])
            done += n
            if progress is not None:
                progress(done)
    return digest.hexdigest()


__all__ = [
    "HASH_BLOCK_BYTES",
    "SIGMF_META_MAX_BYTES",
    "SIGMF_DATATYPES",
    "read_capped",
    "strict_json",
    "read_npy",
    "read_cf32",
    "read_csv",
    "SigmfRecording",
    "sigmf_paths",
    "open_sigmf",
    "open_raw",
    "open_npy",
    "read_sigmf",
    "sha256_file",
]
