"""Upper limits on grain density from a (non-)detection.

Radiance is linear in a population's density normalisation n0 (its
``surface_density_cm3``; for a table profile the peak density of the scaled
grid, :func:`dustrt.density.reference_density_cm3`), so the
separation fit's unconstrained dust amplitude x (in units of the hypothesised
n0), with its marginal uncertainty σ (zodiacal amplitude and colour slope
profiled out as nuisance parameters, exact for a linear Gaussian model), is a
Gaussian measurement of μ = n/n0 ≥ 0.  Intervals on μ use the Feldman–Cousins
unified approach (default; correct coverage with the physical boundary at
zero) or a flat-prior Bayesian upper limit (option, labelled as such).

Joint limit: the nuisance parameters belong to each spectrum, so profiling
them leaves independent Gaussian estimates x_i ± σ_i of the common μ; the
joint estimate is their inverse-variance mean, x = Σ x_i/σ_i² / Σ 1/σ_i²,
σ = (Σ 1/σ_i²)^(−1/2), and the same interval construction is applied to it.

References
----------
[1] Feldman, G. J. & Cousins, R. D. (1998), Phys. Rev. D 57, 3873.
"""

from __future__ import annotations

import numpy as np

from dustrt.density import reference_density_cm3

from dustrt import statistics

METHOD_LABELS = {
    "feldman-cousins": "Feldman-Cousins unified interval (Feldman & Cousins 1998, Phys. Rev. D 57, 3873)",
    "bayesian-flat": "Bayesian upper limit with a flat prior on density >= 0 (not a frequentist interval)",
}


def joint_estimate(x, sigma):
    """Inverse-variance combination of independent Gaussian estimates (NaN entries ignored)."""
    x = np.asarray(x, dtype=float)
    s = np.asarray(sigma, dtype=float)
    ok = np.isfinite(x) & np.isfinite(s) & (s > 0)
    w = np.where(ok, 1.0 / np.where(ok, s, 1.0) ** 2, 0.0)
    wsum = w.sum()
    if wsum == 0:
        return np.nan, np.nan
    return float((w * np.where(ok, x, 0.0)).sum() / wsum), float(wsum ** -0.5)


def interval(x, sigma, confidence, method):
    """(lower, upper) on μ >= 0; the Bayesian option gives lower = 0."""
    if method not in METHOD_LABELS:
        raise ValueError(f"unknown limit method {method!r}; known: {', '.join(METHOD_LABELS)}")
    x = np.asarray(x, dtype=float)
    sigma = np.asarray(sigma, dtype=float)
    ok = np.isfinite(x) & np.isfinite(sigma) & (sigma > 0)
    lo = np.full(x.shape, np.nan)
    hi = np.full(x.shape, np.nan)
    if np.any(ok):
        l, h = statistics.upper_limit(x[ok], sigma[ok], confidence, method=method)
        lo[ok] = l
        hi[ok] = h
    return lo, hi


def density_limits(fits, normalisation_cm3, confidence, method):
    """Per-observation and joint limits for each population's fit.

    Returns a dict of arrays: per-spectrum (P, O, L) and joint (P,) values in cm⁻³.
    """
    out = {k: [] for k in ("lower", "upper", "sig", "x", "sigma", "j_lower", "j_upper", "j_sig", "j_x", "j_sigma")}
    for fit, n0 in zip(fits, normalisation_cm3):
        x, s = fit.dust_amplitude, fit.dust_sigma
        lo, hi = interval(x, s, confidence, method)
        jx, js = joint_estimate(x, s)
        jlo, jhi = interval(np.array([jx]), np.array([js]), confidence, method)
        out["lower"].append(lo * n0)
        out["upper"].append(hi * n0)
        out["sig"].append(x / s)
        out["x"].append(x * n0)
        out["sigma"].append(s * n0)
        out["j_lower"].append(jlo[0] * n0)
        out["j_upper"].append(jhi[0] * n0)
        out["j_sig"].append(jx / js if np.isfinite(js) else np.nan)
        out["j_x"].append(jx * n0)
        out["j_sigma"].append(js * n0)
    return {k: np.array(v) for k, v in out.items()}


def _with_radius(scenario, radius_um):
    """Scenario copy with every population's characteristic radius replaced."""
    import dataclasses

    pops = tuple(dataclasses.replace(p, size=p.size.with_radius(radius_um)) for p in scenario.populations)
    return dataclasses.replace(scenario, populations=pops)


