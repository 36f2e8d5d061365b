"""The bundle directory (docs/bundle-format.md): planning, safe writing, the manifest, reading back.

A bundle is a directory holding ``manifest.json`` and the data files it lists
(``tap_gains.npy`` always; ``fir_map.npy`` with a sample rate; the extra
formats of :mod:`emucompile.bundle.formats` on request). Writing is all-or-nothing:

1. :class:`BundleLayout` states the shapes and formats; its
   ``estimated_size_bytes`` is known before any number is generated, and
   :class:`BundleWriter` refuses above ``max_size_bytes`` (default 8 GiB) or
   above the free space, and refuses an OUTDIR it may not replace.
2. The data go into a hidden sibling ``.NAME.emucompile-tmp-PID-TOKEN`` next to
   OUTDIR, written and hashed (SHA-256) in one pass, optionally on a writer
   thread behind a bounded queue so that hashing and writing overlap the
   generation of the next chunk. Memory stays bounded for any duration.
3. ``finish`` fsyncs every file, writes ``manifest.json`` last, fsyncs the
   directory and renames it into place (atomically: ``renameat2`` with
   ``RENAME_NOREPLACE``, or ``RENAME_EXCHANGE`` when replacing an old bundle
   with ``force``; the old one is deleted after the new one is in place).

On Ctrl-C (SIGINT), SIGTERM, a full disk (ENOSPC, EDQUOT) or a file-size limit
(``ulimit -f``: SIGXFSZ is ignored during the write so that the write fails
with EFBIG instead of killing the process) the partial directory is removed,
OUTDIR is left as it was, and the error surfaces as an
:class:`~emucompile.errors.EmucompileError` with a one-line message.

Typical use (the compile command does the same)::

    layout = BundleLayout(n_samples=n, n_taps=3, update_rate_hz=2000.0, formats=("cf32",))
    print(layout.estimated_size_bytes)
    with BundleWriter("out/robot", layout, progress=bar_update) as writer:
        for start, gains in chunks:            # gains: complex64 (m, n_rx, n_tx, n_taps)
            writer.write_chunk(start, gains)
        writer.finish(manifest_fields)         # profile, seed, taps, ... (see finish)
    bundle = open_bundle("out/robot")          # manifest + memory-mapped arrays
    problems = verify_integrity("out/robot")   # [] when every hash matches
"""

from __future__ import annotations

import contextlib
import ctypes
import errno
import importlib.metadata
import io
import json
import math
import os
import platform
import queue
import re
import secrets
import shutil
import signal
import stat
import threading
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path

import numpy as np

from emucompile.bundle import formats as fmt
from emucompile._version import __version__
from emucompile.errors import (  # noqa: F401  (the bundle's errors, re-exported)
    EXIT_INTERRUPTED,
    EXIT_TERMINATED,
    BundleError,
    EmucompileError,
    InputError,
    MemberError,
    Problem,
    Terminated,
    WriteInterrupted,
)
from emucompile.models.rates import DEFAULT_MAX_SIZE_BYTES, MAX_UPDATE_TO_DOPPLER, RATE_RANGE_HZ  # noqa: F401

FORMAT_NAME = "emucompile-bundle"
FORMAT_VERSION = 1
MANIFEST_NAME = "manifest.json"
EXTRA_FORMATS = ("cf32", "ci16", "csv", "sigmf", "fir")
VERIFICATION_DIRECTORY = "verification"  # verify's reports: not hashed, replaced with the bundle
TEMP_MARKER = ".emucompile-tmp-"  # .gitignore ignores *.emucompile-tmp*/
MANIFEST_ALLOWANCE_BYTES = 64 * 1024  # the manifest embeds the profile; generous upper bound
MANIFEST_ENTRY_BYTES = 2048  # per file entry (the ci16 entry, the largest, is about 1.5 KiB)
MANIFEST_MAX_BYTES = 64 * 1024**2  # readers refuse a larger manifest.json (the writer too)
SCHEMA_RESOURCE = "bundle-manifest-v1.schema.json"
WRITER_FIELDS = (
    "format", "format_version", "tool_version", "created_utc", "update_rate_hz",
    "n_samples", "n_taps", "n_rx", "n_tx", "platform", "formats", "files",
)
_MANIFEST_ORDER = (
    "format", "format_version", "tool_version", "generator_version", "created_utc",
    "profile_sha256", "resolved_profile_sha256", "seed", "method", "generator",
    "update_rate_hz", "n_samples", "duration_s", "n_taps", "n_rx", "n_tx", "periodic",
    "taps", "mimo", "conditions", "fir", "target", "platform", "formats", "files", "profile",
)


def parse_formats(formats) -> tuple[str, ...]:
    """``"cf32,ci16"`` or a sequence of names -> a tuple in canonical order; unknown names are refused."""
    if formats is None:
        return ()
    names = [f.strip().lower() for f in (formats.split(",") if isinstance(formats, str) else formats)]
    names = [n for n in names if n and n != "npy"]  # npy is always written
    unknown = sorted(set(names) - set(EXTRA_FORMATS))
    if unknown:
        raise InputError(
            f"unknown format {', '.join(map(repr, unknown))}",
            hint=f"choose from {', '.join(EXTRA_FORMATS)} (npy is always written)",
        )
    return tuple(f for f in EXTRA_FORMATS if f in names)


