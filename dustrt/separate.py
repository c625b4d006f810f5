"""Separate a dust excess from zodiacal light by colour.

Each observed spectrum y(λ) (one per observation and line of sight) is fit by
weighted linear least squares with

    y = a_Z · Z(λ) [+ a_c · Z(λ) ln(λ/500 nm)] + a_D · D_p(λ)

where Z is the zodiacal-light model for that look direction (slightly redder
than sunlight), the optional second term lets its colour slope float, and D_p
is the dust radiance the hypothesised population p produces at its scenario
density (bluer than sunlight for fine grains).  a_D is thus the density in
units of the hypothesised ``surface_density_cm3``.  Views that end on the
surface are not limb views and are left out (NaN results).  The model is computed
without extinction, so it is exactly linear in density; it is integrated onto
the data's bins with the instrument line-spread function.

The unconstrained a_D and its marginal variance (zodiacal terms profiled as
nuisance parameters) give the significance and the upper limits
(:mod:`dustrt.limits`); the reported decomposition uses a_D ≥ 0.

Colour ratio: the ratio of the solar-normalised radiance y/F averaged over a
blue band to that over a red band (defaults 380–450 nm and 600–700 nm, chosen
to avoid the strongest solar Ca II H&K lines at the blue end and to stay inside
typical UV–visible detector ranges; common practice for broad colour indices).
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from dustrt.density import reference_density_cm3

from dustrt import warn
from dustrt.forward import RADIANCE_UNITS, LimbGeometry

REFERENCE_WAVELENGTH_NM = 500.0


@dataclass(frozen=True)
class ObservedSpectra:
    """Calibrated spectra read from a file: arrays (O, L, B) and geometry (O, L, 3)."""

    source: str
    wavelength_nm: np.ndarray
    radiance: np.ndarray
    uncertainty: np.ndarray
    usable: np.ndarray  # bool (O, L, B): finite data, not masked in the file
    observer_km: np.ndarray
    look_direction: np.ndarray
    bin_width_nm: float | None
    resolution_fwhm_nm: float | None
    n_nan: int
    n_file_masked: int


def read_observation(path, scenario=None) -> ObservedSpectra:
    """Read and check a calibrated observation file (simulated or real)."""
    from dustrt.io import read_netcdf

    path = Path(path)
    ds = read_netcdf(path)
    required = ("radiance", "radiance_uncertainty", "look_direction", "observer_position_km")
    missing = [v for v in required if v not in ds.variables]
    if missing:
        raise ValueError(f"{path}: variable(s) {', '.join(repr(v) for v in missing)} missing (a calibrated "
                         f"observation needs {', '.join(required)})")
    unit_problems = []
    for name, expected in OBSERVATION_UNITS.items():
        try:
            _check_units(path, ds, name, expected)
        except ValueError as exc:
            unit_problems.append(str(exc))
    if unit_problems:
        raise ValueError("\n  ".join(unit_problems))
    want = ("observation", "line_of_sight", "wavelength_nm")
    rad = ds["radiance"]
    if set(rad.dims) != set(want):
        raise ValueError(f"{path}: variable 'radiance' must have dimensions {want}, has {rad.dims}")
    if "wavelength_nm" not in ds.coords:
        raise ValueError(f"{path}: coordinate 'wavelength_nm' (bin centres in nm) is missing")
    rad = rad.transpose(*want)

    def aligned(name):
        v = ds[name]
        if not set(v.dims) <= set(want):
            raise ValueError(f"{path}: variable {name!r} has dimensions {v.dims}; allowed: a subset of {want}")
        try:
            return v.broadcast_like(rad).transpose(*want).values
        except (ValueError, TypeError) as exc:
            raise ValueError(f"{path}: variable {name!r} does not match 'radiance' ({exc})") from None

    def numeric(name, values):
        try:
            return np.asarray(values, dtype=float)
        except (TypeError, ValueError):
            raise ValueError(f"{path}: variable {name!r} must be numeric") from None

    unc = numeric("radiance_uncertainty", aligned("radiance_uncertainty"))
    masked = np.zeros(rad.shape, dtype=bool)
    if "radiance_mask" in ds.variables:
        masked = numeric("radiance_mask", aligned("radiance_mask")) != 0
    rad = numeric("radiance", rad.values)
    if rad.shape[0] == 0 or rad.shape[1] == 0:
        raise ValueError(f"{path}: variable 'radiance' holds no spectra")
    wl = numeric("wavelength_nm", ds["wavelength_nm"].values)
    if wl.size < 2 or not np.all(np.isfinite(wl)) or np.any(np.diff(wl) <= 0):
        raise ValueError(f"{path}: coordinate 'wavelength_nm' must be finite and strictly increasing")
    nan = ~np.isfinite(rad)
    usable = ~nan & ~masked
    bad = usable & ~(np.isfinite(unc) & (unc > 0))
    if np.any(bad):
        i = np.argwhere(bad)[0]
        raise ValueError(f"{path}: variable 'radiance_uncertainty' must be finite and > 0 where radiance is "
                         f"used; found {unc[tuple(i)]!r} at (observation, line_of_sight, wavelength_nm) = "
                         f"{tuple(int(k) for k in i)}")

    def geo(name):
        v = ds[name]
        dims = [d for d in ("observation", "line_of_sight") if d in v.dims] + ["vector"]
        if set(v.dims) != set(dims) or "line_of_sight" not in dims:
            raise ValueError(f"{path}: variable {name!r} must have dimensions ([observation,] line_of_sight, vector)")
        arr = numeric(name, v.transpose(*dims).values)
        if arr.ndim == 2:
            arr = arr[None]
        return np.broadcast_to(arr, rad.shape[:2] + (3,))

    if not usable.any():
        raise ValueError(f"{path}: variable 'radiance' has no finite, unmasked bin")
    looks = geo("look_direction")
    obs = geo("observer_position_km")
    for name, arr in (("look_direction", looks), ("observer_position_km", obs)):
        if not np.all(np.isfinite(arr)):
            raise ValueError(f"{path}: variable {name!r} must be finite")
    norm = np.linalg.norm(looks, axis=-1)
    if np.any(np.abs(norm - 1.0) > 1e-6):
        i = np.argwhere(np.abs(norm - 1.0) > 1e-6)[0]
        raise ValueError(f"{path}: variable 'look_direction' must hold unit vectors (|norm - 1| <= 1e-6); found norm "
                         f"{norm[tuple(i)]:.9g} at (observation, line_of_sight) = {tuple(int(k) for k in i)}")
    if scenario is not None:
        alt = np.linalg.norm(obs, axis=-1) - scenario.body_radius_km
        if np.any(alt < 0):
            i = np.unravel_index(np.argmin(alt), alt.shape)
            raise ValueError(f"{path}: variable 'observer_position_km' must be at or above the surface (body radius "
                             f"{scenario.body_radius_km:g} km in {scenario.source}); found altitude {alt[i]:.6g} km "
                             f"at (observation, line_of_sight) = {tuple(int(k) for k in i)}")

    def attr(name, positive=False):
        if name not in ds.attrs:
            return None
        try:
            v = float(np.asarray(ds.attrs[name]).ravel()[0])
        except (TypeError, ValueError, IndexError):
            v = np.nan
        if not (np.isfinite(v) and (v > 0 if positive else v >= 0)):
            raise ValueError(f"{path}: attribute {name!r} must be a number {'>' if positive else '>='} 0, "
                             f"got {ds.attrs[name]!r}")
        return v

    width = attr("bin_width_nm", positive=True)
    fwhm = attr("resolution_fwhm_nm")
    fov = attr("field_of_view_deg")
    if scenario is not None:
        _check_model_covers(path, scenario, wl, width, fwhm)
    if scenario is not None and fov is not None and scenario.instrument is not None:
        model_fov = scenario.instrument.instrument.field_of_view_deg
        if scenario.instrument.field_of_view_rings > 0 and abs(model_fov - fov) > 1e-6 * max(fov, 1e-12):
            warn(f"{path}: the file's field_of_view_deg ({fov:g}) differs from the scenario's "
                 f"({model_fov:g}); the scenario's is used for the model templates")
    return ObservedSpectra(source=str(path), wavelength_nm=wl, radiance=rad, uncertainty=unc, usable=usable,
                           observer_km=np.ascontiguousarray(obs), look_direction=np.ascontiguousarray(looks),
                           bin_width_nm=width, resolution_fwhm_nm=fwhm, n_nan=int(nan.sum()),
                           n_file_masked=int((masked & ~nan).sum()))


#: The units dustrt writes (and requires) for the variables of a calibrated observation.
OBSERVATION_UNITS = {"radiance": RADIANCE_UNITS, "radiance_uncertainty": RADIANCE_UNITS, "wavelength_nm": "nm"}


def _check_units(path, ds, name, expected) -> None:
    """Reject a variable whose ``units`` attribute is not ``expected`` (naming file, variable, both units).

    ``radiance`` and ``radiance_uncertainty`` must state their units; ``wavelength_nm`` names its
    unit already, so a missing attribute there is taken as nm.
    """
    if name not in ds.variables:
        return
    var = ds[name]
    units = var.attrs.get("units", var.encoding.get("units"))  # xarray moves time-like units to encoding
    if units is None:
        if name == "wavelength_nm":
            return
        raise ValueError(f"{path}: variable {name!r} has no 'units' attribute; expected units {expected!r}")
    if isinstance(units, bytes):
        units = units.decode("utf-8", "replace")
    if not isinstance(units, str) or " ".join(units.split()) != expected:
        raise ValueError(f"{path}: variable {name!r} has units {units!r}; expected units {expected!r} "
                         "(convert the file to these units)")


def _check_model_covers(path, scenario, wavelength_nm, width, fwhm) -> None:
    """The scenario's model wavelengths must cover the file's bins and their line-spread function."""
    from dustrt.instrument import line_spread_matrix

    inst = scenario.instrument.instrument if scenario.instrument is not None else None
    width = width if width is not None else (inst.bin_width_nm if inst is not None else None)
    fwhm = fwhm if fwhm is not None else (inst.resolution_fwhm_nm if inst is not None else None)
    if width is None or fwhm is None:
        return  # reported by build_templates (the line-spread function is unknown)
    model = scenario.wavelength_nm
    try:
        line_spread_matrix(model, wavelength_nm, width, fwhm)
    except ValueError as exc:
        raise ValueError(f"{path}: coordinate 'wavelength_nm': bins {wavelength_nm[0]:g}-{wavelength_nm[-1]:g} nm "
                         f"reach outside the model wavelengths {model[0]:g}-{model[-1]:g} nm of {scenario.source} "
                         f"([wavelengths]): {exc}") from None


@dataclass(frozen=True)
class Templates:
    """Model templates on the data's bins for R unique rays."""

    zodiacal: np.ndarray  # (R, B)
    dust_per_unit: np.ndarray  # (P, R, B): dust radiance at the hypothesised density
    solar_irradiance: np.ndarray  # (B,)
    ray_index: np.ndarray  # (O, L) -> R
    hits_surface: np.ndarray  # (R,) views ending on the surface: left out of the fits


