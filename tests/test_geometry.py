"""Tests for dustrt.geometry: frame conventions (DESIGN.md "Geometry"), limb views, shadow."""

import numpy as np
import pytest

from dustrt import geometry as geo

R_MOON_KM = 1737.4  # IAU mean lunar radius (CHECK_VALUES.md "Sun, Moon")


# --- observer position -------------------------------------------------------------


@pytest.mark.parametrize(
    "local_time_h, expected_unit",
    [
        (12.0, (1.0, 0.0, 0.0)),  # subsolar meridian: +x toward the Sun
        (18.0, (0.0, 1.0, 0.0)),  # dusk terminator at +y (DESIGN.md)
        (6.0, (0.0, -1.0, 0.0)),  # dawn terminator at -y
        (0.0, (-1.0, 0.0, 0.0)),  # midnight
        (24.0, (-1.0, 0.0, 0.0)),
    ],
)
def test_observer_position_known_local_times(local_time_h, expected_unit):
    pos = geo.observer_position_km(R_MOON_KM, 50.0, 0.0, local_time_h)
    np.testing.assert_allclose(pos, (R_MOON_KM + 50.0) * np.array(expected_unit), atol=1e-9)


def test_observer_position_latitude_and_formula():
    # DESIGN.md: r_o = (R+h)(cos phi cos lambda, cos phi sin lambda, sin phi), lambda = (t-12) 15 deg
    pos = geo.observer_position_km(R_MOON_KM, 100.0, 30.0, 9.0)
    r = R_MOON_KM + 100.0
    lam = np.deg2rad(-45.0)
    phi = np.deg2rad(30.0)
    np.testing.assert_allclose(pos, r * np.array([np.cos(phi) * np.cos(lam), np.cos(phi) * np.sin(lam), np.sin(phi)]))
    np.testing.assert_allclose(geo.observer_position_km(R_MOON_KM, 0.0, 90.0, 3.0), [0, 0, R_MOON_KM], atol=1e-9)


@pytest.mark.parametrize(
    "kwargs, match",
    [
        (dict(radius_km=-1.0, altitude_km=10.0), "radius_km"),
        (dict(radius_km=R_MOON_KM, altitude_km=-1.0), "altitude_km"),
        (dict(radius_km=R_MOON_KM, altitude_km=10.0, latitude_deg=91.0), "latitude_deg"),
        (dict(radius_km=R_MOON_KM, altitude_km=10.0, local_time_h=25.0), "local_time_h"),
        (dict(radius_km=R_MOON_KM, altitude_km=float("nan")), "altitude_km"),
    ],
)
def test_observer_position_rejects(kwargs, match):
    with pytest.raises(ValueError, match=match):
        geo.observer_position_km(**kwargs)


# --- local time from solar zenith angle -------------------------------------------------


def test_local_time_from_solar_zenith_terminator():
    assert geo.local_time_from_solar_zenith_h(90.0, "dawn") == pytest.approx(6.0)
    assert geo.local_time_from_solar_zenith_h(90.0, "dusk") == pytest.approx(18.0)
    assert geo.local_time_from_solar_zenith_h(0.0, "dusk") == pytest.approx(12.0)


@pytest.mark.parametrize("side", ["dawn", "dusk"])
def test_local_time_from_solar_zenith_round_trip(side):
    t = geo.local_time_from_solar_zenith_h(70.0, side, latitude_deg=30.0)
    assert (t < 12.0) if side == "dawn" else (t > 12.0)
    pos = geo.observer_position_km(R_MOON_KM, 0.0, 30.0, t)
    assert geo.solar_zenith_angle_deg(pos) == pytest.approx(70.0, abs=1e-9)


def test_local_time_from_solar_zenith_no_solution():
    # at latitude 60 deg the solar zenith angle is always >= 60 deg (cos chi = cos phi cos lambda)
    with pytest.raises(ValueError, match="never reached"):
        geo.local_time_from_solar_zenith_h(20.0, "dawn", latitude_deg=60.0)
    with pytest.raises(ValueError, match="side"):
        geo.local_time_from_solar_zenith_h(20.0, "noon")


