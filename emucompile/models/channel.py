"""A profile's whole channel over its links and conditions: MIMO, high-speed train, shadowing.

:class:`ChannelPlan` sits on the fading engine (:class:`emucompile.models.fading.FadingPlan`)
and gives, for any sample range [start, stop), the tap gains in the bundle's
axes (m, n_rx, n_tx, n_taps), complex64, and their parts:

    g_l(n) = A(n) r(n) [ a_d d_l(n) + a_s (S w(n))_l ]

per tap, link l (order of :mod:`emucompile.models.mimo`), with

* w(n): independent unit-power diffuse streams, one per link (the engine's
  ``diffuse(start, stop, link)``, keyed by link), S the Hermitian square
  root of the tap's spatial correlation (identity for SISO);
* d_l(n) = c_l exp(j phi(n)): the direct part, c_l the MIMO direct response
  (``MimoSetup.direct_response``, 1 for SISO), phi the constant-Doppler
  phase of the engine or, for a high-speed-train tap, 2 pi integral f_s dt
  (:meth:`emucompile.models.conditions.HighSpeedTrain.phase_at_samples`) plus the
  tap's initial phase;
* a_d = sqrt(P K/(K+1)), a_s = sqrt(P/(K+1)) (static: a_d = sqrt(P), a_s = 0);
* r(n) = exp(-j 2 pi f_c Delta tau(n)) when a moving delay's carrier follows
  it, else 1;
* A(n) = 10^(S(n)/20), the log-normal shadowing common to every tap and link
  (1 without shadowing).

A SISO profile without conditions takes the engine's own ``block`` (the bytes
of earlier bundles do not change). Every operation is elementwise in a fixed
order from the absolute sample index (the correlation is an explicit sum over
links, not a BLAS product, whose blocking could depend on the request size),
so any chunking gives bit-identical output.

Notes
-----
SISO without conditions keeps the engine's own bytes. The correlation is an explicit
sum over links (no BLAS: its blocking could depend on the request size). In the
manifest: ``mimo`` is ``MimoSetup.as_record()``; ``conditions`` holds each trajectory's
definition; ``taps[i].los_trajectory`` marks a direct part on the train's trajectory.
Shadowing is stored as ``shadowing_db.npy`` (float64, dB, hashed), keyed by
``SeedSequence(seed, spawn_key=(4,))``. A moving delay uses ``grid.MovingFirMap``, a
sinc grid widened by A/2 on both sides; compile then needs a sample rate and writes
``fir.npy``, and ``fir_map.npy`` is the zero-offset map. Not supported yet: periodic
mode with conditions; a moving delay with a target. The carrier rotation of a moving
delay applies only with ``carrier_follows: true`` (by default it does not follow,
TS 36.104 Annex B.4).
"""

from __future__ import annotations

import math

import numpy as np

from emucompile.models import fading
from emucompile.errors import InputError
from emucompile.models.fading._streams import SHADOWING

SHADOWING_FILE = "shadowing_db.npy"
SHADOWING_ROLE = "shadowing_db"
_SUB_BLOCK_ELEMENTS = 1 << 16
"""Gains (links x taps x samples) worked on at once in :meth:`ChannelPlan.block`: 512 KiB of complex64."""