@dataclass(frozen=True)
class BundleLayout:
    """What a bundle will hold, known before any sample is generated.

    Parameters
    ----------
    n_samples, n_taps : int
        Samples per tap and link; number of taps.
    update_rate_hz : float
        Rate of the tap-gain samples (SigMF sample rate, csv time axis).
    n_rx, n_tx : int
        Antennas; 1 and 1 for SISO.
    formats : sequence of str or str
        Extra formats (see :data:`EXTRA_FORMATS`); ``"cf32,sigmf"`` works too.
    fir_map : array (n_taps, n_fir), optional
        The map to FIR coefficients; written as ``fir_map.npy``; required by ``fir``.
    tap_power_linear, tap_k_linear : sequence of float, optional
        Mean power and Rician K per tap (K = 0 Rayleigh, ``inf`` static);
        required by ``ci16``, whose scale is chosen from them before the data
        exist (:func:`emucompile.bundle.formats.ci16_scaling`).
    clip_probability : float
        Design clipping probability of ``ci16`` (per sample, envelope law).
    csv_max_rows : int or None
        ``csv`` is refused above this many rows (default 1,000,000); None lifts the limit.
    extra_arrays : tuple of (name, role, dtype, shape, make, axes)
        Arrays along the sample axis streamed beside the gains, e.g.
        ``shadowing_db.npy``: ``make(start, stop)`` returns rows [start, stop)
        (shape ``(stop - start, *shape[1:])``); it is called on the caller's
        thread for each chunk, so memory stays flat in the record's length.
    fir_maps : callable(start, stop) -> array (m, n_taps, n_fir), optional
        A time-varying FIR map (moving delay): ``fir.npy`` is then
        sum_k tap_gains[n, ..., k] fir_maps(n)[k]; ``fir_map`` stays the map
        at zero offset on the same grid. It may return the map sparse instead,
        as ``(index, values)`` of :meth:`emucompile.models.grid.MovingFirMap.sparse`.
    fir_codes : dict, optional
        The emulator's integer FIR coefficients (a target with
        ``coefficient_bits``): ``{"columns", "bits", "step", "headroom_db",
        "sample_rate_hz", "bulk_delay_samples"}`` for
        :class:`emucompile.bundle.formats.FirCodesWriter`; needs ``fir_map``.
    """

    n_samples: int
    n_taps: int
    update_rate_hz: float
    n_rx: int = 1
    n_tx: int = 1
    formats: tuple = ()
    fir_map: np.ndarray | None = field(default=None, compare=False, repr=False)
    tap_power_linear: tuple | None = None
    tap_k_linear: tuple | None = None
    clip_probability: float = fmt.DEFAULT_CLIP_PROBABILITY
    csv_max_rows: int | None = fmt.DEFAULT_CSV_MAX_ROWS
    extra_arrays: tuple = field(default=(), compare=False, repr=False)
    fir_maps: object = field(default=None, compare=False, repr=False)
    fir_codes: dict | None = field(default=None, compare=False, repr=False)

    def __post_init__(self):
        set_ = object.__setattr__
        set_(self, "formats", parse_formats(self.formats))
        for name in ("n_samples", "n_taps", "n_rx", "n_tx"):
            value = getattr(self, name)
            if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < 1:
                raise ValueError(f"{name} must be an integer >= 1, got {value!r}")
            set_(self, name, int(value))
        if not (self.update_rate_hz > 0 and math.isfinite(self.update_rate_hz)):
            raise ValueError(f"update_rate_hz must be finite and > 0, got {self.update_rate_hz!r}")
        set_(self, "update_rate_hz", float(self.update_rate_hz))
        if self.fir_map is not None:
            fir_map = np.asarray(self.fir_map)
            if fir_map.ndim != 2 or fir_map.shape[0] != self.n_taps or fir_map.shape[1] < 1:
                raise ValueError(f"fir_map must have shape (n_taps={self.n_taps}, n_fir), got {fir_map.shape}")
            if fir_map.dtype not in (np.float32, np.float64, np.complex64, np.complex128):
                raise ValueError(f"fir_map must be float or complex, got {fir_map.dtype}")
            if not np.isfinite(fir_map).all():
                raise ValueError("fir_map holds NaN or infinity")
            set_(self, "fir_map", fir_map)
        for name in ("tap_power_linear", "tap_k_linear"):
            value = getattr(self, name)
            if value is not None:
                value = tuple(float(v) for v in value)
                if len(value) != self.n_taps:
                    raise ValueError(f"{name} needs {self.n_taps} values, got {len(value)}")
                set_(self, name, value)
        if self.fir_codes is not None and self.fir_map is None:
            raise ValueError("the FIR coefficient codes need the FIR map")
        if "fir" in self.formats and self.fir_map is None:
            raise InputError("the fir format needs the FIR map", hint="give a sample rate (--sample-rate)")
        if "ci16" in self.formats and (self.tap_power_linear is None or self.tap_k_linear is None):
            raise ValueError("the ci16 format needs tap_power_linear and tap_k_linear to choose its scale")
        if "csv" in self.formats and self.csv_max_rows is not None and self.n_samples > self.csv_max_rows:
            raise InputError(
                f"csv: {self.n_samples} rows is above the limit of {self.csv_max_rows} rows",
                hint="shorten the record, lower the update rate, choose cf32/sigmf, or lift the csv row limit",
            )

    @classmethod
    def from_profile(cls, profile, **options) -> "BundleLayout":
        """A layout whose tap powers and K-factors come from a :class:`~emucompile.profile.model.Profile`.

        ``options`` are the other parameters (``n_samples``, ``update_rate_hz``, ...).
        """
        kinds = {"static": lambda t: math.inf, "rayleigh": lambda t: 0.0, "rician": lambda t: t.k_linear}
        return cls(
            n_taps=profile.n_taps,
            tap_power_linear=tuple(t.power_linear for t in profile.taps),
            tap_k_linear=tuple(kinds[t.fading](t) for t in profile.taps),
            **options,
        )

    @property
    def gains_shape(self) -> tuple[int, int, int, int]:
        return (self.n_samples, self.n_rx, self.n_tx, self.n_taps)

    @property
    def ci16_scaling(self) -> fmt.Ci16Scaling | None:
        """The int16 scale (None unless ``ci16`` is requested)."""
        if "ci16" not in self.formats:
            return None
        return fmt.ci16_scaling(self.tap_power_linear, self.tap_k_linear, clip_probability=self.clip_probability)

    def planned_files(self) -> list[tuple[str, int]]:
        """``(name, size_bytes)`` of every file to be written; csv and metadata sizes are upper bounds."""
        writers = self._stream_writers()
        sizes = [(w.name, w.size_bytes) for w in writers]
        if self.fir_map is not None:
            fir_map = np.asarray(self.fir_map)
            sizes.insert(1, ("fir_map.npy", len(fmt.npy_header(fir_map.dtype, fir_map.shape)) + fir_map.nbytes))
        for name, _role, dtype, shape, _make, _axes in self.extra_arrays:
            sizes.append((name, len(fmt.npy_header(dtype, shape)) + int(np.prod(shape)) * np.dtype(dtype).itemsize))
        n_entries = len(sizes) + sum(2 * len(w.recordings) - 1 for w in writers if isinstance(w, fmt.SigmfWriter))
        sizes.append((MANIFEST_NAME, MANIFEST_ALLOWANCE_BYTES + MANIFEST_ENTRY_BYTES * n_entries))
        return sizes

    @property
    def estimated_size_bytes(self) -> int:
        """Bytes the bundle will take (an upper bound where a size depends on the numbers)."""
        return sum(size for _, size in self.planned_files())

    def _stream_writers(self) -> list:
        """Fresh writers of the chunked files, in manifest order (tap_gains.npy first)."""
        shape = self.gains_shape
        writers = [fmt.ArrayWriter("tap_gains.npy", "tap_gains", np.complex64, shape, fmt.GAIN_AXES, header=True)]
        for name in self.formats:
            if name == "cf32":
                writers.append(fmt.ArrayWriter("tap_gains.cf32", "tap_gains_cf32", np.complex64, shape, fmt.GAIN_AXES, header=False))
            elif name == "ci16":
                writers.append(fmt.Ci16Writer(self.ci16_scaling, *shape, self.tap_power_linear))
            elif name == "csv":
                writers.append(fmt.CsvWriter(*shape, self.update_rate_hz))
            elif name == "sigmf":
                writers.append(fmt.SigmfWriter(*shape, self.update_rate_hz))
            elif name == "fir":
                writers.append(fmt.FirWriter(self.fir_map, self.n_samples, self.n_rx, self.n_tx,
                                             maps=self.fir_maps))
        if self.fir_codes is not None:
            writers.append(fmt.FirCodesWriter(self.fir_map, n_samples=self.n_samples, n_rx=self.n_rx,
                                              n_tx=self.n_tx, **self.fir_codes))
        return writers


