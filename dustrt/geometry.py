"""Body-centred solar frame: observers, limb lines of sight, altitude, terminator distance, shadow.

Conventions (DESIGN.md, "Geometry"; tests rely on them exactly):

- Origin at the body's centre; +x toward the Sun (sunlight travels along -x as
  parallel rays); +z toward ecliptic north; +y completes a right-handed set, so
  the dusk terminator is at +y and the dawn terminator at -y.
- Observer at altitude h_o, latitude phi, local solar time t [h]: longitude from
  the subsolar meridian lambda = (t - 12) * 15 deg and
  r_o = (R + h_o) (cos phi cos lambda, cos phi sin lambda, sin phi).
- Solar zenith angle of a point p: cos chi = p_x / |p|; terminator distance
  d = R (pi/2 - chi) [km], positive on the sunlit side; altitude h = |p| - R.
- Limb view: r^ = r_o/|r_o|; u_sun = normalised horizontal part of x^ at the
  observer; u_perp = r^ x u_sun; h^ = cos a u_sun + sin a u_perp; depression
  cos delta = (R + h_t)/(R + h_o); look l^ = cos delta h^ - sin delta r^.
  The ray is p(s) = r_o + s l^, s >= 0.
- A point is dark when p_x < 0 and p_y^2 + p_z^2 < R^2 (cylindrical shadow of a
  point Sun).
- Scattering angle: cos theta = l^ . x^ (theta = 0: looking straight at the Sun).

All functions are pure numpy and broadcast over leading axes; points and
directions carry their Cartesian components on the last axis (size 3).
"""

from __future__ import annotations

import numpy as np

__all__ = [
    "observer_position_km",
    "local_time_from_solar_zenith_h",
    "limb_look_directions",
    "scattering_angle_deg",
    "altitude_km",
    "solar_zenith_angle_deg",
    "terminator_distance_km",
    "is_sunlit",
    "tangent_point_km",
    "ray_segment_km",
    "ray_end_distance_km",
    "shadow_cylinder_crossings_km",
]

#: Below this |sin(solar zenith)| the horizontal sunward direction at the observer is undefined.
_SUBSOLAR_SIN_LIMIT = 1e-9


def _check_radius(radius_km: float) -> float:
    radius_km = float(radius_km)
    if not np.isfinite(radius_km) or radius_km <= 0.0:
        raise ValueError(f"radius_km must be finite and > 0, got {radius_km!r}")
    return radius_km


def _as_vectors(name: str, values) -> np.ndarray:
    arr = np.asarray(values, dtype=float)
    if arr.ndim == 0 or arr.shape[-1] != 3:
        raise ValueError(f"{name} must have 3 Cartesian components on its last axis, got shape {arr.shape}")
    if not np.all(np.isfinite(arr)):
        raise ValueError(f"{name} must be finite")
    return arr


def observer_position_km(
    radius_km: float, altitude_km: float, latitude_deg: float = 0.0, local_time_h: float = 12.0
) -> np.ndarray:
    """Observer position in the body-centred solar frame.

    Parameters
    ----------
    radius_km : float
        Body radius R [km], > 0.
    altitude_km : float
        Observer altitude h_o above the surface [km], >= 0.
    latitude_deg : float
        Latitude phi [deg], in [-90, 90].
    local_time_h : float
        Local solar time t [h], in [0, 24]; 12 is the subsolar meridian, 6 dawn, 18 dusk.

    Returns
    -------
    ndarray, shape (3,)
        r_o = (R + h_o)(cos phi cos lambda, cos phi sin lambda, sin phi) [km] with
        lambda = (t - 12) * 15 deg.
    """
    radius_km = _check_radius(radius_km)
    altitude_km = float(altitude_km)
    if not np.isfinite(altitude_km) or altitude_km < 0.0:
        raise ValueError(f"altitude_km must be finite and >= 0 (observer above the surface), got {altitude_km!r}")
    latitude_deg = float(latitude_deg)
    if not -90.0 <= latitude_deg <= 90.0:
        raise ValueError(f"latitude_deg must be in [-90, 90], got {latitude_deg!r}")
    local_time_h = float(local_time_h)
    if not 0.0 <= local_time_h <= 24.0:
        raise ValueError(f"local_time_h must be in [0, 24] h, got {local_time_h!r}")
    lon = np.deg2rad((local_time_h - 12.0) * 15.0)
    lat = np.deg2rad(latitude_deg)
    r = radius_km + altitude_km
    return r * np.array([np.cos(lat) * np.cos(lon), np.cos(lat) * np.sin(lon), np.sin(lat)])


