"""The ``emucompile`` command line (reference: docs/command-line.md): parse, call the library, print, exit.

No numerics live here. Every command is a thin function over the Python API;
errors raised by the library (:class:`emucompile.errors.EmucompileError`)
become one clear line per problem on stderr and the error's exit code:
0 success, 1 a check or target failed, 2 bad input or usage, 3 an internal
error (a bug: ``--debug`` shows its traceback).

Length (about 820 lines, above the package's ~600): one concern, the commands'
options, help texts with examples and printing, fourteen commands of 30-80 lines
each; splitting them by command would scatter the shared error handling and the
order ``--help`` lists them in, for no gain in what a reader must hold at once.
"""

from __future__ import annotations

import contextlib
import os
import re
import sys

import click

from emucompile._version import __version__
from emucompile.bundle import formats as bundle_formats
from emucompile.models.rates import DEFAULT_MAX_SIZE_BYTES, size_text
from emucompile._lazy import LazyModule
from emucompile.errors import (
    EXIT_BAD_INPUT,
    EXIT_BROKEN_PIPE,
    EXIT_INTERNAL,
    EXIT_INTERRUPTED,
    CheckFailed,
    EmucompileError,
    InputError,
    ProfileError,
)

# The library, loaded when a command first uses it: `--version` and `validate` start fast
# (tests/test_startup.py).
card = LazyModule("emucompile.report.card")
compiler = LazyModule("emucompile.compile.compiler")
differ = LazyModule("emucompile.diff")
measuring = LazyModule("emucompile.loop.measure")
outputs = LazyModule("emucompile.report.outputs")
plans = LazyModule("emucompile.campaign")
preset_library = LazyModule("emucompile.profile.presets")
probes = LazyModule("emucompile.loop.probe")
profile_model = LazyModule("emucompile.profile.model")
reader = LazyModule("emucompile.profile.reader")
replay = LazyModule("emucompile.apply.replay")
profile_stats = LazyModule("emucompile.profile.stats")
validation = LazyModule("emucompile.compile.validation")
verifier = LazyModule("emucompile.verify.run")


class _ReportedError(click.ClickException):
    """An error already worded for the user; printed as ``emucompile: error: ...``."""

    def __init__(self, message: str, exit_code: int):
        super().__init__(message)
        self.exit_code = exit_code

    def show(self, file=None):
        stream = file or sys.stderr
        for line in str(self.message).splitlines() or [""]:
            click.echo(f"emucompile: error: {line}", file=stream)


def _debug_option(ctx, param, value):
    """``--debug`` given after a sub-command: the same as before it."""
    if value:
        root = ctx.find_root()
        root.ensure_object(dict)["debug"] = True
    return value


class _Command(click.Command):
    """A sub-command that also takes ``--debug`` (placed after the sub-command's name)."""

    def __init__(self, *args, **kwargs):
        super().__init__(*args, **kwargs)
        self.params.append(click.Option(["--debug"], is_flag=True, expose_value=False, callback=_debug_option,
                                        help="Show full tracebacks of errors (also accepted before the command)."))


class _Group(click.Group):
    """Turns library errors into messages and exit codes; tracebacks only with --debug."""

    command_class = _Command
    group_class = type  # sub-groups are _Group too, their commands _Command

    def invoke(self, ctx):
        try:
            return super().invoke(ctx)
        except BrokenPipeError:
            _quiet_broken_pipe()
        except EmucompileError as error:
            if _debug(ctx):
                raise
            raise _ReportedError(str(error), error.exit_code) from None
        except (click.exceptions.Exit, click.ClickException, click.Abort):
            raise
        except KeyboardInterrupt:
            if _debug(ctx):
                raise
            raise _ReportedError("interrupted", EXIT_INTERRUPTED) from None
        except Exception as error:  # noqa: BLE001 - last line of defence
            if _debug(ctx):
                raise
            raise _ReportedError(
                f"internal error: {type(error).__name__}: {error} "
                "(this is a bug; run with --debug for the traceback and report it)",
                EXIT_INTERNAL,
            ) from None


def _quiet_broken_pipe():
    """The reader of our output went away (``emucompile verify B | head -1``): end quietly, like other tools.

    stdout is pointed at the null device so that the interpreter's last flush
    does not complain; the exit status is the shell's for a SIGPIPE death (141).
    """
    with contextlib.suppress(OSError, ValueError):
        null = os.open(os.devnull, os.O_WRONLY)
        os.dup2(null, sys.stdout.fileno())
    raise click.exceptions.Exit(EXIT_BROKEN_PIPE)


def _debug(ctx) -> bool:
    root = ctx.find_root()
    return bool((root.obj or {}).get("debug")) or os.environ.get("EMUCOMPILE_DEBUG") == "1"


