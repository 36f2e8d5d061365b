"""Delay and Doppler statistics of a profile, and its ``expect:`` targets.

A pure library: functions of a :class:`emucompile.profile.model.Profile` (or of
delays and powers) that return plain numbers and dicts. The command line only
prints them.

Conventions
-----------
* Every quantity is in SI units and its key says the unit (``_s``, ``_hz``, ``_db``).
* A quantity that is undefined or infinite is ``None`` (JSON ``null``), and
  the top-level ``reasons`` map says why, under the same key
  (``reasons["coherence_time_rule_s"]``). Nothing is ever NaN or infinite, so
  ``json.dumps(..., allow_nan=False)`` always works.
* Keys ending in ``_rule_hz`` / ``_rule_s`` are rules of thumb, not exact
  values; the ``rules`` map gives each one's formula and source.

References
----------
.. [Rappaport2002] T. S. Rappaport, Wireless Communications: Principles and
   Practice, 2nd ed., Prentice Hall, 2002, section 5.4: mean excess delay and
   RMS delay spread (eqs. 5.35-5.37, power-weighted moments of the power
   delay profile), coherence bandwidth B_c ~ 1/(50 sigma_tau) at 0.9 and
   ~ 1/(5 sigma_tau) at 0.5 correlation (eqs. 5.38-5.39), coherence time
   T_c ~ 9/(16 pi f_m) and the geometric-mean rule T_c = 0.423/f_m
   (eqs. 5.40.b-5.40.c).
.. [Bello1963] P. A. Bello, "Characterization of randomly time-variant linear
   channels", IEEE Trans. Commun. Syst. 11(4), 1963: for a WSSUS channel the
   frequency correlation is the Fourier transform of the power delay profile,
   R(df) = sum_i P_i exp(-j 2 pi df tau_i) / sum_i P_i.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np

from emucompile._lazy import LazyModule
from emucompile.profile.model import Profile

# Imported on first use: delay statistics alone (presets list) need no root finding.
optimize = LazyModule("scipy.optimize")

COHERENCE_TIME_RULE = 0.423
"""T_c = 0.423 / f_D, the geometric-mean rule [Rappaport2002]_ eq. 5.40.c."""

COHERENCE_TIME_STRICT_RULE = 9.0 / (16.0 * math.pi)
"""T_c = 9 / (16 pi f_D) ~ 0.179 / f_D, the stricter rule [Rappaport2002]_ eq. 5.40.b."""

RULES = {
    "coherence_bandwidth_rule_hz": "rule of thumb 1/(5 rms_delay_spread), 0.5 correlation "
    "(Rappaport 2002, eq. 5.39)",
    "coherence_bandwidth_90_rule_hz": "rule of thumb 1/(50 rms_delay_spread), 0.9 correlation "
    "(Rappaport 2002, eq. 5.38)",
    "coherence_time_rule_s": "rule of thumb 0.423/max_doppler (Rappaport 2002, eq. 5.40.c)",
    "coherence_time_strict_rule_s": "rule of thumb 9/(16 pi max_doppler) (Rappaport 2002, "
    "eq. 5.40.b)",
}


def profile_statistics(profile: Profile) -> dict:
    """Delay and Doppler statistics of a profile, as one strict-JSON-ready dict (SI units).

    Parameters
    ----------
    profile : Profile
        A checked profile (powers already scaled to its total).

    Returns
    -------
    dict
        ``name``, ``n_taps``, ``total_power_db``, ``power_scale_db``;
        delay: ``first_delay_s``, ``mean_excess_delay_s``,
        ``rms_delay_spread_s``, ``max_excess_delay_s``; frequency correlation:
        ``coherence_bandwidth_50_hz``, ``coherence_bandwidth_90_hz`` (exact,
        :func:`coherence_bandwidth`), ``coherence_bandwidth_rule_hz``
        (1/(5 sigma_tau)), ``coherence_bandwidth_90_rule_hz`` (1/(50 sigma_tau));
        Doppler: ``max_doppler_hz``, ``largest_doppler_hz``,
        ``mean_doppler_shift_hz``, ``rms_doppler_spread_hz``,
        ``coherence_time_rule_s`` (0.423/f_D), ``coherence_time_strict_rule_s``
        (9/(16 pi f_D)); ``taps`` (one dict per tap); ``reasons`` (why a value
        is null) and ``rules`` (formula and source of each rule of thumb);
        the optional blocks: ``preset`` (provenance), ``mimo`` (sizes and how
        the correlation was made), ``conditions`` (each condition's record and
        a readable ``summary``), ``target`` (the emulator's constraints), each
        None when absent.

    Notes
    -----
    Delay moments are power-weighted over all of each tap's power (direct and
    diffuse parts): mean excess delay sum P_i (tau_i - tau_0) / sum P_i with
    tau_0 the smallest delay, RMS delay spread the square root of the central
    second moment, maximum excess delay the span of the listed delays (no
    threshold) [Rappaport2002]_.

    ``max_doppler_hz`` is the largest maximum Doppler f_D of any Rayleigh or
    Rician tap (null when every tap is static). ``largest_doppler_hz`` is the
    largest frequency present in any tap gain, band edges and direct-part
    shifts included (what an update rate must resolve).

    ``rms_doppler_spread_hz`` is the RMS width of the channel's power-weighted
    Doppler spectrum S(f) = sum_i [D_i S_i(f) + L_i delta(f - nu_i)] / sum_i P_i,
    where D_i is tap i's diffuse power with its unit-power spectrum S_i (second
    moment from :attr:`emucompile.models.theory.DopplerSpectrum.second_moment_hz2`,
    f_D^2/2 for the classical spectrum) and L_i its direct power, a line at its
    Doppler nu_i (Rician direct part, turning static tap). It is
    sqrt(m2 - m1^2) with m1 = sum L_i nu_i / P and m2 = sum (D_i E_i[f^2] + L_i nu_i^2) / P;
    ``mean_doppler_shift_hz`` is m1. A channel of static taps that do not turn
    has spread 0.

    Time-varying conditions enter as long-run (time-averaged) moments. A
    direct part on the high-speed-train trajectory contributes L_i mean(f_s^2)
    to m2 and nothing to m1 (f_s averages to 0 over a period; see
    :attr:`emucompile.models.conditions.HighSpeedTrain.mean_square_doppler_hz2`); a
    moving delay whose carrier follows shifts every tap by
    nu(t) = nu_max cos(delta_omega t), adding nu_max^2 / 2 to m2. Both count in
    ``largest_doppler_hz`` at their peak.
    """
    taps = profile.taps
    delays = np.array([t.delay_s for t in taps], dtype=float)
    powers = np.array([t.power_linear for t in taps], dtype=float)
    reasons: dict[str, str] = {}
    out: dict = {
        "name": profile.name,
        "n_taps": profile.n_taps,
        "total_power_db": 10.0 * math.log10(math.fsum(powers)),
        "power_scale_db": profile.power_scale_db,
    }
    out.update(delay_statistics(delays, powers))
    sigma = out["rms_delay_spread_s"]
    for level, key in ((0.5, "coherence_bandwidth_50_hz"), (0.9, "coherence_bandwidth_90_hz")):
        out[key], reason = coherence_bandwidth(delays, powers, level)
        if reason:
            reasons[key] = reason
    for divisor, key in ((5.0, "coherence_bandwidth_rule_hz"), (50.0, "coherence_bandwidth_90_rule_hz")):
        if sigma > 0:
            out[key] = 1.0 / (divisor * sigma)
        else:
            out[key] = None
            reasons[key] = "the RMS delay spread is 0 (all power at one delay): the rule gives infinity"
    out.update(_doppler_statistics(profile, reasons))
    out["taps"] = [_tap_row(t) for t in taps]
    out.update(_block_records(profile, reasons))
    out["reasons"] = reasons
    out["rules"] = dict(RULES)
    return out


def delay_statistics(delays_s, powers_linear) -> dict:
    """Power-weighted delay moments of a power delay profile [Rappaport2002]_ eqs. 5.35-5.37.

    Returns ``first_delay_s``, ``mean_excess_delay_s`` (relative to the first
    delay), ``rms_delay_spread_s`` (sqrt of the central second moment, computed
    about the mean so that large common delays lose no precision) and
    ``max_excess_delay_s`` (last delay minus first).
    """
    delays, weights = _normalised(delays_s, powers_linear)
    first = float(delays.min())
    excess = delays - first
    mean = float(np.sum(weights * excess))
    variance = float(np.sum(weights * (excess - mean) ** 2))
    return {
        "first_delay_s": first,
        "mean_excess_delay_s": mean,
        "rms_delay_spread_s": math.sqrt(max(variance, 0.0)),
        "max_excess_delay_s": float(excess.max()),
    }


def frequency_correlation(delays_s, powers_linear, frequency_hz):
    """|R(df)| = |sum_i P_i exp(-j 2 pi df tau_i)| / sum_i P_i of a power delay profile [Bello1963]_."""
    delays, weights = _normalised(delays_s, powers_linear)
    return np.sqrt(_correlation_squared(delays - delays.min(), weights, np.asarray(frequency_hz, float)))


TANGENCY_TOLERANCE = 1e-12
"""How close |R|^2 must come to the level squared to count as reaching it: a
minimum that touches the level (a tangency) is found, not lost to rounding
(float64 sums of a few cosines round at ~1e-16; common practice margin)."""


def coherence_bandwidth(delays_s, powers_linear, correlation: float = 0.5):
    """Exact coherence bandwidth: the first df > 0 where |R(df)| falls to ``correlation``.

    Parameters
    ----------
    delays_s, powers_linear : array_like
        The power delay profile (taps at one delay add up).
    correlation : float
        The level, in (0, 1); 0.5 and 0.9 are the usual ones.

    Returns
    -------
    (float or None, str or None)
        The frequency in Hz and None, or None and the reason it is undefined
        (all power at one delay; a tap so strong that |R| can never fall that
        far; not reached within the frequencies searched).

    Notes
    -----
    g(df) = |R(df)|^2 = 1 - W + sum_{i != j} p_i p_j cos(2 pi df (tau_i - tau_j)),
    with W = 1 - sum p_i^2, has |g'| <= 2 pi G where G = sum_{i != j} p_i p_j
    |tau_i - tau_j|. Between two samples g_a, g_b at distance d it therefore
    cannot fall below (g_a + g_b)/2 - pi G d. The search samples g on a grid of
    step h = W/(64 G) (1/64 of the power-weighted mean delay difference's
    reciprocal), discards every interval that bound keeps above the level,
    splits each remaining one into 16 and repeats (branch and bound, at most
    6 levels deep), and refines the first interval whose right end is at or
    below the level with ``scipy.optimize.brentq`` only at the deepest level
    (an interval that ends below the level may dip below it and come back
    first: a ripple of a weak far tap shorter than the grid step). An interval still undecided
    at the deepest level is searched for a minimum of g (a root of g', by
    ``brentq``) that touches the level within :data:`TANGENCY_TOLERANCE`:
    "falls to" includes touching it. No crossing is missed
    except a tangency shallower than about pi W / 64 / 16^6 (< 3e-9) in g. Taps
    less than 1 fs apart count as one delay. Weak taps far
    out only add their small share to G, so they do not force a fine grid.
    |R| >= 2 p_max - 1 for every df (p_max the largest share of power at one
    delay), which rules out levels below that at once.

    Cost: O(n_delays) per grid point, in chunks of 4096 points; the search
    stops at the first crossing, or after 5e6 / n_delays grid points (then
    the value is None and the reason says how far it searched).
    """
    if not 0.0 < correlation < 1.0:
        raise ValueError(f"correlation must be in (0, 1), got {correlation!r}")
    delays, weights = _normalised(delays_s, powers_linear)
    delays, weights = _merge_equal_delays(delays - delays.min(), weights)
    if len(delays) == 1:
        return None, ("all power arrives at one delay: |R(df)| = 1 for every df, so the "
                      "coherence bandwidth is infinite")
    level2 = correlation * correlation
    floor = 2.0 * float(weights.max()) - 1.0
    # |R| touching the level (a tangency, within float rounding) counts as reaching it.
    if floor >= correlation and floor * floor - level2 > TANGENCY_TOLERANCE:
        return None, (f"the strongest delay holds {weights.max() * 100:.4g} % of the power, so "
                      f"|R(df)| never falls below {floor:.4g}, above {correlation}")
    reach = level2 + TANGENCY_TOLERANCE
    pair_weight = np.outer(weights, weights)
    slope_bound = math.pi * float(np.sum(pair_weight * np.abs(delays[:, None] - delays[None, :])))
    step = (1.0 - float(np.sum(weights**2))) * math.pi / (64.0 * slope_bound)
    chunk = 4096
    max_points = max(chunk, int(5e6 / len(delays)))

    def g(f):
        return _correlation_squared(delays, weights, np.atleast_1d(np.asarray(f, dtype=float)))

    def first_in(a, b, g_a, g_b, depth):
        """The first crossing in [a, b] (g_a above the level), or None."""
        crosses = g_b <= level2
        if not crosses and (g_a + g_b) / 2.0 - slope_bound * (b - a) > reach:
            return None
        if depth == 6:
            if crosses:  # an interval this short holds one crossing, up to the stated precision
                # At a tangency g sits on the level within rounding, and a scalar g(x) may
                # round to the other side of the vectorised value: either end then is the answer.
                if g(a)[0] <= level2:
                    return float(a)
                if g(b)[0] > level2:
                    return float(b)
                return float(optimize.brentq(lambda x: g(x)[0] - level2, a, b,
                                             xtol=step * 1e-12, rtol=1e-13))
            return tangency(a, b, g_a, g_b)
        x = np.linspace(a, b, 17)
        values = g(x)
        values[0], values[-1] = g_a, g_b
        for k in range(16):
            found = first_in(x[k], x[k + 1], values[k], values[k + 1], depth + 1)
            if found is not None:
                return found
        return None

    def slope(f):
        phase = np.exp(-2j * np.pi * f * delays)
        r = phase @ weights
        return 2.0 * float(np.real(np.conj(r) * ((-2j * np.pi * delays * phase) @ weights)))

    def tangency(a, b, g_a, g_b):
        """A minimum of g in [a, b] that touches the level within TANGENCY_TOLERANCE, or None."""
        if not slope(a) < 0.0 <= slope(b):
            return None  # no minimum inside: a later interval holds it
        x = float(optimize.brentq(slope, a, b, xtol=step * 1e-12, rtol=1e-15))
        return x if g(x)[0] <= reach else None

    previous_f, previous_g = 0.0, 1.0
    for start in range(0, max_points, chunk):
        f = (np.arange(start, start + chunk) + 1.0) * step
        values = g(f)
        left = np.concatenate(([previous_g], values[:-1]))
        lefts = np.concatenate(([previous_f], f[:-1]))
        maybe = np.flatnonzero((left + values) / 2.0 - slope_bound * step <= reach)
        for k in maybe:
            found = first_in(float(lefts[k]), float(f[k]), float(left[k]), float(values[k]), 0)
            if found is not None:
                return found, None
        previous_f, previous_g = float(f[-1]), float(values[-1])
    return None, (f"|R(df)| stays above {correlation} up to {previous_f:.4g} Hz, as far as "
                  "it was searched")


@dataclass(frozen=True)
class TargetResult:
    """The outcome of one ``expect:`` target, in the unit of its key.

    ``low``/``high`` are None where the range is open; ``value`` is None when
    the statistic is undefined (``reason`` then says why, and the target is missed).
    """

    quantity: str
    statistic: str
    unit: str
    value: float | None
    expected: float | None
    low: float | None
    high: float | None
    met: bool
    reason: str | None = None
    pointer: str = ""

    def to_dict(self) -> dict:
        return asdict(self)


def check_targets(profile: Profile, statistics: dict | None = None) -> list[TargetResult]:
    """Check a profile's ``expect:`` targets against its statistics; one result per target."""
    if statistics is None:
        statistics = profile_statistics(profile)
    results = []
    for target in profile.expect:
        value_si = statistics.get(target.statistic)
        reason = None
        if value_si is None:
            reason = statistics.get("reasons", {}).get(target.statistic, "undefined")
        results.append(TargetResult(
            quantity=target.quantity,
            statistic=target.statistic,
            unit=target.unit,
            value=target.in_unit(value_si),
            expected=target.in_unit(target.value_si),
            low=target.in_unit(target.low_si) if math.isfinite(target.low_si) else None,
            high=target.in_unit(target.high_si) if math.isfinite(target.high_si) else None,
            met=target.contains(value_si),
            reason=reason,
            pointer=target.pointer,
        ))
    return results