def local_time_from_solar_zenith_h(solar_zenith_deg: float, side: str, latitude_deg: float = 0.0) -> float:
    """Local solar time at which a point of given latitude has the given solar zenith angle.

    Inverts cos chi = cos phi cos lambda with lambda = (t - 12) * 15 deg.

    Parameters
    ----------
    solar_zenith_deg : float
        Solar zenith angle chi [deg], in [0, 180].
    side : {"dawn", "dusk"}
        "dawn" returns t <= 12 (morning side, -y), "dusk" returns t >= 12 (+y).
    latitude_deg : float
        Latitude phi [deg], in (-90, 90).

    Returns
    -------
    float
        Local solar time t [h], in [0, 24].

    Raises
    ------
    ValueError
        If no local time at that latitude has this solar zenith angle
        (|cos chi| > cos phi), or an argument is out of range.
    """
    chi = float(solar_zenith_deg)
    if not 0.0 <= chi <= 180.0:
        raise ValueError(f"solar_zenith_deg must be in [0, 180], got {chi!r}")
    if side not in ("dawn", "dusk"):
        raise ValueError(f"side must be 'dawn' or 'dusk', got {side!r}")
    lat = float(latitude_deg)
    if not -90.0 < lat < 90.0:
        raise ValueError(f"latitude_deg must be in (-90, 90) for a defined local time, got {lat!r}")
    cos_lon = np.cos(np.deg2rad(chi)) / np.cos(np.deg2rad(lat))
    if abs(cos_lon) > 1.0 + 1e-12:
        reachable = (abs(lat), 180.0 - abs(lat))
        raise ValueError(
            f"solar_zenith_deg={chi!r} is never reached at latitude_deg={lat!r}; "
            f"allowed range there is [{reachable[0]:g}, {reachable[1]:g}] deg"
        )
    lon_h = np.rad2deg(np.arccos(np.clip(cos_lon, -1.0, 1.0))) / 15.0
    return float(12.0 - lon_h if side == "dawn" else 12.0 + lon_h)


def limb_look_directions(observer_km, radius_km: float, tangent_altitudes_km, azimuth_deg=0.0) -> np.ndarray:
    """Unit look directions toward given tangent altitudes, DESIGN.md limb construction.

    Parameters
    ----------
    observer_km : array_like, shape (3,)
        Observer position r_o [km].
    radius_km : float
        Body radius R [km].
    tangent_altitudes_km : array_like, shape (n,) or scalar
        Tangent altitudes h_t [km]; each must satisfy -R <= h_t < h_o. Negative
        values point below the limb (the ray meets the surface).
    azimuth_deg : float or array_like broadcastable to (n,)
        Azimuth a [deg] of the look from the horizontal sunward direction u_sun,
        positive toward u_perp = r^ x u_sun.

    Returns
    -------
    ndarray, shape (n, 3)
        Unit vectors l^ = cos delta (cos a u_sun + sin a u_perp) - sin delta r^,
        cos delta = (R + h_t)/(R + h_o).

    Raises
    ------
    ValueError
        At the subsolar or antisolar point (u_sun undefined), or for tangent
        altitudes outside [-R, h_o).
    """
    radius_km = _check_radius(radius_km)
    r_o = _as_vectors("observer_km", observer_km)
    if r_o.shape != (3,):
        raise ValueError(f"observer_km must have shape (3,), got {r_o.shape}")
    r_norm = float(np.linalg.norm(r_o))
    h_o = r_norm - radius_km
    if h_o < 0.0:
        raise ValueError(f"observer_km lies below the surface (altitude {h_o:.6g} km); altitude must be >= 0")
    h_t = np.atleast_1d(np.asarray(tangent_altitudes_km, dtype=float))
    if h_t.ndim != 1:
        raise ValueError(f"tangent_altitudes_km must be a scalar or 1-D array, got shape {h_t.shape}")
    if not np.all(np.isfinite(h_t)) or np.any(h_t >= h_o) or np.any(h_t < -radius_km):
        raise ValueError(
            f"tangent_altitudes_km must lie in [-radius_km, observer altitude) = [{-radius_km:g}, {h_o:.6g}) km, "
            f"got range [{np.min(h_t):.6g}, {np.max(h_t):.6g}]"
        )
    a = np.deg2rad(np.broadcast_to(np.asarray(azimuth_deg, dtype=float), h_t.shape))
    if not np.all(np.isfinite(a)):
        raise ValueError("azimuth_deg must be finite")
    r_hat = r_o / r_norm
    x_hat = np.array([1.0, 0.0, 0.0])
    horiz = x_hat - r_hat[0] * r_hat
    horiz_norm = float(np.linalg.norm(horiz))
    if horiz_norm < _SUBSOLAR_SIN_LIMIT:
        where = "subsolar" if r_hat[0] > 0 else "antisolar"
        raise ValueError(
            f"observer is at the {where} point: the horizontal sunward direction (azimuth origin) is undefined; "
            "move the observer off the Sun-body line (change local_time_h or latitude_deg)"
        )
    u_sun = horiz / horiz_norm
    u_perp = np.cross(r_hat, u_sun)
    cos_d = (radius_km + h_t) / r_norm
    sin_d = np.sqrt(np.clip(1.0 - cos_d**2, 0.0, None))
    h_dir = np.cos(a)[:, None] * u_sun + np.sin(a)[:, None] * u_perp
    looks = cos_d[:, None] * h_dir - sin_d[:, None] * r_hat
    return looks / np.linalg.norm(looks, axis=-1, keepdims=True)


