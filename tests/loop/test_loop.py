"""The closed loop without hardware: ``apply`` plays the emulator, ``measure`` judges what came out.

The scenario (three Rayleigh taps at 0, 12 and 37 us, f_D = 100 Hz, 200 kHz
sample rate, updates at 1600 Hz = 16 f_D) is invented for the tests; 2 s of
probe give T f_D = 200, enough for every statistical check to apply. The
emulator adds 30 dB of white noise (over the whole band, against the output
power), an unknown bulk delay of 3 samples, a frequency offset of 3 Hz and a
gain of -6 dB at 40 degrees: the correct emulator passes; each faulty one
fails naming its fault.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from click.testing import CliRunner

from emucompile.bundle.store import open_bundle
from emucompile.cli import cli
from emucompile.compile.compiler import compile_profile
from emucompile.errors import InputError
from emucompile.loop import probe as pr
from emucompile.loop import software
from emucompile.loop.estimate import NoProbe
from emucompile.loop.measure import measure_capture

RATE = 200e3
UPDATE = 1600.0
PROFILE = """# Invented three-tap scenario for the closed-loop tests (not a measurement).
format_version: 1
name: loop-test-three-taps
description: Invented for the closed-loop tests.
max_doppler_hz: {fd}
taps:
  - {{delay_ns: 0, power_db: 0}}
  - {{delay_us: 12, power_db: -3}}
  - {{delay_us: 37, power_db: -8}}
"""
MIMO = """# Invented 2x2 scenario for the closed-loop tests (not a measurement).
format_version: 1
name: loop-test-two-by-two
description: Invented for the closed-loop tests.
max_doppler_hz: 100
mimo: {n_tx: 2, n_rx: 2, correlation: {tx: 0.3, rx: 0.5}}
taps:
  - {delay_ns: 0, power_db: 0}
  - {delay_us: 12, power_db: -4}
