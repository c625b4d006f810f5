"""Simulated observations, noise statistics, dust/zodiacal separation, limits and sweeps."""

import textwrap

import numpy as np
import pytest
import xarray as xr

from dustrt.cli import main
from dustrt.config import load_scenario
from dustrt.observe import observation_dataset

SCEN = """
[wavelengths]
start_nm = 280.0
stop_nm = 760.0
step_nm = 4.0

[observer]
altitude_km = 40.0
local_time_h = 5.6

[view]
tangent_altitudes_km = [3.0, 10.0, 20.0]

[integration]
top_altitude_km = 200.0
extinction = false

[[population]]
name = "fine"
material = "mare_basaltic_analogue"
size = { distribution = "monodisperse", radius_um = 0.08 }
density = { profile = "exponential", surface_density_cm3 = N0, scale_height_km = 10.0 }

[background]
zodiacal_light = true

[instrument]
aperture_area_cm2 = 20.0
field_of_view_deg = 0.2
integration_time_s = 10.0
frames = 4
bin_width_nm = 8.0
resolution_fwhm_nm = 8.0
wavelength_min_nm = 300.0
wavelength_max_nm = 740.0
throughput = 0.1
read_noise_e = 10.0
dark_current_e_s = 2.0

[separation]
mask_nm = [[585.0, 595.0]]
"""


def scenario(tmp_path, n0="1e-7", extra="", name="s.toml"):
    p = tmp_path / name
    p.write_text(textwrap.dedent(SCEN.replace("N0", n0)) + textwrap.dedent(extra))
    return load_scenario(p), p


def test_observation_file_contents(tmp_path):
    sc, _ = scenario(tmp_path)
    ds = observation_dataset(sc, realizations=3, seed=7)
    assert ds["radiance"].dims == ("observation", "line_of_sight", "wavelength_nm")
    assert ds["radiance_uncertainty"].shape == ds["radiance"].shape
    for v in ("radiance", "radiance_uncertainty", "signal_e", "noise_e", "expected_radiance"):
        assert "units" in ds[v].attrs
    # reproducible with a seed
    again = observation_dataset(sc, realizations=3, seed=7)
    np.testing.assert_array_equal(ds["radiance"], again["radiance"])
    other = observation_dataset(sc, realizations=3, seed=8)
    assert not np.array_equal(ds["radiance"], other["radiance"])


def test_noise_realisations_match_uncertainty(tmp_path):
    # the scatter of many simulated calibrated spectra equals radiance_uncertainty; with N = 2000
    # draws the sample std has relative standard error 1/sqrt(2(N-1)) ≈ 1.6 %; 5 σ band (8 %)
    # on each bin, and the mean over bins within 1 % (Poisson + Gaussian read noise).
    sc, _ = scenario(tmp_path)
    ds = observation_dataset(sc, realizations=2000, seed=1)
    std = ds["radiance"].std("observation", ddof=1).values
    unc = ds["radiance_uncertainty"].isel(observation=0).values
    ratio = std / unc
    assert np.all(np.abs(ratio - 1) < 0.08)
    assert abs(ratio.mean() - 1) < 0.01
    mean = ds["radiance"].mean("observation").values
    np.testing.assert_array_less(np.abs(mean - ds["expected_radiance"].values), 5 * unc / np.sqrt(2000))


