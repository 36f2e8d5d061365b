"""The vectorised csv text: the same bytes as Python's ``"%.9e" %``, value by value and file by file.

The reference is Python's own ``%`` on a float (CPython's correctly rounded
conversion: round half to even on the exact binary value), applied row by row
the way the csv writer formatted its rows before. Exact decimal expansions of
test values come from :class:`decimal.Decimal` (exact conversion of a binary
float), so the near-tie cases below are ties or near ties by construction,
not by assumption.
"""

from __future__ import annotations

import json
from decimal import Decimal

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra import numpy as hnp

from emucompile.bundle import csv_text
from emucompile.bundle import formats as fmt
from emucompile.compile import compiler


def _python_rows(values) -> bytes:
    """The old writer's text: one ``%`` per row of ``"%.9e"`` fields."""
    values = np.asarray(values, dtype=np.float64)
    row = ",".join(["%.9e"] * values.shape[1]) + "\n"
    return "".join(row % tuple(r) for r in values.tolist()).encode("ascii")


def _check(values, columns=1):
    """format_rows equals the Python rows; values padded with 1.0 to whole rows of ``columns``."""
    values = np.asarray(values, dtype=np.float64).ravel()
    values = np.concatenate([values, np.ones(-values.size % columns)]).reshape(-1, columns)
    got = csv_text.format_rows(values)
    want = _python_rows(values)
    if got != want:  # name the first differing field, not two megabytes
        for a, b, x in zip(got.split(b"\n"), want.split(b"\n"), values):
            assert a == b, f"row {x.tolist()!r}"
    assert got == want


def _neighbours(x, steps=3):
    """x and its float64 neighbours up to ``steps`` ulps either side."""
    out = [x]
    up = down = x
    for _ in range(steps):
        up, down = np.nextafter(up, np.inf), np.nextafter(down, -np.inf)
        out += [up, down]
    return out


# -- property tests ---------------------------------------------------------------------

FLOAT32_FINITE = st.integers(0, 2**32 - 1).map(lambda b: np.uint32(b).view(np.float32)).filter(np.isfinite)


@settings(max_examples=300, deadline=None)
@given(st.lists(FLOAT32_FINITE, min_size=1, max_size=300), st.integers(1, 7))
def test_float32_bit_patterns_match_python(values, columns):
    """Every float32 bit pattern is as likely: all exponents, subnormals and both zeros."""
    _check(np.array(values, dtype=np.float32), columns)


@settings(max_examples=200, deadline=None)
@given(hnp.arrays(np.float32, st.integers(1, 400), elements=st.floats(width=32, allow_nan=False,
                                                                        allow_infinity=False)))
def test_float32_values_match_python(values):
    _check(values)


@settings(max_examples=300, deadline=None)
@given(st.lists(st.floats(allow_nan=False, allow_infinity=False), min_size=1, max_size=200))
def test_float64_values_match_python(values):
    """Any finite float64, three-digit exponents and subnormals included (a block Python formats)."""
    _check(values)


@settings(max_examples=200, deadline=None)
@given(st.lists(st.floats(min_value=1e-99, max_value=9.9e98), min_size=1, max_size=200), st.booleans())
def test_float64_values_with_two_digit_exponents_match_python(values, negate):
    _check(np.array(values) * (-1.0 if negate else 1.0))


def test_non_finite_values_as_python_writes_them():
    _check([1.5, np.nan, -np.inf, np.inf, -2.0e-3, 0.0], 3)


# -- hand-picked cases -------------------------------------------------------------------


def test_exact_float32_ties_round_half_to_even():
    """Dyadic float32 values with exactly 11 significant digits, the last a 5: exact ties.

    odd / 2**k has exactly k decimals, ending in 5; those with 11 significant
    digits sit exactly halfway between two 10-digit outputs.
    """
    rng = np.random.default_rng(5)
    ties = []
    for bits in range(1, 25):  # odd numerators of every length a float32 holds exactly
        numerators = 2 * rng.integers(2 ** (bits - 2), 2 ** (bits - 1), size=40) + 1 if bits > 1 else [1]
        for k in range(1, 60):
            for x in (np.asarray(numerators) / 2.0**k).astype(np.float32):
                if len(Decimal(float(x)).as_tuple().digits) == 11:
                    ties.append(x)
    assert len(ties) > 100  # the construction finds ties at many exponents
    digits = {Decimal(float(x)).as_tuple().digits[-1] for x in ties}
    assert digits == {5}
    ties = np.array(ties, dtype=np.float32)
    _check(np.concatenate([ties, -ties]))
    # both directions of round-half-even occur among them
    tenth = {Decimal(float(x)).as_tuple().digits[9] % 2 for x in ties}
    assert tenth == {0, 1}


def test_near_ties_and_just_outside_the_margin():
    """Values whose scaled part sits at .5 exactly, a few ulps off it, and 2e-5 (past the margin) off it."""
    rng = np.random.default_rng(6)
    values = []
    for e in range(-99, 99, 3):
        for n in rng.integers(10**9, 10**10, size=6).tolist():
            for offset in ("0.5", "0.49998", "0.50002", "0.4999999", "0.5000001"):
                x = float((Decimal(n) + Decimal(offset)).scaleb(e - 9))
                values += _neighbours(x, 2)
    # float64 values that are exact ties: integers and halves with 11 significant digits
    values += [1234567890.5, 12345678905.0, 2500000000.5, 9999999999.5, 1000000000.5, 99999999995.0]
    _check(np.array(values), 5)
    _check(-np.array(values), 5)


