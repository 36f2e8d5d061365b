"""Hostile input and faults: nothing read from outside a bundle, nothing written into it, no hang,
no internal error on valid syntax, nothing left by a killed --force.

Bundles are mutated by tests/hostile.py; commands run in child processes
(``run_cli``, with a time limit) wherever a regression could block or kill the
test process. The larger fuzz runs are tools/fuzz_hostile.py; every input that
ever broke the tool is kept under tests/corpus/ and replayed here.
"""

from __future__ import annotations

import json
import os
import resource
import signal
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

import hostile
from emucompile.bundle import store as bd
from emucompile.bundle import formats as fmt
from emucompile.cli import cli

ROOT = Path(__file__).resolve().parent.parent
DEMO = ROOT / "profiles_demo"
CORPUS = Path(__file__).resolve().parent / "corpus"


@pytest.fixture(scope="module")
def intact(tmp_path_factory):
    """A small bundle with every format the mutations touch (cf32, ci16, sigmf, FIR map)."""
    where = tmp_path_factory.mktemp("intact")
    hostile.compile_intact(where, duration="0.5", seed="3")
    np.save(where / "rec.npy", (np.exp(2j * np.pi * 0.01 * np.arange(400))).astype(np.complex64))
    return where


def invoke(args):
    """In-process run (fast) for cases that cannot block: (exit code, stdout, stderr)."""
    result = CliRunner().invoke(cli, [str(a) for a in args])
    return result.exit_code, result.stdout, result.stderr


# -- 1. links and special files: one safe opener for every reader ----------------------------------

LINK_CASES = ["tap_gains link out", "manifest link out", "fir_map link out", "sigmf folder link out",
              "tap_gains link in", "tap_gains link to outside FIFO", "manifest link to outside FIFO",
              "tap_gains FIFO", "manifest FIFO", "fir_map FIFO", "tap_gains directory", "tap_gains link to /dev/zero"]


@pytest.mark.slow
@pytest.mark.parametrize("case", LINK_CASES)
def test_links_and_special_files_are_refused_by_every_reader_naming_the_file(intact, tmp_path, case):
    bundle, _ = hostile.make_hostile(intact / "b", tmp_path, case)
    before = hostile.digest_tree(bundle)
    for command, args in hostile.commands(bundle, tmp_path, intact / "rec.npy").items():
        if command == "reproduce" and case.startswith("sigmf"):
            continue  # reproduce reads the tap gains and the FIR map only
        # a child process where a regression could block (a FIFO followed shows as "hang")
        code, _, stderr = hostile.run_cli(args, cwd=tmp_path, timeout=60) if "FIFO" in case else invoke(args)
        assert code == 2, (command, code, stderr)
        assert "Traceback" not in stderr and len(stderr.strip().splitlines()) <= 2, stderr
        assert any(word in stderr for word in ("symbolic link", "FIFO", "not a regular file", "a directory",
                                                "a device")), stderr
        assert str(bundle) in stderr, stderr
    assert hostile.digest_tree(bundle) == before


def test_open_member_refuses_names_that_leave_the_bundle(intact, tmp_path):
    for name in ("../x", "/etc/passwd", "a/../../x", "", "sigmf/./x"):
        with pytest.raises(bd.BundleError):
            bd.open_member(intact / "b", name)
    with bd.open_member(intact / "b", "sigmf/tap0_rx0_tx0.sigmf-meta") as handle:
        assert json.loads(handle.read())["global"]["core:datatype"] == "cf32_le"


def test_a_bundle_reached_through_a_link_of_the_users_own_is_read(intact, tmp_path):
    os.symlink(intact / "b", tmp_path / "alias")
    code, _, stderr = invoke(["reproduce", tmp_path / "alias"])
    assert code == 0, stderr


# -- 2. apply writes nothing into the bundle and checks what it uses --------------------------------

