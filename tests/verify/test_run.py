"""Tests of emucompile.verify.run and the ``verify`` command.

Bundles are compiled from the demo profiles (short records, T f_D >= 200)
or written by ``tests/bundle_factory.py``; alterations are made on the stored
numbers and the manifest's hashes regenerated (:func:`_rehash`), so the
statistics, not the hashes, must catch them. Seeds are fixed; each statistical
verdict is made at the family-wise false-alarm rate 0.01 with tolerances
calibrated in :mod:`emucompile.verify.tolerance`, so an intact bundle of a perfect
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

from emucompile.compile import compiler
from emucompile.report import outputs
from emucompile.verify import decimate
from emucompile.verify import run as verifier
from profile_helpers import FIT_EXAMPLE
from emucompile.cli import cli
from emucompile.bundle.formats import sha256_file

DEMOS = Path(__file__).resolve().parents[2] / "profiles_demo"
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
    decimator = decimate.Decimator(rate, band, n, periodic)
    assert decimator.q == 12 and decimator.record_rate_hz == pytest.approx(rate / 12)
    rng = np.random.default_rng(3)
    x = (rng.standard_normal((n, 1, 1, 2)) + 1j * rng.standard_normal((n, 1, 1, 2))).astype(np.complex64)
    old = decimate.CHUNK_SAMPLES
    decimate.CHUNK_SAMPLES = 240  # several chunks
    try:
        y = decimator.run(decimate.MappedSource(x), 1, 2, None)
    finally:
        decimate.CHUNK_SAMPLES = old
    h, half, q = decimator.h, decimator.half, decimator.q
    m = np.arange(decimator.first, decimator.first + decimator.n_out)
    index = m[:, None] * q + half - np.arange(h.size)[None, :]
    if periodic:
        index %= n
    else:
        assert index.min() >= 0 and index.max() < n
    expected = np.einsum("k,mkt->mt", h, x[index, 0, 0, :].astype(np.complex128))
    np.testing.assert_allclose(y[:, 0, :].T, expected, rtol=0, atol=1e-5)
    if periodic:
        assert decimator.n_out == n // q


def test_decimator_passes_the_band_and_stops_what_would_alias():
    """A tone at f_b keeps its amplitude (Kaiser ripple 70 dB: 3e-4); one at F_out - f_b is gone."""
    rate, band, n = 2000.0, 60.0, 40000
    decimator = decimate.Decimator(rate, band, n, True)
    k = np.arange(n)
    for frequency, gain in ((band, 1.0), (decimator.record_rate_hz - band, 0.0)):
        f = round(frequency * n / rate) * rate / n  # on the record's grid: periodic
        x = np.exp(2j * np.pi * f * k / rate).astype(np.complex64)[:, None, None, None]
        y = decimator.run(decimate.MappedSource(x), 1, 1, None)[0, 0, :]
        assert np.max(np.abs(np.abs(y) - gain)) < 10 ** (-70 / 20)  # designed for 80 dB; Kaiser's formula is approximate


def _resident_kib(path):
    """Resident KiB of this process's maps of ``path`` (Linux /proc/self/smaps)."""
    total, inside = 0, False
    for line in Path("/proc/self/smaps").read_text().splitlines():
        fields = line.split()
        if fields and "-" in fields[0] and len(fields) >= 5:  # a mapping's header line
            inside = fields[-1] == str(path)
        elif inside and fields[0] == "Rss:":
            total += int(fields[1])
    return total