def test_carries_to_the_next_power_of_ten_and_powers_of_ten():
    values = []
    for e in range(-99, 99):
        values += _neighbours(float(Decimal("9.9999999995").scaleb(e)), 3)
        values += _neighbours(float(Decimal("9.999999999").scaleb(e)), 3)
        values += _neighbours(float(f"1e{e}"), 3)
    values += _neighbours(1e99, 3) + _neighbours(1e-99, 3) + _neighbours(9.9999999995e98, 3)
    _check(np.array(values), 7)
    _check(-np.array(values), 7)
    # float32 powers of ten and their neighbours, widened
    f32 = np.array([10.0**e for e in range(-45, 39)], dtype=np.float32)
    _check(np.concatenate([f32, np.nextafter(f32, np.float32(np.inf)), np.nextafter(f32, np.float32(0))]))


def test_zeros_subnormals_and_extremes():
    f32 = np.finfo(np.float32)
    values = [0.0, -0.0, f32.smallest_subnormal, -f32.smallest_subnormal, f32.smallest_normal, f32.max, -f32.max,
              5e-324, -5e-324, 2.2250738585072014e-308, 1.7976931348623157e308, 1e100, 9.9999999995e99, 1e-100]
    _check(np.array(values))
    _check(np.array(values[:7], dtype=np.float32))


def test_ordinary_blocks_are_not_formatted_by_python(monkeypatch):
    """Gains and a time axis format without the row-by-row fallback (the reason the module exists)."""
    def refuse(block):
        raise AssertionError("a whole block went to Python")

    monkeypatch.setattr(csv_text, "reference_rows", refuse)
    rng = np.random.default_rng(7)
    values = np.empty((3000, 9))
    values[:, 0] = np.arange(3000) / 3000.0
    values[:, 1:] = rng.standard_normal((3000, 8)).astype(np.float32)
    values[::7, 3] = 0.0
    values[::11, 4] = -0.0
    assert csv_text.format_rows(values) == _python_rows(values)


def test_rows_are_cut_into_blocks_of_whole_rows():
    rng = np.random.default_rng(8)
    values = rng.standard_normal((csv_text.BLOCK_VALUES // 3 + 5, 3))
    pieces = list(csv_text.iter_text(values))
    assert len(pieces) == 2 and all(p.endswith(b"\n") for p in pieces)
    assert b"".join(pieces) == _python_rows(values)


# -- whole files --------------------------------------------------------------------------


def test_csv_writer_file_is_the_old_writers_bytes(tmp_path):
    """Chunks of odd sizes, two links, special gains: the file is header + the old row text."""
    rate, shape = 3000.0, (2500, 2, 1, 3)  # 1 / 3000 s has a long binary expansion
    rng = np.random.default_rng(9)
    gains = (rng.standard_normal(shape) + 1j * rng.standard_normal(shape)).astype(np.complex64)
    special = np.array([0.0, -0.0, 1.4e-45, -3.4e38, 1e-40, 0.25048828125], dtype=np.float32)
    gains.view(np.float32).reshape(shape[0], -1)[100, : special.size] = special
    writer = fmt.CsvWriter(*shape, rate)
    writer.open(tmp_path)
    for a, b in ((0, 7), (7, 1400), (1400, 2500)):
        writer.write(gains[a:b])
    [entry] = writer.close()
    rows = np.empty((shape[0], 1 + 2 * 6))
    rows[:, 0] = np.arange(shape[0]) / rate
    rows[:, 1:] = gains.reshape(shape[0], -1).view(np.float32)
    header = (",".join(writer.columns) + "\n").encode("ascii")
    data = (tmp_path / "tap_gains.csv").read_bytes()
    assert data == header + _python_rows(rows)
    assert entry["size_bytes"] == len(data) and entry["data_offset"] == len(header)


@pytest.mark.parametrize("rate", [1000.0, 1234.5])
def test_compiled_csv_matches_its_gains_formatted_by_python(tmp_path, rate):
    """A compiled bundle's csv holds, byte for byte, its tap_gains.npy and time axis in Python's ``%.9e``."""
    profile = {"format_version": 1, "name": "csv-bytes", "description": "Invented 3-tap scenario for a test.",
               "max_doppler_hz": 30.0, "taps": [{"delay_ns": 0, "power_db": 0}, {"delay_ns": 300, "power_db": -6},
                                                {"delay_ns": 900, "power_db": -12, "fading": "static",
                                                 "los_phase_deg": 0}]}
    path = tmp_path / "p.json"
    path.write_text(json.dumps(profile))
    out = tmp_path / "bundle"
    compiler.compile_profile(str(path), str(out), update_rate_hz=rate, duration_s=5000 / rate + 0.5 / rate,
                             seed=3, force=True, formats=("csv",))
    gains = np.load(out / "tap_gains.npy")
    n = gains.shape[0]
    rows = np.empty((n, 1 + 2 * gains[0].size))
    rows[:, 0] = np.arange(n) / rate
    rows[:, 1:] = np.ascontiguousarray(gains).reshape(n, -1).view(np.float32)
    data = (out / "tap_gains.csv").read_bytes()
    header_end = data.index(b"\n") + 1
    assert data[header_end:] == _python_rows(rows)
