"""Bundles on disk: layout and manifest, the output formats, atomic writing, reading with integrity checks.

No numerics of the channel and no compiling: it stores and reads what
``compile`` made. May import: ``errors`` (and ``models`` for constants only).
"""
