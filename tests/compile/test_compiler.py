"""compile and reproduce: the bundle a profile becomes, its safety, and its reproducibility."""

from __future__ import annotations

import inspect
import json
import resource
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from emucompile import open_bundle

from emucompile.compile import compiler
from emucompile.bundle.store import verify_integrity
from emucompile.cli import cli
from emucompile.errors import CheckFailed, InputError
from emucompile.profile.model import load_profile, load_profile_text
from profile_helpers import FIT_EXAMPLE

ROOT = Path(__file__).resolve().parents[2]
# the demo campaign plans (*campaign*.yml) are not profiles
DEMOS = sorted(p for p in (ROOT / "profiles_demo").glob("*.*") if "campaign" not in p.name)

THREE_TAPS = """\
format_version: 1
name: three-taps
description: invented test profile
max_doppler_hz: 50
taps:
  - {delay_ns: 0, power_db: 0, fading: rician, k_db: 6, los_angle_deg: 45}
  - {delay_ns: 130, power_db: -3}
  - {delay_ns: 410, power_db: -9, spectrum: flat}
"""


@pytest.fixture
def profile_file(tmp_path):
    path = tmp_path / "three.yaml"
    path.write_text(THREE_TAPS, encoding="utf-8")
    return path


def _data_hashes(path):
    return {e["name"]: e["sha256"] for e in open_bundle(path).manifest["files"]}


def _run(*args):
    return CliRunner().invoke(cli, [str(a) for a in args], catch_exceptions=False)


# -- the bundle ------------------------------------------------------------------------


def test_compile_writes_a_bundle_with_the_contract_fields(profile_file, tmp_path):
    out = tmp_path / "b"
    result = compiler.compile_profile(profile_file, out, duration_s=4, update_rate_hz=1000, seed=3,
                                      sample_rate_hz=10e6)
    manifest = result.manifest
    for key in ("format", "format_version", "tool_version", "generator_version", "created_utc",
                "profile_sha256", "resolved_profile_sha256", "profile", "seed", "method",
                "update_rate_hz", "n_samples", "duration_s", "n_taps", "periodic", "taps", "mimo",
                "fir", "platform", "files"):
        assert key in manifest, key
    assert manifest["format"] == "emucompile-bundle" and manifest["format_version"] == 1
    assert manifest["n_samples"] == 4000 and manifest["duration_s"] == pytest.approx(4.0)
    # profile_sha256 is of the file's bytes (docs/bundle-format.md)
    import hashlib
    assert manifest["profile_sha256"] == hashlib.sha256(profile_file.read_bytes()).hexdigest()
    bundle = open_bundle(out)
    assert bundle.tap_gains.shape == (4000, 1, 1, 3) and bundle.tap_gains.dtype == np.complex64
    assert bundle.fir_map.shape[0] == 3 and manifest["fir"]["n_fir"] == bundle.fir_map.shape[1]
    # tap i of the manifest is column i; powers after scaling sum to total_power_db = 0 dB
    assert [t["delay_s"] for t in manifest["taps"]] == pytest.approx([0.0, 130e-9, 410e-9])
    assert sum(10 ** (t["power_db"] / 10) for t in manifest["taps"]) == pytest.approx(1.0)
    assert manifest["taps"][0]["k_db"] == pytest.approx(6.0) and manifest["taps"][1]["k_db"] is None
    assert manifest["taps"][0]["los_doppler_hz"] == pytest.approx(50 * np.cos(np.pi / 4))
    assert manifest["taps"][0]["los_phase_deg"] is not None  # drawn from the seed, recorded
    assert verify_integrity(out) == []


