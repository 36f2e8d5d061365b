"""The data formats: npy header, ci16 scaling and quantisation, csv, SigMF, FIR, hashing.

External references used here: the Rayleigh envelope exceedance
P(|g| > A) = exp(-A²/Ω) (Rayleigh law, textbook closed form); the Rician
envelope through ``scipy.stats.ncx2`` (|g|²/σ² is non-central chi-square with
2 degrees of freedom and non-centrality 2K), independent of the
``scipy.stats.rice`` call the code makes; ``scipy.stats.norm`` for the
clipping of one Gaussian component; the uniform quantisation-noise model
Δ²/12 (Widrow & Kollár 2008); the SigMF v1.2 schema's required fields.
"""

from __future__ import annotations

import hashlib
import json
import math
import re
from pathlib import Path

import numpy as np
import pytest
from scipy import stats

from emucompile.bundle import formats as fmt
from emucompile.bundle import store


def _gains(seed, shape, powers):
    """Seeded circular complex Gaussian gains, complex64, tap powers on the last axis."""
    rng = np.random.default_rng(seed)
    scale = np.sqrt(np.asarray(powers) / 2.0)
    return ((rng.standard_normal(shape) + 1j * rng.standard_normal(shape)) * scale).astype(np.complex64)


def _stream(writer, directory, chunks, **context):
    writer.open(directory)
    for chunk in chunks:
        writer.write(chunk)
    return writer.close(**context)


# -- npy -------------------------------------------------------------------------------


def test_npy_header_then_raw_data_is_a_valid_npy_file(tmp_path):
    gains = _gains(1, (7, 2, 3, 4), [1, 1, 1, 1])
    path = tmp_path / "a.npy"
    path.write_bytes(fmt.npy_header("<c8", gains.shape) + gains.astype("<c8").tobytes())
    back = np.load(path)
    assert back.dtype == np.complex64 and back.shape == gains.shape
    np.testing.assert_array_equal(back, gains)
    # NEP 1: the header is padded so that the data start is aligned (16, 64 since numpy 1.14)
    assert len(fmt.npy_header("<c8", gains.shape)) % 16 == 0


def test_array_writer_streams_chunks_and_reports_offset_and_hash(tmp_path):
    gains = _gains(2, (100, 1, 1, 3), [0.5, 0.3, 0.2])
    writer = fmt.ArrayWriter("g.npy", "tap_gains", np.complex64, gains.shape, fmt.GAIN_AXES, header=True)
    [entry] = _stream(writer, tmp_path, [gains[:33], gains[33:34], gains[34:]])
    data = (tmp_path / "g.npy").read_bytes()
    assert entry["sha256"] == hashlib.sha256(data).hexdigest()
    assert entry["size_bytes"] == len(data) == writer.size_bytes
    raw = np.frombuffer(data[entry["data_offset"]:], dtype="<c8").reshape(gains.shape)
    np.testing.assert_array_equal(raw, gains)
    np.testing.assert_array_equal(np.load(tmp_path / "g.npy", mmap_mode="r"), gains)


def test_array_writer_refuses_a_short_file(tmp_path):
    writer = fmt.ArrayWriter("g.npy", "tap_gains", np.complex64, (10, 1, 1, 1), fmt.GAIN_AXES, header=True)
    with pytest.raises(ValueError, match="the shape needs"):
        _stream(writer, tmp_path, [np.zeros((9, 1, 1, 1), np.complex64)])


def test_hashed_file_never_overwrites(tmp_path):
    (tmp_path / "x").write_bytes(b"keep")
    with pytest.raises(FileExistsError):
        fmt.HashedFile(tmp_path / "x")
    assert (tmp_path / "x").read_bytes() == b"keep"


def test_hashed_file_with_early_writeback_keeps_every_byte(tmp_path, monkeypatch):
    monkeypatch.setattr(fmt.HashedFile, "WRITEBACK_BYTES", 1000)  # many writeback windows
    data = np.random.default_rng(4).bytes(25_000)
    handle = fmt.HashedFile(tmp_path / "w", sha512=True)
    for start in range(0, len(data), 777):
        handle.write(data[start:start + 777])
    assert handle.close() == hashlib.sha256(data).hexdigest()
    assert handle.sha512 == hashlib.sha512(data).hexdigest()
    assert (tmp_path / "w").read_bytes() == data