class ByteSize(click.ParamType):
    """A size such as ``8GiB``, ``500MB``, ``1.5G`` or a plain number of bytes."""

    name = "SIZE"
    _UNITS = {
        "": 1, "b": 1,
        "k": 1000, "kb": 1000, "kib": 1024,
        "m": 1000**2, "mb": 1000**2, "mib": 1024**2,
        "g": 1000**3, "gb": 1000**3, "gib": 1024**3,
        "t": 1000**4, "tb": 1000**4, "tib": 1024**4,
    }

    def convert(self, value, param, ctx):
        if isinstance(value, int):
            return value
        match = re.fullmatch(r"\s*([0-9]*\.?[0-9]+)\s*([a-zA-Z]*)\s*", str(value))
        unit = match.group(2).lower() if match else None
        if not match or unit not in self._UNITS:
            self.fail(f"{value!r} is not a size (examples: 8GiB, 500MB, 1e6)", param, ctx)
        return int(float(match.group(1)) * self._UNITS[unit])


def _not_built(what: str):

    raise InputError(f"'{what}' is not supported yet in emucompile {__version__}")


@click.group(cls=_Group, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, "--version", prog_name="emucompile")
@click.option("--debug", is_flag=True, help="Show full tracebacks of errors (for bug reports).")
@click.pass_context
def cli(ctx, debug):
    """Validate, describe, compile and verify multipath fading-channel profiles.

    \b
    A typical run:
      emucompile validate profiles_demo/*.yaml
      emucompile stats profiles_demo/warehouse-robot.yaml
      emucompile compile profiles_demo/warehouse-robot.yaml -o out/robot
      emucompile verify out/robot --report out/robot-report.html
    """
    ctx.ensure_object(dict)
    ctx.obj["debug"] = debug


# -- validate / stats ---------------------------------------------------------


@cli.command(epilog="\b\nExample: emucompile validate profiles_demo/*.yaml --json\n"
             "Example: emucompile validate lab.yaml --target bench-emulator.yaml")
@click.argument("profiles", nargs=-1, required=True, metavar="FILE...")
@click.option("--target", "target_file", metavar="FILE", help="An emulator target file to judge each profile with.")
@click.option("--json", "as_json", is_flag=True, help="Print one verdict per file, with its problems, as strict JSON.")
def validate(profiles, target_file, as_json):
    """Check profile and target files; report every problem as FILE:LINE:COL: /pointer: message.

    A target file is recognised by its content. A profile is checked by the
    schema, the semantic checks and every rule compile applies to its
    compile: block (the same code), warnings included; with --target FILE
    each profile is judged with that target, as compile --target would.
    Every problem goes to stderr, one line each; a verdict per file to
    stdout. Exit 0 when every file is valid (warnings allowed), 2 when any
    has an error.
    """
    _validate_command(profiles, target_file, as_json)


def _validate_command(profiles, target_file, as_json):
    import json

    verdicts = validation.validate_files(profiles, target_file=target_file)
    if as_json:
        click.echo(json.dumps({"valid": all(v.valid for v in verdicts), "files": [v.to_dict() for v in verdicts]},
                              indent=2, allow_nan=False))
    else:
        for verdict in verdicts:
            for problem in verdict.problems:
                click.echo(problem.format(), err=True)
            click.echo(verdict.summary())
    if not all(v.valid for v in verdicts):
        raise click.exceptions.Exit(EXIT_BAD_INPUT)


@cli.command(epilog="\b\nExample: emucompile stats profiles_demo/warehouse-robot.yaml --json")
@click.argument("profile", metavar="PROFILE")
@click.option("--json", "as_json", is_flag=True, help="Print one strict-JSON object (SI units).")
@click.option("--html", "html_file", metavar="FILE",
              help="Also write a profile card: one self-contained HTML page (figures, statistics, taps, text).")
def stats(profile, as_json, html_file):
    """Delay and Doppler statistics of a profile, and its expect: targets.

    Values that are undefined or infinite print as undefined (null in JSON,
    with the reason under "reasons"); rules of thumb are labelled as such.
    Warnings of the profile go to stderr. Exit 0, 1 when an expect: target is
    missed, 2 when the profile is invalid.
    """
    import json

    loaded, problems = profile_model.check_profile(profile)
    if loaded is None:
        raise ProfileError(problems)
    for problem in problems:
        click.echo(problem.format(), err=True)
    statistics = profile_stats.profile_statistics(loaded)
    targets = profile_stats.check_targets(loaded, statistics)
    if as_json:
        document = dict(statistics, source=profile, expect=[t.to_dict() for t in targets])
        click.echo(json.dumps(document, indent=2, allow_nan=False))
    else:
        click.echo(profile_stats.format_statistics(statistics, targets))
    if html_file:
        _write_card(loaded, html_file, as_json)
    missed = [t.quantity for t in targets if not t.met]
    if missed:
        raise CheckFailed(f"{profile}: {len(missed)} of {len(targets)} expect: target(s) missed: "
                          + ", ".join(missed))


def _write_card(profile, html_file, as_json):

    try:
        written = card.write_profile_card(profile, html_file)
    except OSError as error:
        raise InputError(f"{html_file}: cannot write the profile card: {error.strerror or error}") from None
    click.echo(f"wrote the profile card {written}", err=as_json)


