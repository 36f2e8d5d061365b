"""The Kaiser-windowed sinc at a fractional delay, by a piecewise-polynomial table.

A moving delay needs, at every update and for every tap, the 2L
coefficients of a windowed sinc centred between samples [Laakso1996]_:

    h(x) = sinc(x) w(x),   w(x) = I0(beta sqrt(1 - (x / L)^2)) / I0(beta)   for |x| < L,

at x = o - f for the offsets o = -L + 1, ..., L, where f in [0, 1) is the
fractional part of the tap's centre (the offset -L has x <= -L: always 0).
Evaluated directly that is one Bessel function per coefficient
(``scipy.special.i0``, about 50 ns each; 32 a tap and update at L = 16), which
was half of a moving-delay compile.

Here [0, 1) is cut into :data:`PIECES` equal pieces; on each, for each offset,
h(o - f) is replaced by the polynomial of degree :data:`DEGREE` that
interpolates it at the piece's Chebyshev points (values from the closed form
above, with ``scipy.special.i0``), stored as monomial coefficients in the
piece's own variable s in [-1, 1]. An evaluation is a row gather and a Horner
pass: a few ns a coefficient.

Error. h is entire in x (sinc is; I0(beta sqrt(u)) is a power series in
u = 1 - (x / L)^2), and for a degree-n Chebyshev interpolant on a piece of
half-width r = 1 / (2 PIECES) the error is at most
r^(n+1) max|h^(n+1)| / (2^n (n+1)!) (Chebyshev interpolation remainder,
common practice; e.g. Trefethen, "Approximation Theory and Approximation
Practice", ch. 11, from memory). With n = 6, r = 1/128 and |h^(7)| of order
pi^7 (h is band-limited to |nu| <= 1/2 up to the window's spread), the bound is
near 1e-17; what is left is float64 rounding: ``tests/models/test_sinc_table.py``
bounds the difference to the closed form by 5e-15 on coefficients of size
<= 1 (measured 2.9e-15 over 4e5 random f). That is seven orders below a float32
gain's resolution, but not bit-equal to the closed form (93 % of coefficients
differ, by a median of 4 ulp): a fir.npy can differ in the last bit of a rare
coefficient from one compiled by the closed form (generator version 5). The
closed form used before also lost relative accuracy for a centre just below a
sample (sin(pi f) rounded near f = 1: 1.9e-11 seen); :func:`closed_form` now
takes sin(pi (1 - f)) there.

At f = 0 exactly (the centre on a sample) the row is the exact unit impulse,
as the static map's on-sample tap is.
"""

from __future__ import annotations

import functools

import numpy as np

from emucompile._lazy import LazyModule

special = LazyModule("scipy.special")

PIECES = 64
DEGREE = 6
_BLOCK = 1024  # rows of 2L float64 per Horner pass: 256 KiB at L = 16, in L2


def closed_form(frac, half_length: int, kaiser_beta: float) -> np.ndarray:
    """h(o - f) for o = -L, ..., L by the closed form: float64 (*frac.shape, 2L + 1).

    sin(pi (o - f)) is written -(-1)^o sin(pi f), exact in o, so the rounding of
    pi x for |x| up to L does not enter, and sin(pi f) as sin(pi (1 - f)) for
    f > 1/2 (1 - f is exact there), so a centre just below a sample keeps its
    relative accuracy; 0 where |x| >= L.
    """
    frac = np.asarray(frac, dtype=float)[..., None]
    offsets = np.arange(-half_length, half_length + 1)
    x = offsets - frac
    parity = np.where(offsets % 2 == 0, 1.0, -1.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        sinc = np.where(x == 0.0, 1.0, -parity * np.sin(np.pi * np.minimum(frac, 1.0 - frac)) / (np.pi * x))
    window = special.i0(kaiser_beta * np.sqrt(np.clip(1.0 - (x / half_length) ** 2, 0.0, None)))
    return np.where(np.abs(x) < half_length, sinc * window / special.i0(kaiser_beta), 0.0)


@functools.lru_cache(maxsize=16)
def table(half_length: int, kaiser_beta: float) -> np.ndarray:
    """Monomial coefficients, float64 (DEGREE + 1, PIECES, 2L): ``[d, j, o]`` for offset o - L + 1."""
    nodes = np.cos((2 * np.arange(DEGREE + 1) + 1) * np.pi / (2 * (DEGREE + 1)))  # Chebyshev points in s
    f = (np.arange(PIECES)[:, None] + (nodes[None, :] + 1.0) / 2.0) / PIECES  # (PIECES, DEGREE + 1)
    values = closed_form(f, half_length, kaiser_beta)[..., 1:]  # (PIECES, DEGREE + 1, 2L)
    vandermonde = np.vander(nodes, DEGREE + 1, increasing=True)  # rows: nodes, columns: s^d
    # one solve for every (piece, offset): values[j, i, o] = sum_d V[i, d] c[d, j, o]
    coefficients = np.linalg.solve(vandermonde, values.transpose(1, 0, 2).reshape(DEGREE + 1, -1))
    out = coefficients.reshape(DEGREE + 1, PIECES, 2 * half_length)
    out.setflags(write=False)
    return out


def rows(frac, half_length: int, kaiser_beta: float) -> np.ndarray:
    """h(o - f) for o = -L, ..., L at each f of ``frac`` (float64 in [0, 1)): shape (*frac.shape, 2L + 1).

    Column 0 (o = -L) is 0. A row with f = 0 is the unit impulse at o = 0.
    Worked in blocks of :data:`_BLOCK` rows, which stay in the cache.
    """
    frac = np.asarray(frac, dtype=float)
    coefficients = table(int(half_length), float(kaiser_beta))
    flat = frac.reshape(-1)
    scaled = flat * PIECES
    piece = np.minimum(scaled.astype(np.intp), PIECES - 1)
    s = 2.0 * (scaled - piece) - 1.0
    out = np.zeros((flat.size, 2 * half_length + 1))
    values = np.empty((min(_BLOCK, flat.size), 2 * half_length))
    term = np.empty_like(values)
    for first in range(0, flat.size, _BLOCK):
        last = min(first + _BLOCK, flat.size)
        at, v, t, sb = piece[first:last], values[: last - first], term[: last - first], s[first:last, None]
        np.take(coefficients[DEGREE], at, axis=0, out=v)
        for d in range(DEGREE - 1, -1, -1):  # Horner in s
            v *= sb
            np.take(coefficients[d], at, axis=0, out=t)
            v += t
        out[first:last, 1:] = v
    on_sample = flat == 0.0
    if on_sample.any():
        out[on_sample] = 0.0
        out[on_sample, half_length] = 1.0
    return out.reshape(*frac.shape, 2 * half_length + 1)