def test_sha256_file_matches_hashlib_across_block_boundaries(tmp_path):
    data = np.random.default_rng(3).bytes(3 * 1000 + 17)
    (tmp_path / "d").write_bytes(data)
    assert fmt.sha256_file(tmp_path / "d", block_bytes=1000) == hashlib.sha256(data).hexdigest()


# -- ci16 scale -----------------------------------------------------------------------------


@pytest.mark.parametrize("p", [1e-3, 1e-6, 1e-9])
def test_ci16_scaling_rayleigh_matches_the_closed_form(p):
    # Rayleigh envelope of mean power Ω: P(|g| > A) = exp(-A²/Ω), so A = sqrt(Ω ln(1/p)).
    scaling = fmt.ci16_scaling([0.7, 0.3], [0.0, 0.0], clip_probability=p)
    expected = math.sqrt(0.7 * math.log(1.0 / p))
    assert scaling.strongest_tap == 0
    assert scaling.clip_level == pytest.approx(expected, rel=1e-9)
    assert scaling.scale_factor == pytest.approx(fmt.CI16_FULL_SCALE / expected, rel=1e-9)
    assert scaling.headroom_db == pytest.approx(10 * math.log10(math.log(1.0 / p)), rel=1e-9)


@pytest.mark.parametrize("k", [0.5, 4.0, 20.0])
def test_ci16_scaling_rician_exceedance_equals_the_design_probability(k):
    # |g|²/σ² ~ non-central chi-square, 2 degrees of freedom, non-centrality ν²/σ² = 2K
    # (scipy.stats.ncx2), σ² = Ω/(2(K+1)): an independent route to the Rician tail.
    power, p = 0.8, 1e-6
    scaling = fmt.ci16_scaling([power, 0.01], [k, 0.0], clip_probability=p)
    assert scaling.strongest_tap == 0
    sigma2 = power / (2 * (k + 1))
    tail = stats.ncx2.sf(scaling.clip_level**2 / sigma2, df=2, nc=2 * k)
    assert tail == pytest.approx(p, rel=1e-6)


def test_ci16_scaling_static_tap_uses_its_constant_envelope_and_the_largest_level_wins():
    scaling = fmt.ci16_scaling([0.04, 0.9, 0.06], [0.0, math.inf, 0.0], clip_probability=1e-6)
    # Static 0.9: envelope sqrt(0.9) = 0.949; Rayleigh 0.06 at 1e-6: sqrt(0.06·13.8) = 0.91.
    assert scaling.strongest_tap == 1
    assert scaling.clip_level == pytest.approx(math.sqrt(0.9))
    assert scaling.headroom_db == pytest.approx(0.0, abs=1e-12)
    weak_static = fmt.ci16_scaling([0.5, 0.5], [math.inf, 0.0], clip_probability=1e-6)
    assert weak_static.strongest_tap == 1  # the Rayleigh tail reaches beyond the static amplitude


def test_ci16_scaling_refuses_nonsense():
    with pytest.raises(ValueError):
        fmt.ci16_scaling([0.0, 0.0], [0.0, 0.0])
    with pytest.raises(ValueError):
        fmt.ci16_scaling([1.0], [0.0], clip_probability=0.0)
    with pytest.raises(ValueError):
        fmt.ci16_scaling([1.0, 2.0], [0.0])