class BundleWriter:
    """Writes one bundle safely: all of it, or nothing (see the module notes).

    Parameters
    ----------
    outdir : str or os.PathLike
        The bundle directory to create. Missing parent directories are made
        (and removed again if the write fails and they are still empty).
    layout : BundleLayout
    force : bool
        Replace OUTDIR if it is an emucompile bundle (a directory with a
        ``manifest.json`` of our format and no files the manifest does not
        list). A file, a link or any other directory is refused even so.
    max_size_bytes : int or None
        Refuse when the estimated size is larger (default 8 GiB); None: no limit.
    progress : callable(samples_done, samples_total), optional
        Called after each chunk and at the end, from the calling thread.
        The library prints nothing itself.
    threaded : bool
        Encode, hash and write on a worker thread behind a bounded queue
        (default), so that this overlaps the caller generating the next chunk.
    queue_chunks : int
        Chunks waiting for the worker at most (memory bound: about
        ``queue_chunks + 2`` chunks in flight).

    Raises
    ------
    InputError
        OUTDIR may not be written, the bundle is too large, or the disk too full.

    Notes
    -----
    Use it as a context manager: an exception inside the ``with`` block (the
    generator failing, Ctrl-C) removes the partial output. A chunk passed to
    :meth:`write_chunk` is copied when ``threaded``, so the caller may reuse its buffer.
    """

    def __init__(self, outdir, layout: BundleLayout, *, force: bool = False,
                 max_size_bytes: int | None = DEFAULT_MAX_SIZE_BYTES, progress=None,
                 threaded: bool = True, queue_chunks: int = 2):
        self.layout = layout
        self.outdir = Path(outdir)
        self.force = bool(force)
        self.progress = progress
        self.threaded = bool(threaded)
        self.samples_written = 0
        self._target = Path(os.path.abspath(outdir))
        if self._target.name in ("", ".", ".."):
            raise InputError(f"{outdir}: give the bundle directory a name (for example out/robot)")
        self._replacing = _check_destination(self.outdir, self._target, force=self.force)
        size = layout.estimated_size_bytes
        if max_size_bytes is not None and size > max_size_bytes:
            raise InputError(
                f"{outdir}: the bundle would take about {_size_text(size)}, above the limit of {_size_text(max_size_bytes)}",
                hint="raise it with --max-size, or shorten the record / drop formats",
            )
        manifest_bound = dict(layout.planned_files())[MANIFEST_NAME]
        if manifest_bound > MANIFEST_MAX_BYTES:
            raise InputError(
                f"{outdir}: the manifest would take up to {_size_text(manifest_bound)}, above the "
                f"{_size_text(MANIFEST_MAX_BYTES)} every reader accepts (too many files: taps x links x formats)",
                hint="drop the sigmf format, or compile fewer taps or links",
            )
        free = shutil.disk_usage(_existing_ancestor(self._target.parent)).free
        if size > free:
            raise InputError(f"{outdir}: the bundle needs about {_size_text(size)}, only {_size_text(free)} free on that disk")
        self._queue = queue.Queue(maxsize=max(1, int(queue_chunks)))
        self._state = "new"  # new -> open -> committed | aborted
        self._failure = None
        self._thread = None
        self._writers = []
        self._extra_writers = []
        self._temp = None
        self._made_parents = []
        self._saved_handlers = {}

    @property
    def estimated_size_bytes(self) -> int:
        return self.layout.estimated_size_bytes

    @property
    def temporary_path(self) -> Path | None:
        """The hidden sibling being written (None before start and after the end)."""
        return self._temp if self._state == "open" else None

    # -- the life cycle ---------------------------------------------------------------

    def __enter__(self):
        self.start()
        return self

    def __exit__(self, exc_type, exc, tb):
        if self._state != "open":
            return False
        self.abort()
        if exc is None:
            raise RuntimeError("BundleWriter left without finish(): nothing was written")
        translated = _user_error(exc, self.outdir)
        if translated is not None:
            raise translated from exc
        return False

    def start(self) -> None:
        """Create the temporary directory, open the files, start the worker."""
        if self._state != "new":
            raise RuntimeError(f"BundleWriter.start() in state {self._state!r}")
        self._state = "open"
        try:
            self._install_signal_handlers()
            self._made_parents = _make_parents(self._target.parent)
            _remove_stale_partials(self._target)
            self._temp = self._target.parent / f".{self._target.name}{TEMP_MARKER}{os.getpid()}-{secrets.token_hex(4)}"
            os.mkdir(self._temp)
            self._writers = self.layout._stream_writers()
            for writer in self._writers:
                writer.open(self._temp)
            self._fir_map_entry = None
            if self.layout.fir_map is not None:
                self._fir_map_entry = fmt.write_npy_file(self._temp, "fir_map.npy", "fir_map", self.layout.fir_map, ("tap", "fir_coefficient"))
            self._extra_writers = [fmt.ArrayWriter(name, role, dtype, shape, axes, header=True)
                                   for name, role, dtype, shape, _make, axes in self.layout.extra_arrays]
            for writer in self._extra_writers:
                writer.open(self._temp)
            if self.threaded:
                self._thread = threading.Thread(target=self._drain, name="emucompile-bundle-writer", daemon=True)
                self._thread.start()
        except BaseException as error:
            self._fail(error)

    def write_chunk(self, start: int, gains, *, owned: bool = False) -> None:
        """Append ``gains`` (complex64, shape (m, n_rx, n_tx, n_taps)) at sample ``start``.

        Chunks come in order: ``start`` must equal the samples written so far.
        ``owned=True`` hands over a new C-ordered array that nobody changes
        afterwards and that is finite by construction (the engine's own
        chunks): it is then written as it is, without the check for NaN or
        infinity and without the copy.
        """
        self._require_open()
        try:
            chunk = self._checked_chunk(start, gains, owned)
            extras = self._extra_rows(start, start + chunk.shape[0])
            if self.threaded:
                self._put((chunk, extras))
            else:
                self._consume((chunk, extras))
            self.samples_written += chunk.shape[0]
            if self.progress is not None:
                self.progress(self.samples_written, self.layout.n_samples)
        except BaseException as error:
            self._fail(error)

    def placed_files(self) -> list[dict]:
        """The open files that accept rows of tap gains at their offsets, from any process.

        For a distributed compile: each entry is ``{"path", "data_offset",
        "row_bytes"}``; rows n0..n1 of complex64 little-endian gains go at
        ``data_offset + n0 * row_bytes``. Only formats that store the gains as
        they are (npy, cf32) can be placed; call :meth:`adopt_placed` when
        every row is written, then :meth:`finish`.
        """
        self._require_open()
        plain = [w for w in self._writers if type(w) is fmt.ArrayWriter]
        if len(plain) != len(self._writers):
            others = ", ".join(w.name for w in self._writers if w not in plain)
            raise InputError(f"{others}: written in sample order only, not placed by several workers",
                             hint="leave out the formats other than npy and cf32, or compile on one process")
        row_bytes = math.prod(self.layout.gains_shape[1:]) * np.dtype(np.complex64).itemsize
        return [{"path": str(self._temp / w.name), "data_offset": len(w._header), "row_bytes": row_bytes}
                for w in plain]

    def adopt_placed(self) -> None:
        """Count every sample as written: the placed files are hashed as they stand on disk."""
        self._require_open()
        try:
            for writer in self._writers:
                writer._file.adopt(writer.size_bytes)
            self.samples_written = self.layout.n_samples
        except BaseException as error:
            self._fail(error)

    def finish(self, manifest_fields: dict) -> Path:
        """Close the files, write the manifest, move the bundle into place; return OUTDIR.

        Parameters
        ----------
        manifest_fields : dict
            Every manifest field (docs/bundle-format.md) the writer cannot know: ``generator_version``,
            ``profile_sha256``, ``resolved_profile_sha256``, ``profile``,
            ``seed``, ``method``, ``generator`` (the method's parameters),
            ``duration_s``, ``periodic``, ``taps``, ``mimo``, ``fir`` and
            optionally ``target``. The writer adds ``format``,
            ``format_version``, ``tool_version``, ``created_utc``, the shape
            fields, ``platform``, ``formats`` and ``files``; a caller value
            for one of those must agree with it. numpy scalars and arrays are
            converted to JSON numbers and lists.

        Raises
        ------
        ValueError
            The manifest would not validate against the schema (a bug of the
            caller; the partial output is removed).
        """
        self._require_open()
        try:
            if self.samples_written != self.layout.n_samples:
                raise ValueError(f"finish() after {self.samples_written} of {self.layout.n_samples} samples")
            if self.threaded:
                self._put(None)
                self._thread.join()
                self._raise_worker_failure()
            fields = dict(manifest_fields)
            entries = [self._writers[0].close()[0]]
            if self._fir_map_entry is not None:
                entries.append(self._fir_map_entry)
            for writer in self._extra_writers:
                entries += writer.close()
            context = {
                "taps": fields.get("taps"),
                "recorder": f"emucompile {__version__}",
                "description": f"emucompile bundle of profile {(fields.get('profile') or {}).get('name', '?')}, seed {fields.get('seed')}",
            }
            for writer in self._writers[1:]:
                entries += writer.close(**context)
            manifest = self._compose_manifest(fields, entries)
            problems = validate_manifest(manifest, source=MANIFEST_NAME)
            if problems:
                raise ValueError("the manifest does not validate:\n" + "\n".join(p.format() for p in problems))
            text = (json.dumps(manifest, indent=2, ensure_ascii=False, allow_nan=False) + "\n").encode("utf-8")
            _fault_point("data-written")
            manifest_file = fmt.HashedFile(self._temp / MANIFEST_NAME)
            manifest_file.write(text)
            manifest_file.close()
            _fault_point("manifest-written")
            if "sigmf" in self.layout.formats:
                fsync_directory(self._temp / fmt.SigmfWriter.directory)
            fsync_directory(self._temp)
            interrupted_meanwhile = self._commit()
        except BaseException as error:
            self._fail(error)
        if interrupted_meanwhile:
            # Ctrl-C during the final renames: the bundle is complete; stop now.
            raise KeyboardInterrupt()
        if self.progress is not None:
            self.progress(self.samples_written, self.layout.n_samples)
        return self.outdir

    def abort(self) -> None:
        """Stop, close and remove the partial directory; OUTDIR stays as it was. Idempotent."""
        if self._state != "open":
            return
        self._state = "aborted"
        with _held_interrupts():
            if self._thread is not None and self._thread.is_alive():
                self._failure = self._failure or RuntimeError("aborted")
                with contextlib.suppress(queue.Empty):
                    while True:
                        self._queue.get_nowait()
                self._queue.put(None)
                self._thread.join()
            for writer in self._writers + self._extra_writers:
                writer.discard()
            if self._temp is not None:
                shutil.rmtree(self._temp, ignore_errors=True)
            for directory in reversed(self._made_parents):
                with contextlib.suppress(OSError):
                    os.rmdir(directory)
            self._restore_signal_handlers()

    # -- internals ----------------------------------------------------------------------

    def _require_open(self):
        if self._state != "open":
            raise RuntimeError(f"BundleWriter is {self._state}; use it as a context manager or call start()")

    def _checked_chunk(self, start, gains, owned=False):
        if not isinstance(gains, np.ndarray) or gains.dtype != np.complex64:
            raise TypeError(f"a chunk must be a complex64 numpy array, got {type(gains).__name__} {getattr(gains, 'dtype', '')}")
        expected = self.layout.gains_shape[1:]
        if gains.ndim != 4 or gains.shape[1:] != expected or gains.shape[0] < 1:
            raise ValueError(f"a chunk must have shape (m >= 1, {', '.join(map(str, expected))}), got {gains.shape}")
        if start != self.samples_written:
            raise ValueError(f"chunk starts at sample {start}, expected {self.samples_written} (chunks come in order)")
        if start + gains.shape[0] > self.layout.n_samples:
            raise ValueError(f"chunk ends at sample {start + gains.shape[0]}, past n_samples = {self.layout.n_samples}")
        if owned and gains.flags.c_contiguous and gains.dtype == np.dtype("<c8"):
            return gains
        if not np.isfinite(gains).all():
            raise ValueError(f"the chunk at sample {start} holds NaN or infinity")
        if self.threaded:
            return np.array(gains, dtype="<c8", order="C", copy=True)
        return np.ascontiguousarray(gains, dtype="<c8")

    def _extra_rows(self, start, stop):
        """Rows [start, stop) of each extra array, made on the caller's thread."""
        rows = []
        for writer, (name, _role, dtype, shape, make, _axes) in zip(self._extra_writers, self.layout.extra_arrays):
            array = np.asarray(make(start, stop), dtype=dtype)
            if array.shape != (stop - start, *tuple(shape)[1:]):
                raise ValueError(f"{name}: rows of shape {array.shape} for samples [{start}, {stop}), "
                                 f"planned {tuple(shape)}")
            rows.append(array)
        return rows

    def _consume(self, item):
        chunk, extras = item
        for writer in self._writers:
            writer.write(chunk)
        for writer, rows in zip(self._extra_writers, extras):
            writer.write_encoded(rows)

    def _drain(self):
        while True:
            chunk = self._queue.get()
            if chunk is None:
                return
            if self._failure is None:
                try:
                    self._consume(chunk)
                except BaseException as error:  # handed to the caller's thread
                    self._failure = error

    def _put(self, chunk):
        while True:
            self._raise_worker_failure()
            try:
                self._queue.put(chunk, timeout=0.1)
                return
            except queue.Full:
                continue

    def _raise_worker_failure(self):
        if self._failure is not None:
            raise self._failure

    def _fail(self, error: BaseException):
        """Abort, then raise ``error`` as the user should see it."""
        self.abort()
        translated = _user_error(error, self.outdir)
        if translated is None:
            raise error
        raise translated from error

    def _compose_manifest(self, fields: dict, entries: list[dict]) -> dict:
        own = {
            "format": FORMAT_NAME,
            "format_version": FORMAT_VERSION,
            "tool_version": __version__,
            "created_utc": datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ"),
            "update_rate_hz": self.layout.update_rate_hz,
            "n_samples": self.layout.n_samples,
            "n_taps": self.layout.n_taps,
            "n_rx": self.layout.n_rx,
            "n_tx": self.layout.n_tx,
            "platform": platform_info(),
            "formats": list(self.layout.formats),
            "files": entries,
        }
        fields = _plain_json(fields)
        for key in WRITER_FIELDS:
            if key in fields and key != "created_utc" and fields[key] != _plain_json(own[key]):
                raise ValueError(f"manifest field {key!r} = {fields[key]!r} disagrees with the writer's {own[key]!r}")
        merged = {**fields, **own}
        ordered = {key: merged[key] for key in _MANIFEST_ORDER if key in merged}
        ordered.update({key: value for key, value in merged.items() if key not in ordered})
        return _plain_json(ordered)

    def _commit(self) -> bool:
        """Move the finished directory into place; True if an interrupt arrived meanwhile."""
        with _held_interrupts() as arrived:
            old = None
            if self._replacing:
                if _bundle_manifest(self._target) is None:
                    raise InputError(f"{self.outdir}: is no longer a bundle; not replaced")
                old = _replace_directory(self._temp, self._target)
            else:
                _rename_no_replace(self._temp, self._target, self.outdir)
            self._state = "committed"  # from here on the bundle is in place and complete
            self._restore_signal_handlers()
            with contextlib.suppress(OSError):
                # Durability of the rename against a power cut; the bundle is already
                # visible and whole, so a failure here is not a failed write.
                fsync_directory(self._target.parent)
            if old is not None:
                _fault_point("exchanged")
                _remove_tree(old)
        return bool(arrived)

    def _install_signal_handlers(self):
        if threading.current_thread() is not threading.main_thread():
            return
        if hasattr(signal, "SIGXFSZ"):
            # Past `ulimit -f` the kernel sends SIGXFSZ, whose default kills the
            # process before any cleanup; ignored, the write fails with EFBIG.
            self._saved_handlers[signal.SIGXFSZ] = signal.signal(signal.SIGXFSZ, signal.SIG_IGN)
        if signal.getsignal(signal.SIGTERM) == signal.SIG_DFL:
            self._saved_handlers[signal.SIGTERM] = signal.signal(signal.SIGTERM, raise_terminated)

    def _restore_signal_handlers(self):
        while self._saved_handlers:
            number, handler = self._saved_handlers.popitem()
            signal.signal(number, handler)


