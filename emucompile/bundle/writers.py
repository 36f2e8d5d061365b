"""Streaming writers of a bundle's data files: they hash the bytes as they write them.

Every writer takes the tap gains chunk by chunk, as complex64 arrays of
shape ``(m, n_rx, n_tx, n_taps)`` in sample order, writes its file(s) and
hashes the bytes in the same pass; ``close`` returns the manifest entries
``{name, role, dtype, shape, byte_order, data_offset, size_bytes, sha256, ...}``.
:mod:`emucompile.bundle.writer` drives them and owns the directory; nothing here
knows about temporary names, renaming or the manifest as a whole. Which
writer makes which format is said by the registry, :mod:`emucompile.bundle.formats`.

References
----------
.. [SigMF] The GNU Radio Foundation, "Signal Metadata Format (SigMF)
   Specification", v1.2 (``sigmf-spec.md`` and ``sigmf-schema.json``): global
   ``core:datatype``, ``core:version``, ``core:sample_rate``, ``core:sha512``,
   ``core:extensions`` (objects ``{name, version, optional}``); ``captures``
   and ``annotations`` arrays sorted by ``core:sample_start``.
.. [NEP1] NumPy Enhancement Proposal 1, "A simple file format for NumPy
   arrays" (the ``.npy`` format, version 1.0 header).
"""

from __future__ import annotations

import hashlib
import io
import json
import math
import os

import numpy as np

from emucompile.bundle import csv_text
from emucompile.bundle.readers import HASH_BLOCK_BYTES

SIGMF_VERSION = "1.2.0"
SIGMF_EXTENSION_NAME = "emucompile"
SIGMF_EXTENSION_VERSION = "1.0.0"
CSV_FLOAT_FORMAT = csv_text.FLOAT_FORMAT
GAIN_AXES = ("sample", "rx", "tx", "tap")
FIR_AXES = ("sample", "rx", "tx", "fir_coefficient")


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
    header = {
        "descr": np.lib.format.dtype_to_descr(np.dtype(dtype)),
        "fortran_order": False,
        "shape": tuple(int(s) for s in shape),
    }
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
            self.write_encoded(self.encode(chunk[first : first + rows]))

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
        entry = _entry(
            self.name,
            self.role,
            _dtype_name(self.dtype),
            list(self.shape),
            "little",
            len(self._header),
            self._file.size,
            sha256,
        )
        entry["axes"] = list(self.axes)
        if self.dtype.kind == "c":
            entry["element"] = "complex: real (I) then imaginary (Q) part"
        if self.note:
            entry["note"] = self.note
        return [entry]


