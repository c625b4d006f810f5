"""Simulated calibrated observations: limb model + zodiacal light through the instrument.

The model radiance (dust + zodiacal light + dark surface) is averaged over the
field of view when ``[instrument] field_of_view_rings > 0`` (quadrature over
the cone, every sub-ray integrated exactly), integrated onto the instrument's
bins with its line-spread function, and turned into expected electrons and
noise.  Noisy realisations are calibrated back to radiance, so the file looks
like a real calibrated observation and feeds ``dustrt separate`` and
``dustrt limit`` unchanged.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from dustrt.forward import RADIANCE_UNITS, LimbGeometry, compute_limb, scenario_geometry


@dataclass(frozen=True)
class BinnedLimb:
    """Limb model on instrument bins: components (L, B) and the limb result it came from."""

    bin_centres_nm: np.ndarray
    dust_radiance: np.ndarray  # (L, B)
    population_radiance: np.ndarray  # (P, L, B)
    zodiacal_radiance: np.ndarray  # (L, B)
    surface_radiance: np.ndarray  # (L, B)
    solar_irradiance: np.ndarray  # (B,)
    limb: object  # LimbResult (central rays)

    @property
    def total_radiance(self) -> np.ndarray:
        return self.dust_radiance + self.zodiacal_radiance + self.surface_radiance


def fov_limb(scenario, geometry: LimbGeometry | None = None, rings: int | None = None, progress=False,
             extinction: bool | None = None):
    """Limb model averaged over the instrument's circular field of view.

    Returns (central LimbResult, fov-averaged population radiance (P, L, W),
    zodiacal (L, W), surface (L, W)).  With 0 rings the central ray is used.
    """
    from dustrt.instrument import field_of_view_offsets, rotate_offsets_to

    geometry = geometry or scenario_geometry(scenario)
    central = compute_limb(scenario, geometry, progress=progress, extinction=extinction)
    inst = scenario.instrument
    if rings is None:
        rings = inst.field_of_view_rings if inst is not None else 0
    if rings <= 0:
        return central, central.population_radiance, central.zodiacal_radiance, central.surface_radiance
    offsets, weights = field_of_view_offsets(inst.instrument.field_of_view_deg, rings)
    looks = rotate_offsets_to(geometry.look_direction, offsets)  # (L, Q, 3)
    n, q = looks.shape[:2]
    obs = np.asarray(geometry.observer_km, dtype=float)
    sub_obs = obs if obs.ndim == 1 else np.repeat(obs, q, axis=0)
    sub = LimbGeometry(observer_km=sub_obs, look_direction=looks.reshape(n * q, 3),
                       nominal_tangent_altitude_km=np.full(n * q, np.nan))
    r = compute_limb(scenario, sub, progress=progress, extinction=extinction)
    w = np.asarray(weights)

    def avg(a):
        return np.einsum("...lqw,q->...lw", a.reshape(a.shape[:-2] + (n, q, a.shape[-1])), w)

    return central, avg(r.population_radiance), avg(r.zodiacal_radiance), avg(r.surface_radiance)


def binned_limb(scenario, geometry=None, bin_centres_nm=None, bin_width_nm=None, fwhm_nm=None,
                progress=False, extinction: bool | None = None) -> BinnedLimb:
    """The scenario's limb model integrated onto instrument bins.

    Bins default to the scenario's instrument; explicit bins (e.g. an observed
    file's) need no [instrument] table.
    """
    from dustrt.instrument import line_spread_matrix
    from dustrt.sun import solar_irradiance

    if bin_centres_nm is None or bin_width_nm is None or fwhm_nm is None:
        scenario.require("instrument")
        inst = scenario.instrument.instrument
        centres = inst.bin_centres_nm if bin_centres_nm is None else np.asarray(bin_centres_nm, dtype=float)
        width = inst.bin_width_nm if bin_width_nm is None else float(bin_width_nm)
        fwhm = inst.resolution_fwhm_nm if fwhm_nm is None else float(fwhm_nm)
    else:
        centres, width, fwhm = np.asarray(bin_centres_nm, dtype=float), float(bin_width_nm), float(fwhm_nm)
    central, pop, zod, surf = fov_limb(scenario, geometry, progress=progress, extinction=extinction)
    m = line_spread_matrix(scenario.wavelength_nm, centres, width, fwhm)  # (B, W)
    f = solar_irradiance(scenario.wavelength_nm, scenario.solar_spectrum, scenario.sun_distance_au)
    pop_b = np.einsum("bw,plw->plb", m, pop)
    return BinnedLimb(bin_centres_nm=centres, dust_radiance=pop_b.sum(axis=0), population_radiance=pop_b,
                      zodiacal_radiance=zod @ m.T, surface_radiance=surf @ m.T, solar_irradiance=m @ f,
                      limb=central)


def observation_dataset(scenario, realizations: int = 0, seed: int | None = None, progress=False):
    """Expected (and optionally noisy) calibrated observations as an xarray Dataset."""
    import xarray as xr

    import dustrt
    from dustrt.instrument import electrons_to_radiance, expected_counts

    if realizations < 0 or realizations > 100000:
        raise ValueError(f"--realizations must lie in [0, 100000], got {realizations}")
    scenario.require("limb", "instrument")
    inst = scenario.instrument.instrument
    b = binned_limb(scenario, progress=progress)
    centres = b.bin_centres_nm
    counts = expected_counts(b.total_radiance, centres, inst)
    expected = b.total_radiance
    if realizations > 0:
        rng = np.random.default_rng(seed)
        noisy_e = counts.simulate(rng, realizations)  # (N, L, B) calibrated electrons
        radiance = electrons_to_radiance(noisy_e, centres, inst)
    else:
        radiance = expected[None]
    # bins with zero throughput deliver no data: NaN radiance (infinite uncertainty)
    dead = ~np.isfinite(counts.radiance_uncertainty)
    if dead.all():
        raise ValueError(f"{scenario.source}: key 'instrument.throughput': zero at every bin; no signal")
    radiance = np.where(dead, np.nan, radiance)
    n_obs = radiance.shape[0]
    unc = np.broadcast_to(counts.radiance_uncertainty, radiance.shape)
    g = b.limb.geometry
    c = b.limb.columns
    n_los = g.look_direction.shape[0]
    obs_pos = np.broadcast_to(np.asarray(g.observer_km, dtype=float), (n_obs, n_los, 3))
    looks = np.broadcast_to(g.look_direction, (n_obs, n_los, 3))
    OLW = ("observation", "line_of_sight", "wavelength_nm")
    LW = ("line_of_sight", "wavelength_nm")
    names = [p.name for p in scenario.populations]
    ds = xr.Dataset(
        {
            "radiance": (OLW, radiance, {"units": RADIANCE_UNITS, "long_name": "calibrated spectral radiance "
                                         + ("(simulated, with noise)" if realizations else "(expected, noise-free)")}),
            "radiance_uncertainty": (OLW, np.array(unc), {"units": RADIANCE_UNITS, "long_name": "1-sigma uncertainty of radiance"}),
            "expected_radiance": (LW, expected, {"units": RADIANCE_UNITS, "long_name": "expected total radiance on the instrument bins"}),
            "expected_dust_radiance": (LW, b.dust_radiance, {"units": RADIANCE_UNITS, "long_name": "expected dust radiance on the instrument bins"}),
            "expected_population_radiance": (("population",) + LW, b.population_radiance,
                                             {"units": RADIANCE_UNITS, "long_name": "expected dust radiance per population on the instrument bins"}),
            "expected_zodiacal_radiance": (LW, b.zodiacal_radiance, {"units": RADIANCE_UNITS, "long_name": "expected zodiacal-light radiance on the instrument bins"}),
            "solar_irradiance": (("wavelength_nm",), b.solar_irradiance, {"units": "W m-2 nm-1", "long_name": "solar spectral irradiance on the instrument bins"}),
            "signal_e": (LW, counts.signal_e, {"units": "electron", "long_name": "expected signal electrons per bin (all exposures)"}),
            "background_e": (LW, np.broadcast_to(counts.background_e, expected.shape).copy(), {"units": "electron", "long_name": "expected stray-light electrons per bin"}),
            "dark_e": (LW, np.broadcast_to(counts.dark_e, expected.shape).copy(), {"units": "electron", "long_name": "expected dark electrons per bin"}),
            "noise_e": (LW, counts.noise_e, {"units": "electron", "long_name": "expected 1-sigma noise electrons per bin"}),
            "snr": (LW, counts.snr, {"units": "1", "long_name": "signal-to-noise ratio per bin"}),
        },
        coords={
            "observation": ("observation", np.arange(n_obs), {"long_name": "observation (realisation) index"}),
            "line_of_sight": ("line_of_sight", np.arange(n_los), {"long_name": "line-of-sight index"}),
            "wavelength_nm": ("wavelength_nm", centres, {"units": "nm", "long_name": "bin centre wavelength"}),
            "population": ("population", names, {"long_name": "grain population (truth of the simulation)"}),
            "vector": ("vector", ["x", "y", "z"], {"long_name": "body-centred solar frame axis (+x to the Sun, +z ecliptic north)"}),
            "look_direction": (("observation", "line_of_sight", "vector"), np.array(looks), {"units": "1", "long_name": "unit look vector"}),
            "observer_position_km": (("observation", "line_of_sight", "vector"), np.array(obs_pos), {"units": "km", "long_name": "observer position"}),
            "tangent_altitude_km": (("line_of_sight",), c.tangent_altitude_km, {"units": "km", "long_name": "lowest altitude along the central line of sight"}),
            "scattering_angle_deg": (("line_of_sight",), c.scattering_angle_deg, {"units": "degree", "long_name": "scattering angle of the central ray"}),
        },
        attrs={
            "title": "dustrt simulated calibrated observation",
            "dustrt_version": dustrt.__version__,
            "scenario": scenario.text,
            "scenario_source": scenario.source,
            "realizations": realizations,
            "seed": "none" if seed is None else int(seed),
            "bin_width_nm": inst.bin_width_nm,
            "resolution_fwhm_nm": inst.resolution_fwhm_nm,
            "field_of_view_deg": inst.field_of_view_deg,
            "field_of_view_rings": scenario.instrument.field_of_view_rings,
            "exposure_s": inst.exposure_s,
            "body_radius_km": scenario.body_radius_km,
        },
    )
    return ds
