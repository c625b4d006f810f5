"""Detection statistics for a Gaussian measurement of a non-negative signal.

A measured excess x (for example a fitted dust amplitude) is Gaussian with
known standard deviation σ around a true mean μ that physics keeps at
μ ≥ 0, while x itself may come out negative.  This module gives confidence
intervals and upper limits on μ that respect the boundary, vectorised over
many measurements at once:

* :func:`feldman_cousins_interval` -- the unified (likelihood-ratio ordered)
  intervals of Feldman & Cousins [1], which flip from upper limits to
  two-sided intervals without the analyst choosing after seeing the data.
* :func:`bayesian_flat_prior_upper_limit` -- the posterior upper limit for a
  flat prior on μ ≥ 0 (tabulated beside the unified intervals in [1],
  Table X; [2]).
* :func:`significance_sigma` -- x/σ, the one-sided Gaussian significance.
* :func:`upper_limit` -- picks one of the two methods by name.

All functions take x and σ in the same (any) unit and return limits in that
unit.  NaN measurements give NaN limits; σ must be finite and > 0.

References
----------
[1] Feldman, G. J. & Cousins, R. D. (1998), Unified approach to the classical
    statistical analysis of small signals, Phys. Rev. D 57, 3873; the
    Gaussian-with-boundary construction is in their Sect. IV (section number
    recalled from memory) and Table X.
[2] Particle Data Group (2024), Review of Particle Physics, Phys. Rev. D 110,
    030001, ch. 40 "Statistics" (flat-prior upper limit for a bounded
    Gaussian mean) (recalled from memory).
"""

from __future__ import annotations

import functools

import numpy as np
from scipy.special import erfcx, log_ndtr, ndtr, ndtri, ndtri_exp

__all__ = [
    "feldman_cousins_acceptance",
    "feldman_cousins_interval",
    "bayesian_flat_prior_upper_limit",
    "significance_sigma",
    "upper_limit",
    "UPPER_LIMIT_METHODS",
]

#: Method names accepted by :func:`upper_limit`.
UPPER_LIMIT_METHODS = ("feldman-cousins", "bayesian-flat")

# Belt table: q runs from z_c to z_c + _Q_SPAN.  Beyond that Φ(-q) < 1e-32, so
# d equals z_CL to double precision and np.interp's end-clamping is exact.
_Q_SPAN = 12.0
_N_BELT = 6001

# Below x/σ = _BAYES_FAR the closed form x + σz cancels (z ≈ -x/σ; relative
# error grows from 1e-15 at x/σ = -30 to 1e-7 at -1000), so the limit is
# solved there for δ = μ_up/σ directly (see _bayes_far_tail).
_BAYES_FAR = -5.0
_SQRT2 = np.sqrt(2.0)
_TWO_OVER_SQRTPI = 2.0 / np.sqrt(np.pi)


# ---------------------------------------------------------------- validation
def _check_sigma(sigma) -> np.ndarray:
    s = np.asarray(sigma, dtype=np.float64)
    if not np.all(np.isfinite(s)) or np.any(s <= 0):
        raise ValueError("sigma must be finite and > 0 [same unit as x]")
    return s


def _check_confidence(confidence) -> float:
    try:
        cl = float(confidence)
    except (TypeError, ValueError):
        raise ValueError(f"confidence must be a number in (0, 1), got {confidence!r}") from None
    if not 0.0 < cl < 1.0:
        raise ValueError(f"confidence must lie in (0, 1), got {cl}")
    return cl


def _broadcast(x, sigma):
    x = np.asarray(x, dtype=np.float64)
    s = _check_sigma(sigma)
    try:
        x_b, s_b = np.broadcast_arrays(x, s)
    except ValueError:
        raise ValueError(
            f"x {x.shape} and sigma {s.shape} must broadcast against each other"
        ) from None
    return x_b, s_b


def _as_output(a: np.ndarray):
    # 0-d arrays come back as NumPy scalars, like ufuncs do.
    return a[()] if a.ndim == 0 else a


