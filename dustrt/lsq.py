"""Batched weighted linear least squares for many spectra at once.

Each spectrum y (W wavelength bins, standard deviations σ) is modelled as a
linear combination of K templates, y ≈ Σ_k a_k T_k, and the amplitudes a
minimise χ² = Σ_w (y_w - Σ_k a_k T_kw)² / σ_w².  Thousands of spectra that
share a wavelength grid are fitted together: the normal equations are formed
with batched matrix products and solved with a batched symmetric
eigen-decomposition, with no Python loop over spectra.

Bins are left out (weight 0) where ``mask`` is False or the data are NaN.  A
spectrum whose design is degenerate (too few used bins, a template that is
zero on all used bins, or collinear templates) gets NaN amplitudes,
covariance and χ² instead of raising, so one bad spectrum does not stop a
batch.

References
----------
[1] Press, W. H., Teukolsky, S. A., Vetterling, W. T. & Flannery, B. P.
    (2007), *Numerical Recipes*, 3rd ed., Cambridge Univ. Press, Sect. 15.4
    "General linear least squares" (normal equations, covariance
    C = (AᵀWA)⁻¹).
[2] Bevington, P. R. & Robinson, D. K. (2003), *Data Reduction and Error
    Analysis for the Physical Sciences*, 3rd ed., McGraw-Hill, ch. 7
    (χ² and degrees of freedom of a linear fit).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["LsqResult", "weighted_least_squares", "nonnegative_least_squares"]

#: Default reciprocal condition number of the equilibrated normal matrix
#: below which a design counts as degenerate.  The normal equations square
#: the design's condition number, so 1e-10 still leaves ~6 significant digits
#: (common practice for double precision).
DEFAULT_RCOND = 1.0e-10


@dataclass(frozen=True)
class LsqResult:
    """Result of a batched linear fit; leading dimensions (...) = one per spectrum.

    Attributes
    ----------
    amplitudes : ndarray (..., K)
        Best-fit template amplitudes [data unit / template unit]; NaN where
        the design is degenerate.
    covariance : ndarray (..., K, K)
        Amplitude covariance (AᵀWA)⁻¹ [amplitude unit²].
    chi2 : ndarray (...)
        Σ (data - model)² / σ² over the used bins [dimensionless].
    dof : ndarray (...)
        Degrees of freedom: used bins minus fitted (free) amplitudes.
    n_used : ndarray (...)
        Number of bins that entered the fit.
    clamped : ndarray (...) of bool
        True where a non-negativity constraint was active (amplitude fixed
        at 0); all False for an unconstrained fit.
    """

    amplitudes: np.ndarray
    covariance: np.ndarray
    chi2: np.ndarray
    dof: np.ndarray
    n_used: np.ndarray
    clamped: np.ndarray

    @property
    def reduced_chi2(self) -> np.ndarray:
        """χ²/dof [dimensionless]; NaN where dof ≤ 0."""
        chi2 = np.asarray(self.chi2, dtype=np.float64)
        dof = np.asarray(self.dof)
        return np.divide(chi2, dof, out=np.full(chi2.shape, np.nan), where=dof > 0)

    @property
    def amplitude_sigma(self) -> np.ndarray:
        """1σ amplitude uncertainties, √diag(covariance) (..., K) [amplitude unit]."""
        return np.sqrt(np.diagonal(self.covariance, axis1=-2, axis2=-1))


# ------------------------------------------------------------------ helpers
def _prepare(data, sigma, templates, mask):
    """Validate and broadcast inputs.

    Returns the batch shape and flattened working arrays: y (N, W) with 0 in
    unused bins, weight (N, W) = 1/σ² or 0, templates (1 or N, K, W) and
    n_used (N,).
    """
    data = np.asarray(data, dtype=np.float64)
    sigma = np.asarray(sigma, dtype=np.float64)
    templates = np.asarray(templates, dtype=np.float64)
    if data.ndim < 1:
        raise ValueError("data must have at least one (wavelength) axis, shape (..., W)")
    if templates.ndim < 2:
        raise ValueError("templates must have shape (..., K, W) with K >= 1 templates")
    n_bins = data.shape[-1]
    n_templates = templates.shape[-2]
    if templates.shape[-1] != n_bins:
        raise ValueError(
            f"templates last axis ({templates.shape[-1]}) must equal the number of "
            f"wavelength bins in data ({n_bins})"
        )
    if n_templates < 1:
        raise ValueError("templates must hold at least one template (K >= 1)")
    if mask is None:
        mask = np.ones(n_bins, dtype=bool)
    else:
        mask = np.asarray(mask)
        if mask.dtype != np.bool_:
            raise ValueError("mask must be boolean, True = use the bin, shape (..., W)")
    try:
        batch = np.broadcast_shapes(
            data.shape[:-1],
            sigma.shape[:-1] if sigma.ndim else (),
            mask.shape[:-1] if mask.ndim else (),
            templates.shape[:-2],
        )
        shape = batch + (n_bins,)
        data_b = np.broadcast_to(data, shape)
        sigma_b = np.broadcast_to(sigma, shape)
        mask_b = np.broadcast_to(mask, shape)
    except ValueError:
        raise ValueError(
            f"data {data.shape}, sigma {sigma.shape}, templates {templates.shape} "
            f"and mask {mask.shape} do not broadcast to one batch of spectra "
            "(data, sigma, mask: (..., W); templates: (..., K, W))"
        ) from None

    n_spectra = int(np.prod(batch, dtype=np.int64))
    data_b = data_b.reshape(n_spectra, n_bins)
    sigma_b = sigma_b.reshape(n_spectra, n_bins)
    used = mask_b.reshape(n_spectra, n_bins) & ~np.isnan(data_b)
    if np.prod(templates.shape[:-2], dtype=np.int64) == 1:
        tmpl = templates.reshape(1, n_templates, n_bins)  # shared: no per-spectrum copy
    else:
        tmpl = np.broadcast_to(templates, batch + templates.shape[-2:]).reshape(
            n_spectra, n_templates, n_bins
        )

    if not np.all(np.isfinite(data_b[used])):
        raise ValueError("data must be finite or NaN (NaN = missing bin); found inf")
    bad_sigma = used & ~((sigma_b > 0) & np.isfinite(sigma_b))
    if np.any(bad_sigma):
        raise ValueError(
            f"sigma must be finite and > 0 in every used bin; {int(bad_sigma.sum())} "
            "used bin(s) violate this (mask them or set the data to NaN)"
        )
    if not np.all(np.isfinite(tmpl)):
        if np.any(~np.isfinite(tmpl) & used[:, None, :]):
            raise ValueError("templates must be finite in every used bin")
        # Non-finite values sit only in unused bins: zero them so 0-weight bins stay 0.
        tmpl = np.where(used[:, None, :], tmpl, 0.0)
    weight = np.zeros((n_spectra, n_bins))
    weight[used] = 1.0 / sigma_b[used] ** 2
    y = np.where(used, data_b, 0.0)
    return batch, y, weight, tmpl, used.sum(axis=-1)


def _fit(y, weight, templates, n_used, rcond):
    """Solve the weighted normal equations for N spectra; NaN where degenerate.

    y, weight: (N, W); templates: (1 or N, K, W), finite; n_used: (N,).
    Returns amplitudes (N, K), covariance (N, K, K), chi2 (N,).
    """
    n_spectra = y.shape[0]
    n_templates = templates.shape[-2]
    if n_templates == 0:  # a reduced fit may have no templates left
        chi2 = np.sum(weight * y * y, axis=-1)
        return np.empty((n_spectra, 0)), np.empty((n_spectra, 0, 0)), chi2

    weighted = templates * weight[:, None, :]  # WA, (N, K, W)
    normal = np.matmul(weighted, np.swapaxes(templates, -1, -2))  # AᵀWA, (N, K, K)
    rhs = np.matmul(weighted, y[:, :, None])[:, :, 0]  # AᵀWy, (N, K)

    # Equilibrate to unit diagonal so the condition test is scale free.
    diag = np.diagonal(normal, axis1=-2, axis2=-1)
    empty_template = np.any(diag <= 0, axis=-1)
    scale = 1.0 / np.sqrt(np.where(diag > 0, diag, 1.0))
    corr = normal * scale[:, :, None] * scale[:, None, :]
    eigval, eigvec = np.linalg.eigh(corr)
    degenerate = (
        empty_template
        | (n_used < n_templates)
        | ~(eigval[:, 0] > rcond * eigval[:, -1])
    )
    eigval = np.where(degenerate[:, None], 1.0, eigval)
    inv_corr = np.matmul(eigvec / eigval[:, None, :], np.swapaxes(eigvec, -1, -2))
    covariance = inv_corr * scale[:, :, None] * scale[:, None, :]
    covariance = 0.5 * (covariance + np.swapaxes(covariance, -1, -2))  # exact symmetry
    amplitudes = np.matmul(covariance, rhs[:, :, None])[:, :, 0]

    model = np.matmul(amplitudes[:, None, :], templates)[:, 0, :]
    resid = y - model
    chi2 = np.sum(weight * resid * resid, axis=-1)

    amplitudes[degenerate] = np.nan
    covariance[degenerate] = np.nan
    chi2[degenerate] = np.nan
    return amplitudes, covariance, chi2


def _result(batch, amplitudes, covariance, chi2, dof, n_used, clamped) -> LsqResult:
    k = amplitudes.shape[-1]
    return LsqResult(
        amplitudes=amplitudes.reshape(batch + (k,)),
        covariance=covariance.reshape(batch + (k, k)),
        chi2=chi2.reshape(batch),
        dof=dof.reshape(batch),
        n_used=n_used.reshape(batch),
        clamped=clamped.reshape(batch),
    )


def _check_rcond(rcond) -> float:
    rcond = float(rcond)
    if not 0.0 < rcond < 1.0:
        raise ValueError(f"rcond must lie in (0, 1), got {rcond}")
    return rcond


# --------------------------------------------------------------- public API
def weighted_least_squares(data, sigma, templates, mask=None, *, rcond=DEFAULT_RCOND) -> LsqResult:
    """Fit many spectra by weighted linear least squares on a few templates.

    Parameters
    ----------
    data : array_like (..., W)
        Spectra [any unit]; NaN marks a missing bin (left out of the fit).
    sigma : array_like, broadcastable to (..., W)
        1σ uncertainty of each bin [data unit]; must be finite and > 0 in
        every used bin (ValueError otherwise); ignored in unused bins.
    templates : array_like (..., K, W)
        Model templates [template unit]; the same (K, W) set for every
        spectrum, or one set per spectrum, broadcast against ``data``.
        Must be finite in used bins.
    mask : array_like of bool (..., W), optional
        True = use the bin.  Default: all bins.
    rcond : float, keyword-only
        Designs whose equilibrated normal matrix has reciprocal condition
        number ≤ ``rcond`` count as degenerate (NaN result).

    Returns
    -------
    LsqResult
        amplitudes (..., K), covariance (AᵀWA)⁻¹ (..., K, K), chi2 (...),
        dof = n_used - K (...), n_used (...), clamped (all False).

    References
    ----------
    [1] Press et al. (2007), *Numerical Recipes*, 3rd ed., Sect. 15.4.
    """
    rcond = _check_rcond(rcond)
    batch, y, weight, tmpl, n_used = _prepare(data, sigma, templates, mask)
    amplitudes, covariance, chi2 = _fit(y, weight, tmpl, n_used, rcond)
    dof = n_used - tmpl.shape[-2]
    return _result(batch, amplitudes, covariance, chi2, dof, n_used, np.zeros(dof.shape, bool))


def nonnegative_least_squares(
    data, sigma, templates, nonneg_index, mask=None, *, rcond=DEFAULT_RCOND
) -> LsqResult:
    """Weighted least squares with some amplitudes constrained to be ≥ 0.

    The constrained minimum of χ² (a convex quadratic) sets some constrained
    amplitudes to exactly 0 and fits the rest freely; so it is the smallest-χ²
    feasible fit among the fits that drop each subset of the constrained
    templates (Lawson & Hanson 1974, *Solving Least Squares Problems*, ch. 23).
    Spectra whose unconstrained fit is feasible keep it; the others are refitted
    for every subset (2^C fits for C constrained amplitudes: meant for a few).
    Dropped amplitudes are 0 with zero covariance rows and columns.

    Parameters
    ----------
    data, sigma, templates, mask, rcond
        As for :func:`weighted_least_squares`.
    nonneg_index : int or sequence of int
        Indices 0 ≤ k < K of the templates whose amplitudes must be ≥ 0 (e.g.
        dust templates: a negative grain density is unphysical); at most 8.

    Returns
    -------
    LsqResult
        As for :func:`weighted_least_squares`; ``clamped`` marks refitted
        spectra, whose dof = n_used - (number of free amplitudes).
    """
    import itertools

    rcond = _check_rcond(rcond)
    batch, y, weight, tmpl, n_used = _prepare(data, sigma, templates, mask)
    n_templates = tmpl.shape[-2]
    indices = [nonneg_index] if np.ndim(nonneg_index) == 0 else list(nonneg_index)
    for k in indices:
        if isinstance(k, bool) or not isinstance(k, (int, np.integer)) or not 0 <= int(k) < n_templates:
            raise ValueError(f"nonneg_index must be integers in [0, {n_templates}), got {nonneg_index!r}")
    indices = sorted({int(k) for k in indices})
    if not 1 <= len(indices) <= 8:
        raise ValueError(f"nonneg_index must name 1 to 8 templates, got {len(indices)}")

    amplitudes, covariance, chi2 = _fit(y, weight, tmpl, n_used, rcond)
    clamped = np.any(amplitudes[:, indices] < 0, axis=-1)  # NaN (degenerate) stays unclamped and NaN
    dof = n_used - n_templates
    if np.any(clamped):
        rows = np.flatnonzero(clamped)
        best_chi2 = np.full(rows.size, np.inf)
        best_amp = np.full((rows.size, n_templates), np.nan)
        best_cov = np.full((rows.size, n_templates, n_templates), np.nan)
        best_dof = dof[rows].copy()
        for size in range(1, len(indices) + 1):
            for dropped in itertools.combinations(indices, size):
                keep = np.array([j for j in range(n_templates) if j not in dropped], dtype=np.intp)
                sub_tmpl = tmpl[:, keep, :] if tmpl.shape[0] == 1 else tmpl[rows][:, keep, :]
                sub_amp, sub_cov, sub_chi2 = _fit(y[rows], weight[rows], sub_tmpl, n_used[rows], rcond)
                still = [j for j, k in enumerate(keep) if k in indices]
                feasible = np.all(sub_amp[:, still] >= 0, axis=-1) & np.isfinite(sub_chi2)
                better = feasible & (sub_chi2 < best_chi2)
                if not np.any(better):
                    continue
                best_chi2[better] = sub_chi2[better]
                best_amp[better] = 0.0
                best_amp[np.ix_(better, keep)] = sub_amp[better]
                best_cov[better] = 0.0
                best_cov[np.ix_(np.flatnonzero(better), keep, keep)] = sub_cov[better]
                best_dof[better] = n_used[rows][better] - keep.size
        amplitudes[rows] = best_amp
        covariance[rows] = best_cov
        chi2[rows] = np.where(np.isfinite(best_chi2), best_chi2, np.nan)
        dof = dof.copy()
        dof[rows] = best_dof
    return _result(batch, amplitudes, covariance, chi2, dof, n_used, clamped)
