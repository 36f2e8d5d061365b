"""Spatial correlation of n_tx x n_rx links per tap (Kronecker model), and its checks.

Link order
----------
A bundle holds, per sample and tap, the channel matrix H of shape
``(n_rx, n_tx)`` (``tap_gains[n, :, :, k]``, docs/bundle-format.md). The *link vector*
of a tap is vec(H), the columns of H stacked (column-major)::

    h[tx * n_rx + rx] = H[rx, tx]        (link index l = tx * n_rx + rx)

so the transmit antenna is the slow index and the receive antenna the fast
one. With this order the Kronecker model is::

    R = E[h h^H] = R_tx (x) R_rx,        R[l, m] = E[h_l conj(h_m)],

the form of the 3GPP annexes, where R_spat = R_eNB (x) R_UE in the downlink
(TS 36.101, base station transmitting) and R_UE (x) R_eNB in the uplink
(TS 36.104/36.141, base station receiving): the transmitting side is always
the left factor. :func:`links_from_gains` and :func:`gains_from_links`
convert between the bundle's axes and link vectors.

Which side is alpha
-------------------
The 3GPP annexes name the base-station coefficient alpha and the UE's beta.
TS 36.101 (UE tests, downlink) lists medium correlation as alpha = 0.3,
beta = 0.9; TS 36.104 and TS 36.141 (base-station tests, uplink) as
alpha = 0.9, beta = 0.3. In transmit/receive terms both are the same: 0.3
on the transmitting side, 0.9 on the receiving side; the labels swap because
the base station transmits in one and receives in the other. They differ in
which matrices get the positive-semidefinite adjustment
(:func:`psd_adjustment`), so every standard level names its specification.

Square root
-----------
Diffuse link streams are correlated with the Hermitian (eigen) square root
S = V diag(sqrt(max(lambda, 0))) V^H, S S^H = R. It is unique for every
positive-semidefinite R, singular ones included (fully correlated antennas,
alpha = 1), where a Cholesky factor does not exist; and being unique it does
not depend on the LAPACK build's choice of eigenvector signs, so the same R
gives the same S everywhere up to rounding. It is computed once per tap.

References
----------
.. [TS36101] 3GPP TS 36.101, Annex B.2.3 (Tables B.2.3.1-1 to -3,
   B.2.3.2-1 to -4): MIMO channel correlation matrices (downlink).
.. [TS36104] 3GPP TS 36.104 V19.2.0 (2025-12), Annex B.5 (Tables B.5.1-1 to
   -3, B.5.2-1 to -4): multi-antenna channel models (uplink); TS 36.141
   Annex B.5 has the same.
.. [Kermoal2002] J. P. Kermoal et al., "A stochastic MIMO radio channel model
   with experimental validation", IEEE J. Sel. Areas Commun. 20(6), 2002
   (the Kronecker model).
.. [Isserlis1918] L. Isserlis, "On a formula for the product-moment
   coefficient of any order of a normal frequency distribution in any number
   of variables", Biometrika 12, 1918 (fourth moments of Gaussian variables,
   used for the estimator's variance).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from emucompile._lazy import LazyModule
from emucompile.errors import InputError

# numpy imported on first use (start-up): only the correlation checks need it.
np = LazyModule("numpy")

CORRELATION_LEVELS = ("low", "medium", "high")
SPECIFICATIONS = ("ts36101", "ts36104", "ts36141")

# (alpha, beta) per level: alpha at the base station, beta at the UE.
# ts36104: TS 36.104 V19.2.0 Table B.5.2-1 (transcribed from a stored copy);
# ts36141: the same values (TS 36.141 Annex B.5, stored copy of the clause text);
# ts36101: TS 36.101 Table B.2.3.2-1 (from memory: the stored copy lost its tables).
_LEVELS = {
    "ts36101": {"low": (0.0, 0.0), "medium": (0.3, 0.9), "high": (0.9, 0.9)},
    "ts36104": {"low": (0.0, 0.0), "medium": (0.9, 0.3), "high": (0.9, 0.9)},
}
_LEVELS["ts36141"] = _LEVELS["ts36104"]
# Which side transmits in the link the specification tests.
_BASE_STATION_SIDE = {"ts36101": "tx", "ts36104": "rx", "ts36141": "rx"}

# The "a" of (R + aI)/(1 + a), keyed by (level, n_tx, n_rx).
# TS 36.104 V19.2.0 B.5.2 (transcribed): high 2x4 a = 0.00010, high 4x4 and
# medium 4x4 a = 0.00012 (cases named UE x eNB, i.e. n_tx x n_rx).
# TS 36.101 V19.6.0 B.2.3.2 (text transcribed from a stored copy): high 4x2
# 0.00010, high 4x4 0.00012, medium 2x4 0.00010, medium 4x4 0.00012 (cases
# named eNB x UE, i.e. n_tx x n_rx).
_ADJUSTMENTS = {
    "ts36104": {("high", 2, 4): 0.00010, ("high", 4, 4): 0.00012, ("medium", 4, 4): 0.00012},
    "ts36101": {
        ("high", 4, 2): 0.00010,
        ("high", 4, 4): 0.00012,
        ("medium", 2, 4): 0.00010,
        ("medium", 4, 4): 0.00012,
    },
}
_ADJUSTMENTS["ts36141"] = _ADJUSTMENTS["ts36104"]

_HERMITIAN_TOLERANCE = 1e-9
_DIAGONAL_TOLERANCE = 1e-6
_PSD_TOLERANCE = 1e-10


@dataclass(frozen=True)
class SpatialCorrelation:
    """The spatial correlation of one tap's n_tx x n_rx links.

    Attributes
    ----------
    n_tx, n_rx : int
    matrix : ndarray, complex, shape (n_tx*n_rx, n_tx*n_rx)
        R[l, m] = E[h_l conj(h_m)] in the link order of this module.
    tx_matrix, rx_matrix : ndarray or None
        The Kronecker factors, when R was built from them.
    adjustment : float
        The ``a`` of (R + aI)/(1 + a) applied (0 for none).
    origin : dict
        How R was made (level and specification, coefficients, or "matrix"),
        for the bundle manifest.
    """

    n_tx: int
    n_rx: int
    matrix: np.ndarray
    tx_matrix: np.ndarray | None = None
    rx_matrix: np.ndarray | None = None
    adjustment: float = 0.0
    origin: dict | None = None

    @property
    def n_links(self) -> int:
        return self.n_tx * self.n_rx

    def square_root(self) -> np.ndarray:
        """The Hermitian square root S of R (S S^H = R); see :func:`hermitian_sqrt`."""
        return hermitian_sqrt(self.matrix)

    def correlate(self, streams) -> np.ndarray:
        """Correlate independent unit-power streams ``(..., n_links)``; see :func:`correlate_links`."""
        return correlate_links(streams, self.square_root())

    def as_record(self) -> dict:
        """JSON-ready description (real and imaginary parts listed apart)."""
        return {
            "n_tx": self.n_tx,
            "n_rx": self.n_rx,
            "link_order": "l = tx * n_rx + rx (vec of H[rx, tx], column-major)",
            "model": "kronecker" if self.tx_matrix is not None else "full matrix",
            "origin": self.origin,
            "adjustment": self.adjustment,
            "matrix_real": np.real(self.matrix).tolist(),
            "matrix_imag": np.imag(self.matrix).tolist(),
        }


# -- building correlation matrices ---------------------------------------------------


def standard_coefficients(level: str, specification: str) -> dict:
    """The standard's alpha and beta for a correlation level, and the tx/rx sides they fall on.

    Parameters
    ----------
    level : {"low", "medium", "high"}
    specification : {"ts36101", "ts36104", "ts36141"}
        ``ts36101``: UE performance tests, downlink (the base station
        transmits). ``ts36104``/``ts36141``: base-station tests, uplink (the
        base station receives).

    Returns
    -------
    dict
        ``alpha`` (base station), ``beta`` (UE), ``tx`` and ``rx`` (the same
        two numbers by side), ``base_station_side`` ("tx" or "rx").

    Examples
    --------
    >>> c = standard_coefficients("medium", "ts36104")
    >>> (c["alpha"], c["beta"]), (c["tx"], c["rx"])
    ((0.9, 0.3), (0.3, 0.9))
    """
    _check_choice("specification", specification, SPECIFICATIONS)
    _check_choice("level", level, CORRELATION_LEVELS)
    alpha, beta = _LEVELS[specification][level]
    side = _BASE_STATION_SIDE[specification]
    tx, rx = (alpha, beta) if side == "tx" else (beta, alpha)
    return {"alpha": alpha, "beta": beta, "tx": tx, "rx": rx, "base_station_side": side}


def psd_adjustment(specification: str, level: str, n_tx: int, n_rx: int) -> float:
    """The ``a`` the specification applies to this case's matrix, 0.0 when it applies none.

    The 3GPP tables round R to four digits; for some cases the rounded matrix
    would have a slightly negative eigenvalue, so they publish
    (R + aI)/(1 + a) instead (TS 36.104 B.5.2, TS 36.101 B.2.3.2).
    """
    _check_choice("specification", specification, SPECIFICATIONS)
    _check_choice("level", level, CORRELATION_LEVELS)
    return _ADJUSTMENTS[specification].get((level, int(n_tx), int(n_rx)), 0.0)


def standard_correlation(
    n_tx: int, n_rx: int, level: str, specification: str, *, adjust: bool = True
) -> SpatialCorrelation:
    """The standard low / medium / high correlation of an n_tx x n_rx link.

    Parameters
    ----------
    n_tx, n_rx : int
        1, 2 or 4 antennas per side reproduce the standard's matrices; other
        counts use the same uniform-linear-array rule (:func:`array_correlation`).
    level, specification : str
        See :func:`standard_coefficients`.
    adjust : bool
        Apply the specification's positive-semidefinite adjustment
        (:func:`psd_adjustment`), as its tables do. The unadjusted R is
        already positive semidefinite in full precision.

    Examples
    --------
    >>> standard_correlation(2, 2, "high", "ts36101").matrix.real[0]
    array([1.  , 0.9 , 0.9 , 0.81])
    """
    coefficients = standard_coefficients(level, specification)
    a = psd_adjustment(specification, level, n_tx, n_rx) if adjust else 0.0
    result = kronecker_correlation(
        array_correlation(n_tx, coefficients["tx"]),
        array_correlation(n_rx, coefficients["rx"]),
        adjustment=a,
    )
    return _with_origin(result, {"level": level, "specification": specification, **coefficients})


def correlation_from_coefficients(
    n_tx: int, n_rx: int, tx_coefficient: complex, rx_coefficient: complex, *, adjustment: float = 0.0
) -> SpatialCorrelation:
    """Kronecker correlation from one coefficient per side (the standard's alpha and beta by side)."""
    result = kronecker_correlation(
        array_correlation(n_tx, tx_coefficient), array_correlation(n_rx, rx_coefficient),
        adjustment=adjustment,
    )
    return _with_origin(result, {"tx": _jsonable(tx_coefficient), "rx": _jsonable(rx_coefficient)})


def correlation_from_alpha_beta(
    n_tx: int, n_rx: int, alpha: complex, beta: complex, *, base_station: str, adjustment: float = 0.0
) -> SpatialCorrelation:
    """Kronecker correlation from the standard's alpha (base station) and beta (UE).

    ``base_station`` says which end the base station is: ``"tx"`` (downlink,
    as in TS 36.101) or ``"rx"`` (uplink, as in TS 36.104/36.141).
    """
    _check_choice("base_station", base_station, ("tx", "rx"))
    tx, rx = (alpha, beta) if base_station == "tx" else (beta, alpha)
    result = correlation_from_coefficients(n_tx, n_rx, tx, rx, adjustment=adjustment)
    return _with_origin(result, {"alpha": _jsonable(alpha), "beta": _jsonable(beta),
                                 "base_station_side": base_station})


def correlation_from_matrices(
    n_tx: int, n_rx: int, *, matrix=None, tx_matrix=None, rx_matrix=None
) -> SpatialCorrelation:
    """Correlation from user matrices: a full R, or the two Kronecker factors.

    Every matrix is checked (:func:`check_correlation_matrix`); the error
    names the matrix and the property that fails, by how much.
    """
    if matrix is not None:
        if tx_matrix is not None or rx_matrix is not None:
            raise InputError("give either a full correlation matrix or tx and rx matrices, not both")
        full = check_correlation_matrix(matrix, name="matrix", size=n_tx * n_rx)
        return SpatialCorrelation(n_tx, n_rx, full, origin={"matrix": "user"})
    if tx_matrix is None or rx_matrix is None:
        raise InputError("give a full correlation matrix, or both tx_matrix and rx_matrix")
    tx = check_correlation_matrix(tx_matrix, name="tx_matrix", size=n_tx)
    rx = check_correlation_matrix(rx_matrix, name="rx_matrix", size=n_rx)
    return _with_origin(kronecker_correlation(tx, rx), {"matrices": "user"})


def array_correlation(n_antennas: int, coefficient: complex) -> np.ndarray:
    """One side's correlation matrix for a uniform linear array (3GPP Annex B form).

    Entry (i, j), i < j, is ``coefficient ** (((j - i)/(n - 1)) ** 2)`` and
    entry (j, i) its conjugate: ``[[1, a], [a*, 1]]`` for two antennas and
    the powers 1/9, 4/9, 1 for four ([TS36101]_ Table B.2.3.1-1,
    [TS36104]_ Table B.5.1-1). Other counts follow the same rule (our
    extension). The 3GPP tables use real coefficients only; for a complex
    one the magnitude follows the rule, ``|c| ** (((j - i)/(n - 1)) ** 2)``,
    and the phase grows linearly with the separation,
    ``angle(c) * (j - i)/(n - 1)`` (a steering phase), which keeps the matrix
    positive semidefinite: it is the elementwise product of a Gaussian-kernel
    matrix and a rank-one u u^H (Schur product theorem). Two antennas give
    ``[[1, c], [c*, 1]]`` either way.
    """
    n = int(n_antennas)
    if n < 1 or n != n_antennas:
        raise InputError(f"the number of antennas must be an integer >= 1, got {n_antennas!r}")
    c = complex(coefficient)
    if not (math.isfinite(c.real) and math.isfinite(c.imag)) or abs(c) > 1.0:
        raise InputError(f"a correlation coefficient must have magnitude <= 1, got {coefficient!r}")
    if n == 1:
        return np.ones((1, 1), dtype=complex)
    i = np.arange(n)
    separation = (i[None, :] - i[:, None]) / (n - 1)  # (j - i)/(n - 1)
    magnitude = abs(c) ** (separation**2) if abs(c) > 0 else (separation == 0).astype(float)
    return magnitude * np.exp(1j * np.angle(c) * separation)


def kronecker_correlation(tx_matrix, rx_matrix, *, adjustment: float = 0.0) -> SpatialCorrelation:
    """R = R_tx (x) R_rx, then (R + aI)/(1 + a) when ``adjustment`` a > 0."""
    tx = np.asarray(tx_matrix, dtype=complex)
    rx = np.asarray(rx_matrix, dtype=complex)
    if not adjustment >= 0.0:
        raise InputError(f"the adjustment a must be >= 0, got {adjustment!r}")
    matrix = adjust_psd(np.kron(tx, rx), adjustment) if adjustment > 0 else np.kron(tx, rx)
    return SpatialCorrelation(tx.shape[0], rx.shape[0], matrix, tx, rx, float(adjustment))


def adjust_psd(matrix, a: float) -> np.ndarray:
    """(R + aI)/(1 + a): keeps the unit diagonal and lifts every eigenvalue by a/(1 + a).

    References: TS 36.104 Annex B.5.2, TS 36.101 Annex B.2.3.2.
    """
    r = np.asarray(matrix, dtype=complex)
    return (r + a * np.eye(r.shape[0])) / (1.0 + a)


# -- checks -----------------------------------------------------------------------------


def correlation_matrix_problems(matrix, *, name: str = "matrix", size: int | None = None) -> list[str]:
    """Every reason ``matrix`` is not a valid correlation matrix, one line each (empty if valid).

    Checked: square, the expected size, finite, unit diagonal (a correlation,
    not a covariance: the tap's power is set by the profile), Hermitian, and
    positive semidefinite. The messages say by how much a property fails and,
    for a negative eigenvalue, which adjustment (R + aI)/(1 + a) would cure it.
    """
    try:
        r = np.asarray(matrix, dtype=complex)
    except (TypeError, ValueError):
        return [f"{name} is not a numeric matrix"]
    if r.ndim != 2 or r.shape[0] != r.shape[1]:
        return [f"{name} must be a square matrix, got shape {r.shape}"]
    problems = []
    if size is not None and r.shape[0] != size:
        problems.append(f"{name} is {r.shape[0]}x{r.shape[0]}, expected {size}x{size} (n_tx * n_rx links)")
    if not np.all(np.isfinite(r)):
        return problems + [f"{name} has entries that are not finite numbers"]
    diagonal = np.diag(r)
    worst = int(np.argmax(np.abs(diagonal - 1.0)))
    if abs(diagonal[worst] - 1.0) > _DIAGONAL_TOLERANCE:
        problems.append(
            f"{name} must have a unit diagonal (a correlation matrix): entry [{worst}][{worst}] is "
            f"{_format_complex(diagonal[worst])}"
        )
    asymmetry = np.abs(r - r.conj().T)
    i, j = np.unravel_index(int(np.argmax(asymmetry)), r.shape)
    if asymmetry[i, j] > _HERMITIAN_TOLERANCE:
        problems.append(
            f"{name} is not Hermitian: entry [{i}][{j}] is {_format_complex(r[i, j])} but entry "
            f"[{j}][{i}] is {_format_complex(r[j, i])} (should be its conjugate; off by {asymmetry[i, j]:.3g})"
        )
        return problems
    smallest = float(np.linalg.eigvalsh((r + r.conj().T) / 2.0)[0])
    if smallest < -_PSD_TOLERANCE:
        problems.append(
            f"{name} is not positive semidefinite: its smallest eigenvalue is {smallest:.3g} "
            f"(hint: (R + aI)/(1 + a) with a >= {-smallest:.3g} makes it so)"
        )
    return problems


def check_correlation_matrix(matrix, *, name: str = "matrix", size: int | None = None) -> np.ndarray:
    """The matrix as a complex array, or :class:`~emucompile.errors.InputError` listing every problem."""
    problems = correlation_matrix_problems(matrix, name=name, size=size)
    if problems:
        raise InputError("; ".join(problems))
    return np.asarray(matrix, dtype=complex)


# -- square root and correlating streams --------------------------------------------------


def hermitian_sqrt(matrix) -> np.ndarray:
    """The Hermitian positive-semidefinite square root S of R: S = S^H, S S = S S^H = R.

    Eigenvalues below zero (rounding of a singular R) are clipped to zero.
    Cost: one Hermitian eigendecomposition, O(n^3) for n links.
    """
    r = np.asarray(matrix, dtype=complex)
    r = (r + r.conj().T) / 2.0
    eigenvalues, vectors = np.linalg.eigh(r)
    root = (vectors * np.sqrt(np.clip(eigenvalues, 0.0, None))) @ vectors.conj().T
    return (root + root.conj().T) / 2.0


def correlate_links(streams, square_root) -> np.ndarray:
    """Correlated link streams from independent unit-power ones.

    Parameters
    ----------
    streams : array_like, complex, shape (..., n_links)
        Independent, zero-mean, unit-power diffuse streams, links on the last
        axis (for one tap: ``(m, n_links)``, m samples).
    square_root : array_like, shape (n_links, n_links)
        S with S S^H = R (:func:`hermitian_sqrt`).

    Returns
    -------
    ndarray, shape (..., n_links)
        ``y = S w`` for every sample w, so E[y y^H] = S S^H = R.
    """
    w = np.asarray(streams)
    s = np.asarray(square_root)
    if w.shape[-1] != s.shape[1]:
        raise InputError(f"streams have {w.shape[-1]} links, the correlation {s.shape[1]}")
    return w @ s.T


# -- the direct part of a Rician tap ------------------------------------------------------


def ula_response(n_antennas: int, spacing_wavelengths: float, angle_deg: float) -> np.ndarray:
    """Steering vector of a uniform linear array: exp(+j 2 pi d n sin(theta)), n = 0..N-1.

    ``angle_deg`` is measured from broadside (0: all elements in phase);
    ``spacing_wavelengths`` is d/lambda. Sign convention: a plane wave from
    angle theta reaches element n with phase +2 pi d n sin(theta) relative
    to element 0 (the convention of TR 38.901 7.5, exp(j 2 pi r.d / lambda)).
    """
    n = np.arange(int(n_antennas))
    return np.exp(2j * np.pi * spacing_wavelengths * n * math.sin(math.radians(angle_deg)))


def direct_link_response(
    n_tx: int,
    n_rx: int,
    *,
    identical: bool = False,
    tx_spacing_wavelengths: float = 0.5,
    rx_spacing_wavelengths: float = 0.5,
    departure_deg: float = 0.0,
    arrival_deg: float = 0.0,
) -> np.ndarray:
    """Per-link factor of a Rician tap's direct part, shape (n_links,), unit modulus.

    H_direct = a_rx(arrival) a_tx(departure)^T, i.e. h_direct =
    a_tx (x) a_rx in link order, so every link carries the tap's full direct
    power. ``identical=True`` gives ones: the same direct part on every link
    (as TS 36.104 B.3 prescribes for the high-speed-train Doppler).
    """
    if identical:
        return np.ones(int(n_tx) * int(n_rx), dtype=complex)
    return np.kron(
        ula_response(n_tx, tx_spacing_wavelengths, departure_deg),
        ula_response(n_rx, rx_spacing_wavelengths, arrival_deg),
    )


# -- link order ---------------------------------------------------------------------------


def link_index(rx: int, tx: int, n_rx: int) -> int:
    """Position of the (rx, tx) link in a link vector: tx * n_rx + rx."""
    return int(tx) * int(n_rx) + int(rx)


def links_from_gains(gains) -> np.ndarray:
    """Bundle axes (n_samples, n_rx, n_tx, n_taps) -> link vectors (n_samples, n_links, n_taps)."""
    g = np.asarray(gains)
    n, n_rx, n_tx, n_taps = g.shape
    return g.transpose(0, 2, 1, 3).reshape(n, n_tx * n_rx, n_taps)


def gains_from_links(links, n_rx: int, n_tx: int) -> np.ndarray:
    """Link vectors (n_samples, n_links, n_taps) -> bundle axes (n_samples, n_rx, n_tx, n_taps)."""
    h = np.asarray(links)
    n, n_links, n_taps = h.shape
    if n_links != n_rx * n_tx:
        raise InputError(f"{n_links} links do not make {n_rx} x {n_tx}")
    return h.reshape(n, n_tx, n_rx, n_taps).transpose(0, 2, 1, 3)


# -- estimation (for verify) ----------------------------------------------------------------


def estimate_correlation(streams, *, power=None) -> np.ndarray:
    """Sample correlation of zero-mean link streams ``(n_samples, n_links)``.

    R_hat[l, m] = mean(h_l conj(h_m)) / sqrt(P_l P_m). With ``power`` (the
    known mean power of each link, a scalar or one per link) the variance of
    R_hat is exactly :func:`estimate_variance`'s; with ``power=None`` the
    sample powers are used, whose estimator varies less, so the same
    tolerance is conservative. A Rician tap's direct part must be removed
    first: the estimator assumes zero-mean streams.
    """
    h = np.asarray(streams)
    n = h.shape[0]
    moment = h.T @ h.conj() / n
    p = np.real(np.diag(moment)) if power is None else np.broadcast_to(np.asarray(power, float), (h.shape[1],))
    scale = np.sqrt(np.outer(p, p))
    return moment / scale


def estimate_variance(correlation, n_samples: int, autocorrelation=None):
    """Variances of the real and imaginary parts of :func:`estimate_correlation` (known power).

    For zero-mean circular Gaussian links with separable space-time
    correlation E[h_l(t) conj(h_m(t + k))] = R[l, m] r(k), Isserlis'
    theorem [Isserlis1918]_ gives, for the mean of N samples,

        Var(Re R_hat) = g (R_ll R_mm + Re(R_lm^2)) / 2,
        Var(Im R_hat) = g (R_ll R_mm - Re(R_lm^2)) / 2,
        g = (1/N) sum_{|k| < N} (1 - |k|/N) |r(k)|^2,

    g = 1/N for independent samples. Not an approximation, except that the
    test statistic's normality is the central limit theorem's.

    Parameters
    ----------
    correlation : array_like, (n_links, n_links)
        The target R (unit diagonal for a correlation matrix).
    n_samples : int
    autocorrelation : array_like, optional
        r(0), r(1), ..., r(N-1) of every link's time process (r(0) = 1),
        e.g. J0(2 pi f_D k / update_rate) for the classical spectrum;
        None for independent samples.

    Returns
    -------
    var_real, var_imag : ndarray, (n_links, n_links)
    """
    r = np.asarray(correlation, dtype=complex)
    n = int(n_samples)
    if autocorrelation is None:
        g = 1.0 / n
    else:
        rho = np.asarray(autocorrelation)[:n]
        k = np.arange(1, rho.size)
        g = (1.0 + 2.0 * np.sum((1.0 - k / n) * np.abs(rho[1:]) ** 2)) / n
    powers = np.real(np.outer(np.diag(r), np.diag(r)))
    pseudo = np.real(r * r)
    return g * (powers + pseudo) / 2.0, g * (powers - pseudo) / 2.0


# -- helpers --------------------------------------------------------------------------------


def _with_origin(result: SpatialCorrelation, origin: dict) -> SpatialCorrelation:
    return SpatialCorrelation(
        result.n_tx, result.n_rx, result.matrix, result.tx_matrix, result.rx_matrix,
        result.adjustment, origin,
    )


def _check_choice(parameter, value, choices):
    if value not in choices:
        raise InputError(f"{parameter} must be one of {', '.join(choices)}, got {value!r}")


def _jsonable(value):
    c = complex(value)
    return c.real if c.imag == 0 else {"real": c.real, "imag": c.imag}


def _format_complex(value) -> str:
    c = complex(value)
    return f"{c.real:.6g}" if c.imag == 0 else f"{c.real:.6g}{c.imag:+.6g}j"


__all__ = [
    "CORRELATION_LEVELS",
    "SPECIFICATIONS",
    "SpatialCorrelation",
    "standard_coefficients",
    "psd_adjustment",
    "standard_correlation",
    "correlation_from_coefficients",
    "correlation_from_alpha_beta",
    "correlation_from_matrices",
    "array_correlation",
    "kronecker_correlation",
    "adjust_psd",
    "correlation_matrix_problems",
    "check_correlation_matrix",
    "hermitian_sqrt",
    "correlate_links",
    "ula_response",
    "direct_link_response",
    "link_index",
    "links_from_gains",
    "gains_from_links",
    "estimate_correlation",
    "estimate_variance",
]