def test_finite_field_of_view_matters_for_steep_profiles(tmp_path):
    # A 1 km scale height seen through a 1° field of view (≈ 7 km at the ~400 km limb distance)
    # is smeared: the FOV average exceeds the central ray where the profile is convex (log-linear),
    # as Jensen's inequality requires; with 10 km scale height and 0.05° it does not matter.
    from dustrt.observe import binned_limb

    extra_fov = "field_of_view_rings = 4\n"
    steep, _ = scenario(tmp_path, n0="1e-3")
    raw = steep.raw
    text = SCEN.replace("N0", "1e-3").replace("scale_height_km = 10.0", "scale_height_km = 1.0").replace(
        "[3.0, 10.0, 20.0]", "[8.0, 12.0, 20.0]")  # sub-rays stay above the sunlit surface
    wide = text.replace("field_of_view_deg = 0.2", "field_of_view_deg = 1.0").replace(
        "dark_current_e_s = 2.0", "dark_current_e_s = 2.0\n" + extra_fov)
    narrow = text.replace("field_of_view_deg = 0.2", "field_of_view_deg = 1.0")
    (tmp_path / "w.toml").write_text(textwrap.dedent(wide))
    (tmp_path / "n.toml").write_text(textwrap.dedent(narrow))
    bw = binned_limb(load_scenario(tmp_path / "w.toml"))
    bn = binned_limb(load_scenario(tmp_path / "n.toml"))
    ratio = bw.dust_radiance[:, 20] / bn.dust_radiance[:, 20]
    assert np.all(ratio > 1.05)
    gentle = SCEN.replace("N0", "1e-3").replace("field_of_view_deg = 0.2", "field_of_view_deg = 0.05").replace(
        "dark_current_e_s = 2.0", "dark_current_e_s = 2.0\n" + extra_fov)
    (tmp_path / "g.toml").write_text(textwrap.dedent(gentle))
    bg = binned_limb(load_scenario(tmp_path / "g.toml"))
    central = binned_limb(load_scenario(tmp_path / "g.toml"), extinction=None)
    assert raw  # scenario parsed
    np.testing.assert_allclose(bg.dust_radiance, central.dust_radiance, rtol=1e-12)
    from dustrt.observe import fov_limb

    c, pop, _, _ = fov_limb(load_scenario(tmp_path / "g.toml"))
    np.testing.assert_allclose(pop.sum(axis=0), c.radiance, rtol=2e-3)


def _separate(tmp_path, n0_truth, realizations, seed, hypothesis_n0="1e-7"):
    sc_truth, _ = scenario(tmp_path, n0=n0_truth, name="truth.toml")
    obs = observation_dataset(sc_truth, realizations=realizations, seed=seed)
    path = tmp_path / "obs.nc"
    from dustrt import io

    io.write_netcdf(obs, path)
    hyp, hyp_path = scenario(tmp_path, n0=hypothesis_n0, name="hyp.toml")
    from dustrt.separate import read_observation, separate

    spectra = read_observation(path)
    return separate(hyp, spectra)[0], path, hyp_path


def test_no_dust_pulls_are_standard_normal(tmp_path):
    # with no dust injected the dust amplitude is consistent with zero: pulls have mean ≈ 0 and
    # width ≈ 1 (600 spectra: standard errors 0.04 and 0.03; 4-sigma bands)
    fit, _, _ = _separate(tmp_path, "0.0", 200, seed=3)
    pull = (fit.dust_amplitude / fit.dust_sigma).ravel()
    assert abs(pull.mean()) < 4 / np.sqrt(pull.size)
    assert abs(pull.std(ddof=1) - 1) < 4 / np.sqrt(2 * pull.size)
    assert np.nanmean(fit.chi2 / fit.dof) == pytest.approx(1.0, abs=0.05)


def test_injected_dust_is_recovered(tmp_path):
    # inject 3e-7 cm-3 with a 1e-7 hypothesis: the amplitude estimate is 3 within its uncertainty
    fit, _, _ = _separate(tmp_path, "3e-7", 100, seed=4)
    a = fit.dust_amplitude.ravel()
    s = fit.dust_sigma.ravel()
    pull = (a - 3.0) / s
    assert abs(pull.mean()) < 4 / np.sqrt(pull.size)
    assert abs(pull.std(ddof=1) - 1) < 4 / np.sqrt(2 * pull.size)