# -- compile / reproduce -------------------------------------------------------


@cli.command("compile",
             epilog="\b\nExample: emucompile compile profiles_demo/warehouse-robot.yaml -o out/robot"
                    " --duration 30 --seed 7")
@click.argument("profile", metavar="PROFILE")
@click.option("-o", "--output", "outdir", required=True, metavar="OUTDIR", help="Bundle directory to create.")
@click.option("--duration", "duration_s", type=float, metavar="SECONDS", help="Length of the record.")
@click.option("--update-rate", "update_rate_hz", type=float, metavar="HZ", help="Rate of the tap-gain samples.")
@click.option("--seed", type=click.IntRange(0, 2**64 - 1),
              help="Seed of the random streams, 0 to 2**64 - 1 (recorded in the manifest).")
@click.option("--sample-rate", "sample_rate_hz", type=float, metavar="HZ",
              help="Emulator signal sample rate: adds the FIR map.")
@click.option("--delay-mapping", type=click.Choice(["sinc", "nearest"]), help="How tap delays map onto the FIR grid.")
@click.option("--target", "target_file", metavar="FILE", help="Emulator constraints to fit the profile to.")
@click.option("--format", "formats", metavar="LIST", help=bundle_formats.help_text())
@click.option("--periodic", is_flag=True, default=None,
              help="Make the record loop seamlessly (period = record length).")
@click.option("--method", type=click.Choice(["doppler-filter", "sum-of-sinusoids"]), help="Tap-gain generator.")
@click.option("--force", is_flag=True, help="Replace OUTDIR if it is an existing bundle.")
@click.option(bundle_formats.CSV_ROW_LIMIT_OPTION, "csv_any_size", is_flag=True,
              help=f"Write the csv format above its limit of {bundle_formats.DEFAULT_CSV_MAX_ROWS:,} rows.")
@click.option("--max-size", type=ByteSize(), metavar="SIZE", help="Refuse to write more than this (default 8GiB).")
@click.option("--fit-tolerance-pct", type=float, metavar="PCT",
              help="How far a target fit may move the RMS delay spread, in % of the profile's (default 10).")
@click.option("--accept-fit", is_flag=True,
              help="Accept a target fit beyond that tolerance (recorded in the manifest).")
@click.option("--quiet", is_flag=True, help="No progress bar and no summary.")
@click.option("--accept-missed-targets", is_flag=True, help="Compile although an expect: target is missed (recorded).")
@click.option("--json", "as_json", is_flag=True, help="Print the summary as strict JSON (no progress bar).")
@click.option("--scheduler", metavar="ADDRESS", help="Generate the blocks on the Dask cluster at tcp://HOST:PORT "
              "(OUTDIR on storage its workers share; formats npy and cf32).")
@click.option("--workers", type=click.IntRange(min=1),
              help="Generate the blocks on a local Dask cluster of N processes.")
def compile_command(profile, outdir, quiet, max_size, target_file, **options):
    """Compile a profile into a bundle of tap gains (and FIR map) in OUTDIR.

    Choices not given here come from the profile's compile: block, then from
    the defaults: update rate 64 x the largest Doppler, 10 s, a seed drawn
    from the system (printed, so the run can be repeated with --seed).
    The profile's expect: targets are checked first: a missed one stops here
    with exit 1 unless --accept-missed-targets. The size is estimated
    first; nothing is left behind if the run fails. With a target, a fit
    that moves the RMS delay spread by more than --fit-tolerance-pct is a
    missed target: exit 1, nothing written, unless --accept-fit.
    """
    _compile_command(profile, outdir, quiet, max_size, target_file, options)


def _compile_command(profile, outdir, quiet, max_size, target_file, options):
    import json

    as_json = options.pop("as_json")
    scheduler, workers = options.pop("scheduler"), options.pop("workers")
    quiet = quiet or as_json
    plan = compiler.plan_compile(
        profile, outdir, target=target_file,
        max_size_bytes=DEFAULT_MAX_SIZE_BYTES if max_size is None else max_size, **options,
    )
    for warning in plan.warnings:
        click.echo(f"emucompile: warning: {warning}", err=True)
    if not quiet:
        click.echo(f"compiling {plan.profile.name}: {plan.profile.n_taps} taps x {plan.n_samples} samples "
                   f"at {plan.update_rate_hz:g} Hz, about {size_text(plan.estimated_size_bytes)}", err=True)
    with _progress(plan.n_samples, "compiling", quiet) as update:
        if scheduler is None and workers is None:
            result = compiler.run_plan(plan, progress=update)
        else:

            result = plans.compile_spread(plan=plan, scheduler=scheduler, workers=workers, progress=update)
    if as_json:
        click.echo(json.dumps(result.to_dict(), indent=2, allow_nan=False))
    elif not quiet:
        click.echo(result.summary())


