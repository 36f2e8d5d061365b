"""The optional blocks of a profile as frozen objects: preset provenance, MIMO links, conditions.

The profile loader (:mod:`emucompile.profile.model`) checks a block against the
JSON Schema first, then calls the parser here for what the schema cannot
express; each parser reports every problem through a ``report`` callback
(pointer, message, hint, severity, key) and returns the frozen object the
later stages read, or None when the block is in error. Each object has
``as_record()``: the JSON-ready form for ``stats --json`` and the bundle
manifest.

Decisions
---------
* **One correlation for every tap.** The spatial correlation of the diffuse
  parts is the same for all taps, as in the 3GPP annexes (TS 36.101 B.2.3,
  TS 36.104 B.5).
* **Direct parts must be placed.** With more than one link and any Rician or
  static tap, ``mimo.direct_part`` is required: ``identical`` (the same direct
  part on every link, as TS 36.104 B.3 has for the high-speed train) or a
  uniform linear array on each side. Nothing is assumed silently.
* **Which taps the high-speed train moves.** By default every tap with a
  direct part (static and Rician); ``taps: [...]`` lists them instead, and
  each listed tap must have a direct part. The trajectory replaces the direct
  part's constant Doppler: a ``los_doppler_hz`` / ``los_angle_deg`` on such a
  tap is ignored with a warning, and a Rician tap needs neither.
* **Adjustment.** ``adjustment`` a applies (R + aI)/(1 + a) to the link
  matrix of every correlation form. With a standard level it defaults to the
  specification's own a (:func:`emucompile.models.mimo.psd_adjustment`); a user's
  full matrix must be positive semidefinite after its adjustment.
"""

from __future__ import annotations

import dataclasses
import json
import math
from dataclasses import asdict, dataclass

from emucompile.models import mimo
from emucompile._lazy import LazyModule
from emucompile.models.conditions import (
    HIGH_SPEED_TRAIN_SCENARIOS,
    MOVING_PROPAGATION_SCENARIOS,
    HighSpeedTrain,
    LogNormalShadowing,
    MovingPropagation,
)
from emucompile.errors import InputError
from emucompile.profile.presets import PRESET_NAMES, load_preset

# numpy imported on first use (start-up): checking a block without matrices does not need it.
np = LazyModule("numpy")

CORRELATION_FORMS = {
    "standard level": ("level", "specification"),
    "alpha and beta": ("alpha", "beta", "base_station"),
    "one coefficient per side": ("tx", "rx"),
    "Kronecker factors": ("tx_matrix", "rx_matrix"),
    "full matrix": ("matrix",),
}
"""The ways ``mimo.correlation`` may be given (each may add ``adjustment``)."""

DIRECT_FADINGS = ("rician", "static")
"""Fading kinds whose taps have a direct (deterministic) part."""

_KMH = 1.0 / 3.6
_ULA_DEFAULTS = {"tx_spacing_wavelengths": 0.5, "rx_spacing_wavelengths": 0.5,
                 "departure_deg": 0.0, "arrival_deg": 0.0}
_PSD_TOLERANCE = 1e-10  # as emucompile.models.mimo's check


@dataclass(frozen=True)
class PresetInfo:
    """Provenance of taps made from a standard preset (the resolved profile's ``preset:`` block)."""

    name: str
    data_version: int
    source: str | None = None
    values: str | None = None
    delay_spread_ns: float | None = None
    direct_part: str | None = None
    doppler: str | None = None

    def as_record(self) -> dict:
        return asdict(self)