def unique_rays(observer_km, look_direction):
    """Unique (observer, look) rows and the index map back to (O, L)."""
    rows = np.concatenate([observer_km, look_direction], axis=-1).reshape(-1, 6)
    uniq, inverse = np.unique(np.round(rows, 12), axis=0, return_inverse=True)
    return uniq[:, :3], uniq[:, 3:], inverse.reshape(observer_km.shape[:-1])


def build_templates(scenario, spectra: ObservedSpectra, bin_width_nm=None, fwhm_nm=None, progress=False):
    """Zodiacal and dust templates on the data's bins (model integrated with the LSF).

    Templates are computed without extinction, so the model is exactly linear in density
    (amplitude x hypothesis).  For optically thin dust the neglected terms (the dust's own
    attenuation and the zodiacal light's exp(-tau)) are of order tau of the signal.
    """
    from dustrt.observe import binned_limb

    width, fwhm = _lsf(scenario, spectra, bin_width_nm, fwhm_nm)
    obs, looks, index = unique_rays(spectra.observer_km, spectra.look_direction)
    geometry = LimbGeometry(observer_km=obs, look_direction=looks,
                            nominal_tangent_altitude_km=np.full(looks.shape[0], np.nan))
    b = binned_limb(scenario, geometry, spectra.wavelength_nm, width, fwhm, progress=progress, extinction=False)
    return Templates(zodiacal=b.zodiacal_radiance, dust_per_unit=b.population_radiance,
                     solar_irradiance=b.solar_irradiance, ray_index=index,
                     hits_surface=np.asarray(b.limb.columns.hits_surface, dtype=bool))


