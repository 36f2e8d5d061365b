"""The bundle directory: manifest and schema, safe writing, force, failures, reading back, integrity.

The chunks are a fake source (seeded complex Gaussian arrays of shape
(m, n_rx, n_tx, n_taps)); the compile command will connect the fading engine.
Signals and resource limits are exercised for real in child processes.
"""

from __future__ import annotations

import _thread
import errno
import fnmatch
import json
import math
import os
import resource
import signal
import subprocess
import sys
import textwrap
import threading
from pathlib import Path

import jsonschema
import numpy as np
import pytest

from emucompile.bundle import store as bd
from emucompile.bundle import atomic
from emucompile.bundle import formats as fmt
from emucompile.bundle import writers
from emucompile.errors import EXIT_BAD_INPUT, EmucompileError, InputError
from emucompile.models import spectra

ROOT = Path(__file__).resolve().parents[2]
RATE_HZ = 2000.0
POWERS = (0.5, 0.3, 0.2)


def fake_chunks(seed, n_samples, *, n_rx=1, n_tx=1, n_taps=3, chunk=1000, delay_s=0.0):
    """Seeded random complex64 chunks (m, n_rx, n_tx, n_taps), tap powers POWERS[:n_taps]."""
    import time

    rng = np.random.default_rng(seed)
    scale = np.sqrt(np.resize(np.asarray(POWERS), n_taps) / 2.0)
    for start in range(0, n_samples, chunk):
        m = min(chunk, n_samples - start)
        shape = (m, n_rx, n_tx, n_taps)
        yield ((rng.standard_normal(shape) + 1j * rng.standard_normal(shape)) * scale).astype(np.complex64)
        if delay_s:
            time.sleep(delay_s)


def layout(n_samples=5000, *, n_rx=1, n_tx=1, n_taps=3, formats=(), fir=False, **options):
    fir_map = np.random.default_rng(99).standard_normal((n_taps, 6)) if fir else None
    return bd.BundleLayout(
        n_samples=n_samples, n_taps=n_taps, update_rate_hz=RATE_HZ, n_rx=n_rx, n_tx=n_tx,
        formats=formats, fir_map=fir_map, tap_power_linear=np.resize(POWERS, n_taps),
        tap_k_linear=(0.0,) * n_taps, **options,
    )


def fields(lay: bd.BundleLayout, **overrides):
    """The caller's manifest fields for a fake compilation of ``lay``."""
    taps = [
        {"delay_s": 50e-9 * k, "power_db": 10 * math.log10(POWERS[k % 3]), "fading": "rayleigh", "k_db": None,
         "max_doppler_hz": 12.5, "los_doppler_hz": None, "los_phase_deg": None, "spectrum": "classical"}
        for k in range(lay.n_taps)
    ]
    fir = None
    if lay.fir_map is not None:
        fir = {"sample_rate_hz": 30.72e6, "n_fir": lay.fir_map.shape[1], "delay_mapping": "sinc",
               "bulk_delay_samples": 2, "energy_kept": 0.995, "rms_delay_spread_s": 4.1e-8}
    result = {
        "generator_version": "1", "profile_sha256": "a" * 64, "resolved_profile_sha256": "b" * 64,
        "profile": {"format_version": 1, "name": "fake-scenario", "description": "invented for the tests"},
        "seed": 7, "method": "doppler-filter", "generator": {"note": "fake chunks"},
        "duration_s": lay.n_samples / RATE_HZ, "periodic": False, "taps": taps,
        "mimo": None if lay.n_rx * lay.n_tx == 1 else {"model": "fake"}, "fir": fir,
    }
    result.update(overrides)
    return result


def build(outdir, lay=None, *, seed=1, chunk=1000, **options):
    lay = lay or layout()
    chunks = fake_chunks(seed, lay.n_samples, n_rx=lay.n_rx, n_tx=lay.n_tx, n_taps=lay.n_taps, chunk=chunk)
    return bd.write_bundle(outdir, lay, chunks, fields(lay), **options)


def leftovers(parent: Path):
    return [p.name for p in parent.iterdir() if bd.TEMP_MARKER in p.name]


def expected_gains(lay, seed=1, chunk=1000):
    return np.concatenate(list(fake_chunks(seed, lay.n_samples, n_rx=lay.n_rx, n_tx=lay.n_tx, n_taps=lay.n_taps, chunk=chunk)))


# -- layout and manifest -----------------------------------------------------------------------


def independent_validator():
    """The manifest schema read as a file, its reference to the profile schema (the spectrum kinds)
    resolved from the file beside it: jsonschema and referencing as any reader would use them, offline."""
    from referencing import Registry, Resource

    schema, profile = (json.loads((ROOT / "emucompile" / "schemas" / name).read_text("utf-8"))
                       for name in ("bundle-manifest-v1.schema.json", "profile-v1.schema.json"))
    registry = Registry().with_resource(profile["$id"], Resource.from_contents(profile))
    return jsonschema.Draft202012Validator(schema, registry=registry)