def write_bundle(outdir, layout: BundleLayout, chunks, manifest_fields, **options) -> Path:
    """Write a whole bundle from an iterable of chunks; return OUTDIR.

    Parameters
    ----------
    outdir, layout, **options
        As for :class:`BundleWriter` (``force``, ``max_size_bytes``, ``progress``, ...).
    chunks : iterable
        complex64 arrays of shape (m, n_rx, n_tx, n_taps) in sample order,
        or ``(start, array)`` pairs.
    manifest_fields : dict or callable returning a dict
        See :meth:`BundleWriter.finish`; a callable is called after the last
        chunk (for fields known only then).
    """
    with BundleWriter(outdir, layout, **options) as writer:
        for item in chunks:
            start, gains = item if isinstance(item, tuple) else (writer.samples_written, item)
            writer.write_chunk(start, gains)
        return writer.finish(manifest_fields() if callable(manifest_fields) else manifest_fields)


# -- reading back ---------------------------------------------------------------------------


class Bundle:
    """An opened bundle: the manifest and its arrays, memory-mapped read-only.

    Attributes
    ----------
    path : Path
    manifest : dict
    tap_gains : numpy.memmap
        complex64 (n_samples, n_rx, n_tx, n_taps).
    fir_map : numpy.ndarray or None
        (n_taps, n_fir) when the bundle has a FIR map.
    fir : numpy.memmap or None
        The materialised FIR when the ``fir`` format was written.
    """

    def __init__(self, path, manifest):
        self.path = Path(path)
        self.manifest = manifest
        self.tap_gains = self._mapped_npy("tap_gains")
        self.fir_map = self._mapped_npy("fir_map", mmap=False) if self.entry("fir_map") else None
        self.fir = self._mapped_npy("fir") if self.entry("fir") else None

    def __repr__(self):
        m = self.manifest
        return f"<Bundle {self.path} n_samples={m['n_samples']} n_taps={m['n_taps']} links={m['n_rx']}x{m['n_tx']}>"

    @property
    def time_s(self):
        """Time of each tap-gain sample in seconds."""
        return np.arange(self.manifest["n_samples"]) / self.manifest["update_rate_hz"]

    def entries(self, role: str) -> list[dict]:
        """The manifest's file entries of one role (in manifest order)."""
        return [e for e in self.manifest["files"] if e["role"] == role]

    def entry(self, role: str) -> dict | None:
        """The single file entry of a role, or None."""
        found = self.entries(role)
        return found[0] if found else None

    def read_format(self, name: str):
        """The tap gains as stored in one format, shape (n_samples, n_rx, n_tx, n_taps).

        ``name`` is ``npy``, ``cf32``, ``ci16`` (dequantised), ``csv`` or
        ``sigmf``; ``fir`` returns the materialised FIR instead.
        """
        shape = tuple(self.tap_gains.shape)
        if name == "npy":
            return self.tap_gains
        if name == "fir":
            return self._present(self.fir, "fir")
        if name == "cf32":
            entry = self._present(self.entry("tap_gains_cf32"), name)
            return member_raw(self.path, entry, "<c8", shape)
        if name == "ci16":
            entry = self._present(self.entry("tap_gains_ci16"), name)
            return fmt.dequantise_ci16(member_raw(self.path, entry, "<i2", (*shape, 2)),
                                       entry["quantisation"]["scale_factor"])
        if name == "csv":
            entry = self._present(self.entry("tap_gains_csv"), name)
            with open_member(self.path, entry["name"]) as handle:
                _, values, _ = fmt.read_csv(io.TextIOWrapper(io.BufferedReader(handle), encoding="ascii", newline=""))
            return values.reshape(shape)
        if name == "sigmf":
            out = np.empty(shape, dtype=np.complex64)
            for entry in self._present(self.entries("sigmf_data"), name):
                meta_name = entry["name"][: -len(".sigmf-data")] + ".sigmf-meta"
                metadata = member_json(self.path, meta_name, max_bytes=fmt.SIGMF_META_MAX_BYTES)
                datatype = (metadata.get("global") or {}).get("core:datatype") if isinstance(metadata, dict) else None
                if datatype != "cf32_le":
                    raise BundleError([Problem(str(self.path / meta_name), "/global/core:datatype",
                                               f"{_short_repr(datatype)}; a bundle's SigMF data are cf32_le")])
                out[:, entry["rx"], entry["tx"], entry["tap"]] = member_raw(self.path, entry, "<c8", shape[:1])
            return out
        raise ValueError(f"unknown format {name!r}; choose from npy, {', '.join(EXTRA_FORMATS)}")

    def verify_integrity(self) -> list[Problem]:
        """See :func:`verify_integrity`."""
        return verify_integrity(self.path)

    def _present(self, value, name):
        if value is None or (isinstance(value, list) and not value):
            raise InputError(f"{self.path}: the bundle holds no {name} data", hint=f"compile again with --format {name}")
        return value

    def _mapped_npy(self, role, *, mmap=True):
        entry = self.entry(role)
        try:
            return member_npy(self.path, entry, mmap=mmap)
        except OSError as error:
            raise BundleError([Problem(str(self.path / entry["name"]), "", f"cannot be read: {error.strerror or error}")]) from None

    def member(self, role: str, *, mmap: bool = True):
        """The npy file of a role (e.g. ``shadowing_db``), opened safely; None when the bundle has none."""
        entry = self.entry(role)
        return None if entry is None else member_npy(self.path, entry, mmap=mmap)