def format_statistics(statistics: dict, targets: list[TargetResult] | None = None) -> str:
    """A readable plain-text (ASCII) table of :func:`profile_statistics` and the targets."""
    s, reasons = statistics, statistics.get("reasons", {})

    def row(label, key, unit, note=""):
        value = s.get(key)
        text = _si_text(value, unit) if value is not None else f"undefined ({reasons.get(key, '')})"
        return f"  {label:<36} {text}" + (f"   {note}" if note and value is not None else "")

    lines = [f"profile {s['name']}: {s['n_taps']} tap(s), total power "
             f"{_tidy(s['total_power_db']):.3f} dB (powers scaled by {_tidy(s['power_scale_db']):+.3f} dB)"]
    lines += ["delay",
              row("mean excess delay", "mean_excess_delay_s", "s"),
              row("rms delay spread", "rms_delay_spread_s", "s"),
              row("max excess delay", "max_excess_delay_s", "s"),
              "coherence bandwidth",
              row("exact, |R(df)| = 0.5", "coherence_bandwidth_50_hz", "Hz"),
              row("exact, |R(df)| = 0.9", "coherence_bandwidth_90_hz", "Hz"),
              row("rule 1/(5 rms delay spread)", "coherence_bandwidth_rule_hz", "Hz", "(rule of thumb)"),
              row("rule 1/(50 rms delay spread)", "coherence_bandwidth_90_rule_hz", "Hz", "(rule of thumb)"),
              "doppler",
              row("max doppler f_D", "max_doppler_hz", "Hz"),
              row("largest frequency in a tap gain", "largest_doppler_hz", "Hz"),
              row("mean doppler shift", "mean_doppler_shift_hz", "Hz"),
              row("rms doppler spread", "rms_doppler_spread_hz", "Hz"),
              row("coherence time, rule 0.423/f_D", "coherence_time_rule_s", "s", "(rule of thumb)"),
              row("coherence time, rule 9/(16 pi f_D)", "coherence_time_strict_rule_s", "s", "(rule of thumb)"),
              "taps"]
    header = (f"  {'#':>3} {'delay':>11} {'power dB':>9} {'power lin':>10} {'fading':<8} "
              f"{'K dB':>6} {'K lin':>8} {'direct':>9} {'scattered':>9} {'f_D':>9} {'direct Dopp.':>12}")
    lines.append(header)
    for i, tap in enumerate(s["taps"]):
        lines.append(
            f"  {i:>3} {_si_text(tap['delay_s'], 's'):>11} {tap['power_db']:>9.3f} "
            f"{tap['power_linear']:>10.4g} {tap['fading']:<8} "
            f"{_optional(tap['k_db'], '.2f'):>6} {_optional(tap['k_linear'], '.4g'):>8} "
            f"{tap['direct_power_linear']:>9.4g} {tap['scattered_power_linear']:>9.4g} "
            f"{_optional(tap['max_doppler_hz'], '.4g'):>9} "
            f"{'trajectory' if tap['los_trajectory'] else _optional(tap['los_doppler_hz'], '.4g'):>12}"
        )
    if targets:
        lines.append("expect")
        for t in targets:
            lines.append(f"  {t.quantity:<36} {_range_text(t):<28} got "
                         f"{_optional(t.value, '.6g')} {_UNIT_TEXT.get(t.unit, t.unit)}"
                         f"{'' if t.reason is None else ' (' + t.reason + ')'}   "
                         f"{'met' if t.met else 'MISSED'}")
    lines += _block_lines(s)
    return "\n".join(lines)


