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
    "load_profile": "emucompile.profile.model",
    "check_profile": "emucompile.profile.model",
    "Profile": "emucompile.profile.model",
    "Tap": "emucompile.profile.model",
    "fir_map": "emucompile.models.grid",
    "FirMap": "emucompile.models.grid",
    "Target": "emucompile.profile.target",
    "check_target": "emucompile.profile.target",
    "parse_target": "emucompile.profile.target",
    "fit_to_target": "emucompile.profile.target",
    "open_bundle": "emucompile.bundle.reader",
    "compile_profile": "emucompile.compile.run",
    "plan_compile": "emucompile.compile.plan",
    "reproduce_bundle": "emucompile.compile.reproduce",
    "verify_integrity": "emucompile.bundle.reader",
    "verify_bundle": "emucompile.verify.run",
    "verify_gains": "emucompile.verify.run",
    "Verification": "emucompile.verify.run",
    "load_profile_text": "emucompile.profile.model",
    "check_profile_text": "emucompile.profile.model",
    "profile_from_document": "emucompile.profile.model",
    "profile_schema": "emucompile.profile.model",
    "profile_statistics": "emucompile.profile.stats",
    "check_targets": "emucompile.profile.stats",
    "coherence_bandwidth": "emucompile.profile.stats",
    "delay_statistics": "emucompile.profile.stats",
    "apply_bundle": "emucompile.apply.run",
    "apply_channel": "emucompile.apply.channel",
    "read_recording": "emucompile.apply.recordings",
    "list_presets": "emucompile.profile.presets",
    "load_preset": "emucompile.profile.presets",
    "preset_document": "emucompile.profile.presets",
    "resolve_extends": "emucompile.profile.presets",
    "PRESET_NAMES": "emucompile.profile.presets",
    "load_target": "emucompile.profile.target",
    "check_target_file": "emucompile.profile.target",
    "MimoSetup": "emucompile.profile.blocks",
    "Conditions": "emucompile.profile.blocks",
    "PresetInfo": "emucompile.profile.blocks",
    "FadingPlan": "emucompile.models.fading",
    "GENERATOR_VERSION": "emucompile.models.fading",
    "plan_fading": "emucompile.models.fading",
    "generate_tap_gains": "emucompile.models.fading",
    "stream_tap_gains": "emucompile.models.fading",
    "open_components": "emucompile.verify.components",
    "Components": "emucompile.verify.components",
    "ChannelPlan": "emucompile.models.channel",
    "generate_channel_gains": "emucompile.models.channel",
    "stream_channel_gains": "emucompile.models.channel",
    "make_figures": "emucompile.report.figures",
    "render_report": "emucompile.report.html",
    "write_report": "emucompile.report.html",
    # comparing and exchanging profiles
    "diff_profiles": "emucompile.diff",
    "validate_files": "emucompile.compile.validation",
    "compile_findings": "emucompile.compile.rules",
    "write_profile_card": "emucompile.report.card",
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