def open_bundle(path, *, verify: bool = False) -> Bundle:
    """Open a bundle: its manifest and memory-mapped arrays.

    Parameters
    ----------
    path : str or os.PathLike
        The bundle directory.
    verify : bool
        Also check every file's SHA-256 (reads all the data). Without it
        every listed file is still opened (safely: no link, FIFO or device is
        read) and its size and npy header checked against the manifest.

    Raises
    ------
    BundleError
        (exit code 2) The directory is not a bundle, its manifest is invalid,
        or (with ``verify``) a file is missing or corrupted; one line per problem.
    """
    manifest, problems = _read_manifest(Path(path))  # read once: what is checked is what is used
    if manifest is not None:
        problems = _integrity_problems(Path(path), manifest, hashes=verify)
    if problems:
        raise BundleError(problems)
    return Bundle(path, manifest)


def verify_integrity(path, *, hashes: bool = True) -> list[Problem]:
    """Every problem of a bundle on disk: manifest against the schema, files, sizes, headers, SHA-256.

    Returns an empty list for an intact bundle. A file whose bytes differ
    from what was compiled reads ``FILE: /files/i: corrupted or edited after
    compiling (...)``. Files are hashed in 1 MiB blocks (bounded memory);
    ``hashes=False`` skips the hashing (the quick structural part, for a
    caller that hashes alongside other work and checks the full answer before
    it reports anything).
    """
    root = Path(path)
    manifest, problems = _read_manifest(root)
    if manifest is None:
        return problems
    return _integrity_problems(root, manifest, hashes=hashes)


def _integrity_problems(root: Path, manifest: dict, *, hashes: bool) -> list[Problem]:
    problems = validate_manifest(manifest, source=str(root / MANIFEST_NAME))
    seen = set()
    for index, entry in enumerate(manifest.get("files") or []):
        if not _is_safe_entry(entry):
            continue
        problem = _member_problem(root, entry, hashes)
        if problem is not None and (problem.file, problem.message) not in seen:
            seen.add((problem.file, problem.message))  # a linked folder is named once, not per file in it
            problems.append(Problem(problem.file, f"/files/{index}", problem.message))
    return problems


def _member_problem(root: Path, entry: dict, hashes: bool) -> Problem | None:
    """What is wrong with one listed file (opened safely), or None."""
    file = root / entry["name"]
    try:
        with open_member(root, entry["name"]) as handle:
            size = os.fstat(handle.fileno()).st_size
            if isinstance(entry.get("size_bytes"), int) and size != entry["size_bytes"]:
                return Problem(str(file), "", f"corrupted or edited after compiling ({size} bytes, the manifest says {entry['size_bytes']})")
            header_problem = _npy_header(handle, entry)[0] if entry["name"].endswith(".npy") else None
            if header_problem:
                return Problem(str(file), "", f"corrupted or edited after compiling ({header_problem})")
            if hashes:
                handle.seek(0)
                if fmt.sha256_file(handle) != entry.get("sha256"):
                    return Problem(str(file), "", "corrupted or edited after compiling (SHA-256 differs from the manifest)")
    except BundleError as error:
        return error.problems[0]
    except OSError as error:
        return Problem(str(file), "", f"cannot be read: {error.strerror or error}")
    return None


def verify_members(path, manifest: dict, roles, *, hashes: bool = True) -> list[Problem]:
    """Size, header and SHA-256 of the listed files of some roles only (what a reader uses), opened safely."""
    root = Path(path)
    problems = []
    for index, entry in enumerate(manifest["files"]):
        if entry["role"] in roles:
            problem = _member_problem(root, entry, hashes)
            if problem is not None:
                problems.append(Problem(problem.file, f"/files/{index}", problem.message))
    return problems


def validate_manifest(manifest, *, source: str = MANIFEST_NAME) -> list[Problem]:
    """Schema errors (each with its JSON pointer) and cross-field inconsistencies of a manifest."""
    import jsonschema

    validator = jsonschema.Draft202012Validator(manifest_schema())
    problems = []
    for error in sorted(validator.iter_errors(manifest), key=lambda e: list(map(str, e.absolute_path))):
        pointer = "".join(f"/{p}" for p in error.absolute_path)
        problems.append(Problem(source, pointer, _schema_message(error)))
    if problems or not isinstance(manifest, dict):
        return problems
    return _consistency_problems(manifest, source)


def manifest_schema() -> dict:
    """The manifest's JSON Schema (draft 2020-12) shipped in the package."""
    global _SCHEMA
    if _SCHEMA is None:
        from importlib import resources

        _SCHEMA = json.loads(resources.files("emucompile").joinpath("schemas", SCHEMA_RESOURCE).read_text("utf-8"))
    return _SCHEMA


def platform_info() -> dict:
    """Versions and machine the same-bytes promise depends on."""
    try:
        scipy_version = importlib.metadata.version("scipy")
    except importlib.metadata.PackageNotFoundError:
        scipy_version = "not installed"
    return {
        "python": platform.python_version(),
        "numpy": np.__version__,
        "scipy": scipy_version,
        "machine": platform.machine(),
        "system": platform.system(),
    }


# -- helpers: destination, temporary names, renames, signals ------------------------------------

_SCHEMA = None
_RENAME_NOREPLACE = 1
_RENAME_EXCHANGE = 2
_AT_FDCWD = -100


def raise_terminated(signum, frame):
    raise Terminated()


def _check_destination(shown: Path, target: Path, *, force: bool) -> bool:
    """Refuse an OUTDIR we may not write; return True when an old bundle will be replaced."""
    if not os.path.lexists(target):
        return False
    if target.is_symlink():
        raise InputError(f"{shown}: is a symbolic link; not replaced", hint="choose another OUTDIR")
    if not target.is_dir():
        raise InputError(f"{shown}: exists and is not a directory; not replaced, even with --force")
    manifest = _bundle_manifest(target)
    if not force:
        what = "an emucompile bundle" if manifest is not None else "not a bundle"
        raise InputError(f"{shown}: already exists ({what})", hint="use --force to replace a bundle, or choose another OUTDIR")
    if manifest is None:
        raise InputError(
            f"{shown}: exists and is not an emucompile bundle (no valid manifest.json); --force replaces only bundles",
            hint="remove it yourself or choose another OUTDIR",
        )
    extra = _unlisted_files(target, manifest)
    if extra:
        listing = ", ".join(extra[:5]) + (f" and {len(extra) - 5} more" if len(extra) > 5 else "")
        raise InputError(
            f"{shown}: holds files that are not part of the bundle ({listing}); not replaced",
            hint="move them elsewhere first",
        )
    return True