def test_same_seed_same_bytes_other_seed_other_bytes(profile_file, tmp_path):
    options = dict(duration_s=3, update_rate_hz=800, sample_rate_hz=5e6, formats="cf32,ci16")
    a = compiler.compile_profile(profile_file, tmp_path / "a", seed=11, **options)
    b = compiler.compile_profile(profile_file, tmp_path / "b", seed=11, **options)
    c = compiler.compile_profile(profile_file, tmp_path / "c", seed=12, **options)
    assert _data_hashes(a.path) == _data_hashes(b.path)
    different = _data_hashes(c.path)
    assert different["tap_gains.npy"] != _data_hashes(a.path)["tap_gains.npy"]
    assert different["fir_map.npy"] == _data_hashes(a.path)["fir_map.npy"]  # no randomness in the map
    # only created_utc may differ between the two manifests
    ma, mb = dict(a.manifest), dict(b.manifest)
    ma.pop("created_utc"), mb.pop("created_utc")
    assert ma == mb


def test_reproduce_says_identical_and_exits_0(profile_file, tmp_path):
    out = tmp_path / "b"
    compiler.compile_profile(profile_file, out, duration_s=2, update_rate_hz=1000, seed=5,
                             sample_rate_hz=20e6)
    result = _run("reproduce", out)
    assert result.exit_code == 0, result.output
    assert "identical" in result.output


def test_reproduce_finds_different_numbers_and_exits_1(profile_file, tmp_path):
    out = tmp_path / "b"
    compiler.compile_profile(profile_file, out, duration_s=2, update_rate_hz=1000, seed=5)
    # Make the manifest claim another seed (a bundle whose numbers do not follow from it).
    manifest_path = out / "manifest.json"
    manifest = json.loads(manifest_path.read_text())
    manifest["seed"] = 6
    manifest_path.write_text(json.dumps(manifest))
    result = _run("reproduce", out)
    assert result.exit_code == 1, result.output
    assert "different" in result.output


def test_reproduce_notices_edited_data_even_with_the_old_hash(profile_file, tmp_path):
    out = tmp_path / "b"
    compiler.compile_profile(profile_file, out, duration_s=2, update_rate_hz=1000, seed=5)
    gains = np.load(out / "tap_gains.npy", mmap_mode="r+")
    gains[100, 0, 0, 1] *= 2
    gains.flush()
    del gains
    assert compiler.reproduce_bundle(out).status == compiler.DIFFERENT


def test_every_demo_profile_compiles_and_reproduces(tmp_path):
    for demo in DEMOS:
        out = tmp_path / demo.stem
        result = _run("compile", demo, "-o", out, "--duration", 2, "--seed", 1, "--quiet")
        assert result.exit_code == 0, (demo, result.output)
        assert verify_integrity(out) == []
        assert compiler.reproduce_bundle(out).status == compiler.IDENTICAL


# -- choices and refusals ---------------------------------------------------------------


def test_defaults_come_from_the_compile_block_then_the_stated_rules(tmp_path):
    text = THREE_TAPS + "compile: {update_rate_hz: 1500, duration_s: 2, seed: 42}\n"
    profile = load_profile_text(text, filename="p.yaml")
    plan = compiler.plan_compile(profile, tmp_path / "x")
    assert (plan.update_rate_hz, plan.n_samples, plan.seed) == (1500.0, 3000, 42)
    assert plan.sources["update_rate_hz"] == "profile"
    # the command line overrides the block
    plan = compiler.plan_compile(profile, tmp_path / "x", update_rate_hz=2000, seed=1)
    assert (plan.update_rate_hz, plan.seed, plan.sources["seed"]) == (2000.0, 1, "option")
    # without either: 64 x the largest Doppler, the default duration, a drawn and recorded seed
    bare = load_profile_text(THREE_TAPS, filename="p.yaml")
    plan = compiler.plan_compile(bare, tmp_path / "x")
    assert plan.update_rate_hz == pytest.approx(compiler.DEFAULT_UPDATE_FACTOR * 50.0)
    assert plan.duration_s == pytest.approx(compiler.DEFAULT_DURATION_S)
    assert plan.sources["seed"] == "drawn" and 0 <= plan.seed < 2**63