@cli.command(epilog="\b\nExamples:\n  emucompile reproduce out/robot\n  emucompile reproduce out/robot --json")
@click.argument("outdir", metavar="OUTDIR")
@click.option("--json", "as_json", is_flag=True, help="Print the verdict and every file's hashes as strict JSON.")
def reproduce(outdir, as_json):
    """Regenerate every data file of a bundle from its manifest and compare: identical, within tolerance, or different.

    Each file the manifest lists is written again (in a temporary directory,
    removed afterwards) and its bytes compared with the manifest's SHA-256 and
    with the file on disk; every file that differs is named, with why. Exit 0
    when identical, or equal within the stated tolerance on another platform
    or library version (said so); 1 when different.
    """
    _reproduce_command(outdir, as_json)


def _reproduce_command(outdir, as_json):
    import json

    with _progress(None, "regenerating", as_json) as update:
        result = compiler.reproduce_bundle(outdir, progress=update)
    if as_json:
        click.echo(json.dumps(dict(result.to_dict(), bundle=str(outdir)), indent=2, allow_nan=False))
    else:
        click.echo(f"{outdir}: {result.message}")
        for entry in result.files:
            click.echo(f"  {entry.name}: {entry.status}")
    if not result.ok:
        raise CheckFailed(f"{outdir}: {len(result.differing)} of {len(result.files)} file(s) not reproduced: "
                          + ", ".join(result.differing))


# -- diff ------------------------------------------------------------------------------


@cli.command(epilog="\b\nExamples:\n  emucompile diff lab-v1.yaml lab-v2.yaml\n"
             "  emucompile diff out/robot-a out/robot-b --json\n"
             "  emucompile diff lab.yaml tdl-c-300.yaml --tolerance power_db=0.1 --tolerance delay_ns=1")
@click.argument("a", metavar="A")
@click.argument("b", metavar="B")
@click.option("--tolerance", "tolerances", multiple=True, metavar="NAME=VALUE",
              help="Override a tolerance: delay_ns (0.01), power_db (0.01), k_db (0.01), doppler_hz (0.001), "
                   "phase_deg (0.01), correlation (1e-9), relative (1e-9). Repeatable.")
@click.option("--json", "as_json", is_flag=True, help="Print the comparison as strict JSON.")
def diff(a, b, tolerances, as_json):
    """What changed between two profiles, or two bundles (their profiles and generation settings).

    Both are compared resolved (presets expanded, powers scaled, units in
    SI): header, taps matched by delay (added, removed, changed: old -> new),
    fading, K, spectra, MIMO, conditions, compile settings; then the
    statistics side by side. For two bundles, also whether they would hold
    the same data bytes. Exit 0 when they describe the same channel (within
    the tolerances), 1 when the channel differs, 2 on bad input.
    """
    _diff_command(a, b, tolerances, as_json)


def _diff_command(a, b, tolerances, as_json):
    import json

    overrides = {}
    for item in tolerances:
        name, _, value = item.partition("=")
        try:
            overrides[name.strip()] = float(value)
        except ValueError:
            raise InputError(f"--tolerance {item!r}: give NAME=VALUE, e.g. power_db=0.1") from None
    result = differ.diff_profiles(a, b, tolerances=overrides)
    if as_json:
        click.echo(json.dumps(result.as_dict(), indent=2, allow_nan=False))
    else:
        click.echo(result.summary())
    if not result.same_channel:
        raise CheckFailed(f"{a} and {b} describe different channels: {len(result.channel_changes)} change(s)")


# -- verify ----------------------------------------------------------------------


@cli.command(epilog="\b\nExamples:\n  emucompile verify out/robot --report robot.html\n"
             "  emucompile verify --gains g.npy --profile p.yaml --update-rate 2000")
@click.argument("outdir", required=False, metavar="OUTDIR")
@click.option("--gains", "gains_file", metavar="FILE", help="Foreign tap gains (npy or cf32) instead of a bundle.")
@click.option("--profile", "profile_file", metavar="PROFILE", help="The profile the foreign gains claim to follow.")
@click.option("--update-rate", "update_rate_hz", type=float, metavar="HZ", help="Update rate of the foreign gains.")
@click.option("--json", "as_json", is_flag=True, help="Print the verdicts as strict JSON.")
@click.option("--report", "report_file", metavar="FILE", help="Write the HTML report here.")
@click.option("--no-plots", is_flag=True, help="Skip the figures (faster).")
@click.option("--false-alarm", type=float, default=0.01, show_default=True, metavar="P",
              help="Family-wise false-alarm rate of the verdict.")
@click.option("--delivered", is_flag=True,
              help="Also check what the emulator receives: the ci16 data, the (target-fitted) fir.npy.")
