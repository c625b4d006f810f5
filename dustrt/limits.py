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

import dataclasses

import numpy as np

from dustrt.density import reference_density_cm3

from dustrt import statistics

METHOD_LABELS = {
    "feldman-cousins": "Feldman-Cousins unified interval (Feldman & Cousins 1998, Phys. Rev. D 57, 3873)",
    "bayesian-flat": "Bayesian upper limit with a flat prior on density >= 0 (not a frequentist interval)",
}


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


def joint_over_lines_of_sight(x, sigma):
    """Inverse-variance combination over the last axis, NaN-aware: (x, σ) arrays of shape (…,).

    Entries with NaN or non-positive σ are ignored; all-ignored rows give NaN.
    """
    x = np.asarray(x, dtype=float)
    s = np.asarray(sigma, dtype=float)
    ok = np.isfinite(x) & np.isfinite(s) & (s > 0)
    w = np.where(ok, 1.0 / np.where(ok, s, 1.0) ** 2, 0.0)
    wsum = w.sum(axis=-1)
    with np.errstate(invalid="ignore", divide="ignore"):
        jx = np.where(wsum > 0, (w * np.where(ok, x, 0.0)).sum(axis=-1) / np.where(wsum > 0, wsum, 1.0), np.nan)
        js = np.where(wsum > 0, 1.0 / np.sqrt(np.where(wsum > 0, wsum, 1.0)), np.nan)
    return jx, js


def density_limits(fits, normalisation_cm3, confidence, method):
    """Per-spectrum, per-observation (lines of sight combined) and joint limits for each fit.

    Returns a dict of arrays in cm⁻³: per spectrum (P, O, L), per observation (P, O), joint (P,).
    """
    keys = ("lower", "upper", "sig", "x", "sigma", "chi2",
            "o_lower", "o_upper", "o_sig", "o_x", "o_sigma",
            "j_lower", "j_upper", "j_sig", "j_x", "j_sigma")
    out = {k: [] for k in keys}
    for fit, n0 in zip(fits, normalisation_cm3):
        x, s = fit.dust_amplitude, fit.dust_sigma
        lo, hi = interval(x, s, confidence, method)
        ox, os_ = joint_over_lines_of_sight(x, s)
        olo, ohi = interval(ox, os_, confidence, method)
        jx, js = (float(v) for v in joint_over_lines_of_sight(np.ravel(x), np.ravel(s)))
        jlo, jhi = interval(np.array([jx]), np.array([js]), confidence, method)
        with np.errstate(invalid="ignore", divide="ignore"):
            chi2 = fit.chi2 / np.where(fit.dof > 0, fit.dof, np.nan)
        for k, v in (("lower", lo * n0), ("upper", hi * n0), ("sig", x / s), ("x", x * n0), ("sigma", s * n0),
                     ("chi2", chi2), ("o_lower", olo * n0), ("o_upper", ohi * n0), ("o_sig", ox / os_),
                     ("o_x", ox * n0), ("o_sigma", os_ * n0), ("j_lower", jlo[0] * n0), ("j_upper", jhi[0] * n0),
                     ("j_sig", jx / js if np.isfinite(js) else np.nan), ("j_x", jx * n0), ("j_sigma", js * n0)):
            out[k].append(v)
    return {k: np.array(v) for k, v in out.items()}


def is_size_key(key: str) -> bool:
    """Swept keys that change grain sizes: radius_um, or a population's size parameter
    (population.NAME.size.KEY; NAME may itself be 'size')."""
    parts = key.split(".")
    return key == "radius_um" or (len(parts) == 4 and parts[0] == "population" and parts[2] == "size")


def size_variants(scenario, command: str) -> tuple[list, list]:
    """The scenario at every point of its [sweep] grid of size keys (itself when there is none),
    and the swept values at each point (dicts, key -> value).

    Other swept keys are ignored with a warning.  A common radius_um with a joint fit of several
    populations is refused: it makes their templates (nearly) proportional.
    """
    from dustrt.sweep import grid_values, refuse_common_radius_in_joint_fit, scenario_at

    if scenario.sweep is None:
        return [scenario], [{}]
    axes = [(k, v) for k, v in scenario.sweep.axes if is_size_key(k)]
    other = [k for k, _ in scenario.sweep.axes if not is_size_key(k)]
    if other:
        from dustrt import warn

        warn(f"{scenario.source}: {command} sweeps only grain sizes (radius_um, population.NAME.size.*); swept "
             f"keys {', '.join(other)} are ignored (their scenario values are used)")
    if not axes:
        return [scenario], [{}]
    refuse_common_radius_in_joint_fit(scenario, axes)
    spec = {"raw": scenario.raw, "source": scenario.source, "base_dir": str(scenario.base_dir),
            "text": scenario.text, "axes": axes}
    n = int(np.prod([len(v) for _, v in axes]))
    values = [grid_values(axes, i) for i in range(n)]
    # size keys change only the populations: keep every other setting of the scenario given
    return [dataclasses.replace(scenario, populations=scenario_at(spec, v).populations) for v in values], values


