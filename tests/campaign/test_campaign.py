"""Campaigns: plan files, their expansion, runs on a Dask LocalCluster (loopback only), resuming,
the index, and one bundle's blocks spread over two workers (same bytes as one process).

The clusters of worker processes listen on 127.0.0.1 only (``open_client``); the thread
clusters use Dask's in-process transport.
Runs that count compile calls use a LocalCluster of *threads* (``processes=False``) so that a
counter patched into this process sees every call; the others use worker processes, as the
command does.
"""

from __future__ import annotations

import hashlib
import json
import logging
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import jsonschema
import pytest
from click.testing import CliRunner

from emucompile.compile import compiler
from emucompile.bundle.store import verify_integrity
from emucompile.campaign import expand_plan, plan_schema, run_campaign
from emucompile.campaign.plan import PlanError
from emucompile.cli import cli

distributed = pytest.importorskip("dask.distributed")

ROOT = Path(__file__).resolve().parents[2]
DEMO_PLAN = ROOT / "profiles_demo" / "tdl-matrix-campaign.yml"

# The acceptance matrix: 3 presets x 2 delay spreads x 2 Doppler values x 3 seeds = 36 short cases.
# 1.2 s at f_D >= 50 Hz: T f_D >= 60, so verify judges every check (it needs T f_D >= 50).
MATRIX = """\
format_version: 1
name: test-matrix
description: Invented test plan.
profiles:
  - preset: tdl-a
  - preset: tdl-b
  - preset: tdl-c
axes:
  delay_spread_ns: [100, 300]
  max_doppler_hz: [50, 100]
  seed: [1, 2, 3]
settings:
  duration_s: 1.2
  plots: false
"""


def _plan(tmp_path, text, name="plan.yaml"):
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


@pytest.fixture
def thread_cluster():
    """Two workers as threads of this process (Dask's in-process transport: no network at all)."""
    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=False,
                                       dashboard_address=None, silence_logs=logging.ERROR)
    client = distributed.Client(cluster)
    yield client
    client.close()
    cluster.close()


@pytest.fixture
def compile_calls(monkeypatch):
    """Counts compile_profile calls made in this process (thread workers included)."""
    calls = []
    original = compiler.compile_profile

    def counted(*args, **kwargs):
        calls.append(Path(args[1]).name)
        return original(*args, **kwargs)

    monkeypatch.setattr(compiler, "compile_profile", counted)
    return calls


# -- schema and plan files ---------------------------------------------------------------------


def test_the_schema_is_valid():
    schema = plan_schema()
    jsonschema.Draft202012Validator.check_schema(schema)
    for example in schema["examples"]:
        assert not list(jsonschema.Draft202012Validator(schema).iter_errors(example))


def test_the_demo_plan_is_invented_expands_to_36_cases_and_validates_against_the_schema():
    text = DEMO_PLAN.read_text(encoding="utf-8")
    assert "Invented" in text and "campaign" in DEMO_PLAN.name
    plan = expand_plan(DEMO_PLAN)
    assert len(plan.cases) == 36 and len({c.name for c in plan.cases}) == 36
    assert plan.axes == ("delay_spread_ns", "max_doppler_hz", "seed")
    assert {c.label for c in plan.cases} == {"tdl-a", "tdl-b", "tdl-c"}
    # every case's record is long enough for verify to judge it (T f_D >= 50)
    assert all(c.n_samples / c.update_rate_hz * c.axes["max_doppler_hz"] >= 50 for c in plan.cases)


def test_expansion_names_cases_by_their_axes_and_applies_each_axis(tmp_path):
    plan = expand_plan(_plan(tmp_path, MATRIX))
    assert len(plan.cases) == 36
    case = next(c for c in plan.cases if c.name == "tdl-b_ds300ns_fd100hz_seed2")
    assert case.axes == {"delay_spread_ns": 300, "max_doppler_hz": 100, "seed": 2}
    assert case.document["extends"] == {"preset": "tdl-b", "delay_spread_ns": 300}
    assert case.document["max_doppler_hz"] == 100 and case.compile_options["seed"] == 2
    assert case.update_rate_hz == 6400  # 64 x the largest Doppler, compile's default
    # the key changes with anything that changes the bundle, not otherwise
    again = expand_plan(_plan(tmp_path, MATRIX, "again.yaml"))
    assert [c.key for c in again.cases] == [c.key for c in plan.cases]
    assert len({c.key for c in plan.cases}) == 36


