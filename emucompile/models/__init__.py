"""Numerics of the channel: closed forms, the fading engine, MIMO, time-varying conditions, the FIR map.

Owns :mod:`~emucompile.models.spectra` (the Doppler-spectrum registry), :mod:`~emucompile.models.theory`
(closed forms), :mod:`~emucompile.models.rates` (rates, filter lengths and least sizes in closed form,
shared by the planner, the engine and ``validate``), :mod:`~emucompile.models.delays` (statistics of a
power delay profile), :mod:`~emucompile.models.fading` (the engine and its keyed random streams),
:mod:`~emucompile.models.mimo`, :mod:`~emucompile.models.conditions`, :mod:`~emucompile.models.grid`
(delay to FIR coefficients; :mod:`~emucompile.models.sinc_table` for a moving delay's updates) and
:mod:`~emucompile.models.channel` (a profile's whole channel over its
links). No files, no CLI, no profile reading. May import: ``errors``.
"""
