"""IQ recordings in and out of ``apply``: npy, raw cf32 and SigMF read, the output written atomically.

Each file format is read by the one reader of :mod:`emucompile.bundle.readers`
(:func:`~emucompile.bundle.readers.open_npy`, :func:`~emucompile.bundle.readers.open_raw`,
:func:`~emucompile.bundle.readers.open_sigmf`); here they become a
:class:`Recording`. The output keeps the input's format and is written under
temporary names, then renamed into place (:mod:`emucompile.bundle.atomic`).

References
----------
.. [SigMF] The GNU Radio Foundation, "Signal Metadata Format (SigMF)
   Specification" v1.2: ``core:datatype`` (cf32_le, cf64_le, ci16_le),
   ``core:sample_rate``, ``core:num_channels`` (channels interleaved sample
   by sample), ``core:sha512``, captures' ``core:header_bytes``.
"""

from __future__ import annotations

import contextlib
import json
import os
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from emucompile._version import __version__
from emucompile.bundle import atomic, readers, writers
from emucompile.bundle.quantised import CI16_FULL_SCALE
from emucompile.errors import InputError

RAW_SUFFIXES = (".cf32", ".cfile", ".fc32")
SIGMF_DATATYPES = readers.SIGMF_DATATYPES
RATE_LIMIT_HZ = 1e15  # as a bundle's rates (emucompile.bundle.layout.RATE_RANGE_HZ)


@dataclass
class Recording:
    """An IQ recording opened for reading (nothing is loaded until read).

    Attributes
    ----------
    path : Path
        The file named by the user (the ``.sigmf-meta`` for SigMF).
    format : {"npy", "cf32", "sigmf"}
    datatype : str
        ``complex64``/``complex128`` (npy), ``cf32_le`` (raw), or the SigMF datatype.
    samples : numpy.ndarray
        Memory-mapped, (n_samples, n_channels) complex, or (n_samples, n_channels, 2)
        int16 for ``ci16_le``.
    sample_rate_hz : float or None
        From the SigMF metadata; None for npy and raw files.
    metadata : dict or None
        The SigMF metadata.
    one_dimensional : bool
        An npy input of shape (n,).
    data_path : Path
        The file holding the samples.
    """

    path: Path
    format: str
    datatype: str
    samples: np.ndarray = field(repr=False)
    sample_rate_hz: float | None = None
    metadata: dict | None = field(default=None, repr=False)
    one_dimensional: bool = False
    data_path: Path | None = None

    @property
    def n_samples(self) -> int:
        return int(self.samples.shape[0])

    @property
    def n_channels(self) -> int:
        return int(self.samples.shape[1])

    @property
    def dtype(self) -> np.dtype:
        """The working precision: complex128 for 64-bit floats, else complex64."""
        return np.dtype(np.complex128 if self.datatype in ("complex128", "cf64_le") else np.complex64)

    def read(self, start: int, stop: int) -> np.ndarray:
        """Samples start .. stop - 1 as (m, n_channels) in :attr:`dtype` (int16 codes as numbers)."""
        part = self.samples[start:stop]
        if self.datatype == "ci16_le":
            out = np.empty(part.shape[:2], dtype=np.complex64)
            out.real = part[..., 0]
            out.imag = part[..., 1]
            return out
        return np.asarray(part, dtype=self.dtype)


def read_recording(path, *, n_channels: int = 1) -> Recording:
    """Open an IQ recording: ``.npy``, raw cf32 (``.cf32``/``.cfile``/``.fc32``) or SigMF.

    Parameters
    ----------
    path : str or os.PathLike
        A ``.npy`` file (complex64 or complex128, shape (n,) or (n, n_channels));
        a raw file of little-endian interleaved float32 I/Q, channels
        interleaved sample by sample; or a SigMF recording (its
        ``.sigmf-meta``, ``.sigmf-data`` or the base name) of datatype
        ``cf32_le``, ``cf64_le`` or ``ci16_le`` with ``core:num_channels``
        channels interleaved sample by sample [SigMF]_.
    n_channels : int
        Channels of a raw file (a raw file cannot say).

    Raises
    ------
    InputError
        One line naming the file: unknown format, wrong dtype or shape, empty,
        truncated, unreadable metadata.
    """
    path = Path(path)
    kind = _input_format(path)
    if kind == "sigmf":
        return _read_sigmf(path)
    if kind == "npy":
        return _read_npy(path)
    samples = readers.open_raw(path, "<c8", (n_channels,), what=f"float32 I and Q for {n_channels} channel(s)")
    return Recording(path, "cf32", "cf32_le", samples, data_path=path)


def _input_format(path: Path) -> str:
    name = path.name.lower()
    if name.endswith(".npy"):
        return "npy"
    if name.endswith((".sigmf-meta", ".sigmf-data", ".sigmf")) or (
        not path.suffix and Path(f"{path}.sigmf-meta").exists()
    ):
        return "sigmf"
    if name.endswith(RAW_SUFFIXES):
        return "cf32"
    raise InputError(
        f"{path}: cannot tell the recording's format from its name",
        hint="use .npy (complex), .cf32 (raw little-endian float32 I/Q) or a SigMF .sigmf-meta",
    )