def test_file_profiles_overrides_and_per_entry_axes(tmp_path):
    text = f"""\
format_version: 1
name: mixed
profiles:
  - file: {ROOT / 'profiles_demo' / 'warehouse-robot.yaml'}
    axes: {{delay_spread_ns: [null]}}
  - preset: epa
    label: epa-2x2
    overrides:
      mimo: {{n_tx: 2, n_rx: 2, correlation: {{level: low, specification: ts36101}}}}
    axes: {{delay_spread_ns: [null], correlation: [low, high]}}
  - preset: tdl-c
axes:
  delay_spread_ns: [100]
  seed: [4]
  formats: ["", "cf32,ci16"]
"""
    plan = expand_plan(_plan(tmp_path, text))
    names = [c.name for c in plan.cases]
    assert names == ["warehouse-robot_fmt-npy_seed4", "warehouse-robot_fmt-cf32.ci16_seed4",
                     "epa-2x2_corr-low_fmt-npy_seed4", "epa-2x2_corr-low_fmt-cf32.ci16_seed4",
                     "epa-2x2_corr-high_fmt-npy_seed4", "epa-2x2_corr-high_fmt-cf32.ci16_seed4",
                     "tdl-c_ds100ns_fmt-npy_seed4", "tdl-c_ds100ns_fmt-cf32.ci16_seed4"]
    high = plan.cases[4]
    assert high.document["mimo"]["correlation"] == {"level": "high", "specification": "ts36101"}
    assert plan.cases[1].compile_options["formats"] == "cf32,ci16"
    assert plan.cases[1].document["name"] == plan.cases[1].name  # a valid profile name too


def test_speed_target_and_duration_axes(tmp_path):
    (tmp_path / "lab-fir-64.yaml").write_text("format_version: 1\nname: lab-fir-64\nsample_rate_hz: 30.72e6\n"
                                              "max_fir_coefficients: 64\n", encoding="utf-8")
    text = f"""\
format_version: 1
name: speeds
profiles:
  - file: {ROOT / 'profiles_demo' / 'port-crane-los.yaml'}
    label: crane
axes:
  speed_kmh: [10, 50]
  target: [null, lab-fir-64.yaml]
  duration_s: [3]
  seed: [2]
"""
    plan = expand_plan(_plan(tmp_path, text))
    assert [c.name for c in plan.cases] == ["crane_v10kmh_tgt-own_t3s_seed2", "crane_v10kmh_tgt-lab-fir-64_t3s_seed2",
                                            "crane_v50kmh_tgt-own_t3s_seed2", "crane_v50kmh_tgt-lab-fir-64_t3s_seed2"]
    slow, fast = plan.cases[0], plan.cases[2]
    assert slow.document["speed_kmh"] == 10 and "max_doppler_hz" not in slow.document
    # f_D = v f_c / c (common practice): 50 km/h at 2.6 GHz is 120.4 Hz
    from emucompile.profile.model import profile_from_document

    assert profile_from_document(fast.document).max_doppler_hz == pytest.approx(50 / 3.6 * 2.6e9 / 299_792_458,
                                                                               rel=1e-9)
    assert fast.update_rate_hz == 2000  # the profile's own compile block
    assert slow.compile_options["duration_s"] == 3 and slow.n_samples == round(3 * slow.update_rate_hz)
    assert slow.target is None and plan.cases[1].target["max_fir_coefficients"] == 64
    assert len({c.key for c in plan.cases}) == 4