def _lsf(scenario, spectra, width, fwhm):
    if width is None:
        width = spectra.bin_width_nm
    if fwhm is None:
        fwhm = spectra.resolution_fwhm_nm
    if width is None or fwhm is None:
        if scenario.instrument is None:
            raise ValueError(f"{spectra.source}: the file does not state bin_width_nm and resolution_fwhm_nm; "
                             f"give them in the scenario's [instrument] table ({scenario.source})")
        inst = scenario.instrument.instrument
        width = inst.bin_width_nm if width is None else width
        fwhm = inst.resolution_fwhm_nm if fwhm is None else fwhm
    return float(width), float(fwhm)


def window_mask(scenario, wavelength_nm) -> np.ndarray:
    """True for bins outside the masked windows ([separation] mask_nm)."""
    wl = np.asarray(wavelength_nm)
    keep = np.ones(wl.shape, dtype=bool)
    for lo, hi in scenario.separation.mask_nm:
        keep &= ~((wl >= lo) & (wl <= hi))
    return keep


def fit_mask(scenario, wavelength_nm) -> np.ndarray:
    """Bins used by the fit: inside the fit bands (all if none) and outside the masked windows."""
    sep = scenario.separation
    wl = np.asarray(wavelength_nm)
    use = np.ones(wl.shape, dtype=bool)
    if sep.fit_bands_nm:
        use = np.zeros(wl.shape, dtype=bool)
        for lo, hi in sep.fit_bands_nm:
            use |= (wl >= lo) & (wl <= hi)
    return use & window_mask(scenario, wl)


