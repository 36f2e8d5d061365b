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

from emucompile.models import spectra
from emucompile.models.delays import (  # noqa: F401  (re-exported: the statistics of a power delay profile)
    DELAY_RESOLUTION_S,
    TANGENCY_TOLERANCE,
    coherence_bandwidth,
    delay_statistics,
    frequency_correlation,
)
from emucompile.profile.blocks import correlation_text
from emucompile.profile.model import Profile

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


def profile_statistics(profile: Profile, *, skip_exact_bandwidth: bool = False) -> dict:
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
        None when absent. With ``skip_exact_bandwidth`` the two exact coherence
        bandwidths (a numerical search) are left out: the ``expect:`` check of a
        profile that names neither needs no root finding.

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
        if skip_exact_bandwidth:
            continue
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
        exact = {"coherence_bandwidth_50_hz", "coherence_bandwidth_90_hz"}
        statistics = profile_statistics(profile, skip_exact_bandwidth=not exact & {t.statistic for t in profile.expect})
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
        **spectra.record(tap.spectrum if tap.fading != "static" else None, spectra.parameters_of(tap)),
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