@pytest.mark.parametrize("text, where, message", [
    ("format_version: 1\nname: x\nprofiles:\n  - preset: epa\n    colour: red\n", ":5:5: /profiles/0/colour",
     "unknown key 'colour'"),
    ("format_version: 1\nname: x\nprofiles:\n  - {preset: epa, file: a.yaml}\n", ":4:5: /profiles/0",
     "exactly one of file or preset"),
    ("format_version: 1\nname: x\nprofiles:\n  - preset: epa\naxes:\n  seed: [one]\n", ":6:10: /axes/seed/0",
     "whole number"),
    ("format_version: 1\nname: x\nprofiles:\n  - preset: epa\naxes:\n  seed: [1]\n  delay_spread_ns: [100]\n",
     ":4:5: /profiles/0", "delay_spread_ns"),
    ("format_version: 1\nname: x\nprofiles:\n  - preset: epa\naxes:\n  seed: [1]\n  correlation: [low]\n",
     ":7:16: /axes/correlation", "needs a MIMO profile"),
    ("format_version: 1\nname: x\nprofiles:\n  - preset: epa\n  - preset: epa\naxes:\n  seed: [1]\n",
     ":5:5: /profiles/1", "made twice"),
    ("format_version: 1\nname: x\nprofiles:\n  - preset: epa\n", ":4:5: /profiles/0", "no seed"),
    ("format_version: 1\nname: x\nprofiles:\n  - preset: epa\naxes:\n  seed: [1]\n  max_doppler_hz: [100]\n"
     "settings:\n  update_rate_hz: 50\n",
     ":4:5: /profiles/0", "update rate 50 Hz is below the minimum"),
])
def test_plan_problems_are_located_like_profile_problems(tmp_path, text, where, message):
    path = _plan(tmp_path, text)
    with pytest.raises(PlanError) as raised:
        expand_plan(path)
    lines = str(raised.value).splitlines()
    assert any(line.startswith(str(path) + where) and message in line for line in lines), lines


def test_a_bad_profile_file_is_reported_at_its_own_lines(tmp_path):
    profile = tmp_path / "bad.yaml"
    profile.write_text("format_version: 1\nname: bad\nmax_doppler_hz: 10\ntaps:\n  - {delay_ns: 0, power_db: 0, "
                       "fading: rician}\n", encoding="utf-8")
    path = _plan(tmp_path, "format_version: 1\nname: x\nprofiles:\n  - file: bad.yaml\naxes: {seed: [1]}\n")
    with pytest.raises(PlanError) as raised:
        expand_plan(path)
    text = str(raised.value)
    assert f"{profile}:5:" in text and "k_db" in text
    assert f"{path}:4:11: /profiles/0/file: profile file 'bad.yaml' is not valid" in text


def test_list_shows_the_expansion_without_running_and_a_bad_plan_exits_2(tmp_path):
    runner = CliRunner()
    result = runner.invoke(cli, ["campaign", str(_plan(tmp_path, MATRIX)), "--list"])
    assert result.exit_code == 0, result.output
    assert result.output.count("preset tdl-") == 36 and "tdl-a_ds100ns_fd50hz_seed1" in result.output
    assert not (tmp_path / "cases").exists()
    listed = runner.invoke(cli, ["campaign", str(tmp_path / "plan.yaml"), "--list", "--json"])
    assert [c["name"] for c in json.loads(listed.output)][:2] == ["tdl-a_ds100ns_fd50hz_seed1",
                                                                   "tdl-a_ds100ns_fd50hz_seed2"]
    bad = runner.invoke(cli, ["campaign", str(_plan(tmp_path, "format_version: 2\n", "bad.yaml")), "-o",
                              str(tmp_path / "out")])
    assert bad.exit_code == 2 and "format_version must be 1" in bad.output
    assert not (tmp_path / "out").exists()


def test_campaign_code_loads_dask_only_when_a_cluster_opens_and_only_cli_imports_it():
    code = ("import sys, emucompile, emucompile.cli, emucompile.campaign.plan, emucompile.campaign.run; "
            "emucompile.campaign.expand_plan; print(sorted(m for m in sys.modules if m.split('.')[0] in "
            "('dask', 'distributed')))")
    out = subprocess.run([sys.executable, "-c", code], cwd=ROOT, capture_output=True, text=True,
                         env=dict(os.environ, PYTHONPATH=str(ROOT)), check=True)
    assert out.stdout.strip() == "[]"
    importers = [str(p.relative_to(ROOT)) for p in (ROOT / "emucompile").rglob("*.py")
                 if "campaign" not in p.parts and p.name != "cli.py" and p.name != "__init__.py"
                 and "emucompile.campaign" in p.read_text(encoding="utf-8")]
    assert importers == []