def _bundle_manifest(directory: Path) -> dict | None:
    """The manifest if ``directory`` holds one of our format, else None."""
    manifest, _ = _read_manifest(directory)
    if isinstance(manifest, dict) and manifest.get("format") == FORMAT_NAME:
        return manifest
    return None


def _unlisted_files(directory: Path, manifest: dict) -> list[str]:
    listed = {MANIFEST_NAME} | {e.get("name") for e in manifest.get("files") or [] if isinstance(e, dict)}
    extra = []
    for root, dirs, files in os.walk(directory):
        for name in files + [d for d in dirs if os.path.islink(os.path.join(root, d))]:
            relative = os.path.relpath(os.path.join(root, name), directory).replace(os.sep, "/")
            if relative not in listed and not relative.startswith(VERIFICATION_DIRECTORY + "/"):
                extra.append(relative)
    return sorted(extra)


def _read_manifest(directory: Path):
    """``(manifest, problems)``: the parsed manifest or None with the reason."""
    file = directory / MANIFEST_NAME
    if not directory.is_dir():
        return None, [Problem(str(directory), "", "not a directory (a bundle is a directory with a manifest.json)")]
    try:
        with open_member(directory, MANIFEST_NAME) as handle:
            data = fmt.read_capped(handle, MANIFEST_MAX_BYTES)
    except BundleError as error:
        if error.missing:
            return None, [Problem(str(directory), "", "not an emucompile bundle: manifest.json is missing")]
        return None, error.problems
    except OSError as error:
        return None, [Problem(str(file), "", f"cannot be read: {error.strerror or error}")]
    try:
        manifest = fmt.strict_json(data, max_bytes=MANIFEST_MAX_BYTES)
    except ValueError as error:
        return None, [Problem(str(file), "", f"not a readable manifest: {error}")]
    if not isinstance(manifest, dict):
        return None, [Problem(str(file), "", "not an emucompile manifest (not a JSON object)")]
    if manifest.get("format") != FORMAT_NAME:
        return None, [Problem(str(file), "/format", f"not an emucompile bundle manifest (format {_short_repr(manifest.get('format'))})")]
    version = manifest.get("format_version")
    if version != FORMAT_VERSION:
        hint = "written by a newer emucompile; upgrade" if isinstance(version, int) and version > FORMAT_VERSION else None
        return None, [Problem(str(file), "/format_version", f"format_version {_short_repr(version)} is not supported (this is {FORMAT_VERSION})", hint=hint)]
    return manifest, []


def _short_repr(value, limit: int = 40) -> str:
    text = repr(value) if not isinstance(value, (dict, list)) else type(value).__name__
    return text if len(text) <= limit else text[: limit - 3] + "..."


# -- the one way a bundle's files are opened for reading ------------------------------------

_O_NOFOLLOW = getattr(os, "O_NOFOLLOW", 0)
_O_NONBLOCK = getattr(os, "O_NONBLOCK", 0)
_O_DIRECTORY = getattr(os, "O_DIRECTORY", 0)
_O_READ = os.O_RDONLY | getattr(os, "O_CLOEXEC", 0) | getattr(os, "O_BINARY", 0)


def open_member(root, name: str):
    """Open the file ``name`` (``/``-separated, relative) of the bundle ``root`` for reading; a binary file object.

    Every reader of a bundle (verify, reproduce, apply, :class:`Bundle`) opens
    its files here. Refused (:class:`BundleError`, exit 2, naming the file):
    a name that is absolute or has ``.``/``..`` parts, any part that is a
    symbolic link (never followed, so nothing resolves outside the bundle),
    a folder that is not a directory, and a file that is not regular (a FIFO
    would block a reader forever, a device could be anything). Folders and
    the file are opened one below the other (``openat``) with ``O_NOFOLLOW``
    and ``O_NONBLOCK`` where the platform has them, and checked with
    ``fstat`` after opening; elsewhere every part is ``lstat``-ed and the
    opened file compared with it. ``root`` itself is the user's choice and
    may be reached through a link.
    """
    shown = Path(root) / name
    parts = name.split("/") if isinstance(name, str) else []
    if not parts or name.startswith("/") or any(part in ("", ".", "..") or "\\" in part for part in parts):
        raise MemberError(shown, "not a plain relative name inside the bundle; not read")
    if os.open in os.supports_dir_fd and _O_NOFOLLOW:
        fd = _open_below(root, parts, shown)
    else:
        fd = _open_checked(root, parts, shown)
    return os.fdopen(fd, "rb", buffering=0)


def _open_below(root, parts, shown) -> int:
    directory = os.open(root, _O_READ | _O_DIRECTORY)
    try:
        for depth, part in enumerate(parts):
            last = depth == len(parts) - 1
            here = Path(root).joinpath(*parts[: depth + 1])
            try:
                before = os.stat(part, dir_fd=directory, follow_symlinks=False)
            except FileNotFoundError:
                raise MemberError(here, "missing (the manifest lists it)", missing=True) from None
            _refuse_kind(before.st_mode, here, folder=not last)
            fd = os.open(part, _O_READ | _O_NOFOLLOW | _O_NONBLOCK | (0 if last else _O_DIRECTORY), dir_fd=directory)
            after = os.fstat(fd)
            if (after.st_dev, after.st_ino) != (before.st_dev, before.st_ino):
                os.close(fd)
                raise MemberError(here, "changed while it was opened; not read")
            try:
                _refuse_kind(after.st_mode, here, folder=not last)
            except MemberError:
                os.close(fd)
                raise
            os.close(directory)
            directory = fd
        fd, directory = directory, -1
        return fd
    except OSError as error:
        if error.errno in (errno.ELOOP, errno.EMLINK):
            raise MemberError(shown, "is a symbolic link; a bundle's files must be regular files inside it (not followed)") from None
        raise
    finally:
        if directory >= 0:
            os.close(directory)


def _open_checked(root, parts, shown) -> int:
    """The same refusals without ``openat`` (Windows): lstat every part, then compare the opened file."""
    path = Path(root)
    before = None
    for depth, part in enumerate(parts):
        path = path / part
        try:
            before = os.lstat(path)
        except FileNotFoundError:
            raise MemberError(path, "missing (the manifest lists it)", missing=True) from None
        _refuse_kind(before.st_mode, path, folder=depth < len(parts) - 1)
    real_root = os.path.realpath(root)
    if os.path.commonpath([real_root, os.path.realpath(path)]) != real_root:
        raise MemberError(shown, "resolves outside the bundle directory; not read")
    fd = os.open(path, _O_READ | _O_NOFOLLOW | _O_NONBLOCK)
    after = os.fstat(fd)
    if (after.st_dev, after.st_ino) != (before.st_dev, before.st_ino) or not stat.S_ISREG(after.st_mode):
        os.close(fd)
        raise MemberError(shown, "changed while it was opened; not read")
    return fd


def _refuse_kind(mode: int, shown, *, folder: bool) -> None:
    if stat.S_ISLNK(mode):
        raise MemberError(shown, "is a symbolic link; a bundle's files must be regular files inside it (not followed)")
    if folder and not stat.S_ISDIR(mode):
        raise MemberError(shown, "is not a directory; not read")
    if not folder and not stat.S_ISREG(mode):
        kind = ("a FIFO" if stat.S_ISFIFO(mode) else "a directory" if stat.S_ISDIR(mode)
                else "a socket" if stat.S_ISSOCK(mode) else "a device" if stat.S_ISCHR(mode) or stat.S_ISBLK(mode)
                else "not a regular file")
        raise MemberError(shown, f"is {kind}, not a regular file; not read")


def member_npy(root, entry: dict, *, mmap: bool = True):
    """A listed npy file of a bundle, opened safely, its header checked against the entry; memory-mapped."""
    shown = Path(root) / entry["name"]
    with open_member(root, entry["name"]) as handle:
        size = os.fstat(handle.fileno()).st_size
        problem, dtype, shape, offset = _npy_header(handle, entry)
        if problem:
            raise BundleError([Problem(str(shown), "", f"corrupted or edited after compiling ({problem})")])
        if offset + int(np.prod(shape, dtype=object)) * dtype.itemsize != size:
            raise BundleError([Problem(str(shown), "", f"corrupted or edited after compiling ({size} bytes "
                                       f"do not hold {dtype.name} {list(shape)})")])
        if not mmap or size == offset:
            handle.seek(offset)
            return np.frombuffer(handle.read(), dtype=dtype).reshape(shape).copy()
        return np.memmap(handle, dtype=dtype, mode="r", offset=offset, shape=tuple(shape))


