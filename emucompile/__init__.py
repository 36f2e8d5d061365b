"""emucompile: multipath fading-channel profiles, compiled for FIR channel emulators.

The Python API mirrors the command line::

    import emucompile
    profile = emucompile.load_profile("profiles_demo/warehouse-robot.yaml")

Heavy modules load on first use, so ``import emucompile`` stays fast.
"""

from __future__ import annotations

import importlib

from emucompile._version import __version__
from emucompile.errors import CheckFailed, EmucompileError, InputError, Problem, ProfileError

# public name -> module that defines it (loaded lazily)
_API = {
    "load_profile": "emucompile.profile",
    "check_profile": "emucompile.profile",
    "Profile": "emucompile.profile",
    "Tap": "emucompile.profile",
    "FadingPlan": "emucompile.fading",
    "GENERATOR_VERSION": "emucompile.fading",
    "plan_fading": "emucompile.fading",
    "generate_tap_gains": "emucompile.fading",
    "stream_tap_gains": "emucompile.fading",
}


def __getattr__(name):
    module = _API.get(name)
    if module is None:
        raise AttributeError(f"module 'emucompile' has no attribute {name!r}")
    return getattr(importlib.import_module(module), name)


def __dir__():
    return sorted(list(globals()) + list(_API))


__all__ = [
    "__version__",
    "CheckFailed",
    "EmucompileError",
    "InputError",
    "Problem",
    "ProfileError",
    *_API,
]
