"""Replaying a bundle over a waveform: the time-varying FIR, noise, recordings in and out.

May import: ``models``, ``bundle``, ``errors``.
"""