@pytest.mark.skipif(not Path("/proc/self/smaps").exists(), reason="needs Linux /proc/self/smaps")
@pytest.mark.parametrize("periodic", [False, True])
def test_a_mapped_file_is_decimated_as_the_array_and_its_pages_let_go(tmp_path, periodic):
    """Reading through np.load(mmap_mode='r') gives the same record as the array in memory, and the map's
    pages are let go as the chunks are done (resident memory does not grow with the file)."""
    n = 400_000
    rng = np.random.default_rng(5)
    x = (rng.standard_normal((n, 1, 1, 6)) + 1j * rng.standard_normal((n, 1, 1, 6))).astype(np.complex64)
    path = tmp_path / "gains.npy"
    np.save(path, x)  # 19 MiB
    mapped = np.load(path, mmap_mode="r")
    decimator = decimate.Decimator(6400.0, 100.0, n, periodic)
    want = decimator.run(decimate.MappedSource(x), 1, 6, None)
    got = decimator.run(decimate.MappedSource(mapped), 1, 6, None)
    np.testing.assert_array_equal(got, want)
    assert _resident_kib(path.resolve()) < 1024  # of 18 750 KiB read
    with open(path, "rb") as handle:  # rows read from the file itself (preadv): the map is not touched
        source = decimate.MappedSource(mapped, handle=handle)
        np.testing.assert_array_equal(source.rows(0, n), x)
        np.testing.assert_array_equal(decimator.run(source, 1, 6, None), want)
    assert _resident_kib(path.resolve()) < 1024
    np.asarray(mapped[: n // 2]).sum()  # without the release the pages stay: the measure sees them
    assert _resident_kib(path.resolve()) > 8000


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
    from emucompile.bundle.store import _unlisted_files, verify_integrity

    bundle = _copy(crane, tmp_path)
    (bundle / "verification").mkdir()
    (bundle / "verification" / "verification.json").write_text("{}")
    assert verify_integrity(bundle) == []
    assert _unlisted_files(bundle, json.loads((bundle / "manifest.json").read_text())) == []


# -- statistics: intact bundles pass, altered ones fail the right check ------------------------------


def _names(checks, *, passed):
    return {c.name.split(" [")[0] for c in checks if c.passed is passed}


@pytest.mark.parametrize("demo", sorted(DEMO_DURATIONS_S))
def test_every_demo_profile_verifies_with_exit_0(demo, tmp_path):
    out = tmp_path / "bundle"
    compiler.compile_profile(DEMOS / demo, out, duration_s=DEMO_DURATIONS_S[demo])
    result = _run("verify", out, "--no-plots", "--json")
    document = json.loads(result.stdout)
    assert result.exit_code == 0, [c for c in document["checks"] if c["passed"] is False]
    assert document["passed"] is True
    assert (out / "verification" / "verification.json").is_file()


def test_intact_bundle_passes_and_ci16_delivered_too(crane):
    result = verifier.verify_bundle(crane, delivered=True)
    assert result.passed, [c.to_dict() for c in result.failed]
    delivered = [c for c in result.checks if c.name.startswith("delivered ci16: ")]
    assert delivered and any(c.passed for c in delivered)
    assert result.identity["delivered"] == ["ci16"]


def test_a_tap_scaled_by_2_db_fails_its_mean_power(crane, tmp_path):
    bundle = _copy(crane, tmp_path)

    def scale(gains):
        gains[..., 2] *= np.float32(10 ** (2 / 20))

    _edit_gains(bundle, scale)
    result = _run("verify", bundle, "--no-plots", "--json")
    assert result.exit_code == 1
    failed = [c for c in json.loads(result.stdout)["checks"] if c["passed"] is False]
    assert {c["tap"] for c in failed if c["name"] == "mean_power"} == {2}, failed


def test_a_tap_replaced_by_white_noise_fails_autocorrelation_and_psd(tmp_path):
    """20 s (1200 Doppler periods): the PSD check's per-bin tolerance is then about +-3 dB (+-5.7 dB
    on the 5 s bundle), and white noise in the record band lies 8.6 dB under the classical edges."""
    bundle = tmp_path / "long"
    compiler.compile_profile(DEMOS / "port-crane-los.yaml", bundle, duration_s=20.0)

    def whiten(gains):
        rng = np.random.default_rng(11)
        n = gains.shape[0]
        scale = math.sqrt(float(np.mean(np.abs(gains[..., 2]) ** 2)) / 2)
        gains[:, 0, 0, 2] = (scale * (rng.standard_normal(n) + 1j * rng.standard_normal(n))).astype(np.complex64)

    _edit_gains(bundle, whiten)
    result = verifier.verify_bundle(bundle)
    failed = {c.name for c in result.failed if c.tap == 2}
    assert not result.passed
    assert {"autocorrelation", "doppler_psd", "out_of_band_power", "power_beyond_record_band"} <= failed, failed
    assert all(c.tap == 2 or (isinstance(c.tap, (tuple, list)) and 2 in c.tap) for c in result.failed)


def test_a_rician_tap_without_its_direct_part_fails_the_k_factor(crane, tmp_path):
    bundle = _copy(crane, tmp_path)
    manifest = json.loads((bundle / "manifest.json").read_text())
    tap = manifest["taps"][0]
    assert tap["fading"] == "rician"
    k = 10 ** (tap["k_db"] / 10)
    amplitude = math.sqrt(tap["power_linear"] * k / (k + 1))

    def remove_direct(gains):
        t = np.arange(gains.shape[0]) / manifest["update_rate_hz"]
        direct = amplitude * np.exp(1j * (2 * np.pi * tap["los_doppler_hz"] * t + np.deg2rad(tap["los_phase_deg"])))
        residual = gains[:, 0, 0, 0] - direct
        assert np.mean(np.abs(residual) ** 2) < 0.5 * np.mean(np.abs(gains[:, 0, 0, 0]) ** 2)  # it was there
        gains[:, 0, 0, 0] = residual.astype(np.complex64)

    _edit_gains(bundle, remove_direct)
    result = verifier.verify_bundle(bundle)
    failed = {c.name for c in result.failed if c.tap == 0}
    assert "k_factor" in failed, failed


def test_a_periodic_bundle_verifies_across_the_wrap(tmp_path):
    out = tmp_path / "periodic"
    compiler.compile_profile(DEMOS / "port-crane-los.yaml", out, duration_s=5.0, periodic=True)
    result = verifier.verify_bundle(out)
    assert result.passed, [c.to_dict() for c in result.failed]
    assert result.identity["periodic"] is True
    assert decimate.Decimator(result.update_rate_hz, 60.23, result.identity["n_samples"], True).n_out \
        == len(result.records[0])


# -- what cannot be meaningful says so -----------------------------------------------------------------


def test_a_short_record_says_not_enough_data_never_pass(tmp_path):
    """0.5 s of 60 Hz Doppler: T f_D = 30 < 50."""
    out = tmp_path / "short"
    compiler.compile_profile(DEMOS / "port-crane-los.yaml", out, duration_s=0.5)
    result = verifier.verify_bundle(out)
    statistical = [c for c in result.checks if not c.name.startswith(("fir_", "power_beyond_record_band"))]
    assert len(statistical) >= 6 * 9
    for check in statistical:
        assert check.passed is None and "not enough data" in check.reason, check.to_dict()
    assert _run("verify", out, "--no-plots").exit_code == 0  # nothing failed; nothing claimed either


def test_static_taps_get_no_envelope_verdict(tmp_path):
    out = tmp_path / "bench"
    compiler.compile_profile(DEMOS / "bench-two-path.json", out)
    result = verifier.verify_bundle(out)
    assert result.passed
    for check in result.checks:
        if check.tap is not None and any(w in check.name for w in ("ks", "lcr", "afd", "k_factor")):
            assert check.passed is None and check.reason, check.to_dict()


# -- foreign gains, JSON ------------------------------------------------------------------------------


@pytest.mark.parametrize("kind", ["npy", "cf32"])
def test_foreign_gains_verify_against_their_profile(crane, tmp_path, kind):
    gains = np.load(crane / "tap_gains.npy")[:, 0, 0, :]
    file = tmp_path / f"gains.{kind}"
    if kind == "npy":
        np.save(file, gains)
    else:
        gains.astype("<c8").tofile(file)
    rate = json.loads((crane / "manifest.json").read_text())["update_rate_hz"]
    result = _run("verify", "--gains", file, "--profile", DEMOS / "port-crane-los.yaml", "--update-rate", rate,
                  "--no-plots", "--json")
    document = json.loads(result.stdout)
    assert result.exit_code == 0, [c for c in document["checks"] if c["passed"] is False]
    assert document["foreign"] is True
    assert document["identity"]["integrity"].startswith("not applicable")
    assert (tmp_path / f"gains.{kind}.verification" / "verification.json").is_file()


def test_foreign_gains_with_the_wrong_number_of_columns_exit_2(tmp_path):
    file = tmp_path / "g.npy"
    np.save(file, np.zeros((1000, 3), dtype=np.complex64))
    result = _run("verify", "--gains", file, "--profile", DEMOS / "port-crane-los.yaml", "--update-rate", 2000)
    assert result.exit_code == 2 and "tap column" in result.stderr


def test_json_is_strict_and_has_the_contract_keys(crane, tmp_path):
    result = _run("verify", crane, "--no-plots", "--json", "--report", tmp_path / "r.html")

    def refuse(name):
        raise ValueError(name)

    document = json.loads(result.stdout, parse_constant=refuse)
    assert set(document) >= {"passed", "false_alarm", "checks"} and document["false_alarm"] == 0.01
    for check in document["checks"]:
        assert set(check) >= {"name", "tap", "value", "expected", "tolerance", "passed"}
        if check["passed"] is None:
            assert check["reason"]
    written = json.loads((tmp_path / "r.verification.json").read_text(), parse_constant=refuse)
    assert written["checks"] == document["checks"]


def test_python_api_returns_the_checks(crane):
    import emucompile

    result = emucompile.verify_bundle(crane, false_alarm=0.05)
    assert result.false_alarm == 0.05 and result.checks and result.models[0].k_linear > 1
    assert set(result.records) == set(range(6)) and result.record_rate_hz < result.update_rate_hz
    assert result.fir_map is not None and result.sample_rate_hz == 30.72e6


# -- MIMO and shadowing -------------------------------------------------------------------------------

MIMO_PROFILE = """\
format_version: 1
name: verify-mimo-lab
description: invented for the tests (2x2, TS 36.104 medium correlation, 6 dB shadowing)
max_doppler_hz: 50
speed_kmh: 30
carrier_hz: 1.8e9
taps:
  - {delay_ns: 0, power_db: 0, fading: rician, k_db: 6, los_angle_deg: 45}
  - {delay_ns: 200, power_db: -6}
mimo:
  n_tx: 2
  n_rx: 2
  correlation: {level: medium, specification: ts36104}
  direct_part: identical
conditions: {shadowing: {sigma_db: 6, decorrelation_distance_m: 20}}
"""


@pytest.fixture(scope="module")
def mimo_bundle(tmp_path_factory):
    root = tmp_path_factory.mktemp("mimo")
    (root / "mimo.yaml").write_text(MIMO_PROFILE)
    out = root / "bundle"
    compiler.compile_profile(root / "mimo.yaml", out, duration_s=6.0, seed=5)
    return out


def test_mimo_with_shadowing_verifies_per_link_and_the_achieved_correlation(mimo_bundle):
    result = verifier.verify_bundle(mimo_bundle)
    assert result.passed, [c.to_dict() for c in result.failed]
    mimo = [c for c in result.checks if c.name.startswith("mimo_correlation")]
    assert len(mimo) == 2 * 6 and all(c.passed for c in mimo)  # 2 taps x 6 link pairs
    per_link = [c for c in result.checks if c.name.startswith("mean_power [")]
    assert len(per_link) == 2 * 4 and all(c.passed for c in per_link)  # shadowing divided out first
    assert set(result.link_records) == {0, 1} and result.link_records[0].shape[1] == 4


def test_a_decorrelated_link_fails_the_mimo_correlation(mimo_bundle, tmp_path):
    """Link rx1-tx0 of tap 1 shifted by half the record under the same shadowing: its own statistics
    hold, its correlation with the other links (0.9 with rx0-tx0) is gone."""
    bundle = _copy(mimo_bundle, tmp_path)
    amplitude = 10 ** (np.load(bundle / "shadowing_db.npy") / 20)

    def shift(gains):
        small = np.array(gains[:, 1, 0, 1]) / amplitude
        gains[:, 1, 0, 1] = (np.roll(small, gains.shape[0] // 2) * amplitude).astype(np.complex64)

    _edit_gains(bundle, shift)
    result = verifier.verify_bundle(bundle)
    failed = {c.name for c in result.failed}
    assert "mimo_correlation [links rx0-tx0~rx1-tx0]" in failed, failed
    assert not any(name.startswith("mean_power") for name in failed), failed


# -- delivered FIR ---------------------------------------------------------------------------------------


def test_delivered_fir_columns_are_checked_and_an_edited_column_fails(tmp_path):
    out = tmp_path / "fir"
    compiler.compile_profile(DEMOS / "port-crane-los.yaml", out, duration_s=5.0, formats="fir",
                             delay_mapping="nearest")
    result = verifier.verify_bundle(out, delivered=True)
    assert result.passed, [c.to_dict() for c in result.failed]
    assert result.identity["delivered"] == ["fir"]
    delivered = [c for c in result.checks if c.name.startswith("delivered fir[")]
    assert sum(c.passed is True for c in delivered) >= 6 * 6  # six taps, one column each (nearest)
    nearest = [c for c in result.checks if c.name == "fir_rms_delay_spread"]
    assert nearest and nearest[0].passed is True

    column = int(np.flatnonzero(np.load(out / "fir_map.npy")[2])[0])
    fir = np.load(out / "fir.npy", mmap_mode="r+")
    fir[..., column] *= np.float32(10 ** (2 / 20))
    fir.flush()
    del fir
    _rehash(out)
    failed = {(c.name, c.tap) for c in verifier.verify_bundle(out, delivered=True).failed}
    assert (f"delivered fir[{column}]: mean_power", 2) in failed, failed
    assert all(name.startswith("delivered fir") for name, _ in failed), failed  # the gains themselves are intact


def test_two_worker_processes_give_the_same_checks(crane):
    one = verifier.verify_bundle(crane, workers=1)
    two = verifier.verify_bundle(crane, workers=2)
    assert [c.to_dict() for c in one.checks] == [c.to_dict() for c in two.checks]


def test_an_unwritable_report_directory_warns_and_keeps_the_verdict(crane, monkeypatch):
    def refuse(*args, **kwargs):
        raise PermissionError(13, "Permission denied")

    monkeypatch.setattr(outputs, "write_outputs", refuse)
    result = _run("verify", crane, "--no-plots")
    assert result.exit_code == 0 and "report not written" in result.stderr
    assert _run("verify", crane, "--no-plots", "--report", "/x/r.html").exit_code == 2


# -- the emulator fit in plain view ----------------------------------------------------------------



def test_an_accepted_fit_is_shown_and_the_delivered_integer_coefficients_are_judged(tmp_path):
    from emucompile.compile import compiler
    from emucompile.report import figures as plots
    from emucompile.report import html as report
    from emucompile.verify import run as verifier
    from emucompile.profile.model import load_profile_text

    profile = load_profile_text(FIT_EXAMPLE, filename="fit-example.yaml")
    bundle = compiler.compile_profile(profile, tmp_path / "fit", duration_s=2.0, seed=11, accept_fit=True).path
    result = verifier.verify_bundle(bundle, delivered=True)
    record = result.to_dict()
    fit = record["emulator_fit"]
    assert fit["taps_dropped"] == [16, 17, 20, 21, 22, 23] and len(fit["taps_merged"]) == 5
    assert fit["rms_delay_spread_s"]["fitted"] == pytest.approx(62.556e-9, rel=1e-4)
    assert fit["coefficients"]["clipped_values"] == 0 and fit["coefficients"]["file"] == "fir_coefficients.ci16"
    by_name = {c["name"]: c for c in record["checks"]}
    judged = by_name["fit_rms_delay_spread"]
    assert judged["passed"] is None and "accepted at compile with --accept-fit" in judged["reason"]
    spread = by_name["fir_rms_delay_spread"]
    assert spread["compared_with"] == "fitted channel" and "62.56 ns" in spread["comparison"]
    assert "100 ns" in spread["comparison"]  # both shown where they differ
    codes = [c for c in record["checks"] if c["name"].startswith("delivered fir codes[")]
    assert {c["compared_with"] for c in codes} == {"fitted channel"}
    # every stored path is judged; merged Rayleigh taps of one spectrum as one tap of the summed power
    assert {c["name"].split("]")[0] for c in codes if c["passed"] is not None} == {
        f"delivered fir codes[{column}" for column in fit_columns(bundle)}
    assert "fir_coefficients" in record["identity"]["delivered"]
    # the report's matrix in the JSON: every per-tap check in one cell, with its value
    matrix = record["check_matrix"]
    placed = [i for row in matrix["rows"] for cell in row["cells"].values() for i in cell["checks"]]
    assert len(placed) == len(set(placed))
    for row in matrix["rows"]:
        for cell in row["cells"].values():
            assert cell["values"] == [record["checks"][i]["value"] for i in cell["checks"]]
    assert {row["source"] for row in matrix["rows"]} >= {"", "delivered fir codes[0]"}
    assert result.passed
    page = report.render_report(result, plots.make_figures(result)[:1])
    assert '<h2 id="fit">Emulator fit</h2>' in page and "accepted at compile with --accept-fit" in page
    assert page.count("<td>dropped</td>") == 6 and "<td>merged with 2, 3, 4 at 32.55 ns</td>" in page


def fit_columns(bundle):
    from emucompile import open_bundle

    return open_bundle(bundle).entry("fir_coefficients_int")["coefficient_codes"]["columns"]


def test_a_fit_beyond_the_tolerance_that_was_not_accepted_fails_verify(tmp_path):
    # a bundle whose manifest records no acceptance (made before it was recorded): judged at the default
    import json

    from emucompile.compile import compiler
    from emucompile.verify import run as verifier
    from emucompile.profile.model import load_profile_text

    profile = load_profile_text(FIT_EXAMPLE, filename="fit-example.yaml")
    bundle = compiler.compile_profile(profile, tmp_path / "fit", duration_s=1.0, seed=12, accept_fit=True).path
    manifest_path = bundle / "manifest.json"
    manifest = json.loads(manifest_path.read_text())
    del manifest["target"]["fit_acceptance"]
    manifest_path.write_text(json.dumps(manifest))
    result = verifier.verify_bundle(bundle)
    failed = [c for c in result.failed if c.name == "fit_rms_delay_spread"]
    assert len(failed) == 1 and failed[0].tolerance == pytest.approx(10e-9, rel=1e-3)


# -- the SHA-256 pass ahead of the decimator ---------------------------------------------------------


def test_the_hash_reports_its_progress_and_equals_hashlib(tmp_path):
    """sha256_file's progress reaches the file's size block by block; the digest is hashlib's."""
    import hashlib

    from emucompile.bundle import readers

    data = np.random.default_rng(2).bytes(3 * 4096 + 17)
    path = tmp_path / "blob"
    path.write_bytes(data)
    seen = []
    assert readers.sha256_file(path, block_bytes=4096, progress=seen.append) == hashlib.sha256(data).hexdigest()
    assert seen == [4096, 8192, 12288, len(data)]


def test_the_decimator_reads_behind_the_hash_and_never_waits_for_a_finished_one(crane):
    """verify's reads of the gains wait for the SHA-256 pass to have read those bytes (so they come from the
    page cache), never for a read far ahead of it, and not at all once it has ended."""
    import threading

    front = verifier.HashFront("tap_gains.npy")
    released = threading.Event()

    def reader():
        front.wait(0, 4096)
        released.set()

    waiting = threading.Thread(target=reader)
    waiting.start()
    assert not released.wait(0.2)  # nothing hashed yet: the read waits
    front._progress("other.npy", 10**9)  # another file's progress does not count
    assert not released.wait(0.2)
    front._progress("tap_gains.npy", 4096)
    assert released.wait(5.0)
    waiting.join()
    far = verifier.HASH_LEAD_BYTES + 8192
    front.wait(far, far + 4096)  # far ahead (a periodic record's wrap): returns at once
    problems = front.hash_bundle(crane)
    assert problems == [] and front.finished
    front.wait(10**12, 10**12 + 1)  # the pass has ended: nothing waits