@pytest.mark.parametrize("output", ["tap_gains.npy", "new.npy", "sigmf/new.npy", "sigmf/../x.npy"])
def test_apply_refuses_an_output_inside_the_bundle(intact, tmp_path, output):
    bundle, _ = hostile.make_hostile(intact / "b", tmp_path, "manifest link in")  # any copy will do
    (bundle / "manifest.json").unlink()
    os.rename(bundle / ".copy", bundle / "manifest.json")
    before = hostile.digest_tree(bundle)
    code, _, stderr = invoke(["apply", bundle, intact / "rec.npy", "--sample-rate", "1e6", "-o", bundle / output, "--force"])
    assert code == 2 and "inside the bundle" in stderr, stderr
    assert hostile.digest_tree(bundle) == before


def test_apply_checks_the_hashes_of_the_files_it_uses_unless_told_not_to(intact, tmp_path):
    bundle = tmp_path / "b"
    import shutil

    shutil.copytree(intact / "b", bundle)
    gains = np.load(bundle / "tap_gains.npy", mmap_mode="r+")
    gains[7, 0, 0, 2] += 0.5  # same size, same header: only the hash can tell
    gains.flush()
    del gains
    code, _, stderr = invoke(["apply", bundle, intact / "rec.npy", "--sample-rate", "1e6", "-o", tmp_path / "y.npy"])
    assert code == 2 and "tap_gains.npy" in stderr and "SHA-256" in stderr, stderr
    assert not (tmp_path / "y.npy").exists()
    code, _, stderr = invoke(["apply", bundle, intact / "rec.npy", "--sample-rate", "1e6", "-o", tmp_path / "y.npy", "--no-hash-check",
                              "--quiet"])
    assert code == 0, stderr
    code, stdout, _ = invoke(["apply", "--help"])
    assert "SHA-256" in stdout and "--no-hash-check" in stdout


# -- 3. a killed --force leaves nothing complete-looking, and the next run cleans up -----------------

KILL_POINTS = ["data-written", "manifest-written", "exchanged", "manifest-removed", "file-removed"]


@pytest.mark.slow
@pytest.mark.parametrize("point", KILL_POINTS)
def test_a_force_killed_at_any_instant_leaves_no_partial_and_the_next_run_no_temporary(intact, tmp_path, point):
    compile_args = ["compile", DEMO / "warehouse-robot.yaml", "-o", tmp_path / "b", "--duration", "0.2",
                    "--quiet", "--force", "--format", "cf32"]
    assert hostile.run_cli([*compile_args, "--seed", "1"], cwd=tmp_path)[0] == 0
    code, _, stderr = hostile.run_cli([*compile_args, "--seed", "2"], cwd=tmp_path,
                                      env={"EMUCOMPILE_FAULT_KILL_AT": point})
    assert code == -signal.SIGKILL, (code, stderr)
    temporaries = [p for p in tmp_path.iterdir() if bd.TEMP_MARKER in p.name]
    assert temporaries, "the kill left no trace: the fault point was not reached"
    assert bd.verify_integrity(tmp_path / "b") == []  # OUTDIR holds a whole bundle, old or new
    for folder in temporaries:  # anything holding a manifest is a whole bundle, never a partial
        if (folder / "manifest.json").exists():
            assert bd.verify_integrity(folder) == [], folder
    assert hostile.run_cli([*compile_args, "--seed", "3"], cwd=tmp_path)[0] == 0
    assert [p.name for p in tmp_path.iterdir() if bd.TEMP_MARKER in p.name] == []
    assert bd.open_bundle(tmp_path / "b").manifest["seed"] == 3


# -- 4. no internal error on valid syntax ----------------------------------------------------------

def _profile(tmp_path, name, text):
    path = tmp_path / name
    path.write_text(text)
    return path


TWO_TAPS = "format_version: 1\nname: t\nmax_doppler_hz: 10\ntaps:\n  - {delay_ns: DELAY, power_db: 0}\n" \
           "  - {delay_ns: 10, power_db: -3}\n"


def test_a_delay_of_minus_1e308_is_one_error_not_a_crash(tmp_path):
    path = _profile(tmp_path, "neg.yaml", TWO_TAPS.replace("DELAY", "-1e308"))
    code, _, stderr = invoke(["validate", path])
    assert code == 2 and "/taps/0/delay_ns" in stderr and "internal" not in stderr, stderr


