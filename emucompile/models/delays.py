"""Statistics of a power delay profile: delay moments, frequency correlation, coherence bandwidth.

Numerics only (arrays of delays and powers in, numbers out); the profile's
statistics (:mod:`emucompile.profile.stats`), the presets' tables, the FIR map
and the probe read them here.

References
----------
.. [Rappaport2002] T. S. Rappaport, Wireless Communications: Principles and
   Practice, 2nd ed., Prentice Hall, 2002, section 5.4: mean excess delay and
   RMS delay spread (eqs. 5.35-5.37, power-weighted moments of the power
   delay profile).
.. [Bello1963] P. A. Bello, "Characterization of randomly time-variant linear
   channels", IEEE Trans. Commun. Syst. 11(4), 1963: for a WSSUS channel the
   frequency correlation is the Fourier transform of the power delay profile,
   R(df) = sum_i P_i exp(-j 2 pi df tau_i) / sum_i P_i.
"""

from __future__ import annotations

import math

import numpy as np



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
    below the level by bisection (:func:`_bisect`) only at the deepest level
    (an interval that ends below the level may dip below it and come back
    first: a ripple of a weak far tap shorter than the grid step). An interval still undecided
    at the deepest level is searched for a minimum of g (a root of g', by
    bisection) that touches the level within :data:`TANGENCY_TOLERANCE`:
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
                return float(_bisect(lambda x: g(x)[0] - level2, a, b,
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
        x = float(_bisect(slope, a, b, xtol=step * 1e-12, rtol=1e-15))
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


def _bisect(f, a, b, *, xtol, rtol):
    """A root of ``f`` in [a, b], where f(a) and f(b) differ in sign (or one is 0), to xtol + rtol |x|.

    Plain bisection (common practice; no scipy.optimize import, which costs a
    validate of a profile with coherence-bandwidth targets most of its start-up):
    the intervals searched here are already short (the branch and bound's deepest
    level), so some 20 to 50 halvings reach the tolerance. The answer lies within
    the stated tolerance of the root, as ``scipy.optimize.brentq``'s with the same
    ``xtol`` and ``rtol`` does.
    """
    fa = f(a)
    if fa == 0.0:
        return a
    if f(b) == 0.0:
        return b
    while True:
        m = 0.5 * (a + b)
        if b - a <= 2.0 * (xtol + rtol * abs(m)) or m in (a, b):
            return m
        fm = f(m)
        if fm == 0.0:
            return m
        if (fm < 0.0) == (fa < 0.0):
            a, fa = m, fm
        else:
            b = m


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