def test_bundle_layout_files_and_manifest_validate_against_the_schema(tmp_path):
    lay = layout(fir=True)
    out = build(tmp_path / "b", lay)
    names = sorted(p.name for p in out.iterdir())
    assert names == ["fir_map.npy", "manifest.json", "tap_gains.npy"]
    manifest = json.loads((out / "manifest.json").read_text("utf-8"))
    independent_validator().validate(manifest)
    assert bd.validate_manifest(manifest) == []
    assert manifest["format"] == "emucompile-bundle" and manifest["format_version"] == 1
    for key in ("tool_version", "generator_version", "created_utc", "profile_sha256", "resolved_profile_sha256",
                "profile", "seed", "method", "update_rate_hz", "n_samples", "duration_s", "n_taps", "periodic",
                "taps", "mimo", "fir", "platform", "files"):
        assert key in manifest, key  # every field docs/bundle-format.md lists
    assert set(manifest["platform"]) >= {"python", "numpy", "scipy", "machine"}
    gains = np.load(out / "tap_gains.npy")
    assert gains.dtype == np.complex64 and gains.shape == (5000, 1, 1, 3)  # SISO is (n, 1, 1, n_taps)
    np.testing.assert_array_equal(gains, expected_gains(lay))
    np.testing.assert_array_equal(np.load(out / "fir_map.npy"), lay.fir_map)
    [entry] = [e for e in manifest["files"] if e["name"] == "tap_gains.npy"]
    assert entry["shape"] == [5000, 1, 1, 3] and entry["byte_order"] == "little" and entry["dtype"] == "complex64"


def test_npy_data_offset_lets_a_raw_reader_skip_the_header(tmp_path):
    out = build(tmp_path / "b")
    entry = bd.open_bundle(out).entry("tap_gains")
    raw = np.fromfile(out / entry["name"], dtype="<c8", offset=entry["data_offset"]).reshape(entry["shape"])
    np.testing.assert_array_equal(raw, np.load(out / "tap_gains.npy"))


def test_wrong_manifests_are_reported_with_their_place(tmp_path):
    out = build(tmp_path / "b")
    good = json.loads((out / "manifest.json").read_text("utf-8"))
    assert bd.validate_manifest(good) == []

    def problems(edit):
        manifest = json.loads(json.dumps(good))
        edit(manifest)
        return [(p.pointer, p.message) for p in bd.validate_manifest(manifest)]

    assert ("", "'seed' is missing") in problems(lambda m: m.pop("seed"))
    assert any(pointer == "/update_rate_hz" for pointer, _ in problems(lambda m: m.update(update_rate_hz="fast")))
    assert any(pointer == "/taps/1/fading" for pointer, _ in problems(lambda m: m["taps"][1].update(fading="rain")))
    assert any("unexpected" in message for _, message in problems(lambda m: m.update(colour="red")))
    assert any(pointer == "/files/0/name" for pointer, _ in problems(lambda m: m["files"][0].update(name="../etc/passwd")))
    assert any(pointer == "/taps" for pointer, _ in problems(lambda m: m["taps"].pop()))  # 2 taps, n_taps 3
    assert any(pointer == "/duration_s" for pointer, _ in problems(lambda m: m.update(duration_s=99.0)))
    # and a bundle on disk with such a manifest is refused by open_bundle (exit code 2)
    broken = dict(good)
    broken.pop("taps")
    (out / "manifest.json").write_text(json.dumps(broken), "utf-8")
    with pytest.raises(bd.BundleError, match="'taps' is missing") as caught:
        bd.open_bundle(out)
    assert caught.value.exit_code == EXIT_BAD_INPUT


def test_schema_is_versioned_and_every_property_is_described():
    packaged = (ROOT / "emucompile" / "schemas" / "bundle-manifest-v1.schema.json").read_bytes()
    schema = json.loads(packaged)
    assert schema["$schema"] == "https://json-schema.org/draft/2020-12/schema"
    assert schema["$id"].endswith("-v1.schema.json") and schema == bd.manifest_schema()
    jsonschema.Draft202012Validator.check_schema(schema)
    undescribed = []

    def walk(node, where):
        if isinstance(node, dict):
            for name, sub in (node.get("properties") or {}).items():
                if "description" not in sub:
                    undescribed.append(f"{where}/properties/{name}")
            for key, sub in node.items():
                walk(sub, f"{where}/{key}")
        elif isinstance(node, list):
            for i, sub in enumerate(node):
                walk(sub, f"{where}/{i}")

    walk(schema, "")
    assert undescribed == []