def test_a_tolerance_of_1e308_percent_works(tmp_path):
    path = _profile(tmp_path, "tol.yaml", TWO_TAPS.replace("DELAY", "0")
                    + "expect:\n  rms_delay_spread_ns: {value: 5, tolerance_pct: 1e308}\n")
    assert invoke(["validate", path])[0] == 0
    code, stdout, stderr = invoke(["stats", path])
    assert code == 0 and "any value" in stdout, stderr
    code, stdout, _ = invoke(["stats", path, "--json"])
    assert code == 0 and json.loads(stdout)["expect"][0]["met"] is True


def test_huge_integers_get_one_line_about_digits(tmp_path):
    document = json.loads((DEMO / "bench-two-path.json").read_text())
    text = json.dumps(document)[:-1] + ', "total_power_db": ' + "9" * 5000 + "}"
    path = _profile(tmp_path, "big.json", text.replace('"total_power_db": -3, ', "", 1))
    code, _, stderr = invoke(["validate", path])
    assert code == 2 and "5000 digits" in stderr and "internal" not in stderr, stderr
    document["compile"]["seed"] = int("9" * 400)
    path = _profile(tmp_path, "seed.json", json.dumps(document))
    code, _, stderr = invoke(["validate", path])
    assert code == 2 and "/compile/seed" in stderr and "400 digits" in stderr and "floating" not in stderr, stderr
    code, _, stderr = invoke(["compile", DEMO / "bench-two-path.json", "-o", tmp_path / "o", "--seed", "9" * 400])
    assert code == 2 and "--seed" in stderr and not (tmp_path / "o").exists(), stderr


def test_a_sigmf_input_with_a_400_digit_sample_rate_is_refused(intact, tmp_path):
    meta = {"global": {"core:datatype": "cf32_le", "core:version": "1.2.0"}, "captures": [], "annotations": []}
    text = json.dumps(meta).replace('"core:version"', '"core:sample_rate": ' + "9" * 400 + ', "core:version"')
    (tmp_path / "in.sigmf-meta").write_text(text)
    (tmp_path / "in.sigmf-data").write_bytes(np.ones(64, np.complex64).tobytes())
    code, _, stderr = invoke(["apply", intact / "b", tmp_path / "in.sigmf-meta", "-o", tmp_path / "out"])
    assert code == 2 and "in.sigmf-meta" in stderr and "400 digits" in stderr, stderr
    (tmp_path / "in.sigmf-meta").write_text('{"global": {"core:datatype": "cf32_le", "core:datatype": "ci16_le"}}')
    code, _, stderr = invoke(["apply", intact / "b", tmp_path / "in.sigmf-meta", "-o", tmp_path / "out"])
    assert code == 2 and "duplicate key" in stderr, stderr


EXTREME = {
    "sample rate 1e14": ["--sample-rate", "1e14"],
    "update rate 1e12": ["--update-rate", "1e12", "--duration", "0.01"],
    "update rate 1e9, 50 MiB": ["--update-rate", "1e9", "--duration", "0.01", "--max-size", "50MiB"],
    "update rate 1e300": ["--update-rate", "1e300", "--duration", "1e-290"],
    "duration 1e300": ["--duration", "1e300"],
    "update rate x duration overflow": ["--update-rate", "1e200", "--duration", "1e200"],
}


@pytest.mark.slow
@pytest.mark.parametrize("case", list(EXTREME))
def test_extreme_compile_options_are_refused_before_any_large_allocation(tmp_path, case):
    profile = DEMO / ("rural-rail-line.yaml" if "1e9" in case else "warehouse-robot.yaml")
    script = ("import resource, subprocess, sys\n"
              "done = subprocess.run(sys.argv[1:], capture_output=True, text=True)\n"
              "print(done.returncode, resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss)\n"
              "sys.stderr.write(done.stderr)\n")
    args = [sys.executable, "-c", script, sys.executable, "-m", "emucompile", "compile", str(profile),
            "-o", str(tmp_path / "o"), "--quiet", *EXTREME[case]]
    done = subprocess.run(args, capture_output=True, text=True, timeout=120,
                          env=dict(os.environ, PYTHONPATH=str(ROOT)))
    code, max_rss_kib = map(int, done.stdout.split())
    assert code == 2 and len(done.stderr.strip().splitlines()) == 1, done.stderr
    assert max_rss_kib < 300 * 1024, max_rss_kib  # Linux reports KiB; the program itself is ~110 MiB
    assert not (tmp_path / "o").exists()


