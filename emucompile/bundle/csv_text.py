"""Rows of numbers as csv text, byte for byte what Python's ``"%.9e" %`` makes, with numpy.

:func:`format_rows` turns a 2-D float64 array into the bytes of
``",".join(["%.9e"] * columns) + "\\n"`` applied to every row, without a
Python step per number: each value's decimal exponent and its ten
significant digits are computed for a block of values at a time, and the
characters go into a fixed-width record of 17 bytes a value (a sign slot,
then ``d.ddddddddde±dd`` and the separator as two little-endian 8-byte
words looked up in tables of digit groups); the sign slots of the values
without a minus sign hold a filler byte that one ``bytes.replace`` drops.

Exactness. Python formats a float with its correctly rounded conversion
(round half to even on the value's exact binary expansion). Here, for a
finite non-zero ``a = |x|`` whose exponent ``e`` has two digits, the
significand is ``m = floor(s + 1/2)`` with ``s = a * 10.0**(9 - e)`` in
float64, ``10.0**k`` taken from Python's correctly rounded literal
``float("1e{k}")``. Both roundings (the power, unless exact, and the
product) have relative error at most u = 2**-53, so
``|s - a 10**(9-e)| <= (2u + u**2) * a 10**(9-e) < 2.3e-6`` for
``a 10**(9-e) < 1e10 + 1``. Every value whose ``s`` lies within
:data:`TIE_MARGIN` (1e-5, more than four times that bound) of a half
integer is formatted by Python instead, so every value this module rounds
itself is rounded as its exact expansion is: ``s`` and the exact scaled
value are on the same side of the half (``s + 1/2`` and ``floor`` are
exact: ``s < 2**34``, so its ulp is at most ``2**-19``; exact ties do occur,
e.g. the float32 ``513 / 2048 = 0.25048828125``). The exponent comes from ``log10``
and is corrected when ``s`` falls outside ``[1e9, 1e10)``; near those
edges either exponent gives the same ten digits (a scaled value just
below ``1e10`` rounds to ``1e10``, which is carried to ``1e9`` at the next
exponent). Zeros (either sign) are written directly; values with a
three-digit exponent (float64 beyond 1e±99, subnormals) and non-finite
values go to Python; a block holding one whose text is not 15 characters
after its sign (``nan``, ``inf``, ``1.000000000e+100``) is formatted row by row by
Python entirely. Checked by ``tests/bundle/test_csv_text.py`` against
``"%.9e" %`` (property tests over float32 and float64, near ties, carries,
powers of ten).
"""

from __future__ import annotations

import numpy as np

FLOAT_FORMAT = "%.9e"
TIE_MARGIN = 1e-5
"""Distance of the scaled value from a half integer below which Python formats the value (see above)."""

FIELD_BYTES = 17  # sign slot, d.ddddddddde+dd (15), separator
BLOCK_VALUES = 1 << 15  # values formatted per step: temporaries of 256 KiB, in cache (2**11..2**16 measured)

_EXPONENT_MAX = 99
_POWERS = np.array([float(f"1e{k}") for k in range(-_EXPONENT_MAX - 10, _EXPONENT_MAX + 12)])
_POWER_OFFSET = _EXPONENT_MAX + 10  # _POWERS[k + _POWER_OFFSET] == 10.0**k, correctly rounded
FILLER = b" "  # the sign slot of a value without a minus sign; no text of a number holds it


def _words(columns, start):
    """Little-endian uint64 words holding the byte columns from byte ``start`` on (the other bytes zero)."""
    data = np.zeros((len(columns[0]), 8), dtype=np.uint8)
    for j, column in enumerate(columns):
        data[:, start + j] = column
    return data.view("<u8").ravel()


