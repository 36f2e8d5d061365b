"""Tests of emucompile.verify and the ``verify`` command.

Bundles are compiled from the demo profiles (short records, T f_D >= 200)
or written by ``tests/bundle_factory.py``; alterations are made on the stored
numbers and the manifest's hashes regenerated (:func:`_rehash`), so the
statistics, not the hashes, must catch them. Seeds are fixed; each statistical
verdict is made at the family-wise false-alarm rate 0.01 with tolerances
calibrated in :mod:`emucompile.tolerance`, so an intact bundle of a perfect
generator fails with probability <= 1 % (``tools/calibrate_verify_false_alarm.py``
measures it for one demo profile).
"""

from __future__ import annotations

import json
import math
import shutil
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from emucompile import compiler
from emucompile import verify as verifier
from emucompile.cli import cli
from emucompile.formats import sha256_file

DEMOS = Path(__file__).resolve().parents[1] / "profiles_demo"
# duration per demo: T f_D of 300 (crane, f_D 60.2 Hz), 273 (rail, 136.5 Hz), 315 (robot, 39.4 Hz);
# the static bench profile has no Doppler (its own 10 s)
DEMO_DURATIONS_S = {"port-crane-los.yaml": 5.0, "rural-rail-line.yaml": 2.0, "warehouse-robot.yaml": 8.0,
                    "bench-two-path.json": 10.0}


def _run(*args):
    return CliRunner().invoke(cli, [str(a) for a in args], catch_exceptions=False)


def _rehash(bundle_dir: Path) -> None:
    """Make the manifest's sizes and SHA-256 agree with the files as they are now."""
    manifest_path = bundle_dir / "manifest.json"
    manifest = json.loads(manifest_path.read_text())
    for entry in manifest["files"]:
        file = bundle_dir / entry["name"]
        entry["sha256"] = sha256_file(file)
        entry["size_bytes"] = file.stat().st_size
    manifest_path.write_text(json.dumps(manifest, indent=2))


def _edit_gains(bundle_dir: Path, edit) -> None:
    """Apply ``edit(gains)`` (in place, complex64 (n, rx, tx, taps)) to tap_gains.npy and rehash."""
    gains = np.load(bundle_dir / "tap_gains.npy", mmap_mode="r+")
    edit(gains)
    gains.flush()
    del gains
    _rehash(bundle_dir)


@pytest.fixture(scope="module")
def crane(tmp_path_factory):
    """The port-crane demo (Rician tap 0, five Rayleigh taps), 5 s at 2 kHz, its own seed."""
    out = tmp_path_factory.mktemp("crane") / "crane"
    compiler.compile_profile(DEMOS / "port-crane-los.yaml", out, duration_s=DEMO_DURATIONS_S["port-crane-los.yaml"],
                             formats="ci16")
    return out


def _copy(bundle, tmp_path, name="copy"):
    target = tmp_path / name
    shutil.copytree(bundle, target)
    return target


# -- the decimated copy --------------------------------------------------------------------------


@pytest.mark.parametrize("periodic", [False, True])
def test_decimated_copy_is_the_centred_filter_written_out(periodic):
    """y[m] = sum_k h[k] x[m q + D - k] computed directly, against the chunked polyphase decimator."""
    n, rate, band = 3000, 1000.0, 10.0
    decimator = verifier._Decimator(rate, band, n, periodic)
    assert decimator.q == 12 and decimator.record_rate_hz == pytest.approx(rate / 12)
    rng = np.random.default_rng(3)
    x = (rng.standard_normal((n, 1, 1, 2)) + 1j * rng.standard_normal((n, 1, 1, 2))).astype(np.complex64)
    old = verifier.CHUNK_SAMPLES
    verifier.CHUNK_SAMPLES = 240  # several chunks
    try:
        y = decimator.run(verifier._MappedSource(x), 1, 2, None)
    finally:
        verifier.CHUNK_SAMPLES = old
    h, half, q = decimator.h, decimator.half, decimator.q
    m = np.arange(decimator.first, decimator.first + decimator.n_out)
    index = m[:, None] * q + half - np.arange(h.size)[None, :]
    if periodic:
        index %= n
    else:
        assert index.min() >= 0 and index.max() < n
    expected = np.einsum("k,mkt->mt", h, x[index, 0, 0, :].astype(np.complex128))
    np.testing.assert_allclose(y[:, 0, :], expected, rtol=0, atol=1e-5)
    if periodic:
        assert decimator.n_out == n // q


def test_decimator_passes_the_band_and_stops_what_would_alias():
    """A tone at f_b keeps its amplitude (Kaiser ripple 70 dB: 3e-4); one at F_out - f_b is gone."""
    rate, band, n = 2000.0, 60.0, 40000
    decimator = verifier._Decimator(rate, band, n, True)
    k = np.arange(n)
    for frequency, gain in ((band, 1.0), (decimator.record_rate_hz - band, 0.0)):
        f = round(frequency * n / rate) * rate / n  # on the record's grid: periodic
        x = np.exp(2j * np.pi * f * k / rate).astype(np.complex64)[:, None, None, None]
        y = decimator.run(verifier._MappedSource(x), 1, 1, None)[:, 0, 0]
        assert np.max(np.abs(np.abs(y) - gain)) < 10 ** (-70 / 20)  # designed for 80 dB; Kaiser's formula is approximate


# -- integrity -------------------------------------------------------------------------------------


def test_one_flipped_byte_exits_2_naming_the_file(crane, tmp_path):
    bundle = _copy(crane, tmp_path)
    with open(bundle / "tap_gains.npy", "r+b") as handle:
        handle.seek(4096)
        byte = handle.read(1)
        handle.seek(4096)
        handle.write(bytes([byte[0] ^ 0x10]))
    result = _run("verify", bundle, "--no-plots")
    assert result.exit_code == 2
    assert "tap_gains.npy" in result.stderr and "corrupted or edited after compiling" in result.stderr


def test_a_truncated_file_exits_2(crane, tmp_path):
    bundle = _copy(crane, tmp_path)
    with open(bundle / "fir_map.npy", "r+b") as handle:
        handle.truncate(200)
    result = _run("verify", bundle, "--no-plots")
    assert result.exit_code == 2 and "fir_map.npy" in result.stderr


def test_not_a_bundle_exits_2(tmp_path):
    result = _run("verify", tmp_path, "--no-plots")
    assert result.exit_code == 2 and "manifest.json" in result.stderr


def test_usage_errors_exit_2(crane, tmp_path):
    assert _run("verify", "--no-plots").exit_code == 2
    assert _run("verify", crane, "--gains", "x.npy").exit_code == 2
    assert _run("verify", "--gains", "x.npy", "--profile", DEMOS / "port-crane-los.yaml").exit_code == 2
    assert _run("verify", crane, "--false-alarm", "1.5").exit_code == 2


def test_the_verification_directory_is_not_part_of_the_hashed_bundle(crane, tmp_path):
    """verify writes OUTDIR/verification/; integrity still holds and compile --force may replace the bundle."""
    from emucompile.bundle import _unlisted_files, verify_integrity

    bundle = _copy(crane, tmp_path)
    (bundle / "verification").mkdir()
    (bundle / "verification" / "verification.json").write_text("{}")
    assert verify_integrity(bundle) == []
    assert _unlisted_files(bundle, json.loads((bundle / "manifest.json").read_text())) == []