def verify(outdir, gains_file, profile_file, update_rate_hz, as_json, report_file, no_plots, false_alarm, delivered):
    """Check a bundle's integrity and its statistics against theory. Exit 1 if a check fails.

    First the integrity (manifest schema, every file's size, header and
    SHA-256: exit 2 naming a file that changed), then per tap and link the
    mean power, K-factor, envelope, autocorrelation, Doppler PSD, level
    crossings and fades, cross-correlations and the FIR map, on a decimated
    copy of each tap. Verdicts are combined (Holm) at the family-wise
    false-alarm rate P. A check that cannot be meaningful says "not
    applicable", never "pass". The report, verification.json and the figures
    go to OUTDIR/verification/ (GAINS.verification/ for --gains) unless
    --report FILE is given (then FILE and FILE-STEM.verification.json).
    """
    import json

    if "numpy" not in sys.modules:
        # verify's statistics are many short vector products: BLAS threads only contend
        # (measured: 1e6 x 12 taps, 8.7 s with OpenBLAS's default threads, 4.5 s with one)
        os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

    if (outdir is None) == (gains_file is None):
        raise InputError("give either OUTDIR (a bundle) or --gains FILE --profile PROFILE --update-rate HZ")
    if gains_file is None and (profile_file is not None or update_rate_hz is not None):
        raise InputError("--profile and --update-rate go with --gains (a bundle carries its own)")
    if gains_file is not None:
        if profile_file is None or update_rate_hz is None:
            raise InputError("--gains needs --profile PROFILE and --update-rate HZ")
        if delivered:
            raise InputError("--delivered applies to bundles (foreign gains are what they are)")
        with _progress(None, "verifying", as_json) as update:
            result = verifier.verify_gains(gains_file, profile_file, update_rate_hz, false_alarm=false_alarm,
                                           progress=update)
        directory = verifier.default_output_directory(gains_file, foreign=True)
    else:
        with _progress(None, "verifying", as_json) as update:
            result = verifier.verify_bundle(outdir, false_alarm=false_alarm, delivered=delivered, progress=update)
        directory = verifier.default_output_directory(outdir)
    try:
        written = outputs.write_outputs(result, directory=None if report_file else directory,
                                        report_file=report_file, plots=not no_plots)
    except OSError as error:
        if report_file:
            raise InputError(f"{report_file}: cannot write the report: {error.strerror or error}") from None
        click.echo(f"emucompile: warning: report not written to {directory}: {error.strerror or error} "
                   "(use --report FILE elsewhere)", err=True)
        written = []
    if as_json:
        click.echo(json.dumps(result.to_dict(), indent=2, allow_nan=False))
    else:
        click.echo(result.summary())
        if written:
            click.echo("wrote " + ", ".join(str(p) for p in written))
    if not result.passed:
        failed = result.failed
        raise CheckFailed(f"{outdir or gains_file}: {len(failed)} check(s) failed: "
                          + ", ".join(verifier._check_label(c) for c in failed[:8])
                          + (" ..." if len(failed) > 8 else ""))


# -- presets -----------------------------------------------------------------------


@cli.group(epilog="\b\nExamples:\n  emucompile presets list\n  emucompile presets show tdl-c --delay-spread-ns 300")
def presets():
    """Channel models of open standards (3GPP, ITU-R)."""


@presets.command("list", epilog="\b\nExamples:\n  emucompile presets list\n  emucompile presets list --json")
@click.option("--json", "as_json", is_flag=True, help="Print the list as strict JSON (SI units).")
def presets_list(as_json):
    """List the presets: name, taps, RMS delay spread, check against the standard, source.

    "confirmed": every delay and power compared with the standard's own
    table; "recalled, not confirmed": not (the reason is in --json,
    check_statement).

    The TR 38.901 models (tdl-a ... tdl-e) have normalised delays: their RMS
    delay spread is shown normalised (about 1) and scales to the wanted one
    with --delay-spread-ns (presets show) or extends.delay_spread_ns.
    """
    import json

    records = preset_library.list_presets()
    if as_json:
        click.echo(json.dumps([r.to_dict() for r in records], indent=2, allow_nan=False))
        return
    click.echo(f"{'name':<7} {'taps':>4}  {'rms delay spread':<38} {'against the standard':<23} source")
    for r in records:
        if r.normalised:
            spread = f"{r.normalised_rms_delay_spread:.4f} normalised (x delay_spread_ns)"
        else:
            spread = f"{r.rms_delay_spread_s * 1e9:.4g} ns"
        click.echo(f"{r.name:<7} {r.n_taps:>4}  {spread:<38} {r.check_state:<23} {r.source}")


@presets.command("show", epilog="\b\nExamples:\n  emucompile presets show tdl-c --delay-spread-ns 300 > lab.yaml\n"
                 "  emucompile presets show epa --format json")
@click.argument("name")
@click.option("--delay-spread-ns", type=float, metavar="X", help="Scale a normalised model to this RMS delay spread.")
@click.option("--format", "output_format", type=click.Choice(["yaml", "json"]), default="yaml", show_default=True,
              help="YAML 1.2 (a comment names the source) or JSON.")
def presets_show(name, delay_spread_ns, output_format):
    """Print a preset as a valid profile (stdout), with its source and Doppler stated.

    The output validates as it is; save it, change it, or build on the preset
    with extends: in a profile of your own.
    """
    import json

    document = preset_library.preset_document(name, delay_spread_ns=delay_spread_ns)
    if output_format == "json":
        click.echo(json.dumps(document, indent=2, allow_nan=False, ensure_ascii=False))
        return
    command = f"emucompile presets show {name}" + (
        f" --delay-spread-ns {delay_spread_ns:g}" if delay_spread_ns is not None else "")
    click.echo(reader.dump_yaml(document, comment=f"{command}\n{document['preset']['source']}; "
                         f"preset data version {document['preset']['data_version']}\n"
                         f"against the standard's text: {preset_library.load_preset(name).check_state}"), nl=False)


