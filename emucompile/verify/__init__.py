"""Verifying numbers against theory: estimators, calibrated tolerances, the exact reference process, checks, Holm.

A bundle's FIR map and direct part come from its manifest; verify never runs the
compile planner. May import: ``models``, ``profile``, ``bundle``, ``errors``.
"""