@dataclass(frozen=True)
class SeparationFit:
    """Fit of one hypothesis (population) to all spectra; arrays over (O, L)."""

    amplitudes: np.ndarray  # (O, L, K) unconstrained: [a_Z, (a_c), a_D]
    covariance: np.ndarray  # (O, L, K, K)
    amplitudes_nonneg: np.ndarray  # (O, L, K) with a_D >= 0
    chi2: np.ndarray
    dof: np.ndarray
    n_used: np.ndarray
    parameter_names: tuple
    dust_index: int = -1  # this population's amplitude among the parameters (joint fits: one of several)

    @property
    def dust_amplitude(self) -> np.ndarray:
        return self.amplitudes[..., self.dust_index]

    @property
    def dust_sigma(self) -> np.ndarray:
        return np.sqrt(self.covariance[..., self.dust_index, self.dust_index])

    @property
    def dust_amplitude_nonneg(self) -> np.ndarray:
        return self.amplitudes_nonneg[..., self.dust_index]


def design_matrix(zodiacal, dust, wavelength_nm, colour_order: int):
    """Templates (..., K, B): zodiacal light Z, the colour terms Z·ln(λ/500 nm)^k for k = 1 ..
    ``colour_order`` (0: fixed colour; 1: a free colour slope), then the dust template (..., B)
    or several dust templates (D, ..., B) for a joint fit."""
    log_wl = np.log(np.asarray(wavelength_nm) / REFERENCE_WAVELENGTH_NM)
    parts = [zodiacal] + [zodiacal * log_wl**k for k in range(1, int(colour_order) + 1)]
    dust = np.asarray(dust)
    parts.extend(list(dust) if dust.ndim == np.ndim(zodiacal) + 1 else [dust])
    return np.stack(parts, axis=-2)


def zodiacal_fit_radiance(amplitudes, zodiacal, wavelength_nm, colour_order: int):
    """The fitted zodiacal component Σ_k a_k Z ln(λ/500 nm)^k from amplitudes (..., K) and Z (..., B)."""
    log_wl = np.log(np.asarray(wavelength_nm) / REFERENCE_WAVELENGTH_NM)
    return sum(amplitudes[..., k][..., None] * zodiacal * log_wl**k for k in range(int(colour_order) + 1))


def zodiacal_parameter_names(colour_order: int) -> tuple:
    names = ("zodiacal_amplitude", "zodiacal_colour_slope", "zodiacal_colour_term_2", "zodiacal_colour_term_3")
    return names[:int(colour_order) + 1]


def zodiacal_parameter_count(scenario) -> int:
    return 1 + scenario.separation.colour_order


def fit_spectra(data, sigma, templates, use_mask, nonnegative: bool = True, nonneg_index=-1) -> tuple:
    """Weighted fits of many spectra with scaled templates.

    Returns (amplitudes, covariance, amplitudes with the dust amplitude(s) ``nonneg_index``
    (default: the last template) >= 0, or None, lsq result).
    Templates differ by many orders of magnitude (zodiacal radiance vs dust per unit
    density), so each is scaled to unit maximum before solving and the amplitudes
    and covariances are scaled back.  ``nonnegative=False`` skips the constrained
    refit where only the covariance is wanted (sweeps).
    """
    from dustrt.lsq import nonnegative_least_squares, weighted_least_squares

    n_templates = templates.shape[-2]
    nonneg_index = [k % n_templates for k in np.atleast_1d(nonneg_index)]
    scale = np.max(np.abs(templates), axis=-1)  # (..., K)
    scale = np.where(scale > 0, scale, 1.0)
    t = templates / scale[..., None]
    res = weighted_least_squares(data, sigma, t, mask=use_mask)
    a = res.amplitudes / scale
    cov = res.covariance / (scale[..., :, None] * scale[..., None, :])
    a_nn = None
    if nonnegative:
        a_nn = nonnegative_least_squares(data, sigma, t, nonneg_index, mask=use_mask).amplitudes / scale
    return a, cov, a_nn, res


