"""Writing files so that a reader sees all of them or none: the one home of atomic writing.

Every writer of the package goes through here: the bundle writer
(:mod:`emucompile.bundle.writer`), apply's output, verify's JSON and figures,
the HTML reports and the campaign's index. The rules:

1. Write into a hidden sibling ``.NAME.emucompile-tmp-PID-HEX``
   (:func:`temporary_sibling`; same directory, so the same filesystem), fsync it.
2. Rename it into place: :func:`place` for a file (replacing, or "no-clobber":
   refusing when ``NAME`` exists, with no window between the check and the
   rename, by a hard link), :func:`rename_no_replace` and
   :func:`replace_directory` for a directory (``renameat2`` with
   ``RENAME_NOREPLACE`` / ``RENAME_EXCHANGE`` where Linux has it).
3. fsync the directory (:func:`fsync_directory`), so the rename survives a power cut.
4. On any failure the temporary is removed and the destination is left as it was.

:func:`guarded_write` turns what can stop a write (Ctrl-C, SIGTERM, a full disk,
``ulimit -f``) into one-line :class:`~emucompile.errors.EmucompileError` s.

Examples
--------
>>> import tempfile, pathlib
>>> folder = pathlib.Path(tempfile.mkdtemp())
>>> write_text_atomic(folder / "a.json", "{}\\n").read_text()
'{}\\n'
>>> write_text_atomic(folder / "a.json", "[]\\n", replace=False)
Traceback (most recent call last):
...
FileExistsError: [Errno 17] File exists: ...
>>> sorted(p.name for p in folder.iterdir())  # no temporary left behind
['a.json']
"""

from __future__ import annotations

import contextlib
import ctypes
import errno
import os
import secrets
import signal
import threading
from pathlib import Path

from emucompile.errors import (  # noqa: F401  (Terminated, WriteInterrupted: re-exported)
    EXIT_INTERRUPTED,
    EXIT_TERMINATED,
    EmucompileError,
    InputError,
    Terminated,
    WriteInterrupted,
)

TEMP_MARKER = ".emucompile-tmp-"  # .gitignore ignores *.emucompile-tmp*/
REMOVED = "nothing was written (the partial output was removed)"
_RENAME_NOREPLACE = 1
_RENAME_EXCHANGE = 2
_AT_FDCWD = -100


def raise_terminated(signum, frame):
    raise Terminated()


def temporary_sibling(path, *, kind: str = "") -> Path:
    """A new hidden name beside ``path``: ``.NAME.emucompile-tmp-[KIND]PID-HEX``."""
    path = Path(path)
    return path.parent / f".{path.name}{TEMP_MARKER}{kind}{os.getpid()}-{secrets.token_hex(4)}"