# --- limb look directions -------------------------------------------------------------


@pytest.mark.parametrize("altitude_km, distance_km, depression_deg", [(20.0, 264.38, 8.652), (50.0, 419.81, 13.584)])
def test_limb_distance_and_depression(altitude_km, distance_km, depression_deg):
    # CHECK_VALUES.md "Sun, Moon": distance sqrt((R+h)^2 - R^2) and depression arccos(R/(R+h))
    # to the limb (tangent altitude 0), printed to 0.01 km and 0.001 deg.
    obs = geo.observer_position_km(R_MOON_KM, altitude_km, 0.0, 8.0)
    look = geo.limb_look_directions(obs, R_MOON_KM, [0.0], azimuth_deg=30.0)
    tangent = geo.tangent_point_km(obs, look)[0]
    assert np.linalg.norm(tangent - obs) == pytest.approx(distance_km, abs=0.005)
    r_hat = obs / np.linalg.norm(obs)
    depression = np.rad2deg(np.arcsin(-look[0] @ r_hat))
    assert depression == pytest.approx(depression_deg, abs=0.0005)


def test_tangent_point_is_at_requested_altitude():
    rng = np.random.default_rng(1)
    for _ in range(20):
        lat = rng.uniform(-80, 80)
        t = rng.uniform(0.5, 11.5) if rng.random() < 0.5 else rng.uniform(12.5, 23.5)
        h_o = rng.uniform(10, 300)
        obs = geo.observer_position_km(R_MOON_KM, h_o, lat, t)
        h_t = rng.uniform(-0.5 * h_o, 0.99 * h_o, size=5)
        looks = geo.limb_look_directions(obs, R_MOON_KM, h_t, azimuth_deg=rng.uniform(-180, 180))
        np.testing.assert_allclose(np.linalg.norm(looks, axis=1), 1.0, rtol=1e-14)
        tangent = geo.tangent_point_km(obs, looks)
        np.testing.assert_allclose(geo.altitude_km(tangent, R_MOON_KM), h_t, atol=1e-8)


def test_look_direction_construction():
    # DESIGN.md: h = cos a u_sun + sin a u_perp, u_perp = r x u_sun; l = cos d h - sin d r
    obs = geo.observer_position_km(R_MOON_KM, 100.0, 20.0, 15.0)
    a = 35.0
    look = geo.limb_look_directions(obs, R_MOON_KM, [40.0], azimuth_deg=a)[0]
    r_hat = obs / np.linalg.norm(obs)
    u_sun = np.array([1.0, 0, 0]) - r_hat[0] * r_hat
    u_sun /= np.linalg.norm(u_sun)
    u_perp = np.cross(r_hat, u_sun)
    cos_d = (R_MOON_KM + 40.0) / (R_MOON_KM + 100.0)
    assert look @ r_hat == pytest.approx(-np.sqrt(1 - cos_d**2))
    assert np.degrees(np.arctan2(look @ u_perp, look @ u_sun)) == pytest.approx(a)


def test_scattering_angle_at_terminators():
    # Observer on the dawn terminator (t = 6 h, r_o along -y): u_sun = +x, so azimuth 0
    # looks toward the Sun tilted down by the depression: theta = delta.
    h_o, h_t = 50.0, 10.0
    delta = np.rad2deg(np.arccos((R_MOON_KM + h_t) / (R_MOON_KM + h_o)))
    for t in (6.0, 18.0):
        obs = geo.observer_position_km(R_MOON_KM, h_o, 0.0, t)
        looks = geo.limb_look_directions(obs, R_MOON_KM, [h_t, h_t, h_t], azimuth_deg=[0.0, 180.0, 90.0])
        np.testing.assert_allclose(geo.scattering_angle_deg(looks), [delta, 180.0 - delta, 90.0], atol=1e-9)
    # u_perp = r^ x u_sun = (-y) x (+x) = +z at dawn: azimuth 90 looks north, tilted down (+y)
    obs = geo.observer_position_km(R_MOON_KM, h_o, 0.0, 6.0)
    look = geo.limb_look_directions(obs, R_MOON_KM, [h_t], azimuth_deg=90.0)[0]
    d = np.deg2rad(delta)
    np.testing.assert_allclose(look, [0.0, np.sin(d), np.cos(d)], atol=1e-12)