def test_update_rate_below_the_minimum_is_refused_with_the_minimum(profile_file, tmp_path):
    result = _run("compile", profile_file, "-o", tmp_path / "x", "--update-rate", 90)
    assert result.exit_code == 2
    assert "minimum" in result.output and "110" in result.output  # 2.2 x 50 Hz
    assert not (tmp_path / "x").exists()


def test_update_rate_below_16x_warns_about_images(profile_file, tmp_path):
    result = _run("compile", profile_file, "-o", tmp_path / "x", "--update-rate", 400,
                  "--duration", 1, "--seed", 1, "--quiet")
    assert result.exit_code == 0
    assert "images" in result.output and "warning" in result.output


def test_size_limit_refuses_before_writing(profile_file, tmp_path):
    result = _run("compile", profile_file, "-o", tmp_path / "x", "--duration", 100,
                  "--update-rate", 10000, "--max-size", "1MB")
    assert result.exit_code == 2
    assert "limit" in result.output and "--max-size" in result.output
    assert not (tmp_path / "x").exists()


def test_existing_directory_needs_force_and_force_needs_a_bundle(profile_file, tmp_path):
    user_dir = tmp_path / "mine"
    user_dir.mkdir()
    (user_dir / "notes.txt").write_text("keep me")
    for extra in ([], ["--force"]):
        result = _run("compile", profile_file, "-o", user_dir, "--duration", 1, "--seed", 1,
                      "--quiet", *extra)
        assert result.exit_code == 2, result.output
        assert (user_dir / "notes.txt").read_text() == "keep me"
    out = tmp_path / "b"
    assert _run("compile", profile_file, "-o", out, "--duration", 1, "--seed", 1, "--quiet").exit_code == 0
    assert _run("compile", profile_file, "-o", out, "--duration", 1, "--seed", 2, "--quiet").exit_code == 2
    assert _run("compile", profile_file, "-o", out, "--duration", 1, "--seed", 2, "--quiet",
                "--force").exit_code == 0
    assert open_bundle(out).manifest["seed"] == 2


def test_bad_profile_is_exit_2_with_its_location(tmp_path):
    bad = tmp_path / "bad.yaml"
    bad.write_text(THREE_TAPS.replace("k_db: 6", "k_db: x"))
    result = _run("compile", bad, "-o", tmp_path / "x")
    assert result.exit_code == 2
    assert "bad.yaml:6" in result.output and "/taps/0/k_db" in result.output
    assert "Traceback" not in result.output


def test_summary_names_the_seed_files_and_fir(profile_file, tmp_path):
    result = _run("compile", profile_file, "-o", tmp_path / "b", "--duration", 1, "--seed", 99,
                  "--sample-rate", 30.72e6, "--format", "cf32")
    assert result.exit_code == 0, result.output
    for text in ("seed        99", "tap_gains.npy", "tap_gains.cf32", "FIR ", "energy kept", "time"):
        assert text in result.output


def test_formats_from_compile_read_back_equal_to_the_npy(profile_file, tmp_path):
    out = tmp_path / "b"
    compiler.compile_profile(profile_file, out, duration_s=1, update_rate_hz=1000, seed=2,
                             sample_rate_hz=10e6, formats="cf32,csv,sigmf,fir,ci16")
    bundle = open_bundle(out)
    gains = np.asarray(bundle.tap_gains)
    assert np.array_equal(bundle.read_format("cf32"), gains)
    fir = bundle.read_format("fir")
    assert np.allclose(fir, gains @ bundle.fir_map.astype(np.float32), rtol=0, atol=1e-6)


# -- looping ----------------------------------------------------------------------------------