class FirWriter(ArrayWriter):
    """``fir.npy``: FIR(t) = tap_gains(t) @ fir_map, streamed chunk by chunk.

    Each coefficient is accumulated in double precision over the taps in index
    order, then rounded once to complex64. The arithmetic is elementwise (no
    BLAS), so the bytes do not depend on how the samples are chunked.
    Cost O(n_samples · n_links · n_taps · n_fir).

    A real map (the usual case) is applied to the real and imaginary parts
    separately, in float64 blocks that stay in the processor's cache: the
    complex128 product g * f of a real f has the parts re(g) f and im(g) f
    exactly (its cross terms are signed zeros, which change no sum that starts
    from +0), so the bytes are those of the complex128 sum.
    """

    _block_elements = 1 << 20  # output elements per encode call (bounded memory)
    _STATIC_FLOATS = 1 << 12  # gain floats (samples x links x re/im) per block of a static map
    _MOVING_FLOATS = 1 << 20  # moving map: larger blocks (8 MiB), fewer Python steps per tap

    def __init__(self, fir_map, n_samples, n_rx, n_tx, *, maps=None):
        self.fir_map = np.asarray(fir_map)
        self.maps = maps
        self._position = 0
        n_fir = self.fir_map.shape[1]
        # (tap, first, last + 1) of each row's non-zero columns (all-zero rows add nothing)
        self._static_runs = [(k, int(nz[0]), int(nz[-1]) + 1)
                             for k, nz in enumerate(np.flatnonzero(row) for row in self.fir_map) if nz.size]
        note = "tap_gains @ fir_map, accumulated in complex128 in tap order, rounded to complex64"
        if maps is not None:
            note = (
                "sum_k tap_gains[n, ..., k] * moving_map(n)[k] (the map at each update's delay offset), "
                "accumulated in complex128 in tap order, rounded to complex64"
            )
        super().__init__(
            "fir.npy",
            "fir",
            np.complex64,
            (n_samples, n_rx, n_tx, n_fir),
            FIR_AXES,
            header=True,
            note=note,
        )

    def encode(self, chunk):
        m, n_rx, n_tx, n_taps = chunk.shape
        n_fir = self.fir_map.shape[1]
        maps = None
        if self.maps is not None:
            # A time-varying map: this writer sees the chunks in sample order.
            first = self._position
            self._position += m
            maps = self.maps(first, self._position)
        elif np.iscomplexobj(self.fir_map):
            accumulator = np.zeros((m, n_rx, n_tx, n_fir), dtype=np.complex128)
            for k in range(n_taps):
                accumulator += chunk[..., k, None].astype(np.complex128) * self.fir_map[k]
            return accumulator.astype(np.complex64)
        links = n_rx * n_tx
        # (m, links, taps, re/im) float32 parts of the gains; the output's parts as (m, links, re/im, n_fir)
        parts = np.ascontiguousarray(chunk, dtype=np.complex64).reshape(m, links, n_taps).view(np.float32)
        parts = parts.reshape(m, links, n_taps, 2)
        out = np.empty((m, links, n_fir), dtype=np.complex64)
        out_parts = out.view(np.float32).reshape(m, links, n_fir, 2).transpose(0, 1, 3, 2)
        if maps is None:
            self._encode_static(parts, out_parts)
            return out.reshape(m, n_rx, n_tx, n_fir)
        rows = max(1, self._MOVING_FLOATS // (2 * links * n_fir))
        buffer = np.empty((min(rows, m), links, 2, n_fir))
        windows = isinstance(maps, tuple) and self._windows(maps[0], n_fir)
        for start in range(0, m, rows):
            stop = min(start + rows, m)
            lo, hi = 0, n_fir  # the columns this block can touch; the others stay +0
            if windows:
                lo, hi = int(maps[0][start:stop, :, 0].min()), int(maps[0][start:stop, :, -1].max()) + 1
            accumulator = buffer[: stop - start, ..., lo:hi]
            gains = parts[start:stop].astype(np.float64)  # exact
            if isinstance(maps, tuple):
                index, values = (a[start:stop] for a in maps)
                accumulator[...] = 0.0
                if windows:
                    self._add_windows(accumulator, gains, index - lo, values)
                else:
                    self._add_sparse(accumulator, gains, index, values)
            else:  # dense (m, n_taps, n_fir)
                accumulator[...] = 0.0
                for k in range(n_taps):
                    accumulator += gains[:, :, k, :, None] * maps[start:stop, None, None, k, :]
            # + 0.0 turns a -0 into the +0 the complex128 sum from zeros holds; then one rounding
            np.add(accumulator, 0.0, out=out_parts[start:stop, ..., lo:hi], casting="same_kind")
            out_parts[start:stop, ..., :lo] = 0.0
            out_parts[start:stop, ..., hi:] = 0.0
        return out.reshape(m, n_rx, n_tx, n_fir)

    def _encode_static(self, parts, out_parts) -> None:
        """sum_k g_k f_k for a static real map, column-major, each tap over the columns its row reaches.

        The accumulator is (n_fir, samples x links x re/im): a tap adds its run
        of columns (2L for a sinc tap, one on a sample or for a nearest map) as
        one broadcast product along long rows. Outside its run a tap's product
        is a signed zero, which changes no sum that starts from +0, so the sums
        over the runs alone, in tap order, have the bits of the full sums (the
        +0.0 below makes a -0 column +0 either way).
        """
        m, links, n_taps, _ = parts.shape
        n_fir = self.fir_map.shape[1]
        rows = max(1, min(m, self._STATIC_FLOATS // (2 * links)))
        width = max((hi - lo for _, lo, hi in self._static_runs), default=0)
        accumulator = np.empty((n_fir, rows * links * 2))
        scratch = np.empty((width, accumulator.shape[1]))
        gains = np.empty((n_taps, accumulator.shape[1]))
        for start in range(0, m, rows):
            stop = min(start + rows, m)
            size = (stop - start) * links * 2
            acc, g = accumulator[:, :size], gains[:, :size]
            acc[...] = 0.0
            g.reshape(n_taps, stop - start, links, 2)[...] = parts[start:stop].transpose(2, 0, 1, 3)  # exact
            for k, lo, hi in self._static_runs:
                part = scratch[: hi - lo, :size]
                np.multiply(self.fir_map[k, lo:hi, None], g[k], out=part)
                acc[lo:hi] += part
            # + 0.0 turns a -0 into the +0 the complex128 sum from zeros holds; then one rounding
            np.add(acc.reshape(n_fir, stop - start, links, 2).transpose(1, 2, 3, 0), 0.0,
                   out=out_parts[start:stop], casting="same_kind")

    @staticmethod
    def _windows(index, n_fir) -> bool:
        """True if every tap's 2L + 1 columns are one run inside the map (index[n, k, o] = first + o)."""
        return bool(
            index.size
            and (index[..., 0] >= 0).all()
            and (index[..., -1] < n_fir).all()
            and (np.diff(index, axis=-1) == 1).all()
        )

    @classmethod
    def _add_windows(cls, accumulator, gains, index, values):
        """The sparse sum by runs of updates whose tap sits on the same columns (slices, not gathers).

        A moving tap's first column changes only every few hundred updates, so
        each tap adds a few rectangular blocks; a tap that moves faster takes
        the gather path.
        """
        m, width = index.shape[0], index.shape[2]
        for k in range(gains.shape[2]):
            first = index[:, k, 0]
            edges = np.flatnonzero(first[1:] != first[:-1]) + 1
            if edges.size > m // 8:
                cls._add_sparse(accumulator, gains, index, values, taps=[k])
                continue
            bounds = [0, *edges.tolist(), m]
            for a, b in zip(bounds[:-1], bounds[1:]):
                column = int(first[a])
                accumulator[a:b, :, :, column : column + width] += (
                    gains[a:b, :, k, :, None] * values[a:b, None, None, k, :]
                )

    @staticmethod
    def _add_sparse(accumulator, gains, index, values, taps=None):
        """The dense sum with only each tap's 2L + 1 coefficients (index, values: (m, n_taps, 2L + 1)).

        A zero coefficient adds a signed zero, which leaves every sum as it was, so
        each column gets the same terms in the same tap order: the same bits.
        """
        rows = np.arange(accumulator.shape[0])
        for k in range(gains.shape[2]) if taps is None else taps:
            for o in range(index.shape[2]):  # distinct columns: each row gets one term per o
                accumulator[rows, :, :, index[:, k, o]] += gains[:, :, k, :] * values[:, k, o, None, None]


class CsvWriter(StreamWriter):
    """``tap_gains.csv``: time_s, then re/im of each (rx, tx, tap), one row per sample."""

    name = "tap_gains.csv"
    _FIELD_BYTES_MAX = 17  # "-1.234567890e-05" plus a separator; float32 exponents have 2 digits

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
        self._rows = 0

    @property
    def size_bytes(self) -> int:
        """An upper bound: every number at its longest."""
        return len(self._header) + self.n_samples * len(self.columns) * self._FIELD_BYTES_MAX

    def write(self, chunk) -> None:
        m = chunk.shape[0]
        step = max(1, csv_text.BLOCK_VALUES // len(self.columns))  # rows formatted at a time: cache-sized
        for first in range(0, m, step):
            block = chunk[first : first + step]
            rows = np.empty((block.shape[0], len(self.columns)))
            rows[:, 0] = (self._rows + np.arange(block.shape[0])) / self.update_rate_hz
            rows[:, 1:] = np.ascontiguousarray(block).reshape(block.shape[0], -1).view(np.float32)
            for text in csv_text.iter_text(rows):
                self._file.write(text)
            self._rows += block.shape[0]

    def close(self, **context) -> list[dict]:
        sha256 = self._file.close()
        entry = _entry(
            self.name,
            "tap_gains_csv",
            "text",
            [self.n_samples, len(self.columns)],
            None,
            len(self._header),
            self._file.size,
            sha256,
        )
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
            for r in range(n_rx)
            for t in range(n_tx)
            for k in range(n_taps)
        ]
        self._files = {}
        self._root = None

    @property
    def n_entries(self) -> int:
        """Manifest entries it makes: a data and a metadata file per recording."""
        return 2 * len(self.recordings)

    @property
    def size_bytes(self) -> int:
        """Data exactly; metadata estimated at 4 KiB per recording."""
        return len(self.recordings) * (self.n_samples * 8 + 4096)

    def open(self, directory) -> None:
        self._root = directory
        os.mkdir(os.path.join(directory, self.directory))
        for _r, _t, _k, base in self.recordings:
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
            entry = _entry(
                base + ".sigmf-data", "sigmf_data", "complex64", [self.n_samples], "little", 0, data.size, sha256
            )
            entry.update(axes=["sample"], element="cf32_le: float32 I then Q", tap=k, rx=r, tx=t)
            entries.append(entry)
            meta = self._metadata(r, t, k, data.sha512, (taps or [None] * (k + 1))[k], recorder, description)
            text = (json.dumps(meta, indent=2, ensure_ascii=False, allow_nan=False) + "\n").encode("utf-8")
            meta_file = HashedFile(os.path.join(self._root, base + ".sigmf-meta"))
            meta_file.write(text)
            entries.append(
                _entry(base + ".sigmf-meta", "sigmf_meta", "json", None, None, 0, meta_file.size, meta_file.close())
            )
        return entries

    def _metadata(self, r, t, k, sha512, tap, recorder, description):
        ns = SIGMF_EXTENSION_NAME
        what = f"complex gain of tap {k} on the link rx {r} / tx {t}"
        fields = {
            f"{ns}:quantity": "tap gain (complex amplitude, linear)",
            f"{ns}:tap_index": k,
            f"{ns}:rx_index": r,
            f"{ns}:tx_index": t,
        }
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
            "annotations": [
                {
                    "core:sample_start": 0,
                    "core:sample_count": self.n_samples,
                    "core:label": f"tap{k} rx{r} tx{t}",
                    "core:comment": what,
                }
            ],
        }

    def discard(self) -> None:
        for handle in self._files.values():
            handle.discard()


# -- helpers ---------------------------------------------------------------------------


def _open_new_file(path: str) -> int:
    """Create ``path`` exclusively for writing; a seam the tests use to simulate a full disk."""
    return os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL | getattr(os, "O_CLOEXEC", 0), 0o644)


def _entry(name, role, dtype, shape, byte_order, data_offset, size_bytes, sha256) -> dict:
    return {
        "name": name,
        "role": role,
        "dtype": dtype,
        "shape": shape,
        "byte_order": byte_order,
        "data_offset": int(data_offset),
        "size_bytes": int(size_bytes),
        "sha256": sha256,
    }


def _dtype_name(dtype) -> str:
    return np.dtype(dtype).newbyteorder("=").name


def _db_ratio(numerator: float, denominator: float) -> float | None:
    if not (numerator > 0 and denominator > 0):
        return None
    return _rounded(10.0 * math.log10(numerator / denominator))


def _rounded(value: float) -> float:
    # Sums over chunks round differently in the last bits with another chunking;
    # a millidecibel keeps the manifest's figures stable across chunkings.
    return round(float(value), 3)


__all__ = [
    "SIGMF_VERSION",
    "SIGMF_EXTENSION_NAME",
    "SIGMF_EXTENSION_VERSION",
    "CSV_FLOAT_FORMAT",
    "GAIN_AXES",
    "FIR_AXES",
    "HashedFile",
    "npy_header",
    "write_npy_file",
    "StreamWriter",
    "ArrayWriter",
    "FirWriter",
    "CsvWriter",
    "SigmfWriter",
]