def test_pure_zodiacal_colour_ratio(tmp_path, capsys):
    # A pure zodiacal spectrum has the zodiacal colour ratio (Leinert et al. 1998 colour law:
    # redder than the Sun, ratio < 1), and the fine-grain dust template is bluer (ratio > 1).
    _, path, hyp_path = _separate(tmp_path, "0.0", 1, seed=1)
    sc, _ = scenario(tmp_path, n0="0.0", name="expect.toml")
    ds = observation_dataset(sc)  # expected, noise-free, no dust
    from dustrt import io

    io.write_netcdf(ds, tmp_path / "expected.nc")
    out = tmp_path / "sep.nc"
    png = tmp_path / "sep.png"
    assert main(["separate", str(tmp_path / "expected.nc"), "--scenario", str(hyp_path), "-o", str(out),
                 "--plot", str(png), "-q"]) == 0
    r = xr.open_dataset(out, engine="h5netcdf")
    obs = r["colour_ratio_observed"].values
    zod = r["colour_ratio_zodiacal"].isel(population=0).values
    np.testing.assert_allclose(obs, zod, rtol=1e-6)
    assert np.all(obs < 1.0)
    assert np.all(r["colour_ratio_dust"].values > 1.0)
    np.testing.assert_allclose(r["dust_amplitude"].values, 0.0, atol=1e-6)
    r.close()


def test_limits_cli_and_coverage(tmp_path):
    # Coverage (Feldman & Cousins 1998): with a true density of zero, the fraction of
    # per-spectrum 95 % upper limits above the truth is 0.95 within binomial error.
    fit, path, hyp_path = _separate(tmp_path, "0.0", 400, seed=11)
    out = tmp_path / "lim.nc"
    assert main(["limit", str(path), "--scenario", str(hyp_path), "-o", str(out), "--plot",
                 str(tmp_path / "lim.png"), "-q"]) == 0
    ds = xr.open_dataset(out, engine="h5netcdf")
    assert ds.attrs["confidence"] == 0.95
    assert "Feldman" in ds.attrs["method_description"]
    up = ds["spectrum_upper_limit_cm3"].values.ravel()
    n = up.size
    cover = np.mean(up >= 0.0)
    assert cover == 1.0  # the truth is the boundary: every FC interval contains zero...
    # ...so test coverage at a non-zero truth with the interval (lower, upper)
    ds.close()
    fit, path, hyp_path = _separate(tmp_path, "2e-8", 400, seed=12)
    assert main(["limit", str(path), "--scenario", str(hyp_path), "-o", str(out), "-q", "--overwrite"]) == 0
    ds = xr.open_dataset(out, engine="h5netcdf")
    lo = ds["spectrum_lower_limit_cm3"].values.ravel()
    up = ds["spectrum_upper_limit_cm3"].values.ravel()
    inside = np.mean((lo <= 2e-8) & (up >= 2e-8))
    n = lo.size
    assert abs(inside - 0.95) < 4 * np.sqrt(0.95 * 0.05 / n)
    # per observation (its three lines of sight combined) the intervals cover just as well
    olo = ds["observation_lower_limit_cm3"].values.ravel()
    oup = ds["observation_upper_limit_cm3"].values.ravel()
    inside = np.mean((olo <= 2e-8) & (oup >= 2e-8))
    assert abs(inside - 0.95) < 4 * np.sqrt(0.95 * 0.05 / olo.size)
    # the joint limit combines all spectra: tighter than any single one
    assert ds["density_upper_limit_cm3"].item() < np.nanmin(up)
    ds.close()


def test_limit_rejects_non_positive_uncertainty(tmp_path, capsys):
    fit, path, hyp_path = _separate(tmp_path, "0.0", 2, seed=1)
    ds = xr.open_dataset(path, engine="h5netcdf").load()
    ds["radiance_uncertainty"][0, 0, 5] = 0.0
    ds["radiance"][0, 1, 7] = np.nan
    bad = tmp_path / "bad.nc"
    ds.to_netcdf(bad, engine="h5netcdf")
    assert main(["limit", str(bad), "--scenario", str(hyp_path), "-o", str(tmp_path / "l.nc")]) == 2
    err = capsys.readouterr().err
    assert "bad.nc" in err and "radiance_uncertainty" in err
    # NaN bins alone are ignored and reported
    ds["radiance_uncertainty"][0, 0, 5] = 1.0
    ds.to_netcdf(tmp_path / "nan.nc", engine="h5netcdf")
    assert main(["limit", str(tmp_path / "nan.nc"), "--scenario", str(hyp_path), "-o", str(tmp_path / "l.nc"), "-q"]) == 0
    assert xr.open_dataset(tmp_path / "l.nc", engine="h5netcdf").attrs["ignored_nan_bins"] == 1