def test_the_spectrum_kinds_come_from_the_profile_schema_resolved_offline(tmp_path, monkeypatch):
    # The manifest schema's tap spectrum is "$ref": "profile-v1.schema.json#/$defs/spectrum_kind" (or null),
    # resolved against its $id on the .invalid host: only the packaged copy may answer, never the network.
    import socket
    import urllib.request

    from referencing import Registry
    from referencing.exceptions import Unresolvable

    from emucompile.bundle import layout as layout_module

    def no_network(*args, **kwargs):
        raise AssertionError("a schema reference went to the network")

    monkeypatch.setattr(socket.socket, "connect", no_network)
    monkeypatch.setattr(urllib.request, "urlopen", no_network)
    monkeypatch.setattr(layout_module, "_REGISTRY", None)
    monkeypatch.setattr(layout_module, "_VALIDATOR", None)
    manifest = json.loads((build(tmp_path / "b") / "manifest.json").read_text("utf-8"))
    assert bd.validate_manifest(manifest) == [] and list(independent_validator().iter_errors(manifest)) == []
    manifest["taps"][1]["spectrum"] = None  # a static tap's: allowed by the schema
    assert list(bd.manifest_validator().iter_errors(manifest)) == []
    assert list(independent_validator().iter_errors(manifest)) == []
    manifest["taps"][1]["spectrum"] = "lorentzian"  # not a kind the profile schema names
    problems = bd.validate_manifest(manifest)
    assert [p.pointer for p in problems] == ["/taps/1/spectrum"]
    assert problems[0].message == (f"'lorentzian' is not one of {list(spectra.KINDS)} and "
                                   "'lorentzian' is not of type 'null'")
    assert [list(e.absolute_path) for e in independent_validator().iter_errors(manifest)] == [["taps", 1, "spectrum"]]
    # the reference is really followed: without the profile schema it cannot be resolved
    schema = json.loads((ROOT / "emucompile" / "schemas" / "bundle-manifest-v1.schema.json").read_text("utf-8"))
    with pytest.raises(Unresolvable):
        jsonschema.Draft202012Validator(schema, registry=Registry()).validate(manifest)


def test_manifest_fields_that_disagree_with_the_writer_are_a_bug_and_leave_nothing(tmp_path):
    lay = layout()
    with pytest.raises(ValueError, match="n_samples"):
        bd.write_bundle(tmp_path / "b", lay, fake_chunks(1, lay.n_samples), fields(lay, n_samples=4))
    assert not (tmp_path / "b").exists() and leftovers(tmp_path) == []


def test_numpy_values_in_manifest_fields_become_json_numbers(tmp_path):
    lay = layout()
    out = bd.write_bundle(tmp_path / "b", lay, fake_chunks(1, lay.n_samples), fields(lay, seed=np.int64(7), duration_s=np.float64(2.5)))
    manifest = bd.open_bundle(out).manifest
    assert manifest["seed"] == 7 and isinstance(manifest["seed"], int)


# -- formats through the bundle ---------------------------------------------------------------------


def test_every_format_round_trips_against_the_npy(tmp_path):
    lay = layout(3000, n_rx=2, n_tx=2, formats="cf32,ci16,csv,sigmf,fir", fir=True)
    out = build(tmp_path / "b", lay, chunk=700)
    b = bd.open_bundle(out, verify=True)
    gains = np.asarray(b.tap_gains)
    assert gains.shape == (3000, 2, 2, 3)
    np.testing.assert_array_equal(b.read_format("cf32"), gains)  # exact
    np.testing.assert_array_equal(b.read_format("sigmf"), gains)  # exact
    reference_fir = np.zeros((3000, 2, 2, 6), np.complex128)
    for k in range(3):  # the documented rule: complex128 sum in tap order, rounded once
        reference_fir += gains[..., k, None].astype(np.complex128) * lay.fir_map[k]
    np.testing.assert_array_equal(b.read_format("fir"), reference_fir.astype(np.complex64))  # exact
    np.testing.assert_array_equal(b.fir, reference_fir.astype(np.complex64))
    quantisation = b.entry("tap_gains_ci16")["quantisation"]
    step = 1.0 / quantisation["scale_factor"]
    assert quantisation["clipped_values"] == 0  # 12k samples at a 1e-6 design probability
    ci16_error = np.abs(b.read_format("ci16").view(np.float32) - gains.view(np.float32))
    assert ci16_error.max() <= 0.5 * step * (1 + 1e-6) + 1e-7  # half a step (+ float32 of the reader)
    csv = b.read_format("csv")
    np.testing.assert_allclose(csv.real, gains.real, rtol=5e-10, atol=1e-300)  # printed precision
    np.testing.assert_allclose(csv.imag, gains.imag, rtol=5e-10, atol=1e-300)
    manifest = b.manifest
    assert manifest["formats"] == ["cf32", "ci16", "csv", "sigmf", "fir"]
    cf32 = b.entry("tap_gains_cf32")
    assert cf32["axes"] == ["sample", "rx", "tx", "tap"] and cf32["data_offset"] == 0
    assert (out / "tap_gains.cf32").read_bytes() == (out / "tap_gains.npy").read_bytes()[b.entry("tap_gains")["data_offset"]:]
    assert len(b.entries("sigmf_data")) == 2 * 2 * 3 and len(b.entries("sigmf_meta")) == 12