@pytest.mark.parametrize("snr", ["1e308", "-1e308", "301"])
def test_apply_refuses_an_snr_beyond_300_db(intact, tmp_path, snr):
    code, _, stderr = invoke(["apply", intact / "b", intact / "rec.npy", "--sample-rate", "1e6", "-o", tmp_path / "y.npy", f"--snr-db={snr}"])
    assert code == 2 and "--snr-db" in stderr, stderr


def test_apply_takes_an_snr_of_300_db(intact, tmp_path):
    code, _, stderr = invoke(["apply", intact / "b", intact / "rec.npy", "--sample-rate", "1e6", "-o", tmp_path / "y.npy", "--snr-db=300",
                              "--quiet"])
    assert code == 0, stderr


MANIFEST_CASES = ["manifest deep 1e5", "rate 1e14 consistent", "profile deep 5000", "profile deep 60", "rate 1e300 consistent",
                  "rate 5e-324 consistent", "manifest duplicate key", "manifest over 64 MiB",
                  "manifest 5000-digit int", "data_offset lie cf32", "data_offset huge cf32",
                  "profile delay -1e308", "seed huge"]


@pytest.mark.parametrize("case", MANIFEST_CASES)
def test_hostile_manifests_get_exit_2_from_every_reader(intact, tmp_path, case):
    bundle, _ = hostile.make_hostile(intact / "b", tmp_path, case)
    for command, args in hostile.commands(bundle, tmp_path, intact / "rec.npy").items():
        code, _, stderr = invoke(args)
        if command == "apply" and case.startswith("profile") and "5000" not in case:
            assert code == 0, stderr  # apply does not read the embedded profile; the rest is intact
            continue
        assert code == 2 and "internal" not in stderr, (command, stderr)


def test_sigmf_metadata_in_a_bundle_is_read_strictly(intact, tmp_path):
    for case, words in (("sigmf meta duplicate key", "duplicate key"), ("sigmf meta deep", "nested deeper")):
        bundle, _ = hostile.make_hostile(intact / "b", tmp_path / case.replace(" ", "-"), case)
        with pytest.raises(bd.BundleError, match=words):
            bd.member_json(bundle, "sigmf/tap0_rx0_tx0.sigmf-meta", max_bytes=fmt.SIGMF_META_MAX_BYTES)
        with pytest.raises(bd.BundleError, match="corrupted or edited"):  # and its size is not the listed one
            bd.open_bundle(bundle)
    with pytest.raises(bd.BundleError, match="larger than the limit"):
        bd.member_json(intact / "b", "sigmf/tap0_rx0_tx0.sigmf-meta", max_bytes=100)


def test_the_manifest_check_finds_a_data_offset_that_disagrees_with_the_size(intact):
    manifest = json.loads((intact / "b" / "manifest.json").read_text())
    entry = next(e for e in manifest["files"] if e["role"] == "tap_gains_ci16")
    entry["data_offset"] = 4
    problems = bd.validate_manifest(manifest)
    assert len(problems) == 1 and "data_offset 4" in problems[0].message


def test_a_broken_pipe_ends_quietly(intact):
    # `| true` closes the pipe before the first write: the write meets EPIPE every time
    for args in (f"reproduce {intact / 'b'}", "presets list"):
        command = f"{sys.executable} -m emucompile {args} | true; echo ${{PIPESTATUS[0]}}"
        done = subprocess.run(["bash", "-c", command], capture_output=True, text=True, timeout=120,
                              env=dict(os.environ, PYTHONPATH=str(ROOT)))
        assert done.stdout.strip() == "141" and done.stderr == "", (args, done.stdout, done.stderr)


