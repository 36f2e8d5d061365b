"""Compile a profile into a bundle (docs/bundle-format.md): plan, run, reproduce, one import away.

The names live in the modules of :mod:`emucompile.compile` by step and are
gathered here for callers that want them all (``from emucompile.compile import compiler``):

- :mod:`~emucompile.compile.defaults`: the defaults of the choices;
- :mod:`~emucompile.compile.plan`: :func:`plan_compile` (every choice settled and
  checked before anything is generated), :func:`expect_record`, :func:`compile_findings`;
- :mod:`~emucompile.compile.run`: :func:`compile_profile`, :func:`run_plan`,
  :class:`CompileResult` (with the summary the command line prints), :func:`manifest_fields`;
- :mod:`~emucompile.compile.reproduce`: :func:`reproduce_bundle`.
"""

from __future__ import annotations

from emucompile.compile.defaults import (  # noqa: F401 (the constants, as before the split)
    CHUNK_SAMPLES,
    DEFAULT_DURATION_S,
    DEFAULT_UPDATE_FACTOR,
    DEFAULT_UPDATE_RATE_NO_DOPPLER_HZ,
    WARN_UPDATE_FACTOR,
    chunk_samples,
)
from emucompile.compile.plan import CompilePlan, plan_compile
from emucompile.compile.rules import MIN_UPDATE_FACTOR, compile_findings, expect_record  # noqa: F401
from emucompile.compile.reproduce import (  # noqa: F401 (_replan: a test checks verify never calls it)
    DIFFERENT,
    EDITED,
    IDENTICAL,
    SAME_BYTES,
    WITHIN_TOLERANCE,
    FileComparison,
    ReproduceResult,
    _replan,
    reproduce_bundle,
)
from emucompile.compile.run import CompileResult, compile_profile, manifest_fields, run_plan


__all__ = [
    "CompilePlan",
    "CompileResult",
    "ReproduceResult",
    "plan_compile",
    "compile_profile",
    "compile_findings",
    "run_plan",
    "manifest_fields",
    "reproduce_bundle",
    "FileComparison",
    "expect_record",
    "DEFAULT_UPDATE_FACTOR",
    "WARN_UPDATE_FACTOR",
    "DEFAULT_DURATION_S",
    "IDENTICAL",
    "WITHIN_TOLERANCE",
    "DIFFERENT",
]