@dataclass(frozen=True, eq=False)
class MimoSetup:
    """The MIMO links of a profile: what the engine needs to correlate and place the parts.

    Attributes
    ----------
    correlation : emucompile.models.mimo.SpatialCorrelation
        R = E[h h^H] of every tap's diffuse part over the n_tx n_rx links
        (link order l = tx * n_rx + rx); ``correlation.square_root()`` gives S
        with S S^H = R.
    direct_response : ndarray, complex, shape (n_links,), read-only
        The factor of a direct part (Rician or static tap) on each link, unit
        modulus (all ones when identical); the engine multiplies the tap's
        direct part by it.
    direct_part : dict or None
        How ``direct_response`` was stated: ``{"kind": "identical"}`` or
        ``{"kind": "uniform linear arrays", ...spacings and angles}``; None
        when no tap has a direct part and none was stated.
    """

    correlation: mimo.SpatialCorrelation
    direct_response: np.ndarray
    direct_part: dict | None = None

    @property
    def n_tx(self) -> int:
        return self.correlation.n_tx

    @property
    def n_rx(self) -> int:
        return self.correlation.n_rx

    @property
    def n_links(self) -> int:
        return self.correlation.n_links

    def as_record(self) -> dict:
        """The manifest's ``mimo`` field (docs/bundle-format.md): sizes, link order, correlation, direct part."""
        return {
            "n_tx": self.n_tx,
            "n_rx": self.n_rx,
            "n_links": self.n_links,
            "link_order": "l = tx * n_rx + rx (vec of H[rx, tx], column-major)",
            "correlation": self.correlation.as_record(),
            "applies_to": "the diffuse part of every tap",
            "direct_part": self.direct_part,
            "direct_response_real": np.real(self.direct_response).tolist(),
            "direct_response_imag": np.imag(self.direct_response).tolist(),
        }

    def summary(self) -> str:
        """One line: ``2x2, medium (ts36101: alpha 0.3, beta 0.9), adjustment 0``."""
        return f"{self.n_tx}x{self.n_rx} links, correlation {correlation_text(self.correlation)}"

    def __eq__(self, other):
        if not isinstance(other, MimoSetup):
            return NotImplemented
        return _canonical(self.as_record()) == _canonical(other.as_record())

    def __hash__(self):
        return hash(_canonical(self.as_record()))


@dataclass(frozen=True)
class ShadowingSpec:
    """Log-normal shadowing as the profile states it; :meth:`generator` makes the seeded process."""

    sigma_db: float
    decorrelation_distance_m: float
    speed_mps: float
    hold: str = "mean"

    @property
    def offset_db(self) -> float:
        """The mean of the shadowing in dB: -sigma^2 ln(10)/20 to hold the mean power, 0 the median."""
        return -(self.sigma_db**2) * math.log(10.0) / 20.0 if self.hold == "mean" else 0.0

    def generator(self, seed) -> LogNormalShadowing:
        """The shadowing process for ``seed`` (an int or a ``numpy.random.SeedSequence``)."""
        return LogNormalShadowing(self.sigma_db, self.decorrelation_distance_m, self.speed_mps,
                                  seed=seed, hold=self.hold)

    def as_record(self) -> dict:
        return {"kind": "log_normal_shadowing", **asdict(self), "offset_db": self.offset_db,
                "definition": "Gudmundson 1991 exponential autocorrelation exp(-|dx|/d_corr), dx = speed x time"}