def test_limits_many_spectra_vectorised(tmp_path):
    # 10,000 spectra of ~55 bins go through one vectorised fit (no per-spectrum Python loop)
    from dustrt.separate import fit_spectra

    rng = np.random.default_rng(0)
    b = 300
    t = np.stack([np.linspace(1, 2, b), np.linspace(2, 1, b)])
    data = 0.5 * t[0] + rng.normal(0, 0.01, (10000, b))
    a, cov, a_nn, res = fit_spectra(data, np.full((10000, b), 0.01), np.broadcast_to(t, (10000, 2, b)),
                                    np.ones((10000, b), bool))
    assert a.shape == (10000, 2)
    assert np.abs(a[:, 0] - 0.5).max() < 0.01


SWEEP = """
[sweep]
radius_um = { start = 0.004, stop = 0.016, num = 3, spacing = "log" }
"instrument.integration_time_s" = [10.0, 40.0]
detection_sigma = 5.0
"""


def test_sweep_physics_scalings(tmp_path):
    # Rayleigh regime: n_min ∝ a^-6 (C_sca ∝ a⁶, Bohren & Huffman 1983 ch. 5); photon-noise
    # limit: n_min ∝ t^-1/2 (common practice); linear in the detection threshold.
    from dustrt.sweep import run_sweep

    text = SWEEP
    sc, _ = scenario(tmp_path, extra=text.replace("detection_sigma = 5.0", "detection_sigma = 5.0"))
    sc = load_scenario(tmp_path / "s.toml")
    # photon-noise limit: no read noise, no dark
    raw_text = (tmp_path / "s.toml").read_text().replace("read_noise_e = 10.0", "read_noise_e = 0.0").replace(
        "dark_current_e_s = 2.0", "dark_current_e_s = 0.0")
    (tmp_path / "s.toml").write_text(raw_text)
    sc = load_scenario(tmp_path / "s.toml")
    ds = run_sweep(sc, tmp_path / "sw.nc")
    m = ds["minimum_detectable_density_cm3"].isel(population=0).values  # (radius, time)
    r = ds["radius_um"].values
    slope = np.log(m[-1, 0] / m[0, 0]) / np.log(r[-1] / r[0])
    assert slope == pytest.approx(-6.0, abs=0.05)  # O(x²) Rayleigh corrections at x ≤ 0.36
    np.testing.assert_allclose(m[:, 1] / m[:, 0], 0.5, rtol=1e-9)
    # monodisperse grains: volume density = number density x 4/3 pi a^3 (a in um)
    v = ds["minimum_detectable_volume_density_um3_cm3"].isel(population=0).values
    np.testing.assert_allclose(v, m * (4 / 3) * np.pi * r[:, None] ** 3, rtol=1e-12)
    (tmp_path / "s10.toml").write_text(raw_text.replace("detection_sigma = 5.0", "detection_sigma = 10.0"))
    ds10 = run_sweep(load_scenario(tmp_path / "s10.toml"), tmp_path / "sw10.nc")
    np.testing.assert_allclose(ds10["minimum_detectable_density_cm3"].values,
                               2 * ds["minimum_detectable_density_cm3"].values, rtol=1e-12)
    assert not (tmp_path / "sw.nc.chunks").exists()


def test_sweep_cli_dask_identical_and_resume(tmp_path):
    sc, path = scenario(tmp_path, extra=SWEEP)
    serial = tmp_path / "serial.nc"
    assert main(["sweep", str(path), "-o", str(serial), "--plot", str(tmp_path / "sw.png"), "-q"]) == 0
    par = tmp_path / "par.nc"
    assert main(["sweep", str(path), "-o", str(par), "--workers", "2", "-q"]) == 0
    a = xr.open_dataset(serial, engine="h5netcdf")
    b = xr.open_dataset(par, engine="h5netcdf")
    xr.testing.assert_identical(a["minimum_detectable_density_cm3"], b["minimum_detectable_density_cm3"])
    a.close()
    b.close()