# -- helpers -------------------------------------------------------------------------


def _normalised(delays_s, powers_linear):
    delays = np.asarray(delays_s, dtype=float).ravel()
    powers = np.asarray(powers_linear, dtype=float).ravel()
    if delays.size == 0 or delays.shape != powers.shape:
        raise ValueError("delays_s and powers_linear must be non-empty and of equal length")
    if not (np.all(np.isfinite(delays)) and np.all(np.isfinite(powers)) and np.all(powers >= 0)):
        raise ValueError("delays must be finite and powers finite and >= 0")
    total = powers.sum()
    if not total > 0:
        raise ValueError("the total power must be > 0")
    return delays, powers / total


DELAY_RESOLUTION_S = 1e-15
"""Delays closer than this (1 fs) count as one delay: |R| could not tell them apart below 1e14 Hz."""


def _merge_equal_delays(delays, weights):
    """Add up the power of taps at one delay (to within DELAY_RESOLUTION_S); power-weighted delays."""
    _, inverse = np.unique(np.round(delays / DELAY_RESOLUTION_S), return_inverse=True)
    merged = np.bincount(inverse, weights=weights)
    return np.bincount(inverse, weights=weights * delays) / merged, merged


def _correlation_squared(delays, weights, frequency_hz):
    phase = np.exp(-2j * np.pi * np.outer(frequency_hz, delays))
    r = phase @ weights
    return r.real**2 + r.imag**2


