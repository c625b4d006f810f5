"""Limb forward model: optics × columns, linearity, additivity, extinction, outputs, bad input."""

import textwrap

import numpy as np
import pytest
import xarray as xr

from dustrt.cli import main
from dustrt.config import load_scenario, scenario_from_dict
from dustrt.forward import compute_limb, limb_dataset
from dustrt.optics import population_optics

SCEN = """
[wavelengths]
values_nm = [300.0, 450.0, 600.0, 750.0]

[observer]
altitude_km = 50.0
local_time_h = 6.3

[view]
tangent_altitudes_km = [0.0, 5.0, 15.0, 30.0]
azimuth_deg = 0.0

[integration]
top_altitude_km = 200.0
relative_tolerance = 1e-6
extinction = EXT

[background]
zodiacal_light = false

[[population]]
name = "fine"
material = "mare_basaltic_analogue"
size = { distribution = "lognormal", median_radius_um = 0.1, sigma_g = 1.5 }
density = { profile = "exponential", surface_density_cm3 = N0, scale_height_km = 10.0 }

[[population]]
name = "coarse"
material = { n = 1.6, k = 0.001 }
size = { distribution = "monodisperse", radius_um = 0.4 }
density = { profile = "terminator", surface_density_cm3 = 1e-4, scale_height_km = 5.0, sunlit_width_km = 200.0, dark_width_km = 50.0 }
"""


def scen(tmp_path, ext="false", n0="1e-2", extra=""):
    p = tmp_path / "s.toml"
    p.write_text(textwrap.dedent(SCEN.replace("EXT", ext).replace("N0", n0)) + extra)
    return load_scenario(p)


def test_radiance_equals_formula_without_extinction(tmp_path):
    # DESIGN.md radiance formula: L = F/d² · C_sca·1e-8 · P(θ)/4π · N_lit (extinction off)
    s = scen(tmp_path)
    r = compute_limb(s)
    for p, pop in enumerate(s.populations):
        for i, theta in enumerate(r.columns.scattering_angle_deg):
            o = population_optics(pop.material, pop.size, s.wavelength_nm, [theta])
            expected = (r.solar_irradiance * o.scattering_cross_section_um2 * 1e-8 * o.phase_function[:, 0]
                        / (4 * np.pi) * r.columns.sunlit_column_cm2[p, i])
            np.testing.assert_allclose(r.population_radiance[p, i], expected, rtol=1e-12)
    np.testing.assert_allclose(r.radiance, r.population_radiance.sum(axis=0), rtol=1e-14)


def test_linear_in_density(tmp_path):
    a = compute_limb(scen(tmp_path, n0="1e-2"))
    b = compute_limb(scen(tmp_path, n0="3e-2"))
    np.testing.assert_allclose(b.population_radiance[0], 3 * a.population_radiance[0], rtol=1e-12)
    np.testing.assert_allclose(b.population_radiance[1], a.population_radiance[1], rtol=1e-12)


def test_populations_add(tmp_path):
    s = scen(tmp_path)
    both = compute_limb(s)
    for p in range(2):
        raw = dict(s.raw)
        raw["population"] = [s.raw["population"][p]]
        one = compute_limb(scenario_from_dict(raw, base_dir=tmp_path))
        np.testing.assert_allclose(both.population_radiance[p], one.population_radiance[0], rtol=1e-12)