# -- apply -------------------------------------------------------------------------


@cli.command(epilog="\b\nExamples:\n"
             "  emucompile apply out/robot burst.sigmf-meta -o faded --snr-db 20 --seed 3\n"
             "  emucompile apply out/robot burst.cf32 -o faded.cf32 --sample-rate 30.72e6 --loop\n"
             "\b\nThe output keeps the input's format (npy, cf32 or SigMF) with its metadata\n"
             "beside it (OUTPUT.json, or the .sigmf-meta): the bundle and its manifest's\n"
             "SHA-256, the start offset and the FIR's bulk delay, the SNR and the noise seed.\n"
             "SNR: noise power over the whole sample-rate band against the nominal output\n"
             "power, input power x the channel's mean power.\n"
             "Before replaying, the bundle files used (tap_gains.npy, fir_map.npy, fir.npy)\n"
             "are checked against the manifest's sizes and SHA-256 (--no-hash-check skips\n"
             "the hashes of a very long bundle); OUTPUT may not lie inside the bundle.")
@click.argument("outdir", metavar="OUTDIR")
@click.argument("input_file", metavar="INPUT")
@click.option("-o", "--output", "output_file", required=True, metavar="OUTPUT",
              help="Output recording (the input's format).")
@click.option("--snr-db", type=float, help="Add white Gaussian noise at this SNR.")
@click.option("--seed", type=click.IntRange(0, 2**128 - 1), help="Seed of the noise (drawn and recorded when absent).")
@click.option("--loop", is_flag=True, help="Loop the bundle when the input is longer.")
@click.option("--sample-rate", "sample_rate_hz", type=float, metavar="HZ",
              help="Sample rate of an npy/cf32 input (required there; SigMF states its own).")
@click.option("--start", "start_s", type=float, default=0.0, show_default=True, metavar="SECONDS",
              help="Bundle time of the first output sample.")
@click.option("--between-updates", type=click.Choice(["linear", "hold"]),
              help="Gains between update instants (default: the bundle target's, else linear).")
@click.option("--force", is_flag=True, help="Replace existing output files.")
@click.option("--quiet", is_flag=True, help="No progress bar and no summary.")
@click.option("--no-hash-check", is_flag=True,
              help="Skip the SHA-256 of the bundle files used (sizes and headers are still checked).")
@click.option("--json", "as_json", is_flag=True, help="Print the summary and the written metadata as strict JSON.")
def apply(outdir, input_file, output_file, snr_db, seed, loop, sample_rate_hz, start_s, between_updates, force, quiet,
          as_json, no_hash_check):
    """Pass an IQ recording through a bundle's time-varying channel."""

    quiet = quiet or as_json
    with _ProgressBar("applying", quiet) as bar:
        result = replay.apply_bundle(
            outdir, input_file, output_file, snr_db=snr_db, seed=seed, loop=loop, sample_rate_hz=sample_rate_hz,
            start_s=start_s, between_updates=between_updates, force=force, progress=bar.update,
            hash_check=not no_hash_check,
        )
    if result.clipped_values:
        click.echo(f"emucompile: warning: {result.clipped_values} I/Q values clipped to the int16 full scale "
                   "of the ci16 output (lower the input level)", err=True)
    if seed is not None and snr_db is None:
        click.echo("emucompile: note: --seed has no effect without --snr-db", err=True)
    if as_json:
        _apply_json(result)
    if quiet:
        return
    record = result.record
    noise = record["noise"]
    power_db = record["channel"]["mean_power_db"]
    click.echo(f"wrote {result.files[0]} and {result.files[1]}")
    click.echo(
        f"  {result.n_samples} samples x {result.n_rx} rx at {result.sample_rate_hz / 1e6:g} MHz; "
        f"channel mean power {'-inf' if power_db is None else f'{power_db:.2f}'} dB; "
        f"bulk delay {record['offsets']['bulk_delay_samples']:g} samples; gains {record['between_updates']}"
        + (f"; bundle looped {record['bundle_wraps']} time(s)" if record["bundle_wraps"] else "")
    )
    if noise is not None:
        click.echo(f"  noise at SNR {noise['snr_db']:g} dB on the nominal output power, seed {noise['seed']}")


def _apply_json(result):
    """``apply --json``: the summary's facts and the metadata written beside the output (docs/json-output.md)."""
    import json

    click.echo(json.dumps({
        "files": [str(p) for p in result.files], "n_samples": result.n_samples, "n_rx": result.n_rx,
        "sample_rate_hz": result.sample_rate_hz, "clipped_values": result.clipped_values,
        "metadata": result.record,
    }, indent=2, allow_nan=False))