# -- running ---------------------------------------------------------------------------------------


def test_the_36_case_matrix_runs_on_two_workers_writes_the_index_and_a_rerun_does_no_work(
        tmp_path, thread_cluster, compile_calls):
    plan = expand_plan(_plan(tmp_path, MATRIX))
    events = []
    result = run_campaign(plan, tmp_path / "out", client=thread_cluster, progress=events.append)
    assert result.passed, result.summary()
    assert sorted(compile_calls) == sorted(c.name for c in plan.cases)
    assert result.ran == 36 and result.skipped == 0
    progress = [e for e in events if e["event"] == "case"]
    assert [e["done"] for e in progress] == list(range(1, 37)) and progress[-1]["running"] == 0
    document = json.loads((tmp_path / "out" / "campaign.json").read_text())
    assert document["passed"] and document["counts"]["passed"] == 36
    assert [r["value"] for r in document["by_axis"]["max_doppler_hz"]] == [50, 100]
    assert all(r["cases"] == 18 and r["passed"] == 18 for r in document["by_axis"]["max_doppler_hz"])
    for record in document["cases"]:
        bundle = tmp_path / "out" / record["name"]
        assert verify_integrity(bundle) == []
        assert (tmp_path / "out" / record["report"]).is_file()
        assert record["counts"]["failed"] == 0 and record["counts"]["passed"] > 0
    page = (tmp_path / "out" / "index.html").read_text()
    assert page.count('<tr class="case ') == 36 and "<script" not in page and "http" not in page

    compile_calls.clear()
    again = run_campaign(plan, tmp_path / "out", client=thread_cluster)
    assert compile_calls == [] and again.ran == 0 and again.skipped == 36 and again.passed

    # a changed bundle file, a removed record and a changed setting are redone, nothing else
    victim = tmp_path / "out" / plan.cases[5].name / "tap_gains.npy"
    with open(victim, "ab") as stream:
        stream.write(b"\0")
    (tmp_path / "out" / "cases" / f"{plan.cases[7].name}.json").unlink()
    third = run_campaign(plan, tmp_path / "out", client=thread_cluster)
    assert sorted(compile_calls) == sorted([plan.cases[5].name, plan.cases[7].name]) and third.passed
    compile_calls.clear()
    changed = expand_plan(_plan(tmp_path, MATRIX.replace("plots: false", "plots: false\n  false_alarm: 0.05"),
                                "changed.yaml"))
    run_campaign(changed, tmp_path / "out", client=thread_cluster)
    assert len(compile_calls) == 36


def test_recheck_hashes_the_files_of_done_cases(tmp_path, thread_cluster, compile_calls):
    plan = expand_plan(_plan(tmp_path, MATRIX.replace("seed: [1, 2, 3]", "seed: [1]").replace(
        "  - preset: tdl-b\n  - preset: tdl-c\n", "")))
    run_campaign(plan, tmp_path / "out", client=thread_cluster)
    victim = tmp_path / "out" / plan.cases[0].name / "tap_gains.npy"
    data = bytearray(victim.read_bytes())
    data[-1] ^= 1  # same size: only the hash can tell
    victim.write_bytes(bytes(data))
    compile_calls.clear()
    run_campaign(plan, tmp_path / "out", client=thread_cluster)
    assert compile_calls == []
    run_campaign(plan, tmp_path / "out", client=thread_cluster, recheck=True)
    assert compile_calls == [plan.cases[0].name]