def test_extra_arrays_are_streamed_chunk_by_chunk_beside_the_gains(tmp_path):
    """An extra array (shadowing_db.npy) is asked for the rows of each chunk, never whole."""
    asked = []
    trajectory = np.sin(np.arange(2500) / 37.0)

    def rows(start, stop):
        asked.append((start, stop))
        return trajectory[start:stop]

    lay = layout(2500, extra_arrays=(("shadowing_db.npy", "shadowing_db", np.float64, (2500,), rows, ("sample",)),))
    out = build(tmp_path / "b", lay, chunk=700)
    assert asked == [(0, 700), (700, 1400), (1400, 2100), (2100, 2500)]
    b = bd.open_bundle(out, verify=True)
    np.testing.assert_array_equal(np.load(out / "shadowing_db.npy"), trajectory)
    assert [e["name"] for e in b.manifest["files"]][:2] == ["tap_gains.npy", "shadowing_db.npy"]


def test_estimated_size_bounds_the_real_size_and_is_close(tmp_path):
    lay = layout(4000, n_rx=2, formats="cf32,ci16,sigmf,fir", fir=True)
    out = build(tmp_path / "b", lay)
    real = sum(p.stat().st_size for p in out.rglob("*") if p.is_file())
    assert real <= lay.estimated_size_bytes
    data_only = lay.estimated_size_bytes - dict(lay.planned_files())["manifest.json"]
    sigmf_meta_allowance = 4096 * 2 * 3
    assert data_only - sigmf_meta_allowance <= real  # exact for the binary files


def test_csv_is_refused_above_its_row_limit_unless_lifted(tmp_path):
    with pytest.raises(InputError, match="csv: 5000 rows is above the limit of 4000 rows"):
        layout(formats="csv", csv_max_rows=4000)
    lay = layout(formats="csv", csv_max_rows=None)
    assert bd.open_bundle(build(tmp_path / "b", lay)).read_format("csv").shape == (5000, 1, 1, 3)


def test_format_names_are_checked():
    assert bd.parse_formats("sigmf, cf32,npy") == ("cf32", "sigmf")
    with pytest.raises(InputError, match="unknown format 'wav'"):
        bd.parse_formats("cf32,wav")
    with pytest.raises(InputError, match="sample rate"):
        layout(formats="fir")  # no FIR map without a sample rate


def test_layout_from_profile_takes_powers_and_k(tmp_path):
    from emucompile.profile.model import Profile, Tap

    profile = Profile(name="fake", taps=(
        Tap(delay_s=0.0, power_linear=0.6, fading="rician", k_linear=4.0, los_doppler_hz=3.0),
        Tap(delay_s=1e-7, power_linear=0.3),
        Tap(delay_s=2e-7, power_linear=0.1, fading="static"),
    ))
    lay = bd.BundleLayout.from_profile(profile, n_samples=10, update_rate_hz=RATE_HZ, formats="ci16")
    assert lay.tap_power_linear == (0.6, 0.3, 0.1) and lay.tap_k_linear == (4.0, 0.0, math.inf)
    assert lay.ci16_scaling == fmt.ci16_scaling([0.6, 0.3, 0.1], [4.0, 0.0, math.inf])


# -- reproducibility ------------------------------------------------------------------------------------


def test_two_writes_of_the_same_chunks_give_the_same_bytes_and_hashes(tmp_path):
    lay = layout(4000, n_rx=2, formats="cf32,ci16,csv,sigmf,fir", fir=True)
    first = build(tmp_path / "one", lay, threaded=True)
    second = build(tmp_path / "two", lay, threaded=False)
    files = sorted(str(p.relative_to(first)) for p in first.rglob("*") if p.is_file())
    assert files == sorted(str(p.relative_to(second)) for p in second.rglob("*") if p.is_file())
    for name in files:
        if name != "manifest.json":
            assert (first / name).read_bytes() == (second / name).read_bytes(), name
    one = json.loads((first / "manifest.json").read_text("utf-8"))
    two = json.loads((second / "manifest.json").read_text("utf-8"))
    assert {k for k in one if one[k] != two.get(k)} <= {"created_utc"}
    assert bd.verify_integrity(first) == [] and bd.verify_integrity(second) == []
    other_seed = build(tmp_path / "three", lay, seed=2)
    assert (other_seed / "tap_gains.npy").read_bytes() != (first / "tap_gains.npy").read_bytes()


