"""Compiling a profile into a bundle: the rules that decide whether it can be compiled, the plan, the run, reproduction.

May import: ``profile``, ``models``, ``bundle``, ``errors``.
"""
