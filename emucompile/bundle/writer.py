"""Writing a bundle directory safely: all of it, or nothing (docs/bundle-format.md).

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

Typical use: see :mod:`emucompile.bundle.store`.
"""

from __future__ import annotations

import contextlib
import json
import math
import os
import queue
import shutil
import threading
from datetime import datetime, timezone
from pathlib import Path

import numpy as np

from emucompile._version import __version__
from emucompile.bundle import atomic, writers
from emucompile.bundle.atomic import WriteInterrupted
from emucompile.bundle.layout import (
    DEFAULT_MAX_SIZE_BYTES,
    FORMAT_NAME,
    FORMAT_VERSION,
    MANIFEST_MAX_BYTES,
    MANIFEST_NAME,
    WRITER_FIELDS,
    _MANIFEST_ORDER,
    BundleLayout,
    _plain_json,
    _size_text,
    platform_info,
    validate_manifest,
)
from emucompile.bundle.destination import (
    _bundle_manifest,
    _check_destination,
    _existing_ancestor,
    _fault_point,
    _make_parents,
    _remove_stale_partials,
    _remove_tree,
)
from emucompile.errors import InputError


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

    def __init__(
        self,
        outdir,
        layout: BundleLayout,
        *,
        force: bool = False,
        max_size_bytes: int | None = DEFAULT_MAX_SIZE_BYTES,
        progress=None,
        threaded: bool = True,
        queue_chunks: int = 2,
    ):
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
                f"{outdir}: the bundle would take about {_size_text(size)}, "
                f"above the limit of {_size_text(max_size_bytes)}",
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
            raise InputError(
                f"{outdir}: the bundle needs about {_size_text(size)}, only {_size_text(free)} free on that disk"
            )
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
        translated = atomic.write_failure(exc, self.outdir)
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
            self._temp = atomic.temporary_sibling(self._target)
            os.mkdir(self._temp)
            self._writers = self.layout._stream_writers()
            for writer in self._writers:
                writer.open(self._temp)
            self._fir_map_entry = None
            if self.layout.fir_map is not None:
                self._fir_map_entry = writers.write_npy_file(
                    self._temp, "fir_map.npy", "fir_map", self.layout.fir_map, ("tap", "fir_coefficient")
                )
            self._extra_writers = [
                writers.ArrayWriter(name, role, dtype, shape, axes, header=True)
                for name, role, dtype, shape, _make, axes in self.layout.extra_arrays
            ]
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
        plain = [w for w in self._writers if type(w) is writers.ArrayWriter]
        if len(plain) != len(self._writers):
            others = ", ".join(w.name for w in self._writers if w not in plain)
            raise InputError(
                f"{others}: written in sample order only, not placed by several workers",
                hint="leave out the formats other than npy and cf32, or compile on one process",
            )
        row_bytes = math.prod(self.layout.gains_shape[1:]) * np.dtype(np.complex64).itemsize
        return [
            {"path": str(self._temp / w.name), "data_offset": len(w._header), "row_bytes": row_bytes} for w in plain
        ]

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
                "description": f"emucompile bundle of profile {(fields.get('profile') or {}).get('name', '?')}, "
                f"seed {fields.get('seed')}",
            }
            for writer in self._writers[1:]:
                entries += writer.close(**context)
            manifest = self._compose_manifest(fields, entries)
            problems = validate_manifest(manifest, source=MANIFEST_NAME)
            if problems:
                raise ValueError("the manifest does not validate:\n" + "\n".join(p.format() for p in problems))
            text = (json.dumps(manifest, indent=2, ensure_ascii=False, allow_nan=False) + "\n").encode("utf-8")
            _fault_point("data-written")
            manifest_file = writers.HashedFile(self._temp / MANIFEST_NAME)
            manifest_file.write(text)
            manifest_file.close()
            _fault_point("manifest-written")
            for folder in {w.directory for w in self._writers if getattr(w, "directory", None)}:
                atomic.fsync_directory(self._temp / folder)
            atomic.fsync_directory(self._temp)
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
        with atomic.held_interrupts():
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
            raise TypeError(
                f"a chunk must be a complex64 numpy array, got {type(gains).__name__} {getattr(gains, 'dtype', '')}"
            )
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
        for _writer, (name, _role, dtype, shape, make, _axes) in zip(self._extra_writers, self.layout.extra_arrays):
            array = np.asarray(make(start, stop), dtype=dtype)
            if array.shape != (stop - start, *tuple(shape)[1:]):
                raise ValueError(
                    f"{name}: rows of shape {array.shape} for samples [{start}, {stop}), planned {tuple(shape)}"
                )
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
        translated = atomic.write_failure(error, self.outdir)
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
        with atomic.held_interrupts() as arrived:
            old = None
            if self._replacing:
                if _bundle_manifest(self._target) is None:
                    raise InputError(f"{self.outdir}: is no longer a bundle; not replaced")
                old = atomic.replace_directory(self._temp, self._target)
            else:
                atomic.rename_no_replace(self._temp, self._target, self.outdir)
            self._state = "committed"  # from here on the bundle is in place and complete
            self._restore_signal_handlers()
            with contextlib.suppress(OSError):
                # Durability of the rename against a power cut; the bundle is already
                # visible and whole, so a failure here is not a failed write.
                atomic.fsync_directory(self._target.parent)
            if old is not None:
                _fault_point("exchanged")
                _remove_tree(old)
        return bool(arrived)

    def _install_signal_handlers(self):
        self._saved_handlers = atomic.install_write_signals()

    def _restore_signal_handlers(self):
        atomic.restore_signals(self._saved_handlers)


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


__all__ = ["BundleWriter", "write_bundle", "WriteInterrupted"]