def test_extinction_first_order(tmp_path):
    # With extinction each population's sunlit column is attenuated by exp(-<τ>_p), the mean
    # optical depth <τ>_p = Σ_q C_ext,q K_pq / N_p of its grains (first-order weights K). For a
    # thin layer the relative drop 1 - exp(-<τ>) ≈ <τ> scales linearly with density.
    off = compute_limb(scen(tmp_path, ext="false", n0="1.0"))
    on = compute_limb(scen(tmp_path, ext="true", n0="1.0"))
    on2 = compute_limb(scen(tmp_path, ext="true", n0="2.0"))
    off2 = compute_limb(scen(tmp_path, ext="false", n0="2.0"))
    drop1 = 1 - on.population_radiance[0] / off.population_radiance[0]
    drop2 = 1 - on2.population_radiance[0] / off2.population_radiance[0]
    assert np.all(drop1 > 0)
    # population 0 dominates the extinction, so doubling its density ~doubles the drop
    np.testing.assert_allclose(drop2, 2 * drop1, rtol=0.02)
    k = on.columns.extinction_weight_cm4
    cext = on.extinction_cross_section_um2 * 1e-8
    mean_tau = np.einsum("ql,qw->lw", k[0], cext) / on.columns.sunlit_column_cm2[0][:, None]
    np.testing.assert_allclose(drop1, -np.expm1(-mean_tau), rtol=1e-10)
    # optical depth along the line of sight = Σ C_ext N (full column)
    np.testing.assert_allclose(on.optical_depth, np.einsum("pl,pw->lw", on.columns.column_cm2, cext), rtol=1e-12)
    # zodiacal light comes from behind all the dust on the line of sight: Beer-Lambert exp(-τ)
    np.testing.assert_allclose(on.zodiacal_radiance, off.zodiacal_radiance * np.exp(-on.optical_depth),
                               rtol=1e-12)


def test_extinction_closure_against_exact_attenuation():
    # Exact attenuated column E = ∫ n(s) exp(-C[N_obs(s) + N_sun(s)]) ds over the sunlit ray
    # (Beer-Lambert on both legs), by nested scipy quadrature, for one exponential layer at
    # mean optical depths ~0.3 and ~3. The closure N exp(-<τ>) must be a lower bound (Jensen's
    # inequality, exp convex), positive, and closer to E than the first-order N (1 - <τ>).
    import math

    from scipy import integrate

    from dustrt import geometry as geo
    from dustrt.constants import KM_TO_CM
    from dustrt.density import ExponentialProfile
    from dustrt.los import integrate_columns

    R, H, top = 1737.4, 10.0, 150.0
    obs = geo.observer_position_km(R, 50.0, 0.0, 7.0)  # day side: the whole ray is sunlit
    look = geo.limb_look_directions(obs, R, [5.0])[0]
    res = integrate_columns(obs, look, R, top, [ExponentialProfile(1.0, H)])
    assert np.isnan(float(geo.shadow_cylinder_crossings_km(obs, look[None], R)[0][0]))  # no shadow
    n_lit = float(res.sunlit_column_cm2[0, 0])
    k = float(res.extinction_weight_cm4[0, 0, 0])
    s_end = float(geo.ray_end_distance_km(obs, look[None], R, top)[0][0])
    s_tan = -float(obs @ look)

    def n(p):
        return math.exp(-(math.sqrt(p @ p) - R) / H)

    def n_obs(s):
        return integrate.quad(lambda t: n(obs + t * look), 0.0, s, points=[s_tan] if s > s_tan else None,
                              epsrel=1e-10, limit=200)[0] * KM_TO_CM

    def n_sun(p):
        t_end = -p[0] + math.sqrt((R + top) ** 2 - p[1] ** 2 - p[2] ** 2)
        pts = [-p[0]] if 0 < -p[0] < t_end else None
        return integrate.quad(lambda t: n(p + np.array([t, 0.0, 0.0])), 0.0, t_end, points=pts,
                              epsrel=1e-10, limit=200)[0] * KM_TO_CM

    for target_tau in (0.3, 3.0):
        c = target_tau * n_lit / k  # cm²: gives <τ> = C K / N = target
        exact = integrate.quad(lambda s: n(obs + s * look) * math.exp(-c * (n_obs(s) + n_sun(obs + s * look))),
                               0.0, s_end, points=[s_tan], epsrel=1e-8, limit=200)[0] * KM_TO_CM
        closure = n_lit * math.exp(-target_tau)
        first_order = n_lit * (1 - target_tau)
        # found: <τ> = 0.3: exact 0.750, closure 0.741, first order 0.700 (of N);
        #        <τ> = 3:   exact 0.148, closure 0.050, first order -2.0
        assert 0 < closure <= exact
        assert abs(closure - exact) < abs(first_order - exact)