def test_sweep_bad_key(tmp_path, capsys):
    sc_text = SWEEP.replace('"instrument.integration_time_s"', '"instrument.exposure_hours"')
    p = tmp_path / "s.toml"
    p.write_text(textwrap.dedent(SCEN.replace("N0", "1e-7")) + sc_text)
    assert main(["sweep", str(p), "-o", str(tmp_path / "x.nc")]) == 2
    assert "instrument.exposure_hours" in capsys.readouterr().err


def test_limit_with_radius_sweep_and_minimal_real_file(tmp_path):
    # A "real" calibrated file holds only radiance, its uncertainty, the geometry and the
    # wavelengths (no simulation extras; its bins differ from the model grid): the model is
    # integrated onto the file's bins with the scenario's line-spread function.
    sc, _ = scenario(tmp_path, n0="0.0", name="truth.toml")
    sim = observation_dataset(sc, realizations=5, seed=21)
    wl = sim["wavelength_nm"].values
    minimal = xr.Dataset(
        {"radiance": sim["radiance"], "radiance_uncertainty": sim["radiance_uncertainty"],
         "look_direction": sim["look_direction"].isel(observation=0),
         "observer_position_km": sim["observer_position_km"].isel(observation=0)},
        coords={"wavelength_nm": wl})
    path = tmp_path / "real.nc"
    minimal.to_netcdf(path, engine="h5netcdf")
    _, hyp = scenario(tmp_path, n0="1e-7", name="hyp.toml", extra="""
        [sweep]
        radius_um = { start = 0.01, stop = 0.3, num = 4, spacing = "log" }
        detection_sigma = 3.0
        """)
    out = tmp_path / "lim.nc"
    png = tmp_path / "lim.png"
    assert main(["limit", str(path), "--scenario", str(hyp), "-o", str(out), "--plot", str(png), "-q",
                 "--method", "bayesian-flat"]) == 0
    ds = xr.open_dataset(out, engine="h5netcdf")
    assert ds["density_upper_limit_cm3"].shape == (1, 4)
    np.testing.assert_allclose(ds["radius_um"].values[0], np.geomspace(0.01, 0.3, 4))
    # smaller grains scatter less per grain: the limit on their density is higher
    assert np.all(np.diff(ds["density_upper_limit_cm3"].values[0]) < 0)
    assert "flat prior" in ds.attrs["method_description"]
    assert np.all(ds["density_lower_limit_cm3"].values == 0)
    assert png.stat().st_size > 1000
    ds.close()


def test_limit_warns_when_model_does_not_fit(tmp_path):
    # data with dust of a different colour than the hypothesis: chi-square p-values collapse
    truth = SCEN.replace("N0", "3e-5").replace("radius_um = 0.08", "radius_um = 0.6")
    (tmp_path / "t.toml").write_text(textwrap.dedent(truth))
    from dustrt import DustrtWarning, io
    from dustrt.limits import limits_file

    io.write_netcdf(observation_dataset(load_scenario(tmp_path / "t.toml"), realizations=3, seed=2),
                    tmp_path / "o.nc")
    _, hyp = scenario(tmp_path, n0="1e-7", name="hyp.toml")
    with pytest.warns(DustrtWarning, match="does not describe the data"):
        limits_file(tmp_path / "o.nc", load_scenario(hyp))


def test_sweep_ignores_views_ending_on_the_surface(tmp_path):
    # a view that ends on the surface carries no zodiacal light and is left out (as in the
    # separation), so adding one does not change the minimum detectable density
    from dustrt.sweep import detectability

    base, _ = scenario(tmp_path, name="a.toml")
    text = SCEN.replace("N0", "1e-7").replace("[3.0, 10.0, 20.0]", "[-5.0, 3.0, 10.0, 20.0]")
    (tmp_path / "b.toml").write_text(textwrap.dedent(text).replace("[background]", "[background]\ndark_surface_radiance_factor = 0.0"))
    import warnings

    from dustrt import DustrtWarning

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DustrtWarning)  # the sunlit-surface view is flagged
        with_surface = detectability(load_scenario(tmp_path / "b.toml"), 5.0)
    plain = detectability(base, 5.0)
    np.testing.assert_allclose(with_surface["minimum_detectable_density_cm3"],
                               plain["minimum_detectable_density_cm3"], rtol=1e-9)