def test_periodic_bundle_wraps_without_a_jump(profile_file, tmp_path):
    """The step across the wrap is like the steps inside (seamless looping, docs/bundle-format.md)."""
    out = tmp_path / "loop"
    result = compiler.compile_profile(profile_file, out, duration_s=4, update_rate_hz=1600, seed=8,
                                      periodic=True)
    assert result.manifest["periodic"] is True
    gains = np.asarray(open_bundle(out).tap_gains)[:, 0, 0, :]
    steps = np.abs(np.diff(gains, axis=0))
    wrap = np.abs(gains[0] - gains[-1])
    # The wrap step of each tap must not exceed the largest step inside the record: a periodic
    # record's wrap is just one more step of the same process.
    assert np.all(wrap <= steps.max(axis=0))
    # Exactly periodic: the engine continued past the end repeats the start bit for bit.
    plan = result.plan.engine
    assert np.array_equal(plan.block(len(gains), len(gains) + 100), gains[:100].astype(np.complex64))


# -- safety under interruption and limits ----------------------------------------------------------

BIG = """\
format_version: 1
name: interrupt-me
description: invented test profile, large enough to take a few seconds
max_doppler_hz: 100
taps:
""" + "".join(f"  - {{delay_ns: {50 * i}, power_db: {-i}}}\n" for i in range(12))


def _leftovers(parent: Path, name: str):
    return [p.name for p in parent.iterdir() if name in p.name]


@pytest.mark.slow
def test_sigint_during_a_long_compile_leaves_no_bundle(tmp_path):
    profile = tmp_path / "big.yaml"
    profile.write_text(BIG)
    out = tmp_path / "big-bundle"
    process = subprocess.Popen(
        [sys.executable, "-m", "emucompile", "compile", str(profile), "-o", str(out), "--update-rate",
         "10000", "--duration", "200", "--seed", "1", "--quiet"],
        cwd=ROOT, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
    )
    deadline = time.monotonic() + 60
    while not _leftovers(tmp_path, ".big-bundle.emucompile-tmp-") and time.monotonic() < deadline:
        if process.poll() is not None:
            pytest.fail("compile finished before it could be interrupted: " + process.stderr.read())
        time.sleep(0.02)
    time.sleep(0.3)  # well inside the write
    process.send_signal(signal.SIGINT)
    _, stderr = process.communicate(timeout=60)
    assert process.returncode != 0
    assert "Traceback" not in stderr and "interrupt" in stderr.lower()
    assert not out.exists()
    assert _leftovers(tmp_path, "big-bundle") == []


@pytest.mark.slow
def test_file_size_limit_leaves_no_bundle_and_a_clear_message(tmp_path):
    profile = tmp_path / "big.yaml"
    profile.write_text(BIG)
    out = tmp_path / "limited"

    def limit():
        resource.setrlimit(resource.RLIMIT_FSIZE, (2 * 1024 * 1024, 2 * 1024 * 1024))

    process = subprocess.run(
        [sys.executable, "-m", "emucompile", "compile", str(profile), "-o", str(out), "--update-rate",
         "10000", "--duration", "5", "--seed", "1", "--quiet"],
        cwd=ROOT, capture_output=True, text=True, preexec_fn=limit, timeout=120,
    )
    assert process.returncode != 0
    assert "Traceback" not in process.stderr and "error" in process.stderr
    assert not out.exists()
    assert _leftovers(tmp_path, "limited") == []


def test_plan_refuses_a_profile_object_with_no_taps_sensibly(tmp_path):
    from emucompile.profile.model import Profile

    with pytest.raises(InputError):
        compiler.plan_compile(Profile(name="empty", taps=()), tmp_path / "x", duration_s=1, seed=1)


def test_python_api_names_match_the_command_line():
    import emucompile

    assert emucompile.compile_profile is compiler.compile_profile
    assert emucompile.reproduce_bundle is compiler.reproduce_bundle
    assert callable(emucompile.open_bundle)



# -- emulator targets -----------------------------------------------------------------------------

COARSE_TARGET = """\
format_version: 1
name: coarse-emulator
description: invented emulator constraints
sample_rate_hz: 30.72e6
max_fir_coefficients: 8
delay_step_samples: 4
between_updates: linear
coefficient_bits: 12
"""