@dataclass(frozen=True)
class Conditions:
    """The time-varying conditions of a profile (any may be None).

    Attributes
    ----------
    high_speed_train : emucompile.models.conditions.HighSpeedTrain or None
        Drives the direct-part Doppler of the taps in ``high_speed_train_taps``
        (their phase: ``high_speed_train.phase_at_samples``).
    high_speed_train_taps : tuple of int
        Indices (in ``Profile.taps``) of the taps whose direct part follows it.
    moving_propagation : emucompile.models.conditions.MovingPropagation or None
        A delay drift common to every tap; with ``carrier_follows`` the carrier
        phase follows at ``moving_propagation_carrier_hz``.
    moving_propagation_carrier_hz : float or None
    shadowing : ShadowingSpec or None
        One large-scale factor common to every tap and link.
    """

    high_speed_train: HighSpeedTrain | None = None
    high_speed_train_taps: tuple[int, ...] = ()
    moving_propagation: MovingPropagation | None = None
    moving_propagation_carrier_hz: float | None = None
    shadowing: ShadowingSpec | None = None

    @property
    def drift_doppler_hz(self) -> float:
        """Largest |Doppler| the moving delay adds to every tap (0 unless the carrier follows)."""
        if self.moving_propagation is None:
            return 0.0
        return self.moving_propagation.peak_carrier_doppler_hz(self.moving_propagation_carrier_hz)

    def as_record(self) -> dict:
        """JSON-ready: each condition's record, or None when absent."""
        train = moving = None
        if self.high_speed_train is not None:
            train = {**self.high_speed_train.as_record(), "taps": list(self.high_speed_train_taps),
                     "peak_doppler_hz": self.high_speed_train.peak_doppler_hz}
        if self.moving_propagation is not None:
            moving = {**self.moving_propagation.as_record(), "carrier_hz": self.moving_propagation_carrier_hz,
                      "peak_carrier_doppler_hz": self.drift_doppler_hz}
        return {
            "high_speed_train": train,
            "moving_propagation": moving,
            "shadowing": None if self.shadowing is None else self.shadowing.as_record(),
        }

    def summary_lines(self) -> list[str]:
        """One readable line per condition present."""
        lines = []
        train = self.high_speed_train
        if train is not None:
            lines.append(
                f"high-speed train{' ' + train.scenario if train.scenario else ''}: D_s {train.ds_m:g} m, "
                f"D_min {train.dmin_m:g} m, {train.speed_mps * 3.6:g} km/h, f_d {train.max_doppler_hz:g} Hz "
                f"(peak {train.peak_doppler_hz:.6g} Hz), period {train.period_s:.6g} s, on tap(s) "
                + ", ".join(str(i) for i in self.high_speed_train_taps))
        moving = self.moving_propagation
        if moving is not None:
            follows = (f"carrier follows at {self.moving_propagation_carrier_hz:g} Hz "
                       f"(adds up to {self.drift_doppler_hz:.6g} Hz)") if moving.carrier_follows \
                else "carrier phase does not follow"
            lines.append(f"moving propagation{' ' + moving.scenario if moving.scenario else ''}: "
                         f"A {moving.amplitude_s * 1e6:g} us, delta_omega {moving.angular_rate_per_s:g} /s, "
                         f"{follows}")
        if self.shadowing is not None:
            s = self.shadowing
            lines.append(f"log-normal shadowing: sigma {s.sigma_db:g} dB, "
                         f"decorrelation {s.decorrelation_distance_m:g} m, "
                         f"{s.speed_mps * 3.6:g} km/h, {s.hold} power held (mean {s.offset_db:.4g} dB)")
        return lines


def correlation_text(correlation: mimo.SpatialCorrelation) -> str:
    """How a correlation was made, in a few words (for tables)."""
    origin = correlation.origin or {}
    if "level" in origin:
        text = (f"{origin['level']} ({origin['specification']}: alpha {origin['alpha']:g}, "
                f"beta {origin['beta']:g}; tx {origin['tx']:g}, rx {origin['rx']:g})")
    elif "alpha" in origin:
        text = f"alpha {_complex_text(origin['alpha'])}, beta {_complex_text(origin['beta'])} " \
               f"(base station {origin['base_station_side']})"
    elif "tx" in origin:
        text = f"tx {_complex_text(origin['tx'])}, rx {_complex_text(origin['rx'])}"
    elif "matrices" in origin:
        text = "user Kronecker factors"
    else:
        text = "user link matrix"
    return f"{text}, adjustment {correlation.adjustment:g}"


# -- parsers ---------------------------------------------------------------------------------


def parse_preset_info(block: dict, report) -> PresetInfo:
    """The ``preset:`` provenance block; warns when it names data this version does not hold."""
    info = PresetInfo(**{f.name: block.get(f.name) for f in dataclasses.fields(PresetInfo)})
    if info.name not in PRESET_NAMES:
        report("/preset/name", f"preset {info.name!r} is not among this version's presets",
               "the taps are used as written", severity="warning")
    elif load_preset(info.name).data_version != info.data_version:
        report("/preset/data_version",
               f"the taps were made from data version {info.data_version} of preset {info.name}; "
               f"this version holds data version {load_preset(info.name).data_version}",
               "the taps are used as written; 'emucompile presets show' prints the current data",
               severity="warning")
    return info