@pytest.mark.parametrize("local_time_h", [12.0, 0.0])
def test_limb_look_undefined_at_subsolar_and_antisolar(local_time_h):
    obs = geo.observer_position_km(R_MOON_KM, 50.0, 0.0, local_time_h)
    with pytest.raises(ValueError, match="subsolar|antisolar"):
        geo.limb_look_directions(obs, R_MOON_KM, [10.0])


def test_limb_look_rejects_bad_tangent_altitudes():
    obs = geo.observer_position_km(R_MOON_KM, 50.0, 0.0, 8.0)
    with pytest.raises(ValueError, match="tangent_altitudes_km"):
        geo.limb_look_directions(obs, R_MOON_KM, [50.0])
    with pytest.raises(ValueError, match="tangent_altitudes_km"):
        geo.limb_look_directions(obs, R_MOON_KM, [-R_MOON_KM - 1.0])
    with pytest.raises(ValueError, match="below the surface"):
        geo.limb_look_directions(obs * 0.5, R_MOON_KM, [0.0])


# --- point properties -----------------------------------------------------------------


def test_terminator_distance_and_zenith_sign_conventions():
    pts = np.array(
        [
            [R_MOON_KM, 0, 0],  # subsolar
            [0, R_MOON_KM, 0],  # dusk terminator
            [0, -R_MOON_KM, 0],  # dawn terminator
            [-R_MOON_KM, 0, 0],  # antisolar
            geo.observer_position_km(R_MOON_KM, 0.0, 0.0, 7.0),  # sunlit, 15 deg from the terminator
            geo.observer_position_km(R_MOON_KM, 0.0, 0.0, 5.0),  # dark, 15 deg past it
        ]
    )
    d = geo.terminator_distance_km(pts, R_MOON_KM)
    arc = R_MOON_KM * np.deg2rad(15.0)
    np.testing.assert_allclose(d, [np.pi / 2 * R_MOON_KM, 0, 0, -np.pi / 2 * R_MOON_KM, arc, -arc], atol=1e-9)
    np.testing.assert_allclose(geo.solar_zenith_angle_deg(pts), [0, 90, 90, 180, 75, 105], atol=1e-9)
    # d = R (pi/2 - chi) by definition
    np.testing.assert_allclose(d, R_MOON_KM * np.deg2rad(90.0 - geo.solar_zenith_angle_deg(pts)), atol=1e-9)


def test_is_sunlit_cylindrical_shadow():
    r = R_MOON_KM
    pts = np.array(
        [
            [-2 * r, 0.0, 0.0],  # behind the body on the axis: dark
            [-2 * r, 0.99 * r, 0.0],  # inside the cylinder: dark
            [-2 * r, 0.0, 1.01 * r],  # outside the cylinder: lit
            [-0.1, 0.5 * r, 0.5 * r],  # just behind x = 0 inside: dark
            [0.0, 0.5 * r, 0.5 * r],  # x = 0 plane: lit (dark needs x < 0)
            [1.5 * r, 0.0, 0.0],  # day side
        ]
    )
    np.testing.assert_array_equal(geo.is_sunlit(pts, r), [False, False, True, False, True, True])


def test_tangent_point_behind_observer_is_observer():
    obs = np.array([0.0, -2000.0, 0.0])
    look = np.array([[0.0, -1.0, 0.0]])  # looking away from the body
    np.testing.assert_allclose(geo.tangent_point_km(obs, look)[0], obs)


# --- ray segments -------------------------------------------------------------------