def member_raw(root, entry: dict, dtype, shape):
    """A listed headerless file (cf32, ci16) memory-mapped from its manifest ``data_offset``, opened safely."""
    dtype = np.dtype(dtype)
    with open_member(root, entry["name"]) as handle:
        size = os.fstat(handle.fileno()).st_size
        offset = entry.get("data_offset", 0)
        if offset + int(np.prod(shape, dtype=object)) * dtype.itemsize != size:
            raise BundleError([Problem(str(Path(root) / entry["name"]), "", f"corrupted or edited after compiling "
                                       f"({size} bytes, data from byte {offset} hold no {list(shape)} {dtype.name})")])
        return np.memmap(handle, dtype=dtype, mode="r", offset=offset, shape=tuple(shape))


def member_json(root, name: str, *, max_bytes: int):
    """A JSON file of a bundle (SigMF metadata) opened safely and read strictly (size cap, depth, duplicate keys)."""
    with open_member(root, name) as handle:
        data = fmt.read_capped(handle, max_bytes)
    try:
        return fmt.strict_json(data, max_bytes=max_bytes)
    except ValueError as error:
        raise BundleError([Problem(str(Path(root) / name), "", f"not readable JSON: {error}")]) from None


def _no_duplicate_keys(pairs):
    keys = [k for k, _ in pairs]
    duplicates = sorted({k for k in keys if keys.count(k) > 1})
    if duplicates:
        raise ValueError(f"duplicate key {duplicates[0]!r}")
    return dict(pairs)


def _no_constant(name):
    raise ValueError(f"{name} is not JSON")


def _schema_message(error) -> str:
    if error.validator == "required":
        return error.message.replace("is a required property", "is missing")
    if error.validator == "additionalProperties":
        return error.message
    return error.message if len(error.message) < 160 else error.message[:157] + "..."


def _consistency_problems(manifest: dict, source: str) -> list[Problem]:
    problems = []

    def problem(pointer, message):
        problems.append(Problem(source, pointer, message))

    n, rx, tx, taps = (manifest[k] for k in ("n_samples", "n_rx", "n_tx", "n_taps"))
    if len(manifest["taps"]) != taps:
        problem("/taps", f"lists {len(manifest['taps'])} taps, n_taps is {taps}")
    rate = manifest["update_rate_hz"]
    low, high = RATE_RANGE_HZ
    rates = [("/update_rate_hz", rate)] + ([("/fir/sample_rate_hz", manifest["fir"]["sample_rate_hz"])]
                                            if manifest["fir"] is not None else [])
    for pointer, value in rates:
        if not low <= value <= high:
            problem(pointer, f"{value:g} Hz lies outside {low:g} to {high:g} Hz (no bundle is made so)")
    edges = [t.get("max_doppler_hz") for t in manifest["taps"] if isinstance(t, dict) and t.get("fading") != "static"]
    edges = [e for e in edges if isinstance(e, (int, float)) and not isinstance(e, bool) and e > 0]
    if edges and rate / min(edges) > MAX_UPDATE_TO_DOPPLER:
        problem("/update_rate_hz", f"{rate:g} Hz is {rate / min(edges):.3g} x the smallest maximum Doppler "
                f"{min(edges):g} Hz, above the limit of {MAX_UPDATE_TO_DOPPLER:g} x (no bundle is made so)")
    if problems:
        return problems
    if abs(manifest["duration_s"] - n / rate) > 1.0 / rate * (1 + 1e-9):
        problem("/duration_s", f"{manifest['duration_s']} s disagrees with n_samples / update_rate_hz = {n / rate} s")
    files = manifest["files"]
    names = [e["name"] for e in files]
    for name in sorted({x for x in names if names.count(x) > 1}):
        problem("/files", f"lists {name} twice")
    if MANIFEST_NAME in names:
        problem("/files", "must not list manifest.json itself")
    by_role = {}
    for index, entry in enumerate(files):
        by_role.setdefault(entry["role"], []).append((index, entry))
    expect = {"tap_gains": ("tap_gains.npy", "complex64", [n, rx, tx, taps])}
    if manifest["fir"] is not None:
        expect["fir_map"] = ("fir_map.npy", None, [taps, manifest["fir"]["n_fir"]])
        if "fir" in manifest["formats"]:
            expect["fir"] = ("fir.npy", "complex64", [n, rx, tx, manifest["fir"]["n_fir"]])
    elif "fir" in manifest["formats"] or "fir_map" in by_role:
        problem("/fir", "is null, but the bundle lists a FIR map or the fir format")
    for role, (name, dtype, shape) in expect.items():
        found = by_role.get(role, [])
        if len(found) != 1 or found[0][1]["name"] != name:
            problem("/files", f"must list {name} (role {role}) once")
            continue
        index, entry = found[0]
        if entry["shape"] != shape or (dtype and entry["dtype"] != dtype):
            problem(f"/files/{index}", f"{name}: {entry['dtype']} {entry['shape']}, expected {dtype or 'a float/complex'} {shape}")
    for index, entry in enumerate(files):
        message = _layout_problem(entry)
        if message:
            problem(f"/files/{index}", message)
    roles_of_format = {"cf32": "tap_gains_cf32", "ci16": "tap_gains_ci16", "csv": "tap_gains_csv", "sigmf": "sigmf_data"}
    for name, role in roles_of_format.items():
        if (name in manifest["formats"]) != (role in by_role):
            problem("/formats", f"format {name} and the files of role {role} disagree")
    if "ci16" in manifest["formats"] and any("quantisation" not in e for _, e in by_role.get("tap_gains_ci16", [])):
        problem("/files", "the ci16 file lacks its quantisation record")
    problems += _fir_codes_problems(manifest, by_role.get(fmt.FIR_CODES_ROLE, []), source)
    return problems


def _fir_codes_problems(manifest: dict, found: list, source: str) -> list[Problem]:
    """The integer FIR coefficients: at most one file, only with a FIR map and a coefficient bit width."""
    if not found:
        return []
    bits = (((manifest.get("target") or {}).get("constraints")) or {}).get("coefficient_bits")
    if len(found) > 1 or manifest["fir"] is None or bits is None:
        return [Problem(source, "/files", "integer FIR coefficients need one file, a FIR map and a target's "
                                          "coefficient_bits")]
    index, entry = found[0]
    codes = entry.get("coefficient_codes") or {}
    n, rx, tx = (manifest[k] for k in ("n_samples", "n_rx", "n_tx"))
    shape = [n, rx, tx, len(codes.get("columns") or []), 2]
    dtype = "int16" if bits <= 16 else "int32"
    if entry["shape"] != shape or entry["dtype"] != dtype or codes.get("bits") != bits:
        return [Problem(source, f"/files/{index}", f"{entry['name']}: {entry['dtype']} {entry['shape']} on "
                                                   f"{codes.get('bits')} bits, expected {dtype} {shape} on {bits} bits")]
    if any(not 0 <= c < manifest["fir"]["n_fir"] for c in codes["columns"]):
        return [Problem(source, f"/files/{index}", f"{entry['name']}: a path column lies outside the FIR")]
    return []


def _layout_problem(entry: dict) -> str | None:
    """A file entry whose data_offset, shape and dtype do not add up to its size_bytes (None when they do)."""
    offset, size, shape = entry.get("data_offset"), entry.get("size_bytes"), entry.get("shape")
    if not (isinstance(offset, int) and isinstance(size, int)) or isinstance(offset, bool):
        return None  # the schema speaks about types
    if not 0 <= offset <= size:
        return f"{entry['name']}: data_offset {offset} lies outside its {size} bytes"
    try:
        dtype = np.dtype(entry.get("dtype"))
    except TypeError:
        return None  # text, json: no fixed element size
    if dtype.kind not in "iufc" or not isinstance(shape, list) or not all(
            isinstance(n, int) and not isinstance(n, bool) and n >= 0 for n in shape):
        return None
    data = math.prod(shape) * dtype.itemsize
    if offset + data != size:
        return (f"{entry['name']}: data_offset {offset} + {data} bytes of {dtype.name} {shape} "
                f"!= size_bytes {size}")
    return None


def _is_safe_entry(entry) -> bool:
    name = entry.get("name") if isinstance(entry, dict) else None
    return isinstance(name, str) and name != "" and not name.startswith("/") and all(
        part not in ("", ".", "..") for part in name.split("/")
    )