def parse_mimo(block: dict, report, *, direct_taps) -> MimoSetup | None:
    """The ``mimo:`` block, checked: correlation form, coefficients, matrices, the direct part.

    ``direct_taps`` are the indices of the taps with a direct part. Returns
    None when in error, and for a single link (1x1, with a warning: SISO).
    """
    n_tx, n_rx = int(block["n_tx"]), int(block["n_rx"])
    failures = []

    def fail(pointer, message, hint=None, **kw):
        failures.append(pointer)
        report(pointer, message, hint, **kw)

    correlation = _correlation(block["correlation"], n_tx, n_rx, fail, report)
    response, stated = _direct_part(block, n_tx, n_rx, direct_taps, fail, report)
    if failures or correlation is None:
        return None
    if n_tx * n_rx == 1:
        report("/mimo", "1x1 is a single link: the profile is SISO and the block has no effect",
               "remove the block, or give more antennas", severity="warning", key=True)
        return None
    response = np.array(response, dtype=complex)
    response.setflags(write=False)
    for array in (correlation.matrix, correlation.tx_matrix, correlation.rx_matrix):
        if array is not None:
            array.setflags(write=False)
    return MimoSetup(correlation, response, stated)


def parse_conditions(block: dict, report, *, taps, speed_mps, carrier_hz) -> Conditions | None:
    """The ``conditions:`` block, checked; ``taps`` are the raw tap mappings of the (resolved) profile.

    ``speed_mps`` and ``carrier_hz`` are the profile's (None when not given):
    shadowing takes the profile's speed unless it has its own, and a moving
    delay whose carrier follows takes the profile's carrier.
    """
    failures = []

    def fail(pointer, message, hint=None, **kw):
        failures.append(pointer)
        report(pointer, message, hint, **kw)

    train, train_taps = None, ()
    if "high_speed_train" in block:
        train, train_taps = _high_speed_train(block["high_speed_train"], taps, fail)
    moving = moving_carrier = None
    if "moving_propagation" in block:
        moving, moving_carrier = _moving_propagation(block["moving_propagation"], carrier_hz, fail, report)
    shadowing = None
    if "shadowing" in block:
        shadowing = _shadowing(block["shadowing"], speed_mps, fail)
    if failures:
        return None
    return Conditions(train, tuple(train_taps), moving, moving_carrier, shadowing)


def high_speed_train_taps(block, taps) -> set[int]:
    """The tap indices the high-speed train would move (before any check); empty without one.

    Used by the tap checks, which relax the direct-Doppler requirement for them.
    """
    train = block.get("high_speed_train") if isinstance(block, dict) else None
    if not isinstance(train, dict):
        return set()
    listed = train.get("taps")
    if isinstance(listed, list):
        return {i for i in listed if isinstance(i, int) and not isinstance(i, bool)}
    return {i for i, tap in enumerate(taps) if isinstance(tap, dict) and tap.get("fading") in DIRECT_FADINGS}


# -- helpers: mimo ---------------------------------------------------------------------------


