"""The windowed sinc of a moving delay by piecewise polynomials (emucompile.models.sinc_table).

References: the windowed-sinc fractional delay [Laakso1996 in models/grid.py] with
numpy's own ``numpy.sinc`` and ``numpy.i0`` (an implementation independent of the
``scipy.special.i0`` the table is built from), and the symmetry h(x) = h(-x).
"""
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from emucompile.models import grid, sinc_table

HALF = 16
BETA = grid.default_kaiser_beta(HALF)


def _numpy_reference(frac, half, beta):
    """h(o - f) with numpy.sinc and numpy.i0; 0 where |x| >= L."""
    x = np.arange(-half, half + 1)[None, :] - np.asarray(frac, dtype=float)[:, None]
    window = np.i0(beta * np.sqrt(np.clip(1.0 - (x / half) ** 2, 0.0, None))) / np.i0(beta)
    return np.where(np.abs(x) < half, np.sinc(x) * window, 0.0)


# Bound of the table's difference to the closed form on coefficients of size <= 1: the
# interpolation error is near 1e-17 (module docstring); what is left is float64 rounding
# of the table's solve and Horner pass and of the closed form itself (measured 2.9e-15,
# 13 ulp of 1, over 4e5 random f on 2026-12-03).
TABLE_BOUND = 5e-15
# np.sinc rounds pi x for |x| up to L: about L pi 2^-53 ~ 6e-15 of error in its argument.
NUMPY_BOUND = 2e-14


@pytest.mark.parametrize(("half", "beta"), [(HALF, BETA), (8, grid.default_kaiser_beta(8)), (24, 12.0)])
def test_table_is_the_closed_form_within_float64_rounding(half, beta):
    rng = np.random.default_rng(11)
    pieces = np.arange(sinc_table.PIECES) / sinc_table.PIECES
    frac = np.concatenate([rng.random(20000), pieces, pieces + 1e-12, pieces[1:] - 1e-12,
                           [1e-300, 1e-16, 0.5, 1.0 - 2.0**-53]])
    table = sinc_table.rows(frac, half, beta)
    assert table.shape == (frac.size, 2 * half + 1)
    assert np.abs(table - sinc_table.closed_form(frac, half, beta)).max() <= TABLE_BOUND
    assert np.abs(table - _numpy_reference(frac, half, beta)).max() <= NUMPY_BOUND
    assert not table[:, 0].any()  # offset -L: x <= -L, outside the window


def test_a_centre_on_a_sample_is_the_exact_unit_impulse():
    rows = sinc_table.rows(np.zeros((3, 2)), HALF, BETA)
    impulse = np.zeros(2 * HALF + 1)
    impulse[HALF] = 1.0
    assert (rows == impulse).all()


@settings(max_examples=200, deadline=None)
@given(st.floats(min_value=1e-300, max_value=0.4999))
def test_closed_form_keeps_its_accuracy_just_below_a_sample(eps):
    """h(o - (1 - e)) = h((1 - o) - e) by evenness; sin(pi f) near f = 1 is taken as sin(pi (1 - f))."""
    near_one = 1.0 - eps
    eps = 1.0 - near_one  # the exact complement of the float actually used
    high = sinc_table.closed_form(np.array([near_one]), HALF, BETA)[0]
    low = sinc_table.closed_form(np.array([eps]), HALF, BETA)[0]
    o = np.arange(-HALF + 1, HALF + 1)
    np.testing.assert_allclose(high[o + HALF], low[(1 - o) + HALF], rtol=1e-13, atol=1e-16)


def test_moving_map_rows_come_from_the_table():
    """MovingFirMap.sparse at an update is sinc_table.rows of its centres' fractional parts."""
    from types import SimpleNamespace

    moving = SimpleNamespace(max_offset_s=2e-6,
                             delay_offset_at_samples=lambda n, rate: 1e-6 * np.sin(0.5 * n / rate))
    m = grid.moving_fir_map([0.0, 130e-9, 410e-9], [1.0, 0.5, 0.25], 30.72e6, moving, 1000.0)
    index, values = m.sparse(0, 400)
    centres = m.centres(0, 400)
    np.testing.assert_array_equal(values, sinc_table.rows(centres - np.floor(centres), m.grid.half_length,
                                                          m.grid.kaiser_beta))
    np.testing.assert_array_equal(index[..., m.grid.half_length], np.floor(centres).astype(np.int64))