def limits_file(observation_path, scenario, method=None, progress=False):
    """Limits from an observation file for each hypothesis (and each swept grain radius)."""
    import xarray as xr

    import dustrt
    from dustrt.separate import (build_templates, check_bands, check_hypotheses, fit_quality, read_observation,
                                 separate, warn_poor_fits)
    from dustrt.sweep import dimension_name

    method = method or scenario.limits.method
    conf = scenario.limits.confidence
    if method not in METHOD_LABELS:
        raise ValueError(f"unknown limit method {method!r}; known: {', '.join(METHOD_LABELS)}")
    check_hypotheses(scenario, "dustrt limit")
    spectra = read_observation(observation_path, scenario)
    check_bands(scenario, spectra.wavelength_nm, spectra.source)
    variants, swept = size_variants(scenario, "dustrt limit")
    results = []
    it = variants
    if progress and len(variants) > 1:
        from tqdm import tqdm

        it = tqdm(variants, desc="grain radii", unit="radius", leave=False)
    for sc in it:
        templates = build_templates(sc, spectra)
        fits = separate(sc, spectra, templates)
        n0 = [reference_density_cm3(p.density) for p in sc.populations]
        res = density_limits(fits, n0, conf, method)
        res["reliable"], res["median_chi2"] = (np.array(v) for v in zip(*(fit_quality(f) for f in fits)))
        results.append(res)
    stack = {k: np.stack([r[k] for r in results], axis=1) for k in results[0]}  # (P, S, ...)
    names = [p.name for p in scenario.populations]
    warn_poor_fits(spectra.source, [f"{names[i]} (radius {sc.populations[i].size.characteristic_radius_um:.3g} um)"
                                    for i in range(len(names)) for sc in variants],
                   stack["reliable"].ravel(), stack["median_chi2"].ravel(), "the limits",
                   joint=scenario.separation.joint_fit)
    detect_sigma = scenario.sweep.detection_sigma if scenario.sweep is not None else 5.0
    n0_all = [reference_density_cm3(p.density) for p in scenario.populations]
    # (P, S): the swept radius, or each population's own characteristic radius
    radius = np.array([[sc.populations[i].size.characteristic_radius_um for sc in variants]
                       for i in range(len(scenario.populations))])
    PS = ("population", "grain_radius")
    PSO = PS + ("observation",)
    PSOL = PSO + ("line_of_sight",)
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
            "fit_reliable": (PS, stack["reliable"].astype(np.int8), {"units": "1", "long_name": "0 where more than 10 % of spectra fail a chi-square test at p = 1e-3 (the model does not describe the data)"}),
            "observation_upper_limit_cm3": (PSO, stack["o_upper"], {"units": "cm-3", "long_name": "upper limit per observation (its lines of sight combined)"}),
            "observation_lower_limit_cm3": (PSO, np.nan_to_num(stack["o_lower"]), {"units": "cm-3", "long_name": "lower limit per observation (its lines of sight combined)"}),
            "observation_significance": (PSO, stack["o_sig"], {"units": "1", "long_name": "dust excess significance per observation in sigma"}),
            "observation_density_estimate_cm3": (PSO, stack["o_x"], {"units": "cm-3", "long_name": "unconstrained density estimate per observation"}),
            "observation_density_uncertainty_cm3": (PSO, stack["o_sigma"], {"units": "cm-3", "long_name": "1-sigma uncertainty per observation"}),
            "spectrum_upper_limit_cm3": (PSOL, stack["upper"], {"units": "cm-3", "long_name": "upper limit per spectrum (one observation, one line of sight)"}),
            "spectrum_lower_limit_cm3": (PSOL, np.nan_to_num(stack["lower"]), {"units": "cm-3", "long_name": "lower limit per spectrum"}),
            "spectrum_significance": (PSOL, stack["sig"], {"units": "1", "long_name": "dust excess significance per spectrum in sigma"}),
            "spectrum_density_estimate_cm3": (PSOL, stack["x"], {"units": "cm-3", "long_name": "unconstrained density estimate per spectrum"}),
            "spectrum_density_uncertainty_cm3": (PSOL, stack["sigma"], {"units": "cm-3", "long_name": "1-sigma uncertainty per spectrum"}),
            "spectrum_reduced_chi2": (PSOL, stack["chi2"], {"units": "1", "long_name": "reduced chi-square of the separation fit per spectrum"}),
        },
        coords={
            "population": ("population", names, {"long_name": "hypothesised grain population"}),
            "grain_radius": ("grain_radius", np.arange(len(variants)),
                             {"long_name": "grain-radius index (the scenario's own radii, or its [sweep] radius_um)"}),
            "hypothesis_density_cm3": ("population", np.array(n0_all),
                                       {"units": "cm-3", "long_name": "the hypothesis's density normalisation "
                                        "(what the limits are compared with)"}),
            **{dimension_name(key): ("grain_radius", np.array([v[key] for v in swept]),
                                     {"long_name": f"swept scenario key {key}", "sweep_key": key})
               for key in swept[0] if key != "radius_um"},
            "radius_um": (("population", "grain_radius"), radius,
                          {"units": "um", "long_name": "grain radius: monodisperse radius, lognormal median, or a "
                                                       "power law's lower bound"}),
            "observation": ("observation", np.arange(spectra.radiance.shape[0]),
                            {"long_name": "observation index in the input file"}),
            "line_of_sight": ("line_of_sight", np.arange(spectra.radiance.shape[1]),
                              {"long_name": "line-of-sight index in the input file"}),
        },
        attrs={"title": "dustrt upper limits on grain density", "dustrt_version": dustrt.__version__,
               "confidence": conf, "method": method, "method_description": METHOD_LABELS[method],
               "detection_sigma": detect_sigma, "observation_file": str(observation_path),
               "scenario": scenario.text, "ignored_nan_bins": spectra.n_nan,
               "ignored_masked_bins": spectra.n_file_masked,
               "joint_combination": "all spectra of the file (every observation and line of sight); for simulated "
                                    "noise realisations of one scene this is one exposure as long as all of them together",
               "note": "model predictions for science planning; not a safety specification"},
    )
    return ds