def test_target_with_4_sample_resolution_and_8_taps_reports_its_fit_costs(profile_file, tmp_path):
    target = tmp_path / "target.yaml"
    target.write_text(COARSE_TARGET)
    out = tmp_path / "fit"
    result = _run("compile", profile_file, "-o", out, "--target", target, "--duration", 2,
                  "--seed", 1, "--update-rate", 2000)
    assert result.exit_code == 0, result.output
    for text in ("emulator fit", "delay step 4", "RMS delay spread", "mean delay", "power dropped",
                 "update images", "SQNR", "clipped", "taps merged", "taps dropped", "fit tolerance 10 %"):
        assert text in result.output
    manifest = open_bundle(out).manifest
    costs = manifest["target"]["costs"]
    assert manifest["target"]["constraints"]["max_fir_coefficients"] == 8
    # 4 samples at 30.72 MHz = 130.2 ns: taps at 0, 130 and 410 ns fall on grid points 0, 1, 3
    fir_map = open_bundle(out).fir_map
    assert fir_map.shape[1] <= 8 * 4
    assert set(np.flatnonzero(np.any(fir_map != 0, axis=0))) == {0, 4, 12}
    assert costs["delay_step_samples"] == 4 and costs["quantisation"]["bits"] == 12
    assert compiler.reproduce_bundle(out).status == compiler.IDENTICAL


def test_target_that_cannot_hold_the_profile_is_refused(profile_file, tmp_path):
    target = tmp_path / "target.yaml"
    target.write_text(COARSE_TARGET.replace("max_fir_coefficients: 8", "max_fir_coefficients: 2"))
    result = _run("compile", profile_file, "-o", tmp_path / "x", "--target", target, "--seed", 1)
    assert result.exit_code == 2
    assert "cannot hold" in result.output and "max_fir_coefficients" in result.output


def test_target_block_in_the_profile_is_used_and_the_option_overrides_it(tmp_path):
    block = "target:\n" + "".join(f"  {line}\n" for line in COARSE_TARGET.splitlines()
                                   if not line.startswith("format_version"))
    profile = load_profile_text(THREE_TAPS + block, filename="p.yaml")
    plan = compiler.plan_compile(profile, tmp_path / "x", duration_s=1, seed=1, update_rate_hz=2000)
    assert plan.sources["target"] == "profile" and plan.fir.delay_step_samples == 4
    other = tmp_path / "fine.yaml"
    other.write_text(COARSE_TARGET.replace("delay_step_samples: 4", "delay_step_samples: 2"))
    plan = compiler.plan_compile(profile, tmp_path / "x", duration_s=1, seed=1, update_rate_hz=2000,
                                 target=other)
    assert plan.sources["target"] == "option" and plan.fir.delay_step_samples == 2


def test_summary_names_links_and_conditions(tmp_path):
    demos = Path(__file__).resolve().parents[2] / "profiles_demo"
    result = _run("compile", demos / "campus-eva-2x2.yaml", "-o", tmp_path / "mimo", "--duration", "1")
    assert result.exit_code == 0, result.output
    assert "links       2 rx x 2 tx, correlation medium (ts36101" in result.output
    result = _run("compile", demos / "viaduct-high-speed-train.yaml", "-o", tmp_path / "hst", "--duration", "1")
    assert result.exit_code == 0, result.output
    assert "conditions  high speed train, shadowing" in result.output


# -- the API's keywords are the command's options ---------------------------------------

# Where the command spells an option its own way: --target FILE -> target (a file's path
# or a parsed Target), --max-size -> max_size_bytes, --quiet -> no progress callable.
CLI_TO_API = {"target_file": "target", "max_size": "max_size_bytes", "quiet": "progress"}
# How the summary is printed, and where the blocks are generated (the library's way to spread
# them over a cluster is emucompile.campaign.compile_spread): nothing for compile_profile to choose.
CLI_ONLY = {"as_json", "scheduler", "workers", "debug"}  # --debug: every command takes it
API_ONLY = {"plan"}  # a prepared CompilePlan: nothing to type on a command line


