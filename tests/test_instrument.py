"""Tests of the spectrometer model (dustrt.instrument).

Sources are named beside each check.  Independent references used here:
hand arithmetic with CODATA constants, closed-form integrals, literal
numerical integration with scipy.integrate.quad, and textbook statistics.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest
from scipy import constants
from scipy.integrate import quad
from scipy.special import gamma, ndtr
from scipy.stats import chi2

from dustrt.instrument import (
    CountsResult,
    Instrument,
    electrons_to_radiance,
    expected_counts,
    field_of_view_from_solid_angle,
    field_of_view_offsets,
    line_spread_matrix,
    radiance_per_electron,
    read_throughput_csv,
    rotate_offsets_to,
    simulate_noisy,
    solid_angle_from_field_of_view,
)

FWHM_PER_SIGMA = 2.0 * math.sqrt(2.0 * math.log(2.0))


def make_instrument(**overrides) -> Instrument:
    """Round-number instrument for tests (invented values)."""
    fields = dict(
        aperture_area_cm2=10.0,
        solid_angle_sr=1.0e-4,
        integration_time_s=1.0,
        bin_width_nm=1.0,
        resolution_fwhm_nm=2.0,
        wavelength_min_nm=300.0,
        wavelength_max_nm=800.0,
    )
    fields.update(overrides)
    return Instrument(**fields)


# ------------------------------------------------------------- instrument


def test_bin_centres_start_half_a_bin_in_and_drop_partial_bin():
    inst = make_instrument(wavelength_min_nm=300.0, wavelength_max_nm=310.0, bin_width_nm=2.0)
    np.testing.assert_allclose(inst.bin_centres_nm, [301.0, 303.0, 305.0, 307.0, 309.0], rtol=0, atol=1e-12)
    inst = dataclasses.replace(inst, wavelength_max_nm=311.9)
    assert inst.n_bins == 5


def test_solid_angle_of_cone():
    # Ω = 2π(1 − cos(θ/2)): a hemisphere (θ = 180°) is 2π sr; small cones
    # approach π(θ/2)² (common practice, geometry of a spherical cap).
    assert solid_angle_from_field_of_view(180.0) == pytest.approx(2.0 * math.pi, rel=1e-15)
    theta = math.radians(0.1)
    assert solid_angle_from_field_of_view(0.1) == pytest.approx(math.pi * (theta / 2) ** 2, rel=1e-6)
    assert solid_angle_from_field_of_view(60.0) == pytest.approx(2 * math.pi * (1 - math.cos(math.radians(30))), rel=1e-14)
    for fov in (1e-3, 0.5, 20.0, 179.0):
        assert field_of_view_from_solid_angle(solid_angle_from_field_of_view(fov)) == pytest.approx(fov, rel=1e-12)
    inst = make_instrument(solid_angle_sr=None, field_of_view_deg=2.0)
    assert inst.solid_angle_sr == pytest.approx(2 * math.pi * (1 - math.cos(math.radians(1.0))), rel=1e-12)
    same = make_instrument(solid_angle_sr=inst.solid_angle_sr, field_of_view_deg=2.0)
    assert same == inst and hash(same) == hash(inst)


BAD_FIELDS = [
    ("aperture_area_cm2", 0.0),
    ("aperture_area_cm2", float("nan")),
    ("solid_angle_sr", 7.0),
    ("solid_angle_sr", -1e-6),
    ("integration_time_s", -1.0),
    ("bin_width_nm", 0.0),
    ("resolution_fwhm_nm", -0.1),
    ("wavelength_min_nm", 0.0),
    ("wavelength_max_nm", 300.5),
    ("frames", 0),
    ("frames", 2.5),
    ("frames", True),
    ("throughput", 0.0),
    ("throughput", 1.2),
    ("throughput", "high"),
    ("read_noise_e", -1.0),
    ("dark_current_e_s", float("inf")),
    ("stray_light_fraction", 1.5),
    ("stray_light_reference_radiance", -1.0),
]


@pytest.mark.parametrize("name, value", BAD_FIELDS)
def test_bad_instrument_fields_rejected(name, value):
    with pytest.raises(ValueError, match=name.split("_nm")[0]):
        make_instrument(**{name: value})


def test_field_of_view_choices_rejected():
    with pytest.raises(ValueError, match="solid_angle_sr"):
        make_instrument(solid_angle_sr=None)
    with pytest.raises(ValueError, match="field_of_view_deg"):
        make_instrument(solid_angle_sr=None, field_of_view_deg=181.0)
    with pytest.raises(ValueError, match="disagrees"):
        make_instrument(solid_angle_sr=1e-4, field_of_view_deg=5.0)


def test_throughput_table_and_callable():
    table = ([250.0, 500.0, 900.0], [0.1, 0.5, 0.3])
    inst = make_instrument(throughput=table)
    np.testing.assert_allclose(inst.throughput_at([250.0, 375.0, 700.0]), [0.1, 0.3, 0.4], rtol=1e-14)
    np.testing.assert_array_equal(inst.throughput_wavelength_nm, table[0])
    assert make_instrument().throughput_value.tolist() == [1.0]
    assert make_instrument().throughput_wavelength_nm.size == 0
    linear = make_instrument(throughput=lambda wl: 0.5 + 0.0 * wl)
    np.testing.assert_allclose(linear.throughput_at(linear.bin_centres_nm), 0.5)
    with pytest.raises(ValueError, match="outside"):
        make_instrument(throughput=([400.0, 900.0], [0.2, 0.2]))  # bins from 300.5 nm
    with pytest.raises(ValueError, match=r"\[0, 1\]"):
        make_instrument(throughput=([250.0, 900.0], [0.2, 1.2]))
    with pytest.raises(ValueError, match="within the throughput table"):
        inst.throughput_at([1000.0])


def test_read_throughput_csv(tmp_path):
    good = tmp_path / "throughput.csv"
    good.write_text("# demo throughput (invented)\nwavelength_nm,throughput,note\n# mid comment\n250,0.1,a\n\n900,0.3,b\n")
    wl, t = read_throughput_csv(good)
    np.testing.assert_array_equal(wl, [250.0, 900.0])
    np.testing.assert_array_equal(t, [0.1, 0.3])
    assert make_instrument(throughput=read_throughput_csv(good)).throughput_at(575.0) == pytest.approx(0.2)

    cases = {
        "missing.csv": ("wavelength_nm,value\n300,0.1\n400,0.2\n", "throughput"),
        "range.csv": ("wavelength_nm,throughput\n300,0.1\n400,1.5\n", "'throughput'"),
        "order.csv": ("wavelength_nm,throughput\n400,0.1\n300,0.2\n", "'wavelength_nm'"),
        "text.csv": ("wavelength_nm,throughput\n300,0.1\nabc,0.2\n", "'wavelength_nm'"),
        "short.csv": ("wavelength_nm,throughput\n300,0.1\n", "2 data rows"),
    }
    for name, (text, column) in cases.items():
        path = tmp_path / name
        path.write_text(text)
        with pytest.raises(ValueError, match=name) as info:
            read_throughput_csv(path)
        assert column in str(info.value)


# ----------------------------------------------------------------- counts


def test_photon_count_worked_example():
    # Hand worked example (round numbers): L = 1e-3 W m⁻² sr⁻¹ nm⁻¹ at
    # λ = 500 nm, A = 10 cm² = 1e-3 m², Ω = 1e-4 sr, Δλ = 1 nm, t = 2 × 0.5 s,
    # T = 0.5.  Collected power × time = 5e-11 J; photon energy hc/λ with h, c
    # exact in the 2019 SI (CODATA 2018, scipy.constants) = 3.972892e-19 J;
    # S = 5e-11 / 3.972892e-19 = 1.258529e8 e⁻ (count equation, Howell 2006,
    # Handbook of CCD Astronomy, §4.4, recalled from memory).
    photon_energy = constants.h * constants.c / 500e-9
    assert photon_energy == pytest.approx(3.972892e-19, rel=1e-6)
    by_hand = 1e-3 * 1e-3 * 1e-4 * 1.0 * 1.0 * 0.5 / photon_energy
    assert by_hand == pytest.approx(1.258529e8, rel=1e-6)
    inst = make_instrument(frames=2, integration_time_s=0.5, throughput=0.5)
    result = expected_counts(np.array([1e-3]), [500.0], inst)
    assert isinstance(result, CountsResult)
    assert result.signal_e[0] == pytest.approx(by_hand, rel=1e-12)
    # Photon-noise only: noise = √S, radiance noise = √S · L/S.
    assert result.noise_e[0] == pytest.approx(math.sqrt(by_hand), rel=1e-12)
    assert result.radiance_uncertainty[0] == pytest.approx(1e-3 / math.sqrt(by_hand), rel=1e-12)
    assert radiance_per_electron([500.0], inst)[0] == pytest.approx(1e-3 / by_hand, rel=1e-12)
    assert electrons_to_radiance([by_hand], [500.0], inst)[0] == pytest.approx(1e-3, rel=1e-12)


def test_background_dark_and_read_noise_terms():
    inst = make_instrument(
        frames=4,
        integration_time_s=2.0,
        read_noise_e=3.0,
        dark_current_e_s=5.0,
        stray_light_fraction=0.01,
        stray_light_reference_radiance=0.2,
    )
    centres = inst.bin_centres_nm[:3]
    radiance = np.array([[1e-3, 2e-3, 0.0], [0.0, 1e-4, 5e-4]])
    result = expected_counts(radiance, centres, inst, background_radiance=1e-4)
    plain = expected_counts(radiance, centres, make_instrument(frames=4, integration_time_s=2.0))
    np.testing.assert_allclose(result.signal_e, plain.signal_e, rtol=1e-14)
    # Stray light = fraction × reference = 2e-3 plus the extra 1e-4 background.
    k = plain.signal_e[0, 0] / 1e-3
    np.testing.assert_allclose(result.background_e[0, 0], 2.1e-3 * k, rtol=1e-12)
    assert result.background_e.shape == radiance.shape
    np.testing.assert_allclose(result.dark_e, 5.0 * 8.0)
    np.testing.assert_allclose(result.read_noise_e, 2.0 * 3.0)
    np.testing.assert_allclose(
        result.noise_e**2, result.signal_e + result.background_e + result.dark_e + 4 * 3.0**2, rtol=1e-13
    )
    assert result.snr[0, 2] == 0.0
    np.testing.assert_allclose(result.snr, result.signal_e / result.noise_e, rtol=1e-14)


def test_snr_scales_as_root_time_in_photon_limit():
    # Poisson statistics: SNR = √S ∝ √t when read noise and dark are 0
    # (common practice).
    radiance = np.full(5, 3e-4)
    short = expected_counts(radiance, np.linspace(400, 600, 5), make_instrument(integration_time_s=1.0))
    long = expected_counts(radiance, np.linspace(400, 600, 5), make_instrument(integration_time_s=4.0))
    np.testing.assert_allclose(long.snr / short.snr, 2.0, rtol=1e-13)


def test_snr_scales_as_time_when_read_noise_dominates():
    # SNR = S/√(S + R²) → S/R ∝ t when S ≪ R² (common practice).  Here
    # S ≈ 2.5 e⁻ and R² = 1e4 e⁻², so the ratio for 2× the time is
    # 2·√((S + R²)/(2S + R²)) = 2(1 − S/(2R²) + …): within 2·S/R² of 2.
    inst = make_instrument(integration_time_s=1e-3, read_noise_e=100.0)
    radiance = np.array([1e-8])
    one = expected_counts(radiance, [500.0], inst)
    two = expected_counts(radiance, [500.0], dataclasses.replace(inst, integration_time_s=2e-3))
    signal = one.signal_e[0]
    assert 0.5 < signal < 5.0  # the regime this test is about
    ratio = two.snr[0] / one.snr[0]
    assert abs(ratio - 2.0) < 2.0 * signal / 100.0**2
    # Contrast: the photon-limited ratio √2 is far away.
    assert abs(ratio - math.sqrt(2.0)) > 0.5


def test_frames_same_signal_more_read_noise():
    radiance = np.array([2e-4, 5e-4])
    centres = [450.0, 550.0]
    many = make_instrument(frames=9, integration_time_s=0.5, read_noise_e=4.0, dark_current_e_s=2.0)
    one = make_instrument(frames=1, integration_time_s=4.5, read_noise_e=4.0, dark_current_e_s=2.0)
    a, b = expected_counts(radiance, centres, many), expected_counts(radiance, centres, one)
    np.testing.assert_allclose(a.signal_e, b.signal_e, rtol=1e-13)
    np.testing.assert_allclose(a.dark_e, b.dark_e, rtol=1e-13)
    np.testing.assert_allclose(a.read_noise_e, 3.0 * b.read_noise_e, rtol=1e-13)
    assert np.all(a.noise_e > b.noise_e) and np.all(a.snr < b.snr)


def test_zero_throughput_bin_gives_infinite_radiance_noise():
    inst = make_instrument(throughput=([300.0, 500.0, 800.0], [0.5, 0.0, 0.5]), read_noise_e=1.0)
    result = expected_counts(np.array([1e-3, 1e-3]), [400.0, 500.0], inst)
    assert result.signal_e[1] == 0.0 and np.isinf(result.radiance_uncertainty[1])
    assert np.isfinite(result.radiance_uncertainty[0])


def test_nan_radiance_propagates_and_bad_inputs_rejected():
    inst = make_instrument()
    result = expected_counts(np.array([np.nan, 1e-3]), [400.0, 500.0], inst)
    assert np.isnan(result.signal_e[0]) and np.isfinite(result.signal_e[1])
    with pytest.raises(ValueError, match="radiance_w_m2_sr_nm"):
        expected_counts(np.array([-1e-3]), [400.0], inst)
    with pytest.raises(ValueError, match="last axis"):
        expected_counts(np.ones(3), [400.0, 500.0], inst)
    with pytest.raises(ValueError, match="bin_centres_nm"):
        expected_counts(np.ones(1), [-400.0], inst)
    with pytest.raises(ValueError, match="background_radiance"):
        expected_counts(np.ones(2), [400.0, 500.0], inst, background_radiance=np.ones(3))
    with pytest.raises(ValueError, match="instrument"):
        expected_counts(np.ones(1), [400.0], "not an instrument")


# -------------------------------------------------------------- realisations


def test_noise_realisations_match_expected_mean_and_spread():
    # 20,000 calibrated realisations per bin.  Sample variance: (n−1)s²/σ² ~
    # χ²(n−1) for Gaussian data (textbook statistics); accept s²/σ² inside the
    # central 99.9 % χ² interval.  The Poisson part adds excess kurtosis
    # κ = λ/σ⁴ ≤ 0.007 here, i.e. Var(s²) grows by ≤ 0.4 % — negligible.
    # Mean: |x̄ − S| < 3.29 σ/√n (two-sided 99.9 %, normal).
    n = 20_000
    signal = np.array([0.0, 20.0, 400.0, 5000.0])
    background = np.array([50.0, 50.0, 80.0, 10.0])
    dark = np.full(4, 30.0)
    read = np.full(4, 5.0)
    sigma = np.sqrt(signal + background + dark + read**2)
    draws = simulate_noisy(signal, background, dark, read, np.random.default_rng(20240611), n_realisations=n)
    assert draws.shape == (n, 4)
    lo, hi = chi2.ppf([0.0005, 0.9995], n - 1) / (n - 1)
    ratio = draws.var(axis=0, ddof=1) / sigma**2
    assert np.all((lo < ratio) & (ratio < hi)), ratio
    assert np.all(np.abs(draws.mean(axis=0) - signal) < 3.29 * sigma / math.sqrt(n))
    # The χ² window is tight enough to catch a missing noise term (read noise
    # alone is 25/505 ≈ 5 % of the variance of bin 3).
    assert (1 - 25 / sigma[2] ** 2) < lo


def test_realisations_reproducible_and_broadcast():
    inst = make_instrument(read_noise_e=2.0, dark_current_e_s=1.0)
    result = expected_counts(np.full((3, 4), 1e-6), inst.bin_centres_nm[:4], inst)
    a = result.simulate(np.random.default_rng(7))
    b = result.simulate(np.random.default_rng(7))
    np.testing.assert_array_equal(a, b)
    assert a.shape == (3, 4)
    radiance = electrons_to_radiance(a, inst.bin_centres_nm[:4], inst)
    assert radiance.shape == (3, 4)
    with pytest.raises(ValueError, match="rng"):
        simulate_noisy(1.0, 0.0, 0.0, 0.0, 42)
    with pytest.raises(ValueError, match="expected_signal_e"):
        simulate_noisy(-1.0, 0.0, 0.0, 0.0, np.random.default_rng(0))


# -------------------------------------------------------------- line spread


def literal_bin_value(x, f, centre, width, fwhm):
    """Slow reference: quad of interp(model) × box⊗Gaussian response."""
    sigma = fwhm / FWHM_PER_SIGMA

    def response(lam):
        if sigma == 0.0:
            return float(abs(lam - centre) <= width / 2) / width
        return (ndtr((lam - centre + width / 2) / sigma) - ndtr((lam - centre - width / 2) / sigma)) / width

    breaks = np.r_[x[1:-1], centre - width / 2, centre + width / 2]
    breaks = breaks[(breaks > x[0]) & (breaks < x[-1])]
    kw = dict(points=np.sort(breaks), limit=1000, epsabs=1e-15, epsrel=1e-13)
    num = quad(lambda lam: np.interp(lam, x, f) * response(lam), x[0], x[-1], **kw)[0]
    den = quad(response, x[0], x[-1], **kw)[0]
    return num / den


@pytest.mark.parametrize("fwhm", [0.0, 0.3, 2.5])
def test_line_spread_matches_literal_integration_on_coarse_nonuniform_grid(fwhm):
    # Exact integration of the piecewise-linear model (closed-form integrals of
    # Φ and uΦ) against direct quadrature; the model grid (steps 0.2–3 nm) is
    # coarser than the LSF for fwhm = 0.3, where trapezoid weights would fail.
    rng = np.random.default_rng(3)
    x = np.cumsum(np.r_[380.0, rng.uniform(0.2, 3.0, 60)])
    f = 1.0 + np.sin(x / 4.0) + 0.1 * rng.standard_normal(x.size)
    centres = np.array([400.3, 410.0, 421.7, 430.05])
    matrix = line_spread_matrix(x, centres, 0.7, fwhm)
    values = matrix @ f
    for i, c in enumerate(centres):
        assert values[i] == pytest.approx(literal_bin_value(x, f, c, 0.7, fwhm), rel=1e-10)


def test_constant_and_linear_spectra_preserved_on_nonuniform_grid():
    # Unit-area response: a constant is preserved; symmetric response: a
    # linear spectrum gives its value at the bin centre (exact identities).
    x = np.r_[np.linspace(280.0, 400.0, 50), np.geomspace(400.5, 820.0, 300)]
    inst = make_instrument(bin_width_nm=0.8, resolution_fwhm_nm=1.3)
    matrix, coverage = inst.line_spread_matrix(x, return_coverage=True)
    assert matrix.shape == (inst.n_bins, x.size)
    assert np.all(coverage > 1 - 1e-12)
    np.testing.assert_allclose(matrix @ np.full(x.size, 7.5), 7.5, rtol=1e-13)
    np.testing.assert_allclose(matrix @ (2.0 + 0.01 * x), 2.0 + 0.01 * inst.bin_centres_nm, rtol=1e-12)


def test_narrow_line_total_is_conserved():
    # A line narrower than a bin: Σ_i value_i·Δλ = ∫ model dλ, because the
    # contiguous bins' responses telescope to 1 (exact identity).
    x = np.linspace(490.0, 530.0, 40001)  # 1 pm steps
    for line_centre in (505.0, 507.3456, 508.0):  # on, off and at a bin edge
        f = np.clip(1.0 - np.abs(x - line_centre) / 0.02, 0.0, None) * 3.0  # triangle, area 0.06
        centres = 500.25 + 0.5 * np.arange(30)  # bins [500, 515] nm, edges at x.5 and x.0
        values = line_spread_matrix(x, centres, 0.5, 0.8) @ f
        assert values.sum() * 0.5 == pytest.approx(0.06, rel=1e-10)
        assert values.sum() * 0.5 == pytest.approx(np.trapezoid(f, x), rel=1e-10)


def test_gaussian_line_width_adds_in_quadrature():
    # Gaussian ⊗ Gaussian: FWHM² adds (common practice).  Exact bookkeeping
    # of variances: line σ² + h²/6 (piecewise-linear interpolant on step h)
    # + σ_LSF² + Δλ²/12 (box) — verified tightly; then in the fine-bin limit
    # the half-maximum width equals √(fwhm_line² + fwhm_lsf²).
    h, width, fwhm_line, fwhm_lsf = 0.01, 0.01, 1.0, 1.5
    x = np.arange(488.0, 512.0 + h / 2, h)
    sigma_line = fwhm_line / FWHM_PER_SIGMA
    f = np.exp(-0.5 * ((x - 500.0) / sigma_line) ** 2)
    centres = 494.0 + width * np.arange(1201)  # ±7.8 σ_out; a bin on the peak
    y = line_spread_matrix(x, centres, width, fwhm_lsf) @ f
    mean = np.sum(y * centres) / np.sum(y)
    variance = np.sum(y * (centres - mean) ** 2) / np.sum(y)
    expected = sigma_line**2 + h**2 / 6 + (fwhm_lsf / FWHM_PER_SIGMA) ** 2 + width**2 / 12
    assert mean == pytest.approx(500.0, abs=1e-9)
    assert variance == pytest.approx(expected, rel=1e-9)
    # Half-maximum crossings by linear interpolation between bins: error
    # ≈ Δλ²/8 · |y''/y'| per side, ≈ 0.5e-5 of the width; the box and grid
    # terms (Δλ²/12 + h²/6) widen it by ≈ 2.1e-5 relative.  Tolerance 5e-5.
    half = y.max() / 2
    above = np.flatnonzero(y >= half)
    i0, i1 = above[0], above[-1]
    left = np.interp(half, [y[i0 - 1], y[i0]], [centres[i0 - 1], centres[i0]])
    right = np.interp(half, [y[i1 + 1], y[i1]], [centres[i1 + 1], centres[i1]])
    assert right - left == pytest.approx(math.hypot(fwhm_line, fwhm_lsf), rel=5e-5)


def test_line_spread_coverage_and_inputs_checked():
    x = np.linspace(400.0, 500.0, 201)
    with pytest.raises(ValueError, match="extend the model grid"):
        line_spread_matrix(x, [400.5], 1.0, 2.0)  # half the response off the grid
    # Partly covered edge bins are renormalised when allowed, and reported.
    matrix, coverage = line_spread_matrix(x, [400.5, 450.0], 1.0, 2.0, min_coverage=0.5, return_coverage=True)
    assert 0.5 < coverage[0] < 0.9 and coverage[1] == pytest.approx(1.0, abs=1e-12)
    np.testing.assert_allclose(matrix.sum(axis=1), 1.0, rtol=1e-14)
    with pytest.raises(ValueError, match="model_wavelength_nm"):
        line_spread_matrix(x[::-1], [450.0], 1.0, 2.0)
    with pytest.raises(ValueError, match="fwhm_nm"):
        line_spread_matrix(x, [450.0], 1.0, -1.0)
    with pytest.raises(ValueError, match="bin_width_nm"):
        line_spread_matrix(x, [450.0], 0.0, 1.0)
    with pytest.raises(ValueError, match="min_coverage"):
        line_spread_matrix(x, [450.0], 1.0, 1.0, min_coverage=1.5)


# ------------------------------------------------------------ field of view


def cone_monomial_mean(a, b, c, half_angle):
    """Analytic/quad mean of x^a y^b z^c over a cap about +z (dΩ = dμ dφ).

    Azimuth: ∫cos^a φ sin^b φ dφ = 2 B((a+1)/2, (b+1)/2) for a, b even, else 0
    (Abramowitz & Stegun 1964, 6.2.1/6.2.2, recalled from memory); polar part
    by scipy quad.
    """
    if a % 2 or b % 2:
        return 0.0
    azimuth = 2.0 * gamma((a + 1) / 2) * gamma((b + 1) / 2) / gamma((a + b) / 2 + 1)
    mu0 = math.cos(half_angle)
    polar = quad(lambda mu: (1 - mu * mu) ** ((a + b) / 2) * mu**c, mu0, 1.0, epsabs=0, epsrel=1e-13)[0]
    return azimuth * polar / (2 * math.pi * (1 - mu0))


def test_fov_quadrature_basic_properties():
    offsets, weights = field_of_view_offsets(2.0, 3)
    assert offsets.shape == (18, 3) and weights.shape == (18,)
    assert weights.sum() == pytest.approx(1.0, rel=1e-14) and np.all(weights > 0)
    np.testing.assert_allclose(np.linalg.norm(offsets, axis=1), 1.0, rtol=1e-15)
    assert np.all(np.degrees(np.arccos(np.clip(offsets[:, 2], -1, 1))) <= 1.0 + 1e-9)


def test_fov_linear_in_angle_gives_central_value():
    # Azimuthal symmetry of the ring rule kills cos φ, sin φ terms (exact).
    offsets, weights = field_of_view_offsets(4.0, 2)
    alpha = np.arccos(np.clip(offsets[:, 2], -1, 1))
    phi = np.arctan2(offsets[:, 1], offsets[:, 0])
    value = 3.0 + 2.0 * alpha * np.cos(phi) - 5.0 * alpha * np.sin(phi)
    assert weights @ value == pytest.approx(3.0, rel=1e-14)


def test_fov_quadratic_gives_analytic_cone_mean():
    # Mean of x² over a cap of half-angle α0: ½⟨1 − μ²⟩ with μ uniform on
    # [μ0, 1] (dΩ = dμ dφ): ½[1 − (1 + μ0 + μ0²)/3] (closed form).
    for fov in (0.5, 30.0, 170.0):
        mu0 = math.cos(math.radians(fov / 2))
        offsets, weights = field_of_view_offsets(fov, 2)
        expected = 0.5 * (1 - (1 + mu0 + mu0**2) / 3)
        assert weights @ offsets[:, 0] ** 2 == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize("n_rings", [1, 2, 3])
def test_fov_exact_to_stated_degree_and_not_beyond(n_rings):
    half = math.radians(120.0) / 2  # wide cone so inexactness is visible
    offsets, weights = field_of_view_offsets(120.0, n_rings)
    degree = 2 * n_rings - 1
    for a in range(degree + 1):
        for b in range(degree + 1 - a):
            for c in range(degree + 1 - a - b):
                got = weights @ (offsets[:, 0] ** a * offsets[:, 1] ** b * offsets[:, 2] ** c)
                assert got == pytest.approx(cone_monomial_mean(a, b, c, half), rel=1e-12, abs=1e-14), (a, b, c)
    # Degree 2n in z (μ^{2n}) is beyond Gauss–Legendre's reach: must differ.
    got = weights @ offsets[:, 2] ** (degree + 1)
    assert abs(got - cone_monomial_mean(0, 0, degree + 1, half)) > 1e-6


def test_rotate_offsets_to_many_looks():
    fov = 10.0
    mu0 = math.cos(math.radians(fov / 2))
    offsets, weights = field_of_view_offsets(fov, 3)
    rng = np.random.default_rng(11)
    looks = np.vstack([[0, 0, 1], [0, 0, -1], [1, 0, 0], [0, -3, 0], [1e-12, 0, -1], rng.normal(size=(5, 3))])
    rotated = rotate_offsets_to(looks, offsets)
    assert rotated.shape == (looks.shape[0], offsets.shape[0], 3)
    unit = looks / np.linalg.norm(looks, axis=1)[:, None]
    np.testing.assert_allclose(np.linalg.norm(rotated, axis=2), 1.0, rtol=1e-14)
    cos_off = np.einsum("lqi,li->lq", rotated, unit)
    assert np.all(cos_off >= mu0 - 1e-12)
    # Mean direction = ⟨μ⟩ l̂ = (1 + μ0)/2 · l̂ (closed form, uniform in μ).
    mean_direction = np.einsum("q,lqi->li", weights, rotated)
    np.testing.assert_allclose(mean_direction, 0.5 * (1 + mu0) * unit, atol=1e-14)
    # Quadratic across the cone in the rotated frame: ⟨(d·e)²⟩ for e ⊥ l̂.
    perp = np.cross(unit, rng.normal(size=unit.shape))
    perp /= np.linalg.norm(perp, axis=1)[:, None]
    second = np.einsum("q,lq->l", weights, np.einsum("lqi,li->lq", rotated, perp) ** 2)
    np.testing.assert_allclose(second, 0.5 * (1 - (1 + mu0 + mu0**2) / 3), rtol=1e-11)
    single = rotate_offsets_to([0.0, 1.0, 0.0], offsets)
    assert single.shape == offsets.shape


def test_fov_bad_inputs_rejected():
    with pytest.raises(ValueError, match="full_angle_deg"):
        field_of_view_offsets(0.0, 2)
    with pytest.raises(ValueError, match="full_angle_deg"):
        field_of_view_offsets(190.0, 2)
    with pytest.raises(ValueError, match="n_rings"):
        field_of_view_offsets(1.0, 0)
    with pytest.raises(ValueError, match="look_direction"):
        rotate_offsets_to([0.0, 0.0, 0.0], np.array([[0.0, 0.0, 1.0]]))
    with pytest.raises(ValueError, match="offsets"):
        rotate_offsets_to([0.0, 0.0, 1.0], np.ones((2, 2)))


def test_calibration_error_floor():
    # noise² = S + B + D + R² + (f(S+B))²: at high signal the SNR saturates at 1/f (exact
    # algebra of the quadrature sum); realisations scatter with the full noise (χ² window as in
    # test_noise_realisations_match_expected_mean_and_spread); f = 0 changes nothing.
    f = 0.01
    inst, plain = make_instrument(calibration_error_fraction=f), make_instrument()
    centres = inst.bin_centres_nm[:3]
    bright = expected_counts(np.full(3, 1e-2), centres, inst)
    assert np.all(bright.snr < 1 / f) and np.all(bright.snr > 0.99 / f)
    base = expected_counts(np.full(3, 1e-6), centres, plain)
    same = expected_counts(np.full(3, 1e-6), centres, make_instrument(calibration_error_fraction=0.0))
    np.testing.assert_array_equal(base.noise_e, same.noise_e)
    faint = expected_counts(np.full(3, 1e-6), centres, inst)
    np.testing.assert_allclose(faint.noise_e**2, base.noise_e**2 + (f * faint.signal_e) ** 2, rtol=1e-12)
    n = 20_000
    draws = faint.simulate(np.random.default_rng(3), n)
    lo, hi = chi2.ppf([0.0005, 0.9995], n - 1) / (n - 1)
    ratio = draws.var(axis=0, ddof=1) / faint.noise_e**2
    assert np.all((lo < ratio) & (ratio < hi)), ratio
    with pytest.raises(ValueError, match="calibration_error_fraction"):
        make_instrument(calibration_error_fraction=0.6)