def test_a_failing_case_does_not_stop_the_others_and_the_index_says_so(tmp_path, thread_cluster, monkeypatch):
    import dataclasses

    from emucompile.verify import run as verify

    plan = expand_plan(_plan(tmp_path, MATRIX.replace("seed: [1, 2, 3]", "seed: [1]").replace(
        "  - preset: tdl-c\n", "")))
    failing, broken = plan.cases[1].name, plan.cases[5].name  # one of tdl-a, one of tdl-b
    original = verify.verify_bundle

    def verify_with_one_failure(path, **kwargs):
        result = original(path, **kwargs)
        if Path(path).name == failing:  # as if the first check had missed its tolerance
            result.checks[0] = dataclasses.replace(result.checks[0], passed=False)
        return result

    monkeypatch.setattr(verify, "verify_bundle", verify_with_one_failure)
    (tmp_path / "out" / broken).mkdir(parents=True)
    (tmp_path / "out" / broken / "notes.txt").write_text("not a bundle")  # compile refuses to replace it
    result = run_campaign(plan, tmp_path / "out", client=thread_cluster)
    status = {r["name"]: r["status"] for r in result.records}
    assert status.pop(failing) == "failed" and status.pop(broken) == "error"
    assert set(status.values()) == {"passed"} and len(status) == 6
    document = json.loads((tmp_path / "out" / "campaign.json").read_text())
    assert document["counts"] == {"passed": 6, "failed": 1, "error": 1, "not run": 0}
    by_profile = {r["value"]: r for r in document["by_axis"]["profile"]}
    assert by_profile["tdl-a"]["failed"] + by_profile["tdl-a"]["error"] == 1
    assert by_profile["tdl-b"]["failed"] + by_profile["tdl-b"]["error"] == 1
    page = (tmp_path / "out" / "index.html").read_text()
    assert "NOT PASSED" in page and page.count('class="bad"') + page.count('class="err"') >= 2
    assert f"{failing}</td>" in page and f"{broken}</td>" in page


def test_the_command_runs_on_worker_processes_exits_1_when_a_case_fails_and_prints_json(tmp_path):
    text = MATRIX.replace("seed: [1, 2, 3]", "seed: [1]").replace("  - preset: tdl-b\n  - preset: tdl-c\n", "")
    plan = _plan(tmp_path, text)
    broken = tmp_path / "out" / "tdl-a_ds300ns_fd100hz_seed1"
    broken.mkdir(parents=True)
    (broken / "notes.txt").write_text("keep me")
    result = CliRunner().invoke(cli, ["campaign", str(plan), "-o", str(tmp_path / "out"), "--workers", "2",
                                      "--json", "--quiet"])
    assert result.exit_code == 1, result.output
    document = json.loads(result.stdout)
    assert document["counts"] == {"passed": 3, "failed": 0, "error": 1, "not run": 0}
    assert "1 in error" in result.stderr and (broken / "notes.txt").read_text() == "keep me"



def test_the_command_runs_on_an_existing_scheduler_after_checking_the_directory(tmp_path, monkeypatch):
    from emucompile.campaign import cluster as clusters

    text = MATRIX.replace("seed: [1, 2, 3]", "seed: [5]").replace("  - preset: tdl-b\n  - preset: tdl-c\n", "")
    plan = _plan(tmp_path, text.replace("max_doppler_hz: [50, 100]", "max_doppler_hz: [50]"))
    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                                       dashboard_address=None, silence_logs=logging.ERROR)
    try:
        runner = CliRunner()
        both = runner.invoke(cli, ["campaign", str(plan), "-o", str(tmp_path / "out"), "--workers", "2",
                                   "--scheduler", cluster.scheduler_address])
        assert both.exit_code == 2 and "drop --workers" in both.output
        result = runner.invoke(cli, ["campaign", str(plan), "-o", str(tmp_path / "out"), "--scheduler",
                                     cluster.scheduler_address])
    finally:
        cluster.close()
    assert result.exit_code == 0, result.output
    assert "PASSED: 2 case(s)" in result.stdout and not list((tmp_path / "out").glob(".campaign-probe-*"))
    monkeypatch.setattr(clusters, "CONNECT_TIMEOUT_S", 2)  # nothing listens there: no need to wait 20 s
    nowhere = CliRunner().invoke(cli, ["campaign", str(plan), "-o", str(tmp_path / "other"), "--scheduler",
                                       "tcp://127.0.0.1:9"])
    assert nowhere.exit_code == 2 and "cannot reach the Dask scheduler at tcp://127.0.0.1:9" in nowhere.output