def joint_fit_spectra(data, sigma, zodiacal, dust, wavelength_nm, colour_order: int, use_mask,
                      nonnegative: bool = True):
    """Fit spectra (..., B) with the zodiacal terms and every population's dust template (P, ..., B).

    A template that is zero on a spectrum's used bins (no such dust along that view) is left
    out of that spectrum's fit, so it does not make the others degenerate; its amplitude,
    covariance rows and non-negative amplitude are NaN there.  Returns (amplitudes (..., K),
    covariance (..., K, K), non-negative amplitudes or None, chi2, dof, n_used) with
    K = zodiacal terms + P.
    """
    k0 = 1 + int(colour_order)
    n_pop = dust.shape[0]
    k = k0 + n_pop
    shape = np.shape(data)[:-1]
    n_bins = np.shape(data)[-1]
    y = np.reshape(data, (-1, n_bins))
    sig = np.reshape(np.broadcast_to(sigma, np.shape(data)), (-1, n_bins))
    use = np.reshape(np.broadcast_to(use_mask, np.shape(data)), (-1, n_bins))
    zod = np.reshape(np.broadcast_to(zodiacal, np.shape(data)), (-1, n_bins))
    dst = np.reshape(np.broadcast_to(dust, (n_pop,) + np.shape(data)), (n_pop, -1, n_bins))
    present = np.any((dst != 0) & use[None], axis=-1)  # (P, N)
    code = np.sum(present.astype(np.int64) << np.arange(n_pop)[:, None], axis=0)
    n = y.shape[0]
    a = np.full((n, k), np.nan)
    cov = np.full((n, k, k), np.nan)
    a_nn = np.full((n, k), np.nan) if nonnegative else None
    chi2 = np.full(n, np.nan)
    dof = np.zeros(n, dtype=int)
    n_used = use.sum(axis=-1)
    for c in np.unique(code):
        rows = np.flatnonzero(code == c)
        pops = [q for q in range(n_pop) if (c >> q) & 1]
        cols = np.array(list(range(k0)) + [k0 + q for q in pops])
        x = design_matrix(zod[rows], dst[pops][:, rows] if pops else np.zeros((0, rows.size, n_bins)),
                          wavelength_nm, colour_order)
        constrained = list(range(k0, k0 + len(pops)))
        ra, rc, rn, res = fit_spectra(y[rows], sig[rows], x, use[rows], nonnegative=nonnegative and bool(pops),
                                      nonneg_index=constrained or -1)
        a[np.ix_(rows, cols)] = ra
        cov[np.ix_(rows, cols, cols)] = rc
        if nonnegative:
            a_nn[np.ix_(rows, cols)] = rn if rn is not None else ra
        chi2[rows], dof[rows] = res.chi2, res.dof
    return (a.reshape(shape + (k,)), cov.reshape(shape + (k, k)),
            None if a_nn is None else a_nn.reshape(shape + (k,)), chi2.reshape(shape), dof.reshape(shape),
            n_used.reshape(shape))


def check_hypotheses(scenario, command: str = "this analysis") -> None:
    """Every population needs a density profile with a positive normalisation (it sets the template)."""
    for i, p in enumerate(scenario.populations):
        if p.density is None:
            raise ValueError(f"{scenario.source}: key 'population[{i}].density': is required for {command}")
        if not reference_density_cm3(p.density) > 0:
            raise ValueError(f"{scenario.source}: key 'population[{i}].density': the density normalisation must be "
                             f"> 0 for {command} (it sets the hypothesised template; results scale with it)")


def check_bands(scenario, wavelength_nm, source: str) -> None:
    """The colour bands and the fit bands must contain bins of the data."""
    sep = scenario.separation
    wl = np.asarray(wavelength_nm)
    for key, band in (("blue_band_nm", sep.blue_band_nm), ("red_band_nm", sep.red_band_nm)):
        if not np.any((wl >= band[0]) & (wl <= band[1]) & window_mask(scenario, wl)):
            raise ValueError(f"{scenario.source}: key 'separation.{key}': {list(band)} holds no unmasked bin of "
                             f"{source} (bins {wl[0]:g}-{wl[-1]:g} nm)")
    k = zodiacal_parameter_count(scenario) + (len(scenario.populations) if sep.joint_fit else 1)
    if np.sum(fit_mask(scenario, wl)) <= k:
        raise ValueError(f"{scenario.source}: key 'separation.fit_bands_nm': fit bands and masks leave "
                         f"{int(np.sum(fit_mask(scenario, wl)))} bin(s) of {source}; the fit needs more than {k}")