def test_compile_profile_and_the_compile_command_accept_the_same_choices():
    command_names = {parameter.name for parameter in cli.commands["compile"].params}
    api = inspect.signature(compiler.compile_profile).parameters
    assert not any(p.kind is p.VAR_KEYWORD for p in api.values())  # every name spelled out
    assert {CLI_TO_API.get(name, name) for name in command_names - CLI_ONLY} == set(api) - API_ONLY
    # ...and the command hands them to plan_compile, which takes the same choices.
    planned = set(inspect.signature(compiler.plan_compile).parameters)
    assert planned == set(api) - API_ONLY - {"progress"}
    assert "Parameters\n    ----------" in compiler.compile_profile.__doc__
    for name in set(api) - {"profile", "outdir"}:
        assert f"\n    {name} :" in compiler.compile_profile.__doc__, name


def test_compile_profile_refuses_a_plan_with_choices(profile_file, tmp_path):
    plan = compiler.plan_compile(profile_file, tmp_path / "b", duration_s=1, update_rate_hz=1000, seed=3)
    with pytest.raises(TypeError, match="seed"):
        compiler.compile_profile(profile_file, tmp_path / "b", plan=plan, seed=4)
    result = compiler.compile_profile(profile_file, tmp_path / "b", plan=plan)
    assert result.manifest["seed"] == 3


# -- tap gains without a bundle: the MIMO block and conditions are honoured or refused ----


@pytest.mark.parametrize("demo", ["campus-eva-2x2.yaml", "viaduct-high-speed-train.yaml"])
def test_generate_tap_gains_refuses_what_it_would_ignore_and_names_the_function_that_does(demo):
    import emucompile

    profile = emucompile.load_profile(ROOT / "profiles_demo" / demo)
    for function in (emucompile.generate_tap_gains, emucompile.stream_tap_gains):
        with pytest.raises(InputError, match="generate_channel_gains|stream_channel_gains") as raised:
            function(profile, 4000.0, 1000, 1)
        assert ("mimo block (2x2)" in str(raised.value)) == (demo == "campus-eva-2x2.yaml")


@pytest.mark.parametrize("demo", ["campus-eva-2x2.yaml", "viaduct-high-speed-train.yaml", "warehouse-robot.yaml"])
def test_generate_channel_gains_equals_the_bundle_of_the_same_arguments(demo, tmp_path):
    import emucompile

    profile = emucompile.load_profile(ROOT / "profiles_demo" / demo)
    result = compiler.compile_profile(profile, tmp_path / "b", duration_s=0.25, seed=11)
    manifest = result.manifest
    rate = manifest["update_rate_hz"]
    n = round(manifest["duration_s"] * rate)
    gains = emucompile.generate_channel_gains(profile, rate, n, 11, method=manifest["method"],
                                              periodic=manifest["periodic"])
    assert np.array_equal(gains, np.asarray(open_bundle(result.path).tap_gains))
    streamed = np.concatenate([g for _, g in emucompile.stream_channel_gains(
        profile, rate, n, 11, chunk_size=777, method=manifest["method"], periodic=manifest["periodic"])])
    assert np.array_equal(streamed, gains)
    if profile.mimo is None and profile.conditions is None:  # SISO: the engine's own taps
        assert np.array_equal(gains[:, 0, 0, :], emucompile.generate_tap_gains(
            profile, rate, n, 11, method=manifest["method"], periodic=manifest["periodic"]))


# -- the fit in plain view: a missed target, its acceptance, the integer coefficients ----------------



@pytest.fixture
def fit_example(tmp_path):
    path = tmp_path / "fit-example.yaml"
    path.write_text(FIT_EXAMPLE)
    return path