def _doppler_statistics(profile: Profile, reasons: dict) -> dict:
    total = math.fsum(t.power_linear for t in profile.taps)
    fading = [t for t in profile.taps if t.fading != "static"]
    conditions = profile.conditions
    train = conditions.high_speed_train if conditions is not None else None
    drift_hz = conditions.drift_doppler_hz if conditions is not None else 0.0

    def direct_square(tap):
        if tap.los_trajectory == "high_speed_train":
            return train.mean_square_doppler_hz2
        return (tap.los_doppler_hz or 0.0) ** 2

    first = math.fsum(t.direct_power_linear * (t.los_doppler_hz or 0.0) for t in profile.taps) / total
    second = math.fsum(
        t.diffuse_power_linear * (t.doppler_spectrum.second_moment_hz2 if t.fading != "static" else 0.0)
        + t.direct_power_linear * direct_square(t)
        for t in profile.taps
    ) / total + drift_hz**2 / 2.0
    out = {
        "max_doppler_hz": max((t.max_doppler_hz for t in fading), default=None),
        "largest_doppler_hz": profile.largest_doppler_hz,
        "mean_doppler_shift_hz": first,
        "rms_doppler_spread_hz": math.sqrt(max(second - first * first, 0.0)),
    }
    f_d = out["max_doppler_hz"]
    if f_d is None:
        reasons["max_doppler_hz"] = "every tap is static: no diffuse Doppler spectrum"
    for key, constant in (("coherence_time_rule_s", COHERENCE_TIME_RULE),
                          ("coherence_time_strict_rule_s", COHERENCE_TIME_STRICT_RULE)):
        out[key] = constant / f_d if f_d else None
        if f_d is None:
            reasons[key] = "every tap is static, so there is no maximum Doppler: the rule does not apply"
    return out


