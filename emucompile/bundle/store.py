"""The bundle directory (docs/bundle-format.md), one import away: layout, writing, reading back.

The names live in the modules of :mod:`emucompile.bundle` by concern and are
gathered here for callers that want them all (``from emucompile.bundle import store``):

- :mod:`~emucompile.bundle.layout`: :class:`BundleLayout`, the manifest's rules
  (:func:`validate_manifest`), the constants of the format;
- :mod:`~emucompile.bundle.writer`: :class:`BundleWriter`, :func:`write_bundle`
  (all-or-nothing, through :mod:`~emucompile.bundle.atomic`);
- :mod:`~emucompile.bundle.reader`: :func:`open_bundle`, :class:`Bundle`,
  :func:`verify_integrity`, :func:`verify_members`;
- :mod:`~emucompile.bundle.members`: :func:`open_member` and the checked readers of one file;
- :mod:`~emucompile.bundle.formats`: the output formats' registry.

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

from emucompile.bundle.atomic import (
    TEMP_MARKER,
    Terminated,
    WriteInterrupted,
    fsync_directory,
    raise_terminated,
)
from emucompile.bundle.formats import EXTRA_FORMATS, parse_formats
from emucompile.bundle.layout import (
    DEFAULT_MAX_SIZE_BYTES,
    FORMAT_NAME,
    FORMAT_VERSION,
    MANIFEST_MAX_BYTES,
    MANIFEST_NAME,
    MAX_UPDATE_TO_DOPPLER,
    RATE_RANGE_HZ,
    VERIFICATION_DIRECTORY,
    BundleLayout,
    manifest_schema,
    manifest_validator,
    platform_info,
    schema_registry,
    validate_manifest,
)
from emucompile.bundle.members import BundleError, MemberError, member_json, member_npy, member_raw, open_member
from emucompile.bundle.reader import Bundle, open_bundle, verify_integrity, verify_members
from emucompile.bundle.destination import _unlisted_files  # noqa: F401 (tests read it here)
from emucompile.bundle.writer import BundleWriter, write_bundle
from emucompile.errors import EmucompileError, InputError, Problem  # noqa: F401 (as before the split)

__all__ = [
    "FORMAT_NAME",
    "FORMAT_VERSION",
    "DEFAULT_MAX_SIZE_BYTES",
    "EXTRA_FORMATS",
    "TEMP_MARKER",
    "MANIFEST_NAME",
    "VERIFICATION_DIRECTORY",
    "BundleError",
    "MemberError",
    "WriteInterrupted",
    "Terminated",
    "raise_terminated",
    "fsync_directory",
    "parse_formats",
    "BundleLayout",
    "BundleWriter",
    "write_bundle",
    "Bundle",
    "open_bundle",
    "verify_integrity",
    "validate_manifest",
    "manifest_schema",
    "manifest_validator",
    "schema_registry",
    "platform_info",
    "open_member",
    "verify_members",
    "member_npy",
    "member_raw",
    "member_json",
    "MANIFEST_MAX_BYTES",
    "RATE_RANGE_HZ",
    "MAX_UPDATE_TO_DOPPLER",
]