def separate(scenario, spectra: ObservedSpectra, templates: Templates | None = None, progress=False):
    """Fit every spectrum with each population's hypothesis; returns a list of SeparationFit (one per population)."""
    check_hypotheses(scenario)
    check_bands(scenario, spectra.wavelength_nm, spectra.source)
    templates = templates or build_templates(scenario, spectra, progress=progress)
    # views that end on the surface see no zodiacal light and a surface that is not a fit
    # component: they are not limb views and are left out (their results are NaN)
    limb_view = ~templates.hits_surface[templates.ray_index]
    use = spectra.usable & fit_mask(scenario, spectra.wavelength_nm) & limb_view[..., None]
    zod = templates.zodiacal[templates.ray_index]  # (O, L, B)
    fits = []
    sep = scenario.separation
    zod_names = zodiacal_parameter_names(sep.colour_order)
    data = np.where(use, spectra.radiance, np.nan)
    sigma = np.where(use, spectra.uncertainty, 1.0)
    n_pop = templates.dust_per_unit.shape[0]
    if sep.joint_fit:
        # one fit with every population's template: each amplitude is profiled over the others
        dust = templates.dust_per_unit[:, templates.ray_index]  # (P, O, L, B)
        a, cov, a_nn, chi2, dof, n_used = joint_fit_spectra(data, sigma, zod, dust, spectra.wavelength_nm,
                                                            sep.colour_order, use)
        k0 = len(zod_names)
        names = zod_names + tuple(f"dust_amplitude_{p.name}" for p in scenario.populations)
        fits = [SeparationFit(amplitudes=a, covariance=cov, amplitudes_nonneg=a_nn, chi2=chi2, dof=dof,
                              n_used=n_used, parameter_names=names, dust_index=k0 + p) for p in range(n_pop)]
        _warn_degenerate(scenario, spectra, fits, limb_view)
        return fits
    for p in range(n_pop):
        dust = templates.dust_per_unit[p][templates.ray_index]
        x = design_matrix(zod, dust, spectra.wavelength_nm, sep.colour_order)
        a, cov, a_nn, res = fit_spectra(data, sigma, x, use)
        fits.append(SeparationFit(amplitudes=a, covariance=cov, amplitudes_nonneg=a_nn, chi2=res.chi2,
                                  dof=res.dof, n_used=res.n_used, parameter_names=zod_names + ("dust_amplitude",)))
    _warn_degenerate(scenario, spectra, fits, limb_view)
    return fits


def _warn_degenerate(scenario, spectra, fits, limb_view) -> None:
    """One warning when most limb views could not be fitted (their results are NaN)."""
    names = [p.name for p, f in zip(scenario.populations, fits)
             if np.mean(~np.isfinite(f.dust_sigma[limb_view])) > 0.5] if limb_view.any() else []
    if names:
        from dustrt import warn

        warn(f"{spectra.source}: the fit is degenerate (NaN) for most limb views of {', '.join(names)}: its "
             "templates are nearly collinear on the fit bins (too many zodiacal colour terms for the fit bands, a "
             "dust template with no light there, or populations with proportional templates)")


def band_mean(values, wavelength_nm, band, use=None):
    """Mean of values (..., B) over bins inside band (and use) [same units]."""
    wl = np.asarray(wavelength_nm)
    sel = (wl >= band[0]) & (wl <= band[1])
    w = np.broadcast_to(sel, np.shape(values)).astype(float)
    if use is not None:
        w = w * use
    v = np.where(w > 0, values, 0.0)
    n = w.sum(axis=-1)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(n > 0, (v * w).sum(axis=-1) / np.where(n > 0, n, 1), np.nan)


def colour_ratio(radiance, solar_irradiance, wavelength_nm, blue_band, red_band, use=None):
    """Blue/red ratio of the solar-normalised radiance (1 for a solar-coloured spectrum).

    NaN (or inf) where the red band holds no signal, e.g. with the zodiacal light switched off.
    """
    with np.errstate(invalid="ignore", divide="ignore"):
        norm = radiance / solar_irradiance
        return band_mean(norm, wavelength_nm, blue_band, use) / band_mean(norm, wavelength_nm, red_band, use)