def test_data_bytes_do_not_depend_on_the_chunking(tmp_path):
    lay = layout(3000, formats="cf32,ci16,fir", fir=True)
    gains = expected_gains(lay)
    for name, size in (("whole", 3000), ("small", 7)):
        chunks = [gains[i:i + size] for i in range(0, 3000, size)]
        bd.write_bundle(tmp_path / name, lay, chunks, fields(lay))
    for file in ("tap_gains.npy", "tap_gains.cf32", "tap_gains.ci16", "fir.npy"):
        assert (tmp_path / "whole" / file).read_bytes() == (tmp_path / "small" / file).read_bytes(), file


# -- integrity ----------------------------------------------------------------------------------------


@pytest.mark.parametrize("name", ["tap_gains.npy", "tap_gains.cf32", "sigmf/tap1_rx0_tx0.sigmf-data", "sigmf/tap0_rx0_tx0.sigmf-meta"])
def test_a_flipped_byte_is_found_and_the_file_named(tmp_path, name):
    out = build(tmp_path / "b", layout(formats="cf32,sigmf"))
    path = out / name
    data = bytearray(path.read_bytes())
    data[len(data) - 5] ^= 0x01
    path.write_bytes(bytes(data))
    problems = bd.verify_integrity(out)
    assert len(problems) == 1
    assert problems[0].format().startswith(f"{path}: /files/")
    assert "corrupted or edited after compiling" in problems[0].message
    with pytest.raises(bd.BundleError, match="corrupted or edited after compiling"):
        bd.open_bundle(out, verify=True)


def test_missing_truncated_and_reheadered_files_are_problems(tmp_path):
    out = build(tmp_path / "b", layout(formats="cf32,ci16", fir=True))
    (out / "tap_gains.cf32").unlink()
    with open(out / "tap_gains.ci16", "r+b") as handle:
        handle.truncate(100)
    gains = np.load(out / "tap_gains.npy")
    (out / "tap_gains.npy").unlink()
    np.save(out / "tap_gains.npy", gains.reshape(5000, 1, 3, 1))  # same bytes, another shape
    messages = {Path(p.file).name: p.message for p in bd.verify_integrity(out)}
    assert messages["tap_gains.cf32"].startswith("missing")
    assert "100 bytes" in messages["tap_gains.ci16"]
    assert "npy header says complex64 [5000, 1, 3, 1]" in messages["tap_gains.npy"]
    with pytest.raises(bd.BundleError, match="tap_gains.npy"):
        bd.open_bundle(out)  # mapping the array checks its header against the manifest


@pytest.mark.parametrize("make", ["nothing", "empty", "file", "no-json", "foreign", "newer"])
def test_open_bundle_refuses_what_is_not_a_bundle(tmp_path, make):
    target = tmp_path / "x"
    if make == "empty":
        target.mkdir()
    elif make == "file":
        target.write_text("hello")
    elif make in ("no-json", "foreign", "newer"):
        target.mkdir()
        text = {"no-json": "{not json", "foreign": '{"format": "other"}', "newer": '{"format": "emucompile-bundle", "format_version": 2}'}[make]
        (target / "manifest.json").write_text(text)
    with pytest.raises(bd.BundleError) as caught:
        bd.open_bundle(target)
    assert caught.value.exit_code == EXIT_BAD_INPUT
    message = str(caught.value)
    assert str(target) in message and "\n" not in message
    if make == "newer":
        assert "newer emucompile" in message


# -- safe writing: destination and force ------------------------------------------------------------


def test_existing_outdir_is_never_touched_without_force(tmp_path):
    out = build(tmp_path / "b")
    before = (out / "manifest.json").read_bytes()
    with pytest.raises(InputError, match="already exists.*--force"):
        build(out, seed=2)
    assert (out / "manifest.json").read_bytes() == before and leftovers(tmp_path) == []


def test_force_replaces_a_bundle_and_leaves_no_trace_of_the_old_one(tmp_path):
    out = build(tmp_path / "b", layout(formats="sigmf"))
    build(out, layout(formats="cf32"), seed=2, force=True)
    assert sorted(p.name for p in out.iterdir()) == ["manifest.json", "tap_gains.cf32", "tap_gains.npy"]
    np.testing.assert_array_equal(np.load(out / "tap_gains.npy"), expected_gains(layout(), seed=2))
    assert bd.verify_integrity(out) == [] and leftovers(tmp_path) == []


def test_force_replaces_without_the_atomic_exchange_too(tmp_path, monkeypatch):
    out = build(tmp_path / "b")
    monkeypatch.setattr(atomic, "_renameat2", lambda *args: False)  # as on a system without renameat2
    build(out, seed=2, force=True)
    np.testing.assert_array_equal(np.load(out / "tap_gains.npy"), expected_gains(layout(), seed=2))
    assert leftovers(tmp_path) == []