# ------------------------------------------------------------ Feldman-Cousins
#
# Construction (σ = 1, [1] Sect. IV).  The likelihood ratio with
# μ_best = max(0, x) is
#     ln R(x|μ) = -(x-μ)²/2            for x ≥ 0,
#     ln R(x|μ) =  xμ - μ²/2           for x < 0,
# which rises up to x = μ and falls after it, so the acceptance region
# {ln R ≥ c} is an interval [x1, x2].  Write d = sqrt(-2c), so x2 = μ + d.
# If μ - d ≥ 0 the interval is central: d = z_c = Φ⁻¹((1+CL)/2).  Otherwise
# the left end lies on the x < 0 branch, x1 = μ/2 - d²/(2μ), and coverage
# Φ(d) - Φ(x1 - μ) = CL gives, with q = μ - x1 = (μ² + d²)/(2μ):
#     Φ(-q) = Φ(d) - CL,     μ = q - sqrt(q² - d²).
# Taking q ∈ [z_c, ∞) as the parameter makes every belt quantity explicit:
#     d(q) = -Φ⁻¹(1 - CL - Φ(-q)),  μ(q) = d²/(q + sqrt(q² - d²)),
#     x1 = μ - q,  x2 = μ + d,
# all monotonic in q.  q → ∞ gives μ → 0, d → z_CL = Φ⁻¹(CL), x1 → -∞;
# q = z_c joins the central part (μ = d = z_c, x1 = 0, x2 = 2 z_c).
# We tabulate d against x1, x2 and μ once per CL and interpolate d, which is
# a smooth, slowly varying function of each; the limits then follow from
# exact relations, so interpolation errors in d pass through with gain ≤ 1.


@functools.lru_cache(maxsize=32)
def _fc_belt(confidence: float):
    """Curved part of the Feldman-Cousins belt for σ = 1, cached per CL.

    Returns z_c, z_CL and three (abscissa ascending, d) table pairs keyed by
    x1, x2 and μ.
    """
    tail = 1.0 - confidence  # exact for CL ≥ 0.5 (Sterbenz)
    z_c = -ndtri(0.5 * tail)
    z_cl = -ndtri(tail)
    # q - z_c grows quadratically in s: x1 and x2 have a square-root start at q = z_c.
    s = np.linspace(0.0, 1.0, _N_BELT)
    q = z_c + _Q_SPAN * s**2
    d = -ndtri(tail - ndtr(-q))
    d[0] = z_c  # the join with the central part, free of rounding
    mu = d**2 / (q + np.sqrt(np.maximum(q * q - d * d, 0.0)))
    x1 = mu - q
    x2 = mu + d
    tables = []
    for abscissa in (x1, x2, mu):  # all decrease with q: reverse to ascending
        a = np.ascontiguousarray(abscissa[::-1])
        v = np.ascontiguousarray(d[::-1])
        a.flags.writeable = False
        v.flags.writeable = False
        tables.append((a, v))
    return float(z_c), float(z_cl), tuple(tables)


def _check_fc_confidence(confidence) -> float:
    cl = _check_confidence(confidence)
    if cl <= 0.5:
        # With μ_best = max(0, x) every x < 0 has R = 1 at μ = 0, so no
        # acceptance region below 50 % exists without randomisation.
        raise ValueError(
            f"confidence must lie in (0.5, 1) for Feldman-Cousins intervals, got {cl}"
        )
    return cl


def feldman_cousins_acceptance(mu, sigma, confidence: float = 0.95):
    """Feldman-Cousins acceptance interval of x for a true mean μ ≥ 0.

    The horizontal slice of the confidence belt: the set of measurements x
    ranked first by the likelihood ratio that together hold probability
    ``confidence`` when the true mean is μ.

    Parameters
    ----------
    mu : array_like
        True mean μ ≥ 0 [unit of sigma].
    sigma : array_like
        Gaussian standard deviation of the measurement, finite and > 0
        [any unit]; broadcast against ``mu``.
    confidence : float
        Confidence level in (0.5, 1) [dimensionless].

    Returns
    -------
    x_low, x_high : ndarray or float
        Ends of the acceptance interval [unit of sigma], accurate to 1e-6 σ;
        x_low = -inf at μ = 0.

    References
    ----------
    [1] Feldman & Cousins (1998), Phys. Rev. D 57, 3873, Sect. IV.
    """
    cl = _check_fc_confidence(confidence)
    mu_b, s_b = _broadcast(mu, sigma)
    if np.any(mu_b < 0):
        raise ValueError("mu must be >= 0 (the physical region)")
    z_c, _, tables = _fc_belt(cl)
    m = np.ravel(mu_b / s_b)  # 1-d working copy; scalars included
    lo = m - z_c
    hi = m + z_c
    curved = m < z_c
    mc = m[curved]
    d = np.interp(mc, *tables[2])
    hi[curved] = mc + d
    with np.errstate(divide="ignore"):  # μ = 0 gives x_low = -inf, as it should
        lo[curved] = 0.5 * mc - 0.5 * d**2 / mc
    shape = mu_b.shape
    return _as_output(lo.reshape(shape) * s_b), _as_output(hi.reshape(shape) * s_b)