def test_a_directory_the_workers_cannot_see_is_refused_naming_them(tmp_path):
    from emucompile.campaign.cluster import check_reachable
    from emucompile.errors import InputError

    class Blind:  # a cluster whose second worker mounts something else at that path
        def run(self, function, path):
            return {"tcp://10.0.0.1:1": function(path), "tcp://10.0.0.2:1": None}

    with pytest.raises(InputError, match=r"not reachable from worker\(s\) tcp://10.0.0.2:1;"):
        check_reachable(Blind(), tmp_path)
    assert list(tmp_path.iterdir()) == []

@pytest.mark.slow
def test_an_interrupted_campaign_leaves_whole_bundles_and_a_rerun_completes_it(tmp_path):
    plan = _plan(tmp_path, MATRIX)
    out = tmp_path / "out"
    command = [sys.executable, "-m", "emucompile", "campaign", str(plan), "-o", str(out), "--workers", "2"]
    environment = dict(os.environ, PYTHONPATH=str(ROOT))
    process = subprocess.Popen(command, cwd=ROOT, env=environment, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                               text=True)
    deadline = time.monotonic() + 240
    while time.monotonic() < deadline and len(list((out / "cases").glob("*.json"))) < 6:
        time.sleep(0.2)
    process.send_signal(signal.SIGINT)
    _, stderr = process.communicate(timeout=120)
    finished = sorted(p.stem for p in (out / "cases").glob("*.json"))
    assert process.returncode == 130, stderr[-2000:]
    assert 6 <= len(finished) < 36, "the run must be stopped mid-way for this test to mean anything"
    document = json.loads((out / "campaign.json").read_text())
    assert document["counts"]["not run"] == 36 - len(finished)
    for name in finished:  # every finished case is whole
        assert verify_integrity(out / name) == []
    for directory in out.iterdir():  # no half bundle: a directory is a whole bundle, or hidden and temporary
        if directory.is_dir() and directory.name != "cases":
            assert directory.name.startswith(".") or verify_integrity(directory) == []

    rerun = subprocess.run(command, cwd=ROOT, env=environment, capture_output=True, text=True, timeout=600)
    assert rerun.returncode == 0, rerun.stderr[-2000:]
    assert f"{len(finished)} already done, {36 - len(finished)} to run" in rerun.stderr
    assert not [p for p in out.iterdir() if ".emucompile-tmp" in p.name]
    document = json.loads((out / "campaign.json").read_text())
    assert document["counts"]["passed"] == 36
    for record in document["cases"]:
        assert verify_integrity(out / record["name"]) == []


# -- one bundle over several workers ----------------------------------------------------------------


def _sha256(path):
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


def test_a_bundle_spread_over_two_workers_has_the_bytes_of_a_single_process_compile(tmp_path):
    from emucompile.campaign import compile_spread, open_client

    profile = ROOT / "profiles_demo" / "campus-eva-2x2.yaml"  # 2x2 MIMO: every link keyed apart
    options = dict(duration_s=10, update_rate_hz=20000, seed=11, formats="cf32", sample_rate_hz=30.72e6)
    single = compiler.compile_profile(profile, tmp_path / "single", **options)
    # four ranges on the chunk grid, the last one short: several tasks on both workers
    assert 3 * compiler.CHUNK_SAMPLES < single.plan.n_samples < 4 * compiler.CHUNK_SAMPLES
    with open_client(workers=2) as client:
        spread = compile_spread(profile, tmp_path / "spread", client=client, **options)
        assert len(client.scheduler_info()["workers"]) == 2
    for name in ("tap_gains.npy", "tap_gains.cf32", "fir_map.npy"):
        assert _sha256(tmp_path / "spread" / name) == _sha256(tmp_path / "single" / name), name
    assert [e["sha256"] for e in spread.manifest["files"]] == [e["sha256"] for e in single.manifest["files"]]
    assert verify_integrity(tmp_path / "spread") == []
    drop = {"created_utc"}
    assert ({k: v for k, v in spread.manifest.items() if k not in drop}
            == {k: v for k, v in single.manifest.items() if k not in drop})