def _tap_row(tap) -> dict:
    return {
        "index": tap.index,
        "delay_s": tap.delay_s,
        "power_db": tap.power_db,
        "power_linear": tap.power_linear,
        "fading": tap.fading,
        "k_db": tap.k_db,
        "k_linear": tap.k_linear,
        "direct_power_linear": tap.direct_power_linear,
        "scattered_power_linear": tap.diffuse_power_linear,
        "spectrum": tap.spectrum if tap.fading != "static" else None,
        "sigma_hz": tap.sigma_hz,
        "max_doppler_hz": tap.max_doppler_hz,
        "los_doppler_hz": tap.los_doppler_hz,
        "los_phase_deg": tap.los_phase_deg,
        "los_trajectory": tap.los_trajectory,
        "largest_doppler_hz": tap.largest_doppler_hz,
        "rms_doppler_hz": tap.doppler_spectrum.rms_doppler_hz if tap.fading != "static" else None,
    }


_ABSENT = {
    "preset": "the taps do not come from a preset",
    "mimo": "a single link (SISO): no mimo block, or 1x1",
    "conditions": "no time-varying conditions",
    "target": "no target block (compile --target may still give one)",
}


def _block_records(profile: Profile, reasons: dict) -> dict:
    """The optional blocks, JSON-ready (None, with a reason, when absent); the MIMO matrix is left to the manifest."""
    setup = profile.mimo
    mimo = conditions = None
    if setup is not None:
        from emucompile.profile.blocks import correlation_text

        mimo = {
            "n_tx": setup.n_tx, "n_rx": setup.n_rx, "n_links": setup.n_links,
            "correlation": setup.correlation.origin,
            "correlation_text": correlation_text(setup.correlation),
            "adjustment": setup.correlation.adjustment,
            "model": "kronecker" if setup.correlation.tx_matrix is not None else "full matrix",
            "direct_part": setup.direct_part,
        }
    if profile.conditions is not None:
        conditions = {**profile.conditions.as_record(), "summary": profile.conditions.summary_lines()}
    records = {
        "preset": None if profile.preset is None else profile.preset.as_record(),
        "mimo": mimo,
        "conditions": conditions,
        "target": None if profile.target is None else profile.target.to_dict(),
    }
    reasons.update({key: _ABSENT[key] for key, value in records.items() if value is None})
    return records