def test_dataset_contents_and_units(tmp_path):
    s = scen(tmp_path)
    ds = limb_dataset(s)
    for v in ("radiance", "population_radiance", "sunlit_column_cm2", "column_cm2", "optical_depth",
              "solar_irradiance", "zodiacal_radiance"):
        assert "units" in ds[v].attrs and "long_name" in ds[v].attrs, v
    assert ds["radiance"].dims == ("line_of_sight", "wavelength_nm")
    assert ds["population_radiance"].dims == ("population", "line_of_sight", "wavelength_nm")
    for c in ("tangent_altitude_km", "scattering_angle_deg", "look_direction", "terminator_distance_km",
              "observer_position_km"):
        assert c in ds.coords
    np.testing.assert_allclose(ds["tangent_altitude_km"], [0, 5, 15, 30], atol=1e-6)
    assert "[observer]" in ds.attrs["scenario"]
    assert ds.attrs["dustrt_version"]


def test_cli_limb_round_trip_and_demo(tmp_path):
    out = tmp_path / "demo.nc"
    png = tmp_path / "demo.png"
    assert main(["limb", "-o", str(out), "--plot", str(png), "-q"]) == 0
    ds = xr.open_dataset(out, engine="h5netcdf")
    assert ds.sizes["line_of_sight"] == 16
    assert np.all(ds["radiance"].values > 0)
    assert "DEMO" in ds.attrs["scenario"]
    ds.close()
    assert png.stat().st_size > 1000


BAD = [
    ("tangent above observer", "[view]\ntangent_altitudes_km = [0.0, 60.0]", "view.tangent_altitudes_km"),
    ("observer below surface", "[observer]\naltitude_km = -5.0\nlocal_time_h = 6.3", "observer.altitude_km"),
    ("unknown profile", 'density = { profile = "gaussian", surface_density_cm3 = 1e-4 }', "population[1].density.profile"),
]


@pytest.mark.parametrize("label,replacement,key", BAD, ids=[b[0] for b in BAD])
def test_bad_limb_input(tmp_path, capsys, label, replacement, key):
    text = textwrap.dedent(SCEN.replace("EXT", "false").replace("N0", "1e-2"))
    if replacement.startswith("[view]"):
        text = text.replace("[view]\ntangent_altitudes_km = [0.0, 5.0, 15.0, 30.0]", replacement)
    elif replacement.startswith("[observer]"):
        text = text.replace("[observer]\naltitude_km = 50.0\nlocal_time_h = 6.3", replacement)
    else:
        text = text.replace(
            'density = { profile = "terminator", surface_density_cm3 = 1e-4, scale_height_km = 5.0, '
            'sunlit_width_km = 200.0, dark_width_km = 50.0 }', replacement)
    p = tmp_path / "bad.toml"
    p.write_text(text)
    out = tmp_path / "o.nc"
    assert main(["limb", str(p), "-o", str(out)]) == 2
    err = capsys.readouterr().err
    assert key in err and "Traceback" not in err
    assert not out.exists()


def test_nan_in_density_table(tmp_path, capsys):
    (tmp_path / "grid.csv").write_text(
        "altitude_km,terminator_distance_km,density_cm3\n0,-100,1e-3\n0,100,nan\n50,-100,1e-4\n50,100,1e-4\n")
    text = textwrap.dedent(SCEN.replace("EXT", "false").replace("N0", "1e-2")).replace(
        'density = { profile = "terminator", surface_density_cm3 = 1e-4, scale_height_km = 5.0, '
        'sunlit_width_km = 200.0, dark_width_km = 50.0 }', 'density = { profile = "table", file = "grid.csv" }')
    p = tmp_path / "t.toml"
    p.write_text(text)
    assert main(["limb", str(p), "-o", str(tmp_path / "o.nc")]) == 2
    err = capsys.readouterr().err
    assert "grid.csv" in err and "population[1].density" in err
    assert not (tmp_path / "o.nc").exists()