def fit_quality(fit) -> tuple[bool, float]:
    """(reliable, median reduced χ²) of one hypothesis's fits over all spectra.

    Unreliable: more than 10 % of the spectra have a χ² p-value below 1e-3, i.e. the
    zodiacal + dust model does not describe the data (common practice thresholds).
    """
    from scipy.stats import chi2 as chi2_dist

    dof = fit.dof
    ok = np.isfinite(fit.chi2) & (dof > 0)
    if not ok.any():
        return True, float("nan")
    chi2_nu = fit.chi2[ok] / dof[ok]
    bad = float(np.mean(chi2_dist.sf(fit.chi2[ok], dof[ok]) < 1e-3))
    return bad <= 0.1, float(np.median(chi2_nu))


def warn_poor_fits(source, labels, reliable, median_chi2, what: str, joint: bool = False) -> None:
    """One warning naming every hypothesis whose fits do not describe the data."""
    bad = [f"{lab} (median reduced chi-square {c:.3g})" for lab, ok, c in zip(labels, reliable, median_chi2)
           if not ok]
    if bad:
        from dustrt import warn

        warn(f"{source}: the zodiacal + dust model does not describe the data for {', '.join(bad)}: over 10 % "
             f"of spectra have a chi-square p-value below 1e-3, so {what} for them are not reliable "
             + ("(all populations fitted jointly: a missing population, " if joint else
                "(each hypothesis is fitted alone: another dust population present, ")
             + "a zodiacal colour other than the model's, or a calibration error all show up this way)")


def tangent_altitude_km(observer_km, look_direction, radius_km):
    """Lowest altitude [km] along each view (..., 3) -> (...)."""
    from dustrt.geometry import tangent_point_km

    shape = observer_km.shape[:-1]
    p = tangent_point_km(observer_km.reshape(-1, 3), look_direction.reshape(-1, 3))
    return (np.linalg.norm(p, axis=-1) - radius_km).reshape(shape)