def feldman_cousins_interval(x, sigma, confidence: float = 0.95):
    """Feldman-Cousins unified confidence interval for a bounded Gaussian mean.

    For a measurement x ~ N(μ, σ²) with μ ≥ 0, returns the interval
    [lower, upper] of [1] (likelihood-ratio ordering with μ_best = max(0, x)).
    It is an upper limit (lower = 0) for x/σ ≤ Φ⁻¹(CL) and two-sided above;
    for x/σ ≥ 2 Φ⁻¹((1+CL)/2) it is the central interval x ± z σ.  For very
    negative x the upper limit shrinks towards z_CL² σ / (2|x|/σ) but stays
    > 0.

    The belt is built once per confidence level (cached) and inverted by
    interpolation, so 10⁵ measurements take milliseconds; the result agrees
    with a direct root-finding construction to better than 1e-6 σ.

    Parameters
    ----------
    x : array_like
        Measured value(s) [any unit]; may be negative; NaN gives NaN.
    sigma : array_like
        Known standard deviation of x, finite and > 0 [unit of x];
        broadcast against ``x``.
    confidence : float
        Confidence level in (0.5, 1) [dimensionless], e.g. 0.9 or 0.95.

    Returns
    -------
    lower, upper : ndarray or float
        Interval ends for μ [unit of x], lower ≥ 0.

    References
    ----------
    [1] Feldman, G. J. & Cousins, R. D. (1998), Phys. Rev. D 57, 3873,
        Sect. IV and Table X.
    """
    cl = _check_fc_confidence(confidence)
    x_b, s_b = _broadcast(x, sigma)
    z_c, z_cl, tables = _fc_belt(cl)
    t = np.ravel(x_b / s_b)  # 1-d working copy; scalars included

    # Upper limit: μ with x1(μ) = t.  Central part for t ≥ 0.
    upper = t + z_c
    neg = t < 0
    tn = t[neg]
    d = np.interp(tn, *tables[0])
    # From x1 = μ/2 - d²/(2μ): μ = t + sqrt(t² + d²), written without cancellation.
    upper[neg] = d**2 / (np.hypot(tn, d) - tn)

    # Lower limit: μ with x2(μ) = t; zero while t ≤ z_CL = x2(0).
    lower = np.where(t > z_cl, t - z_c, 0.0)
    mid = (t > z_cl) & (t < 2.0 * z_c)
    tm = t[mid]
    lower[mid] = tm - np.interp(tm, *tables[1])
    lower[np.isnan(t)] = np.nan
    shape = x_b.shape
    return _as_output(lower.reshape(shape) * s_b), _as_output(upper.reshape(shape) * s_b)


# ------------------------------------------------------------------ Bayesian
def _bayes_far_tail(a: np.ndarray, big_l: float) -> np.ndarray:
    """Flat-prior upper limit δ = μ_up/σ for x/σ = -a, a ≥ 5, without cancellation.

    δ solves Φ(-a-δ)/Φ(-a) = 1 - CL = exp(-L).  With Φ(-y) = ½ erfcx(y/√2)
    exp(-y²/2) the equation becomes
        g(δ) = aδ + δ²/2 - ln[erfcx((a+δ)/√2) / erfcx(a/√2)] - L = 0,
    free of large cancelling terms.  Newton from the leading asymptotic root
    δ = L/a converges to machine precision in ≤ 6 steps for a ≥ 5 and
    1e-12 < 1 - CL ≤ 0.5 (checked against quadrature of the posterior).
    """
    out = big_l / a  # leading term; exact enough where a is astronomically large
    work = a < 1.0e150  # erfcx(a/√2) ~ 1/a stays representable
    aw = a[work]
    d = out[work]
    erfcx_a = erfcx(aw / _SQRT2)
    for _ in range(8):
        y = (aw + d) / _SQRT2
        ey = erfcx(y)
        g = aw * d + 0.5 * d * d - np.log(ey / erfcx_a) - big_l
        # d/dy erfcx(y) = 2y erfcx(y) - 2/√π
        dg = aw + d - (2.0 * y - _TWO_OVER_SQRTPI / ey) / _SQRT2
        d = d - g / dg
    out[work] = d
    return out