# -- closed loop: probe / measure -----------------------------------------------------


@cli.command(epilog="\b\nExamples:\n  emucompile probe -o lab/probe --sample-rate 30.72e6 --bundle out/robot\n"
             "  emucompile probe -o lab/probe --sample-rate 30.72e6 --profile p.yaml --format ci16 --duration 20")
@click.option("-o", "--output", required=True, metavar="PROBE",
              help="Base name: PROBE.probe.json and the data file(s).")
@click.option("--sample-rate", "sample_rate_hz", required=True, type=float, metavar="HZ",
              help="The generator's sample rate.")
@click.option("--bundle", metavar="B", help="The bundle the emulator will run.")
@click.option("--profile", metavar="P", help="Or the profile it follows.")
@click.option("--duration", "duration_s", type=float, metavar="S", help="Default: the bundle's length, or 200 / f_D.")
@click.option("--format", "output_format", type=click.Choice(["sigmf", "cf32", "ci16"]), default="sigmf",
              show_default=True)
@click.option("--bandwidth", "bandwidth_hz", type=float, metavar="HZ",
              help="Occupied bandwidth (default 0.8 x the rate).")
@click.option("--transmitters", "n_tx", type=int, metavar="N", help="Transmit antennas (default: the profile's).")
@click.option("--force", is_flag=True, help="Replace existing files.")
def probe(output, sample_rate_hz, bundle, profile, duration_s, output_format, bandwidth_hz, n_tx, force):
    """Write a channel-sounding probe (Zadoff-Chu, periodic) for the signal generator.

    Refuses (exit 2) a channel that cannot be sounded: tau_max 2 nu_max >= 1,
    or a period the delays need that repeats too slowly for the Doppler.
    """

    files = probes.write_probe(output, sample_rate_hz, bundle=bundle, profile=profile, duration_s=duration_s,
                        output_format=output_format, bandwidth_hz=bandwidth_hz, n_tx=n_tx, force=force)
    d = files.design
    click.echo(f"wrote {', '.join(str(p) for p in files.data_paths)} and {files.description_path}")
    click.echo(f"  period {d.period_samples} samples ({d.repetition_rate_hz:g} Hz), {d.n_periods} periods after "
               f"{d.preamble_samples} preamble samples, {d.duration_s:g} s; Zadoff-Chu N={d.zc_length} on "
               f"{d.occupied_bins} bins ({d.bandwidth_hz / 1e6:g} MHz); {d.n_tx} transmitter(s)")


@cli.command(epilog="\b\nExamples:\n"
             "  emucompile measure cap.sigmf-meta --probe lab/probe --bundle out/robot -o out/m1\n"
             "  emucompile measure rx0.cf32 rx1.cf32 --probe lab/probe --profile p.yaml"
             " --sample-rate 30.72e6 --json")
@click.argument("capture", nargs=-1, required=True, metavar="CAPTURE...")
@click.option("--probe", "probe_file", required=True, metavar="PROBE",
              help="The probe's description (PROBE.probe.json).")
@click.option("--bundle", metavar="B", help="Judge against the loaded bundle (and its profile).")
@click.option("--profile", metavar="P", help="Or against a profile only.")
@click.option("-o", "--output", "outdir", metavar="OUTDIR",
              help="Write gains.npy, measurement.json and report.html here.")
@click.option("--report", "report_file", metavar="FILE", help="Write the HTML report here.")
@click.option("--json", "as_json", is_flag=True, help="Print the measurement as strict JSON.")
@click.option("--sample-rate", "sample_rate_hz", type=float, metavar="HZ",
              help="Rate of a raw capture (must be the probe's).")
@click.option("--cfo-hz", type=float, metavar="HZ", help="A known frequency offset to remove.")
@click.option("--between-updates", type=click.Choice(["linear", "hold"]), help="The emulator's gains between updates.")
@click.option("--limit-db", type=float, metavar="DB", help="Error the lab allows beyond the noise (default -30 dB).")
@click.option("--false-alarm", type=float, default=0.01, show_default=True, metavar="P")
@click.option("--force", is_flag=True, help="Overwrite an earlier measurement in OUTDIR.")
def measure(capture, probe_file, bundle, profile, outdir, report_file, as_json, sample_rate_hz, cfo_hz,
            between_updates, limit_db, false_alarm, force):
    """Estimate the channel a capture of the emulator's output went through, and judge it.

    Exit 0 when it reproduces the bundle and follows the profile, 1 naming the
    fault, 2 for bad input (no probe found, another sample rate, not enough data).
    """
    import json

    if "numpy" not in sys.modules:  # as for verify: many small products; BLAS threads only contend
        os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

    with _progress(None, "measuring", as_json) as update:
        result = measuring.measure_capture(list(capture), probe_file, bundle=bundle, profile=profile, outdir=outdir,
                                 report_file=report_file, sample_rate_hz=sample_rate_hz, cfo_hz=cfo_hz,
                                 between_updates=between_updates, limit_db=limit_db, false_alarm=false_alarm,
                                 force=force, progress=update)
    for warning in result.warnings:
        click.echo(f"emucompile: warning: {warning}", err=True)
    click.echo(json.dumps(result.record, indent=2, allow_nan=False) if as_json else result.summary())
    if result.files and not as_json:
        click.echo("wrote " + ", ".join(str(p) for p in result.files))
    if result.status == "not enough data":
        raise InputError(f"{capture[0]}: not enough data for the profile's checks (no verdict): capture longer")
    if not result.passed:
        raise CheckFailed(f"{capture[0]}: " + "; ".join(f["text"] for f in result.faults[:4]))


