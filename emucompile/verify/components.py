"""A compiled bundle taken apart: shadowing, direct part and diffuse part, per sample range.

For ``verify``: the large-scale checks (shadowing) and the small-scale ones
(envelope, K-factor, Doppler, spatial correlation) see separate processes.
:func:`open_components` runs no part of the compile planner and regenerates
nothing random: the deterministic direct part follows from the manifest's
record (each tap's power, K, direct-part Doppler as used and phase as drawn,
the recorded profile's MIMO and conditions blocks) through
:func:`emucompile.models.channel.recorded_channel`; the diffuse part is the
stored gains with the shadowing divided out, minus that direct part.

All methods take sample ranges [start, stop) of the record; shapes are in the
bundle's axes (m, n_rx, n_tx, n_taps) unless stated, complex128.

Examples
--------
Not run as a doctest: it needs a compiled bundle (``emucompile compile ... -o out/campus``).

>>> c = open_components("out/campus")                     # doctest: +SKIP
>>> links = c.link_streams(0, 0, c.n_samples)             # doctest: +SKIP
>>> from emucompile.models.mimo import estimate_correlation
>>> estimate_correlation(links) - c.expected_correlation(0)  # doctest: +SKIP
"""

from __future__ import annotations

import numpy as np

from emucompile.bundle.store import open_bundle
from emucompile.models import mimo
from emucompile.models.channel import SHADOWING_ROLE, recorded_channel
from emucompile.profile.model import profile_from_document


class Components:
    """The parts of one bundle's tap gains (build it with :func:`open_components`).

    Attributes
    ----------
    n_samples : int
    update_rate_hz : float
    n_rx, n_tx, n_taps, n_links : int
    manifest : dict
    """

    def __init__(self, bundle, channel):
        self.bundle = bundle
        self.manifest = bundle.manifest
        self._channel = channel
        self.n_samples = int(self.manifest["n_samples"])
        self.update_rate_hz = float(self.manifest["update_rate_hz"])
        self.n_rx = int(self.manifest["n_rx"])
        self.n_tx = int(self.manifest["n_tx"])
        self.n_taps = int(self.manifest["n_taps"])
        self.n_links = self.n_rx * self.n_tx
        self._shadowing_db = bundle.member(SHADOWING_ROLE)

    def small_scale(self, start: int, stop: int) -> np.ndarray:
        """Stored tap gains with the shadowing divided out: (m, n_rx, n_tx, n_taps)."""
        start, stop = self._range(start, stop)
        gains = np.asarray(self.bundle.tap_gains[start:stop], dtype=np.complex128)
        amplitude = self.shadowing_amplitude(start, stop)
        if amplitude is not None:
            gains = gains / amplitude[:, None, None, None]
        return gains

    def direct(self, start: int, stop: int) -> np.ndarray:
        """The deterministic direct part (power, K scaling, HST phase, array response): (m, n_rx, n_tx, n_taps)."""
        start, stop = self._range(start, stop)
        return self._channel.to_axes(self._channel.direct_links(start, stop))

    def diffuse(self, start: int, stop: int) -> np.ndarray:
        """small_scale - direct: (m, n_rx, n_tx, n_taps)."""
        return self.small_scale(start, stop) - self.direct(start, stop)

    def shadowing_amplitude(self, start: int, stop: int) -> np.ndarray | None:
        """10^(S/20) from the stored ``shadowing_db.npy``: (m,) float64, or None without shadowing."""
        if self._shadowing_db is None:
            return None
        start, stop = self._range(start, stop)
        return 10.0 ** (np.asarray(self._shadowing_db[start:stop], dtype=np.float64) / 20.0)

    def shadowing_db(self, start: int, stop: int) -> np.ndarray | None:
        """The stored shadowing trajectory S in dB: (m,) float64, or None."""
        if self._shadowing_db is None:
            return None
        start, stop = self._range(start, stop)
        return np.asarray(self._shadowing_db[start:stop], dtype=np.float64)

    def link_streams(self, tap: int, start: int, stop: int) -> np.ndarray:
        """The diffuse part of one tap as (m, n_links), links in :func:`emucompile.models.mimo.link_index` order.

        Not normalised: each link's mean power is the tap's diffuse power P/(K+1).
        """
        tap = self._tap(tap)
        return mimo.links_from_gains(self.diffuse(start, stop)[..., tap:tap + 1])[:, :, 0]

    def expected_correlation(self, tap: int) -> np.ndarray:
        """(n_links, n_links) complex correlation matrix of the diffuse parts (identity for SISO).

        The same for every tap (blocks.py, "One correlation for every tap"); a
        static tap has no diffuse part (its link streams are zero), so there is
        nothing to check it against.
        """
        self._tap(tap)
        return np.array(self._channel.correlation, dtype=np.complex128)

    def shadowing(self) -> dict | None:
        """The shadowing spec record (sigma, decorrelation distance, speed, hold, ...), or None."""
        record = (self.manifest.get("conditions") or {}).get("shadowing")
        return None if record is None else dict(record)

    def _range(self, start, stop):
        start, stop = int(start), int(stop)
        if not 0 <= start <= stop <= self.n_samples:
            raise ValueError(f"need 0 <= start <= stop <= {self.n_samples}, got [{start}, {stop})")
        return start, stop

    def _tap(self, tap):
        tap = int(tap)
        if not 0 <= tap < self.n_taps:
            raise ValueError(f"tap {tap} does not exist (0 to {self.n_taps - 1})")
        return tap


def open_components(path) -> Components:
    """The :class:`Components` of the bundle directory ``path`` (its direct part from the manifest's record)."""
    bundle = open_bundle(path)
    manifest = bundle.manifest
    profile = profile_from_document(manifest["profile"], source=f"{path}/manifest.json#/profile")
    channel = recorded_channel(profile, manifest["taps"], update_rate_hz=manifest["update_rate_hz"],
                               n_samples=manifest["n_samples"], seed=manifest["seed"], periodic=manifest["periodic"])
    return Components(bundle, channel)


__all__ = ["Components", "open_components"]