def test_lognormal_radius_sweep_moves_explicit_bounds():
    from dustrt.sizes import LogNormal

    s = LogNormal(0.1, 1.5, 0.05, 0.5).with_radius(1.0)
    assert (s.median_radius_um, s.min_radius_um, s.max_radius_um) == pytest.approx((1.0, 0.5, 5.0))
    assert LogNormal(0.1, 1.5).with_radius(0.2).min_radius_um is None


def test_sweep_interrupted_and_resumed_recomputes_nothing_finished(tmp_path, monkeypatch):
    import dustrt.sweep as sweep_mod
    from dustrt.chunks import ChunkError, completed_chunks

    _, path = scenario(tmp_path, extra=SWEEP.replace("detection_sigma = 5.0", "detection_sigma = 5.0\nchunk_size = 1"))
    reference = sweep_mod.run_sweep(load_scenario(path), tmp_path / "ref.nc")
    real = sweep_mod.detectability
    calls = []

    def failing(sc, sigma):
        if len(calls) == 3:
            raise RuntimeError("simulated interruption")
        calls.append(1)
        return real(sc, sigma)

    monkeypatch.setattr(sweep_mod, "detectability", failing)
    out = tmp_path / "sw.nc"
    with pytest.raises(ChunkError):
        sweep_mod.run_sweep(load_scenario(path), out)
    finished = completed_chunks(tmp_path / "sw.nc.chunks")
    assert len(finished) == 3 and not out.exists()
    # a rerun without --resume does not silently throw the finished chunks away
    with pytest.raises(ValueError, match=r"holds 3 finished chunk\(s\).*--resume.*--overwrite"):
        sweep_mod.run_sweep(load_scenario(path), out)
    assert completed_chunks(tmp_path / "sw.nc.chunks") == finished
    calls.clear()
    monkeypatch.setattr(sweep_mod, "detectability", lambda sc, s: (calls.append(1), real(sc, s))[1])
    ds = sweep_mod.run_sweep(load_scenario(path), out, resume=True)
    assert len(calls) == 6 - 3  # 3 radii x 2 exposure times, 3 finished before
    xr.testing.assert_identical(ds["minimum_detectable_density_cm3"], reference["minimum_detectable_density_cm3"])
    assert out.exists() and not (tmp_path / "sw.nc.chunks").exists()


TWO_POPULATIONS = """
[[population]]
name = "coarse"
material = "highland_anorthositic_analogue"
size = { distribution = "monodisperse", radius_um = 0.4 }
density = { profile = "exponential", surface_density_cm3 = N1, scale_height_km = 5.0 }
"""


def _two_population_sky(tmp_path, realizations, seed, joint):
    from dustrt import io

    extra = TWO_POPULATIONS.replace("N1", "1e-7")
    truth, _ = scenario(tmp_path, n0="1e-6", extra=extra, name="truth2.toml")
    path = tmp_path / "obs2.nc"
    io.write_netcdf(observation_dataset(truth, realizations=realizations, seed=seed), path)
    text = (tmp_path / "truth2.toml").read_text().replace("[separation]", f"[separation]\njoint_fit = {joint}")
    (tmp_path / "hyp2.toml").write_text(text)
    return load_scenario(tmp_path / "hyp2.toml"), path