def fsync_directory(directory) -> None:
    """Make a rename or a new file in ``directory`` durable."""
    fd = os.open(directory, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def place(temporary, path, *, replace: bool) -> None:
    """Rename the finished file ``temporary`` to ``path``; without ``replace``, never over an existing file.

    Raises ``FileExistsError`` (naming ``path``) when ``replace`` is False and
    ``path`` exists; ``temporary`` is then left for the caller to remove.
    """
    temporary, path = os.fspath(temporary), os.fspath(path)
    if replace:
        os.replace(temporary, path)
        return
    try:
        os.link(temporary, path)  # fails if ``path`` exists: no window between check and rename
    except FileExistsError:
        raise FileExistsError(errno.EEXIST, os.strerror(errno.EEXIST), path) from None
    except OSError as error:
        if error.errno not in (errno.EPERM, errno.ENOTSUP, errno.EOPNOTSUPP, errno.EMLINK, errno.EXDEV):
            raise
        if os.path.lexists(path):  # a filesystem without hard links: a small window remains
            raise FileExistsError(errno.EEXIST, os.strerror(errno.EEXIST), path) from None
        os.rename(temporary, path)
        return
    os.unlink(temporary)


def write_bytes_atomic(path, data: bytes, *, replace: bool = True) -> Path:
    """Write ``data`` to ``path`` through a fsync-ed temporary sibling and a rename; return the path.

    ``replace=False`` is the no-clobber variant: ``FileExistsError`` when
    ``path`` exists (checked atomically by the rename). Nothing is left behind on failure.
    """
    path = Path(path)
    temporary = temporary_sibling(path)
    try:
        with open(temporary, "xb") as stream:
            stream.write(data)
            stream.flush()
            os.fsync(stream.fileno())
        place(temporary, path, replace=replace)
    finally:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(temporary)
    with contextlib.suppress(OSError):
        fsync_directory(path.parent)
    return path


def write_text_atomic(path, text: str, *, replace: bool = True) -> Path:
    """:func:`write_bytes_atomic` of ``text`` as UTF-8 with ``\\n`` line ends."""
    return write_bytes_atomic(path, text.encode("utf-8"), replace=replace)


# -- directories ---------------------------------------------------------------------


def rename_no_replace(source, target, shown) -> None:
    """Rename the directory ``source`` to ``target``, refusing (InputError) when ``target`` appeared."""
    try:
        if _renameat2(source, target, _RENAME_NOREPLACE):
            return
    except FileExistsError:
        raise InputError(f"{shown}: appeared while the bundle was written; not replaced") from None
    if os.path.lexists(target):  # fallback: a small window remains between check and rename
        raise InputError(f"{shown}: appeared while the bundle was written; not replaced")
    os.rename(source, target)


def replace_directory(new: Path, target: Path) -> Path:
    """Put ``new`` at ``target``; return where the old directory now is (to be deleted)."""
    if _renameat2(new, target, _RENAME_EXCHANGE):
        return new  # the exchange left the old directory under the temporary name
    aside = temporary_sibling(target, kind="old-")
    os.rename(target, aside)
    try:
        os.rename(new, target)
    except BaseException:
        os.rename(aside, target)
        raise
    return aside


def _renameat2(source, destination, flags: int) -> bool:
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


# -- signals and one-line errors --------------------------------------------------------------


@contextlib.contextmanager
def held_interrupts():
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


def install_write_signals() -> dict:
    """Ignore SIGXFSZ (past ``ulimit -f`` the write fails with EFBIG instead of the process dying) and
    raise :class:`Terminated` on SIGTERM when nobody handles it; main thread only. Returns what to restore."""
    saved = {}
    if threading.current_thread() is threading.main_thread():
        if hasattr(signal, "SIGXFSZ"):
            saved[signal.SIGXFSZ] = signal.signal(signal.SIGXFSZ, signal.SIG_IGN)
        if signal.getsignal(signal.SIGTERM) == signal.SIG_DFL:
            saved[signal.SIGTERM] = signal.signal(signal.SIGTERM, raise_terminated)
    return saved


def restore_signals(saved: dict) -> None:
    """Undo :func:`install_write_signals` (empties ``saved``)."""
    while saved:
        number, handler = saved.popitem()
        signal.signal(number, handler)


def write_failure(error: BaseException, shown) -> EmucompileError | None:
    """The one-line error a user should see for a failed write to ``shown`` (None: let it through)."""
    if isinstance(error, EmucompileError):
        return None
    if isinstance(error, KeyboardInterrupt):
        terminated = isinstance(error, Terminated)
        interrupted = WriteInterrupted(f"{shown}: {'terminated (SIGTERM)' if terminated else 'interrupted'}; {REMOVED}")
        interrupted.exit_code = EXIT_TERMINATED if terminated else EXIT_INTERRUPTED
        return interrupted
    if isinstance(error, OSError):
        where = _shown_name(error.filename) if error.filename else "the output"
        if error.errno in (errno.ENOSPC, errno.EDQUOT):
            return InputError(
                f"{shown}: no space left on the device while writing {where}; {REMOVED}",
                hint="free some space or choose another output",
            )
        if error.errno == errno.EFBIG:
            return InputError(
                f"{shown}: file size limit reached while writing {where} (ulimit -f); {REMOVED}",
                hint="raise the limit or write less",
            )
        return InputError(f"{shown}: cannot write {where}: {error.strerror or error}; {REMOVED}")
    return None


@contextlib.contextmanager
def guarded_write(shown):
    """SIGTERM and SIGXFSZ handled while writing; failures re-raised as :func:`write_failure` words them.

    The caller removes its partial output (its own ``with`` block inside this one).
    """
    saved = install_write_signals()
    try:
        yield
    except BaseException as error:
        translated = write_failure(error, shown)
        if translated is None:
            raise
        raise translated from None
    finally:
        restore_signals(saved)


def _shown_name(filename) -> str:
    """A file's name as the user knows it: a temporary sibling is named by its destination."""
    name = os.path.basename(os.fspath(filename))
    if name.startswith(".") and TEMP_MARKER in name:
        name = name[1 : name.index(TEMP_MARKER)]
    return name


__all__ = [
    "TEMP_MARKER",
    "WriteInterrupted",
    "Terminated",
    "raise_terminated",
    "temporary_sibling",
    "fsync_directory",
    "place",
    "write_bytes_atomic",
    "write_text_atomic",
    "rename_no_replace",
    "replace_directory",
    "held_interrupts",
    "install_write_signals",
    "restore_signals",
    "write_failure",
    "guarded_write",
]
