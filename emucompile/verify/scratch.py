"""Arrays as long as a record, kept in a temporary file mapped into memory rather than in the heap.

verify's decimated records and the copies its checks derive from them (a
Rician tap's diffuse part, the MIMO links less their direct part) grow with
the run: 0.8 GB of complex64 records for 1e8 samples of 12 taps decimated 12
times. :func:`empty` puts an array of at least :data:`SCRATCH_MIN_BYTES` in
an unnamed temporary file (``tempfile.TemporaryFile``: the directory named by
``TMPDIR``, removed by the system when the last map of it goes) and maps it
(``numpy.memmap``), so its pages are file pages the kernel writes back and
drops under memory pressure, not anonymous memory: the resident memory verify
needs does not grow with the run (every pass over such an array works in
blocks; :mod:`emucompile.verify.estimators`). Forked worker processes share
the map. Smaller arrays are ordinary ``numpy.empty`` arrays.
"""

from __future__ import annotations

import tempfile

import numpy as np

SCRATCH_MIN_BYTES = 1 << 24
"""Arrays of at least this many bytes go to a mapped temporary file (16 MiB: a record of 1e6 complex128 samples)."""


def empty(shape, dtype) -> np.ndarray:
    """An uninitialised array; in a mapped temporary file when it holds at least :data:`SCRATCH_MIN_BYTES`."""
    dtype = np.dtype(dtype)
    shape = tuple(int(s) for s in np.atleast_1d(shape))
    size = int(np.prod(shape, dtype=np.int64)) * dtype.itemsize
    if size < SCRATCH_MIN_BYTES:
        return np.empty(shape, dtype)
    with tempfile.TemporaryFile(prefix="emucompile-verify-") as handle:
        handle.truncate(size)  # sparse until written
        # the map holds its own descriptor: closing the file here leaves the map, and the file goes with it
        return np.memmap(handle, dtype=dtype, mode="r+", shape=shape)


__all__ = ["empty", "SCRATCH_MIN_BYTES"]