def scattering_angle_deg(look_directions) -> np.ndarray:
    """Scattering angle theta [deg] of sunlight into a look direction: cos theta = l^ . x^.

    theta = 0 means looking straight at the Sun (forward scattering). Directions need
    not be normalised.
    """
    looks = _as_vectors("look_directions", look_directions)
    cos_t = looks[..., 0] / np.linalg.norm(looks, axis=-1)
    return np.rad2deg(np.arccos(np.clip(cos_t, -1.0, 1.0)))


def altitude_km(points, radius_km: float) -> np.ndarray:
    """Altitude h = |p| - R [km] of points p [km]."""
    return np.linalg.norm(_as_vectors("points", points), axis=-1) - _check_radius(radius_km)


def solar_zenith_angle_deg(points) -> np.ndarray:
    """Solar zenith angle chi [deg] of points p [km]: cos chi = p_x / |p|."""
    p = _as_vectors("points", points)
    r = np.linalg.norm(p, axis=-1)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.rad2deg(np.arccos(np.clip(p[..., 0] / r, -1.0, 1.0)))


def terminator_distance_km(points, radius_km: float) -> np.ndarray:
    """Terminator distance d = R (pi/2 - chi) [km] of points p [km]; positive on the sunlit side.

    Computed as R asin(p_x/|p|), which equals R (pi/2 - chi) and is better
    conditioned near the terminator.
    """
    radius_km = _check_radius(radius_km)
    p = _as_vectors("points", points)
    r = np.linalg.norm(p, axis=-1)
    with np.errstate(invalid="ignore", divide="ignore"):
        return radius_km * np.arcsin(np.clip(p[..., 0] / r, -1.0, 1.0))


def is_sunlit(points, radius_km: float) -> np.ndarray:
    """True where a point is sunlit: not (p_x < 0 and p_y^2 + p_z^2 < R^2)."""
    radius_km = _check_radius(radius_km)
    p = _as_vectors("points", points)
    dark = (p[..., 0] < 0.0) & (p[..., 1] ** 2 + p[..., 2] ** 2 < radius_km**2)
    return ~dark


def tangent_point_km(observer_km, look_directions) -> np.ndarray:
    """Closest approach of the ray p(s) = r_o + s l^ (s >= 0) to the body's centre [km].

    If the closest approach of the infinite line lies behind the observer (s < 0),
    the observer itself is returned. Broadcasts observer (3,) or (n, 3) with looks (n, 3).
    """
    r_o = _as_vectors("observer_km", observer_km)
    looks = _as_vectors("look_directions", look_directions)
    looks = looks / np.linalg.norm(looks, axis=-1, keepdims=True)
    s = np.maximum(-np.sum(r_o * looks, axis=-1), 0.0)
    return r_o + s[..., None] * looks


