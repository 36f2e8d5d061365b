"""Where a bundle goes: OUTDIR checked before writing, stale partial output of killed writers removed.

Used by :class:`emucompile.bundle.writer.BundleWriter`: an OUTDIR it may not
replace is refused before anything is written (``--force`` replaces only an
emucompile bundle holding nothing the manifest does not list), missing parents
are made (and removed again on failure), and hidden temporaries left by a
process that died are removed, manifest first.
"""

from __future__ import annotations

import contextlib
import os
import re
import shutil
import signal
from pathlib import Path

from emucompile.bundle.atomic import TEMP_MARKER
from emucompile.bundle.layout import FORMAT_NAME, MANIFEST_NAME, VERIFICATION_DIRECTORY
from emucompile.bundle.reader import _read_manifest
from emucompile.errors import InputError


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
        raise InputError(
            f"{shown}: already exists ({what})", hint="use --force to replace a bundle, or choose another OUTDIR"
        )
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