def _digits(count, width):
    """The ASCII digits of 0 .. count - 1, zero-padded to ``width``, one column per digit (numpy: quick to import)."""
    number = np.arange(count)
    return [(number // 10 ** (width - 1 - j) % 10 + ord("0")).astype(np.uint8) for j in range(width)]


# The text of a field after its sign slot is two words: "d.dddddd" and "ddde+dd,".
_HEAD = _words([_digits(10000, 4)[0], np.full(10000, ord("."), np.uint8), *_digits(10000, 4)[1:]], 0)  # d.ddd
_MIDDLE = _words(_digits(1000, 3), 5)  # digits 5 to 7
_TAIL = _words(_digits(1000, 3), 0)  # digits 8 to 10
_EXPONENTS = _words(np.array([list(f"e{e:+03d},".encode("ascii"))
                              for e in range(-_EXPONENT_MAX, _EXPONENT_MAX + 1)], dtype=np.uint8).T, 3)
_FIELD = np.dtype({"names": ["sign", "head", "tail"], "formats": ["u1", "<u8", "<u8"], "offsets": [0, 1, 9],
                   "itemsize": FIELD_BYTES})


def reference_rows(values) -> bytes:
    """The csv text of a 2-D array, one Python ``%`` per row (the definition :func:`format_rows` follows)."""
    values = np.asarray(values, dtype=np.float64)
    row = ",".join([FLOAT_FORMAT] * values.shape[1]) + "\n"
    return "".join(row % tuple(r) for r in values.tolist()).encode("ascii")


def format_rows(values) -> bytes:
    """The csv text of a 2-D float64 array: every value ``"%.9e"``, ``,`` between values, ``\\n`` after each row.

    The same bytes as :func:`reference_rows`.
    """
    return b"".join(iter_text(values))


def iter_text(values):
    """The bytes of :func:`format_rows` in pieces of about :data:`BLOCK_VALUES` values (whole rows).

    Memory stays bounded by the block, whatever the array's size.
    """
    values = np.asarray(values, dtype=np.float64)
    n_rows, n_columns = values.shape
    rows = max(1, BLOCK_VALUES // max(1, n_columns))
    for first in range(0, n_rows, rows):
        block = values[first : first + rows]
        text = _format_block(block)
        yield text if text is not None else reference_rows(block)


def _format_block(block) -> bytes | None:
    """The text of a 2-D block, or None if one of its values has a text of another width."""
    n_rows, n_columns = block.shape
    x = block.ravel()
    a = np.abs(x)
    negative = np.signbit(x)
    fast = (a >= 1e-99) & (a < 1e99)  # False for zeros, subnormals, huge and non-finite values
    slow = ~fast & (a != 0.0)  # formatted by Python below
    a = np.where(fast, a, 1.0)  # a placeholder with a plain exponent
    exponent = np.floor(np.log10(a)).astype(np.intp)
    scaled = a * _POWERS[_POWER_OFFSET + 9 - exponent]
    exponent -= scaled < 1e9  # log10 rounded across a power of ten
    exponent += scaled >= 1e10
    scaled = a * _POWERS[_POWER_OFFSET + 9 - exponent]
    slow |= (scaled < 1e9) | (scaled >= 1e10)
    slow |= np.abs(scaled - np.floor(scaled) - 0.5) < TIE_MARGIN
    significand = np.floor(scaled + 0.5)
    carry = significand >= 1e10  # 9.9999999995... rounds up to the next power of ten
    significand[carry] = 1e9
    exponent += carry
    placeholder = ~fast | slow  # zeros are written as the placeholder 0.000000000e+00
    significand[placeholder] = 0.0
    exponent[placeholder] = 0
    thousands = np.floor(significand / 1e3)  # exact: the significand is an integer below 2**53
    millions = np.floor(thousands / 1e3)
    out = np.empty(x.size, dtype=_FIELD)
    out["sign"] = np.where(negative, ord("-"), ord(FILLER))
    out["head"] = _HEAD[millions.astype(np.intp)] | _MIDDLE[(thousands - millions * 1e3).astype(np.intp)]
    out["tail"] = _TAIL[(significand - thousands * 1e3).astype(np.intp)] | _EXPONENTS[exponent + _EXPONENT_MAX]
    text = out.view(np.uint8).reshape(n_rows, n_columns, FIELD_BYTES)
    text[:, -1, -1] = ord("\n")
    text = text.reshape(-1, FIELD_BYTES)
    for i in np.flatnonzero(slow).tolist():
        python = FLOAT_FORMAT % float(x[i])
        body = python[1:] if python.startswith("-") else python
        if len(body) != FIELD_BYTES - 2:
            return None
        text[i, 1:16] = np.frombuffer(body.encode("ascii"), dtype=np.uint8)
    return text.tobytes().replace(FILLER, b"")