def test_a_case_marked_spread_blocks_is_compiled_over_the_workers_with_the_same_bytes(tmp_path, thread_cluster,
                                                                                      compile_calls):
    text = """\
format_version: 1
name: spread
profiles:
  - preset: tdl-a
  - preset: tdl-a
    label: spread
    spread_blocks: true
axes:
  delay_spread_ns: [100]
  max_doppler_hz: [100]
  seed: [9]
settings:
  duration_s: 25
  plots: false
"""
    plan = expand_plan(_plan(tmp_path, text))
    assert [c.spread_blocks for c in plan.cases] == [False, True] and plan.cases[1].n_samples > 2 * 65536
    result = run_campaign(plan, tmp_path / "out", client=thread_cluster)
    assert result.passed, result.summary()
    assert compile_calls == [plan.cases[0].name]  # the other went through the spread compile
    first, second = (tmp_path / "out" / c.name / "tap_gains.npy" for c in plan.cases)
    assert _sha256(first) == _sha256(second)

def test_spreading_refuses_formats_written_in_sample_order_and_leaves_nothing(tmp_path, thread_cluster):
    from emucompile.campaign import compile_spread
    from emucompile.errors import InputError

    with pytest.raises(InputError, match="tap_gains_ci16.*sample order only|sample order only"):
        compile_spread(ROOT / "profiles_demo" / "warehouse-robot.yaml", tmp_path / "b", client=thread_cluster,
                       duration_s=2, seed=1, formats="ci16")
    assert list(tmp_path.iterdir()) == []


def test_compile_command_with_workers_spreads_the_blocks(tmp_path):
    profile = str(ROOT / "profiles_demo" / "warehouse-robot.yaml")
    runner = CliRunner()
    assert runner.invoke(cli, ["compile", profile, "-o", str(tmp_path / "a"), "--duration", "20", "--seed", "3",
                               "--quiet"]).exit_code == 0
    result = runner.invoke(cli, ["compile", profile, "-o", str(tmp_path / "b"), "--duration", "20", "--seed", "3",
                                 "--quiet", "--workers", "2"])
    assert result.exit_code == 0, result.output
    assert _sha256(tmp_path / "a" / "tap_gains.npy") == _sha256(tmp_path / "b" / "tap_gains.npy")


# -- the calibration tools on a cluster ---------------------------------------------------------------


def test_a_calibration_tool_gives_the_same_figures_on_a_cluster_as_in_one_process(tmp_path):
    tool = [sys.executable, str(ROOT / "tools" / "calibrate_apply_envelope.py"), "--seeds", "6"]
    environment = dict(os.environ, PYTHONPATH=str(ROOT))
    alone = subprocess.run(tool, cwd=tmp_path, env=environment, capture_output=True, text=True, timeout=300)
    assert alone.returncode == 0, alone.stderr[-2000:]
    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                                       dashboard_address=None, silence_logs=logging.ERROR)
    try:
        spread = subprocess.run(tool + ["--scheduler", cluster.scheduler_address], cwd=tmp_path, env=environment,
                                capture_output=True, text=True, timeout=300)
    finally:
        cluster.close()
    assert spread.returncode == 0, spread.stderr[-2000:]
    assert "D over 6 seeds" in alone.stdout and spread.stdout == alone.stdout


def test_the_example_plan_of_the_docs_expands(tmp_path):
    text = (ROOT / "docs" / "campaign.md").read_text(encoding="utf-8")
    example = text.split("```yaml\n", 1)[1].split("```", 1)[0]
    plan = expand_plan(_plan(tmp_path, example.replace("../profiles_demo/", f"{ROOT}/profiles_demo/")))
    names = [c.name for c in plan.cases]
    assert len(names) == 2 * 2 * 3 + 3 * 2 * 3 + 2 * 3
    assert "tdl-c_ds300ns_fd70hz_seed2" in names and "epa-2x2_fd10hz_corr-high_seed1" in names
    assert all(c.spread_blocks for c in plan.cases if c.label == "warehouse-robot")
