"""Profiles: reading, checking and describing them.

Owns the safe reader (:mod:`~emucompile.profile.reader`), the schema and semantic
checks and the frozen :class:`~emucompile.profile.model.Profile`
(:mod:`~emucompile.profile.model`), blocks (MIMO, conditions), presets and their
data, delay-grid targets, statistics and ``expect:`` targets, likely-slip warnings.
May import: ``models``, ``errors``.
"""