def _correlation(block, n_tx, n_rx, fail, report):
    here = "/mimo/correlation"
    given = set(block) - {"adjustment"}
    form = next((name for name, keys in CORRELATION_FORMS.items() if given == set(keys)), None)
    if form is None:
        shapes = "; ".join("{" + ", ".join(keys) + "}" for keys in CORRELATION_FORMS.values())
        partial = [keys for keys in CORRELATION_FORMS.values() if given and given < set(keys)]
        hint = (f"add {', '.join(k for k in partial[0] if k not in given)}" if partial
                else "e.g. {level: medium, specification: ts36101}")
        if "level" in given and "specification" not in given:
            hint = ("a level needs its specification: ts36101 (UE tests, downlink) or ts36104 / ts36141 "
                    "(base-station tests, uplink), which list medium's alpha and beta the other way round")
        fail(here, f"give the correlation one way: {shapes} (each may add adjustment); "
             f"got {{{', '.join(sorted(given)) or 'nothing'}}}", hint)
        return None
    adjustment = block.get("adjustment")
    links = n_tx * n_rx
    try:
        if form == "standard level":
            level, specification = block["level"], block["specification"]
            for side, count in (("n_tx", n_tx), ("n_rx", n_rx)):
                if count not in (1, 2, 4):
                    report(f"/mimo/{side}", f"the standards tabulate 1, 2 and 4 antennas; {side} = {count} "
                           "uses the same uniform-linear-array rule (emucompile's extension)", severity="warning")
            standard = mimo.standard_correlation(n_tx, n_rx, level, specification, adjust=False)
            own = mimo.psd_adjustment(specification, level, n_tx, n_rx)
            a = own if adjustment is None else float(adjustment)
            result = mimo.kronecker_correlation(standard.tx_matrix, standard.rx_matrix, adjustment=a)
            origin = {**standard.origin, "adjustment_from": "specification" if adjustment is None else "profile",
                      "specification_adjustment": own}
            return dataclasses.replace(result, origin=origin)
        a = 0.0 if adjustment is None else float(adjustment)
        if form == "alpha and beta":
            alpha = _coefficient(block, "alpha", fail)
            beta = _coefficient(block, "beta", fail)
            if alpha is None or beta is None:
                return None
            return mimo.correlation_from_alpha_beta(n_tx, n_rx, alpha, beta,
                                                    base_station=block["base_station"], adjustment=a)
        if form == "one coefficient per side":
            tx, rx = _coefficient(block, "tx", fail), _coefficient(block, "rx", fail)
            if tx is None or rx is None:
                return None
            return mimo.correlation_from_coefficients(n_tx, n_rx, tx, rx, adjustment=a)
        if form == "Kronecker factors":
            tx = _matrix(block, "tx_matrix", n_tx, 0.0, fail)
            rx = _matrix(block, "rx_matrix", n_rx, 0.0, fail)
            if tx is None or rx is None:
                return None
            result = mimo.kronecker_correlation(tx, rx, adjustment=a)
            return dataclasses.replace(result, origin={"matrices": "user"})
        matrix = _matrix(block, "matrix", links, a, fail)
        if matrix is None:
            return None
        adjusted = mimo.adjust_psd(matrix, a) if a > 0 else matrix
        return mimo.SpatialCorrelation(n_tx, n_rx, adjusted, adjustment=a, origin={"matrix": "user"})
    except InputError as error:  # a check of emucompile.models.mimo the ones above did not foresee
        fail(here, str(error))
        return None


def _coefficient(block, key, fail):
    value = _complex(block[key])
    if abs(value) > 1.0:
        fail(f"/mimo/correlation/{key}", f"{key} has magnitude {abs(value):.6g}; a correlation "
             "coefficient has magnitude <= 1")
        return None
    return value


def _matrix(block, key, size, adjustment, fail):
    """A user correlation matrix as a complex array, or None after reporting each problem."""
    here = f"/mimo/correlation/{key}"
    rows = block[key]
    widths = {len(row) for row in rows}
    if len(widths) > 1:
        first = len(rows[0])
        bad = next(i for i, row in enumerate(rows) if len(row) != first)
        fail(f"{here}/{bad}", f"row {bad} of {key} has {len(rows[bad])} entries, row 0 has {first}",
             "a matrix has rows of equal length")
        return None
    matrix = np.array([[_complex(v) for v in row] for row in rows], dtype=complex)
    problems = mimo.correlation_matrix_problems(matrix, name=key, size=size)
    if adjustment > 0 and problems and "positive semidefinite" in problems[-1]:
        # The check applies to (R + aI)/(1 + a): its eigenvalues are (lambda + a)/(1 + a).
        smallest = float(np.linalg.eigvalsh((matrix + matrix.conj().T) / 2.0)[0])
        if (smallest + adjustment) / (1.0 + adjustment) >= -_PSD_TOLERANCE:
            problems.pop()
        else:
            problems[-1] = (f"{key} is not positive semidefinite even after the adjustment {adjustment:g}: "
                            f"its smallest eigenvalue is {smallest:.3g} (hint: adjustment >= {-smallest:.3g})")
    for problem in problems:
        fail(here, problem)
    return None if problems else matrix


