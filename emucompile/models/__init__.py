"""Numerics of the channel: closed forms, the fading engine, MIMO, time-varying conditions, the FIR map.

Owns :mod:`~emucompile.models.theory` (closed forms), :mod:`~emucompile.models.fading`
(the engine and its keyed random streams), :mod:`~emucompile.models.mimo`,
:mod:`~emucompile.models.conditions`, :mod:`~emucompile.models.grid` (delay to FIR
coefficients) and :mod:`~emucompile.models.channel` (a profile's whole channel over
its links). No files, no CLI, no profile reading. May import: ``errors``.
"""