class _ProgressBar:
    """A click progress bar on stderr fed by a library callback ``(done, total)``; nothing when quiet."""

    def __init__(self, label: str, quiet: bool):
        self.label = label
        self.quiet = quiet
        self._bar = None

    def __enter__(self):
        return self

    def update(self, done: int, total: int) -> None:
        if self.quiet:
            return
        if self._bar is None:
            self._bar = click.progressbar(length=total, label=self.label, file=sys.stderr)
            self._bar.__enter__()
        self._bar.update(done - self._bar.pos)

    def __exit__(self, exc_type, exc, tb):
        if self._bar is not None:
            self._bar.__exit__(exc_type, exc, tb)
        return False


# -- campaign --------------------------------------------------------------------------


@cli.command(epilog="\b\nExamples:\n  emucompile campaign profiles_demo/tdl-matrix-campaign.yml --list\n"
             "  emucompile campaign profiles_demo/tdl-matrix-campaign.yml -o out/tdl-matrix --workers 2\n"
             "  emucompile campaign plan.yaml -o /shared/matrix --scheduler tcp://10.0.0.5:8786\n"
             "\b\nWith --scheduler the workers write the bundles: DIR must be on storage every\n"
             "worker mounts at the same path (checked before anything starts).")
@click.argument("plan_file", metavar="PLAN")
@click.option("-o", "--output", "outdir", metavar="DIR", help="Campaign directory (made, or reused to resume).")
@click.option("--list", "list_only", is_flag=True, help="Show the cases the plan expands into; run nothing.")
@click.option("--scheduler", metavar="ADDRESS", help="Run on the Dask cluster at tcp://HOST:PORT.")
@click.option("--workers", type=click.IntRange(min=1), help="Processes of the local cluster (default: the cores).")
@click.option("--recheck", is_flag=True, help="Hash every file of a finished case again before reusing it.")
@click.option("--json", "as_json", is_flag=True, help="Print the cases (with --list) or campaign.json as strict JSON.")
@click.option("--quiet", is_flag=True, help="No progress lines on stderr.")
def campaign(plan_file, outdir, list_only, scheduler, workers, recheck, as_json, quiet):
    """Compile and verify every case of a test plan as Dask tasks; write DIR/index.html.

    A case already done (same resolved profile, settings, generator version
    and hashes) is skipped, so a rerun resumes an interrupted campaign. Exit
    0 when every case passed, 1 when a check failed (or a case could not
    run), 2 when the plan is bad.
    """
    import json

    plan = plans.expand_plan(plan_file)
    if list_only:
        click.echo(json.dumps([c.to_dict() for c in plan.cases], indent=2, allow_nan=False) if as_json
                   else plans.list_text(plan))
        return
    if outdir is None:
        raise InputError("give -o DIR (the campaign directory), or --list")
    result = plans.run_campaign(plan, outdir, scheduler=scheduler, workers=workers, recheck=recheck,
                                progress=None if quiet else plans.ProgressPrinter())
    click.echo(result.campaign_json.read_text("utf-8") if as_json else result.summary(), nl=not as_json)
    if not result.passed:
        counts = result.counts()
        raise CheckFailed(f"{plan_file}: {counts['failed']} case(s) failed a check, {counts['error']} in error, "
                          f"{counts['not run']} not run (see {result.index_html})")


# -- helpers shared by commands ---------------------------------------------------------


class _progress:
    """A click progress bar on stderr, or nothing (``--quiet``, or stderr not a terminal).

    Used as ``with _progress(total, label, quiet) as update: work(progress=update)``;
    ``update(done, total)`` is the library's progress callback.
    """

    def __init__(self, total, label, quiet):
        self.total, self.label = total, label
        self.enabled = not quiet and sys.stderr.isatty()
        self.bar = None
        self.done = 0

    def __enter__(self):
        return self.update

    def update(self, done, total):
        if not self.enabled:
            return
        if self.bar is None:
            self.bar = click.progressbar(length=total, label=self.label, file=sys.stderr)
            self.bar.__enter__()
        self.bar.update(done - self.done)
        self.done = done

    def __exit__(self, *exc):
        if self.bar is not None:
            self.bar.__exit__(*exc)
        return False


def main(argv=None):
    """Entry point of the console script and of ``python -m emucompile``."""
    cli.main(args=argv, prog_name="emucompile")


__all__ = ["cli", "main", "EXIT_BAD_INPUT", "EXIT_INTERNAL"]