def test_joint_fit_recovers_two_populations_that_single_fits_confuse(tmp_path):
    # A sky holding two populations (truth = the hypothesis, amplitudes 1 and 1): fitted jointly,
    # the amplitudes are unbiased (pull mean ~0, width ~1 over 100 noise realisations x 3 views,
    # tolerance from the standard error of a mean and a standard deviation of 300 normal draws)
    # and the chi-square is that of a good fit. Fitted one at a time, the first hypothesis
    # absorbs the second and comes out biased high.
    from dustrt.separate import fit_quality, read_observation, separate

    sc, path = _two_population_sky(tmp_path, 100, 5, "true")
    spectra = read_observation(path, sc)
    joint = separate(sc, spectra)
    for fit in joint:
        pulls = ((fit.dust_amplitude - 1.0) / fit.dust_sigma).ravel()
        assert abs(pulls.mean()) < 4 / np.sqrt(pulls.size)
        assert abs(pulls.std() - 1) < 4 / np.sqrt(2 * pulls.size)
        assert fit_quality(fit)[0]
        assert fit.parameter_names[fit.dust_index].endswith(("fine", "coarse"))
    import dataclasses

    alone = dataclasses.replace(sc, separation=dataclasses.replace(sc.separation, joint_fit=False))
    single = separate(alone, spectra)
    bias = ((single[0].dust_amplitude - 1.0) / single[0].dust_sigma).mean()
    assert bias > 1.0  # "fine" alone takes the coarse grains' light (300 pulls: standard error 0.06)
    assert not fit_quality(single[1])[0]  # "coarse" alone cannot fit the fine grains' blue light


def test_joint_fit_of_one_population_is_the_single_fit(tmp_path):
    from dustrt.separate import read_observation, separate

    _, obs, hyp_path = _separate(tmp_path, "1e-7", 3, seed=2)
    hyp = load_scenario(hyp_path)
    joint_path = tmp_path / "joint.toml"
    joint_path.write_text(hyp_path.read_text().replace("[separation]", "[separation]\njoint_fit = true"))
    spectra = read_observation(obs, hyp)
    a, b = separate(hyp, spectra)[0], separate(load_scenario(joint_path), spectra)[0]
    np.testing.assert_allclose(b.dust_amplitude, a.dust_amplitude, rtol=1e-10)
    np.testing.assert_allclose(b.dust_sigma, a.dust_sigma, rtol=1e-10)
    np.testing.assert_array_equal(b.amplitudes_nonneg, a.amplitudes_nonneg)


def test_joint_detectability_is_never_better_than_alone(tmp_path):
    # Profiling over more nuisance amplitudes cannot shrink a marginal variance (Schur
    # complement of a positive-definite normal matrix): joint minimum densities >= single.
    from dustrt.sweep import detectability

    sc, _ = _two_population_sky(tmp_path, 0, 1, "true")
    alone, _ = _two_population_sky(tmp_path, 0, 1, "false")
    j, s = detectability(sc, 5.0), detectability(alone, 5.0)
    assert np.all(j["minimum_detectable_density_cm3"] >= s["minimum_detectable_density_cm3"] * (1 - 1e-12))
    assert np.all(j["minimum_detectable_density_cm3"] > s["minimum_detectable_density_cm3"])  # templates overlap


def test_joint_fit_leaves_out_a_population_absent_from_a_view(tmp_path):
    # A second population confined below 8 km (a table, zero above its last node) has no light on
    # the 10 and 20 km views: there the joint fit is the single fit of "fine" (same design, to
    # rounding), the absent population's amplitude is NaN, and "fine" is not lost with it.
    import dataclasses

    from dustrt.separate import read_observation, separate

    rows = "\n".join(f"{h},{d},1e-6" for h in (0.0, 4.0, 8.0) for d in (-500.0, 500.0))
    (tmp_path / "low.csv").write_text("# test table\naltitude_km,terminator_distance_km,density_cm3\n" + rows + "\n")
    low = ('\n[[population]]\nname = "low"\nmaterial = "highland_anorthositic_analogue"\n'
           'size = { distribution = "monodisperse", radius_um = 0.3 }\n'
           'density = { profile = "table", file = "low.csv" }\n')
    _, obs, _ = _separate(tmp_path, "1e-7", 4, seed=8)
    sc, path = scenario(tmp_path, n0="1e-7", extra=low, name="joint.toml")
    path.write_text(path.read_text().replace("[separation]", "[separation]\njoint_fit = true"))
    sc = load_scenario(path)
    spectra = read_observation(obs, sc)
    from dustrt import DustrtWarning

    with pytest.warns(DustrtWarning, match=r"degenerate \(NaN\) for most limb views of low:"):
        fine, lowfit = separate(sc, spectra)
    assert np.all(np.isfinite(fine.dust_amplitude))
    assert np.all(np.isfinite(lowfit.dust_amplitude[:, 0])) and np.all(np.isnan(lowfit.dust_amplitude[:, 1:]))
    with pytest.warns(DustrtWarning, match="degenerate"):  # "low" alone has no light on those views either
        alone = separate(dataclasses.replace(sc, separation=dataclasses.replace(sc.separation, joint_fit=False)),
                         spectra)[0]
    np.testing.assert_allclose(fine.dust_amplitude[:, 1:], alone.dust_amplitude[:, 1:], rtol=1e-9)
    np.testing.assert_allclose(fine.dust_sigma[:, 1:], alone.dust_sigma[:, 1:], rtol=1e-9)


