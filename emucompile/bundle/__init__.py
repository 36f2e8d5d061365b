"""Bundles on disk: layout and manifest, the output formats, atomic writing, reading with integrity checks.

No numerics of the channel and no compiling: it stores and reads what
``compile`` made. May import: ``errors`` (and ``models`` for constants only).

Modules: ``formats`` (the registry: every output format's name, role, files,
writer, reader and dequantiser), ``layout`` (:class:`BundleLayout`: shapes,
formats, size estimate), ``writers`` and ``quantised`` (streaming file writers,
ci16 with clip counts and SQNR), ``writer`` (:class:`BundleWriter`),
``destination`` (OUTDIR checks, removal of killed writers' leftovers),
``atomic`` (write to a temporary sibling, fsync, rename), ``members`` (opening
bundle files safely), ``readers`` (npy, raw and SigMF readers shared with
``apply`` and ``loop``; strict JSON), ``reader`` (:func:`open_bundle`,
:func:`verify_integrity`), ``store`` (the old names, gathered).

Notes
-----
Size first: ``BundleLayout(...).estimated_size_bytes`` (csv and metadata as upper
bounds); :class:`BundleWriter` refuses above ``max_size_bytes`` (default 8 GiB)
and above the free space before anything is created.

Temporary names: ``.NAME.emucompile-tmp-PID-TOKEN`` next to OUTDIR (and
``.NAME.emucompile-tmp-old-PID-TOKEN`` for an old bundle set aside where
``renameat2`` is missing). A leftover of a killed writer (dead PID, no manifest
inside) is removed by the next write. ``force`` replaces only a bundle (a
manifest of our format, no unlisted files); the old bundle, exchanged aside,
loses its manifest first. ``EMUCOMPILE_FAULT_KILL_AT=<point>``
(``destination._fault_point``) SIGKILLs the writer at named points;
``tests/test_hostile.py`` kills there for real. Writing: one-pass SHA-256, fsync,
manifest last, atomic rename; Ctrl-C, SIGTERM, ENOSPC and ``ulimit -f`` leave
nothing.

Reading: every reader opens bundle files through ``members.open_member``
(openat, ``O_NOFOLLOW|O_NONBLOCK``, fstat after open); ``member_npy``,
``member_raw``, ``member_json`` on top of it. Never ``np.load`` or ``open`` a
bundle path directly. Manifest and SigMF metadata go through
``readers.strict_json`` (caps, depth, duplicate keys). Limits and the fuzz tool:
``docs/hostile-input.md``.
"""
