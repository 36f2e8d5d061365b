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
    "fir_map": "emucompile.grid",
    "FirMap": "emucompile.grid",
    "Target": "emucompile.target",
    "check_target": "emucompile.target",
    "parse_target": "emucompile.target",
    "fit_to_target": "emucompile.target",
    "open_bundle": "emucompile.bundle",
    "compile_profile": "emucompile.compiler",
    "plan_compile": "emucompile.compiler",
    "reproduce_bundle": "emucompile.compiler",
    "verify_integrity": "emucompile.bundle",
    "verify_bundle": "emucompile.verify",
    "verify_gains": "emucompile.verify",
    "Verification": "emucompile.verify",
    "load_profile_text": "emucompile.profile",
    "check_profile_text": "emucompile.profile",
    "profile_from_document": "emucompile.profile",
    "profile_schema": "emucompile.profile",
    "profile_statistics": "emucompile.stats",
    "check_targets": "emucompile.stats",
    "coherence_bandwidth": "emucompile.stats",
    "delay_statistics": "emucompile.stats",
    "apply_bundle": "emucompile.apply",
    "apply_channel": "emucompile.apply",
    "read_recording": "emucompile.apply",
    "list_presets": "emucompile.presets",
    "load_preset": "emucompile.presets",
    "preset_document": "emucompile.presets",
    "resolve_extends": "emucompile.presets",
    "PRESET_NAMES": "emucompile.presets",
    "load_target": "emucompile.target",
    "check_target_file": "emucompile.target",
    "MimoSetup": "emucompile.blocks",
    "Conditions": "emucompile.blocks",
    "PresetInfo": "emucompile.blocks",
    "FadingPlan": "emucompile.fading",
    "GENERATOR_VERSION": "emucompile.fading",
    "plan_fading": "emucompile.fading",
    "generate_tap_gains": "emucompile.fading",
    "stream_tap_gains": "emucompile.fading",
    "open_components": "emucompile.components",
    "Components": "emucompile.components",
    "ChannelPlan": "emucompile.channel",
    "generate_channel_gains": "emucompile.channel",
    "stream_channel_gains": "emucompile.channel",
    "make_figures": "emucompile.plots",
    "render_report": "emucompile.report",
    "write_report": "emucompile.report",
    # comparing and exchanging profiles
    "diff_profiles": "emucompile.diff",
    "validate_files": "emucompile.validation",
    "compile_findings": "emucompile.rules",
    "write_profile_card": "emucompile.card",
    # the closed loop
    "write_probe": "emucompile.loop.probe",
    "load_probe": "emucompile.loop.probe",
    "measure_capture": "emucompile.loop.measure",
    # campaigns
    "expand_plan": "emucompile.campaign",
    "run_campaign": "emucompile.campaign",
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