def test_zodiacal_colour_curvature_absorbed_by_a_second_order_term(tmp_path):
    # A dust-free sky whose zodiacal colour is curved by (1 + c ln²(λ/500 nm)), c = 0.01 (a smooth
    # calibration or colour error the model lacks). With a free slope only, the curvature leaks into
    # the dust amplitude; with zodiacal_colour_order = 2 the pulls of the dust amplitude about zero
    # are standard normal again (mean within 4 standard errors, s.d. within 4 of its own).
    from dustrt import io
    from dustrt.separate import read_observation, separate

    truth, _ = scenario(tmp_path, n0="0.0", name="sky.toml")
    ds = observation_dataset(truth, realizations=100, seed=21)
    wl = ds["wavelength_nm"].values
    curve = 0.01 * np.log(wl / 500.0) ** 2
    ds["radiance"] = ds["radiance"] + ds["expected_zodiacal_radiance"] * curve
    path = tmp_path / "curved.nc"
    io.write_netcdf(ds, path)
    pulls = {}
    for name, extra in (("slope", "free_colour_slope = true"), ("order2", "zodiacal_colour_order = 2")):
        text = (tmp_path / "sky.toml").read_text().replace("surface_density_cm3 = 0.0", "surface_density_cm3 = 1e-7")
        (tmp_path / f"{name}.toml").write_text(text.replace("[separation]", f"[separation]\n{extra}"))
        sc = load_scenario(tmp_path / f"{name}.toml")
        fit = separate(sc, read_observation(path, sc))[0]
        pulls[name] = (fit.dust_amplitude / fit.dust_sigma).ravel()
        assert fit.parameter_names[:2] == ("zodiacal_amplitude", "zodiacal_colour_slope")
    n = pulls["order2"].size
    assert abs(pulls["order2"].mean()) < 4 / np.sqrt(n)
    assert abs(pulls["order2"].std() - 1) < 4 / np.sqrt(2 * n)
    assert abs(pulls["slope"].mean()) > 10 / np.sqrt(n)  # the slope alone cannot take the curvature


def test_limit_over_a_population_size_key_is_labelled(tmp_path, capsys):
    _, obs, hyp_path = _separate(tmp_path, "0.0", 2, seed=4)
    text = hyp_path.read_text() + '\n[sweep]\n"population.fine.size.radius_um" = [0.05, 0.08]\n'
    hyp_path.write_text(text)
    out = tmp_path / "lim_size.nc"
    assert main(["limit", str(obs), "--scenario", str(hyp_path), "-o", str(out)]) == 0
    err = capsys.readouterr().err
    assert "fine, radius 0.05 um, population.fine.size.radius_um = 0.05:" in err
    ds = xr.open_dataset(out, engine="h5netcdf")
    np.testing.assert_array_equal(ds["population__fine__size__radius_um"].values, [0.05, 0.08])
    np.testing.assert_array_equal(ds["radius_um"].values[0], [0.05, 0.08])
    ds.close()