def _npy_header(handle, entry: dict):
    """``(problem or None, dtype, shape, data offset)`` of an npy file open at its start."""
    try:
        version = np.lib.format.read_magic(handle)
        read_header = np.lib.format.read_array_header_1_0 if version == (1, 0) else np.lib.format.read_array_header_2_0
        shape, fortran, dtype = read_header(handle, max_header_size=1 << 16)
        offset = handle.tell()
    except (OSError, ValueError, TypeError, SyntaxError) as error:
        return f"npy header unreadable: {_short_repr(str(error), 120)}", None, None, None
    if list(shape) != entry.get("shape") or dtype.name != entry.get("dtype") or fortran or dtype.hasobject:
        return (f"npy header says {dtype.name} {list(shape)}, the manifest {entry.get('dtype')} {entry.get('shape')}",
                dtype, shape, offset)
    if offset != entry.get("data_offset"):
        return f"npy data start at byte {offset}, the manifest says {entry.get('data_offset')}", dtype, shape, offset
    return None, dtype, shape, offset


def _plain_json(value):
    """numpy scalars/arrays -> JSON-native values (and a deep copy)."""
    return json.loads(json.dumps(value, default=_json_default, allow_nan=False))


def _json_default(value):
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, (Path, os.PathLike)):
        return os.fspath(value)
    raise TypeError(f"a manifest value of type {type(value).__name__} is not JSON")


def _existing_ancestor(path: Path) -> Path:
    while not path.exists():
        path = path.parent
    return path


def _make_parents(parent: Path) -> list[Path]:
    """Create missing parent directories; return those made (outermost first)."""
    missing = []
    while not parent.exists():
        missing.append(parent)
        parent = parent.parent
    if not parent.is_dir():
        raise InputError(f"{parent}: is not a directory")
    made = []
    for directory in reversed(missing):
        try:
            os.mkdir(directory)
        except FileExistsError:
            continue
        made.append(directory)
    return made


_TEMP_NAME = re.compile(r"\.(?P<name>.+)" + re.escape(TEMP_MARKER) + r"(?:old-)?(?P<pid>[0-9]+)-[0-9a-f]+")


def _remove_stale_partials(target: Path) -> None:
    """Remove every temporary folder in OUTDIR's parent left by a process that died (killed).

    Our names only (``.NAME.emucompile-tmp-PID-HEX`` and the ``old-PID-HEX``
    form), any NAME, whose writer PID is not alive on this machine; whatever
    they hold (a killed ``--force`` can leave the old bundle, or a part of it,
    under such a name): none is a bundle anyone asked for. The manifest goes
    first, so that a removal killed in turn leaves no complete-looking folder.
    """
    try:
        names = os.listdir(target.parent)
    except OSError:
        return
    for name in names:
        match = _TEMP_NAME.fullmatch(name)
        if match is None:
            continue
        pid = int(match.group("pid"))
        path = target.parent / name
        if pid == os.getpid() or _process_alive(pid) or path.is_symlink() or not path.is_dir():
            continue
        _remove_tree(path)


def _remove_tree(path: Path) -> None:
    """Delete a bundle-like folder, its manifest first (a kill midway leaves no complete-looking bundle)."""
    with contextlib.suppress(OSError):
        os.unlink(path / MANIFEST_NAME)
    _fault_point("manifest-removed")
    with contextlib.suppress(OSError):
        for entry in sorted(os.scandir(path), key=lambda e: e.name):
            if entry.is_file(follow_symlinks=False):
                os.unlink(entry.path)
                _fault_point("file-removed")
    shutil.rmtree(path, ignore_errors=True)


def _fault_point(name: str) -> None:
    """Test hook: ``EMUCOMPILE_FAULT_KILL_AT=name`` kills this process with SIGKILL here (tests of crash safety)."""
    if os.environ.get("EMUCOMPILE_FAULT_KILL_AT") == name:
        os.kill(os.getpid(), getattr(signal, "SIGKILL", signal.SIGTERM))


def _process_alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def _renameat2(source: Path, destination: Path, flags: int) -> bool:
    """Linux renameat2; False when the system lacks it (the caller falls back)."""
    function = getattr(_libc(), "renameat2", None) if _libc() is not None else None
    if function is None:
        return False
    function.argtypes = [ctypes.c_int, ctypes.c_char_p, ctypes.c_int, ctypes.c_char_p, ctypes.c_uint]
    result = function(_AT_FDCWD, os.fsencode(source), _AT_FDCWD, os.fsencode(destination), flags)
    if result == 0:
        return True
    code = ctypes.get_errno()
    if code in (errno.ENOSYS, errno.EINVAL, errno.ENOTSUP):  # old kernel or filesystem without it
        return False
    raise OSError(code, os.strerror(code), os.fspath(destination))


def _libc():
    global _LIBC
    if _LIBC is None:
        try:
            _LIBC = ctypes.CDLL(None, use_errno=True)
        except OSError:
            _LIBC = False
    return _LIBC or None


_LIBC = None


def _rename_no_replace(source: Path, target: Path, shown) -> None:
    try:
        if _renameat2(source, target, _RENAME_NOREPLACE):
            return
    except FileExistsError:
        raise InputError(f"{shown}: appeared while the bundle was written; not replaced") from None
    if os.path.lexists(target):  # fallback: a small window remains between check and rename
        raise InputError(f"{shown}: appeared while the bundle was written; not replaced")
    os.rename(source, target)


def _replace_directory(new: Path, target: Path) -> Path:
    """Put ``new`` at ``target``; return where the old directory now is (to be deleted)."""
    if _renameat2(new, target, _RENAME_EXCHANGE):
        return new  # the exchange left the old bundle under the temporary name
    aside = target.parent / f".{target.name}{TEMP_MARKER}old-{os.getpid()}-{secrets.token_hex(4)}"
    os.rename(target, aside)
    try:
        os.rename(new, target)
    except BaseException:
        os.rename(aside, target)
        raise
    return aside


def fsync_directory(directory: Path) -> None:
    """Make a rename or a new file in ``directory`` durable (shared by apply and report)."""
    fd = os.open(directory, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


@contextlib.contextmanager
def _held_interrupts():
    """Hold SIGINT/SIGTERM for the duration (main thread only); yields the list of those that arrived."""
    arrived = []
    if threading.current_thread() is not threading.main_thread():
        yield arrived
        return
    saved = {}
    for number in (signal.SIGINT, signal.SIGTERM):
        saved[number] = signal.signal(number, lambda signum, frame: arrived.append(signum))
    try:
        yield arrived
    finally:
        for number, handler in saved.items():
            signal.signal(number, handler)


def _user_error(error: BaseException, outdir) -> EmucompileError | None:
    """The one-line error a user should see for a failed write (None: let it through)."""
    removed = "nothing was written (the partial output was removed)"
    if isinstance(error, EmucompileError):
        return None
    if isinstance(error, KeyboardInterrupt):
        interrupted = WriteInterrupted(f"{outdir}: {'terminated (SIGTERM)' if isinstance(error, Terminated) else 'interrupted'}; {removed}")
        interrupted.exit_code = EXIT_TERMINATED if isinstance(error, Terminated) else EXIT_INTERRUPTED
        return interrupted
    if isinstance(error, OSError):
        where = os.path.basename(error.filename) if error.filename else "the bundle"
        if error.errno in (errno.ENOSPC, errno.EDQUOT):
            return InputError(f"{outdir}: no space left on the device while writing {where}; {removed}", hint="free some space or choose another OUTDIR")
        if error.errno == errno.EFBIG:
            return InputError(f"{outdir}: file size limit reached while writing {where} (ulimit -f); {removed}", hint="raise the limit or write less (--duration, --format)")
        return InputError(f"{outdir}: cannot write {where}: {error.strerror or error}; {removed}")
    return None


def _size_text(n_bytes: int) -> str:
    for unit, size in (("TiB", 1024**4), ("GiB", 1024**3), ("MiB", 1024**2), ("KiB", 1024)):
        if n_bytes >= size:
            return f"{n_bytes / size:.1f} {unit}"
    return f"{n_bytes} bytes"


__all__ = [
    "FORMAT_NAME", "FORMAT_VERSION", "DEFAULT_MAX_SIZE_BYTES", "EXTRA_FORMATS", "TEMP_MARKER",
    "BundleError", "WriteInterrupted", "parse_formats", "BundleLayout", "BundleWriter",
    "write_bundle", "Bundle", "open_bundle", "verify_integrity", "validate_manifest",
    "manifest_schema", "platform_info", "open_member", "verify_members", "member_npy", "member_raw", "member_json",
    "MANIFEST_MAX_BYTES", "RATE_RANGE_HZ", "MAX_UPDATE_TO_DOPPLER",
]
