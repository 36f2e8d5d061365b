"""Time-varying test conditions, as functions of time: high-speed train, moving delay, shadowing.

* :class:`HighSpeedTrain`: the Doppler trajectory of the direct path in the
  high-speed-train conditions of TS 36.104 / TS 36.141 Annex B.3, and its
  phase 2 pi * integral of f_s(t) dt in closed form.
* :class:`MovingPropagation`: the common delay drift of every tap in the
  moving propagation conditions of TS 36.104 / TS 36.141 Annex B.4.
* :class:`LogNormalShadowing`: large-scale log-normal fading with
  Gudmundson's exponential spatial autocorrelation.

Each takes absolute sample indices and a rate (``*_at_samples``) as well as
times in seconds, so a chunked engine asks for any block alone and gets the
same numbers. Each has ``as_record()`` for the bundle manifest.

Decisions
---------
* **HST phase.** The direct part turns by phi(t) = 2 pi f_d F(t),
  F(t) = integral_0^t cos theta(u) du, not 2 pi f_s(t) t. F has a closed form
  on each piece (:meth:`HighSpeedTrain.phase_rad`); F vanishes at the piece
  boundaries t = D_s/v and t = 2 D_s/v, so phi is continuous across pieces
  and periodic with the trajectory's period 2 D_s/v.
* **Moving delay and the carrier.** By default the carrier phase does *not*
  follow the delay: TS 36.104 B.4 defines a timing drift for the uplink
  timing-adjustment test and says "Doppler shift is not taken into account"
  (Table B.4-1, note 2). Following the delay would rotate the carrier by
  -2 pi f_c Delta tau(t), a Doppler of f_c d(Delta tau)/dt, up to
  (A/2) Delta omega f_c = 400 Hz (scenario 1) or 1.3 kHz (scenario 2) at
  2 GHz, which the condition does not specify. ``carrier_follows=True``
  models a physical path-length change instead.
* **Shadowing: mean power held.** The profile's ``power_db`` is a mean power
  E|g|^2 (docs/profile-format.md), so shadowing S in dB is N(mu, sigma^2) with
  mu = -sigma^2 ln(10)/20, which makes E[10^(S/10)] = 1; the median is then
  mu dB (-7.4 dB at sigma = 8 dB). ``hold="median"`` (mu = 0) follows the
  path-loss convention instead; the manifest records which.
* **Shadowing generation: precomputed, cheaply.** The process is exact on a
  grid of nodes (32 per decorrelation distance by default): an AR(1)
  recursion, exact for an exponential autocorrelation sampled on a uniform
  grid. Innovations come from a seed keyed by block of nodes, so node k is
  the same however far the precomputation went; reaching node k costs O(k)
  once (about 10 ns a node with ``scipy.signal.lfilter``); only the blocks of
  the last request are kept, with the last node of every block reached (the
  AR(1) state to recompute any block alone), so memory stays flat in the
  record's length. Between nodes the dB value is interpolated
  linearly, which lowers the variance by at most (1 - rho)/2 = 1.5 % midway
  (0.8 % in sigma) with 32 nodes per decorrelation distance.
* **Verify: large scale apart from small scale.** Shadowing is one factor
  common to every tap and link. Verify should regenerate (or read) the
  shadowing trajectory and (1) check it alone, its mean against ``hold``, its
  sigma and its autocorrelation against exp(-|dx|/d_corr) with the effective
  sample size of a record of length L (about L / (2 d_corr) independent
  values); (2) divide the tap gains by 10^(S/20) before every small-scale
  check (envelope law, K-factor, Doppler spectrum, level crossings, spatial
  correlation), so those see the profile's process alone rather than a
  Suzuki (Rayleigh x log-normal) mixture.

References
----------
.. [TS36104] 3GPP TS 36.104 V19.2.0 (2025-12), Annex B.3 (equations B.3.1-
   B.3.4, Tables B.3-1, B.3-2) and Annex B.4 (equation B.4-1, Table B.4-1);
   TS 36.141 Annex B.3/B.4 give the same conditions for conformance testing.
.. [TS36101] 3GPP TS 36.101 Annex B.3 (high speed train for the UE).
.. [Gudmundson1991] M. Gudmundson, "Correlation model for shadow fading in
   mobile radio systems", Electronics Letters 27(23), 2145-2146, 1991.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

from emucompile._lazy import LazyModule
from emucompile.errors import InputError

# Imported on first use: reading and checking a profile does not filter (start-up).
np = LazyModule("numpy")
signal = LazyModule("scipy.signal")

_KMH = 1.0 / 3.6


# -- high-speed train -------------------------------------------------------------------


@dataclass(frozen=True)
class HighSpeedTrain:
    """Direct-path Doppler of the high-speed-train condition, TS 36.104 Annex B.3.

    f_s(t) = f_d cos theta(t) (B.3.1) with, for 0 <= t <= D_s/v,
    cos theta(t) = (D_s/2 - v t) / sqrt(D_min^2 + (D_s/2 - v t)^2) (B.3.2),
    for D_s/v < t <= 2 D_s/v,
    cos theta(t) = (-1.5 D_s + v t) / sqrt(D_min^2 + (-1.5 D_s + v t)^2) (B.3.3),
    and cos theta(t mod 2 D_s/v) after that (B.3.4).

    Parameters
    ----------
    ds_m : float
        D_s: twice the train's initial distance from the base station, m.
    dmin_m : float
        D_min: distance between the base station and the railway track, m.
    speed_mps : float
        v, the train's speed, m/s.
    max_doppler_hz : float
        f_d.
    scenario : str, optional
        The name it was looked up by, for records.
    """

    ds_m: float
    dmin_m: float
    speed_mps: float
    max_doppler_hz: float
    scenario: str | None = None

    def __post_init__(self):
        for name in ("ds_m", "dmin_m", "speed_mps", "max_doppler_hz"):
            value = getattr(self, name)
            if not (isinstance(value, (int, float)) and math.isfinite(value) and value > 0):
                raise InputError(f"high-speed train: {name} must be a finite number > 0, got {value!r}")

    @property
    def period_s(self) -> float:
        """2 D_s / v: the trajectory repeats with this period."""
        return 2.0 * self.ds_m / self.speed_mps

    @property
    def peak_doppler_hz(self) -> float:
        """max |f_s(t)| = f_d (D_s/2) / sqrt(D_min^2 + D_s^2/4), reached at t = 0 and t = D_s/v.

        |x| in B.3.2/B.3.3 is largest, D_s/2, at the ends of each piece; this is
        what an update rate must resolve (slightly below f_d).
        """
        half = self.ds_m / 2.0
        return self.max_doppler_hz * half / math.hypot(self.dmin_m, half)

    @property
    def mean_square_doppler_hz2(self) -> float:
        """Mean of f_s(t)^2 over a period: f_d^2 (1 - (2 D_min/D_s) atan(D_s / (2 D_min))).

        Over each piece x sweeps [-D_s/2, D_s/2] at speed v, so the time mean of
        cos^2 theta = x^2/(D_min^2 + x^2) is (1/D_s) times its integral over x,
        x - D_min atan(x/D_min). The mean of f_s itself is 0 (F vanishes at the
        period's end), so this is also its variance.
        """
        ratio = self.ds_m / (2.0 * self.dmin_m)
        return self.max_doppler_hz**2 * (1.0 - math.atan(ratio) / ratio)

    def cos_theta(self, time_s) -> np.ndarray:
        """cos theta(t), equations B.3.2-B.3.4 (vectorised)."""
        t = self._time_in_period(time_s)
        x = self._offset_m(t)
        return x / np.hypot(self.dmin_m, x)

    def doppler_hz(self, time_s) -> np.ndarray:
        """f_s(t) = f_d cos theta(t), equation B.3.1."""
        return self.max_doppler_hz * self.cos_theta(time_s)

    def phase_rad(self, time_s) -> np.ndarray:
        """phi(t) = 2 pi f_d integral_0^t cos theta(u) du, exact; phi(0) = 0.

        With x(u) the signed offset of B.3.2/B.3.3 (d x/du = -v on the first
        piece, +v on the second), the integral of x / sqrt(D_min^2 + x^2) is
        -/+ sqrt(D_min^2 + x^2)/v; written as a difference of squares over a
        sum so that it keeps full precision:

            F(t) = t (D_s - v t) / (a + b(t))                 on 0 <= t <= D_s/v,
            F(t) = (v t - 2 D_s)(v t - D_s) / (v (a + b(t)))  on D_s/v < t <= 2 D_s/v,

        a = sqrt(D_min^2 + D_s^2/4), b(t) = sqrt(D_min^2 + x(t)^2). F is 0 at
        t = 0, D_s/v and 2 D_s/v, so phi is continuous and periodic.
        """
        t = self._time_in_period(time_s)
        v, ds = self.speed_mps, self.ds_m
        a = math.hypot(self.dmin_m, ds / 2.0)
        b = np.hypot(self.dmin_m, self._offset_m(t))
        first = t * (ds - v * t) / (a + b)
        second = (v * t - 2.0 * ds) * (v * t - ds) / (v * (a + b))
        return 2.0 * math.pi * self.max_doppler_hz * np.where(t <= ds / v, first, second)

    def doppler_at_samples(self, sample_index, rate_hz: float, *, start_s: float = 0.0) -> np.ndarray:
        """f_s at times start_s + n / rate_hz for absolute sample indices n."""
        return self.doppler_hz(_sample_times(sample_index, rate_hz, start_s))

    def phase_at_samples(self, sample_index, rate_hz: float, *, start_s: float = 0.0) -> np.ndarray:
        """phi at times start_s + n / rate_hz: the direct part's phase function for the engine."""
        return self.phase_rad(_sample_times(sample_index, rate_hz, start_s))

    def as_record(self) -> dict:
        return _record(self, "high_speed_train",
                       "TS 36.104 Annex B.3, equations B.3.1-B.3.4; phase 2 pi integral f_s dt",
                       period_s=self.period_s)

    def _time_in_period(self, time_s) -> np.ndarray:
        t = np.asarray(time_s, dtype=float)
        if np.any(t < 0) or not np.all(np.isfinite(t)):
            raise InputError("high-speed train: times must be finite and >= 0")
        # B.3.4 for t > 2 D_s/v; t = k * period maps to 0, the start of the first piece.
        return np.mod(t, self.period_s)

    def _offset_m(self, t):
        """The signed distance of B.3.2 (first piece) or B.3.3 (second piece), for t in one period."""
        v, ds = self.speed_mps, self.ds_m
        return np.where(t <= ds / v, ds / 2.0 - v * t, -1.5 * ds + v * t)


# TS 36.104 V19.2.0 Table B.3-1 (scenarios 1 and 3) and Table B.3-2 (LTE500a/b),
# transcribed from a stored copy; TS 36.141 Annex B.3 lists the same (from memory).
# TS 36.101 Annex B.3 (the UE's): D_s 300 m, D_min 2 m, 300 km/h, 750 Hz (from memory).
HIGH_SPEED_TRAIN_SCENARIOS = {
    "ts36104-1": (1000.0, 50.0, 350.0, 1340.0),
    "ts36104-3": (300.0, 2.0, 300.0, 1150.0),
    "ts36104-1-lte500a": (1000.0, 50.0, 500.0, 1944.0),
    "ts36104-3-lte500a": (300.0, 2.0, 500.0, 1944.0),
    "ts36104-1-lte500b": (1000.0, 50.0, 500.0, 1750.0),
    "ts36104-3-lte500b": (300.0, 2.0, 500.0, 1750.0),
    "ts36101": (300.0, 2.0, 300.0, 750.0),
}


def high_speed_train(scenario: str) -> HighSpeedTrain:
    """A tabulated high-speed-train scenario (:data:`HIGH_SPEED_TRAIN_SCENARIOS`, speeds in km/h)."""
    if scenario not in HIGH_SPEED_TRAIN_SCENARIOS:
        raise InputError(
            f"unknown high-speed-train scenario {scenario!r} "
            f"(known: {', '.join(HIGH_SPEED_TRAIN_SCENARIOS)})"
        )
    ds, dmin, speed_kmh, fd = HIGH_SPEED_TRAIN_SCENARIOS[scenario]
    return HighSpeedTrain(ds, dmin, speed_kmh * _KMH, fd, scenario=scenario)


# -- moving propagation -------------------------------------------------------------------


@dataclass(frozen=True)
class MovingPropagation:
    """The moving propagation condition of TS 36.104 Annex B.4: every tap's delay drifts together.

    Delta tau(t) = (A/2) sin(Delta omega t) (equation B.4-1); the relative
    timing of the taps is fixed. The delay can be negative, so a FIR map needs
    a bulk delay of at least A/2.

    Parameters
    ----------
    amplitude_s : float
        A (peak-to-peak drift), 10 us in Table B.4-1.
    angular_rate_per_s : float
        Delta omega, in s^-1 (0.04 or 0.13 in Table B.4-1).
    carrier_follows : bool
        False (default): a baseband timing drift only (module notes). True:
        the carrier phase follows as -2 pi f_c Delta tau(t).
    scenario : str, optional
    """

    amplitude_s: float
    angular_rate_per_s: float
    carrier_follows: bool = False
    scenario: str | None = None

    def __post_init__(self):
        for name in ("amplitude_s", "angular_rate_per_s"):
            value = getattr(self, name)
            if not (isinstance(value, (int, float)) and math.isfinite(value) and value > 0):
                raise InputError(f"moving propagation: {name} must be a finite number > 0, got {value!r}")

    @property
    def max_offset_s(self) -> float:
        return self.amplitude_s / 2.0

    def delay_offset_s(self, time_s) -> np.ndarray:
        """Delta tau(t) = (A/2) sin(Delta omega t), added to every tap's delay."""
        t = np.asarray(time_s, dtype=float)
        return self.max_offset_s * np.sin(self.angular_rate_per_s * t)

    def delay_rate(self, time_s) -> np.ndarray:
        """d(Delta tau)/dt = (A/2) Delta omega cos(Delta omega t), seconds per second."""
        t = np.asarray(time_s, dtype=float)
        return self.max_offset_s * self.angular_rate_per_s * np.cos(self.angular_rate_per_s * t)

    def peak_carrier_doppler_hz(self, carrier_hz: float | None) -> float:
        """Largest |Doppler| the drift adds to every tap: f_c (A/2) delta_omega if the carrier follows, else 0."""
        if not self.carrier_follows:
            return 0.0
        return float(carrier_hz) * self.max_offset_s * self.angular_rate_per_s

    def carrier_phase_rad(self, time_s, carrier_hz: float) -> np.ndarray:
        """Phase added to every tap: -2 pi f_c Delta tau(t) if the carrier follows, else 0."""
        offset = self.delay_offset_s(time_s)
        if not self.carrier_follows:
            return np.zeros_like(offset)
        return -2.0 * math.pi * carrier_hz * offset

    def delay_offset_at_samples(self, sample_index, rate_hz: float, *, start_s: float = 0.0) -> np.ndarray:
        return self.delay_offset_s(_sample_times(sample_index, rate_hz, start_s))

    def as_record(self) -> dict:
        return _record(self, "moving_propagation",
                       "TS 36.104 Annex B.4, equation B.4-1: delta_tau = (A/2) sin(delta_omega t)")


# TS 36.104 V19.2.0 Table B.4-1 (transcribed; the stored copy prints A as "10 s", the
# micro sign lost in conversion: 10 us from memory and ../shared/REFERENCES.md).
# Scenario 1: moving UE in ETU200 at 120 km/h; scenario 2: AWGN at 350 km/h.
MOVING_PROPAGATION_SCENARIOS = {
    "ts36104-1": {"amplitude_s": 10e-6, "angular_rate_per_s": 0.04, "channel": "ETU200", "speed_kmh": 120.0},
    "ts36104-2": {"amplitude_s": 10e-6, "angular_rate_per_s": 0.13, "channel": "AWGN", "speed_kmh": 350.0},
}


def moving_propagation(scenario: str, *, carrier_follows: bool = False) -> MovingPropagation:
    """A tabulated moving-propagation scenario (:data:`MOVING_PROPAGATION_SCENARIOS`)."""
    if scenario not in MOVING_PROPAGATION_SCENARIOS:
        raise InputError(
            f"unknown moving-propagation scenario {scenario!r} "
            f"(known: {', '.join(MOVING_PROPAGATION_SCENARIOS)})"
        )
    entry = MOVING_PROPAGATION_SCENARIOS[scenario]
    return MovingPropagation(entry["amplitude_s"], entry["angular_rate_per_s"], carrier_follows, scenario)


# -- log-normal shadowing -------------------------------------------------------------------


class LogNormalShadowing:
    """Log-normal shadowing with Gudmundson's exponential autocorrelation, seeded.

    S(x) in dB is Gaussian with standard deviation ``sigma_db`` and
    autocorrelation exp(-|dx| / d_corr) [Gudmundson1991]_, x = v t the
    distance travelled. See the module notes for the mean/median choice and
    the generation.

    Parameters
    ----------
    sigma_db : float
        Standard deviation of S, dB (>= 0).
    decorrelation_distance_m : float
        d_corr (> 0): the autocorrelation is 1/e at this distance.
    speed_mps : float
        v (>= 0; 0 gives one constant draw).
    seed : int or numpy.random.SeedSequence
    hold : {"mean", "median"}
        Which of E[10^(S/10)] and median(10^(S/10)) equals 1.
    nodes_per_decorrelation : int
        Grid density of the exact process (32: interpolation loses <= 0.8 % of sigma).

    Examples
    --------
    >>> s = LogNormalShadowing(8.0, 50.0, 10.0, seed=1)
    >>> round(s.offset_db, 3)
    -7.368
    """

    _BLOCK_NODES = 4096

    def __init__(
        self,
        sigma_db: float,
        decorrelation_distance_m: float,
        speed_mps: float,
        *,
        seed,
        hold: str = "mean",
        nodes_per_decorrelation: int = 32,
    ):
        if not (math.isfinite(sigma_db) and sigma_db >= 0):
            raise InputError(f"shadowing: sigma_db must be finite and >= 0, got {sigma_db!r}")
        if not (math.isfinite(decorrelation_distance_m) and decorrelation_distance_m > 0):
            raise InputError(
                f"shadowing: decorrelation_distance_m must be finite and > 0, got {decorrelation_distance_m!r}"
            )
        if not (math.isfinite(speed_mps) and speed_mps >= 0):
            raise InputError(f"shadowing: speed_mps must be finite and >= 0, got {speed_mps!r}")
        if hold not in ("mean", "median"):
            raise InputError(f"shadowing: hold must be 'mean' or 'median', got {hold!r}")
        if int(nodes_per_decorrelation) < 1:
            raise InputError("shadowing: nodes_per_decorrelation must be >= 1")
        self.sigma_db = float(sigma_db)
        self.decorrelation_distance_m = float(decorrelation_distance_m)
        self.speed_mps = float(speed_mps)
        self.hold = hold
        self.nodes_per_decorrelation = int(nodes_per_decorrelation)
        self._seed = seed if isinstance(seed, np.random.SeedSequence) else np.random.SeedSequence(seed)
        # Only the node blocks of the last request are held (memory flat in duration), with the
        # last node of every block computed so far: the AR(1) state from which any block is
        # recomputed alone, with the same bits as in sequence.
        self._nodes = np.empty(0)
        self._first_block = 0
        self._block_ends: list[float] = []

    @property
    def offset_db(self) -> float:
        """mu: -sigma^2 ln(10)/20 to hold the mean power, 0 to hold the median."""
        return -(self.sigma_db**2) * math.log(10.0) / 20.0 if self.hold == "mean" else 0.0

    @property
    def node_spacing_m(self) -> float:
        return self.decorrelation_distance_m / self.nodes_per_decorrelation

    @property
    def node_correlation(self) -> float:
        """rho = exp(-spacing / d_corr) between neighbouring nodes."""
        return math.exp(-1.0 / self.nodes_per_decorrelation)

    def autocorrelation(self, distance_m) -> np.ndarray:
        """The model's normalised autocorrelation exp(-|dx| / d_corr) [Gudmundson1991]_."""
        return np.exp(-np.abs(np.asarray(distance_m, dtype=float)) / self.decorrelation_distance_m)

    def nodes_db(self, first: int, count: int) -> np.ndarray:
        """Zero-mean node values (dB, without ``offset_db``) of nodes first .. first+count-1."""
        if first < 0 or count < 0:
            raise InputError("shadowing: node indices must be >= 0")
        if count == 0:
            return np.empty(0)
        base = self._cover(first, first + count)
        return self._nodes[first - base:first - base + count].copy()

    def gain_db(self, time_s) -> np.ndarray:
        """S(v t) + offset_db, in dB, at the given times (>= 0)."""
        t = np.asarray(time_s, dtype=float)
        if np.any(t < 0) or not np.all(np.isfinite(t)):
            raise InputError("shadowing: times must be finite and >= 0")
        position = t * self.speed_mps / self.node_spacing_m  # in node units
        below = np.floor(position).astype(np.int64)
        fraction = position - below
        if below.size == 0:
            return fraction + self.offset_db
        base = self._cover(int(below.min()), int(below.max()) + 2)
        if base:
            below = below - base
        value = (1.0 - fraction) * self._nodes[below] + fraction * self._nodes[below + 1]
        return value + self.offset_db

    def power_factor(self, time_s) -> np.ndarray:
        """10^(S/10): multiplies every tap's power."""
        return 10.0 ** (self.gain_db(time_s) / 10.0)

    def amplitude_factor(self, time_s) -> np.ndarray:
        """10^(S/20): multiplies every tap's complex gain."""
        return 10.0 ** (self.gain_db(time_s) / 20.0)

    def gain_db_at_samples(self, sample_index, rate_hz: float, *, start_s: float = 0.0) -> np.ndarray:
        return self.gain_db(_sample_times(sample_index, rate_hz, start_s))

    def as_record(self) -> dict:
        return {
            "kind": "log_normal_shadowing",
            "sigma_db": self.sigma_db,
            "decorrelation_distance_m": self.decorrelation_distance_m,
            "speed_mps": self.speed_mps,
            "hold": self.hold,
            "offset_db": self.offset_db,
            "nodes_per_decorrelation": self.nodes_per_decorrelation,
            "seed_entropy": str(self._seed.entropy),
            "seed_spawn_key": list(self._seed.spawn_key),
            "definition": "Gudmundson 1991 exponential autocorrelation; exact AR(1) on the node grid, "
                          "linear interpolation in dB between nodes",
        }

    def _cover(self, first: int, stop: int) -> int:
        """Hold nodes first .. stop-1 (and no block outside them); return the index of the first held node."""
        size = self._BLOCK_NODES
        lo, hi = first // size, -(-stop // size)
        held = self._nodes.size // size
        if not (self._first_block <= lo and hi <= self._first_block + held):
            blocks = [self._nodes[(b - self._first_block) * size:(b - self._first_block + 1) * size]
                      if self._first_block <= b < self._first_block + held else self._block_values(b)
                      for b in range(lo, hi)]
            self._nodes = blocks[0] if len(blocks) == 1 else np.concatenate(blocks)
            self._first_block = lo
        return self._first_block * size

    def _block_values(self, block: int) -> np.ndarray:
        """Node values of one block (exact AR(1), innovations keyed by block), from the previous block's end."""
        while len(self._block_ends) < block:  # the AR(1) state at the block's start, computed once
            self._block_values(len(self._block_ends))
        rho = self.node_correlation
        gain = self.sigma_db * math.sqrt(1.0 - rho * rho)
        innovations = self._block_innovations(block)
        if block == 0:
            # Node 0 drawn from the stationary law, the rest by the recursion.
            start = np.array([self.sigma_db * innovations[0]])
            rest, _ = signal.lfilter([gain], [1.0, -rho], innovations[1:], zi=[rho * start[0]])
            values = np.concatenate([start, rest])
        else:
            values, _ = signal.lfilter([gain], [1.0, -rho], innovations, zi=[rho * self._block_ends[block - 1]])
        if len(self._block_ends) == block:
            self._block_ends.append(values[-1])
        return values

    def _block_innovations(self, block: int) -> np.ndarray:
        key = np.random.SeedSequence(self._seed.entropy, spawn_key=tuple(self._seed.spawn_key) + (block,))
        return np.random.Generator(np.random.PCG64(key)).standard_normal(self._BLOCK_NODES)


# -- helpers ---------------------------------------------------------------------------------


def _record(condition, kind: str, definition: str, **extra) -> dict:
    """A frozen condition's fields as a JSON-ready manifest record."""
    return {"kind": kind, **dataclasses.asdict(condition), **extra, "definition": definition}


def _sample_times(sample_index, rate_hz: float, start_s: float) -> np.ndarray:
    if not (math.isfinite(rate_hz) and rate_hz > 0):
        raise InputError(f"the sample rate must be finite and > 0, got {rate_hz!r}")
    n = np.asarray(sample_index)
    if n.dtype.kind not in "iu":
        raise InputError("sample indices must be integers")
    return start_s + n.astype(float) / rate_hz


__all__ = [
    "HighSpeedTrain",
    "HIGH_SPEED_TRAIN_SCENARIOS",
    "high_speed_train",
    "MovingPropagation",
    "MOVING_PROPAGATION_SCENARIOS",
    "moving_propagation",
    "LogNormalShadowing",
]