@pytest.mark.parametrize("what", ["plain-directory", "empty-directory", "file", "symlink", "bundle-with-user-file"])
def test_force_refuses_what_is_not_a_bundle(tmp_path, what):
    target = tmp_path / "b"
    if what == "plain-directory":
        target.mkdir()
        (target / "notes.txt").write_text("mine")
    elif what == "empty-directory":
        target.mkdir()
    elif what == "file":
        target.write_text("mine")
    elif what == "symlink":
        build(tmp_path / "real")
        target.symlink_to(tmp_path / "real")
    else:
        build(target)
        (target / "report.html").write_text("mine")
    snapshot = sorted((str(p), p.read_bytes() if p.is_file() else None) for p in tmp_path.rglob("*"))
    with pytest.raises(InputError) as caught:
        build(target, force=True)
    assert str(target) in str(caught.value)
    assert sorted((str(p), p.read_bytes() if p.is_file() else None) for p in tmp_path.rglob("*")) == snapshot


def test_missing_parents_are_made_and_removed_again_on_failure(tmp_path):
    out = build(tmp_path / "new" / "deeper" / "b")
    assert bd.verify_integrity(out) == []
    lay = layout()

    def failing():
        yield from fake_chunks(1, 1000)
        raise RuntimeError("generator broke")

    with pytest.raises(RuntimeError, match="generator broke"):
        bd.write_bundle(tmp_path / "other" / "b", lay, failing(), fields(lay))
    assert not (tmp_path / "other").exists()


def test_refused_above_max_size_before_anything_is_written(tmp_path):
    lay = layout(100_000, formats="cf32")
    assert lay.estimated_size_bytes > 1_000_000
    with pytest.raises(InputError, match=r"above the limit of 976\.6 KiB.*--max-size"):
        bd.BundleWriter(tmp_path / "b", lay, max_size_bytes=1_000_000)
    assert list(tmp_path.iterdir()) == []
    assert bd.DEFAULT_MAX_SIZE_BYTES == 8 * 1024**3


def test_progress_is_reported_to_the_caller(tmp_path):
    seen = []
    build(tmp_path / "b", chunk=1500, progress=lambda done, total: seen.append((done, total)))
    assert seen[:4] == [(1500, 5000), (3000, 5000), (4500, 5000), (5000, 5000)] and seen[-1] == (5000, 5000)


def test_an_owned_chunk_is_written_as_it_is_and_others_are_copied(tmp_path):
    """owned=True (the engine's fresh chunks): no copy; otherwise the caller may reuse its buffer."""
    lay = layout(20)
    with bd.BundleWriter(tmp_path / "b", lay) as writer:  # threaded: the worker writes later
        owned, borrowed = (np.full((10, 1, 1, 3), v, np.complex64) for v in (1, 2))
        assert writer._checked_chunk(0, owned, True) is owned
        copied = writer._checked_chunk(0, borrowed)
        assert copied is not borrowed and not np.shares_memory(copied, borrowed)
        writer.abort()
    with pytest.raises(ValueError, match="NaN"):  # the type and shape are still checked; finite only if not owned
        with bd.BundleWriter(tmp_path / "c", lay) as writer:
            writer.write_chunk(0, np.full((10, 1, 1, 3), np.nan, np.complex64))


def test_chunks_are_checked(tmp_path):
    lay = layout(100)
    with bd.BundleWriter(tmp_path / "b", lay) as writer:
        with pytest.raises(ValueError, match="expected 0"):
            writer.write_chunk(5, np.zeros((10, 1, 1, 3), np.complex64))
    assert not (tmp_path / "b").exists() and leftovers(tmp_path) == []
    for bad in (np.zeros((10, 1, 1, 3), np.complex128), np.zeros((10, 3), np.complex64), np.full((10, 1, 1, 3), np.nan, np.complex64)):
        with pytest.raises((TypeError, ValueError)):
            with bd.BundleWriter(tmp_path / "b", lay) as writer:
                writer.write_chunk(0, bad)
        assert leftovers(tmp_path) == []
    with pytest.raises(ValueError, match="after 10 of 100"):
        with bd.BundleWriter(tmp_path / "b", lay) as writer:
            writer.write_chunk(0, np.zeros((10, 1, 1, 3), np.complex64))
            writer.finish(fields(lay))
    assert not (tmp_path / "b").exists() and leftovers(tmp_path) == []