def test_ci16_clip_count_follows_the_gaussian_component_law(tmp_path):
    # Rayleigh tap, design p = 1e-3 on the envelope. One I or Q component is
    # N(0, Ω/2), so it clips with probability q = 2·norm.sf(A/sqrt(Ω/2)) (scipy.stats.norm),
    # about 2e-4: with 2N components the count is Binomial(2N, q). The accepted
    # range is the binomial's central 1 - 1e-6 interval, so a correct coder fails
    # this with probability 1e-6 whatever the seed.
    n, power, p = 200_000, 1.0, 1e-3
    scaling = fmt.ci16_scaling([power], [0.0], clip_probability=p)
    q = 2 * stats.norm.sf(scaling.clip_level / math.sqrt(power / 2))
    writer = fmt.Ci16Writer(scaling, n, 1, 1, 1, [power])
    gains = _gains(11, (n, 1, 1, 1), [power])
    [entry] = _stream(writer, tmp_path, [gains[: n // 2], gains[n // 2:]])
    low, high = stats.binom.interval(1 - 1e-6, 2 * n, q)
    counted = entry["quantisation"]["clipped_values"]
    assert low <= counted <= high
    # and the count is the honest count of what was clipped in the file
    components = gains.view(np.float32).astype(np.float64) * scaling.scale_factor
    assert counted == int((np.abs(np.rint(components)) > fmt.CI16_FULL_SCALE).sum())


def test_ci16_round_trip_within_half_a_step_and_sqnr_matches_the_uniform_model(tmp_path):
    n, powers = 100_000, [0.6, 0.3, 0.1]
    scaling = fmt.ci16_scaling(powers, [0.0, 0.0, 0.0], clip_probability=1e-6)
    gains = _gains(5, (n, 1, 2, 3), powers)
    # no clipping in this test: keep every component inside the clip level
    gains = np.where(np.abs(gains) < 0.999 * scaling.clip_level, gains, 0).astype(np.complex64)
    writer = fmt.Ci16Writer(scaling, n, 1, 2, 3, powers)
    [entry] = _stream(writer, tmp_path, [gains[:40_000], gains[40_000:]])
    q = entry["quantisation"]
    assert q["clipped_values"] == 0 and q["scale_factor"] == scaling.scale_factor
    back = fmt.read_ci16(tmp_path / "tap_gains.ci16", gains.shape, q["scale_factor"])
    step = 1.0 / scaling.scale_factor
    error = np.abs(back.view(np.float32).astype(np.float64) - gains.view(np.float32))
    # half a step, plus the float32 rounding of code/scale in the reader (|gain| < 3, eps 6e-8)
    assert error.max() <= 0.5 * step + 3 * 6e-8
    # Uniform quantisation noise: Δ²/12 per component, Δ²/6 per complex sample
    # (Widrow & Kollár 2008). The measured noise power over 2·2N components has a
    # relative standard deviation of 0.89/sqrt(4N) = 0.0014; the signal term is
    # the same data on both sides. 0.03 dB is about five standard deviations.
    for k in range(3):
        signal = np.sum(np.abs(gains[..., k].astype(np.complex128)) ** 2)
        model_db = 10 * math.log10(signal / (gains[..., k].size * step**2 / 6))
        assert q["sqnr_db_per_tap"][k] == pytest.approx(model_db, abs=0.03)
        nominal_db = 10 * math.log10(6 * powers[k] * scaling.scale_factor**2)
        assert q["sqnr_db_model_per_tap"][k] == pytest.approx(nominal_db, abs=1e-3)


def test_ci16_reports_clipping_never_silently(tmp_path):
    scaling = fmt.ci16_scaling([1.0], [0.0], clip_probability=1e-6)
    gains = np.zeros((10, 1, 1, 1), np.complex64)
    gains[3] = 10 * scaling.clip_level  # real part far beyond full scale
    gains[7] = -1j * 10 * scaling.clip_level
    [entry] = _stream(fmt.Ci16Writer(scaling, 10, 1, 1, 1, [1.0]), tmp_path, [gains])
    assert entry["quantisation"]["clipped_values"] == 2
    assert entry["quantisation"]["clipped_values_per_tap"] == [2]
    codes = np.fromfile(tmp_path / "tap_gains.ci16", dtype="<i2").reshape(10, 2)
    assert codes[3, 0] == fmt.CI16_FULL_SCALE and codes[7, 1] == -fmt.CI16_FULL_SCALE
    assert codes.min() >= -fmt.CI16_FULL_SCALE  # -32768 is never used


# -- csv ---------------------------------------------------------------------------------


def test_csv_header_format_and_round_trip(tmp_path):
    rate, shape = 1000.0, (500, 2, 1, 3)
    gains = _gains(8, shape, [0.5, 0.3, 0.2])
    gains[0, 0, 0, 0] = 0  # zero prints as 0.000000000e+00
    writer = fmt.CsvWriter(*shape, rate)
    [entry] = _stream(writer, tmp_path, [gains[:123], gains[123:]])
    text = (tmp_path / "tap_gains.csv").read_text("ascii")
    lines = text.split("\n")
    assert lines[-1] == "" and len(lines) == shape[0] + 2
    header = lines[0].split(",")
    assert header[:3] == ["time_s", "tap0_rx0_tx0_re", "tap0_rx0_tx0_im"]
    assert header[-1] == "tap2_rx1_tx0_im" and len(header) == 1 + 2 * 6
    assert entry["data_offset"] == len(lines[0]) + 1
    assert entry["size_bytes"] <= writer.size_bytes  # the estimate is an upper bound
    number = re.compile(r"^-?\d\.\d{9}e[+-]\d{2}$")  # %.9e with '.' as decimal separator
    assert all(number.match(field) for line in lines[1:-1] for field in line.split(","))
    time_s, values, names = fmt.read_csv(tmp_path / "tap_gains.csv")
    assert names[0] == "tap0_rx0_tx0" and values.shape == (shape[0], 6)
    np.testing.assert_allclose(time_s, np.arange(shape[0]) / rate, rtol=5e-10, atol=0)
    flat = gains.reshape(shape[0], -1).astype(np.complex128)
    # printed precision: 10 significant digits, so |error| <= 5e-10 relative
    np.testing.assert_allclose(values.real, flat.real, rtol=5e-10, atol=1e-300)
    np.testing.assert_allclose(values.imag, flat.imag, rtol=5e-10, atol=1e-300)
    # 9 significant digits identify a float32 (IEEE 754-2008 5.12.2, from memory): exact after casting
    np.testing.assert_array_equal(values.astype(np.complex64), flat.astype(np.complex64))


def test_csv_estimate_holds_for_the_longest_numbers(tmp_path):
    gains = np.full((50, 1, 1, 2), -1.2345678e-38 - 1.2345678e-38j, dtype=np.complex64)
    writer = fmt.CsvWriter(50, 1, 1, 2, 3.0)
    [entry] = _stream(writer, tmp_path, [gains])
    assert entry["size_bytes"] <= writer.size_bytes


# -- SigMF --------------------------------------------------------------------------------

# The parts of the SigMF v1.2 metadata schema (sigmf-schema.json) a reader
# relies on, written out here: global core:datatype and core:version required,
# core:extensions objects of exactly {name, version, optional}, captures and
# annotations arrays whose segments carry core:sample_start.
SIGMF_REQUIRED = {
    "type": "object",
    "required": ["global", "captures", "annotations"],
    "additionalProperties": False,
    "properties": {
        "global": {
            "type": "object",
            "required": ["core:datatype", "core:version"],
            "properties": {
                "core:datatype": {"type": "string", "pattern": "^(c|r)(f32|f64|i32|i16|u32|u16|i8|u8)(_le|_be)?"},
                "core:version": {"type": "string", "pattern": r"^\d+\.\d+\.\d"},
                "core:sample_rate": {"type": "number", "exclusiveMinimum": 0},
                "core:sha512": {"type": "string", "pattern": "^[0-9a-fA-F]{128}"},
                "core:extensions": {
                    "type": "array",
                    "items": {
                        "type": "object",
                        "required": ["name", "version", "optional"],
                        "additionalProperties": False,
                        "properties": {"name": {"type": "string"}, "version": {"type": "string"}, "optional": {"type": "boolean"}},
                    },
                },
            },
        },
        "captures": {"type": "array", "items": {"type": "object", "required": ["core:sample_start"]}},
        "annotations": {"type": "array", "items": {"type": "object", "required": ["core:sample_start"]}},
    },
}


def test_sigmf_one_recording_per_tap_and_link(tmp_path):
    import jsonschema

    rate, shape = 2000.0, (300, 2, 2, 3)
    gains = _gains(9, shape, [0.5, 0.3, 0.2])
    writer = fmt.SigmfWriter(*shape, rate)
    taps = [{"delay_s": 1e-7 * k, "power_db": -3.0 * k, "fading": "rayleigh", "k_db": None} for k in range(3)]
    entries = _stream(writer, tmp_path, [gains[:100], gains[100:]], taps=taps, recorder="emucompile test")
    data_entries = [e for e in entries if e["role"] == "sigmf_data"]
    assert len(data_entries) == 2 * 2 * 3 and len(entries) == 2 * len(data_entries)
    for entry in data_entries:
        meta_path = tmp_path / (entry["name"][: -len(".sigmf-data")] + ".sigmf-meta")
        metadata, samples = fmt.read_sigmf(meta_path)
        jsonschema.validate(metadata, SIGMF_REQUIRED)
        g = metadata["global"]
        assert g["core:datatype"] == "cf32_le" and g["core:sample_rate"] == rate
        # our own fields live only in the emucompile namespace, declared as an extension
        namespaces = {key.split(":")[0] for key in g}
        assert namespaces == {"core", "emucompile"}
        assert {"name": "emucompile", "version": fmt.SIGMF_EXTENSION_VERSION, "optional": True} in g["core:extensions"]
        k, r, t = entry["tap"], entry["rx"], entry["tx"]
        assert (g["emucompile:tap_index"], g["emucompile:rx_index"], g["emucompile:tx_index"]) == (k, r, t)
        assert g["emucompile:delay_s"] == taps[k]["delay_s"]
        data = (tmp_path / entry["name"]).read_bytes()
        assert g["core:sha512"] == hashlib.sha512(data).hexdigest()
        assert entry["sha256"] == hashlib.sha256(data).hexdigest()
        np.testing.assert_array_equal(samples, gains[:, r, t, k])  # exact
        assert metadata["annotations"][0]["core:sample_count"] == shape[0]
        assert json.loads(meta_path.read_text("utf-8")) == metadata


# -- FIR ----------------------------------------------------------------------------------


def test_fir_is_the_product_with_the_map_and_independent_of_chunking(tmp_path):
    shape, n_fir = (1000, 2, 1, 4), 7
    gains = _gains(12, shape, [0.4, 0.3, 0.2, 0.1])
    fir_map = np.random.default_rng(13).standard_normal((4, n_fir))
    a = fmt.FirWriter(fir_map, shape[0], 2, 1)
    b = fmt.FirWriter(fir_map, shape[0], 2, 1)
    (tmp_path / "a").mkdir()
    (tmp_path / "b").mkdir()
    [entry_a] = _stream(a, tmp_path / "a", [gains])
    [entry_b] = _stream(b, tmp_path / "b", [gains[i:i + 97] for i in range(0, shape[0], 97)])
    assert entry_a["sha256"] == entry_b["sha256"]
    fir = np.load(tmp_path / "a" / "fir.npy")
    assert fir.shape == (1000, 2, 1, n_fir) and fir.dtype == np.complex64
    reference = gains.astype(np.complex128) @ fir_map  # BLAS, another summation order
    np.testing.assert_allclose(fir, reference, rtol=0, atol=1e-6 * np.abs(reference).max())


def test_fir_of_a_static_map_has_the_bits_of_the_complex128_sum_in_tap_order(tmp_path):
    """The writer adds each tap over its run of non-zero columns only, column-major in blocks;
    the bytes are those of the plain complex128 sum over every tap and column, in tap order."""
    shape, n_fir = (2 * fmt.FirWriter._STATIC_FLOATS + 37, 2, 2, 5), 23
    gains = _gains(15, shape, [0.3, 0.3, 0.2, 0.1, 0.1])
    rng = np.random.default_rng(16)
    fir_map = np.zeros((5, n_fir))
    for k, (lo, hi) in enumerate([(0, 6), (3, 11), (9, 10), (12, 23), (4, 8)]):
        fir_map[k, lo:hi] = rng.standard_normal(hi - lo)
    fir_map[2, 9] = 1.0  # a tap on a sample: one coefficient
    [entry] = _stream(fmt.FirWriter(fir_map, shape[0], 2, 2), tmp_path, [gains[:1000], gains[1000:]])
    fir = np.load(tmp_path / "fir.npy")
    total = gains[..., 0, None].astype(np.complex128) * fir_map[0]
    for k in range(1, 5):
        total += gains[..., k, None].astype(np.complex128) * fir_map[k]
    assert fir.tobytes() == (total + 0.0).astype(np.complex64).tobytes()


def test_fir_of_a_one_hot_map_copies_the_tap(tmp_path):
    # A tap sitting exactly on a grid sample lands on one coefficient: FIR column = that tap.
    shape = (64, 1, 1, 2)
    gains = _gains(14, shape, [0.5, 0.5])
    fir_map = np.zeros((2, 5))
    fir_map[0, 0] = 1.0
    fir_map[1, 3] = 1.0
    [entry] = _stream(fmt.FirWriter(fir_map, 64, 1, 1), tmp_path, [gains])
    fir = np.load(tmp_path / "fir.npy")
    np.testing.assert_array_equal(fir[..., 0], gains[..., 0])
    np.testing.assert_array_equal(fir[..., 3], gains[..., 1])
    assert not fir[..., [1, 2, 4]].any()


def test_ci16_codes_follow_the_float64_rule_at_exact_halves_clipping_and_block_edges(tmp_path):
    """code = clip(round_half_even(float64(g) * scale), +-32767): ties go to even, clipped
    values are counted per tap, and the per-tap sums do not depend on the blocks."""
    scaling = fmt.Ci16Scaling(scale_factor=2.0, clip_level=fmt.CI16_FULL_SCALE / 2.0, headroom_db=0.0,
                              clip_probability=1e-6, strongest_tap=0)
    n = 3 * fmt.Ci16Writer._block_elements // 6 + 5  # three taps x 2 components: several blocks
    gains = _gains(4, (n, 1, 1, 3), [1.0, 4.0, 1e4])
    halves = np.array([0.25, 0.75, 1.25, -0.25, -0.75, -1.25], np.float32)  # x 2 = +-0.5, +-1.5, +-2.5
    gains[:6, 0, 0, 0] = halves + 1j * halves
    gains[7, 0, 0, 2] = 1e5 - 1e5j  # both components clip
    writer = fmt.Ci16Writer(scaling, n, 1, 1, 3, [1.0, 4.0, 1e4])
    [entry] = _stream(writer, tmp_path, [gains[:1000], gains[1000:]])
    codes = np.fromfile(tmp_path / "tap_gains.ci16", dtype="<i2").reshape(n, 1, 1, 3, 2)
    assert codes[:6, 0, 0, 0, 0].tolist() == [0, 2, 2, 0, -2, -2]
    components = gains.view(np.float32).reshape(n, 1, 1, 3, 2).astype(np.float64) * 2.0
    np.testing.assert_array_equal(codes, np.clip(np.rint(components), -32767, 32767))
    clipped = (np.abs(np.rint(components)) > 32767).sum(axis=(0, 1, 2, 4))
    assert entry["quantisation"]["clipped_values_per_tap"] == clipped.tolist() and clipped[2] >= 2
    error = (components - codes) / 2.0
    expected = [fmt._db_ratio(s, e) for s, e in zip(np.square(components / 2.0).sum(axis=(0, 1, 2, 4)),
                                                    np.square(error).sum(axis=(0, 1, 2, 4)))]
    assert entry["quantisation"]["sqnr_db_per_tap"] == pytest.approx(expected, abs=2e-3)  # rounded to 1e-3 dB


# -- the registry ----------------------------------------------------------------------------


def test_the_registry_names_what_the_manifest_schema_allows():
    schema = json.loads((Path(__file__).resolve().parents[2] / "emucompile" / "schemas" / "bundle-manifest-v1.schema.json")
                        .read_text("utf-8"))
    assert list(fmt.EXTRA_FORMATS) == schema["properties"]["formats"]["items"]["enum"]
    roles = set(schema["$defs"]["file"]["properties"]["role"]["enum"])
    # every format's role is a role; the others are the bundle's own files (map, shadowing, SigMF metadata, codes)
    assert {f.role for f in fmt.FORMATS.values()} <= roles
    own = {"fir_map", "sigmf_meta", "shadowing_db", fmt.FIR_CODES_ROLE}
    assert roles - {f.role for f in fmt.FORMATS.values()} == own


def test_every_format_reads_back_what_it_wrote(tmp_path):
    gains = (np.random.default_rng(4).standard_normal((300, 1, 1, 2, 2)) * 0.3).view(np.complex128)[..., 0]
    gains = gains.astype(np.complex64)
    layout = store.BundleLayout(n_samples=300, n_taps=2, update_rate_hz=100.0, formats=fmt.EXTRA_FORMATS,
                                fir_map=np.eye(2), tap_power_linear=(1.0, 0.5), tap_k_linear=(0.0, 0.0))
    fields = {"generator_version": 1, "profile_sha256": "0" * 64, "resolved_profile_sha256": "0" * 64,
              "profile": {"name": "x"}, "seed": 1, "method": "doppler-filter", "generator": {}, "duration_s": 3.0,
              "periodic": False, "mimo": None, "conditions": None,
              "taps": [{"delay_s": 0.0, "power_db": 0.0, "fading": "rayleigh", "k_db": None, "max_doppler_hz": 1.0,
                        "los_doppler_hz": None, "los_phase_deg": None, "spectrum": "classical"}] * 2,
              "fir": {"sample_rate_hz": 1e6, "n_fir": 2, "delay_mapping": "nearest", "bulk_delay_samples": 0,
                      "energy_kept": 1.0, "rms_delay_spread_s": 0.0}}
    bundle = store.open_bundle(store.write_bundle(tmp_path / "b", layout, [gains], fields))
    for name in fmt.FORMATS:
        back = np.asarray(bundle.read_format(name))
        # ci16 is quantised (|error| <= half a step per component); csv keeps 10 significant digits
        step = 1.0 / bundle.entry("tap_gains_ci16")["quantisation"]["scale_factor"]
        tolerance = step if name == "ci16" else 1e-6
        assert back.shape == gains.shape and np.abs(back - gains).max() <= tolerance, name
