"""Forward model: optics × sunlit columns → limb radiance; scenario → xarray Dataset.

DESIGN.md's one idea: along a straight ray in parallel sunlight the scattering
angle is constant, so the radiance of population p splits into

    L_p(λ) = F(λ)/d² · C_sca,p(λ)·1e-8 · P_p(θ, λ)/4π · [N_p^lit − Σ_q C_ext,q(λ)·1e-8 · K_pq]

with N^lit the sunlit column [cm⁻²] and K_pq the first-order extinction
weights [cm⁻⁴] from :mod:`dustrt.los` (the bracket is the first-order
expansion of the attenuation exp(−τ_sun − τ_obs) along both legs of the light
path, valid for τ ≪ 1).  Columns depend only on geometry and density, optics
only on grains, so each can be re-used while the other is swept.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from dustrt import warn
from dustrt.constants import AU_KM, SOLAR_RADIUS_KM, UM2_TO_CM2

#: Optical depth above which the first-order extinction expansion is poor.
FIRST_ORDER_TAU_LIMIT = 0.1


@dataclass(frozen=True)
class LimbGeometry:
    """Observer(s) and lines of sight in the body-centred solar frame."""

    observer_km: np.ndarray  # (3,) or (L, 3)
    look_direction: np.ndarray  # (L, 3)
    nominal_tangent_altitude_km: np.ndarray  # (L,) requested (NaN for explicit directions)


def scenario_geometry(scenario) -> LimbGeometry:
    """The observer position and look directions the scenario asks for."""
    from dustrt import geometry

    scenario.require("limb")
    ob = scenario.observer
    r = scenario.body_radius_km
    pos = geometry.observer_position_km(r, ob.altitude_km, ob.latitude_deg, ob.local_time_h)
    v = scenario.view
    if v.directions is not None:
        looks = np.asarray(v.directions, dtype=float)
        nominal = np.full(looks.shape[0], np.nan)
    else:
        looks = geometry.limb_look_directions(pos, r, v.tangent_altitudes_km, v.azimuth_deg)
        nominal = np.asarray(v.tangent_altitudes_km, dtype=float)
    return LimbGeometry(observer_km=pos, look_direction=looks, nominal_tangent_altitude_km=nominal)


def radiance_from_columns(solar_irradiance, scattering_cross_section_um2, extinction_cross_section_um2,
                          phase_function, sunlit_column_cm2, extinction_weight_cm4=None):
    """Population radiance [W m⁻² sr⁻¹ nm⁻¹], shape (P, L, W).

    Parameters
    ----------
    solar_irradiance : (W,) [W m⁻² nm⁻¹] at the body's distance.
    scattering_cross_section_um2, extinction_cross_section_um2 : (P, W) [µm²].
    phase_function : (P, L, W), normalised to 4π, at each ray's scattering angle.
    sunlit_column_cm2 : (P, L) [cm⁻²].
    extinction_weight_cm4 : (P, P, L) [cm⁻⁴] or None for no extinction.  With it, each
        population's sunlit column is attenuated by exp(-<τ>), <τ> the mean optical depth
        to the Sun and back to the observer of its grains (see the comment below).
    """
    csca = np.asarray(scattering_cross_section_um2) * UM2_TO_CM2
    effective = np.asarray(sunlit_column_cm2, dtype=float)[:, :, None]  # (P, L, 1)
    if extinction_weight_cm4 is not None:
        # The exact attenuated column is ∫ n_p exp(-τ(s)) ds; its first-order weights give the
        # column-weighted mean optical depth <τ>_p = Σ_q K_pq C_ext,q / N_p.  N_p exp(-<τ>_p) agrees
        # with the first-order result 1 - <τ> to first order, stays positive at any depth, and by
        # Jensen's inequality (exp is convex) is a lower bound on the exact column.
        cext = np.asarray(extinction_cross_section_um2) * UM2_TO_CM2  # (Q, W)
        weighted = np.einsum("pql,qw->plw", extinction_weight_cm4, cext)
        with np.errstate(invalid="ignore", divide="ignore"):
            mean_tau = np.where(effective > 0, weighted / np.where(effective > 0, effective, 1.0), 0.0)
        effective = effective * np.exp(-mean_tau)
    return solar_irradiance[None, None, :] * csca[:, None, :] * phase_function / (4 * np.pi) * effective


@dataclass(frozen=True)
class LimbResult:
    """Arrays of a limb computation (P populations, L lines of sight, W wavelengths)."""

    wavelength_nm: np.ndarray
    solar_irradiance: np.ndarray  # (W,)
    geometry: LimbGeometry
    columns: object  # dustrt.los.ColumnResult
    scattering_cross_section_um2: np.ndarray  # (P, W)
    extinction_cross_section_um2: np.ndarray  # (P, W)
    phase_function: np.ndarray  # (P, L, W)
    population_radiance: np.ndarray  # (P, L, W)
    optical_depth: np.ndarray  # (L, W)
    zodiacal_radiance: np.ndarray  # (L, W)
    surface_radiance: np.ndarray  # (L, W)

    @property
    def radiance(self) -> np.ndarray:
        return self.population_radiance.sum(axis=0)


def population_optics_for(scenario, scattering_angle_deg):
    """Optics of every population at the scenario wavelengths and the given angles."""
    from dustrt.optics import population_optics

    return [population_optics(p.material, p.size, scenario.wavelength_nm, scattering_angle_deg,
                              scenario.optics_relative_tolerance) for p in scenario.populations]


def _phase_at(optics_list, angles_deg, unique_angles):
    idx = np.searchsorted(unique_angles, angles_deg)
    return np.stack([o.phase_function[:, idx].T for o in optics_list])  # (P, L, W)


_COLUMN_CACHE: dict = {}
_COLUMN_CACHE_SIZE = 16


def compute_columns(scenario, geometry: LimbGeometry, extinction: bool | None = None, progress=False):
    """Sunlit columns for the scenario's populations along the given lines of sight.

    Results are memoised on (profiles, rays, body, integration settings), so sweeps
    over grain size or instrument re-use the columns (DESIGN.md data flow).
    """
    ext = scenario.integration.extinction if extinction is None else extinction
    profiles = tuple(p.density for p in scenario.populations)
    looks = np.ascontiguousarray(geometry.look_direction, dtype=float)
    obs = np.ascontiguousarray(geometry.observer_km, dtype=float)
    key = (profiles, obs.tobytes(), obs.shape, looks.tobytes(), scenario.body_radius_km,
           scenario.integration.top_altitude_km, scenario.integration.relative_tolerance, bool(ext))
    try:
        hit = _COLUMN_CACHE.get(key)
    except TypeError:  # an unhashable profile: no memo
        hit, key = None, None
    if hit is not None:
        return hit
    result = _integrate_in_chunks(scenario, profiles, obs, looks, ext, progress)
    if key is not None:
        if len(_COLUMN_CACHE) >= _COLUMN_CACHE_SIZE:
            _COLUMN_CACHE.pop(next(iter(_COLUMN_CACHE)))
        _COLUMN_CACHE[key] = result
    return result


def _integrate_in_chunks(scenario, profiles, obs, looks, ext, progress):
    from dustrt.los import integrate_columns

    n = looks.shape[0]
    n_chunks = max(1, min(20, n // 10)) if progress else 1
    bounds = np.linspace(0, n, n_chunks + 1).astype(int)
    parts = []
    it = range(n_chunks)
    if progress and n_chunks > 1:
        from tqdm import tqdm

        it = tqdm(it, desc="lines of sight", unit="chunk", leave=False)
    for c in it:
        s = slice(bounds[c], bounds[c + 1])
        parts.append(integrate_columns(obs if obs.ndim == 1 else obs[s], looks[s], scenario.body_radius_km,
                                       scenario.integration.top_altitude_km, list(profiles),
                                       scenario.integration.relative_tolerance, ext))
    if len(parts) == 1:
        return parts[0]
    return _concat_columns(parts)


def _concat_columns(parts):
    import dataclasses

    first = parts[0]
    out = {}
    for f in dataclasses.fields(first):
        v = getattr(first, f.name)
        if isinstance(v, np.ndarray):
            out[f.name] = np.concatenate([getattr(p, f.name) for p in parts], axis=v.ndim - 1)
        else:
            out[f.name] = v
    return type(first)(**out)


def background_radiance(scenario, geometry: LimbGeometry, columns, solar_irradiance):
    """Zodiacal light and dark-surface radiance (L, W) [W m⁻² sr⁻¹ nm⁻¹].

    A line of sight that ends on the surface sees no zodiacal light (the body
    blocks it); if the surface point is on the night side it sees the optional
    uniform dark-surface term factor·F/π (e.g. earthshine), and a sunlit surface
    point is not modelled (a limb instrument does not look there).
    """
    from dustrt import geometry as geo
    from dustrt import zodi
    from dustrt.sun import solar_table

    wl = scenario.wavelength_nm
    looks = geometry.look_direction
    n = looks.shape[0]
    bg = scenario.background
    zod = np.zeros((n, wl.size))
    if bg.zodiacal_light and bg.zodiacal_scale > 0:
        tw, tf = solar_table(scenario.solar_spectrum)
        zod = zodi.zodiacal_radiance(looks, wl, tw, tf, heliocentric_distance_au=scenario.sun_distance_au,
                                     scale=bg.zodiacal_scale).reshape(n, wl.size)
    hits = np.asarray(columns.hits_surface, dtype=bool)
    if bg.zodiacal_light and bg.zodiacal_scale > 0:
        elong = zodi.ecliptic_coordinates_deg(looks)[2]
        close = (np.atleast_1d(elong) < zodi.MIN_ELONGATION_DEG) & ~hits
        if close.any():
            warn(f"{int(close.sum())} line(s) of sight come within {zodi.MIN_ELONGATION_DEG:g} deg of the Sun, "
                 "where the zodiacal-light model is held at its 2-deg value (F-corona not modelled)")
    zod[hits] = 0.0
    surf = np.zeros((n, wl.size))
    if hits.any():
        obs = np.broadcast_to(np.asarray(geometry.observer_km, dtype=float), looks.shape)
        end = obs + columns.path_length_km[:, None] * looks
        lit = geo.is_sunlit(end, scenario.body_radius_km)
        dark = hits & ~lit
        if bg.dark_surface_radiance_factor > 0:
            surf[dark] = bg.dark_surface_radiance_factor * solar_irradiance[None, :] / np.pi
        if np.any(hits & lit):
            warn(f"{int(np.sum(hits & lit))} line(s) of sight end on the sunlit surface; "
                 "surface brightness is not modelled there")
    return zod, surf


def compute_limb(scenario, geometry: LimbGeometry | None = None, progress=False,
                 extinction: bool | None = None) -> LimbResult:
    """The full limb computation for a scenario (pencil-beam lines of sight).

    ``extinction`` overrides the scenario's setting (analysis templates use
    False: radiance then is exactly linear in density).
    """
    from dustrt.sun import solar_irradiance

    geometry = geometry or scenario_geometry(scenario)
    columns = compute_columns(scenario, geometry, extinction=extinction, progress=progress)
    angles = columns.scattering_angle_deg
    unique = np.unique(angles)
    optics = population_optics_for(scenario, unique)
    phase = _phase_at(optics, angles, unique)
    f_sun = solar_irradiance(scenario.wavelength_nm, scenario.solar_spectrum, scenario.sun_distance_au)
    csca = np.stack([o.scattering_cross_section_um2 for o in optics])
    cext = np.stack([o.extinction_cross_section_um2 for o in optics])
    ext = columns.extinction_weight_cm4 if columns.extinction_included else None
    pop_rad = radiance_from_columns(f_sun, csca, cext, phase, columns.sunlit_column_cm2, ext)
    tau = np.einsum("pl,pw->lw", columns.column_cm2, cext * UM2_TO_CM2)
    if columns.extinction_included and np.nanmax(tau, initial=0.0) > FIRST_ORDER_TAU_LIMIT:
        warn(f"line-of-sight optical depth reaches {np.nanmax(tau):.3g}; extinction uses the mean optical "
             "depth of the scattering grains, accurate for tau << 1; above tau ~ 1 the radiance is a lower bound "
             "that can be several times too low")
    zod, surf = background_radiance(scenario, geometry, columns, f_sun)
    if columns.extinction_included:
        # zodiacal light and the surface lie behind all the dust on the line of sight
        zod = zod * np.exp(-tau)
        surf = surf * np.exp(-tau)
    return LimbResult(wavelength_nm=scenario.wavelength_nm, solar_irradiance=f_sun, geometry=geometry,
                      columns=columns, scattering_cross_section_um2=csca, extinction_cross_section_um2=cext,
                      phase_function=phase, population_radiance=pop_rad, optical_depth=tau,
                      zodiacal_radiance=zod, surface_radiance=surf)


RADIANCE_UNITS = "W m-2 sr-1 nm-1"


def solar_angular_radius_deg(distance_au: float) -> float:
    """Apparent angular radius of the Sun seen from ``distance_au`` [deg]."""
    return float(np.rad2deg(np.arcsin(SOLAR_RADIUS_KM / (distance_au * AU_KM))))


def _solar_transmission(r: LimbResult, distance_au: float) -> np.ndarray:
    """exp(-τ) where the line of sight points into the solar disk and does not end on the body."""
    reaches = (r.columns.scattering_angle_deg <= solar_angular_radius_deg(distance_au)) & ~np.asarray(
        r.columns.hits_surface, dtype=bool)
    return np.where(reaches[:, None], np.exp(-r.optical_depth), np.nan)


def limb_dataset(scenario, progress=False, result: LimbResult | None = None):
    """Run the limb model and package it as an xarray Dataset (CF-style attributes)."""
    import xarray as xr

    import dustrt

    r = result or compute_limb(scenario, progress=progress)
    g = r.geometry
    c = r.columns
    names = [p.name for p in scenario.populations]
    obs = np.broadcast_to(np.asarray(g.observer_km, dtype=float), g.look_direction.shape)
    L = ("line_of_sight",)
    LW = ("line_of_sight", "wavelength_nm")
    PL = ("population", "line_of_sight")
    ds = xr.Dataset(
        {
            "radiance": (LW, r.radiance, {"units": RADIANCE_UNITS,
                                          "long_name": "dust-scattered spectral radiance, all populations"}),
            "population_radiance": (("population",) + LW, r.population_radiance,
                                    {"units": RADIANCE_UNITS, "long_name": "dust-scattered spectral radiance per population"}),
            "zodiacal_radiance": (LW, r.zodiacal_radiance,
                                  {"units": RADIANCE_UNITS, "long_name": "zodiacal-light spectral radiance along the line of sight "
                                                                         "(zero where the body blocks the view)"}),
            "surface_radiance": (LW, r.surface_radiance,
                                 {"units": RADIANCE_UNITS, "long_name": "dark-surface spectral radiance where the line of sight ends on the night side"}),
            "sunlit_column_cm2": (PL, c.sunlit_column_cm2, {"units": "cm-2", "long_name": "sunlit grain column along the line of sight"}),
            "column_cm2": (PL, c.column_cm2, {"units": "cm-2", "long_name": "grain column along the line of sight, shadow ignored"}),
            "optical_depth": (LW, r.optical_depth, {"units": "1", "long_name": "dust extinction optical depth along the whole line of "
                                                                               "sight (a solar-occultation view would see exp(-tau))"}),
            "solar_transmission": (LW, _solar_transmission(r, scenario.sun_distance_au),
                                   {"units": "1", "long_name": "transmission exp(-tau) of sunlight along views that reach "
                                                               "the solar disk (NaN for other views)"}),
            "solar_irradiance": (("wavelength_nm",), r.solar_irradiance,
                                 {"units": "W m-2 nm-1", "long_name": "solar spectral irradiance at the body's distance"}),
            "scattering_cross_section": (("population", "wavelength_nm"), r.scattering_cross_section_um2,
                                         {"units": "um2", "long_name": "size-averaged scattering cross section per grain"}),
            "extinction_cross_section": (("population", "wavelength_nm"), r.extinction_cross_section_um2,
                                         {"units": "um2", "long_name": "size-averaged extinction cross section per grain"}),
            "phase_function": (("population",) + LW, r.phase_function,
                               {"units": "1", "long_name": "phase function at the line-of-sight scattering angle (4 pi normalised)"}),
            "hits_surface": (L, c.hits_surface.astype(np.int8),
                             {"units": "1", "long_name": "1 where the line of sight ends on the surface"}),
            "path_length_km": (L, c.path_length_km, {"units": "km", "long_name": "length of the modelled part of the line of sight"}),
            "quadrature_converged": (L, c.converged.astype(np.int8), {"units": "1", "long_name": "1 where the column quadrature met its tolerance"}),
        },
        coords={
            "population": ("population", names, {"long_name": "grain population"}),
            "wavelength_nm": ("wavelength_nm", r.wavelength_nm, {"units": "nm", "long_name": "vacuum wavelength"}),
            "line_of_sight": ("line_of_sight", np.arange(g.look_direction.shape[0]), {"long_name": "line-of-sight index"}),
            "vector": ("vector", ["x", "y", "z"], {"long_name": "body-centred solar frame axis (+x to the Sun, +z ecliptic north)"}),
            "tangent_altitude_km": (L, c.tangent_altitude_km, {"units": "km", "long_name": "lowest altitude along the line of sight"}),
            "scattering_angle_deg": (L, c.scattering_angle_deg, {"units": "degree", "long_name": "scattering angle (0 = looking at the Sun); "
                                                                                              "equal to the solar elongation of the view"}),
            "terminator_distance_km": (L, c.tangent_terminator_distance_km,
                                       {"units": "km", "long_name": "terminator distance of the tangent point (positive sunlit)"}),
            "look_direction": (L + ("vector",), g.look_direction, {"units": "1", "long_name": "unit look vector"}),
            "observer_position_km": (L + ("vector",), obs, {"units": "km", "long_name": "observer position"}),
        },
        attrs={
            "title": "dustrt limb radiance",
            "dustrt_version": dustrt.__version__,
            "scenario": scenario.text,
            "scenario_source": scenario.source,
            "body_radius_km": scenario.body_radius_km,
            "sun_distance_au": scenario.sun_distance_au,
            "extinction": int(c.extinction_included),
            "relative_tolerance": scenario.integration.relative_tolerance,
            "top_altitude_km": scenario.integration.top_altitude_km,
            "frame": "body-centred solar frame: +x to the Sun, +z ecliptic north, dusk terminator at +y",
        },
    )
    return ds