def test_stale_temporary_folders_of_dead_writers_are_cleared_whatever_they_hold(tmp_path):
    # A --force killed while deleting the old bundle leaves it (or a part with its
    # manifest) under a temporary name: nobody asked for it, so it goes too, as does
    # the old-PID form and a temporary folder of another name in the same parent.
    child = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"], capture_output=True, text=True)
    dead_pid = int(child.stdout)  # that process has exited
    partial = tmp_path / f".b{bd.TEMP_MARKER}{dead_pid}-0000abcd"
    partial.mkdir()
    (partial / "tap_gains.npy").write_bytes(b"half")
    aside = tmp_path / f".b{bd.TEMP_MARKER}{dead_pid}-0000beef"
    build(aside)
    old_form = tmp_path / f".b{bd.TEMP_MARKER}old-{dead_pid}-0000cafe"
    build(old_form)
    other = tmp_path / f".c{bd.TEMP_MARKER}{dead_pid}-00001234"
    other.mkdir()
    alive = tmp_path / f".b{bd.TEMP_MARKER}{os.getppid()}-0000f00d"  # a live writer's: kept
    alive.mkdir()
    build(tmp_path / "b")
    assert sorted(leftovers(tmp_path)) == [alive.name]


def test_temporary_names_are_ignored_by_git():
    patterns = [line.strip().rstrip("/") for line in (ROOT / ".gitignore").read_text().splitlines() if line.strip()]
    for name in (f".robot{bd.TEMP_MARKER}1234-0a1b2c3d", f".robot{bd.TEMP_MARKER}old-1234-0a1b2c3d"):
        assert any(fnmatch.fnmatch(name, pattern) for pattern in patterns), name


# -- failures while writing ---------------------------------------------------------------------


@pytest.mark.parametrize("threaded", [True, False])
def test_a_full_disk_removes_the_partial_directory(tmp_path, monkeypatch, threaded):
    # /dev/full answers every write with ENOSPC, exactly as a full filesystem does.
    real_open = writers._open_new_file

    def open_some_on_a_full_disk(path):
        if path.endswith("tap_gains.cf32"):
            return os.open("/dev/full", os.O_WRONLY)
        return real_open(path)

    monkeypatch.setattr(writers, "_open_new_file", open_some_on_a_full_disk)
    with pytest.raises(InputError, match=r"no space left on the device while writing tap_gains\.cf32; nothing was written") as caught:
        build(tmp_path / "b", layout(formats="cf32"), threaded=threaded)
    assert isinstance(caught.value.__cause__, OSError) and caught.value.__cause__.errno == errno.ENOSPC
    assert list(tmp_path.iterdir()) == []


def test_a_full_disk_during_force_keeps_the_old_bundle(tmp_path, monkeypatch):
    out = build(tmp_path / "b")
    before = {p.name: p.read_bytes() for p in out.iterdir()}
    monkeypatch.setattr(writers, "_open_new_file", lambda path: os.open("/dev/full", os.O_WRONLY))
    with pytest.raises(InputError, match="no space left"):
        build(out, seed=2, force=True)
    assert {p.name: p.read_bytes() for p in out.iterdir()} == before and leftovers(tmp_path) == []


def test_ctrl_c_in_process_leaves_nothing(tmp_path):
    # _thread.interrupt_main raises SIGINT's KeyboardInterrupt in the main thread, as Ctrl-C does.
    lay = layout(400_000)
    handlers_before = [signal.getsignal(s) for s in (signal.SIGXFSZ, signal.SIGTERM, signal.SIGINT)]
    timer = threading.Timer(0.3, _thread.interrupt_main)
    timer.start()
    try:
        with pytest.raises(bd.WriteInterrupted) as caught:
            bd.write_bundle(tmp_path / "b", lay, fake_chunks(1, lay.n_samples, chunk=1000, delay_s=0.01), fields(lay))
    finally:
        timer.cancel()
    assert isinstance(caught.value, KeyboardInterrupt) and isinstance(caught.value, EmucompileError)
    assert caught.value.exit_code == 130 and "interrupted; nothing was written" in str(caught.value)
    assert list(tmp_path.iterdir()) == []
    assert [signal.getsignal(s) for s in (signal.SIGXFSZ, signal.SIGTERM, signal.SIGINT)] == handlers_before


def test_ctrl_c_during_the_final_rename_completes_the_bundle_then_stops(tmp_path, monkeypatch):
    # An interrupt arriving while the directory is moved into place is held until
    # the move is done: the bundle is then complete and valid, and the caller still stops.
    real_rename = atomic.rename_no_replace

    def rename_while_interrupted(*args):
        signal.raise_signal(signal.SIGINT)
        real_rename(*args)

    monkeypatch.setattr(atomic, "rename_no_replace", rename_while_interrupted)
    with pytest.raises(KeyboardInterrupt) as caught:
        build(tmp_path / "b")
    assert not isinstance(caught.value, bd.WriteInterrupted)
    assert bd.verify_integrity(tmp_path / "b") == [] and leftovers(tmp_path) == []