"""


def _bundle(directory, text, seed, name):
    profile = directory / f"{name}.yaml"
    profile.write_text(text)
    out = directory / name
    compile_profile(str(profile), str(out), duration_s=2.5, seed=seed, sample_rate_hz=RATE, update_rate_hz=UPDATE)
    return out, profile


@pytest.fixture(scope="module")
def lab(tmp_path_factory):
    directory = tmp_path_factory.mktemp("loop")
    bundle, profile = _bundle(directory, PROFILE.format(fd=100), 1, "b")
    files = pr.write_probe(directory / "probe", RATE, bundle=bundle, duration_s=2.0, output_format="cf32")
    return {"dir": directory, "bundle": bundle, "profile": profile, "probe": files.description_path,
            "design": files.design}


def play(design, bundle, path, **changes):
    """The emulator in software (:func:`emucompile.loop.software.play`), its capture saved as npy."""
    np.save(path, software.play(design, bundle, **changes))
    return path


def test_zadoff_chu_spectrum_and_correlation(lab):
    d = lab["design"]
    # 3GPP TS 36.211 §5.5.1.1: x_q(m) = exp(-j pi q m (m + 1) / N_ZC), cyclically extended
    m = np.arange(d.occupied_bins)
    reference = np.exp(-1j * np.pi * d.root * (m % d.zc_length) * (m % d.zc_length + 1) / d.zc_length)
    assert np.allclose(d.spectrum(), reference)
    assert d.zc_length == 47 and all(d.zc_length % k for k in range(2, 7))
    spectrum = np.fft.fft(d.period(0))
    occupied = np.zeros(d.period_samples, bool)
    occupied[d.bins()] = True
    assert np.allclose(np.abs(spectrum[occupied]), d.period_samples / math.sqrt(d.occupied_bins))
    assert np.max(np.abs(spectrum[~occupied])) < 1e-9  # band-limited: nothing outside the stated bins
    assert np.isclose(np.mean(np.abs(d.period(0)) ** 2), 1.0)
    # the ZC sequence itself: ideal periodic autocorrelation, |cross-correlation| = sqrt(N) between roots whose
    # difference is prime to N (Chu 1972; Sarwate 1979 for the cross-correlation)
    zc = d.spectrum()[: d.zc_length]
    other = d.spectrum(d.preamble_root)[: d.zc_length]
    auto = np.abs(np.fft.ifft(np.fft.fft(zc) * np.conj(np.fft.fft(zc))))
    assert auto[0] == pytest.approx(d.zc_length) and np.max(auto[1:]) < 1e-9
    cross = np.abs(np.fft.ifft(np.fft.fft(zc) * np.conj(np.fft.fft(other))))
    assert np.allclose(cross, math.sqrt(d.zc_length))


def test_period_and_rate_follow_the_channel(lab):
    d = lab["design"]
    assert d.period_samples >= d.n_tx * (d.span_samples + d.guard_samples)
    assert d.repetition_rate_hz >= 2 * 2 * 100.0  # 2 x the largest Doppler, with the margin of 2
    description = json.loads(lab["probe"].read_text())
    data = lab["probe"].with_name(description["file"]["name"]).read_bytes()
    import hashlib

    assert description["file"]["sha256"] == hashlib.sha256(data).hexdigest()
    assert np.allclose(np.frombuffer(data, "<c8").reshape(-1, 1), d.waveform())


def test_sigmf_probe_passes_the_sigmf_validator(lab, tmp_path):
    from sigmf import sigmffile

    files = pr.write_probe(tmp_path / "p", RATE, profile=lab["profile"], duration_s=0.05)
    meta = tmp_path / "p.sigmf-meta"
    recording = sigmffile.fromfile(str(meta))
    recording.validate()  # the SigMF library's own validator (raises on an invalid file)
    assert recording.get_global_field("core:sample_rate") == RATE
    assert files.design.n_periods >= 3


def test_a_probe_is_never_written_over_an_existing_one_without_force(lab, tmp_path):
    """The probe's files go through the one atomic writer: no clobbering, nothing half-written or left over."""
    pr.write_probe(tmp_path / "p", RATE, profile=lab["profile"], duration_s=0.05, output_format="cf32")
    before = {p.name: p.read_bytes() for p in tmp_path.iterdir()}
    with pytest.raises(InputError, match="exists"):
        pr.write_probe(tmp_path / "p", RATE, profile=lab["profile"], duration_s=0.1, output_format="cf32")
    assert {p.name: p.read_bytes() for p in tmp_path.iterdir()} == before  # untouched, no temporary left
    pr.write_probe(tmp_path / "p", RATE, profile=lab["profile"], duration_s=0.1, output_format="cf32", force=True)
    after = {p.name: p.read_bytes() for p in tmp_path.iterdir()}
    assert sorted(after) == sorted(before) and after["p.cf32"] != before["p.cf32"]


def test_channels_that_cannot_be_sounded_are_refused(tmp_path):
    overspread = tmp_path / "over.yaml"
    overspread.write_text("format_version: 1\nname: over\nmax_doppler_hz: 5000\n"
                          "taps: [{delay_ns: 0, power_db: 0}, {delay_us: 120, power_db: -3}]\n")
    result = CliRunner().invoke(cli, ["probe", "-o", str(tmp_path / "p"), "--sample-rate", "1e6",
                                      "--profile", str(overspread)])
    assert result.exit_code == 2
    assert "cannot be sounded" in result.output and ">= 1" in result.output and "Molisch" in result.output
    slow = tmp_path / "slow.yaml"  # tau 2 nu = 0.4 < 1, but 1 us of delay at 100 MHz needs a period too long
    slow.write_text("format_version: 1\nname: slow\nmax_doppler_hz: 2000\n"
                    "taps: [{delay_ns: 0, power_db: 0}, {delay_us: 100, power_db: -3}]\n")
    result = CliRunner().invoke(cli, ["probe", "-o", str(tmp_path / "p"), "--sample-rate", "100e6",
                                      "--profile", str(slow), "--transmitters", "1"])
    assert result.exit_code == 2 and "cannot be sounded at" in result.output
    assert not list(tmp_path.glob("p.*"))