def _direct_part(block, n_tx, n_rx, direct_taps, fail, report):
    links = n_tx * n_rx
    stated = block.get("direct_part")
    which = ", ".join(str(i) for i in list(direct_taps)[:10]) + (", ..." if len(direct_taps) > 10 else "")
    if stated is None:
        if direct_taps and links > 1:
            fail("/mimo", f"tap(s) {which} have a direct part: say how it reaches the {n_tx}x{n_rx} links",
                 "add direct_part: identical, or direct_part: {rx_spacing_wavelengths: 0.5, arrival_deg: 30, ...} "
                 "(uniform linear arrays)", key=True)
        return np.ones(links), None
    if not direct_taps:
        report("/mimo/direct_part", "no tap has a direct part (rician or static): direct_part is ignored",
               severity="warning", key=True)
    if stated == "identical":
        return np.ones(links), {"kind": "identical"}
    parameters = {**_ULA_DEFAULTS, **{k: float(v) for k, v in stated.items()}}
    response = mimo.direct_link_response(n_tx, n_rx, **parameters)
    return response, {"kind": "uniform linear arrays",
                      "definition": "h_direct = a_tx(departure) (x) a_rx(arrival), "
                                    "a(theta)_n = exp(j 2 pi d n sin theta), theta from broadside",
                      **parameters}


def _complex(value) -> complex:
    if isinstance(value, dict):
        return complex(float(value["re"]), float(value["im"]))
    return complex(float(value))


def _complex_text(value) -> str:
    if isinstance(value, dict):
        return f"{value['real']:g}{value['imag']:+g}j"
    return f"{value:g}"


def _canonical(record) -> str:
    return json.dumps(record, sort_keys=True, separators=(",", ":"))


# -- helpers: conditions -----------------------------------------------------------------------


def _scenario_parameters(block, here, table, parameters, fail, what):
    """Start from the scenario's parameters (if any), then the block's own; None if some are missing."""
    scenario = block.get("scenario")
    values = dict(table[scenario]) if scenario is not None else {}
    changed = [key for key in parameters if key in block and scenario is not None]
    values.update({key: block[key] for key in parameters if key in block})
    missing = [key for key in parameters if key not in values]
    if missing:
        fail(here, f"{what} without a scenario needs {', '.join(parameters)}; missing: {', '.join(missing)}",
             f"or name a scenario: {', '.join(table)}")
        return None, None
    label = scenario
    if scenario is not None and changed:
        label = f"{scenario} with {', '.join(changed)} changed"
    return values, label


def _high_speed_train(block, taps, fail):
    here = "/conditions/high_speed_train"
    if "speed_kmh" in block and "speed_mps" in block:
        fail(f"{here}/speed_mps", "give speed_kmh or speed_mps, not both", key=True)
        return None, ()
    speed_key = "speed_mps" if "speed_mps" in block else "speed_kmh"
    unit = 1.0 if speed_key == "speed_kmh" else _KMH  # the tables give km/h
    table = {name: {"ds_m": ds, "dmin_m": dmin, speed_key: kmh * unit, "max_doppler_hz": fd}
             for name, (ds, dmin, kmh, fd) in HIGH_SPEED_TRAIN_SCENARIOS.items()}
    values, label = _scenario_parameters(block, here, table, ("ds_m", "dmin_m", speed_key, "max_doppler_hz"),
                                         fail, "a high-speed train")
    chosen = _train_taps(block, taps, here, fail)
    if values is None or chosen is None:
        return None, ()
    speed_mps = float(values[speed_key]) * (_KMH if speed_key == "speed_kmh" else 1.0)
    try:
        train = HighSpeedTrain(float(values["ds_m"]), float(values["dmin_m"]), speed_mps,
                               float(values["max_doppler_hz"]), scenario=label)
    except InputError as error:
        fail(here, str(error))
        return None, ()
    return train, chosen