CHILD = textwrap.dedent("""
    import sys, time
    import numpy as np
    sys.path.insert(0, sys.argv[1])
    from emucompile.bundle import store as bd
    from emucompile.errors import EmucompileError

    out, n_samples, force = sys.argv[2], int(sys.argv[3]), sys.argv[4] == "force"
    lay = bd.BundleLayout(n_samples=n_samples, n_taps=3, update_rate_hz=2000.0, formats=("cf32",))
    taps = [dict(delay_s=0.0, power_db=-3.0, fading="rayleigh", k_db=None, max_doppler_hz=10.0,
                 los_doppler_hz=None, los_phase_deg=None, spectrum="classical")] * 3
    fields = dict(generator_version="1", profile_sha256="a" * 64, resolved_profile_sha256="b" * 64,
                  profile={"name": "child"}, seed=3, method="doppler-filter", generator={},
                  duration_s=n_samples / 2000.0, periodic=False, taps=taps, mimo=None, fir=None)

    def chunks():
        rng = np.random.default_rng(5)
        for start in range(0, n_samples, 10_000):
            m = min(10_000, n_samples - start)
            yield (rng.standard_normal((m, 1, 1, 3)) + 1j * rng.standard_normal((m, 1, 1, 3))).astype(np.complex64)
            time.sleep(0.02)

    def progress(done, total):
        print("progress", done, flush=True)

    try:
        bd.write_bundle(out, lay, chunks(), fields, force=force, progress=progress)
    except EmucompileError as error:
        print(f"emucompile: error: {error}", file=sys.stderr)
        sys.exit(error.exit_code)
    print("finished", flush=True)
""")


def _start_child(tmp_path, out, n_samples, *, force=False, preexec_fn=None):
    script = tmp_path / "child.py"
    script.write_text(CHILD)
    env = dict(os.environ, PYTHONDONTWRITEBYTECODE="1")
    return subprocess.Popen(
        [sys.executable, str(script), str(ROOT), str(out), str(n_samples), "force" if force else "no"],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env, preexec_fn=preexec_fn,
    )


@pytest.mark.parametrize("signal_number, exit_code, word", [(signal.SIGINT, 130, "interrupted"), (signal.SIGTERM, 143, "terminated (SIGTERM)")])
def test_a_signal_during_a_long_write_leaves_no_bundle_and_no_temporary(tmp_path, signal_number, exit_code, word):
    work = tmp_path / "work"
    work.mkdir()
    child = _start_child(tmp_path, work / "b", 2_000_000)  # 200 chunks of 20 ms: about 4 s unless stopped
    try:
        assert child.stdout.readline().startswith("progress")
        child.send_signal(signal_number)
        stdout, stderr = child.communicate(timeout=60)
    finally:
        child.kill()
    assert child.returncode == exit_code, stderr
    assert f"{word}; nothing was written" in stderr and "Traceback" not in stderr
    assert "finished" not in stdout
    assert list(work.iterdir()) == []


def test_sigint_during_a_forced_replacement_keeps_the_old_bundle(tmp_path):
    work = tmp_path / "work"
    work.mkdir()
    out = build(work / "b")
    before = {p.name: p.read_bytes() for p in out.iterdir()}
    child = _start_child(tmp_path, out, 2_000_000, force=True)
    try:
        assert child.stdout.readline().startswith("progress")
        child.send_signal(signal.SIGINT)
        _, stderr = child.communicate(timeout=60)
    finally:
        child.kill()
    assert child.returncode == 130, stderr
    assert {p.name: p.read_bytes() for p in out.iterdir()} == before
    assert leftovers(work) == [] and bd.verify_integrity(out) == []


def test_a_file_size_limit_exits_with_a_clear_message_and_leaves_nothing(tmp_path):
    work = tmp_path / "work"
    work.mkdir()
    limit = 1 << 20  # 1 MiB; the bundle needs 2 x 4.8 MB

    def limit_file_size():
        resource.setrlimit(resource.RLIMIT_FSIZE, (limit, limit))

    child = _start_child(tmp_path, work / "b", 200_000, preexec_fn=limit_file_size)
    stdout, stderr = child.communicate(timeout=120)
    assert child.returncode == EXIT_BAD_INPUT, stderr
    assert "file size limit reached while writing tap_gains" in stderr and "(ulimit -f)" in stderr
    assert "Traceback" not in stderr and "finished" not in stdout
    assert list(work.iterdir()) == []


def test_a_complete_write_in_a_child_succeeds(tmp_path):
    # the control for the three tests above: the same child, left alone, finishes
    work = tmp_path / "work"
    work.mkdir()
    child = _start_child(tmp_path, work / "b", 30_000)
    stdout, stderr = child.communicate(timeout=120)
    assert child.returncode == 0, stderr
    assert stdout.rstrip().endswith("finished")
    assert bd.verify_integrity(work / "b") == [] and leftovers(work) == []