def test_a_fit_that_moves_the_delay_spread_beyond_the_tolerance_is_a_missed_target(fit_example, tmp_path):
    # TDL-C (TR 38.901 Table 7.7.2-3) scaled to 100 ns into 8 paths on the 30.72 MHz grid: 6 taps dropped
    out = tmp_path / "missed"
    result = _run("compile", fit_example, "-o", out, "--duration", 1, "--seed", 3)
    assert result.exit_code == 1, result.output
    assert "target missed" in result.output
    assert "from 100.0 ns to 62.6 ns (-37.4 %)" in result.output and "fit tolerance of 10 %" in result.output
    assert "6 tap(s) dropped" in result.output and "--accept-fit" in result.output
    assert not out.exists() and _leftovers(tmp_path, "missed") == []
    # a tolerance wide enough lets it through without acceptance; the manifest says so
    wide = _run("compile", fit_example, "-o", out, "--duration", 1, "--seed", 3, "--fit-tolerance-pct", 40)
    assert wide.exit_code == 0, wide.output
    acceptance = open_bundle(out).manifest["target"]["fit_acceptance"]
    assert acceptance["within_tolerance"] and not acceptance["accepted"] and acceptance["tolerance_pct"] == 40


def test_accept_fit_writes_the_bundle_and_records_the_acceptance(fit_example, tmp_path):
    out = tmp_path / "accepted"
    result = _run("compile", fit_example, "-o", out, "--duration", 1, "--seed", 3, "--accept-fit")
    assert result.exit_code == 0, result.output
    assert "100.0 ns -> 62.6 ns (-37.4 %)" in result.output and "accepted with --accept-fit" in result.output
    manifest = open_bundle(out).manifest
    acceptance = manifest["target"]["fit_acceptance"]
    assert acceptance["accepted"] and not acceptance["within_tolerance"]
    assert acceptance["change_pct"] == pytest.approx(-37.44, abs=0.01)
    assert manifest["target"]["costs"]["fit_rms_delay_spread_s"] == pytest.approx(62.556e-9, rel=1e-4)
    assert compiler.reproduce_bundle(out).status == compiler.IDENTICAL
    with pytest.raises(CheckFailed, match="target missed"):
        compiler.plan_compile(load_profile(fit_example), tmp_path / "api", duration_s=1, seed=3)


def test_integer_fir_coefficients_are_the_fitted_fir_quantised_as_documented(fit_example, tmp_path):
    out = tmp_path / "codes"
    assert _run("compile", fit_example, "-o", out, "--duration", 1, "--seed", 3, "--accept-fit",
                "--format", "fir").exit_code == 0
    bundle = open_bundle(out)
    entry = bundle.entry("fir_coefficients_int")
    codes_record = entry["coefficient_codes"]
    assert entry["name"] == "fir_coefficients.ci16" and entry["dtype"] == "int16" and entry["byte_order"] == "little"
    columns = codes_record["columns"]
    assert columns == np.flatnonzero(np.any(bundle.fir_map != 0, axis=0)).tolist() and len(columns) == 8
    # read the raw file as the documentation says: little-endian int16, (sample, rx, tx, path, I/Q)
    raw = np.fromfile(out / entry["name"], dtype="<i2").reshape(entry["shape"])
    assert raw.shape == (bundle.manifest["n_samples"], 1, 1, 8, 2)
    step = codes_record["step"]
    costs = bundle.manifest["target"]["costs"]["quantisation"]
    assert step == pytest.approx(costs["full_scale"] / 2 ** 11)  # two's complement, 12 bits
    fir = np.asarray(bundle.fir[:, :, :, columns])  # fir.npy: complex64 of the same coefficients
    decoded = (raw[..., 0] + 1j * raw[..., 1]) * step
    # round to nearest: within half a step per part (plus fir.npy's complex64 rounding), no clipping here
    assert codes_record["clipped_values"] == 0 and raw.min() >= -2048 and raw.max() <= 2047
    assert np.max(np.abs(decoded.real - fir.real)) <= 0.5 * step * (1 + 1e-3)
    assert np.max(np.abs(decoded.imag - fir.imag)) <= 0.5 * step * (1 + 1e-3)
    # measured SQNR close to the model (uniform noise, Bennett 1948): within 1 dB
    assert codes_record["sqnr_db"] == pytest.approx(costs["sqnr_db"], abs=1.0)