def _block_lines(s: dict) -> list[str]:
    """The table's lines for the optional blocks present."""
    lines = []
    if s.get("preset"):
        preset = s["preset"]
        spread = f", scaled to an rms delay spread of {preset['delay_spread_ns']:g} ns" \
            if preset.get("delay_spread_ns") else ""
        lines += ["preset", f"  {preset['name']} (data version {preset['data_version']}): "
                  f"{preset.get('source') or 'source not recorded'}{spread}"]
    if s.get("mimo"):
        m = s["mimo"]
        direct = (m["direct_part"] or {}).get("kind", "none stated (no tap has a direct part)")
        lines += ["mimo", f"  {m['n_tx']}x{m['n_rx']} ({m['n_links']} links), correlation {m['correlation_text']}",
                  f"  direct part on the links: {direct}"]
    if s.get("conditions"):
        lines += ["conditions"] + [f"  {line}" for line in s["conditions"]["summary"]]
    if s.get("target"):
        lines += ["target", "  " + ", ".join(f"{k} {v}" for k, v in s["target"].items() if k != "description")]
    return lines


_PREFIXES = [(1e9, "G"), (1e6, "M"), (1e3, "k"), (1.0, ""), (1e-3, "m"), (1e-6, "u"), (1e-9, "n"), (1e-12, "p")]