def bayesian_flat_prior_upper_limit(x, sigma, confidence: float = 0.95):
    """Bayesian upper limit on a Gaussian mean μ ≥ 0 with a flat prior.

    Solves ∫₀^μ_up p(μ|x) dμ = CL for the posterior of a flat prior on μ ≥ 0:

        μ_up = x + σ Φ⁻¹[1 - (1 - CL) Φ(x/σ)].

    Evaluated as x - σ Φ⁻¹(exp(ln(1-CL) + ln Φ(x/σ))) so that nothing under-
    or overflows; below x/σ = -5, where that difference cancels, μ_up/σ is
    solved for directly in terms of the scaled complementary error function
    (relative accuracy ~1e-15 down to x/σ = -1e150; → σ L/|x/σ| beyond, with
    L = -ln(1-CL)).  The limit is always > 0 and ≥ x + σΦ⁻¹(CL), so its
    frequentist coverage is ≥ CL for every μ (100 % at μ = 0).

    Parameters
    ----------
    x : array_like
        Measured value(s) [any unit]; may be negative; NaN gives NaN.
    sigma : array_like
        Known standard deviation of x, finite and > 0 [unit of x].
    confidence : float
        Posterior probability in (0, 1) [dimensionless].

    Returns
    -------
    ndarray or float
        Upper limit μ_up [unit of x].

    References
    ----------
    [1] Feldman & Cousins (1998), Phys. Rev. D 57, 3873, Table X
        (flat-prior Bayesian limits for comparison).
    [2] Particle Data Group (2024), ch. 40 "Statistics" (recalled from memory).
    """
    cl = _check_confidence(confidence)
    x_b, s_b = _broadcast(x, sigma)
    t = np.ravel(x_b / s_b)  # 1-d working copy; scalars included
    log_tail = np.log1p(-cl)
    out = np.empty_like(t)
    far = t < _BAYES_FAR
    near = ~far
    tn = t[near]
    # Φ⁻¹[1 - p] = -Φ⁻¹[p] with p = (1 - CL) Φ(t) formed in log space.
    out[near] = tn - ndtri_exp(log_tail + log_ndtr(tn))
    out[far] = _bayes_far_tail(-t[far], -log_tail)
    return _as_output(out.reshape(x_b.shape) * s_b)


def significance_sigma(x, sigma):
    """One-sided Gaussian significance of an excess, x/σ [dimensionless].

    The number of standard deviations by which x exceeds zero; under the
    background-only hypothesis (μ = 0) the p-value is Φ(-x/σ).  Negative
    values mean a deficit.

    Parameters
    ----------
    x : array_like
        Measured excess [any unit].
    sigma : array_like
        Its standard deviation, finite and > 0 [unit of x].
    """
    x_b, s_b = _broadcast(x, sigma)
    return _as_output(x_b / s_b)


def upper_limit(x, sigma, confidence: float = 0.95, method: str = "feldman-cousins"):
    """Confidence interval (lower, upper) on μ ≥ 0 by a named method.

    Parameters
    ----------
    x, sigma : array_like
        Measurement and its standard deviation [same unit]; see
        :func:`feldman_cousins_interval`.
    confidence : float
        Confidence level in (0, 1) [dimensionless] ((0.5, 1) for
        Feldman-Cousins).
    method : str
        ``"feldman-cousins"`` (unified interval; lower may exceed 0) or
        ``"bayesian-flat"`` (flat-prior upper limit; lower is 0).

    Returns
    -------
    lower, upper : ndarray or float
        [unit of x].
    """
    if method == "feldman-cousins":
        return feldman_cousins_interval(x, sigma, confidence)
    if method == "bayesian-flat":
        upper = np.asarray(bayesian_flat_prior_upper_limit(x, sigma, confidence))
        lower = np.where(np.isnan(upper), np.nan, 0.0)
        return _as_output(lower), _as_output(upper)
    raise ValueError(f"unknown method {method!r}; known methods: {', '.join(UPPER_LIMIT_METHODS)}")