def test_reproduce_regenerates_every_format_and_names_the_edited_file(profile_file, tmp_path):
    out = tmp_path / "b"
    compiler.compile_profile(profile_file, out, duration_s=1, update_rate_hz=1000, seed=5, sample_rate_hz=10e6,
                             formats="cf32,ci16,csv,sigmf,fir")
    listed = [e["name"] for e in open_bundle(out).manifest["files"]]
    clean = compiler.reproduce_bundle(out)
    assert clean.status == compiler.IDENTICAL and [f.name for f in clean.files] == listed
    assert {f.status for f in clean.files} == {compiler.SAME_BYTES} and len(listed) >= 8
    assert f"{len(listed)} of the {len(listed)} data file(s)" in clean.message
    # A value changed in the csv after compiling: only that file is named, as edited; no other claim.
    text = (out / "tap_gains.csv").read_text()
    (out / "tap_gains.csv").write_text(text[:-2] + "9\n")
    result = _run("reproduce", out)
    assert result.exit_code == 1, result.output
    lines = result.stdout.splitlines()
    assert "edited after compiling: tap_gains.csv" in lines[0] and "()" not in lines[0]
    assert "  tap_gains.csv: edited after compiling" in lines
    assert all(line.endswith(": same bytes") for line in lines[1:] if "tap_gains.csv" not in line)
    # ... and the JSON says the same, with the three hashes of each file
    document = json.loads(_run("reproduce", out, "--json").stdout)
    assert document["status"] == "different" and document["differing"] == ["tap_gains.csv"]
    edited = next(f for f in document["files"] if f["name"] == "tap_gains.csv")
    assert edited["regenerated_sha256"] == edited["recorded_sha256"] != edited["on_disk_sha256"]
    assert not any(p.name.startswith(".emucompile-reproduce-") for p in tmp_path.iterdir())


def test_reproduce_names_the_edited_gains_file_as_edited_not_as_same_bytes(profile_file, tmp_path):
    out = tmp_path / "b"
    compiler.compile_profile(profile_file, out, duration_s=1, update_rate_hz=1000, seed=5, formats="cf32")
    gains = np.load(out / "tap_gains.npy", mmap_mode="r+")
    gains[10, 0, 0, 0] *= 3
    gains.flush()
    del gains
    result = compiler.reproduce_bundle(out)
    statuses = {f.name: f.status for f in result.files}
    assert statuses == {"tap_gains.npy": compiler.EDITED, "tap_gains.cf32": compiler.SAME_BYTES}
    assert result.status == compiler.DIFFERENT and result.max_relative_error > 0.5


def test_force_does_not_lift_the_csv_row_limit_its_own_option_does(profile_file, tmp_path):
    # 600 s at 2000 Hz is 1.2 million rows, above the csv limit of 1,000,000: planned only, nothing written.
    long = dict(duration_s=600, update_rate_hz=2000, seed=1, formats="csv")
    with pytest.raises(InputError, match="rows is above the limit") as refused:
        compiler.plan_compile(profile_file, tmp_path / "b", force=True, **long)
    assert "--csv-any-size" in refused.value.hint
    plan = compiler.plan_compile(profile_file, tmp_path / "b", csv_any_size=True, **long)
    assert plan.layout.csv_max_rows is None and "csv" in plan.formats


def test_the_summary_the_command_prints_comes_from_the_result(profile_file, tmp_path):
    result = compiler.compile_profile(profile_file, tmp_path / "b", duration_s=2, seed=3)
    printed = CliRunner().invoke(cli, ["compile", str(profile_file), "-o", str(tmp_path / "c"), "--duration", "2",
                                       "--seed", "3"])
    assert printed.exit_code == 0, printed.output
    assert result.summary().splitlines()[1:4] == printed.stdout.splitlines()[1:4]  # profile, samples, method
    assert result.to_dict()["seed"] == 3 and result.to_dict()["bundle"] == str(tmp_path / "b")
