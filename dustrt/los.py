"""Line-of-sight integrator: columns, sunlit columns and first-order extinction weights.

For each ray p(s) = r_o + s l^ (s >= 0; geometry conventions in :mod:`dustrt.geometry`)
and each density population p this computes

- ``column_cm2[p, L]``        = int n_p ds (shadow ignored),
- ``sunlit_column_cm2[p, L]`` = int n_p V ds, V = 1 where sunlit (cylindrical shadow),
- ``extinction_weight_cm4[p, q, L]`` = int n_p V (N_q^sun + N_q^obs) ds, with
  N_q^obs(s) the column of q between the ray start and the point, and N_q^sun(s)
  the column of q from the point toward the Sun (+x) to the model top.

With C_sca, C_ext in um^2 the single-scattering radiance of population p is then
L_p ~ C_sca,p [N_p^lit - sum_q C_ext,q 1e-8 K_pq]: the first-order expansion of
exp(-tau_sun - tau_obs) for tau << 1 (DESIGN.md, "Data flow").

The modelled region is the shell between the surface and the sphere of radius
R + top_altitude_km. A ray ends where it meets the surface or leaves the top; an
observer above the top sees the ray start where it enters the top sphere.

Accuracy: adaptive Gauss-Kronrod 7-15 quadrature (see dustrt._los_kernels) until,
for every population, the summed |Kronrod - Gauss| panel error estimate is below
``relative_tolerance`` times the ray's column, and the sunlit part's error below
``relative_tolerance`` times max(sunlit column, 1e-6 x column). The |K15 - G7|
estimate is conservative for smooth integrands; the tests measure the achieved
accuracy against analytic columns and brute-force quadrature.

The extinction weights aim at max(``relative_tolerance``, 1e-6) relative to each K_pq:
the sunward columns are sampled on a few pieces of each ray and interpolated, the pieces
refined on an error estimate weighted by n_p (dustrt._los_kernels). With the default
1e-4 they come out within ~1e-7 to ~7e-5 of tight-tolerance and brute-force values
(tests/test_los.py, validation/bench_columns.py), ample for a first-order correction.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Sequence

import numpy as np

from . import warn
from .density import (
    KIND_TABLE,
    KIND_TERMINATOR,
    ExponentialProfile,
    PowerLawProfile,
    TableProfile,
    TerminatorProfile,
    pack_profiles,
)

__all__ = ["ColumnResult", "integrate_columns", "KM_TO_CM"]

#: 1 km in cm.
KM_TO_CM = 1.0e5
#: Sunlit columns below this fraction of the ray's total column are converged in absolute terms.
SUNLIT_FLOOR_FRACTION = 1e-6
#: The extinction weights only enter a first-order correction; never ask them for more than this.
_EXTINCTION_TOLERANCE_FLOOR = 1e-6
_TOLERANCE_RANGE = (1e-10, 1e-1)
#: Looks whose norm differs from 1 by more than this are rejected rather than renormalised.
_UNIT_SLACK = 1e-6
_PROFILE_TYPES = (ExponentialProfile, PowerLawProfile, TerminatorProfile, TableProfile)


@dataclasses.dataclass(frozen=True, eq=False)
class ColumnResult:
    """Per-ray, per-population line-of-sight integrals (P populations, L rays).

    Attributes
    ----------
    column_cm2 : ndarray, shape (P, L)
        int n_p ds [cm^-2], shadow ignored.
    sunlit_column_cm2 : ndarray, shape (P, L)
        int n_p V ds [cm^-2] over the sunlit part of the ray.
    extinction_weight_cm4 : ndarray, shape (P, P, L)
        K_pq = int n_p V (N_q^sun + N_q^obs) ds [cm^-4]; zeros when
        ``extinction_included`` is False.
    extinction_weight_sun_cm4, extinction_weight_observer_cm4 : ndarray, shape (P, P, L)
        The N_q^sun and N_q^obs parts of K_pq [cm^-4].
    extinction_included : bool
        Whether the extinction weights were computed.
    path_length_km : ndarray, shape (L,)
        Length of the modelled part of the ray [km] (0 if it misses the model region).
    hits_surface : ndarray of bool, shape (L,)
        True where the ray ends on the surface.
    tangent_altitude_km : ndarray, shape (L,)
        Minimum altitude along the traversed segment [km] (0 for surface hits; for a
        ray that misses the model region, the altitude of its closest approach).
    tangent_terminator_distance_km : ndarray, shape (L,)
        Terminator distance of that point [km], positive on the sunlit side.
    scattering_angle_deg : ndarray, shape (L,)
        cos theta = l^ . x^ [deg].
    converged : ndarray of bool, shape (L,)
        False where the quadrature hit its panel limit before the tolerance.
    relative_tolerance : float
        The requested relative tolerance.
    """

    column_cm2: np.ndarray
    sunlit_column_cm2: np.ndarray
    extinction_weight_cm4: np.ndarray
    extinction_weight_sun_cm4: np.ndarray
    extinction_weight_observer_cm4: np.ndarray
    extinction_included: bool
    path_length_km: np.ndarray
    hits_surface: np.ndarray
    tangent_altitude_km: np.ndarray
    tangent_terminator_distance_km: np.ndarray
    scattering_angle_deg: np.ndarray
    converged: np.ndarray
    relative_tolerance: float

    @property
    def n_populations(self) -> int:
        """Number of density populations P."""
        return self.column_cm2.shape[0]

    @property
    def n_rays(self) -> int:
        """Number of rays L."""
        return self.column_cm2.shape[1]


def _as_rays(name: str, values) -> np.ndarray:
    arr = np.asarray(values, dtype=float)
    if arr.ndim == 1:
        arr = arr[None, :]
    if arr.ndim != 2 or arr.shape[1] != 3:
        raise ValueError(f"{name} must have shape (3,) or (n, 3), got {np.shape(values)}")
    if not np.all(np.isfinite(arr)):
        raise ValueError(f"{name} must be finite")
    return arr


def _as_profiles(profiles) -> list:
    if isinstance(profiles, _PROFILE_TYPES):
        profiles = [profiles]
    if not isinstance(profiles, Sequence) or isinstance(profiles, (str, bytes)) or len(profiles) == 0:
        raise ValueError("profiles must be a density profile or a non-empty sequence of them")
    for k, prof in enumerate(profiles):
        if not isinstance(prof, _PROFILE_TYPES):
            raise ValueError(
                f"profiles[{k}] is a {type(prof).__name__}; expected one of "
                f"{', '.join(t.__name__ for t in _PROFILE_TYPES)}"
            )
    return list(profiles)


def integrate_columns(
    observer_km,
    look_directions,
    radius_km: float,
    top_altitude_km: float,
    profiles,
    relative_tolerance: float = 1e-4,
    extinction: bool = True,
) -> ColumnResult:
    """Integrate density populations along many lines of sight.

    Parameters
    ----------
    observer_km : array_like, shape (3,) or (L, 3)
        Observer position(s) [km] in the body-centred solar frame, at or above the
        surface; one shared by all rays or one per ray.
    look_directions : array_like, shape (3,) or (L, 3)
        Unit look directions (norms within 1e-6 of 1 are renormalised; others rejected).
    radius_km : float
        Body radius R [km], > 0.
    top_altitude_km : float
        Model top [km], > 0: densities above it are ignored.
    profiles : profile or sequence of profiles
        Density populations (:mod:`dustrt.density`), P of them.
    relative_tolerance : float
        Target relative accuracy of each column, in [1e-10, 0.1]; the extinction
        weights aim at max(relative_tolerance, 1e-6).
    extinction : bool
        Also compute the first-order extinction weights (about 10x the time of the
        columns alone).

    Returns
    -------
    ColumnResult

    Raises
    ------
    ValueError
        For observers below the surface, non-unit or non-finite look directions,
        mismatched ray counts, tolerance or radii out of range, or unknown profiles.
    """
    from ._los_kernels import integrate_rays_kernel  # lazy: importing dustrt.los compiles nothing

    radius_km = float(radius_km)
    if not np.isfinite(radius_km) or radius_km <= 0.0:
        raise ValueError(f"radius_km must be finite and > 0, got {radius_km!r}")
    top = float(top_altitude_km)
    if not np.isfinite(top) or top <= 0.0:
        raise ValueError(f"top_altitude_km must be finite and > 0, got {top_altitude_km!r}")
    tol = float(relative_tolerance)
    if not _TOLERANCE_RANGE[0] <= tol <= _TOLERANCE_RANGE[1]:
        raise ValueError(
            f"relative_tolerance must be in [{_TOLERANCE_RANGE[0]:g}, {_TOLERANCE_RANGE[1]:g}], got {relative_tolerance!r}"
        )
    observers = _as_rays("observer_km", observer_km)
    looks = _as_rays("look_directions", look_directions)
    n_rays = max(observers.shape[0], looks.shape[0])
    for name, arr in (("observer_km", observers), ("look_directions", looks)):
        if arr.shape[0] not in (1, n_rays):
            raise ValueError(
                f"observer_km and look_directions must describe the same number of rays "
                f"(or one shared observer); got {observers.shape[0]} and {looks.shape[0]}"
            )
    norms = np.linalg.norm(looks, axis=1)
    bad = np.abs(norms - 1.0) > _UNIT_SLACK
    if np.any(bad):
        k = int(np.argmax(bad))
        raise ValueError(
            f"look_directions must be unit vectors (|norm - 1| <= {_UNIT_SLACK:g}); row {k} has norm {norms[k]:.9g}"
        )
    looks = looks / norms[:, None]
    alt = np.linalg.norm(observers, axis=1) - radius_km
    if np.any(alt < 0.0):
        k = int(np.argmin(alt))
        raise ValueError(f"observer_km must be at or above the surface; row {k} is at altitude {alt[k]:.6g} km")
    # fresh writable C arrays: one kernel signature whatever the caller passed (read-only
    # or broadcast views would each compile a new specialisation)
    observers = np.array(np.broadcast_to(observers, (n_rays, 3)), dtype=np.float64, order="C")
    looks = np.array(np.broadcast_to(looks, (n_rays, 3)), dtype=np.float64, order="C")

    profiles = _as_profiles(profiles)
    packed = pack_profiles(profiles)
    n_pop = len(profiles)
    # work-array sizes: every break point a ray can collect, plus room to bisect
    max_breaks = 8
    for k in range(n_pop):
        if packed.kinds[k] == KIND_TABLE:
            max_breaks += 2 * int(packed.table_index[k, 1] + packed.table_index[k, 3])
        elif packed.kinds[k] == KIND_TERMINATOR:
            max_breaks += 2
    max_panels = max_breaks + 4000

    column = np.zeros((n_pop, n_rays))
    sunlit = np.zeros((n_pop, n_rays))
    k_sun = np.zeros((n_pop, n_pop, n_rays))
    k_obs = np.zeros((n_pop, n_pop, n_rays))
    path = np.zeros(n_rays)
    hits = np.zeros(n_rays, dtype=np.bool_)
    tan_alt = np.zeros(n_rays)
    tan_dist = np.zeros(n_rays)
    converged = np.ones(n_rays, dtype=np.bool_)
    integrate_rays_kernel(
        observers, looks, radius_km, top,
        packed.kinds, packed.params, packed.table_index,
        packed.table_altitude_km, packed.table_distance_km, packed.table_density_cm3,
        tol, max(tol, _EXTINCTION_TOLERANCE_FLOOR), SUNLIT_FLOOR_FRACTION, bool(extinction),
        max_panels, max_breaks,
        column, sunlit, k_sun, k_obs, path, hits, tan_alt, tan_dist, converged,
    )  # fmt: skip
    if not np.all(converged):
        warn(
            f"line-of-sight quadrature did not reach relative_tolerance={tol:g} on "
            f"{int(np.sum(~converged))} of {n_rays} rays (panel limit); results there are less accurate"
        )
    k_sun *= KM_TO_CM**2
    k_obs *= KM_TO_CM**2
    cos_t = np.clip(looks[:, 0], -1.0, 1.0)
    return ColumnResult(
        column_cm2=column * KM_TO_CM,
        sunlit_column_cm2=sunlit * KM_TO_CM,
        extinction_weight_cm4=k_sun + k_obs,
        extinction_weight_sun_cm4=k_sun,
        extinction_weight_observer_cm4=k_obs,
        extinction_included=bool(extinction),
        path_length_km=path,
        hits_surface=hits,
        tangent_altitude_km=tan_alt,
        tangent_terminator_distance_km=tan_dist,
        scattering_angle_deg=np.rad2deg(np.arccos(cos_t)),
        converged=converged,
        relative_tolerance=tol,
    )