def test_correct_emulator_passes(lab):
    capture = play(lab["design"], lab["bundle"], lab["dir"] / "good.npy")
    result = measure_capture(capture, lab["probe"], bundle=lab["bundle"], outdir=lab["dir"] / "m-good")
    assert result.status == "pass", result.summary()
    record = result.record
    assert record["estimate"]["snr_db"][0] == pytest.approx(30.0, abs=1.0)  # the noise estimate against apply's
    assert record["estimate"]["arrival_sample"] == pytest.approx(3.0, abs=0.1)  # the bulk delay
    assert record["bundle"]["cfo_hz"] == pytest.approx(3.0, abs=0.05)
    assert record["bundle"]["gain_db"] == pytest.approx(-6.02, abs=0.1)
    assert np.all(np.abs(np.array(record["estimate"]["tap_delay_error_s"]) * RATE) < 0.05)
    applicable = [c for c in record["profile"]["checks"] if c["passed"] is not None]
    assert {c["name"].split(" [")[0] for c in applicable} >= {"mean_power", "envelope_ks", "autocorrelation",
                                                            "doppler_psd", "level_crossing_rate"}
    # the error beyond the noise (the estimator's own: the time variation within a period) is far below the limit
    for row in record["bundle"]["per_tap"]:
        assert row["excess_db"] is None or row["excess_db"] < record["bundle"]["limit_db"] - 6.0
    # verify --gains reads what measure wrote
    from emucompile.verify.run import verify_gains

    verification = verify_gains(lab["dir"] / "m-good" / "gains.npy", lab["profile"], record["profile"]["record_rate_hz"])
    assert verification.checks


def test_a_tap_at_the_wrong_delay_is_measured(lab):
    """The emulator puts tap 1 half a sample (2.5 us) late: its delay error is measured, the others' are ~0."""
    from emucompile.models import grid

    opened = open_bundle(lab["bundle"])
    profile = opened.manifest["taps"]
    delays = [t["delay_s"] for t in profile]
    powers = [10 ** (t["power_db"] / 10) for t in profile]
    right = grid.fir_map(delays, powers, RATE)
    late = grid.fir_map([d + (0.5 / RATE if i == 1 else 0.0) for i, d in enumerate(delays)], powers, RATE)
    assert late.bulk_delay_samples == right.bulk_delay_samples
    capture = play(lab["design"], lab["bundle"], lab["dir"] / "late.npy", fir_matrix=late.matrix)
    result = measure_capture(capture, lab["probe"], bundle=lab["bundle"])
    errors = np.array(result.record["estimate"]["tap_delay_error_s"]) * RATE
    assert errors[1] == pytest.approx(0.5, abs=0.05)
    assert np.all(np.abs(errors[[0, 2]]) < 0.05)
    assert result.status == "fail"


def _faulty(lab, name, **changes):
    capture = play(lab["design"], lab["bundle"], lab["dir"] / f"{name}.npy", **changes)
    return measure_capture(capture, lab["probe"], bundle=lab["bundle"],
                           between_updates=changes.get("between"))


def test_one_tap_3_db_low_is_a_power_error(lab):
    gains = np.array(open_bundle(lab["bundle"]).tap_gains)
    gains[..., 1] *= 10 ** (-3 / 20)
    result = _faulty(lab, "low", gains=gains)
    assert result.status == "fail"
    assert [f["fault"] for f in result.faults] == ["power"] and result.faults[0]["taps"] == [1]
    assert result.faults[0]["level_db"] == pytest.approx(-3.0, abs=0.3)


def test_a_missing_tap_is_named(lab):
    gains = np.array(open_bundle(lab["bundle"]).tap_gains)
    gains[..., 2] = 0
    result = _faulty(lab, "missing", gains=gains)
    assert [(f["fault"], f["taps"]) for f in result.faults] == [("missing", [2])]


def test_swapped_taps_are_named(lab):
    gains = np.array(open_bundle(lab["bundle"]).tap_gains)
    gains[..., [0, 1]] = gains[..., [1, 0]]
    result = _faulty(lab, "swapped", gains=gains)
    assert [(f["fault"], f["taps"]) for f in result.faults] == [("swapped", [0, 1])]