def test_power_law_profile_from_scenario(tmp_path):
    s = scen(tmp_path, extra="")
    text = (tmp_path / "s.toml").read_text().replace(
        'density = { profile = "exponential", surface_density_cm3 = 1e-2, scale_height_km = 10.0 }',
        'density = { profile = "power-law", surface_density_cm3 = 1e-2, reference_altitude_km = 5.0, exponent = 3.0 }')
    (tmp_path / "p.toml").write_text(text)
    prof = load_scenario(tmp_path / "p.toml").populations[0].density
    assert prof.density_cm3(5.0, 0.0) == pytest.approx(1e-2 / 8)
    assert s.populations[0].density.normalisation == 1e-2


def test_solar_occultation_transmission(tmp_path):
    # A view straight at the Sun (look = +x) through the dust layer: its transmission is
    # exp(-τ) with τ = Σ C_ext N (Beer–Lambert law); views that miss the solar disk get NaN.
    # Solar angular radius 0.2666° at 1 AU from the IAU 2015 nominal radius 695,700 km.
    from dustrt.forward import solar_angular_radius_deg

    # asin(695700 / 149597870.7) = 0.266453° (computed); the classical solar semi-diameter 959.63" at 1 AU
    # (Auwers 1891; recalled from memory) agrees to 0.05 %
    assert solar_angular_radius_deg(1.0) == pytest.approx(0.266453, abs=1e-6)
    assert solar_angular_radius_deg(1.0) * 3600 == pytest.approx(959.63, rel=5e-4)
    extra = "\n"
    s = scen(tmp_path, ext="true", n0="1e-1", extra=extra)
    text = (tmp_path / "s.toml").read_text().replace(
        "tangent_altitudes_km = [0.0, 5.0, 15.0, 30.0]\nazimuth_deg = 0.0",
        "directions = [[1.0, 0.0, 0.0], [0.9, -0.43588989, 0.0]]")
    (tmp_path / "d.toml").write_text(text)
    s = load_scenario(tmp_path / "d.toml")
    ds = limb_dataset(s)
    t = ds["solar_transmission"].values
    assert np.all(np.isnan(t[1]))
    np.testing.assert_allclose(t[0], np.exp(-ds["optical_depth"].values[0]), rtol=1e-12)
    assert np.all(t[0] < 1)


def test_reference_density_of_profiles():
    from dustrt.density import ExponentialProfile, TableProfile, reference_density_cm3

    assert reference_density_cm3(ExponentialProfile(3e-4, 10.0)) == 3e-4
    t = TableProfile(np.array([0.0, 10.0]), np.array([-50.0, 50.0]), np.array([[1e-4, 4e-4], [1e-5, 2e-5]]), scale=2.0)
    assert reference_density_cm3(t) == pytest.approx(8e-4)


def test_views_ending_on_the_night_surface(tmp_path):
    # The body blocks the zodiacal light behind a view that ends on the surface; a night-side
    # surface adds only the optional uniform term factor·F/π (a Lambertian surface lit by F·factor).
    text = textwrap.dedent(SCEN.replace("EXT", "false").replace("N0", "1e-2")).replace(
        "[background]\nzodiacal_light = false", "[background]\nzodiacal_light = true\ndark_surface_radiance_factor = 1e-3")
    text = text.replace("local_time_h = 6.3", "local_time_h = 3.0").replace("[0.0, 5.0, 15.0, 30.0]", "[-20.0, 10.0]")
    (tmp_path / "n.toml").write_text(text)
    ds = limb_dataset(load_scenario(tmp_path / "n.toml"))
    assert ds["hits_surface"].values.tolist() == [1, 0]
    np.testing.assert_array_equal(ds["zodiacal_radiance"].values[0], 0.0)
    np.testing.assert_allclose(ds["surface_radiance"].values[0], 1e-3 * ds["solar_irradiance"].values / np.pi, rtol=1e-12)
    assert np.all(ds["zodiacal_radiance"].values[1] > 0)
    np.testing.assert_array_equal(ds["surface_radiance"].values[1], 0.0)