def _read_npy(path: Path) -> Recording:
    samples = readers.open_npy(path)
    if samples.dtype.kind != "c" or samples.dtype.itemsize not in (8, 16):
        raise InputError(f"{path}: dtype {samples.dtype}; an IQ recording must be complex64 or complex128")
    if samples.ndim not in (1, 2):
        raise InputError(f"{path}: shape {samples.shape}; expected (n_samples,) or (n_samples, n_tx)")
    if samples.size == 0:
        raise InputError(f"{path}: empty (shape {samples.shape}, no samples)")
    one_dimensional = samples.ndim == 1
    name = "complex64" if samples.dtype.itemsize == 8 else "complex128"
    return Recording(
        path,
        "npy",
        name,
        samples[:, None] if one_dimensional else samples,
        one_dimensional=one_dimensional,
        data_path=path,
    )


def _read_sigmf(path: Path) -> Recording:
    opened = readers.open_sigmf(path, rate_limit_hz=RATE_LIMIT_HZ)
    return Recording(
        opened.meta_path,
        "sigmf",
        opened.datatype,
        opened.samples,
        opened.sample_rate_hz,
        opened.metadata,
        data_path=opened.data_path,
    )


def _check_recording(recording: Recording, manifest: dict) -> None:
    n_tx = manifest["n_tx"]
    if recording.n_channels != n_tx:
        where = {"npy": "columns", "sigmf": "channels (core:num_channels)", "cf32": "channels"}[recording.format]
        hint = (
            "shape (n_samples, n_tx) is expected; transpose it"
            if (recording.format == "npy" and recording.samples.shape[0] == n_tx)
            else None
        )
        raise InputError(
            f"{recording.path}: {recording.n_channels} {where}, one per transmit antenna, "
            f"but the bundle has n_tx = {n_tx}",
            hint=hint,
        )


def _scan(recording: Recording, block_samples: int) -> list[float]:
    """Mean |x|^2 per transmit stream; refuses NaN and infinity (before anything is written)."""
    totals = np.zeros(recording.n_channels)
    for first in range(0, recording.n_samples, block_samples):
        block = recording.read(first, first + block_samples)
        if not np.isfinite(block).all():
            bad = first + int(np.flatnonzero(~np.isfinite(block).all(axis=1))[0])
            raise InputError(f"{recording.path}: sample {bad} is NaN or infinite")
        totals += np.sum(block.real.astype(float) ** 2 + block.imag.astype(float) ** 2, axis=0)
    return (totals / recording.n_samples).tolist()


def _output_paths(output: Path, recording: Recording, force: bool) -> list[Path]:
    """[data file, metadata file] in the input's format; refuses clashes before anything is written."""
    try:
        named = _input_format(output)
    except InputError:
        named = None  # no suffix of ours: the input's is added
    if named is not None and named != recording.format and output.suffix:
        raise InputError(
            f"{output}: the output keeps the input's format ({recording.format})",
            hint=f"name it *{_FORMAT_SUFFIX[recording.format]} or leave the suffix out",
        )
    if recording.format == "sigmf":
        meta, data = readers.sigmf_paths(output)
        paths = [data, meta]
    else:
        if named != recording.format:
            output = Path(f"{output}{_FORMAT_SUFFIX[recording.format]}")
        paths = [output, Path(f"{output}.json")]
    if not paths[0].parent.is_dir():
        raise InputError(f"{paths[0]}: the directory {paths[0].parent} does not exist")
    inputs = {recording.path.resolve(), (recording.data_path or recording.path).resolve()}
    for path in paths:
        if path.resolve() in inputs:
            raise InputError(f"{path}: is the input recording; choose another OUTPUT")
        if os.path.lexists(path):
            if not force:
                raise InputError(f"{path}: already exists", hint="use --force to replace it, or choose another OUTPUT")
            if path.is_dir() or path.is_symlink():
                raise InputError(f"{path}: exists and is a directory or a link; not replaced, even with --force")
    return paths


_FORMAT_SUFFIX = {"npy": ".npy", "cf32": ".cf32", "sigmf": ".sigmf-meta"}


def _refuse_inside(paths: list[Path], bundle_path) -> None:
    """Refuse an output or metadata file inside the bundle directory (it would change what it reads)."""
    bundle = Path(bundle_path).resolve()
    for path in paths:
        where = path.parent.resolve() / path.name
        if where == bundle or bundle in where.parents:
            raise InputError(
                f"{path}: is inside the bundle {bundle_path}; apply never writes into the bundle it reads",
                hint="choose an OUTPUT outside the bundle directory",
            )