# -- 6. --debug before or after the sub-command ---------------------------------------------------

@pytest.mark.parametrize("where", ["before", "after"])
def test_debug_works_before_or_after_the_sub_command(tmp_path, monkeypatch, where):
    import emucompile.compile.validation

    def broken(*args, **kwargs):
        raise RuntimeError("a planted bug")

    monkeypatch.setattr(emucompile.compile.validation, "validate_files", broken)  # what validate calls
    monkeypatch.delenv("EMUCOMPILE_DEBUG", raising=False)
    args = ["validate", "x.yaml"]
    args = ["--debug", *args] if where == "before" else [*args, "--debug"]
    result = CliRunner().invoke(cli, args)
    assert isinstance(result.exception, RuntimeError)  # the traceback, not the one-line message
    result = CliRunner().invoke(cli, ["validate", "x.yaml"])
    assert result.exit_code == 3 and "internal error" in result.stderr


# -- the corpus: every input that ever broke the tool ---------------------------------------------

def _corpus_profiles():
    return sorted((CORPUS / "profiles").glob("*")) if (CORPUS / "profiles").is_dir() else []


@pytest.mark.parametrize("path", _corpus_profiles(), ids=lambda p: p.name)
def test_corpus_profiles_never_crash(path, tmp_path):
    for args in (["validate", path], ["stats", path],
                 ["compile", path, "-o", tmp_path / "o", "--duration", "0.05", "--max-size", "20MiB", "--quiet"]):
        code, _, stderr = invoke(args)
        assert code in (0, 1, 2) and "internal error" not in stderr, (args[0], stderr)


def test_corpus_bundle_mutations_are_all_known():
    listed = (CORPUS / "bundles.txt").read_text().splitlines()
    names = [line for line in listed if line and not line.startswith("#")]
    assert names and set(names) <= set(hostile.MUTATIONS)


def test_every_corpus_bundle_mutation_is_refused_or_read(intact, tmp_path):
    names = [line for line in (CORPUS / "bundles.txt").read_text().splitlines() if line and not line.startswith("#")]
    for index, name in enumerate(names):
        bundle, _ = hostile.make_hostile(intact / "b", tmp_path / str(index), name)
        before = hostile.digest_tree(bundle)
        args = hostile.commands(bundle, tmp_path / str(index), intact / "rec.npy")["apply"]
        problem = hostile.judge(hostile.run_cli(args, cwd=tmp_path, timeout=60) if "FIFO" in name
                                else invoke(args))
        assert problem is None, (name, problem)
        assert hostile.digest_tree(bundle) == before, name


def test_memory_limit_helper_is_linux_kib():
    assert resource.getrusage(resource.RUSAGE_SELF).ru_maxrss > 10 * 1024  # this process: > 10 MiB in KiB


def test_verify_never_writes_its_report_through_a_link_in_the_bundle(intact, tmp_path):
    import shutil

    shutil.copytree(intact / "b", tmp_path / "b")
    (tmp_path / "elsewhere").mkdir()
    (tmp_path / "elsewhere" / "figure-01.png").write_bytes(b"not ours")
    os.symlink(tmp_path / "elsewhere", tmp_path / "b" / "verification")
    code, _, stderr = invoke(["verify", tmp_path / "b"])
    assert code == 2 and "symbolic link" in stderr, stderr
    assert [p.name for p in (tmp_path / "elsewhere").iterdir()] == ["figure-01.png"]


def test_the_writer_refuses_a_manifest_no_reader_would_accept(tmp_path):
    many = bd.BundleLayout(n_samples=1, n_taps=1024, update_rate_hz=1000.0, n_rx=8, n_tx=8, formats=("sigmf",))
    assert dict(many.planned_files())["manifest.json"] > bd.MANIFEST_MAX_BYTES
    with pytest.raises(bd.InputError, match="manifest would take"):
        bd.BundleWriter(tmp_path / "b", many)
    assert not (tmp_path / "b").exists()