def separate_file(observation_path, scenario, progress=False):
    """Run the separation on a file and package the results as an xarray Dataset."""
    import xarray as xr

    import dustrt

    check_hypotheses(scenario, "dustrt separate")
    spectra = read_observation(observation_path, scenario)
    check_bands(scenario, spectra.wavelength_nm, spectra.source)
    templates = build_templates(scenario, spectra, progress=progress)
    fits = separate(scenario, spectra, templates)
    quality = [fit_quality(f) for f in fits]
    warn_poor_fits(spectra.source, [p.name for p in scenario.populations], [q[0] for q in quality],
                   [q[1] for q in quality], "the dust amplitudes", joint=scenario.separation.joint_fit)
    sep = scenario.separation
    limb_view = ~templates.hits_surface[templates.ray_index]
    use = spectra.usable & fit_mask(scenario, spectra.wavelength_nm) & limb_view[..., None]
    colour_use = spectra.usable & window_mask(scenario, spectra.wavelength_nm)
    wl = spectra.wavelength_nm
    f = templates.solar_irradiance
    zod = templates.zodiacal[templates.ray_index]
    names = [p.name for p in scenario.populations]
    n0 = np.array([reference_density_cm3(p.density) for p in scenario.populations])
    a = np.stack([ft.amplitudes for ft in fits])  # (P, O, L, K)
    cov = np.stack([ft.covariance for ft in fits])
    a_nn = np.stack([ft.amplitudes_nonneg for ft in fits])
    dust_a = np.stack([ft.dust_amplitude for ft in fits])  # (P, O, L)
    dust_s = np.stack([ft.dust_sigma for ft in fits])
    dust_unit = np.stack([templates.dust_per_unit[p][templates.ray_index] for p in range(len(fits))])
    dust_excess = np.stack([ft.dust_amplitude_nonneg for ft in fits])[..., None] * dust_unit  # (P, O, L, B)
    zod_fit = zodiacal_fit_radiance(a_nn, zod[None], wl, sep.colour_order)
    sig = dust_a / dust_s
    blue, red = sep.blue_band_nm, sep.red_band_nm
    POL = ("population", "observation", "line_of_sight")
    params = list(fits[0].parameter_names)
    ds = xr.Dataset(
        {
            "amplitude": (POL + ("parameter",), a, {"units": "1", "long_name": "unconstrained fitted amplitudes (zodiacal "
                                                    "in units of the model, dust in units of the hypothesised density)"}),
            "amplitude_covariance": (POL + ("parameter", "parameter_2"), cov, {"units": "1", "long_name": "covariance of the fitted amplitudes"}),
            "amplitude_nonnegative": (POL + ("parameter",), a_nn, {"units": "1", "long_name": "fitted amplitudes with the dust amplitude(s) constrained >= 0"}),
            "dust_amplitude": (POL, dust_a, {"units": "1", "long_name": "unconstrained dust amplitude (multiple of the hypothesised density)"}),
            "dust_amplitude_uncertainty": (POL, dust_s, {"units": "1", "long_name": "1-sigma uncertainty of the dust amplitude (zodiacal terms, and in a joint fit the other populations, profiled)"}),
            "surface_density_estimate_cm3": (POL, dust_a * n0[:, None, None], {"units": "cm-3", "long_name": "estimated density normalisation (unconstrained)"}),
            "dust_excess_significance": (POL, sig, {"units": "1", "long_name": "dust excess significance in sigma (amplitude / uncertainty)"}),
            "dust_excess_radiance": (POL + ("wavelength_nm",), dust_excess, {"units": RADIANCE_UNITS, "long_name": "fitted dust component (amplitude >= 0)"}),
            "zodiacal_fit_radiance": (POL + ("wavelength_nm",), zod_fit, {"units": RADIANCE_UNITS, "long_name": "fitted zodiacal-light component"}),
            "observed_radiance": (("observation", "line_of_sight", "wavelength_nm"), spectra.radiance, {"units": RADIANCE_UNITS, "long_name": "observed radiance"}),
            "observed_uncertainty": (("observation", "line_of_sight", "wavelength_nm"), spectra.uncertainty, {"units": RADIANCE_UNITS, "long_name": "observed radiance uncertainty"}),
            "fit_mask": (("observation", "line_of_sight", "wavelength_nm"), use.astype(np.int8), {"units": "1", "long_name": "1 where the bin entered the fit"}),
            "fit_reliable": ("population", np.array([q[0] for q in quality], dtype=np.int8),
                             {"units": "1", "long_name": "0 where over 10 % of spectra have a chi-square p-value below "
                              "1e-3 (the zodiacal + dust model does not describe the data)"}),
            "median_reduced_chi2": ("population", np.array([q[1] for q in quality]),
                                    {"units": "1", "long_name": "median reduced chi-square over all spectra"}),
            "reduced_chi2": (POL, np.stack([ft.chi2 / np.where(ft.dof > 0, ft.dof, np.nan) for ft in fits]), {"units": "1", "long_name": "reduced chi-square of the fit"}),
            # one bin selection for all colour ratios: usable data outside the masked windows
            # (the fit bands do not restrict the colour bands)
            "colour_ratio_observed": (("observation", "line_of_sight"), colour_ratio(spectra.radiance, f, wl, blue, red, colour_use), {"units": "1", "long_name": "blue/red ratio of solar-normalised observed radiance"}),
            "colour_ratio_zodiacal": (POL, colour_ratio(zod_fit, f, wl, blue, red, colour_use), {"units": "1", "long_name": "blue/red ratio of the solar-normalised zodiacal component"}),
            "colour_ratio_dust": (("population", "observation", "line_of_sight"), colour_ratio(dust_unit, f, wl, blue, red, colour_use), {"units": "1", "long_name": "blue/red ratio of the solar-normalised dust template"}),
        },
        coords={
            "population": ("population", names, {"long_name": "hypothesised grain population"}),
            "observation": ("observation", np.arange(spectra.radiance.shape[0]),
                            {"long_name": "observation index in the input file"}),
            "line_of_sight": ("line_of_sight", np.arange(spectra.radiance.shape[1]),
                              {"long_name": "line-of-sight index in the input file"}),
            "wavelength_nm": ("wavelength_nm", wl, {"units": "nm", "long_name": "bin centre wavelength"}),
            "tangent_altitude_km": (("observation", "line_of_sight"), tangent_altitude_km(
                spectra.observer_km, spectra.look_direction, scenario.body_radius_km),
                {"units": "km", "long_name": "lowest altitude along the line of sight (negative: it meets the "
                                             "surface)"}),
            "parameter": ("parameter", params, {"long_name": "fitted amplitude"}),
            "parameter_2": ("parameter_2", params, {"long_name": "fitted amplitude (second index of the covariance)"}),
        },
        attrs={"title": "dustrt dust/zodiacal-light separation", "dustrt_version": dustrt.__version__,
               "observation_file": str(observation_path), "scenario": scenario.text,
               "blue_band_nm": list(blue), "red_band_nm": list(red),
               "masked_windows_nm": str(list(sep.mask_nm)), "free_colour_slope": int(sep.colour_order >= 1),
               "zodiacal_colour_order": sep.colour_order,
               "joint_fit": int(sep.joint_fit),
               "ignored_nan_bins": spectra.n_nan, "ignored_masked_bins": spectra.n_file_masked,
               "surface_views_left_out": int(np.sum(~limb_view))},
    )
    return ds