def _train_taps(block, taps, here, fail):
    direct = [i for i, tap in enumerate(taps) if isinstance(tap, dict) and tap.get("fading") in DIRECT_FADINGS]
    if "taps" not in block:
        if not direct:
            fail(here, "the high-speed train moves the Doppler of a direct part, and no tap has one",
                 "make a tap static (a fixed gain) or rician", key=True)
            return None
        return tuple(direct)
    chosen, ok = [], True
    for position, index in enumerate(block["taps"]):
        pointer = f"{here}/taps/{position}"
        index = int(index)  # JSON Schema's "integer" admits 1.0
        if index >= len(taps):
            fail(pointer, f"tap {index} does not exist (the profile has taps 0 to {len(taps) - 1})")
            ok = False
        elif index not in direct:
            fading = taps[index].get("fading", "rayleigh") if isinstance(taps[index], dict) else "?"
            fail(pointer, f"tap {index} is {fading}: it has no direct part for the train's Doppler to move",
                 "make it static or rician, or leave it out")
            ok = False
        else:
            chosen.append(index)
    return tuple(chosen) if ok else None


def _moving_propagation(block, profile_carrier_hz, fail, report):
    here = "/conditions/moving_propagation"
    # Rounded to the picosecond so that 10 us stays 1e-5 s exactly on the way back.
    table = {name: {"amplitude_us": round(entry["amplitude_s"] * 1e6, 6),
                    "angular_rate_per_s": entry["angular_rate_per_s"]}
             for name, entry in MOVING_PROPAGATION_SCENARIOS.items()}
    values, label = _scenario_parameters(block, here, table, ("amplitude_us", "angular_rate_per_s"),
                                         fail, "moving propagation")
    follows = bool(block.get("carrier_follows", False))
    carrier = block.get("carrier_hz", profile_carrier_hz)
    if follows and carrier is None:
        fail(f"{here}/carrier_follows", "a carrier phase that follows the delay needs the carrier frequency",
             "add carrier_hz here or at the top level", key=True)
        return None, None
    if not follows and "carrier_hz" in block:
        report(f"{here}/carrier_hz", "carrier_hz is used only with carrier_follows: true; ignored",
               severity="warning", key=True)
    if values is None:
        return None, None
    try:
        moving = MovingPropagation(float(values["amplitude_us"]) / 1e6, float(values["angular_rate_per_s"]),
                                   follows, label)
    except InputError as error:
        fail(here, str(error))
        return None, None
    return moving, (float(carrier) if follows else None)


def _shadowing(block, profile_speed_mps, fail):
    here = "/conditions/shadowing"
    if "speed_kmh" in block and "speed_mps" in block:
        fail(f"{here}/speed_mps", "give speed_kmh or speed_mps, not both", key=True)
        return None
    if "speed_mps" in block:
        speed = float(block["speed_mps"])
    elif "speed_kmh" in block:
        speed = float(block["speed_kmh"]) * _KMH
    elif profile_speed_mps is not None:
        speed = float(profile_speed_mps)
    else:
        fail(here, "shadowing needs a speed: the distance travelled sets how fast it changes",
             "add speed_kmh or speed_mps here, or give the profile's speed with carrier_hz", key=True)
        return None
    return ShadowingSpec(float(block["sigma_db"]), float(block["decorrelation_distance_m"]), speed,
                         block.get("hold", "mean"))


__all__ = [
    "CORRELATION_FORMS",
    "DIRECT_FADINGS",
    "PresetInfo",
    "MimoSetup",
    "ShadowingSpec",
    "Conditions",
    "correlation_text",
    "parse_preset_info",
    "parse_mimo",
    "parse_conditions",
    "high_speed_train_taps",
]