def limits_file(observation_path, scenario, method=None, progress=False):
    """Limits from an observation file for each hypothesis (and each swept grain radius)."""
    import xarray as xr

    import dustrt
    from dustrt.separate import build_templates, read_observation, separate

    method = method or scenario.limits.method
    conf = scenario.limits.confidence
    if method not in METHOD_LABELS:
        raise ValueError(f"unknown limit method {method!r}; known: {', '.join(METHOD_LABELS)}")
    for i, p in enumerate(scenario.populations):
        if p.density is None:
            raise ValueError(f"{scenario.source}: key 'population[{i}].density': is required for limits")
    spectra = read_observation(observation_path, scenario)
    radii = None
    if scenario.sweep is not None:
        for key, values in scenario.sweep.axes:
            if key == "radius_um":
                radii = values
    variants = [scenario] if radii is None else [_with_radius(scenario, r) for r in radii]
    results = []
    it = variants
    if progress and len(variants) > 1:
        from tqdm import tqdm

        it = tqdm(variants, desc="grain radii", unit="radius", leave=False)
    for sc in it:
        templates = build_templates(sc, spectra)
        fits = separate(sc, spectra, templates)
        n0 = [reference_density_cm3(p.density) for p in sc.populations]
        results.append(density_limits(fits, n0, conf, method))
    stack = {k: np.stack([r[k] for r in results], axis=1) for k in results[0]}  # (P, S, ...)
    detect_sigma = scenario.sweep.detection_sigma if scenario.sweep is not None else 5.0
    names = [p.name for p in scenario.populations]
    radius = np.array(radii if radii is not None else [p.size.characteristic_radius_um for p in scenario.populations][:1])
    PS = ("population", "grain_radius")
    PSOL = PS + ("observation", "line_of_sight")
    detected = np.nan_to_num(stack["j_lower"]) > 0
    ds = xr.Dataset(
        {
            "density_upper_limit_cm3": (PS, stack["j_upper"], {"units": "cm-3", "long_name": f"joint upper limit on the density normalisation at {conf:g} confidence"}),
            "density_lower_limit_cm3": (PS, np.nan_to_num(stack["j_lower"]), {"units": "cm-3", "long_name": "joint lower limit (zero when only an upper limit)"}),
            "dust_excess_significance": (PS, stack["j_sig"], {"units": "1", "long_name": "joint dust excess significance in sigma"}),
            "density_estimate_cm3": (PS, stack["j_x"], {"units": "cm-3", "long_name": "joint unconstrained density estimate"}),
            "density_uncertainty_cm3": (PS, stack["j_sigma"], {"units": "cm-3", "long_name": "1-sigma uncertainty of the joint estimate"}),
            "detection_threshold_density_cm3": (PS, detect_sigma * stack["j_sigma"], {"units": "cm-3", "long_name": f"density giving a {detect_sigma:g}-sigma expected excess"}),
            "two_sided": (PS, detected.astype(np.int8), {"units": "1", "long_name": "1 where the interval excludes zero (a detection: two-sided interval)"}),
            "observation_upper_limit_cm3": (PSOL, stack["upper"], {"units": "cm-3", "long_name": "per-observation upper limit"}),
            "observation_lower_limit_cm3": (PSOL, np.nan_to_num(stack["lower"]), {"units": "cm-3", "long_name": "per-observation lower limit"}),
            "observation_significance": (PSOL, stack["sig"], {"units": "1", "long_name": "per-observation dust excess significance in sigma"}),
            "observation_density_estimate_cm3": (PSOL, stack["x"], {"units": "cm-3", "long_name": "per-observation unconstrained density estimate"}),
            "observation_density_uncertainty_cm3": (PSOL, stack["sigma"], {"units": "cm-3", "long_name": "per-observation 1-sigma uncertainty"}),
        },
        coords={
            "population": ("population", names, {"long_name": "hypothesised grain population"}),
            "grain_radius": ("grain_radius", np.arange(len(variants))),
            "radius_um": ("grain_radius", radius, {"units": "um", "long_name": "swept grain radius (monodisperse radius or lognormal median)"
                                                   if radii is not None else "characteristic grain radius of the first population"}),
            "observation": ("observation", np.arange(spectra.radiance.shape[0])),
            "line_of_sight": ("line_of_sight", np.arange(spectra.radiance.shape[1])),
        },
        attrs={"title": "dustrt upper limits on grain density", "dustrt_version": dustrt.__version__,
               "confidence": conf, "method": method, "method_description": METHOD_LABELS[method],
               "detection_sigma": detect_sigma, "observation_file": str(observation_path),
               "scenario": scenario.text, "ignored_nan_bins": spectra.n_nan,
               "ignored_masked_bins": spectra.n_file_masked,
               "note": "model predictions for science planning; not a safety specification"},
    )
    return ds