def test_half_update_rate_with_hold_is_named(lab):
    gains = np.array(open_bundle(lab["bundle"]).tap_gains)
    gains[1::2] = gains[0:-1:2][: gains[1::2].shape[0]]
    result = _faulty(lab, "half", gains=gains, between="hold")
    assert [f["fault"] for f in result.faults] == ["update_rate"], result.summary()


@pytest.mark.slow
@pytest.mark.parametrize("fd, seed, fault", [(100, 2, "wrong_bundle"), (110, 1, "doppler")])
def test_another_seed_is_a_wrong_bundle_and_a_faster_one_a_doppler_error(lab, fd, seed, fault):
    """The emulator runs another bundle: the same profile with another seed, or compiled at 1.1 f_D."""
    other, _ = _bundle(lab["dir"], PROFILE.format(fd=fd), seed, f"other-{fd}-{seed}")
    capture = play(lab["design"], other, lab["dir"] / f"other-{fd}-{seed}.npy")
    result = measure_capture(capture, lab["probe"], bundle=lab["bundle"])
    assert [f["fault"] for f in result.faults] == [fault], result.summary()
    assert result.record["doppler_scale"] == pytest.approx(fd / 100, abs=0.05)


@pytest.mark.slow
def test_two_by_two_with_two_transmit_probes(tmp_path):
    bundle, _ = _bundle(tmp_path, MIMO, 3, "mimo")
    files = pr.write_probe(tmp_path / "probe", RATE, bundle=bundle, duration_s=2.0, output_format="cf32")
    design = files.design
    assert design.n_tx == 2 and design.cyclic_shifts == [0, design.period_samples // 2]
    capture = play(design, bundle, tmp_path / "cap.npy")
    result = measure_capture(capture, files.description_path, bundle=bundle)
    assert result.status == "pass", result.summary()
    assert len(result.record["bundle"]["per_tap"]) == 8  # 2 taps x 2 rx x 2 tx


def test_profile_only_measurement_reports_drift(lab):
    capture = play(lab["design"], lab["bundle"], lab["dir"] / "drift.npy", cfo_hz=0.0)
    result = measure_capture(capture, lab["probe"], profile=lab["profile"])
    assert result.status == "pass", result.summary()
    assert abs(result.record["residual_drift_hz"]) < 5.0
    assert result.record["bundle"] is None


def test_cli_probe_measure_json_and_report(lab, tmp_path):
    runner = CliRunner()
    out = runner.invoke(cli, ["probe", "-o", str(tmp_path / "p"), "--sample-rate", str(RATE), "--bundle",
                              str(lab["bundle"]), "--duration", "2", "--format", "ci16"])
    assert out.exit_code == 0, out.output
    description = json.loads((tmp_path / "p.probe.json").read_text())
    assert description["file"]["datatype"] == "ci16_le" and description["sequence"]["family"] == "zadoff-chu"
    capture = play(lab["design"], lab["bundle"], tmp_path / "cap.npy")
    result = runner.invoke(cli, ["measure", str(capture), "--probe", str(lab["probe"]), "--bundle",
                                 str(lab["bundle"]), "--json", "--report", str(tmp_path / "r.html")])
    assert result.exit_code == 0, result.output
    record = json.loads(result.stdout)
    assert record["status"] == "pass" and record["identities"]["probe_description_sha256"]
    page = (tmp_path / "r.html").read_text()
    assert "Power delay profile" in page and "accredited conformance" in page and "data:image/png" in page


def test_no_probe_found_is_bad_input(lab, tmp_path):
    rng = np.random.default_rng(0)
    noise = (rng.standard_normal((200_000, 1)) + 1j * rng.standard_normal((200_000, 1))).astype(np.complex64)
    np.save(tmp_path / "noise.npy", noise)
    with pytest.raises(NoProbe, match=r"no probe found.*peak-to-sidelobe|no probe found.*dB above"):
        measure_capture(tmp_path / "noise.npy", lab["probe"], bundle=lab["bundle"])
    result = CliRunner().invoke(cli, ["measure", str(tmp_path / "noise.npy"), "--probe", str(lab["probe"]),
                                      "--bundle", str(lab["bundle"])])
    assert result.exit_code == 2 and "no probe found" in result.output


def test_another_sample_rate_is_bad_input(lab, tmp_path):
    capture = play(lab["design"], lab["bundle"], tmp_path / "c.npy")
    data = np.load(capture)
    (tmp_path / "c.sigmf-data").write_bytes(data.astype("<c8").tobytes())
    (tmp_path / "c.sigmf-meta").write_text(json.dumps({
        "global": {"core:datatype": "cf32_le", "core:sample_rate": 2 * RATE, "core:version": "1.2.0"},
        "captures": [{"core:sample_start": 0}], "annotations": []}))
    result = CliRunner().invoke(cli, ["measure", str(tmp_path / "c.sigmf-meta"), "--probe", str(lab["probe"]),
                                      "--bundle", str(lab["bundle"])])
    assert result.exit_code == 2 and "probe's rate" in result.output


def test_ci16_clipping_is_counted_and_too_short_is_not_enough_data(lab, tmp_path):
    capture = np.load(play(lab["design"], lab["bundle"], tmp_path / "c.npy"))
    codes = np.empty(capture.shape + (2,), "<i2")
    scale = 4 * 32767 / np.max(np.abs(capture))  # a quarter of the peak level maps to full scale: clipping
    codes[..., 0] = np.clip(np.round(capture.real * scale), -32768, 32767)
    codes[..., 1] = np.clip(np.round(capture.imag * scale), -32768, 32767)
    (tmp_path / "c.ci16").write_bytes(codes.tobytes())
    result = CliRunner().invoke(cli, ["measure", str(tmp_path / "c.ci16"), "--probe", str(lab["probe"]),
                                      "--bundle", str(lab["bundle"])])
    assert "warning" in result.output and "clipped" in result.output
    expected = int(np.count_nonzero((codes >= 32767) | (codes <= -32767)))  # at full scale: clipped
    assert f"{expected} I/Q values" in result.output
    short = capture[: 20 * lab["design"].period_samples]
    np.save(tmp_path / "short.npy", short)
    result = CliRunner().invoke(cli, ["measure", str(tmp_path / "short.npy"), "--probe", str(lab["probe"]),
                                      "--profile", str(lab["profile"])])
    assert result.exit_code == 2 and "not enough data" in result.output


def test_the_probe_schema_is_valid_draft_2020_12():
    import importlib.resources

    import jsonschema

    packaged = importlib.resources.files("emucompile").joinpath("schemas/probe-v1.schema.json").read_bytes()
    jsonschema.Draft202012Validator.check_schema(json.loads(packaged))


def test_time_domain_projection_equals_the_fft_least_squares(lab):
    """measure projects every period by one complex64 matrix product (its time-domain weights W): it gives the
    complex128 FFT least-squares estimate pinv(A) FFT(y)[bins] / X to within a dot product's rounding bound
    (L + 5) 2^-24 sum |y| |w| (Higham 2002, sections 3.1 and 3.6, from memory), and below -60 dB of the estimate's
    own noise power (the module's error budget)."""
    from scipy import fft as sp_fft

    from emucompile.loop import estimate as est
    from emucompile.loop.probe import channel_source

    design = lab["design"]
    path = play(design, lab["bundle"], lab["dir"] / "projection.npy", cfo_hz=0.0)
    source = channel_source(design.sample_rate_hz, bundle=lab["bundle"])
    estimate = est.estimate_channel(est.open_capture(path), design, source)
    L, bins = design.period_samples, design.bins()
    signed = np.where(bins > L // 2, bins - L, bins).astype(float)
    a = est._design_matrix(est._tap_spectra(source.fir_matrix, signed, L), design.cyclic_shifts,
                           estimate.offset_samples, signed, L)
    x0 = sp_fft.fft(design.period(0))[bins]
    n = 200
    first = estimate.probe_start + L
    y = np.asarray(np.load(path)[first:first + n * L, 0], np.complex128).reshape(n, L)
    reference = (sp_fft.fft(y, axis=-1)[:, bins] / x0) @ np.linalg.pinv(a).T
    error = np.abs(estimate.gains[:n, 0, 0, :] - reference)
    weights = est._time_weights(np.linalg.pinv(a).T, bins, x0, L)
    bound = (L + 5) * 2.0 ** -24 * (np.abs(y) @ np.abs(weights))
    assert np.all(error <= bound)
    assert np.max(error / np.sqrt(estimate.noise_variance[0, 0])) < 1e-3
    assert np.max(error) > 0  # the two computations are really different ones


def test_capture_reads_give_what_the_recording_gives(tmp_path):
    """Capture blocks are read through a map of the file the capture keeps, its pages let go block by block
    (memory bounded by the block): the same samples as the recording's own reader, before and after a release,
    for npy (1-D and 2-D), raw cf32, raw ci16 and SigMF ci16 with header bytes."""
    from emucompile.loop import estimate as est

    rng = np.random.default_rng(3)
    data = (rng.standard_normal((500, 2)) + 1j * rng.standard_normal((500, 2))).astype(np.complex64)
    np.save(tmp_path / "one.npy", data[:, 0])
    np.save(tmp_path / "two.npy", data)
    data.tofile(tmp_path / "two.cf32")
    codes = rng.integers(-32768, 32767, size=(500, 2, 2), dtype="<i2")
    codes.tofile(tmp_path / "two.ci16")
    (tmp_path / "h.sigmf-data").write_bytes(b"\x01" * 12 + codes.tobytes())
    (tmp_path / "h.sigmf-meta").write_text(json.dumps({
        "global": {"core:datatype": "ci16_le", "core:num_channels": 2, "core:sample_rate": 1e6,
                   "core:version": "1.0.0"},
        "captures": [{"core:sample_start": 0, "core:header_bytes": 12}], "annotations": []}))
    for name, n_rx in (("one.npy", 1), ("two.npy", 2), ("two.cf32", 2), ("two.ci16", 2), ("h.sigmf-meta", 2)):
        capture = est.open_capture(tmp_path / name, n_rx=n_rx)
        recording = capture.recordings[0]
        for start, stop in ((0, 500), (17, 230), (490, 600)):
            np.testing.assert_array_equal(capture.read(start, stop), recording.read(start, stop), err_msg=name)
            capture.release(start, stop)
            np.testing.assert_array_equal(capture.read(start, stop), recording.read(start, stop), err_msg=name)


def test_coarse_to_fine_alignment_equals_the_exhaustive_search(lab, monkeypatch):
    """The bundle's alignment scores its grid on a regular subset of the periods, then its best points on all:
    the same offset, frequency offset and verdicts as scoring every grid point on every period."""
    from emucompile.loop import estimate as est
    from emucompile.loop import judge
    from emucompile.loop.probe import channel_source

    design = lab["design"]
    path = play(design, lab["bundle"], lab["dir"] / "coarse.npy")
    source = channel_source(design.sample_rate_hz, bundle=lab["bundle"])
    estimate = est.estimate_channel(est.open_capture(path), design, source)
    assert estimate.gains.shape[0] > 4 * 256
    results = {}
    for periods in (256, 10 ** 9):  # a subset of every n // 256-th period; every period (exhaustive)
        monkeypatch.setattr(judge, "COARSE_PERIODS", periods)
        results[periods] = judge.judge_bundle(estimate, design, source.bundle)
    coarse, exhaustive = results[256], results[10 ** 9]
    update = 1.0 / float(source.bundle.manifest["update_rate_hz"])
    assert coarse.offset_s == pytest.approx(exhaustive.offset_s, abs=2e-3 * update)  # the refinement's xatol
    assert coarse.cfo_hz == pytest.approx(exhaustive.cfo_hz, abs=1e-3)
    assert [c.passed for c in coarse.checks] == [c.passed for c in exhaustive.checks]