def _si_text(value: float, unit: str) -> str:
    """4 significant digits with an SI prefix (ASCII 'u' for micro): 43.13 ns, 1.25 MHz."""
    if value == 0:
        return f"0 {unit}"
    magnitude = abs(value)
    for scale, prefix in _PREFIXES:
        if magnitude >= scale * 0.9995:
            return f"{value / scale:.4g} {prefix}{unit}"
    return f"{value:.4g} {unit}"


def _tidy(value: float) -> float:
    """Round-off below 1e-12 shown as 0 (no "-0.000")."""
    return 0.0 if abs(value) < 1e-12 else value


def _optional(value, spec: str) -> str:
    return "-" if value is None else format(value, spec)


_UNIT_TEXT = {"hz": "Hz", "khz": "kHz", "mhz": "MHz", "db": "dB"}


def _range_text(t: TargetResult) -> str:
    unit = _UNIT_TEXT.get(t.unit, t.unit)
    if t.low is not None and t.high is not None:
        return f"[{t.low:.6g}, {t.high:.6g}] {unit}"
    if t.low is not None:
        return f">= {t.low:.6g} {unit}"
    if t.high is not None:
        return f"<= {t.high:.6g} {unit}"
    return f"any value ({unit})"  # a tolerance so wide that both ends overflow


__all__ = [
    "profile_statistics",
    "delay_statistics",
    "frequency_correlation",
    "coherence_bandwidth",
    "check_targets",
    "format_statistics",
    "TargetResult",
    "RULES",
    "COHERENCE_TIME_RULE",
    "COHERENCE_TIME_STRICT_RULE",
]
