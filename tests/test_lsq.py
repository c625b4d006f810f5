"""Tests for dustrt.lsq: batched weighted linear least squares.

Sources
-------
[NR07] Press, Teukolsky, Vetterling & Flannery (2007), Numerical Recipes,
       3rd ed., Sect. 15.4: a = (AᵀWA)⁻¹AᵀWy, Cov(a) = (AᵀWA)⁻¹.
[BR03] Bevington & Robinson (2003), Data Reduction and Error Analysis, 3rd
       ed., ch. 7 and 11: for correct Gaussian errors χ² of a linear fit
       follows a χ² law with ν = n - K (mean ν, variance 2ν) and the
       amplitude pulls are standard normal.
[LH74] Lawson & Hanson (1974), Solving Least Squares Problems, ch. 23:
       Kuhn-Tucker conditions of a bound-constrained least-squares minimum.
Independent numerical references: numpy.linalg.lstsq / inv for one spectrum,
scipy.optimize.lsq_linear for the bounded fit.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import lsq_linear

from dustrt.lsq import LsqResult, nonnegative_least_squares, weighted_least_squares

W_NM = np.linspace(300.0, 800.0, 300)


def _templates(wavelength_nm=W_NM):
    """Three smooth, distinct, non-orthogonal templates (K=3, W)."""
    x = wavelength_nm / 500.0
    return np.stack([np.ones_like(x), x**-4, np.exp(-0.5 * ((x - 1.1) / 0.15) ** 2)])


def _direct(y, sigma, a):
    """Reference fit of one spectrum with numpy.linalg ([NR07] Sect. 15.4)."""
    design = (a / sigma).T  # (W, K), rows scaled by 1/σ
    amp = np.linalg.lstsq(design, y / sigma, rcond=None)[0]
    cov = np.linalg.inv(design.T @ design)
    chi2 = np.sum(((y - amp @ a) / sigma) ** 2)
    return amp, cov, chi2


def test_noiseless_recovery_shared_and_per_spectrum_templates():
    rng = np.random.default_rng(11)
    tmpl = _templates()
    amp = rng.normal(0.0, 2.0, size=(4, 5, 3))
    sigma = rng.uniform(0.1, 1.0, size=(4, 5, W_NM.size))
    res = weighted_least_squares(amp @ tmpl, sigma, tmpl)
    assert isinstance(res, LsqResult)
    assert res.amplitudes.shape == (4, 5, 3) and res.covariance.shape == (4, 5, 3, 3)
    assert res.chi2.shape == res.dof.shape == res.n_used.shape == (4, 5)
    np.testing.assert_allclose(res.amplitudes, amp, rtol=1e-9, atol=1e-11)
    assert np.all(res.chi2 < 1e-16)
    assert np.all(res.dof == W_NM.size - 3) and np.all(res.n_used == W_NM.size)
    assert not np.any(res.clamped)
    # Per-spectrum templates: each spectrum on its own wavelength scale.
    per = np.stack([_templates(W_NM * s) for s in (0.9, 1.0, 1.1)])  # (3, K, W)
    data = np.einsum("nk,nkw->nw", amp[0, :3], per)
    res = weighted_least_squares(data, 0.3, per)
    np.testing.assert_allclose(res.amplitudes, amp[0, :3], rtol=1e-9, atol=1e-11)


def test_single_spectrum_matches_direct_linear_algebra():
    # [NR07] Sect. 15.4 via numpy.linalg for one spectrum, inside a batch with
    # per-spectrum templates, NaN bins and masked bins.
    rng = np.random.default_rng(12)
    n, k, w = 6, 3, 80
    tmpl = rng.normal(size=(n, k, w))
    sigma = rng.uniform(0.2, 2.0, size=(n, w))
    data = rng.normal(size=(n, w)) * 3.0
    mask = rng.random((n, w)) > 0.2
    data[rng.random((n, w)) < 0.1] = np.nan
    res = weighted_least_squares(data, sigma, tmpl, mask)
    for i in range(n):
        use = mask[i] & ~np.isnan(data[i])
        amp, cov, chi2 = _direct(data[i, use], sigma[i, use], tmpl[i][:, use])
        np.testing.assert_allclose(res.amplitudes[i], amp, rtol=1e-10, atol=1e-12)
        np.testing.assert_allclose(res.covariance[i], cov, rtol=1e-10, atol=1e-14)
        assert res.chi2[i] == pytest.approx(chi2, rel=1e-10)
        assert res.n_used[i] == use.sum() and res.dof[i] == use.sum() - k
    np.testing.assert_allclose(res.amplitude_sigma, np.sqrt(np.diagonal(res.covariance, 0, 1, 2)))


def test_pulls_and_chi2_over_many_noisy_spectra():
    # 10,000 spectra × 300 bins × 3 templates (the size the module is built for).
    # [BR03]: with correct σ the pulls (a - a_true)/σ_a are N(0, 1) and χ²/ν
    # averages 1 with standard deviation √(2/ν).  4σ sampling bands below.
    rng = np.random.default_rng(13)
    n, w = 10_000, W_NM.size
    tmpl = _templates()
    truth = np.array([1.0, -0.5, 2.0])
    sigma = 0.05 + 0.2 * (W_NM / 800.0) ** 2  # same per-bin σ for all spectra
    data = truth @ tmpl + rng.normal(size=(n, w)) * sigma
    res = weighted_least_squares(data, sigma, tmpl)
    pulls = (res.amplitudes - truth) / res.amplitude_sigma
    assert np.all(np.abs(pulls.mean(axis=0)) < 4 / np.sqrt(n))
    assert np.all(np.abs(pulls.std(axis=0, ddof=1) - 1) < 4 / np.sqrt(2 * (n - 1)))
    nu = w - 3
    assert abs(res.reduced_chi2.mean() - 1) < 4 * np.sqrt(2 / nu / n)
    # The whole covariance, not just the diagonal: sample covariance of the
    # amplitudes vs (AᵀWA)⁻¹; standard error of a sample covariance element is
    # √((Σ_ii Σ_jj + Σ_ij²)/n) for Gaussian data (common practice).
    cov = res.covariance[0]
    sample = np.cov(res.amplitudes, rowvar=False)
    stderr = np.sqrt((np.outer(np.diag(cov), np.diag(cov)) + cov**2) / n)
    assert np.all(np.abs(sample - cov) < 4 * stderr)
    # The same data with σ understated by 2 must show it: χ²/ν ≈ 4.
    res_bad = weighted_least_squares(data, sigma / 2, tmpl)
    assert res_bad.reduced_chi2.mean() == pytest.approx(4.0, rel=0.01)


def test_nan_and_masked_bins_are_ignored():
    rng = np.random.default_rng(14)
    tmpl = _templates()
    sigma = rng.uniform(0.1, 0.5, size=(3, W_NM.size))
    data = np.array([1.0, 0.2, -0.4]) @ tmpl + rng.normal(size=(3, W_NM.size)) * sigma
    mask = np.ones_like(data, dtype=bool)
    drop = np.zeros(W_NM.size, dtype=bool)
    drop[[0, 7, 50, 51, 52, 299]] = True
    bad = data.copy()
    bad[:, drop[:]] = 1e30  # wild values that must not matter...
    mask[:, drop] = False  # ...because they are masked
    bad_sigma = sigma.copy()
    bad_sigma[:, drop] = 0.0  # a zero σ is fine where the bin is not used
    nan_bins = np.zeros(W_NM.size, dtype=bool)
    nan_bins[[100, 101, 200]] = True
    bad[:, nan_bins] = np.nan
    res = weighted_least_squares(bad, bad_sigma, tmpl, mask)
    keep = ~drop & ~nan_bins
    ref = weighted_least_squares(data[:, keep], sigma[:, keep], tmpl[:, keep])
    np.testing.assert_allclose(res.amplitudes, ref.amplitudes, rtol=1e-12)
    np.testing.assert_allclose(res.covariance, ref.covariance, rtol=1e-12)
    np.testing.assert_allclose(res.chi2, ref.chi2, rtol=1e-12)
    assert np.all(res.n_used == keep.sum())


def test_degenerate_designs_give_nan_not_exceptions():
    rng = np.random.default_rng(15)
    tmpl = _templates()
    data = np.array([1.0, 0.2, -0.4]) @ tmpl + rng.normal(size=(5, W_NM.size)) * 0.1
    mask = np.ones_like(data, dtype=bool)
    mask[1] = False  # no bins at all
    mask[2] = False
    mask[2, [10, 20]] = True  # two bins for three templates
    mask[3] = False
    mask[3, [10, 20, 30]] = True  # exactly determined: dof = 0
    res = weighted_least_squares(data, 0.1, tmpl, mask)
    for i in (1, 2):
        assert np.all(np.isnan(res.amplitudes[i])) and np.all(np.isnan(res.covariance[i]))
        assert np.isnan(res.chi2[i])
    assert res.n_used[1] == 0 and res.dof[1] == -3
    assert np.all(np.isfinite(res.amplitudes[[0, 3, 4]]))
    assert res.dof[3] == 0 and res.chi2[3] < 1e-12 and np.isnan(res.reduced_chi2[3])
    # Collinear templates (one is twice another), and a template that is zero
    # on every used bin.
    collinear = np.stack([tmpl[0], tmpl[1], 2.0 * tmpl[1]])
    assert np.all(np.isnan(weighted_least_squares(data, 0.1, collinear).amplitudes))
    zero_on_used = tmpl.copy()
    zero_on_used[2, :150] = 0.0
    m = np.zeros(W_NM.size, dtype=bool)
    m[:150] = True
    assert np.all(np.isnan(weighted_least_squares(data, 0.1, zero_on_used, m).amplitudes))


def test_input_validation():
    tmpl = _templates()
    data = np.ones((2, W_NM.size))
    sigma = np.full_like(data, 0.1)
    sigma[1, 5] = 0.0
    with pytest.raises(ValueError, match="sigma"):
        weighted_least_squares(data, sigma, tmpl)
    sigma[1, 5] = np.inf
    with pytest.raises(ValueError, match="sigma"):
        weighted_least_squares(data, sigma, tmpl)
    with pytest.raises(ValueError, match="sigma"):
        weighted_least_squares(data, -1.0, tmpl)
    with pytest.raises(ValueError, match="wavelength bins"):
        weighted_least_squares(data, 0.1, tmpl[:, :-1])
    with pytest.raises(ValueError, match="boolean"):
        weighted_least_squares(data, 0.1, tmpl, np.ones(W_NM.size))
    with pytest.raises(ValueError, match="broadcast"):
        weighted_least_squares(data, 0.1, np.stack([tmpl] * 3))
    bad_data = data.copy()
    bad_data[0, 3] = np.inf
    with pytest.raises(ValueError, match="finite"):
        weighted_least_squares(bad_data, 0.1, tmpl)
    bad_tmpl = tmpl.copy()
    bad_tmpl[1, 3] = np.nan
    with pytest.raises(ValueError, match="templates"):
        weighted_least_squares(data, 0.1, bad_tmpl)
    mask = np.ones(W_NM.size, dtype=bool)
    mask[3] = False  # a non-finite template value in an unused bin is fine
    assert np.all(np.isfinite(weighted_least_squares(data, 0.1, bad_tmpl, mask).amplitudes))
    for idx in (3, -1, 1.0, True):
        with pytest.raises(ValueError, match="nonneg_index"):
            nonnegative_least_squares(data, 0.1, tmpl, idx)


def test_single_spectrum_shapes():
    tmpl = _templates()
    res = weighted_least_squares(np.array([2.0, 1.0, 0.5]) @ tmpl, 0.2, tmpl)
    assert res.amplitudes.shape == (3,) and res.covariance.shape == (3, 3)
    assert res.chi2.shape == () and res.dof == W_NM.size - 3


def test_nonnegative_clamps_and_refits():
    rng = np.random.default_rng(16)
    tmpl = _templates()
    sigma = 0.2
    # Template 2's true amplitude: clearly negative, clearly positive, and
    # zero (clamped in about half of the noise draws).
    truth = np.array([[1.0, 0.5, -1.0], [1.0, 0.5, 1.0]] + [[1.0, 0.5, 0.0]] * 40)
    data = truth @ tmpl + rng.normal(size=(truth.shape[0], W_NM.size)) * sigma
    free = weighted_least_squares(data, sigma, tmpl)
    res = nonnegative_least_squares(data, sigma, tmpl, nonneg_index=2)
    neg = free.amplitudes[:, 2] < 0
    assert neg[0] and not neg[1] and 5 < neg.sum() < 37
    np.testing.assert_array_equal(res.clamped, neg)
    assert np.all(res.amplitudes[:, 2] >= 0)
    # Unclamped spectra: identical to the unconstrained fit.
    np.testing.assert_array_equal(res.amplitudes[~neg], free.amplitudes[~neg])
    np.testing.assert_array_equal(res.covariance[~neg], free.covariance[~neg])
    assert np.all(res.dof[~neg] == W_NM.size - 3)
    # Clamped spectra: amplitude exactly 0, its covariance row/column 0, the
    # rest equal to a fit without that template, dof counts 2 free amplitudes.
    two = weighted_least_squares(data[neg], sigma, tmpl[:2])
    assert np.all(res.amplitudes[neg, 2] == 0.0)
    assert np.all(res.covariance[neg, 2, :] == 0.0) and np.all(res.covariance[neg, :, 2] == 0.0)
    np.testing.assert_allclose(res.amplitudes[neg, :2], two.amplitudes, rtol=1e-12)
    np.testing.assert_allclose(res.covariance[neg, :2, :2], two.covariance, rtol=1e-12)
    np.testing.assert_allclose(res.chi2[neg], two.chi2, rtol=1e-12)
    assert np.all(res.dof[neg] == W_NM.size - 2)
    # Independent optimum check: scipy.optimize.lsq_linear with a bound, and
    # the Kuhn-Tucker condition [LH74]: ∂χ²/∂a_2 ≥ 0 where a_2 sits at 0.
    for i in np.flatnonzero(neg)[:5]:
        bounded = lsq_linear(
            tmpl.T / sigma,
            data[i] / sigma,
            bounds=([-np.inf, -np.inf, 0.0], np.inf),
            method="bvls",
            tol=1e-14,
        )
        np.testing.assert_allclose(res.amplitudes[i], bounded.x, rtol=1e-8, atol=1e-10)
        grad = -2.0 * np.sum(tmpl[2] * (data[i] - res.amplitudes[i] @ tmpl)) / sigma**2
        assert grad >= 0.0


def test_nonnegative_single_template_and_degenerate():
    rng = np.random.default_rng(17)
    tmpl = _templates()[:1]
    data = -0.3 + rng.normal(size=(2, W_NM.size)) * 0.1
    mask = np.ones_like(data, dtype=bool)
    mask[1] = False
    res = nonnegative_least_squares(data, 0.1, tmpl, 0, mask)
    # K = 1 clamped: nothing left to fit, χ² = Σ (y/σ)², all used bins free.
    assert res.clamped[0] and res.amplitudes[0, 0] == 0.0
    assert res.chi2[0] == pytest.approx(np.sum((data[0] / 0.1) ** 2), rel=1e-12)
    assert res.dof[0] == W_NM.size
    assert not res.clamped[1] and np.isnan(res.amplitudes[1, 0])


def test_nonnegative_several_amplitudes_match_bounded_least_squares():
    # Two constrained templates (1 and 2) with true amplitudes at and around zero: every
    # spectrum's result must equal scipy's bounded-variable least squares (Stark & Parker
    # 1995 BVLS, an independent solver) and satisfy the Kuhn-Tucker conditions [LH74].
    rng = np.random.default_rng(7)
    tmpl = _templates()
    sigma = 0.2
    truth = np.array([[1.0, 0.0, 0.0], [1.0, -0.5, 0.3], [1.0, 0.4, -0.6], [1.0, -0.4, -0.4]] * 10)
    data = truth @ tmpl + rng.normal(size=(truth.shape[0], W_NM.size)) * sigma
    res = nonnegative_least_squares(data, sigma, tmpl, nonneg_index=[1, 2])
    assert np.all(res.amplitudes[:, 1:] >= 0)
    free = weighted_least_squares(data, sigma, tmpl)
    np.testing.assert_array_equal(res.clamped, np.any(free.amplitudes[:, 1:] < 0, axis=-1))
    both_zero = np.all(res.amplitudes[:, 1:] == 0, axis=-1)
    assert both_zero.any() and (res.clamped & ~both_zero).any()  # both kinds of active set occur
    for i in range(truth.shape[0]):
        bounded = lsq_linear(tmpl.T / sigma, data[i] / sigma, bounds=([-np.inf, 0.0, 0.0], np.inf),
                             method="bvls", tol=1e-14)
        np.testing.assert_allclose(res.amplitudes[i], bounded.x, rtol=1e-8, atol=1e-10)
        grad = -2.0 * (tmpl @ (data[i] - res.amplitudes[i] @ tmpl)) / sigma**2
        for k in (1, 2):
            if res.amplitudes[i, k] == 0:
                assert grad[k] >= -1e-9 * np.abs(grad).max()
        free_k = np.count_nonzero(res.amplitudes[i]) if res.clamped[i] else 3
        assert res.dof[i] == W_NM.size - free_k
    with pytest.raises(ValueError, match="nonneg_index"):
        nonnegative_least_squares(data, sigma, tmpl, nonneg_index=[1, 5])
