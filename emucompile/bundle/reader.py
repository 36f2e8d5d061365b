"""Reading a bundle back: the manifest read once and checked, the arrays memory-mapped, every hash checkable.

:func:`open_bundle` returns a :class:`Bundle` (manifest + memory-mapped
arrays); :func:`verify_integrity` lists every problem of a bundle on disk
(manifest against the schema, files, sizes, headers, SHA-256). Files are
opened through :func:`emucompile.bundle.members.open_member` only; the
formats are read as the registry (:mod:`emucompile.bundle.formats`) says.
"""

from __future__ import annotations

import functools
import os
from pathlib import Path

import numpy as np

from emucompile.bundle import formats, readers
from emucompile.bundle.layout import FORMAT_NAME, FORMAT_VERSION, MANIFEST_MAX_BYTES, MANIFEST_NAME, validate_manifest
from emucompile.bundle.members import BundleError, _is_safe_entry, _npy_header, _short_repr, member_npy, open_member
from emucompile.errors import InputError, Problem


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
        form = formats.get(name)
        entries = self._present(self.entries(form.role), name)
        return form.read(self.path, entries, tuple(self.tap_gains.shape))

    def verify_integrity(self) -> list[Problem]:
        """See :func:`verify_integrity`."""
        return verify_integrity(self.path)

    def _present(self, value, name):
        if value is None or (isinstance(value, list) and not value):
            raise InputError(
                f"{self.path}: the bundle holds no {name} data", hint=f"compile again with --format {name}"
            )
        return value

    def _mapped_npy(self, role, *, mmap=True):
        entry = self.entry(role)
        try:
            return member_npy(self.path, entry, mmap=mmap)
        except OSError as error:
            raise BundleError(
                [Problem(str(self.path / entry["name"]), "", f"cannot be read: {error.strerror or error}")]
            ) from None

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


def verify_integrity(path, *, hashes: bool = True, progress=None) -> list[Problem]:
    """Every problem of a bundle on disk: manifest against the schema, files, sizes, headers, SHA-256.

    Returns an empty list for an intact bundle. A file whose bytes differ
    from what was compiled reads ``FILE: /files/i: corrupted or edited after
    compiling (...)``. Files are hashed in 1 MiB blocks (bounded memory);
    ``hashes=False`` skips the hashing (the quick structural part, for a
    caller that hashes alongside other work and checks the full answer before
    it reports anything). ``progress(name, done)``, when given, is called with
    a file's listed name and its bytes hashed so far after each block (so a
    reader of the same file can keep behind the hash and find its pages cached).
    """
    root = Path(path)
    manifest, problems = _read_manifest(root)
    if manifest is None:
        return problems
    return _integrity_problems(root, manifest, hashes=hashes, progress=progress)


def _integrity_problems(root: Path, manifest: dict, *, hashes: bool, progress=None) -> list[Problem]:
    problems = validate_manifest(manifest, source=str(root / MANIFEST_NAME))
    seen = set()
    for index, entry in enumerate(manifest.get("files") or []):
        if not _is_safe_entry(entry):
            continue
        problem = _member_problem(root, entry, hashes, progress)
        if problem is not None and (problem.file, problem.message) not in seen:
            seen.add((problem.file, problem.message))  # a linked folder is named once, not per file in it
            problems.append(Problem(problem.file, f"/files/{index}", problem.message))
    return problems


def _member_problem(root: Path, entry: dict, hashes: bool, progress=None) -> Problem | None:
    """What is wrong with one listed file (opened safely), or None."""
    file = root / entry["name"]
    try:
        with open_member(root, entry["name"]) as handle:
            size = os.fstat(handle.fileno()).st_size
            if isinstance(entry.get("size_bytes"), int) and size != entry["size_bytes"]:
                return Problem(
                    str(file),
                    "",
                    f"corrupted or edited after compiling ({size} bytes, the manifest says {entry['size_bytes']})",
                )
            header_problem = _npy_header(handle, entry)[0] if entry["name"].endswith(".npy") else None
            if header_problem:
                return Problem(str(file), "", f"corrupted or edited after compiling ({header_problem})")
            if hashes:
                handle.seek(0)
                report = None if progress is None else functools.partial(progress, entry["name"])
                if readers.sha256_file(handle, progress=report) != entry.get("sha256"):
                    return Problem(
                        str(file), "", "corrupted or edited after compiling (SHA-256 differs from the manifest)"
                    )
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


def _read_manifest(directory: Path):
    """``(manifest, problems)``: the parsed manifest or None with the reason."""
    file = directory / MANIFEST_NAME
    if not directory.is_dir():
        return None, [Problem(str(directory), "", "not a directory (a bundle is a directory with a manifest.json)")]
    try:
        with open_member(directory, MANIFEST_NAME) as handle:
            data = readers.read_capped(handle, MANIFEST_MAX_BYTES)
    except BundleError as error:
        if error.missing:
            return None, [Problem(str(directory), "", "not an emucompile bundle: manifest.json is missing")]
        return None, error.problems
    except OSError as error:
        return None, [Problem(str(file), "", f"cannot be read: {error.strerror or error}")]
    try:
        manifest = readers.strict_json(data, max_bytes=MANIFEST_MAX_BYTES)
    except ValueError as error:
        return None, [Problem(str(file), "", f"not a readable manifest: {error}")]
    if not isinstance(manifest, dict):
        return None, [Problem(str(file), "", "not an emucompile manifest (not a JSON object)")]
    if manifest.get("format") != FORMAT_NAME:
        return None, [
            Problem(
                str(file),
                "/format",
                f"not an emucompile bundle manifest (format {_short_repr(manifest.get('format'))})",
            )
        ]
    version = manifest.get("format_version")
    if version != FORMAT_VERSION:
        hint = (
            "written by a newer emucompile; upgrade" if isinstance(version, int) and version > FORMAT_VERSION else None
        )
        return None, [
            Problem(
                str(file),
                "/format_version",
                f"format_version {_short_repr(version)} is not supported (this is {FORMAT_VERSION})",
                hint=hint,
            )
        ]
    return manifest, []


__all__ = ["Bundle", "open_bundle", "verify_integrity", "verify_members"]