def ray_segment_km(observer_km, look_directions, radius_km: float, top_altitude_km: float):
    """Start and end of the modelled part of each ray, and whether it ends on the surface.

    The modelled region is the shell between the surface (radius R) and the model
    top (radius R + top_altitude_km). The ray starts at the observer, or where it
    enters the top sphere when the observer is above the top; it ends where it meets
    the surface or leaves the top sphere.

    Parameters
    ----------
    observer_km : array_like, shape (3,) or (n, 3)
        Observer positions [km], at or above the surface.
    look_directions : array_like, shape (n, 3)
        Look directions (normalised here).
    radius_km, top_altitude_km : float
        Body radius R [km] and model top altitude [km] (> 0).

    Returns
    -------
    s_start_km, s_end_km : ndarray, shape (n,)
        Ray parameters [km] of the start and end (equal when the ray misses the
        modelled region, which happens only for observers above the top).
    hits_surface : ndarray of bool, shape (n,)
    """
    radius_km = _check_radius(radius_km)
    top = float(top_altitude_km)
    if not np.isfinite(top) or top <= 0.0:
        raise ValueError(f"top_altitude_km must be finite and > 0, got {top_altitude_km!r}")
    r_o = _as_vectors("observer_km", observer_km)
    looks = _as_vectors("look_directions", look_directions)
    looks = looks / np.linalg.norm(looks, axis=-1, keepdims=True)
    r_o, looks = np.broadcast_arrays(r_o, looks)
    b = np.sum(r_o * looks, axis=-1)
    r2 = np.sum(r_o * r_o, axis=-1)
    r_top = radius_km + top
    disc_top = b * b - (r2 - r_top**2)
    root_top = np.sqrt(np.clip(disc_top, 0.0, None))
    inside_top = r2 <= r_top**2
    s_exit = -b + root_top
    s_entry = np.where(inside_top, 0.0, -b - root_top)
    misses = (~inside_top) & ((disc_top <= 0.0) | (s_exit <= 0.0))
    disc_surf = b * b - (r2 - radius_km**2)
    s_hit = -b - np.sqrt(np.clip(disc_surf, 0.0, None))
    hits = (disc_surf > 0.0) & (b < 0.0) & (s_hit >= 0.0) & ~misses
    s_end = np.where(hits, np.minimum(s_hit, s_exit), s_exit)
    s_start = np.where(misses, 0.0, np.maximum(s_entry, 0.0))
    s_end = np.where(misses, 0.0, np.maximum(s_end, s_start))
    return s_start, s_end, hits


def ray_end_distance_km(observer_km, look_directions, radius_km: float, top_altitude_km: float):
    """Distance from the observer to the end of each ray, and whether it ends on the surface.

    Returns ``(s_end_km, hits_surface)``: the ray parameter [km] where the ray meets
    the surface or leaves the sphere of radius R + top_altitude_km (0 for a ray
    that never enters the modelled region). See :func:`ray_segment_km`.
    """
    _, s_end, hits = ray_segment_km(observer_km, look_directions, radius_km, top_altitude_km)
    return s_end, hits


def shadow_cylinder_crossings_km(observer_km, look_directions, radius_km: float):
    """Ray parameters where each ray (s >= 0) enters and leaves the body's shadow.

    The shadow is the half cylinder {p_x < 0, p_y^2 + p_z^2 < R^2}; it is convex, so
    the dark part of a straight ray is a single interval, bounded by the cylinder
    wall and/or the plane x = 0.

    Returns
    -------
    s_enter_km, s_exit_km : ndarray, shape (n,)
        Dark interval [s_enter, s_exit] [km] of each ray, with s_enter = 0 if the
        observer is in shadow and s_exit = inf if the ray never leaves it; NaN for
        rays that never enter the shadow. Surface and model top are not applied.
    """
    radius_km = _check_radius(radius_km)
    r_o = _as_vectors("observer_km", observer_km)
    looks = _as_vectors("look_directions", look_directions)
    looks = looks / np.linalg.norm(looks, axis=-1, keepdims=True)
    r_o, looks = np.broadcast_arrays(r_o, looks)
    shape = r_o.shape[:-1]
    lo = np.zeros(shape)
    hi = np.full(shape, np.inf)
    # Cylinder wall: |q_o + s q_l|^2 < R^2 with q = (y, z).
    qa = looks[..., 1] ** 2 + looks[..., 2] ** 2
    qb = r_o[..., 1] * looks[..., 1] + r_o[..., 2] * looks[..., 2]
    qc = r_o[..., 1] ** 2 + r_o[..., 2] ** 2 - radius_km**2
    with np.errstate(divide="ignore", invalid="ignore"):
        disc = qb * qb - qa * qc
        root = np.sqrt(np.clip(disc, 0.0, None))
        parallel = qa <= 1e-300
        s1 = np.where(parallel, np.where(qc < 0.0, -np.inf, np.inf), (-qb - root) / qa)
        s2 = np.where(parallel, np.where(qc < 0.0, np.inf, -np.inf), (-qb + root) / qa)
        no_wall = ~parallel & (disc <= 0.0)
        lo = np.maximum(lo, s1)
        hi = np.minimum(hi, s2)
        # Half space x < 0: x_o + s l_x < 0.
        lx = looks[..., 0]
        xo = r_o[..., 0]
        s_plane = -xo / lx
        lo = np.where(lx < 0.0, np.maximum(lo, s_plane), lo)
        hi = np.where(lx > 0.0, np.minimum(hi, s_plane), hi)
        never_x = (lx == 0.0) & (xo >= 0.0)
    empty = no_wall | never_x | ~(hi > lo)
    return np.where(empty, np.nan, lo), np.where(empty, np.nan, hi)