def test_ray_end_distance_limb_and_surface():
    # Analytic chord lengths along a line with closest-approach radius r_t:
    # distance to radius q is sqrt(r_o^2 - r_t^2) +- sqrt(q^2 - r_t^2).
    h_o, top = 100.0, 150.0
    r_o, r_top = R_MOON_KM + h_o, R_MOON_KM + top
    obs = geo.observer_position_km(R_MOON_KM, h_o, 0.0, 8.0)
    h_t = np.array([30.0, -20.0])
    looks = geo.limb_look_directions(obs, R_MOON_KM, h_t)
    s_end, hits = geo.ray_end_distance_km(obs, looks, R_MOON_KM, top)
    r_t = R_MOON_KM + h_t
    np.testing.assert_array_equal(hits, [False, True])
    assert s_end[0] == pytest.approx(np.sqrt(r_o**2 - r_t[0] ** 2) + np.sqrt(r_top**2 - r_t[0] ** 2), rel=1e-12)
    assert s_end[1] == pytest.approx(np.sqrt(r_o**2 - r_t[1] ** 2) - np.sqrt(R_MOON_KM**2 - r_t[1] ** 2), rel=1e-12)


def test_ray_segment_observer_above_top():
    h_o, top = 500.0, 100.0
    r_o, r_top = R_MOON_KM + h_o, R_MOON_KM + top
    obs = geo.observer_position_km(R_MOON_KM, h_o, 0.0, 9.0)
    looks = geo.limb_look_directions(obs, R_MOON_KM, [40.0, 200.0])
    s0, s1, hits = geo.ray_segment_km(obs, looks, R_MOON_KM, top)
    r_t = R_MOON_KM + 40.0
    assert s0[0] == pytest.approx(np.sqrt(r_o**2 - r_t**2) - np.sqrt(r_top**2 - r_t**2), rel=1e-12)
    assert s1[0] == pytest.approx(np.sqrt(r_o**2 - r_t**2) + np.sqrt(r_top**2 - r_t**2), rel=1e-12)
    assert s0[1] == s1[1] == 0.0  # tangent above the top: misses the modelled region
    assert not hits.any()


def test_shadow_crossings_match_equatorial_plane_intervals():
    # In the equatorial plane (z = 0, l_z = 0) the shadow condition x < 0 and |y| < R is
    # linear in s, so the dark interval follows from three half-lines (independent check).
    rng = np.random.default_rng(7)
    for _ in range(30):
        obs = geo.observer_position_km(R_MOON_KM, rng.uniform(20, 400), 0.0, rng.uniform(0.5, 11.5))
        az = rng.choice([0.0, 180.0])
        look = geo.limb_look_directions(obs, R_MOON_KM, [rng.uniform(-10, 15)], azimuth_deg=az)
        lo, hi = 0.0, np.inf
        x0, y0 = obs[0], obs[1]
        lx, ly = look[0, 0], look[0, 1]
        for a, b in ((x0, lx), (y0 - R_MOON_KM, ly), (-(y0 + R_MOON_KM), -ly)):  # need a + b s < 0
            if b > 0:
                hi = min(hi, -a / b)
            elif b < 0:
                lo = max(lo, -a / b)
            elif a >= 0:
                lo, hi = 1.0, 0.0
        s_in, s_out = geo.shadow_cylinder_crossings_km(obs, look, R_MOON_KM)
        if hi > lo:
            assert s_in[0] == pytest.approx(lo, abs=1e-9)
            assert s_out[0] == pytest.approx(hi, abs=1e-9)
        else:
            assert np.isnan(s_in[0]) and np.isnan(s_out[0])
        # midpoints of the reported interval really are dark, just outside are lit
        if not np.isnan(s_in[0]) and np.isfinite(s_out[0]):
            mid = obs + 0.5 * (s_in[0] + s_out[0]) * look[0]
            assert not geo.is_sunlit(mid, R_MOON_KM)
            after = obs + (s_out[0] + 1e-3) * look[0]
            assert geo.is_sunlit(after, R_MOON_KM)
