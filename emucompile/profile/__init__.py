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
"""
