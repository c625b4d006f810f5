"""Tests of the zodiacal-light background model (dustrt.zodi).

Sources named beside each check:
- Leinert, Ch., et al. (1998), A&AS 127, 1: Table 17 (500 nm brightness),
  Eq. 11 (elongation), Eq. 22 (colour), Table 19 (spectrum at ε = 90°).
- Hahn, Zook, Cooper & Sunkara (2002), Icarus 158, 360: Z ∝ ε^-2.45 inside 30°.
- Leinert, Richter, Pitz & Planck (1981), A&A 103, 177: I ∝ r^-2.3.
- ASTM E-490-00a solar spectrum (shared reference table).
Transcriptions of these values are in shared/reference/CHECK_VALUES.md.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from dustrt import zodi

HERE = Path(__file__).resolve()
PACKAGED_TABLE = HERE.parents[1] / "dustrt" / "data" / "zodiacal_leinert1998_table17.csv"
SOLAR_NAME = "solar_e490_200-1100nm.csv"


def _shared_reference(name: str) -> Path | None:
    """The shared reference file: beside the checkout (CI) or at /work/shared (sessions)."""
    for root in (HERE.parents[2] / "shared", Path("/work/shared")):
        path = root / "reference" / name
        if path.is_file():
            return path
    return None


def _read_csv(path: Path) -> tuple[list[str], np.ndarray]:
    """Column names and values of a CSV whose provenance header lines start with '#'."""
    lines = [line for line in path.read_text().splitlines() if line.strip() and not line.startswith("#")]
    names = lines[0].split(",")
    return names, np.array([[float(cell) for cell in line.split(",")] for line in lines[1:]])


def _e490() -> tuple[np.ndarray, np.ndarray]:
    path = _shared_reference(SOLAR_NAME)
    if path is None:  # fall back to a packaged copy of the same standard table
        path = HERE.parents[1] / "dustrt" / "data" / SOLAR_NAME
    if not path.is_file():
        pytest.skip(f"{SOLAR_NAME} not found beside the checkout")
    names, data = _read_csv(path)
    assert names == ["wavelength_nm", "irradiance_w_m2_nm"]
    return data[:, 0], data[:, 1]


def _ray(elongation_deg, position_angle_deg):
    """Unit look vectors at elongation ε and position angle ψ around the Sun (+x)."""
    e, p = np.radians(elongation_deg), np.radians(position_angle_deg)
    return np.stack([np.cos(e), np.sin(e) * np.cos(p), np.sin(e) * np.sin(p)], axis=-1)


def _z500_along_ray(elongation_deg, position_angle_deg):
    dlon, lat, _ = zodi.ecliptic_coordinates_deg(_ray(elongation_deg, position_angle_deg))
    return zodi.zodiacal_brightness_500nm(dlon, lat)


# --------------------------------------------------------------------------- Table 17


@pytest.mark.parametrize(
    ("dlon_deg", "lat_deg", "table_value"),
    [
        # Leinert et al. (1998) Table 17, units 1e-8 W m-2 sr-1 um-1
        (0.0, 90.0, 77.0),  # ecliptic pole
        (90.0, 0.0, 259.0),
        (180.0, 0.0, 230.0),  # gegenschein
        (15.0, 0.0, 11500.0),  # innermost ecliptic entry
        (10.0, 10.0, 4740.0),
        (0.0, 15.0, 3140.0),
        (45.0, 30.0, 250.0),
        (135.0, 75.0, 73.0),
        (60.0, 60.0, 104.0),
    ],
)
def test_reproduces_table17_nodes(dlon_deg, lat_deg, table_value):
    value = zodi.zodiacal_brightness_500nm(dlon_deg, lat_deg)
    # 1e-8 W m-2 sr-1 um-1 = 1e-11 W m-2 sr-1 nm-1
    assert value == pytest.approx(table_value * 1e-11, rel=1e-9)


def test_ecliptic_pole_in_si_and_s10():
    # Leinert et al. (1998): pole 60 S10 = 77 (1e-8 W m-2 sr-1 um-1); 1 S10 = 1.28e-8 W m-2 sr-1 um-1.
    pole = zodi.zodiacal_brightness_500nm(0.0, 90.0)
    assert pole == pytest.approx(7.7e-10, rel=1e-9)
    # 77 is printed to the unit: 60 S10 within ±0.5/1.28 S10 of rounding
    assert abs(pole / zodi.S10_500NM_W_M2_SR_NM - 60.0) < 0.5 / 1.28


def test_every_tabulated_node_and_folding():
    # All finite cells of the packaged Table 17 (Leinert et al. 1998), parsed here independently,
    # at the four sign combinations of (Δλ, β) that fold onto them.
    names, data = _read_csv(PACKAGED_TABLE)
    lat_nodes = np.array([float(name[1:]) for name in names[1:]])
    values = data[:, 1:]
    i, j = np.nonzero(np.isfinite(values))
    dlon, lat, expected = data[i, 0], lat_nodes[j], values[i, j] * 1e-11
    for sign_lon, sign_lat in [(1, 1), (-1, 1), (1, -1), (-1, -1)]:
        got = zodi.zodiacal_brightness_500nm(sign_lon * dlon, sign_lat * lat)
        np.testing.assert_allclose(got, expected, rtol=1e-9)
    # Δλ and 360° - Δλ are the same direction
    np.testing.assert_allclose(zodi.zodiacal_brightness_500nm(360.0 - dlon, lat), expected, rtol=1e-9)


def test_packaged_table_is_the_shared_reference():
    shared = _shared_reference("zodiacal_leinert1998_table17.csv")
    if shared is None:
        pytest.skip("shared reference folder not beside the checkout")
    # Provenance header kept verbatim: byte-identical copy.
    assert PACKAGED_TABLE.read_bytes() == shared.read_bytes()


# --------------------------------------------------------------------------- toward the Sun


@pytest.mark.parametrize(
    ("dlon_deg", "lat_deg", "axis"),
    [
        (15.0, 0.0, "lon"),  # ecliptic: table starts at Δλ = 15°
        (15.0, 7.0, "lon"),
        (10.0, 12.0, "lon"),  # β in 10–15°: table starts at Δλ = 10°
        (5.0, 15.0, "lat"),  # crossing β = 15° near the Sun
        (12.0, 10.0, "lat"),  # crossing β = 10° between Δλ = 10° and 15°
    ],
)
def test_continuous_across_untabulated_edge(dlon_deg, lat_deg, axis):
    # Edge of the NaN region of Leinert et al. (1998) Table 17: the power-law
    # extension is anchored to the table, so no jump (a step of 1e-7 deg changes
    # a smooth Z by ~2e-8 relative).
    step = 1e-7
    if axis == "lon":
        inside = zodi.zodiacal_brightness_500nm(dlon_deg + step, lat_deg)
        outside = zodi.zodiacal_brightness_500nm(dlon_deg - step, lat_deg)
    else:
        inside = zodi.zodiacal_brightness_500nm(dlon_deg, lat_deg + step)
        outside = zodi.zodiacal_brightness_500nm(dlon_deg, lat_deg - step)
    assert outside == pytest.approx(inside, rel=1e-6)


@pytest.mark.parametrize("lat_deg", [0.0, 3.0, 7.0, 9.99, 10.0, 12.0, 14.99, 15.0, 20.0])
def test_no_jumps_near_the_sun(lat_deg):
    # A dense scan through the tabulated / extended regions. Between samples 0.01° apart
    # |Δ ln Z| ≤ |slope| · Δε / ε: the power law has slope -2.45 (Hahn et al. 2002) and the
    # steepest node-to-node slope of Table 17 within 40° of the Sun is -2.64 (ecliptic,
    # 30–35°; Leinert et al. 1998), so 3.0 bounds a smooth model, while a mis-anchored
    # edge would show up as a jump of tens of per cent in one step.
    dlon = np.arange(0.0, 40.0, 0.01)
    ln_z = np.log(zodi.zodiacal_brightness_500nm(dlon, lat_deg))
    elongation = np.degrees(np.arccos(np.cos(np.radians(dlon)) * np.cos(np.radians(lat_deg))))
    allowed = 3.0 * 0.01 / np.maximum(elongation[:-1], zodi.MIN_ELONGATION_DEG) + 1e-12
    assert np.all(np.abs(np.diff(ln_z)) <= allowed)


@pytest.mark.parametrize("position_angle_deg", [0.0, 30.0, 60.0, 90.0])
def test_small_elongation_power_law(position_angle_deg):
    # Hahn, Zook, Cooper & Sunkara (2002), Icarus 158: Z ∝ ε^-2.45 for ε ≈ 3–30°,
    # applied inside the untabulated region (ε < 14°) along a ray of constant position angle.
    eps = np.array([3.0, 5.0, 8.0, 12.0])
    ln_z = np.log(_z500_along_ray(eps, position_angle_deg))
    slopes = np.diff(ln_z) / np.diff(np.log(eps))
    np.testing.assert_allclose(slopes, -2.45, rtol=1e-9)


def test_interpolation_keeps_table_slope_15_to_30_deg():
    # Leinert et al. (1998) Table 17, ecliptic (β = 0) at Δλ = 15, 20, 25, 30°: the table
    # falls as ε^-2.2 … ε^-2.3 over 15–30° (CHECK_VALUES.md). The interpolant must not invent
    # steeper or shallower local slopes than the table's own node-to-node slopes there.
    nodes_eps = np.array([15.0, 20.0, 25.0, 30.0])
    nodes_z = np.array([11500.0, 6400.0, 3840.0, 2480.0])
    chord = np.diff(np.log(nodes_z)) / np.diff(np.log(nodes_eps))
    overall = np.log(nodes_z[-1] / nodes_z[0]) / np.log(2.0)
    assert -2.3 <= overall <= -2.2

    eps = np.geomspace(15.0, 30.0, 601)
    ln_z = np.log(zodi.zodiacal_brightness_500nm(eps, 0.0))
    local = np.diff(ln_z) / np.diff(np.log(eps))
    assert np.all(local >= chord.min() - 1e-9)
    assert np.all(local <= chord.max() + 1e-9)
    # and the interpolant's mean slope over the range is the table's
    assert (ln_z[-1] - ln_z[0]) / np.log(2.0) == pytest.approx(overall, rel=1e-9)


def test_below_min_elongation_modes():
    eps = np.array([0.0, 0.5, 1.9, 2.0, 5.0])
    dlon = eps  # in the ecliptic Δλ = ε
    clamped = zodi.zodiacal_brightness_500nm(dlon, 0.0)
    np.testing.assert_allclose(clamped[:3], clamped[3], rtol=1e-12)
    nan = zodi.zodiacal_brightness_500nm(dlon, 0.0, below_min_elongation="nan")
    assert np.all(np.isnan(nan[:3]))
    np.testing.assert_array_equal(nan[3:], clamped[3:])
    with pytest.raises(ValueError, match="within 2 deg of the Sun"):
        zodi.zodiacal_brightness_500nm(dlon, 0.0, below_min_elongation="raise")
    assert np.isfinite(zodi.zodiacal_brightness_500nm(dlon[3:], 0.0, below_min_elongation="raise")).all()


# --------------------------------------------------------------------------- distance, colour


def test_heliocentric_distance_scaling():
    # Leinert, Richter, Pitz & Planck (1981), A&A 103, 177: I ∝ r^-2.3
    at_1au = zodi.zodiacal_brightness_500nm(90.0, 0.0)
    at_half = zodi.zodiacal_brightness_500nm(90.0, 0.0, heliocentric_distance_au=0.5)
    assert at_half / at_1au == pytest.approx(0.5**-2.3, rel=1e-12)


@pytest.mark.parametrize(
    ("elongation_deg", "wavelength_nm", "printed"),
    [
        # Leinert et al. (1998) Eq. 22, spot values as printed (3 decimals) in CHECK_VALUES.md
        (90.0, 300.0, 0.800),
        (90.0, 400.0, 0.913),
        (90.0, 700.0, 1.088),
        (90.0, 850.0, 1.138),
        (30.0, 300.0, 0.734),
        (30.0, 850.0, 1.184),
    ],
)
def test_colour_correction_spot_values(elongation_deg, wavelength_nm, printed):
    assert round(float(zodi.zodiacal_colour_correction(wavelength_nm, elongation_deg)), 3) == printed


def test_colour_correction_shape_and_elongation_dependence():
    wavelength = np.array([300.0, 500.0, 850.0])
    elongation = np.array([0.0, 30.0, 60.0, 90.0, 180.0])
    f = zodi.zodiacal_colour_correction(wavelength, elongation)
    assert f.shape == (5, 3)
    np.testing.assert_allclose(f[:, 1], 1.0)  # unity at 500 nm, Eq. 22
    np.testing.assert_allclose(f[0], f[1])  # constant for ε ≤ 30°
    np.testing.assert_allclose(f[4], f[3])  # constant for ε ≥ 90°
    np.testing.assert_allclose(f[2], 0.5 * (f[1] + f[3]))  # linear in ε between
    assert np.ndim(zodi.zodiacal_colour_correction(400.0, 45.0)) == 0


# --------------------------------------------------------------------------- geometry


@pytest.mark.parametrize(
    ("vector", "dlon", "lat", "elong"),
    [
        ((1.0, 0.0, 0.0), 0.0, 0.0, 0.0),  # toward the Sun
        ((0.0, 1.0, 0.0), 90.0, 0.0, 90.0),
        ((0.0, -1.0, 0.0), 90.0, 0.0, 90.0),
        ((0.0, 0.0, 1.0), 0.0, 90.0, 90.0),  # ecliptic north pole
        ((0.0, 0.0, -1.0), 0.0, -90.0, 90.0),
        ((-1.0, 0.0, 0.0), 180.0, 0.0, 180.0),  # antisolar point
        ((1.0, 0.0, 1.0), 0.0, 45.0, 45.0),  # 45° up in the x–z plane, not normalised
    ],
)
def test_ecliptic_coordinates_known_directions(vector, dlon, lat, elong):
    got = zodi.ecliptic_coordinates_deg(vector)
    np.testing.assert_allclose(got, (dlon, lat, elong), atol=1e-12)


def test_ecliptic_coordinates_satisfy_eq11():
    # Leinert et al. (1998) Eq. 11: cos ε = cos Δλ cos β
    rng = np.random.default_rng(11)
    vectors = rng.normal(size=(200, 3))
    dlon, lat, elong = zodi.ecliptic_coordinates_deg(vectors)
    assert dlon.shape == lat.shape == elong.shape == (200,)
    lhs = np.cos(np.radians(elong))
    rhs = np.cos(np.radians(dlon)) * np.cos(np.radians(lat))
    np.testing.assert_allclose(lhs, rhs, atol=1e-12)
    assert dlon.min() >= 0.0 and dlon.max() <= 180.0


def test_symmetries():
    # Table 17 is given folded: east/west of the Sun and north/south of the ecliptic alike.
    wl, f = _e490()
    looks = _ray(np.array([70.0, 70.0]), np.array([20.0, 20.0]))
    looks[1, 1] *= -1.0  # mirror y (dawn/dusk side)
    mirrored_z = looks[0] * np.array([1.0, 1.0, -1.0])
    z = zodi.zodiacal_radiance(np.vstack([looks, mirrored_z]), [400.0, 700.0], wl, f)
    np.testing.assert_allclose(z[1], z[0], rtol=1e-12)
    np.testing.assert_allclose(z[2], z[0], rtol=1e-12)
    assert zodi.zodiacal_radiance([0, 1, 0], 550.0, wl, f) == pytest.approx(
        zodi.zodiacal_radiance([0, -1, 0], 550.0, wl, f), rel=1e-12
    )


# --------------------------------------------------------------------------- spectrum


def test_spectrum_at_90deg_vs_table19():
    # Leinert et al. (1998) Table 19, ε = 90° in the ecliptic, W m-2 sr-1 um-1.
    # Tolerance 15 %: the table prints 2 digits (±2–4 % rounding) and was built
    # from a different, coarser solar spectrum than the 1-nm E-490 used here,
    # whose single samples scatter by ~5–10 % across absorption lines at 400 nm.
    wl, f = _e490()
    wavelength_nm = np.array([400.0, 500.0, 700.0])
    table19 = np.array([2.2e-6, 2.6e-6, 2.0e-6]) * 1e-3  # per um -> per nm
    z = zodi.zodiacal_radiance([0.0, 1.0, 0.0], wavelength_nm, wl, f)
    assert z.shape == (3,)
    np.testing.assert_allclose(z, table19, rtol=0.15)


def test_spectrum_far_ends_vs_table19_with_smoothed_sun():
    # Leinert et al. (1998) Table 19 at 0.3 and 0.9 um (5.3e-7, 1.3e-6 W m-2 sr-1 um-1).
    # Table 19 is a low-resolution spectrum, so the E-490 is boxcar-smoothed over 20 nm
    # here (common practice for comparing resolutions); same 15 % tolerance as above.
    wl, f = _e490()
    grid = np.arange(wl[0], wl[-1], 1.0)
    fine = np.interp(grid, wl, f)
    smooth = np.convolve(fine, np.ones(21) / 21.0, mode="same")
    z = zodi.zodiacal_radiance([0.0, 1.0, 0.0], [300.0, 900.0], grid[20:-20], smooth[20:-20])
    np.testing.assert_allclose(z, np.array([5.3e-7, 1.3e-6]) * 1e-3, rtol=0.15)


def test_zodiacal_light_redder_than_sunlight():
    # Leinert et al. (1998) Sect. on colour (Eq. 22): the zodiacal light is reddened relative to the Sun.
    wl, f = _e490()
    looks = _ray(np.array([20.0, 60.0, 90.0, 150.0]), np.array([0.0, 10.0, 45.0, 80.0]))
    z = zodi.zodiacal_radiance(looks, [400.0, 700.0], wl, f)
    sun = np.interp([400.0, 700.0], wl, f)
    ratio = (z[:, 1] / sun[1]) / (z[:, 0] / sun[0])
    assert np.all(ratio > 1.0)


def test_radiance_shapes_scale_and_normalisation():
    wl, f = _e490()
    looks = _ray(np.array([45.0, 90.0, 120.0]), np.array([0.0, 30.0, 60.0]))
    wavelength = np.linspace(300.0, 800.0, 7)
    z = zodi.zodiacal_radiance(looks, wavelength, wl, f)
    assert z.shape == (3, 7)
    assert zodi.zodiacal_radiance(looks, 500.0, wl, f).shape == (3,)
    np.testing.assert_allclose(zodi.zodiacal_radiance(looks, wavelength, wl, f, scale=2.5), 2.5 * z)
    # At 500 nm f_co = 1, so Z(500) = Z_500 · F(500) / <F>_490-510 (band-average normalisation)
    dlon, lat, _ = zodi.ecliptic_coordinates_deg(looks)
    band = (wl >= 490.0) & (wl <= 510.0)
    x = np.concatenate(([490.0], wl[band], [510.0]))
    mean = np.trapezoid(np.interp(x, wl, f), x) / 20.0
    expected = zodi.zodiacal_brightness_500nm(dlon, lat) * np.interp(500.0, wl, f) / mean
    np.testing.assert_allclose(zodi.zodiacal_radiance(looks, 500.0, wl, f), expected, rtol=1e-12)


# --------------------------------------------------------------------------- validation


@pytest.mark.parametrize(
    ("call", "name"),
    [
        (lambda: zodi.zodiacal_brightness_500nm(400.0, 0.0), "delta_longitude_deg"),
        (lambda: zodi.zodiacal_brightness_500nm(90.0, 91.0), "latitude_deg"),
        (lambda: zodi.zodiacal_brightness_500nm(np.nan, 0.0), "delta_longitude_deg"),
        (lambda: zodi.zodiacal_brightness_500nm(90.0, 0.0, 0.1), "heliocentric_distance_au"),
        (lambda: zodi.zodiacal_brightness_500nm(90.0, 0.0, below_min_elongation="zero"), "below_min_elongation"),
        (lambda: zodi.zodiacal_colour_correction(100.0, 90.0), "wavelength_nm"),
        (lambda: zodi.zodiacal_colour_correction(500.0, -1.0), "elongation_deg"),
        (lambda: zodi.ecliptic_coordinates_deg([0.0, 0.0, 0.0]), "look_directions"),
        (lambda: zodi.ecliptic_coordinates_deg([[1.0, 0.0]]), "look_directions"),
        (lambda: zodi.ecliptic_coordinates_deg([1.0, np.inf, 0.0]), "look_directions"),
        (lambda: zodi.zodiacal_radiance([0, 1, 0], 500.0, [400.0, 450.0], [1.0, 1.0]), "solar_wavelength_nm"),
        (lambda: zodi.zodiacal_radiance([0, 1, 0], 500.0, [480.0, 520.0], [1.0]), "solar_irradiance_w_m2_nm"),
        (lambda: zodi.zodiacal_radiance([0, 1, 0], 500.0, [520.0, 480.0], [1.0, 1.0]), "solar_wavelength_nm"),
        (lambda: zodi.zodiacal_radiance([0, 1, 0], 500.0, [480.0, 520.0], [1.0, -1.0]), "solar_irradiance_w_m2_nm"),
        (lambda: zodi.zodiacal_radiance([0, 1, 0], 600.0, [480.0, 520.0], [1.0, 1.0]), "wavelength_nm"),
        (lambda: zodi.zodiacal_radiance([0, 1, 0], 500.0, [480.0, 520.0], [1.0, 1.0], scale=-1.0), "scale"),
    ],
)
def test_invalid_inputs_raise_naming_the_parameter(call, name):
    with pytest.raises(ValueError, match=name):
        call()