class ChannelPlan:
    """The channel of one profile at one update rate for one seed; samples on demand.

    Parameters
    ----------
    profile : emucompile.profile.model.Profile
    engine : emucompile.models.fading.FadingPlan
        The engine planned for ``profile`` (same taps, rate, length, seed); or a
        :class:`emucompile.models.fading.RecordedDirect` for the direct part
        alone (:func:`recorded_channel`).
    """

    def __init__(self, profile, engine):
        self.profile = profile
        self.engine = engine
        self.update_rate_hz = engine.update_rate_hz
        self.n_samples = engine.n_samples
        self.n_taps = engine.n_taps
        setup = profile.mimo
        self.n_rx, self.n_tx = profile.n_rx, profile.n_tx
        self.n_links = self.n_rx * self.n_tx
        if setup is not None:
            self.square_root = np.asarray(setup.correlation.square_root(), dtype=np.complex128)
            self.correlation = np.asarray(setup.correlation.matrix, dtype=np.complex128)
            self.direct_response = np.asarray(setup.direct_response, dtype=np.complex128)
        else:
            self.square_root = np.ones((1, 1), np.complex128)
            self.correlation = np.ones((1, 1), np.complex128)
            self.direct_response = np.ones(1, np.complex128)
        conditions = profile.conditions
        self.train = getattr(conditions, "high_speed_train", None)
        self.train_taps = tuple(getattr(conditions, "high_speed_train_taps", ()) or ()) if self.train else ()
        self.moving = getattr(conditions, "moving_propagation", None)
        self.carrier_hz = getattr(conditions, "moving_propagation_carrier_hz", None)
        spec = getattr(conditions, "shadowing", None)
        self.shadowing_spec = spec
        self.shadowing = None
        self._shadowing_last = (None, None, None)
        if spec is not None:
            self.shadowing = spec.generator(np.random.SeedSequence(engine.seed, spawn_key=(SHADOWING,)))
        if engine.periodic and (self.train is not None or self.moving is not None or spec is not None):
            raise InputError("periodic mode is not supported yet with time-varying conditions",
                             hint="drop --periodic, or the conditions block")
        self._follows = self.moving is not None and self.moving.carrier_follows
        self._nonzero_root = self.square_root != 0
        self._full_columns = self._nonzero_root.all(axis=0)
        self._real_root = not np.any(self.square_root.imag)
        self.plain = setup is None and not self.train_taps and not self._follows and spec is None
        self._amps = [_amplitudes(t) for t in profile.taps]
        self._diffuse_amps32 = np.array([a_s for _, a_s in self._amps], dtype=np.float32)
        self._root_c64 = self.square_root.astype(np.complex64)
        self._identity_root = self.n_links == 1 and self.square_root[0, 0] == 1.0  # SISO: S = [[1]]
        info = engine.tap_info()
        self._phase0 = [math.radians(i.get("los_phase_deg") or 0.0) for i in info]

    # -- whole gains ----------------------------------------------------------------
    def block(self, start: int, stop: int) -> np.ndarray:
        """Tap gains at samples [start, stop): complex64 (m, n_rx, n_tx, n_taps)."""
        if self.plain:
            return self.engine.block(start, stop).reshape(stop - start, 1, 1, self.n_taps)
        # Every link at once in tap-major slabs over sub-blocks of samples that stay in cache,
        # each written once into the bundle's axes; the same operations on the same operands as
        # small_scale_links (elementwise, so the sub-blocks and the layout change no bit).
        m = stop - start
        rotation = self._rotation(start, stop)
        rows = [self.engine.diffuse_rows(start, stop, link) for link in range(self.n_links)]  # (n_taps, m)
        products = {j: column[:, None] * self.direct_response[None, :]
                    for j, column in self._direct_columns(start, stop, rotation).items()}
        amplitude = self.shadowing_amplitude(start, stop)
        out = np.empty((m, self.n_rx, self.n_tx, self.n_taps), np.complex64)
        step = max(1, _SUB_BLOCK_ELEMENTS // (self.n_links * self.n_taps))
        for a in range(0, m, step):
            b = min(a + step, m)
            # tap-major slabs (n_links, n_taps, b - a): every operation is elementwise, so the
            # layout changes no bit; the engine's rows are used as made (no transpose per link)
            total = self._correlate([r[:, a:b] for r in rows], None if rotation is None else rotation[a:b],
                                    taps_first=True)
            # the direct part, rounded to complex64, added to the taps that have one (every link at
            # once); the others' sums are as small_scale_links gives them, up to the sign of a zero
            for j, product in products.items():
                total[:, j, :] += product[a:b].T.astype(np.complex64)
            if amplitude is not None:
                total *= amplitude[None, None, a:b]
            # link = tx * n_rx + rx (link order of to_axes)
            out[a:b] = total.reshape(self.n_tx, self.n_rx, self.n_taps, b - a).transpose(3, 1, 0, 2)
        return out

    def chunks(self, chunk_size: int):
        """Yield ``(first_index, gains)`` over the record in order (gains as :meth:`block`)."""
        pos = 0
        while pos < self.n_samples:
            end = min(pos + chunk_size, self.n_samples)
            yield pos, self.block(pos, end)
            pos = end

    # -- parts, as link vectors (m, n_links, n_taps), complex64 ----------------------------
    def small_scale_links(self, start, stop) -> np.ndarray:
        """Direct + diffuse, without shadowing: complex64 (m, n_links, n_taps)."""
        return self.direct_links(start, stop) + self.diffuse_links(start, stop)

    def direct_links(self, start, stop) -> np.ndarray:
        """The deterministic direct part a_d c_l exp(j phi(n)) r(n): complex64 (m, n_links, n_taps).

        Worked in complex128 and rounded once to complex64, as :meth:`block` does.
        """
        m = stop - start
        out = np.zeros((m, self.n_links, self.n_taps), np.complex64)
        for j, column in self._direct_columns(start, stop, self._rotation(start, stop)).items():
            out[:, :, j] = column[:, None] * self.direct_response[None, :]
        return out

    def diffuse_links(self, start, stop) -> np.ndarray:
        """The correlated diffuse part a_s (S w)_l r(n): complex64 (m, n_links, n_taps)."""
        return self._diffuse_slabs(start, stop, self._rotation(start, stop)).transpose(1, 0, 2)

    def _direct_columns(self, start, stop, rotation) -> dict:
        """{tap: a_d exp(j phi(n)) r(n)}, complex128 (m,), for the taps with a direct part."""
        has_direct = [j for j, (a_d, _) in enumerate(self._amps) if a_d > 0]
        if not has_direct:
            return {}
        # the engine's phasors of the taps that are not on the train's trajectory, tap-major
        engine_taps = [j for j in has_direct if j not in self.train_taps]
        rows = dict(zip(engine_taps, self.engine.direct_rows(start, stop, engine_taps) if engine_taps else ()))
        phasors = {j: row.astype(np.complex128) for j, row in rows.items()}
        if self.train_taps:
            phase = self.train.phase_at_samples(np.arange(start, stop, dtype=np.int64), self.update_rate_hz)
            for j in self.train_taps:
                phasors[j] = np.exp(1j * (phase + self._phase0[j]))
        columns = {}
        for j in has_direct:
            column = self._amps[j][0] * phasors[j]
            if rotation is not None:
                column = column * rotation
            columns[j] = column
        return columns

    def _diffuse_slabs(self, start, stop, rotation) -> np.ndarray:
        """a_s (S w)_l r(n) link-major: complex64 (n_links, m, n_taps), each link contiguous."""
        return self._correlate([self.engine.diffuse(start, stop, link) for link in range(self.n_links)], rotation)

    def _correlate(self, unit_streams, rotation, taps_first=False) -> np.ndarray:
        """a_s (S w)_l r(n) from the links' unit streams w: complex64 (n_links, *w.shape).

        Each w is (m, n_taps), or (n_taps, m) with ``taps_first``. Worked in
        complex64 (generator version 5; complex128 before): S and a_s rounded
        to float32, each product and sum rounded to float32, about 1e-7 of
        relative error against the complex128 sum, below what the bundle's
        complex64 gains hold anyway, for half the memory traffic.
        """
        if self._identity_root:
            out = np.array(unit_streams[0], dtype=np.complex64)[None]  # 1 w = w
        else:
            out = self._correlated(unit_streams)
        # taps on the last axis or (taps_first) the one before the samples
        out *= self._diffuse_amps32[:, None] if taps_first else self._diffuse_amps32
        if rotation is not None:
            out *= rotation.astype(np.complex64)[None, :] if taps_first else rotation.astype(np.complex64)[:, None]
        return out

    def _correlated(self, streams) -> np.ndarray:
        """(S w)_l for every link, summed in link order from +0: complex64 (n_links, *w.shape).

        ``streams``: the links' w, complex64 arrays (views are fine) with a contiguous last axis.
        """
        out = np.zeros((self.n_links, *streams[0].shape), np.complex64)
        root, parts = self._root_c64, out
        if self._real_root:
            # S real (every standard level): for finite w (the engine's), (s + 0j) w = s Re w + j s Im w
            # exactly (the zero terms' signs are lost in sums that start from +0), so the parts are
            # worked on as float32: half the arithmetic, the same bits as the complex product
            root, parts = root.real, out.view(np.float32)
            streams = [np.asarray(w, dtype=np.complex64).view(np.float32) for w in streams]
        term = np.empty_like(parts)
        for k in range(self.n_links):  # explicit sum in link order: same bits for any m
            if self._full_columns[k]:  # every row at once: each row's terms still add in link order
                parts += np.multiply(root[:, k, None, None], streams[k], out=term)
                continue
            for row in np.flatnonzero(self._nonzero_root[:, k]):
                parts[row] += np.multiply(root[row, k], streams[k], out=term[0])
        return out

    def unit_diffuse_links(self, start, stop, tap) -> np.ndarray:
        """Independent unit-power streams of one tap before correlation: complex64 (m, n_links)."""
        return np.stack([self.engine.diffuse(start, stop, link)[:, tap] for link in range(self.n_links)], axis=1)

    # -- conditions ----------------------------------------------------------------------
    def shadowing_db(self, start, stop) -> np.ndarray | None:
        """S(n) in dB (offset for the held mean or median included), float64 (m,), or None."""
        if self.shadowing is None:
            return None
        if self._shadowing_last[:2] != (start, stop):  # the bundle writer asks again for the chunk just made
            db = self.shadowing.gain_db_at_samples(np.arange(start, stop, dtype=np.int64), self.update_rate_hz)
            db.flags.writeable = False
            self._shadowing_last = (start, stop, db)
        return self._shadowing_last[2]

    def shadowing_amplitude(self, start, stop) -> np.ndarray | None:
        db = self.shadowing_db(start, stop)
        return None if db is None else 10.0 ** (db / 20.0)

    def delay_offset_s(self, start, stop) -> np.ndarray | None:
        """Delta tau(n) of a moving delay, float64 (m,), or None."""
        if self.moving is None:
            return None
        return self.moving.delay_offset_at_samples(np.arange(start, stop, dtype=np.int64), self.update_rate_hz)

    def _rotation(self, start, stop):
        if not self._follows:
            return None
        offset = self.delay_offset_s(start, stop)
        return np.exp(-2j * math.pi * self.carrier_hz * offset)

    # -- records ----------------------------------------------------------------------------
    def conditions_record(self) -> dict | None:
        """The manifest's ``conditions``: each condition's trajectory definition, or None."""
        conditions = self.profile.conditions
        if conditions is None:
            return None
        record = conditions.as_record()
        if record.get("high_speed_train") is not None:
            record["high_speed_train"]["phase"] = (
                "direct part of each listed tap: exp(j (2 pi f_d integral_0^t cos theta(u) du + los_phase)), "
                "t = n / update_rate_hz")
        if record.get("moving_propagation") is not None:
            record["moving_propagation"]["delay"] = (
                "every tap's delay + (A/2) sin(delta_omega t), t = n / update_rate_hz; the FIR follows it")
            record["moving_propagation"]["carrier_phase_follows"] = bool(self._follows)
        if record.get("shadowing") is not None:
            record["shadowing"]["generator"] = self.shadowing.as_record()
            record["shadowing"]["file"] = SHADOWING_FILE
            record["shadowing"]["applies_to"] = "every tap and link of tap_gains, as 10^(S/20)"
        return record

    # -- axes ------------------------------------------------------------------------------
    def to_axes(self, links) -> np.ndarray:
        """Link vectors (m, n_links, n_taps) -> bundle axes (m, n_rx, n_tx, n_taps)."""
        m = links.shape[0]
        return links.reshape(m, self.n_tx, self.n_rx, self.n_taps).transpose(0, 2, 1, 3)


def generate_channel_gains(profile, update_rate_hz, n_samples, seed, **engine_options) -> np.ndarray:
    """A profile's whole channel at once, MIMO block and conditions included.

    Parameters
    ----------
    profile : emucompile.profile.model.Profile
    update_rate_hz, n_samples, seed
        As for :func:`emucompile.models.fading.plan`.
    **engine_options
        ``method``, ``periodic``, ``n_sinusoids``, ``sos_evaluation``,
        ``threads`` of :func:`emucompile.models.fading.plan`.

    Returns
    -------
    numpy.ndarray
        complex64, shape (n_samples, n_rx, n_tx, n_taps): the bundle's
        ``tap_gains`` for the same arguments (SISO: n_rx = n_tx = 1).

    Examples
    --------
    >>> import emucompile
    >>> profile = emucompile.load_profile("profiles_demo/campus-eva-2x2.yaml")
    >>> emucompile.generate_channel_gains(profile, 2000.0, 4000, seed=1).shape
    (4000, 2, 2, 9)
    """
    channel = _plan_channel(profile, update_rate_hz, n_samples, seed, engine_options)
    out = np.empty((channel.n_samples, channel.n_rx, channel.n_tx, channel.n_taps), np.complex64)
    for start, gains in channel.chunks(fading.DEFAULT_CHUNK):
        out[start:start + len(gains)] = gains
    return out


def stream_channel_gains(profile, update_rate_hz, n_samples, seed, *, chunk_size=None, **engine_options):
    """Iterate ``(first_index, gains)`` over :func:`generate_channel_gains`'s record in chunks.

    Memory stays bounded; the chunks concatenated equal the whole record bit for bit.
    """
    channel = _plan_channel(profile, update_rate_hz, n_samples, seed, engine_options)
    return channel.chunks(chunk_size or fading.DEFAULT_CHUNK)


def recorded_channel(profile, taps, *, update_rate_hz, n_samples, seed, periodic) -> ChannelPlan:
    """A compiled record's channel rebuilt from its manifest for its deterministic parts: no design, no draw.

    The direct part (:meth:`ChannelPlan.direct_links`), the links' spatial
    correlation and the shadowing's definition follow from the recorded
    values alone: each tap's direct-part Doppler as used and phase as drawn
    (:class:`emucompile.models.fading.RecordedDirect`), its power and K, the
    MIMO and conditions blocks of the recorded profile. The direct part is the
    same complex numbers as at compile, bit for bit. The diffuse part is not
    regenerated (there is none: :meth:`ChannelPlan.block` and
    :meth:`ChannelPlan.diffuse_links` are not available); it is the stored
    gains minus the direct part.

    Parameters
    ----------
    profile : emucompile.profile.model.Profile
        The manifest's recorded (resolved) profile.
    taps : sequence of dict
        The manifest's ``taps``.
    update_rate_hz, n_samples, seed, periodic
        As the manifest records them.
    """
    return ChannelPlan(profile, fading.RecordedDirect(taps, update_rate_hz, n_samples, seed, periodic))


def _plan_channel(profile, update_rate_hz, n_samples, seed, engine_options):
    return ChannelPlan(profile, fading.plan(profile, update_rate_hz, n_samples, seed, **engine_options))


def _amplitudes(tap):
    """(a_d, a_s) of a tap (see the module notes)."""
    power = float(tap.power_linear)
    if tap.fading == "static":
        return math.sqrt(power), 0.0
    k = float(tap.k_linear) if tap.fading == "rician" else 0.0
    return math.sqrt(power * k / (k + 1.0)), math.sqrt(power / (k + 1.0))


__all__ = ["ChannelPlan", "SHADOWING_FILE", "SHADOWING_ROLE", "generate_channel_gains", "recorded_channel",
           "stream_channel_gains"]
