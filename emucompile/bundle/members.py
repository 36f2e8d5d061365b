"""The one way a bundle's files are opened for reading: safely, and checked against their manifest entry.

Every reader of a bundle (verify, reproduce, apply, the formats registry,
:class:`emucompile.bundle.reader.Bundle`) opens its files through
:func:`open_member`: no symbolic link is followed, no FIFO or device is
read, nothing resolves outside the bundle. :func:`member_npy`,
:func:`member_raw` and :func:`member_json` add the checks of an npy header,
a raw file's size and strict JSON.
"""

from __future__ import annotations

import errno
import os
import stat
from pathlib import Path

import numpy as np

from emucompile.bundle import readers
from emucompile.errors import BundleError, InputError, MemberError, Problem  # noqa: F401  (re-exported)


def _short_repr(value, limit: int = 40) -> str:
    text = repr(value) if not isinstance(value, (dict, list)) else type(value).__name__
    return text if len(text) <= limit else text[: limit - 3] + "..."


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
            raise MemberError(
                shown, "is a symbolic link; a bundle's files must be regular files inside it (not followed)"
            ) from None
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
        kind = (
            "a FIFO"
            if stat.S_ISFIFO(mode)
            else "a directory"
            if stat.S_ISDIR(mode)
            else "a socket"
            if stat.S_ISSOCK(mode)
            else "a device"
            if stat.S_ISCHR(mode) or stat.S_ISBLK(mode)
            else "not a regular file"
        )
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
            raise BundleError(
                [
                    Problem(
                        str(shown),
                        "",
                        f"corrupted or edited after compiling ({size} bytes do not hold {dtype.name} {list(shape)})",
                    )
                ]
            )
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
            raise BundleError(
                [
                    Problem(
                        str(Path(root) / entry["name"]),
                        "",
                        f"corrupted or edited after compiling "
                        f"({size} bytes, data from byte {offset} hold no {list(shape)} {dtype.name})",
                    )
                ]
            )
        return np.memmap(handle, dtype=dtype, mode="r", offset=offset, shape=tuple(shape))


def member_json(root, name: str, *, max_bytes: int):
    """A JSON file of a bundle (SigMF metadata) opened safely and read strictly (size cap, depth, duplicate keys)."""
    with open_member(root, name) as handle:
        data = readers.read_capped(handle, max_bytes)
    try:
        return readers.strict_json(data, max_bytes=max_bytes)
    except ValueError as error:
        raise BundleError([Problem(str(Path(root) / name), "", f"not readable JSON: {error}")]) from None


def _is_safe_entry(entry) -> bool:
    name = entry.get("name") if isinstance(entry, dict) else None
    return (
        isinstance(name, str)
        and name != ""
        and not name.startswith("/")
        and all(part not in ("", ".", "..") for part in name.split("/"))
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
        return (
            f"npy header says {dtype.name} {list(shape)}, the manifest {entry.get('dtype')} {entry.get('shape')}",
            dtype,
            shape,
            offset,
        )
    if offset != entry.get("data_offset"):
        return f"npy data start at byte {offset}, the manifest says {entry.get('data_offset')}", dtype, shape, offset
    return None, dtype, shape, offset


short_repr = _short_repr

__all__ = [
    "BundleError",
    "MemberError",
    "Problem",
    "open_member",
    "member_npy",
    "member_raw",
    "member_json",
    "short_repr",
]