class _OutputWriter:
    """Writes the output data and its metadata under temporary names, then renames them into place."""

    def __init__(self, paths: list[Path], recording: Recording, n_rx: int, *, force: bool):
        self.paths = paths
        self.recording = recording
        self.n_rx = n_rx
        self.force = force
        self._temps = [atomic.temporary_sibling(p) for p in paths]
        self._data = None
        self._shape = (recording.n_samples,) if recording.one_dimensional and n_rx == 1 else (recording.n_samples, n_rx)
        self._disk_dtype = {
            "complex64": "<c8",
            "complex128": "<c16",
            "cf32_le": "<c8",
            "cf64_le": "<c16",
            "ci16_le": "<i2",
        }[recording.datatype]

    def __enter__(self):
        try:  # an interrupt here (the file made, the header not yet written) reaches no __exit__
            self._data = writers.HashedFile(self._temps[0], sha512=self.recording.format == "sigmf")
            if self.recording.format == "npy":
                self._data.write(writers.npy_header(self._disk_dtype, self._shape))
        except BaseException:
            self.abort()
            raise
        return self

    def __exit__(self, exc_type, exc, tb):
        if exc is not None or self._data is not None:
            self.abort()
        return False

    def write(self, y: np.ndarray) -> int:
        """Append an output block (m, n_rx); return the values clipped (ci16 only)."""
        if self._disk_dtype != "<i2":
            self._data.write(np.ascontiguousarray(y, dtype=self._disk_dtype))
            return 0
        parts = np.rint(y.view(np.float32).reshape(y.shape[0], self.n_rx, 2))
        over = int(np.count_nonzero(np.abs(parts) > CI16_FULL_SCALE))
        np.clip(parts, -CI16_FULL_SCALE, CI16_FULL_SCALE, out=parts)
        self._data.write(parts.astype("<i2"))
        return over

    def finish(self, record: dict) -> None:
        """Close and hash the data, write the metadata, rename both into place (data first)."""
        data, self._data = self._data, None
        sha256 = data.close()
        record["output"]["sha256"] = sha256
        if self.recording.format == "sigmf":
            record["output"]["sha512"] = data.sha512
            document = _sigmf_output_metadata(self.recording, record, self.n_rx, data.sha512)
        else:
            document = record
        meta = writers.HashedFile(self._temps[1])
        try:
            meta.write((json.dumps(document, indent=2, ensure_ascii=False, allow_nan=False) + "\n").encode("utf-8"))
        finally:
            meta.close()
        placed = []
        try:
            for temp, path in zip(self._temps, self.paths):
                _place(temp, path, self.force)
                placed.append(path)
        except BaseException:
            for path in placed:
                with contextlib.suppress(OSError):
                    os.unlink(path)
            raise
        with contextlib.suppress(OSError):
            atomic.fsync_directory(self.paths[0].parent)

    def abort(self) -> None:
        if self._data is not None:
            self._data.discard()
            self._data = None
        for temp in self._temps:
            with contextlib.suppress(FileNotFoundError):
                os.unlink(temp)


def _place(temp: Path, path: Path, force: bool) -> None:
    """Rename ``temp`` to ``path``: replacing only with ``force``, else refusing if it appeared meanwhile."""
    try:
        atomic.place(temp, path, replace=force)
    except FileExistsError:
        raise InputError(f"{path}: appeared while the output was written; not replaced") from None


def _sigmf_output_metadata(recording: Recording, record: dict, n_rx: int, sha512: str) -> dict:
    """The output's .sigmf-meta: the input's global fields and captures, our record in the extension."""
    source = recording.metadata or {}
    kept = {
        k: v
        for k, v in (source.get("global") or {}).items()
        if k
        not in (
            "core:sha512",
            "core:dataset",
            "core:trailing_bytes",
            "core:metadata_only",
            "core:num_channels",
            "core:sample_rate",
            "core:datatype",
            "core:version",
            "core:recorder",
            "core:extensions",
        )
    }
    extensions = [
        e
        for e in (source.get("global") or {}).get("core:extensions") or []
        if isinstance(e, dict) and e.get("name") != writers.SIGMF_EXTENSION_NAME
    ]
    extensions.append(
        {"name": writers.SIGMF_EXTENSION_NAME, "version": writers.SIGMF_EXTENSION_VERSION, "optional": True}
    )
    captures = [
        {k: v for k, v in c.items() if k != "core:header_bytes"}
        for c in source.get("captures") or []
        if isinstance(c, dict)
    ] or [{"core:sample_start": 0}]
    noise = record["noise"]
    what = f"through the bundle {record['bundle']['path']}" + (f", SNR {noise['snr_db']:g} dB" if noise else "")
    description = kept.pop("core:description", None)
    return {
        "global": {
            "core:datatype": recording.datatype,
            "core:sample_rate": record["output"]["sample_rate_hz"],
            "core:version": writers.SIGMF_VERSION,
            "core:num_channels": n_rx,
            "core:sha512": sha512,
            "core:recorder": f"emucompile {__version__} (apply)",
            "core:description": f"{description} ({what})" if description else f"IQ recording {what}",
            **kept,
            "core:extensions": extensions,
            f"{writers.SIGMF_EXTENSION_NAME}:apply": record,
        },
        "captures": captures,
        "annotations": [],
    }


__all__ = ["RAW_SUFFIXES", "SIGMF_DATATYPES", "Recording", "read_recording"]
