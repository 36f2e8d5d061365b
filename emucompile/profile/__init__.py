"""Profiles: reading, checking and describing them.

Owns the safe reader (:mod:`~emucompile.profile.reader`), the frozen
:class:`~emucompile.profile.types.Profile` (:mod:`~emucompile.profile.types`), reading and
``extends:`` resolution (:mod:`~emucompile.profile.model`, which re-exports the rest), the
schema's worded errors (:mod:`~emucompile.profile.schema_checks`) and the semantic checks
(:mod:`~emucompile.profile.checker`, :mod:`~emucompile.profile.slips`), blocks (MIMO,
conditions), presets and their tables (:mod:`~emucompile.profile.presets`,
:mod:`~emucompile.profile.preset_tables`), emulator targets and the fit's costs
(:mod:`~emucompile.profile.target`, :mod:`~emucompile.profile.fit_costs`), statistics and
``expect:`` targets (:mod:`~emucompile.profile.stats`).
May import: ``models``, ``errors``.

Notes
-----
``reader.read_document`` turns bytes into a ``Document`` (plain values, positions,
reading problems). The checks add, in one pass: non-finite numbers, the JSON Schema
(``emucompile/schemas/profile-v1.schema.json``; ``iter_errors``, each turned into one
``Problem`` with a hint or a did-you-mean), then the semantic checks. Problems at
pointers whose value the reader had to replace are not repeated by later stages. A
block with schema errors gets no semantic checks. A profile with ``extends:`` is
schema-checked as written, resolved by ``presets.resolve_extends``, then checked as
resolved; problems at places the preset supplied move to ``/extends`` or the override
that touches them. The schema's ``$defs/emulator`` is a copy of the target schema's
keys (a test keeps them equal); a new ``expect:`` quantity goes into
``EXPECT_QUANTITIES`` and the schema's ``expect`` block together (a test compares them).
"""
