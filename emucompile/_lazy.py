"""Modules imported on first use, so that light commands start fast.

``validate`` of a profile needs none of scipy.stats (about a second to import
on a small machine), yet the modules it reads use it in a few functions.
:class:`LazyModule` stands in for such a module at module level and imports
it on the first attribute access; the code that uses it reads as before
(``stats.rice(...)``). ``tests/test_startup.py`` keeps the light commands
free of the heavy imports.
"""

from __future__ import annotations

import importlib


class LazyModule:
    """A module by name, imported on the first attribute access.

    Examples
    --------
    >>> stats = LazyModule("scipy.stats")
    >>> float(stats.norm.cdf(0.0))
    0.5
    """

    __slots__ = ("_module", "_name")

    def __init__(self, name: str):
        self._name = name
        self._module = None

    def __getattr__(self, attribute):
        module = self._module
        if module is None:
            module = self._module = importlib.import_module(self._name)
        return getattr(module, attribute)

    def __repr__(self) -> str:
        return f"<LazyModule {self._name!r}>"
